#!/bin/sh
# Replay -j: two threads give the serial run's scores, summary and report.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_replay_parallel.py
