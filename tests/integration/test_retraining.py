"""Continual retraining end to end: the real lyapcastd in lockstep ingests a
simulated Lorenz-63 stream whose parameter r changes midway, retrains on its
data-time cadence, and after the change serves a newly promoted version that
predicts the changed process better than the version it served before the
change. A SIGKILL and restart keeps the active version and the cadence.

Lorenz-63 constants sigma = 10, beta = 8/3 (Sprott 2003, docs/references.md "Systems");
the change r = 28 -> 38 is our own test scenario. Errors are measured with
`lyapcast score` (one-step error over each channel's standard deviation, the
definition the trainer validates with)."""

import json
import os
import shutil
import subprocess
import tempfile
import unittest

from harness import Daemon, IngestClient, run_cli, wait_settled

START = "2026-01-01T00:00:00Z"
START_S = 1767225600
CHANGE_S = 60  # data seconds after START at which r changes

FEED = """
feeds:
  - id: lorenz
    channels: [x, y, z]
    step: 10ms
    dynamics:
      equations: {{x: "s*(y - x)", y: "x*(r - z) - y", z: "x*y - b*z"}}
      constants: {{s: 10, r: {r}, b: 2.6666666666666667}}
    model: {{hidden: [32, 32]}}
    retrain:
      lyapunov_fraction: 5
      min_interval: 5s
      max_interval: 10s
      min_pairs: 1500
      iterations: 400
      batch: 128
      learning_rate: 0.003
"""


def config(db, r=28):
    return f"""
listen:
  ingest: 127.0.0.1:0
  http: 127.0.0.1:0
storage:
  path: {db}
  retention: 6h
training:
  threads: 1
  lockstep: true
{FEED.format(r=r)}"""




class RetrainingTest(unittest.TestCase):
    def setUp(self):
        self.dir = tempfile.mkdtemp(prefix="lyapcast-retrain-it-")
        self.addCleanup(shutil.rmtree, self.dir, ignore_errors=True)

    def daemon(self):
        workdir = os.path.join(self.dir, "daemon")
        os.makedirs(workdir, exist_ok=True)
        return Daemon(workdir=workdir, config_text=config(os.path.join(workdir, "window.db")))

    def simulate(self, name, duration, *extra, r=28, start=START):
        cfg = os.path.join(self.dir, f"sim-{r}.yaml")
        with open(cfg, "w") as f:
            f.write(FEED.format(r=r))
        path = os.path.join(self.dir, name)
        run_cli("simulate", "-c", cfg, "--duration", duration, "--transient", "20s", "--start", start, "--seed", "5",
            "--noise", "0.002", "-o", path, *extra)
        return path

    def versions(self, d):
        rows = d.sql("SELECT version, status, parent, trained_to_us, validation_error, "
                     "json_extract(details, '$.trigger') FROM models ORDER BY version")
        return [{"version": int(v), "status": s, "parent": int(p) if p else None, "trained_to": int(t) / 1e6,
                 "error": float(e) if e else None, "trigger": k} for v, s, p, t, e, k in rows]

    def extract(self, d, version):
        path = os.path.join(self.dir, f"v{version}.lcm")
        out = subprocess.run([os.environ.get("LYAPCAST_SQLITE3", "sqlite3"), "-readonly", d.db,
                              f"SELECT writefile('{path}', file) FROM models WHERE version = {version}"],
                             capture_output=True, text=True, timeout=60)
        self.assertEqual(out.returncode, 0, out.stderr)
        return path

    def score(self, model, csv):
        return json.loads(run_cli("score", "--model", model, "--input", csv, "--json").stdout)["error"]

    def test_after_a_parameter_change_a_new_version_beats_the_one_served_before(self):
        stream = self.simulate("stream.csv", "120s", "--change", f"r=38@{CHANGE_S}s")
        after = self.simulate("after.csv", "30s", r=38, start="2026-01-01T01:00:00Z")
        with self.daemon() as d:
            d.start()
            with open(stream) as f:
                lines = f.read().splitlines()
            client = IngestClient(d.ingest_port)
            client.send_lines(lines)
            replies = client.wait_replies(len(lines), timeout=400)
            client.close()
            self.assertEqual(len(replies), len(lines))
            self.assertTrue(all(r.startswith("ok") for r in replies), [r for r in replies if not r.startswith("ok")][:3])
            feed = wait_settled(d)
            versions = self.versions(d)
            with open(d.log_path, encoding="utf-8", errors="replace") as f:
                log = f.read()
            self.assertEqual(d.stop(), 0, log)

        change = START_S + CHANGE_S
        promoted = [v for v in versions if v["status"] in ("active", "retired")]
        before = [v for v in promoted if v["trained_to"] <= change]
        post = [v for v in promoted if v["trained_to"] >= change + 10]
        self.assertTrue(before, f"no version promoted before the change: {versions}")
        self.assertTrue(post, f"no version promoted after the change: {versions}\n{log}")
        served_before, served_now = before[-1], promoted[-1]
        self.assertEqual(feed["model"]["version"], served_now["version"])
        self.assertEqual(served_now["status"], "active")

        old_error = self.score(self.extract(d, served_before["version"]), after)
        new_error = self.score(self.extract(d, served_now["version"]), after)
        # Margin: the version trained after the change must at least halve the
        # one-step error of the version served before it on post-change data.
        self.assertLess(new_error, 0.5 * old_error,
                        f"version {served_now['version']} {new_error:.4g} vs version "
                        f"{served_before['version']} {old_error:.4g}")

        # Cadence: a cadence retrain comes at least min_interval and at most
        # max_interval of data time after the previous one; drift retrains
        # come earlier, and only after the change.
        for a, b in zip(versions, versions[1:]):
            if b["trigger"] == "cadence":
                self.assertGreaterEqual(b["trained_to"] - a["trained_to"], 5 - 1e-6, versions)
                self.assertLessEqual(b["trained_to"] - a["trained_to"], 10 + 1e-6, versions)
        # The change raises the drift flag within 5 s of data (measured 1.8 s);
        # the retrain it triggers uses the data up to the alarm.
        drift = [v for v in versions if v["trigger"] == "drift" and change < v["trained_to"] <= change + 5]
        self.assertTrue(drift, f"the change raised no drift retrain within 5 s: {versions}\n{log}")
        self.assertIn("drift: change test alarm", log)
        # A rejected candidate is never served: no version was ever
        # warm-started from one, and the served version was promoted.
        rejected = {v["version"] for v in versions if v["status"] == "rejected"}
        for v in versions:
            self.assertNotIn(v["parent"], rejected, f"version {v['version']} grew from a rejected one")
        for word in ("job 1 started", "cold start", "promoted version 1", "next retrain due at"):
            self.assertIn(word, log)

    def test_sigkill_restart_serves_the_same_version_and_retraining_resumes(self):
        stream = self.simulate("stream.csv", "60s")
        with open(stream) as f:
            lines = f.read().splitlines()
        half = len(lines) // 2
        with self.daemon() as d:
            d.start()
            client = IngestClient(d.ingest_port)
            client.send_lines(lines[:half])
            self.assertEqual(len(client.wait_replies(half, timeout=300)), half)
            client.close()
            before = wait_settled(d)
            self.assertIsNotNone(before["model"], d.read_log())
            d.kill()

            d.start()
            _, body = d.http_get("/v1/feeds")
            resumed = body["feeds"][0]
            self.assertEqual(resumed["model"]["version"], before["model"]["version"])
            self.assertEqual(resumed["retraining"]["last_retrain"], before["retraining"]["last_retrain"])
            self.assertEqual(resumed["retraining"]["next_due"], before["retraining"]["next_due"])
            self.assertIn(f"active version {before['model']['version']}", d.read_log())

            client = IngestClient(d.ingest_port)
            client.send_lines(lines[half:])
            self.assertEqual(len(client.wait_replies(len(lines) - half, timeout=300)), len(lines) - half)
            client.close()
            after = wait_settled(d)
            self.assertGreater(after["retraining"]["last_retrain"]["epoch_s"],
                               before["retraining"]["last_retrain"]["epoch_s"], "retraining resumed")
            versions = self.versions(d)
            newest = versions[-1]
            self.assertGreater(newest["version"], before["model"]["version"])
            self.assertIsNotNone(newest["parent"], "warm-started from the version served before the kill")
            self.assertEqual(d.stop(), 0)


if __name__ == "__main__":
    unittest.main()
