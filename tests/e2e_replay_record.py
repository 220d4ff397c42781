"""Replay 4 (issue 4, test 4): record, then replay, equals the live run.

One publisher (XPUB, verbose so both subscriptions show), the daemon and
`quadwatch record` (rotating every ~40 kB) on the same stream with a fault;
the recorder stops by itself after --count messages.  Replaying the parts
in order must give alerts identical, field by field, to those the daemon
published; SIGTERM on a second recorder must close a valid capture."""
import glob
import json
import os
import signal
import subprocess
import time

import qwtest as q

q.need_program()
tmp = q.tmpdir()
N, BATCH = 3000, 64
t, x = q.skid_readings(N, seed=6113, fault=(1500, 1540))
nmsg = (N + BATCH - 1) // BATCH

pub = q.Publisher()
pub.sock.setsockopt(q.zmq.XPUB_VERBOSE, 1)
cfg = q.ini(tmp, {"skid": q.skid_group()}, [">" + pub.endpoint])
d = q.Daemon(tmp, cfg, "live")
pub.wait_sub("skid")
out = os.path.join(tmp, "cap.qwc")
rec = subprocess.Popen([q.QW, "record", "-c", d.path, "-o", out, "--rotate",
                        "40000", "--count", str(nmsg)],
                       stderr=subprocess.PIPE, text=True)
pub.wait_sub("skid")
sub = q.AlertSub(d.alerts)
sub.ready()
time.sleep(0.2)  # the recorder's poll loop is running
q.send_stream(pub, "skid", t, x, "binary", batch=BATCH)
st = d.wait_readings("skid", N)
sub.pump(0.3)
try:
    _, err = rec.communicate(timeout=q.WAIT)
except subprocess.TimeoutExpired:
    rec.kill()
    q.fail("recorder did not stop after %d messages" % nmsg)
q.check(rec.returncode == 0, "record exit %d: %s" % (rec.returncode, err))
parts = sorted(glob.glob(out + "*"))
q.note("record: %d parts; %s" % (len(parts), err.strip().split("\n")[-1]))
q.check(len(parts) >= 2 and parts[0] == out, "parts %r" % parts)

r = subprocess.run([q.QW, "replay", "-c", d.path, "--json", "-q"] + parts,
                   capture_output=True, text=True)
q.check(r.returncode == 0, "replay exit %d %s" % (r.returncode, r.stderr))
res = json.loads(r.stdout)
live = sub.alerts
q.note("live %d alerts, replay %d" % (len(live), len(res["events"])))
q.check(len(live) >= 2 and live[0]["event"] == "raise", "live %r" % live)
q.check(res["events"] == live, "replay differs:\n%r\n%r" %
        (res["events"], live))
q.check(res["readings"] == N == st["groups"]["skid"]["readings"],
        "readings %r" % res["readings"])

# SIGTERM: the recorder flushes and closes a capture that replays
out2 = os.path.join(tmp, "cap2.qwc")
rec = subprocess.Popen([q.QW, "record", "-c", d.path, "-o", out2],
                       stderr=subprocess.PIPE, text=True)
pub.wait_sub("skid")
time.sleep(0.2)
q.send_stream(pub, "skid", t[:640], x[:640], "binary", batch=BATCH)
time.sleep(0.5)
rec.send_signal(signal.SIGTERM)
_, err = rec.communicate(timeout=5)
q.check(rec.returncode == 0, "record after SIGTERM: %d %s" %
        (rec.returncode, err))
r = subprocess.run([q.QW, "replay", "-c", d.path, "--json", "-q", out2],
                   capture_output=True, text=True)
q.check(r.returncode == 0 and json.loads(r.stdout)["readings"] == 640,
        "replay of the SIGTERM capture: %s %s" % (r.stdout[:200], r.stderr))
# an existing OUT is refused; a bad option is a usage error
r = subprocess.run([q.QW, "record", "-c", d.path, "-o", out2, "--count",
                    "1"], capture_output=True, text=True, timeout=5)
q.check(r.returncode == 1 and out2 in r.stderr, "existing OUT: %d %r" %
        (r.returncode, r.stderr))
r = subprocess.run([q.QW, "record", "-c", d.path, "-o", out2, "--rotate",
                    "abc"], capture_output=True, text=True, timeout=5)
q.check(r.returncode == 2, "bad --rotate: %d" % r.returncode)
rc, _ = d.stop()
pub.close()
sub.close()
print("ok")
