"""e2e_mqtt.py: `quadwatch run` with an MQTT input beside a ZeroMQ one.

A real mosquitto broker on a free loopback port (tests/qwmqtt.py).  The
daemon has two groups with the same settings: `skid` fed over MQTT
(topic plant/skid/readings, QoS 1) and `twin` fed the identical payloads
over ZeroMQ.  Checked:
  1. the three payload formats (text, JSON, binary QWB1) decode over MQTT,
     and the MQTT-fed group gives exactly the alerts of the ZeroMQ-fed one
     (same readings, same model: the two paths must not differ);
  2. a fault raises an alert, published on the ZeroMQ alert socket and on
     MQTT (plant/skid/alerts), the two copies identical;
  3. malformed payloads and an unknown group are counted by cause, and
     nothing else changes: the model of skid, the other group;
  4. the broker stopped and started again: the loss and the reconnect are
     counted, and readings flow again;
  5. a reload with the same MQTT settings keeps the session; a changed
     setting (qos) makes a new connection, counters and models kept;
  6. ZeroMQ inputs with alerts published on MQTT too ([mqtt] alerts alone);
  7. with no broker at all, attempts back off (doubling), the daemon runs.
Run with /usr/bin/python3."""

import json
import time

import qwtest as qt
import qwmqtt as qm

N = 1400                 # readings per group
FAULT = (1000, 1100)     # readings with the broken flow/load relation
BATCH = 64               # readings per binary message


def payloads(t, x):
    """The stream as messages: 32 text, 32 JSON, then binary batches."""
    out = []
    for i in range(32):
        out.append(qt.text(t[i], x[i]))
    for i in range(32, 64):
        out.append(qt.jsonmsg(t[i], x[i]))
    for a in range(64, len(t), BATCH):
        b = min(len(t), a + BATCH)
        out.append(qt.binary(t[a:b], x[a:b], a))
    return out


def strip(alerts, group):
    out = []
    for a in alerts:
        if a["group"] == group:
            b = dict(a)
            del b["group"]
            out.append(b)
    return out


def main():
    qt.need_program()
    tmp = qt.tmpdir()
    broker = qm.Broker(tmp)
    pub = qt.Publisher()
    mqtt_in = "mqtt://127.0.0.1:%d/plant/+/readings" % broker.port
    d = qt.Daemon(tmp, qt.ini(tmp, {"skid": qt.skid_group(),
                                    "twin": qt.skid_group()},
                              [">" + pub.endpoint, mqtt_in],
                              extra=qm.mqtt_section(broker.port)))
    r = qt.subprocess.run([qt.QW, "check", "-c", d.path],
                          capture_output=True, text=True)
    qt.check(r.returncode == 0 and ("input:                     %s\n" %
                                     mqtt_in) in r.stdout and
             "mqtt_alerts:               mqtt://127.0.0.1:%d/plant/+/alerts"
             % broker.port in r.stdout and "qos 1" in r.stdout,
             "check does not show the MQTT settings:\n" + r.stdout)
    qm.wait_mqtt(d, lambda m: m["connected"] and m["subscribed"] == 1,
                 "first connection")
    pub.wait_sub("twin")
    zsub = qt.AlertSub(d.alerts)
    zsub.ready()
    watch = qm.Client(broker.port)
    watch.subscribe("plant/+/alerts")
    cl = qm.Client(broker.port)

    # 1, 2: the same stream on both paths
    t, x = qt.skid_readings(N, seed=20261202, fault=FAULT)
    msgs = payloads(t, x)
    cl.publish_all([("plant/skid/readings", p) for p in msgs])
    for p in msgs:
        pub.send("twin", p)
    d.wait_readings("skid", N)
    st = d.wait_readings("twin", N)
    zsub.pump(0.5)
    got_skid = strip(zsub.alerts, "skid")
    got_twin = strip(zsub.alerts, "twin")
    qt.check(len(got_skid) >= 1 and got_skid[0]["event"] == "raise",
             "no raise for the fault over MQTT: %r" % got_skid)
    first = got_skid[0]["time"]
    qt.check(t[FAULT[0]] <= first <= t[FAULT[1] - 1],
             "raise at %.1f, outside the fault" % first)
    qt.check(got_skid == got_twin,
             "MQTT and ZeroMQ paths disagree:\n%r\n%r" % (got_skid, got_twin))
    m = st["mqtt"]
    qt.check(m["received"] == len(msgs) and m["decoded"] == len(msgs),
             "mqtt counted %d received, %d decoded of %d" %
             (m["received"], m["decoded"], len(msgs)))
    qt.check(st["groups"]["skid"]["received"] == len(msgs),
             "skid received %d" % st["groups"]["skid"]["received"])
    out = watch.wait_messages(len(zsub.alerts))
    on_mqtt = [(tp, json.loads(p)) for tp, p in out]
    qt.check([a for tp, a in on_mqtt] == zsub.alerts,
             "MQTT alert copies differ: %r vs %r" % (on_mqtt, zsub.alerts))
    qt.check(all(tp == "plant/%s/alerts" % a["group"] for tp, a in on_mqtt),
             "alert topics: %r" % [tp for tp, a in on_mqtt])
    qt.check(m["alerts_sent"] == len(zsub.alerts),
             "mqtt alerts_sent %d" % m["alerts_sent"])
    qt.note("mqtt: %d messages, %d readings; %d alerts on both buses, "
            "identical to the ZeroMQ-fed twin" % (len(msgs), N,
                                                 len(zsub.alerts)))

    # 3: malformed payloads, a wrong count, an unknown group
    before = d.status()
    bad = [("plant/skid/readings", b"1.7e9,abc,12.4,38.5,21.3"),
           ("plant/skid/readings", b'{"t": 1.7e9, "v": [1, 2]}'),
           ("plant/skid/readings", b""),
           ("plant/nosuch/readings", qt.text(t[0], x[0]))]
    cl.publish_all(bad)
    after = qm.wait_mqtt(d, lambda m: m["received"] == len(msgs) + len(bad),
                         "malformed messages counted")
    rej = after["mqtt"]["rejected"]
    qt.check(rej["bad_number"] == 1 and rej["malformed"] == 1 and
             rej["wrong_count"] == 1 and rej["unknown_topic"] == 1,
             "mqtt rejections by cause: %r" % rej)
    qt.check(after["mqtt"]["decoded"] == len(msgs), "a bad message decoded")
    qt.check(after["rejected"]["unknown_topic"] ==
             before["rejected"]["unknown_topic"] + 1, "unknown topic total")
    g0, g1 = before["groups"]["skid"], after["groups"]["skid"]
    qt.check(g1["received"] == g0["received"] + 3, "skid received count")
    qt.check(sum(g1["rejected"].values()) ==
             sum(g0["rejected"].values()) + 3, "skid rejected count")
    for k in g0:
        if k not in ("received", "rejected"):
            qt.check(g0[k] == g1[k], "skid %s changed: %r -> %r" %
                     (k, g0[k], g1[k]))
    qt.check(before["groups"]["twin"] == after["groups"]["twin"],
             "the other group changed")
    qt.note("mqtt: 4 bad messages counted by cause, model untouched")

    # 4: broker restart
    broker.stop()
    qm.wait_mqtt(d, lambda m: not m["connected"] and m["disconnects"] == 1,
                 "broker loss seen")
    time.sleep(0.3)  # a failed attempt or two against the closed port
    broker.start()
    st = qm.wait_mqtt(d, lambda m: m["connected"] and m["connects"] == 2
                      and m["subscribed"] == 1, "reconnect")
    qt.check(st["mqtt"]["attempts"] >= 2, "attempts %r" % st["mqtt"])
    cl.close()
    cl = qm.Client(broker.port)
    t2, x2 = qt.skid_readings(BATCH, seed=7)
    t2 = t2 + 1000.0
    cl.publish_all([("plant/skid/readings", qt.binary(t2, x2, 5000))])
    d.wait_readings("skid", N + BATCH)
    log = d.logtext()
    qt.check("connection lost" in log and "reconnecting" in log,
             "no log line for the loss:\n" + log)
    qt.note("mqtt: broker restart survived: %d attempts, %d failed, "
            "%d connects" % (st["mqtt"]["attempts"],
                             st["mqtt"]["connect_failures"],
                             st["mqtt"]["connects"]))
    # 5: reload: unchanged MQTT settings keep the session; a change makes
    # a new connection, and the counters carry over
    d.proc.send_signal(qt.signal.SIGHUP)
    st = qm.wait_mqtt(d, lambda m: True, "status")
    end = time.monotonic() + qt.WAIT
    while st["reloads"] < 1 and time.monotonic() < end:
        time.sleep(0.05)
        st = d.status()
    qt.check(st["reloads"] == 1 and st["mqtt"]["connects"] == 2 and
             st["mqtt"]["connected"], "reload without change: %r" %
             st["mqtt"])
    d.write(qt.ini(tmp, {"skid": qt.skid_group(), "twin": qt.skid_group()},
                   [">" + pub.endpoint, mqtt_in],
                   extra=qm.mqtt_section(broker.port, qos=0)))
    d.proc.send_signal(qt.signal.SIGHUP)
    st = qm.wait_mqtt(d, lambda m: m["connects"] == 3 and
                      m["subscribed"] == 1, "reconnect after a reload")
    qt.check(st["mqtt"]["received"] == len(msgs) + len(bad) + 1 and
             st["mqtt"]["disconnects"] == 1, "counters after reload: %r" %
             st["mqtt"])
    cl.publish_all([("plant/skid/readings", qt.binary(t2 + 100, x2, 6000))],
                   qos=0)
    d.wait_readings("skid", N + 2 * BATCH)
    qt.check(d.status()["groups"]["skid"]["model_age"] >=
             before["groups"]["skid"]["model_age"], "model lost on reload")
    qt.note("mqtt: reload kept the session when unchanged, reconnected "
            "when changed")
    cl.close()
    rc, took = d.stop()
    qt.check(rc == 0, "daemon exit %d" % rc)
    alerts_only(broker, watch)
    watch.close()
    backoff()
    print("ok")


def alerts_only(broker, watch):
    """6: ZeroMQ inputs only, alerts also on MQTT ([mqtt] alerts alone)."""
    tmp = qt.tmpdir()
    pub = qt.Publisher()
    extra = "\n".join(["", "[mqtt]",
                       "alerts = mqtt://127.0.0.1:%d/site2/+/alerts" %
                       broker.port])
    d = qt.Daemon(tmp, qt.ini(tmp, {"pump": qt.skid_group()},
                              [">" + pub.endpoint], extra=extra), "alerts")
    qm.wait_mqtt(d, lambda m: m["connected"], "alerts-only connection")
    watch.subscribe("site2/+/alerts")
    pub.wait_sub("pump")
    n0 = len(watch.messages())
    t, x = qt.skid_readings(N, seed=11, fault=FAULT)
    qt.send_stream(pub, "pump", t, x, "binary")
    st = d.wait_readings("pump", N)
    got = [(tp, json.loads(p)) for tp, p in watch.wait_messages(n0 + 1)[n0:]]
    qt.check(got and got[0][0] == "site2/pump/alerts" and
             got[0][1]["event"] == "raise", "no MQTT alert: %r" % got)
    qt.check(st["mqtt"]["subscribed"] == 0 and st["mqtt"]["received"] == 0,
             "an alerts-only client subscribed: %r" % st["mqtt"])
    qt.note("mqtt: ZeroMQ input, alert on MQTT (%s)" % got[0][0])
    d.stop()
    pub.close()


def backoff():
    """7: no broker at all: attempts back off, doubling from reconnect_min
    to reconnect_max.  0.1 s doubling to 1.6 s starts attempts at about
    0, 0.1, 0.3, 0.7, 1.5, 3.1 s (each up to one 0.25 s poll tick late):
    6 within SPAN s, where a retry every tick would make some 16."""
    span = 3.6
    tmp = qt.tmpdir()
    port = qm.free_port()  # nothing listens there
    extra = "\n".join(["", "[mqtt]", "reconnect_min = 0.1s",
                       "reconnect_max = 1.6s"])
    d = qt.Daemon(tmp, qt.ini(tmp, {"skid": qt.skid_group()},
                              ["mqtt://127.0.0.1:%d/plant/+/readings" % port],
                              extra=extra), "nobroker")
    time.sleep(span)  # the first attempt was made before control answered
    m = d.status()["mqtt"]
    qt.check(4 <= m["attempts"] <= 7, "attempts in %.1f s without a "
             "broker: %d (back-off 0.1 s doubling to 1.6 s)" %
             (span, m["attempts"]))
    qt.check(m["connect_failures"] >= m["attempts"] - 1 and
             m["connects"] == 0, "failures %r" % m)
    qt.check(d.alive(), "daemon stopped without a broker")
    qt.note("mqtt: no broker: %d attempts in %.1f s (back-off)" %
            (m["attempts"], span))
    d.stop()


if __name__ == "__main__":
    main()
