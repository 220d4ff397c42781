#!/usr/bin/python3
"""bench_mqtt.py: readings per second through `quadwatch run` from a real
mosquitto broker on loopback (numbers, no verdicts; part of `make bench`).

A publisher in Python cannot keep up with the daemon, so the broker is made
to hold a backlog: the daemon first connects with a client id (a kept
session) and subscribes, is stopped, MESSAGES binary batches (p channels,
BATCH readings each) are published while it is away, and the daemon is
started again: the broker then delivers the whole backlog as fast as it and
the daemon can, and the rate comes from the daemon's status counters
polled every POLL s (readings over the span in which they grew).  Once
with QoS 1 (each message acknowledged), once with QoS 0 (the broker set to
queue QoS 0 messages for the kept session).  Beside it, the same backlog
drained by a bare mosquitto_sub that prints nothing.  Prints each run and
the medians.

usage: BUILD=build tools/bench_mqtt.py [--runs N] [--messages N] [--p P]
       [--batch B]"""
import argparse
import os
import shutil
import statistics
import struct
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "tests"))
import qwtest as qt  # noqa: E402
import qwmqtt as qm  # noqa: E402

POLL = 0.005  # s between status polls
IDLE = 1.0    # s without new readings that ends a measurement


def config(tmp, port, p, qos):
    chans = ", ".join("c%02d" % i for i in range(p))
    return ("[bus]\ninput = mqtt://127.0.0.1:%d/bench/+/readings\n"
            "alerts = @ipc://%s/alerts\ncontrol = @ipc://%s/control\n"
            "stats_every = 0\n\n[mqtt]\nqos = %d\nclient_id = qw-bench\n\n"
            "[group bench]\nchannels = %s\nhalf_life = 2000\nrate = 1000\n"
            "alarms_per_day = 1\n" % (port, tmp, tmp, qos, chans))


def payloads(n, p, batch):
    rec = struct.Struct("<q%dd" % p)
    out = []
    for k in range(n):
        head = struct.pack("<4sIIIQ", b"QWB1", p, batch, 0, k * batch)
        body = b"".join(rec.pack(int((1.7e9 + (k * batch + i) * 1e-3) * 1e9),
                                 *[1.0 + 0.01 * ((i * 7 + j) % 13)
                                   for j in range(p)])
                        for i in range(batch))
        out.append(head + body)
    return out


def one_run(args, qos, msgs):
    tmp = tempfile.mkdtemp(prefix="qwbench.")
    try:
        broker = qm.Broker(tmp, ["max_queued_messages 0",
                                 "max_queued_bytes 0",
                                 "queue_qos0_messages true",
                                 "max_inflight_messages 0"])
        text = config(tmp, broker.port, args.p, qos)
        d = qt.Daemon(tmp, text, "bench")
        qm.wait_mqtt(d, lambda m: m["subscribed"] == 1, "session")
        d.stop()
        cl = qm.Client(broker.port)
        cl.publish_all([("bench/bench/readings", m) for m in msgs], qos=1)
        cl.close()
        d = qt.Daemon(tmp, text, "bench2")
        want = len(msgs) * args.batch
        seen, t_first, t_last, n_first = 0, None, None, 0
        end = time.monotonic() + 120
        while time.monotonic() < end:
            n = d.ctl("status")["readings"]
            now = time.monotonic()
            if n > 0 and t_first is None:
                t_first, n_first = now, n
            if n != seen:
                seen, t_last = n, now
            elif seen >= want or (t_last and now - t_last > IDLE):
                break
            time.sleep(POLL)
        d.stop()
        broker.stop()
        rate = ((seen - n_first) / (t_last - t_first)
                if t_last and t_last > t_first else 0.0)
        return rate, seen
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def bare_run(args, qos, msgs):
    """The same backlog drained by mosquitto_sub (prints nothing): wall
    time from its start to its exit after the last message, so it includes
    its connect."""
    tmp = tempfile.mkdtemp(prefix="qwbench.")
    try:
        broker = qm.Broker(tmp, ["max_queued_messages 0",
                                 "max_queued_bytes 0",
                                 "queue_qos0_messages true",
                                 "max_inflight_messages 0"])
        sub = ["mosquitto_sub", "-p", str(broker.port), "-c", "-i",
               "qw-bench-bare", "-q", str(qos), "-t", "bench/+/readings",
               "-F", ""]
        subprocess.run(sub + ["-W", "1"], capture_output=True)
        cl = qm.Client(broker.port)
        cl.publish_all([("bench/bench/readings", m) for m in msgs], qos=1)
        cl.close()
        t0 = time.monotonic()
        subprocess.run(sub + ["-C", str(len(msgs))], capture_output=True,
                       timeout=120)
        took = time.monotonic() - t0
        broker.stop()
        return len(msgs) * args.batch / took
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--messages", type=int, default=4000)
    ap.add_argument("--p", type=int, default=16)
    ap.add_argument("--batch", type=int, default=64)
    args = ap.parse_args()
    msgs = payloads(args.messages, args.p, args.batch)
    print("mqtt: p=%d, batches of %d, %d messages (%d readings) per run, "
          "mosquitto on loopback, backlog delivered on reconnect" %
          (args.p, args.batch, args.messages, args.messages * args.batch))
    for qos in (1, 0):
        rates, bare = [], []
        for i in range(args.runs):
            r, n = one_run(args, qos, msgs)
            b = bare_run(args, qos, msgs)
            rates.append(r)
            bare.append(b)
            print("  qos %d run %d: daemon %.3g readings/s (%d taken), "
                  "bare mosquitto_sub %.3g readings/s" % (qos, i + 1, r, n, b))
        print("  qos %d median: daemon %.3g readings/s (%.3g messages/s), "
              "bare mosquitto_sub %.3g readings/s" %
              (qos, statistics.median(rates),
               statistics.median(rates) / args.batch,
               statistics.median(bare)))


if __name__ == "__main__":
    main()
