/* test_batch.c: a frame through qw_detector_add_batch equals the same
 * readings through qw_detector_add one by one, bit for bit: every result
 * field, every return code, the attribution of each event, the counters
 * and the whole saved state (model, alarm, counters) after the stream.
 * The stream holds what a frame can carry: partial readings (NaN
 * channels), a reading with an infinite channel in the middle of a frame,
 * time going backwards (time-based half-life), a shift that raises and
 * clears inside frames; per reading, time-based, and with VAR(1)
 * whitening and the MEWMA statistic.  Oracle: the one-by-one path. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <gsl/gsl_errno.h>

#include "quadwatch.h"
#include "qwtest.h"

#define B_P 5          /* channels: odd, not a vector width */
#define B_FRAME 64     /* readings per frame, as the bus benchmark sends */
#define B_FRAMES 12
#define B_N (B_FRAME * B_FRAMES)
#define B_SHIFT_AT 300 /* frame 4, index 44: the raise is inside a frame */
#define B_SHIFT_LEN 12
#define B_SHIFT 9.0    /* added to channel 2, in units of the mixing */

/* The stream: in-control draws, NaN channels at a few readings, +Inf at
 * one in mid-frame, the shift, and (time-based) one step back in time. */
static void b_stream(double *t, double *x, int time_back)
{
	gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
	double A[B_P * B_P], z[B_P], mean[B_P];
	size_t k, i;

	gsl_rng_set(rng, 20261203);
	qwt_mixing(rng, B_P, A);
	for (i = 0; i < B_P; i++)
		mean[i] = 3.0 * (double)i;
	for (k = 0; k < B_N; k++) {
		qwt_draw(rng, B_P, A, mean, z, x + k * B_P);
		t[k] = 0.1 * (double)k;
		if (k >= B_SHIFT_AT && k < B_SHIFT_AT + B_SHIFT_LEN)
			x[k * B_P + 2] += B_SHIFT * 2.385;
	}
	x[250 * B_P + 1] = NAN;              /* partial, during warm-up */
	x[251 * B_P + 0] = NAN;
	x[251 * B_P + 4] = NAN;
	x[420 * B_P + 3] = NAN;              /* partial, after the event */
	x[330 * B_P + 2] = INFINITY;         /* rejected, frame 5 index 10 */
	for (i = 0; i < B_P; i++)
		x[500 * B_P + i] = NAN;      /* every channel missing */
	if (time_back)
		t[600] = t[599] - 0.05;      /* rejected, frame 9 index 24 */
	gsl_rng_free(rng);
}

/* Configurations: per reading, time-based, and per reading with VAR(1)
 * whitening and the MEWMA statistic. */
enum { B_READINGS = 0, B_TIME = 1, B_VAR1_MEWMA = 2 };

static qw_detector *b_detector(int kind)
{
	struct qw_params par;

	qw_params_default(&par, B_P);
	par.half_life = kind == B_TIME ? 20.0 : 200.0;
	par.time_based = kind == B_TIME;
	par.rate = 10.0;
	par.alarms_per_day = 8.64; /* alpha 1e-5 at 10 Hz */
	par.learn = QW_LEARN_SKIP;
	if (kind == B_VAR1_MEWMA) {
		par.dynamics = QW_DYN_VAR1;
		par.mode = QW_MODE_MEWMA;
	}
	return qw_detector_alloc(&par);
}

static void b_same_result(const struct qw_result *a, const struct qw_result *b,
			  size_t k)
{
	if (memcmp(&a->q, &b->q, sizeof a->q) != 0 ||
	    memcmp(&a->limit, &b->limit, sizeof a->limit) != 0 ||
	    memcmp(&a->nu, &b->nu, sizeof a->nu) != 0 ||
	    memcmp(&a->scale, &b->scale, sizeof a->scale) != 0 ||
	    a->dof != b->dof || a->scored != b->scored || a->over != b->over ||
	    a->event != b->event || a->in_alarm != b->in_alarm ||
	    a->learned != b->learned || a->ncontrib != b->ncontrib)
		fail_msg("reading %zu: batch result differs", k);
}

/* Field by field: struct qw_contrib has padding. */
static void b_same_contrib(const struct qw_result *a,
			   const struct qw_result *b, size_t k)
{
	size_t i;

	for (i = 0; i < a->ncontrib; i++)
		if (a->contrib[i].channel != b->contrib[i].channel ||
		    memcmp(&a->contrib[i].drop, &b->contrib[i].drop,
			   sizeof(double)) != 0 ||
		    memcmp(&a->contrib[i].z, &b->contrib[i].z,
			   sizeof(double)) != 0)
			fail_msg("reading %zu: batch attribution differs", k);
}

/* Runs the stream both ways; returns 1 when every check of equality
 * passed and the final states are identical, else 0 (after fail_msg).
 * flip: a reading index whose channel 0 the batch side sees scaled by
 * 1 + 1e-9 (the broken case), or B_N for none. */
static int b_run(int kind, size_t flip, int *early_stops)
{
	double *t = malloc(B_N * sizeof(double));
	double *x = malloc(B_N * B_P * sizeof(double));
	double *xb = malloc(B_N * B_P * sizeof(double));
	qw_detector *one = b_detector(kind), *bat = b_detector(kind);
	struct qw_result ra, rb[B_FRAME];
	int rc[B_FRAME], same;
	size_t f, k, m, i;
	unsigned char *sa, *sb;
	size_t len;

	assert_true(one != NULL && bat != NULL);
	b_stream(t, x, kind == B_TIME);
	memcpy(xb, x, B_N * B_P * sizeof(double));
	if (flip < B_N)
		xb[flip * B_P] *= 1.0 + 1e-9;
	*early_stops = 0;
	for (f = 0; f < B_FRAMES; f++) {
		size_t base = f * B_FRAME;

		for (k = 0; k < B_FRAME; k += m) {
			size_t want = B_FRAME - k;

			m = qw_detector_add_batch(bat, want, t + base + k,
						  xb + (base + k) * B_P, rb, rc);
			assert_true(m >= 1 && m <= want);
			if (m < want)
				(*early_stops)++;
			for (i = 0; i < m; i++) {
				size_t at = base + k + i;
				int r = qw_detector_add(one, t[at],
							x + at * B_P, &ra);

				assert_int_equal(r, rc[i]);
				if (flip == B_N)
					b_same_result(&ra, &rb[i], at);
				/* Events end a call: only then is the
				 * batch side's attribution still its own. */
				if (rb[i].event != QW_EVENT_NONE) {
					assert_int_equal(i, m - 1);
					if (flip == B_N)
						b_same_contrib(&ra, &rb[i], at);
				}
			}
		}
	}
	len = qw_detector_state_len(one);
	sa = malloc(len);
	sb = malloc(len);
	qw_detector_state_get(one, sa);
	qw_detector_state_get(bat, sb);
	same = memcmp(sa, sb, len) == 0 &&
	       memcmp(qw_detector_counters(one), qw_detector_counters(bat),
		      sizeof(struct qw_counters)) == 0;
	if (flip == B_N) {
		const struct qw_counters *c = qw_detector_counters(one);
		const char *name[] = {"per reading", "time-based",
				      "VAR(1) + MEWMA"};

		/* The stream did hold what it was built to hold. */
		assert_true(c->partial >= 3);
		assert_int_equal(c->rej_nonfinite, 1);
		assert_int_equal(c->rej_empty, 1);
		assert_int_equal(c->rej_time, kind == B_TIME ? 1 : 0);
		assert_true(c->alarms >= 1);
		print_message("# %s: %zu readings in frames of %d, %d calls "
			      "stopped early at an event, %llu alarms\n",
			      name[kind], (size_t)B_N, B_FRAME, *early_stops,
			      (unsigned long long)c->alarms);
	}
	free(sa), free(sb), free(t), free(x), free(xb);
	qw_detector_free(one);
	qw_detector_free(bat);
	return same;
}

static void batch_equals_one_by_one(void **s)
{
	int stops;

	(void)s;
	assert_true(b_run(B_READINGS, B_N, &stops));
	assert_true(stops >= 2); /* the raise and the clear */
}

static void batch_equals_one_by_one_time(void **s)
{
	int stops;

	(void)s;
	assert_true(b_run(B_TIME, B_N, &stops));
	assert_true(stops >= 2);
}

static void batch_equals_one_by_one_var1_mewma(void **s)
{
	int stops;

	(void)s;
	assert_true(b_run(B_VAR1_MEWMA, B_N, &stops));
	assert_true(stops >= 2);
}

/* Broken case: a relative 1e-9 on one channel of one learned reading, on
 * the batch side only, shows in the final state. */
static void batch_flip_shows(void **s)
{
	int stops;

	(void)s;
	assert_false(b_run(B_READINGS, 123, &stops));
}

/* n = 0 takes nothing; a frame that is all rejections takes all. */
static void batch_edges(void **s)
{
	qw_detector *d = b_detector(B_READINGS);
	double t[3] = {0, 1, 2}, x[3 * B_P];
	struct qw_result res[3];
	int rc[3];
	size_t i;

	(void)s;
	for (i = 0; i < 3 * B_P; i++)
		x[i] = INFINITY;
	assert_int_equal(qw_detector_add_batch(d, 0, t, x, res, rc), 0);
	assert_int_equal(qw_detector_add_batch(d, 3, t, x, res, NULL), 3);
	assert_int_equal(qw_detector_add_batch(d, 3, t, x, res, rc), 3);
	for (i = 0; i < 3; i++)
		assert_int_equal(rc[i], QW_ERANGE);
	assert_int_equal(qw_detector_counters(d)->rej_nonfinite, 6);
	qw_detector_free(d);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(batch_equals_one_by_one),
		cmocka_unit_test(batch_equals_one_by_one_time),
		cmocka_unit_test(batch_equals_one_by_one_var1_mewma),
		cmocka_unit_test(batch_flip_shows),
		cmocka_unit_test(batch_edges),
	};

	gsl_set_error_handler_off();
	return cmocka_run_group_tests(tests, NULL, NULL);
}
