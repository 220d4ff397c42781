#!/usr/bin/python3
"""Whitening (temporal dynamics) against an independent numpy implementation.

  helper_core dyn P N H SEED KIND | ref_dynamics.py

KIND none, ar1 or var1.  The recursions are written out here from the
documentation (src/core/dynamics.c, quadwatch.ini(5)) with explicit
matrices and numpy.linalg.solve, not from the C code:

  var1: the EW mean and covariance of the stacked vector [x_{t-1}; x_t],
        floor diag(floor^2) on both halves; q is the score of the
        observed part of the pair minus the score of the observed lags
        alone (the innovation's Mahalanobis distance given x_{t-1}).
  ar1:  per channel, EW means of x_{t-1} and x_t, variance of x_{t-1} and
        lag covariance; phi = s12 / (s11 + floor^2); the innovations
        e = x_t - m2 - phi (x_{t-1} - m1) are scored against their own EW
        mean and covariance.
  A lag pair needs 0 <= t - t_prev <= max_gap; ar1 without a pair is not
  scored.  Learning: every complete pair (learn = all), weight max(lam,
  1/(n+1)), floor top-up as ewcov.c; once the model has learned its
  warm-up, a partial pair too, by the EM step (the missing part of the
  model vector replaced by its conditional mean given the observed part,
  its conditional covariance added; the conditional Gaussian, written out
  with numpy.linalg.solve), and ar1's coefficients from the channels
  whose pair is complete.
Agreement to 1e-9 relative (1e-12 absolute below 1e-3) on every score; prints the worst difference.
"""
import math
import sys

import numpy as np

TOL = 1e-9
FLOOR_MIN_SHARE = 0.5    # the documented top-up rule, ewcov.c:
FLOOR_TOPUP_SHARE = 0.9  # f < 1/2, or f < 9/10 after dim readings


# var1's score is a difference of two quadratic forms, which cancels for
# readings close to their prediction: differences are taken relative to
# max(|a|, |b|, SCORE_FLOOR), so a score of 1e-9 may differ by 1e-12
# absolute (scores are chi-square sized, around p).
SCORE_FLOOR = 1e-3


def rel(a, b):
    m = max(abs(a), abs(b), SCORE_FLOOR)
    return abs(a - b) / m


def quad(sig, r, keep):
    if not keep.any():
        return 0.0
    ro = r[keep]
    return float(ro @ np.linalg.solve(sig[np.ix_(keep, keep)], ro))


class EwModel:
    """EW mean and covariance of a vector with a noise floor."""

    def __init__(self, fsq):
        self.fsq = fsq
        self.dim = len(fsq)
        self.count = 0

    def first(self, v):
        self.mu = v.copy()
        self.sig = np.diag(self.fsq)
        self.f, self.since, self.count = 1.0, 0, 1

    def learn(self, r, w, cond=0.0):
        self.sig = (1 - w) * (self.sig + w * (np.outer(r, r) + cond))
        self.mu = self.mu + w * r
        self.count += 1
        self.f *= 1 - w
        self.since += 1
        if self.f < FLOOR_MIN_SHARE or (self.since >= self.dim and
                                        self.f < FLOOR_TOPUP_SHARE):
            self.sig = self.sig + np.diag((1 - self.f) * self.fsq)
            self.f, self.since = 1.0, 0


def main():
    lines = sys.stdin.read().splitlines()
    head = lines[0].split()
    p, n, h, kind, gap = int(head[1]), int(head[2]), float(head[3]), \
        head[4], float(head[5])
    floor = np.array([float(v) for v in head[6:6 + p]])
    warmup = int(head[6 + p])
    lam = -math.expm1(-math.log(2.0) / h)
    dim = 2 * p if kind == "var1" else p
    fsq = np.concatenate([floor, floor]) ** 2 if kind == "var1" else floor ** 2
    model = EwModel(fsq)
    ar = np.zeros((p, 4))  # m1, m2, s11, s12
    ar_n = 0
    prev, t_prev = None, None
    worst, bad, scored_n, partial_n = 0.0, 0, 0, 0
    for line in lines[1:]:
        v = [float(t) for t in line.strip().split(",")]
        t, x = v[0], np.array(v[1:p + 1])
        q_core, dof_core, scored, learned = v[p + 1], int(v[p + 2]), \
            int(v[p + 3]), int(v[p + 4])
        obs = ~np.isnan(x)
        if not obs.any():      # rejected: no lag pair across it
            prev = None
            continue
        lag = kind == "none" or (prev is not None and 0 <= t - t_prev <= gap)
        want_scored, q, dof, learn, w = 0, 0.0, 0, False, 1.0
        if kind == "ar1" and not lag:
            vec = None
        elif kind == "var1":
            vec = np.concatenate([prev if lag else np.full(p, np.nan), x])
        elif kind == "ar1":
            vec = np.full(p, np.nan)
            for i in range(p):
                if np.isnan(x[i]) or np.isnan(prev[i]):
                    continue
                if ar_n == 0:
                    vec[i] = 0.0
                else:
                    phi = ar[i, 3] / (ar[i, 2] + floor[i] ** 2)
                    vec[i] = x[i] - ar[i, 1] - phi * (prev[i] - ar[i, 0])
        else:
            vec = x.copy()
        if vec is not None:
            vobs = ~np.isnan(vec)
            complete = bool(vobs.all())
            if model.count == 0:
                if complete:
                    model.first(vec)
                    learn = True
            else:
                r = np.where(vobs, vec - model.mu, 0.0)
                q = quad(model.sig, r, vobs)
                if kind == "var1":
                    lagobs = vobs.copy()
                    lagobs[p:] = False
                    q = max(q - quad(model.sig, r, lagobs), 0.0)
                # ar1 scores the channels whose pair is complete
                dof = int((vobs if kind == "ar1" else obs).sum())
                want_scored = 1
                if complete:
                    w = max(lam, 1.0 / (model.count + 1))
                    model.learn(r, w)
                    learn = True
                elif model.count >= warmup:
                    w = max(lam, 1.0 / (model.count + 1))
                    mis, sig = ~vobs, model.sig
                    soo = sig[np.ix_(vobs, vobs)]
                    r[mis] = sig[np.ix_(mis, vobs)] @ np.linalg.solve(soo, r[vobs])
                    cond = np.zeros_like(sig)
                    cond[np.ix_(mis, mis)] = sig[np.ix_(mis, mis)] - \
                        sig[np.ix_(mis, vobs)] @ np.linalg.solve(soo, sig[np.ix_(vobs, mis)])
                    model.learn(r, w, cond)
                    learn = True
                    partial_n += 1
            if learn and kind == "ar1":
                for i in range(p):
                    if np.isnan(x[i]) or np.isnan(prev[i]):
                        continue
                    if ar_n == 0:
                        ar[i] = [prev[i], x[i], 0.0, 0.0]
                        continue
                    d1, d2 = prev[i] - ar[i, 0], x[i] - ar[i, 1]
                    ar[i, 0] += w * d1
                    ar[i, 1] += w * d2
                    ar[i, 2] = (1 - w) * (ar[i, 2] + w * d1 * d1)
                    ar[i, 3] = (1 - w) * (ar[i, 3] + w * d1 * d2)
                ar_n += 1
        if scored != want_scored or int(learn) != learned or \
                (want_scored and dof != dof_core):
            bad += 1
            if bad < 5:
                print(f"MISMATCH scored/learned/dof at t={t}: core "
                      f"{scored}/{learned}/{dof_core}, numpy "
                      f"{want_scored}/{int(learn)}/{dof}")
        if want_scored:
            scored_n += 1
            d = rel(q, q_core)
            worst = max(worst, d)
            if d > TOL:
                bad += 1
                if bad < 5:
                    print(f"MISMATCH q at t={t}: core={q_core!r} "
                          f"numpy={q!r} rel={d:.3g}")
        prev, t_prev = x, t
    print(f"# numpy whitening {kind} p={p} n={n} h={h:g}: {scored_n} "
          f"scores, {partial_n} partial learned, worst relative difference "
          f"{worst:.3g}")
    sys.exit(0 if bad == 0 and scored_n > 0 and (p == 1 or partial_n > 0)
             else 1)


if __name__ == "__main__":
    main()
