#!/usr/bin/python3
"""bench_bus.py: readings per second through `quadwatch run` over tcp
loopback, beside what a bare libzmq subscriber receives from the same
publisher in the same run (numbers, no verdicts; part of `make bench`).

Each run has two phases with the same publisher (bench_pub: READINGS
readings in binary batches, lossless: ZMQ_XPUB_NODROP makes it wait for
its subscriber, so each side is measured at its own full speed and loses
nothing): first bench_drain, a bare SUB that only counts frames (its own
rate, first to last frame), then a fresh daemon (one group, p channels)
whose rate comes from its status counters polled every POLL s (readings
over the span in which they grew).  Prints each run and the medians.

With --groups G > 1 the daemon has G groups of p channels (bench000,
bench001, ...) and the publisher sends its frames to them in turn, each
topic with its own seq: the per-daemon capacity of a sharded plant
(docs/operations.md "Sharding a plant").

usage: BUILD=build tools/bench_bus.py [--runs N] [--readings N] [--p P]
       [--batch B] [--groups G]"""
import argparse
import json
import os
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import time

import zmq

BUILD = os.environ.get("BUILD", "build")
ROOT = os.path.abspath(os.path.join(os.path.dirname(__file__), ".."))
QW = os.path.join(ROOT, BUILD, "quadwatch")
PUB = os.path.join(ROOT, BUILD, "tools", "bench_pub")
DRAIN = os.path.join(ROOT, BUILD, "tools", "bench_drain")
POLL = 0.005   # s between status polls of the daemon
POLL_GROUPS = 0.5  # s between polls with many groups: a status costs the
                   # daemon ~32 us of CPU per group (8 ms at 256 groups),
                   # so polling at POLL would throttle what it measures
IDLE_MS = 1000  # ms without frames that ends a measurement


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def cpu_seconds(pid):
    """User + system CPU time of a process, all its threads (libzmq's I/O
    thread too), from /proc/PID/stat; less sensitive than wall time to
    other work on a shared machine."""
    with open("/proc/%d/stat" % pid) as f:
        fields = f.read().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def status(ctx, endpoint):
    s = ctx.socket(zmq.REQ)
    s.setsockopt(zmq.LINGER, 0)
    s.connect(endpoint)
    s.send(b"status")
    if not s.poll(3000):
        raise RuntimeError("daemon silent")
    r = json.loads(s.recv())
    s.close()
    return r


def drain_phase(args):
    ep = "tcp://127.0.0.1:%d" % free_port()
    pub = subprocess.Popen([PUB, "@" + ep, str(args.p), str(args.batch),
                            str(args.readings), "1", str(args.groups)],
                           stdout=subprocess.PIPE, text=True)
    try:
        out = subprocess.run([DRAIN, ">" + ep, str(args.batch), str(IDLE_MS)],
                             capture_output=True, text=True, timeout=120).stdout
        pub.communicate(timeout=60)
    finally:
        if pub.poll() is None:
            pub.kill()
    return float(out.split()[-2]), int(out.split()[1])


def daemon_phase(ctx, tmp, args):
    ep = "tcp://127.0.0.1:%d" % free_port()
    chans = ", ".join("c%02d" % i for i in range(args.p))
    names = ["bench"] if args.groups == 1 else \
        ["bench%03d" % g for g in range(args.groups)]
    path = os.path.join(tmp, "bench.ini")
    with open(path, "w") as f:
        f.write("[bus]\ninput = >%s\nalerts = @ipc://%s/alerts\n"
                "control = @ipc://%s/control\nstats_every = 1s\n"
                % (ep, tmp, tmp))
        for name in names:
            f.write("\n[group %s]\nchannels = %s\nhalf_life = 2000\n"
                    "rate = 1000\nalarms_per_day = 1\n" % (name, chans))
    control = "ipc://%s/control" % tmp
    daemon = subprocess.Popen([QW, "run", "-q", "-c", path])
    pub = None
    try:
        pub = subprocess.Popen([PUB, "@" + ep, str(args.p), str(args.batch),
                                str(args.readings), str(len(names)),
                                str(args.groups)],
                               stdout=subprocess.PIPE, text=True)
        poll = POLL if args.groups == 1 else POLL_GROUPS
        seen, t_first, t_last, n_first, last = 0, None, None, 0, {}
        samples = []
        end = time.monotonic() + max(120.0, args.readings / 1e5)  # s
        while time.monotonic() < end:
            try:
                last = status(ctx, control)
                n = last["readings"]
            except (RuntimeError, zmq.ZMQError):
                time.sleep(poll)
                continue
            now = time.monotonic()
            samples.append((now, n, cpu_seconds(daemon.pid)))
            if n > 0 and t_first is None:
                t_first, n_first = now, n
            if n != seen:
                seen, t_last = n, now
            elif t_last is not None and now - t_last > IDLE_MS / 1e3:
                break
            time.sleep(poll)
        pub.communicate(timeout=60)
    finally:
        if pub is not None and pub.poll() is None:
            pub.kill()
        daemon.terminate()
        daemon.wait(timeout=5)
    rate = (seen - n_first) / (t_last - t_first) if t_last and t_last > t_first else 0.0
    bad = last.get("gaps", 0) + sum(last.get("rejected", {}).values())
    # the second half of the readings: past every group's start, when the
    # limit is recomputed nearly every reading while nu grows (see
    # docs/operations.md "Sharding a plant")
    half = [(t, n, c) for t, n, c in samples if n >= seen / 2 and t <= t_last]
    late = (seen - half[0][1]) / (t_last - half[0][0]) \
        if half and t_last > half[0][0] else 0.0
    # per CPU-second of the daemon over the same span
    end = [c for t, n, c in samples if t <= t_last][-1] if half else 0.0
    cpu = (seen - half[0][1]) / (end - half[0][2]) \
        if half and end > half[0][2] else 0.0
    first = [(n, c) for t, n, c in samples if n > 0]
    early = (half[0][1] - first[0][0]) / (half[0][2] - first[0][1]) \
        if half and first and half[0][2] > first[0][1] else 0.0
    return rate, seen, bad, late, cpu, early


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--readings", type=int, default=3000000)
    ap.add_argument("--p", type=int, default=16)
    ap.add_argument("--batch", type=int, default=64)
    ap.add_argument("--groups", type=int, default=1)
    args = ap.parse_args()
    for exe in (QW, PUB, DRAIN):
        if not os.access(exe, os.X_OK):
            sys.exit("bench_bus: %s not built (make bench)" % exe)
    ctx = zmq.Context.instance()
    d_rates, b_rates, l_rates, c_rates = [], [], [], []
    print("bus: p=%d, %d group%s, batches of %d, %d readings per run, "
          "tcp loopback" % (args.p, args.groups, "" if args.groups == 1
                            else "s", args.batch, args.readings))
    for i in range(args.runs):
        tmp = tempfile.mkdtemp(prefix="qwbench.")
        try:
            b, bn = drain_phase(args)
            d, dn, bad, late, cpu, early = daemon_phase(ctx, tmp, args)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        d_rates.append(d)
        b_rates.append(b)
        l_rates.append(late)
        c_rates.append(cpu)
        print("  run %d: daemon %.3g readings/s (%d taken, %d gaps or "
              "rejections; second half %.3g/s, %.3g per CPU-second; "
              "first half %.3g per CPU-second), bare drain %.3g "
              "readings/s (%d)" % (i + 1, d, dn, bad, late, cpu, early, b,
                                   bn))
    dm, bm = statistics.median(d_rates), statistics.median(b_rates)
    print("daemon  %.3g readings/s (median of %d)" % (dm, args.runs))
    print("daemon, second half of the readings  %.3g readings/s, %.3g per "
          "daemon CPU-second (medians)" % (statistics.median(l_rates),
                                           statistics.median(c_rates)))
    print("drain   %.3g readings/s (median of %d)" % (bm, args.runs))
    print("ratio   %.0f%% of the bare drain" % (100.0 * dm / bm if bm else 0))


if __name__ == "__main__":
    main()
