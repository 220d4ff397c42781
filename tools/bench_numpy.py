#!/usr/bin/python3
"""bench_numpy.py: what the same job costs in numpy, beside quadwatch's
core in the same `make bench` run (numbers, no verdicts).

Two numpy forms, both on one thread (OPENBLAS_NUM_THREADS=1 and the like,
set before numpy loads, as quadwatch's core runs on one):
  per reading   the script a practitioner writes for a streaming EW model:
                per reading r = x - mu, q = r' solve(S, r), then
                mu += lam r, S = (1-lam)(S + lam r r'): numpy.linalg.solve
                on the covariance as updated by the reading before;
  batch         a vectorised frame against a static covariance: one
                Cholesky factor, one solve for the whole frame of readings,
                q = column sums of squares (no learning at all).
Prints ns per reading (median of RUNS runs) and, given the table printed
by bench_core (--core FILE), the ratio of each to quadwatch's figure.

usage: tools/bench_numpy.py [--core FILE] [--runs N]"""
import argparse
import os
import statistics
import sys
import time

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_v] = "1"

import numpy as np  # noqa: E402

SIZES = (4, 8, 16, 32, 64, 128)
HALF_LIFE = 2000.0   # readings, as bench_core
TARGET_S = 0.1       # seconds of work per run
FRAME = 4096         # readings per vectorised batch


def readings(p, n, rng):
    a = rng.standard_normal((p, p)) + 2.385 * np.eye(p)
    return rng.standard_normal((n, p)) @ a.T


def per_reading(p, rng):
    """ns per reading of the streaming script (score, then learn)."""
    lam = 1.0 - 2.0 ** (-1.0 / HALF_LIFE)
    x = readings(p, 400, rng)
    mu = np.zeros(p)
    s = np.eye(p)
    for k in range(200):  # warm-up
        r = x[k % 400] - mu
        q = r @ np.linalg.solve(s, r)
        mu += lam * r
        s = (1.0 - lam) * (s + lam * np.outer(r, r))
    n, t0, k = 0, time.perf_counter(), 0
    while True:
        for _ in range(50):
            r = x[k % 400] - mu
            q = r @ np.linalg.solve(s, r)
            mu += lam * r
            s = (1.0 - lam) * (s + lam * np.outer(r, r))
            k += 1
        n += 50
        t = time.perf_counter() - t0
        if t >= TARGET_S:
            return 1e9 * t / n, q


def batch(p, rng):
    """ns per reading of a vectorised frame against a static covariance."""
    x = readings(p, FRAME, rng)
    mu = x.mean(axis=0)
    s = np.cov(x, rowvar=False) + 1e-9 * np.eye(p)
    n, t0 = 0, time.perf_counter()
    while True:
        c = np.linalg.cholesky(s)
        y = np.linalg.solve(c, (x - mu).T)
        q = np.einsum("ij,ij->j", y, y)
        n += FRAME
        t = time.perf_counter() - t0
        if t >= TARGET_S:
            return 1e9 * t / n, q[0]


def core_table(path):
    """{p: ns} from bench_core's table (rows: p, quadwatch ns, ...)."""
    out = {}
    with open(path) as f:
        for line in f:
            w = line.split()
            if len(w) >= 2 and w[0].isdigit():
                try:
                    out[int(w[0])] = float(w[1])
                except ValueError:
                    pass
    return out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--core", help="bench_core output of the same run")
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args()
    core = core_table(args.core) if args.core else {}
    rng = np.random.default_rng(1)
    print("numpy %s, one thread: ns per reading, median of %d runs"
          % (np.__version__, args.runs))
    print("%5s %12s %14s %14s %12s %12s" % (
        "p", "quadwatch", "numpy/reading", "numpy batch",
        "vs reading", "vs batch"))
    for p in SIZES:
        a = statistics.median(per_reading(p, rng)[0] for _ in range(args.runs))
        b = statistics.median(batch(p, rng)[0] for _ in range(args.runs))
        qw = core.get(p)
        if qw:
            print("%5d %12.1f %14.1f %14.1f %11.0fx %11.2fx" % (
                p, qw, a, b, a / qw, b / qw))
        else:
            print("%5d %12s %14.1f %14.1f" % (p, "-", a, b))
    sys.stdout.flush()


if __name__ == "__main__":
    main()
