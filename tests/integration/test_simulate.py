"""`lyapcast simulate --scenario`: several feeds from one process.

The demo's own scenario (config/demo-scenario.yaml on config/demo.yaml) is
run to a file: both feeds' lines in data time order, and each feed's lines
byte-identical to what the single-feed invocation with the same settings
writes. Bad scenario files and clashing flags are usage errors (exit 2)
that name the file, line and key. Last, a scenario streams into a real
daemon over one ingest connection, paced with --speed.
"""

import os
import shutil
import subprocess
import tempfile
import time
import unittest

from harness import Daemon, daemon_config

CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")
ROOT = os.path.abspath(os.path.join(os.path.dirname(__file__), "..", ".."))
DEMO_CONFIG = os.path.join(ROOT, "config", "demo.yaml")
DEMO_SCENARIO = os.path.join(ROOT, "config", "demo-scenario.yaml")
START = "2026-01-01T00:00:00Z"
EXIT_USAGE = 2  # tools/cli/cli_common.h kExitUsage

# The single-feed flags that simulate each feed of config/demo-scenario.yaml
# alone; keep in step with that file.
DEMO_FEEDS = {
    "loop-a": ["--seed", "11", "--transient", "5m", "--noise", "0.05,0.05,0.05", "--gap-rate", "0.02",
               "--missing-rate", "0.01", "--change", "ra=28..30@0s..15m", "--change", "ra=38@15m"],
    "rig-b": ["--seed", "12", "--transient", "1m", "--noise", "0.01,0.01,0,0", "--gap-rate", "0.02"],
}


def run(*args, check=True):
    out = subprocess.run([CLI, *args], capture_output=True, timeout=600)
    if check and out.returncode != 0:
        raise AssertionError(f"lyapcast {' '.join(args)} exited {out.returncode}:\n{out.stderr.decode()}")
    return out


def line_time(line):
    """(seconds, microseconds) of a CSV line "feed,123.000500,..."."""
    seconds, micros = line.split(b",")[1].split(b".")
    return int(seconds), int(micros)


def lines_of(data, feed):
    """The lines of `feed` in CSV or NDJSON output, newline included."""
    lines = data.splitlines(keepends=True)
    csv = [x for x in lines if x.startswith(feed.encode() + b",")]
    ndjson = [x for x in lines if x.startswith(b'{"feed":"' + feed.encode() + b'",')]
    return b"".join(csv or ndjson)


class DemoScenarioTest(unittest.TestCase):
    """The demo scenario exactly as tools/run-demo streams it (2 h of data per feed), written to a file."""

    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.mkdtemp(prefix="lyapcast-sim-")
        cls.merged = os.path.join(cls.dir, "demo.csv")
        cls.out = run("simulate", "--config", DEMO_CONFIG, "--scenario", DEMO_SCENARIO, "--start", START,
                      "--out", cls.merged)
        with open(cls.merged, "rb") as f:
            cls.data = f.read()

    @classmethod
    def tearDownClass(cls):
        shutil.rmtree(cls.dir, ignore_errors=True)

    def test_both_feeds_in_data_time_order(self):
        lines = self.data.splitlines()
        times = [line_time(x) for x in lines]
        self.assertEqual(times, sorted(times), "merged lines must be in non-decreasing data time")
        self.assertLess(times[0], (1767225601, 0), "every feed starts at --start")
        self.assertGreaterEqual(times[0], (1767225600, 0))
        summary = self.out.stderr.decode()
        counts = []
        for feed in ("loop-a", "rig-b"):
            mine = [t for x, t in zip(lines, times) if x.startswith(feed.encode() + b",")]
            counts.append(f"{feed}: {len(mine)} samples")
            # 2 h of data at the feed's step with 2 % of the samples dropped.
            micros = [s * 1_000_000 + u for s, u in mine]
            step = min(b - a for a, b in zip(micros, micros[1:]))
            self.assertLess(abs(len(mine) / (7200 * 1_000_000 // step) - 0.98), 0.01, feed)
            self.assertGreater(micros[-1] - micros[0], 7100 * 1_000_000, feed)
        self.assertIn(", ".join(counts) + "; wrote ", summary)
        self.assertIn("2h of data time per feed", summary)

    def test_ties_go_in_scenario_order(self):
        lines = self.data.splitlines()
        for i in range(1, len(lines)):
            if line_time(lines[i]) == line_time(lines[i - 1]):
                self.assertTrue(lines[i - 1].startswith(b"loop-a,") and lines[i].startswith(b"rig-b,"),
                                (lines[i - 1], lines[i]))

    def test_each_feed_is_byte_identical_to_a_single_feed_run(self):
        for feed, flags in DEMO_FEEDS.items():
            with self.subTest(feed=feed):
                path = os.path.join(self.dir, f"{feed}.csv")
                run("simulate", "--config", DEMO_CONFIG, "--feed", feed, "--duration", "2h", "--start", START,
                    "--out", path, *flags)
                with open(path, "rb") as f:
                    alone = f.read()
                self.assertGreater(len(alone), 0)
                self.assertEqual(lines_of(self.data, feed), alone)


class ScenarioFileTest(unittest.TestCase):
    def setUp(self):
        self.dir = tempfile.mkdtemp(prefix="lyapcast-sim-")
        self.addCleanup(shutil.rmtree, self.dir, ignore_errors=True)

    def scenario(self, text, name="s.yaml"):
        path = os.path.join(self.dir, name)
        with open(path, "w") as f:
            f.write(text)
        return path

    def test_every_key_and_ndjson_match_single_feed_runs(self):
        path = self.scenario(
            "duration: 1m\n"
            "feeds:\n"
            "  - feed: rig-b\n"
            "    seed: 5\n"
            "    from: [1, 0, 0, 1]\n"
            "    step: 0.25s\n"
            "    noise: 0.02\n"
            "    missing_rate: 0.3\n"
            "    changes: [\"gamma=0.5..0.6@10s..20s\"]\n"
            "  - feed: loop-a\n"
            "    transient: 30s\n"
            "    gap_rate: 0.1\n")
        merged = os.path.join(self.dir, "merged.ndjson")
        run("simulate", "-c", DEMO_CONFIG, "--scenario", path, "--start", START, "--format", "ndjson", "-o", merged)
        with open(merged, "rb") as f:
            data = f.read()
        singles = {
            "rig-b": ["--seed", "5", "--from", "1,0,0,1", "--step", "0.25s", "--noise", "0.02", "--missing-rate", "0.3",
                      "--change", "gamma=0.5..0.6@10s..20s"],
            "loop-a": ["--transient", "30s", "--gap-rate", "0.1"],
        }
        for feed, flags in singles.items():
            with self.subTest(feed=feed):
                alone = run("simulate", "-c", DEMO_CONFIG, "--feed", feed, "--duration", "1m", "--start", START,
                            "--format", "ndjson", *flags).stdout
                self.assertGreater(len(alone), 0)
                self.assertEqual(lines_of(data, feed), alone)
        # The first line: rig-b, listed first, wins the tie at the start.
        self.assertTrue(data.startswith(b'{"feed":"rig-b","t":1767225600.000000,'), data[:80])

    def expect_usage_error(self, args, *fragments):
        out = run("simulate", *args, check=False)
        err = out.stderr.decode()
        self.assertEqual(out.returncode, EXIT_USAGE, err)
        for fragment in fragments:
            self.assertIn(fragment, err)
        return err

    def expect_bad_scenario(self, text, *fragments):
        path = self.scenario(text)
        return self.expect_usage_error(["-c", DEMO_CONFIG, "--scenario", path, "--duration", "10s", "-o",
                                        os.path.join(self.dir, "never.csv")], *fragments)

    def test_bad_scenario_files_name_the_line_and_key(self):
        s = os.path.join(self.dir, "s.yaml")
        self.expect_bad_scenario("feeds:\n  - feed: loop-a\n    speed: 3\n",
                                 f"{s}:3: feeds[0].speed: unknown key", "gap_rate")
        self.expect_bad_scenario("feeds:\n  - feed: loop-a\n    gap_rate: 1.5\n",
                                 f"{s}:3: feeds[0].gap_rate: must be a number in [0, 1); got '1.5'")
        self.expect_bad_scenario("feeds:\n  - feed: loop-a\n  - feed: rig-b\n  - feed: loop-a\n",
                                 f"{s}:4: feeds[2].feed: feed 'loop-a' is already simulated (first at line 2)")
        self.expect_bad_scenario("feeds:\n  - feed: loop-a\n  - seed: 3\n", f"{s}:3: feeds[1].feed: missing")
        self.expect_bad_scenario("feeds: [{feed: loop-a}]\nfeeds: [{feed: rig-b}]\n",
                                 f"{s}:2: feeds: duplicate key")
        self.expect_bad_scenario("feeds:\n  - feed: loop-a\n    changes: [\"ra=1..2@5s\"]\n",
                                 f"{s}:3: feeds[0].changes[0]: 'ra=1..2@5s': a ramp needs two values")
        self.assertNotIn(b"never", b"".join(os.fsencode(n) for n in os.listdir(self.dir)))

    def test_checks_against_the_config_name_the_scenario_and_feed(self):
        s = os.path.join(self.dir, "s.yaml")
        self.expect_bad_scenario("feeds:\n  - feed: rig-b\n  - feed: pump-c\n",
                                 f"{s}:3: feeds[1].feed: {DEMO_CONFIG} has no feed 'pump-c'; its feeds are loop-a, rig-b")
        self.expect_bad_scenario("feeds:\n  - feed: loop-a\n    changes: [\"ra=30@1m\", \"rb=1@2m\"]\n",
                                 f"{s}:3: feeds[0].changes[1]: 'rb' is not a constant of feed 'loop-a'",
                                 "pr, ra, b")
        self.expect_bad_scenario("feeds:\n  - feed: rig-b\n    noise: [0.1, 0.1, 0.1]\n",
                                 f"{s}:3: feeds[0].noise: feed 'rig-b' has 4 channels (x, v, drive_s, drive_c)")
        self.expect_bad_scenario("feeds:\n  - feed: loop-a\n    from: [1, 2]\n",
                                 f"{s}:3: feeds[0].from: feed 'loop-a' has 3 channels")
        nodyn = os.path.join(self.dir, "nodyn.yaml")
        with open(nodyn, "w") as f:
            f.write("feeds:\n  - {id: loop-a, channels: [flow]}\n")
        self.expect_usage_error(["-c", nodyn, "--scenario", self.scenario("feeds: [{feed: loop-a}]\n"), "--duration",
                                 "10s"], f"{s}:1: feeds[0].feed: feed 'loop-a' has no dynamics section")

    def test_missing_file_and_missing_duration(self):
        self.expect_usage_error(["-c", DEMO_CONFIG, "--scenario", os.path.join(self.dir, "none.yaml"), "--duration",
                                 "1m"], "cannot read scenario file", "none.yaml")
        path = self.scenario("feeds: [{feed: loop-a}]\n")
        self.expect_usage_error(["-c", DEMO_CONFIG, "--scenario", path], path, "sets no duration", "--duration")
        # Without --scenario, --duration stays required.
        self.expect_usage_error(["-c", DEMO_CONFIG, "--feed", "loop-a"], "--duration is required")

    def test_single_feed_flags_clash_with_scenario(self):
        err = self.expect_usage_error(["-c", DEMO_CONFIG, "--scenario", DEMO_SCENARIO, "--feed", "loop-a"],
                                      "--feed cannot be combined with --scenario")
        self.assertEqual(err.count("\n"), 1, err)
        self.expect_usage_error(["-c", DEMO_CONFIG, "--scenario", DEMO_SCENARIO, "--seed", "3", "--change",
                                 "ra=30@1m", "--duration", "1m"], "--change, --seed cannot be combined with --scenario")


# Two small feeds with dynamics; no training (min_pairs far above what is sent).
SEND_FEEDS = """
  - id: lorenz
    channels: [x, y, z]
    step: 10ms
    dynamics:
      equations: {x: "s*(y - x)", y: "x*(r - z) - y", z: "x*y - b*z"}
      constants: {s: 10, r: 28, b: 2.6666666666666667}
    retrain: {min_pairs: 1000000}
  - id: osc
    channels: [p, q]
    step: 50ms
    dynamics:
      equations: {p: "q", q: "-w*w*p"}
      constants: {w: 2}
    retrain: {min_pairs: 1000000}
"""


class SendTest(unittest.TestCase):
    def test_scenario_streams_every_feed_over_one_connection(self):
        workdir = tempfile.mkdtemp(prefix="lyapcast-sim-send-")
        self.addCleanup(shutil.rmtree, workdir, ignore_errors=True)
        scenario = os.path.join(workdir, "scenario.yaml")
        with open(scenario, "w") as f:
            f.write("duration: 20s\nfeeds:\n"
                    "  - {feed: osc, noise: 0.01, gap_rate: 0.1, seed: 4}\n"
                    "  - {feed: lorenz, transient: 10s, noise: 0.1, missing_rate: 0.05, changes: [\"r=35@10s\"]}\n")
        with Daemon(workdir=workdir, config_text=daemon_config(os.path.join(workdir, "window.db"), SEND_FEEDS)) as d:
            d.start()
            began = time.monotonic()
            out = run("simulate", "-c", d.config_path, "--scenario", scenario, "--send",
                      f"127.0.0.1:{d.ingest_port}", "--speed", "40")
            elapsed = time.monotonic() - began
            err = out.stderr.decode()
            summary = [x for x in err.splitlines() if "; sent " in x]
            self.assertEqual(len(summary), 1, err)
            counts, totals = summary[0].split("; ")
            per_feed = dict((name, int(n.split()[0])) for name, n in (part.split(": ") for part in counts.split(", ")))
            self.assertEqual(list(per_feed), ["osc", "lorenz"], "scenario order")
            sent = sum(per_feed.values())
            self.assertEqual(totals, f"sent {sent}, accepted {sent}, rejected 0")
            self.assertEqual(per_feed["lorenz"], 2000)
            self.assertLess(abs(per_feed["osc"] / 400 - 0.9), 0.06)
            # Paced: 20 s of data time at 40x takes at least 0.5 s of wall time.
            self.assertGreaterEqual(elapsed, 0.45)
            self.assertEqual(d.stop(), 0)
            self.assertEqual(len(d.stored_times("lorenz")), per_feed["lorenz"])
            self.assertEqual(len(d.stored_times("osc")), per_feed["osc"])


if __name__ == "__main__":
    unittest.main()
