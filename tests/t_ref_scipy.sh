# Limits, alpha and p-values vs scipy (Debian python3-scipy): issue 2, test 3.
set -e
"$BUILD/tests/helper_core" limits | /usr/bin/python3 tests/ref_core.py limits
