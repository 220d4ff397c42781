"""End-to-end: the simulator and the recorder on a CURVE bus (issue 5).

(1) A daemon whose bound input is a CURVE server with an allow-list: `sim
--key K --server-key SERVER.pub` (K listed) is heard and its readings are
scored; the same run with an unlisted key is not heard at all.  (2) `sim
--to @... --key K` binds as a CURVE server; `record --server-key K.pub`
captures its stream, which replays to the same number of readings; record
without keys captures nothing."""
import os
import shutil
import subprocess

import qwtest as q

q.need_program()
if not q.zmq.has("curve"):
    print("libzmq without CURVE")
    raise SystemExit(77)

PLANT = ["chw_supply_t", "chw_return_t", "chw_flow", "comp_amps", "cond_t"]
N = 400
tmp = q.tmpdir()
keys = os.path.join(tmp, "keys")
clients = os.path.join(tmp, "clients")
os.mkdir(keys)
os.mkdir(clients)
for n in ("server", "plant", "stranger"):
    r = subprocess.run([q.QW, "keygen", os.path.join(keys, n)],
                       capture_output=True, text=True, timeout=10)
    q.check(r.returncode == 0, "keygen %s: %s" % (n, r.stderr))
shutil.copy(os.path.join(keys, "plant.pub"), clients)


def key(name, ext):
    return os.path.join(keys, name + ext)


def sim(cfg, to, *extra, wait="3s"):
    return subprocess.run([q.QW, "sim", "-c", cfg, "--to", to, "--count",
                           str(N), "--rate", "0", "--wait", wait, "-q"] +
                          list(extra), capture_output=True, text=True,
                          timeout=60)


group = {"chiller": {"channels": PLANT, "half_life": 2000, "rate": 10,
                     "warmup": 200}}
bound = "ipc://%s/in" % tmp
text = q.ini(tmp, group, ["@" + bound], extra=(
    "\n[security]\nserver_key = %s\nclient_keys = %s\n" %
    (key("server", ".key"), clients)))


class KeyedDaemon(q.Daemon):
    """The daemon, questioned through `quadwatch ctl` with plant's keys
    (its control socket is a CURVE server too)."""

    def ctl(self, cmd, timeout=q.CTL_TIMEOUT, frames=None):
        r = subprocess.run([q.QW, "ctl", "--key", key("plant", ".key"),
                            "--server-key", key("server", ".pub"),
                            self.control] + cmd.split(),
                           capture_output=True, text=True,
                           timeout=timeout + 10)
        if r.returncode != 0:
            raise TimeoutError(cmd)
        return q.json.loads(r.stdout)


d = KeyedDaemon(tmp, text)


def readings():
    return d.status()["groups"]["chiller"]["readings"]


r = sim(d.path, ">" + bound, "--key", key("stranger", ".key"),
        "--server-key", key("server", ".pub"), wait="1.5s")
q.check(readings() == 0, "an unlisted simulator was heard")
r = sim(d.path, ">" + bound, "--key", key("plant", ".key"),
        "--server-key", key("server", ".pub"))
q.check(r.returncode == 0, "sim exit %d: %s" % (r.returncode, r.stderr))
end = q.time.monotonic() + q.WAIT
while readings() < N and q.time.monotonic() < end:
    q.time.sleep(0.1)
got = readings()
q.check(got == N, "listed simulator: %d of %d readings" % (got, N))
q.note("CURVE input: listed sim %d readings scored, unlisted 0" % got)
r = sim(d.path, ">" + bound, "--server-key", key("server", ".pub"),
        "--key", key("server", ".pub"))
q.check(r.returncode == 2, "a .pub as --key must be refused (exit %d)" %
        r.returncode)

# (2) sim as a CURVE server, record as its client.
pub = "ipc://%s/plant" % tmp
rcfg = os.path.join(tmp, "rec.ini")
with open(rcfg, "w") as f:
    f.write(q.ini(tmp + "/r", group, [">" + pub]))
os.mkdir(tmp + "/r")


def record(out, *extra):
    return subprocess.Popen([q.QW, "record", "-c", rcfg, "-o", out,
                             "--seconds", "20", "--count", str(N // 64 + 1),
                             "-q"] + list(extra))


cap = os.path.join(tmp, "cap")
rp = record(cap, "--server-key", key("plant", ".pub"))
r = sim(rcfg, "@" + pub, "--key", key("plant", ".key"), "--batch", "64",
        wait="10s")
q.check(r.returncode == 0, "sim as server: %s" % r.stderr)
q.check(rp.wait(timeout=30) == 0, "record exit")
r = subprocess.run([q.QW, "replay", "-c", rcfg, "--json", cap],
                   capture_output=True, text=True, timeout=60)
q.check(r.returncode == 0, "replay: %s" % r.stderr)
rep = q.json.loads(r.stdout)["readings"]
q.check(rep == N, "record over CURVE replays %d of %d readings" % (rep, N))
cap2 = os.path.join(tmp, "cap2")
rp = subprocess.Popen([q.QW, "record", "-c", rcfg, "-o", cap2, "--seconds",
                       "3", "-q"])
sim(rcfg, "@" + pub, "--key", key("plant", ".key"), wait="2s")
q.check(rp.wait(timeout=30) == 0, "plain record exit")
q.check(os.path.getsize(cap2) <= 16, "a plain recorder captured a CURVE "
        "stream (%d bytes)" % os.path.getsize(cap2))
q.note("CURVE publisher: keyed record captured %d readings, plain record "
       "nothing" % rep)
print("ok")
