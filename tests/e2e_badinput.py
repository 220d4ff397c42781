"""End-to-end 3: table-driven bad input.  Daemon A takes a warm-up stream,
then every class of bad message, then a probe (a fault and recovery);
daemon B takes the same warm-up and probe without the bad input.  A must
stay up, count each bad message under its cause, learn nothing from them,
and raise exactly the alerts B raises, with the same scores."""
import struct
import qwtest as q

q.need_program()
P = len(q.SKID)
WARM, PROBE_FAULT = 800, (800, 830)
t, x = q.skid_readings(1100, seed=3141, fault=PROBE_FAULT)
T0 = repr(float(t[WARM - 1]))


def hdr(p, n, flags=0, seq=WARM):
    return struct.pack("<4sIIIQ", b"QWB1", p, n, flags, seq)


rec = struct.pack("<q", 1700000000 * 10**9) + struct.pack("<4d", 6.85, 12.4, 38.5, 21.3)
good_bin = hdr(P, 1) + rec
big_n = (10 * 10**6 - 24) // len(rec)
ten_mb = hdr(P, big_n) + rec * big_n

# (what, frames, group or None, cause)
S = "skid"
BAD = [
    ("prefix-matching unknown topic", [b"skidx", good_bin], None, "unknown_topic"),
    ("topic over 255 bytes", [b"skid" + b"y" * 300, good_bin], None, "unknown_topic"),
    ("binary p=3", [S, hdr(3, 1) + rec[:8 + 24]], S, "wrong_count"),
    ("text with 3 values", [S, (T0 + ",6.85,12.4,38.5").encode()], S, "wrong_count"),
    ("json with 5 values", [S, b'{"t": 1.7e9, "v": [1,2,3,4,5]}'], S, "wrong_count"),
    ("binary p and n 2^32-1 (size overflows)", [S, hdr(0xFFFFFFFF, 0xFFFFFFFF)], S, "wrong_count"),
    ("binary header cut", [S, good_bin[:13]], S, "truncated"),
    ("binary n=2 with 1 record", [S, hdr(P, 2) + rec], S, "truncated"),
    ("binary n=2^32-1 (count overflows any frame)", [S, hdr(P, 0xFFFFFFFF) + rec], S, "truncated"),
    ("text with a word", [S, (T0 + ",6.85,abc,38.5,21.3").encode()], S, "bad_number"),
    ("json with a string", [S, b'{"t": 1.7e9, "v": [6.85, "x", 38.5, 21.3]}'], S, "bad_number"),
    ("text with inf", [S, (T0 + ",6.85,inf,38.5,21.3").encode()], S, "nonfinite"),
    ("binary with -inf", [S, hdr(P, 1) + rec[:8] + struct.pack("<4d", 6.85, float("-inf"), 38.5, 21.3)], S, "nonfinite"),
    ("10 MB frame", [S, ten_mb], S, "oversize"),
    ("empty frame", [S, b""], S, "malformed"),
    ("topic only", [S], S, "malformed"),
    ("three frames", [S, good_bin, b"extra"], S, "malformed"),
    ("binary flags 1", [S, hdr(P, 1, flags=1) + rec], S, "malformed"),
    ("binary trailing bytes", [S, good_bin + b"\0"], S, "malformed"),
    ("json cut", [S, b'{"t": 1.7e9, "v": [6.85, 12.4'], S, "malformed"),
    ("all channels missing (text)", [S, (T0 + ",,,,").encode()], S, "empty"),
    ("all channels missing (json)", [S, b'{"t": 1.7e9, "v": [null, null, null, null]}'], S, "empty"),
    ("values whose square overflows", [S, (T0 + ",1e200,-1e200,1e200,1e200").encode()], S, "overflow"),
    ("tower: t=100", ["tower", b"100.0,21.5,24.0,3.2"], None, None),
    ("tower: t=101", ["tower", b"101.0,21.6,24.1,3.1"], None, None),
    ("tower: time goes back", ["tower", b"50.0,21.6,24.1,3.1"], "tower", "time"),
]


def config(tmp, pub):
    return q.ini(tmp, {"skid": q.skid_group(),
                       "tower": {"channels": ["basin_t", "leaving_t", "fan_kw"],
                                 "half_life": "60s"}},
                 [">" + pub.endpoint])


def start(name):
    tmp = q.tmpdir()
    pub = q.Publisher()
    d = q.Daemon(tmp, config(tmp, pub), name)
    pub.wait_sub("skid")
    pub.wait_sub("tower")
    sub = q.AlertSub(d.alerts)
    sub.ready()
    q.send_stream(pub, "skid", t[:WARM], x[:WARM], "binary")
    return d, pub, sub, d.wait_readings("skid", WARM)


def probe(d, pub, sub, offered):
    q.send_stream(pub, "skid", t[WARM:], x[WARM:], "binary", seq0=WARM)
    st = d.wait_readings("skid", offered + len(t) - WARM)
    sub.pump(0.3)
    return st, sub.alerts


a, apub, asub, a_warm = start("dirty")
b, bpub, bsub, b_warm = start("clean")
for what, frames, grp, cause in BAD:
    apub.send_frames([f.encode() if isinstance(f, str) else f for f in frames])
expect = {}
for what, frames, grp, cause in BAD:
    if cause is not None:
        expect[(grp, cause)] = expect.get((grp, cause), 0) + 1
n_msgs = len(BAD)
end = q.time.monotonic() + q.WAIT
while q.time.monotonic() < end:
    st = a.status()
    if st["received"] >= a_warm["received"] + n_msgs:
        break
    q.time.sleep(0.05)
q.check(a.alive(), "daemon died on bad input")
q.check(st["received"] == a_warm["received"] + n_msgs,
        "received %d, want %d" % (st["received"], a_warm["received"] + n_msgs))
for (grp, cause), n in sorted(expect.items(), key=str):
    got = (st["rejected"][cause] if grp is None
           else st["groups"][grp]["rejected"][cause])
    q.check(got == n, "%s/%s: %d counted, want %d (%s)" %
            (grp, cause, got, n, [w for w, _, g, c in BAD if c == cause]))
    q.note("%-6s %-13s %d" % (grp or "daemon", cause, got))
for cause, n in st["rejected"].items():
    want = sum(v for (g, c), v in expect.items() if c == cause)
    q.check(n == want, "daemon-wide %s: %d, want %d" % (cause, n, want))
ga, gw = st["groups"]["skid"], a_warm["groups"]["skid"]
core_rej = sum(v for (g, c), v in expect.items()
               if g == "skid" and c in ("empty", "overflow"))
q.check(ga["learned"] == gw["learned"] and ga["model_age"] == gw["model_age"]
        and ga["scored"] == gw["scored"] and ga["alarms"] == 0,
        "bad input changed the model: %r vs %r" % (ga, gw))
q.check(ga["readings"] == gw["readings"] + core_rej,
        "readings offered %d, want %d" % (ga["readings"], gw["readings"] + core_rej))
q.check(ga["lost"] == 0 and ga["gaps"] == 0, "bad frames counted as loss")

sa, alerts_a = probe(a, apub, asub, WARM + core_rej)
sb, alerts_b = probe(b, bpub, bsub, WARM)
q.note("dirty: %s" % [(e["event"], e["score"]) for e in alerts_a])
q.note("clean: %s" % [(e["event"], e["score"]) for e in alerts_b])
q.check(len(alerts_b) >= 2 and alerts_b[0]["event"] == "raise",
        "the clean run must raise: %r" % alerts_b)
q.check([(e["event"], e["time"], e["score"], e["limit"]) for e in alerts_a] ==
        [(e["event"], e["time"], e["score"], e["limit"]) for e in alerts_b],
        "bad input changed the alerts")
q.check(sa["groups"]["skid"]["learned"] == sb["groups"]["skid"]["learned"],
        "learned differs after the probe")
q.check(sa["groups"]["skid"]["lost"] == 0, "probe counted as lost")
for d in (a, b):
    rc, secs = d.stop()
    q.check(rc == 0, "exit %d" % rc)
print("ok")
