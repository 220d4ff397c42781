#!/bin/sh
# Replay summary: delivered alarms per day, lag-1 autocorrelation of the
# scores and the persistence warning, against numpy on the scores file.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_replay_dependence.py
