"""Replay -j2 of several groups interrupted by SIGINT: the workers agree on
one cut, so what was played is the serial run's first rows for every group.

The input is the demo plant (two groups, chiller and pump skid) written
by `quadwatch sim` to a regular file, so -j2 shares the groups over two
workers that each read the whole file.  The signal comes about a third of
the way through (timed from a serial run of the same file).  Checks, each
of which can fail:
  - exit status 130, the --json summary says "interrupted": true and counts
    fewer readings than the file holds, the same number for each group
    (one per CSV row up to the cut);
  - the --scores rows are exactly the first rows of the uninterrupted
    serial run's (nothing past the cut for one group, nothing missing for
    the other);
  - the summary equals, field for field (bar "interrupted"), the serial
    summary of the file cut after the same rows;
  - the same for a capture of the two groups' records in turn: the groups
    stop at most one record apart (the cut is a record) and the rows are
    the serial run's first rows.
Before the workers agreed on a cut, each stopped where it saw the signal:
the groups covered spans thousands of rows apart and the rows were no
prefix of the serial run's."""
import csv
import json
import os
import signal
import struct
import subprocess
import time

import numpy as np

import qwtest as q

q.need_program()
tmp = q.tmpdir()
ini = os.path.join(q.ROOT, "conf", "demo.ini")
ROWS = 600000

big = os.path.join(tmp, "plant.csv")
r = subprocess.run([q.QW, "sim", "-c", ini, "-o", big, "--count", str(ROWS)],
                   capture_output=True, text=True)
q.check(r.returncode == 0, "sim: %d %s" % (r.returncode, r.stderr))


def replay(inp, scores, extra=()):
    return [q.QW, "replay", "-q", "-c", ini, "--json", "--scores", scores] \
        + list(extra) + [inp]


def rows_of(path):
    with open(path) as f:
        return f.read().splitlines()


def serial(inp, tag):
    """The uninterrupted serial replay of inp: (summary, --scores rows,
    wall seconds)."""
    sc = os.path.join(tmp, tag + "_ref.csv")
    t0 = time.monotonic()
    r = subprocess.run(replay(inp, sc), capture_output=True, text=True)
    secs = time.monotonic() - t0
    q.check(r.returncode == 0, "%s: serial replay: %d %s"
            % (tag, r.returncode, r.stderr))
    return json.loads(r.stdout), rows_of(sc), secs


def interrupted(inp, tag, total, serial_s):
    """replay -j2 of inp sent SIGINT a third of the serial time in (sooner
    on each retry if it had ended first): (summary, --scores rows, the
    delay).  Exit 130, "interrupted" true, stopped mid-way."""
    delay = serial_s / 3
    for attempt in range(4):
        sc = os.path.join(tmp, "%s_int%d.csv" % (tag, attempt))
        pr = subprocess.Popen(replay(inp, sc, ("-j2",)),
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        time.sleep(delay)
        pr.send_signal(signal.SIGINT)
        out, err = pr.communicate(timeout=120)
        q.check(pr.returncode == 130, "%s -j2 SIGINT: exit %d (%s)"
                % (tag, pr.returncode, err.decode()))
        s = json.loads(out)
        q.check(s["interrupted"] is True, "%s -j2: interrupted %r"
                % (tag, s["interrupted"]))
        if s["readings"] < total:
            break
        q.note("%s attempt %d: the replay ended before the signal "
               "(%.2f s); sooner" % (tag, attempt, delay))
        delay /= 3
    q.check(0 < s["readings"] < total, "%s -j2: never stopped mid-way "
            "(%d of %d)" % (tag, s["readings"], total))
    return s, rows_of(sc), delay


ref, ref_rows, serial_s = serial(big, "csv")
total = ref["readings"]
q.check(total == 2 * ROWS, "serial readings %d" % total)
s, rows, delay = interrupted(big, "csv", total, serial_s)
q.check(s["readings"] % 2 == 0, "-j2: %d readings, not a whole number of "
        "rows of the two groups" % s["readings"])
cut = s["readings"] // 2
per = {name: g["readings"] for name, g in s["groups"].items()}
q.check(sorted(per.values()) == [cut, cut],
        "-j2: the groups stopped at different rows: %r" % per)

q.check(len(rows) > 1 and rows == ref_rows[:len(rows)],
        "-j2: the rows are not the serial run's first rows (%d rows)"
        % len(rows))
last = {}
for row in csv.DictReader(rows):
    last[row["group"]] = row["time"]
q.check(len(set(last.values())) == 1, "-j2: last rows differ: %r" % last)

# The same rows, cut by hand, replayed serially: the same summary.
head = os.path.join(tmp, "head.csv")
with open(big) as f, open(head, "w") as g:
    for i, line in enumerate(f):
        if i > cut:
            break
        g.write(line)
r = subprocess.run(replay(head, os.path.join(tmp, "head_sc.csv")),
                   capture_output=True, text=True)
q.check(r.returncode == 0, "serial replay of the cut: %s" % r.stderr)
h = json.loads(r.stdout)
q.check(h["readings"] == s["readings"], "cut file: %d readings, the "
        "interrupted run %d" % (h["readings"], s["readings"]))
for k in h:
    if k != "interrupted":
        q.check(h[k] == s[k], "summary field %s: interrupted -j2 %r, serial "
                "of the same rows %r" % (k, s[k], h[k]))
q.check(rows_of(os.path.join(tmp, "head_sc.csv")) == rows,
        "the cut file's rows differ from the interrupted run's")
q.note("-j2 interrupted after %d of %d rows (%.2f s in, serial %.2f s): "
       "both groups stopped at the same row, the serial run's prefix"
       % (cut, ROWS, delay, serial_s))

# The same for a capture: records of BLOCK readings, the two groups'
# records in turn; the cut falls between records.
BLOCK = 50
REC = 2 * 12000                  # records: 600000 readings per group
rng = np.random.default_rng(5)
cap = os.path.join(tmp, "plant.qwc")
frame = np.dtype([("t", "<i8"), ("x", "<f8", 5)])
header = q.capture_bytes([])
with open(cap, "wb") as f:
    f.write(header)
    for k in range(REC // 2):
        t = 1.7e9 + 0.1 * BLOCK * k + 0.1 * np.arange(BLOCK)
        for name, mean in (("chiller", (6.7, 12.2, 32, 150, 29)),
                           ("pump_skid", (1480, 32, 95, 14.7, 31))):
            a = np.empty(BLOCK, frame)
            a["t"] = np.round(t * 1e9).astype(np.int64)
            a["x"] = np.asarray(mean) * (1 + 0.01 *
                                         rng.standard_normal((BLOCK, 5)))
            payload = struct.pack("<4sIIIQ", b"QWB1", 5, BLOCK, 0, k) + \
                a.tobytes()
            f.write(q.capture_bytes([(t[0], name, payload)])[len(header):])

ref, ref_rows, serial_s = serial(cap, "capture")
total = ref["readings"]
q.check(total == REC * BLOCK, "capture: %d readings" % total)
s, rows, _ = interrupted(cap, "capture", total, serial_s)
per = {name: g["readings"] for name, g in s["groups"].items()}
# The cut is a record: the chiller may have one record more.
q.check(per["chiller"] - per["pump_skid"] in (0, BLOCK),
        "capture -j2: the groups stopped apart: %r" % per)
q.check(len(rows) > 1 and rows == ref_rows[:len(rows)],
        "capture -j2: the rows are not the serial run's first rows")
q.note("capture -j2 interrupted after %d of %d readings: %r"
       % (s["readings"], total, per))
