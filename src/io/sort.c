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

double qw_select_double(double *v, size_t n, size_t k)
{
	size_t lo = 0, hi = n - 1;

	while (hi > lo) {
		size_t mid = lo + (hi - lo) / 2, i = lo, j = hi;
		double pivot;

		/* median of three into v[mid] */
		if (v[mid] < v[lo])
			sort_swap(v, mid, lo);
		if (v[hi] < v[lo])
			sort_swap(v, hi, lo);
		if (v[hi] < v[mid])
			sort_swap(v, hi, mid);
		pivot = v[mid];
		/* Hoare partition: v[lo..j] <= pivot <= v[i..hi] */
		while (i <= j) {
			while (v[i] < pivot)
				i++;
			while (pivot < v[j])
				j--;
			if (i <= j) {
				sort_swap(v, i, j);
				i++;
				if (j == 0)
					break;
				j--;
			}
		}
		if (k <= j)
			hi = j;
		else if (k >= i)
			lo = i;
		else
			return v[k]; /* between the parts: equal to the pivot */
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
