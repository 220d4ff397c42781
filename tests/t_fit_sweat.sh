#!/bin/sh
# Phase I / II of quadwatch fit against a worked textbook example with
# printed statistics (Johnson & Wichern, Example 5.2, the sweat data):
# mean, S, S^-1, T-squared and the critical value; tampered, the
# comparison must fail.
cd "$(dirname "$0")" || exit 2
timeout 120 /usr/bin/python3 e2e_fit_sweat.py || exit 1
if timeout 120 /usr/bin/python3 e2e_fit_sweat.py --tamper >/dev/null 2>&1; then
	echo "tampered reference was not caught"; exit 1
fi
