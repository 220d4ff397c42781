/* test_core_alloc.c: the core's memory discipline and robustness.
 *  - no heap allocation per reading (issue 2): a counting allocator
 *    interposed on malloc/calloc/realloc/free for this program;
 *  - allocation failure at each allocation of qw_detector_alloc in turn
 *    (SQLite's way): NULL back, nothing leaked;
 *  - state save/restore round trip, and refusal of impossible states;
 *  - a corrupted factor is caught, counted and rebuilt: never NaN scores.
 * Under AddressSanitizer the allocator belongs to the sanitizer, so the
 * counting tests check nothing there and say so. */
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

#if defined(__SANITIZE_ADDRESS__)
#define COUNTING 0
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define COUNTING 0
#else
#define COUNTING 1
#endif
#else
#define COUNTING 1
#endif

static long allocs;        /* successful allocations while counting */
static long live;          /* outstanding allocations while counting */
static long fail_at = -1;  /* make the n-th allocation fail (0-based) */
static int counting;

#if COUNTING
void *__libc_malloc(size_t);
void *__libc_calloc(size_t, size_t);
void *__libc_realloc(void *, size_t);
void __libc_free(void *);

/* One gate for every allocation: counts it, or fails it on request. */
static int gate(void)
{
	if (!counting)
		return 1;
	if (fail_at >= 0 && allocs == fail_at) {
		fail_at = -1;
		return 0;
	}
	allocs++;
	live++;
	return 1;
}

void *malloc(size_t n)
{
	return gate() ? __libc_malloc(n) : NULL;
}

void *calloc(size_t a, size_t b)
{
	return gate() ? __libc_calloc(a, b) : NULL;
}

void *realloc(void *p, size_t n)
{
	if (p == NULL)
		return malloc(n);
	if (counting)
		allocs++;
	return __libc_realloc(p, n);
}

void free(void *p)
{
	if (p != NULL && counting)
		live--;
	__libc_free(p);
}
#endif

/* The configurations every allocation test runs: plain, whitened with
 * MEWMA (the most allocations), per-channel whitening. */
static const struct {
	enum qw_dynamics dyn;
	enum qw_mode mode;
} kinds[] = {{QW_DYN_NONE, QW_MODE_PLAIN},
	     {QW_DYN_VAR1, QW_MODE_MEWMA},
	     {QW_DYN_AR1, QW_MODE_PLAIN}};
#define NKINDS (sizeof kinds / sizeof kinds[0])

static qw_detector *make_kind(size_t p, size_t kind)
{
	struct qw_params par;

	qw_params_default(&par, p);
	par.half_life = 300;
	par.rate = 10;
	par.alarms_per_day = 200; /* some exceedances, to explain them */
	par.dynamics = kinds[kind].dyn;
	par.mode = kinds[kind].mode;
	return qw_detector_alloc(&par);
}

static qw_detector *make(size_t p)
{
	return make_kind(p, 0);
}

/* 10^4 readings (complete, partial, outliers, rejected) allocate nothing,
 * for configuration kind. */
static void no_allocation_kind(size_t kind)
{
	const size_t p = 8;
	qw_detector *d;
	gsl_rng *rng;
	double A[64], z[8], x[8];
	struct qw_result res;
	long explained = 0;

	d = make_kind(p, kind);
	rng = gsl_rng_alloc(gsl_rng_mt19937);
	gsl_rng_set(rng, 5);
	qwt_mixing(rng, p, A);
	for (int k = 0; k < 2000; k++) { /* warm-up, outside the count */
		qwt_draw(rng, p, A, NULL, z, x);
		qw_detector_add(d, k * 0.1, x, &res);
	}
	allocs = 0;
	counting = 1;
	for (int k = 2000; k < 12000; k++) {
		qwt_draw(rng, p, A, NULL, z, x);
		if (k % 97 == 0)
			x[3] = NAN;
		if (k % 211 == 0)
			x[1] += 40.0;
		if (k % 503 == 0)
			x[2] = INFINITY;
		qw_detector_add(d, k * 0.1, x, &res);
		explained += res.ncontrib > 0;
		if (k % 4001 == 0)
			qw_detector_rebaseline(d);
	}
	counting = 0;
	print_message("# 10000 readings (dynamics %d, mode %d), %ld "
		      "explained: %ld allocations\n", (int)kinds[kind].dyn,
		      (int)kinds[kind].mode, explained, allocs);
	assert_true(explained > 10);
	assert_int_equal(allocs, 0);
	qw_detector_free(d);
	gsl_rng_free(rng);
}

static void no_allocation_per_reading(void **st)
{
	(void)st;
	if (!COUNTING)
		skip();
	for (size_t kind = 0; kind < NKINDS; kind++)
		no_allocation_kind(kind);
}

/* Failing each allocation of qw_detector_alloc in turn: NULL, no leak. */
static void allocation_failure_kind(size_t kind)
{
	long n, total;
	qw_detector *d;

	allocs = live = 0;
	counting = 1;
	d = make_kind(5, kind);
	total = allocs;
	qw_detector_free(d);
	assert_int_equal(live, 0);
	assert_true(total >= 10);
	for (n = 0; n < total; n++) {
		allocs = live = 0;
		fail_at = n;
		d = make_kind(5, kind);
		assert_null(d);
		assert_int_equal(live, 0);
	}
	counting = 0;
	fail_at = -1;
	print_message("# qw_detector_alloc (dynamics %d, mode %d): failure "
		      "at each of %ld allocations returns NULL and frees the "
		      "rest\n", (int)kinds[kind].dyn, (int)kinds[kind].mode,
		      total);
}

static void allocation_failure_each_step(void **st)
{
	(void)st;
	if (!COUNTING)
		skip();
	for (size_t kind = 0; kind < NKINDS; kind++)
		allocation_failure_kind(kind);
	qw_detector_free(NULL); /* a no-op */
	qw_ewcov_free(NULL);
}

/* Saved and restored state scores the next readings identically. */
static void state_round_trip(void **st)
{
	const size_t p = 5;
	qw_detector *a = make(p), *b = make(p);
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double A[25], z[5], x[5];
	struct qw_result ra, rb;
	size_t len = qw_detector_state_len(a);
	unsigned char *buf = malloc(len);

	(void)st;
	gsl_rng_set(rng, 8);
	qwt_mixing(rng, p, A);
	for (int k = 0; k < 3000; k++) {
		qwt_draw(rng, p, A, NULL, z, x);
		qw_detector_add(a, k * 0.1, x, &ra);
	}
	qw_detector_state_get(a, buf);
	assert_int_equal(qw_detector_state_set(b, buf, len), 0);
	for (int k = 3000; k < 4000; k++) {
		qwt_draw(rng, p, A, NULL, z, x);
		if (k % 50 == 0)
			x[0] += 30;
		qw_detector_add(a, k * 0.1, x, &ra);
		qw_detector_add(b, k * 0.1, x, &rb);
		assert_memory_equal(&ra.q, &rb.q, sizeof ra.q);
		assert_memory_equal(&ra.limit, &rb.limit, sizeof ra.limit);
		assert_int_equal(ra.event, rb.event);
	}
	/* Impossible states are refused and leave the model as it was. */
	assert_int_equal(qw_detector_state_set(b, buf, len - 1), QW_EMISMATCH);
	qw_detector_state_get(a, buf);
	memset(buf + len - 8, 0xff, 8); /* last factor element: NaN */
	assert_int_equal(qw_detector_state_set(b, buf, len), QW_EFORMAT);
	qw_detector_add(a, 500, x, &ra);
	qw_detector_add(b, 500, x, &rb);
	assert_memory_equal(&ra.q, &rb.q, sizeof ra.q);
	free(buf);
	qw_detector_free(a);
	qw_detector_free(b);
	gsl_rng_free(rng);
}

/* A factor corrupted in memory (a cosmic ray, a bug elsewhere) is caught
 * by the self-check, counted, and rebuilt: scores stay finite. */
static void numeric_fault_rebuilt(void **st)
{
	const size_t p = 4;
	qw_detector *d = make(p);
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double A[16], z[4], x[4];
	struct qw_result res;

	(void)st;
	gsl_rng_set(rng, 9);
	qwt_mixing(rng, p, A);
	for (int k = 0; k < 1000; k++) {
		qwt_draw(rng, p, A, NULL, z, x);
		qw_detector_add(d, k * 0.1, x, &res);
	}
	((double *)qw_ewcov_factor(qw_detector_model(d)))[1] = NAN;
	for (int k = 1000; k < 3000; k++) {
		qwt_draw(rng, p, A, NULL, z, x);
		qw_detector_add(d, k * 0.1, x, &res);
		if (res.scored)
			assert_true(isfinite(res.q) || res.learned == 0);
	}
	assert_true(qw_detector_counters(d)->numeric >= 1);
	assert_true(isfinite(res.q));
	assert_int_equal(qw_ewcov_verify((qw_ewcov *)qw_detector_model(d)), 0);
	/* Overflowing and infinite readings are rejected and counted. */
	x[0] = 1e300;
	assert_int_equal(qw_detector_add(d, 400, x, &res), QW_ERANGE);
	x[0] = -INFINITY;
	assert_int_equal(qw_detector_add(d, 400, x, &res), QW_ERANGE);
	assert_int_equal(qw_detector_counters(d)->rej_overflow, 1);
	assert_int_equal(qw_detector_counters(d)->rej_nonfinite, 1);
	qw_detector_free(d);
	gsl_rng_free(rng);
}

static void params_errors(void **st)
{
	struct qw_params par;
	double bad_floor[2] = {0.1, -1};

	(void)st;
	qw_params_default(&par, 2);
	assert_int_equal(qw_params_check(&par), 0);
	par.p = 0;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	assert_null(qw_detector_alloc(&par));
	qw_params_default(&par, 2);
	par.half_life = -3;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.floor = bad_floor;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.persist_k = 4;
	par.persist_m = 3;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.clear_n = 0;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.mode = QW_MODE_MEWMA;
	assert_int_equal(qw_params_check(&par), 0);
	par.persist_k = 2;
	par.persist_m = 3; /* MEWMA's limit is for 1-of-1 raises */
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.mode = QW_MODE_MEWMA;
	par.smoothing = 0;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.dynamics = (enum qw_dynamics)7;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.limit_factor = 0;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, 2);
	par.max_gap = -1;
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	qw_params_default(&par, QW_MAX_P / 2 + 1);
	par.dynamics = QW_DYN_VAR1; /* twice the channels in the model */
	assert_int_equal(qw_params_check(&par), QW_EINVAL);
	assert_null(qw_detector_alloc(NULL));
}

/* Half-life in seconds: time going backwards is rejected and counted;
 * irregular steps weigh by elapsed time. */
static void time_based_half_life(void **st)
{
	struct qw_params par;
	struct qw_result res;
	qw_detector *d;
	double x[2] = {1.5, 2.5};

	(void)st;
	qw_params_default(&par, 2);
	par.time_based = 1;
	par.half_life = 60;
	d = qw_detector_alloc(&par);
	assert_int_equal(qw_detector_add(d, 100, x, &res), 0);
	x[0] = 1.6;
	assert_int_equal(qw_detector_add(d, 101, x, &res), 0);
	assert_int_equal(qw_detector_add(d, 99, x, &res), QW_ETIME);
	assert_int_equal(qw_detector_counters(d)->rej_time, 1);
	assert_int_equal(qw_detector_counters(d)->learned, 2);
	/* A model that starts a stream of its own (loaded from a fit): any
	 * time may come next, and it learns with the nominal weight. */
	qw_detector_counters_reset(d);
	x[1] = 2.6;
	assert_int_equal(qw_detector_add(d, 5, x, &res), 0);
	assert_true(res.scored && res.learned);
	assert_int_equal(qw_detector_counters(d)->rej_time, 0);
	assert_int_equal(qw_detector_add(d, 4, x, &res), QW_ETIME);
	qw_detector_free(d);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(no_allocation_per_reading),
		cmocka_unit_test(allocation_failure_each_step),
		cmocka_unit_test(state_round_trip),
		cmocka_unit_test(numeric_fault_rebuilt),
		cmocka_unit_test(params_errors),
		cmocka_unit_test(time_based_half_life),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
