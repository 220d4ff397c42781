#!/bin/sh
# End-to-end for `quadwatch relay` and `quadwatch tail`, and usage exits.
cd "$(dirname "$0")" && exec timeout 60 /usr/bin/python3 e2e_relay.py
