"""End-to-end 1: in-control correlated readings (binary batches) until warm,
then a fault that breaks flow's relation with the load; the subscriber must
get a raise naming flow first, then a clear once the fault ends.  Also:
SIGTERM stops the daemon with exit 0 within a second."""
import qwtest as q

q.need_program()
N, FAULT = 1400, (1000, 1040)
t, x = q.skid_readings(N, seed=2385, fault=FAULT)
lo, hi = x[FAULT[0]:FAULT[1], 2].min(), x[:FAULT[0], 2].max()
q.check(lo >= x[:FAULT[0], 2].min() and
        x[FAULT[0]:FAULT[1], 2].max() <= hi,
        "the fault must stay inside flow's usual range")

alerts, st, d = q.run_stream(q.tmpdir(), "e2e", "binary", t, x)
ev = [(a["event"], a["channels"][0]["name"] if a["channels"] else "")
      for a in alerts]
q.note("alerts: %s" % ev)
g = st["groups"]["skid"]
q.check(g["readings"] == N and g["lost"] == 0 and g["gaps"] == 0,
        "readings/lost: %r" % g)
q.check(len(alerts) >= 2, "want raise and clear, got %r" % ev)
first = alerts[0]
q.check(first["event"] == "raise", "first alert %r" % first["event"])
q.check(first["channels"][0]["name"] == "flow",
        "top channel %r, want flow" % first["channels"][0]["name"])
q.check(first["score"] > first["limit"], "raise under its limit")
q.check(0 <= first["pvalue"] < 1e-6, "pvalue %r" % first["pvalue"])
q.check(first["dof"] == 4, "dof %r" % first["dof"])
t_raise = first["time"]
q.check(t[FAULT[0]] - 1e-6 <= t_raise < t[FAULT[1]],
        "raise at %.1f outside the fault" % t_raise)
last = alerts[-1]
q.check(last["event"] == "clear" and last["time"] >= t[FAULT[1]],
        "last alert %r" % (last,))
q.check(not g["in_alarm"], "still in alarm")
q.check(all(a["time"] < t[FAULT[1]] + 2.0 for a in alerts),
        "an alert long after the fault ended")
q.check(st["alarms"] == g["alarms"] >= 1, "alarms counters %r" % st["alarms"])
rc, secs = d.stop()
q.note("SIGTERM: exit %d after %.3f s" % (rc, secs))
q.check(rc == 0 and secs < q.STOP_WITHIN, "stop: exit %d in %.2f s" % (rc, secs))
print("ok")
