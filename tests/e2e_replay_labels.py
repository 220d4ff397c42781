"""Replay 2 (issue 4, test 2), end to end: --labels metrics from the real
replay equal the same definitions computed here, independently, from the
--scores file and the labels of the input (the small hand-computed example
is tests/test_summary.c).  Three labelled faults, and a generous
alarms_per_day so that false alarms occur too.

The metrics count exactly the readings the scores file lists: the input
also holds readings with a missing channel (scored on the rest, listed),
readings refused by the detector (every channel missing; a value so large
the score overflows: no row), malformed rows (no row), and the warm-up
(listed, never alarmed), some of each inside a labelled event.  Rows are
matched to their labels by time; the figures must be equal to the last
bit of the printed doubles (JSON at 17 digits), not merely close."""
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
PARTIAL = [5, 150, 2003, 2004, 3510, 4500]   # one channel empty
EMPTY = [7, 250, 2010, 3512, 5001]           # every channel empty: refused
HUGE = [40, 2020, 4800]                      # 1e300: the score overflows
MALFORMED = [60, 2030, 3000]                 # a bad number: row skipped
ini = os.path.join(tmp, "l.ini")
with open(ini, "w") as f:
    f.write(q.ini(tmp, {"skid": q.skid_group(alarms_per_day=3000)},
                  [">tcp://127.0.0.1:5999"]))
data = os.path.join(tmp, "l.csv")
stamp = ["%.6f" % v for v in t]
with open(data, "w") as f:
    f.write("time," + ",".join(q.SKID) + ",label\n")
    for i in range(N):
        cells = [repr(float(v)) for v in x[i]]
        if i in PARTIAL:
            cells[i % 4] = ""
        if i in EMPTY:
            cells = [""] * 4
        if i in HUGE:
            cells[1] = "1e300"
        if i in MALFORMED:
            cells[2] = "4.1.7"
        f.write("%s,%s,%d\n" % (stamp[i], ",".join(cells), lab[i]))
scores = os.path.join(tmp, "s.csv")
r = subprocess.run([q.QW, "replay", "-c", ini, "--json", "--labels", "label",
                    "--scores", scores, data], capture_output=True, text=True)
q.check(r.returncode == 0, "exit %d %s" % (r.returncode, r.stderr))
out = json.loads(r.stdout)
grp = out["groups"]["skid"]
label_at = dict(zip(stamp, lab))
with open(scores) as f:
    rows = list(csv.DictReader(f))
alarm = [int(row["alarm"]) for row in rows]
lab_s = [label_at[row["time"]] for row in rows]   # KeyError: a stray row
listed = set(row["time"] for row in rows)
M = len(rows)
# the first reading becomes the mean; refused and malformed rows: no row
want_rows = N - 1 - len(EMPTY) - len(HUGE) - len(MALFORMED)
q.check(M == want_rows, "scores rows %d, want %d" % (M, want_rows))
q.check(all(stamp[i] not in listed for i in EMPTY + HUGE + MALFORMED),
        "a refused reading has a scores row")
q.check(all(stamp[i] in listed for i in PARTIAL), "a partial reading "
        "has no scores row")
q.check(grp["rejected"]["empty"] == len(EMPTY) and
        grp["rejected"]["overflow"] == len(HUGE) and
        grp["rejected"]["malformed_row"] == len(MALFORMED),
        "rejections %r" % grp["rejected"])
# warm-up: the model has learned the first reading and every complete
# scored one before (partial readings are scored, never learned)
learned, warm = 1, 0
part = set(stamp[i] for i in PARTIAL)
for row in rows:
    if learned >= 300:      # skid_group's warmup
        break
    warm += 1
    learned += row["time"] not in part
q.check(warm >= 299 and M - warm == grp["eligible"],
        "warm-up rows %d, eligible %d of %d" % (warm, grp["eligible"], M))
q.check(not any(alarm[:warm]), "an alarm in the warm-up")

# independent computation of quadwatch-replay(1)'s definitions, over the
# rows of the scores file in their order
events, detected, delays = 0, 0, []
i = 0
while i < M:
    if lab_s[i] == 1:
        j = i
        while j < M and lab_s[j] == 1:
            j += 1
        events += 1
        hit = [k for k in range(i, j) if alarm[k]]
        if hit:
            detected += 1
            delays.append(hit[0] - i)
        i = j
    else:
        i += 1
neg = [k for k in range(M) if lab_s[k] == 0]
far = sum(alarm[k] for k in neg) / len(neg)
alarms, true_alarms = 0, 0
k = 0
while k < M:
    if alarm[k] and (k == 0 or not alarm[k - 1]):
        e = k
        while e < M and alarm[e]:
            e += 1
        alarms += 1
        true_alarms += any(lab_s[m] for m in range(k, e))
        k = e
    else:
        k += 1
dr = detected / events
prec = true_alarms / alarms
f1 = 2 * prec * dr / (prec + dr)
want = {"detection_rate": dr, "false_alarm_rate": far, "precision": prec,
        "f1": f1, "mean_delay": sum(delays) / len(delays)}
q.note("rows %d (warm-up %d), alarms %d (true %d), events %d detected %d, "
       "label-0 rows %d; %r" % (M, warm, alarms, true_alarms, events,
                                detected, len(neg), want))
q.check(alarms == out["alarms"], "alarms %d vs %d" % (alarms, out["alarms"]))
q.check(0 < prec < 1 and far > 0, "the example needs false alarms too")
for key, v in want.items():
    q.check(out[key] == v, "%s: replay %r, want %r" % (key, out[key], v))
    q.check(grp[key] == v, "group %s: replay %r, want %r" % (key, grp[key], v))
# the checker can fail: the same figure over every reading offered to the
# detector (refused ones and the first included) differs
neg_all = sum(1 for i in range(N) if lab[i] == 0 and i not in MALFORMED)
far_all = sum(alarm[k] for k in neg) / neg_all
q.check(neg_all != len(neg) and far_all != out["false_alarm_rate"],
        "the check cannot tell")
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
