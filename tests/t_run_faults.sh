#!/bin/sh
# End-to-end: broken reload, unwritable/read-only/full state dir.
cd "$(dirname "$0")" && exec timeout 90 /usr/bin/python3 e2e_faults.py
