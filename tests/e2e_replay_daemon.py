"""Replay 1 (issue 4, test 1): the daemon and `quadwatch replay` give
identical alerts on the same stream.

A skid stream with two faults (flow's relation to the load broken, then a
step on supply_t) goes to the live daemon in binary batches; its alerts are
collected off the bus.  The same readings, with the times the daemon
decoded (int64 ns -> s), are written as CSV and replayed with --json and
--scores.  The raise/clear events must be identical: every field of every
alert (time, event, score, limit, pvalue, dof, ranked channels with drop
and z) equal to the last bit, and the --scores alarm column must switch at
the same readings with the same score and top channel."""
import csv
import json
import os
import subprocess

import qwtest as q

q.need_program()
N = 3000
t, x = q.skid_readings(N, seed=4417, fault=(1000, 1040))
x[2000:2030, 0] += 0.4  # supply_t steps 8 noise sigmas
tmp = q.tmpdir()

alerts, st, d = q.run_stream(tmp, "live", "binary", t, x)
rc, _ = d.stop()
q.check(rc == 0, "daemon exit %d" % rc)
q.check(st["groups"]["skid"]["readings"] == N, "daemon readings %r" % st)
raises = [a for a in alerts if a["event"] == "raise"]
q.check(len(raises) >= 2, "want 2 raises live, got %r" %
        [(a["event"], a["time"]) for a in alerts])


def decoded(ti):
    """The time the daemon decodes from qwtest.binary's int64 ns."""
    ns = int(round(ti * 1e9))
    sec, rem = divmod(ns, 10 ** 9)
    return float(sec) + rem / 1e9


path = os.path.join(tmp, "stream.csv")
with open(path, "w") as f:
    f.write("time," + ",".join(q.SKID) + "\n")
    for i in range(N):
        f.write(repr(decoded(t[i])) + "," +
                ",".join(repr(float(v)) for v in x[i]) + "\n")
scores = os.path.join(tmp, "scores.csv")
r = subprocess.run([q.QW, "replay", "-c", d.path, "--json", "--scores",
                    scores, path], capture_output=True, text=True)
q.check(r.returncode == 0, "replay exit %d: %s" % (r.returncode, r.stderr))
out = json.loads(r.stdout)
ev = out["events"]
q.note("live %d alerts, replay %d events; first raise top %s" %
       (len(alerts), len(ev), raises[0]["channels"][0]["name"]))
q.check(len(ev) == len(alerts), "count: live %d replay %d" %
        (len(alerts), len(ev)))
for a, b in zip(alerts, ev):
    q.check(a == b, "alert differs:\n live   %r\n replay %r" % (a, b))
q.check(out["alarms"] == st["groups"]["skid"]["alarms"],
        "alarms: replay %r, daemon %r" % (out["alarms"],
                                          st["groups"]["skid"]["alarms"]))
q.check(out["readings"] == N, "replay readings %r" % out["readings"])

# the --scores file: alarm transitions at the same readings
with open(scores) as f:
    rows = list(csv.DictReader(f))
q.check(list(rows[0].keys()) ==
        "time,group,score,limit,pvalue,alarm,top".split(","),
        "scores header %r" % list(rows[0].keys()))
trans, prev = [], "0"
for row in rows:
    if row["alarm"] != prev:
        trans.append((float(row["time"]),
                      "raise" if row["alarm"] == "1" else "clear",
                      float(row["score"]), row["top"]))
        prev = row["alarm"]
live = [(a["time"], a["event"], a["score"],
         a["channels"][0]["name"] if a["event"] == "raise" else "")
        for a in alerts]
q.check(len(trans) == len(live), "scores transitions %r vs live %r" %
        (trans, live))
for (ts, es, ss, ks), (tl, el, sl, kl) in zip(trans, live):
    q.check(abs(ts - tl) < 1e-6 and es == el, "event %r vs %r" %
            ((ts, es), (tl, el)))
    q.check(abs(ss - sl) <= 1e-9 * abs(sl), "score %r vs %r" % (ss, sl))
    q.check(es == "clear" or ks == kl, "top %r vs %r" % (ks, kl))
# one deliberately broken comparison must fail: a shifted copy differs
q.check(alerts[1:] + alerts[:1] != ev, "the comparison cannot fail")
print("ok")
