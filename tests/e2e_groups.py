"""1200 groups behind one daemon: the topic lookup finds every one.

The daemon runs 1200 groups (p = 2; more than 1000, where libzmq's
default send HWM used to drop the daemon's later subscriptions); group i is sent (i mod 7) + 1
readings in one binary batch, in a shuffled order of groups, plus
messages on topics that are no group: "g0999x" (which the subscription
to "g0999" lets through, ZeroMQ matching prefixes) and "g9999" (which no
subscription lets through).  Its status must show every group with
exactly its own count (a lookup that confused two groups, or missed one,
gives a wrong count somewhere) and the one unknown topic that arrived
counted, not played."""
import random

import numpy as np

import qwtest as q

q.need_program()
tmp = q.tmpdir()
N = 1200
names = ["g%04d" % i for i in range(N)]
pub = q.Publisher()
# one subscription message per group: more than the default receive HWM
# (1000), which applies to the daemon's pipe, created after this
pub.sock.setsockopt(q.zmq.RCVHWM, 0)
groups = {nm: {"channels": ["a", "b"], "warmup": 5, "half_life": 50}
          for nm in names}
d = q.Daemon(tmp, q.ini(tmp, groups, [">" + pub.endpoint], stats_every="0"))
seen = set()
while len(seen) < N:
    q.check(pub.sock.poll(int(q.WAIT * 1000)), "subscriptions: %d of %d"
            % (len(seen), N))
    m = pub.sock.recv()
    if m[:1] == b"\x01":
        seen.add(m[1:].decode())
q.check(seen == set(names), "subscribed to %r" % sorted(seen - set(names)))

rng = random.Random(2385)
order = list(range(N))
rng.shuffle(order)
total = 0
for i in order:
    n = i % 7 + 1
    t = 1.7e9 + 0.1 * np.arange(n)
    x = np.column_stack([np.full(n, 2.385 + i), np.full(n, -1.5)]) + \
        0.01 * np.arange(n)[:, None]
    pub.send(names[i], q.binary(t, x, 0))
    total += n
pub.send("g0999x", q.binary(np.array([1.7e9]), np.array([[1.0, 2.0]]), 0))
pub.send("g9999", q.binary(np.array([1.7e9]), np.array([[1.0, 2.0]]), 0))
st = d.wait_readings(names[order[-1]], order[-1] % 7 + 1)
end = q.time.monotonic() + q.WAIT
while q.time.monotonic() < end:
    st = d.status()
    got = sum(st["groups"][nm]["readings"] for nm in names)
    if got >= total and st["rejected"]["unknown_topic"] >= 1:
        break
    q.time.sleep(0.1)
wrong = [nm for i, nm in enumerate(names)
         if st["groups"][nm]["readings"] != i % 7 + 1]
q.check(len(st["groups"]) == N, "status lists %d groups" % len(st["groups"]))
q.check(not wrong, "%d groups with a wrong count, first %s: %d"
        % (len(wrong), wrong[:1], st["groups"][wrong[0]]["readings"]
           if wrong else 0))
q.check(st["rejected"]["unknown_topic"] == 1, "unknown topics: %r"
        % st["rejected"])
q.check(st["readings"] == total if "readings" in st else True,
        "daemon readings %r, sent %d" % (st.get("readings"), total))
q.note("%d groups: every group got its own count, %d readings in all"
       % (N, total))
