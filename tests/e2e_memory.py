"""End-to-end 6: memory stays flat.  10^6 readings (binary batches of 64)
through the daemon, with status requests and stats messages along the way;
VmRSS may grow by less than 1 MiB after the warm-up, and every reading
must arrive (no loss)."""
import os
import struct
import numpy as np
import qwtest as q

q.need_program()
BATCH = 64
CHUNK = 32 * BATCH  # readings sent before waiting for the daemon: keeps
                    # libzmq's queue (and so the heap) at a bounded backlog,
                    # 32 messages of 8.7 kB: the heap's high water after the
                    # warm-up may still rise by one backlog (freed messages
                    # stay resident), 0.28 MB, well under GROWTH_MAX (at
                    # 256 messages, 2.2 MB, a slow spell failed the bound)
TOTAL = int(os.environ.get("QW_MEM_BATCHES", "15625")) * BATCH  # 10^6
WARM = 80 * CHUNK  # 163840 readings of 10^6; warm-up ~16%
POLL = 0.002  # s between status requests while waiting for a chunk
GROWTH_MAX = 1024  # KiB: the bound
P = len(q.SKID)

rec = np.dtype([("t", "<i8"), ("x", "<f8", (P,))])
POOL = 97  # distinct payloads, cycled (prime: no alignment with batches)
t, x = q.skid_readings(POOL * BATCH, seed=5772)
bodies = []
for k in range(POOL):
    r = np.empty(BATCH, dtype=rec)
    r["t"] = (t[k * BATCH:(k + 1) * BATCH] * 1e9).astype(np.int64)
    r["x"] = x[k * BATCH:(k + 1) * BATCH]
    bodies.append(r.tobytes())

tmp = q.tmpdir()
pub = q.Publisher()
d = q.Daemon(tmp, q.ini(tmp, {"skid": q.skid_group()}, [">" + pub.endpoint],
                        stats_every="0.05s"))
pub.wait_sub("skid")
sub = q.AlertSub(d.alerts)  # a live subscriber: stats are really sent
sub.ready()


def send(first, n):
    for k in range(first // BATCH, (first + n) // BATCH):
        hdr = struct.pack("<4sIIIQ", b"QWB1", P, BATCH, 0, k * BATCH)
        pub.send("skid", hdr + bodies[k % POOL])
        if k % 500 == 0:
            sub.pump(0)


done, rss0 = 0, None
while done < TOTAL:
    if done == WARM:
        rss0 = d.rss_kib()
    n = min(CHUNK, TOTAL - done)
    send(done, n)
    done += n
    d.wait_readings("skid", done, timeout=60, poll=POLL)
    sub.pump(0)
    if os.environ.get("QW_MEM_TRACE"):
        q.note("%d %d" % (done, d.rss_kib()))
# The stats path must have run many times too (every 0.05 s), however fast
# the readings went through: wait for it before the last measurement.
end = q.time.monotonic() + 5.0
while d.status()["stats_sent"] <= 10 and q.time.monotonic() < end:
    sub.pump(0)
    q.time.sleep(0.05)
st = d.status()
rss1 = d.rss_kib()
g = st["groups"]["skid"]
q.note("VmRSS %d KiB after %d readings, %d KiB after %d: growth %d KiB; "
       "%d stats messages" % (rss0, WARM, rss1, TOTAL, rss1 - rss0, st["stats_sent"]))
q.check(g["readings"] == TOTAL and g["lost"] == 0 and g["gaps"] == 0,
        "readings %d lost %d" % (g["readings"], g["lost"]))
q.check(st["stats_sent"] > 10, "stats not exercised")
if os.environ.get("QW_SANITIZED"):
    # AddressSanitizer's quarantine holds freed memory back on purpose, so
    # RSS says nothing about leaks there (LeakSanitizer checks at exit).
    q.note("sanitized build: RSS growth reported, not bounded")
else:
    q.check(rss1 - rss0 < GROWTH_MAX, "RSS grew by %d KiB" % (rss1 - rss0))
rc, secs = d.stop()
q.check(rc == 0, "exit %d" % rc)
print("ok")
