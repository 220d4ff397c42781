"""Replay 2 (issue 4, test 2), end to end: --labels metrics from the real
replay equal the same definitions computed here, independently, from the
--scores alarm column and the labels (the small hand-computed example is
tests/test_summary.c).  Three labelled faults, and a generous
alarms_per_day so that false alarms occur too."""
import csv
import json
import os
import subprocess

import qwtest as q

q.need_program()
tmp = q.tmpdir()
N = 6000
faults = [(2000, 2040), (3500, 3530), (5000, 5060)]
t, x = q.skid_readings(N, seed=77, fault=faults[0])
x[3500:3530, 3] += 0.5        # pump_amps step
x[5000:5060, 0] += 0.01 * q.np.arange(60)  # supply_t drift
lab = [0] * N
for a, b in faults:
    for i in range(a, b):
        lab[i] = 1
ini = os.path.join(tmp, "l.ini")
with open(ini, "w") as f:
    f.write(q.ini(tmp, {"skid": q.skid_group(alarms_per_day=3000)},
                  [">tcp://127.0.0.1:5999"]))
data = os.path.join(tmp, "l.csv")
with open(data, "w") as f:
    f.write("time," + ",".join(q.SKID) + ",label\n")
    for i in range(N):
        f.write("%r,%s,%d\n" % (float(t[i]), ",".join(repr(float(v))
                                                      for v in x[i]), lab[i]))
scores = os.path.join(tmp, "s.csv")
r = subprocess.run([q.QW, "replay", "-c", ini, "--json", "--labels", "label",
                    "--scores", scores, data], capture_output=True, text=True)
q.check(r.returncode == 0, "exit %d %s" % (r.returncode, r.stderr))
out = json.loads(r.stdout)
with open(scores) as f:
    alarm = [0] + [int(row["alarm"]) for row in csv.DictReader(f)]
q.check(len(alarm) == N, "scores rows %d" % len(alarm))

# independent computation of quadwatch-replay(1)'s definitions
events, detected, delays = 0, 0, []
i = 0
while i < N:
    if lab[i] == 1:
        j = i
        while j < N and lab[j] == 1:
            j += 1
        events += 1
        hit = [k for k in range(i, j) if alarm[k]]
        if hit:
            detected += 1
            delays.append(hit[0] - i)
        i = j
    else:
        i += 1
neg = [k for k in range(N) if lab[k] == 0]
far = sum(alarm[k] for k in neg) / len(neg)
alarms, true_alarms = 0, 0
k = 0
while k < N:
    if alarm[k] and (k == 0 or not alarm[k - 1]):
        e = k
        while e < N and alarm[e]:
            e += 1
        alarms += 1
        true_alarms += any(lab[m] for m in range(k, e))
        k = e
    else:
        k += 1
dr = detected / events
prec = true_alarms / alarms
f1 = 2 * prec * dr / (prec + dr)
want = {"detection_rate": dr, "false_alarm_rate": far, "precision": prec,
        "f1": f1, "mean_delay": sum(delays) / len(delays)}
q.note("alarms %d (true %d), events %d detected %d; %r" %
       (alarms, true_alarms, events, detected, want))
q.check(alarms == out["alarms"], "alarms %d vs %d" % (alarms, out["alarms"]))
q.check(0 < prec < 1 and far > 0, "the example needs false alarms too")
for key, v in want.items():
    q.check(abs(out[key] - v) <= 1e-12 * max(1.0, abs(v)),
            "%s: replay %r, want %r" % (key, out[key], v))
    q.check(abs(out["groups"]["skid"][key] - v) <= 1e-12 * max(1.0, abs(v)),
            "group %s" % key)
print("ok")

# A per-group truth column, label_<group>, takes precedence over the shared
# one: here label_skid marks no fault at all, so the same alarms are now all
# false alarms and no event exists to detect.
data2 = os.path.join(tmp, "l2.csv")
with open(data) as f, open(data2, "w") as g:
    for n, line in enumerate(f):
        g.write(line.rstrip("\n") + (",label_skid\n" if n == 0 else ",0\n"))
r = subprocess.run([q.QW, "replay", "-c", ini, "--json", "--labels", "label",
                    data2], capture_output=True, text=True)
q.check(r.returncode == 0, "exit %d %s" % (r.returncode, r.stderr))
own = json.loads(r.stdout)
q.check(own["alarms"] == out["alarms"], "same alarms with the own column")
q.check(own["precision"] == 0.0, "precision with label_skid all 0: %r"
        % own["precision"])
q.check(own["detection_rate"] in (None, 0.0),
        "no event to detect: %r" % own["detection_rate"])
q.note("label_skid preferred over label: precision %r, detection %r"
       % (own["precision"], own["detection_rate"]))
