#!/bin/sh
# t_embed.sh: the embedding example (docs/examples/embed.c), linked against
# libquadwatch.a alone, as users copy it.  With the injected fault it must
# raise exactly one alarm, inside the fault's readings, name flow_m3h first
# (the fault is a flow sag with the motor current unchanged) and clear
# after the fault ends; the same readings without the fault ("nofault")
# must raise none, so the alarm is the fault's doing, not the seed's.
BUILD=${BUILD:-build}
E="$BUILD/examples/embed"
cd "$(dirname "$0")/.." || exit 2
[ -x "$E" ] || { echo "no $E: build first (make tests)"; exit 1; }
out=$(mktemp)
trap 'rm -f "$out"' EXIT
fail() { echo "FAIL: $*"; cat "$out"; exit 1; }
def() { sed -n "s/^#define $1 \([0-9]*\).*/\1/p" docs/examples/embed.c; }
from=$(def FAULT_FROM) to=$(def FAULT_TO) n=$(def READINGS)
[ -n "$from" ] && [ -n "$to" ] && [ -n "$n" ] || fail "no FAULT_FROM/TO"

"$E" >"$out" 2>&1 || fail "embed exited $?"
[ "$(grep -c 'alarm raised' "$out")" -eq 1 ] || fail "want exactly 1 raise"
at=$(sed -n 's/^reading \([0-9]*\) .*alarm raised.*/\1/p' "$out")
[ "$at" -ge "$from" ] && [ "$at" -lt "$to" ] ||
	fail "raised at reading $at, outside the fault [$from, $to)"
top=$(grep -A1 'alarm raised' "$out" | sed -n 's/^  1\. \([a-z_0-9]*\) .*/\1/p')
[ "$top" = flow_m3h ] || fail "top channel '$top', want flow_m3h"
[ "$(grep -c '^  [0-9]\. ' "$out")" -eq 4 ] || fail "want 4 ranked channels"
clr=$(sed -n 's/^reading \([0-9]*\) .*alarm cleared.*/\1/p' "$out")
[ -n "$clr" ] && [ "$clr" -ge "$to" ] || fail "no clear after reading $to"
grep -q "^$n readings, .* 1 alarms$" "$out" || fail "summary line"

"$E" nofault >"$out" 2>&1 || fail "embed nofault exited $?"
grep -q 'alarm raised' "$out" && fail "an alarm without the fault"
grep -q "^$n readings, $n learned, 0 over the limit, 0 alarms$" "$out" ||
	fail "nofault summary"
echo "# embed: raise at reading $at (fault from $from), top flow_m3h, clear at $clr"
exit 0
