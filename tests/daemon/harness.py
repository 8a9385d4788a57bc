"""Test harness for holdfastd: a private mosquitto on a free loopback port with
a generated config (password file, ACL, optionally a TLS listener with
certificates made by openssl here), the daemon, and mosquitto_sub/_pub clients.
Every process started here is stopped on exit, also when a test fails.
Python standard library only."""
import atexit, csv, json, os, shutil, signal, socket, subprocess, sys, tempfile, time
from collections import OrderedDict

MOSQUITTO = "/usr/sbin/mosquitto"
PREFIX = "holdfast/v1/quillfen"
PASSWORDS = {"holdfastd": "daemon-pw-1", "feeder": "feeder-pw-2", "alice": "alice-pw-3",
             "bob": "bob-pw-4", "victor": "victor-pw-5", "mallory": "mallory-pw-6", "watcher": "watcher-pw-7"}
# The broker ACL of config/DAEMON.md, for the prefix above.
ACL = """# holdfastd: reads readings and commands, writes everything it owns
user holdfastd
topic read {p}/readings/#
topic read {p}/commands/+
topic write {p}/events/#
topic write {p}/alarms/#
topic write {p}/status/#
topic write {p}/daemon
topic write {p}/replies/#

# RTU gateways: write readings only
user feeder
topic write {p}/readings/#

# the watcher (control-room display): read what the daemon publishes
user watcher
topic read {p}/events/#
topic read {p}/alarms/#
topic read {p}/status/#
topic read {p}/daemon
topic read {p}/replies/#

# viewers: read only
user victor
topic read {p}/events/#
topic read {p}/alarms/#

# operators: command under their own name only (the topic level is the
# identity the daemon audits), read their replies and the alarm stream
user alice
topic write {p}/commands/alice
topic read {p}/replies/alice
topic read {p}/events/#
topic read {p}/alarms/#

user bob
topic write {p}/commands/bob
topic read {p}/replies/bob
topic read {p}/events/#
topic read {p}/alarms/#

# mallory may publish commands at the broker but is not in the daemon's operators list
user mallory
topic write {p}/commands/mallory
topic read {p}/replies/mallory
""".format(p=PREFIX)

_procs = []


def _cleanup():
    for p in _procs:
        if p.poll() is None:
            try:
                p.kill()
            except OSError:
                pass
            try:
                p.wait(timeout=10)
            except Exception:
                pass


atexit.register(_cleanup)
signal.signal(signal.SIGTERM, lambda *a: sys.exit(1))


def spawn(args, **kw):
    p = subprocess.Popen(args, **kw)
    _procs.append(p)
    return p


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def wait_for(pred, timeout, what, interval=0.1):
    deadline = time.time() + timeout
    while time.time() < deadline:
        v = pred()
        if v:
            return v
        time.sleep(interval)
    raise AssertionError("timed out after %.0f s waiting for %s" % (timeout, what))


def make_certs(d):
    """A CA and a server certificate for 127.0.0.1/localhost, and a client certificate."""
    def ossl(*args):
        subprocess.run(["openssl"] + list(args), check=True, cwd=d, stdout=subprocess.DEVNULL,
                       stderr=subprocess.DEVNULL)
    ossl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2", "-subj", "/CN=holdfast test CA",
         "-keyout", "ca.key", "-out", "ca.crt")
    with open(os.path.join(d, "san.cnf"), "w") as f:
        f.write("subjectAltName=IP:127.0.0.1,DNS:localhost\n")
    ossl("req", "-newkey", "rsa:2048", "-nodes", "-subj", "/CN=localhost", "-keyout", "server.key", "-out", "server.csr")
    ossl("x509", "-req", "-in", "server.csr", "-CA", "ca.crt", "-CAkey", "ca.key", "-CAcreateserial", "-days", "2",
         "-extfile", "san.cnf", "-out", "server.crt")
    ossl("req", "-newkey", "rsa:2048", "-nodes", "-subj", "/CN=holdfastd", "-keyout", "client.key", "-out", "client.csr")
    ossl("x509", "-req", "-in", "client.csr", "-CA", "ca.crt", "-CAkey", "ca.key", "-CAcreateserial", "-days", "2",
         "-out", "client.crt")
    for k in ("ca.key", "server.key", "client.key"):
        os.chmod(os.path.join(d, k), 0o600)


class Broker:
    def __init__(self, d, tls=False, persistence=False, autosave_s=1):
        self.dir = d
        self.tls = tls
        self.port = free_port()
        self.proc = None
        os.makedirs(d, exist_ok=True)
        pw = os.path.join(d, "passwords")
        open(pw, "w").close()
        for u, p in PASSWORDS.items():
            subprocess.run(["mosquitto_passwd", "-b", pw, u, p], check=True, stdout=subprocess.DEVNULL,
                           stderr=subprocess.DEVNULL)
        os.chmod(pw, 0o600)
        with open(os.path.join(d, "acl"), "w") as f:
            f.write(ACL)
        os.chmod(os.path.join(d, "acl"), 0o600)
        import pwd
        lines = ["user " + pwd.getpwuid(os.getuid()).pw_name, "per_listener_settings false", "allow_anonymous false",
                 "password_file " + pw, "acl_file " + os.path.join(d, "acl"),
                 "max_queued_messages 0", "max_inflight_messages 0", "set_tcp_nodelay true",
                 "log_dest file " + os.path.join(d, "mosquitto.log"), "log_type error", "log_type warning",
                 "log_type notice"]
        if persistence:
            lines += ["persistence true", "persistence_location " + d + "/", "autosave_interval %d" % autosave_s]
        else:
            lines += ["persistence false"]
        lines += ["listener %d 127.0.0.1" % self.port]
        if tls:
            make_certs(d)
            lines += ["cafile " + os.path.join(d, "ca.crt"), "certfile " + os.path.join(d, "server.crt"),
                      "keyfile " + os.path.join(d, "server.key"), "require_certificate false"]
        with open(os.path.join(d, "mosquitto.conf"), "w") as f:
            f.write("\n".join(lines) + "\n")
        self.start()

    def start(self):
        self.proc = spawn([MOSQUITTO, "-c", os.path.join(self.dir, "mosquitto.conf")],
                          stdout=subprocess.DEVNULL, stderr=open(os.path.join(self.dir, "mosquitto.err"), "a"))
        def up():
            try:
                socket.create_connection(("127.0.0.1", self.port), timeout=1).close()
                return True
            except OSError:
                return self.proc.poll() is not None and (_ for _ in ()).throw(
                    AssertionError("mosquitto exited: " + open(os.path.join(self.dir, "mosquitto.err")).read()))
        wait_for(up, 30, "mosquitto to listen")

    def kill(self):
        self.proc.kill()
        self.proc.wait(timeout=10)

    def uri(self):
        return ("ssl://127.0.0.1:%d" if self.tls else "tcp://127.0.0.1:%d") % self.port

    def client_args(self, user):
        a = ["-h", "127.0.0.1", "-p", str(self.port), "-u", user, "-P", PASSWORDS[user]]
        if self.tls:
            a += ["--cafile", os.path.join(self.dir, "ca.crt")]
        return a

    def pub(self, user, topic, payload, qos=1, timeout=30):
        r = subprocess.run(["mosquitto_pub"] + self.client_args(user) + ["-q", str(qos), "-t", topic, "-m", payload],
                           timeout=timeout, capture_output=True, text=True)
        return r.returncode

    def pub_lines(self, user, topic, lines_file, qos=1, timeout=300):
        with open(lines_file) as f:
            return subprocess.run(["mosquitto_pub"] + self.client_args(user) + ["-q", str(qos), "-t", topic, "-l"],
                                  stdin=f, timeout=timeout, capture_output=True, text=True).returncode

    def get_retained(self, user, topic, timeout=5):
        """The retained message on `topic`, or None."""
        r = subprocess.run(["mosquitto_sub"] + self.client_args(user) + ["-t", topic, "-C", "1", "-W", str(timeout)],
                           capture_output=True, text=True, timeout=timeout + 20)
        out = r.stdout.strip()
        return json.loads(out) if out else None


class Watcher:
    """mosquitto_sub in the background, lines "topic payload" into a file.
    `topic` may be a list of filters."""
    def __init__(self, broker, user, topic, path, client_id=None):
        self.path = path
        args = ["mosquitto_sub"] + broker.client_args(user) + ["-q", "1", "-v"]
        for t in (topic if isinstance(topic, list) else [topic]):
            args += ["-t", t]
        if client_id:
            args += ["-c", "-i", client_id]
        self.out = open(path, "a")
        self.proc = spawn(args, stdout=self.out, stderr=subprocess.STDOUT)
        time.sleep(0.5)

    def messages(self):
        res = []
        with open(self.path) as f:
            for line in f:
                line = line.rstrip("\n")
                if " " not in line:
                    continue
                topic, payload = line.split(" ", 1)
                try:
                    res.append((topic, json.loads(payload)))
                except ValueError:
                    pass
        return res

    def stop(self):
        if self.proc.poll() is None:
            self.proc.terminate()
            self.proc.wait(timeout=10)


class Daemon:
    def __init__(self, binary, d, broker, site, credentials_user="holdfastd", extra=None):
        self.binary = binary
        self.dir = d
        os.makedirs(d, exist_ok=True)
        cred = os.path.join(d, "credentials")
        with open(cred, "w") as f:
            f.write("%s\n%s\n" % (credentials_user, PASSWORDS[credentials_user]))
        os.chmod(cred, 0o600)
        cfg = OrderedDict([("format", "holdfast-daemon/1"), ("site_file", site), ("broker_uri", broker.uri()),
                           ("client_id", "holdfastd-test"), ("credentials_file", cred),
                           ("topic_prefix", PREFIX), ("journal_dir", os.path.join(d, "journal")),
                           ("state_dir", os.path.join(d, "state")), ("status_period_s", 0.5),
                           ("heartbeat_period_s", 0.5), ("checkpoint_period_s", 1.0),
                           ("operators", ["alice", "bob"])])
        if broker.tls:
            cfg["tls_ca_file"] = os.path.join(broker.dir, "ca.crt")
            cfg["tls_cert_file"] = os.path.join(broker.dir, "client.crt")
            cfg["tls_key_file"] = os.path.join(broker.dir, "client.key")
        cfg.update(extra or {})
        self.config = os.path.join(d, "daemon.json")
        with open(self.config, "w") as f:
            json.dump(cfg, f, indent=1)
        self.proc = None
        self.log = os.path.join(d, "holdfastd.log")

    def start(self):
        self.proc = spawn([self.binary, "--config", self.config], stdout=subprocess.DEVNULL,
                          stderr=open(self.log, "a"))

    def kill9(self):
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(timeout=30)

    def stop(self):
        self.proc.terminate()
        return self.proc.wait(timeout=60)

    def log_text(self):
        return open(self.log).read() if os.path.exists(self.log) else ""


def batches(readings_csv, out_path, start=None, until=None):
    """Readings grouped per second of data time, one JSON array per line."""
    n = 0
    with open(readings_csv) as f, open(out_path, "w") as out:
        group, key = [], None
        for row in csv.DictReader(f):
            t = row["time"]
            if (start and t < start) or (until and t >= until):
                continue
            k = t[:19]
            if key is not None and k != key:
                out.write(json.dumps(group, separators=(",", ":")) + "\n")
                n += 1
                group = []
            key = k
            try:
                value = float(row["value"])
            except ValueError:
                continue  # the CSV reader skips such a row as bad, too
            item = {"point": row["point"], "time": t, "value": value}
            if row.get("quality"):
                item["quality"] = row["quality"]
            group.append(item)
        if group:
            out.write(json.dumps(group, separators=(",", ":")) + "\n")
            n += 1
    return n


def data_time(broker, user="watcher"):
    st = broker.get_retained(user, PREFIX + "/daemon")
    return (st or {}).get("data_time") or ""


class Failures:
    def __init__(self):
        self.items = []

    def check(self, cond, msg):
        if not cond:
            self.items.append(msg)
            print("FAIL: " + msg, flush=True)
        else:
            print("ok: " + msg, flush=True)

    def exit(self, *logs):
        if self.items:
            for path in logs:
                if os.path.exists(path):
                    print("--- %s (tail) ---" % path)
                    print("".join(open(path).readlines()[-40:]))
            sys.exit(1)
        sys.exit(0)
