"""Model upload end to end (docs/http-api.md "Upload", docs/cli.md
"models upload"): a model trained offline with `lyapcast train` on
`lyapcast simulate` data is loaded into the real lyapcastd.

One lockstep daemon with a Lorenz-63 feed `lorenz` (sigma 10, r 28, beta
8/3; as test_cli_remote) fed 45 s of simulated data (fixed --seed and
--start) trains its own first model at about 19 s of data (min_pairs 1500
of 10 ms steps plus the validation share); the cadence (50 Lyapunov times,
clamped to [20 s, 60 s]) leaves data after that model's training end for the
judge. Two more feeds take the wrong uploads: `rig` has other channels, `slow`
the same channels at another step.

- A good model (400 iterations, --seed 3) uploaded with --activate is served
  at once: forecasts name its version, `lyapcast models` and the status show
  its origin, its file is the uploaded bytes.
- A deliberately poor model (one iteration from random weights) uploaded
  without --activate is judged against the active model on the same held-out
  pairs and rejected (its one-step error is several times the active
  model's): stored as rejected, origin uploaded, the active model stays.
- Damaged bytes, another feed's model, another step, another format version,
  an empty or oversized body are refused with a named error code and nothing
  is stored (the sqlite3 shell counts the rows).

Standard library only; /usr/bin/python3; $LYAPCASTD, $LYAPCAST_CLI and
$LYAPCAST_SQLITE3 as ctest sets them."""

import http.client
import json
import os
import re
import shutil
import socket
import tempfile
import time
import unittest
import urllib.request

from harness import Daemon, daemon_config, run_cli

CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")
START = "2026-01-01T00:00:00Z"

LORENZ = """
  - id: lorenz
    channels: [x, y, z]
    step: 10ms
    dynamics:
      equations: {x: "s*(y - x)", y: "x*(r - z) - y", z: "x*y - b*z"}
      constants: {s: 10, r: 28, b: 2.6666666666666667}
    model: {hidden: [32, 32]}
    retrain: {lyapunov_fraction: 50, min_interval: 20s, max_interval: 60s, min_pairs: 1500, iterations: 400,
              batch: 128, learning_rate: 0.003}
    monitor: {change_threshold: 1000}
    health: {drift_alert: 50, drift_alarm: 100, data_age_alert: 1h, data_age_alarm: 2h,
             model_age_alert_lyapunov: 1000, model_age_alarm_lyapunov: 2000}
  - id: rig
    channels: [x, v]
    step: 10ms
  - id: slow
    channels: [x, y, z]
    step: 20ms
"""

UPLOAD_LIMIT = 16 * 1024 * 1024


run = run_cli


def fnv1a64(data):
    """The model file checksum (lib/learn/model_file.h: FNV-1a 64)."""
    h = 0xcbf29ce484222325
    for b in data:
        h = ((h ^ b) * 0x100000001b3) & 0xFFFFFFFFFFFFFFFF
    return h


def reseal(data):
    """Recomputes the trailing checksum after a deliberate edit."""
    body = bytes(data[:-8])
    return body + fnv1a64(body).to_bytes(8, "little")


def post(port, path, body, headers=None):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    try:
        conn.request("POST", path, body=body, headers=headers or {"Content-Type": "application/octet-stream"})
        r = conn.getresponse()
        return r.status, {k.lower(): v for k, v in r.getheaders()}, r.read()
    finally:
        conn.close()


class UploadTest(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.mkdtemp(prefix="lyapcast-upload-it-")
        if not os.environ.get("LYAPCAST_KEEP_TEST_DIRS"):
            cls.addClassCleanup(shutil.rmtree, cls.dir, ignore_errors=True)
        workdir = os.path.join(cls.dir, "daemon")
        os.makedirs(workdir)
        text = daemon_config(os.path.join(workdir, "window.db"), LORENZ, "training: {threads: 1, lockstep: true}")
        cls.d = Daemon(workdir=workdir, config_text=text)
        cls.addClassCleanup(cls.d.__exit__)
        cls.addClassCleanup(cls.stop_cleanly)  # runs first
        # Offline: data, a good model and a poor one, from the daemon's own config.
        cls.stream = os.path.join(cls.dir, "stream.csv")
        run("simulate", "-c", cls.d.config_path, "--feed", "lorenz", "--duration", "45s", "--transient", "20s",
            "--start", START, "--seed", "5", "--noise", "0.002", "-o", cls.stream)
        cls.good = os.path.join(cls.dir, "good.model")
        cls.poor = os.path.join(cls.dir, "poor.model")
        run("train", "-c", cls.d.config_path, "--feed", "lorenz", "--csv", cls.stream, "--out", cls.good,
            "--seed", "3")
        run("train", "-c", cls.d.config_path, "--feed", "lorenz", "--csv", cls.stream, "--out", cls.poor,
            "--seed", "3", "--iterations", "1")
        with open(cls.good, "rb") as f:
            cls.good_bytes = f.read()

        cls.d.start()
        cls.port = cls.d.http_port
        cls.url = f"http://127.0.0.1:{cls.port}"
        replay = run("replay", "--input", cls.stream, "--to", f"127.0.0.1:{cls.d.ingest_port}")
        assert "4500 accepted, 0 rejected" in replay.stderr, replay.stderr
        cls.wait_settled(cls)

    @classmethod
    def stop_cleanly(cls):
        """SIGTERM after all the requests: the daemon exits 0 (no upload crashed it)."""
        if cls.d.proc is not None and cls.d.proc.poll() is None:
            code = cls.d.stop()
            assert code == 0, f"lyapcastd exited {code}:\n{cls.d.read_log()}"

    def wait_settled(self, timeout=300):
        """Until lorenz has a model and no job runs or waits."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            _, s = self.d.http_get("/v1/feeds/lorenz/status")
            if s["model"] and not s["cadence"]["running"] and not s["cadence"]["pending"]:
                return s
            time.sleep(0.05)
        raise AssertionError("lorenz did not settle:\n" + self.d.read_log())

    def cli(self, *args, code=0):
        return run(*args, "--url", self.url, code=code)

    def status(self):
        _, s = self.d.http_get("/v1/feeds/lorenz/status")
        return s

    def models(self, feed="lorenz"):
        _, body = self.d.http_get(f"/v1/feeds/{feed}/models?limit=1000")
        return {m["version"]: m for m in body["models"]}

    def stored(self):
        """(feed, version, status, origin) of every stored row, by the sqlite3 shell."""
        return self.d.sql("SELECT feeds.name, version, status, origin FROM models JOIN feeds USING (feed_id) "
                          "ORDER BY feeds.name, version")

    def forecast_version(self):
        _, fc = self.d.http_get("/v1/feeds/lorenz/forecast?steps=5")
        return fc["model_version"]

    def assert_refused(self, feed, body, status, code, mentions=(), query=""):
        before = self.stored()
        got, headers, raw = post(self.port, f"/v1/feeds/{feed}/models{query}", body)
        self.assertEqual(got, status, raw)
        self.assertTrue(headers.get("content-type", "").startswith("application/json"), headers)
        error = json.loads(raw)["error"]
        self.assertEqual(error["code"], code, error)
        for word in mentions:
            self.assertIn(word, error["message"], error)
        self.assertEqual(self.stored(), before, "a refused upload stores nothing")
        return error

    # ------------------------------------------------------------ the story

    def test_a_good_model_activated_serves_then_a_poor_one_is_judged_and_rejected(self):
        self.wait_settled()
        trained = self.status()["model"]["version"]
        self.assertEqual(self.models()[trained]["origin"], "trained")

        # Activated on request: served at once.
        out = self.cli("models", "upload", self.good, "--feed", "lorenz", "--activate")
        m = re.match(r"^version (\d+) activated \(validation error ([0-9.e+-]+)", out.stdout)
        self.assertIsNotNone(m, out.stdout + out.stderr)
        good = int(m.group(1))
        self.assertGreater(good, trained)
        self.assertIn("uploaded over the API and activated on request", out.stdout)
        self.assertEqual(self.status()["model"]["version"], good)
        self.assertEqual(self.status()["model"]["origin"], "uploaded")
        self.assertEqual(self.forecast_version(), good)
        listed = self.models()
        self.assertEqual((listed[good]["status"], listed[good]["origin"]), ("active", "uploaded"))
        self.assertIsNone(listed[good]["parent"])
        self.assertEqual(listed[good]["details"]["trigger"], "upload")
        self.assertEqual(listed[good]["details"]["upload"]["source"], "lyapcast train")
        self.assertEqual((listed[trained]["status"], listed[trained]["origin"]), ("retired", "trained"))
        # Trained to the end of the offline file (the last sample, 44.99 s).
        self.assertEqual(listed[good]["trained_to"]["rfc3339"], "2026-01-01T00:00:44.990000Z")
        with urllib.request.urlopen(f"{self.url}/v1/feeds/lorenz/models/{good}/file", timeout=30) as r:
            self.assertEqual(r.read(), self.good_bytes, "the stored file is the uploaded bytes")
        table = self.cli("models", "--feed", "lorenz").stdout.splitlines()
        self.assertEqual(table[0].split()[:3], ["version", "status", "origin"], table)
        self.assertEqual(table[1].split()[:3], [str(good), "active", "uploaded"], table)
        self.assertIn(f"v{good} (uploaded), trained to ", self.cli("status", "--feed", "lorenz").stdout)
        self.assertIn(["lorenz", str(good), "active", "uploaded"], self.stored())

        # Judged: a one-iteration model is rejected, the uploaded good one stays.
        out = self.cli("models", "upload", self.poor, "--feed", "lorenz", code=1)
        m = re.match(r"^version (\d+) rejected \(validation error ([0-9.e+-]+); active model ([0-9.e+-]+) on the "
                     r"same pairs\)", out.stdout)
        self.assertIsNotNone(m, out.stdout + out.stderr)
        poor, poor_error, active_error = int(m.group(1)), float(m.group(2)), float(m.group(3))
        self.assertGreater(poor_error, 2 * active_error, out.stdout)
        self.assertIn(f"worse than active version {good}", out.stdout)
        self.assertIn("not served", out.stdout)
        self.assertEqual(self.status()["model"]["version"], good)
        self.assertEqual(self.forecast_version(), good)
        listed = self.models()
        self.assertEqual((listed[poor]["status"], listed[poor]["origin"]), ("rejected", "uploaded"))
        self.assertIn(f"worse than active version {good}", listed[poor]["reason"])
        self.assertTrue(listed[poor]["details"]["upload"]["judged_on"], listed[poor]["details"])
        job = self.status()["last_job"]
        self.assertEqual((job["trigger"], job["verdict"], job["version"]), ("upload", "rejected", poor), job)
        self.assertEqual(job["validation_error"], listed[poor]["validation_error"])
        self.assertIsNotNone(job["active_error"])

        # The same over HTTP: 202 with a job to follow; --json gives the finished job.
        with open(self.poor, "rb") as f:
            status, headers, raw = post(self.port, "/v1/feeds/lorenz/models", f.read())
        self.assertEqual(status, 202, raw)
        queued = json.loads(raw)
        self.assertEqual(queued["feed"], "lorenz")
        self.assertIs(queued["activate"], False)
        self.assertEqual(queued["file_feed"], "lorenz")
        self.assertEqual(headers.get("location"), f"/v1/feeds/lorenz/jobs/{queued['job']}")
        done = json.loads(self.cli("models", "upload", self.poor, "--feed", "lorenz", "--json", code=1).stdout)
        self.assertEqual((done["state"], done["trigger"], done["verdict"]), ("done", "upload", "rejected"))
        self.assertEqual(self.status()["model"]["version"], good)

    # ------------------------------------------------------------ refusals

    def test_damaged_files_and_models_of_another_shape_are_refused_and_nothing_is_stored(self):
        self.wait_settled()
        good = self.good_bytes
        flipped = bytearray(good)
        flipped[len(good) // 2] ^= 0x10
        self.assert_refused("lorenz", bytes(flipped), 400, "checksum-mismatch", ["checksum mismatch"])
        self.assert_refused("lorenz", good[:len(good) // 3], 400, "truncated-model-file", ["truncated"])
        self.assert_refused("lorenz", b"", 400, "empty-body", ["empty"])
        self.assert_refused("lorenz", b"GIF89a" + b"\0" * 100, 400, "bad-model-file", ["LYAPMODL"])
        newer = bytearray(good)
        newer[8:12] = (4).to_bytes(4, "little")
        self.assert_refused("lorenz", reseal(newer), 400, "unsupported-format-version",
                            ["format version 4 is newer"])
        # Another feed's shape, and the same channels at another step.
        self.assert_refused("rig", good, 400, "wrong-channels",
                            ["the model has 3 channels (x, y, z) but feed 'rig' has 2 (x, v)",
                             "trained for feed 'lorenz'"])
        self.assert_refused("slow", good, 400, "wrong-step",
                            ["the model steps 10ms but feed 'slow' has a step of 20ms"])
        self.assert_refused("lorenz", good, 400, "bad-parameter", ["activate"], query="?activate=maybe")
        # The upload route reads more than the 64 KiB of other routes ...
        self.assert_refused("lorenz", b"x" * 70000, 400, "bad-model-file")
        # ... up to 16 MiB: a larger body is refused from its Content-Length.
        r = raw_exchange(self.port, b"POST /v1/feeds/lorenz/models HTTP/1.1\r\nHost: x\r\nConnection: close\r\n"
                                    b"Content-Length: %d\r\n\r\n" % (UPLOAD_LIMIT + 1))
        self.assertEqual(r[0], 413, r)
        self.assertEqual(json.loads(r[1])["error"]["code"], "body-too-large")
        self.assertIn(str(UPLOAD_LIMIT), json.loads(r[1])["error"]["message"])
        status, _, raw = post(self.port, "/v1/feeds/nosuch/models", good)
        self.assertEqual(status, 404, raw)
        # A client that asks before sending its body (Expect: 100-continue, as
        # curl does above 1 MiB) is told to go on, then answered.
        with socket.create_connection(("127.0.0.1", self.port), timeout=30) as sock:
            sock.sendall(b"POST /v1/feeds/rig/models HTTP/1.1\r\nHost: x\r\nConnection: close\r\n"
                         b"Expect: 100-continue\r\nContent-Length: %d\r\n\r\n" % len(good))
            interim = b""
            while not interim.endswith(b"\r\n\r\n"):
                chunk = sock.recv(1)
                self.assertTrue(chunk, interim)
                interim += chunk
            self.assertTrue(interim.startswith(b"HTTP/1.1 100 Continue\r\n"), interim)
            sock.sendall(good)
            answer = b""
            while chunk := sock.recv(65536):
                answer += chunk
        self.assertTrue(answer.startswith(b"HTTP/1.1 400 "), answer)
        self.assertIn(b'"wrong-channels"', answer)

        # The CLI: a damaged file is refused before sending (exit 2), a model
        # the daemon refuses gives its message and status (exit 1).
        before = self.stored()
        damaged = os.path.join(self.dir, "damaged.model")
        with open(damaged, "wb") as f:
            f.write(bytes(flipped))
        out = self.cli("models", "upload", damaged, "--feed", "lorenz", code=2)
        self.assertIn("checksum mismatch", out.stderr)
        out = self.cli("models", "upload", self.good, "--feed", "rig", code=1)
        self.assertRegex(out.stderr, r"^lyapcast models upload: the model has 3 channels .*\(HTTP 400\)\n$")
        out = self.cli("models", "upload", os.path.join(self.dir, "missing.model"), "--feed", "lorenz", code=2)
        self.assertIn("cannot read", out.stderr)
        self.assertEqual(self.stored(), before)
        self.assertEqual(self.models("rig"), {})
        self.assertEqual(self.models("slow"), {})


def raw_exchange(port, data):
    """Sends raw bytes (headers only), reads until the server closes; returns (status, body)."""
    with socket.create_connection(("127.0.0.1", port), timeout=30) as s:
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
    return int(head.split(b" ")[1]), body


if __name__ == "__main__":
    unittest.main()
