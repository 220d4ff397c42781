#!/bin/sh
# Replay 1: daemon and replay give identical alerts on the same stream.
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_replay_daemon.py
