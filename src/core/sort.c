/* sort.c: least-significant-digit radix sort of doubles (see sort.h).
 *
 * Each double's bits become an unsigned key that orders as the number
 * does (Herf 2001, "Radix tricks": flip all bits of a negative, only the
 * sign bit of a positive), then SORT_PASSES stable counting passes of
 * SORT_BITS bits each, low digit first (Knuth, TAOCP vol. 3, 5.2.5).  A
 * pass whose digit is the same for every key is skipped (p-values and
 * scores share their exponent's top bits).
 *
 * Workload: O(n) with 6 passes over 16 n bytes; a comparison sort
 * (gsl_sort's heapsort) spent ~300 ns a value at 10^6 values, this some
 * 20 ns.  Memory: the caller's scratch array, and the 6 x 2048 counts
 * (96 kB) on the stack.  The keys are kept in the two arrays themselves
 * (a double and a uint64_t have the same size), read and written with
 * memcpy so the aliasing rules hold. */
#include "sort.h"

#include <math.h>
#include <stdint.h>
#include <string.h>

#define SORT_BITS 11u                       /* bits per digit */
#define SORT_RADIX (1u << SORT_BITS)        /* counts per pass */
#define SORT_PASSES 6u                      /* ceil(64 / SORT_BITS) */
#define SORT_SIGN (UINT64_C(1) << 63)
#define SORT_SMALL 16u                      /* insertion-sorted ranges */

static uint64_t sort_key(double d)
{
	uint64_t u;

	memcpy(&u, &d, sizeof u);
	return (u & SORT_SIGN) ? ~u : u | SORT_SIGN;
}

static double sort_unkey(uint64_t k)
{
	uint64_t u = (k & SORT_SIGN) ? k & ~SORT_SIGN : ~k;
	double d;

	memcpy(&d, &u, sizeof d);
	return d;
}

static uint64_t sort_get(const double *p, size_t i)
{
	uint64_t k;

	memcpy(&k, p + i, sizeof k);
	return k;
}

static void sort_put(double *p, size_t i, uint64_t k)
{
	memcpy(p + i, &k, sizeof k);
}

void qw_sort_double(double *v, double *tmp, size_t n)
{
	size_t count[SORT_PASSES][SORT_RADIX];
	double *a = v, *b = tmp, *t;
	unsigned pass;
	size_t i;

	if (n < 2)
		return;
	memset(count, 0, sizeof count);
	for (i = 0; i < n; i++) {
		uint64_t k = sort_key(v[i]);

		sort_put(v, i, k);
		for (pass = 0; pass < SORT_PASSES; pass++)
			count[pass][(k >> (pass * SORT_BITS)) &
				    (SORT_RADIX - 1)]++;
	}
	for (pass = 0; pass < SORT_PASSES; pass++) {
		size_t *c = count[pass], sum = 0, d;
		unsigned shift = pass * SORT_BITS;

		if (c[(sort_get(a, 0) >> shift) & (SORT_RADIX - 1)] == n)
			continue; /* one digit for all: already in order */
		for (d = 0; d < SORT_RADIX; d++) {
			size_t here = c[d];

			c[d] = sum;
			sum += here;
		}
		for (i = 0; i < n; i++) {
			uint64_t k = sort_get(a, i);

			sort_put(b, c[(k >> shift) & (SORT_RADIX - 1)]++, k);
		}
		t = a;
		a = b;
		b = t;
	}
	for (i = 0; i < n; i++)
		v[i] = sort_unkey(sort_get(a, i));
}

static void sort_swap(double *v, size_t i, size_t j)
{
	double t = v[i];

	v[i] = v[j];
	v[j] = t;
}

/* Hoare partition of v[lo..hi] (hi > lo) around the median of v[lo],
 * v[mid], v[hi]: returns j, lo <= j < hi, with v[lo..j] <= v[j+1..hi].
 * The median of three leaves a value <= the pivot at lo and >= it at hi,
 * so neither scan runs off the range, and the first scan from lo stops at
 * mid at the latest, so j < hi and both sides shrink. */
static size_t sort_partition(double *v, size_t lo, size_t hi)
{
	size_t mid = lo + (hi - lo) / 2, i = lo, j = hi;
	double p;

	if (v[mid] < v[lo])
		sort_swap(v, lo, mid);
	if (v[hi] < v[lo])
		sort_swap(v, lo, hi);
	if (v[hi] < v[mid])
		sort_swap(v, mid, hi);
	p = v[mid];
	for (;;) {
		while (v[i] < p)
			i++;
		while (p < v[j])
			j--;
		if (i >= j)
			return j;
		sort_swap(v, i++, j--);
	}
}

/* Ascending heap sort of v[0..n): O(n log n) on any input, no recursion;
 * the fallback of the introsort below. */
static void sort_heap(double *v, size_t n)
{
	size_t start = n / 2, end = n, root, child;

	while (end > 1) {
		if (start > 0) {
			start--;
		} else {
			end--;
			sort_swap(v, 0, end);
		}
		root = start;
		while ((child = 2 * root + 1) < end) {
			if (child + 1 < end && v[child] < v[child + 1])
				child++;
			if (!(v[root] < v[child]))
				break;
			sort_swap(v, root, child);
			root = child;
		}
	}
}

/* 2 floor(log2 n): partitions allowed before a range falls back to the
 * heap sort (introsort; Musser 1997), so no input is quadratic. */
static unsigned sort_depth(size_t n)
{
	unsigned d = 0;

	while (n > 1) {
		n >>= 1;
		d += 2;
	}
	return d;
}

/* Introsort of v[lo..hi]: partitions down to SORT_SMALL elements, then
 * insertion sort; the smaller side by recursion (depth <= log2 n). */
static void sort_intro(double *v, size_t lo, size_t hi, unsigned depth)
{
	size_t i, j;
	double x;

	while (hi - lo >= SORT_SMALL) {
		if (depth-- == 0) {
			sort_heap(v + lo, hi - lo + 1);
			return;
		}
		j = sort_partition(v, lo, hi);
		if (j - lo < hi - j) {
			sort_intro(v, lo, j, depth);
			lo = j + 1;
		} else {
			sort_intro(v, j + 1, hi, depth);
			hi = j;
		}
	}
	for (i = lo + 1; i <= hi; i++) {
		x = v[i];
		for (j = i; j > lo && x < v[j - 1]; j--)
			v[j] = v[j - 1];
		v[j] = x;
	}
}

void qw_sort_double_inplace(double *v, size_t n)
{
	if (n > 1)
		sort_intro(v, 0, n - 1, sort_depth(n));
}

double qw_select_double(double *v, size_t n, size_t k)
{
	size_t lo = 0, hi = n - 1, j;
	unsigned depth = sort_depth(n);

	while (hi > lo) {
		if (depth-- == 0) {
			sort_heap(v + lo, hi - lo + 1);
			break;
		}
		j = sort_partition(v, lo, hi);
		if (k <= j)
			hi = j;
		else
			lo = j + 1;
	}
	return v[k];
}

double qw_quantile_select(double *v, size_t n, double prob)
{
	/* gsl_stats_quantile_from_sorted_data: index = prob (n - 1),
	 * lhs = floor(index), delta = index - lhs; the result is v[lhs] at
	 * lhs = n - 1, else (1 - delta) v[lhs] + delta v[lhs + 1] */
	double index, delta, a, b;
	size_t lhs, i;

	if (n == 0)
		return NAN;
	index = prob * (double)(n - 1);
	lhs = (size_t)index;
	delta = index - (double)lhs;
	a = qw_select_double(v, n, lhs);
	if (lhs == n - 1)
		return a;
	b = v[lhs + 1];
	for (i = lhs + 2; i < n; i++)
		if (v[i] < b)
			b = v[i];
	return (1 - delta) * a + delta * b;
}
