"""Replay 3 (issue 4, test 3): CSV edge cases through `quadwatch replay`.

One file with a UTF-8 BOM, CRLF line ends, a quoted header, quoted cells
(one holding a comma, in an unused column), ISO 8601 times (with Z, an
offset and fractional seconds) and epoch times, empty and nan cells, an
extra column, and one malformed row.  Replay must take every good row
(count and times checked in --scores), report the bad row as FILE:LINE,
count it, and refuse missing channel columns with exit 2 naming the
column; with two groups a CSV feeds the one whose channels it has."""
import calendar
import csv
import json
import os
import subprocess

import qwtest as q

q.need_program()
tmp = q.tmpdir()
ini = os.path.join(tmp, "c.ini")
with open(ini, "w") as f:
    f.write(q.ini(tmp, {"skid": q.skid_group(warmup=20, half_life=50),
                        "tower": {"channels": ["fan_hz", "basin_t"],
                                  "warmup": 20}},
                  [">tcp://127.0.0.1:5999"]))


def iso(sec):
    return "%sZ" % __import__("time").strftime("%Y-%m-%dT%H:%M:%S",
                                               __import__("time").gmtime(sec))


t, x = q.skid_readings(80, seed=902)
rows = []
want_t = []
for i in range(80):
    ti = 1700000000 + i  # whole seconds: ISO and epoch give the same t
    v = ["%.6f" % u for u in x[i]]
    if i % 4 == 0:
        tt = iso(ti)
    elif i % 4 == 1:
        tt = "%d.000" % ti
    elif i % 4 == 2:
        # an offset: 01:30 east, so the local clock reads 1.5 h later
        g = __import__("time").gmtime(ti + 5400)
        tt = __import__("time").strftime("%Y-%m-%dT%H:%M:%S", g) + ".0+01:30"
    else:
        tt = '"%s"' % iso(ti).replace("T", " ")  # quoted, space for T
    if i == 30:
        v[1] = ""        # missing cell
    if i == 31:
        v[2] = "nan"     # missing as nan
    if i == 40:
        v[3] = '"%s"' % v[3]  # a quoted number
    note = '"ok, fine"' if i % 7 == 0 else "x"
    rows.append(",".join([tt] + v[:2] + [note] + v[2:]))
    want_t.append(float(ti))
bad_line = 1 + 50 + 1   # header is line 1; the bad row goes after row 50
rows.insert(50, iso(1700000050) + ",6.8,12.4,x,notanumber,21.3")
text = ('\ufeff"time","supply_t",return_t,"note",flow,"pump_amps"\r\n' +
        "\r\n".join(rows) + "\r\n")
data = os.path.join(tmp, "edge.csv")
with open(data, "w", newline="") as f:
    f.write(text)

scores = os.path.join(tmp, "s.csv")
r = subprocess.run([q.QW, "replay", "-c", ini, "--json", "--scores", scores,
                    data], capture_output=True, text=True)
q.check(r.returncode == 0, "exit %d: %s" % (r.returncode, r.stderr))
out = json.loads(r.stdout)
q.note("stderr: %s" % r.stderr.strip().replace("\n", " | "))
q.check("%s:%d:" % (data, bad_line) in r.stderr,
        "bad row not reported as FILE:%d: %r" % (bad_line, r.stderr))
q.check(out["malformed_rows"] == 1, "malformed_rows %r" % out["malformed_rows"])
q.check(out["groups"]["skid"]["rejected"]["malformed_row"] == 1,
        "group rejected %r" % out["groups"]["skid"]["rejected"])
q.check(list(out["groups"]) == ["skid"], "groups %r" % list(out["groups"]))
q.check(out["readings"] == 80, "readings %r" % out["readings"])
with open(scores) as f:
    got = list(csv.DictReader(f))
# the first reading is the mean (not scored); the rest each give a row
q.check(len(got) == 79, "scores rows %d" % len(got))
for row, tw in zip(got, want_t[1:]):
    q.check(abs(float(row["time"]) - tw) < 1e-6,
            "time %s, want %.1f" % (row["time"], tw))
    q.check(row["group"] == "skid", "group %r" % row["group"])

# missing channel column: exit 2 naming it (asked by --group, or no group)
bad = os.path.join(tmp, "noflow.csv")
with open(bad, "w") as f:
    f.write("time,supply_t,return_t,pump_amps\n1700000000,1,2,3\n")
for extra in (["--group", "skid"], []):
    r = subprocess.run([q.QW, "replay", "-c", ini] + extra + [bad],
                       capture_output=True, text=True)
    q.check(r.returncode == 2 and "flow" in r.stderr and "skid" in r.stderr,
            "missing column %r: exit %d %r" % (extra, r.returncode, r.stderr))
    q.note("missing column %s: %s" % (extra, r.stderr.strip().split("\n")[0]))
r = subprocess.run([q.QW, "replay", "-c", ini, "--group", "tower", data],
                   capture_output=True, text=True)
q.check(r.returncode == 2 and "fan_hz" in r.stderr,
        "--group tower: %d %r" % (r.returncode, r.stderr))
r = subprocess.run([q.QW, "replay", "-c", ini, "--labels", "truth", data],
                   capture_output=True, text=True)
q.check(r.returncode == 2 and "truth" in r.stderr,
        "missing label column: %d %r" % (r.returncode, r.stderr))
r = subprocess.run([q.QW, "replay", "-c", ini, "--group", "pond", data],
                   capture_output=True, text=True)
q.check(r.returncode == 2 and "pond" in r.stderr, "unknown group")
r = subprocess.run([q.QW, "replay", "-c", ini, os.path.join(tmp, "none")],
                   capture_output=True, text=True)
q.check(r.returncode == 1 and "none" in r.stderr, "missing file: %d %r" %
        (r.returncode, r.stderr))
r = subprocess.run([q.QW, "replay", data], capture_output=True, text=True)
q.check(r.returncode == 2, "no -c: exit %d" % r.returncode)
r = subprocess.run([q.QW, "replay", "-c", ini, "--bogus", data],
                   capture_output=True, text=True)
q.check(r.returncode == 2, "unknown option: exit %d" % r.returncode)
# the human summary names the group and the refusal
r = subprocess.run([q.QW, "replay", "-c", ini, "-q", data],
                   capture_output=True, text=True)
q.check(r.returncode == 0 and "group skid: 80 readings" in r.stdout and
        "malformed_row 1" in r.stdout, "human summary: %r" % r.stdout)
print("ok")
