# quadwatch fit's maths vs scipy (Debian python3-scipy): the generalised
# Pareto tail fit against scipy.stats.genpareto.fit (floc=0), the Phase I
# (beta) and Phase II (F) Hotelling limits against scipy.stats.beta/f, and
# the limit of a fixed model fitted from n readings against the F form.
# Each comparison is also run tampered and must then fail.
set -e
H="$BUILD/tests/helper_fit"
R="/usr/bin/python3 tests/ref_fit.py"
for a in "0.2 1.7 2000 7" "-0.3 2.385 1000 3" "0 1 1000 3" "0.45 0.8 500 11"; do
	$H gpd $a | $R gpd
	if $H gpd $a | $R gpd --tamper >/dev/null; then
		echo "tampered GPD fit was not caught"; exit 1
	fi
done
$H hotelling | $R hotelling
if $H hotelling | $R hotelling --tamper >/dev/null; then
	echo "tampered Hotelling limits were not caught"; exit 1
fi
for a in "2 50 1" "4 213 2" "10 1000 3"; do
	$H phase2 $a | $R phase2
	if $H phase2 $a | $R phase2 --tamper >/dev/null; then
		echo "tampered fixed-model limit was not caught"; exit 1
	fi
done
