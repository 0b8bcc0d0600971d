"""Suspect readings through the real lyapcastd: a feed with configured
bad-quality codes and a range gets sentinel and out-of-range readings and a
partial row merged into a row with a suspect channel; the samples API gives
them back as null values with the raw readings beside (JSON) or as the raw
readings (CSV, suspect=raw) or empty fields (suspect=omit); `lyapcast
export` passes --suspect through, and its default output replayed into a
second daemon is screened and stored there the same way.

Data are invented; no training (far fewer samples than min_pairs)."""

import os
import shutil
import struct
import tempfile
import unittest
import urllib.request

from harness import Daemon, daemon_config, run_cli

START_S = 1767225600  # 2026-01-01T00:00:00Z

FEED = """
  - id: rig
    channels: [x, y]
    step: 1s
    quality:
      x: {bad_values: [-9999, 1e30]}
      y: {range: [-10, 10]}
"""

# Row 4 comes in two partial lines: x's sentinel first, then an
# out-of-range y from a second source, merged into the row.
LINES = [
    f"rig,{START_S + 0},1.5,2.5",
    f"rig,{START_S + 1},-9999,2",
    f"rig,{START_S + 2},0.5,50",
    f"rig,{START_S + 3},1e30,-20",
    f"rig,{START_S + 4},-9999,",
    f"rig,{START_S + 4},,50",
]
# Per time: values (null for suspect or missing) and the raw suspect readings.
WANT = [
    ([1.5, 2.5], {}),
    ([None, 2.0], {"x": -9999.0}),
    ([0.5, None], {"y": 50.0}),
    ([None, None], {"x": 1e30, "y": -20.0}),
    ([None, None], {"x": -9999.0, "y": 50.0}),
]


def bits(v):
    return struct.pack("<d", v).hex()


def get(d, path):
    """(status, headers, body text)."""
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{d.http_port}{path}", timeout=10) as r:
            return r.status, {k.lower(): v for k, v in r.headers.items()}, r.read().decode()
    except urllib.error.HTTPError as e:
        return e.code, {k.lower(): v for k, v in e.headers.items()}, e.read().decode()


def csv_rows(text):
    """[(t_s, [float or None])] of ingest CSV lines of feed rig."""
    rows = []
    for line in text.splitlines():
        feed, t, *values = line.split(",")
        assert feed == "rig", line
        rows.append((round(float(t)) - START_S, [float(v) if v else None for v in values]))
    return rows


def stored(d):
    """mask, suspect and the hex of vals and suspect_vals per row, oldest first."""
    return d.sql("SELECT t_us, mask, hex(vals), suspect, hex(suspect_vals) FROM samples ORDER BY t_us")


class SuspectReadingsTest(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.mkdtemp(prefix="lyapcast-suspect-it-")
        if os.environ.get("LYAPCAST_KEEP_TEST_DIRS") is None:
            cls.addClassCleanup(shutil.rmtree, cls.dir, ignore_errors=True)
        cls.d = cls.new_daemon("a")
        cls.d.start()
        cls.addClassCleanup(cls.d.__exit__)
        client = cls.d.connect()
        client.send_lines(LINES)
        cls.replies = client.wait_replies(len(LINES), timeout=60)
        client.close()

    @classmethod
    def new_daemon(cls, name):
        workdir = os.path.join(cls.dir, name)
        os.makedirs(workdir)
        return Daemon(workdir=workdir, config_text=daemon_config(os.path.join(workdir, "window.db"), FEED))

    def test_every_line_is_accepted_and_the_merge_keeps_the_mark(self):
        self.assertEqual([r.split()[0] for r in self.replies], ["ok"] * len(LINES), self.replies)
        rows = stored(self.d)
        self.assertEqual(len(rows), 5)
        # Row 4: x's stored mark stays and y's suspect reading is merged in.
        _, mask, vals, suspect, suspect_vals = rows[4]
        self.assertEqual((mask, vals, suspect, suspect_vals), ("3", "", "3", (bits(-9999.0) + bits(50.0)).upper()))
        _, status = self.d.http_get("/v1/feeds/rig/status")
        counts = {ch: s["count"] for ch, s in status["suspect"].items()}
        self.assertEqual(counts, {"x": 3, "y": 3}, "each suspect reading once, the merged ones included")
        self.assertEqual(status["suspect"]["y"]["last_value"], 50)
        self.assertEqual(status["suspect"]["y"]["last"]["epoch_s"], START_S + 4)

    def test_json_has_null_values_and_the_raw_readings_beside(self):
        code, body = self.d.http_get("/v1/feeds/rig/samples")
        self.assertEqual(code, 200, body)
        got = [(s["values"], s.get("suspect", {})) for s in body["samples"]]
        self.assertEqual(got, WANT)
        self.assertNotIn("suspect", body["samples"][0], "only samples that have suspect readings carry the object")
        # omit leaves the raw readings out; values are the same.
        _, body = self.d.http_get("/v1/feeds/rig/samples?suspect=omit")
        self.assertEqual([(s["values"], s.get("suspect")) for s in body["samples"]], [(v, None) for v, _ in WANT])

    def test_csv_writes_the_raw_readings_or_leaves_them_empty(self):
        code, headers, text = get(self.d, "/v1/feeds/rig/samples?format=csv")
        self.assertEqual(code, 200, text)
        raw = [[s.get(ch, v) for ch, v in zip(("x", "y"), values)] for values, s in WANT]
        self.assertEqual(csv_rows(text), list(enumerate(raw)))
        self.assertEqual(get(self.d, "/v1/feeds/rig/samples?format=csv&suspect=raw")[2], text)
        _, _, omitted = get(self.d, "/v1/feeds/rig/samples?format=csv&suspect=omit")
        self.assertEqual(csv_rows(omitted), list(enumerate(v for v, _ in WANT)))
        # The next-page link keeps the choice.
        _, headers, _ = get(self.d, "/v1/feeds/rig/samples?format=csv&suspect=omit&limit=2")
        self.assertEqual(headers.get("link"),
                         f'</v1/feeds/rig/samples?from={START_S + 2}.000000&limit=2&format=csv&suspect=omit>; rel="next"')

    def test_a_bad_suspect_parameter_is_named(self):
        for q in ("suspect=keep", "suspect=", "suspect=RAW", "format=csv&suspect=none"):
            code, body = self.d.http_get(f"/v1/feeds/rig/samples?{q}")
            self.assertEqual(code, 400, q)
            self.assertEqual(body["error"]["code"], "bad-parameter")
            self.assertIn("suspect", body["error"]["message"])
            self.assertIn("raw or omit", body["error"]["message"])

    def test_export_passes_suspect_through_and_a_replay_is_screened_again(self):
        url = f"http://127.0.0.1:{self.d.http_port}"
        args = ("export", "--url", url, "--feed", "rig", "--from", str(START_S), "--to", str(START_S + 60))
        raw = run_cli(*args).stdout
        self.assertEqual(raw, get(self.d, "/v1/feeds/rig/samples?format=csv")[2])
        self.assertEqual(run_cli(*args, "--suspect", "raw").stdout, raw)
        omitted = run_cli(*args, "--suspect", "omit").stdout
        self.assertEqual(csv_rows(omitted), list(enumerate(v for v, _ in WANT)))
        out = run_cli(*args, "--suspect", "keep", code=2)
        self.assertIn("--suspect", out.stderr)
        self.assertIn("--suspect", run_cli("export", "--help").stdout)

        # The raw export into a second daemon with the same quality config:
        # the same rows, marks and raw readings (row 4 arrives whole now).
        path = os.path.join(self.dir, "export.csv")
        with open(path, "w") as f:
            f.write(raw)
        with self.new_daemon("b") as b:
            b.start()
            out = run_cli("replay", "--input", path, "--to", f"127.0.0.1:{b.ingest_port}")
            self.assertIn("5 accepted, 0 rejected", out.stderr)
            self.assertEqual(stored(b), stored(self.d))
            self.assertEqual(b.stop(), 0)


if __name__ == "__main__":
    unittest.main()
