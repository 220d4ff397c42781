/* sweep.c: the fused score + rank-one update sweep of ewcov.c (the maths
 * is in ewcov.c's top comment).  Per column j, from the running residual u:
 *   y_j = u_j / L_jj, the pivot scalars A_j = c g, B_j = c a_j y_j / g,
 *   then for every row i > j:  u_i -= y_j L_ij;  L'_ij = A_j L_ij + B_j u_i.
 *
 * Blocking.  Columns go in blocks of SWEEP_NB = 4.  A block's top triangle
 * (its own rows) is scalar work: column j's pivot needs u_j after every
 * earlier column, so the y's form a chain of three dependent operations
 * per column (u_j * 1/L_jj, y_j L_ij, the subtraction).  The triangle runs
 * that chain first, in registers, and only then the square roots and
 * divisions of the pivots, which nothing on the chain waits for.  Below
 * the triangle, each row i takes the block's four columns in order with
 * u_i held in a register: one load and one store of u per row and block
 * instead of per column.  The next block's triangle needs only its own
 * four rows, the first this block's rows finish, so out-of-order execution
 * starts the next chain while the rest of the rows stream (moving that
 * triangle ahead of the rows by hand measured slower at p >= 64).
 *
 * Same bits on every path.  Each element sees the same operations on the
 * same operands in the same order whatever the blocking, the vector width
 * or the clone: one column at a time, pairs (the earlier form) and blocks
 * of four give identical factors, solved vectors and scores.  ISO C mode
 * (-std=c11) keeps GCC from contracting a*b+c into FMA, and the vectors
 * are GCC's generic vector types, whose lanes are plain IEEE operations.
 *
 * Variants: portable x86-64 (SSE2, two lanes), x86-64-v3 (AVX2, four) and
 * x86-64-v4 (AVX-512, eight on long spans), one source built three times; the
 * loader picks one through an ifunc resolver (the CPU's ISA level), and
 * qw_sweep_variant hands a test any variant the CPU can run.  Off x86-64,
 * or built by another compiler than GCC, only the portable form exists. */
#include <math.h>
#include <stdint.h>
#include <string.h>

#include "internal.h"

/* The AVX2 and AVX-512 builds need GCC's target pragmas and ISA-level CPU
 * checks; other compilers (clang for the fuzz harnesses) build the
 * portable form alone, which gives the same bits. */
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__clang__)
#define SWEEP_CLONES 1
#else
#define SWEEP_CLONES 0
#endif

#define SWEEP_NB 4 /* columns per block: the body code is written for 4 */
#define SWEEP_WIDE_MIN 32 /* rows below which AVX-512 uses 4 lanes */
#define SWEEP_LINE 8      /* doubles in a 64-byte cache line */
#ifndef SWEEP_AHEAD
#define SWEEP_AHEAD 32    /* rows the prefetch runs ahead (four lines) */
#endif
#ifndef SWEEP_PF_MIN
#define SWEEP_PF_MIN 64   /* p from which the sweep prefetches: the two
			     factors then pass 32 kB, a first-level cache */
#endif

typedef double sweep_v2 __attribute__((vector_size(16)));
typedef double sweep_v4 __attribute__((vector_size(32)));
typedef double sweep_v8 __attribute__((vector_size(64)));

/* Running state of one sweep: b = 1/a_j, 1/sqrt(b), the score so far. */
struct sweep_state {
	double b, isb, q, c;
};

/* One block of four columns j..j+3: their source and destination columns
 * (indexed by row) and scalars. */
struct sweep_blk {
	const double *s0, *s1, *s2, *s3;
	double *d0, *d1, *d2, *d3;
	double y0, y1, y2, y3, A0, A1, A2, A3, B0, B1, B2, B3;
};

/* Column j's scalars once y_j is known: the pivot of the new factor and
 * its inverse, and A = c g, B = c a_j y_j / g for the column's rows. */
static inline __attribute__((always_inline)) void
sweep_pivot(struct sweep_state *st, double yj, double s0, double *d0,
	    double *id0, double *A, double *B)
{
	double b1 = st->b + yj * yj;          /* b_{j+1} */
	double sb1 = sqrt(b1), isb1 = 1.0 / sb1;

	*A = st->c * sb1 * st->isb;           /* c g */
	*B = st->c * yj * st->isb * isb1;     /* c a_j y_j / g */
	st->q += yj * yj;
	*d0 = *A * s0;
	/* 1/L'_jj from L'_jj itself, not carried as a product, so the
	 * inverse pivots are a function of the factor alone (a restored
	 * model scores bit for bit as the live one). */
	*id0 = 1.0 / *d0;
	st->b = b1;
	st->isb = isb1;
}

/* Columns j..p-1 one at a time (fewer than four: the end of a sweep). */
static inline __attribute__((always_inline)) void
sweep_tail(struct sweep_state *st, const double *restrict src,
	   const double *restrict isrc, double *restrict dst,
	   double *restrict idst, size_t p, double *restrict u,
	   double *restrict ys, size_t j)
{
	size_t i;

	for (; j < p; j++) {
		const double *s = src + qw_packed_col(p, j) - j;
		double *d = dst + qw_packed_col(p, j) - j;
		double yj = u[j] * isrc[j], A, B;

		ys[j] = yj;
		sweep_pivot(st, yj, s[j], &d[j], &idst[j], &A, &B);
		for (i = j + 1; i < p; i++) {
			double ui = u[i] - yj * s[i];

			d[i] = A * s[i] + B * ui;
			u[i] = ui;
		}
	}
}

/* The triangle of the block from column j (j + 4 <= p): first the chain of
 * y's through the residuals of rows j+1..j+3, kept in registers (each y
 * needs only the one before it), then the pivots (square roots and
 * divisions, off that chain), then the triangle's other elements. */
static inline __attribute__((always_inline)) void
sweep_tri4(struct sweep_state *st, struct sweep_blk *k,
	   const double *restrict src, const double *restrict isrc,
	   double *restrict dst, double *restrict idst, size_t p,
	   double *restrict u, double *restrict ys, size_t j)
{
	size_t h = p - j, o = qw_packed_col(p, j) - j;
	double e01, e02, e03, e12, e13, e23;

	k->s0 = src + o;
	k->s1 = k->s0 + h - 1;
	k->s2 = k->s1 + h - 2;
	k->s3 = k->s2 + h - 3;
	k->d0 = dst + o;
	k->d1 = k->d0 + h - 1;
	k->d2 = k->d1 + h - 2;
	k->d3 = k->d2 + h - 3;
	k->y0 = u[j] * isrc[j];
	e01 = u[j + 1] - k->y0 * k->s0[j + 1];
	e02 = u[j + 2] - k->y0 * k->s0[j + 2];
	e03 = u[j + 3] - k->y0 * k->s0[j + 3];
	k->y1 = e01 * isrc[j + 1];
	e12 = e02 - k->y1 * k->s1[j + 2];
	e13 = e03 - k->y1 * k->s1[j + 3];
	k->y2 = e12 * isrc[j + 2];
	e23 = e13 - k->y2 * k->s2[j + 3];
	k->y3 = e23 * isrc[j + 3];
	sweep_pivot(st, k->y0, k->s0[j], &k->d0[j], &idst[j], &k->A0, &k->B0);
	sweep_pivot(st, k->y1, k->s1[j + 1], &k->d1[j + 1], &idst[j + 1],
		    &k->A1, &k->B1);
	sweep_pivot(st, k->y2, k->s2[j + 2], &k->d2[j + 2], &idst[j + 2],
		    &k->A2, &k->B2);
	sweep_pivot(st, k->y3, k->s3[j + 3], &k->d3[j + 3], &idst[j + 3],
		    &k->A3, &k->B3);
	k->d0[j + 1] = k->A0 * k->s0[j + 1] + k->B0 * e01;
	k->d0[j + 2] = k->A0 * k->s0[j + 2] + k->B0 * e02;
	k->d0[j + 3] = k->A0 * k->s0[j + 3] + k->B0 * e03;
	k->d1[j + 2] = k->A1 * k->s1[j + 2] + k->B1 * e12;
	k->d1[j + 3] = k->A1 * k->s1[j + 3] + k->B1 * e13;
	k->d2[j + 3] = k->A2 * k->s2[j + 3] + k->B2 * e23;
	u[j + 1] = e01;
	u[j + 2] = e12;
	u[j + 3] = e23;
	ys[j] = k->y0;
	ys[j + 1] = k->y1;
	ys[j + 2] = k->y2;
	ys[j + 3] = k->y3;
}

/* Column n of block bk on rows [i, i + lanes of V): u_ in a register. */
#define SWEEP_COL(V, bk, i, n)                                               \
	do {                                                                 \
		memcpy(&s_, (bk)->s##n + (i), sizeof s_);                    \
		u_ = u_ - (bk)->y##n * s_;                                   \
		d_ = (bk)->A##n * s_ + (bk)->B##n * u_;                      \
		memcpy((bk)->d##n + (i), &d_, sizeof d_);                    \
	} while (0)

/* Rows [i, i + lanes of V) below block bk's triangle: its four columns in
 * order, u_i in a register.  V is a vector type or double. */
#define SWEEP_ROWS(V, bk, i)                                                 \
	do {                                                                 \
		V u_, s_, d_;                                                \
		memcpy(&u_, u + (i), sizeof u_);                             \
		SWEEP_COL(V, bk, i, 0);                                      \
		SWEEP_COL(V, bk, i, 1);                                      \
		SWEEP_COL(V, bk, i, 2);                                      \
		SWEEP_COL(V, bk, i, 3);                                      \
		memcpy(u + (i), &u_, sizeof u_);                             \
	} while (0)

/* Software prefetch, SWEEP_AHEAD rows ahead, of the block's eight
 * columns (four read, four written).  Eight interleaved streams that
 * start afresh every block are more than the hardware prefetchers follow:
 * once the two factors outgrow the first-level cache (p above ~70) the
 * sweep waited on the second level.  Below that the prefetches are only
 * extra work (p = 16-48 ran 5-8% faster without them), so they start at
 * p = SWEEP_PF_MIN, where the factors pass the smaller first-level caches
 * of current x86-64 parts (32 kB; on the 48 kB machine measured, leaving
 * them out cost 28% at p = 80).  Near a column's end the prefetch runs
 * into the next column, which a later block reads; the address is formed
 * as an integer (a prefetch never faults, and no pointer leaves its
 * array). */
#define SWEEP_PF(q, w)                                                       \
	__builtin_prefetch((const void *)((uintptr_t)(q) +                   \
					  SWEEP_AHEAD * sizeof(double)), w, 3)
#define SWEEP_PREFETCH(bk, i)                                                \
	do {                                                                 \
		SWEEP_PF((bk)->s0 + (i), 0);                                 \
		SWEEP_PF((bk)->s1 + (i), 0);                                 \
		SWEEP_PF((bk)->s2 + (i), 0);                                 \
		SWEEP_PF((bk)->s3 + (i), 0);                                 \
		SWEEP_PF((bk)->d0 + (i), 1);                                 \
		SWEEP_PF((bk)->d1 + (i), 1);                                 \
		SWEEP_PF((bk)->d2 + (i), 1);                                 \
		SWEEP_PF((bk)->d3 + (i), 1);                                 \
	} while (0)

/* A cache line's worth of rows from i in vectors of type V. */
#define SWEEP_LINE_ROWS(V, bk, i)                                            \
	do {                                                                 \
		size_t l_;                                                   \
		for (l_ = 0; l_ < SWEEP_LINE; l_ += sizeof(V) / sizeof(double)) \
			SWEEP_ROWS(V, bk, (i) + l_);                         \
	} while (0)

/* Rows [i, e) of block bk: a cache line's worth of rows per pass, with the
 * prefetch, then the rest in narrower vectors down to single rows; VW is
 * the widest type of the variant.  Eight-lane vectors only on spans of
 * SWEEP_WIDE_MIN rows or more: on shorter ones four-lane ones measured as
 * fast or faster (fewer tails, fewer accesses split across cache lines). */
#define SWEEP_SPAN(VW, bk, i, e, pf)                                         \
	do {                                                                 \
		size_t r_ = (i);                                             \
		if (sizeof(VW) <= sizeof(sweep_v4) ||                        \
		    r_ + SWEEP_WIDE_MIN <= (e)) {                            \
			for (; r_ + SWEEP_LINE <= (e); r_ += SWEEP_LINE) {   \
				if (pf)                                      \
					SWEEP_PREFETCH(bk, r_);              \
				SWEEP_LINE_ROWS(VW, bk, r_);                 \
			}                                                    \
		} else {                                                     \
			for (; r_ + SWEEP_LINE <= (e); r_ += SWEEP_LINE) {   \
				if (pf)                                      \
					SWEEP_PREFETCH(bk, r_);              \
				SWEEP_LINE_ROWS(sweep_v4, bk, r_);           \
			}                                                    \
		}                                                            \
		if (sizeof(VW) > sizeof(sweep_v2))                           \
			for (; r_ + 4 <= (e); r_ += 4)                       \
				SWEEP_ROWS(sweep_v4, bk, r_);                \
		for (; r_ + 2 <= (e); r_ += 2)                               \
			SWEEP_ROWS(sweep_v2, bk, r_);                        \
		if (r_ < (e))                                                \
			SWEEP_ROWS(double, bk, r_);                          \
	} while (0)

/* The sweep for one variant (VW its widest vector type): see qw_sweep_fn
 * in internal.h for the contract.  Per block: its triangle, then its rows
 * below; the columns left over (fewer than four) one at a time. */
#define SWEEP_DEFINE(NAME, VW)                                               \
	static double NAME(const double *restrict src,                      \
			   const double *restrict isrc, double *restrict dst, \
			   double *restrict idst, size_t p,                   \
			   double *restrict u, double *restrict ys, double a, \
			   double c, size_t j0)                               \
	{                                                                    \
		struct sweep_state st = {1.0 / a, sqrt(a), 0.0, c};          \
		struct sweep_blk blk;                                        \
		size_t j = j0;                                               \
		const int pf = p >= SWEEP_PF_MIN;                            \
                                                                             \
		for (; j + SWEEP_NB <= p; j += SWEEP_NB) {                   \
			sweep_tri4(&st, &blk, src, isrc, dst, idst, p, u, ys, \
				   j);                                       \
			SWEEP_SPAN(VW, &blk, j + SWEEP_NB, p, pf);           \
		}                                                            \
		sweep_tail(&st, src, isrc, dst, idst, p, u, ys, j);          \
		return st.q;                                                 \
	}

#if SWEEP_CLONES
#pragma GCC push_options
#pragma GCC target("arch=x86-64-v4,prefer-vector-width=512")
SWEEP_DEFINE(sweep_v4_avx512, sweep_v8)
#pragma GCC pop_options
#pragma GCC push_options
#pragma GCC target("arch=x86-64-v3")
SWEEP_DEFINE(sweep_v3_avx2, sweep_v4)
#pragma GCC pop_options
#endif
SWEEP_DEFINE(sweep_portable, sweep_v2)

qw_sweep_fn qw_sweep_variant(enum qw_sweep_kind kind)
{
	switch (kind) {
	case QW_SWEEP_PORTABLE:
		return sweep_portable;
#if SWEEP_CLONES
	case QW_SWEEP_AVX2:
		__builtin_cpu_init();
		return __builtin_cpu_supports("x86-64-v3") ? sweep_v3_avx2
							    : NULL;
	case QW_SWEEP_AVX512:
		__builtin_cpu_init();
		return __builtin_cpu_supports("x86-64-v4") ? sweep_v4_avx512
							    : NULL;
#endif
	default:
		return NULL;
	}
}

#if SWEEP_CLONES && defined(__ELF__)
/* Runs once, when the loader resolves qw_sweep (before any sanitizer is
 * set up, hence not instrumented): the widest variant the CPU runs. */
__attribute__((no_sanitize_address, no_sanitize("undefined")))
static qw_sweep_fn sweep_resolve(void)
{
	__builtin_cpu_init();
	if (__builtin_cpu_supports("x86-64-v4"))
		return sweep_v4_avx512;
	if (__builtin_cpu_supports("x86-64-v3"))
		return sweep_v3_avx2;
	return sweep_portable;
}

double qw_sweep(const double *restrict src, const double *restrict isrc,
		double *restrict dst, double *restrict idst, size_t p,
		double *restrict u, double *restrict ys, double a, double c,
		size_t j0) __attribute__((ifunc("sweep_resolve")));
#else
double qw_sweep(const double *restrict src, const double *restrict isrc,
		double *restrict dst, double *restrict idst, size_t p,
		double *restrict u, double *restrict ys, double a, double c,
		size_t j0)
{
	return sweep_portable(src, isrc, dst, idst, p, u, ys, a, c, j0);
}
#endif
