#!/bin/sh
# Replay summary: tuning quantiles and the KS distance against numpy and
# scipy on the scores file, exact or within the stated resolution; memory
# flat in the length of the recording.
cd "$(dirname "$0")" && exec timeout 180 /usr/bin/python3 e2e_replay_tuning.py
