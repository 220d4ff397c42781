#!/bin/sh
# quadwatch fit end to end: fit a heavy-tailed CSV with bad stretches,
# load the model in replay and check (fixed and warm), refusals.
cd "$(dirname "$0")" && exec timeout 240 /usr/bin/python3 e2e_fit.py
