/* bench_core.c: per-reading cost of the detection core (update + score)
 * for p = 4..128, beside a naive baseline that keeps the EW covariance as
 * a matrix and re-factors it with GSL every reading (what the rank-one
 * update avoids).  Each run is timed in BENCH_CHUNKS short chunks and
 * counts its median chunk; prints medians of BENCH_RUNS runs, their ratio,
 * quadwatch's best run and, in the same runs, the sweep alone (the kernel
 * the variants share) with its share of quadwatch's figure.  A benchmark,
 * not a test: no verdicts. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_randist.h>

#include "internal.h"
#include "quadwatch.h"

#define BENCH_RUNS 7           /* runs per size; the median is reported */
#define BENCH_READINGS 400     /* distinct readings cycled through */
#define BENCH_TARGET_NS 2.5e8  /* ~0.25 s of work per run */
#define BENCH_CHUNKS 2000      /* timed chunks per run (~0.1 ms each): a
				  run's figure is its median chunk, so the
				  time slices other processes take on a
				  shared machine fall out */

static double now_ns(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (double)ts.tv_sec * 1e9 + (double)ts.tv_nsec;
}

static int cmp_double(const void *a, const void *b)
{
	double x = *(const double *)a, y = *(const double *)b;

	return x < y ? -1 : x > y;
}

static double median(double *v, size_t n)
{
	qsort(v, n, sizeof *v, cmp_double);
	return v[n / 2];
}

/* Correlated readings, mean 0, drawn once. */
static double *readings(size_t p)
{
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double *x = malloc(BENCH_READINGS * p * sizeof *x);
	double *a = malloc(p * p * sizeof *a), *z = malloc(p * sizeof *z);
	size_t k, i, j;

	gsl_rng_set(rng, 1);
	for (i = 0; i < p * p; i++)
		a[i] = gsl_ran_gaussian(rng, 1.0) + (i % (p + 1) == 0 ? 2.385 : 0);
	for (k = 0; k < BENCH_READINGS; k++) {
		for (j = 0; j < p; j++)
			z[j] = gsl_ran_gaussian(rng, 1.0);
		for (i = 0; i < p; i++) {
			double s = 0;

			for (j = 0; j < p; j++)
				s += a[i * p + j] * z[j];
			x[k * p + i] = s;
		}
	}
	gsl_rng_free(rng);
	free(a);
	free(z);
	return x;
}

/* ns per reading through qw_detector_add, after warm-up, with the given
 * whitening and mode. */
static double run_kind(size_t p, const double *x, size_t n,
		       enum qw_dynamics dyn, enum qw_mode mode)
{
	struct qw_params par;
	struct qw_result res;
	qw_detector *d;
	double t0, sink = 0, v[BENCH_CHUNKS];
	size_t k, c, i, m, per;

	qw_params_default(&par, p);
	par.half_life = 2000;
	par.learn = QW_LEARN_ALL;
	par.dynamics = dyn;
	par.mode = mode;
	d = qw_detector_alloc(&par);
	for (k = 0; k < 3000; k++)
		qw_detector_add(d, (double)k, x + (k % BENCH_READINGS) * p, &res);
	m = n < BENCH_CHUNKS ? n : BENCH_CHUNKS;
	per = n / m;
	for (c = 0; c < m; c++) {
		t0 = now_ns();
		for (i = 0; i < per; i++, k++) {
			qw_detector_add(d, (double)k,
					x + (k % BENCH_READINGS) * p, &res);
			sink += res.q;
		}
		v[c] = (now_ns() - t0) / (double)per;
	}
	qw_detector_free(d);
	if (sink == 42.0)
		puts("");
	return median(v, m);
}

/* ns per reading of the sweep alone (qw_sweep, the fused score and
 * rank-one update of sweep.c) between two factor buffers, with the
 * detector's steady weight: the part of the core's figure that the
 * kernel variants decide; the rest is the detector around it (screening,
 * the mean, the limit, the alarm) and the floor's top-ups. */
static double run_sweep(size_t p, const double *x, size_t n)
{
	size_t len = qw_packed_len(p), k, c, i, j, m, per;
	double *L[2], *iL[2], *u = malloc(p * sizeof *u);
	/* the steady weight of half_life = 2000 readings, as run_kind */
	double *y = malloc(p * sizeof *y), w = -expm1(-M_LN2 / 2000);
	double cw = sqrt(1 - w);
	double t0, sink = 0, v[BENCH_CHUNKS];
	int cur = 0;

	for (i = 0; i < 2; i++) {
		L[i] = calloc(len, sizeof *L[i]);
		iL[i] = malloc(p * sizeof *iL[i]);
	}
	for (j = 0; j < p; j++) {
		L[0][qw_packed_col(p, j)] = 1.0;
		iL[0][j] = 1.0;
	}
	m = n < BENCH_CHUNKS ? n : BENCH_CHUNKS;
	per = n / m;
	for (k = 0; k < 3000; k++, cur = !cur) {
		memcpy(u, x + (k % BENCH_READINGS) * p, p * sizeof *u);
		qw_sweep(L[cur], iL[cur], L[!cur], iL[!cur], p, u, y, w, cw, 0);
	}
	for (c = 0; c < m; c++) {
		t0 = now_ns();
		for (i = 0; i < per; i++, k++, cur = !cur) {
			memcpy(u, x + (k % BENCH_READINGS) * p, p * sizeof *u);
			sink += qw_sweep(L[cur], iL[cur], L[!cur], iL[!cur], p,
					 u, y, w, cw, 0);
		}
		v[c] = (now_ns() - t0) / (double)per;
	}
	for (i = 0; i < 2; i++) {
		free(L[i]);
		free(iL[i]);
	}
	free(u);
	free(y);
	if (sink == 42.0)
		puts("");
	return median(v, m);
}

static double run_detector(size_t p, const double *x, size_t n)
{
	return run_kind(p, x, n, QW_DYN_NONE, QW_MODE_PLAIN);
}

/* Whitening and MEWMA beside the plain update: medians of BENCH_RUNS
 * runs, each run interleaved over the four kinds. */
static void bench_kinds(void)
{
	static const size_t sizes[] = {4, 16, 64};
	static const char *const names[] = {"ar1", "var1", "mewma",
					    "var1+mewma"};
	static const enum qw_dynamics dyn[] = {QW_DYN_AR1, QW_DYN_VAR1,
					       QW_DYN_NONE, QW_DYN_VAR1};
	static const enum qw_mode mode[] = {QW_MODE_PLAIN, QW_MODE_PLAIN,
					    QW_MODE_MEWMA, QW_MODE_MEWMA};
	size_t i, j, k;

	printf("\nwhitening and MEWMA: ns per reading, median of %d runs "
	       "(ratio to the plain update)\n%5s %10s", BENCH_RUNS, "p",
	       "plain");
	for (k = 0; k < 4; k++)
		printf(" %17s", names[k]);
	putchar('\n');
	for (i = 0; i < sizeof sizes / sizeof sizes[0]; i++) {
		size_t p = sizes[i];
		double *x = readings(p), v[5][BENCH_RUNS], m[5];
		size_t n = (size_t)(BENCH_TARGET_NS /
				    (2.4 * (double)(p * p) + 60));

		for (j = 0; j < BENCH_RUNS; j++) {
			v[0][j] = run_detector(p, x, n);
			for (k = 0; k < 4; k++)
				v[k + 1][j] = run_kind(p, x, n, dyn[k],
						       mode[k]);
		}
		for (k = 0; k < 5; k++)
			m[k] = median(v[k], BENCH_RUNS);
		printf("%5zu %10.1f", p, m[0]);
		for (k = 1; k < 5; k++)
			printf(" %10.1f (%4.2fx)", m[k], m[k] / m[0]);
		putchar('\n');
		free(x);
	}
}

/* ns per reading: EW update of the explicit covariance, re-factor with
 * gsl_linalg_cholesky_decomp1, score by a triangular solve. */
static double run_naive(size_t p, const double *x, size_t n)
{
	gsl_matrix *s = gsl_matrix_alloc(p, p), *f = gsl_matrix_alloc(p, p);
	gsl_vector *r = gsl_vector_alloc(p), *mu = gsl_vector_calloc(p);
	double lam = 1 - pow(2, -1.0 / 2000), t0 = 0, sink = 0, q;
	double v[BENCH_CHUNKS];
	size_t k, i, m = n < BENCH_CHUNKS ? n : BENCH_CHUNKS, per = n / m;

	gsl_matrix_set_identity(s);
	for (k = 0; k < m * per; k++) {
		const double *xk = x + (k % BENCH_READINGS) * p;

		if (k % per == 0)
			t0 = now_ns();

		for (i = 0; i < p; i++)
			gsl_vector_set(r, i, xk[i] - gsl_vector_get(mu, i));
		gsl_matrix_memcpy(f, s);
		gsl_linalg_cholesky_decomp1(f);
		gsl_vector_memcpy(mu, r); /* scratch: y = L^-1 r */
		gsl_blas_dtrsv(CblasLower, CblasNoTrans, CblasNonUnit, f, mu);
		gsl_blas_ddot(mu, mu, &q);
		sink += q;
		gsl_matrix_scale(s, 1 - lam); /* S' = (1-l)(S + l r r') */
		gsl_blas_dsyr(CblasLower, (1 - lam) * lam, r, s);
		for (i = 0; i < p; i++) /* mu' = mu + l r, from x - r */
			gsl_vector_set(mu, i, xk[i] - (1 - lam) *
						      gsl_vector_get(r, i));
		if (k % per == per - 1)
			v[k / per] = (now_ns() - t0) / (double)per;
	}
	gsl_matrix_free(s), gsl_matrix_free(f);
	gsl_vector_free(r), gsl_vector_free(mu);
	if (sink == 42.0)
		puts("");
	return median(v, m);
}

int main(void)
{
	const size_t sizes[] = {4, 8, 16, 32, 64, 128};
	size_t i, j;

	gsl_set_error_handler_off();
	printf("core: ns per reading (score + update), median of %d runs; "
	       "sweep variant %s\n", BENCH_RUNS,
	       qw_sweep_variant(QW_SWEEP_AVX512) ? "AVX-512" :
	       qw_sweep_variant(QW_SWEEP_AVX2) ? "AVX2" : "portable");
	printf("%5s %12s %14s %8s %14s %10s %12s %7s\n", "p", "quadwatch",
	       "naive refactor", "ratio", "state bytes", "best run",
	       "sweep alone", "share");
	for (i = 0; i < sizeof sizes / sizeof sizes[0]; i++) {
		size_t p = sizes[i], n, nn;
		double *x = readings(p), a[BENCH_RUNS], b[BENCH_RUNS];
		double sw[BENCH_RUNS], ma, mb, ms;
		double est = 0.6 * (double)(p * p) + 20;
		struct qw_params par;
		qw_detector *d;

		n = (size_t)(BENCH_TARGET_NS / est);
		nn = (size_t)(BENCH_TARGET_NS / (0.5 * (double)(p * p * p) + 200));
		for (j = 0; j < BENCH_RUNS; j++) {
			a[j] = run_detector(p, x, n);
			sw[j] = run_sweep(p, x, n);
			b[j] = run_naive(p, x, nn > 100 ? nn : 100);
		}
		ma = median(a, BENCH_RUNS);
		mb = median(b, BENCH_RUNS);
		ms = median(sw, BENCH_RUNS);
		qw_params_default(&par, p);
		d = qw_detector_alloc(&par);
		/* median() sorted a: a[0] is the run least disturbed by
		 * other work on a shared machine. */
		printf("%5zu %12.1f %14.1f %7.1fx %14zu %10.1f %12.1f %6.0f%%\n",
		       p, ma, mb, mb / ma, qw_detector_state_len(d), a[0], ms,
		       100.0 * ms / ma);
		qw_detector_free(d);
		free(x);
	}
	bench_kinds();
	return 0;
}
