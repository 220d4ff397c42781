"""End-to-end 5: the control socket and `quadwatch ctl`.  status carries
the contract's fields; rebaseline sets model_age back to 0 (and clears a
raised alarm with a published clear); save answers "no state dir" without
[state] dir; unknown commands and garbage get error objects and never stop
the daemon; ctl exits 1 when nobody answers.  Also `quadwatch check` prints
the chi-square limit scipy.stats.chi2.isf gives for the configured alpha."""
import json
import subprocess
import qwtest as q

q.need_program()
N, FAULT = 900, (700, 900)  # the fault lasts: the group is in alarm at the end
t, x = q.skid_readings(N, seed=1618, fault=FAULT)
tmp = q.tmpdir()
pub = q.Publisher()
d = q.Daemon(tmp, q.ini(tmp, {"skid": q.skid_group()}, [">" + pub.endpoint]))
pub.wait_sub("skid")
sub = q.AlertSub(d.alerts)
sub.ready()
q.send_stream(pub, "skid", t, x, "binary")
st = d.wait_readings("skid", N)


def ctl(*args, timeout=10):
    r = subprocess.run([q.QW, "ctl"] + list(args), capture_output=True,
                       text=True, timeout=timeout)
    return r.returncode, r.stdout, r.stderr


# status: fields of the contract
rc, out, err = ctl(d.control, "status")
q.check(rc == 0, "ctl status exit %d: %s" % (rc, err))
st = json.loads(out)
g = st["groups"]["skid"]
for k in ("readings", "scored", "learned", "alarms", "exceedances", "in_alarm",
          "limit", "alpha", "dof", "model_age", "rejected", "lost"):
    q.check(k in g, "status lacks groups.skid.%s" % k)
for k in ("received", "decoded", "readings", "rejected", "gaps", "lost",
          "alarms", "alerts_dropped", "uptime"):
    q.check(k in st, "status lacks %s" % k)
q.check(g["readings"] == N and g["in_alarm"] is True and g["alarms"] >= 1,
        "status before rebaseline: %r" % g)
q.check(g["model_age"] > 0 and g["dof"] == 4 and g["limit"] > 0, "status %r" % g)

# rebaseline: model age 0, the raised alarm is cleared on the bus
sub.wait_alerts(1)
sub.pump(0.2)
n_alerts = len(sub.alerts)
q.check(sub.alerts[-1]["event"] == "raise", "not raised: %r" % sub.alerts)
rc, out, err = ctl(d.control, "rebaseline", "skid")
q.check(rc == 0 and json.loads(out) == {"ok": True, "group": "skid"},
        "rebaseline: %d %r" % (rc, out))
g2 = d.status()["groups"]["skid"]
q.check(g2["model_age"] == 0 and g2["in_alarm"] is False and g2["rebaselines"] == 1,
        "after rebaseline: %r" % g2)
sub.wait_alerts(n_alerts + 1)
q.check(len(sub.alerts) == n_alerts + 1 and sub.alerts[-1]["event"] == "clear",
        "no clear published on rebaseline: %r" % sub.alerts[n_alerts:])
# the model learns again from nothing
q.send_stream(pub, "skid", t[:100], x[:100], "binary", seq0=N)
g3 = d.wait_readings("skid", N + 100)["groups"]["skid"]
q.check(g3["model_age"] == 100, "model_age after 100 more: %r" % g3["model_age"])

# save without [state] dir
rc, out, err = ctl(d.control, "save")
q.check(rc == 1 and json.loads(out) == {"ok": False, "error": "no state dir"},
        "save: %d %r" % (rc, out))

# errors: answered, never fatal
cases = [("rebaseline", "nosuch"), ("rebaseline",), ("frobnicate",), ("",)]
for c in cases:
    r = d.ctl(" ".join(c))
    q.check(r["ok"] is False and r["error"], "%r answered %r" % (c, r))
r = d.ctl("", frames=[b"rebaseline", b"skid"])
q.check(r == {"ok": True, "group": "skid"}, "two-frame request: %r" % r)
r = d.ctl("", frames=[b"\xff\x00\xfe" * 50])
q.check(r["ok"] is False, "binary garbage: %r" % r)
rc, out, err = ctl(d.control, "rebaseline", "nosuch")
q.check(rc == 1 and "nosuch" in out, "ctl error exit %d %r" % (rc, out))
rc, out, err = ctl(d.control)
q.check(rc == 2, "ctl without a command: exit %d" % rc)
q.check(d.alive() and d.status()["control_requests"] >= 10, "daemon after errors")

# no daemon: exit 1 after the receive timeout
t0 = q.time.monotonic()
rc, out, err = ctl("ipc://%s/nobody" % tmp, "status")
secs = q.time.monotonic() - t0
q.check(rc == 1 and 2.5 < secs < 6 and "no reply" in err,
        "ctl to nobody: %d after %.1f s: %s" % (rc, secs, err))
q.note("ctl to a silent endpoint: exit 1 after %.1f s" % secs)
rc, secs = d.stop()
q.check(rc == 0 and secs < q.STOP_WITHIN, "stop %d %.2f" % (rc, secs))

# check: limit vs scipy.stats.chi2.isf
try:
    from scipy.stats import chi2
except ImportError:
    q.fail("python3-scipy missing")
r = subprocess.run([q.QW, "check", "-c", d.path], capture_output=True,
                   text=True, timeout=10)
q.check(r.returncode == 0, "check exit %d: %s" % (r.returncode, r.stderr))
kv = {}
for line in r.stdout.splitlines():
    if ":" in line:
        k, v = line.split(":", 1)
        kv.setdefault(k.strip(), v.strip())
alpha, lim = float(kv["alpha"]), float(kv["limit_chisq"])
ref = chi2.isf(alpha, 4)
q.note("check: alpha %.6g limit %.10g, scipy chi2.isf %.10g" % (alpha, lim, ref))
q.check(abs(lim - ref) <= 1e-8 * ref, "check limit %r vs scipy %r" % (lim, ref))
print("ok")
