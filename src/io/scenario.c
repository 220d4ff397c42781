/* scenario.c: the invented chilled-water plant behind `quadwatch sim`.
 *
 * One chiller and the variable-speed pump skid that feeds it, driven by a
 * cooling load.  Per time step of dt seconds:
 *
 *   load      L = clamp(daily sine + Ornstein-Uhlenbeck wander), fraction
 *             of design; the OU term is updated exactly:
 *             u' = a u + sigma sqrt(1 - a^2) N(0,1), a = exp(-dt/tau)
 *   speed     s = first-order lag of 0.40 + 0.60 L (fraction of rated)
 *   pump      affinity laws: flow = Q_D s, dp = DP_D s^2, shaft power
 *             P = P_D s^3, motor current = I0 + I1 s^3; the bearing warms
 *             with P through a first-order lag
 *   chiller   supply held near its set point by the chiller's control;
 *             return = supply + L Q_LOAD / (flow cp), lagged by the loop;
 *             condenser water = ambient + approach + load term; compressor
 *             power = L Q_LOAD / COP with COP = ETA Carnot(evap, cond), so
 *             its current follows both load and lift
 *
 * Each channel then gets Gaussian sensor noise, the active faults, and is
 * rounded to its resolution (10^-d) as the exact nearest double of the
 * printed decimal (m / 10^d), so a CSV of these values parses back to the
 * very same doubles.  Randomness: GSL's MT19937 and ziggurat normals,
 * drawn in a fixed order, so a seed gives the same values bit for bit.
 *
 * Workload: a few dozen flops and fourteen normal draws per step; no
 * allocation after qw_scn_alloc. */
#include "scenario.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "num.h"
#include "quadwatch.h"

#define SCN_TWO_PI 6.283185307179586
#define SCN_DAY 86400.0            /* s */
#define SCN_KELVIN 273.15          /* degC to K */

/* Load: mean 0.62 of design, +-0.22 over the day peaking mid-afternoon,
 * and a wander of sd 0.08 with a 10 min memory (occupancy, sun, weather). */
#define LOAD_MEAN 0.62
#define LOAD_DAILY 0.22
#define LOAD_PEAK_S (15.0 * 3600.0) /* s after midnight UTC */
#define LOAD_OU_SD 0.05
#define LOAD_OU_TAU 180.0           /* s */
#define LOAD_FAST_SD 0.025          /* valve and coil hunting */
#define LOAD_FAST_TAU 8.0           /* s */
#define LOAD_MIN 0.20
#define LOAD_MAX 1.00

/* Pump: 4-pole motor at 50 Hz, a duty point typical of a small plant. */
#define SPEED_MIN 0.40              /* fraction of rated at no load */
#define SPEED_SPAN 0.60             /* fraction added at full load */
#define SPEED_TAU 3.0               /* s: drive's speed ramp */
#define SPEED_RATED 1480.0          /* rpm */
#define FLOW_D 48.0                 /* l/s at rated speed */
#define DP_D 210.0                  /* kPa at rated speed */
#define SHAFT_D 15.0                /* kW at rated speed */
#define MOTOR_I0 8.5                /* A: magnetising current */
#define MOTOR_I1 20.0               /* A: load current at rated speed */
#define BEARING_ROOM 27.0           /* degC: plant room */
#define BEARING_PER_KW 0.9          /* degC per shaft kW */
#define BEARING_TAU 300.0           /* s: thermal mass of the housing */

/* Chiller: 1.1 MW design, water cp 4.19 kJ/(kg K), 1 kg per litre. */
#define LOAD_D 1100.0               /* kW of cooling at L = 1 */
#define WATER_CP 4.19               /* kJ/(kg K) */
#define SUPPLY_SP 6.7               /* degC: set point */
#define SUPPLY_LOAD 0.25            /* degC per unit load off set point */
#define SUPPLY_OU_SD 0.06           /* degC: control error */
#define SUPPLY_OU_TAU 30.0          /* s */
#define RETURN_TAU 30.0             /* s: loop transport */
#define AMB_MEAN 22.0               /* degC: wet bulb */
#define AMB_DAILY 4.0               /* degC */
#define AMB_OU_SD 0.3               /* degC */
#define AMB_OU_TAU 300.0            /* s */
#define COND_APPROACH 4.0           /* degC over wet bulb at no load */
#define COND_LOAD 5.0               /* degC more at full load */
#define EVAP_APPROACH 2.5           /* degC: refrigerant below supply */
#define COND_APPROACH_SAT 1.5       /* degC: refrigerant over cond water */
#define COP_ETA 0.55                /* fraction of Carnot */
#define COMP_I0 25.0                /* A: compressor at no load */
#define COMP_A_PER_KW 1.64          /* A/kW: 400 V three phase, pf 0.88 */

/* Sensor noise (std dev, channel units) and decimals, by channel; noise is
 * near conf/demo.ini's floors so the model is not floor-dominated. */
static const struct {
	const char *name;
	double noise;
	unsigned decimals;
} scn_chans[QW_SCN_NCHAN] = {
	[QW_SCN_CHW_SUPPLY_T] = {"chw_supply_t", 0.03, 2},
	[QW_SCN_CHW_RETURN_T] = {"chw_return_t", 0.03, 2},
	[QW_SCN_CHW_FLOW] = {"chw_flow", 0.25, 1},
	[QW_SCN_COMP_AMPS] = {"comp_amps", 0.8, 1},
	[QW_SCN_COND_T] = {"cond_t", 0.06, 2},
	[QW_SCN_PUMP_SPEED] = {"pump_speed", 2.5, 0},
	[QW_SCN_PUMP_FLOW] = {"pump_flow", 0.2, 1},
	[QW_SCN_PUMP_DP] = {"pump_dp", 0.8, 1},
	[QW_SCN_MOTOR_AMPS] = {"motor_amps", 0.2, 2},
	[QW_SCN_BEARING_T] = {"bearing_t", 0.05, 1},
};

static const char *const scn_kinds[QW_SCN_NKIND] = {
	"step", "drift", "stuck", "break", "dropout"};

struct qw_scn {
	gsl_rng *rng;
	double dt, start;        /* s; epoch s of reading 0 */
	uint64_t k;              /* readings generated */
	double load_u, fast_u, supply_u, amb_u; /* OU states */
	double speed;            /* s, fraction of rated (lagged) */
	double ret, bearing;     /* lagged: return-supply rise, bearing, degC */
	int primed;              /* lags set to steady state */
	double prev[QW_SCN_NCHAN]; /* last values put out (for stuck) */
	size_t nfaults;
	struct qw_scn_fault *faults;
	double *held;            /* per fault: value a stuck sensor holds */
	unsigned char *started;  /* per fault: its first step was seen */
};

qw_scn *qw_scn_alloc(uint64_t seed, double dt, double start,
		     const struct qw_scn_fault *faults, size_t nfaults)
{
	qw_scn *s;
	size_t i;

	if (!(dt > 0) || !isfinite(dt) || !isfinite(start) ||
	    (nfaults > 0 && faults == NULL))
		return NULL;
	for (i = 0; i < nfaults; i++)
		if (faults[i].kind < 0 || faults[i].kind >= QW_SCN_NKIND ||
		    faults[i].chan >= QW_SCN_NCHAN || !(faults[i].at >= 0) ||
		    !(faults[i].duration > 0) || !isfinite(faults[i].size))
			return NULL;
	s = calloc(1, sizeof *s);
	if (s == NULL)
		return NULL;
	s->rng = gsl_rng_alloc(gsl_rng_mt19937);
	s->faults = calloc(nfaults + 1, sizeof *s->faults);
	s->held = calloc(nfaults + 1, sizeof *s->held);
	s->started = calloc(nfaults + 1, 1);
	if (s->rng == NULL || s->faults == NULL || s->held == NULL ||
	    s->started == NULL)
		goto fail;
	/* MT19937 takes an unsigned long seed; fold 64 bits into it. */
	gsl_rng_set(s->rng, (unsigned long)(seed ^ (seed >> 32)));
	if (nfaults > 0)
		memcpy(s->faults, faults, nfaults * sizeof *faults);
	s->nfaults = nfaults;
	s->dt = dt;
	s->start = start;
	for (i = 0; i < QW_SCN_NCHAN; i++)
		s->prev[i] = NAN;
	return s;
fail:
	qw_scn_free(s);
	return NULL;
}

void qw_scn_free(qw_scn *s)
{
	if (s == NULL)
		return;
	gsl_rng_free(s->rng);
	free(s->faults);
	free(s->held);
	free(s->started);
	free(s);
}

uint64_t qw_scn_count(const qw_scn *s)
{
	return s->k;
}

/* One exact step of an Ornstein-Uhlenbeck process of sd sd, memory tau. */
static double scn_ou(qw_scn *s, double u, double sd, double tau)
{
	double a = exp(-s->dt / tau);

	return a * u + sd * sqrt(1.0 - a * a) *
		       gsl_ran_gaussian_ziggurat(s->rng, 1.0);
}

/* Fraction of the way a first-order lag of time constant tau moves in dt. */
static double scn_lag(const qw_scn *s, double tau)
{
	return 1.0 - exp(-s->dt / tau);
}

/* The true (noise-free) plant state at time t (epoch s) into v[]. */
static void scn_plant(qw_scn *s, double t, double *v)
{
	double day = SCN_TWO_PI * (fmod(t, SCN_DAY) - LOAD_PEAK_S) / SCN_DAY;
	double load, s3, flow, supply, amb, cond, tev, tcs, cop, dt_ss, brg_ss;

	s->load_u = scn_ou(s, s->load_u, LOAD_OU_SD, LOAD_OU_TAU);
	s->fast_u = scn_ou(s, s->fast_u, LOAD_FAST_SD, LOAD_FAST_TAU);
	s->supply_u = scn_ou(s, s->supply_u, SUPPLY_OU_SD, SUPPLY_OU_TAU);
	s->amb_u = scn_ou(s, s->amb_u, AMB_OU_SD, AMB_OU_TAU);
	load = LOAD_MEAN + LOAD_DAILY * cos(day) + s->load_u + s->fast_u;
	load = fmin(fmax(load, LOAD_MIN), LOAD_MAX);
	if (!s->primed)
		s->speed = SPEED_MIN + SPEED_SPAN * load;
	s->speed += (SPEED_MIN + SPEED_SPAN * load - s->speed) *
		    scn_lag(s, SPEED_TAU);
	s3 = s->speed * s->speed * s->speed;
	flow = FLOW_D * s->speed;                       /* affinity: Q ~ n */
	supply = SUPPLY_SP + SUPPLY_LOAD * (load - LOAD_MEAN) + s->supply_u;
	dt_ss = load * LOAD_D / (flow * WATER_CP);      /* Q = m cp dT */
	brg_ss = BEARING_ROOM + BEARING_PER_KW * SHAFT_D * s3; /* P ~ n^3 */
	if (!s->primed) {
		s->ret = dt_ss;
		s->bearing = brg_ss;
		s->primed = 1;
	}
	s->ret += (dt_ss - s->ret) * scn_lag(s, RETURN_TAU);
	s->bearing += (brg_ss - s->bearing) * scn_lag(s, BEARING_TAU);
	amb = AMB_MEAN + AMB_DAILY * cos(day) + s->amb_u;
	cond = amb + COND_APPROACH + COND_LOAD * load;
	tev = supply - EVAP_APPROACH + SCN_KELVIN;
	tcs = cond + COND_APPROACH_SAT + SCN_KELVIN;
	cop = COP_ETA * tev / (tcs - tev);              /* Carnot: Te/(Tc-Te) */
	v[QW_SCN_CHW_SUPPLY_T] = supply;
	v[QW_SCN_CHW_RETURN_T] = supply + s->ret;
	v[QW_SCN_CHW_FLOW] = flow;
	v[QW_SCN_COMP_AMPS] = COMP_I0 + COMP_A_PER_KW * load * LOAD_D / cop;
	v[QW_SCN_COND_T] = cond;
	v[QW_SCN_PUMP_SPEED] = SPEED_RATED * s->speed;
	v[QW_SCN_PUMP_FLOW] = flow;
	v[QW_SCN_PUMP_DP] = DP_D * s->speed * s->speed; /* affinity: dp ~ n^2 */
	v[QW_SCN_MOTOR_AMPS] = MOTOR_I0 + MOTOR_I1 * s3;
	v[QW_SCN_BEARING_T] = s->bearing;
}

/* Rounds to 10^-d as m / 10^d, the exact double nearest the decimal. */
static double scn_round(double v, unsigned d)
{
	double scale = pow(10.0, (double)d);

	return isfinite(v) ? nearbyint(v * scale) / scale : v;
}

int qw_scn_active(const struct qw_scn_fault *f, double dt, uint64_t k)
{
	double e = (double)k * dt, eps = 1e-6 * dt; /* k dt's rounding */

	return e >= f->at - eps && e < f->at + f->duration - eps;
}

/* Applies the additive and multiplicative faults active at e to x[]. */
static void scn_distort(qw_scn *s, double e, double *x, unsigned char *hit)
{
	size_t i;

	for (i = 0; i < s->nfaults; i++) {
		const struct qw_scn_fault *f = &s->faults[i];

		if (!qw_scn_active(f, s->dt, s->k))
			continue;
		hit[f->chan] = 1;
		if (f->kind == QW_SCN_STEP)
			x[f->chan] += f->size;
		else if (f->kind == QW_SCN_DRIFT)
			x[f->chan] += f->size * (e - f->at) / f->duration;
		else if (f->kind == QW_SCN_BREAK)
			x[f->chan] *= 1.0 + f->size;
	}
}

/* Stuck and dropout replace the rounded value. */
static void scn_replace(qw_scn *s, double *x)
{
	size_t i;

	for (i = 0; i < s->nfaults; i++) {
		const struct qw_scn_fault *f = &s->faults[i];

		if (!qw_scn_active(f, s->dt, s->k))
			continue;
		if (f->kind == QW_SCN_STUCK) {
			if (!s->started[i])
				s->held[i] = isnan(s->prev[f->chan])
						     ? x[f->chan]
						     : s->prev[f->chan];
			x[f->chan] = s->held[i];
		} else if (f->kind == QW_SCN_DROPOUT) {
			x[f->chan] = NAN;
		}
		s->started[i] = 1;
	}
}

void qw_scn_next(qw_scn *s, double *x, unsigned char *faulted)
{
	unsigned char hit[QW_SCN_NCHAN];
	double e = (double)s->k * s->dt;
	unsigned c;

	memset(hit, 0, sizeof hit);
	scn_plant(s, s->start + e, x);
	for (c = 0; c < QW_SCN_NCHAN; c++)
		x[c] += scn_chans[c].noise *
			gsl_ran_gaussian_ziggurat(s->rng, 1.0);
	scn_distort(s, e, x, hit);
	for (c = 0; c < QW_SCN_NCHAN; c++)
		x[c] = scn_round(x[c], scn_chans[c].decimals);
	scn_replace(s, x);
	memcpy(s->prev, x, sizeof s->prev);
	if (faulted != NULL)
		memcpy(faulted, hit, sizeof hit);
	s->k++;
}

int qw_scn_chan_find(const char *name)
{
	unsigned c;

	for (c = 0; c < QW_SCN_NCHAN; c++)
		if (strcmp(name, scn_chans[c].name) == 0)
			return (int)c;
	return -1;
}

const char *qw_scn_chan_name(unsigned chan)
{
	return chan < QW_SCN_NCHAN ? scn_chans[chan].name : "?";
}

unsigned qw_scn_chan_decimals(unsigned chan)
{
	return chan < QW_SCN_NCHAN ? scn_chans[chan].decimals : 0;
}

int qw_scn_kind_find(const char *name)
{
	int k;

	for (k = 0; k < QW_SCN_NKIND; k++)
		if (strcmp(name, scn_kinds[k]) == 0)
			return k;
	return -1;
}

const char *qw_scn_kind_name(int kind)
{
	return kind >= 0 && kind < QW_SCN_NKIND ? scn_kinds[kind] : "?";
}

/* The demo schedule as fractions of the run: start, length, kind,
 * channel, size.  Chosen so that with conf/demo.ini (chiller warm-up 6000
 * readings, pump skid 3000) and a run of 12000 readings every fault but the
 * first falls after both warm-ups, each is followed by time to clear, and
 * each kind shows once; the dropout shows that missing data raises no
 * alarm. */
static const struct {
	double at, len;
	int kind;
	unsigned chan;
	double size;
} scn_demo[] = {
	{0.44, 0.06, QW_SCN_BREAK, QW_SCN_PUMP_FLOW, -0.08},   /* fouling */
	{0.54, 0.05, QW_SCN_STEP, QW_SCN_CHW_SUPPLY_T, 0.45},  /* degC */
	{0.63, 0.07, QW_SCN_STUCK, QW_SCN_PUMP_SPEED, 0.0},
	{0.74, 0.08, QW_SCN_DRIFT, QW_SCN_CHW_RETURN_T, 1.5},  /* degC */
	{0.87, 0.05, QW_SCN_DROPOUT, QW_SCN_COND_T, 0.0},
};

size_t qw_scn_demo(uint64_t count, double dt, struct qw_scn_fault *out,
		   size_t cap)
{
	size_t n = sizeof scn_demo / sizeof scn_demo[0], i;

	for (i = 0; i < n && i < cap; i++) {
		memset(&out[i], 0, sizeof out[i]);
		/* Whole readings, so windows do not depend on rounding. */
		out[i].at = floor(scn_demo[i].at * (double)count) * dt;
		out[i].duration = fmax(floor(scn_demo[i].len * (double)count),
				       1.0) * dt;
		out[i].kind = scn_demo[i].kind;
		out[i].chan = scn_demo[i].chan;
		out[i].size = scn_demo[i].size;
	}
	return n;
}

enum { FK_AT, FK_KIND, FK_GROUP, FK_CHANNEL, FK_SIZE, FK_DURATION, FK_N };
static const char *const scn_fkeys[FK_N] = {
	"at", "kind", "group", "channel", "size", "duration"};
#define SCN_TOKEN_MAX 128 /* bytes in one KEY=VALUE of a fault line */

/* Stores one KEY=VALUE token v of key k into f.  0 or QW_EFORMAT. */
static int scn_fault_key(int k, const char *v, struct qw_scn_fault *f,
			 char *err, size_t errlen)
{
	int unit, c;

	switch (k) {
	case FK_AT:
	case FK_DURATION:
		if (qw_num_duration(v, &unit, k == FK_AT ? &f->at
							   : &f->duration) != 0 ||
		    (k == FK_AT ? !(f->at >= 0) : !(f->duration > 0)))
			break;
		return 0;
	case FK_KIND:
		if ((f->kind = qw_scn_kind_find(v)) < 0)
			break;
		return 0;
	case FK_GROUP:
		if (strlen(v) >= sizeof f->group || v[0] == '\0')
			break;
		strcpy(f->group, v);
		return 0;
	case FK_CHANNEL:
		if ((c = qw_scn_chan_find(v)) < 0)
			break;
		f->chan = (unsigned)c;
		return 0;
	default:
		if (qw_num_double(v, (size_t)-1, 0, 0, &f->size) != 0)
			break;
		return 0;
	}
	snprintf(err, errlen, "%s: bad value '%s' (%s)", scn_fkeys[k], v,
		 k == FK_AT ? "seconds >= 0, e.g. 90 or 9min"
		 : k == FK_DURATION ? "seconds > 0, e.g. 120 or 2min"
		 : k == FK_KIND ? "step, drift, stuck, break or dropout"
		 : k == FK_CHANNEL ? "a channel of the simulated plant"
		 : k == FK_GROUP ? "a group name" : "a finite number");
	return QW_ERROR(QW_EFORMAT);
}

/* Splits the next blank-separated token off *p into tok; 0 at the end of
 * the line or at a '#', 1 with a token, QW_EFORMAT when too long. */
static int scn_token(const char **p, char *tok, size_t cap)
{
	const char *s = *p, *e;

	s += strspn(s, " \t\r\n");
	if (*s == '\0' || *s == '#')
		return 0;
	e = s + strcspn(s, " \t\r\n");
	*p = e;
	if ((size_t)(e - s) >= cap)
		return QW_ERROR(QW_EFORMAT);
	memcpy(tok, s, (size_t)(e - s));
	tok[e - s] = '\0';
	return 1;
}

int qw_scn_fault_parse(const char *line, struct qw_scn_fault *f, char *err,
		       size_t errlen)
{
	static const int required[] = {FK_AT, FK_KIND, FK_CHANNEL,
				       FK_DURATION};
	struct qw_scn_fault g;
	unsigned char seen[FK_N] = {0};
	char tok[SCN_TOKEN_MAX], *eq;
	const char *p = line;
	int rc, k, ntok = 0;
	size_t i;

	memset(&g, 0, sizeof g);
	while ((rc = scn_token(&p, tok, sizeof tok)) == 1) {
		ntok++;
		eq = strchr(tok, '=');
		if (eq != NULL)
			*eq = '\0';
		for (k = 0; k < FK_N && strcmp(tok, scn_fkeys[k]) != 0; k++)
			;
		if (eq == NULL || k == FK_N || seen[k]) {
			snprintf(err, errlen, "'%s': %s", tok,
				 eq == NULL ? "expected KEY=VALUE"
				 : k == FK_N ? "unknown key (at, kind, group, "
					       "channel, size, duration)"
					     : "key given twice");
			return QW_ERROR(QW_EFORMAT);
		}
		seen[k] = 1;
		if (scn_fault_key(k, eq + 1, &g, err, errlen) != 0)
			return QW_EFORMAT;
	}
	if (rc < 0) {
		snprintf(err, errlen, "a token longer than %d bytes",
			 SCN_TOKEN_MAX - 1);
		return QW_EFORMAT;
	}
	if (ntok == 0)
		return 1;
	for (i = 0; i < sizeof required / sizeof required[0]; i++)
		if (!seen[required[i]]) {
			snprintf(err, errlen, "%s: missing",
				 scn_fkeys[required[i]]);
			return QW_ERROR(QW_EFORMAT);
		}
	*f = g;
	return 0;
}
