"""Replay summary, the figures about dependent readings, end to end: the
delivered alarms per day and the lag-1 autocorrelation of the scores in
`quadwatch replay --json` equal the definitions of quadwatch-replay(1)
recomputed here, independently, from the --scores file with numpy
(numpy.dot over the centred scores, the Box-Jenkins estimator); the
warning about persistence is present on strongly autocorrelated readings
with persist 3/5 (in --json, the human summary and --report) and absent on
independent readings, and on the same autocorrelated readings with
persist 1/1 (the rule that does not assume independence of successive
exceedances).  Readings that come at another rate than the configured
one are measured in data time and warned about.  A span of zero data time
gives null, not a division by zero."""
import csv
import json
import os
import subprocess
import xml.etree.ElementTree as ET

import qwtest as q

np = q.np
q.need_program()
tmp = q.tmpdir()
N = 20000
WARMUP = 500
STEP = 0.5           # s between readings
RATE = 1.0 / STEP    # the configured nominal rate, but in one case
CH = ["chw_supply_t", "chw_return_t", "chw_flow", "chiller_kw"]
MEAN = np.array([6.85, 12.4, 38.5, 310.0])
SD = np.array([0.05, 0.05, 0.15, 2.5])
TOL_R1 = 1e-7        # absolute: the scores file prints q to 10 digits
TOL_APD = 1e-9       # relative: times are printed to the microsecond


def readings(phi, seed):
    """N readings, each channel an AR(1) of coefficient phi around its
    mean with stationary standard deviation SD (phi = 0: independent)."""
    rng = np.random.default_rng(seed)
    e = rng.standard_normal((N, len(CH)))
    z = np.empty_like(e)
    z[0] = e[0]
    c = np.sqrt(1.0 - phi * phi)
    for i in range(1, N):
        z[i] = phi * z[i - 1] + c * e[i]
    t = 1.75e9 + STEP * np.arange(N)
    return t, MEAN + z * SD


def write_csv(name, t, x):
    path = os.path.join(tmp, name)
    with open(path, "w") as f:
        f.write("time," + ",".join(CH) + "\n")
        for i in range(len(t)):
            f.write("%.6f,%s\n" % (t[i], ",".join(repr(float(v))
                                                  for v in x[i])))
    return path


def write_ini(name, persist, rate=RATE):
    path = os.path.join(tmp, name)
    g = {"channels": CH, "half_life": 2000, "alarms_per_day": 200,
         "rate": rate, "warmup": WARMUP, "persist": persist}
    with open(path, "w") as f:
        f.write(q.ini(tmp, {"plant": g}, [">tcp://127.0.0.1:5999"]))
    return path


def replay(ini, data, *more):
    scores = os.path.join(tmp, "scores.csv")
    r = subprocess.run([q.QW, "replay", "-c", ini, "--json", "--scores",
                        scores, data] + list(more), capture_output=True,
                       text=True)
    q.check(r.returncode == 0, "exit %d %s" % (r.returncode, r.stderr))
    with open(scores) as f:
        rows = list(csv.DictReader(f))
    return json.loads(r.stdout), rows


def recompute(rows, eligible_n):
    """Delivered alarms per day and r1 from the scores rows.  Complete
    readings only: the model has learned the first reading and every
    scored one before, so row i (0-based) is after warm-up when
    i + 1 >= WARMUP."""
    el = rows[WARMUP - 1:]
    q.check(len(el) == eligible_n, "eligible %d, rows after warm-up %d"
            % (eligible_n, len(el)))
    alarm = [0] + [int(r["alarm"]) for r in rows]
    raises = sum(1 for i in range(1, len(alarm))
                 if alarm[i] and not alarm[i - 1])
    tt = np.array([float(r["time"]) for r in el])
    span = tt.max() - tt.min()
    apd = raises * 86400.0 / span if span > 0 else None
    s = np.array([float(r["score"]) for r in el])
    d = s - s.mean()
    r1 = float(np.dot(d[1:], d[:-1]) / np.dot(d, d))
    return raises, apd, span, r1


def check_figures(tag, out, rows):
    g = out["groups"]["plant"]
    raises, apd, span, r1 = recompute(rows, g["eligible"])
    q.note("%s: alarms %d, %.4g per day delivered (%r configured), "
           "expected %.3g, lag-1 %.4f, warnings %r" % (
               tag, g["alarms"], g["alarms_per_day"],
               g["configured_alarms_per_day"], g["expected_alarms"],
               g["score_lag1_autocorr"], g["warnings"]))
    q.check(raises == g["alarms"], "%s: raises %d vs %d" %
            (tag, raises, g["alarms"]))
    q.check(raises > 0, "%s: the example needs alarms" % tag)
    q.check(abs(g["guard_span_s"] - span) <= TOL_APD * span,
            "%s: span %r vs %r" % (tag, g["guard_span_s"], span))
    q.check(abs(g["alarms_per_day"] - apd) <= TOL_APD * apd,
            "%s: alarms_per_day %r, want %r" % (tag, g["alarms_per_day"],
                                                apd))
    q.check(g["configured_alarms_per_day"] == 200.0, "%s: configured" % tag)
    q.check(abs(g["score_lag1_autocorr"] - r1) <= TOL_R1,
            "%s: lag-1 %r, want %r" % (tag, g["score_lag1_autocorr"], r1))
    q.check(g["score_lag1_n"] == len(rows) - (WARMUP - 1), "%s: n" % tag)
    # one group: the top level repeats it
    for k in ("alarms_per_day", "configured_alarms_per_day",
              "score_lag1_autocorr"):
        q.check(out[k] == g[k], "%s: top-level %s" % (tag, k))
    q.check(len(out["warnings"]) == len(g["warnings"]), "%s: top-level "
            "warnings %r" % (tag, out["warnings"]))
    return g


def advice_in(text):
    return ("dynamics = var1" in text and "dynamics = ar1" in text and
            "quadwatch fit" in text)


# Independent readings, persist 3/5: figures as defined, no warning.
ini35 = write_ini("p35.ini", "3/5")
ini11 = write_ini("p11.ini", "1/1")
t, x = readings(0.0, seed=11)
flat = write_csv("independent.csv", t, x)
out, rows = replay(ini35, flat)
g = check_figures("independent 3/5", out, rows)
q.check(abs(g["score_lag1_autocorr"]) < 0.05, "independent: lag-1 %r"
        % g["score_lag1_autocorr"])
q.check(g["warnings"] == [] and out["warnings"] == [],
        "independent: warnings %r" % g["warnings"])

# AR(1) readings, phi = 0.9 (lag-1 of q about phi^2 = 0.81): persist 3/5
# warns, naming the remedies; 1/1 does not.
t, x = readings(0.9, seed=12)
ar = write_csv("ar1.csv", t, x)
out, rows = replay(ini35, ar)
g = check_figures("AR(1) 3/5", out, rows)
q.check(g["score_lag1_autocorr"] > 0.5, "AR(1): lag-1 %r"
        % g["score_lag1_autocorr"])
q.check(len(g["warnings"]) >= 1 and
        any("autocorrelated" in w and "persist 3/5" in w and advice_in(w)
            for w in g["warnings"]), "AR(1) 3/5: warnings %r"
        % g["warnings"])
q.check(all(w.startswith("group plant: ") for w in out["warnings"]),
        "top-level warnings name the group: %r" % out["warnings"])
page = os.path.join(tmp, "r.html")
r = subprocess.run([q.QW, "replay", "-c", ini35, "--report", page, ar],
                   capture_output=True, text=True)
q.check(r.returncode == 0, "human exit %d %s" % (r.returncode, r.stderr))
warn_lines = [ln for ln in r.stdout.splitlines()
              if ln.startswith("  warning: ")]
q.check(warn_lines and advice_in(warn_lines[0]),
        "human summary: no warning line:\n" + r.stdout)
q.check("lag-1 autocorrelation %.3f" % g["score_lag1_autocorr"]
        in r.stdout, "human summary: lag-1 figure:\n" + r.stdout)
q.check("%.4g delivered" % g["alarms_per_day"] in r.stdout,
        "human summary: delivered alarms per day:\n" + r.stdout)
with open(page) as f:
    html = f.read()
q.check('class="warn"' in html and "dynamics = var1" in html,
        "report: no warning")
ET.fromstring(html)  # still well-formed XML (raises if not)

# The independent readings against a configured rate of 10/s: the
# delivered alarms per day are still counted in data time (alarms / days,
# in readings at the nominal rate, would be 5 times larger), and the
# summary says the rate is wrong.
ini10 = write_ini("p35r10.ini", "3/5", rate=10)
out, rows = replay(ini10, flat)
g = check_figures("independent 3/5 at rate 10", out, rows)
q.check(abs(g["alarms_per_day"] - g["alarms"] / g["days"]) >
        0.5 * g["alarms_per_day"], "nominal days used")
q.check(len(g["warnings"]) == 1 and "rate = 10" in g["warnings"][0] and
        "came at 2 per second" in g["warnings"][0],
        "rate 10: warnings %r" % g["warnings"])

out, rows = replay(ini11, ar)
g = check_figures("AR(1) 1/1", out, rows)
q.check(g["warnings"] == [], "AR(1) 1/1: warnings %r" % g["warnings"])

# Two groups on the same columns, 3/5 and 1/1: the top level sums the
# delivered and configured rates, takes the highest lag-1 and lists the
# warnings of the 3/5 group only, each naming it.
two = os.path.join(tmp, "two.ini")
g35 = {"channels": CH, "half_life": 2000, "alarms_per_day": 200,
       "rate": RATE, "warmup": WARMUP, "persist": "3/5"}
g11 = dict(g35, persist="1/1", alarms_per_day=50)
with open(two, "w") as f:
    f.write(q.ini(tmp, {"plant": g35, "plant_b": g11},
                  [">tcp://127.0.0.1:5999"]))
out, rows = replay(two, ar)
ga, gb = out["groups"]["plant"], out["groups"]["plant_b"]
q.check(out["alarms_per_day"] == ga["alarms_per_day"] + gb["alarms_per_day"]
        and out["configured_alarms_per_day"] == 250.0 and
        out["score_lag1_autocorr"] == max(ga["score_lag1_autocorr"],
                                          gb["score_lag1_autocorr"]),
        "two groups, top level: %r" % {k: out[k] for k in (
            "alarms_per_day", "configured_alarms_per_day",
            "score_lag1_autocorr")})
q.check(gb["warnings"] == [] and len(ga["warnings"]) >= 1 and
        out["warnings"] == ["group plant: " + w for w in ga["warnings"]],
        "two groups, warnings %r" % out["warnings"])

# Zero span: every reading at the same time (allowed with a half-life in
# readings): no delivered rate; and no reading after warm-up: no figures.
t0 = np.full(2 * WARMUP, 1.75e9)
same = write_csv("same.csv", t0, x[:2 * WARMUP])
out, rows = replay(ini35, same)
g = out["groups"]["plant"]
q.check(g["guard_span_s"] == 0.0 and g["alarms_per_day"] is None and
        out["alarms_per_day"] is None, "zero span: %r" % g)
r = subprocess.run([q.QW, "replay", "-c", ini35, same], capture_output=True,
                   text=True)
q.check(r.returncode == 0 and "alarms per day: not known" in r.stdout,
        "zero span, human:\n" + r.stdout + r.stderr)
short = write_csv("short.csv", t[:100], x[:100])
out, rows = replay(ini35, short)
g = out["groups"]["plant"]
q.check(g["eligible"] == 0 and g["alarms_per_day"] is None and
        g["score_lag1_autocorr"] is None and g["warnings"] == [],
        "no reading after warm-up: %r" % g)
print("ok")
