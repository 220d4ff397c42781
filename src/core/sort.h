/* sort.h: sorting many doubles fast, for the replay summary's quantiles
 * and Kolmogorov-Smirnov distance (10^6 to 10^8 scores and p-values), and
 * the selection behind a fit's concentration steps (fit.c).  Pure
 * computation with the caller's memory: part of the core. */
#ifndef QW_SORT_H
#define QW_SORT_H

#include <stddef.h>

/* Sorts v[0..n) ascending (no NaN in v: their place is unspecified),
 * with tmp[0..n) as scratch.  Equal values come out as the same doubles
 * (a -0 sorts before a +0), so the result is the one any correct sort
 * gives.  Never fails. */
void qw_sort_double(double *v, double *tmp, size_t n);

/* Sorts v[0..n) ascending in place with no scratch (no NaN in v):
 * introsort (median-of-three quicksort, insertion sort below 16, heap
 * sort past 2 log2 n partitions), O(n log n) on any input.  For arrays
 * with no scratch beside them; the radix sort above is faster. */
void qw_sort_double_inplace(double *v, size_t n);

/* The value of rank k (0-based) of v[0..n) (k < n; no NaN in v), v
 * reordered so that v[0..k) <= v[k] <= v[k+1..n): Hoare's FIND with a
 * median-of-three pivot, O(n) expected (a heap sort of what is left after
 * 2 log2 n partitions).  The value is the one a sort puts at k (of equal
 * values, the same double, -0 and +0 aside). */
double qw_select_double(double *v, size_t n, size_t k);
/* The prob quantile of v[0..n) as gsl_stats_quantile_from_sorted_data
 * takes it from sorted data (linear between ranks floor((n-1) prob) and
 * the next), found by selection instead of a sort; v is reordered.
 * NaN when n = 0. */
double qw_quantile_select(double *v, size_t n, double prob);

#endif
