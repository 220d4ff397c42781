"""End-to-end 4: reload (SIGHUP and `ctl reload`).  A valid change takes
effect (alarms_per_day moves the limit) and the learned model survives it;
a broken file is refused and the old configuration keeps running; a new
group is subscribed; changed channels restart that model; a moved control
endpoint answers on its new address after replying on the old one."""
import os
import signal
import subprocess
import qwtest as q

q.need_program()
t, x = q.skid_readings(900, seed=2718)
tmp = q.tmpdir()
pub = q.Publisher()
inputs = [">" + pub.endpoint]
TOWER = {"channels": ["basin_t", "leaving_t", "fan_kw"], "half_life": 500}


def cfg(skid=None, more=None, control=None):
    g = {"skid": q.skid_group(**(skid or {}))}
    g.update(more or {})
    text = q.ini(tmp, g, inputs)
    if control:
        text = text.replace("control = @ipc://%s/control" % tmp, "control = " + control)
    return text


def wait_reloads(d, n, key="reloads"):
    end = q.time.monotonic() + q.WAIT
    while q.time.monotonic() < end:
        st = d.status()
        if st[key] >= n:
            return st
        q.time.sleep(0.05)
    q.fail("%s stayed at %d, want %d" % (key, st[key], n))


d = q.Daemon(tmp, cfg())
pub.wait_sub("skid")
q.send_stream(pub, "skid", t[:600], x[:600], "binary")
s0 = d.wait_readings("skid", 600)["groups"]["skid"]
q.check(s0["model_age"] == 600, "model_age %d" % s0["model_age"])

# 1. valid change by SIGHUP: limit moves, model kept
d.write(cfg(skid={"alarms_per_day": 20}))
d.proc.send_signal(signal.SIGHUP)
s1 = wait_reloads(d, 1)["groups"]["skid"]
q.note("limit %.4f -> %.4f at 1 -> 20 alarms/day; model_age %d -> %d" %
       (s0["limit"], s1["limit"], s0["model_age"], s1["model_age"]))
q.check(s1["limit"] < s0["limit"] and s1["alpha"] > 10 * s0["alpha"],
        "alarms_per_day did not move the limit: %r" % s1)
q.check(s1["model_age"] == s0["model_age"] and s1["readings"] == s0["readings"],
        "model lost on reload: %r" % s1)

# 2. broken file by ctl reload: refused, old config runs
d.write(cfg(skid={"alarms_per_day": 20, "half_lief": 100}))
r = d.ctl("reload")
q.check(r["ok"] is False and "error" in r, "broken reload answered %r" % r)
log = d.logtext()
q.check("half_lief" in log and "%s:" % d.path in log,
        "the log must name the file and key: %s" % log[-500:])
st = d.status()
q.check(st["reload_failures"] == 1 and st["reloads"] == 1, "counters %r" % st)
q.check(st["groups"]["skid"]["limit"] == s1["limit"], "limit changed")
# the same through quadwatch ctl, and by SIGHUP
ctl = subprocess.run([q.QW, "ctl", d.control, "reload"], capture_output=True,
                     text=True, timeout=10)
q.check(ctl.returncode == 1 and '"ok":false' in ctl.stdout.replace(" ", ""),
        "quadwatch ctl reload of a broken file: %d %r" % (ctl.returncode, ctl.stdout))
d.proc.send_signal(signal.SIGHUP)
wait_reloads(d, 3, "reload_failures")
q.check(d.alive(), "daemon died on a broken reload")

# 3. the model keeps learning after the reload
q.send_stream(pub, "skid", t[600:700], x[600:700], "binary", seq0=600)
s2 = d.wait_readings("skid", 700)["groups"]["skid"]
q.check(s2["model_age"] == 700 and s2["lost"] == 0, "after reload: %r" % s2)

# 4. a new group gets subscribed; changed channels restart a model
new_skid = dict(q.skid_group(alarms_per_day=20))
d.write(cfg(skid={"alarms_per_day": 20}, more={"tower": TOWER}))
q.check(d.ctl("reload")["ok"] is True, "reload with a new group refused")
pub.wait_sub("tower")
for i in range(5):
    pub.send("tower", ("%r,21.5,24.0,3.2" % (100.0 + i)).encode())
s3 = d.wait_readings("tower", 5)
q.check(s3["groups"]["skid"]["model_age"] == 700, "skid model lost")
d.write(cfg(skid={"alarms_per_day": 20}, more={"tower": dict(TOWER, channels=["basin_t", "fan_kw"])}))
q.check(d.ctl("reload")["ok"] is True, "reload with changed channels refused")
s4 = d.status()
q.check(s4["groups"]["tower"]["model_age"] == 0 and s4["groups"]["tower"]["dof"] == 2,
        "tower with new channels kept its model: %r" % s4["groups"]["tower"])
q.check(s4["groups"]["skid"]["model_age"] == 700, "skid model lost")

# 5. control endpoint moved: reply on the old socket, then the new one
newctl = "ipc://%s/control2" % tmp
d.write(cfg(skid={"alarms_per_day": 20}, control="@" + newctl))
q.check(d.ctl("reload")["ok"] is True, "reload moving control refused")
d.control = newctl
st = d.status()
q.check(st["reloads"] == 4 and st["groups"]["skid"]["model_age"] == 700,
        "after moving control: %r" % st)
q.check("tower" not in st["groups"], "tower still configured")
rc, secs = d.stop()
q.check(rc == 0 and secs < q.STOP_WITHIN, "stop: %d in %.2f s" % (rc, secs))
print("ok")
