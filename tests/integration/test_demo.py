"""Demo smoke test: the demo scenario (config/demo.yaml with
config/demo-scenario.yaml) through the real daemon in lockstep, faster than
real time.

The scenario is invented (see the two files). What a newcomer is promised
when running tools/run-demo is checked here on the same config and the
same scenario, only with lockstep on, ephemeral ports and a fixed start:

  - both feeds get models and keep being retrained;
  - forecasts come with a predictability horizon;
  - loop-a's abrupt operating-point change (ra 30 -> 38 at 15 min) raises
    the drift flag, and the retrain it triggers promotes a version whose
    drift ratio is back under health.drift_alert.

Data are sent in slices of SLICE_S seconds of data time; after each slice
is acknowledged the test reads both feeds' /status. In lockstep an
acknowledgement means every retrain due before it has finished and the
drift monitor has scored the slice, so what the test sees depends on the
data, not on the machine's speed. A drift retrain also finishes before the
acknowledgement, so the raised flag itself is usually gone by the next
read (its model is replaced); the alarm is checked through what it left:
the drift-triggered version with the alarm's data time, and the log.
"""

import os
import re
import subprocess
import tempfile
import unittest

from harness import Daemon

ROOT = os.path.abspath(os.path.join(os.path.dirname(__file__), "..", ".."))
DEMO_CONFIG = os.path.join(ROOT, "config", "demo.yaml")
DEMO_SCENARIO = os.path.join(ROOT, "config", "demo-scenario.yaml")
CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")

START = "2026-01-01T00:00:00Z"
START_S = 1767225600  # START in epoch seconds
DURATION_S = 20 * 60  # the change at 15 min, then 5 min to recover
CHANGE_S = START_S + 15 * 60  # config/demo-scenario.yaml: ra=38@15m on loop-a
SLICE_S = 2
FEEDS = ("loop-a", "rig-b")


def lockstep_config(db_path):
    """config/demo.yaml with lockstep on, ephemeral ports and its own database."""
    with open(DEMO_CONFIG) as f:
        text = f.read()
    edits = [
        (r"ingest: 127\.0\.0\.1:\d+", "ingest: 127.0.0.1:0"),
        (r"http: 127\.0\.0\.1:\d+", "http: 127.0.0.1:0"),
        (r"path: \S+", f"path: {db_path}"),
        (r"lockstep: false", "lockstep: true"),
    ]
    for pattern, replacement in edits:
        text, n = re.subn(pattern, replacement, text, count=1)
        assert n == 1, f"config/demo.yaml no longer has '{pattern}'; update this test"
    return text


def scenario_lines(workdir):
    """The demo scenario's samples, both feeds merged in data-time order."""
    out = os.path.join(workdir, "scenario.csv")
    subprocess.run([CLI, "simulate", "--config", DEMO_CONFIG, "--scenario", DEMO_SCENARIO,
                    "--duration", f"{DURATION_S}s", "--start", START, "--out", out],
                   check=True, capture_output=True, timeout=300)
    with open(out) as f:
        return f.read().splitlines()


def line_time(line):
    return float(line.split(",", 2)[1])


class DemoScenarioTest(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.TemporaryDirectory(prefix="lyapcast-demo-")
        lines = scenario_lines(cls.dir.name)
        cls.daemon = Daemon(workdir=cls.dir.name, config_text=lockstep_config(os.path.join(cls.dir.name, "w.db")))
        cls.daemon.start()
        # timeline: one row per feed per slice, read after the slice was acknowledged
        cls.timeline = {feed: [] for feed in FEEDS}
        client = cls.daemon.connect()
        sent = 0
        try:
            i = 0
            slice_end = START_S + SLICE_S
            while i < len(lines):
                j = i
                while j < len(lines) and line_time(lines[j]) < slice_end:
                    j += 1
                client.send_lines(lines[i:j])
                sent += j - i
                replies = client.wait_replies(sent, timeout=300)
                assert len(replies) == sent, f"{len(replies)} replies to {sent} lines"
                for feed in FEEDS:
                    code, status = cls.daemon.http_get(f"/v1/feeds/{feed}/status")
                    assert code == 200, status
                    cls.timeline[feed].append((slice_end, status))
                i = j
                slice_end += SLICE_S
            cls.replies = client.wait_replies(sent)
        finally:
            client.close()
        cls.sent = sent

    @classmethod
    def tearDownClass(cls):
        cls.daemon.stop()
        cls.daemon.__exit__(None, None, None)
        cls.dir.cleanup()

    def status(self, feed):
        code, s = self.daemon.http_get(f"/v1/feeds/{feed}/status")
        self.assertEqual(code, 200, s)
        return s

    def models(self, feed):
        code, body = self.daemon.http_get(f"/v1/feeds/{feed}/models?limit=1000")
        self.assertEqual(code, 200, body)
        return sorted(body["models"], key=lambda m: m["version"])

    def test_every_sample_was_accepted(self):
        self.assertEqual(len(self.replies), self.sent)
        rejected = [r for r in self.replies if not r.startswith("ok")]
        self.assertEqual(rejected, [], "the scenario's samples are all valid")

    def test_both_feeds_get_models_and_keep_retraining(self):
        for feed in FEEDS:
            s = self.status(feed)
            self.assertIsNotNone(s["model"], feed)
            # 20 min of data, retrains at least 30 s apart: about 40 jobs; most promote.
            self.assertGreaterEqual(s["jobs"]["promoted"], 10, (feed, s["jobs"]))
            self.assertEqual(s["jobs"]["failed"], 0, (feed, s["jobs"]))
            first_model = next(t for t, st in self.timeline[feed] if st["model"] is not None)
            self.assertLess(first_model - START_S, 180, f"{feed}: first model within 3 min of data")

    def test_forecasts_come_with_a_predictability_horizon(self):
        for feed in FEEDS:
            code, body = self.daemon.http_get(f"/v1/feeds/{feed}/forecast?horizon=60s")
            self.assertEqual(code, 200, body)
            horizon = body["horizon"]
            self.assertIsNone(horizon["reason"], (feed, horizon))
            self.assertGreater(horizon["seconds"], 0, (feed, horizon))
            self.assertGreater(body["lyapunov"]["per_s"], 0, feed)
            flags = [p["beyond_horizon"] for p in body["points"]]
            self.assertIn(True, flags, f"{feed}: a 60 s forecast reaches past its horizon")
            self.assertIn(False, flags, feed)

    def test_the_abrupt_change_raises_the_drift_flag_and_a_retrain_brings_the_ratio_back(self):
        rows = self.timeline["loop-a"]
        warn = rows[-1][1]["health"]["thresholds"]["drift_alert"]
        summary = "\n".join(
            f"  t+{t - START_S:5d}s v{s['model']['version'] if s['model'] else '-'} "
            f"ratio {s['drift']['ratio'] if s['drift']['ratio'] is None else round(s['drift']['ratio'], 2)} "
            f"flag {s['drift']['flag']} {s['health']['verdict']}"
            for t, s in rows if CHANGE_S - 60 <= t <= CHANGE_S + 180)
        print("loop-a around the change:\n" + summary)

        # No alarm while only the slow heater ramp runs...
        models = self.models("loop-a")
        drift_versions = [m for m in models if m["details"].get("trigger") == "drift"]
        self.assertEqual([m["version"] for m in drift_versions if m["trained_to"]["epoch_s"] <= CHANGE_S], [],
                         "no drift retrain before the change")
        self.assertFalse(any(s["drift"]["flag"] for t, s in rows if t <= CHANGE_S))
        # ...then the change raised the flag, whose alarm retrained on the data
        # up to the alarming sample (trained_to: its time + 1 us).
        self.assertTrue(drift_versions, "the change never raised the drift flag:\n" + summary)
        first = drift_versions[0]
        alarm_at = first["trained_to"]["epoch_s"]
        self.assertLess(alarm_at, CHANGE_S + 60, "flagged within a minute of data after the change")
        self.assertIn("drift: change test alarm at", self.daemon.read_log(tail=None))
        self.assertIn(first["status"], ("active", "retired"), "the drift retrain was promoted")
        # ...and under that version the drift ratio is back under drift_alert.
        under = [s for t, s in rows if s["model"] and s["model"]["version"] == first["version"]
                 and s["drift"]["ratio"] is not None]
        self.assertTrue(under, f"version {first['version']} was never observed serving")
        settled = max(under, key=lambda s: s["drift"]["scored"])
        self.assertLess(settled["drift"]["ratio"], warn, summary)
        self.assertFalse(settled["drift"]["flag"])
        # The change was real for the model served before it: its ratio rose past drift_alert.
        peak = max((s["drift"]["ratio"] or 0) for t, s in rows if CHANGE_S < t <= alarm_at + SLICE_S)
        self.assertGreaterEqual(peak, warn, summary)


if __name__ == "__main__":
    unittest.main()
