/* test_scenario.c: the simulated chilled-water plant (src/io/scenario.c).
 *
 * Oracles: the same seed twice (bit-identical values); the physical laws
 * the module claims (affinity laws of the pump, two flow meters on one
 * pipe, return above supply) checked against the formulas within the
 * stated sensor noise; each fault kind against a fault-free run of the
 * same seed (faults draw no random numbers, so the difference is the
 * fault alone), only on its channel and only during its window; the fault
 * line parser on good lines and on every error. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include <cmocka.h>

#include "quadwatch.h"
#include "scenario.h"

#define DT 0.1               /* s: conf/demo.ini's 10 readings/s */
#define START 1767592800.0   /* 2026-01-05T06:00:00Z */
#define SEED 2385
#define N 6000               /* readings: 10 min of plant time */
/* Rounding to a channel's resolution moves a value by at most half a
 * step; two roundings (faulted vs clean) differ by at most one step. */
#define STEP(c) pow(10.0, -(double)qw_scn_chan_decimals(c))

/* Runs n steps into x[n][QW_SCN_NCHAN] and hit[n][QW_SCN_NCHAN]. */
static void run(uint64_t seed, const struct qw_scn_fault *f, size_t nf,
		size_t n, double (*x)[QW_SCN_NCHAN],
		unsigned char (*hit)[QW_SCN_NCHAN])
{
	qw_scn *s = qw_scn_alloc(seed, DT, START, f, nf);
	size_t k;

	assert_non_null(s);
	for (k = 0; k < n; k++)
		qw_scn_next(s, x[k], hit != NULL ? hit[k] : NULL);
	assert_int_equal(qw_scn_count(s), n);
	qw_scn_free(s);
}

static double xa[N][QW_SCN_NCHAN], xb[N][QW_SCN_NCHAN];
static unsigned char ha[N][QW_SCN_NCHAN];

static void test_reproducible(void **state)
{
	(void)state;
	run(SEED, NULL, 0, N, xa, NULL);
	run(SEED, NULL, 0, N, xb, NULL);
	assert_memory_equal(xa, xb, sizeof xa);
	run(SEED + 1, NULL, 0, N, xb, NULL);
	assert_true(memcmp(xa, xb, sizeof xa) != 0);
}

/* Sample correlation of column a and column b of xa. */
static double corr(unsigned a, unsigned b)
{
	double ma = 0, mb = 0, saa = 0, sbb = 0, sab = 0;
	size_t k;

	for (k = 0; k < N; k++) {
		ma += xa[k][a] / N;
		mb += xa[k][b] / N;
	}
	for (k = 0; k < N; k++) {
		saa += (xa[k][a] - ma) * (xa[k][a] - ma);
		sbb += (xa[k][b] - mb) * (xa[k][b] - mb);
		sab += (xa[k][a] - ma) * (xa[k][b] - mb);
	}
	return sab / sqrt(saa * sbb);
}

/* The affinity laws, the two meters, the temperatures; values on their
 * resolution grid.  Tolerances: the residual sd may exceed the channel's
 * own noise by the speed noise carried through the law (2.5 rpm of 1480)
 * and a 3 s drive lag; 1.5 x the noise sum covers both. */
static void test_physics(void **state)
{
	double r_dp = 0, r_amps = 0, r_flow = 0, r_meters = 0, rise = 0;
	size_t k;
	unsigned c;

	(void)state;
	run(SEED, NULL, 0, N, xa, NULL);
	for (k = 0; k < N; k++) {
		double s = xa[k][QW_SCN_PUMP_SPEED] / 1480.0; /* rated rpm */
		double d;

		d = xa[k][QW_SCN_PUMP_FLOW] - 48.0 * s;          /* Q ~ n */
		r_flow += d * d / N;
		d = xa[k][QW_SCN_PUMP_DP] - 210.0 * s * s;       /* dp ~ n^2 */
		r_dp += d * d / N;
		d = xa[k][QW_SCN_MOTOR_AMPS] - (8.5 + 20.0 * s * s * s);
		r_amps += d * d / N;
		d = xa[k][QW_SCN_CHW_FLOW] - xa[k][QW_SCN_PUMP_FLOW];
		r_meters += d * d / N;
		rise += (xa[k][QW_SCN_CHW_RETURN_T] -
			 xa[k][QW_SCN_CHW_SUPPLY_T]) / N;
		for (c = 0; c < QW_SCN_NCHAN; c++)
			assert_true(fabs(xa[k][c] * (1.0 / STEP(c)) -
					 nearbyint(xa[k][c] / STEP(c))) < 1e-6);
	}
	assert_true(sqrt(r_flow) < 1.5 * (0.2 + 48.0 * 2.5 / 1480.0));
	assert_true(sqrt(r_dp) < 1.5 * (0.8 + 2 * 210.0 * 2.5 / 1480.0));
	assert_true(sqrt(r_amps) < 1.5 * (0.2 + 3 * 20.0 * 2.5 / 1480.0));
	assert_true(sqrt(r_meters) < 1.5 * (0.25 + 0.2));
	assert_true(rise > 2.0 && rise < 8.0);  /* degC across the load */
	assert_true(corr(QW_SCN_PUMP_SPEED, QW_SCN_PUMP_FLOW) > 0.9);
	assert_true(corr(QW_SCN_PUMP_SPEED, QW_SCN_COMP_AMPS) > 0.5);
	assert_true(corr(QW_SCN_PUMP_SPEED, QW_SCN_CHW_RETURN_T) > 0.3);
	assert_true(corr(QW_SCN_COND_T, QW_SCN_COMP_AMPS) > 0.3);
}

static struct qw_scn_fault fault(int kind, unsigned chan, double size)
{
	struct qw_scn_fault f;

	memset(&f, 0, sizeof f);
	f.at = 238.5;        /* s: reading 2385 */
	f.duration = 123.4;  /* s: readings 2385..3618 */
	f.kind = kind;
	f.chan = chan;
	f.size = size;
	return f;
}

#define K0 2385u
#define K1 3619u /* first reading after the window */

/* Runs the fault against the clean run of the same seed; checks that
 * nothing but its channel changes, nothing outside the window, and that
 * the labels are set exactly there; returns with xa clean, xb faulted. */
static void fault_run(const struct qw_scn_fault *f)
{
	size_t k;
	unsigned c;

	run(SEED, NULL, 0, N, xa, NULL);
	run(SEED, f, 1, N, xb, ha);
	for (k = 0; k < N; k++)
		for (c = 0; c < QW_SCN_NCHAN; c++) {
			int in = c == f->chan && k >= K0 && k < K1;

			assert_int_equal(ha[k][c], in);
			if (!in)
				assert_memory_equal(&xa[k][c], &xb[k][c],
						    sizeof(double));
		}
}

static void test_fault_step(void **state)
{
	struct qw_scn_fault f = fault(QW_SCN_STEP, QW_SCN_CHW_SUPPLY_T, 0.385);
	size_t k;

	(void)state;
	fault_run(&f);
	for (k = K0; k < K1; k++)
		assert_true(fabs(xb[k][f.chan] - xa[k][f.chan] - f.size) <=
			    STEP(f.chan) + 1e-9);
}

static void test_fault_drift(void **state)
{
	struct qw_scn_fault f = fault(QW_SCN_DRIFT, QW_SCN_COND_T, 2.385);
	size_t k;

	(void)state;
	fault_run(&f);
	for (k = K0; k < K1; k++) {
		double want = f.size * ((double)k * DT - f.at) / f.duration;

		assert_true(fabs(xb[k][f.chan] - xa[k][f.chan] - want) <=
			    STEP(f.chan) + 1e-9);
	}
	assert_true(xb[K1 - 1][f.chan] - xa[K1 - 1][f.chan] > 0.99 * f.size);
}

static void test_fault_stuck(void **state)
{
	struct qw_scn_fault f = fault(QW_SCN_STUCK, QW_SCN_PUMP_SPEED, 0);
	size_t k;
	int moved = 0;

	(void)state;
	fault_run(&f);
	for (k = K0; k < K1; k++) {
		assert_true(xb[k][f.chan] == xa[K0 - 1][f.chan]);
		moved |= xa[k][f.chan] != xa[K0 - 1][f.chan];
	}
	assert_true(moved); /* the true value did move meanwhile */
}

static void test_fault_break(void **state)
{
	struct qw_scn_fault f = fault(QW_SCN_BREAK, QW_SCN_PUMP_FLOW, -0.0835);
	size_t k;

	(void)state;
	fault_run(&f);
	for (k = K0; k < K1; k++)
		assert_true(fabs(xb[k][f.chan] - xa[k][f.chan] * (1 + f.size))
			    <= STEP(f.chan) * 1.5 + 1e-9);
}

static void test_fault_dropout(void **state)
{
	struct qw_scn_fault f = fault(QW_SCN_DROPOUT, QW_SCN_CHW_RETURN_T, 0);
	size_t k;

	(void)state;
	fault_run(&f);
	for (k = 0; k < N; k++)
		assert_int_equal(isnan(xb[k][f.chan]), k >= K0 && k < K1);
}

/* A checker that must fail: a window one reading too long is caught. */
static void test_window_edges(void **state)
{
	struct qw_scn_fault f = fault(QW_SCN_STEP, QW_SCN_BEARING_T, 1.0);

	(void)state;
	assert_false(qw_scn_active(&f, DT, K0 - 1));
	assert_true(qw_scn_active(&f, DT, K0));
	assert_true(qw_scn_active(&f, DT, K1 - 1));
	assert_false(qw_scn_active(&f, DT, K1));
}

static void test_demo_schedule(void **state)
{
	struct qw_scn_fault f[16];
	unsigned kinds = 0;
	size_t n, i;

	(void)state;
	n = qw_scn_demo(12000, DT, f, 16);
	assert_int_equal(n, 5);
	for (i = 0; i < n; i++) {
		kinds |= 1u << f[i].kind;
		assert_true(f[i].at >= 0.4 * 1200.0 && f[i].duration > 0);
		assert_true(f[i].at + f[i].duration <= 1200.0);
		if (i > 0) /* ordered, apart */
			assert_true(f[i].at > f[i - 1].at + f[i - 1].duration);
	}
	assert_int_equal(kinds, (1u << QW_SCN_NKIND) - 1);
	assert_int_equal(qw_scn_demo(12000, DT, f, 2), 5); /* cap respected */
}

static void test_fault_parse(void **state)
{
	static const char *const bad[] = {
		"at=1 kind=step channel=cond_t size=1",        /* no duration */
		"at=1 kind=leak channel=cond_t duration=2",    /* kind */
		"at=1 kind=step channel=nope duration=2",      /* channel */
		"at=-1 kind=step channel=cond_t duration=2",   /* at < 0 */
		"at=1 kind=step channel=cond_t duration=0",    /* duration */
		"at=1 kind=step channel=cond_t duration=2 size=x",
		"at=1 kind=step channel=cond_t duration=2 size=inf",
		"at=1 at=2 kind=step channel=cond_t duration=2",
		"at=1 kind=step channel=cond_t duration=2 colour=red",
		"at=1 kind=step channel=cond_t duration=2 size",
		"at=1 kind=step channel=cond_t group= duration=2",
		"at=1 kind=step channel=cond_t duration=2 group="
		"aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa",
		"at=1 kind=step channel=cond_t duration=2 size=1"
		"00000000000000000000000000000000000000000000000000000000000000000"
		"00000000000000000000000000000000000000000000000000000000000000000",
	};
	struct qw_scn_fault f;
	char err[256];
	size_t i;

	(void)state;
	assert_int_equal(qw_scn_fault_parse("  # a comment\n", &f, err,
					    sizeof err), 1);
	assert_int_equal(qw_scn_fault_parse("\t\r\n", &f, err, sizeof err), 1);
	assert_int_equal(qw_scn_fault_parse(
		"at=9min kind=drift group=chiller channel=cond_t size=2.385 "
		"duration=1.5min # note\n", &f, err, sizeof err), 0);
	assert_true(f.at == 540.0 && f.duration == 90.0 && f.size == 2.385);
	assert_int_equal(f.kind, QW_SCN_DRIFT);
	assert_int_equal(f.chan, QW_SCN_COND_T);
	assert_string_equal(f.group, "chiller");
	for (i = 0; i < sizeof bad / sizeof bad[0]; i++) {
		err[0] = '\0';
		assert_int_equal(qw_scn_fault_parse(bad[i], &f, err,
						    sizeof err), QW_EFORMAT);
		assert_true(err[0] != '\0');
	}
}

static void test_names_and_args(void **state)
{
	struct qw_scn_fault f = fault(QW_SCN_STEP, QW_SCN_COND_T, 1.0);
	unsigned c;

	(void)state;
	for (c = 0; c < QW_SCN_NCHAN; c++)
		assert_int_equal(qw_scn_chan_find(qw_scn_chan_name(c)), (int)c);
	assert_int_equal(qw_scn_chan_find("flow"), -1);
	assert_string_equal(qw_scn_chan_name(QW_SCN_NCHAN), "?");
	assert_int_equal(qw_scn_kind_find("break"), QW_SCN_BREAK);
	assert_int_equal(qw_scn_kind_find("Step"), -1);
	assert_string_equal(qw_scn_kind_name(QW_SCN_NKIND), "?");
	assert_null(qw_scn_alloc(1, 0.0, START, NULL, 0));
	assert_null(qw_scn_alloc(1, DT, NAN, NULL, 0));
	assert_null(qw_scn_alloc(1, DT, START, NULL, 1));
	f.kind = QW_SCN_NKIND;
	assert_null(qw_scn_alloc(1, DT, START, &f, 1));
	f.kind = QW_SCN_STEP;
	f.chan = QW_SCN_NCHAN;
	assert_null(qw_scn_alloc(1, DT, START, &f, 1));
	f.chan = QW_SCN_COND_T;
	f.duration = 0;
	assert_null(qw_scn_alloc(1, DT, START, &f, 1));
	qw_scn_free(NULL);
}

int main(void)
{
	const struct CMUnitTest tests[] = {
		cmocka_unit_test(test_reproducible),
		cmocka_unit_test(test_physics),
		cmocka_unit_test(test_fault_step),
		cmocka_unit_test(test_fault_drift),
		cmocka_unit_test(test_fault_stuck),
		cmocka_unit_test(test_fault_break),
		cmocka_unit_test(test_fault_dropout),
		cmocka_unit_test(test_window_edges),
		cmocka_unit_test(test_demo_schedule),
		cmocka_unit_test(test_fault_parse),
		cmocka_unit_test(test_names_and_args),
	};

	return cmocka_run_group_tests(tests, NULL, NULL);
}
