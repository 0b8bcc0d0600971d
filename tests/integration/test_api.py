"""The HTTP API contract (docs/http-api.md) through real HTTP against the
real lyapcastd: every endpoint of its table and every documented
error status, the Prometheus exposition (checked with `promtool check
metrics` and against /status), and bearer-token scopes.

One lockstep daemon serves most tests (ApiTest): a Lorenz-63 feed `lorenz`
(sigma 10, r 28, beta 8/3, as test_retraining) fed 30 s of simulated data
(fixed --seed and --start) trains its first model at 15 s of data
(min_pairs 1200 of 10 ms steps plus the validation share), and an
operator's retrain then gives version 2; the cadence (50 Lyapunov times,
clamped to [30 s, 60 s]) puts the next cadence retrain after the end of the
stream, so only the operator's retrains add versions (the retrain test sends
5 s more data first). `sparse` has a few samples and no model, `idle` has nothing. The
health thresholds of `lorenz` are wide (data age 1 h, drift 50, model age
1000 Lyapunov times) so its verdict is normal however slowly the machine runs.
Small daemons cover a feed in alarm (data_age_alarm 1s) and the token
configurations.

Standard library only; /usr/bin/python3; $LYAPCASTD, $LYAPCAST_CLI and
$LYAPCAST_SQLITE3 as ctest sets them."""

import calendar
import csv
import http.client
import io
import json
import math
import os
import re
import shutil
import socket
import subprocess
import tempfile
import time
import unittest
import urllib.parse

import harness
from harness import Daemon, IngestClient, daemon_config, fill_disk

CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")
START = "2026-01-01T00:00:00Z"
START_S = 1767225600

LORENZ = """
  - id: lorenz
    channels: [x, y, z]
    units: [m, m/s, K]
    step: 10ms
    dynamics:
      equations: {x: "s*(y - x)", y: "x*(r - z) - y", z: "x*y - b*z"}
      constants: {s: 10, r: 28, b: 2.6666666666666667}
    model: {hidden: [32, 32]}
    retrain: {lyapunov_fraction: 50, min_interval: 30s, max_interval: 60s, min_pairs: 1200, iterations: 400,
              batch: 128, learning_rate: 0.003}
    monitor: {change_threshold: 1000}
    health: {drift_alert: 50, drift_alarm: 100, data_age_alert: 1h, data_age_alarm: 2h,
             model_age_alert_lyapunov: 1000, model_age_alarm_lyapunov: 2000}
  - id: sparse
    channels: [a, b]
    step: 1s
  - id: idle
    channels: [p, q]
    units: [K, bar]
    step: 1s
"""

STALE = """
  - id: stale
    channels: [v]
    step: 100ms
    health: {data_age_alert: 500ms, data_age_alarm: 1s}
"""

SMALL = """
  - id: loop
    channels: [v]
    step: 100ms
"""


def config(db, feeds, extra=""):
    return daemon_config(db, feeds, extra)


def run_cli(*args, timeout=120):
    out = subprocess.run([CLI, *args], capture_output=True, text=True, timeout=timeout)
    if out.returncode != 0:
        raise AssertionError(f"lyapcast {' '.join(args)} exited {out.returncode}:\n{out.stderr}")
    return out


def find_promtool():
    for candidate in (shutil.which("promtool"), "/usr/bin/promtool"):
        if candidate and os.access(candidate, os.X_OK):
            return candidate
    return None


# ---------------------------------------------------------------- HTTP

class Response:
    def __init__(self, status, headers, body):
        self.status = status
        self.headers = headers  # lower-case names
        self.body = body

    def json(self):
        return json.loads(self.body)

    def text(self):
        return self.body.decode("utf-8")

    def __repr__(self):
        return f"HTTP {self.status} {self.headers} {self.body[:600]!r}"


def request(port, method, path, headers=None, body=None, token=None):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    try:
        hdrs = dict(headers or {})
        if token is not None:
            hdrs["Authorization"] = f"Bearer {token}"
        conn.request(method, path, body=body, headers=hdrs)
        r = conn.getresponse()
        data = r.read()
        return Response(r.status, {k.lower(): v for k, v in r.getheaders()}, data)
    finally:
        conn.close()


def raw_exchange(port, data):
    """Sends raw bytes, reads until the server closes; returns (status, headers, body)."""
    with socket.create_connection(("127.0.0.1", port), timeout=10) as s:
        s.sendall(data)
        buf = b""
        while True:
            try:
                chunk = s.recv(65536)
            except ConnectionResetError:
                break
            if not chunk:
                break
            buf += chunk
    head, _, body = buf.partition(b"\r\n\r\n")
    lines = head.decode("latin-1").split("\r\n")
    if not lines or not lines[0].startswith("HTTP/1.1 "):
        raise AssertionError(f"no HTTP response: {buf[:300]!r}")
    status = int(lines[0].split()[1])
    headers = {}
    for line in lines[1:]:
        k, _, v = line.partition(":")
        headers[k.strip().lower()] = v.strip()
    return Response(status, headers, body)


# ---------------------------------------------------------------- values

RFC3339_RE = re.compile(r"^(\d{4})-(\d\d)-(\d\d)T(\d\d):(\d\d):(\d\d)(?:\.(\d{1,9}))?Z$")


def rfc_to_us(text):
    m = RFC3339_RE.match(text)
    if not m:
        raise AssertionError(f"not an RFC 3339 UTC time: {text!r}")
    y, mo, d, h, mi, s, frac = m.groups()
    whole = calendar.timegm((int(y), int(mo), int(d), int(h), int(mi), int(s), 0, 0, 0))
    micros = int((frac or "0").ljust(6, "0")[:6])
    return whole * 1_000_000 + micros


def time_us(t):
    """A time object {"epoch_s", "rfc3339"} -> µs (checks both forms agree)."""
    us = rfc_to_us(t["rfc3339"])
    assert abs(t["epoch_s"] * 1e6 - us) < 2, t
    return us


def epoch_text_to_us(text):
    whole, _, frac = text.partition(".")
    return int(whole) * 1_000_000 + int(frac.ljust(6, "0")[:6])


def parse_ingest_csv(line):
    """'feed,epoch,v,...' -> (feed, t_us, [float|None])."""
    fields = line.split(",")
    return fields[0], epoch_text_to_us(fields[1]), [float(v) if v != "" else None for v in fields[2:]]


def is_num(v):
    return isinstance(v, (int, float)) and not isinstance(v, bool)


class Opt:
    """A value that may be null."""

    def __init__(self, spec):
        self.spec = spec


def check_shape(test, value, spec, path="$"):
    """Every key of `spec` present with a value of the given kind."""
    if isinstance(spec, Opt):
        if value is None:
            return
        spec = spec.spec
    if isinstance(spec, dict):
        test.assertIsInstance(value, dict, path)
        for key, sub in spec.items():
            test.assertIn(key, value, f"{path} lacks {key!r}: {value}")
            check_shape(test, value[key], sub, f"{path}.{key}")
    elif isinstance(spec, list):
        test.assertIsInstance(value, list, path)
        for i, item in enumerate(value):
            check_shape(test, item, spec[0], f"{path}[{i}]")
    elif spec == "int":
        test.assertTrue(isinstance(value, int) and not isinstance(value, bool), f"{path}: {value!r} is not an integer")
    elif spec == "num":
        test.assertTrue(is_num(value), f"{path}: {value!r} is not a number")
    elif spec == "str":
        test.assertIsInstance(value, str, path)
    elif spec == "bool":
        test.assertIsInstance(value, bool, path)
    elif spec == "time":
        test.assertIsInstance(value, dict, path)
        test.assertTrue(is_num(value.get("epoch_s")), f"{path}.epoch_s: {value}")
        test.assertRegex(value.get("rfc3339", ""), RFC3339_RE, f"{path}.rfc3339")
        time_us(value)
    elif spec == "any":
        pass
    else:
        raise ValueError(spec)


TIME = "time"
THRESHOLDS = {"drift_alert": "num", "drift_alarm": "num", "data_age_alert_s": "num", "data_age_alarm_s": "num",
              "model_age_alert_lyapunov": "num", "model_age_alarm_lyapunov": "num",
              "model_age_alert_derived": "bool", "model_age_alarm_derived": "bool"}
JOB = {"id": "int", "feed": "str", "trigger": "str", "trigger_reason": "str", "state": "str", "until": Opt(TIME),
       "parent": Opt("int"), "verdict": Opt("str"), "version": Opt("int"), "outcome": "str",
       "validation_error": Opt("num"), "active_error": Opt("num"), "iterations": "int", "seconds": "num"}
STATUS = {
    "feed": "str", "paused": "bool",
    "health": {"verdict": "str", "reasons": ["str"], "thresholds": THRESHOLDS},
    "window": {"samples": "int", "oldest": Opt(TIME), "newest": Opt(TIME)},
    "model": Opt({"version": "int", "trained_from": TIME, "trained_to": TIME, "validation_error": Opt("num"),
                  "lyapunov_per_s": Opt("num"), "created_at": "str", "origin": "str"}),
    "drift": {"ratio": Opt("num"), "rmse_window": Opt("num"), "rmse_ewma": Opt("num"),
              "validation_error": Opt("num"), "scored": "int", "last_error": Opt("num"),
              "change_statistic": "num", "warming_up": "bool", "flag": "bool", "flagged_at": Opt(TIME),
              "alarms": "int"},
    "staleness": {"data_age_s": Opt("num"), "model_age_s": Opt("num"), "since_training_s": Opt("num"),
                  "since_training_lyapunov_times": Opt("num")},
    "lyapunov": {"model": Opt({"per_s": "num"}), "dynamics": Opt({"per_s": "num", "diagnostics": "str"}),
                 "data": Opt({"per_s": "num", "diagnostics": "str"}),
                 "chosen": Opt({"per_s": "num", "source": "str", "lyapunov_time_s": Opt("num")})},
    "cadence": {"last_retrain": Opt(TIME), "next_due": Opt(TIME), "reason": "str", "running": "bool",
                "pending": "bool"},
    "last_job": Opt({"id": "int", "trigger": "str", "state": "str", "verdict": Opt("str"), "version": Opt("int"),
                     "outcome": "str", "iterations": "int", "seconds": "num"}),
    "jobs": {"promoted": "int", "rejected": "int", "not_enough_data": "int", "failed": "int", "coalesced": "int"},
}
MODEL = {"version": "int", "status": "str", "origin": "str", "reason": "str", "parent": Opt("int"), "created_at": "str",
         "trained_from": TIME, "trained_to": TIME, "validation_error": Opt("num"), "lyapunov_per_s": Opt("num"),
         "details": "any"}
FORECAST = {"feed": "str", "model_version": "int", "channels": ["str"], "step_s": "num", "from": TIME,
            "start": ["num"],
            "lyapunov": Opt({"per_s": "num", "source": "str", "lyapunov_time_s": Opt("num")}),
            "horizon": {"seconds": Opt("num"), "lyapunov_times": Opt("num"), "e0": Opt("num"), "tol": "num",
                        "reason": Opt("str")},
            "staleness": STATUS["staleness"],
            "points": [{"t": TIME, "values": [Opt("num")], "beyond_horizon": "bool"}],
            "advisory": "str"}
VERDICTS = {"normal", "alert", "alarm", "indeterminate"}
JOB_VERDICTS = {"promoted", "rejected", "not_enough_data", "cancelled", None}


# ---------------------------------------------------------------- metrics

METRIC_RE = re.compile(r"^([a-zA-Z_:][a-zA-Z0-9_:]*)(?:\{(.*)\})?\s+(\S+)(?:\s+-?\d+)?$")
LABEL_RE = re.compile(r'\s*([a-zA-Z_][a-zA-Z0-9_]*)="((?:[^"\\]|\\.)*)"\s*(?:,|$)')


def parse_metrics(text):
    """Prometheus text format -> ({family: type}, [(name, {labels}, value)])."""
    types, samples = {}, []
    for line in text.splitlines():
        if not line.strip():
            continue
        if line.startswith("# TYPE "):
            _, _, name, kind = line.split(" ", 3)
            types[name] = kind
            continue
        if line.startswith("#"):
            continue
        m = METRIC_RE.match(line)
        if not m:
            raise AssertionError(f"unparsable metrics line: {line!r}")
        name, labels_text, value = m.groups()
        labels = dict(LABEL_RE.findall(labels_text or ""))
        samples.append((name, labels, float(value)))
    return types, samples


def metric(samples, name, **labels):
    found = [v for n, l, v in samples if n == name and all(l.get(k) == str(x) for k, x in labels.items())]
    return found[0] if len(found) == 1 else (None if not found else found)


class ApiAssertions:
    """Mixed into the test classes; needs self.port."""

    def get(self, path, **kw):
        return request(self.port, "GET", path, **kw)

    def post(self, path, **kw):
        return request(self.port, "POST", path, **kw)

    def get_json(self, path, status=200, **kw):
        r = self.get(path, **kw)
        self.assertEqual(r.status, status, r)
        self.assertTrue(r.headers.get("content-type", "").startswith("application/json"), r)
        return r.json()

    def assert_error(self, r, status, code=None, mentions=()):
        """A JSON error {"error": {"code", "message"}} whose message names what was wrong."""
        self.assertEqual(r.status, status, r)
        self.assertTrue(r.headers.get("content-type", "").startswith("application/json"), r)
        body = r.json()
        self.assertEqual(set(body), {"error"}, body)
        self.assertIsInstance(body["error"].get("code"), str, body)
        self.assertIsInstance(body["error"].get("message"), str, body)
        self.assertTrue(body["error"]["message"], body)
        if code is not None:
            self.assertEqual(body["error"]["code"], code, body)
        for word in mentions:
            self.assertIn(word, body["error"]["message"], body)
        return body["error"]


# ---------------------------------------------------------------- the main daemon

class ApiTest(unittest.TestCase, ApiAssertions):
    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.mkdtemp(prefix="lyapcast-api-it-")
        if not os.environ.get("LYAPCAST_KEEP_TEST_DIRS"):
            cls.addClassCleanup(shutil.rmtree, cls.dir, ignore_errors=True)
        workdir = os.path.join(cls.dir, "daemon")
        os.makedirs(workdir)
        text = config(os.path.join(workdir, "window.db"), LORENZ, "training: {threads: 1, lockstep: true}")
        cls.d = Daemon(workdir=workdir, config_text=text)
        cls.addClassCleanup(cls.d.__exit__)
        cls.addClassCleanup(cls.stop_cleanly)  # runs first
        stream = os.path.join(cls.dir, "stream.csv")
        run_cli("simulate", "-c", cls.d.config_path, "--feed", "lorenz", "--duration", "40s", "--transient", "20s",
                "--start", START, "--seed", "7", "--noise", "0.002", "-o", stream)
        with open(stream) as f:
            cls.lines = f.read().splitlines()
        assert len(cls.lines) == 4000, len(cls.lines)
        # Missing channels, after the first model's data (so its training
        # pairs are exactly as planned), and on the last sample that
        # test_retrain... sends (so a forecast from "latest" predicts it).
        for i in list(range(2003, 4000, 97)) + [2998, 3499]:
            fields = cls.lines[i].split(",")
            fields[2 + i % 3] = ""
            cls.lines[i] = ",".join(fields)
        cls.sent = {}  # (feed, t_us) -> values
        for line in cls.lines:
            feed, t, values = parse_ingest_csv(line)
            cls.sent[(feed, t)] = values
        cls.sparse_lines = [f"sparse,{START_S + k}.500000,{0.25 * k},{'' if k % 3 else -k}" for k in range(12)]
        for line in cls.sparse_lines:
            feed, t, values = parse_ingest_csv(line)
            cls.sent[(feed, t)] = values

        cls.d.start()
        cls.port = cls.d.http_port
        # What a feed looks like before it has data or a model.
        cls.before_status = request(cls.port, "GET", "/v1/feeds/lorenz/status")
        cls.before_health = request(cls.port, "GET", "/v1/health")
        cls.before_forecast = request(cls.port, "GET", "/v1/feeds/lorenz/forecast")

        client = IngestClient(cls.d.ingest_port)
        bad = ["nosuch,1767225600.5,1", "lorenz,1767225600.505,abc,1,2", "lorenz,1767225600.515,1,2"]
        first = cls.sparse_lines + bad + cls.lines[:3000]
        client.send_lines(first)
        replies = client.wait_replies(len(first), timeout=300)
        client.close()
        assert len(replies) == len(first), replies[-3:]
        n = len(cls.sparse_lines)
        assert all(r.startswith("ok") for r in replies[:n] + replies[n + 3:]), [r for r in replies if "error" in r]
        assert [r.split()[2] for r in replies[n:n + 3]] == ["unknown-feed", "not-a-number", "field-count"], replies
        cls.rejected = {"unknown-feed": 1, "not-a-number": 1, "field-count": 1}
        cls.wait_idle(cls, need_model=True)
        # A reply comes once a sample is committed; the scheduler sees it
        # just after. An operator's job uses what the scheduler has seen, so
        # wait until it saw the last sample (complete, so the forecast's
        # default start shows it) to make the next version reproducible.
        cls.wait_latest(cls, parse_ingest_csv(cls.lines[2999])[1])
        # A second version from an operator's retrain (promoted or rejected).
        r = request(cls.port, "POST", "/v1/feeds/lorenz/retrain")
        assert r.status == 202, r
        job = cls.wait_job(cls, r.json()["job"])
        assert job["verdict"] in ("promoted", "rejected"), f"{job}\n{cls.d.read_log()}"

    @classmethod
    def stop_cleanly(cls):
        """SIGTERM after all the requests: the daemon exits 0 (no route crashed it)."""
        if cls.d.proc is not None and cls.d.proc.poll() is None:
            code = cls.d.stop()
            assert code == 0, f"lyapcastd exited {code}:\n{cls.d.read_log()}"
        elif cls.d.proc is not None:
            raise AssertionError(f"lyapcastd died ({cls.d.proc.returncode}):\n{cls.d.read_log()}")

    # The helpers below also serve setUpClass, called there with the class as self.
    def wait_idle(self, need_model=False, timeout=120):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            s = request(self.port, "GET", "/v1/feeds/lorenz/status").json()
            c = s["cadence"]
            if not c["running"] and not c["pending"] and (s["model"] or not need_model):
                return s
            time.sleep(0.05)
        raise AssertionError("lorenz did not settle:\n" + self.d.read_log())

    def wait_latest(self, t_us, timeout=60):
        """Until a forecast from "latest" starts at data time t_us."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            r = request(self.port, "GET", "/v1/feeds/lorenz/forecast?steps=1")
            if r.status == 200 and time_us(r.json()["from"]) == t_us:
                return
            time.sleep(0.02)
        raise AssertionError(f"the forecast does not start at {t_us}:\n" + self.d.read_log())

    def wait_job(self, job, timeout=120):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            r = request(self.port, "GET", f"/v1/feeds/lorenz/jobs/{job}")
            assert r.status == 200, r
            if r.json()["state"] == "done":
                return r.json()
            time.sleep(0.05)
        raise AssertionError(f"job {job} did not finish:\n" + self.d.read_log())

    def status(self, feed="lorenz"):
        return self.get_json(f"/v1/feeds/{feed}/status")

    def stored(self, feed):
        return self.d.stored_times(feed)

    # ------------------------------------------------------------ health

    def test_heartbeat(self):
        body = self.get_json("/v1/heartbeat")
        self.assertIs(body["alive"], True)
        self.assertIsInstance(body["version"], str)
        self.assertTrue(body["version"])
        self.assertTrue(is_num(body["uptime_s"]) and body["uptime_s"] >= 0, body)
        self.assertIs(body["storage_available"], True)

    def test_health_per_feed_verdicts_indeterminate_before_data_and_model(self):
        before = self.before_health
        self.assertEqual(before.status, 200, before)
        b = before.json()
        self.assertEqual(b["status"], "indeterminate")
        for f in b["feeds"]:
            self.assertEqual(f["verdict"], "indeterminate", b)
            self.assertEqual(f["reasons"], ["no sample received yet", "no model yet"], b)

        body = self.get_json("/v1/health")
        check_shape(self, body, {"status": "str", "storage_available": "bool",
                                 "feeds": [{"id": "str", "verdict": "str", "reasons": ["str"]}]})
        feeds = {f["id"]: f for f in body["feeds"]}
        self.assertEqual(list(feeds), ["lorenz", "sparse", "idle"])
        self.assertEqual(feeds["lorenz"]["verdict"], "normal", body)
        self.assertEqual(feeds["lorenz"]["reasons"], [], body)
        self.assertEqual(feeds["sparse"]["verdict"], "indeterminate")
        self.assertEqual(feeds["sparse"]["reasons"], ["no model yet"])
        self.assertEqual(feeds["idle"]["verdict"], "indeterminate")
        self.assertEqual(feeds["idle"]["reasons"], ["no sample received yet", "no model yet"])
        # The worst feed's verdict, indeterminate counting above normal and below alert.
        self.assertEqual(body["status"], "indeterminate")
        self.assertIs(body["storage_available"], True)
        for feed in feeds:
            s = self.status(feed)
            self.assertEqual(s["health"]["verdict"], feeds[feed]["verdict"])
            self.assertEqual(s["health"]["reasons"], feeds[feed]["reasons"])

    # ------------------------------------------------------------ feeds and status

    def test_feeds_lists_channels_units_step_window_model_and_retraining(self):
        body = self.get_json("/v1/feeds")
        self.assertIs(body["storage_available"], True)
        feeds = {f["id"]: f for f in body["feeds"]}
        self.assertEqual(list(feeds), ["lorenz", "sparse", "idle"])
        lorenz = feeds["lorenz"]
        self.assertEqual(lorenz["channels"], [{"name": "x", "unit": "m"}, {"name": "y", "unit": "m/s"},
                                              {"name": "z", "unit": "K"}])
        self.assertEqual(feeds["idle"]["channels"], [{"name": "p", "unit": "K"}, {"name": "q", "unit": "bar"}])
        self.assertEqual(lorenz["step_s"], 0.01)
        self.assertEqual(feeds["idle"]["step_s"], 1)
        for feed in ("lorenz", "sparse", "idle"):
            times = self.stored(feed)
            w = feeds[feed]["window"]
            self.assertEqual(w["samples"], len(times), feed)
            if times:
                self.assertEqual(time_us(w["oldest"]), times[0])
                self.assertEqual(time_us(w["newest"]), times[-1])
            else:
                self.assertIsNone(w["oldest"])
                self.assertIsNone(w["newest"])
        status = self.status()
        self.assertEqual(lorenz["model"]["version"], status["model"]["version"])
        check_shape(self, lorenz["model"], {"version": "int", "trained_to": TIME, "validation_error": Opt("num"),
                                            "lyapunov_per_s": Opt("num")})
        check_shape(self, lorenz["retraining"], {"next_due": Opt(TIME), "last_retrain": Opt(TIME), "running": "bool",
                                                 "paused": "bool", "promoted": "int", "rejected": "int",
                                                 "failed": "int"})
        self.assertIsNone(feeds["idle"]["model"])
        self.assertIsNone(feeds["sparse"]["model"])
        self.assertEqual(body["ingest"]["accepted"], len(self.lines[:3000]) + len(self.sparse_lines)
                         + self.extra_accepted())

    def extra_accepted(self):
        return getattr(type(self), "accepted_later", 0)

    def test_status_keys_and_types_before_and_after_a_model(self):
        self.assertEqual(self.before_status.status, 200, self.before_status)
        before = self.before_status.json()
        check_shape(self, before, STATUS)
        self.assertEqual(before["feed"], "lorenz")
        self.assertIsNone(before["model"])
        self.assertIsNone(before["last_job"])
        self.assertEqual(before["window"], {"samples": 0, "oldest": None, "newest": None})
        self.assertIsNone(before["staleness"]["data_age_s"])
        self.assertIsNone(before["drift"]["ratio"])
        self.assertEqual(before["health"]["verdict"], "indeterminate")

        for feed in ("idle", "sparse"):
            s = self.status(feed)
            check_shape(self, s, STATUS)
            self.assertEqual(s["feed"], feed)
            self.assertIsNone(s["model"])
            self.assertIsNone(s["staleness"]["model_age_s"])
            self.assertIs(s["paused"], False)
        self.assertEqual(self.status("sparse")["window"]["samples"], len(self.sparse_lines))
        self.assertIsNotNone(self.status("sparse")["staleness"]["data_age_s"])

        s = self.status()
        check_shape(self, s, STATUS)
        self.assertIn(s["health"]["verdict"], VERDICTS)
        self.assertEqual(s["health"]["thresholds"], {"drift_alert": 50, "drift_alarm": 100, "data_age_alert_s": 3600,
                                                     "data_age_alarm_s": 7200, "model_age_alert_lyapunov": 1000,
                                                     "model_age_alarm_lyapunov": 2000,
                                                     "model_age_alert_derived": False,
                                                     "model_age_alarm_derived": False})
        # After a model exists, these figures are known.
        self.assertIsNotNone(s["model"])
        self.assertIsNotNone(s["last_job"])
        self.assertIn(s["last_job"]["verdict"], JOB_VERDICTS)
        self.assertEqual(s["last_job"]["state"], "done")
        self.assertGreater(s["drift"]["scored"], 0)
        self.assertIsNotNone(s["drift"]["rmse_window"])
        for key in ("data_age_s", "model_age_s", "since_training_s", "since_training_lyapunov_times"):
            self.assertIsNotNone(s["staleness"][key], key)
        self.assertIsNotNone(s["lyapunov"]["model"])
        self.assertIsNotNone(s["lyapunov"]["dynamics"])
        # The cadence and the horizon follow the largest positive estimate.
        estimates = {k: s["lyapunov"][k]["per_s"] for k in ("model", "dynamics", "data")
                     if s["lyapunov"][k] is not None and s["lyapunov"][k]["per_s"] > 0}
        fastest = max(estimates, key=lambda k: estimates[k])
        self.assertEqual(s["lyapunov"]["chosen"]["source"], fastest, estimates)
        self.assertEqual(s["lyapunov"]["chosen"]["per_s"], estimates[fastest])
        self.assertAlmostEqual(s["lyapunov"]["chosen"]["lyapunov_time_s"], 1 / s["lyapunov"]["chosen"]["per_s"])
        self.assertIsNotNone(s["cadence"]["last_retrain"])
        self.assertIsNotNone(s["cadence"]["next_due"])
        self.assertGreaterEqual(s["jobs"]["promoted"], 1)
        times = self.stored("lorenz")
        self.assertEqual(s["window"]["samples"], len(times))
        self.assertEqual(time_us(s["window"]["newest"]), times[-1])

    # ------------------------------------------------------------ forecast

    def forecast(self, query="", status=200, **kw):
        return self.get_json("/v1/feeds/lorenz/forecast" + query, status=status, **kw)

    def complete_sample_near(self, seconds):
        """The stored complete sample of lorenz at or just after START + seconds."""
        r = self.get_json(f"/v1/feeds/lorenz/samples?from={START_S + seconds}&limit=50")
        for s in r["samples"]:
            if None not in s["values"]:
                return s
        raise AssertionError(r)

    def test_forecast_steps_horizon_and_latest(self):
        s = self.status()
        body = self.forecast()
        check_shape(self, body, FORECAST)
        self.assertEqual(body["feed"], "lorenz")
        self.assertEqual(body["model_version"], s["model"]["version"])
        self.assertEqual(body["channels"], ["x", "y", "z"])
        self.assertEqual(body["step_s"], 0.01)
        self.assertEqual(len(body["points"]), 100, "default steps=100")
        self.assertIn("advisory", body["advisory"].lower())
        # From the newest complete sample.
        newest_complete = max(t for (f, t), v in self.sent.items() if f == "lorenz" and None not in v
                              and t <= time_us(s["window"]["newest"]))
        self.assertEqual(time_us(body["from"]), newest_complete)
        self.assertEqual(body["start"], self.sent[("lorenz", newest_complete)])
        for k, p in enumerate(body["points"], start=1):
            self.assertEqual(time_us(p["t"]), newest_complete + k * 10_000)
            self.assertEqual(len(p["values"]), 3)
        self.assertEqual(self.forecast("?from=latest")["points"], body["points"])
        self.assertEqual(self.forecast("?steps=100&from=latest")["points"], body["points"])

        self.assertEqual(len(self.forecast("?steps=1")["points"]), 1)
        seven = self.forecast("?steps=7")
        self.assertEqual(len(seven["points"]), 7)
        self.assertEqual(seven["points"], body["points"][:7])
        # horizon: data time, rounded up to whole steps.
        self.assertEqual(len(self.forecast("?horizon=1s")["points"]), 100)
        self.assertEqual(len(self.forecast("?horizon=250ms")["points"]), 25)
        self.assertEqual(len(self.forecast("?horizon=0.015")["points"]), 2)
        self.assertEqual(len(self.forecast("?horizon=1m")["points"]), 6000)
        self.assertEqual(len(self.forecast("?steps=100000")["points"]), 100000)

    def test_forecast_from_a_time_in_the_window_as_epoch_and_rfc3339(self):
        sample = self.complete_sample_near(20)
        t = time_us(sample["t"])
        # Epoch seconds, RFC 3339 in UTC, with an explicit +00:00 offset and
        # the same instant at offset -01:00 (the day before, 23:00).
        seconds = t // 1_000_000 - START_S
        self.assertLess(seconds, 60)
        forms = [harness.t_text(t), sample["t"]["rfc3339"],
                 urllib.parse.quote(sample["t"]["rfc3339"].replace("Z", "+00:00")),
                 urllib.parse.quote("2025-12-31T23:00:%02d.%06d-01:00" % (seconds, t % 1_000_000))]
        results = []
        for form in forms:
            body = self.forecast(f"?steps=20&from={form}")
            self.assertEqual(time_us(body["from"]), t, form)
            self.assertEqual(body["start"], sample["values"], form)
            results.append(body["points"])
        for points in results[1:]:
            self.assertEqual(points, results[0])
        # Between two samples: the newest complete sample at or before T.
        body = self.forecast(f"?steps=3&from={harness.t_text(t + 4_000)}")
        self.assertEqual(time_us(body["from"]), t)
        self.assertEqual(time_us(body["points"][0]["t"]), t + 10_000)
        # A forecast from T is the model's free run: steps=20 extends steps=3.
        self.assertEqual(body["points"], results[0][:3])

    def test_forecast_as_csv_via_format_and_accept(self):
        sample = self.complete_sample_near(25)
        q = f"?steps=50&from={harness.t_text(time_us(sample['t']))}"
        body = self.forecast(q)
        for how in ({"query": q + "&format=csv"}, {"query": q, "headers": {"Accept": "text/csv"}}):
            r = self.get("/v1/feeds/lorenz/forecast" + how["query"], headers=how.get("headers"))
            self.assertEqual(r.status, 200, r)
            self.assertTrue(r.headers["content-type"].startswith("text/csv"), r.headers)
            rows = list(csv.reader(io.StringIO(r.text())))
            self.assertEqual(rows[0], ["time", "x", "y", "z", "beyond_horizon"])
            self.assertEqual(len(rows), 51)
            for row, p in zip(rows[1:], body["points"]):
                self.assertEqual(rfc_to_us(row[0]), time_us(p["t"]))
                for got, want in zip(row[1:4], p["values"]):
                    self.assertTrue(math.isclose(float(got), want, rel_tol=1e-6, abs_tol=1e-9), (row, p))
                self.assertEqual(row[4], "1" if p["beyond_horizon"] else "0")
        # format=json wins over an Accept naming CSV.
        r = self.get("/v1/feeds/lorenz/forecast" + q + "&format=json", headers={"Accept": "text/csv"})
        self.assertEqual(r.status, 200, r)
        self.assertEqual(r.json()["points"], body["points"])

    def test_forecast_beyond_horizon_flags_follow_horizon_seconds(self):
        body = self.forecast("?horizon=30s")
        h = body["horizon"]
        lyap = body["lyapunov"]
        self.assertIn(lyap["source"], ("model", "dynamics", "data"))
        self.assertEqual(h["tol"], 0.5)
        self.assertIsNotNone(h["seconds"], h)
        self.assertIsNone(h["reason"])
        self.assertGreater(lyap["per_s"], 0)
        # horizon = (1/lambda_max) ln(tol / e0), 0 when e0 >= tol
        expected = max(0.0, math.log(h["tol"] / h["e0"]) / lyap["per_s"])
        self.assertTrue(math.isclose(h["seconds"], expected, rel_tol=1e-9, abs_tol=1e-9), (h, lyap))
        self.assertTrue(math.isclose(h["lyapunov_times"], h["seconds"] * lyap["per_s"], rel_tol=1e-9), h)
        start = time_us(body["from"])
        flags = [p["beyond_horizon"] for p in body["points"]]
        for p in body["points"]:
            self.assertEqual(p["beyond_horizon"], (time_us(p["t"]) - start) / 1e6 > h["seconds"], (p, h))
        self.assertEqual(flags, sorted(flags), "once past the horizon, every later point is too")
        self.assertTrue(0 < h["seconds"] < 30, f"a 30 s forecast should cross a Lorenz horizon: {h}")
        self.assertIn(True, flags)
        self.assertIn(False, flags)

    def test_forecast_conflicts_before_a_model_exists(self):
        self.assert_error(self.before_forecast, 409, "no-model", ["lorenz", "no model"])
        for feed in ("idle", "sparse"):
            self.assert_error(self.get(f"/v1/feeds/{feed}/forecast"), 409, "no-model", [feed, "no model"])
            self.assert_error(self.get(f"/v1/feeds/{feed}/forecast?steps=5&from={START_S}"), 409, "no-model")
            # A bad parameter is 400 whether or not there is a model.
            for q, name in (("steps=0", "steps"), ("horizon=x", "horizon"), ("from=x", "from"),
                            ("format=x", "format")):
                self.assert_error(self.get(f"/v1/feeds/{feed}/forecast?{q}"), 400, "bad-parameter", [name])

    def test_forecast_bad_parameters(self):
        base = "/v1/feeds/lorenz/forecast"
        for q in ("steps=0", "steps=abc", "steps=100001", "steps=-1", "steps=1.5", "steps="):
            self.assert_error(self.get(f"{base}?{q}"), 400, "bad-parameter", ["steps"])
        err = self.assert_error(self.get(f"{base}?steps=5&horizon=1s"), 400, "bad-parameter", ["steps"])
        self.assertIn("horizon", err["message"])
        for q in ("horizon=abc", "horizon=0s", "horizon=-1s", "horizon=", "horizon=2000s"):
            self.assert_error(self.get(f"{base}?{q}"), 400, "bad-parameter", ["horizon"])
        for q in ("from=yesterday", "from=2026-13-01T00:00:00Z", "from=", "from=nan", "from=1e300"):
            self.assert_error(self.get(f"{base}?{q}"), 400, "bad-parameter", ["from"])
        for q in ("format=xml", "format="):
            self.assert_error(self.get(f"{base}?{q}"), 400, "bad-parameter", ["format"])
        # Outside the stored window: not found, naming from.
        for t in (START_S - 3600, START_S + 3600, "2020-01-01T00:00:00Z"):
            self.assert_error(self.get(f"{base}?from={t}"), 404, "not-found", ["from"])

    # ------------------------------------------------------------ models

    def registry(self):
        rows = self.d.sql("SELECT version, status, parent FROM models JOIN feeds USING (feed_id) "
                          "WHERE feeds.name = 'lorenz' ORDER BY version DESC")
        return [(int(v), s, int(p) if p else None) for v, s, p in rows]

    def test_models_newest_first_with_limit(self):
        self.wait_idle()
        body = self.get_json("/v1/feeds/lorenz/models")
        self.assertEqual(body["feed"], "lorenz")
        check_shape(self, body["models"], [MODEL])
        stored = self.registry()
        self.assertGreaterEqual(len(stored), 2, "version 1 and the operator's retrain")
        self.assertEqual([(m["version"], m["status"], m["parent"]) for m in body["models"]], stored)
        for m in body["models"]:
            self.assertIn(m["status"], {"active", "retired", "rejected"})
            self.assertEqual(m["origin"], "trained", "every version here is the daemon's own")
        active = [m["version"] for m in body["models"] if m["status"] == "active"]
        self.assertEqual(active, [self.status()["model"]["version"]])
        one = self.get_json("/v1/feeds/lorenz/models?limit=1")
        self.assertEqual(one["models"], body["models"][:1])
        self.assertEqual(self.get_json("/v1/feeds/lorenz/models?limit=1000")["models"], body["models"])
        self.assertEqual(self.get_json("/v1/feeds/idle/models")["models"], [])
        for q in ("limit=0", "limit=1001", "limit=abc", "limit=-3", "limit="):
            self.assert_error(self.get(f"/v1/feeds/lorenz/models?{q}"), 400, "bad-parameter", ["limit"])

    def test_model_file_is_the_registry_blob_and_the_cli_reads_it(self):
        self.wait_idle()
        versions = [m["version"] for m in self.get_json("/v1/feeds/lorenz/models")["models"]]
        active = self.status()["model"]["version"]
        for v in versions:
            r = self.get(f"/v1/feeds/lorenz/models/{v}/file")
            self.assertEqual(r.status, 200, r)
            self.assertEqual(r.headers["content-type"], "application/octet-stream")
            self.assertIn(f"lorenz-v{v}", r.headers.get("content-disposition", ""))
            blob = self.d.sql("SELECT hex(file) FROM models JOIN feeds USING (feed_id) "
                              f"WHERE feeds.name = 'lorenz' AND version = {v}")[0][0]
            self.assertEqual(r.body, bytes.fromhex(blob), f"version {v}")
            if v == active:
                path = os.path.join(self.dir, f"lorenz-v{v}.lcm")
                with open(path, "wb") as f:
                    f.write(r.body)
        # The offline forecast reads the downloaded file and follows the
        # daemon's forecast from the same state.
        sample = self.complete_sample_near(22)
        served = self.forecast(f"?steps=5&from={harness.t_text(time_us(sample['t']))}")
        self.assertEqual(served["model_version"], active)
        out = run_cli("forecast", "--model", os.path.join(self.dir, f"lorenz-v{active}.lcm"),
                      "--from", ",".join(repr(v) for v in sample["values"]), "--steps", "5")
        rows = [row for row in csv.reader(io.StringIO(out.stdout)) if row and row[0].strip().isdigit()]
        self.assertEqual(len(rows), 5, out.stdout)
        for row, p in zip(rows, served["points"]):
            for got, want in zip(row[2:5], p["values"]):
                self.assertTrue(math.isclose(float(got), want, rel_tol=1e-4, abs_tol=1e-4), (row, p))

    # ------------------------------------------------------------ not found

    def test_unknown_feed_version_job_and_endpoint_are_404(self):
        for path, words in [("/v1/feeds/nope/status", ["nope"]),
                            ("/v1/feeds/nope/forecast", ["nope"]),
                            ("/v1/feeds/nope/models", ["nope"]),
                            ("/v1/feeds/lorenz/models/999/file", ["999"]),
                            ("/v1/feeds/lorenz/models/0/file", ["0"]),
                            ("/v1/feeds/lorenz/models/abc/file", ["abc"]),
                            ("/v1/feeds/lorenz/jobs/999999", ["999999"]),
                            ("/v1/feeds/lorenz/jobs/abc", ["abc"]),
                            ("/v1/feeds/lorenz/nope", ["/v1/feeds/lorenz/nope"]),
                            ("/v1/feeds/lorenz/models/1/nope", []),
                            ("/v1/nope", ["/v1/nope"]),
                            ("/v2/feeds", []),
                            ("/metrics/x", [])]:
            self.assert_error(self.get(path), 404, "not-found", words)
        for path in ("/v1/feeds/nope/retrain", "/v1/feeds/nope/pause", "/v1/feeds/lorenz/models/999/activate",
                     "/v1/feeds/lorenz/models/abc/activate"):
            self.assert_error(self.post(path), 404, "not-found")
        # A job id of another feed is not that feed's job.
        job = self.status()["last_job"]["id"]
        self.assertEqual(self.get(f"/v1/feeds/lorenz/jobs/{job}").status, 200)
        self.assert_error(self.get(f"/v1/feeds/sparse/jobs/{job}"), 404, "not-found", [str(job)])

    # ------------------------------------------------------------ retrain and jobs

    def test_retrain_is_accepted_with_a_job_to_follow_and_coalesces_while_pending(self):
        self.wait_idle()
        before = self.status()
        # New data after the last retrain, so the next job trains for a while.
        more = self.lines[3000:3500]
        client = IngestClient(self.d.ingest_port)
        client.send_lines(more)
        replies = client.wait_replies(len(more), timeout=300)
        client.close()
        self.assertTrue(all(r.startswith("ok") for r in replies) and len(replies) == len(more), replies[-3:])
        type(self).accepted_later = len(more)
        # The newest sample lacks y, one step after a complete one: "latest"
        # starts at it with y predicted by the model (G of the state before).
        self.assertEqual(more[-1].split(",")[3], "")
        self.assertNotIn("", more[-2].split(","))
        self.wait_latest(parse_ingest_csv(more[-1])[1])
        forecast = self.get("/v1/feeds/lorenz/forecast?steps=1").json()
        self.assertEqual([(e["channel"], e["how"]) for e in forecast["estimated"]], [("y", "predicted")], forecast)
        self.assertAlmostEqual(forecast["estimated"][0]["age_s"], 0.01, places=9)
        self.assertEqual([forecast["start"][0], forecast["start"][2]], parse_ingest_csv(more[-1])[2][::2])
        self.assertGreater(time_us(self.status()["cadence"]["next_due"]), rfc_to_us("2026-01-01T00:00:35Z"))

        answers = []
        for _ in range(12):
            r = self.post("/v1/feeds/lorenz/retrain")
            self.assertEqual(r.status, 202, r)
            body = r.json()
            check_shape(self, body, {"job": "int", "feed": "str", "state": "str", "coalesced": "bool"})
            self.assertEqual(body["feed"], "lorenz")
            self.assertIn(body["state"], {"queued", "running", "done"})
            self.assertEqual(r.headers.get("location"), f"/v1/feeds/lorenz/jobs/{body['job']}")
            answers.append(body)
            if body["coalesced"]:
                break
        self.assertFalse(answers[0]["coalesced"], answers)
        self.assertTrue(answers[-1]["coalesced"], f"no POST joined a pending job: {answers}")
        # A coalesced answer names the pending job it joined.
        self.assertEqual(answers[-1]["job"], answers[-2]["job"], answers)

        for job in sorted({a["job"] for a in answers}):
            r = self.get(f"/v1/feeds/lorenz/jobs/{job}")
            self.assertEqual(r.status, 200, r)
            done = self.wait_job(job)
            check_shape(self, done, JOB)
            self.assertEqual(done["id"], job)
            self.assertEqual(done["feed"], "lorenz")
            self.assertEqual(done["trigger"], "operator")
            self.assertIn(done["verdict"], JOB_VERDICTS - {None, "cancelled"}, done)
            self.assertTrue(done["outcome"], done)
        first = self.wait_job(answers[0]["job"])
        self.assertIn(first["verdict"], {"promoted", "rejected"}, first)
        self.assertGreater(first["iterations"], 0)
        self.assertIsNotNone(first["version"])
        after = self.status()
        self.assertGreaterEqual(after["jobs"]["coalesced"] - before["jobs"]["coalesced"],
                                sum(a["coalesced"] for a in answers))

    def test_activate_changes_the_active_version_and_reports_the_previous(self):
        self.wait_idle()
        models = self.get_json("/v1/feeds/lorenz/models")["models"]
        active = self.status()["model"]["version"]
        other = next(m["version"] for m in models if m["version"] != active)
        r = self.post(f"/v1/feeds/lorenz/models/{other}/activate")
        try:
            self.assertEqual(r.status, 200, r)
            self.assertEqual(r.json(), {"feed": "lorenz", "active": other, "previous": active})
            self.assertEqual(self.status()["model"]["version"], other)
            self.assertEqual(self.forecast("?steps=1")["model_version"], other)
            listed = {m["version"]: m["status"] for m in self.get_json("/v1/feeds/lorenz/models")["models"]}
            self.assertEqual(listed[other], "active")
            self.assertNotEqual(listed[active], "active")
            self.assertEqual([v for v, s, _ in self.registry() if s == "active"], [other])
            feeds = {f["id"]: f for f in self.get_json("/v1/feeds")["feeds"]}
            self.assertEqual(feeds["lorenz"]["model"]["version"], other)
        finally:
            back = self.post(f"/v1/feeds/lorenz/models/{active}/activate")
        self.assertEqual(back.status, 200, back)
        self.assertEqual(back.json()["previous"], other)
        self.assertEqual(self.status()["model"]["version"], active)
        for v in ("999", "0", "abc", "-1"):
            self.assert_error(self.post(f"/v1/feeds/lorenz/models/{v}/activate"), 404, "not-found", [v])
        self.assert_error(self.post("/v1/feeds/idle/models/1/activate"), 404, "not-found")

    def test_pause_and_resume_show_in_status_health_and_refuse_retrain(self):
        self.wait_idle()
        r = self.post("/v1/feeds/lorenz/pause")
        try:
            self.assertEqual(r.status, 200, r)
            self.assertEqual(r.json(), {"feed": "lorenz", "paused": True})
            self.assertIs(self.status()["paused"], True)
            health = {f["id"]: f for f in self.get_json("/v1/health")["feeds"]}
            self.assertTrue(any(reason.startswith("paused") for reason in health["lorenz"]["reasons"]), health)
            self.assertIn("paused", " ".join(self.status()["health"]["reasons"]))
            feeds = {f["id"]: f for f in self.get_json("/v1/feeds")["feeds"]}
            self.assertIs(feeds["lorenz"]["retraining"]["paused"], True)
            _, samples = parse_metrics(self.get("/metrics").text())
            self.assertEqual(metric(samples, "lyapcast_feed_paused", feed="lorenz"), 1)
            self.assertEqual(metric(samples, "lyapcast_feed_paused", feed="sparse"), 0)
            self.assert_error(self.post("/v1/feeds/lorenz/retrain"), 409, mentions=["paused"])
            # Pausing twice is harmless.
            self.assertEqual(self.post("/v1/feeds/lorenz/pause").status, 200)
        finally:
            r = self.post("/v1/feeds/lorenz/resume")
        self.assertEqual(r.status, 200, r)
        self.assertEqual(r.json(), {"feed": "lorenz", "paused": False})
        self.assertIs(self.status()["paused"], False)
        health = {f["id"]: f for f in self.get_json("/v1/health")["feeds"]}
        self.assertEqual(health["lorenz"]["verdict"], "normal", health)
        self.assertEqual(health["lorenz"]["reasons"], [])

    # ------------------------------------------------------------ samples

    def test_samples_pages_give_every_stored_sample_exactly_once(self):
        stored = self.stored("lorenz")
        seen, pages, query = [], 0, "?limit=700"
        while True:
            r = self.get("/v1/feeds/lorenz/samples" + query)
            self.assertEqual(r.status, 200, r)
            body = r.json()
            pages += 1
            self.assertEqual(body["feed"], "lorenz")
            self.assertEqual(body["channels"], ["x", "y", "z"])
            self.assertLessEqual(len(body["samples"]), 700)
            for s in body["samples"]:
                t = time_us(s["t"])
                seen.append(t)
                self.assertEqual(s["values"], self.sent[("lorenz", t)], t)
            if body["next"] is None:
                self.assertNotIn("link", r.headers)
                break
            nxt = time_us(body["next"])
            self.assertEqual(r.headers.get("link"),
                             f'</v1/feeds/lorenz/samples?from={nxt // 1_000_000}.{nxt % 1_000_000:06d}&limit=700'
                             f'&format=json>; rel="next"')
            self.assertEqual(len(body["samples"]), 700)
            self.assertGreater(nxt, seen[-1])
            # Alternate the two forms of a time parameter.
            form = body["next"]["rfc3339"] if pages % 2 else harness.t_text(nxt)
            query = f"?limit=700&from={form}"
            self.assertLess(pages, 100)
        self.assertEqual(seen, stored, "every stored sample once, oldest first")
        self.assertEqual(pages, math.ceil(len(stored) / 700))
        # A missing channel is null.
        self.assertTrue(any(None in self.sent[("lorenz", t)] for t in seen))
        # [from, to): the end is excluded, the start included.
        lo, hi = stored[100], stored[160]
        body = self.get_json(f"/v1/feeds/lorenz/samples?from={harness.t_text(lo)}&to={harness.t_text(hi)}")
        self.assertEqual([time_us(s["t"]) for s in body["samples"]], stored[100:160])
        self.assertIsNone(body["next"])
        body = self.get_json("/v1/feeds/lorenz/samples?limit=10000")
        self.assertEqual(len(body["samples"]), min(len(stored), 10000))
        self.assertEqual(self.get_json("/v1/feeds/lorenz/samples")["next"] is None, len(stored) <= 1000)
        self.assertEqual(self.get_json("/v1/feeds/idle/samples"),
                         {"feed": "idle", "channels": ["p", "q"], "samples": [], "next": None})
        sparse = self.get_json("/v1/feeds/sparse/samples")["samples"]
        self.assertEqual([s["values"] for s in sparse], [self.sent[("sparse", time_us(s["t"]))] for s in sparse])
        self.assertEqual(sparse[1]["values"], [0.25, None])

    def test_the_removed_liveness_path_names_its_successor(self):
        self.assert_error(self.get("/v1/health/live"), 404, "not-found", ["/v1/heartbeat"])

    def test_samples_as_csv_are_ingest_lines_that_replay(self):
        stored = self.stored("lorenz")
        rows, query = [], "?format=csv&limit=1500"
        for _ in range(100):
            r = self.get("/v1/feeds/lorenz/samples" + query)
            self.assertEqual(r.status, 200, r)
            self.assertTrue(r.headers["content-type"].startswith("text/csv"), r.headers)
            page = r.text().splitlines()
            rows += page
            link = r.headers.get("link")
            if link is None:
                break
            self.assertEqual(len(page), 1500)
            # RFC 8288: the next page's target, the same request from its first sample on.
            m = re.fullmatch(r'</v1/feeds/lorenz/samples\?from=(\d+\.\d{6})&limit=1500&format=csv>; rel="next"', link)
            self.assertIsNotNone(m, link)
            self.assertGreater(float(m.group(1)), parse_ingest_csv(page[-1])[1] / 1e6)
            query = link[link.index("?"):link.index(">")]
        self.assertEqual(len(rows), len(stored))
        for row in rows:
            self.assertRegex(row, r"^lorenz,\d+\.\d{6},")
            feed, t, values = parse_ingest_csv(row)
            self.assertEqual(values, self.sent[(feed, t)], row)
        self.assertEqual([parse_ingest_csv(row)[1] for row in rows], stored)
        r = self.get("/v1/feeds/sparse/samples", headers={"Accept": "text/csv"})
        self.assertEqual(r.status, 200, r)
        self.assertEqual([parse_ingest_csv(x) for x in r.text().splitlines()],
                         [parse_ingest_csv(x) for x in self.sparse_lines])
        # The rows are ingest lines: sent back, each is the stored sample again
        # (identical values are accepted and stored once).
        client = IngestClient(self.d.ingest_port)
        client.send_lines(rows[:5])
        replies = client.wait_replies(5, timeout=60)
        client.close()
        self.assertEqual([x.split()[0] for x in replies], ["ok"] * 5, replies)
        type(self).accepted_later = self.extra_accepted() + 5
        self.assertEqual(self.stored("lorenz"), stored)

    def test_samples_bad_parameters(self):
        base = "/v1/feeds/lorenz/samples"
        t = START_S + 10
        for q in (f"from={t}&to={t}", f"from={t}&to={t - 1}", "from=2026-01-01T00:00:10Z&to=2026-01-01T00:00:09Z"):
            self.assert_error(self.get(f"{base}?{q}"), 400, "bad-parameter", ["to"])
        for q in ("limit=0", "limit=10001", "limit=abc", "limit=-1", "limit="):
            self.assert_error(self.get(f"{base}?{q}"), 400, "bad-parameter", ["limit"])
        self.assert_error(self.get(f"{base}?from=soon"), 400, "bad-parameter", ["from"])
        self.assert_error(self.get(f"{base}?to=later"), 400, "bad-parameter", ["to"])
        self.assert_error(self.get(f"{base}?format=xml"), 400, "bad-parameter", ["format"])

    # ------------------------------------------------------------ protocol limits

    def test_wrong_method_is_405_with_allow(self):
        cases = [("POST", "/v1/heartbeat", "GET"), ("POST", "/v1/health", "GET"), ("DELETE", "/v1/feeds", "GET"),
                 ("PUT", "/v1/feeds/lorenz/status", "GET"), ("POST", "/v1/feeds/lorenz/forecast", "GET"),
                 ("DELETE", "/v1/feeds/lorenz/models", "GET, POST"),
                 ("POST", "/v1/feeds/lorenz/models/1/file", "GET"),
                 ("POST", "/v1/feeds/lorenz/samples", "GET"), ("POST", "/v1/feeds/lorenz/jobs/1", "GET"),
                 ("POST", "/metrics", "GET"), ("GET", "/v1/feeds/lorenz/retrain", "POST"),
                 ("GET", "/v1/feeds/lorenz/pause", "POST"), ("PUT", "/v1/feeds/lorenz/resume", "POST"),
                 ("GET", "/v1/feeds/lorenz/models/1/activate", "POST")]
        for method, path, allow in cases:
            r = request(self.port, method, path)
            self.assert_error(r, 405, "method-not-allowed", [method])
            self.assertEqual(r.headers.get("allow"), allow, (method, path, r))

    def test_oversized_body_is_413(self):
        # Only the headers are sent: the server answers from Content-Length.
        r = raw_exchange(self.port, b"POST /v1/feeds/lorenz/retrain HTTP/1.1\r\nHost: x\r\nConnection: close\r\n"
                                    b"Content-Type: text/plain\r\nContent-Length: 70000\r\n\r\n")
        self.assert_error(r, 413, "body-too-large", ["65536"])
        # At the limit a body is read (and this route ignores it).
        r = request(self.port, "POST", "/v1/feeds/lorenz/pause", body=b"x" * 65536)
        self.assertEqual(r.status, 200, r)
        self.assertEqual(self.post("/v1/feeds/lorenz/resume").status, 200)

    def test_oversized_headers_are_431(self):
        big = b"X-Big: " + b"a" * (16 * 1024) + b"\r\n"
        r = raw_exchange(self.port, b"GET /v1/heartbeat HTTP/1.1\r\nHost: x\r\nConnection: close\r\n" + big + b"\r\n")
        self.assert_error(r, 431, "headers-too-large", ["16384"])
        # Just under the limit is fine.
        r = request(self.port, "GET", "/v1/heartbeat", headers={"X-Big": "a" * (15 * 1024)})
        self.assertEqual(r.status, 200, r)

    def test_too_many_header_fields_are_431(self):
        fields = b"".join(b"X-F%d: 1\r\n" % i for i in range(120))
        r = raw_exchange(self.port, b"GET /v1/heartbeat HTTP/1.1\r\nHost: x\r\nConnection: close\r\n"
                                    + fields + b"\r\n")
        self.assert_error(r, 431, "too-many-headers", ["100"])
        r = request(self.port, "GET", "/v1/heartbeat", headers={f"X-F{i}": "1" for i in range(90)})
        self.assertEqual(r.status, 200, r)

    # ------------------------------------------------------------ metrics

    def test_metrics_pass_promtool(self):
        promtool = find_promtool()
        if promtool is None:
            self.skipTest("promtool not found on PATH or at /usr/bin/promtool; tools/install-deps installs the "
                          "Debian package 'prometheus' that provides it")
        r = self.get("/metrics")
        self.assertEqual(r.status, 200, r)
        out = subprocess.run([promtool, "check", "metrics"], input=r.body, capture_output=True, timeout=60)
        self.assertEqual(out.returncode, 0, (out.stdout + out.stderr).decode())
        self.assertEqual((out.stdout + out.stderr).decode().strip(), "", "promtool reports lint problems")

    def test_metrics_families_agree_with_status(self):
        self.wait_idle()
        feeds_body = self.get_json("/v1/feeds")
        statuses = {f: self.status(f) for f in ("lorenz", "sparse", "idle")}
        t0 = time.monotonic()
        r = self.get("/metrics")
        elapsed = time.monotonic() - t0 + 1.0
        self.assertEqual(r.status, 200, r)
        self.assertTrue(r.headers["content-type"].startswith("text/plain; version=0.0.4"), r.headers)
        types, samples = parse_metrics(r.text())
        expected_types = {
            "lyapcast_ingest_lines_total": "counter", "lyapcast_ingest_accepted_total": "counter",
            "lyapcast_ingest_rejected_total": "counter", "lyapcast_ingest_connections": "gauge",
            "lyapcast_writer_queue_samples": "gauge", "lyapcast_commit_duration_seconds": "histogram",
            "lyapcast_samples_committed_total": "counter", "lyapcast_storage_available": "gauge",
            "lyapcast_feed_drift_ratio": "gauge", "lyapcast_feed_data_age_seconds": "gauge",
            "lyapcast_feed_lyapunov_time_seconds": "gauge", "lyapcast_feed_model_version": "gauge",
            "lyapcast_feed_window_samples": "gauge", "lyapcast_feed_health": "gauge",
            "lyapcast_feed_paused": "gauge", "lyapcast_retrain_jobs_total": "counter",
            "lyapcast_retrain_duration_seconds": "summary"}
        for name, kind in expected_types.items():
            self.assertEqual(types.get(name), kind, name)

        # Ingest: counters and rejects by reason code.
        ingest = feeds_body["ingest"]
        self.assertEqual(metric(samples, "lyapcast_ingest_accepted_total"), ingest["accepted"])
        self.assertEqual(metric(samples, "lyapcast_ingest_lines_total"), ingest["lines"])
        reasons = {l["reason"]: v for n, l, v in samples if n == "lyapcast_ingest_rejected_total"}
        for code in ("unknown-feed", "not-a-number", "field-count", "bad-time", "duplicate-time", "line-too-long",
                     "storage-unavailable", "bad-auth"):
            self.assertIn(code, reasons)
        for code, count in self.rejected.items():
            self.assertEqual(reasons[code], count, code)
        self.assertEqual(sum(reasons.values()), sum(self.rejected.values()))
        self.assertEqual(ingest["lines"], ingest["accepted"] + sum(reasons.values()))
        # The writer: queue, commits, latency histogram.
        self.assertEqual(metric(samples, "lyapcast_writer_queue_samples"), 0)
        self.assertEqual(metric(samples, "lyapcast_storage_available"), 1)
        stored = sum(s["window"]["samples"] for s in statuses.values())
        self.assertGreaterEqual(metric(samples, "lyapcast_samples_committed_total"), stored)
        buckets = [(l["le"], v) for n, l, v in samples if n == "lyapcast_commit_duration_seconds_bucket"]
        self.assertEqual(buckets[-1][0], "+Inf")
        bounds = [float(le) for le, _ in buckets]
        self.assertEqual(bounds, sorted(bounds))
        counts = [v for _, v in buckets]
        self.assertEqual(counts, sorted(counts), "cumulative buckets")
        count = metric(samples, "lyapcast_commit_duration_seconds_count")
        self.assertEqual(counts[-1], count)
        self.assertGreater(count, 0)
        self.assertGreater(metric(samples, "lyapcast_commit_duration_seconds_sum"), 0)

        # Per feed, the same figures as /status.
        for feed, s in statuses.items():
            self.assertEqual(metric(samples, "lyapcast_feed_window_samples", feed=feed), s["window"]["samples"])
            self.assertEqual(metric(samples, "lyapcast_feed_health", feed=feed),
                             {"normal": 0, "alert": 1, "alarm": 2, "indeterminate": 3}[s["health"]["verdict"]])
            self.assertEqual(metric(samples, "lyapcast_feed_paused", feed=feed), int(s["paused"]))
            model = s["model"]
            self.assertEqual(metric(samples, "lyapcast_feed_model_version", feed=feed),
                             model["version"] if model else None, feed)
            self.assertEqual(metric(samples, "lyapcast_feed_drift_ratio", feed=feed), s["drift"]["ratio"], feed)
            age = s["staleness"]["data_age_s"]
            got = metric(samples, "lyapcast_feed_data_age_seconds", feed=feed)
            if age is None:
                self.assertIsNone(got, feed)
            else:
                self.assertTrue(age - 1e-6 <= got <= age + elapsed, (feed, age, got))
            chosen = s["lyapunov"]["chosen"]
            self.assertEqual(metric(samples, "lyapcast_feed_lyapunov_time_seconds", feed=feed),
                             chosen["lyapunov_time_s"] if chosen else None, feed)
            jobs = s["jobs"]
            for outcome in ("promoted", "rejected", "not_enough_data", "failed"):
                self.assertEqual(metric(samples, "lyapcast_retrain_jobs_total", feed=feed, outcome=outcome),
                                 jobs[outcome], (feed, outcome))
            finished = jobs["promoted"] + jobs["rejected"] + jobs["not_enough_data"] + jobs["failed"]
            self.assertEqual(metric(samples, "lyapcast_retrain_duration_seconds_count", feed=feed), finished, feed)
            total = metric(samples, "lyapcast_retrain_duration_seconds_sum", feed=feed)
            if s["last_job"]:
                self.assertGreaterEqual(total, s["last_job"]["seconds"] - 1e-9)
        self.assertIsNotNone(metric(samples, "lyapcast_feed_model_version", feed="lorenz"))
        self.assertIsNotNone(metric(samples, "lyapcast_feed_drift_ratio", feed="lorenz"))


# ---------------------------------------------------------------- a feed in alarm

class HealthAlarmTest(unittest.TestCase, ApiAssertions):
    def test_a_feed_past_data_age_alarm_makes_health_503_with_the_reason(self):
        with Daemon() as d:
            with open(d.config_path, "w") as f:
                f.write(config(d.db, STALE))
            d.start()
            self.port = d.http_port
            before = self.get_json("/v1/health")
            self.assertEqual(before["status"], "indeterminate")
            self.assertEqual(before["feeds"], [{"id": "stale", "verdict": "indeterminate",
                                                "reasons": ["no sample received yet", "no model yet"]}])
            client = IngestClient(d.ingest_port)
            client.send_lines([f"stale,{START_S}.{k}00000,{k}" for k in range(5)])
            self.assertEqual(len(client.wait_replies(5)), 5)
            client.close()
            time.sleep(1.1)  # data_age_alarm is 1s of wall time after the last sample arrived
            deadline = time.monotonic() + 10
            r = self.get("/v1/health")
            while r.status != 503 and time.monotonic() < deadline:
                time.sleep(0.05)
                r = self.get("/v1/health")
            self.assertEqual(r.status, 503, r)
            body = r.json()
            self.assertEqual(body["status"], "alarm", body)
            self.assertEqual(body["feeds"][0]["verdict"], "alarm")
            reasons = body["feeds"][0]["reasons"]
            self.assertTrue(any(re.fullmatch(r"no sample for \d+(\.\d)?s \(data_age_alarm 1s\)", x) for x in reasons),
                            reasons)
            self.assertIn("no model yet", reasons)
            status = self.get_json("/v1/feeds/stale/status")
            self.assertEqual(status["health"]["verdict"], "alarm")
            self.assertGreaterEqual(status["staleness"]["data_age_s"], 1.0)
            _, samples = parse_metrics(self.get("/metrics").text())
            self.assertEqual(metric(samples, "lyapcast_feed_health", feed="stale"), 2)
            # /v1/heartbeat is about the process, not the feeds.
            self.assertEqual(self.get("/v1/heartbeat").status, 200)
            # Paused (plant shutdown): data age is not judged.
            self.assertEqual(self.post("/v1/feeds/stale/pause").status, 200)
            body = self.get_json("/v1/health")
            self.assertEqual(body["status"], "indeterminate", body)
            self.assertTrue(any(x.startswith("paused") for x in body["feeds"][0]["reasons"]), body)
            self.assertEqual(self.post("/v1/feeds/stale/resume").status, 200)
            self.assertEqual(self.get("/v1/health").status, 503)
            self.assertEqual(d.stop(), 0)


@unittest.skipUnless(os.geteuid() == 0, "needs root to mount a small tmpfs as a full disk")
class StorageUnavailableTest(unittest.TestCase, ApiAssertions):
    """A full disk (a 1 MiB tmpfs, as test_durability): health is 503, alarm."""

    def setUp(self):
        d = Daemon()
        self.addCleanup(d.__exit__)
        self.mnt = os.path.join(d.dir, "disk")
        os.makedirs(self.mnt)
        r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", self.mnt], capture_output=True, text=True)
        if r.returncode != 0:
            self.skipTest("cannot mount tmpfs here: " + r.stderr.strip())
        self.addCleanup(subprocess.run, ["umount", "-l", self.mnt])
        d.db = os.path.join(self.mnt, "window.db")
        with open(d.config_path, "w") as f:
            f.write(config(d.db, SMALL))
        self.d = d

    def test_a_full_disk_makes_health_an_alarm(self):
        self.d.start()
        self.port = self.d.http_port
        filler = os.path.join(self.mnt, "filler")
        fill_disk(filler)
        client = IngestClient(self.d.ingest_port)
        sent, refused = 0, False
        for _ in range(100):
            client.send_lines([f"loop,{START_S + (sent + k) / 10:.6f},{k}" for k in range(200)])
            sent += 200
            replies = client.wait_replies(sent, timeout=60)
            if any("storage-unavailable" in r for r in replies[-200:]):
                refused = True
                break
        client.close()
        self.assertTrue(refused, "the full disk refused a sample")
        r = self.get("/v1/health")
        self.assertEqual(r.status, 503, r)
        body = r.json()
        self.assertEqual(body["status"], "alarm")
        self.assertIs(body["storage_available"], False)
        self.assertTrue(any(x.startswith("storage unavailable") for x in body["feeds"][0]["reasons"]), body)
        live = self.get_json("/v1/heartbeat")
        self.assertIs(live["storage_available"], False)
        self.assertIs(self.get_json("/v1/feeds")["storage_available"], False)
        _, samples = parse_metrics(self.get("/metrics").text())
        self.assertEqual(metric(samples, "lyapcast_storage_available"), 0)
        self.assertGreaterEqual(metric(samples, "lyapcast_commit_failures_total"), 1)
        self.assertGreaterEqual(metric(samples, "lyapcast_ingest_rejected_total", reason="storage-unavailable"), 1)
        # Reads still work.
        self.assertEqual(self.get("/v1/feeds/loop/samples?limit=5").status, 200)
        os.remove(filler)
        self.assertEqual(self.d.stop(), 0, self.d.read_log())


# ---------------------------------------------------------------- tokens

READ_TOKEN = "rd-7f3c9a1e5b2d48c6a0e4f1b9d3c7e5a2"
ADMIN_TOKEN = "ad-1b8e4d2f6a9c03e7b5d1f4a8c2e6b0d9"


def token_daemon(read=True, admin=True):
    d = Daemon()
    auth = []
    for kind, token, on in (("read", READ_TOKEN, read), ("admin", ADMIN_TOKEN, admin)):
        if on:
            path = os.path.join(d.dir, f"{kind}.token")
            with open(path, "w") as f:
                f.write(token + "\n")
            os.chmod(path, 0o600)
            auth.append(f"  {kind}_token_file: {path}")
    with open(d.config_path, "w") as f:
        f.write(config(d.db, SMALL, "auth:\n" + "\n".join(auth)))
    return d


class DebugLogDaemon:
    """Starts a Daemon with --log-level debug, so the token check reads every line the daemon can log."""

    @staticmethod
    def start(d, timeout=30.0):
        d.log = open(d.log_path, "ab")
        d.proc = subprocess.Popen([harness.LYAPCASTD, "--config", d.config_path, "--ready-file", d.ready_path,
                                   "--log-level", "debug"], stdout=d.log, stderr=subprocess.STDOUT)
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if d.proc.poll() is not None:
                raise RuntimeError(f"lyapcastd exited with {d.proc.returncode}:\n{d.read_log()}")
            if os.path.exists(d.ready_path):
                try:
                    with open(d.ready_path) as f:
                        ready = json.load(f)
                except ValueError:
                    time.sleep(0.02)
                    continue
                d.ingest_port, d.http_port = ready["ingest_port"], ready["http_port"]
                return d
            time.sleep(0.02)
        raise RuntimeError("lyapcastd did not become ready:\n" + d.read_log())


class TokenScopesTest(unittest.TestCase, ApiAssertions):
    @classmethod
    def setUpClass(cls):
        cls.d = token_daemon()
        cls.addClassCleanup(cls.d.__exit__)
        DebugLogDaemon.start(cls.d)
        cls.port = cls.d.http_port

    def assert_unauthorized(self, r, invalid_token):
        self.assert_error(r, 401, "unauthorized")
        challenge = r.headers.get("www-authenticate", "")
        self.assertTrue(challenge.startswith("Bearer "), r.headers)
        self.assertEqual('error="invalid_token"' in challenge, invalid_token, challenge)

    def test_get_needs_the_read_or_admin_token(self):
        for path in ("/v1/feeds", "/v1/health", "/metrics", "/v1/feeds/loop/status", "/v1/feeds/loop/samples",
                     "/v1/feeds/loop/models", "/v1/feeds/nope/status"):
            self.assert_unauthorized(self.get(path), invalid_token=False)
            self.assert_unauthorized(self.get(path, token="wrong-token"), invalid_token=True)
            self.assert_unauthorized(self.get(path, token=READ_TOKEN + "x"), invalid_token=True)
            self.assert_unauthorized(self.get(path, headers={"Authorization": f"Basic {READ_TOKEN}"}),
                                     invalid_token=False)
        for token in (READ_TOKEN, ADMIN_TOKEN):
            for path in ("/v1/feeds", "/v1/health", "/v1/feeds/loop/status", "/v1/feeds/loop/samples"):
                self.assertEqual(self.get(path, token=token).status, 200, path)
            r = self.get("/metrics", token=token)
            self.assertEqual(r.status, 200, r)
            self.assertIn("lyapcast_ingest_lines_total", r.text())
            # Authorized, the usual answers follow.
            self.assert_error(self.get("/v1/feeds/nope/status", token=token), 404, "not-found")
            self.assert_error(self.get("/v1/feeds/loop/forecast", token=token), 409, "no-model")
        # The scheme is case-insensitive (RFC 7235, section 2.1).
        self.assertEqual(self.get("/v1/feeds", headers={"Authorization": f"bearer {READ_TOKEN}"}).status, 200)

    def test_liveness_is_open(self):
        self.assertEqual(self.get("/v1/heartbeat").status, 200)
        self.assertEqual(self.get("/v1/heartbeat", token="wrong-token").status, 200)

    def test_post_needs_the_admin_token(self):
        for path in ("/v1/feeds/loop/pause", "/v1/feeds/loop/retrain", "/v1/feeds/loop/models/1/activate",
                     "/v1/feeds/loop/models"):
            self.assert_unauthorized(self.post(path), invalid_token=False)
            self.assert_unauthorized(self.post(path, token="wrong-token"), invalid_token=True)
            self.assert_error(self.post(path, token=READ_TOKEN), 403, "forbidden", ["admin"])
        # An upload is refused before its body is read: only the headers are
        # sent, announcing a body larger than any other route accepts.
        head = b"POST /v1/feeds/loop/models HTTP/1.1\r\nHost: x\r\nContent-Length: 1000000\r\n"
        self.assert_unauthorized(raw_exchange(self.port, head + b"\r\n"), invalid_token=False)
        r = raw_exchange(self.port, head + b"Authorization: Bearer " + READ_TOKEN.encode() + b"\r\n\r\n")
        self.assert_error(r, 403, "forbidden", ["admin"])
        # With the admin token the body is read and judged as a model file.
        self.assert_error(self.post("/v1/feeds/loop/models", token=ADMIN_TOKEN, body=b"x" * 100000), 400,
                          "bad-model-file")
        r = self.post("/v1/feeds/loop/pause", token=ADMIN_TOKEN)
        self.assertEqual(r.status, 200, r)
        self.assertIs(self.get_json("/v1/feeds/loop/status", token=READ_TOKEN)["paused"], True)
        self.assertEqual(self.post("/v1/feeds/loop/resume", token=ADMIN_TOKEN).status, 200)
        r = self.post("/v1/feeds/loop/retrain", token=ADMIN_TOKEN)
        self.assertEqual(r.status, 202, r)
        job = r.json()["job"]
        self.assertEqual(self.get(f"/v1/feeds/loop/jobs/{job}", token=READ_TOKEN).status, 200)
        # Authorized, an unknown version is not found (even while the job runs).
        self.assert_error(self.post("/v1/feeds/loop/models/1/activate", token=ADMIN_TOKEN), 404, "not-found")

    def test_the_log_never_contains_a_token(self):
        # Every kind of request with every token, right and wrong.
        for token in (READ_TOKEN, ADMIN_TOKEN):
            self.get("/v1/feeds", token=token)
            self.post("/v1/feeds/loop/pause", token=token)
            self.post("/v1/feeds/loop/resume", token=token)
            self.get("/v1/feeds/nope/status", token=token)
            self.get("/v1/health", token=token + "x")
            self.get("/v1/feeds", headers={"Authorization": f"Basic {token}"})
        time.sleep(0.2)
        with open(self.d.log_path, "rb") as f:
            log = f.read()
        self.assertTrue(log, "the daemon logs at debug level")
        for token in (READ_TOKEN, ADMIN_TOKEN):
            self.assertNotIn(token.encode(), log)
            self.assertNotIn(token[3:].encode(), log)


class ReadOnlyTokenTest(unittest.TestCase, ApiAssertions):
    """A read token and no admin token: the API is read-only."""

    def test_post_is_refused_and_get_needs_the_read_token(self):
        with token_daemon(admin=False) as d:
            d.start()
            self.port = d.http_port
            self.assertEqual(self.get("/v1/heartbeat").status, 200)
            self.assert_error(self.get("/v1/feeds"), 401, "unauthorized")
            self.assertEqual(self.get("/v1/feeds", token=READ_TOKEN).status, 200)
            for path in ("/v1/feeds/loop/pause", "/v1/feeds/loop/retrain"):
                self.assert_error(self.post(path, token=READ_TOKEN), 403, "forbidden")
                self.assert_error(self.post(path), 401, "unauthorized")
                self.assert_error(self.post(path, token=ADMIN_TOKEN), 401, "unauthorized")
            self.assertIs(self.get_json("/v1/feeds/loop/status", token=READ_TOKEN)["paused"], False)
            self.assertEqual(d.stop(), 0)
            with open(d.log_path, "rb") as f:
                self.assertNotIn(READ_TOKEN.encode(), f.read())


class AdminOnlyTokenTest(unittest.TestCase, ApiAssertions):
    """An admin token and no read token: GET is open, POST needs the admin token."""

    def test_get_is_open_and_post_needs_the_admin_token(self):
        with token_daemon(read=False) as d:
            d.start()
            self.port = d.http_port
            self.assertEqual(self.get("/v1/feeds").status, 200)
            self.assertEqual(self.get("/metrics").status, 200)
            self.assert_error(self.post("/v1/feeds/loop/pause"), 401, "unauthorized")
            self.assert_error(self.post("/v1/feeds/loop/pause", token=READ_TOKEN), 401, "unauthorized")
            self.assertEqual(self.post("/v1/feeds/loop/pause", token=ADMIN_TOKEN).status, 200)
            self.assertIs(self.get_json("/v1/feeds/loop/status")["paused"], True)
            self.assertEqual(d.stop(), 0)


if __name__ == "__main__":
    unittest.main()
