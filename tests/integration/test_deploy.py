"""Deployment: the systemd unit, the sysusers entry, the example config, and
sd_notify readiness (READY=1 once both listeners are up, STOPPING=1 on
SIGTERM) sent to a NOTIFY_SOCKET this test owns.

Standard library only; runs under /usr/bin/python3 with $LYAPCASTD set (ctest
does). systemd-analyze and systemd-sysusers are used where present; without
them those checks skip with a message.
"""

import array
import json
import os
import re
import shutil
import signal
import socket
import struct
import subprocess
import tempfile
import time
import unittest
import urllib.request

import harness

HERE = os.path.dirname(os.path.abspath(__file__))
DEPLOY = os.path.normpath(os.path.join(HERE, "..", "..", "deploy"))
UNIT = os.path.join(DEPLOY, "lyapcastd.service")
SYSUSERS = os.path.join(DEPLOY, "lyapcast.sysusers")
EXAMPLE_CONFIG = os.path.join(DEPLOY, "lyapcast.example.yaml")
INSTALLED_BINARY = "/usr/local/bin/lyapcastd"


def daemon_binary():
    """The built lyapcastd as an absolute path (systemd needs one)."""
    path = harness.LYAPCASTD
    if os.sep not in path:
        path = shutil.which(path) or path
    return os.path.abspath(path)


def keep_dirs():
    return bool(os.environ.get("LYAPCAST_KEEP_TEST_DIRS"))


def unit_settings(text):
    """{(section, key): [values]} of a unit file (comments and blanks skipped)."""
    out, section = {}, None
    for line in text.splitlines():
        line = line.strip()
        if not line or line[0] in "#;":
            continue
        if line.startswith("[") and line.endswith("]"):
            section = line[1:-1]
            continue
        key, _, value = line.partition("=")
        out.setdefault((section, key.strip()), []).append(value.strip())
    return out


class UnitFileTest(unittest.TestCase):
    def setUp(self):
        self.dir = tempfile.mkdtemp(prefix="lyapcast-deploy-")

    def tearDown(self):
        if not keep_dirs():
            shutil.rmtree(self.dir, ignore_errors=True)

    def test_unit_declares_the_deployment_contract(self):
        with open(UNIT) as f:
            s = unit_settings(f.read())

        def one(key):
            values = s.get(("Service", key))
            self.assertIsNotNone(values, f"[Service] {key}= missing from {UNIT}")
            return values[-1]

        self.assertEqual(one("Type"), "notify")
        self.assertEqual(one("ExecStart"), INSTALLED_BINARY + " --config /etc/lyapcast/lyapcast.yaml")
        self.assertEqual(one("User"), "lyapcast")
        self.assertEqual(one("StateDirectory"), "lyapcast")
        self.assertEqual(one("ConfigurationDirectory"), "lyapcast")
        self.assertEqual(one("Restart"), "on-failure")
        self.assertEqual(one("CapabilityBoundingSet"), "")
        self.assertEqual(one("UMask"), "0077")
        for key in ("ProtectHome", "NoNewPrivileges", "PrivateTmp", "PrivateDevices", "ProtectKernelTunables",
                    "ProtectKernelModules", "ProtectKernelLogs", "ProtectControlGroups", "RestrictNamespaces",
                    "LockPersonality", "MemoryDenyWriteExecute"):
            self.assertEqual(one(key), "yes", key)
        self.assertEqual(one("ProtectSystem"), "strict")
        self.assertEqual(one("SystemCallArchitectures"), "native")
        self.assertEqual(s[("Service", "SystemCallFilter")][0], "@system-service")
        self.assertEqual(sorted(one("RestrictAddressFamilies").split()), ["AF_INET", "AF_INET6", "AF_UNIX"])
        # Enough descriptors for the default 256 ingest + 512 HTTP connections.
        self.assertGreaterEqual(int(one("LimitNOFILE")), 256 + 600)
        # Longer than the ingest shutdown grace (10 s) with room to commit.
        stop = one("TimeoutStopSec")
        self.assertTrue(stop.endswith("s"), stop)
        self.assertGreaterEqual(int(stop[:-1]), 30)

    def test_systemd_analyze_verify(self):
        analyze = shutil.which("systemd-analyze")
        if analyze is None:
            self.skipTest("systemd-analyze not found (Debian package systemd); unit not verified")
        binary = daemon_binary()
        self.assertTrue(os.access(binary, os.X_OK), f"LYAPCASTD={binary} is not an executable")
        # verify checks that the executables exist; /usr/local/bin/lyapcastd is
        # not installed here, so verify a copy pointing at the built binary.
        with open(UNIT) as f:
            text = f.read()
        self.assertIn(INSTALLED_BINARY, text)
        copy = os.path.join(self.dir, "lyapcastd.service")
        with open(copy, "w") as f:
            f.write(text.replace(INSTALLED_BINARY, binary))
        out = subprocess.run([analyze, "verify", copy], capture_output=True, text=True, timeout=120)
        output = out.stdout + out.stderr
        # Unknown keys and bad values are only warnings (exit status 0): any
        # line about our unit fails the test, lines about host units do not.
        ours = [line for line in output.splitlines() if "lyapcastd.service" in line]
        self.assertEqual(out.returncode, 0, output)
        self.assertEqual(ours, [], output)

    def test_sysusers_entry_creates_the_user(self):
        sysusers = shutil.which("systemd-sysusers")
        if sysusers is None:
            self.skipTest("systemd-sysusers not found (Debian package systemd); sysusers entry not checked")
        root = os.path.join(self.dir, "root")
        os.makedirs(os.path.join(root, "etc"))
        out = subprocess.run([sysusers, "--root=" + root, SYSUSERS], capture_output=True, text=True, timeout=60)
        self.assertEqual(out.returncode, 0, out.stdout + out.stderr)
        with open(os.path.join(root, "etc", "passwd")) as f:
            users = {line.split(":")[0]: line.strip().split(":") for line in f if line.strip()}
        self.assertIn("lyapcast", users)
        self.assertEqual(users["lyapcast"][5], "/var/lib/lyapcast")
        self.assertIn(users["lyapcast"][6], ("/usr/sbin/nologin", "/sbin/nologin", "/bin/false"))

    def test_example_config_is_valid(self):
        out = subprocess.run([daemon_binary(), "--check-config", EXAMPLE_CONFIG], capture_output=True, text=True,
                             timeout=60)
        self.assertEqual(out.returncode, 0, out.stdout + out.stderr)
        with open(EXAMPLE_CONFIG) as f:
            text = f.read()
        self.assertIn("path: /var/lib/lyapcast/", text)
        self.assertRegex(text, r"\n  http: 127\.0\.0\.1:")


class NotifySocket:
    """An AF_UNIX datagram socket standing in for systemd's NOTIFY_SOCKET.
    Records each message with the sender's pid (SCM_CREDENTIALS), which is
    how systemd attributes it to the main process (NotifyAccess=main)."""

    def __init__(self, path):
        self.path = path
        self.sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
        self.sock.bind(path)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_PASSCRED, 1)

    def receive(self, timeout):
        """(fields dict, sender pid), or None on timeout."""
        self.sock.settimeout(timeout)
        try:
            data, ancillary, _, _ = self.sock.recvmsg(4096, socket.CMSG_SPACE(struct.calcsize("3i")))
        except socket.timeout:
            return None
        pid = None
        for level, kind, payload in ancillary:
            if level == socket.SOL_SOCKET and kind == socket.SCM_CREDENTIALS:
                pid = array.array("i", payload[:struct.calcsize("3i")])[0]
        fields = {}
        for line in data.decode("utf-8").split("\n"):
            if line:
                key, _, value = line.partition("=")
                fields[key] = value
        return fields, pid

    def wait_for(self, key, deadline, proc, log):
        """Messages until one holds `key`; fails if the daemon exits first."""
        seen = []
        while time.monotonic() < deadline:
            got = self.receive(0.2)
            if got is not None:
                seen.append(got)
                if key in got[0]:
                    return got, seen
            elif proc.poll() is not None:
                raise AssertionError(f"lyapcastd exited ({proc.returncode}) before {key}:\n{log()}")
        raise AssertionError(f"no {key} within the timeout (messages: {seen}):\n{log()}")

    def close(self):
        self.sock.close()


class SdNotifyTest(unittest.TestCase):
    def setUp(self):
        self.dir = tempfile.mkdtemp(prefix="lyapcast-notify-")
        self.config = os.path.join(self.dir, "lyapcast.yaml")
        with open(self.config, "w") as f:
            f.write(harness.base_config(os.path.join(self.dir, "window.db")))
        self.ready_path = os.path.join(self.dir, "ready.json")
        self.log_path = os.path.join(self.dir, "daemon.log")
        self.log = open(self.log_path, "ab")
        self.proc = None

    def tearDown(self):
        if self.proc is not None and self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait()
        self.log.close()
        if not keep_dirs():
            shutil.rmtree(self.dir, ignore_errors=True)

    def read_log(self):
        with open(self.log_path, "rb") as f:
            return f.read().decode("utf-8", "replace")[-8000:]

    def start(self, notify_socket):
        env = dict(os.environ)
        env["NOTIFY_SOCKET"] = notify_socket
        self.proc = subprocess.Popen(
            [daemon_binary(), "--config", self.config, "--ready-file", self.ready_path, "--log-level", "debug"],
            stdout=self.log, stderr=subprocess.STDOUT, env=env)

    def wait_ready(self, timeout=60):
        deadline = time.monotonic() + timeout
        while not os.path.exists(self.ready_path):
            if self.proc.poll() is not None:
                raise AssertionError(f"lyapcastd exited ({self.proc.returncode}):\n{self.read_log()}")
            self.assertLess(time.monotonic(), deadline, "lyapcastd did not become ready:\n" + self.read_log())
            time.sleep(0.02)

    def stop(self, timeout=60):
        self.proc.send_signal(signal.SIGTERM)
        try:
            return self.proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
            raise AssertionError("lyapcastd did not stop:\n" + self.read_log())

    def test_ready_after_listeners_and_stopping_on_sigterm(self):
        notify = NotifySocket(os.path.join(self.dir, "notify.sock"))
        try:
            self.start(notify.path)
            deadline = time.monotonic() + 60
            (fields, pid), _ = notify.wait_for("READY", deadline, self.proc, self.read_log)
            self.assertEqual(fields["READY"], "1")
            self.assertEqual(pid, self.proc.pid, "READY=1 must come from the main process (NotifyAccess=main)")

            # Both listeners were up before READY=1: the ready file (written
            # once they listen) is there, and both ports accept right away.
            self.assertTrue(os.path.exists(self.ready_path), "READY=1 arrived before the ready file")
            with open(self.ready_path) as f:
                ready = json.load(f)
            status = fields.get("STATUS", "")
            m = re.search(r"ingest on 127\.0\.0\.1:(\d+), HTTP on 127\.0\.0\.1:(\d+)", status)
            self.assertIsNotNone(m, f"STATUS should name both ports: {status!r}")
            self.assertEqual((int(m.group(1)), int(m.group(2))), (ready["ingest_port"], ready["http_port"]))
            socket.create_connection(("127.0.0.1", ready["ingest_port"]), timeout=10).close()
            url = f"http://127.0.0.1:{ready['http_port']}/v1/heartbeat"
            with urllib.request.urlopen(url, timeout=10) as r:
                self.assertEqual(r.status, 200)

            # A sample goes in and is acknowledged, as without systemd.
            client = harness.IngestClient(ready["ingest_port"])
            client.send_lines([f"loop-a,{time.time() - 1:.3f},0.31,1.2,-0.4"])
            self.assertEqual(client.wait_replies(1), ["ok 1"])
            client.close()

            self.proc.send_signal(signal.SIGTERM)
            (fields, pid), _ = notify.wait_for("STOPPING", time.monotonic() + 60, self.proc, self.read_log)
            self.assertEqual(fields["STOPPING"], "1")
            self.assertEqual(pid, self.proc.pid)
            self.assertEqual(self.proc.wait(timeout=60), 0, self.read_log())
        finally:
            notify.close()

    def test_unreachable_notify_socket_does_not_stop_the_daemon(self):
        # NOTIFY_SOCKET names a path where nobody listens: the notification
        # fails, the daemon says so and serves anyway.
        self.start(os.path.join(self.dir, "nobody-listens.sock"))
        self.wait_ready()
        with open(self.ready_path) as f:
            ready = json.load(f)
        with urllib.request.urlopen(f"http://127.0.0.1:{ready['http_port']}/v1/heartbeat", timeout=10) as r:
            self.assertEqual(r.status, 200)
        self.assertEqual(self.stop(), 0, self.read_log())
        log = self.read_log()
        self.assertIn("cannot send READY=1 to NOTIFY_SOCKET", log)
        self.assertIn("lyapcastd stopped", log)

    def test_without_notify_socket_nothing_is_sent(self):
        # The environment of the other integration tests: no NOTIFY_SOCKET,
        # no systemd messages in the log, a clean start and stop.
        env = {k: v for k, v in os.environ.items() if k != "NOTIFY_SOCKET"}
        self.proc = subprocess.Popen(
            [daemon_binary(), "--config", self.config, "--ready-file", self.ready_path, "--log-level", "debug"],
            stdout=self.log, stderr=subprocess.STDOUT, env=env)
        self.wait_ready()
        self.assertEqual(self.stop(), 0, self.read_log())
        self.assertNotIn("systemd:", self.read_log())


if __name__ == "__main__":
    unittest.main()
