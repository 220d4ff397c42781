"""qwmqtt.py: a real mosquitto broker and paho clients for the MQTT
end-to-end tests of `quadwatch run`.

The broker is Debian's mosquitto, started by the test on a free loopback
port with a config written to the test's temporary directory (never a
fixed port, never a system service); clients are python3-paho-mqtt.  Every
wait has a deadline; the broker is killed when the test ends.

Run with /usr/bin/python3."""

import os
import shutil
import socket
import subprocess
import sys
import threading
import time

import qwtest as qt

try:
    import paho.mqtt.client as paho
except ImportError as e:  # pragma: no cover - environment check
    print("python3-paho-mqtt missing: %s" % e)
    sys.exit(77)

if shutil.which("mosquitto") is None:
    print("mosquitto (the broker) not installed")
    sys.exit(77)

_BROKERS = []


def free_port():
    """A loopback TCP port the kernel had free a moment ago."""
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


class Broker:
    """mosquitto -c FILE on 127.0.0.1:port; extra: more config lines
    (password_file, TLS files) for the one listener."""

    def __init__(self, tmp, extra=(), port=None, name="broker"):
        self.tmp = tmp
        self.port = port or free_port()
        self.conf = os.path.join(tmp, name + ".conf")
        self.log = os.path.join(tmp, name + ".log")
        lines = ["per_listener_settings false",
                 "persistence false",
                 "log_dest stderr",
                 "log_type error",
                 "log_type warning",
                 "log_type notice",
                 "log_type information",
                 "listener %d 127.0.0.1" % self.port]
        if os.geteuid() == 0:
            lines.insert(0, "user root")  # read the test's private files
        lines += list(extra)
        if not any(l.startswith("password_file") for l in extra):
            lines.append("allow_anonymous true")
        with open(self.conf, "w") as f:
            f.write("\n".join(lines) + "\n")
        self.proc = None
        _BROKERS.append(self)
        self.start()

    def start(self):
        self.proc = subprocess.Popen(["mosquitto", "-c", self.conf],
                                     stdout=subprocess.DEVNULL,
                                     stderr=open(self.log, "a"))
        end = time.monotonic() + qt.WAIT
        while time.monotonic() < end:
            qt.check(self.proc.poll() is None,
                     "broker exited: %s" % self.logtext())
            try:
                socket.create_connection(("127.0.0.1", self.port),
                                         timeout=0.2).close()
                return
            except OSError:
                time.sleep(0.05)
        qt.fail("broker not listening on %d within %.0f s" %
                (self.port, qt.WAIT))

    def stop(self):
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=5)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self.proc = None

    def logtext(self):
        with open(self.log) as f:
            return f.read()


def _stop_brokers():
    for b in _BROKERS:
        b.stop()


qt.atexit.register(_stop_brokers)


class Client:
    """A paho client with its network thread; keeps what arrives on its
    subscriptions as (topic, payload) pairs."""

    def __init__(self, port, user=None, password=None, tls=None):
        self.c = paho.Client(client_id="", clean_session=True)
        if user is not None:
            self.c.username_pw_set(user, password)
        if tls is not None:
            self.c.tls_set(**tls)
        self.got = []
        self.lock = threading.Lock()
        self.subacks = 0
        self.c.on_message = self._on_message
        self.c.on_subscribe = self._on_subscribe
        self.c.connect("127.0.0.1", port, keepalive=30)
        self.c.loop_start()

    def _on_message(self, client, userdata, msg):
        with self.lock:
            self.got.append((msg.topic, msg.payload))

    def _on_subscribe(self, client, userdata, mid, granted):
        with self.lock:
            self.subacks += 1

    def subscribe(self, topic, qos=1):
        want = self.subacks + 1
        self.c.subscribe(topic, qos)
        end = time.monotonic() + qt.WAIT
        while time.monotonic() < end:
            with self.lock:
                if self.subacks >= want:
                    return
            time.sleep(0.02)
        qt.fail("no SUBACK for %s" % topic)

    def publish(self, topic, payload, qos=1):
        return self.c.publish(topic, payload, qos=qos)

    def publish_all(self, items, qos=1):
        """Publishes [(topic, payload)] and waits until the broker has
        taken every one (QoS 1: its PUBACK)."""
        infos = [self.c.publish(t, p, qos=qos) for t, p in items]
        end = time.monotonic() + qt.WAIT
        for i in infos:
            i.wait_for_publish(max(0.1, end - time.monotonic()))
            qt.check(i.is_published(), "broker did not take a message")

    def messages(self):
        with self.lock:
            return list(self.got)

    def wait_messages(self, n, timeout=qt.WAIT):
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            with self.lock:
                if len(self.got) >= n:
                    return list(self.got)
            time.sleep(0.02)
        return self.messages()

    def close(self):
        self.c.loop_stop()
        self.c.disconnect()


def wait_mqtt(d, cond, what, timeout=qt.WAIT):
    """Waits until cond(status["mqtt"]) holds; returns that status."""
    end = time.monotonic() + timeout
    st = None
    while time.monotonic() < end:
        st = d.status()
        if "mqtt" in st and cond(st["mqtt"]):
            return st
        time.sleep(0.05)
    qt.fail("%s: not within %.0f s; mqtt status %r; log:\n%s" %
            (what, timeout, st.get("mqtt") if st else None, d.logtext()))


def mqtt_section(port, qos=1, alerts=True, scheme="mqtt", extra=()):
    lines = ["", "[mqtt]", "reconnect_min = 0.1s", "reconnect_max = 0.5s"]
    if qos is not None:
        lines.append("qos = %d" % qos)
    if alerts:
        lines.append("alerts = %s://127.0.0.1:%d/plant/+/alerts" %
                     (scheme, port))
    return "\n".join(lines + list(extra))
