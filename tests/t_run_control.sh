#!/bin/sh
# End-to-end 5 for `quadwatch run`: control socket and quadwatch ctl.
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_control.py
