# Whitening (dynamics = ar1, var1) vs an independent numpy implementation
# of the same recursions (tests/ref_dynamics.py): every score to 1e-9,
# with missing channels and gaps in time on a strongly autocorrelated
# VAR(1) stream.
set -e
for args in "3 20000 150 21" "8 12000 600 22" "1 5000 50 23"; do
	for kind in none ar1 var1; do
		# shellcheck disable=SC2086
		"$BUILD/tests/helper_core" dyn $args $kind |
			/usr/bin/python3 tests/ref_dynamics.py
	done
done
