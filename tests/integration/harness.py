"""Starts the real lyapcastd on ephemeral loopback ports and talks to it.

Standard library only; runs under /usr/bin/python3. The daemon binary comes
from $LYAPCASTD (set by ctest), the sqlite3 shell from $LYAPCAST_SQLITE3.
"""

import json
import os
import shutil
import signal
import socket
import subprocess
import tempfile
import threading
import time
import urllib.request

LYAPCASTD = os.environ.get("LYAPCASTD", "lyapcastd")
CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")
SQLITE3 = os.environ.get("LYAPCAST_SQLITE3", "sqlite3")

FEED_YAML = """
  - id: loop-a
    channels: [flow, dtemp_h, dtemp_v]
    units: [m/s, K, K]
    step: 0.1s
  - id: rig-b
    channels: [x, v]
    step: 0.05s
"""


def daemon_config(db_path, feeds, extra=""):
    """A config on ephemeral loopback ports; `feeds` is YAML list text, `extra` more top-level keys."""
    return f"""
listen:
  ingest: 127.0.0.1:0
  http: 127.0.0.1:0
storage:
  path: {db_path}
  retention: 6h
{extra}
feeds:{feeds}"""


def base_config(db_path, extra=""):
    return daemon_config(db_path, FEED_YAML, extra)


class Daemon:
    """One lyapcastd process with its own folder; use as a context manager."""

    def __init__(self, workdir=None, config_text=None, extra_config=""):
        self.owns_dir = workdir is None
        self.dir = workdir or tempfile.mkdtemp(prefix="lyapcast-it-")
        self.db = os.path.join(self.dir, "window.db")
        self.config_path = os.path.join(self.dir, "lyapcast.yaml")
        if config_text is None:
            config_text = base_config(self.db, extra_config)
        with open(self.config_path, "w") as f:
            f.write(config_text)
        self.ready_path = os.path.join(self.dir, "ready.json")
        self.log_path = os.path.join(self.dir, "daemon.log")
        self.proc = None
        self.ingest_port = None
        self.http_port = None

    def start(self, timeout=30.0):
        if os.path.exists(self.ready_path):
            os.remove(self.ready_path)
        self.log = open(self.log_path, "ab")
        self.proc = subprocess.Popen(
            [LYAPCASTD, "--config", self.config_path, "--ready-file", self.ready_path],
            stdout=self.log, stderr=subprocess.STDOUT)
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"lyapcastd exited with {self.proc.returncode}:\n{self.read_log()}")
            if os.path.exists(self.ready_path):
                with open(self.ready_path) as f:
                    ready = json.load(f)
                self.ingest_port = ready["ingest_port"]
                self.http_port = ready["http_port"]
                assert ready["pid"] == self.proc.pid
                return self
            time.sleep(0.02)
        raise RuntimeError("lyapcastd did not become ready:\n" + self.read_log())

    def stop(self, sig=signal.SIGTERM, timeout=30.0):
        if self.proc is None or self.proc.poll() is not None:
            return self.proc.returncode if self.proc else None
        self.proc.send_signal(sig)
        try:
            code = self.proc.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
            raise AssertionError("lyapcastd did not stop within %.0fs:\n%s" % (timeout, self.read_log()))
        self.log.close()
        return code

    def kill(self):
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait()
        self.log.close()

    def read_log(self, tail=8000):
        """The daemon's log, its last `tail` characters (None: all of it)."""
        try:
            with open(self.log_path, "rb") as f:
                text = f.read().decode("utf-8", "replace")
        except OSError:
            return ""
        return text if tail is None else text[-tail:]

    def http_get(self, path, headers=None):
        req = urllib.request.Request(f"http://127.0.0.1:{self.http_port}{path}", headers=headers or {})
        try:
            with urllib.request.urlopen(req, timeout=10) as r:
                return r.status, json.loads(r.read() or b"null")
        except urllib.error.HTTPError as e:
            return e.code, json.loads(e.read() or b"null")

    def connect(self):
        return IngestClient(self.ingest_port)

    def sql(self, query):
        """Runs a query with the sqlite3 shell; returns rows as lists of strings."""
        out = subprocess.run([SQLITE3, "-readonly", "-separator", "|", self.db, query],
                             capture_output=True, text=True, timeout=120)
        if out.returncode != 0:
            raise AssertionError(f"sqlite3 failed: {out.stderr}")
        return [line.split("|") for line in out.stdout.splitlines()]

    def stored_times(self, feed):
        rows = self.sql("SELECT t_us FROM samples JOIN feeds USING (feed_id) "
                        f"WHERE feeds.name = '{feed}' ORDER BY t_us")
        return [int(r[0]) for r in rows]

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        try:
            if self.proc is not None and self.proc.poll() is None:
                self.proc.kill()
                self.proc.wait()
        finally:
            if self.owns_dir and not os.environ.get("LYAPCAST_KEEP_TEST_DIRS"):
                shutil.rmtree(self.dir, ignore_errors=True)


class IngestClient:
    """A TCP ingest connection with a background reader collecting replies."""

    def __init__(self, port):
        self.sock = socket.create_connection(("127.0.0.1", port), timeout=60)
        self.replies = []
        self.cond = threading.Condition()
        self.closed = False
        self.reader = threading.Thread(target=self._read, daemon=True)
        self.reader.start()

    def _read(self):
        buf = b""
        try:
            while True:
                chunk = self.sock.recv(65536)
                if not chunk:
                    break
                buf += chunk
                *lines, buf = buf.split(b"\n")
                if lines:
                    with self.cond:
                        self.replies.extend(l.decode() for l in lines)
                        self.cond.notify_all()
        except OSError:
            pass
        with self.cond:
            self.closed = True
            self.cond.notify_all()

    def send(self, data):
        if isinstance(data, str):
            data = data.encode("utf-8", "surrogateescape")  # "\udcff" sends the raw byte 0xff
        self.sock.sendall(data)

    def send_lines(self, lines):
        self.send("".join(l + "\n" for l in lines))

    def wait_replies(self, n, timeout=60.0):
        deadline = time.monotonic() + timeout
        with self.cond:
            while len(self.replies) < n and not self.closed:
                left = deadline - time.monotonic()
                if left <= 0:
                    break
                self.cond.wait(left)
            return list(self.replies)

    def wait_closed(self, timeout=30.0):
        deadline = time.monotonic() + timeout
        with self.cond:
            while not self.closed and time.monotonic() < deadline:
                self.cond.wait(max(0.0, deadline - time.monotonic()))
            return self.closed

    def close_write(self):
        self.sock.shutdown(socket.SHUT_WR)

    def close(self):
        try:
            self.sock.close()
        except OSError:
            pass


def fill_disk(path):
    """Writes `path` until the file system is full (ENOSPC), as another
    process writing logs would; remove the file to free the space."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT)
    try:
        while os.write(fd, b"\0" * 4096) > 0:
            pass
    except OSError:
        pass  # ENOSPC: the disk is full
    finally:
        os.close(fd)


def t_text(t_us):
    """Epoch seconds text with exact microseconds."""
    return "%d.%06d" % divmod(t_us, 1_000_000)


def now_us():
    return int(time.time() * 1_000_000)


def run_cli(*args, code=0, timeout=300):
    """Runs the lyapcast CLI; fails unless it exits `code` (None: any)."""
    out = subprocess.run([CLI, *args], capture_output=True, text=True, timeout=timeout)
    if code is not None and out.returncode != code:
        raise AssertionError(f"lyapcast {' '.join(args)} exited {out.returncode}, expected {code}:\n"
                             f"stdout: {out.stdout}\nstderr: {out.stderr}")
    return out


def wait_settled(d, feed_index=0, timeout=300):
    """Until the feed runs no job and nothing is due (lockstep leaves none behind); returns its /v1/feeds entry."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        _, body = d.http_get("/v1/feeds")
        feed = body["feeds"][feed_index]
        r = feed["retraining"]
        newest = feed["window"]["newest"]
        if not r["running"] and newest and r["next_due"] and r["next_due"]["epoch_s"] > newest["epoch_s"]:
            return feed
        time.sleep(0.05)
    raise AssertionError("retraining did not settle:\n" + d.read_log())
