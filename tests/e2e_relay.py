"""End-to-end: relay and tail.  A daemon's alert socket connects to
`quadwatch relay`'s frontend; `quadwatch tail --stats` (readable) and
`quadwatch tail --json` on the relay's backend print the raise (flow
first) and the clear; relay and tail stop with exit 0 on SIGTERM within a
second, the relay also while it is busy forwarding a flood.  Usage errors
exit 2."""
import json
import os
import signal
import socket
import subprocess
import threading

import qwtest as q

q.need_program()


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


for argv in (["relay"], ["relay", "a"], ["tail"], ["tail", "x", "--bogus"],
             ["ctl", "x"], ["run"], ["run", "-c"]):
    r = subprocess.run([q.QW] + argv, capture_output=True, timeout=10)
    q.check(r.returncode == 2, "%s: exit %d, want 2" % (argv, r.returncode))
r = subprocess.run([q.QW, "run", "-c", "/nonexistent/qw.ini"], capture_output=True,
                   text=True, timeout=10)
q.check(r.returncode == 2 and "/nonexistent/qw.ini" in r.stderr,
        "run on a missing file: %d %r" % (r.returncode, r.stderr))

tmp = q.tmpdir()
front = "tcp://127.0.0.1:%d" % free_port()
back = "ipc://%s/back" % tmp
relay = subprocess.Popen([q.QW, "relay", front, back], stderr=subprocess.DEVNULL)
outs = [os.path.join(tmp, n) for n in ("tail.txt", "tail.json")]
tails = [subprocess.Popen([q.QW, "tail", back, "--stats"], stdout=open(outs[0], "w")),
         subprocess.Popen([q.QW, "tail", back, "--json"], stdout=open(outs[1], "w"))]
try:
    pub = q.Publisher()
    text = q.ini(tmp, {"skid": q.skid_group()}, [">" + pub.endpoint])
    text = text.replace("alerts = @ipc://%s/alerts" % tmp, "alerts = >" + front)
    d = q.Daemon(tmp, text)
    pub.wait_sub("skid")
    sub = q.AlertSub(back)          # proof that subscriptions cross the relay
    sub.ready()
    end = q.time.monotonic() + q.WAIT
    while "stats" not in open(outs[0]).read() and q.time.monotonic() < end:
        q.time.sleep(0.05)
    q.check("stats received" in open(outs[0]).read(), "tail --stats printed no stats")
    q.time.sleep(0.3)  # tail --json subscribed at the same time
    N, FAULT = 1200, (1000, 1030)
    t, x = q.skid_readings(N, seed=1729, fault=FAULT)
    q.send_stream(pub, "skid", t, x, "binary")
    d.wait_readings("skid", N)
    sub.wait_alerts(2)
    q.check([a["event"] for a in sub.alerts][:1] == ["raise"], "relay: %r" % sub.alerts)
    q.time.sleep(0.3)
    for p in tails + [relay]:
        t0 = q.time.monotonic()
        p.send_signal(signal.SIGTERM)
        rc = p.wait(timeout=5)
        q.check(rc == 0 and q.time.monotonic() - t0 < q.STOP_WITHIN,
                "%s: exit %d" % (p.args[1], rc))
    readable = [l for l in open(outs[0]).read().splitlines() if " stats " not in l]
    raw = [json.loads(l) for l in open(outs[1]).read().splitlines()]
    for l in readable:
        q.note("tail: " + l)
    q.check(len(readable) == len(sub.alerts) and len(raw) == len(sub.alerts),
            "tail lines %d / %d, alerts %d" % (len(readable), len(raw), len(sub.alerts)))
    q.check(raw == sub.alerts, "tail --json differs from the alerts")
    first = readable[0].split()
    q.check(first[0].startswith("2023-11-14T") and first[0].endswith("Z")
            and first[1] == "skid" and first[2] == "RAISE" and "top: flow" in readable[0],
            "readable raise: %r" % readable[0])
    q.check(" clear " in readable[-1], "readable clear: %r" % readable[-1])
    d.stop()
finally:
    for p in tails + [relay]:
        if p.poll() is None:
            p.kill()

# SIGTERM while the relay is busy forwarding a flood: it must still stop
# within a second.  (A proxy that only looked for the signal when its
# poll was interrupted missed one that came mid-forward and went on.)
STOPS = 6
slow = []
for k in range(STOPS):
    front = "tcp://127.0.0.1:%d" % free_port()
    back = "ipc://%s/flood%d" % (tmp, k)
    relay = subprocess.Popen([q.QW, "relay", front, back],
                             stderr=subprocess.DEVNULL)
    sub = q.CTX.socket(q.zmq.SUB)
    sub.setsockopt(q.zmq.SUBSCRIBE, b"")
    sub.setsockopt(q.zmq.RCVHWM, 100)
    sub.connect(back)
    pub = q.CTX.socket(q.zmq.PUB)
    pub.connect(front)
    stop = threading.Event()
    sent = [0]

    def flood():
        msg = [b"alert.flood", b"x" * 200]
        while not stop.is_set():
            pub.send_multipart(msg)
            sent[0] += 1
    end = q.time.monotonic() + q.WAIT
    th = threading.Thread(target=flood)
    th.start()
    got = 0
    while got < 2000 and q.time.monotonic() < end:  # the flood is through
        if sub.poll(100):
            sub.recv_multipart()
            got += 1
    try:
        q.check(got >= 2000, "flood %d: %d messages through" % (k, got))
        t0 = q.time.monotonic()
        relay.send_signal(signal.SIGTERM)
        try:
            rc = relay.wait(timeout=5)
        except subprocess.TimeoutExpired:
            rc = None
        took = q.time.monotonic() - t0
        slow.append(took)
        q.check(rc == 0 and took < q.STOP_WITHIN,
                "flood %d: relay exit %r after %.2f s" % (k, rc, took))
    finally:
        stop.set()
        th.join()
        if relay.poll() is None:
            relay.kill()
        pub.close(0)
        sub.close(0)
q.note("relay under a flood: %d SIGTERMs, each stopped it within %.2f s"
       % (STOPS, max(slow)))
print("ok")
