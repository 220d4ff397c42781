"""e2e_mqtt_secure.py: `quadwatch run` against a mosquitto broker that
wants a user name and password, and one that wants TLS with client
certificates (tests/qwmqtt.py starts both on free loopback ports).

  1. credentials from a file (mode 0600): the daemon is let in and its
     readings arrive; a wrong password is refused by the broker, counted
     (refused, connect_failures) and logged, and the daemon keeps running;
     a credentials file open to others, or one that is missing, stops the
     start with exit 2 and a FILE:LINE: [mqtt] credentials: message;
  2. TLS: a CA, a server certificate for 127.0.0.1 and a client
     certificate, all made here by openssl; with them the daemon connects
     and its readings arrive; with another CA it does not connect (the
     failure is counted), and the broker saw no session from it.
Run with /usr/bin/python3."""

import os
import subprocess

import qwtest as qt
import qwmqtt as qm

USER = "plant-reader"
PASSWORD = "chilled water 6.85"


def write(path, text, mode=0o600):
    with open(path, "w") as f:
        f.write(text)
    os.chmod(path, mode)
    return path


def daemon(tmp, port, extra, scheme="mqtt", name="qw"):
    inp = "%s://127.0.0.1:%d/plant/+/readings" % (scheme, port)
    text = qt.ini(tmp, {"skid": qt.skid_group()}, [inp],
                  extra=qm.mqtt_section(port, alerts=False, extra=extra))
    return qt.Daemon(tmp, text, name)


def one_reading(cl):
    t, x = qt.skid_readings(8, seed=5)
    cl.publish_all([("plant/skid/readings", qt.binary(t, x, 0))])


def config_error(tmp, port, extra, want):
    """quadwatch run exits 2 with want in its message."""
    path = os.path.join(tmp, "bad.ini")
    inp = "mqtt://127.0.0.1:%d/plant/+/readings" % port
    write(path, qt.ini(tmp, {"skid": qt.skid_group()}, [inp],
                       extra=qm.mqtt_section(port, qos=None, alerts=False,
                                             extra=extra)), 0o644)
    r = subprocess.run([qt.QW, "run", "-c", path], capture_output=True,
                       text=True, timeout=10)
    qt.check(r.returncode == 2, "exit %d for %s: %s" %
             (r.returncode, extra, r.stderr))
    qt.check(want in r.stderr, "message %r lacks %r" % (r.stderr, want))
    return r.stderr.strip()


def test_password(tmp):
    pw = os.path.join(tmp, "broker.passwd")
    subprocess.run(["mosquitto_passwd", "-b", "-c", pw, USER, PASSWORD],
                   check=True, capture_output=True)
    os.chmod(pw, 0o600)
    broker = qm.Broker(tmp, ["password_file " + pw])
    good = write(os.path.join(tmp, "good.cred"), "%s\n%s\n" %
                 (USER, PASSWORD))
    wrong = write(os.path.join(tmp, "wrong.cred"), "%s\nnot it\n" % USER)

    d1 = daemon(qt.tmpdir(), broker.port, ["credentials = " + good], name="a")
    qm.wait_mqtt(d1, lambda m: m["subscribed"] == 1, "login with the file")
    cl = qm.Client(broker.port, USER, PASSWORD)
    one_reading(cl)
    d1.wait_readings("skid", 8)
    d2 = daemon(qt.tmpdir(), broker.port, ["credentials = " + wrong],
                name="b")
    st = qm.wait_mqtt(d2, lambda m: m["refused"] >= 2,
                      "wrong password refused twice")
    m = st["mqtt"]
    qt.check(m["connects"] == 0 and not m["connected"] and
             m["connect_failures"] >= m["refused"],
             "wrong password: %r" % m)
    qt.check(d2.alive(), "daemon stopped on a refusal")
    log = d2.logtext()
    qt.check("refused" in log and "credentials" in log,
             "refusal not logged:\n" + log)
    qt.check(PASSWORD not in log and "not it" not in log,
             "a password in the log")
    qt.note("mqtt auth: file credentials let in; a wrong password refused "
            "%d times, counted and logged" % m["refused"])
    # the operator fixes the file and reloads: the new login is used
    write(wrong, "%s\n%s\n" % (USER, PASSWORD))
    d2.proc.send_signal(qt.signal.SIGHUP)
    st = qm.wait_mqtt(d2, lambda m: m["connects"] == 1 and
                      m["subscribed"] == 1, "login after the fix and reload")
    qt.check(st["reloads"] == 1, "reload not counted")
    qt.note("mqtt auth: a fixed credentials file takes effect on reload")
    d1.stop()
    d2.stop()
    cl.close()

    open_to_all = write(os.path.join(tmp, "open.cred"),
                        "%s\n%s\n" % (USER, PASSWORD), 0o644)
    msg = config_error(tmp, broker.port, ["credentials = " + open_to_all],
                       "[mqtt] credentials: %s: credentials file is open "
                       "to group or others (mode 0644)" % open_to_all)
    qt.check("bad.ini:" in msg, "no file:line in %r" % msg)
    config_error(tmp, broker.port, ["credentials = " + tmp + "/none"],
                 "[mqtt] credentials: %s/none: No such file" % tmp)
    config_error(tmp, broker.port, ["qos = 2"], "[mqtt] qos: expected 0")
    qt.note("mqtt config errors: open or missing credentials file, bad "
            "qos: exit 2 with file:line:key")
    broker.stop()


def openssl(*args):
    subprocess.run(["openssl"] + list(args), check=True,
                   capture_output=True)


def make_ca(tmp, name):
    key, crt = os.path.join(tmp, name + ".key"), os.path.join(tmp, name +
                                                              ".crt")
    openssl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2",
            "-subj", "/CN=quadwatch test " + name, "-keyout", key,
            "-out", crt)
    return key, crt


def make_cert(tmp, name, ca, san=None):
    key, csr = os.path.join(tmp, name + ".key"), os.path.join(tmp, name +
                                                              ".csr")
    crt = os.path.join(tmp, name + ".crt")
    openssl("req", "-newkey", "rsa:2048", "-nodes", "-subj",
            "/CN=" + name, "-keyout", key, "-out", csr)
    args = ["x509", "-req", "-in", csr, "-CA", ca[1], "-CAkey", ca[0],
            "-CAcreateserial", "-days", "2", "-out", crt]
    if san:
        ext = write(os.path.join(tmp, name + ".ext"),
                    "subjectAltName=%s\n" % san)
        args += ["-extfile", ext]
    openssl(*args)
    os.chmod(key, 0o600)
    return key, crt


def test_tls(tmp):
    ca = make_ca(tmp, "ca")
    other = make_ca(tmp, "other-ca")
    srv = make_cert(tmp, "server", ca, "IP:127.0.0.1")
    cli = make_cert(tmp, "client", ca)
    broker = qm.Broker(tmp, ["cafile " + ca[1], "certfile " + srv[1],
                             "keyfile " + srv[0],
                             "require_certificate true"], name="tls")
    files = ["cert_file = " + cli[1], "key_file = " + cli[0]]
    t1 = qt.tmpdir()

    def d1_text(port, cafile, files, more=None):
        extra = ["ca_file = " + cafile] + files + ([more] if more else [])
        inp = "mqtts://127.0.0.1:%d/plant/+/readings" % port
        return qt.ini(t1, {"skid": qt.skid_group()}, [inp],
                      extra=qm.mqtt_section(port, alerts=False, extra=extra))
    d1 = qt.Daemon(t1, d1_text(broker.port, ca[1], files), "tls-good")
    st = qm.wait_mqtt(d1, lambda m: m["subscribed"] == 1, "TLS session")
    cl = qm.Client(broker.port, tls={"ca_certs": ca[1], "certfile": cli[1],
                                     "keyfile": cli[0]})
    one_reading(cl)
    d1.wait_readings("skid", 8)
    qt.check("connected (TLS)" in d1.logtext(), "no TLS line in the log")
    # a reload that changes a setting makes a new TLS connection
    d1.write(d1_text(broker.port, ca[1], files, "keepalive = 20s"))
    d1.proc.send_signal(qt.signal.SIGHUP)
    qm.wait_mqtt(d1, lambda m: m["connects"] == 2 and m["subscribed"] == 1,
                 "TLS session after a reload")
    one_reading(cl)
    d1.wait_readings("skid", 16)
    d2 = daemon(qt.tmpdir(), broker.port, ["ca_file = " + other[1]] + files,
                scheme="mqtts", name="tls-bad")
    st = qm.wait_mqtt(d2, lambda m: m["connect_failures"] >= 2,
                      "a broker certificate from another CA refused")
    qt.check(st["mqtt"]["connects"] == 0, "connected with a wrong CA")
    qt.note("mqtt TLS: CA + client certificate accepted; another CA "
            "refused (%d failed attempts)" % st["mqtt"]["connect_failures"])
    d1.stop()
    d2.stop()
    cl.close()
    broker.stop()


def main():
    qt.need_program()
    tmp = qt.tmpdir()
    test_password(tmp)
    test_tls(tmp)
    print("ok")


if __name__ == "__main__":
    main()
