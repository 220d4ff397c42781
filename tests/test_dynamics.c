/* test_dynamics.c: temporal whitening on data that behaves like a plant.
 *
 * Oracles: the configured raise rate (the promise the engineer gets), on a
 * simulated, strongly autocorrelated and cross-coupled VAR(1) process
 * (qwtest.h: coefficient 0.9 on every channel, +-0.05 coupling); the same
 * stream without whitening, printed beside it to show how far off the
 * plain chart is; and invariants of the lag pairs (a reading with a
 * missing channel teaches exactly what a dropped reading teaches; a
 * restored state continues bit for bit).  The recursions themselves are
 * checked against numpy in tests/t_ref_dynamics.sh. */
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

/* The bound for the delivered raise rate with whitening. */
#define TOL_RATE 0.15
#define RATE_HZ 10.0        /* readings per second of the simulated plant */
#define N_READINGS 2000000  /* ~ 2.3 days of plant time per case */
#define WARMUP 20000

struct plant {
	gsl_rng *rng;
	struct qwt_var1 v;
	double *A, *mean, *state, *z, *next;
};

static void plant_init(struct plant *s, size_t p, double phi, double couple,
		       unsigned long seed)
{
	size_t i;

	s->rng = gsl_rng_alloc(gsl_rng_mt19937);
	gsl_rng_set(s->rng, seed);
	s->A = malloc(p * p * sizeof(double));
	s->mean = malloc(p * sizeof(double));
	s->state = calloc(p, sizeof(double));
	s->z = malloc(p * sizeof(double));
	s->next = malloc(p * sizeof(double));
	assert_non_null(s->A);
	qwt_mixing(s->rng, p, s->A);
	for (i = 0; i < p; i++)
		s->mean[i] = 12.5 + 2.385 * (double)i;
	s->v = (struct qwt_var1){p,      phi,      couple, s->A,
				 s->mean, s->state, s->z,   s->next};
}

static void plant_free(struct plant *s)
{
	gsl_rng_free(s->rng);
	free(s->A), free(s->mean), free(s->state), free(s->z), free(s->next);
}

static double per_day(double target)
{
	return target * RATE_HZ * QW_SECONDS_PER_DAY;
}

/* Raised alarms per scored reading after warm-up for each detector fed the
 * same stream; rates[i] out. */
static void run_stream(qw_detector **d, size_t nd, size_t p, double phi,
		       double couple, unsigned long seed, double *rates)
{
	struct plant s;
	struct qw_result res;
	uint64_t raised[4] = {0}, after[4] = {0};
	double *x = malloc(p * sizeof *x);
	size_t k, i;

	assert_true(nd <= 4);
	plant_init(&s, p, phi, couple, seed);
	for (k = 0; k < N_READINGS; k++) {
		qwt_var1_step(s.rng, &s.v, x);
		for (i = 0; i < nd; i++) {
			assert_int_equal(qw_detector_add(d[i],
							 (double)k / RATE_HZ,
							 x, &res), 0);
			if (res.scored && k >= WARMUP) {
				after[i]++;
				raised[i] += res.event == QW_EVENT_RAISE;
			}
		}
	}
	for (i = 0; i < nd; i++)
		rates[i] = (double)raised[i] / (double)after[i];
	free(x);
	plant_free(&s);
}

/* 95% binomial interval of a rate from n trials, as a ratio to target:
 * +-1.96 sqrt(target/n) (normal approximation; thousands of raises). */
static double ci95(double target, double n)
{
	return 1.96 * sqrt(target * (1 - target) / n) / target;
}

static void whitened_rate(size_t p, unsigned k, unsigned m, double target,
			  enum qw_dynamics dyn, double couple)
{
	static const char *const names[] = {"none", "ar1", "var1"};
	struct qw_params par;
	qw_detector *d[2];
	double rates[2];
	size_t i;

	qw_params_default(&par, p);
	par.half_life = 2000;
	par.rate = RATE_HZ;
	par.persist_k = k;
	par.persist_m = m;
	par.clear_n = 1; /* the k-of-m formula counts raises exactly so */
	par.alarms_per_day = per_day(target);
	par.warmup = WARMUP;
	for (i = 0; i < 2; i++) {
		par.dynamics = i == 0 ? dyn : QW_DYN_NONE;
		d[i] = qw_detector_alloc(&par);
		assert_non_null(d[i]);
	}
	run_stream(d, 2, p, 0.9, couple, 900 + p * 10 + k, rates);
	print_message("# VAR(1) phi 0.9 couple %g, p=%zu persist %u/%u: "
		      "%s whitening delivers %.4g raises per reading vs "
		      "configured %.4g (ratio %.3f, 95%% binomial interval "
		      "+-%.3f over %d readings); unwhitened ratio %.2f\n",
		      couple, p, k, m, names[dyn], rates[0], target,
		      rates[0] / target,
		      ci95(target, N_READINGS - WARMUP), N_READINGS,
		      rates[1] / target);
	assert_true(fabs(rates[0] / target - 1) <= TOL_RATE);
	/* The reason whitening exists: the plain chart misses by more. */
	assert_true(fabs(rates[1] / target - 1) >
		    fabs(rates[0] / target - 1));
	for (i = 0; i < 2; i++)
		qw_detector_free(d[i]);
}

static void var1_p4_1of1(void **st)
{
	(void)st;
	whitened_rate(4, 1, 1, 1e-3, QW_DYN_VAR1, 0.05);
}

static void var1_p4_3of5(void **st)
{
	(void)st;
	whitened_rate(4, 3, 5, 5e-4, QW_DYN_VAR1, 0.05);
}

static void var1_p8_2of4(void **st)
{
	(void)st;
	whitened_rate(8, 2, 4, 5e-4, QW_DYN_VAR1, 0.05);
}

/* ar1 whitens each channel's own memory: exact on uncoupled channels. */
static void ar1_p4_3of5_uncoupled(void **st)
{
	(void)st;
	whitened_rate(4, 3, 5, 5e-4, QW_DYN_AR1, 0.0);
}

/* With partial = hold, a reading with a missing channel breaks two lag
 * pairs; dropping the reading and leaving a gap breaks one: neither
 * teaches the model anything, so the two detectors' states are identical
 * bit for bit (counters aside).  (Learning partial pairs, the default, is
 * checked against numpy by t_ref_dynamics.) */
static void missing_teaches_nothing(void **st)
{
	const size_t p = 3, n = 4000, hole = 2500;
	struct qw_params par;
	qw_detector *a, *b;
	struct qw_result ra, rb;
	struct plant s;
	double x[3];
	unsigned char *sa, *sb;
	size_t k, len, head;
	enum qw_dynamics kinds[] = {QW_DYN_VAR1, QW_DYN_AR1};
	int j;

	(void)st;
	for (j = 0; j < 2; j++) {
		qw_params_default(&par, p);
		par.rate = RATE_HZ;
		par.dynamics = kinds[j];
		par.partial = QW_PARTIAL_HOLD;
		a = qw_detector_alloc(&par);
		b = qw_detector_alloc(&par);
		assert_non_null(a);
		assert_non_null(b);
		plant_init(&s, p, 0.9, 0.05, 77);
		for (k = 0; k < n; k++) {
			double t = (double)k / RATE_HZ;

			qwt_var1_step(s.rng, &s.v, x);
			if (k == hole) {
				x[1] = NAN;
				assert_int_equal(qw_detector_add(a, t, x, &ra),
						 0);
				continue; /* b never sees it */
			}
			assert_int_equal(qw_detector_add(a, t, x, &ra), 0);
			assert_int_equal(qw_detector_add(b, t, x, &rb), 0);
			if (k == hole + 1) {
				assert_int_equal(ra.learned, 0);
				assert_int_equal(rb.learned, 0);
			}
		}
		len = qw_detector_state_len(a);
		sa = malloc(len);
		sb = malloc(len);
		qw_detector_state_get(a, sa);
		qw_detector_state_get(b, sb);
		/* Skip the head's counters (a saw one reading more). */
		head = sizeof(uint64_t) + sizeof(struct qw_counters);
		assert_memory_equal(sa + head, sb + head, len - head);
		assert_int_equal(qw_detector_counters(a)->learned,
				 qw_detector_counters(b)->learned);
		print_message("# %s: a missing channel and a dropped reading "
			      "leave the same model (%llu pairs learned)\n",
			      j == 0 ? "var1" : "ar1",
			      (unsigned long long)qw_detector_counters(a)
				      ->learned);
		free(sa), free(sb);
		qw_detector_free(a);
		qw_detector_free(b);
		plant_free(&s);
	}
}

/* A checkpointed state continues exactly as the live detector, for each
 * whitening and for MEWMA; a state of another whitening is refused. */
static void state_round_trip(void **st)
{
	const size_t p = 4, n = 6000, cut = 3500;
	struct qw_params par;
	qw_detector *a, *b;
	struct qw_result ra, rb;
	struct plant s;
	double x[4];
	unsigned char *buf;
	size_t k, len;
	int j;

	(void)st;
	for (j = 0; j < 4; j++) {
		qw_params_default(&par, p);
		par.rate = RATE_HZ;
		par.dynamics = j == 3 ? QW_DYN_VAR1 : (enum qw_dynamics)j;
		par.mode = j == 3 ? QW_MODE_MEWMA : QW_MODE_PLAIN;
		a = qw_detector_alloc(&par);
		b = qw_detector_alloc(&par);
		assert_non_null(a);
		assert_non_null(b);
		plant_init(&s, p, 0.9, 0.05, 78 + (unsigned long)j);
		for (k = 0; k < n; k++) {
			double t = (double)k / RATE_HZ;

			qwt_var1_step(s.rng, &s.v, x);
			if (k == cut) {
				len = qw_detector_state_len(a);
				buf = malloc(len);
				qw_detector_state_get(a, buf);
				assert_int_equal(
					qw_detector_state_set(b, buf, len), 0);
				free(buf);
			}
			assert_int_equal(qw_detector_add(a, t, x, &ra), 0);
			if (k < cut)
				continue;
			assert_int_equal(qw_detector_add(b, t, x, &rb), 0);
			assert_memory_equal(&ra.q, &rb.q, sizeof ra.q);
			assert_memory_equal(&ra.limit, &rb.limit,
					    sizeof ra.limit);
			assert_int_equal(ra.learned, rb.learned);
		}
		qw_detector_free(b);
		/* The same bytes under another whitening: refused. */
		par.dynamics = (enum qw_dynamics)((j + 1) % 3);
		par.mode = QW_MODE_PLAIN;
		b = qw_detector_alloc(&par);
		len = qw_detector_state_len(a);
		buf = malloc(len);
		qw_detector_state_get(a, buf);
		assert_int_not_equal(qw_detector_state_set(b, buf, len), 0);
		free(buf);
		qw_detector_free(a);
		qw_detector_free(b);
		plant_free(&s);
	}
}

/* Attribution names the channel whose dynamics broke: under var1 a
 * channel that stops following its own past (a step of 4 innovation
 * standard deviations, well inside its own range) is ranked first. */
static void attribution_of_innovation(void **st)
{
	const size_t p = 4, n = 30000;
	struct qw_params par;
	qw_detector *d;
	struct qw_result res;
	struct plant s;
	double x[4];
	size_t k;
	int found = 0;

	(void)st;
	qw_params_default(&par, p);
	par.rate = RATE_HZ;
	par.dynamics = QW_DYN_VAR1;
	par.warmup = 5000;
	d = qw_detector_alloc(&par);
	assert_non_null(d);
	plant_init(&s, p, 0.9, 0.05, 79);
	for (k = 0; k < n && !found; k++) {
		qwt_var1_step(s.rng, &s.v, x);
		if (k >= 20000) {
			/* the innovation sd of channel 2 is about |A| ~ 3 */
			x[2] += 40.0;
		}
		assert_int_equal(qw_detector_add(d, (double)k / RATE_HZ, x,
						 &res), 0);
		if (k >= 20000 && res.over) {
			assert_true(res.ncontrib >= 1);
			assert_int_equal(res.contrib[0].channel, 2);
			found = 1;
		}
	}
	assert_true(found);
	qw_detector_free(d);
	plant_free(&s);
}

/* MEWMA on residuals that keep memory (an unwhitened VAR(1) plant): the
 * chart learns its own covariance, so its statistic keeps a mean near p,
 * where the textbook chart's wanders far wider; also in a fit, which
 * never leaves warm-up. */
static void mewma_learns_its_covariance(void **st)
{
	const size_t p = 3, n = 40000;
	struct qw_params par;
	qw_detector *d[2];
	struct qw_result res;
	struct plant s;
	double x[3], sum[2] = {0, 0};
	size_t k, i, late = 0;

	(void)st;
	for (i = 0; i < 2; i++) {
		qw_params_default(&par, p);
		par.rate = RATE_HZ;
		par.mode = QW_MODE_MEWMA;
		par.learn = QW_LEARN_ALL;
		/* 0: a daemon's group; 1: a fit (no forgetting, no end of
		 * warm-up) */
		par.warmup = i == 0 ? 2000 : UINT64_MAX;
		par.half_life = i == 0 ? 20000 : QW_HALF_LIFE_NONE;
		d[i] = qw_detector_alloc(&par);
		assert_non_null(d[i]);
	}
	plant_init(&s, p, 0.9, 0.05, 81);
	for (k = 0; k < n; k++) {
		qwt_var1_step(s.rng, &s.v, x);
		for (i = 0; i < 2; i++) {
			assert_int_equal(qw_detector_add(d[i],
							 (double)k / RATE_HZ,
							 x, &res), 0);
			if (k >= n / 2)
				sum[i] += res.q;
		}
		late += k >= n / 2;
	}
	print_message("# MEWMA on an unwhitened VAR(1) plant, p=3: mean "
		      "statistic %.2f (daemon) and %.2f (fit), p = 3\n",
		      sum[0] / (double)late, sum[1] / (double)late);
	/* The textbook chart's mean here is about (1 + 2 sum_k (0.9 0.9)^k)
	 * p = 9.5 p, near 28 (residual memory 0.9, EWMA memory 1 - rho =
	 * 0.9): a learned covariance brings it back near p. */
	for (i = 0; i < 2; i++) {
		assert_true(sum[i] / (double)late < 1.5 * (double)p);
		assert_true(sum[i] / (double)late > 0.5 * (double)p);
		qw_detector_free(d[i]);
	}
	plant_free(&s);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(missing_teaches_nothing),
		cmocka_unit_test(state_round_trip),
		cmocka_unit_test(attribution_of_innovation),
		cmocka_unit_test(mewma_learns_its_covariance),
		cmocka_unit_test(var1_p4_1of1),
		cmocka_unit_test(var1_p4_3of5),
		cmocka_unit_test(var1_p8_2of4),
		cmocka_unit_test(ar1_p4_3of5_uncoupled),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
