#!/bin/sh
# End-to-end for `quadwatch run` under a service manager: sd_notify(3)
# datagrams (READY, WATCHDOG, STATUS, RELOADING, STOPPING) to a socket the
# test binds, and journal-stream log prefixes (tests/e2e_notify.py); then
# `systemd-analyze verify` on conf/quadwatch.service where it exists.
cd "$(dirname "$0")" || exit 2
timeout 90 /usr/bin/python3 e2e_notify.py || exit $?
BUILD=${BUILD:-build}
if ! command -v systemd-analyze >/dev/null 2>&1; then
	echo "# systemd-analyze not found: conf/quadwatch.service not verified"
	exit 0
fi
qw=$(cd .. && pwd)/$BUILD/quadwatch
tmp=$(mktemp -d) || exit 1
trap 'rm -rf "$tmp"' EXIT
# The unit as shipped, with the binary where this build put it; --man=no:
# the pages named in Documentation= are not installed here.  verify prints
# nothing for a clean unit (a bad value is only a warning, exit 0), so any
# output is a failure.
sed "s#/usr/bin/quadwatch#$qw#g" ../conf/quadwatch.service >"$tmp/quadwatch.service"
out=$(systemd-analyze verify --man=no "$tmp/quadwatch.service" 2>&1)
rc=$?
if [ "$rc" -ne 0 ] || [ -n "$out" ]; then
	echo "FAIL: systemd-analyze verify conf/quadwatch.service (exit $rc): $out"
	exit 1
fi
grep -q '^Type=notify$' "$tmp/quadwatch.service" &&
	grep -q '^WatchdogSec=' "$tmp/quadwatch.service" || {
	echo "FAIL: the unit must be Type=notify with WatchdogSec="
	exit 1
}
# the checker can fail: a broken copy is reported
sed 's/^WatchdogSec=.*/WatchdogSec=soon/' "$tmp/quadwatch.service" >"$tmp/broken.service"
out=$(systemd-analyze verify --man=no "$tmp/broken.service" 2>&1)
case "$out" in
*WatchdogSec*|*"sec value"*) ;;
*) echo "FAIL: systemd-analyze accepted WatchdogSec=soon: $out"; exit 1 ;;
esac
echo "# systemd-analyze verify: conf/quadwatch.service clean ($(systemd-analyze --version | head -n 1))"
