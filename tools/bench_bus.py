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

usage: BUILD=build tools/bench_bus.py [--runs N] [--readings N] [--p P]
       [--batch B]"""
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
IDLE_MS = 1000  # ms without frames that ends a measurement


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


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
                            str(args.readings), "1"],
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
    path = os.path.join(tmp, "bench.ini")
    with open(path, "w") as f:
        f.write("[bus]\ninput = >%s\nalerts = @ipc://%s/alerts\n"
                "control = @ipc://%s/control\nstats_every = 1s\n\n"
                "[group bench]\nchannels = %s\nhalf_life = 2000\n"
                "rate = 1000\nalarms_per_day = 1\n" % (ep, tmp, tmp, chans))
    control = "ipc://%s/control" % tmp
    daemon = subprocess.Popen([QW, "run", "-q", "-c", path])
    pub = None
    try:
        pub = subprocess.Popen([PUB, "@" + ep, str(args.p), str(args.batch),
                                str(args.readings), "1"],
                               stdout=subprocess.PIPE, text=True)
        seen, t_first, t_last, n_first = 0, None, None, 0
        end = time.monotonic() + 120
        while time.monotonic() < end:
            try:
                n = status(ctx, control)["readings"]
            except (RuntimeError, zmq.ZMQError):
                time.sleep(POLL)
                continue
            now = time.monotonic()
            if n > 0 and t_first is None:
                t_first, n_first = now, n
            if n != seen:
                seen, t_last = n, now
            elif t_last is not None and now - t_last > IDLE_MS / 1e3:
                break
            time.sleep(POLL)
        pub.communicate(timeout=60)
    finally:
        if pub is not None and pub.poll() is None:
            pub.kill()
        daemon.terminate()
        daemon.wait(timeout=5)
    rate = (seen - n_first) / (t_last - t_first) if t_last and t_last > t_first else 0.0
    return rate, seen


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--readings", type=int, default=3000000)
    ap.add_argument("--p", type=int, default=16)
    ap.add_argument("--batch", type=int, default=64)
    args = ap.parse_args()
    for exe in (QW, PUB, DRAIN):
        if not os.access(exe, os.X_OK):
            sys.exit("bench_bus: %s not built (make bench)" % exe)
    ctx = zmq.Context.instance()
    d_rates, b_rates = [], []
    print("bus: p=%d, batches of %d, %d readings per run, tcp loopback" %
          (args.p, args.batch, args.readings))
    for i in range(args.runs):
        tmp = tempfile.mkdtemp(prefix="qwbench.")
        try:
            b, bn = drain_phase(args)
            d, dn = daemon_phase(ctx, tmp, args)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        d_rates.append(d)
        b_rates.append(b)
        print("  run %d: daemon %.3g readings/s (%d taken), bare drain "
              "%.3g readings/s (%d)" % (i + 1, d, dn, b, bn))
    dm, bm = statistics.median(d_rates), statistics.median(b_rates)
    print("daemon  %.3g readings/s (median of %d)" % (dm, args.runs))
    print("drain   %.3g readings/s (median of %d)" % (bm, args.runs))
    print("ratio   %.0f%% of the bare drain" % (100.0 * dm / bm if bm else 0))


if __name__ == "__main__":
    main()
