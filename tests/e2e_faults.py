"""End-to-end: faults around the daemon; it logs each and keeps scoring.

1. SIGHUP with a broken file: refused, logged with file and key, counted;
   readings keep being scored under the old configuration.
2. [state] dir that is a regular file (unwritable for root too): every
   save fails, counted in status checkpoint.failed; one log line per
   RUN_CKPT_LOG_EVERY however many saves fail; `ctl save` answers the
   reason; scoring goes on.
3. State dir on a read-only tmpfs: the same.
4. Disk full: a 64 KiB tmpfs filled up; saves fail (ENOSPC), the previous
   checkpoint stays intact; once space is freed, saves succeed again.
   Without permission to mount, 3 and 4 use a file-size limit (RLIMIT_FSIZE
   set in the child before exec) instead.
Every wait has a deadline; mounts are undone and daemons killed at exit."""
import atexit
import os
import resource
import signal
import subprocess
import threading
import zlib
import qwtest as q

q.need_program()
EVERY = "0.1s"
t, x = q.skid_readings(4000, seed=4242)
tmp = q.tmpdir()
MOUNTS = []


def unmount_all():
    for m in MOUNTS:
        subprocess.run(["umount", "-l", m], capture_output=True)


atexit.register(unmount_all)


def mount_tmpfs(path, opts):
    os.makedirs(path, exist_ok=True)
    if os.environ.get("QW_NO_MOUNT"):       # exercise the fallback
        return False
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", opts, "tmpfs", path],
                       capture_output=True, text=True, timeout=10)
    if r.returncode == 0:
        MOUNTS.append(path)
        return True
    q.note("mount -t tmpfs -o %s not permitted (%s): using a file-size limit"
           % (opts, r.stderr.strip()))
    return False


class LimitedDaemon(q.Daemon):
    """A daemon whose files may grow to fsize bytes (RLIMIT_FSIZE)."""

    def __init__(self, d_tmp, text, name, fsize):
        self.tmp, self.path = d_tmp, os.path.join(d_tmp, name + ".ini")
        self.log = os.path.join(d_tmp, name + ".log")
        self.control = "ipc://%s/control" % d_tmp
        self.alerts = "ipc://%s/alerts" % d_tmp
        self.write(text)

        def limit():
            resource.setrlimit(resource.RLIMIT_FSIZE, (fsize, fsize))
        # the limit covers every file the daemon writes, so its log goes
        # through a pipe, copied to the log file by this process
        self.proc = subprocess.Popen([q.QW, "run", "-c", self.path],
                                     stdout=subprocess.DEVNULL,
                                     stderr=subprocess.PIPE, preexec_fn=limit)
        out = open(self.log, "wb", buffering=0)

        def copy():
            for line in self.proc.stderr:
                out.write(line)
        threading.Thread(target=copy, daemon=True).start()
        q._DAEMONS.append(self)
        self.wait_control()


def start(name, state_dir, fsize=None, group=None):
    d_tmp = os.path.join(tmp, name)
    os.makedirs(d_tmp)
    pub = q.Publisher()
    text = q.ini(d_tmp, {"skid": group or q.skid_group()}, [">" + pub.endpoint],
                 extra="\n[state]\ndir = %s\nevery = %s\n" % (state_dir, EVERY))
    d = (LimitedDaemon(d_tmp, text, name, fsize) if fsize
         else q.Daemon(d_tmp, text, name))
    pub.wait_sub("skid")
    return d, pub


def wait_ckpt(d, key, n):
    end = q.time.monotonic() + q.WAIT
    while q.time.monotonic() < end:
        st = d.status()
        if st["checkpoint"][key] >= n:
            return st
        q.time.sleep(0.05)
    q.fail("checkpoint.%s stayed at %d, want %d" % (key, st["checkpoint"][key], n))


def keeps_scoring(d, pub, a, b):
    q.send_stream(pub, "skid", t[a:b], x[a:b], "binary", seq0=a)
    st = d.wait_readings("skid", b)
    q.check(d.alive(), "daemon died")
    return st


def unwritable(name, state_dir, why, fsize=None):
    """Saves fail, are counted and logged once, scoring goes on."""
    d, pub = start(name, state_dir, fsize)
    keeps_scoring(d, pub, 0, 400)
    wait_ckpt(d, "failed", 8)           # >= 8 failed saves at 0.1 s
    r = d.ctl("save")
    q.check(r["ok"] is False and why in r.get("error", ""),
            "%s: ctl save answered %r" % (name, r))
    st = keeps_scoring(d, pub, 400, 800)
    log = d.logtext()
    lines = [ln for ln in log.splitlines() if "checkpoint not written" in ln]
    q.check(len(lines) == 1 and why in lines[0],
            "%s: want one rate-limited log line naming %r, got %r" % (name, why, lines))
    q.check(st["checkpoint"]["saved"] == 0, "%s: saved %r" % (name, st["checkpoint"]))
    q.note("%s: %d saves failed, 1 log line, %d readings scored" %
           (name, st["checkpoint"]["failed"], st["groups"]["skid"]["readings"]))
    rc, _ = d.stop()
    q.check(rc == 0, "%s: stop %d" % (name, rc))
    q.check("final checkpoint failed" in d.logtext(), "%s: final failure not logged" % name)


# 1. SIGHUP with a broken file
os.makedirs(os.path.join(tmp, "hup_state"))
d, pub = start("hup", os.path.join(tmp, "hup_state"))
keeps_scoring(d, pub, 0, 300)
good = open(d.path).read()
d.write(good.replace("half_life = 2000", "half_life = 2000 readings please"))
d.proc.send_signal(signal.SIGHUP)
end = q.time.monotonic() + q.WAIT
while d.status()["reload_failures"] < 1 and q.time.monotonic() < end:
    q.time.sleep(0.05)
st = keeps_scoring(d, pub, 300, 600)
q.check(st["reload_failures"] == 1 and st["reloads"] == 0, "reload counters %r" % st)
q.check("half_life" in d.logtext() and d.path in d.logtext(), "broken file not named")
d.stop()

# 2. the state dir is a regular file
plain = os.path.join(tmp, "not_a_dir")
open(plain, "w").write("a file, not a directory\n")
unwritable("plainfile", plain, "Not a directory")

# 3. read-only mount (or a file-size limit of 0 bytes)
ro = os.path.join(tmp, "ro_state")
if mount_tmpfs(ro, "ro,size=64k"):
    unwritable("readonly", ro, "Read-only file system")
else:
    os.makedirs(ro, exist_ok=True)
    unwritable("fsize0", ro, "File too large", fsize=1)

# 4. disk full, then space again
full = os.path.join(tmp, "full_state")
mounted = mount_tmpfs(full, "size=64k")
if not mounted:
    os.makedirs(full, exist_ok=True)
d, pub = start("full", full)
keeps_scoring(d, pub, 0, 400)
wait_ckpt(d, "saved", 2)
path = os.path.join(full, "skid.qwstate")
before = open(path, "rb").read()
filler = os.path.join(full, "filler")
if mounted:
    fd = os.open(filler, os.O_WRONLY | os.O_CREAT, 0o600)
    try:                                     # fill the tmpfs to the brim
        while os.write(fd, b"\0" * 4096) > 0:
            pass
    except OSError:
        pass
    os.close(fd)
    why = "No space left on device"
else:
    d.stop()                                 # restart under a size limit
    d, pub = start("full2", full, fsize=len(before) - 1)
    why = "File too large"
st0 = d.status()["checkpoint"]
wait_ckpt(d, "failed", st0["failed"] + 5)
st = keeps_scoring(d, pub, 400, 800)
now = open(path, "rb").read()
q.check(now[48:-4] == before[48:-4] and zlib.crc32(now[:-4]) ==
        int.from_bytes(now[-4:], "little"),
        "a failed save damaged the previous checkpoint")
q.check(not os.path.exists(path + ".tmp"), "temporary left on a full disk")
q.check(why in d.logtext(), "full disk not logged: %s" % d.logtext()[-400:])
if mounted:
    os.unlink(filler)                        # space again: saves resume
    saved = st["checkpoint"]["saved"]
    wait_ckpt(d, "saved", saved + 2)
    q.note("disk full: %d saves failed, then saving resumed" %
           d.status()["checkpoint"]["failed"])
rc, _ = d.stop()
q.check(rc == 0, "stop %d" % rc)
print("ok")
