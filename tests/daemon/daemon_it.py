"""Integration tests of holdfastd against a real mosquitto.
Usage: daemon_it.py SCENARIO HOLDFASTD HOLDFAST SITE READINGS WORKDIR
Scenarios: e2e, tls, broker_restart, kill9, malformed, credentials."""
import json, os, shutil, signal, subprocess, sys, time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from harness import (PASSWORDS, PREFIX, Broker, Daemon, Failures, Watcher, batches, data_time, spawn, wait_for)

scenario, holdfastd, holdfast, site, readings, work = sys.argv[1:7]
shutil.rmtree(work, ignore_errors=True)
os.makedirs(work)
F = Failures()
LEAK_START = "2026-03-14T08:10:00"
TIMEOUT = 240  # generous: a loaded 2-core machine, sanitizer builds


def events_of(watcher):
    return [p for t, p in watcher.messages() if t.startswith(PREFIX + "/events/")]


def leak_raises(evs):
    return [e for e in evs if e["type"] == "leak" and e["cause"] == "condition_raised"]


def check_dedup(evs, what):
    """Duplicates only as exact repeats of one (segment, seq); seq without gaps from 1."""
    by_key = {}
    for e in evs:
        k = (e["segment"], e["seq"])
        if k in by_key and by_key[k] != e:
            F.check(False, "%s: two different events share %s" % (what, k))
            return []
        by_key[k] = e
    seqs = sorted(k[1] for k in by_key)
    F.check(seqs == list(range(1, len(seqs) + 1)), "%s: sequence numbers 1..%d without gaps (%s)" %
            (what, len(seqs), seqs))
    return [by_key[k] for k in sorted(by_key, key=lambda k: k[1])]


def replay_first_event():
    out = subprocess.run([holdfast, "replay", "--config", site, "--data", readings], capture_output=True,
                         text=True, timeout=600).stdout
    return json.loads(out.splitlines()[0])


def wait_data_time(broker, at_least, timeout=TIMEOUT):
    return wait_for(lambda: data_time(broker) >= at_least, timeout, "daemon data time %s" % at_least, 0.3)


def restart(daemon):
    """Starts the daemon and waits for its online status from this run (subscribed by then)."""
    since = time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(time.time() - 1))
    daemon.start()
    wait_for(lambda: (lambda st: st.get("state") == "online" and st.get("wall_time", "") >= since)(
        broker.get_retained("watcher", PREFIX + "/daemon", timeout=2) or {}), TIMEOUT, "the restarted daemon online")


def checkpoint_next_seq(daemon):
    try:
        doc = json.load(open(os.path.join(daemon.dir, "state", "checkpoint.json")))
        return json.loads(json.loads(doc["monitor"])["alarms"])["next_seq"]
    except (OSError, ValueError, KeyError):
        return 0


def command(broker, user, payload, reply_user=None):
    broker.pub(user, PREFIX + "/commands/" + (reply_user or user), json.dumps(payload))


if scenario == "credentials":
    # Refuses a credentials file readable by group or others; never prints the password.
    d = os.path.join(work, "d")
    os.makedirs(d)
    cred = os.path.join(d, "cred")
    with open(cred, "w") as f:
        f.write("holdfastd\nsecret-pw-never-logged\n")
    os.chmod(cred, 0o640)
    cfg = os.path.join(d, "daemon.json")
    json.dump({"format": "holdfast-daemon/1", "site_file": site, "broker_uri": "tcp://127.0.0.1:1",
               "credentials_file": cred, "topic_prefix": PREFIX, "journal_dir": d + "/j", "state_dir": d + "/s"},
              open(cfg, "w"))
    r = subprocess.run([holdfastd, "--config", cfg], capture_output=True, text=True, timeout=60)
    F.check(r.returncode == 2, "group-readable credentials: exit code 2 (got %d)" % r.returncode)
    F.check("accessible to group or others" in r.stderr, "the message says why: " + r.stderr.strip()[:200])
    F.check("secret-pw-never-logged" not in r.stderr + r.stdout, "the password is not printed")
    os.chmod(cred, 0o600)
    r = subprocess.run([holdfastd, "--config", cfg, "--check"], capture_output=True, text=True, timeout=60)
    F.check(r.returncode == 0 and "OK" in r.stdout, "mode 600: --check passes (%d %s)" % (r.returncode, r.stderr[:200]))
    bad = os.path.join(d, "bad.json")
    json.dump({"format": "holdfast-daemon/1", "site_file": site, "broker_uri": "tcp://x", "status_period_s": -1,
               "topic_prefix": PREFIX}, open(bad, "w"))
    r = subprocess.run([holdfastd, "--config", bad], capture_output=True, text=True, timeout=60)
    F.check(r.returncode == 2 and "bad.json:/status_period_s" in r.stderr,
            "a bad config names the file and field: " + r.stderr.strip()[:200])
    F.exit()

tls = scenario == "tls"
broker = Broker(os.path.join(work, "broker"), tls=tls, persistence=(scenario == "broker_restart"))
watcher = Watcher(broker, "watcher", PREFIX + "/#", os.path.join(work, "watch.txt"),
                  client_id="watcher-1" if scenario == "broker_restart" else None)
daemon = Daemon(holdfastd, os.path.join(work, "daemon"), broker, site)
daemon.start()
logs = [daemon.log, os.path.join(broker.dir, "mosquitto.log")]
try:
    wait_for(lambda: (broker.get_retained("watcher", PREFIX + "/daemon") or {}).get("state") == "online", TIMEOUT,
             "the daemon's online status")
    F.check(True, "daemon online (retained status)")
    all_lines = os.path.join(work, "all.jsonl")
    batches(readings, all_lines)

    if scenario in ("e2e", "tls"):
        F.check(broker.pub_lines("feeder", PREFIX + "/readings", all_lines) == 0, "readings published")
        wait_for(lambda: leak_raises(events_of(watcher)), TIMEOUT, "the leak alarm event")
        evs = check_dedup(events_of(watcher), "events")
        expected = replay_first_event()
        F.check(leak_raises(evs)[0] == expected, "the leak event is the one `holdfast replay` raises: %s" %
                json.dumps(leak_raises(evs)[0]))
        st = broker.get_retained("watcher", PREFIX + "/alarms/KR-1")
        F.check(st and st["alarms"]["leak"]["state"] == "unack_active", "retained alarm state: leak unack_active")
        status = broker.get_retained("watcher", PREFIX + "/status/KR-1")
        F.check(status and len(status.get("windows", [])) == 3 and "data_quality" in status,
                "retained segment status with windows and data quality")
        # Unauthorised: victor has no write right on commands (the broker drops it); alice may not
        # command under bob's name; mallory may publish but is not a daemon operator.
        command(broker, "victor", {"id": "v-1", "segment": "KR-1", "alarm": "leak", "command": "acknowledge"})
        command(broker, "alice", {"id": "a-0", "segment": "KR-1", "alarm": "leak", "command": "acknowledge"},
                reply_user="bob")
        command(broker, "mallory", {"id": "m-1", "segment": "KR-1", "alarm": "leak", "command": "acknowledge"})
        wait_for(lambda: any(t == PREFIX + "/replies/mallory" for t, p in watcher.messages()), TIMEOUT,
                 "the reply to mallory")
        rep = [p for t, p in watcher.messages() if t == PREFIX + "/replies/mallory"][0]
        F.check(rep["ok"] is False and rep["result"] == "rejected_not_authorised",
                "mallory's command rejected: " + json.dumps(rep))
        st = broker.get_retained("watcher", PREFIX + "/alarms/KR-1")
        F.check(st["alarms"]["leak"]["state"] == "unack_active", "no unauthorised command changed the alarm")
        # Authorised: alice acknowledges with `holdfast alarms ack`, while `holdfast alarms watch` follows.
        cred = os.path.join(work, "alice.cred")
        with open(cred, "w") as f:
            f.write("alice\n%s\n" % PASSWORDS["alice"])
        os.chmod(cred, 0o600)
        cli = ["--broker", broker.uri(), "--prefix", PREFIX, "--credentials", cred]
        if tls:
            cli += ["--cafile", os.path.join(broker.dir, "ca.crt")]
        watch_out = open(os.path.join(work, "cli-watch.txt"), "w")
        cli_watch = spawn([holdfast, "alarms", "watch", "--count", "1", "--timeout", str(TIMEOUT)] + cli,
                          stdout=watch_out, stderr=subprocess.STDOUT)
        wait_for(lambda: "watching" in open(os.path.join(work, "cli-watch.txt")).read(), TIMEOUT,
                 "holdfast alarms watch to subscribe")
        r = subprocess.run([holdfast, "alarms", "ack", "--segment", "KR-1", "--alarm", "leak", "--reason", "seen"] + cli,
                           capture_output=True, text=True, timeout=TIMEOUT)
        F.check(r.returncode == 0 and "done: applied, state ack_active" in r.stdout,
                "holdfast alarms ack: %d %s %s" % (r.returncode, r.stdout.strip(), r.stderr.strip()))
        cli_watch.wait(timeout=TIMEOUT)
        watched = open(os.path.join(work, "cli-watch.txt")).read()
        F.check(cli_watch.returncode == 0 and "acknowledged" in watched and "by alice" in watched,
                "holdfast alarms watch shows the acknowledgement: " + watched.strip())
        r = subprocess.run([holdfast, "alarms", "shelve", "--segment", "KR-1", "--alarm", "rupture", "--for", "600"]
                           + cli, capture_output=True, text=True, timeout=TIMEOUT)
        F.check(r.returncode == 0 and "state shelved" in r.stdout, "holdfast alarms shelve: " + r.stdout.strip())
        wait_for(lambda: [e for e in events_of(watcher) if e["cause"] == "acknowledged"], TIMEOUT, "the ack event")
        ack = [e for e in events_of(watcher) if e["cause"] == "acknowledged"][0]
        F.check(ack["user"] == "alice" and ack["seq"] == 2, "ack event by alice with seq 2")
        F.check(not any(t == PREFIX + "/replies/victor" or t == PREFIX + "/replies/bob" for t, p in watcher.messages()),
                "no reply to victor's or the forged command (the broker dropped them)")
        audit = open(os.path.join(daemon.dir, "state", "audit.jsonl")).read()
        F.check('"client_user":"alice"' in audit and '"client_user":"mallory"' in audit and "victor" not in audit,
                "audit log holds alice and mallory, not victor")
        F.check(daemon.stop() == 0, "daemon stops cleanly on SIGTERM")
        st = broker.get_retained("watcher", PREFIX + "/daemon")
        F.check(st and st["state"] == "offline" and st["reason"] == "shutdown", "retained status offline (shutdown)")
        F.check("pw-" not in daemon.log_text(), "no password in the daemon log")
        jr = os.path.join(daemon.dir, "journal")
        F.check(open(os.path.join(jr, "acked")).read().strip() == "3", "journal: every event acknowledged")

    elif scenario == "broker_restart":
        first = os.path.join(work, "first.jsonl")
        batches(readings, first, until="2026-03-14T08:16:30")
        broker.pub_lines("feeder", PREFIX + "/readings", first)
        wait_data_time(broker, "2026-03-14T08:16:2")
        # Kill the broker hard around the leak alarm: published and acknowledged, or still in the journal.
        broker.kill()
        F.check(True, "broker killed")
        time.sleep(2)
        # Last will: the daemon's status reads offline once the broker is back? (the will is sent by the
        # broker when it notices; a killed broker sends none.) Restart on the same port.
        since = time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(time.time() - 1))
        broker.start()
        F.check(True, "broker restarted")
        # Its own online status after the restart (the broker's persistence keeps the old one),
        # published once its subscriptions are confirmed.
        wait_for(lambda: (lambda st: st.get("state") == "online" and st.get("wall_time", "") >= since)(
            broker.get_retained("watcher", PREFIX + "/daemon", timeout=2) or {}), TIMEOUT, "the daemon back online")
        rest = os.path.join(work, "rest.jsonl")
        batches(readings, rest, start="2026-03-14T08:16:30")
        broker.pub_lines("feeder", PREFIX + "/readings", rest)
        wait_data_time(broker, "2026-03-14T09:59:5")
        command(broker, "alice", {"id": "a-1", "segment": "KR-1", "alarm": "leak", "command": "acknowledge"})
        wait_for(lambda: [e for e in events_of(watcher) if e["cause"] == "acknowledged"], TIMEOUT, "the ack event")
        evs = check_dedup(events_of(watcher), "events across the broker restart")
        F.check(len(leak_raises(evs)) == 1 and leak_raises(evs)[0]["time"] == "2026-03-14T08:15:06.000Z",
                "the leak alarm arrived (once after de-duplication)")
        wait_for(lambda: open(os.path.join(daemon.dir, "journal", "acked")).read().strip() == str(len(evs)),
                 TIMEOUT, "the journal to be fully acknowledged")
        F.check(True, "journal fully acknowledged (%d events)" % len(evs))
        F.check("connection lost" in daemon.log_text(), "the daemon noticed the outage")

    elif scenario == "kill9":
        first = os.path.join(work, "first.jsonl")
        batches(readings, first, until="2026-03-14T07:40:00")
        broker.pub_lines("feeder", PREFIX + "/readings", first)
        wait_data_time(broker, "2026-03-14T07:39:5")
        time.sleep(1.5)  # a periodic checkpoint
        daemon.kill9()
        F.check(True, "daemon killed with SIGKILL at data time 07:39:5x")
        restart(daemon)
        wait_for(lambda: "resumed from" in daemon.log_text(), TIMEOUT, "the daemon to resume from its checkpoint")
        F.check(True, "daemon resumed from its checkpoint")
        rest = os.path.join(work, "rest.jsonl")
        batches(readings, rest, start="2026-03-14T07:40:00")
        broker.pub_lines("feeder", PREFIX + "/readings", rest)
        wait_for(lambda: leak_raises(events_of(watcher)), TIMEOUT, "the leak alarm after the restart")
        # Second kill right after the alarm is checkpointed: the restart must neither lose it nor raise
        # it again, and must keep numbering after it. (Killed between the journal write and the
        # checkpoint, the daemon keeps the number unique and delivers the journaled event, but may
        # raise the alarm again: engine_test covers that window without a broker.)
        wait_for(lambda: checkpoint_next_seq(daemon) >= 2, TIMEOUT, "the checkpoint to hold the alarm")
        daemon.kill9()
        restart(daemon)
        wait_for(lambda: daemon.log_text().count("resumed from") >= 2, TIMEOUT, "the second resume")
        command(broker, "alice", {"id": "a-1", "segment": "KR-1", "alarm": "leak", "command": "acknowledge"})
        wait_for(lambda: [e for e in events_of(watcher) if e["cause"] == "acknowledged"], TIMEOUT, "the ack event")
        evs = check_dedup(events_of(watcher), "events across two kill -9")
        early = [e for e in evs if e["time"] < LEAK_START]
        F.check(not early, "no alarm before the leak (false alarm after restart): %s" % early)
        raises = leak_raises(evs)
        F.check(len(raises) == 1 and raises[0]["time"] >= LEAK_START, "exactly one leak alarm, after the leak: %s" %
                [e["time"] for e in raises])
        ack = [e for e in evs if e["cause"] == "acknowledged"][0]
        F.check(ack["seq"] == raises[0]["seq"] + 1, "the ack continues the sequence after the restart")
        st = broker.get_retained("watcher", PREFIX + "/alarms/KR-1")
        F.check(st["alarms"]["leak"]["state"] == "ack_active", "restored state then acknowledged: ack_active")

    elif scenario == "malformed":
        bad = [
            ("readings/CF-FT-101", "not json"),
            ("readings/CF-FT-101", '{"time": "2026-03-14T06:00:00Z", "value": "12"}'),
            ("readings/CF-FT-101", '{"time": "2026-03-14T06:00:00Z", "value": 1e999}'),
            ("readings/CF-FT-101", '{"time": "2026-03-14T06:00:00Z", "value": NaN}'),
            ("readings/CF-FT-101", '{"time": "1970-01-01T00:00:00Z", "value": 1}'),
            ("readings/CF-FT-101", '{"time": "2999-01-01T00:00:00Z", "value": 1}'),
            ("readings/CF-FT-101", '{"time": "yesterday", "value": 1}'),
            ("readings/CF-FT-101", '{"time": 1773468000, "value": 1, "quality": "great"}'),
            ("readings/CF-FT-101", '{"time": 1773468000, "value": 1, "colour": "red"}'),
            ("readings/NO-SUCH-POINT", '{"time": 1773468000, "value": 1}'),
            ("readings", '[{"time": 1773468000, "value": 1}]'),
            ("readings", "[" * 5000),
            ("readings", '{"point": "CF-FT-101"}'),
            ("readings", "[]"),
            ("readings", "\x00\x01\x02"),
            ("readings/CF-FT-101", "x" * 200000),
            ("readings/CF-FT-101", "[" + ",".join(['{"time":1773468000,"value":1}'] * 1100) + "]"),
            ("commands/alice", "not json"),
            ("commands/alice", '{"id": "x", "segment": "KR-9", "alarm": "leak", "command": "acknowledge"}'),
            ("commands/alice", '{"id": "x", "segment": "KR-1", "alarm": "leak", "command": "suppress"}'),
        ]
        users = {"readings": "feeder", "commands": "alice"}
        for i in range(3):
            for sub, payload in bad:
                path = os.path.join(work, "payload.bin")
                with open(path, "w") as f:
                    f.write(payload)
                subprocess.run(["mosquitto_pub"] + broker.client_args(users[sub.split("/")[0]]) +
                               ["-q", "1", "-t", PREFIX + "/" + sub, "-f", path], timeout=60, capture_output=True)
        # Then good data still works end to end.
        broker.pub_lines("feeder", PREFIX + "/readings", all_lines)
        wait_for(lambda: leak_raises(events_of(watcher)), TIMEOUT, "the leak alarm after the barrage")
        F.check(daemon.proc.poll() is None, "the daemon survived the barrage")
        time.sleep(1.5)
        st = broker.get_retained("watcher", PREFIX + "/daemon")
        rej = st["readings_rejected"]
        print("rejections:", json.dumps(rej))
        for k in ("malformed_json", "wrong_type", "absurd_time", "bad_time", "bad_quality", "unknown_field",
                  "unknown_point", "oversized", "batch_too_large", "missing_field"):
            F.check(rej.get(k, 0) > 0, "counted %s: %d" % (k, rej.get(k, 0)))
        F.check(st["commands_rejected"] >= 9, "bad commands counted: %d" % st["commands_rejected"])
        log = daemon.log_text()
        F.check(log.count("rejected reading(s)") < 40, "rejection log lines are rate-limited (%d lines)" %
                log.count("rejected reading(s)"))
    else:
        print("unknown scenario " + scenario)
        sys.exit(2)
finally:
    watcher.stop()
F.exit(*logs)
