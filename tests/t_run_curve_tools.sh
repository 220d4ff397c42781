# sim and record on a CURVE bus: issue 5, security.
exec /usr/bin/python3 tests/e2e_curve_tools.py
