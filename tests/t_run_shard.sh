#!/bin/sh
# End-to-end: one plant split across three daemons ([bus] groups, run -g),
# their alerts fanned in by `quadwatch relay`, CURVE on both sides.
cd "$(dirname "$0")" && exec timeout 90 /usr/bin/python3 e2e_shard.py
