#!/bin/sh
# Replay 4: record then replay equals the live run.
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_replay_record.py
