"""End-to-end: CURVE on the daemon's sockets ([security]).

Keys come from `quadwatch keygen`.  The daemon binds one input, its alerts
and its control socket as CURVE servers with client_keys = a directory
holding op.pub (the operator) and pub1.pub (a publisher); it also connects
to two publishers that are CURVE servers: the real one (its public key is
publisher_key) and an impostor with another key.

Checks: (1) the authenticated publisher's readings are scored; a publisher
with a key not in client_keys, and one without CURVE, never complete the
handshake and none of their readings is received; the impostor the daemon
connects to is never heard either.  (2) control: an authenticated client
(pyzmq and `quadwatch ctl --key --server-key`) is answered; no CURVE, an
unlisted key, a session key, or the wrong server key get no answer, and
ctl exits 1.  Alerts: an authenticated `quadwatch tail` gets stats, a plain
subscriber nothing.  (3) rotation: adding a client's .pub and SIGHUP lets
it in, removing it and SIGHUP shuts it out again; a changed server_key is
refused on reload (restart needed) and the old keys stay in force."""
import os
import shutil
import signal
import subprocess
import time

import qwtest as q

QUIET = 1.5  # s: a refused peer stays silent at least this long

q.need_program()
if not q.zmq.has("curve"):
    print("libzmq without CURVE")
    raise SystemExit(77)

tmp = q.tmpdir()
keys = os.path.join(tmp, "keys")
clients = os.path.join(tmp, "clients")
os.mkdir(keys)
os.mkdir(clients)


def keygen(name):
    r = subprocess.run([q.QW, "keygen", os.path.join(keys, name)],
                       capture_output=True, text=True, timeout=10)
    q.check(r.returncode == 0, "keygen %s: %s" % (name, r.stderr))


def keyfile(name):
    """(public, secret) in Z85 bytes from NAME.key."""
    out = {}
    with open(os.path.join(keys, name + ".key")) as f:
        for line in f:
            if "=" in line and not line.startswith("#"):
                k, v = line.split("=", 1)
                out[k.strip()] = v.strip().encode()
    return out["public"], out["secret"]


for n in ("server", "op", "pub1", "stranger", "plant", "fake", "server2"):
    keygen(n)
for n in ("op", "pub1"):
    shutil.copy(os.path.join(keys, n + ".pub"), clients)
SERVER_PUB = keyfile("server")[0]


def curve_client(sock, name, server_pub=SERVER_PUB):
    pub, sec = keyfile(name)
    sock.curve_publickey = pub
    sock.curve_secretkey = sec
    sock.curve_serverkey = server_pub


class Sender:
    """An XPUB publisher: connects to the daemon's bound input (as a CURVE
    client with key name, or in the clear when name is None), or binds as
    a CURVE server with key name (bind=True).  heard() tells whether the
    daemon's subscription arrived, i.e. the handshake completed."""

    def __init__(self, endpoint, name, bind=False):
        self.sock = q.CTX.socket(q.zmq.XPUB)
        self.sock.setsockopt(q.zmq.LINGER, 0)
        self.sock.setsockopt(q.zmq.SNDHWM, 0)
        if bind:
            pub, sec = keyfile(name)
            self.sock.curve_server = True
            self.sock.curve_secretkey = sec
            self.sock.bind(endpoint)
            self.endpoint = self.sock.getsockopt_string(q.zmq.LAST_ENDPOINT)
        else:
            if name is not None:
                curve_client(self.sock, name)
            self.sock.connect(endpoint)
            self.endpoint = endpoint

    def heard(self, topic, timeout):
        want = b"\x01" + topic.encode()
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            if self.sock.poll(50) and self.sock.recv() == want:
                return True
        return False

    def send(self, topic, payload):
        self.sock.send_multipart([topic.encode(), payload])

    def close(self):
        self.sock.close()


class CurveDaemon(q.Daemon):
    """The daemon, questioned over CURVE as the operator 'op'."""
    ctl_key = "op"

    def ctl(self, cmd, timeout=q.CTL_TIMEOUT, frames=None, key="default"):
        key = self.ctl_key if key == "default" else key
        s = q.CTX.socket(q.zmq.REQ)
        s.setsockopt(q.zmq.LINGER, 0)
        if key is not None:
            curve_client(s, key)
        s.connect(self.control)
        try:
            s.send_string(cmd)
            if not s.poll(int(timeout * 1000)):
                raise TimeoutError(cmd)
            return q.json.loads(s.recv())
        finally:
            s.close()


def refused(d, key, what):
    try:
        r = d.ctl("status", timeout=QUIET, key=key)
    except TimeoutError:
        return
    q.fail("%s answered: %r" % (what, r))


def ctl_cli(d, *args):
    r = subprocess.run([q.QW, "ctl"] + list(args) + [d.control, "status"],
                       capture_output=True, text=True, timeout=15)
    return r.returncode, r.stdout, r.stderr


def security(server="server"):
    return ("\n[security]\nserver_key = %s\nclient_keys = %s\n"
            "publisher_key = %s\n" % (os.path.join(keys, server + ".key"),
                                      clients,
                                      os.path.join(keys, "plant.pub")))


# ---- start: one bound input, two connected publishers --------------------
plant = Sender("tcp://127.0.0.1:*", "plant", bind=True)
fake = Sender("tcp://127.0.0.1:*", "fake", bind=True)
bound = "ipc://%s/input" % tmp
groups = {"skid": q.skid_group(), "loop": q.skid_group()}
text = q.ini(tmp, groups, ["@" + bound, ">" + plant.endpoint,
                           ">" + fake.endpoint], extra=security())
d = CurveDaemon(tmp, text)
log = d.logtext()
q.check("CURVE on" in log and "2 allowed client keys" in log,
        "start log: %s" % log)

# (1) publishers on the bound input
good = Sender(bound, "pub1")
q.check(good.heard("skid", q.WAIT), "authenticated publisher not subscribed")
N = 640
t, x = q.skid_readings(N, seed=2718)
q.send_stream(good, "skid", t, x, "binary")
st = d.wait_readings("skid", N)
q.check(st["groups"]["skid"]["readings"] == N, "skid: %r" % st["groups"]["skid"])
received = st["received"]
denied0 = st["auth_denied"]

stranger = Sender(bound, "stranger")
plain = Sender(bound, None)
q.check(not stranger.heard("skid", QUIET), "unlisted key completed the handshake")
q.check(not plain.heard("skid", 0.2), "plain publisher completed the handshake")
t2, x2 = q.skid_readings(128, seed=3141)
for s in (stranger, plain):
    q.send_stream(s, "skid", t2 + 1000, x2, "binary", seq0=N)
    for i in range(20):  # and the text form, one reading at a time
        s.send("skid", q.text(t2[i] + 2000, x2[i]))
time.sleep(0.5)
st = d.status()
q.check(st["received"] == received and st["groups"]["skid"]["readings"] == N,
        "unauthenticated readings counted: received %d -> %d, readings %d"
        % (received, st["received"], st["groups"]["skid"]["readings"]))
q.check(st["auth_denied"] > denied0, "no refusal counted: %r" % st["auth_denied"])
q.check("key not in client_keys" in d.logtext(), "refusal not logged")
q.note("bound input: %d readings from pub1; unlisted and plain publishers "
       "not heard (%d refusals)" % (N, st["auth_denied"]))

# (1b) publishers the daemon connects to: the real one and an impostor
q.check(plant.heard("loop", q.WAIT), "daemon did not reach the real publisher")
q.check(not fake.heard("loop", QUIET), "daemon completed a handshake with "
        "the impostor")
t3, x3 = q.skid_readings(320, seed=1414)
q.send_stream(plant, "loop", t3, x3, "binary")
q.send_stream(fake, "loop", t3 + 5000, x3, "binary", seq0=320)
st = d.wait_readings("loop", 320)
time.sleep(0.3)
st = d.status()
q.check(st["groups"]["loop"]["readings"] == 320,
        "loop: %r" % st["groups"]["loop"]["readings"])

# (2) control
r = d.ctl("rebaseline skid")
q.check(r == {"ok": True, "group": "skid"}, "authenticated rebaseline: %r" % r)
refused(d, None, "plain control client")
refused(d, "stranger", "control client with an unlisted key")
rc, out, err = ctl_cli(d, "--key", os.path.join(keys, "op.key"),
                       "--server-key", os.path.join(keys, "server.pub"))
q.check(rc == 0 and '"ok":true' in out.replace(" ", ""), "ctl --key: %d %s %s"
        % (rc, out, err))
for args, what in (([], "no keys"),
                   (["--server-key", os.path.join(keys, "server.pub")],
                    "session key"),
                   (["--key", os.path.join(keys, "stranger.key"),
                     "--server-key", os.path.join(keys, "server.pub")],
                    "unlisted key"),
                   (["--key", os.path.join(keys, "op.key"),
                     "--server-key", os.path.join(keys, "plant.pub")],
                    "wrong server key")):
    rc, out, err = ctl_cli(d, *args)
    q.check(rc == 1 and out == "" and "no reply" in err,
            "ctl with %s: %d %r %r" % (what, rc, out, err))
rc, out, err = ctl_cli(d, "--key", os.path.join(keys, "op.pub"),
                       "--server-key", os.path.join(keys, "server.pub"))
q.check(rc == 1 and "open to group or others (mode 0644)" in err,
        "ctl --key op.pub: %r" % err)
pub600 = os.path.join(keys, "op600.pub")
shutil.copy(os.path.join(keys, "op.pub"), pub600)
os.chmod(pub600, 0o600)
rc, out, err = ctl_cli(d, "--key", pub600,
                       "--server-key", os.path.join(keys, "server.pub"))
q.check(rc == 1 and "no 'secret = KEY'" in err, "ctl --key op.pub: %r" % err)
rc, out, err = ctl_cli(d, "--key", os.path.join(keys, "op.key"),
                       "--server-key", os.path.join(keys, "server.key"))
q.check(rc == 1 and "holds a secret key" in err, "--server-key .key: %r" % err)

# alerts: CURVE subscribers only
sub = q.CTX.socket(q.zmq.SUB)
sub.setsockopt(q.zmq.LINGER, 0)
sub.connect(d.alerts)
sub.setsockopt(q.zmq.SUBSCRIBE, b"")
tail = subprocess.run([q.QW, "tail", d.alerts, "--stats", "--count", "1",
                       "--key", os.path.join(keys, "op.key"), "--server-key",
                       os.path.join(keys, "server.pub")],
                      capture_output=True, text=True, timeout=15)
q.check(tail.returncode == 0 and "stats received" in tail.stdout,
        "tail over CURVE: %d %r %r" % (tail.returncode, tail.stdout,
                                       tail.stderr))
q.check(not sub.poll(int(QUIET * 1000)), "plain subscriber got alerts/stats")
sub.close()

# (3) rotation: add a client key, reload; remove it, reload
shutil.copy(os.path.join(keys, "stranger.pub"), clients)
reloads = d.status()["reloads"]
d.proc.send_signal(signal.SIGHUP)
end = time.monotonic() + q.WAIT
while d.status()["reloads"] == reloads and time.monotonic() < end:
    time.sleep(0.05)
r = d.ctl("status", key="stranger")
q.check(r["ok"] is True, "added key not let in after reload: %r" % r)
os.remove(os.path.join(clients, "stranger.pub"))
d.proc.send_signal(signal.SIGHUP)
end = time.monotonic() + q.WAIT
while d.status()["reloads"] == reloads + 1 and time.monotonic() < end:
    time.sleep(0.05)
refused(d, "stranger", "removed key after reload")

# a new server key needs a restart: the reload is refused, old keys stay
failures = d.status()["reload_failures"]
d.write(text.replace(os.path.join(keys, "server.key"),
                     os.path.join(keys, "server2.key")))
d.proc.send_signal(signal.SIGHUP)
end = time.monotonic() + q.WAIT
while d.status()["reload_failures"] == failures and time.monotonic() < end:
    time.sleep(0.05)
q.check("restart quadwatch to apply" in d.logtext(), "no restart hint logged")
q.check(d.ctl("status")["ok"] is True, "old server key no longer works")

for s in (good, stranger, plain, plant, fake):
    s.close()
rc, secs = d.stop()
q.check(rc == 0, "daemon exit %d" % rc)
q.note("control, alerts and rotation over CURVE as expected")
print("ok")
