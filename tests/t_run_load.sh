#!/bin/sh
# End-to-end: fast publisher, publisher restart, slow alert subscribers.
cd "$(dirname "$0")" && exec timeout 120 /usr/bin/python3 e2e_load.py
