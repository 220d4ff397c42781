/* test_sweep.c: every variant of the fused sweep (sweep.c) gives the same
 * bits.  Each variant the CPU runs (portable, AVX2, AVX-512, picked by
 * qw_sweep_variant) is compared bit for bit with the portable one, and the
 * portable one with a reference written here one column at a time (the
 * textbook order of ewcov.c's top comment: pivot, then the column's rows),
 * for every p from 1 to 257 (odd sizes and sizes around the vector widths
 * 2, 4, 8 and the block of 4 columns), several first columns j0, and on
 * factors that have been through many updates (so no element is a round
 * number).  Compared: the score, the solved vector, the residual, the new
 * factor and its inverse pivots; memcmp, not a tolerance. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <gsl/gsl_errno.h>

#include "internal.h"
#include "quadwatch.h"
#include "qwtest.h"

#define SWEEP_MAX_P 257
#define SWEEP_WARM 40 /* updates applied to each test factor first */

/* One column at a time, each element's operations in the order of
 * ewcov.c's top comment; the same arithmetic as sweep.c, unblocked. */
static double ref_sweep(const double *src, const double *isrc, double *dst,
			double *idst, size_t p, double *u, double *ys,
			double a, double c, size_t j0)
{
	double b = 1.0 / a, isb = sqrt(a), q = 0.0;
	size_t j, i;

	for (j = j0; j < p; j++) {
		const double *s = src + qw_packed_col(p, j) - j;
		double *d = dst + qw_packed_col(p, j) - j;
		double yj = u[j] * isrc[j], b1 = b + yj * yj;
		double sb1 = sqrt(b1), isb1 = 1.0 / sb1;
		double A = c * sb1 * isb, B = c * yj * isb * isb1;

		ys[j] = yj;
		q += yj * yj;
		d[j] = A * s[j];
		idst[j] = 1.0 / d[j];
		b = b1;
		isb = isb1;
		for (i = j + 1; i < p; i++) {
			u[i] -= yj * s[i];
			d[i] = A * s[i] + B * u[i];
		}
	}
	return q;
}

/* Buffers of one comparison: inputs, then one output set per variant. */
struct sw_case {
	size_t p;
	double *L, *iL, *r;
	double *dst, *idst, *u, *ys;
};

static void sw_alloc(struct sw_case *c, size_t p)
{
	size_t n = qw_packed_len(p);

	c->p = p;
	c->L = malloc(n * sizeof(double));
	c->iL = malloc(p * sizeof(double));
	c->r = malloc(p * sizeof(double));
	c->dst = malloc(n * sizeof(double));
	c->idst = malloc(p * sizeof(double));
	c->u = malloc(p * sizeof(double));
	c->ys = malloc(p * sizeof(double));
	assert_true(c->L && c->iL && c->r && c->dst && c->idst && c->u &&
		    c->ys);
}

static void sw_free(struct sw_case *c)
{
	free(c->L), free(c->iL), free(c->r);
	free(c->dst), free(c->idst), free(c->u), free(c->ys);
}

/* A factor of order p after SWEEP_WARM updates of a diagonal one by
 * correlated readings (through the reference), and a reading r. */
static void sw_factor(struct sw_case *c, gsl_rng *rng)
{
	size_t p = c->p, n = qw_packed_len(p), j, k;
	double *A = malloc(p * p * sizeof(double)), *z = malloc(p * 8);
	double *t = malloc(n * sizeof(double)), *it = malloc(p * 8);
	double *ys = malloc(p * 8);

	qwt_mixing(rng, p, A);
	memset(c->L, 0, n * sizeof(double));
	for (j = 0; j < p; j++) {
		c->L[qw_packed_col(p, j)] = 0.5 + 0.01 * (double)j;
		c->iL[j] = 1.0 / c->L[qw_packed_col(p, j)];
	}
	for (k = 0; k < SWEEP_WARM; k++) {
		qwt_draw(rng, p, A, NULL, z, c->r);
		ref_sweep(c->L, c->iL, t, it, p, c->r, ys, 0.05, sqrt(0.95), 0);
		memcpy(c->L, t, n * sizeof(double));
		memcpy(c->iL, it, p * sizeof(double));
	}
	qwt_draw(rng, p, A, NULL, z, c->r);
	free(A), free(z), free(t), free(it), free(ys);
}

/* Runs fn on case c from column j0 into out (dst, idst, u, ys). */
static double sw_run(qw_sweep_fn fn, const struct sw_case *c,
		     struct sw_case *out, size_t j0, double a, double cc)
{
	size_t p = c->p, n = qw_packed_len(p);

	/* Unwritten parts hold a pattern, so they compare equal too. */
	memset(out->dst, 0x5a, n * sizeof(double));
	memset(out->idst, 0x5a, p * sizeof(double));
	memset(out->ys, 0x5a, p * sizeof(double));
	memcpy(out->u, c->r, p * sizeof(double));
	memset(out->u, 0, j0 * sizeof(double));
	return fn(c->L, c->iL, out->dst, out->idst, p, out->u, out->ys, a, cc,
		  j0);
}

static int sw_same(const struct sw_case *x, const struct sw_case *y,
		   double qx, double qy)
{
	size_t p = x->p;

	return memcmp(&qx, &qy, sizeof qx) == 0 &&
	       memcmp(x->dst, y->dst, qw_packed_len(p) * sizeof(double)) == 0 &&
	       memcmp(x->idst, y->idst, p * sizeof(double)) == 0 &&
	       memcmp(x->u, y->u, p * sizeof(double)) == 0 &&
	       memcmp(x->ys, y->ys, p * sizeof(double)) == 0;
}

/* Every p in 1..257, j0 in {0, 1, 3, p/2, p-1}, two weights; returns the
 * number of cases compared for variant kind (0 when the CPU lacks it). */
static size_t sw_compare(enum qw_sweep_kind kind)
{
	qw_sweep_fn fn = qw_sweep_variant(kind);
	qw_sweep_fn base = qw_sweep_variant(QW_SWEEP_PORTABLE);
	gsl_rng *rng;
	size_t p, cases = 0;

	if (fn == NULL)
		return 0;
	rng = gsl_rng_alloc(gsl_rng_mt19937);
	gsl_rng_set(rng, 20261202);
	for (p = 1; p <= SWEEP_MAX_P; p++) {
		const size_t j0s[] = {0, 1, 3, p / 2, p - 1};
		const double ws[] = {0.05, 1.0 / 3.0};
		struct sw_case c, ref, got;
		size_t a, b;

		sw_alloc(&c, p);
		sw_alloc(&ref, p);
		sw_alloc(&got, p);
		sw_factor(&c, rng);
		for (a = 0; a < sizeof j0s / sizeof j0s[0]; a++) {
			if (j0s[a] >= p)
				continue;
			for (b = 0; b < 2; b++) {
				double w = ws[b], cc = sqrt(1.0 - w), qr, qg;

				if (kind == QW_SWEEP_PORTABLE)
					qr = sw_run(ref_sweep, &c, &ref, j0s[a],
						    w, cc);
				else
					qr = sw_run(base, &c, &ref, j0s[a], w,
						    cc);
				qg = sw_run(fn, &c, &got, j0s[a], w, cc);
				if (!sw_same(&ref, &got, qr, qg))
					fail_msg("variant %d differs at p=%zu "
						 "j0=%zu w=%g", (int)kind, p,
						 j0s[a], w);
				cases++;
			}
		}
		sw_free(&c), sw_free(&ref), sw_free(&got);
	}
	gsl_rng_free(rng);
	return cases;
}

/* The portable variant against the one-column reference. */
static void portable_vs_columns(void **s)
{
	(void)s;
	assert_true(sw_compare(QW_SWEEP_PORTABLE) > 0);
}

static void avx2_vs_portable(void **s)
{
	size_t n = sw_compare(QW_SWEEP_AVX2);

	(void)s;
	if (n == 0) {
		print_message("# skip: this CPU (or build) lacks x86-64-v3 (AVX2)\n");
		skip();
	}
	print_message("# AVX2 sweep: %zu cases bit-identical\n", n);
}

static void avx512_vs_portable(void **s)
{
	size_t n = sw_compare(QW_SWEEP_AVX512);

	(void)s;
	if (n == 0) {
		print_message("# skip: this CPU (or build) lacks x86-64-v4 (AVX-512)\n");
		skip();
	}
	print_message("# AVX-512 sweep: %zu cases bit-identical\n", n);
}

/* The variant the loader picked is one of the three (same bits). */
static void dispatched_vs_portable(void **s)
{
	struct sw_case c, ref, got;
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double qr, qg;

	(void)s;
	gsl_rng_set(rng, 7);
	sw_alloc(&c, 37);
	sw_alloc(&ref, 37);
	sw_alloc(&got, 37);
	sw_factor(&c, rng);
	qr = sw_run(qw_sweep_variant(QW_SWEEP_PORTABLE), &c, &ref, 0, 0.01,
		    sqrt(0.99));
	qg = sw_run(qw_sweep, &c, &got, 0, 0.01, sqrt(0.99));
	assert_true(sw_same(&ref, &got, qr, qg));
	/* A broken case beside it: one different input bit shows. */
	c.r[36] = nextafter(c.r[36], INFINITY);
	qg = sw_run(qw_sweep, &c, &got, 0, 0.01, sqrt(0.99));
	assert_false(sw_same(&ref, &got, qr, qg));
	sw_free(&c), sw_free(&ref), sw_free(&got);
	gsl_rng_free(rng);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(portable_vs_columns),
		cmocka_unit_test(avx2_vs_portable),
		cmocka_unit_test(avx512_vs_portable),
		cmocka_unit_test(dispatched_vs_portable),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
