"""Replay summary, the tuning help and the calibration figure, end to end
against numpy and scipy on the --scores file:

- tuning.limit is numpy.quantile of the eligible full-channel scores at
  1 - alpha (linear interpolation, Hyndman & Fan type 7: numpy's
  default), tuning.alpha numpy.quantile of their p-values at alpha, and
  tuning.ks scipy.stats.kstest(p-values, "uniform").statistic;
- exact (resolution 0) on a short recording, and on a long one while
  alpha times the readings stays below the ranks kept exactly; within the
  stated resolution (and saying so) when the quantile comes from the
  histogram or the KS distance from bins;
- the replay's memory does not grow with the recording: eight times the
  readings take no more than a few MB more (before, the summary kept a
  point per reading, 48 bytes each: 64 MB here).
"""
import csv
import io
import json
import os
import subprocess
import time

import qwtest as q

np = q.np
q.need_program()
from scipy import stats  # noqa: E402 (after the program check)

tmp = q.tmpdir()
WARMUP = 500
CH = ["cw_in_t", "cw_out_t", "cw_flow"]
TOL_SCORE = 6e-10    # relative: the scores file prints q to 10 digits
TOL_PV = 1e-5        # relative: ... the p-value to 6
TOL_KS = 1e-6        # absolute: the p-values' rounding moves KS this much
KEEP = 8192          # ranks kept exactly (digest.h QW_EXTREME_KEEP)
KS_BINS = 65536      # digest.h QW_KS_BINS


def readings(n, seed):
    rng = np.random.default_rng(seed)
    t = 1.76e9 + np.arange(n, dtype=float)
    return t, np.array([7.0, 12.0, 40.0]) + rng.standard_normal((n, 3))


def write_csv(name, t, x):
    path = os.path.join(tmp, name)
    np.savetxt(path, np.column_stack([t, x]), delimiter=",", fmt="%.10g",
               header="time," + ",".join(CH), comments="")
    return path


def write_ini(name, apd):
    path = os.path.join(tmp, name)
    g = {"channels": CH, "half_life": 20000, "alarms_per_day": apd,
         "rate": 1.0, "warmup": WARMUP}
    with open(path, "w") as f:
        f.write(q.ini(tmp, {"cw": g}, [">tcp://127.0.0.1:5999"]))
    return path


def replay(ini, data):
    scores = os.path.join(tmp, "scores.csv")
    r = subprocess.run([q.QW, "replay", "-c", ini, "--json", "--scores",
                        scores, data], capture_output=True, text=True)
    q.check(r.returncode == 0, "exit %d %s" % (r.returncode, r.stderr))
    with open(scores) as f:
        rows = list(csv.DictReader(f))
    # the model learned the first reading and every scored one before, so
    # row i (0-based) is after warm-up when i + 1 >= WARMUP
    el = rows[WARMUP - 1:]
    s = np.array([float(r["score"]) for r in el])
    pv = np.array([float(r["pvalue"]) for r in el])
    g = json.loads(r.stdout)["groups"]["cw"]
    q.check(g["eligible"] == len(el), "eligible %d, rows after warm-up %d"
            % (g["eligible"], len(el)))
    return g, s, pv


def close(got, want, rel):
    return abs(got - want) <= rel * abs(want)


def check(tag, n, apd, exact_quantiles, exact_ks):
    t, x = readings(n, seed=n)
    g, s, pv = replay(write_ini("t.ini", apd), write_csv("t.csv", t, x))
    tu, alpha = g["tuning"], g["alpha"]
    want_limit = float(np.quantile(s, 1 - alpha))
    want_alpha = float(np.quantile(pv, alpha))
    want_ks = float(stats.kstest(pv, "uniform").statistic)
    q.note("%s: n %d, alpha %.3g (alpha n %.0f): limit %.10g vs numpy "
           "%.10g, alpha %.6g vs %.6g, KS %.6g vs scipy %.6g, "
           "resolutions %s %s %s" % (
               tag, len(s), alpha, alpha * len(s), tu["limit"], want_limit,
               tu["alpha"], want_alpha, tu["ks"], want_ks,
               tu["limit_resolution"], tu["alpha_resolution"],
               tu["ks_resolution"]))
    q.check(tu["n"] == len(s) and tu["ks_n"] == len(pv), "%s: counts" % tag)
    if exact_quantiles:
        q.check(tu["limit_resolution"] == 0 and tu["alpha_resolution"] == 0,
                "%s: quantiles should be exact" % tag)
        q.check(close(tu["limit"], want_limit, TOL_SCORE),
                "%s: limit %r, numpy %r" % (tag, tu["limit"], want_limit))
        q.check(close(tu["alpha"], want_alpha, TOL_PV),
                "%s: alpha %r, numpy %r" % (tag, tu["alpha"], want_alpha))
    else:
        res = 1.0 / 128
        q.check(tu["limit_resolution"] == res and
                tu["alpha_resolution"] == res,
                "%s: resolutions %r %r" % (tag, tu["limit_resolution"],
                                            tu["alpha_resolution"]))
        q.check(close(tu["limit"], want_limit, res + TOL_SCORE),
                "%s: limit %r, numpy %r" % (tag, tu["limit"], want_limit))
        q.check(close(tu["alpha"], want_alpha, res + TOL_PV),
                "%s: alpha %r, numpy %r" % (tag, tu["alpha"], want_alpha))
    if exact_ks:
        q.check(tu["ks_resolution"] == 0, "%s: KS should be exact" % tag)
        q.check(abs(tu["ks"] - want_ks) <= TOL_KS,
                "%s: KS %r, scipy %r" % (tag, tu["ks"], want_ks))
    else:
        q.check(tu["ks_resolution"] == 1.0 / KS_BINS,
                "%s: KS resolution %r" % (tag, tu["ks_resolution"]))
        q.check(want_ks - 1.0 / KS_BINS - TOL_KS <= tu["ks"]
                <= want_ks + TOL_KS,
                "%s: KS %r, scipy %r" % (tag, tu["ks"], want_ks))
    q.check(close(tu["ks_crit05"], 1.358 / np.sqrt(len(pv)), 1e-12),
            "%s: KS critical value (Massey 1951)" % tag)


# short: everything kept, every figure exact
check("short", 6000, 200, True, True)
# long, small alpha: quantiles exact from the kept tail, KS from bins
check("long", 60000, 200, True, False)
# long, large alpha (alpha n > 8192): quantiles from the histogram
check("long, large alpha", 60000, 20000, False, False)


# memory: the same replay fed 8x more readings through a pipe; the peak
# resident size (VmHWM) is read once every reading is in and the replay
# waits for more, before its figures and report are made (they take a
# bounded copy of what the digest keeps)
CHUNK = 100000
T0 = readings(1, 0)[0][0]
buf = io.BytesIO()
np.savetxt(buf, readings(CHUNK, seed=9)[1], delimiter=",", fmt="%.6f")
XTEXT = buf.getvalue().decode().splitlines()   # the same values each chunk


def peak_kib(ini, chunks):
    p = subprocess.Popen([q.QW, "replay", "-c", ini, "-q", "--json",
                          "--report", os.path.join(tmp, "r.html"), "-"],
                         stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                         stderr=subprocess.PIPE)
    p.stdin.write(("time," + ",".join(CH) + "\n").encode())
    for k in range(chunks):
        t0 = int(T0) + k * CHUNK
        p.stdin.write("".join("%d,%s\n" % (t0 + i, XTEXT[i])
                              for i in range(CHUNK)).encode())
    p.stdin.flush()
    # the replay has read all when its input counter stops moving
    last, hwm = None, None
    for _ in range(600):
        with open("/proc/%d/io" % p.pid) as f:
            rchar = [ln for ln in f if ln.startswith("rchar")][0]
        with open("/proc/%d/status" % p.pid) as f:
            hwm = int([ln for ln in f if ln.startswith("VmHWM")][0]
                      .split()[1])
        if rchar == last:
            break
        last = rchar
        time.sleep(0.1)
    p.stdin.close()
    q.check(p.wait() == 0, "replay failed: %s" % p.stderr.read().decode())
    return hwm


ini = write_ini("m.ini", 2)
small = peak_kib(ini, 2)
large = peak_kib(ini, 16)
more = (16 - 2) * CHUNK
q.note("peak RSS %d KiB for %d readings, %d KiB for %d (+%d KiB; a point "
       "per reading would be +%d KiB)" % (small, 2 * CHUNK, large,
                                          16 * CHUNK, large - small,
                                          more * 48 // 1024))
q.check(large - small < 4 * 1024, "memory grows with the recording: %d KiB "
        "more for %d more readings" % (large - small, more))
