#!/bin/sh
# Phase I / II of quadwatch fit on the iris setosa sample python3-scipy
# ships: scores against numpy's T-squared, the limit against scipy's F
# form; tampered, the comparison must fail.
cd "$(dirname "$0")" || exit 2
timeout 120 /usr/bin/python3 e2e_fit_iris.py || exit 1
if timeout 120 /usr/bin/python3 e2e_fit_iris.py --tamper >/dev/null 2>&1; then
	echo "tampered reference was not caught"; exit 1
fi
