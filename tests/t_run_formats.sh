#!/bin/sh
# End-to-end 2 for `quadwatch run`: binary, text and JSON give the same alerts.
cd "$(dirname "$0")" && exec timeout 90 /usr/bin/python3 e2e_formats.py
