#!/bin/sh
# t_fuzz_smoke.sh: every libFuzzer harness (tests/fuzz/fuzz_*.c) still
# builds against today's sources and runs 2 s from its seeds without a
# finding: tools/fuzz in a scratch directory.  A harness that no longer
# links (its sources having moved on) or a crash the seeds reach fails
# here, in make check, not only in a long `make fuzz`.  Under check-asan
# it is skipped (the harnesses carry their own sanitizers; make check runs
# it).
cd "$(dirname "$0")/.." || exit 2
if [ -n "${QW_SANITIZED:-}" ]; then
	echo "run by make check (the harnesses are sanitized builds already)"
	exit 77
fi
command -v clang >/dev/null || { echo "clang missing (tools/install-deps)"; exit 77; }
dir=$(mktemp -d)
trap 'rm -rf "$dir"' EXIT
FUZZ_SECONDS=2 FUZZ_OUT="$dir" tools/fuzz >"$dir.log" 2>&1
rc=$?
if [ "$rc" -ne 0 ]; then
	cat "$dir.log"
	rm -f "$dir.log"
	echo "FAIL: tools/fuzz exited $rc"
	exit 1
fi
n=$(grep -c '^ok   fuzz_' "$dir.log")
total=$(ls tests/fuzz/fuzz_*.c | wc -l)
rm -f "$dir.log"
[ "$n" -eq "$total" ] || { echo "FAIL: $n of $total harnesses ran"; exit 1; }
echo "# fuzz: all $n harnesses build and run 2 s from their seeds without a finding"
