# Scores vs an independent numpy implementation: issue 2, test 2.
set -e
for args in "3 20000 150 11" "16 20000 2000 12" "1 5000 50 13" \
	"5 20000 90 14 time" "6 20000 300 15 hold" "6 8000 120 16 time hold"; do
	# shellcheck disable=SC2086
	"$BUILD/tests/helper_core" scores $args | /usr/bin/python3 tests/ref_core.py scores
done
