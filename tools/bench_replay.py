#!/usr/bin/python3
"""make bench: replay throughput, and many groups behind one daemon.

Replay: one group of p = 16 channels, N readings, as a CSV (values printed
as a data-acquisition program logs them, 6 significant digits) and as a
capture (the `record` format, binary QWB1 batches of 64).  Each input is
replayed with and without --scores, on one core and with -j2, and a
capture of the first 15 channels (odd p: the p-values' other form) on one
core; the figure
is the median of --runs interleaved rounds: readings/s, and MB/s of
input.  The machine's load average is
printed beside them: on a shared machine the figures are noisy.

Groups: --groups groups of p = 16 behind one daemon, readings spread
round-robin over all of them (binary batches), beside the same count to a
single group: readings/s through the daemon and its resident memory, and
the resident memory again after a second, equal stream (flat = no growth
per reading).

Long: the peak resident memory of a replay of 10^6 readings and of --long
(10^7 by default; BENCH_LONG=1e8 from make bench), fed as a capture
through a pipe: flat = the summary does not grow with the stream.  No
verdicts: numbers only."""
import argparse
import os
import statistics
import struct
import subprocess
import sys
import tempfile
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "tests"))
BUILD = os.environ.get("BUILD", "build")
QW = os.path.abspath(os.path.join(HERE, "..", BUILD, "quadwatch"))
P = 16
BATCH = 64
T0 = 1.7e9   # s: epoch start of the synthetic recording
DT = 0.1     # s: 10 readings/s
MARK_WARM = 30  # readings that warm a marker group up
GROUP_HALF_LIFE = 200  # readings: short, so learning ends within the
                       # warm phase and the rounds measure steady state
WARM_PER_GROUP = 2048  # readings each group learns before the rounds


def channels(p):
    return ["c%02d" % i for i in range(p)]


def group_ini(name, p):
    return ("[group %s]\nchannels = %s\nhalf_life = 2000\nrate = 10\n"
            "alarms_per_day = 1\nwarmup = 500\n" % (name, ", ".join(channels(p))))


def reading_chunks(n, p, seed, chunk):
    """n correlated readings around plant-like levels (fixed seed), as
    (t, x) pieces of at most chunk readings."""
    rng = np.random.default_rng(seed)
    mix = rng.normal(size=(p, p)) * 0.3 + np.eye(p)
    level = rng.uniform(5, 500, size=p)
    for s in range(0, n, chunk):
        m = min(chunk, n - s)
        yield (T0 + DT * np.arange(s, s + m),
               rng.normal(size=(m, p)) @ mix.T + level)


def readings(n, p, seed):
    """The n readings of reading_chunks in one piece."""
    return next(reading_chunks(n, p, seed, max(n, 1)))


def write_csv(path, t, x):
    with open(path, "w") as f:
        f.write("time," + ",".join(channels(x.shape[1])) + "\n")
        fmt = "%.1f" + ",%.6g" * x.shape[1]
        np.savetxt(f, np.column_stack([t, x]), fmt=fmt, delimiter=",")


def binary_frame(p, t, x, seq):
    n = len(t)
    head = b"QWB1" + struct.pack("<IIIQ", p, n, 0, seq)
    rec = np.zeros(n, dtype=[("t", "<i8"), ("x", "<f8", (p,))])
    rec["t"] = np.round(t * 1e9).astype(np.int64)
    rec["x"] = x
    return head + rec.tobytes()


CAPTURE_HEADER = b"QWCAP1" + struct.pack("<HII", 1, 0, 0)


def capture_records(f, topic, t, x, seq):
    """Readings t, x as capture records (binary batches of BATCH, the
    first numbered seq) written to the binary stream f."""
    tb = topic.encode()
    for i in range(0, len(t), BATCH):
        pay = binary_frame(x.shape[1], t[i:i + BATCH], x[i:i + BATCH],
                           seq + i)
        f.write(struct.pack("<dH", t[i], len(tb)) + tb)
        f.write(struct.pack("<I", len(pay)) + pay)


def write_capture(path, topic, t, x):
    """The `record` file format (src/io/capture.h)."""
    with open(path, "wb") as f:
        f.write(CAPTURE_HEADER)
        capture_records(f, topic, t, x, 0)


def load():
    return open("/proc/loadavg").read().split()[0]


def steal_seconds():
    """CPU seconds the hypervisor has taken from this machine so far (all
    CPUs: /proc/stat's steal column), or None where it is not counted."""
    try:
        with open("/proc/stat") as f:
            cols = f.readline().split()
        return int(cols[8]) / os.sysconf("SC_CLK_TCK")
    except (OSError, IndexError, ValueError):
        return None


def time_replay(cfg, inp, scores, extra=()):
    """(wall s, CPU s of the replay: user + system, steal s on the
    machine meanwhile) of one replay.  On a virtual machine the wall time
    includes what the hypervisor took (steal); the CPU time does not."""
    cmd = [QW, "replay", "-c", cfg, "--json", "-q"] + list(extra)
    if scores:
        cmd += ["--scores", scores]
    cmd.append(inp)
    st0 = steal_seconds()
    t0 = time.monotonic()
    pr = subprocess.Popen(cmd, stdout=subprocess.DEVNULL,
                          stderr=subprocess.PIPE, text=True)
    err = pr.stderr.read()
    pr.stderr.close()
    _, status, ru = os.wait4(pr.pid, 0)
    secs = time.monotonic() - t0
    pr.returncode = os.waitstatus_to_exitcode(status)
    st1 = steal_seconds()
    if pr.returncode != 0:
        sys.exit("replay failed: %s" % err)
    steal = st1 - st0 if st0 is not None and st1 is not None else float("nan")
    return secs, ru.ru_utime + ru.ru_stime, steal


def bench_replay(tmp, n, runs):
    """Capture and CSV, with and without --scores, on one core and with
    -j2 (one group: the second thread takes the p-values and rows).  The
    runs are interleaved (every case once per round), so a machine whose
    speed drifts skews the cases alike; medians of the rounds."""
    cfg = os.path.join(tmp, "r.ini")
    with open(cfg, "w") as f:
        f.write(group_ini("g16", P))
    t, x = readings(n, P, 5147)
    csv = os.path.join(tmp, "r.csv")
    cap = os.path.join(tmp, "r.qwc")
    write_csv(csv, t, x)
    write_capture(cap, "g16", t, x)
    # the same at an odd p (P - 1), whose p-values take another form
    # (src/core/pvalue.c): capture, one core
    cfg_odd = os.path.join(tmp, "r15.ini")
    with open(cfg_odd, "w") as f:
        f.write(group_ini("g15", P - 1))
    cap_odd = os.path.join(tmp, "r15.qwc")
    write_capture(cap_odd, "g15", t, x[:, :P - 1])
    out = os.path.join(tmp, "scores.csv")
    cases = [(name, cfg, path, sc, jobs)
             for name, path in (("capture", cap), ("csv", csv))
             for jobs in (1, 2) for sc in (None, out)]
    cases += [("cap p%d" % (P - 1), cfg_odd, cap_odd, sc, 1)
              for sc in (None, out)]
    secs = [[] for _ in cases]
    cpu = [[] for _ in cases]
    steal = [[] for _ in cases]
    print("== replay: %d readings of p = %d (and a capture of p = %d), "
          "median of %d interleaved runs, load %s"
          % (n, P, P - 1, runs, load()))
    for _ in range(runs):
        for k, (name, c_ini, path, sc, jobs) in enumerate(cases):
            extra = ("-j%d" % jobs,) if jobs > 1 else ()
            w, c, st = time_replay(c_ini, path, sc, extra)
            secs[k].append(w)
            cpu[k].append(c)
            steal[k].append(st / w)
    print("%-8s %-4s %-8s %8s %12s %8s %8s %14s %8s" % (
        "input", "-j", "scores", "s", "readings/s", "MB/s", "cpu s",
        "readings/cpu-s", "steal"))
    for k, (name, _, path, sc, jobs) in enumerate(cases):
        s = statistics.median(secs[k])
        c = statistics.median(cpu[k])
        mb = os.path.getsize(path) / 1e6
        print("%-8s %-4d %-8s %8.3f %12.0f %8.1f %8.3f %14.0f %7.0f%%" % (
            name, jobs, "yes" if sc else "no", s, n / s, mb / s, c, n / c,
            100 * statistics.median(steal[k])))
    print("(s: wall time; cpu s: the replay's user + system time, all its "
          "threads; steal: CPU time the hypervisor took from the machine "
          "during the run, as a share of the wall time, out of %d CPUs: "
          "a run with much steal is slow on the wall clock for reasons "
          "outside quadwatch)" % os.cpu_count())
    print("(load after: %s)" % load())


def stream_capture(out, topic, n, p, seed):
    """Writes a capture of n readings to the binary stream out, made and
    sent a million at a time (the stream never sits in memory whole)."""
    out.write(CAPTURE_HEADER)
    seq = 0
    for t, x in reading_chunks(n, p, seed, 1000000):
        capture_records(out, topic, t, x, seq)
        seq += len(t)


def long_run(cfg, n):
    """Peak resident kB of a replay of n readings fed through a pipe
    (summary, tuning figures and all), and its wall seconds."""
    cmd = ["/usr/bin/time", "-f", "%M", QW, "replay", "-c", cfg, "--json",
           "-q", "-"]
    t0 = time.monotonic()
    pr = subprocess.Popen(cmd, stdin=subprocess.PIPE,
                          stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    stream_capture(pr.stdin, "g16", n, P, 5147)
    pr.stdin.close()
    err = pr.stderr.read().decode()
    if pr.wait() != 0:
        sys.exit("long replay failed: %s" % err)
    return int(err.split()[-1]), time.monotonic() - t0


def bench_long(tmp, counts):
    cfg = os.path.join(tmp, "r.ini")
    with open(cfg, "w") as f:
        f.write(group_ini("g16", P))
    print("== replay memory over a long stream: p = %d, a capture through "
          "a pipe (made as it is read), load %s" % (P, load()))
    print("%12s %14s %10s" % ("readings", "peak RSS kB", "wall s"))
    for n in counts:
        kb, secs = long_run(cfg, n)
        print("%12d %14d %10.1f" % (n, kb, secs))
    print("(the wall time includes making the stream in numpy on the "
          "other core)")


def channel_list(p):
    """The channels key's value, ten names a line (lines are bounded)."""
    c = channels(p)
    return ",\n  ".join(", ".join(c[i:i + 10]) for i in range(0, p, 10))


def groups_ini(tmp, pub, names, p, rounds):
    """names: the measured groups; one small marker group per round
    besides, whose alert (an outlier sent after the round) tells when the
    daemon has played every reading sent before it: one publisher, one
    connection, so messages arrive in order."""
    import qwtest as q
    g = {nm: {"channels": channel_list(p), "half_life": GROUP_HALF_LIFE,
              "rate": 10, "alarms_per_day": 1, "warmup": 100}
         for nm in names}
    for r in range(rounds + 1):
        g["mark%d" % r] = {"channels": "m0, m1", "half_life": 50,
                           "warmup": MARK_WARM, "rate": 10,
                           "alarms_per_day": 1}
    return q.ini(tmp, g, [">" + pub.endpoint], stats_every="0")


def wait_all_subs(pub, n):
    seen = set()
    while len(seen) < n:
        if not pub.sock.poll(20000):
            sys.exit("daemon subscribed to %d of %d groups" % (len(seen), n))
        m = pub.sock.recv()
        if m[:1] == b"\x01":
            seen.add(m[1:])


def daemon_run(tmp, ng, p, per_round, rounds):
    """ng groups of p behind one daemon; per_round readings per round,
    spread round-robin over the groups in batches of BATCH.  Returns the
    readings/s of each round and the resident kB before and after each."""
    import qwtest as q
    names = ["g%04d" % i for i in range(ng)]
    sub = os.path.join(tmp, "d%d_%d" % (ng, p))
    os.makedirs(sub, exist_ok=True)
    pub = q.Publisher()
    # one subscription message per group: more than the default HWM
    pub.sock.setsockopt(q.zmq.RCVHWM, 0)
    d = q.Daemon(sub, groups_ini(sub, pub, names, p, rounds))
    wait_all_subs(pub, ng + rounds + 1)
    alerts = q.AlertSub(d.alerts, stats=False)
    time.sleep(0.3)  # the alert subscription reaches the daemon
    mt, mx = readings(MARK_WARM * 2, 2, 31)
    for r in range(rounds + 1):
        pub.send("mark%d" % r, binary_frame(2, mt, mx, 0))
    t, x = readings(BATCH * 16, p, 7919)
    frames = [binary_frame(p, t[i:i + BATCH], x[i:i + BATCH], i)
              for i in range(0, len(t), BATCH)]
    nmsg = max(1, per_round // BATCH)
    out = binary_frame(2, mt[-1:] + 1.0, mx[-1:] + 1e6, 0)
    def play(nmsg, mark):
        t0 = time.monotonic()
        for k in range(nmsg):
            pub.send(names[k % ng], frames[(k // ng) % len(frames)])
        pub.send(mark, out)
        if not alerts.sock.poll(600000):
            sys.exit("no marker alert from the daemon")
        alerts.sock.recv_multipart()
        return nmsg * BATCH / (time.monotonic() - t0)

    # learning: the first readings of a group recompute its limit as the
    # effective size grows (the core's cost, not the daemon's)
    rates = [play(ng * WARM_PER_GROUP // BATCH, "mark%d" % rounds)]
    rss = [d.rss_kib()]
    for r in range(rounds):
        rates.append(play(nmsg, "mark%d" % r))
        rss.append(d.rss_kib())
    d.stop()
    pub.close()
    return rates, rss


def bench_groups(tmp, ngroups, per_round, rounds):
    print("== daemon: groups of p = %d (half_life %d), first %d readings "
          "per group to learn, then %d rounds of %d readings in binary "
          "batches of %d spread round-robin over all groups; load %s"
          % (P, GROUP_HALF_LIFE, WARM_PER_GROUP, rounds, per_round, BATCH,
             load()))
    print("%-7s %13s %13s %10s %12s %12s" % (
        "groups", "learning r/s", "steady r/s", "RSS kB", "RSS kB end",
        "kB/group"))
    base = None
    for ng in (1, ngroups):
        rates, rss = daemon_run(tmp, ng, P, per_round, rounds)
        per = (rss[0] - base) / (ng - 1) if base is not None else \
            float("nan")
        print("%-7d %13.0f %13.0f %10d %12d %12.1f" % (
            ng, rates[0], statistics.median(rates[1:]), rss[0], rss[-1],
            per))
        print("        RSS after learning and after each round (kB; "
              "with the message queues' high water): %s"
              % " ".join(str(r) for r in rss))
        if base is None:
            base = rss[0]
    for p, n in ((16, ngroups), (128, 200)):
        one_kb, _ = mem_run(tmp, 1, p)
        n_kb, state = mem_run(tmp, n, p)
        print("memory per group at p = %d: %.1f kB resident (%d groups "
              "minus 1, over %d, each having learned %d readings, no "
              "messages queued); state %d bytes (checkpoint file)"
              % (p, (n_kb - one_kb) / (n - 1), n, n - 1, BATCH, state))


def mem_run(tmp, ng, p):
    """Resident kB of a daemon with ng groups of p, each sent one batch,
    paced so that no messages queue; and the mean checkpoint size."""
    import glob
    import qwtest as q
    names = ["g%04d" % i for i in range(ng)]
    sub = os.path.join(tmp, "m%d_%d" % (ng, p))
    state = os.path.join(sub, "state")
    os.makedirs(state, exist_ok=True)
    pub = q.Publisher()
    pub.sock.setsockopt(q.zmq.RCVHWM, 0)
    cfg = groups_ini(sub, pub, names, p, 0) + \
        "\n[state]\ndir = %s\nevery = 1h\n" % state
    d = q.Daemon(sub, cfg)
    wait_all_subs(pub, ng + 1)
    t, x = readings(BATCH, p, 4099)
    frame = binary_frame(p, t, x, 0)
    for k, nm in enumerate(names):
        pub.send(nm, frame)
        if k % 50 == 49:
            time.sleep(0.005)
    end = time.monotonic() + 120
    while d.status()["readings"] < ng * BATCH and time.monotonic() < end:
        time.sleep(0.2)
    kb = d.rss_kib()
    d.ctl("save", timeout=120)  # one fsync per group
    files = [f for f in glob.glob(os.path.join(state, "g*"))
             if os.path.isfile(f)]  # not the marker group's
    size = statistics.mean(os.path.getsize(f) for f in files) if files \
        else 0
    d.stop()
    pub.close()
    return kb, size


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--readings", type=int, default=1000000)
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--groups", type=int, default=1000)
    ap.add_argument("--rounds", type=int, default=4)
    ap.add_argument("--long", type=float, default=1e7,
                    help="readings of the long-stream memory run")
    ap.add_argument("--only", choices=("replay", "long", "groups"))
    a = ap.parse_args()
    tmp = tempfile.mkdtemp(prefix="qwbench.")
    try:
        if a.only in (None, "replay"):
            bench_replay(tmp, a.readings, a.runs)
        if a.only in (None, "long"):
            print()
            bench_long(tmp, sorted({10 ** 6, int(a.long)}))
        if a.only in (None, "groups"):
            print()
            bench_groups(tmp, a.groups, a.readings // 2, a.rounds)
    finally:
        import shutil
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
