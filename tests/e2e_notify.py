"""End-to-end: `quadwatch run` under a service manager.

The test plays the manager's part of the sd_notify(3) protocol: a datagram
socket it binds (a path, and an abstract '@' name) is the daemon's
$NOTIFY_SOCKET.  Checked:
  - READY=1 is the first datagram, and when it arrives the alert and
    control endpoints already accept connections and the checkpoint left by
    an earlier daemon is restored;
  - WATCHDOG=1 at half of WATCHDOG_USEC (200 ms -> 100 ms), idle and while
    readings arrive, never later than WATCHDOG_USEC;
  - STATUS= lines: readings/s over the refresh window (compared with the
    readings the test sent inside it) and the groups in alarm by name, the
    list cut with "..." when 20 long names do not fit in 1024 bytes;
  - SIGHUP: RELOADING=1 with MONOTONIC_USEC (CLOCK_MONOTONIC, as
    sd_notify(3) specifies), then READY=1; a refused reload says so;
  - SIGTERM: STOPPING=1, exit 0;
  - NOTIFY_SOCKET pointing nowhere, or unusable: the daemon runs, the
    failure is logged once and counted;
  - logs: "<N>" syslog priorities without timestamps when JOURNAL_STREAM
    names stderr (systemd.exec(5)), plain timestamped lines otherwise."""
import os
import re
import signal
import socket
import subprocess
import time
import qwtest as q

q.need_program()
for k in ("NOTIFY_SOCKET", "WATCHDOG_USEC", "WATCHDOG_PID", "JOURNAL_STREAM"):
    os.environ.pop(k, None)   # this test decides what the daemon sees

WD_USEC = 200000          # WATCHDOG_USEC of the test daemons: 200 ms
PING = WD_USEC * 0.5e-6   # s: the daemon pings at half of it
STATUS_EVERY = 5.0        # s: RUN_NOTIFY_STATUS_EVERY (src/cmd/run_notify.h)
RATE_RTOL = 0.03          # readings/s vs the test's count over a 5 s window:
                          # the window ends are known to a few ms
STATUS_RE = re.compile(r"^(\d+\.\d) readings/s, (\d+) of (\d+) groups in alarm"
                       r"(?:: (.*))?$")
PLAIN_RE = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z "
                      r"(error|warn|info|debug): ")
JOURNAL_RE = re.compile(r"^<([0-7])>(error|warn|info|debug): ")
PRIORITY = {"error": "3", "warn": "4", "info": "6", "debug": "7"}  # syslog(3)

tmp = q.tmpdir()
state = os.path.join(tmp, "state")
os.mkdir(state)
pub = q.Publisher()
N0, NB = 400, 1000                      # readings before, burst with fault
FLOW_STEP = 2.0          # L/s added to flow in the burst: 13 noise std devs,
                         # so every reading of it is over the limit
t, x = q.skid_readings(N0 + 2000 + NB, seed=4711)
x[N0 + 2000:, 2] += FLOW_STEP


def cfg(**over):
    return q.ini(tmp, {"skid": q.skid_group(**over)}, [">" + pub.endpoint],
                 extra="\n[state]\ndir = %s\nevery = 1h\n" % state)


class Manager:
    """The manager's end: a datagram socket at addr (path, or '@name')."""

    def __init__(self, addr):
        self.addr = addr
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
        self.sock.bind(addr if addr[0] == "/" else "\0" + addr[1:])
        self.got = []   # (monotonic s, {key: value}) in arrival order

    def recv(self, timeout):
        """One datagram as (time, dict), or None after timeout s."""
        self.sock.settimeout(max(timeout, 1e-4))
        try:
            data = self.sock.recv(4096)
        except socket.timeout:
            return None
        now = time.monotonic()
        kv = {}
        for line in data.decode().split("\n"):
            q.check("=" in line, "datagram line %r in %r" % (line, data))
            k, v = line.split("=", 1)
            kv[k] = v
        self.got.append((now, kv))
        return now, kv

    def wait(self, key, timeout=q.WAIT, during=None):
        """The next datagram holding key; during() is called between
        receives (a sender that paces itself)."""
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            if during is not None:
                during()
            m = self.recv(0.01 if during else end - time.monotonic())
            if m is not None and key in m[1]:
                return m
        q.fail("no %s= from the daemon within %.0f s; got %r" %
               (key, timeout, [kv for _, kv in self.got[-5:]]))

    def collect(self, secs, during=None):
        """Every datagram for secs seconds."""
        start, out = len(self.got), []
        end = time.monotonic() + secs
        while time.monotonic() < end:
            if during is not None:
                during()
            self.recv(min(0.01, max(0, end - time.monotonic())))
        out = self.got[start:]
        return out


class Notified(q.Daemon):
    """q.Daemon with its own environment and arguments, not waiting for the
    control socket (the test watches the start itself)."""

    def __init__(self, name, text, env, args=()):
        self.tmp = tmp
        self.path = os.path.join(tmp, name + ".ini")
        self.log = os.path.join(tmp, name + ".log")
        self.control = "ipc://%s/control" % tmp
        self.alerts = "ipc://%s/alerts" % tmp
        self.vglog = os.path.join(tmp, name + ".valgrind")
        self.write(text)
        full = dict(os.environ)
        full.update(env)
        err = open(self.log, "w")
        for k, v in env.items():
            if k == "JOURNAL_STREAM" and v == "STDERR":  # this log file
                st = os.fstat(err.fileno())
                full[k] = "%d:%d" % (st.st_dev, st.st_ino)
        self.proc = subprocess.Popen([q.QW, "run", "-c", self.path] + list(args),
                                     stdout=subprocess.DEVNULL, stderr=err,
                                     env=full)
        err.close()
        q._DAEMONS.append(self)


def accepts(ipc):
    """1 when the ipc:// endpoint's socket file takes a connection."""
    s = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    try:
        s.connect(ipc[len("ipc://"):])
        return True
    except OSError:
        return False
    finally:
        s.close()


def status_line(kv):
    m = STATUS_RE.match(kv.get("STATUS", ""))
    q.check(m, "STATUS line %r" % kv.get("STATUS"))
    return float(m.group(1)), int(m.group(2)), int(m.group(3)), m.group(4)


def gaps(msgs, key="WATCHDOG"):
    ts = [tm for tm, kv in msgs if key in kv]
    return [b - a for a, b in zip(ts, ts[1:])]


def check_pings(msgs, secs, what):
    g = gaps(msgs)
    q.check(len(g) >= 0.7 * secs / PING, "%s: %d pings in %.1f s, want ~%d" %
            (what, len(g) + 1, secs, secs / PING))
    g.sort()
    med = g[len(g) // 2]
    q.note("watchdog %s: %d pings, spacing median %.1f ms, max %.1f ms "
           "(WATCHDOG_USEC %d ms)" % (what, len(g) + 1, med * 1e3,
                                      g[-1] * 1e3, WD_USEC // 1000))
    q.check(0.8 * PING <= med <= 1.3 * PING,
            "%s: median ping spacing %.3f s, want %.3f" % (what, med, PING))
    q.check(g[-1] < WD_USEC * 1e-6,
            "%s: a %.3f s gap between pings would trip the watchdog" %
            (what, g[-1]))


def check_log(path, journal):
    with open(path) as f:
        lines = f.read().splitlines()
    q.check(lines, "empty log %s" % path)
    seen = set()
    for line in lines:
        if journal:
            m = JOURNAL_RE.match(line)
            q.check(m and PRIORITY[m.group(2)] == m.group(1),
                    "journal line without its priority: %r" % line)
            seen.add(m.group(2))
        else:
            q.check(PLAIN_RE.match(line), "plain line expected: %r" % line)
    return seen


# 0. a checkpoint for the notified daemon to restore
d0 = q.Daemon(tmp, cfg(), "first")
pub.wait_sub("skid")
q.send_stream(pub, "skid", t[:N0], x[:N0], "binary")
d0.wait_readings("skid", N0)
rc, _ = d0.stop()
q.check(rc == 0 and os.path.exists(os.path.join(state, "skid.qwstate")),
        "first daemon: exit %d, checkpoint missing" % rc)
pub.close()
pub = q.Publisher()   # a fresh one: its first subscription is the next daemon's

# 1. READY=1 only once bound and restored
mgr = Manager(os.path.join(tmp, "notify"))
d = Notified("notified", cfg(), {"NOTIFY_SOCKET": mgr.addr,
                                 "WATCHDOG_USEC": str(WD_USEC)})
t_ready, ready = mgr.wait("READY")
q.check(len(mgr.got) == 1, "READY=1 must come first: %r" % mgr.got)
q.check(accepts(d.alerts) and accepts(d.control),
        "READY=1 before the alert and control endpoints accept connections")
rate, inalarm, ngroups, names = status_line(ready)
q.check(ngroups == 1 and inalarm == 0 and rate == 0.0,
        "STATUS at READY: %r" % ready["STATUS"])
d.wait_control()
g = d.status()["groups"]["skid"]
q.check(g["checkpoint"]["restored"] == 1 and g["readings"] == N0,
        "checkpoint not restored before READY: %r" % g)
q.note("READY=1 with STATUS=%s" % ready["STATUS"])

# 2. watchdog pings, idle and under traffic
check_pings(mgr.collect(2.0), 2.0, "idle")
pub.wait_sub("skid")
sent = [N0]


def pace(step=5, upto=N0 + 2000):
    """5 readings per call (one binary batch): a steady stream."""
    a = sent[0]
    if a < upto:
        b = min(upto, a + step)
        pub.send("skid", q.binary(t[a:b], x[a:b], a))
        sent[0] = b


check_pings(mgr.collect(2.0, during=pace), 2.0, "with traffic")
q.note("%d readings sent during the traffic window" % (sent[0] - N0))

# 3. STATUS: readings/s over one window, and the group in alarm by name
t1, s1 = mgr.wait("STATUS", timeout=STATUS_EVERY + q.WAIT)
nwin = N0 + 2000 + NB - sent[0]     # readings the test sends after t1
while sent[0] < N0 + 2000:
    pace()
a = sent[0]
q.send_stream(pub, "skid", t[a:a + NB], x[a:a + NB], "binary", seq0=a)
d.wait_readings("skid", a + NB)
t2, s2 = mgr.wait("STATUS", timeout=STATUS_EVERY + q.WAIT)
st = d.status()
got_rate, inalarm, ngroups, names = status_line(s2)
q.check(st["groups"]["skid"]["in_alarm"] is True,
        "the fault did not raise an alarm: %r" % st["groups"]["skid"])
q.check(inalarm == 1 and names == "skid", "STATUS %r while skid is in alarm"
        % s2["STATUS"])
want = nwin / (t2 - t1)
q.note("STATUS=%s (test's count: %.1f readings/s)" % (s2["STATUS"], want))
q.check(abs(got_rate - want) <= RATE_RTOL * want,
        "readings/s %.1f, the test sent %.1f/s in the window" % (got_rate, want))

# 4. SIGHUP: RELOADING=1 with MONOTONIC_USEC, then READY=1
d.write(cfg(alarms_per_day=20))
mark = len(mgr.got)
d.proc.send_signal(signal.SIGHUP)
_, rl = mgr.wait("RELOADING")
now_us = time.monotonic() * 1e6
q.check(rl["RELOADING"] == "1" and "MONOTONIC_USEC" in rl,
        "RELOADING datagram %r" % rl)
q.check(abs(int(rl["MONOTONIC_USEC"]) - now_us) < q.WAIT * 1e6,
        "MONOTONIC_USEC %s is not CLOCK_MONOTONIC (now %.0f us)" %
        (rl["MONOTONIC_USEC"], now_us))
_, rd = mgr.wait("READY")
q.check(not any("READY" in kv for _, kv in mgr.got[mark:-1]) and
        any("RELOADING" in kv for _, kv in mgr.got[mark:-1]),
        "want RELOADING=1 then READY=1: %r" % mgr.got[mark:])
status_line(rd)
q.check(d.status()["reloads"] == 1, "the reload did not take effect")
d.write(cfg(alarms_per_day=20, half_lief=3))
d.proc.send_signal(signal.SIGHUP)
mgr.wait("RELOADING")
_, rd = mgr.wait("READY")
q.check("reload refused" in rd.get("STATUS", ""),
        "a refused reload's READY says %r" % rd)
q.check(d.status()["reload_failures"] == 1, "reload_failures")

# 5. SIGTERM: STOPPING=1, exit 0
d.proc.send_signal(signal.SIGTERM)
mgr.wait("STOPPING")
rc = d.proc.wait(timeout=q.WAIT)
q.check(rc == 0, "exit %d after SIGTERM" % rc)
check_log(d.log, journal=False)

# 6. NOTIFY_SOCKET pointing nowhere: runs, logs once, counts; an unusable
#    address is refused with a warning; plain logs when JOURNAL_STREAM names
#    another file
other = os.path.join(tmp, "other")
open(other, "w").close()
ost = os.stat(other)
for name, sockaddr in (("nowhere", os.path.join(tmp, "nobody-listens")),
                       ("relative", "run/notify")):
    dn = Notified(name, cfg(), {"NOTIFY_SOCKET": sockaddr,
                                "WATCHDOG_USEC": "20000",
                                "JOURNAL_STREAM": "%d:%d" % (ost.st_dev,
                                                             ost.st_ino)})
    dn.wait_control()
    time.sleep(0.5)
    q.check(dn.status()["groups"]["skid"]["readings"] == a + NB,
            "%s: daemon not serving" % name)
    rc, _ = dn.stop()
    log = dn.logtext()
    q.check(rc == 0, "%s: exit %d: %s" % (name, rc, log))
    check_log(dn.log, journal=False)
    if name == "nowhere":
        q.check(log.count("service notification failed") == 1,
                "a failing notify socket must be logged once: %s" % log)
        m = re.search(r"service notification: (\d+) of (\d+) datagrams "
                      "refused", log)
        q.check(m and int(m.group(1)) == int(m.group(2)) >= 10,
                "failures not counted: %s" % log)
        q.note("NOTIFY_SOCKET nowhere: %s of %s datagrams refused, one log "
               "line" % (m.group(1), m.group(2)))
    else:
        q.check("not a path or an abstract socket name" in log and
                "service notification" not in log,
                "unusable NOTIFY_SOCKET: %s" % log)

# 7. abstract socket, journal stream: "<N>" priorities on every line
mgr2 = Manager("@qwtest-notify-%d" % os.getpid())
dj = Notified("journal", cfg(), {"NOTIFY_SOCKET": mgr2.addr,
                                 "WATCHDOG_USEC": "soon",
                                 "JOURNAL_STREAM": "STDERR"}, args=["-v"])
mgr2.wait("READY")
dj.wait_control()
q.check(not any("WATCHDOG" in kv for _, kv in mgr2.collect(0.5)),
        "pings without a usable WATCHDOG_USEC")
dj.write(cfg(half_lief=3))
dj.proc.send_signal(signal.SIGHUP)
mgr2.wait("RELOADING")
mgr2.wait("READY")
dj.proc.send_signal(signal.SIGTERM)
mgr2.wait("STOPPING")
q.check(dj.proc.wait(timeout=q.WAIT) == 0, "journal daemon exit")
seen = check_log(dj.log, journal=True)
q.check(seen == set(PRIORITY), "levels seen under the journal: %r" % seen)
q.check("<4>warn: WATCHDOG_USEC=soon" in dj.logtext(),
        "bad WATCHDOG_USEC not warned: %s" % dj.logtext())
q.note("journal stream: every line has its syslog priority (%s)" %
       ", ".join("<%s> %s" % (PRIORITY[k], k) for k in sorted(seen)))

# 8. more groups in alarm than one datagram can name: the list is cut
#    with "..." and the datagram stays within 1024 bytes
NG, NAME_LEN, NOK, NBAD = 20, 60, 100, 30   # 20 names of 60 bytes > 1024
names_all = ["g%02d_" % i + "x" * (NAME_LEN - 4) for i in range(NG)]
pub3 = q.Publisher()
groups = {n: {"channels": ["a", "b"], "half_life": 200, "rate": 10,
              "warmup": 50, "floor": [0.01, 0.01]} for n in names_all}
text = q.ini(tmp, groups, [">" + pub3.endpoint])
mgr3 = Manager(os.path.join(tmp, "notify-many"))
dm = Notified("many", text, {"NOTIFY_SOCKET": mgr3.addr})
mgr3.wait("READY")
rng = q.np.random.default_rng(1618)
for i, n in enumerate(names_all):
    pub3.wait_sub(n)
    lo = rng.standard_normal(NOK + NBAD)
    xy = q.np.column_stack([2.385 + lo, 1.5 * lo + 0.1 * rng.standard_normal(NOK + NBAD)])
    xy[NOK:, 1] += 10.0                       # 100 noise std devs off
    tt = 1.7e9 + 0.1 * q.np.arange(NOK + NBAD)
    pub3.send(n, q.binary(tt, xy, 0))
end = time.monotonic() + q.WAIT
while time.monotonic() < end:
    stg = dm.status()["groups"]
    if sum(g["in_alarm"] for g in stg.values()) == NG:
        break
    time.sleep(0.05)
q.check(sum(g["in_alarm"] for g in stg.values()) == NG, "not all in alarm")
while True:
    _, kv = mgr3.wait("STATUS", timeout=STATUS_EVERY + q.WAIT)
    if status_line(kv)[1] == NG:
        break
line = "STATUS=" + kv["STATUS"]
_, inalarm, ngroups, listed = status_line(kv)
q.check(ngroups == NG and len(line) <= 1024 and line.endswith(", ..."),
        "long group list: %d bytes: %r" % (len(line), line[-80:]))
shown = listed[:-len(", ...")].split(", ")
q.check(shown == names_all[:len(shown)] and 0 < len(shown) < NG,
        "names listed: %r" % shown)
q.note("%d groups in alarm: %d named in a %d-byte STATUS line, then ..." %
       (NG, len(shown), len(line)))
rc, _ = dm.stop()
q.check(rc == 0, "many: exit %d" % rc)
pub3.close()
pub.close()
print("ok")
