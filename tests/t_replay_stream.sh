#!/bin/sh
# Replay from standard input, a pipe by path and a FIFO: the results of the file.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_replay_stream.py
