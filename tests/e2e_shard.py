"""End-to-end: one plant split across three daemons, fanned in by one relay,
CURVE on every hop.

The plant has six groups.  Daemons A and B each read a shard file that
holds the whole plant but says `[bus] groups = ...` (two groups each);
daemon C reads the plant file itself (no selection) with `run -g` naming
the last two groups.  Every daemon binds its alert and control sockets as
CURVE servers (its own key; client_keys lets in the relay and the
operator) and connects, in the clear, to one publisher that sends every
group's readings.  `quadwatch relay` connects to the three alert sockets as
a CURVE client (one --server-key per daemon, its own --key) and binds its
backend as a CURVE server whose --client-keys holds only the watcher.

Checks: each daemon subscribes to its own groups only (its status lists
just them and it receives no message of another group: no unknown-topic
rejections, received = its own groups' messages); every alert every daemon
sent arrives exactly once at the watcher (pyzmq) and at an authenticated
`quadwatch tail`, each group raising on its fault; a subscriber in the
clear and one with a key not in the relay's list get nothing at all, and
the relay logs the refusal; a reload that drops a group from [bus] groups
unsubscribes it; `check` shows each daemon's owned groups; a selection
naming no group, and bad relay options, exit 2."""
import json
import os
import re
import shutil
import signal
import socket
import subprocess
import time

import qwtest as q

q.need_program()
if not q.zmq.has("curve"):
    print("libzmq without CURVE")
    raise SystemExit(77)

GROUPS = ["chiller_a", "chiller_b", "pump_skid", "tower", "ahu_east",
          "ahu_west"]
OWN = {"a": GROUPS[0:2], "b": GROUPS[2:4], "c": GROUPS[4:6]}
N, BATCH = 1200, 64
QUIET = 1.5  # s: a refused subscriber stays silent at least this long

tmp = q.tmpdir()
keys = os.path.join(tmp, "keys")
daemon_clients = os.path.join(tmp, "daemon_clients")
relay_clients = os.path.join(tmp, "relay_clients")
for d in (keys, daemon_clients, relay_clients):
    os.mkdir(d)


def key(name, ext):
    return os.path.join(keys, name + ext)


for n in ("da", "db", "dc", "relay", "op", "watch", "stranger"):
    r = subprocess.run([q.QW, "keygen", os.path.join(keys, n)],
                       capture_output=True, text=True, timeout=10)
    q.check(r.returncode == 0, "keygen %s: %s" % (n, r.stderr))
for n in ("relay", "op"):
    shutil.copy(key(n, ".pub"), daemon_clients)
shutil.copy(key("watch", ".pub"), relay_clients)


def z85(name):
    """(public, secret) in Z85 bytes from NAME.key."""
    out = {}
    with open(key(name, ".key")) as f:
        for line in f:
            if "=" in line and not line.startswith("#"):
                k, v = line.split("=", 1)
                out[k.strip()] = v.strip().encode()
    return out["public"], out["secret"]


def curve_client(sock, name, server):
    sock.curve_publickey, sock.curve_secretkey = z85(name)
    sock.curve_serverkey = z85(server)[0]


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


class ShardDaemon(q.Daemon):
    """A daemon questioned over CURVE as the operator."""
    server = None

    def ctl(self, cmd, timeout=q.CTL_TIMEOUT, frames=None):
        s = q.CTX.socket(q.zmq.REQ)
        s.setsockopt(q.zmq.LINGER, 0)
        curve_client(s, "op", self.server)
        s.connect(self.control)
        try:
            s.send_string(cmd)
            if not s.poll(int(timeout * 1000)):
                raise TimeoutError(cmd)
            return json.loads(s.recv())
        finally:
            s.close()


def plant(dtmp, server, inputs, extra_bus=""):
    groups = {g: q.skid_group() for g in GROUPS}
    sec = ("\n[security]\nserver_key = %s\nclient_keys = %s\n"
           % (key(server, ".key"), daemon_clients))
    return q.ini(dtmp, groups, inputs, stats_every="0.2s",
                 extra_bus=extra_bus, extra=sec)


def start(name, server, pub, selection=None, args=()):
    dtmp = q.tmpdir()
    extra = "groups = " + ", ".join(selection) if selection else ""
    cls = type("D" + name, (ShardDaemon,), {"server": server})
    return cls(dtmp, plant(dtmp, server, [">" + pub.endpoint], extra),
               name, args)


def wait_subscriptions(pub, topics):
    want = {b"\x01" + t.encode() for t in topics}
    seen = set()
    end = time.monotonic() + q.WAIT
    while seen != want and time.monotonic() < end:
        if pub.sock.poll(100):
            m = pub.sock.recv()
            q.check(m in want, "unexpected subscription %r" % m)
            seen.add(m)
    q.check(seen == want, "subscriptions %r, want %r" % (seen, want))


def sub(endpoint, name=None):
    s = q.CTX.socket(q.zmq.SUB)
    s.setsockopt(q.zmq.LINGER, 0)
    if name is not None:
        curve_client(s, name, "relay")
    s.connect(endpoint)
    s.setsockopt(q.zmq.SUBSCRIBE, b"alert.")
    s.setsockopt(q.zmq.SUBSCRIBE, b"stats")
    return s


def drain(s, out, timeout):
    end = time.monotonic() + timeout
    while True:
        left = max(0.0, end - time.monotonic())
        if not s.poll(int(left * 1000)):
            return
        topic, body = s.recv_multipart()
        out.append((topic.decode(), json.loads(body)))


# ---- usage and configuration errors --------------------------------------
pub = q.Publisher()
shared_text = plant(tmp, "dc", [">" + pub.endpoint])
shared = os.path.join(tmp, "plant.ini")
with open(shared, "w") as f:
    f.write(shared_text)
r = subprocess.run([q.QW, "check", "-c", shared, "-g", "tower,nope"],
                   capture_output=True, text=True, timeout=10)
q.check(r.returncode == 2 and r.stderr.startswith(
    "quadwatch check: %s: -g: expected names of [group NAME] sections of "
    "this file; 'nope' is not one" % shared), "check -g nope: %d %r" %
    (r.returncode, r.stderr))
r = subprocess.run([q.QW, "run", "-c", shared, "-g", "nope"],
                   capture_output=True, text=True, timeout=10)
q.check(r.returncode == 2 and "-g: expected names" in r.stderr,
        "run -g nope: %d %r" % (r.returncode, r.stderr))
bad = os.path.join(tmp, "bad.ini")
with open(bad, "w") as f:
    f.write(shared_text.replace("[bus]\n", "[bus]\ngroups = tower, towr\n"))
r = subprocess.run([q.QW, "run", "-c", bad], capture_output=True, text=True,
                   timeout=10)
q.check(r.returncode == 2 and "%s:2: [bus] groups: expected names of "
        "[group NAME] sections of this file; 'towr' is not one" % bad
        in r.stderr, "run with [bus] groups = towr: %d %r" %
        (r.returncode, r.stderr))
r = subprocess.run([q.QW, "check", "-c", shared, "-g", "ahu_west, ahu_east"],
                   capture_output=True, text=True, timeout=10)
lines = dict(l.split(":", 1) for l in r.stdout.splitlines() if ":" in l
             and not l.startswith(" "))
q.check(r.returncode == 0 and lines["owned"].strip() == "ahu_east, ahu_west"
        and lines["groups"].strip() == "2" and
        lines["groups_in_file"].strip() == "6" and
        lines["selection"].strip() == "-g",
        "check -g: %d %r" % (r.returncode, r.stdout[:600]))
q.check(r.stdout.count("\ngroup:") == 2, "check -g printed other groups")
r = subprocess.run([q.QW, "check", "-c", shared], capture_output=True,
                   text=True, timeout=10)
q.check(r.returncode == 0 and "\nowned:                     all\n" in r.stdout
        and r.stdout.count("\ngroup:") == 6, "check without a selection: %r"
        % r.stdout[:600])
for argv in (["relay", ">ipc://%s/x" % tmp, "@ipc://%s/y" % tmp,
              "--server-key", key("da", ".pub"), "--server-key",
              key("db", ".pub")],
             ["relay", "@ipc://%s/x" % tmp, "@ipc://%s/y" % tmp,
              "--server-key", key("da", ".pub")],
             ["relay", ">ipc://%s/x" % tmp, "@ipc://%s/y" % tmp,
              "--client-keys", relay_clients],
             ["relay", ">ipc://%s/x" % tmp, ">ipc://%s/y" % tmp,
              "--key", key("relay", ".key"), "--client-keys", relay_clients],
             ["relay", ">ipc://%s/x," % tmp, "@ipc://%s/y" % tmp],
             ["relay", ">ipc://%s/x" % tmp, "@ipc://%s/y" % tmp,
              "--server-key", key("da", ".key")]):
    r = subprocess.run([q.QW] + argv, capture_output=True, text=True,
                       timeout=10)
    q.check(r.returncode == 2, "%s: exit %d, want 2 (%s)" %
            (argv[1:], r.returncode, r.stderr))

# ---- three daemons, one relay ----------------------------------------------
daemons = {"a": start("a", "da", pub, OWN["a"]),
           "b": start("b", "db", pub, OWN["b"]),
           "c": start("c", "dc", pub, args=["-g", ",".join(OWN["c"])])}
wait_subscriptions(pub, GROUPS)
for n, d in daemons.items():
    st = d.status()
    q.check(sorted(st["groups"]) == sorted(OWN[n]),
            "daemon %s owns %r, want %r" % (n, sorted(st["groups"]), OWN[n]))

back = "tcp://127.0.0.1:%d" % free_port()
relay_log = os.path.join(tmp, "relay.log")
relay = subprocess.Popen(
    [q.QW, "relay", ",".join(">" + daemons[n].alerts for n in "abc"),
     "@" + back, "--server-key", key("da", ".pub"),
     "--server-key", key("db", ".pub"), "--server-key", key("dc", ".pub"),
     "--key", key("relay", ".key"), "--client-keys", relay_clients],
    stderr=open(relay_log, "w"))
tail_out = os.path.join(tmp, "tail.json")
tail = None
try:
    watch, plain, stranger = sub(back, "watch"), sub(back), sub(back,
                                                             "stranger")
    got, got_plain, got_stranger = [], [], []
    end = time.monotonic() + q.WAIT
    while time.monotonic() < end:
        drain(watch, got, 0.1)
        configs = {m["config"] for t, m in got if t == "stats"}
        if len(configs) == 3:
            break
    q.check(len({m["config"] for t, m in got if t == "stats"}) == 3,
            "stats from %d daemons through the relay" %
            len({m["config"] for t, m in got if t == "stats"}))
    tail = subprocess.Popen([q.QW, "tail", back, "--json", "--key",
                             key("watch", ".key"), "--server-key",
                             key("relay", ".pub")], stdout=open(tail_out, "w"))
    time.sleep(0.5)  # tail's handshake and subscription

    sent = {}
    for i, g in enumerate(GROUPS):
        fault = (900 + 40 * i, 930 + 40 * i)
        t, x = q.skid_readings(N, seed=1729 + i, fault=fault)
        q.send_stream(pub, g, t, x, "binary", batch=BATCH)
        sent[g] = (N + BATCH - 1) // BATCH
    for n, d in daemons.items():
        for g in OWN[n]:
            d.wait_readings(g, N)
    statuses = {}
    for n, d in daemons.items():
        end = time.monotonic() + q.WAIT
        while True:
            st = d.status()
            if all(st["groups"][g]["in_alarm"] is False for g in OWN[n]) \
                    or time.monotonic() > end:
                break
            time.sleep(0.05)
        statuses[n] = st
    expect = sum(st["alerts_sent"] for st in statuses.values())
    end = time.monotonic() + q.WAIT
    while time.monotonic() < end and \
            len([1 for t, m in got if t != "stats"]) < expect:
        drain(watch, got, 0.1)
    drain(watch, got, 0.5)  # nothing more may come
    drain(plain, got_plain, 0.1)
    drain(stranger, got_stranger, QUIET)
    alerts = [m for t, m in got if t != "stats"]
    for t, m in got:
        if t != "stats":
            q.check(t == "alert." + m["group"],
                    "topic %r for %r" % (t, m["group"]))

    for n, st in statuses.items():
        own = [a for a in alerts if a["group"] in OWN[n]]
        q.check(st["alerts_dropped"] == 0, "daemon %s dropped alerts" % n)
        q.check(st["rejected"]["unknown_topic"] == 0 and
                st["received"] == sum(sent[g] for g in OWN[n]),
                "daemon %s received %d messages (%d unknown topic), its "
                "groups were sent %d" % (n, st["received"],
                                         st["rejected"]["unknown_topic"],
                                         sum(sent[g] for g in OWN[n])))
        q.check(len(own) == st["alerts_sent"],
                "daemon %s sent %d alerts, %d arrived" %
                (n, st["alerts_sent"], len(own)))
        for g in OWN[n]:
            raises = [a for a in own if a["group"] == g
                      and a["event"] == "raise"]
            q.check(len(raises) == st["groups"][g]["alarms"] >= 1,
                    "group %s: %d raises arrived, status says %d" %
                    (g, len(raises), st["groups"][g]["alarms"]))
            q.check(raises[0]["channels"][0]["name"] == "flow",
                    "group %s: top channel %r" % (g, raises[0]["channels"]))
    ids = [(a["group"], a["time"], a["event"]) for a in alerts]
    q.check(len(ids) == len(set(ids)) and len(ids) == expect,
            "%d alerts, %d distinct, %d sent" % (len(ids), len(set(ids)),
                                                 expect))
    q.note("%d alerts from 3 daemons arrived once each through the relay"
           % len(ids))
    q.check(got_plain == [], "a subscriber in the clear got %d messages" %
            len(got_plain))
    q.check(got_stranger == [], "an unlisted key got %d messages" %
            len(got_stranger))

    tail.send_signal(signal.SIGTERM)
    q.check(tail.wait(timeout=5) == 0, "tail exit")
    raw = [json.loads(l) for l in open(tail_out).read().splitlines()]
    q.check(sorted((a["group"], a["time"], a["event"]) for a in raw)
            == sorted(ids), "tail --json: %d alerts, want %d" %
            (len(raw), len(ids)))
    t0 = time.monotonic()
    relay.send_signal(signal.SIGTERM)
    rc = relay.wait(timeout=5)
    q.check(rc == 0 and time.monotonic() - t0 < q.STOP_WITHIN,
            "relay exit %d" % rc)
    log = open(relay_log).read()
    m = re.search(r"subscribers: (\d+) let in, (\d+) refused", log)
    q.check(m is not None and int(m.group(1)) >= 2 and int(m.group(2)) >= 1
            and "key not in client_keys" in log, "relay log: %r" % log)
    q.note("relay: subscribers %s let in, %s refused" % m.groups())
    # a reload follows a changed [bus] groups: b gives up tower
    b = daemons["b"]
    with open(b.path) as f:
        text = f.read()
    b.write(text.replace("groups = pump_skid, tower", "groups = pump_skid"))
    b.proc.send_signal(signal.SIGHUP)
    end = time.monotonic() + q.WAIT
    while sorted(b.status()["groups"]) != ["pump_skid"] and \
            time.monotonic() < end:
        time.sleep(0.05)
    q.check(sorted(b.status()["groups"]) == ["pump_skid"],
            "after reload b owns %r" % sorted(b.status()["groups"]))
    unsub = False
    end = time.monotonic() + q.WAIT
    while not unsub and time.monotonic() < end:
        unsub = pub.sock.poll(100) and pub.sock.recv() == b"\x00tower"
    q.check(unsub, "no unsubscription from tower after the reload")
    for d in daemons.values():
        rc, _ = d.stop()
        q.check(rc == 0, "daemon exit %d" % rc)
finally:
    for p in (tail, relay):
        if p is not None and p.poll() is None:
            p.kill()
print("ok")
