"""Replay interrupted by SIGINT or SIGTERM: the inputs stop at the next
record, and what was played is still summarised, marked as interrupted,
with exit status 128 + the signal.

The stream is a capture of the skid fed through a pipe by this test,
which keeps writing until the replay stops reading, so the signal always
arrives mid-stream.  Checks, each of which can fail:
  - exit status 130 for SIGINT and 143 for SIGTERM, within a few seconds;
  - the --json summary parses, says "interrupted": true, and counts the
    readings played: more than zero, whole records (the stop falls
    between records);
  - the --scores file is whole: its rows are exactly the first rows of an
    uninterrupted replay of the same stream (nothing lost or changed
    before the stop), one per scored reading;
  - the same with -j2 (one group: a second thread takes the p-values and
    rows, and is drained before the summary);
  - the human summary and the --report page say it was interrupted;
  - on an idle pipe (the writer holds it open and writes nothing) the
    first signal leaves the replay waiting for the next record; closing
    the pipe then ends it with the summary and status 130, and a second
    signal instead ends it at once (the default action: killed by it),
    SIGTERM after SIGINT as well;
  - an uninterrupted replay says "interrupted": false, status 0."""
import json
import os
import signal
import subprocess
import threading
import time

import qwtest as q

q.need_program()
tmp = q.tmpdir()
ini = q.demo_ini(tmp, {"skid": q.skid_group(warmup=100)})
BLOCK = 50            # readings per record
BLOCKS = 4000         # records of the reference stream (200000 readings)

t, x = q.skid_readings(BLOCK * BLOCKS, seed=31)
header = q.capture_bytes([])
records = [q.capture_bytes([(t[a], "skid",
                             q.binary(t[a:a + BLOCK], x[a:a + BLOCK], a))])
           [len(header):] for a in range(0, BLOCK * BLOCKS, BLOCK)]


def replay_cmd(scores, json_out=True, inputs=("-",), extra=()):
    """Without -q: the interruption's warning is wanted on stderr (no
    progress line is drawn, stderr not being a terminal)."""
    cmd = [q.QW, "replay", "-c", ini, "--scores", scores,
           "--report", scores + ".html"] + list(extra)
    if json_out:
        cmd.append("--json")
    return cmd + list(inputs)


# The reference: the whole stream from a file, uninterrupted.
full = os.path.join(tmp, "full.qwc")
with open(full, "wb") as f:
    f.write(header + b"".join(records))
ref_scores = os.path.join(tmp, "ref.csv")
r = subprocess.run(replay_cmd(ref_scores, inputs=(full,)),
                   capture_output=True, text=True)
q.check(r.returncode == 0, "uninterrupted replay: %d %s"
        % (r.returncode, r.stderr))
ref = json.loads(r.stdout)
q.check(ref["interrupted"] is False, "uninterrupted: %r" % ref["interrupted"])
with open(ref_scores) as f:
    ref_rows = f.read().splitlines()
q.check(len(ref_rows) == ref["scored"] + 1, "reference rows")


def writer(pr, stop_after, idle):
    """Writes the records to the replay's stdin, then (the stream being
    endless for the replay) the records again with later times, until the
    pipe breaks; stop_after is set once stop_after records are in.  With
    idle set, writes stop_after records and then holds the pipe open
    until idle.release is set."""
    sent = 0
    try:
        pr.stdin.write(header)
        for rec in records:
            pr.stdin.write(rec)
            sent += 1
            if sent == stop_after[0]:
                pr.stdin.flush()
                stop_after[1].set()
                if idle is not None:
                    idle.wait(30)
                    break
        if idle is None:
            # keep the replay busy until it stops reading
            while True:
                pr.stdin.write(records[-1])
    except (BrokenPipeError, ValueError, OSError):
        pass
    finally:
        try:
            pr.stdin.close()
        except (BrokenPipeError, OSError):
            pass


def start(sc, json_out=True, extra=()):
    """The replay reading a pipe from this process; its stdout and
    stderr go to files (the writer thread owns the pipe)."""
    out = open(sc + ".out", "w+b")
    err = open(sc + ".err", "w+b")
    pr = subprocess.Popen(replay_cmd(sc, json_out, extra=extra),
                          stdin=subprocess.PIPE,
                          stdout=out, stderr=err)
    return pr, out, err


def finish(pr, out, err, timeout):
    """Waits for the replay; (stdout, stderr) bytes."""
    pr.wait(timeout=timeout)
    out.seek(0)
    err.seek(0)
    o, e = out.read(), err.read()
    out.close()
    err.close()
    return o, e


def interrupted_run(sig, json_out=True, extra=()):
    sc = os.path.join(tmp, "s_%d_%d_%d.csv" % (sig, json_out, len(extra)))
    pr, fo, fe = start(sc, json_out, extra)
    started = [1000, threading.Event()]
    th = threading.Thread(target=writer, args=(pr, started, None))
    th.start()
    q.check(started[1].wait(60), "writer did not start")
    time.sleep(0.2)
    pr.send_signal(sig)
    t0 = time.monotonic()
    out, err = finish(pr, fo, fe, 60)
    took = time.monotonic() - t0
    th.join(10)
    q.check(pr.returncode == 128 + sig, "%s: exit %d (%s)"
            % (signal.Signals(sig).name, pr.returncode, err.decode()))
    q.check(took < 10, "%s: took %.1f s to stop" % (signal.Signals(sig).name,
                                                   took))
    q.check(b"interrupted by %s" % signal.Signals(sig).name.encode() in err,
            "%s: no warning: %r" % (signal.Signals(sig).name, err))
    with open(sc) as f:
        rows = f.read().splitlines()
    return out.decode(), rows


for sig, extra in ((signal.SIGINT, ()), (signal.SIGTERM, ()),
                   (signal.SIGINT, ("-j2",))):
    out, rows = interrupted_run(sig, extra=extra)
    s = json.loads(out)
    name = signal.Signals(sig).name + "".join(" " + a for a in extra)
    q.check(s["interrupted"] is True, "%s: %r" % (name, s["interrupted"]))
    q.check(s["readings"] > 0 and s["readings"] % BLOCK == 0,
            "%s: readings %r" % (name, s["readings"]))
    q.check(len(rows) == s["scored"] + 1, "%s: %d rows for %d scored"
            % (name, len(rows) - 1, s["scored"]))
    n = min(len(rows), len(ref_rows))
    q.check(n > 1000 and rows[:n] == ref_rows[:n],
            "%s: the rows before the stop differ from the serial run's "
            "(%d compared)" % (name, n))
    q.note("%s: stopped after %d readings, %d rows as the full run's"
           % (name, s["readings"], n - 1))

out, rows = interrupted_run(signal.SIGINT, json_out=False)
q.check("interrupted: the figures above cover only the readings played"
        in out, "human summary: %r" % out[-400:])
with open(os.path.join(tmp, "s_%d_0_0.csv.html" % signal.SIGINT)) as f:
    page = f.read()
q.check("Interrupted: this report covers only" in page and
        page.rstrip().endswith("</html>"), "report: not marked or not whole")
with open(ref_scores + ".html") as f:
    q.check("Interrupted" not in f.read(), "uninterrupted report marked")

# Idle pipe: the first signal waits for the next record or the end.
for second in (None, signal.SIGINT, signal.SIGTERM):
    sc = os.path.join(tmp, "idle_%d.csv" % (second or 0))
    pr, fo, fe = start(sc)
    started = [200, threading.Event()]
    idle = threading.Event()
    th = threading.Thread(target=writer, args=(pr, started, idle))
    th.start()
    q.check(started[1].wait(60), "idle writer did not start")
    time.sleep(0.5)
    pr.send_signal(signal.SIGINT)
    time.sleep(0.5)
    q.check(pr.poll() is None, "idle pipe: the replay ended before its "
            "input did (%r)" % pr.returncode)
    if second is not None:
        pr.send_signal(second)
        out, err = finish(pr, fo, fe, 30)
        idle.set()
        q.check(pr.returncode == -second, "%s after SIGINT: exit %r"
                % (signal.Signals(second).name, pr.returncode))
    else:
        idle.set()
        out, err = finish(pr, fo, fe, 30)
        q.check(pr.returncode == 130, "idle pipe closed: exit %r (%s)"
                % (pr.returncode, err.decode()))
        s = json.loads(out)
        q.check(s["interrupted"] is True and
                s["readings"] == 200 * BLOCK,
                "idle pipe: %r readings, interrupted %r"
                % (s["readings"], s["interrupted"]))
    th.join(10)

q.note("replay stops on SIGINT/SIGTERM with a summary of what was played")
