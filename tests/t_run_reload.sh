#!/bin/sh
# End-to-end 4 for `quadwatch run`: SIGHUP and ctl reload.
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_reload.py
