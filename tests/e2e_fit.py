"""quadwatch fit end to end: a CSV recording of the skid, heavy-tailed
(Student t, 5 dof, so the Gaussian limit is too low) with two injected bad
stretches, is fitted (the stretches trimmed and kept out of the tail); the model file then drives `replay` and `check`
through model = PATH, model_use = fixed | warm.  Checked:
  - fit shows a progress line on a terminal, none on a pipe;
  - fit prints readings/used/trimmed, both limits, and their ratio is the
    limit factor; the trimmed count covers the bad stretches, and the
    adaptive chart's tail leaves them out as faults;
  - replay of a fresh heavy-tailed recording with the fixed model runs
    against the empirical limit (the group's limit_end), and with
    model_use = warm against the group's own limit times the adaptive
    chart's factor (which fit prints, and check too);
  - a `record` capture of the same readings fits to the same model;
  - check prints the model lines;
  - a group with other channels, or a missing model file, is refused by
    replay, check and run with exit 2 and a message naming the file;
  - usage errors exit 2."""
import json
import os
import pty
import re
import subprocess

import numpy as np

import qwtest as q

q.need_program()
tmp = q.tmpdir()
N_FIT = 30000
N_FRESH = 30000


def t_readings(n, seed, bad=()):
    """The skid's readings with Student t (5 dof) noise scaled per row."""
    t, x = q.skid_readings(n, seed)
    rng = np.random.default_rng(seed + 1)
    w = np.sqrt(rng.chisquare(5, n) / 5)
    x = q.SKID_MEAN + (x - q.SKID_MEAN) / w[:, None]
    for a, b in bad:
        x[a:b, 2] = q.SKID_MEAN[2] + 40 * q.SKID_NOISE[2]
    return t, x


def write_csv(path, t, x):
    with open(path, "w") as f:
        f.write("time," + ",".join(q.SKID) + "\n")
        for i in range(len(t)):
            f.write("%.3f," % t[i] + ",".join("%.6f" % v for v in x[i]) +
                    "\n")


def config(path, **over):
    g = q.skid_group(warmup=200, alarms_per_day=20)
    g.update(over)
    with open(path, "w") as f:
        f.write(q.ini(tmp, {"skid": g}, [">tcp://127.0.0.1:5999"]))


def run(*args):
    return subprocess.run([q.QW] + list(args), capture_output=True,
                          text=True, timeout=120)


def kv(out):
    d = {}
    for line in out.splitlines():
        m = re.match(r"\s+(\w+):\s+(\S+)", line)
        if m:
            d[m.group(1)] = m.group(2)
    return d


fit_csv = os.path.join(tmp, "healthy.csv")
fresh_csv = os.path.join(tmp, "fresh.csv")
bad = ((5000, 5100), (21000, 21150))
write_csv(fit_csv, *t_readings(N_FIT, 41, bad))
write_csv(fresh_csv, *t_readings(N_FRESH, 43))
base = os.path.join(tmp, "base.ini")
config(base)
models = os.path.join(tmp, "models")
os.mkdir(models)

# progress: a line on a terminal, rewritten in place and wiped at the
# end; nothing when stderr is not a terminal
pm, ps = pty.openpty()
p = subprocess.Popen([q.QW, "fit", "-c", base, "-o", models, fit_csv],
                     stdout=subprocess.PIPE, stderr=ps)
os.close(ps)
tty = b""
while True:
    try:
        chunk = os.read(pm, 4096)
    except OSError:  # the child closed the terminal
        break
    if not chunk:
        break
    tty += chunk
p.communicate(timeout=120)
os.close(pm)
q.check(p.returncode == 0, "fit on a terminal: exit %d" % p.returncode)
q.check(b"fit: group skid (30000 readings): trimming, pass 1," in tty and
        tty.endswith(b"\r\x1b[K"), "progress on a terminal: %r" % tty[-300:])
q.note("progress line: %s" % tty.split(b"\r\x1b[K")[-2].decode())
r = run("fit", "-c", base, "-o", models, fit_csv)
q.check(r.returncode == 0 and r.stderr == "",
        "fit with stderr not a terminal: %r" % r.stderr)

r = run("fit", "-c", base, "-q", "-o", models, fit_csv)
q.check(r.returncode == 0, "fit failed: %s" % r.stderr)
print("\n".join("# " + line for line in r.stdout.splitlines() if line))
f = kv(r.stdout)
path = os.path.join(models, "skid.qwmodel")
q.check(f.get("model") == path and os.path.exists(path), "no model file")
q.check(int(f["readings"]) == N_FIT, "readings %s" % f["readings"])
q.check(int(f["used"]) + int(f["trimmed"]) == N_FIT, "used + trimmed")
q.check(int(f["trimmed"]) >= 250, "bad stretches not trimmed: %s" %
        f["trimmed"])
lg, le, lf = (float(f[k]) for k in ("limit_gaussian", "limit_empirical",
                                    "limit_factor"))
q.check(abs(le / lg - lf) < 1e-6 * lf, "ratio %g vs factor %g" % (le / lg, lf))
q.check(lf > 1.2, "a t5 recording should need a larger limit: %g" % lf)
q.check(250 <= int(f["bad_stretches"]) <= 400, "bad stretches: %s readings "
        "left out, 250 injected" % f["bad_stretches"])
# the adaptive chart's own factor, for model_use = warm
af = float(f["adaptive_factor"])
q.check(af > 0 and int(f["adaptive_scored"]) > N_FIT // 2 and
        int(f["adaptive_passes"]) >= 1, "adaptive lines: %r" % f)
# the injected stretches are far out for the adaptive chart too: left out
# of its tail as faults (a fault in its tail made the factor 86, not 12.6)
q.check(240 <= int(f["adaptive_faults"]) <= 400, "adaptive faults: %s "
        "readings left out, 250 injected" % f["adaptive_faults"])

# the same recording as a `record` capture (binary QWB1 payloads, values
# as the CSV holds them): the same fit
cap = os.path.join(tmp, "healthy.qwcap")
ct, cx = t_readings(N_FIT, 41, bad)
cx = np.round(cx, 6)
with open(cap, "wb") as fh:
    fh.write(q.capture_bytes((ct[i], "skid", q.binary(ct[i:i + 64],
                                                      cx[i:i + 64], i))
                             for i in range(0, N_FIT, 64)))
cmodels = os.path.join(tmp, "cmodels")
os.mkdir(cmodels)
r = run("fit", "-c", base, "-q", "-o", cmodels, cap)
q.check(r.returncode == 0, "fit of a capture: %s" % r.stderr)
fc = kv(r.stdout)
for k in ("readings", "used", "trimmed", "limit_gaussian", "limit_factor",
          "adaptive_factor"):
    q.check(fc[k] == f[k], "capture vs CSV fit: %s %s vs %s" % (k, fc[k],
                                                               f[k]))

fixed = os.path.join(tmp, "fixed.ini")
config(fixed, model=path, model_use="fixed")
r = run("replay", "-c", fixed, "--json", "-q", fresh_csv)
q.check(r.returncode == 0, "replay with the model failed: %s" % r.stderr)
js = json.loads(r.stdout)
lim = js["groups"]["skid"]["limit_end"]  # the frozen limit in force
q.check(abs(lim - le) < 1e-6 * le, "replay limit %g, fit's empirical %g" %
        (lim, le))
days = N_FRESH / 10 / 86400
q.note("fresh %d readings (%.3f days): %d alarms with the fixed model and "
       "the empirical limit (configured 20/day: %.1f expected)" %
       (N_FRESH, days, js["alarms"], 20 * days))

r = run("check", "-c", fixed)
q.check(r.returncode == 0, "check with the model failed: %s" % r.stderr)
c = kv(r.stdout)
q.check(c.get("model") == path and c.get("model_use") == "fixed" and
        abs(float(c["model_limit_factor"]) - lf) < 1e-6 * lf and
        abs(float(c["model_limit"]) - le) < 1e-6 * le,
        "check's model lines: %r" % c)

warm = os.path.join(tmp, "warm.ini")
config(warm, model=path, model_use="warm")
r = run("replay", "-c", warm, "--json", "-q", fresh_csv)
q.check(r.returncode == 0, "replay warm failed: %s" % r.stderr)
wlim = json.loads(r.stdout)["groups"]["skid"]["limit_end"]
# warm applies the adaptive chart's factor, not the fixed model's: at
# steady state its limit is the group's own (no model) times it
r = run("replay", "-c", base, "--json", "-q", fresh_csv)
q.check(r.returncode == 0, "replay without a model failed: %s" % r.stderr)
clim = json.loads(r.stdout)["groups"]["skid"]["limit_end"]
q.check(abs(wlim / clim - af) < 1e-6 * af, "warm limit %g / own limit %g = "
        "%g, adaptive factor %g" % (wlim, clim, wlim / clim, af))
r = run("check", "-c", warm)
q.check(r.returncode == 0, "check warm failed: %s" % r.stderr)
c = kv(r.stdout)
q.check(abs(float(c["model_limit_factor"]) - af) < 1e-6 * af,
        "check's warm factor %s, fit's adaptive %g" %
        (c["model_limit_factor"], af))
q.note("warm: limit %.6g = %.6g (own) x adaptive factor %.6g; the fixed "
       "model's factor is %.6g" % (wlim, clim, af, lf))

# the daemon with the fixed model: its limit is the fit's empirical one
# and it learns nothing from the stream
ft, fx = t_readings(2000, 47)
alerts, st, dm = q.run_stream(tmp, "fixed", "binary", ft, fx,
                              warmup=200, alarms_per_day=20, model=path,
                              model_use="fixed")
gs = st["groups"]["skid"]
q.check(abs(gs["limit"] - le) < 1e-6 * le, "daemon limit %r, fit's %r" %
        (gs["limit"], le))
# counters start at the load (qw_detector_counters_reset): a fixed model
# learns nothing, yet scores every reading of the stream
q.check(gs["learned"] == 0, "the fixed model learned %r readings" %
        gs["learned"])
q.check(gs["readings"] == len(ft), "daemon counted %r readings of %d" %
        (gs["readings"], len(ft)))
dm.stop()
q.note("daemon with the fixed model: limit %.6g, %d alerts on 2000 fresh "
       "readings" % (gs["limit"], len(alerts)))

# refusals: other channels, missing file; replay, check and run
other = os.path.join(tmp, "other.ini")
g = q.skid_group(warmup=200, model=path)
g["channels"] = list(reversed(q.SKID))
with open(other, "w") as fh:
    fh.write(q.ini(tmp, {"skid": g}, [">tcp://127.0.0.1:5999"]))
missing = os.path.join(tmp, "missing.ini")
config(missing, model=os.path.join(tmp, "nope.qwmodel"))
for ini in (other, missing):
    for verb in (["replay", "-c", ini, "-q", fresh_csv], ["check", "-c", ini],
                 ["run", "-c", ini]):
        r = run(*verb)
        q.check(r.returncode == 2, "%s %s: exit %d (want 2): %s" %
                (verb[0], os.path.basename(ini), r.returncode, r.stderr))
        q.check(".qwmodel" in r.stderr, "%s: message does not name the "
                "file: %s" % (verb[0], r.stderr))
q.note("refused: " + r.stderr.strip().splitlines()[-1])

# whitening: a var1 group fits through its own detector; a group with
# other dynamics refuses that model, naming the setting
dyn = os.path.join(tmp, "var1.ini")
config(dyn, dynamics="var1")
dmodels = os.path.join(tmp, "dmodels")
os.mkdir(dmodels)
r = run("fit", "-c", dyn, "-q", "-o", dmodels, fit_csv)
q.check(r.returncode == 0 and "dynamics:" in r.stdout and
        "var1" in kv(r.stdout)["dynamics"], "var1 fit: %s" % r.stderr)
dpath = os.path.join(dmodels, "skid.qwmodel")
config(dyn, dynamics="var1", model=dpath)
r = run("replay", "-c", dyn, "--json", "-q", fresh_csv)
q.check(r.returncode == 0, "replay of the var1 model: %s" % r.stderr)
config(dyn, dynamics="ar1", model=dpath)
r = run("replay", "-c", dyn, "-q", fresh_csv)
q.check(r.returncode == 2 and "dynamics = var1" in r.stderr and
        dpath in r.stderr, "ar1 group, var1 model: exit %d: %s" %
        (r.returncode, r.stderr))
q.note("refused: " + r.stderr.strip())

for args in (["fit", fit_csv], ["fit", "-c", base],
             ["fit", "-c", base, "--group", "nope", fit_csv],
             ["fit", "-c", base, "--bogus", fit_csv]):
    r = run(*args)
    q.check(r.returncode == 2, "%r: exit %d, want 2" % (args, r.returncode))
r = run("fit", "-c", base, "-q", "-o", os.path.join(tmp, "no", "dir"),
        fit_csv)
q.check(r.returncode == 1 and "no/dir" in r.stderr,
        "unwritable -o: exit %d: %s" % (r.returncode, r.stderr))
print("ok")
