#!/bin/sh
# End-to-end 3 for `quadwatch run`: every rejection class, counted, harmless.
cd "$(dirname "$0")" && exec timeout 90 /usr/bin/python3 e2e_badinput.py
