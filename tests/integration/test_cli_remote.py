"""The lyapcast CLI's commands that talk to a running daemon, end to end
against the real lyapcastd: check (exit codes 0/1/2/3 as a monitoring
plugin), status, models, retrain --wait, forecast --feed (table, CSV, JSON),
replay (counts and first reasons), export -> replay into a second daemon
(identical rows, checked with the sqlite3 shell), and bearer tokens.

A lockstep Lorenz-63 feed (sigma 10, r 28, beta 8/3; as test_retraining)
trains its first model at about 19 s of data (min_pairs 1500 of 10 ms
steps plus the validation share); the cadence (50 Lyapunov times, clamped to
[20 s, 60 s]) puts the next retrain after the end of the 45 s stream, so
one model scores the rest of the stream and its drift ratio is known. The
health thresholds are wide (data age 1 h, drift 50, model age 1000
Lyapunov times) so the verdict is normal however slowly the machine runs
the tests; alert and alarm are forced from the command line."""

import json
import os
import re
import shutil
import socket
import subprocess
import tempfile
import time
import unittest
import urllib.request

from harness import Daemon, daemon_config, run_cli

CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")
START = "2026-01-01T00:00:00Z"
START_S = 1767225600

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
"""
IDLE = """
  - id: idle
    channels: [a]
    step: 1s
"""


def config(db, feeds, extra=""):
    return daemon_config(db, feeds, extra)


run = run_cli


def closed_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def new_daemon(root, name, feeds, extra=""):
    workdir = os.path.join(root, name)
    os.makedirs(workdir, exist_ok=True)
    return Daemon(workdir=workdir, config_text=config(os.path.join(workdir, "window.db"), feeds, extra))


def stored_rows(d, feed):
    return d.sql("SELECT t_us, mask, hex(vals) FROM samples JOIN feeds USING (feed_id) "
                 f"WHERE feeds.name = '{feed}' ORDER BY t_us")


def wait_settled(d, timeout=300):
    """Until the lorenz feed has a model, no job runs and nothing is due (lockstep leaves none behind)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        _, body = d.http_get("/v1/feeds")
        feed = next(f for f in body["feeds"] if f["id"] == "lorenz")
        r = feed["retraining"]
        newest = feed["window"]["newest"]
        if (feed.get("model") and not r["running"] and newest and r["next_due"]
                and r["next_due"]["epoch_s"] > newest["epoch_s"]):
            return feed
        time.sleep(0.05)
    raise AssertionError("no model, or retraining did not settle:\n" + d.read_log())


class LockstepDaemon(unittest.TestCase):
    """One lockstep daemon per class, fed a simulated Lorenz-63 stream through `lyapcast replay`."""
    DURATION = "45s"
    FEEDS = LORENZ

    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.mkdtemp(prefix="lyapcast-cli-remote-")
        cls.sim_config = os.path.join(cls.dir, "sim.yaml")
        with open(cls.sim_config, "w") as f:
            f.write("feeds:" + LORENZ)
        cls.stream = os.path.join(cls.dir, "stream.csv")
        run("simulate", "-c", cls.sim_config, "--duration", cls.DURATION, "--transient", "20s", "--start", START,
            "--seed", "5", "--noise", "0.002", "-o", cls.stream)
        cls.d = new_daemon(cls.dir, "trained", cls.FEEDS, "training: {threads: 1, lockstep: true}")
        try:
            cls.d.start()
            cls.url = f"http://127.0.0.1:{cls.d.http_port}"
            cls.replay = run("replay", "--input", cls.stream, "--to", f"127.0.0.1:{cls.d.ingest_port}")
            cls.settled = wait_settled(cls.d)
        except BaseException:
            cls.tearDownClass()
            raise

    @classmethod
    def tearDownClass(cls):
        cls.d.__exit__(None, None, None)
        shutil.rmtree(cls.dir, ignore_errors=True)

    def cli(self, *args, code=0):
        return run(*args, "--url", self.url, code=code)

    def status(self):
        _, body = self.d.http_get("/v1/feeds/lorenz/status")
        return body


class TrainedDaemonTest(LockstepDaemon):
    """45 s of data: one model (at ~19 s) scores the rest; a second feed has no data."""
    FEEDS = LORENZ + IDLE

    def test_replay_sent_the_whole_stream(self):
        self.assertIn("4500 accepted, 0 rejected", self.replay.stderr)
        self.assertEqual(len(self.d.stored_times("lorenz")), 4500)

    def test_check_normal_then_forced_alert_and_alarm(self):
        out = self.cli("check", "--feed", "lorenz", code=0).stdout
        self.assertEqual(len(out.splitlines()), 1, out)
        self.assertRegex(out, r"^normal lorenz: model v\d+")
        text, perf = out.strip().split(" | ")
        # Perfdata: value (U when unknown), then the daemon's thresholds.
        self.assertRegex(perf, r"^drift_ratio=[0-9.e+-]+;50;100 data_age=[0-9.e+-]+s;3600;7200 "
                               r"model_age_lyapunov=([0-9.e+-]+|U);1000;2000$")
        # Thresholds from the command line override the daemon's.
        warn = self.cli("check", "--feed", "lorenz", "--data-age-alert", "0s", code=1).stdout
        self.assertTrue(warn.startswith("alert lorenz: "), warn)
        self.assertIn("data_age_alert", warn)
        self.assertRegex(warn, r"data_age=[0-9.e+-]+s;0;7200")
        crit = self.cli("check", "--feed", "lorenz", "--data-age-alarm", "0s", code=2).stdout
        self.assertTrue(crit.startswith("alarm lorenz: "), crit)
        self.assertIn("data_age_alarm", crit)
        # The drift ratio is known (one model scored the last ~25 s of the stream).
        self.assertIsNotNone(self.status()["drift"]["ratio"], self.status())
        drift = self.cli("check", "--feed", "lorenz", "--drift-alert", "0", code=1).stdout
        self.assertIn("drift ratio", drift)
        self.assertIn("drift_alert 0", drift)
        drift = self.cli("check", "--feed", "lorenz", "--drift-alert", "0", "--drift-alarm", "0", code=2).stdout
        self.assertIn("drift_alarm 0", drift)
        # Bad arguments are indeterminate (3) for a monitoring system, not alarm (2).
        bad = self.cli("check", "--drift-alert", "lots", code=3).stdout
        self.assertTrue(bad.startswith("indeterminate: bad argument: --drift-alert"), bad)
        bad = run("check", "--no-such-flag", code=3).stdout
        self.assertTrue(bad.startswith("indeterminate: "), bad)

    def test_check_while_paused_judges_neither_data_age_nor_drift(self):
        def post(path):
            req = urllib.request.Request(f"{self.url}/v1/feeds/lorenz/{path}", data=b"", method="POST")
            with urllib.request.urlopen(req, timeout=30) as r:
                self.assertEqual(r.status, 200)

        post("pause")
        try:
            # A plant shutdown: thresholds that would raise an alarm do not apply.
            out = self.cli("check", "--feed", "lorenz", "--data-age-alarm", "0s", "--drift-alarm", "0", code=0).stdout
            self.assertTrue(out.startswith("normal lorenz: "), out)
            self.assertIn("paused", out)
        finally:
            post("resume")
        self.cli("check", "--feed", "lorenz", "--data-age-alarm", "0s", code=2)

    def test_check_every_feed_worst_wins_indeterminate_only_beats_normal(self):
        # lorenz normal, idle has no data: indeterminate beats normal.
        out = self.cli("check", code=3).stdout
        self.assertEqual(len(out.splitlines()), 1, out)
        self.assertTrue(out.startswith("indeterminate idle: "), out)
        self.assertIn("; normal lorenz: model v", out)
        self.assertIn("lorenz.drift_ratio=", out, "perfdata labels name the feed when there are several")
        # An alert beats indeterminate.
        out = self.cli("check", "--data-age-alert", "0s", code=1).stdout
        self.assertTrue(out.startswith("alert lorenz: "), out)
        self.assertIn("; indeterminate idle: ", out)
        # The address comes from $LYAPCAST_URL as well.
        env = dict(os.environ, LYAPCAST_URL=self.url)
        out = subprocess.run([CLI, "check", "--feed", "lorenz"], capture_output=True, text=True, env=env, timeout=60)
        self.assertEqual(out.returncode, 0, out.stdout + out.stderr)

    def test_check_unreachable_or_not_a_daemon_is_indeterminate(self):
        port = closed_port()
        out = run("check", "--url", f"http://127.0.0.1:{port}", code=3).stdout
        self.assertEqual(len(out.splitlines()), 1, out)
        self.assertTrue(out.startswith(f"indeterminate: cannot connect to http://127.0.0.1:{port}"), out)
        # The ingest port speaks lines, not HTTP: garbage to the check.
        out = run("check", "--url", f"http://127.0.0.1:{self.d.ingest_port}", "--timeout", "5s", code=3).stdout
        self.assertEqual(len(out.splitlines()), 1, out)
        self.assertTrue(out.startswith("indeterminate"), out)
        out = self.cli("check", "--feed", "nosuch", code=3).stdout
        self.assertTrue(out.startswith("indeterminate nosuch: "), out)
        self.assertIn("(HTTP 404)", out)

    def test_status_block_and_json(self):
        s = self.status()
        version = s["model"]["version"]
        out = self.cli("status", "--feed", "lorenz").stdout
        lines = out.splitlines()
        self.assertEqual(lines[0].split()[:2], ["lorenz", s["health"]["verdict"]], out)
        for label in ("model", "drift", "data", "lyapunov", "retrain", "last job", "jobs"):
            self.assertTrue(any(line.strip().startswith(label) for line in lines), (label, out))
        self.assertIn(f"v{version}, trained to ", out)
        self.assertIn("4500 samples", out)
        self.assertIn("Lyapunov", out)
        doc = json.loads(self.cli("status", "--feed", "lorenz", "--json").stdout)
        self.assertEqual(doc["feed"], "lorenz")
        self.assertEqual(doc["model"]["version"], version)
        every = json.loads(self.cli("status", "--json").stdout)
        self.assertEqual([f["feed"] for f in every["feeds"]], ["lorenz", "idle"])
        both = self.cli("status").stdout
        self.assertIn("idle  indeterminate", both)
        self.assertIn("none yet", both)
        missing = self.cli("status", "--feed", "nosuch", code=1)
        self.assertRegex(missing.stderr, r"^lyapcast status: .*nosuch.* \(HTTP 404\)\n$")
        bad = self.cli("status", "--feed", "Not/A/Feed", code=2)
        self.assertIn("--feed", bad.stderr)

    def test_models_table_and_json(self):
        doc = json.loads(self.cli("models", "--feed", "lorenz", "--json").stdout)
        models = doc["models"]
        self.assertGreaterEqual(len(models), 1)
        out = self.cli("models", "--feed", "lorenz").stdout
        lines = out.splitlines()
        self.assertEqual(lines[0].split()[:2], ["version", "status"], out)
        for word in ("trained to", "val error", "Lyapunov time", "parent", "reason"):
            self.assertIn(word, lines[0])
        self.assertEqual(len(lines), 1 + len(models), out)
        self.assertEqual(lines[1].split()[:2], [str(models[0]["version"]), models[0]["status"]])
        self.assertTrue(all(len(line) <= 120 for line in lines), "reasons are cut to 120 columns in a pipe")
        one = json.loads(self.cli("models", "--feed", "lorenz", "--limit", "1", "--json").stdout)
        self.assertEqual(len(one["models"]), 1)
        self.cli("models", "--feed", "lorenz", "--limit", "0", code=2)
        self.assertIn("no model versions yet", self.cli("models", "--feed", "idle").stdout)

    def test_forecast_csv_json_and_table(self):
        csv = self.cli("forecast", "--feed", "lorenz", "--steps", "20", "--csv").stdout.splitlines()
        self.assertEqual(csv[0], "time,x,y,z,beyond_horizon")
        self.assertEqual(len(csv), 21)
        self.assertTrue(all(row.split(",")[-1] in ("0", "1") for row in csv[1:]), csv)
        doc = json.loads(self.cli("forecast", "--feed", "lorenz", "--steps", "20", "--json").stdout)
        self.assertEqual(len(doc["points"]), 20)
        self.assertEqual(doc["channels"], ["x", "y", "z"])
        self.assertIn("advisory", doc)
        # --horizon in data time: 0.2 s of 10 ms steps.
        doc = json.loads(self.cli("forecast", "--feed", "lorenz", "--horizon", "0.2s", "--json").stdout)
        self.assertEqual(len(doc["points"]), 20)
        # --from: the complete sample at (or just before) that data time.
        at = START_S + 30
        doc = json.loads(self.cli("forecast", "--feed", "lorenz", "--steps", "5", "--from", str(at), "--json").stdout)
        self.assertLessEqual(doc["from"]["epoch_s"], at)
        self.assertGreater(doc["from"]["epoch_s"], at - 0.2)
        # The table: header lines, then one row per point, past-horizon rows marked.
        doc = json.loads(self.cli("forecast", "--feed", "lorenz", "--steps", "1", "--json").stdout)
        out = self.cli("forecast", "--feed", "lorenz", "--steps", "300").stdout
        self.assertIn(f"model version {doc['model_version']}", out)
        self.assertIn("predictability horizon", out)
        self.assertIn("Forecasts are advisory", out)
        rows = [line for line in out.splitlines() if re.match(r"^\d{4}-\d\d-\d\dT", line)]
        self.assertEqual(len(rows), 300, out)
        self.assertTrue(rows[0].startswith(time.strftime("%Y-%m-%dT", time.gmtime(doc["from"]["epoch_s"]))), rows[0])
        self.assertEqual(len({len(row.split()[0]) for row in rows}), 1, "times line up (fixed decimals)")
        # Past the horizon: marked rows after a divider, and only those.
        horizon = doc["horizon"]["seconds"]
        if horizon is not None and horizon < 500:
            steps = int(horizon / 0.01) + 50
            out = self.cli("forecast", "--feed", "lorenz", "--steps", str(steps)).stdout
            rows = [line for line in out.splitlines() if re.match(r"^\d{4}-\d\d-\d\dT", line)]
            marked = [row.endswith("  *") for row in rows]
            self.assertEqual(marked, sorted(marked), "only rows after the horizon are marked")
            self.assertGreaterEqual(sum(marked), 40, out[-2000:])
            self.assertEqual(out.count("---- predictability horizon"), 1)
            divider = out.splitlines().index(next(l for l in out.splitlines() if l.startswith("----")))
            self.assertTrue(out.splitlines()[divider + 1].endswith("  *"))
        # Usage errors.
        self.assertIn("not both", self.cli("forecast", "--feed", "lorenz", "--steps", "5", "--horizon", "1s",
                                           code=2).stderr)
        self.assertIn("not both", run("forecast", "--feed", "lorenz", "--model", "x.model", code=2).stderr)
        self.assertIn("--feed ID", run("forecast", "--steps", "5", code=2).stderr)
        bad = self.cli("forecast", "--feed", "lorenz", "--steps", "5", "--from", "yesterday", code=1)
        self.assertRegex(bad.stderr, r"^lyapcast forecast: .*from.* \(HTTP 400\)\n$")

    def test_offline_forecast_reads_the_daemons_model_file(self):
        version = self.status()["model"]["version"]
        path = os.path.join(self.dir, "served.model")
        with urllib.request.urlopen(f"{self.url}/v1/feeds/lorenz/models/{version}/file", timeout=30) as r, \
                open(path, "wb") as f:
            f.write(r.read())
        out = run("forecast", "--model", path, "--from", "1,1,20", "--steps", "10").stdout.splitlines()
        self.assertEqual(out[0], "step,seconds,x,y,z")
        self.assertEqual(len(out), 11)
        self.assertIn("remote form", run("forecast", "--model", path, "--from", "1,1,20", "--horizon", "1s",
                                         code=2).stderr)


class RetrainTest(LockstepDaemon):
    """Its own daemon: operator retrains change the active model the other tests look at."""
    DURATION = "25s"

    def test_retrain_wait_reports_the_outcome(self):
        out = self.cli("retrain", "--feed", "lorenz", "--wait", "--wait-timeout", "5m")
        m = re.search(r"^job (\d+) done: (promoted|rejected|not_enough_data)", out.stdout, re.M)
        self.assertIsNotNone(m, out.stdout + out.stderr)
        _, job = self.d.http_get(f"/v1/feeds/lorenz/jobs/{m.group(1)}")
        self.assertEqual(job["state"], "done")
        self.assertEqual(job["verdict"], m.group(2))
        doc = json.loads(self.cli("retrain", "--feed", "lorenz", "--wait", "--json").stdout)
        self.assertEqual(doc["state"], "done")
        self.assertIn(doc["verdict"], ("promoted", "rejected", "not_enough_data"))
        queued = self.cli("retrain", "--feed", "lorenz").stdout
        self.assertRegex(queued, r"^job \d+ (queued|joined)")


class DefaultThresholdsTest(LockstepDaemon):
    """A feed that sets only its channels and step: every health level at its
    default. The retrain cadence (min_interval 30 s) spans about 27 Lyapunov
    times of Lorenz-63 (lambda 0.9056/s, Sprott's table), so a fixed model-age
    alert level of 2 Lyapunov times read "alert" on every healthy feed like
    this one; the levels derived from the cadence read it as normal."""
    FEEDS = """
  - id: lorenz
    channels: [x, y, z]
    step: 10ms
"""

    def test_a_default_config_feed_with_a_good_model_reads_normal(self):
        s = self.status()
        self.assertIsNotNone(s["model"], s)
        self.assertEqual(s["health"]["verdict"], "normal", s)
        self.assertEqual(s["health"]["reasons"], [], s)
        t = s["health"]["thresholds"]
        self.assertIs(t["model_age_alert_derived"], True, t)
        self.assertIs(t["model_age_alarm_derived"], True, t)
        lt = s["staleness"]["since_training_lyapunov_times"]
        self.assertIsNotNone(lt, s)
        # The data since training spans more than the old fixed level of 2 ...
        self.assertGreater(lt, 2, s)
        # ... and the derived level is above a whole retrain interval.
        interval_lt = 30 * s["lyapunov"]["chosen"]["per_s"]
        self.assertGreaterEqual(t["model_age_alert_lyapunov"], 3 * interval_lt, t)
        self.assertGreater(t["model_age_alarm_lyapunov"], t["model_age_alert_lyapunov"], t)
        out = self.cli("check", code=0).stdout
        self.assertTrue(out.startswith("normal lorenz: model v"), out)
        self.assertRegex(out, r"model_age_lyapunov=[0-9.]+;[0-9.]+;[0-9.]+$")


class BeforeAnyModelTest(unittest.TestCase):
    def test_indeterminate_until_there_is_data_and_a_model(self):
        with Daemon() as d:
            d.start()
            url = f"http://127.0.0.1:{d.http_port}"
            out = run("check", "--url", url, code=3).stdout
            self.assertEqual(len(out.splitlines()), 1, out)
            self.assertTrue(out.startswith("indeterminate"), out)
            self.assertIn("loop-a", out)
            self.assertIn("rig-b", out)
            out = run("check", "--url", url, "--feed", "loop-a", code=3).stdout
            self.assertTrue(out.startswith("indeterminate loop-a: "), out)
            self.assertIn("drift_ratio=U;2;5 data_age=U;30;300", out, "the configured defaults, values unknown")
            status = run("status", "--url", url, "--feed", "loop-a").stdout
            self.assertTrue(status.startswith("loop-a  indeterminate"), status)
            self.assertIn("model     none yet", status)
            self.assertIn("no samples yet", status)
            fc = run("forecast", "--url", url, "--feed", "loop-a", code=1)
            self.assertRegex(fc.stderr, r"^lyapcast forecast: .* \(HTTP 409\)\n$")
            self.assertEqual(d.stop(), 0)


class ReplayTest(unittest.TestCase):
    def test_counts_and_first_reasons(self):
        d_dir = tempfile.mkdtemp(prefix="lyapcast-cli-replay-")
        self.addCleanup(shutil.rmtree, d_dir, ignore_errors=True)
        path = os.path.join(d_dir, "bad.csv")
        t = START_S
        with open(path, "w") as f:
            f.write("# a comment line is skipped\n"
                    f"loop-a,{t}.000000,0.31,1.2,-0.4\n"
                    f"loop-a,{t + 1}.000000,0.31,1.2\n"          # line 3: field-count
                    f"nosuch,{t + 2}.000000,1,2,3\n"             # line 4: unknown-feed
                    "\n"
                    "loop-a,yesterday,1,2,3\n"                   # line 6: bad-time
                    f'{{"feed":"loop-a","t":{t + 3},"values":{{"flow":1,"dtemp_h":2}}}}\n'
                    f"loop-a,{t + 4}.500000,0.1,,0.3\n"
                    f"loop-a,{t + 5}.000000,0.31,1.2,oops\n")     # line 9: not-a-number
        with Daemon() as d:
            d.start()
            out = run("replay", "--input", path, "--to", f"127.0.0.1:{d.ingest_port}", code=1)
            self.assertIn("replayed 7 lines", out.stderr)
            self.assertIn("3 accepted, 4 rejected", out.stderr)
            for want in (f"{path}:3: field-count", f"{path}:4: unknown-feed", f"{path}:6: bad-time",
                         f"{path}:9: not-a-number"):
                self.assertIn(want, out.stderr)
            self.assertEqual(len(d.stored_times("loop-a")), 3)
            # Paced: 20 samples over 1 s of data time at 4x take at least ~0.25 s.
            paced = os.path.join(d_dir, "paced.csv")
            with open(paced, "w") as f:
                for k in range(20):
                    f.write(f"rig-b,{t + 100}.{k * 50000:06d},1,{k}\n")
            began = time.monotonic()
            out = run("replay", "--input", paced, "--to", f"127.0.0.1:{d.ingest_port}", "--speed", "4")
            self.assertGreaterEqual(time.monotonic() - began, 0.2)
            self.assertIn("20 accepted, 0 rejected", out.stderr)
            port = closed_port()
            out = run("replay", "--input", paced, "--to", f"127.0.0.1:{port}", code=1)
            self.assertIn("cannot connect", out.stderr)
            self.assertEqual(run("replay", "--input", paced, "--to", "nowhere", code=2).returncode, 2)
            self.assertEqual(d.stop(), 0)


class ExportReplayTest(unittest.TestCase):
    def test_round_trip_into_a_second_daemon_is_identical(self):
        root = tempfile.mkdtemp(prefix="lyapcast-cli-export-")
        self.addCleanup(shutil.rmtree, root, ignore_errors=True)
        sim = os.path.join(root, "sim.yaml")
        with open(sim, "w") as f:
            f.write("feeds:" + LORENZ)
        src = os.path.join(root, "src.csv")
        # 10 s (fewer than min_pairs: no training), with gaps and missing channels.
        run("simulate", "-c", sim, "--duration", "10s", "--transient", "20s", "--start", START, "--seed", "11",
            "--noise", "0.01", "--gap-rate", "0.1", "--missing-rate", "0.05", "-o", src)
        with new_daemon(root, "a", LORENZ) as a, new_daemon(root, "b", LORENZ) as b:
            a.start()
            b.start()
            run("replay", "--input", src, "--to", f"127.0.0.1:{a.ingest_port}")
            rows_a = stored_rows(a, "lorenz")
            self.assertGreater(len(rows_a), 800)
            url = f"http://127.0.0.1:{a.http_port}"
            exported = os.path.join(root, "export.csv")
            out = run("export", "--url", url, "--feed", "lorenz", "--from", START, "--to", str(START_S + 3600),
                      "--page-size", "250", "--out", exported)
            self.assertIn(f"exported {len(rows_a)} samples", out.stderr)
            self.assertIn("in 4 pages", out.stderr)
            self.assertFalse(os.path.exists(exported + ".part"))
            with open(exported) as f:
                lines = f.read().splitlines()
            self.assertEqual(len(lines), len(rows_a))
            self.assertTrue(any(",," in line or line.endswith(",") for line in lines), "missing channels kept")
            # To stdout with the default page size: the same text.
            whole = run("export", "--url", url, "--feed", "lorenz", "--from", str(START_S), "--to",
                        "2026-01-01T01:00:00Z").stdout
            self.assertEqual(whole.splitlines(), lines)
            # A half-open range: [from, to).
            part = run("export", "--url", url, "--feed", "lorenz", "--from", str(START_S + 2), "--to",
                       str(START_S + 3)).stdout.splitlines()
            self.assertTrue(all(START_S + 2 <= float(l.split(",")[1]) < START_S + 3 for l in part), part)

            out = run("replay", "--input", exported, "--to", f"127.0.0.1:{b.ingest_port}")
            self.assertIn(f"{len(rows_a)} accepted, 0 rejected", out.stderr)
            self.assertEqual(stored_rows(b, "lorenz"), rows_a, "same times, missing masks and value bytes")
            self.assertEqual(run("export", "--url", url, "--feed", "lorenz", "--from", "2026-01-02T00:00:00Z",
                                 "--to", START, code=2).returncode, 2)
            self.assertEqual(a.stop(), 0)
            self.assertEqual(b.stop(), 0)


class TokenTest(unittest.TestCase):
    READ = "read-Token-7f3a9c"
    ADMIN = "admin-Token-b41d22"
    WRONG = "wrong-Token-e0e0e0"
    INGEST = "ingest-Token-5c5c5c"

    def test_tokens_are_sent_and_never_printed(self):
        root = tempfile.mkdtemp(prefix="lyapcast-cli-token-")
        self.addCleanup(shutil.rmtree, root, ignore_errors=True)
        files = {}
        for name, token in (("read", self.READ), ("admin", self.ADMIN), ("wrong", self.WRONG),
                            ("ingest", self.INGEST)):
            files[name] = os.path.join(root, f"{name}.token")
            with open(files[name], "w") as f:
                f.write(token + "\n")
        extra = (f"auth:\n  read_token_file: {files['read']}\n  admin_token_file: {files['admin']}\n"
                 f"  ingest_token_file: {files['ingest']}")
        with Daemon(extra_config=extra) as d:
            d.start()
            url = f"http://127.0.0.1:{d.http_port}"
            outputs = []

            def cli(*args, code):
                out = run(*args, "--url", url, code=code)
                outputs.append(out.stdout + out.stderr)
                return out

            self.assertTrue(cli("status", "--feed", "loop-a", "--token-file", files["read"],
                                code=0).stdout.startswith("loop-a  indeterminate"))
            self.assertTrue(cli("status", "--feed", "loop-a", "--token-file", files["admin"],
                                code=0).stdout.startswith("loop-a  indeterminate"))
            # The daemon's own 401 messages, with the status.
            _, no_token = d.http_get("/v1/feeds/loop-a/status")
            _, wrong = d.http_get("/v1/feeds/loop-a/status", {"Authorization": "Bearer " + self.WRONG})
            out = cli("status", "--feed", "loop-a", code=1)
            self.assertEqual(out.stderr, f"lyapcast status: {no_token['error']['message']} (HTTP 401)\n")
            out = cli("status", "--feed", "loop-a", "--token-file", files["wrong"], code=1)
            self.assertEqual(out.stderr, f"lyapcast status: {wrong['error']['message']} (HTTP 401)\n")
            out = cli("models", "--feed", "loop-a", "--token-file", files["wrong"], code=1)
            self.assertIn("(HTTP 401)", out.stderr)
            out = cli("check", "--feed", "loop-a", "--token-file", files["wrong"], code=3)
            self.assertIn("(HTTP 401)", out.stdout)
            out = cli("check", "--token-file", files["read"], code=3)  # authorized: indeterminate for lack of data
            self.assertNotIn("HTTP", out.stdout)
            # A read token may not POST; the admin token may.
            out = cli("retrain", "--feed", "loop-a", "--token-file", files["read"], code=1)
            self.assertIn("(HTTP 403)", out.stderr)
            out = cli("retrain", "--feed", "loop-a", "--token-file", files["admin"], code=None)
            self.assertIn(out.returncode, (0, 1), out.stderr)
            if out.returncode == 0:
                self.assertRegex(out.stdout, r"^job \d+")
            else:
                self.assertRegex(out.stderr, r"\(HTTP 409\)\n$", "a retrain with no data may be refused")
            cli("status", "--feed", "loop-a", "--token-file", os.path.join(root, "absent.token"), code=2)
            # replay: the ingest token (auth line first).
            samples = os.path.join(root, "s.csv")
            with open(samples, "w") as f:
                f.write(f"loop-a,{START_S}.000000,1,2,3\nloop-a,{START_S}.100000,1,2,3\n")
            to = f"127.0.0.1:{d.ingest_port}"
            out = run("replay", "--input", samples, "--to", to, "--token-file", files["ingest"])
            outputs.append(out.stdout + out.stderr)
            self.assertIn("2 accepted, 0 rejected", out.stderr)
            out = run("replay", "--input", samples, "--to", to, "--token-file", files["wrong"], code=1)
            outputs.append(out.stdout + out.stderr)
            self.assertIn("token", out.stderr)
            out = run("replay", "--input", samples, "--to", to, code=1)  # no auth line: bad-auth
            outputs.append(out.stdout + out.stderr)
            self.assertIn("bad-auth", out.stderr)
            for text in outputs:
                for token in (self.READ, self.ADMIN, self.WRONG, self.INGEST):
                    self.assertNotIn(token, text)
            self.assertEqual(d.stop(), 0)


if __name__ == "__main__":
    unittest.main()
