#!/bin/sh
# Daemon: 1200 groups behind one daemon, each topic reaches its own group.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_groups.py
