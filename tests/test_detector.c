/* test_detector.c: the detector's behaviour by simulation and by brute
 * force.  Issue 2's tests 4 (calibration), 5 (persistence), 7 (missing),
 * 8 (stuck channel), 9 (contamination); attribution (test 6) is in
 * test_explain.c.  Oracles: the chi-square/F theory of the limit (the rate
 * the engineer configured), brute-force marginal Mahalanobis distances, and
 * deliberately broken configurations that must fail the same checks. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>

#include "internal.h"
#include "quadwatch.h"
#include "qwtest.h"

/* Issue 2, tests 4 and 5: delivered rates within +-15% of nominal. */
#define TOL_RATE 0.15
#define TOL_EXACT 1e-9
#define RATE_HZ 10.0 /* readings per second in the simulated groups */

struct sim {
	gsl_rng *rng;
	size_t p;
	double *A, *z, *x, *mean;
};

static void sim_init(struct sim *s, size_t p, unsigned long seed)
{
	size_t i;

	s->rng = gsl_rng_alloc(gsl_rng_mt19937);
	gsl_rng_set(s->rng, seed);
	s->p = p;
	s->A = malloc(p * p * sizeof(double));
	s->z = malloc(p * sizeof(double));
	s->x = malloc(p * sizeof(double));
	s->mean = malloc(p * sizeof(double));
	qwt_mixing(s->rng, p, s->A);
	for (i = 0; i < p; i++)
		s->mean[i] = 2.385 * (double)i - 7.1;
}

static const double *sim_next(struct sim *s)
{
	qwt_draw(s->rng, s->p, s->A, s->mean, s->z, s->x);
	return s->x;
}

static void sim_free(struct sim *s)
{
	gsl_rng_free(s->rng);
	free(s->A), free(s->z), free(s->x), free(s->mean);
}

/* alarms_per_day that makes the per-reading target P at RATE_HZ. */
static double per_day(double target)
{
	return target * RATE_HZ * QW_SECONDS_PER_DAY;
}

/* Issue 2, test 4: iid Gaussian in-control data, random covariance, the
 * delivered exceedance rate after warm-up vs alpha = 1e-3.  Also runs the
 * same stream against the plain chi-square limit and prints that rate. */
static void run_calibration(size_t p, double half_life, size_t n)
{
	struct qw_params par;
	qw_detector *d[2];
	struct qw_result res;
	struct sim s;
	uint64_t over[2] = {0, 0}, scored = 0;
	double alpha, rate[2];
	size_t k, i;

	qw_params_default(&par, p);
	par.half_life = half_life;
	par.rate = RATE_HZ;
	/* 1-of-1: alpha(1-alpha) = target; target chosen for alpha 1e-3. */
	par.alarms_per_day = per_day(1e-3 * (1 - 1e-3));
	par.warmup = (uint64_t)(3 * half_life);
	for (i = 0; i < 2; i++) {
		par.correct = (int)(i == 0);
		d[i] = qw_detector_alloc(&par);
		assert_non_null(d[i]);
	}
	alpha = qw_detector_alpha(d[0]);
	assert_true(qwt_reldiff(alpha, 1e-3, 0) < 1e-9);
	sim_init(&s, p, 7000 + p + (unsigned long)half_life);
	for (k = 0; k < n; k++) {
		const double *x = sim_next(&s);

		for (i = 0; i < 2; i++) {
			assert_int_equal(qw_detector_add(d[i], (double)k / RATE_HZ, x,
							 &res), 0);
			if (res.scored && k >= par.warmup) {
				over[i] += res.q > res.limit;
				scored += i == 0;
			}
		}
	}
	for (i = 0; i < 2; i++)
		rate[i] = (double)over[i] / (double)scored;
	print_message("# calibration p=%zu h=%g: %llu readings, delivered "
		      "%.4g (nominal %.4g, ratio %.3f); plain chi-square limit "
		      "%.4g (ratio %.3f)\n", p, half_life,
		      (unsigned long long)scored, rate[0], alpha,
		      rate[0] / alpha, rate[1], rate[1] / alpha);
	assert_true(fabs(rate[0] / alpha - 1) <= TOL_RATE);
	/* Without the correction the rate is higher: the reason it exists. */
	assert_true(rate[1] > rate[0]);
	for (i = 0; i < 2; i++)
		qw_detector_free(d[i]);
	sim_free(&s);
}

static void calib_p2_h200(void **st) { (void)st; run_calibration(2, 200, 2000000); }
static void calib_p2_h2000(void **st) { (void)st; run_calibration(2, 2000, 2000000); }
static void calib_p8_h200(void **st) { (void)st; run_calibration(8, 200, 2000000); }
static void calib_p8_h2000(void **st) { (void)st; run_calibration(8, 2000, 2000000); }
static void calib_p32_h200(void **st) { (void)st; run_calibration(32, 200, 1500000); }
static void calib_p32_h2000(void **st) { (void)st; run_calibration(32, 2000, 1500000); }

/* Issue 2, test 5: the raised-alarm rate under k of m vs the configured
 * alarms per day. */
static void run_persistence(unsigned k, unsigned m, double target)
{
	const size_t p = 4, n = 3000000;
	struct qw_params par;
	qw_detector *d;
	struct qw_result res;
	struct sim s;
	uint64_t raised = 0, after = 0, overs = 0, pairs = 0;
	int prev = 0;
	double got;
	size_t i;

	qw_params_default(&par, p);
	par.half_life = 5000;
	par.rate = RATE_HZ;
	par.persist_k = k;
	par.persist_m = m;
	par.clear_n = 1;
	par.alarms_per_day = per_day(target);
	par.warmup = 15000;
	d = qw_detector_alloc(&par);
	assert_non_null(d);
	sim_init(&s, p, 4242 + k * 100 + m);
	for (i = 0; i < n; i++) {
		assert_int_equal(qw_detector_add(d, (double)i / RATE_HZ, sim_next(&s),
						 &res), 0);
		if (i >= par.warmup) {
			after++;
			raised += res.event == QW_EVENT_RAISE;
			overs += (uint64_t)(res.over != 0);
			pairs += res.over && prev;
			prev = res.over;
		}
	}
	got = (double)raised / (double)after;
	print_message("# persistence %u/%u: alpha %.4g per reading, raised "
		      "%llu, rate %.4g per reading vs configured %.4g (ratio "
		      "%.3f); exceedance rate %.4g, both of a pair %.3g\n",
		      k, m, qw_detector_alpha(d),
		      (unsigned long long)raised, got, target, got / target,
		      (double)overs / (double)after, (double)pairs / (double)after);
	assert_true(fabs(got / target - 1) <= TOL_RATE);
	qw_detector_free(d);
	sim_free(&s);
}

static void persist_1_1(void **st) { (void)st; run_persistence(1, 1, 5e-4); }
static void persist_2_5(void **st) { (void)st; run_persistence(2, 5, 5e-4); }
static void persist_3_8(void **st) { (void)st; run_persistence(3, 8, 3e-4); }

/* A detector trained on n in-control readings of s. */
static qw_detector *trained(struct sim *s, struct qw_params *par, size_t n)
{
	qw_detector *d = qw_detector_alloc(par);
	struct qw_result res;
	size_t i;

	assert_non_null(d);
	for (i = 0; i < n; i++)
		qw_detector_add(d, (double)i / RATE_HZ, sim_next(s), &res);
	return d;
}

/* Brute force: r_o' (Sigma_oo)^-1 r_o for the channels of x that are not
 * NaN, Sigma = L L' of d's model formed in full (qwtest.h); *m gets the
 * number observed. */
static double brute_marginal_q(const qw_detector *d, size_t p,
			       const double *x, size_t *m)
{
	const double *mu = qw_ewcov_mean(qw_detector_model(d));
	double sig[64], r[8];
	int keep[8];
	size_t i, n = 0;

	qwt_sigma_from_factor(qw_ewcov_factor(qw_detector_model(d)), p, sig);
	for (i = 0; i < p; i++) {
		keep[i] = !isnan(x[i]);
		r[i] = keep[i] ? x[i] - mu[i] : 0.0;
		n += (size_t)keep[i];
	}
	*m = n;
	return qwt_quad_form(sig, p, r, keep);
}

/* Issue 2, test 7: q on the observed subset equals the brute-force
 * marginal distance; dof = channels observed.  With partial = hold the
 * model is left untouched by a partial reading; with learn (the default)
 * a warm model learns each one it does not find over the limit, and the
 * step is checked against numpy by t_ref_numpy. */
static void run_missing(enum qw_partial mode)
{
	const size_t p = 6;
	struct qw_params par;
	struct qw_result res;
	struct sim s;
	qw_detector *d;
	double x[6], q;
	unsigned char *before, *after;
	size_t i, m, len, mlen, learned = 0;
	int rep;

	qw_params_default(&par, p);
	par.partial = mode;
	sim_init(&s, p, 99);
	d = trained(&s, &par, 5000);
	len = qw_detector_state_len(d);
	mlen = qw_ewcov_state_len(qw_detector_model(d)); /* the model part */
	before = malloc(len);
	after = malloc(len);
	for (rep = 0; rep < 20; rep++) {
		memcpy(x, sim_next(&s), sizeof x);
		x[0] += 3.1; /* some signal in the distance */
		for (i = 0; i < p; i++)
			if ((rep >> (i % 5)) & 1 && i != (size_t)rep % p)
				x[i] = NAN;
		q = brute_marginal_q(d, p, x, &m);
		qw_detector_state_get(d, before);
		assert_int_equal(qw_detector_add(d, 1e4, x, &res), 0);
		qw_detector_state_get(d, after);
		assert_true(res.scored);
		assert_int_equal(res.dof, m);
		assert_true(qwt_reldiff(res.q, q, 0) <= TOL_EXACT);
		if (m == p)
			continue;
		/* Only the counters may differ: compare the model. */
		if (mode == QW_PARTIAL_HOLD || res.over) {
			assert_false(res.learned);
			assert_memory_equal(before + len - mlen,
					    after + len - mlen, mlen);
		} else {
			assert_true(res.learned);
			assert_memory_not_equal(before + len - mlen,
						after + len - mlen, mlen);
			learned++;
		}
	}
	if (mode == QW_PARTIAL_LEARN)
		assert_true(learned >= 10);
	for (i = 0; i < p; i++)
		x[i] = NAN;
	assert_int_equal(qw_detector_add(d, 1e4, x, &res), QW_ENODATA);
	assert_int_equal(qw_detector_counters(d)->rej_empty, 1);
	free(before);
	free(after);
	qw_detector_free(d);
	sim_free(&s);
}

static void missing_channels(void **st)
{
	(void)st;
	run_missing(QW_PARTIAL_HOLD);
	run_missing(QW_PARTIAL_LEARN);
}

/* A channel that drops out for 40 half-lives while the plant's load moves
 * every channel along one direction: a slow cycle about 5 noise standard
 * deviations high (the noise of qwt_mixing is about 3 per channel) and a
 * fast part (2 deviations, independent from reading to reading) that
 * teaches the model the direction.  Exceedances in the dropout and in the
 * 10 half-lives after it, against the same stream with nothing missing
 * (the control, whose exceedances are the load's own).  Held out, the
 * partial readings leave the model where the dropout found it while the
 * plant moves on: a storm of exceedances (the demo plant's chiller raised
 * 224 alarms in one 4-hour dropout).  Learned by their expected step, the
 * observed channels keep the model with the plant, and the missing one
 * follows them as far as the model knows how it moves with them. */
#define DROP_H 500.0
#define DROP_N 72000
#define DROP_FROM 45000
#define DROP_TO 65000
#define DROP_AFTER 5000
#define DROP_PERIOD 100000.0 /* readings per load cycle */
#define DROP_AMP 15.0
#define DROP_FAST 6.0

static void run_dropout(enum qw_partial mode, int drop, unsigned long seed,
			size_t *in, size_t *after)
{
	const size_t p = 4;
	static const double dir[4] = {1.0, 0.8, -0.6, 0.9};
	struct qw_params par;
	struct qw_result res;
	struct sim s;
	qw_detector *d;
	double x[4], load;
	size_t i, k;

	qw_params_default(&par, p);
	par.half_life = DROP_H;
	par.rate = RATE_HZ;
	par.alarms_per_day = 1e-3 * RATE_HZ * 86400.0; /* alpha 1e-3 */
	par.learn = QW_LEARN_SKIP;
	par.partial = mode;
	sim_init(&s, p, seed);
	d = qw_detector_alloc(&par);
	assert_non_null(d);
	*in = *after = 0;
	for (k = 0; k < DROP_N; k++) {
		memcpy(x, sim_next(&s), sizeof x);
		load = DROP_AMP * sin(2.0 * M_PI * (double)k / DROP_PERIOD) +
		       gsl_ran_gaussian(s.rng, DROP_FAST);
		for (i = 0; i < p; i++)
			x[i] += load * dir[i];
		if (drop && k >= DROP_FROM && k < DROP_TO)
			x[2] = NAN;
		assert_int_equal(qw_detector_add(d, (double)k / RATE_HZ, x,
						 &res), 0);
		if (k >= DROP_FROM && k < DROP_TO)
			*in += (size_t)res.over;
		else if (k >= DROP_TO && k < DROP_TO + DROP_AFTER)
			*after += (size_t)res.over;
	}
	qw_detector_free(d);
	sim_free(&s);
}

static void dropout_on_moving_plant(void **st)
{
	size_t ci, ca, hi, ha, li, la, s;
	size_t sum_c = 0, sum_h = 0, sum_l = 0;

	(void)st;
	for (s = 0; s < 3; s++) {
		run_dropout(QW_PARTIAL_LEARN, 0, 500 + s, &ci, &ca);
		run_dropout(QW_PARTIAL_HOLD, 1, 500 + s, &hi, &ha);
		run_dropout(QW_PARTIAL_LEARN, 1, 500 + s, &li, &la);
		print_message("# dropout of 40 half-lives on a moving plant, "
			      "seed %zu: exceedances in it / 10 half-lives "
			      "after: control %zu / %zu, hold %zu / %zu, "
			      "learn %zu / %zu (expected about %.0f / %.0f)\n",
			      500 + s, ci, ca, hi, ha, li, la,
			      1e-3 * (DROP_TO - DROP_FROM), 1e-3 * DROP_AFTER);
		sum_c += ci + ca;
		sum_h += hi + ha;
		sum_l += li + la;
	}
	/* Learned: within twice the control's count (plus Poisson room);
	 * held: the storm the learning removes. */
	assert_true(sum_l <= 2 * sum_c + 20);
	assert_true(sum_h >= 10 * (sum_c + 10));
}

/* Issue 2, test 8: a channel constant for 10 half-lives that then moves by
 * one resolution step.  With its floor configured: no alarm, every score
 * finite.  The same stream with the floor left to auto (1e-7 relative)
 * must alarm: the check can fail. */
static int run_stuck(double floor_stuck, double *q_step)
{
	const size_t p = 3;
	const double h = 500, step = 0.5; /* resolution, channel units */
	double floor[3] = {0.01, 0.01, floor_stuck}, x[3], level = 0;
	struct qw_params par;
	struct qw_result res;
	struct sim s;
	qw_detector *d;
	size_t i, n = (size_t)(10 * h);
	int alarms = 0;

	qw_params_default(&par, p);
	par.half_life = h;
	par.rate = RATE_HZ;
	par.floor = floor;
	sim_init(&s, p, 31337);
	/* Channel 2 independent of the others (a setpoint or a slow
	 * temperature): freezing it is not itself a broken correlation. */
	for (i = 0; i < p; i++)
		if (i != 2)
			s.A[2 * p + i] = s.A[i * p + 2] = 0.0;
	d = trained(&s, &par, 3000);
	for (i = 0; i < n + 50; i++) {
		memcpy(x, sim_next(&s), sizeof x);
		if (i == 0)
			level = x[2]; /* stuck at the value it had */
		x[2] = i < n ? level : level + step;
		assert_int_equal(qw_detector_add(d, 300 + (double)i / RATE_HZ, x, &res),
				 0);
		assert_true(isfinite(res.q) && isfinite(res.limit));
		for (size_t c = 0; c < res.ncontrib; c++)
			assert_true(isfinite(res.contrib[c].drop) &&
				    isfinite(res.contrib[c].z));
		alarms += res.event == QW_EVENT_RAISE;
		if (i == n)
			*q_step = res.q;
	}
	qw_detector_free(d);
	sim_free(&s);
	return alarms;
}

static void stuck_channel(void **st)
{
	double q_floor = 0, q_auto = 0;
	int a_floor, a_auto;

	(void)st;
	a_floor = run_stuck(0.5, &q_floor); /* floor = one step */
	a_auto = run_stuck(0.0, &q_auto);
	print_message("# stuck channel: step scores %.3g with the floor, %.3g "
		      "without; alarms %d vs %d\n", q_floor, q_auto, a_floor,
		      a_auto);
	assert_int_equal(a_floor, 0);
	assert_true(a_auto > 0);
}

/* Issue 2, test 9: a 5-sigma fault held for 5 half-lives keeps alarming
 * under the guard; the same fault with learn = all fades (the model learns
 * it: what the guard prevents); after a re-baseline the new level is
 * normal. */
static int run_contamination(enum qw_learn learn, int *still)
{
	const size_t p = 4;
	const double h = 400;
	struct qw_params par;
	struct qw_result res;
	struct sim s;
	qw_detector *d;
	double x[4], sd0;
	size_t i, n = (size_t)(5 * h), overs = 0;

	qw_params_default(&par, p);
	par.half_life = h;
	par.rate = RATE_HZ;
	par.learn = learn;
	sim_init(&s, p, 555);
	d = trained(&s, &par, 4000);
	/* Marginal sd of channel 0: |row 0 of L|. */
	sd0 = fabs(qw_ewcov_factor(qw_detector_model(d))[0]);
	for (i = 0; i < n; i++) {
		memcpy(x, sim_next(&s), sizeof x);
		x[0] += 5 * sd0;
		qw_detector_add(d, 400 + (double)i / RATE_HZ, x, &res);
		if (i >= n - 100)
			overs += (size_t)(res.over != 0);
	}
	*still = res.in_alarm;
	if (learn == QW_LEARN_SKIP) {
		/* Re-baseline: the shifted level becomes normal. */
		int raises = 0;

		assert_int_equal(qw_detector_rebaseline(d), 1);
		for (i = 0; i < 6000; i++) {
			memcpy(x, sim_next(&s), sizeof x);
			x[0] += 5 * sd0;
			qw_detector_add(d, 800 + (double)i / RATE_HZ, x, &res);
			raises += res.event == QW_EVENT_RAISE;
		}
		assert_int_equal(raises, 0);
		assert_false(res.in_alarm);
	}
	qw_detector_free(d);
	sim_free(&s);
	return (int)overs;
}

static void contamination(void **st)
{
	int still_skip, still_all, overs_skip, overs_all, still_clip;

	(void)st;
	overs_skip = run_contamination(QW_LEARN_SKIP, &still_skip);
	run_contamination(QW_LEARN_CLIP, &still_clip);
	overs_all = run_contamination(QW_LEARN_ALL, &still_all);
	print_message("# contamination: last 100 readings over the limit: "
		      "%d guarded, %d unguarded\n", overs_skip, overs_all);
	assert_true(still_skip);
	assert_true(still_clip);
	assert_true(overs_skip >= 95);
	assert_false(still_all);
	assert_true(overs_all < 20);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(missing_channels),
		cmocka_unit_test(dropout_on_moving_plant),
		cmocka_unit_test(stuck_channel),
		cmocka_unit_test(contamination),
		cmocka_unit_test(persist_1_1),
		cmocka_unit_test(persist_2_5),
		cmocka_unit_test(persist_3_8),
		cmocka_unit_test(calib_p2_h200),
		cmocka_unit_test(calib_p2_h2000),
		cmocka_unit_test(calib_p8_h200),
		cmocka_unit_test(calib_p8_h2000),
		cmocka_unit_test(calib_p32_h200),
		cmocka_unit_test(calib_p32_h2000),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
