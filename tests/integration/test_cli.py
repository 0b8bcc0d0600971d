"""The lyapcast CLI's offline commands end to end: simulate -> train ->
forecast on files, simulate --send into a real daemon, and backup of a running
daemon's database (checked with the sqlite3 shell)."""

import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import unittest

from harness import SQLITE3, Daemon, base_config, now_us, t_text

CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")

LORENZ = """
feeds:
  - id: lorenz
    channels: [x, y, z]
    step: 10ms
    dynamics:
      equations: {x: "s*(y - x)", y: "x*(r - z) - y", z: "x*y - b*z"}
      constants: {s: 10, r: 28, b: 2.6666666666666667}
      constraints:
        - {kind: velocity, weight: 1.0, anneal: {mid: 0.3, width: 0.05}}
"""


def run(*args, check=True):
    out = subprocess.run([CLI, *args], capture_output=True, text=True, timeout=300)
    if check and out.returncode != 0:
        raise AssertionError(f"lyapcast {' '.join(args)} exited {out.returncode}:\n{out.stderr}")
    return out


class OfflineCommandsTest(unittest.TestCase):
    def setUp(self):
        self.dir = tempfile.mkdtemp(prefix="lyapcast-cli-")
        self.addCleanup(shutil.rmtree, self.dir, ignore_errors=True)
        self.config = os.path.join(self.dir, "lorenz.yaml")
        with open(self.config, "w") as f:
            f.write(LORENZ)

    def simulate(self, name, *extra):
        path = os.path.join(self.dir, name)
        run("simulate", "-c", self.config, "--duration", "20s", "--transient", "20s", "--start",
            "2026-01-01T00:00:00Z", "--seed", "3", "-o", path, *extra)
        with open(path) as f:
            return f.read().splitlines()

    def test_simulate_is_deterministic_and_drops_what_it_is_told(self):
        a = self.simulate("a.csv", "--noise", "0.01", "--gap-rate", "0.2", "--missing-rate", "0.1")
        b = self.simulate("b.csv", "--noise", "0.01", "--gap-rate", "0.2", "--missing-rate", "0.1")
        self.assertEqual(a, b, "same seed, same samples")
        clean = self.simulate("c.csv")
        self.assertEqual(len(clean), 2000)
        self.assertTrue(clean[0].startswith("lorenz,1767225600.000000,"))
        self.assertLess(abs(len(a) / 2000 - 0.8), 0.05, "about 20 % dropped")
        missing = sum(1 for line in a if ",," in line or line.endswith(","))
        self.assertLess(abs(missing / len(a) - 0.1), 0.04, "about 10 % with a missing channel")

    def test_parameter_change_changes_the_trajectory(self):
        base = self.simulate("base.csv")
        changed = self.simulate("chg.csv", "--change", "r=40@10s")
        self.assertEqual(base[:1000], changed[:1000], "identical before the change")
        self.assertNotEqual(base[1500:], changed[1500:])
        bad = run("simulate", "-c", self.config, "--duration", "1s", "--change", "q=1@1s", check=False)
        self.assertEqual(bad.returncode, 2)
        self.assertIn("'q' is not a constant", bad.stderr)
        bad = run("simulate", "-c", self.config, "--duration", "1s", "--change", "r=1..2@5s", check=False)
        self.assertEqual(bad.returncode, 2)
        self.assertIn("NAME=A..B@T1..T2", bad.stderr)

    def test_train_then_forecast(self):
        self.simulate("train.csv", "--noise", "0.005", "--gap-rate", "0.1")
        model = os.path.join(self.dir, "lorenz.model")
        out = run("train", "-c", self.config, "--csv", os.path.join(self.dir, "train.csv"), "--out", model,
                  "--iterations", "400")
        self.assertIn("one-step validation error per channel", out.stdout)
        self.assertIn("velocity", out.stderr, "progress shows the loss by term")
        self.assertTrue(os.path.getsize(model) > 1000)
        fc = run("forecast", "--model", model, "--from", "1,1,20", "--steps", "50")
        lines = fc.stdout.splitlines()
        self.assertEqual(lines[0], "step,seconds,x,y,z")
        self.assertEqual(len(lines), 51)
        self.assertTrue(lines[50].startswith("50,0.500000,"))
        bad = run("forecast", "--model", model, "--from", "1,1", check=False)
        self.assertEqual(bad.returncode, 2)
        self.assertIn("expected 3", bad.stderr)
        with open(model, "r+b") as f:
            f.seek(100)
            f.write(b"\xff\xff")
        corrupt = run("forecast", "--model", model, "--from", "1,1,20", check=False)
        self.assertEqual(corrupt.returncode, 2)
        self.assertIn("checksum", corrupt.stderr)



class ScoreCommandTest(unittest.TestCase):
    """train -> score: small on fresh data of the same system, clearly larger after a parameter change."""

    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.mkdtemp(prefix="lyapcast-cli-score-")
        cls.config = os.path.join(cls.dir, "lorenz.yaml")
        with open(cls.config, "w") as f:
            f.write(LORENZ)
        cls.train_csv = cls.simulate("train.csv", "--noise", "0.005", "--gap-rate", "0.1")
        cls.model = os.path.join(cls.dir, "lorenz.model")
        cls.train_out = run("train", "-c", cls.config, "--csv", cls.train_csv, "--out", cls.model,
                            "--iterations", "1000", "--validation", "0.2").stdout

    @classmethod
    def tearDownClass(cls):
        shutil.rmtree(cls.dir, ignore_errors=True)

    @classmethod
    def simulate(cls, name, *extra, start="2026-01-01T00:00:00Z", transient="20s"):
        path = os.path.join(cls.dir, name)
        run("simulate", "-c", cls.config, "--duration", "20s", "--transient", transient, "--start", start,
            "--seed", "3", "-o", path, *extra)
        return path

    def score_json(self, csv, *extra):
        out = run("score", "--model", self.model, "--input", csv, "--json", *extra)
        doc = json.loads(out.stdout)
        self.assertEqual(sorted(doc), ["channels", "error", "from", "model", "pairs", "to"], out.stdout)
        self.assertEqual([c["name"] for c in doc["channels"]], ["x", "y", "z"])
        return doc

    def test_reproduces_the_validation_error_on_the_training_file(self):
        # The newest 20 % of the training file's grid is what train validated on.
        with open(self.train_csv) as f:
            times = [float(line.split(",")[1]) for line in f]
        n = round((times[-1] - times[0]) / 0.01) + 1
        begin = n - math.floor(0.2 * n)
        doc = self.score_json(self.train_csv, "--from", f"{times[0] + begin * 0.01:.6f}")
        report = self.train_out.split("one-step validation error per channel")[1]
        per_channel = [float(line.split()[1]) for line in report.splitlines()[1:4]]
        for got, want in zip(doc["channels"], per_channel):
            self.assertAlmostEqual(got["error"] / want, 1.0, delta=2e-3, msg=(doc, self.train_out))
        self.assertAlmostEqual(doc["error"] / (sum(per_channel) / 3), 1.0, delta=2e-3)

    def test_fresh_data_small_changed_parameter_larger(self):
        fresh = self.simulate("fresh.csv", start="2026-01-02T00:00:00Z", transient="45s")
        changed = self.simulate("changed.csv", "--change", "r=40@0s", start="2026-01-02T00:00:00Z",
                                transient="45s")
        a = self.score_json(fresh)
        b = self.score_json(changed)
        self.assertEqual(a["pairs"], 1999, "2000 samples without gaps: 1999 one-step pairs")
        self.assertEqual(a["from"], "2026-01-02T00:00:00.000000Z")
        self.assertEqual(a["to"], "2026-01-02T00:00:19.990000Z")
        self.assertEqual(a["model"], self.model)
        self.assertLess(a["error"], 0.05, a)
        self.assertGreater(b["error"], 4 * a["error"], (a, b))
        # The table: the same numbers, with the config's feed as well.
        table = run("score", "-m", self.model, "--input", fresh, "--config", self.config).stdout
        self.assertIn("scored 1999 one-step pairs from 2026-01-02T00:00:00.000000Z", table)
        overall = [line for line in table.splitlines() if line.split()[:1] == ["overall"]]
        self.assertEqual(len(overall), 1, table)
        self.assertAlmostEqual(float(overall[0].split()[1]) / a["error"], 1.0, delta=1e-3)

    def test_gaps_and_missing_channels_count_as_the_trainer_does(self):
        path = self.simulate("gappy.csv", "--gap-rate", "0.2", "--missing-rate", "0.1", start="2026-01-03T00:00:00Z")
        rows = {}
        with open(path) as f:
            for line in f:
                fields = line.rstrip("\n").split(",")
                rows[round(float(fields[1]) * 100)] = all(v != "" for v in fields[2:])
        expected = sum(1 for t, complete in rows.items() if complete and t + 1 in rows)
        doc = self.score_json(path)
        self.assertEqual(doc["pairs"], expected)
        self.assertTrue(all(c["error"] is not None and c["error"] < 0.2 for c in doc["channels"]), doc)
        # A range: only pairs inside it.
        part = self.score_json(path, "--from", "2026-01-03T00:00:05Z", "--to", "2026-01-03T00:00:10Z")
        lo, hi = 1767398405 * 100, 1767398410 * 100
        inside = sum(1 for t, complete in rows.items() if complete and t + 1 in rows and lo <= t and t + 1 <= hi)
        self.assertEqual(part["pairs"], inside)
        self.assertGreaterEqual(part["from"], "2026-01-03T00:00:05")
        self.assertLessEqual(part["to"], "2026-01-03T00:00:10.000000Z")

    def test_clear_errors(self):
        fresh = self.simulate("errors.csv", start="2026-01-04T00:00:00Z")
        out = run("score", "-m", self.model, "--input", fresh, "--from", "2026-02-01T00:00:00Z", check=False)
        self.assertEqual(out.returncode, 2)
        self.assertIn("no pairs", out.stderr)
        other = os.path.join(self.dir, "other.yaml")
        with open(other, "w") as f:
            f.write(LORENZ.replace("z", "w").replace("lorenw", "lorenz"))  # channels [x, y, w]
        out = run("score", "-m", self.model, "--input", fresh, "--config", other, check=False)
        self.assertEqual(out.returncode, 2)
        self.assertIn("[x, y, z]", out.stderr)
        self.assertIn("[x, y, w]", out.stderr)
        out = run("score", "-m", os.path.join(self.dir, "absent.model"), "--input", fresh, check=False)
        self.assertEqual(out.returncode, 2)
        self.assertIn("absent.model", out.stderr)
        corrupt = os.path.join(self.dir, "corrupt.model")
        with open(self.model, "rb") as f:
            data = bytearray(f.read())
        data[100] ^= 0xFF
        with open(corrupt, "wb") as f:
            f.write(data)
        out = run("score", "-m", corrupt, "--input", fresh, check=False)
        self.assertEqual(out.returncode, 2)
        self.assertIn("checksum", out.stderr)
        out = run("score", "-m", self.model, "--input", fresh, "--from", "yesterday", check=False)
        self.assertEqual(out.returncode, 2)
        self.assertIn("--from", out.stderr)
        self.assertEqual(run("score", "-m", self.model, check=False).returncode, 2)


class LyapunovCommandTest(unittest.TestCase):
    def test_three_sources_side_by_side(self):
        d = tempfile.mkdtemp(prefix="lyapcast-cli-lyap-")
        self.addCleanup(shutil.rmtree, d, ignore_errors=True)
        config = os.path.join(d, "lorenz.yaml")
        with open(config, "w") as f:
            f.write(LORENZ)
        csv = os.path.join(d, "l.csv")
        run("simulate", "-c", config, "--duration", "100s", "--transient", "20s", "--start",
            "2026-01-01T00:00:00Z", "-o", csv)
        model = os.path.join(d, "l.model")
        run("train", "-c", config, "--csv", csv, "--out", model, "--iterations", "300")
        out = run("lyapunov", "-c", config, "--csv", csv, "--model", model, "--time-units", "300").stdout
        rows = {line.split(" (")[0]: line for line in out.splitlines()[1:]}
        self.assertEqual(sorted(rows), ["data", "dynamics", "model"], out)
        largest = {k: float(v.split(")")[1].split()[0]) for k, v in rows.items()}
        # Lorenz-63 largest exponent 0.9056 (Sprott 2003): tangent dynamics within
        # 5 % on this short run, Rosenstein within 25 % (docs/references.md "Lyapunov exponents").
        self.assertLess(abs(largest["dynamics"] / 0.9056 - 1), 0.05, out)
        self.assertLess(abs(largest["data"] / 0.9056 - 1), 0.25, out)
        self.assertIn("R^2", rows["data"])
        bad = run("lyapunov", check=False)
        self.assertEqual(bad.returncode, 2)


class SendTest(unittest.TestCase):
    def test_simulate_streams_into_a_daemon(self):
        with Daemon() as d:
            d.start()
            out = run("simulate", "-c", d.config_path, "--feed", "rig-b", "--duration", "30s",
                      "--send", f"127.0.0.1:{d.ingest_port}", check=False)
            # rig-b has no dynamics in the harness config: a clear refusal.
            self.assertEqual(out.returncode, 2)
            self.assertIn("no dynamics", out.stderr)
            self.assertEqual(d.stop(), 0)
        cfg = tempfile.mkdtemp(prefix="lyapcast-cli-send-")
        db = os.path.join(cfg, "w.db")
        text = f"listen: {{ingest: 127.0.0.1:0, http: 127.0.0.1:0}}\nstorage: {{path: {db}}}\n" + LORENZ
        with Daemon(workdir=cfg, config_text=text) as d:
            d.db = db
            d.start()
            out = run("simulate", "-c", d.config_path, "--duration", "30s", "--gap-rate", "0.1", "--seed", "9",
                      "--send", f"127.0.0.1:{d.ingest_port}")
            self.assertIn("rejected", out.stderr)
            sent = int(out.stderr.split("sent ")[1].split()[0])
            self.assertIn(f"{sent} accepted, 0 rejected", out.stderr)
            self.assertEqual(d.stop(), 0)
            self.assertEqual(len(d.stored_times("lorenz")), sent)
        shutil.rmtree(cfg, ignore_errors=True)


def sqlite_rows(db, query):
    """Runs a query with the sqlite3 shell (read-only); returns (exit code, rows, stderr).

    Under full CI load the shell has been seen to stall for the whole
    timeout on a finished backup file (cause not yet known; alone it takes
    milliseconds). Then what the process waits on and the files beside the
    database are printed, and the query runs once more."""
    for attempt in (1, 2):
        proc = subprocess.Popen([SQLITE3, "-readonly", "-separator", "|", db, query], stdin=subprocess.DEVNULL,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        try:
            stdout, stderr = proc.communicate(timeout=60)
            return proc.returncode, [line.split("|") for line in stdout.splitlines()], stderr
        except subprocess.TimeoutExpired:
            diagnosis = {}
            for name in ("wchan", "stack", "status"):
                try:
                    with open(f"/proc/{proc.pid}/{name}") as f:
                        diagnosis[name] = f.read().strip()[:2000]
                except OSError as e:
                    diagnosis[name] = str(e)
            folder = os.path.dirname(db)
            listing = sorted((n, os.path.getsize(os.path.join(folder, n))) for n in os.listdir(folder))
            proc.kill()
            proc.communicate()
            print(f"sqlite3 stalled 60 s on {db} ({query}), attempt {attempt}: {diagnosis}; files {listing}",
                  file=sys.stderr)
            if attempt == 2:
                raise


def sample_counts(db):
    code, rows, err = sqlite_rows(db, "SELECT name, count(t_us) FROM feeds LEFT JOIN samples USING (feed_id) "
                                      "GROUP BY name ORDER BY name")
    if code != 0:
        raise AssertionError(f"sqlite3 on {db}: {err}")
    return {name: int(n) for name, n in rows}


class BackupTest(unittest.TestCase):
    def test_backup_of_a_running_daemon(self):
        with Daemon() as d:
            d.start()
            base = now_us() - 600 * 1_000_000  # inside the 6 h retention, not in the future
            n = 3000
            c = d.connect()
            c.send_lines([f"rig-b,{t_text(base + i * 50_000)},{i},{-i}" for i in range(n)])
            replies = c.wait_replies(n)
            self.assertEqual(replies, [f"ok {i + 1}" for i in range(n)], "every sample acknowledged (committed)")
            c.close()
            status, body = d.http_get("/v1/feeds/rig-b/status")
            self.assertEqual(status, 200, body)
            self.assertEqual(body["window"]["samples"], n)
            # The commits are still in the WAL: the main file alone misses them.
            self.assertGreater(os.path.getsize(d.db + "-wal"), 0)
            main_only = os.path.join(d.dir, "main-only.db")
            shutil.copyfile(d.db, main_only)
            code, rows, _ = sqlite_rows(main_only, "SELECT count(*) FROM samples")
            self.assertLess(int(rows[0][0]) if code == 0 and rows else 0, n, "test premise: data in the WAL")

            # Another sender keeps committing during the backup; one page per step
            # makes the copy take many steps while it does.
            stop = threading.Event()
            sent = [0]

            def keep_sending():
                s = d.connect()
                i = 0
                while not stop.is_set() and i < 20_000:
                    t0 = base - 3600 * 1_000_000  # an hour of older data, 0.1 s apart
                    s.send_lines([f"loop-a,{t_text(t0 + (i + k) * 100_000)},{k},0.5,-0.5" for k in range(50)])
                    i += 50
                    s.wait_replies(i, timeout=30)
                sent[0] = i
                s.close()

            sender = threading.Thread(target=keep_sending)
            sender.start()
            out = os.path.join(d.dir, "backup.db")
            try:
                r = run("backup", "--config", d.config_path, "--step-pages", "1", out)
            finally:
                stop.set()
                sender.join()
            self.assertTrue(d.proc.poll() is None, "the daemon kept running")
            self.assertFalse(os.path.exists(out + ".partial"))
            summary = r.stdout.strip()
            self.assertEqual(len(summary.splitlines()), 1, r.stdout)
            self.assertIn(f"backed up {d.db} to {out}: {os.path.getsize(out)} bytes, ", summary)
            self.assertIn("integrity_check ok", summary)
            self.assertRegex(summary, r"\d+ pages, .* \d+\.\d+ s$")
            self.assertIn("pages copied", r.stderr, "progress on stderr for a copy of many steps")

            # The outside reference: the sqlite3 shell on the copy.
            self.assertEqual(sqlite_rows(out, "PRAGMA integrity_check")[1], [["ok"]])
            counts = sample_counts(out)
            self.assertEqual(counts["rig-b"], n, "every acknowledged sample, including those in the WAL")
            self.assertLessEqual(counts["loop-a"], sent[0], "a consistent snapshot of the concurrent sender")
            self.assertIn(f" {counts['rig-b'] + counts['loop-a']} samples, ", summary)
            self.assertEqual(sqlite_rows(out, "PRAGMA journal_mode")[1], [["delete"]], "a single-file copy")
            self.assertFalse(os.path.exists(out + "-wal") or os.path.exists(out + "-shm"))
            with open(out, "rb") as f:
                backup_bytes = f.read()

            # An existing file is kept unless --force.
            again = run("backup", "--db", d.db, out, check=False)
            self.assertEqual(again.returncode, 2, again.stderr)
            self.assertIn(f"{out} exists", again.stderr)
            self.assertIn("--force", again.stderr)
            self.assertEqual(again.stdout, "")
            with open(out, "rb") as f:
                self.assertEqual(f.read(), backup_bytes, "untouched")
            self.assertFalse(os.path.exists(out + ".partial"))
            forced = run("backup", "--db", d.db, "--force", out)
            self.assertIn("integrity_check ok", forced.stdout)
            self.assertEqual(sample_counts(out)["rig-b"], n)
            self.assertEqual(d.stop(), 0)
            with open(out, "rb") as f:
                backup_bytes = f.read()

        # The copy restores: a daemon started on it serves the same window.
        with Daemon() as restored:
            with open(restored.db, "wb") as f:
                f.write(backup_bytes)
            restored.start()
            status, body = restored.http_get("/v1/feeds/rig-b/status")
            self.assertEqual(body["window"]["samples"], n, body)
            self.assertEqual(restored.stop(), 0)

    def test_clear_errors(self):
        d = tempfile.mkdtemp(prefix="lyapcast-cli-backup-")
        self.addCleanup(shutil.rmtree, d, ignore_errors=True)
        out = os.path.join(d, "out.db")

        missing = os.path.join(d, "absent", "lyapcast.db")
        r = run("backup", "--db", missing, out, check=False)
        self.assertEqual(r.returncode, 2, r.stderr)
        self.assertIn(f"no database at {missing}", r.stderr)
        config = os.path.join(d, "lyapcast.yaml")
        with open(config, "w") as f:
            f.write(base_config(missing))
        r = run("backup", "--config", config, out, check=False)
        self.assertEqual(r.returncode, 2, r.stderr)
        self.assertIn(f"no database at {missing} (storage.path in {config})", r.stderr)

        garbage = os.path.join(d, "garbage.db")
        with open(garbage, "wb") as f:
            f.write(b"not a database\n" * 500)
        r = run("backup", "--db", garbage, out, check=False)
        self.assertEqual(r.returncode, 2, r.stderr)
        self.assertIn("is not an SQLite database", r.stderr)

        other = os.path.join(d, "other.db")
        subprocess.run([SQLITE3, other, "CREATE TABLE t(x)"], check=True, timeout=60)
        r = run("backup", "--db", other, out, check=False)
        self.assertEqual(r.returncode, 2, r.stderr)
        self.assertIn("is not a lyapcast database", r.stderr)

        r = run("backup", "--db", other, other + "-wal", "--force", check=False)
        self.assertEqual(r.returncode, 2, r.stderr)
        self.assertIn("is the database being copied", r.stderr)
        self.assertEqual(run("backup", out, check=False).returncode, 2, "no source given")
        self.assertEqual(run("backup", "--db", other, "--config", config, out, check=False).returncode, 2)
        self.assertEqual(sorted(os.listdir(d)), ["garbage.db", "lyapcast.yaml", "other.db"], "nothing left behind")


if __name__ == "__main__":
    unittest.main()
