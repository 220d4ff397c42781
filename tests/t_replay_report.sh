#!/bin/sh
# Replay 5: the HTML report is valid XML with one SVG per plot section.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_replay_report.py
