#!/bin/sh
# Replay -j2 of two groups interrupted by SIGINT: both stop at the same row (the serial run's prefix).
cd "$(dirname "$0")" && exec timeout 180 /usr/bin/python3 e2e_replay_interrupt_jobs.py
