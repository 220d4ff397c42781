"""End-to-end: checkpoints survive kill -9.

Daemon A runs uninterrupted.  After N1 readings its timer checkpoint is
copied to a second state directory, and daemon B starts from it (restored
counters and model).  B takes part of the following stream and is killed
with SIGKILL while readings are still arriving; its last timer checkpoint
(taken mid-stream) must load, and B restarted from it must then score the
rest of the stream exactly as A does: the same alerts (event, time) with
scores equal to 1e-12 relative, the same counters, and, after `ctl save`,
the same state bytes.  The checkpoint file is also checked against an
independent reader (Python struct + zlib.crc32).  Then: a corrupt file is
refused with a clear log line, set aside as NAME.rejected-EPOCH, and the
group starts fresh; a graceful stop writes a final checkpoint."""
import glob
import os
import shutil
import signal
import struct
import zlib
import qwtest as q

q.need_program()

N1 = 1200                 # readings before the copied checkpoint
NR = 1400                 # readings after it
KILL_AFTER = 700          # readings of the rest sent to B before SIGKILL
SCORE_RTOL = 1e-12        # the bound
EVERY = "0.2s"            # checkpoint interval of the test daemons
FAULTS = [(1450, 1470), (1700, 1712), (2000, 2030), (2300, 2320), (2500, 2515)]

t, x = q.skid_readings(N1 + NR, seed=5150)
for a, b in FAULTS:     # flow mirrored about its mean: in range, wrong sign
    x[a:b, 2] = 2 * q.SKID_MEAN[2] - x[a:b, 2]

tmp = q.tmpdir()


def parse_ckpt(path):
    """Independent reader of the checkpoint layout (src/io/checkpoint.c)."""
    with open(path, "rb") as f:
        b = f.read()
    q.check(b[:8] == b"QWST\r\n\x1a\n", "%s: magic %r" % (path, b[:8]))
    ver, order, fp, p, nlen, saved, slen = struct.unpack_from("<IIQIIqQ", b, 8)
    # version 2: the state carries whitening, MEWMA and the fixed flag
    q.check(ver == 2 and len(b) == 48 + nlen + slen + 4,
            "%s: version %d, %d bytes for %d+%d" % (path, ver, len(b), nlen, slen))
    crc, = struct.unpack_from("<I", b, len(b) - 4)
    q.check(zlib.crc32(b[:-4]) == crc, "%s: CRC differs from zlib's" % path)
    name = b[48:48 + nlen].decode()
    state = b[48 + nlen:48 + nlen + slen]
    readings, = struct.unpack_from("=Q", state, 8)  # counters after p
    return {"p": p, "name": name, "fp": fp, "state": state,
            "readings": readings, "saved": saved}


def config(tmp_d, state_dir, pub):
    return q.ini(tmp_d, {"skid": q.skid_group()}, [">" + pub.endpoint],
                 extra="\n[state]\ndir = %s\nevery = %s\n" % (state_dir, EVERY))


def wait_saves(d, n_more):
    """Waits until n_more checkpoints were written after now."""
    s0 = d.status()["checkpoint"]["saved"]
    end = q.time.monotonic() + q.WAIT
    while q.time.monotonic() < end:
        if d.status()["checkpoint"]["saved"] >= s0 + n_more:
            return
        q.time.sleep(0.05)
    q.fail("no checkpoint written within %.0f s" % q.WAIT)


def daemon(name, state_dir):
    d_tmp = os.path.join(tmp, name)
    os.makedirs(d_tmp)
    pub = q.Publisher()
    d = q.Daemon(d_tmp, config(d_tmp, state_dir, pub), name)
    pub.wait_sub("skid")
    sub = q.AlertSub(d.alerts)
    sub.ready()
    return d, pub, sub


SA = os.path.join(tmp, "state_a")
SB = os.path.join(tmp, "state_b")
os.makedirs(SA)
os.makedirs(SB)

# 1. A learns N1 readings; its checkpoint (written after them) goes to SB.
A, pubA, subA = daemon("a", SA)
q.check(A.status()["checkpoint"]["restored"] == 0, "A restored from nothing?")
q.send_stream(pubA, "skid", t[:N1], x[:N1], "binary")
A.wait_readings("skid", N1)
wait_saves(A, 2)
shutil.copy(os.path.join(SA, "skid.qwstate"), os.path.join(SB, "skid.qwstate"))
ck = parse_ckpt(os.path.join(SB, "skid.qwstate"))
q.check(ck["name"] == "skid" and ck["p"] == 4 and ck["readings"] == N1,
        "copied checkpoint: %r" % {k: ck[k] for k in ("name", "p", "readings")})

# 2. B starts from it, takes part of the rest, and is killed mid-stream.
B, pubB, subB = daemon("b", SB)
st = B.status()
q.check(st["checkpoint"]["restored"] == 1 and st["groups"]["skid"]["readings"] == N1
        and st["groups"]["skid"]["model_age"] == N1, "B not restored: %r" % st)
q.check("restored 1200 readings" in B.logtext(), "no restore line in B's log")
for a in range(N1, N1 + KILL_AFTER, 20):
    q.time.sleep(0.02)      # ~0.7 s of streaming: several timer checkpoints
    pubB.send("skid", q.binary(t[a:a + 20], x[a:a + 20], a))
B.proc.send_signal(signal.SIGKILL)  # the last batch may still be in flight
B.proc.wait()
subB.close()
ck = parse_ckpt(os.path.join(SB, "skid.qwstate"))
m = ck["readings"]
q.note("B killed after %d readings sent; its last checkpoint holds %d "
       "(%d lost, taken after it)" % (N1 + KILL_AFTER, m, N1 + KILL_AFTER - m))
q.check(N1 < m <= N1 + KILL_AFTER,
        "no mid-stream checkpoint: %d readings in it" % m)
q.check(not glob.glob(os.path.join(SB, "*.tmp")), "temporary left behind")

# 3. B restarts from that checkpoint; A and B take the rest.
B2, pubB2, subB2 = daemon("b2", SB)
st = B2.status()
q.check(st["checkpoint"]["restored"] == 1 and st["groups"]["skid"]["readings"] == m,
        "B2 did not restore the mid-stream checkpoint: %r" % st)
q.send_stream(pubA, "skid", t[N1:], x[N1:], "binary", seq0=N1)
q.send_stream(pubB2, "skid", t[m:], x[m:], "binary", seq0=m)
stA = A.wait_readings("skid", N1 + NR)
stB = B2.wait_readings("skid", N1 + NR)
subA.pump(0.5)
subB2.pump(0.5)
alA = [a for a in subA.alerts if a["time"] >= t[m] - 1e-6]
alB = subB2.alerts
q.note("alerts after reading %d: A %d, B %d; A %d in all" %
       (m, len(alA), len(alB), len(subA.alerts)))
q.check(sum(1 for a in alA if a["event"] == "raise") >= 3,
        "too few alarms to compare: %r" % [(a["event"], a["time"]) for a in alA])
q.check(len(alA) == len(alB), "alert counts differ: %d vs %d" % (len(alA), len(alB)))
worst = 0.0
for a, b in zip(alA, alB):
    q.check(a["event"] == b["event"] and a["time"] == b["time"],
            "alert differs: %r vs %r" % (a, b))
    for key in ("score", "limit"):
        if a[key] is None or b[key] is None:
            q.check(a[key] == b[key], "%s: %r vs %r" % (key, a[key], b[key]))
            continue
        rel = abs(a[key] - b[key]) / max(abs(a[key]), abs(b[key]), 1e-300)
        worst = max(worst, rel)
        q.check(rel <= SCORE_RTOL, "%s %r vs %r (rel %.3g)" % (key, a[key], b[key], rel))
q.note("worst relative difference of alert scores and limits: %.3g" % worst)
gA, gB = stA["groups"]["skid"], stB["groups"]["skid"]
for key in ("readings", "scored", "learned", "alarms", "exceedances", "model_age",
            "in_alarm", "limit"):
    q.check(gA[key] == gB[key], "%s: A %r, B %r" % (key, gA[key], gB[key]))

# 4. the whole state, byte for byte, after `ctl save`
q.check(A.ctl("save")["ok"] is True and B2.ctl("save")["ok"] is True, "ctl save")
sa = parse_ckpt(os.path.join(SA, "skid.qwstate"))
sb = parse_ckpt(os.path.join(SB, "skid.qwstate"))
q.check(sa["state"] == sb["state"] and sa["fp"] == sb["fp"],
        "state after the same readings differs (%d bytes)" % len(sa["state"]))
q.note("state of %d bytes identical after kill -9 and restore" % len(sa["state"]))

# 5. graceful stop writes a final checkpoint
before = os.stat(os.path.join(SB, "skid.qwstate")).st_mtime_ns
q.time.sleep(0.01)
rc, secs = B2.stop()
q.check(rc == 0, "B2 stop: %d" % rc)
q.check(os.stat(os.path.join(SB, "skid.qwstate")).st_mtime_ns > before,
        "no checkpoint on graceful stop")
q.check("checkpoints written to" in B2.logtext(), "stop not logged")

# 6. a corrupt checkpoint: refused, logged, set aside, the group starts fresh
path = os.path.join(SB, "skid.qwstate")
with open(path, "r+b") as f:
    f.seek(300)
    byte = f.read(1)
    f.seek(300)
    f.write(bytes([byte[0] ^ 0x10]))
B3, pubB3, subB3 = daemon("b3", SB)
st = B3.status()
log = B3.logtext()
q.check(st["checkpoint"]["refused"] == 1 and st["checkpoint"]["restored"] == 0
        and st["groups"]["skid"]["readings"] == 0, "corrupt file not refused: %r" % st)
q.check("checksum" in log and "refused" in log and "rejected-" in log
        and "learning from nothing" in log, "refusal not logged clearly: %s" % log)
aside = glob.glob(path + ".rejected-*")
q.check(len(aside) == 1, "not set aside: %r" % aside)
q.send_stream(pubB3, "skid", t[:50], x[:50], "binary")
B3.wait_readings("skid", 50)
q.check(B3.ctl("save")["ok"] is True and parse_ckpt(path)["readings"] == 50,
        "fresh checkpoint after a refusal")

# 7. a checkpoint for other channels (config changed): refused as mismatched
B3.stop()
d4 = os.path.join(tmp, "b4")
os.makedirs(d4)
pub4 = q.Publisher()
text = q.ini(d4, {"skid": q.skid_group(channels=q.SKID[:3], floor=[0.01] * 3)},
             [">" + pub4.endpoint],
             extra="\n[state]\ndir = %s\nevery = %s\n" % (SB, EVERY))
B4 = q.Daemon(d4, text, "b4")
st = B4.status()
q.check(st["checkpoint"]["refused"] == 1 and "another configuration" in B4.logtext(),
        "mismatched checkpoint not refused: %r" % st["checkpoint"])
B4.stop()
A.stop()
print("ok")
