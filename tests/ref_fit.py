#!/usr/bin/python3
"""Reference checks of `quadwatch fit`'s maths against Debian's scipy.

  ref_fit.py gpd < helper_fit-gpd-output
      the maximum-likelihood generalised Pareto fit (location 0) against
      scipy.stats.genpareto.fit(y, floc=0) on the same sample: shape and
      scale to TOL_GPD relative (scipy's Nelder-Mead stops near, not at,
      the optimum), and our log-likelihood at least scipy's less
      TOL_LOGLIK (ours is the maximiser; scipy's logpdf sum is the
      judge of both).
  ref_fit.py hotelling < helper_fit-hotelling-output
      Phase I limit (n-1)^2/n * scipy.stats.beta.isf(alpha, p/2,
      (n-p-1)/2) and Phase II limit p(n+1)(n-1)/(n(n-p)) *
      scipy.stats.f.isf(alpha, p, n-p) (Tracy, Young & Mason 1992;
      Montgomery, Introduction to Statistical Quality Control; the forms
      from memory), to TOL_LIMIT relative.
  ref_fit.py phase2 < helper_fit-phase2-output
      the limit of a fixed model fitted from n readings (covariance with
      divisor n) against the same F form scaled by n/(n-1), to TOL_LIMIT.
With --tamper, each value read is perturbed by 1e-6 relative first: the
run must then fail (the comparison can fail).  Exit 0 when all agree.
"""
import math
import sys

import numpy as np
from scipy import stats

TOL_GPD = 2e-3      # scipy's optimiser (fmin, xtol 1e-4) vs an exact search
TOL_LOGLIK = 1e-6   # absolute, in log-likelihood units
TOL_LIMIT = 1e-8    # GSL's beta / F quantiles vs scipy's; %.17g printing


def rel(a, b):
    m = max(abs(a), abs(b))
    return abs(a - b) / m if m > 0 else 0.0


def check_gpd(lines, tamper):
    fit = None
    ys = []
    for line in lines:
        f = line.split()
        if f[0] == "fit":
            fit = [int(f[1])] + [float(v) for v in f[2:]]
        elif f[0] == "y":
            ys.append(float(f[1]))
    y = np.array(ys)
    rc, xi, sigma, ll = fit
    if tamper:
        xi *= 1 + 1e-2
    if rc != 0:
        print(f"FAIL the fit returned {rc}")
        return False
    c, loc, scale = stats.genpareto.fit(y, floc=0)
    ll_ours = float(np.sum(stats.genpareto.logpdf(y, xi, 0, sigma)))
    ll_sp = float(np.sum(stats.genpareto.logpdf(y, c, 0, scale)))
    ok = True
    if abs(ll_ours - ll) > 1e-6 * max(1.0, abs(ll)):
        print(f"FAIL log-likelihood printed {ll!r}, scipy's logpdf sum "
              f"{ll_ours!r}")
        ok = False
    if ll_ours < ll_sp - TOL_LOGLIK:
        print(f"FAIL ours {ll_ours!r} below scipy's optimum {ll_sp!r}")
        ok = False
    # the shape near 0 carries no relative meaning: compare absolutely
    if abs(xi - c) > TOL_GPD * max(1.0, abs(c)) or \
            rel(sigma, scale) > TOL_GPD:
        print(f"FAIL xi {xi!r} sigma {sigma!r} vs scipy.stats.genpareto."
              f"fit c {c!r} scale {scale!r}")
        ok = False
    if ok:
        print(f"# GPD n={len(y)}: xi={xi:.6f} sigma={sigma:.6f} vs scipy "
              f"c={c:.6f} scale={scale:.6f}; loglik {ll_ours:.6f} vs "
              f"{ll_sp:.6f}")
    return ok


def check_hotelling(lines, tamper):
    bad = 0
    worst = 0.0
    count = 0
    for line in lines:
        f = line.split()
        if f[0] != "hotelling":
            continue
        alpha, p, n, ph1, ph2 = float(f[1]), int(f[2]), float(f[3]), \
            float(f[4]), float(f[5])
        if tamper:
            ph1 *= 1 + 1e-6
        want1 = (n - 1) ** 2 / n * stats.beta.isf(alpha, p / 2,
                                                  (n - p - 1) / 2)
        want2 = p * (n + 1) * (n - 1) / (n * (n - p)) * \
            stats.f.isf(alpha, p, n - p)
        for got, want, what in ((ph1, want1, "phase I"),
                                (ph2, want2, "phase II")):
            r = rel(got, want)
            worst = max(worst, r)
            count += 1
            if r > TOL_LIMIT:
                bad += 1
                print(f"MISMATCH {what} alpha={alpha} p={p} n={n}: "
                      f"{got!r} vs scipy {want!r}")
    print(f"# Hotelling limits: {count} values, worst relative "
          f"difference {worst:.3g} vs scipy.stats.beta/f")
    return bad == 0 and count > 0


def check_phase2(lines, tamper):
    ok = True
    count = 0
    for line in lines:
        f = line.split()
        if f[0] != "phase2":
            continue
        p, n, alpha, got = int(f[1]), float(f[2]), float(f[3]), float(f[4])
        if tamper:
            got *= 1 + 1e-6
        ucl = p * (n + 1) * (n - 1) / (n * (n - p)) * \
            stats.f.isf(alpha, p, n - p)
        want = ucl * n / (n - 1)   # the model's covariance has divisor n
        count += 1
        if rel(got, want) > TOL_LIMIT:
            print(f"FAIL fixed model p={p} n={n:.0f} alpha={alpha:.6g}: "
                  f"limit {got!r}, F form {want!r}")
            ok = False
        else:
            print(f"# fixed model p={p} n={n:.0f}: limit {got:.10g} = "
                  f"F form {want:.10g} (chi-square {stats.chi2.isf(alpha, p):.6g})")
    return ok and count > 0


def main():
    args = [a for a in sys.argv[1:] if a != "--tamper"]
    tamper = "--tamper" in sys.argv
    lines = [line for line in sys.stdin if line.strip()]
    kind = args[0]
    ok = {"gpd": check_gpd, "hotelling": check_hotelling,
          "phase2": check_phase2}[kind](lines, tamper)
    sys.exit(0 if ok else 1)


if __name__ == "__main__":
    main()
