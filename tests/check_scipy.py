#!/usr/bin/python3
"""check_scipy.py: compares what `quadwatch check` prints with SciPy.

Reads the output of `quadwatch check` on stdin.  For every group:
  - limit_chisq against scipy.stats.chi2.isf(alpha, p)          (<= 1e-9)
  - alpha against the raised-alarm rate it is solved for, by
    scipy.optimize.brentq: for persist 1/1, a(1-a) = alarms_per_day /
    (rate * 86400); for k/m, C(m-1,k-1) a^k (1-a)^(m-k+1) = the same target
    (the independence form documented in src/core/limit.c)    (<= 1e-9)
  - correct = no: limit_steady equals limit_chisq                (<= 1e-12)
  - correct = yes: limit_steady is above limit_chisq (the finite-sample
    correction only widens the limit).
  - correct = yes: limit_steady = steady_scale * nu p/(nu-p+1) *
    scipy.stats.f.isf(alpha, p, nu-p+1), nu = steady_nu, checked through
    scipy.stats.f.sf at the printed limit (<= 1e-8: the limit is printed to
    10 digits), and nu = (2-lam)/lam from half_life and rate.
Prints '#' notes; exits 1 on the first mismatch, 0 when all agree.
With --tamper, perturbs each limit_chisq by 1e-8 before comparing: the run
must then fail (proves the comparison can fail).
"""
import math
import sys

import scipy
from scipy import optimize, stats

TOL_QUANTILE = 1e-9   # GSL's chi-square quantile vs SciPy's; %.10g printing
TOL_ALPHA = 1e-9      # bisection in the core vs brentq here; %.10g printing
TOL_SAME = 1e-12      # the same number printed twice at %.10g
SECONDS_PER_DAY = 86400.0


def parse(lines):
    """Groups as dicts of key -> value text (first word after the colon)."""
    groups, cur = [], None
    for line in lines:
        if not line.strip() or ':' not in line:
            continue
        key, rest = line.split(':', 1)
        words = rest.split()
        value = words[0] if words else ''
        if key == 'group':
            cur = {'group': value}
            groups.append(cur)
        elif cur is not None and key.startswith('  '):
            cur[key.strip()] = value
    return groups


def rel(a, b):
    return abs(a - b) / max(abs(a), abs(b), 1e-300)


def solve_alpha(apd, rate, k, m):
    """Per-reading alpha with C(m-1,k-1) a^k (1-a)^(m-k+1) = target."""
    target = apd / (rate * SECONDS_PER_DAY)
    lc = math.lgamma(m) - math.lgamma(k) - math.lgamma(m - k + 1)

    def f(la):  # in log a, as the rate spans many decades
        a = math.exp(la)
        return lc + k * la + (m - k + 1) * math.log1p(-a) - math.log(target)
    hi = math.log(k / (m + 1.0))
    return math.exp(optimize.brentq(f, -745.0, hi, xtol=1e-14, rtol=1e-15))


def check_group(g, tamper):
    name, p = g['group'], int(g['p'])
    alpha = float(g['alpha'])
    plain = float(g['limit_chisq'])
    steady = float(g['limit_steady'])
    k, m = (int(x) for x in g['persist'].split('/'))
    apd, rate = float(g['alarms_per_day']), float(g['rate'])
    if tamper:
        plain *= 1 + 1e-8
    ref = stats.chi2.isf(alpha, p)
    if rel(plain, ref) > TOL_QUANTILE:
        print(f"FAIL {name}: limit_chisq {plain!r} vs scipy.stats.chi2.isf"
              f"({alpha!r}, {p}) = {ref!r}")
        return False
    want = solve_alpha(apd, rate, k, m)
    if k == 1 and m == 1:  # the closed form, as a second reference
        t = apd / (rate * SECONDS_PER_DAY)
        closed = (1 - math.sqrt(1 - 4 * t)) / 2
        if rel(want, closed) > TOL_ALPHA:
            print(f"FAIL {name}: brentq {want!r} vs closed form {closed!r}")
            return False
    if rel(alpha, want) > TOL_ALPHA:
        print(f"FAIL {name}: alpha {alpha!r} vs scipy.optimize.brentq "
              f"{want!r} (persist {k}/{m}, {apd} alarms/day at {rate}/s)")
        return False
    if g['correct'] == 'no':
        if rel(steady, plain) > TOL_SAME:
            print(f"FAIL {name}: correct = no, but limit_steady {steady!r}"
                  f" != limit_chisq {plain!r}")
            return False
    elif not steady > plain:
        print(f"FAIL {name}: corrected limit {steady!r} not above the "
              f"chi-square limit {plain!r}")
        return False
    if g['correct'] != 'no' and not note_scale(g, alpha, p, steady):
        return False
    print(f"# {name}: p={p} persist {k}/{m} alpha={alpha:.6g} "
          f"limit={plain:.8g} agree with scipy.stats.chi2 and brentq")
    return True


def note_scale(g, alpha, p, steady):
    """The corrected limit through scipy's F distribution: its sf at the
    printed limit is alpha, and nu is (2-lam)/lam."""
    nu = float(g['steady_nu'])
    scale = float(g['steady_scale'])
    h = float(g['half_life'])
    rate = float(g['rate'])
    steps = 1.0 / rate if g['_half_life_unit'] == 's' else 1.0
    lam = -math.expm1(-math.log(2.0) * steps / h)
    ok = True
    if rel(nu, (2 - lam) / lam) > 1e-12:
        print(f"FAIL {g['group']}: steady_nu {nu!r} is not (2-lam)/lam")
        ok = False
    d2 = nu - p + 1
    sf = stats.f.sf(steady / (scale * nu * p / d2), p, d2)
    if rel(sf, alpha) > 1e-8:
        print(f"FAIL {g['group']}: scipy f.sf at limit_steady = {sf!r}, alpha {alpha!r}")
        ok = False
    print(f"# {g['group']}: nu {nu:.6g}, scale {scale:.8g}; scipy.stats.f.sf at "
          f"the steady limit / alpha - 1 = {sf / alpha - 1:.2g}")
    return ok


def main():
    tamper = '--tamper' in sys.argv[1:]
    lines = sys.stdin.read().splitlines()
    groups = parse(lines)
    units = [ln.split()[2] for ln in lines
             if ln.startswith('  half_life:') and len(ln.split()) > 2]
    for g, u in zip(groups, units):
        g['_half_life_unit'] = u
    if not groups:
        print("FAIL: no 'group:' lines in the output of quadwatch check")
        return 1
    for g in groups:
        if not check_group(g, tamper):
            return 1
    print(f"# {len(groups)} groups checked against scipy {scipy.__version__}")
    return 0


if __name__ == '__main__':
    sys.exit(main())
