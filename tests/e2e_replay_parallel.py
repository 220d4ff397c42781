"""Replay -j N equals the serial replay byte for byte.

Inputs that exercise every path the workers share out: a simulated plant
CSV of two groups with faults and labels (quadwatch sim, the demo
scenario) with a malformed row and a row whose bad cell is in a column
only one group uses; then a capture holding three groups interleaved
(two of them with faults), an unknown topic and a payload of the wrong
channel count; and a second CSV feeding a third group.  Replayed as one
stream serially and with -j2 and -j3, the --scores file, the --json
summary (with events and labels), the human summary and the --report page
must be identical; so must they with one group (--group: the second
thread takes its p-values and rows); and a file that fails must fail
alike, with one message.  A deliberately different run (one reading fewer) must differ,
so the comparison can fail."""
import os
import subprocess

import qwtest as q

q.need_program()
tmp = q.tmpdir()
ROOT = os.path.abspath(os.path.join(os.path.dirname(__file__), ".."))
demo = os.path.join(ROOT, "conf", "demo.ini")

# the demo plant's groups plus two skid groups for the capture
ini = q.demo_ini(tmp, {"skid": q.skid_group(warmup=100),
                       "skid2": q.skid_group(warmup=150, half_life=500)})

plant = os.path.join(tmp, "plant.csv")
r = subprocess.run([q.QW, "sim", "-c", demo, "-o", plant, "--count",
                    "40000", "--seed", "77", "-q"], capture_output=True,
                   text=True)
q.check(r.returncode == 0, "sim: %s" % r.stderr)
with open(plant) as f:
    lines = f.read().split("\n")
head = lines[0].split(",")
# a malformed row, and a bad cell in a column only the chiller maps
lines[5000] = lines[5000] + ",extra"
cells = lines[9000].split(",")
cells[head.index("chw_flow")] = "oops"
lines[9000] = ",".join(cells)
with open(plant, "w") as f:
    f.write("\n".join(lines))

cap = os.path.join(tmp, "c.qwc")
t1, x1 = q.skid_readings(6000, seed=11, fault=(3000, 3100))
t2, x2 = q.skid_readings(6000, seed=12, fault=(4000, 4060))
recs = []
for a in range(0, 6000, 50):
    recs.append((t1[a], "skid", q.binary(t1[a:a + 50], x1[a:a + 50], a)))
    recs.append((t2[a], "skid2", q.binary(t2[a:a + 50], x2[a:a + 50], a)))
    if a % 1000 == 0:
        recs.append((t2[a], "nobody", q.binary(t2[a:a + 2], x2[a:a + 2], a)))
        recs.append((t2[a], "skid2", q.binary(t2[a:a + 2], x2[a:a + 2, :3],
                                              a)))
with open(cap, "wb") as f:
    f.write(q.capture_bytes(recs))

more = os.path.join(tmp, "more.csv")
t3, x3 = q.skid_readings(3000, seed=13, fault=(2000, 2050))
with open(more, "w") as f:
    f.write("time," + ",".join(q.SKID) + ",label\n")
    for i in range(3000):
        f.write("%.1f,%s,%d\n" % (t3[i] + 1e6, ",".join("%.5f" % v
                                                        for v in x3[i]),
                                  2000 <= i < 2050))


def replay(jobs, inputs, extra=(), tag=None):
    tag = tag or "j%d" % jobs
    sc = os.path.join(tmp, "scores.%s.csv" % tag)
    rep = os.path.join(tmp, "report.%s.html" % tag)
    out = {}
    for mode in ("json", "human"):
        cmd = [q.QW, "replay", "-c", ini, "--labels", "label", "-q",
               "--scores", sc, "--report", rep] + list(extra)
        if mode == "json":
            cmd.append("--json")
        if jobs > 1:
            cmd.append("-j%d" % jobs if jobs == 2 else "-j")
            if jobs != 2:
                cmd.append(str(jobs))
        r = subprocess.run(cmd + inputs, capture_output=True, text=True)
        out[mode] = (r.returncode, r.stdout, r.stderr)
        for key, path in (("_scores", sc), ("_report", rep)):
            out[mode + key] = None
            if os.path.exists(path):
                with open(path) as f:
                    out[mode + key] = f.read()
                os.unlink(path)
    return out


# the capture has no label column: --labels applies to CSV inputs only
inputs = [plant, cap, more]
ser = replay(1, inputs)
q.check(ser["json"][0] == 0, "serial replay: %r" % (ser["json"][2],))
nrows = ser["json_scores"].count("\n") - 1
q.note("serial: %d score rows, %d bytes of JSON" %
       (nrows, len(ser["json"][1])))
q.check(nrows > 50000, "too few rows: %d" % nrows)
q.check('"raise"' in ser["json"][1], "no alarm in the summary")
for g in ("chiller", "pump_skid", "skid", "skid2"):
    q.check('"%s": {' % g in ser["json"][1], "group %s not played" % g)
q.check('"unknown_topic": 6' in ser["json"][1] and
        '"malformed_rows": 2' in ser["json"][1], "counters: %s" %
        ser["json"][1][:600])
for jobs in (2, 3):
    par = replay(jobs, inputs)
    for k in ser:
        q.check(par[k] == ser[k], "-j%d differs from the serial run in %s"
                % (jobs, k))
    q.note("-j%d: scores, JSON, human summary and report identical" % jobs)

# one group (--group): -j2 plays it on one thread and takes its p-values
# and rows on a second; the same bytes again
one = replay(1, [cap, more], extra=("--group", "skid"), tag="one1")
q.check(one["json"][0] == 0 and one["json_scores"].count("\n") > 8000,
        "one group: %r" % (one["json"][2],))
par = replay(2, [cap, more], extra=("--group", "skid"), tag="one2")
for k in one:
    q.check(par[k] == one[k], "one group: -j2 differs in %s" % k)
q.note("one group, -j2: scores, JSON, human summary and report identical")

# the checker can fail: one reading fewer must change the scores
with open(more) as f:
    body = f.read().split("\n")
short = os.path.join(tmp, "short.csv")
with open(short, "w") as f:
    f.write("\n".join(body[:-2]) + "\n")
other = replay(2, [plant, cap, short], tag="short")
q.check(other["json_scores"] != ser["json_scores"],
        "a shorter input gave the same scores")

# a failing input fails alike, one message
bad = os.path.join(tmp, "nogroup.csv")
with open(bad, "w") as f:
    f.write("time,zzz\n1,2\n")
a = replay(1, [plant, bad], tag="bad1")["json"]
b = replay(2, [plant, bad], tag="bad2")["json"]
q.check(a[0] == b[0] == 2, "exit codes %d, %d" % (a[0], b[0]))
q.check(a[2] == b[2] and a[2].count("no group has all its channels") == 1,
        "messages differ:\n%s\n%s" % (a[2], b[2]))
print("ok")
