/* sort.h: sorting many doubles fast, for the replay summary's quantiles
 * and Kolmogorov-Smirnov distance (10^6 to 10^8 scores and p-values). */
#ifndef QW_SORT_H
#define QW_SORT_H

#include <stddef.h>

/* Sorts v[0..n) ascending (no NaN in v: their place is unspecified),
 * with tmp[0..n) as scratch.  Equal values come out as the same doubles
 * (a -0 sorts before a +0), so the result is the one any correct sort
 * gives.  Never fails. */
void qw_sort_double(double *v, double *tmp, size_t n);

#endif
