#!/usr/bin/python3
"""Every detection mode on the same simulated plant, beside a static chart.

  tools/compare_modes.py [--days D] [--apd N] [--out DIR] [--quadwatch PATH]

The invented chilled-water plant of conf/demo.ini (quadwatch sim) gives two
recordings: D days of healthy operation (--scenario none) and the demo
scenario's five faults over 100 minutes.  Each mode replays both: the
healthy one measures the delivered false alarms per day against the
configured figure (--apd, the same for both groups, so that a few days
hold enough alarms to count), the faulty one the detection rate and delay
(quadwatch-replay(1) defines them).  Beside them, the chart a practitioner
would compute with numpy: a static Hotelling T-squared chart whose mean and
covariance come from the first half of the healthy recording (Phase I),
with the Phase II limit p(n+1)(n-1)/(n(n-p)) F(alpha; p, n-p) (Tracy,
Young and Mason 1992) for the same per-reading alpha, scored on the second
half and on the faults.  Prints one table; a study, not a test.
"""
import argparse
import json
import os
import re
import subprocess
import sys
import tempfile

import numpy as np
from scipy import stats

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
RATE = 10.0                 # readings/s of the demo plant
FAULT_READINGS = 60000      # 100 min of the demo scenario per group
SEED_HEALTHY, SEED_FAULTS = 7, 20260105

# (label, group settings added to conf/demo.ini); persist replaces 1/1.
MODES = [
    ("plain", {}),
    ("plain 3/5", {"persist": "3/5"}),
    ("ar1", {"dynamics": "ar1"}),
    ("var1", {"dynamics": "var1"}),
    ("var1 3/5", {"dynamics": "var1", "persist": "3/5"}),
    ("mewma", {"mode": "mewma"}),
    ("var1 + mewma", {"dynamics": "var1", "mode": "mewma"}),
]


def config(path, apd, extra):
    """conf/demo.ini with alarms_per_day = apd and extra group keys."""
    with open(os.path.join(ROOT, "conf", "demo.ini")) as f:
        text = f.read()
    text = re.sub(r"(?m)^alarms_per_day *=.*$", "alarms_per_day = %g" % apd,
                  text)
    if "persist" in extra:
        text = re.sub(r"(?m)^persist *=.*$", "persist = " + extra["persist"],
                      text)
    add = "".join("%s = %s\n" % (k, v) for k, v in extra.items()
                  if k != "persist")
    text = re.sub(r"(?m)^(\[group [^\]]+\]\n)", lambda m: m.group(1) + add,
                  text)
    with open(path, "w") as f:
        f.write(text)


def run(cmd):
    out = subprocess.run(cmd, check=True, capture_output=True, text=True)
    return out.stdout


def replay(qw, ini, csv, labels=False):
    cmd = [qw, "replay", "-c", ini, "--json", csv]
    if labels:
        cmd[4:4] = ["--labels", "label"]
    return json.loads(run(cmd))["groups"]


def read_csv(path):
    with open(path) as f:
        head = f.readline().strip().split(",")
    data = np.genfromtxt(path, delimiter=",", skip_header=1)
    return head, data


def group_channels(ini):
    """[(name, channels, clear)] of conf/demo.ini."""
    out, name = [], None
    with open(ini) as f:
        for line in f:
            line = line.split(";")[0].strip()
            m = re.match(r"\[group (\S+)\]", line)
            if m:
                name = m.group(1)
                out.append([name, [], 5])
            elif name and line.startswith("channels"):
                out[-1][1] = [c.strip() for c in line.split("=")[1].split(",")]
            elif name and line.startswith("clear"):
                out[-1][2] = int(line.split("=")[1])
    return out


def alarms(q, limit, clear):
    """In-alarm flags and raises of 1/1 persistence with clear readings of
    hysteresis, the daemon's rule."""
    on, under, raises = False, 0, 0
    flags = np.zeros(len(q), bool)
    for i, v in enumerate(q):
        if not on and v > limit:
            on, under = True, 0
            raises += 1
        elif on:
            under = under + 1 if v <= limit else 0
            if under >= clear:
                on = False
        flags[i] = on
    return flags, raises


def events(labels):
    """(start, end) of runs of label 1."""
    out, start = [], None
    for i, v in enumerate(labels):
        if v == 1 and start is None:
            start = i
        if v != 1 and start is not None:
            out.append((start, i))
            start = None
    if start is not None:
        out.append((start, len(labels)))
    return out


def static_chart(healthy, faults, groups, apd):
    """The numpy Phase I / Phase II Hotelling chart, per group."""
    hh, hd = healthy
    fh, fd = faults
    res = {}
    for name, chans, clear in groups:
        hi = [hh.index(c) for c in chans]
        x = hd[:, hi]
        x = x[~np.isnan(x).any(axis=1)]
        half = len(x) // 2
        ref, test = x[:half], x[half:]
        n, p = ref.shape
        mu = ref.mean(axis=0)
        sinv = np.linalg.inv(np.cov(ref, rowvar=False))
        alpha = apd / (RATE * 86400.0)  # 1/1: P(raise) ~ alpha
        limit = p * (n + 1) * (n - 1) / (n * (n - p)) * \
            stats.f.isf(alpha, p, n - p)
        d = test - mu
        q = np.einsum("ij,jk,ik->i", d, sinv, d)
        _, raises = alarms(q, limit, clear)
        days = len(test) / (RATE * 86400.0)
        fi = [fh.index(c) for c in chans]
        lab = fd[:, fh.index("label_" + name)]
        xf = fd[:, fi]
        ok = ~np.isnan(xf).any(axis=1)
        df = np.where(ok[:, None], xf - mu, 0.0)
        qf = np.where(ok, np.einsum("ij,jk,ik->i", df, sinv, df), 0.0)
        flags, _ = alarms(qf, limit, clear)
        ev = events(lab)
        hit = [e for e in ev if flags[e[0]:e[1]].any()]
        delay = [int(np.argmax(flags[a:b])) for a, b in hit]
        res[name] = {"alarms_per_day": raises / days,
                     "detection_rate": len(hit) / len(ev) if ev else None,
                     "mean_delay": float(np.mean(delay)) if delay else None,
                     "false_alarm_rate": float(flags[lab == 0].mean())}
    return res


def fmt(v, spec):
    return "-" if v is None else format(v, spec)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[1])
    ap.add_argument("--days", type=float, default=2.0)
    ap.add_argument("--apd", type=float, default=24.0)
    ap.add_argument("--out", default=None)
    ap.add_argument("--quadwatch",
                    default=os.path.join(ROOT, os.environ.get("BUILD", "build"),
                                         "quadwatch"))
    a = ap.parse_args()
    tmp = a.out or tempfile.mkdtemp(prefix="quadwatch-compare.")
    os.makedirs(tmp, exist_ok=True)
    healthy = os.path.join(tmp, "healthy.csv")
    faulty = os.path.join(tmp, "faults.csv")
    ini = os.path.join(tmp, "mode.ini")
    base = os.path.join(ROOT, "conf", "demo.ini")
    n = int(a.days * 86400 * RATE)
    print("# %g days of healthy plant (%d readings per group), the demo "
          "faults over %d readings; configured %g alarms/day per group"
          % (a.days, n, FAULT_READINGS, a.apd), flush=True)
    run([a.quadwatch, "sim", "-c", base, "--scenario", "none", "--count",
         str(n), "--seed", str(SEED_HEALTHY), "-o", healthy])
    run([a.quadwatch, "sim", "-c", base, "--count", str(FAULT_READINGS),
         "--seed", str(SEED_FAULTS), "-o", faulty])
    rows = []
    for label, extra in MODES:
        config(ini, a.apd, extra)
        h = replay(a.quadwatch, ini, healthy)
        f = replay(a.quadwatch, ini, faulty, labels=True)
        for g in sorted(h):
            rows.append((label, g, h[g]["alarms_per_day"],
                         f[g].get("detection_rate"), f[g].get("mean_delay"),
                         f[g].get("false_alarm_rate")))
        print("# %s done" % label, file=sys.stderr, flush=True)
    groups = group_channels(base)
    st = static_chart(read_csv(healthy), read_csv(faulty), groups, a.apd)
    for g in sorted(st):
        s = st[g]
        rows.append(("static T2 (numpy)", g, s["alarms_per_day"],
                     s["detection_rate"], s["mean_delay"],
                     s["false_alarm_rate"]))
    print("%-18s %-10s %12s %8s %10s %10s %10s" %
          ("mode", "group", "alarms/day", "ratio", "detected", "delay",
           "fa_rate"))
    for label, g, apd, det, delay, fa in rows:
        print("%-18s %-10s %12s %8s %10s %10s %10s" %
              (label, g, fmt(apd, ".2f"), fmt(apd / a.apd, ".2f"),
               fmt(det, ".2f"), fmt(delay, ".1f"), fmt(fa, ".2g")))


if __name__ == "__main__":
    main()
