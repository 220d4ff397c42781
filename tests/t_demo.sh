#!/bin/sh
# `make demo` end to end (tools/demo with $BUILD): completes in under 60 s,
# prints a raise alert whose first channel is the channel a fault was
# injected on in that group, writes demo-report.html where QW_DEMO_OUT
# says, and leaves no process behind, also when interrupted.  First the
# simulator's own contract: same seed, byte-identical CSV; bad input, exit 2.
cd "$(dirname "$0")/.." || exit 1
BUILD=${BUILD:-build}
QW="$BUILD/quadwatch"
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
fail() { echo "FAIL: $*"; exit 1; }

# --- sim: reproducible, and each error a usage error with a message -----
"$QW" sim -c conf/demo.ini --count 2385 -o "$tmp/a.csv" || fail "sim -o"
"$QW" sim -c conf/demo.ini --count 2385 -o "$tmp/b.csv" || fail "sim -o"
"$QW" sim -c conf/demo.ini --count 2385 --seed 7 -o "$tmp/c.csv" || fail "seed"
cmp -s "$tmp/a.csv" "$tmp/b.csv" || fail "same seed, different CSV"
cmp -s "$tmp/a.csv" "$tmp/c.csv" && fail "another seed, same CSV"
[ "$(wc -l <"$tmp/a.csv")" -eq 2386 ] || fail "CSV rows"
head -n 1 "$tmp/a.csv" | grep -qx 'time,chw_supply_t,chw_return_t,chw_flow,comp_amps,cond_t,pump_speed,pump_flow,pump_dp,motor_amps,bearing_t,label,label_chiller,label_pump_skid' ||
	fail "CSV header: $(head -n 1 "$tmp/a.csv")"
sed -n 2p "$tmp/a.csv" | grep -q '^1767592800\.000,' || fail "start time"
printf 'at=10 kind=dropout group=chiller channel=cond_t duration=1\n' \
	>"$tmp/f.txt"
"$QW" sim -c conf/demo.ini --count 200 --scenario none --faults "$tmp/f.txt" \
	-o "$tmp/d.csv" || fail "--faults"
[ "$(awk -F, '$6 == "" && $13 == 1' "$tmp/d.csv" | wc -l)" -eq 10 ] ||
	fail "dropout of 10 readings with label_chiller"
expect2() { # args: what, then the command; exit 2 and a message
	what=$1; shift
	"$@" >"$tmp/out" 2>&1
	rc=$?
	[ $rc -eq 2 ] || fail "$what: exit $rc, not 2"
	[ -s "$tmp/out" ] || fail "$what: no message"
}
sed 's/^channels *= *pump_speed/channels = pump_speedo/' conf/demo.ini \
	>"$tmp/bad.ini"
expect2 "unknown channel" "$QW" sim -c "$tmp/bad.ini" -o "$tmp/x.csv"
grep -q "pump_speedo" "$tmp/out" || fail "message names the channel"
printf '# ok\nat=1 kind=step channel=cond_t duration=1 group=pump_skid\n' \
	>"$tmp/g.txt"
expect2 "fault on a group without the channel" \
	"$QW" sim -c conf/demo.ini --faults "$tmp/g.txt" -o "$tmp/x.csv"
grep -q "g.txt:2:" "$tmp/out" || fail "message names file and line"
expect2 "--to and -o" "$QW" sim -c conf/demo.ini --to tcp://127.0.0.1:1 \
	-o "$tmp/x.csv"
expect2 "bad rate" "$QW" sim -c conf/demo.ini --rate -3 -o "$tmp/x.csv"
expect2 "no config" "$QW" sim -o "$tmp/x.csv"
expect2 "missing faults file" "$QW" sim -c conf/demo.ini --faults \
	"$tmp/none" -o "$tmp/x.csv"

# --- the demo ------------------------------------------------------------
for p in 5601 5602 5603; do
	hex=$(printf '%04X' $p)
	if awk -v h=":$hex" '$4 == "0A" && substr($2, length($2) - 4) == h \
		{ f = 1 } END { exit !f }' /proc/net/tcp /proc/net/tcp6; then
		echo "port $p busy: demo not run"
		exit 77
	fi
done
alive() { # any of the pids in file $1 still running
	for p in $(cat "$1" 2>/dev/null); do
		kill -0 "$p" 2>/dev/null && return 0
	done
	return 1
}
start=$(date +%s)
BUILD=$BUILD QW_DEMO_OUT="$tmp/out-dir" QW_DEMO_PIDS="$tmp/pids" \
	timeout 90 tools/demo >"$tmp/demo.txt" 2>&1
rc=$?
secs=$(( $(date +%s) - start ))
cat "$tmp/demo.txt"
[ $rc -eq 0 ] || fail "tools/demo exit $rc"
[ $secs -lt 60 ] || fail "took $secs s"
[ -s "$tmp/out-dir/demo-report.html" ] || fail "no demo-report.html"
[ -s "$tmp/pids" ] || fail "no pid list"
alive "$tmp/pids" && fail "processes left: $(cat "$tmp/pids")"
grep -q 'not a safety instrumented system' "$tmp/demo.txt" || fail "banner"
# Raise alerts whose first channel is the channel of the fault active in
# that group at the time.
hits=$(awk '
	/ injected \(/ { split($6, gc, "/"); act[gc[1]] = gc[2]; next }
	/ over: / { for (g in act) if (act[g] == $5) delete act[g]; next }
	$2 == "ALERT" {
		g = $3; sub(/:$/, "", g)
		top = $0; sub(/.*top channels: /, "", top); sub(/,.*/, "", top)
		if ((g in act) && act[g] == top) n++
	}
	END { print n + 0 }' "$tmp/demo.txt")
echo "# demo: $secs s, $hits raise alert(s) led by the faulted channel"
[ "$hits" -ge 1 ] || fail "no raise alert led by a faulted channel"

# --- interrupted: everything stops ----------------------------------------
rm -f "$tmp/pids"
# A background job of a script starts with SIGINT ignored, and a shell
# cannot trap what it inherited ignored; restore the default first, as a
# terminal's Ctrl-C would find it.
BUILD=$BUILD QW_DEMO_OUT="$tmp/out-dir" QW_DEMO_PIDS="$tmp/pids" \
	/usr/bin/python3 -c 'import os, signal, sys
signal.signal(signal.SIGINT, signal.SIG_DFL)
os.execv("tools/demo", ["tools/demo"])' >"$tmp/int.txt" 2>&1 &
demo=$!
n=0
while [ ! -s "$tmp/pids" ] && [ $n -lt 100 ]; do sleep 0.1; n=$((n + 1)); done
[ -s "$tmp/pids" ] || fail "interrupted demo never started"
sleep 1
kill -INT $demo
n=0
while kill -0 $demo 2>/dev/null && [ $n -lt 100 ]; do sleep 0.1; n=$((n+1)); done
kill -0 $demo 2>/dev/null && fail "demo still running 10 s after SIGINT"
alive "$tmp/pids" && fail "processes left after SIGINT: $(cat "$tmp/pids")"
grep -q interrupted "$tmp/int.txt" || fail "no word of the interruption"
echo "# interrupted demo stopped everything"
exit 0
