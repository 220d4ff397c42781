"""qwtest.py: shared helpers for the end-to-end tests of `quadwatch run`.

The tests drive the real program ($BUILD/quadwatch) over real sockets on
loopback: a publisher (XPUB bound on tcp://127.0.0.1, port chosen by the
kernel, so it sees the daemon's subscription before sending), the daemon's
alert and control sockets on ipc:// paths in a private temporary directory,
and subscribers and control requests from pyzmq.  Every wait has a deadline;
the daemon is killed when the test ends, however it ends.

Run with /usr/bin/python3 (Debian's numpy and python3-zmq)."""

import atexit
import json
import os
import shutil
import signal
import struct
import subprocess
import sys
import tempfile
import time

try:
    import numpy as np
    import zmq
except ImportError as e:  # pragma: no cover - environment check
    print("python3-zmq or python3-numpy missing: %s" % e)
    sys.exit(77)

BUILD = os.environ.get("BUILD", "build")
ROOT = os.path.abspath(os.path.join(os.path.dirname(__file__), ".."))
QW = os.path.join(ROOT, BUILD, "quadwatch")

WAIT = 10.0        # s: longest wait for any one event on loopback
CTL_TIMEOUT = 3.0  # s: a control reply (as quadwatch ctl)
STOP_WITHIN = 1.0  # s: SIGTERM to exit, as the issue requires

# make check-valgrind: daemons run under valgrind (memcheck, leaks), which
# slows them some 20-50 times; waits grow to match.  A daemon whose run
# ends with a valgrind error (exit VALGRIND_ERROR) fails the test.
VALGRIND = os.environ.get("QW_VALGRIND") == "1"
VALGRIND_ERROR = 99
if VALGRIND:
    WAIT, CTL_TIMEOUT, STOP_WITHIN = 120.0, 30.0, 30.0

# The invented chilled-water skid of the demo: four correlated channels
# driven by one load variable.
SKID = ["supply_t", "return_t", "flow", "pump_amps"]
SKID_MEAN = np.array([6.85, 12.4, 38.5, 21.3])   # degC, degC, L/s, A
SKID_LOAD = np.array([0.0, 0.8, 2.5, 1.2])        # response to load
SKID_NOISE = np.array([0.05, 0.05, 0.15, 0.08])   # sensor noise, std dev

CTX = zmq.Context.instance()
_DAEMONS = []
_TMP = []


def note(msg):
    print("# " + msg)
    sys.stdout.flush()


def fail(msg):
    print("FAIL: " + msg)
    sys.stdout.flush()
    sys.exit(1)


def check(cond, msg):
    if not cond:
        fail(msg)


def need_program():
    if not os.access(QW, os.X_OK):
        print("%s not built" % QW)
        sys.exit(77)
    r = subprocess.run([QW, "--help"], capture_output=True, text=True)
    if "quadwatch run" not in r.stdout:
        print("%s has no run verb" % QW)
        sys.exit(77)


def tmpdir():
    d = tempfile.mkdtemp(prefix="qwtest.")
    _TMP.append(d)
    return d


def _cleanup():
    bad = []
    for d in _DAEMONS:
        if VALGRIND and d.alive():
            rc, _ = d.stop()  # a graceful stop, so leaks are checked
            if rc == VALGRIND_ERROR:
                bad.append(d.valgrind_log())
        d.kill()
    for t in _TMP:
        shutil.rmtree(t, ignore_errors=True)
    if bad:
        print("FAIL: valgrind found errors:\n" + "\n".join(bad))
        sys.stdout.flush()
        os._exit(1)


atexit.register(_cleanup)


def _on_term(sig, frame):
    sys.exit(1)


signal.signal(signal.SIGTERM, _on_term)


def fit_fixed(tmp, base, group, data, probes):
    """Phase I then Phase II: `quadwatch fit --no-trim` of the CSV data
    with the config file base, then `replay --scores` of the CSV probes
    against the fitted model frozen (model_use = fixed).  Returns the fit's
    printed fields (alpha, limit_gaussian, used) and the score rows."""
    import csv
    import re
    r = subprocess.run([QW, "fit", "-c", base, "--no-trim", "-q", "-o", tmp,
                        data], capture_output=True, text=True, timeout=60)
    check(r.returncode == 0, "fit: %s" % r.stderr)
    fields = {
        "alpha": float(re.search(r"alpha:\s+(\S+)", r.stdout).group(1)),
        "limit_gaussian": float(re.search(r"limit_gaussian:\s+(\S+)",
                                          r.stdout).group(1)),
        "used": int(re.search(r"used:\s+(\d+)", r.stdout).group(1))}
    fixed = os.path.join(tmp, "fixed.ini")
    with open(base) as f:
        text = f.read()
    with open(fixed, "w") as f:
        f.write(text + "model = %s/%s.qwmodel\nmodel_use = fixed\n"
                % (tmp, group))
    scores = os.path.join(tmp, "scores.csv")
    r = subprocess.run([QW, "replay", "-c", fixed, "-q", "--scores", scores,
                        probes], capture_output=True, text=True, timeout=60)
    check(r.returncode == 0, "replay: %s" % r.stderr)
    with open(scores) as f:
        rows = list(csv.DictReader(f))
    return fields, rows


def skid_readings(n, seed, fault=None):
    """n readings of the skid, fixed seed.  fault = (start, end): readings
    in [start, end) have flow respond to load with the wrong sign: inside
    its usual range, but no longer with the other channels."""
    rng = np.random.default_rng(seed)
    s = rng.standard_normal(n)
    e = rng.standard_normal((n, len(SKID)))
    x = SKID_MEAN + np.outer(s, SKID_LOAD) + e * SKID_NOISE
    if fault is not None:
        a, b = fault
        x[a:b, 2] = SKID_MEAN[2] - SKID_LOAD[2] * s[a:b] + e[a:b, 2] * SKID_NOISE[2]
    t = 1.7e9 + 0.1 * np.arange(n)
    return t, x


def ini(tmp, groups, inputs, stats_every="0.2s", extra_bus="", extra=""):
    """Config text with alerts/control on ipc:// paths under tmp.  groups:
    {name: {key: value}}; channels given as a list."""
    lines = ["[bus]",
             "input = " + ", ".join(inputs),
             "alerts = @ipc://%s/alerts" % tmp,
             "control = @ipc://%s/control" % tmp,
             "stats_every = " + stats_every]
    if extra_bus:
        lines.append(extra_bus)
    for name, keys in groups.items():
        lines.append("")
        lines.append("[group %s]" % name)
        for k, v in keys.items():
            if isinstance(v, (list, tuple)):
                v = ", ".join(str(u) for u in v)
            lines.append("%s = %s" % (k, v))
    if extra:
        lines.append(extra)
    return "\n".join(lines) + "\n"


def skid_group(**over):
    g = {"channels": SKID, "half_life": 2000, "alarms_per_day": 1,
         "rate": 10, "warmup": 300, "floor": [0.01, 0.01, 0.02, 0.01]}
    g.update(over)
    return g


class Publisher:
    """XPUB on tcp loopback: the daemon's SUB connects to it; wait_sub
    blocks until the daemon's subscription to topic has arrived."""

    def __init__(self):
        self.sock = CTX.socket(zmq.XPUB)
        self.sock.setsockopt(zmq.LINGER, 2000)
        self.sock.setsockopt(zmq.SNDHWM, 0)
        self.sock.bind("tcp://127.0.0.1:*")
        self.endpoint = self.sock.getsockopt_string(zmq.LAST_ENDPOINT)
        self.seq = 0

    def wait_sub(self, topic, timeout=WAIT):
        want = b"\x01" + topic.encode()
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            if self.sock.poll(100):
                if self.sock.recv() == want:
                    return
        fail("no subscription to %r within %.0f s" % (topic, timeout))

    def send(self, topic, payload):
        self.sock.send_multipart([topic.encode(), payload])

    def send_frames(self, frames):
        self.sock.send_multipart(frames)

    def close(self):
        self.sock.close(linger=2000)


def binary(t, x, seq):
    """One QWB1 frame: header, then {int64 ns, float64[p]} per reading."""
    n, p = x.shape
    out = [struct.pack("<4sIIIQ", b"QWB1", p, n, 0, seq)]
    for i in range(n):
        out.append(struct.pack("<q", int(round(t[i] * 1e9))))
        out.append(struct.pack("<%dd" % p, *x[i]))
    return b"".join(out)


def capture_bytes(records):
    """A capture file's bytes (src/io/capture.h): the header, then each
    (time, topic, payload) record."""
    out = [struct.pack("<6sHII", b"QWCAP1", 1, 0, 0)]
    for when, topic, payload in records:
        tb = topic.encode()
        out.append(struct.pack("<dH", when, len(tb)) + tb)
        out.append(struct.pack("<I", len(payload)) + payload)
    return b"".join(out)


def demo_ini(tmp, groups, name="demo_plus.ini"):
    """conf/demo.ini with groups added ({name: {key: value}}, as for ini()),
    written under tmp; its path."""
    with open(os.path.join(ROOT, "conf", "demo.ini")) as f:
        base = f.read()
    path = os.path.join(tmp, name)
    with open(path, "w") as f:
        f.write(base)
        f.write("\n" + ini(tmp, groups, [">tcp://127.0.0.1:5999"])
                .split("\n\n", 1)[1])
    return path


def text(t, xi):
    return (repr(float(t)) + "," + ",".join(repr(float(v)) for v in xi)).encode()


def jsonmsg(t, xi):
    return json.dumps({"t": float(t), "v": [float(v) for v in xi]}).encode()


def send_stream(pub, topic, t, x, fmt, batch=64, seq0=0):
    """Sends readings in format fmt ('binary', 'text', 'json')."""
    n = len(t)
    if fmt == "binary":
        for a in range(0, n, batch):
            b = min(n, a + batch)
            pub.send(topic, binary(t[a:b], x[a:b], seq0 + a))
    else:
        enc = text if fmt == "text" else jsonmsg
        for i in range(n):
            pub.send(topic, enc(t[i], x[i]))


class Daemon:
    """`quadwatch run -c FILE [args]` in the background, stderr to a log
    file."""

    def __init__(self, tmp, config_text, name="qw", args=()):
        self.tmp = tmp
        self.path = os.path.join(tmp, name + ".ini")
        self.log = os.path.join(tmp, name + ".log")
        self.control = "ipc://%s/control" % tmp
        self.alerts = "ipc://%s/alerts" % tmp
        self.vglog = os.path.join(tmp, name + ".valgrind")
        self.write(config_text)
        cmd = [QW, "run", "-c", self.path] + list(args)
        if VALGRIND:
            cmd = ["valgrind", "--quiet", "--leak-check=full",
                   "--show-leak-kinds=definite,indirect",
                   "--errors-for-leak-kinds=definite,indirect",
                   "--error-exitcode=%d" % VALGRIND_ERROR,
                   "--log-file=" + self.vglog] + cmd
        self.proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL,
                                     stderr=open(self.log, "w"))
        _DAEMONS.append(self)
        self.wait_control()

    def write(self, config_text):
        with open(self.path, "w") as f:
            f.write(config_text)

    def logtext(self):
        with open(self.log) as f:
            return f.read()

    def alive(self):
        return self.proc.poll() is None

    def wait_control(self):
        end = time.monotonic() + WAIT
        while time.monotonic() < end:
            check(self.alive(), "daemon exited: %s" % self.logtext())
            try:
                self.ctl("status", timeout=0.5)
                return
            except TimeoutError:
                pass
        fail("daemon's control socket silent for %.0f s" % WAIT)

    def ctl(self, cmd, timeout=CTL_TIMEOUT, frames=None):
        s = CTX.socket(zmq.REQ)
        s.setsockopt(zmq.LINGER, 0)
        s.connect(self.control)
        try:
            if frames is not None:
                s.send_multipart(frames)
            else:
                s.send_string(cmd)
            if not s.poll(int(timeout * 1000)):
                raise TimeoutError(cmd)
            return json.loads(s.recv())
        finally:
            s.close()

    def status(self):
        r = self.ctl("status")
        check(r.get("ok") is True, "status not ok: %r" % r)
        return r

    def wait_readings(self, group, n, timeout=WAIT, poll=0.05):
        """Waits until the group has been offered n readings (status
        asked every poll seconds)."""
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            st = self.status()
            if st["groups"][group]["readings"] >= n:
                return st
            time.sleep(poll)
        fail("group %s: %d of %d readings after %.0f s" %
             (group, st["groups"][group]["readings"], n, timeout))

    def rss_kib(self):
        with open("/proc/%d/status" % self.proc.pid) as f:
            for line in f:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1])
        fail("no VmRSS")

    def stop(self):
        """SIGTERM; returns (exit code, seconds taken).  Under valgrind a
        valgrind error fails the test here."""
        t0 = time.monotonic()
        self.proc.send_signal(signal.SIGTERM)
        try:
            rc = self.proc.wait(timeout=5 if not VALGRIND else 60)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            rc = self.proc.wait()
        if VALGRIND:
            check(rc != VALGRIND_ERROR,
                  "valgrind found errors:\n" + self.valgrind_log())
            note("valgrind: daemon %s clean (exit %d)" % (self.path, rc))
        return rc, time.monotonic() - t0

    def valgrind_log(self):
        try:
            with open(self.vglog) as f:
                return f.read()
        except OSError:
            return "(no valgrind log)"

    def kill(self):
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait()


class AlertSub:
    """SUB on a daemon's (or relay's) alert endpoint.  ready() waits for a
    stats message, proof that the subscription reached the daemon."""

    def __init__(self, endpoint, stats=True):
        self.sock = CTX.socket(zmq.SUB)
        self.sock.setsockopt(zmq.LINGER, 0)
        self.sock.connect(endpoint)
        self.sock.setsockopt(zmq.SUBSCRIBE, b"alert.")
        if stats:
            self.sock.setsockopt(zmq.SUBSCRIBE, b"stats")
        self.alerts = []
        self.stats = []

    def pump(self, timeout=0.0):
        end = time.monotonic() + timeout
        while True:
            left = max(0, end - time.monotonic())
            if not self.sock.poll(int(left * 1000)):
                return
            topic, body = self.sock.recv_multipart()
            obj = json.loads(body)
            if topic == b"stats":
                self.stats.append(obj)
            else:
                check(topic == b"alert." + obj["group"].encode(),
                      "alert topic %r for group %r" % (topic, obj["group"]))
                self.alerts.append(obj)

    def ready(self, timeout=WAIT):
        end = time.monotonic() + timeout
        while time.monotonic() < end and not self.stats:
            self.pump(0.1)
        check(self.stats, "no stats message within %.0f s" % timeout)

    def wait_alerts(self, n, timeout=WAIT):
        end = time.monotonic() + timeout
        while time.monotonic() < end and len(self.alerts) < n:
            self.pump(0.1)
        return self.alerts

    def close(self):
        self.sock.close()


def run_stream(tmp, name, fmt, t, x, group="skid", **over):
    """One daemon, one publisher: sends the stream in fmt, waits until the
    daemon has taken every reading, returns (alerts, status, daemon)."""
    pub = Publisher()
    d = Daemon(tmp, ini(tmp, {group: skid_group(**over)}, [">" + pub.endpoint]),
               name)
    pub.wait_sub(group)
    sub = AlertSub(d.alerts)
    sub.ready()
    send_stream(pub, group, t, x, fmt)
    st = d.wait_readings(group, len(t))
    sub.pump(0.3)
    pub.close()
    sub.close()
    return sub.alerts, st, d
