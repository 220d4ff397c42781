#!/bin/sh
# Replay 2: --labels metrics equal an independent computation.
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_replay_labels.py
