"""The Phase I / Phase II path of `quadwatch fit` on a real multivariate
sample that a Debian package ships: the first 50 rows of Fisher's iris
data in python3-scipy's test files (scipy/spatial/tests/data/iris.txt;
the setosa sample in the usual ordering), p = 4 measurements in cm.

The worked textbook example with printed statistics is in
e2e_fit_sweat.py; here the references are computed by numpy and scipy on
this sample (Tracy, Young & Mason 1992; Montgomery, Introduction
to Statistical Quality Control; the forms from memory):
  - `fit --no-trim` then `replay --scores` with model_use = fixed: each of
    the 50 readings' score against the fixed model equals the Phase I
    T-squared (x - xbar)' S^-1 (x - xbar), S with divisor n - 1, times
    n/(n - 1) (the model's covariance has divisor n): numpy.linalg.solve,
    to 1e-8 relative;
  - the fit's Gaussian limit equals the Phase II F form
    p(n+1)(n-1)/(n(n-p)) F^-1(1 - alpha; p, n-p) times n/(n-1)
    (scipy.stats.f.isf), to 1e-8, and so does the limit replay applies
    to each reading, to TOL_GRID (the detector computes it at the
    effective size rounded to a 1e-3 geometric grid, detector.c);
  - printed beside them: the Phase I beta limit (n-1)^2/n
    B^-1(1 - alpha; p/2, (n-p-1)/2) (scipy.stats.beta.isf) and how many
    of the 50 exceed it (a Phase I review would look at those).
With --tamper the numpy reference is perturbed and the run must fail."""
import os
import sys

import numpy as np
import scipy
from scipy import stats

import qwtest as q

TOL = 1e-8  # %.17g scores and limits; the 1e-6 floor adds ~1e-10
TOL_GRID = 1e-3  # QW_DET_NU_RTOL: nu on a grid moves the limit by less
IRIS = os.path.join(os.path.dirname(scipy.__file__), "spatial", "tests",
                    "data", "iris.txt")
N, P = 50, 4
CH = ["sepal_length", "sepal_width", "petal_length", "petal_width"]

q.need_program()
if not os.path.exists(IRIS):
    print("%s not installed" % IRIS)
    sys.exit(77)
tamper = "--tamper" in sys.argv
x = np.loadtxt(IRIS)[:N]
tmp = q.tmpdir()
data = os.path.join(tmp, "setosa.csv")
with open(data, "w") as f:
    f.write("time," + ",".join(CH) + "\n")
    for i in range(N):
        f.write("%d," % (1700000000 + i) + ",".join("%.17g" % v for v in x[i])
                + "\n")
# alarms/day at 1 reading/s for alpha(1 - alpha) = 0.0027 (1 - 0.0027)
apd = 0.0027 * (1 - 0.0027) * 86400


def config(path, extra=""):
    with open(path, "w") as f:
        f.write(q.ini(tmp, {"setosa": {
            "channels": CH, "rate": 1, "alarms_per_day": "%.17g" % apd,
            "warmup": 10, "floor": [1e-6] * P}}, [">tcp://127.0.0.1:5999"],
            extra=extra))


base = os.path.join(tmp, "base.ini")
config(base)
fit, rows = q.fit_fixed(tmp, base, "setosa", data, data)
alpha, lim_fit, used = fit["alpha"], fit["limit_gaussian"], fit["used"]
q.check(used == N, "used %d of %d" % (used, N))
q.check(len(rows) == N, "%d score rows" % len(rows))

xbar = x.mean(axis=0)
S = np.cov(x, rowvar=False)  # divisor n - 1
d = x - xbar
t2 = np.einsum("ij,ij->i", d, np.linalg.solve(S, d.T).T)
want = t2 * N / (N - 1)
if tamper:
    want = want * (1 + 1e-6)
got = np.array([float(r["score"]) for r in rows])
worst = float(np.max(np.abs(got - want) / want))
q.check(worst <= TOL, "scores vs Phase I T-squared * n/(n-1): worst %.3g"
        % worst)
ucl2 = P * (N + 1) * (N - 1) / (N * (N - P)) * stats.f.isf(alpha, P, N - P)
lim = float(rows[0]["limit"])
q.check(all(float(r["limit"]) == lim for r in rows), "limit moved")
q.check(abs(lim_fit - ucl2 * N / (N - 1)) <= TOL * lim_fit,
        "fit's limit %r vs Phase II F form %r" % (lim_fit, ucl2 * N / (N - 1)))
q.check(abs(lim - ucl2 * N / (N - 1)) <= TOL_GRID * lim,
        "replay's limit %r vs Phase II F form %r" % (lim, ucl2 * N / (N - 1)))
ucl1 = (N - 1) ** 2 / N * stats.beta.isf(alpha, P / 2, (N - P - 1) / 2)
q.note("iris setosa n=%d p=%d alpha=%.4g: scores = Phase I T2 n/(n-1) to "
       "%.2g; fixed-model limit %.6f (per reading %.6f) = Phase II F form "
       "%.6f * n/(n-1); "
       "T2 max %.3f; Phase I beta limit %.6f, %d of %d above it" %
       (N, P, alpha, worst, lim_fit, lim, ucl2, t2.max(), ucl1,
        int(np.sum(t2 > ucl1)), N))
print("ok")
