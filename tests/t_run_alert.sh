#!/bin/sh
# End-to-end 1 for `quadwatch run`: binary stream, fault, raise then clear.
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_alert.py
