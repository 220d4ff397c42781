#!/bin/sh
# Replay 3: CSV edge cases end to end (BOM, CRLF, quotes, ISO 8601, bad row).
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_replay_csv.py
