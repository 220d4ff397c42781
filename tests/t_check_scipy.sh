#!/bin/sh
# t_check_scipy.sh: `quadwatch check` against SciPy, and its exit codes.
# Writes a config with groups of different p, alarms_per_day, rate, persist
# and correct; tests/check_scipy.py compares alpha and the chi-square limit
# with scipy.stats.chi2.isf and scipy.optimize.brentq (<= 1e-9 relative),
# and proves with --tamper that the comparison can fail.  Then: the demo
# and example configs pass; a bad key, a too-short half-life, a missing
# file and bad usage exit 2 with FILE:LINE: [section] key in the message.
BUILD=${BUILD:-build}
Q="$BUILD/quadwatch"
PY=/usr/bin/python3
cd "$(dirname "$0")/.." || exit 2
[ -x "$Q" ] || { echo "no $Q: build first"; exit 1; }
"$PY" -c 'import scipy.stats, scipy.optimize' 2>/dev/null ||
	{ echo "python3-scipy missing"; exit 77; }
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
fail() { echo "FAIL: $*"; exit 1; }

# p = 40 needs continuation lines (lines are at most 198 bytes).
chans40=$(awk 'BEGIN { for (i = 0; i < 40; i++)
	printf "%s%s", (i == 0 ? "" : (i % 8 == 0 ? ",\n  " : ", ")), "ch" i }')
cat >"$dir/qw.ini" <<EOF
[bus]
input = >tcp://127.0.0.1:15601

[group rig]
channels       = supply_t, return_t, flow, pump_amps
half_life      = 2000
alarms_per_day = 1
rate           = 10
persist        = 1/1

[group single]
channels       = vib_rms
half_life      = 30min
alarms_per_day = 0.25
rate           = 2.385

[group twelve]
channels       = a1, a2, a3, a4, a5, a6, a7, a8, a9, a10, a11, a12
half_life      = 5000
alarms_per_day = 3
rate           = 50
persist        = 3/5
correct        = no

[group wide]
channels       = $chans40
half_life      = 1h
alarms_per_day = 0.7
rate           = 1
persist        = 2/4

[group slow]
channels       = t1, t2, t3, t4, t5, t6, t7
half_life      = 500
alarms_per_day = 10
rate           = 0.1
persist        = 1/1
EOF
"$Q" check -c "$dir/qw.ini" >"$dir/out" 2>"$dir/err" ||
	fail "check exited $? on a valid config: $(cat "$dir/err")"
[ "$(grep -c '^group:' "$dir/out")" -eq 5 ] || fail "expected 5 groups"
grep -q '^  p: *40$' "$dir/out" || fail "group wide should have p = 40"
"$PY" tests/check_scipy.py <"$dir/out" || fail "disagrees with scipy"
"$PY" tests/check_scipy.py --tamper <"$dir/out" >/dev/null &&
	fail "the tampered comparison passed: the checker cannot fail"

for f in conf/demo.ini conf/example.ini; do
	"$Q" check -q -c "$f" || fail "check $f exited $?"
	"$Q" check -c "$f" | "$PY" tests/check_scipy.py >/dev/null ||
		fail "$f disagrees with scipy"
done

# expect_fail CODE PATTERN CHECK-ARGS...: exit code and stderr text.
expect_fail() {
	code=$1 pat=$2
	shift 2
	"$Q" check "$@" >/dev/null 2>"$dir/err"
	rc=$?
	[ "$rc" -eq "$code" ] || fail "check $* exited $rc, want $code"
	grep -q -- "$pat" "$dir/err" ||
		fail "check $*: stderr lacks '$pat': $(cat "$dir/err")"
}
printf '[group a]\nchannels = x, y\nrate = fast\n' >"$dir/bad.ini"
expect_fail 2 "$dir/bad.ini:3: \[group a\] rate: expected" -c "$dir/bad.ini"
printf '[group a]\nchannels = x\npersist = 1/1\npersist = 2/3\n' >"$dir/dup.ini"
expect_fail 2 "dup.ini:4: \[group a\] persist: expected each key once" \
	-c "$dir/dup.ini"
printf '[group a]\nchannels = %s\nhalf_life = 3\n' \
	"c1, c2, c3, c4, c5, c6, c7, c8, c9, c10, c11, c12" >"$dir/short.ini"
expect_fail 2 "short.ini:3: \[group a\] half_life: expected a longer" \
	-c "$dir/short.ini"
expect_fail 2 "cannot open" -c "$dir/missing.ini"
expect_fail 2 "usage: quadwatch check"
expect_fail 2 "usage: quadwatch check" -c "$dir/qw.ini" extra
expect_fail 2 "usage: quadwatch check" -x
"$Q" check -h | grep -q "usage: quadwatch check" || fail "check -h"
"$Q" check -q -c "$dir/qw.ini" >"$dir/q" || fail "check -q exited $?"
[ -s "$dir/q" ] && fail "check -q printed something"
echo "# check: 5 groups (p = 1..40) agree with scipy; error exits are 2"
exit 0
