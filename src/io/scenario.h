/* scenario.h: the invented chilled-water plant behind `quadwatch sim`.
 *
 * A pure generator (no I/O, no sockets, no globals): a seeded state that
 * yields, one time step at a time, the ten measured channels of a chiller
 * and the pump skid that feeds it, with physically linked values, sensor
 * noise at realistic resolution, slow load drift and injected faults.  See
 * scenario.c for the physics and quadwatch-sim(1) for the fault line
 * format. */
#ifndef QW_SCENARIO_H
#define QW_SCENARIO_H

#include <stddef.h>
#include <stdint.h>

/* The plant's measured channels, by index; names as in conf/demo.ini. */
enum qw_scn_chan {
	QW_SCN_CHW_SUPPLY_T = 0, /* chilled-water supply temperature, degC */
	QW_SCN_CHW_RETURN_T = 1, /* chilled-water return temperature, degC */
	QW_SCN_CHW_FLOW = 2,     /* chiller's flow meter, l/s */
	QW_SCN_COMP_AMPS = 3,    /* compressor current, A */
	QW_SCN_COND_T = 4,       /* condenser water temperature, degC */
	QW_SCN_PUMP_SPEED = 5,   /* pump speed, rpm */
	QW_SCN_PUMP_FLOW = 6,    /* pump skid's flow meter, l/s */
	QW_SCN_PUMP_DP = 7,      /* pump differential pressure, kPa */
	QW_SCN_MOTOR_AMPS = 8,   /* pump motor current, A */
	QW_SCN_BEARING_T = 9,    /* pump bearing temperature, degC */
	QW_SCN_NCHAN = 10
};

/* Fault kinds; what each does to the measured value while active. */
enum qw_scn_kind {
	QW_SCN_STEP = 0,    /* adds size (channel units) */
	QW_SCN_DRIFT = 1,   /* adds size * (elapsed / duration): a ramp */
	QW_SCN_STUCK = 2,   /* holds the last reading before the fault */
	QW_SCN_BREAK = 3,   /* multiplies by (1 + size): a correlation break,
			       e.g. a fouled flow meter reading low while the
			       speed and the current stay */
	QW_SCN_DROPOUT = 4, /* NaN: the reading is missing */
	QW_SCN_NKIND = 5
};

#define QW_SCN_NAME_MAX 64 /* bytes in a group or channel name, as config */

/* One injected fault.  Active for readings whose time since the start,
 * t, satisfies at <= t < at + duration. */
struct qw_scn_fault {
	double at;        /* seconds after the first reading, >= 0 */
	double duration;  /* seconds, > 0 */
	int kind;         /* enum qw_scn_kind */
	unsigned chan;    /* enum qw_scn_chan */
	double size;      /* step/drift: channel units; break: gain - 1 */
	char group[QW_SCN_NAME_MAX]; /* the group named in a fault line ("":
					any group holding chan) */
};

typedef struct qw_scn qw_scn;

/* seed: any value (same seed, same dt, same start, same faults: the same
 * values, bit for bit).  dt: seconds between readings, > 0.  start: epoch
 * seconds of the first reading (sets the time of day of the load cycle).
 * faults[nfaults] are copied.  NULL on a bad argument or no memory. */
qw_scn *qw_scn_alloc(uint64_t seed, double dt, double start,
		     const struct qw_scn_fault *faults, size_t nfaults);
/* NULL is a no-op. */
void qw_scn_free(qw_scn *s);
/* Advances one step: x[QW_SCN_NCHAN] the measured values (NaN = missing),
 * faulted[QW_SCN_NCHAN] 1 where a fault is active on the channel (may be
 * NULL).  No allocation. */
void qw_scn_next(qw_scn *s, double *x, unsigned char *faulted);
/* Whether fault f is active on reading k of a run with readings dt
 * seconds apart (at <= k dt < at + duration, tolerant of rounding). */
int qw_scn_active(const struct qw_scn_fault *f, double dt, uint64_t k);
/* Readings generated so far. */
uint64_t qw_scn_count(const qw_scn *s);

/* Channel name <-> index; -1 when unknown. */
int qw_scn_chan_find(const char *name);
const char *qw_scn_chan_name(unsigned chan);
/* Decimals the channel is reported with (its resolution is 10^-d). */
unsigned qw_scn_chan_decimals(unsigned chan);
/* Kind name ("step", "drift", "stuck", "break", "dropout") <-> kind. */
int qw_scn_kind_find(const char *name);
const char *qw_scn_kind_name(int kind);

/* The built-in demo schedule for a run of count readings dt apart: faults
 * of every kind at fixed fractions of the run (see scenario.c).  Writes at
 * most cap faults; returns how many the schedule has. */
size_t qw_scn_demo(uint64_t count, double dt, struct qw_scn_fault *out,
		   size_t cap);

/* Parses one line of a fault file:
 *   at=SECONDS kind=KIND group=G channel=C size=X duration=SECONDS
 * (keys in any order, separated by blanks; size defaults to 0 and is
 * ignored by stuck and dropout; group is optional).  A blank line or one
 * whose first non-blank is '#' returns 1 with *f untouched.  Returns 0,
 * 1, or QW_EFORMAT with a message naming the key in err. */
int qw_scn_fault_parse(const char *line, struct qw_scn_fault *f, char *err,
		       size_t errlen);

#endif
