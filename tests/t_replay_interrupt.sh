#!/bin/sh
# Replay interrupted by SIGINT/SIGTERM: a summary of what was played, 128 + signal.
cd "$(dirname "$0")" && exec timeout 180 /usr/bin/python3 e2e_replay_interrupt.py
