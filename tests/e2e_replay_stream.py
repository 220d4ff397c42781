"""Replay of inputs that can be read only once: standard input, a pipe
given by path (/dev/stdin, /dev/fd/N as a shell's <(...) makes), a FIFO.

quadwatch tells a capture from CSV by its first bytes; those bytes must
not be lost when the input cannot be rewound.  Each of a CSV of the demo
plant (quadwatch sim) and a capture of two skid groups, fed through every
kind of stream, must give the --json summary and the --scores file of the
same replay from the regular file, byte for byte; so must -j2 over
several groups (each -j worker reads every input, which a stream cannot
give twice: one thread then reads it).  A capture cut inside a record on
a pipe plays its whole records and warns, as the cut file does.  Inputs
shorter than the capture magic, a partial magic, and a stream that is not
a capture are CSV.  The comparisons can fail: a CSV that loses its first
six bytes (the bug this guards against) loses its time column's name and
a channel's, and a replay of such a copy is checked to give other
results."""
import os
import subprocess
import threading

import qwtest as q

q.need_program()
tmp = q.tmpdir()
ROOT = os.path.abspath(os.path.join(os.path.dirname(__file__), ".."))
demo = os.path.join(ROOT, "conf", "demo.ini")

ini = q.demo_ini(tmp, {"skid": q.skid_group(warmup=100),
                       "skid2": q.skid_group(warmup=150)})

plant = os.path.join(tmp, "plant.csv")
r = subprocess.run([q.QW, "sim", "-c", demo, "-o", plant, "--count",
                    "20000", "--seed", "91", "-q"], capture_output=True,
                   text=True)
q.check(r.returncode == 0, "sim: %s" % r.stderr)

cap = os.path.join(tmp, "c.qwc")
t1, x1 = q.skid_readings(4000, seed=21, fault=(2000, 2080))
t2, x2 = q.skid_readings(4000, seed=22)
cap_bytes = q.capture_bytes(
    (t[a], topic, q.binary(t[a:a + 50], x[a:a + 50], a))
    for a in range(0, 4000, 50)
    for topic, t, x in (("skid", t1, x1), ("skid2", t2, x2)))
with open(cap, "wb") as f:
    f.write(cap_bytes)
with open(plant, "rb") as f:
    plant_bytes = f.read()


def replay(inputs, stdin=None, extra=(), pass_fds=()):
    """(exit code, --json stdout, stderr, scores text)."""
    sc = os.path.join(tmp, "scores.csv")
    if os.path.exists(sc):
        os.unlink(sc)
    cmd = [q.QW, "replay", "-c", ini, "--json", "--scores", sc,
           "-q"] + list(extra) + inputs
    r = subprocess.run(cmd, input=stdin, capture_output=True,
                       pass_fds=pass_fds)
    text = None
    if os.path.exists(sc):
        with open(sc) as f:
            text = f.read()
    return r.returncode, r.stdout, r.stderr.decode(), text


def via_pipe(data, extra=(), path_of=lambda fd: "/dev/fd/%d" % fd):
    """Replays data written by a thread into a pipe the child reads by
    path (its descriptor inherited)."""
    rd, wr = os.pipe()

    def feed():
        with os.fdopen(wr, "wb") as w:
            try:
                w.write(data)
            except BrokenPipeError:
                pass
    th = threading.Thread(target=feed)
    th.start()
    try:
        return replay([path_of(rd)], extra=extra, pass_fds=(rd,))
    finally:
        os.close(rd)
        th.join()


def via_fifo(data, extra=()):
    fifo = os.path.join(tmp, "in.fifo")
    if os.path.exists(fifo):
        os.unlink(fifo)
    os.mkfifo(fifo)

    def feed():
        try:
            with open(fifo, "wb") as w:
                w.write(data)
        except BrokenPipeError:
            pass
    th = threading.Thread(target=feed)
    th.start()
    out = replay([fifo], extra=extra)
    th.join()
    return out


def same(a, b, what):
    q.check(a[0] == 0 and b[0] == 0, "%s: exit %d / %d: %s %s" %
            (what, a[0], b[0], a[2], b[2]))
    q.check(a[1] == b[1], "%s: --json differs" % what)
    q.check(a[3] == b[3], "%s: --scores differs" % what)


for name, path, data, groups in (
        ("CSV", plant, plant_bytes, ("chiller", "pump_skid")),
        ("capture", cap, cap_bytes, ("skid", "skid2"))):
    ref = replay([path])
    q.check(ref[0] == 0, "%s from the file: %s" % (name, ref[2]))
    rows = ref[3].count("\n") - 1
    for g in groups:
        q.check(b'"%s": {' % g.encode() in ref[1],
                "%s: group %s not played" % (name, g))
    same(ref, replay(["-"], stdin=data), name + " on standard input")
    same(ref, replay(["/dev/stdin"], stdin=data), name + " as /dev/stdin")
    same(ref, via_pipe(data), name + " as /dev/fd/N")
    same(ref, via_fifo(data), name + " from a FIFO")
    # -j2 plays several groups; a stream is read by one thread
    par = replay(["-"], stdin=data, extra=("-j2",))
    same(ref, par, name + " on standard input, -j2")
    q.note("%s: %d score rows alike from the file, stdin, /dev/stdin, "
           "/dev/fd/N, a FIFO and stdin with -j2" % (name, rows))

# the file and the pipe together, in that order, as one stream
both = replay([plant, cap])
both_pipe = replay([plant, "-"], stdin=cap_bytes)
same(both, both_pipe, "a CSV file then a capture on standard input")

# a capture cut inside a record: the whole records, and a warning
cut = cap_bytes[:len(cap_bytes) - 100]
cutf = os.path.join(tmp, "cut.qwc")
with open(cutf, "wb") as f:
    f.write(cut)
a = replay([cutf])
b = replay(["-"], stdin=cut)
q.check(a[0] == 0 and b[0] == 0, "cut: %s / %s" % (a[2], b[2]))
q.check(a[1] == b[1] and a[3] == b[3], "cut capture: pipe differs from "
        "the file")
r = subprocess.run([q.QW, "replay", "-c", ini, "-"], input=cut,
                   capture_output=True)
q.check(b"cut short" in r.stderr, "no warning of the cut record: %r" %
        r.stderr)
q.note("a capture cut inside a record plays alike from a pipe and warns")

# short and odd beginnings are CSV: the message names the input
for data, what in ((b"", "empty"), (b"QWC", "a partial magic"),
                   (b"ti", "two bytes")):
    r = replay(["-"], stdin=data)
    q.check(r[0] != 0 and "(stdin)" in r[2] and "Traceback" not in r[2],
            "%s on stdin: exit %d: %s" % (what, r[0], r[2]))

# the checker can fail: the CSV without its first six bytes (what a
# probe that swallowed them left) loses its time column's name and a
# channel's, and gives other results, so the comparisons above would have
# caught it
ref = replay([plant])
r = replay(["-"], stdin=plant_bytes[6:])
q.check((r[0], r[1], r[3]) != (ref[0], ref[1], ref[3]),
        "the CSV less six bytes gave the same results")
print("ok")
