#!/bin/sh
# End-to-end 6 for `quadwatch run`: 10^6 readings, RSS growth under 1 MiB.
cd "$(dirname "$0")" && exec timeout 180 /usr/bin/python3 e2e_memory.py
