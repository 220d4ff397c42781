"""End-to-end 2: the same readings as binary batches, text lines and JSON
objects give the same alerts (events, times, scores, ranked channels)."""
import math
import qwtest as q

q.need_program()
N, FAULT = 1300, (1000, 1040)
t, x = q.skid_readings(N, seed=4711, fault=FAULT)
REL = 1e-9  # scores: same doubles in, same arithmetic; text carries 17 digits


def close(a, b, rel):
    if a is None or b is None:
        return a is b
    return math.isclose(a, b, rel_tol=rel, abs_tol=1e-12)


runs = {}
for fmt in ("binary", "text", "json"):
    alerts, st, d = q.run_stream(q.tmpdir(), fmt, fmt, t, x)
    d.stop()
    g = st["groups"]["skid"]
    q.check(g["readings"] == N, "%s: %d readings" % (fmt, g["readings"]))
    q.check(sum(g["rejected"].values()) == 0, "%s: rejections %r" %
            (fmt, g["rejected"]))
    runs[fmt] = alerts
    q.note("%s: %s" % (fmt, [(a["event"], round(a["score"], 3)) for a in alerts]))

ref = runs["binary"]
q.check(len(ref) >= 2 and ref[0]["event"] == "raise", "binary run: %r" % ref)
for fmt in ("text", "json"):
    got = runs[fmt]
    q.check(len(got) == len(ref), "%s: %d alerts, binary %d" %
            (fmt, len(got), len(ref)))
    for a, b in zip(ref, got):
        q.check(a["event"] == b["event"], "%s: event %s vs %s" %
                (fmt, b["event"], a["event"]))
        q.check(abs(a["time"] - b["time"]) < 1e-6, "%s: time" % fmt)
        for k in ("score", "limit", "pvalue"):
            q.check(close(a[k], b[k], REL), "%s: %s %r vs %r" %
                    (fmt, k, b[k], a[k]))
        q.check([c["name"] for c in a["channels"]] ==
                [c["name"] for c in b["channels"]], "%s: channel order" % fmt)
        for ca, cb in zip(a["channels"], b["channels"]):
            q.check(close(ca["drop"], cb["drop"], REL), "%s: drop" % fmt)
print("ok")
