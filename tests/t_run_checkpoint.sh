#!/bin/sh
# End-to-end: checkpoints across kill -9, refusals, final save on stop.
cd "$(dirname "$0")" && exec timeout 90 /usr/bin/python3 e2e_checkpoint.py
