/* embed.c: quadwatch's detection core inside an acquisition program.
 *
 * A small pump skid (invented): suction and discharge pressure, flow and
 * motor current, read at 10 Hz.  All four follow the pump's speed, so they
 * move together.  From reading FAULT_FROM to FAULT_TO the impeller "wears":
 * flow sags by 3 m3/h while the current stays up.  Every channel stays
 * inside its normal range; only the relationship breaks, and the detector
 * names flow as the channel that drove the alarm.
 *
 * The readings are generated here with a fixed seed, so the run is the
 * same every time.  Replace make_reading() with your own acquisition.
 *
 * Build (after make install):
 *     cc embed.c $(pkg-config --cflags --libs quadwatch) -o embed
 * Run:  ./embed           the run with the fault
 *       ./embed nofault   the same readings without it: no alarm expected
 *
 * quadwatch is an advisory monitor, not a safety instrumented system. */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>

#include <quadwatch.h>

#define P 4             /* channels */
#define RATE 10.0       /* readings per second */
#define READINGS 8000   /* 800 s of data */
#define FAULT_FROM 6000 /* first faulty reading */
#define FAULT_TO 6600   /* first reading after the fault */
#define FLOW_SAG 3.0    /* m3/h lost while the current stays up */
#define TWO_PI 6.283185307179586476925

static const char *const names[P] = {"suction_kpa", "discharge_kpa",
				      "flow_m3h", "motor_a"};
/* Noise floors: the sensors' resolution, one std dev in channel units. */
static const double floors[P] = {0.1, 0.5, 0.05, 0.05};

/* xorshift64* (Vigna 2016): a small generator with a fixed seed. */
static uint64_t rng_state = 0x2545f4914f6cdd1dULL;

static double uniform(void)
{
	rng_state ^= rng_state >> 12;
	rng_state ^= rng_state << 25;
	rng_state ^= rng_state >> 27;
	return (double)((rng_state * 0x2545f4914f6cdd1dULL) >> 11) * 0x1.0p-53;
}

/* Standard normal by Box-Muller (one of the pair is enough here). */
static double normal(void)
{
	double u = uniform();

	return sqrt(-2.0 * log(1.0 - u)) * cos(TWO_PI * uniform());
}

/* One reading of the skid.  speed: the pump's speed deviation, shared by
 * all channels; each channel adds its own sensor noise. */
static void make_reading(long i, int fault, double x[P])
{
	double speed = normal();

	x[0] = 152.0 - 1.5 * speed + 0.8 * normal();  /* suction, kPa */
	x[1] = 618.0 + 14.0 * speed + 2.5 * normal(); /* discharge, kPa */
	x[2] = 42.0 + 2.0 * speed + 0.3 * normal();   /* flow, m3/h */
	x[3] = 31.0 + 1.2 * speed + 0.2 * normal();   /* motor current, A */
	if (fault && i >= FAULT_FROM && i < FAULT_TO)
		x[2] -= FLOW_SAG;
}

static void print_alert(long i, double t, const struct qw_result *res)
{
	size_t k;

	printf("reading %ld (t = %.1f s): alarm raised, q = %.1f > limit "
	       "%.1f, %u channels\n", i, t, res->q, res->limit, res->dof);
	for (k = 0; k < res->ncontrib; k++)
		printf("  %d. %-14s drop %7.1f  z %+5.1f\n", (int)k + 1,
		       names[res->contrib[k].channel], res->contrib[k].drop,
		       res->contrib[k].z);
}

int main(int argc, char **argv)
{
	int fault = !(argc > 1 && strcmp(argv[1], "nofault") == 0);
	struct qw_params par;
	struct qw_result res;
	qw_detector *d;
	double x[P], t;
	long i;
	int rc;

	qw_params_default(&par, P);
	par.half_life = 3000;    /* readings: 5 minutes at 10 Hz */
	par.rate = RATE;
	par.alarms_per_day = 1;  /* false alarms to expect per day */
	par.warmup = 1000;       /* readings learned before any alarm */
	par.floor = floors;
	if ((rc = qw_params_check(&par)) != 0) {
		fprintf(stderr, "embed: bad parameters: %s\n",
			qw_strerror(rc));
		return 2;
	}
	if ((d = qw_detector_alloc(&par)) == NULL) {
		fprintf(stderr, "embed: out of memory\n");
		return 1;
	}
	printf("pump skid: %d channels, alpha %.3g per reading, steady limit "
	       "%.2f\n", P, qw_detector_alpha(d), qw_detector_steady_limit(d));
	for (i = 0; i < READINGS; i++) {
		t = (double)i / RATE; /* seconds */
		make_reading(i, fault, x);
		rc = qw_detector_add(d, t, x, &res);
		if (rc != 0) /* rejected and counted; the model is untouched */
			fprintf(stderr, "embed: reading %ld: %s\n", i,
				qw_strerror(rc));
		else if (res.event == QW_EVENT_RAISE)
			print_alert(i, t, &res);
		else if (res.event == QW_EVENT_CLEAR)
			printf("reading %ld (t = %.1f s): alarm cleared\n", i, t);
	}
	printf("%llu readings, %llu learned, %llu over the limit, %llu "
	       "alarms\n",
	       (unsigned long long)qw_detector_counters(d)->readings,
	       (unsigned long long)qw_detector_counters(d)->learned,
	       (unsigned long long)qw_detector_counters(d)->exceedances,
	       (unsigned long long)qw_detector_counters(d)->alarms);
	qw_detector_free(d);
	return 0;
}
