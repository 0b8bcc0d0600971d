"""lyapcast import end to end against the real lyapcastd: historian-style CSV
files (renamed columns in another order than the feed's channels, quoted
fields, ';' delimiter, RFC 3339 or epoch times, unit scaling) go in through
the ingest port; `lyapcast export` and the sqlite3 shell read back exactly
the values and times of the file. Malformed rows get one reason each with
their line in the file, every good row is stored, and the exit code says so.

The harness config: feed loop-a (flow, dtemp_h, dtemp_v), feed rig-b (x, v),
storage.retention 6h. Times start at 2026-01-01 (in the past, so no
future-time; the feeds are empty, so nothing is too old unless made so)."""

import os
import math
import random
import re
import shutil
import socket
import struct
import subprocess
import tempfile
import unittest

from harness import Daemon

CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")
START_S = 1767225600  # 2026-01-01T00:00:00Z
START_US = START_S * 1_000_000


def run(*args, code=0, stdin=None):
    out = subprocess.run([CLI, *args], capture_output=True, text=True, timeout=120, input=stdin)
    if code is not None and out.returncode != code:
        raise AssertionError(f"lyapcast {' '.join(args)} exited {out.returncode}, expected {code}:\n"
                             f"stdout: {out.stdout}\nstderr: {out.stderr}")
    return out


def rfc3339(t_us, offset_min):
    """t_us as RFC 3339 text in the given UTC offset, with the microseconds."""
    local = t_us + offset_min * 60_000_000
    secs, us = divmod(local, 1_000_000)
    days, rest = divmod(secs, 86400)
    # civil from days (Howard Hinnant's algorithm), enough for these dates
    z = days + 719468
    era = z // 146097
    doe = z - era * 146097
    yoe = (doe - doe // 1460 + doe // 36524 - doe // 146096) // 365
    doy = doe - (365 * yoe + yoe // 4 - yoe // 100)
    mp = (5 * doy + 2) // 153
    d = doy - (153 * mp + 2) // 5 + 1
    m = mp + 3 if mp < 10 else mp - 9
    y = yoe + era * 400 + (1 if m <= 2 else 0)
    sign = "+" if offset_min >= 0 else "-"
    off = "Z" if offset_min == 0 else "%s%02d:%02d" % (sign, abs(offset_min) // 60, abs(offset_min) % 60)
    return "%04d-%02d-%02dT%02d:%02d:%02d.%06d%s" % (y, m, d, rest // 3600, rest // 60 % 60, rest % 60, us, off)


def csv_quote(text, delimiter=","):
    if any(c in text for c in (delimiter, '"', "\n")):
        return '"' + text.replace('"', '""') + '"'
    return text


def bits(v):
    return struct.pack("<d", v)


def exported(url, feed, from_s, to_s):
    """(t_us, [value or None]) per exported line."""
    out = run("export", "--url", url, "--feed", feed, "--from", str(from_s), "--to", str(to_s))
    rows = []
    for line in out.stdout.splitlines():
        fields = line.split(",")
        assert fields[0] == feed, line
        secs, frac = fields[1].split(".")
        rows.append((int(secs) * 1_000_000 + int(frac), [float(v) if v else None for v in fields[2:]]))
    return rows


def stored(d, feed):
    """(t_us, mask, vals bytes) per stored sample, with the sqlite3 shell."""
    rows = d.sql("SELECT t_us, mask, hex(vals) FROM samples JOIN feeds USING (feed_id) "
                 f"WHERE feeds.name = '{feed}' ORDER BY t_us")
    return [(int(t), int(mask), bytes.fromhex(vals)) for t, mask, vals in rows]


def expected_stored(rows):
    """What the store should hold for (t_us, [value or None]) rows: mask bit c = channel c missing,
    the present values as little-endian binary64 (lib/store/window_store.h)."""
    out = []
    for t_us, values in sorted(rows):
        mask = sum(1 << c for c, v in enumerate(values) if v is None)
        out.append((t_us, mask, b"".join(bits(v) for v in values if v is not None)))
    return out


def same_bits(test, got, want):
    """Rows of (t_us, values) equal to the bit (so -0.0 differs from 0.0)."""
    test.assertEqual(len(got), len(want))
    for (gt, gv), (wt, wv) in zip(got, want):
        test.assertEqual(gt, wt)
        test.assertEqual([None if v is None else bits(v) for v in gv], [None if v is None else bits(v) for v in wv],
                         f"values at t_us {gt}")


class ImportTest(unittest.TestCase):
    def setUp(self):
        self.dir = tempfile.mkdtemp(prefix="lyapcast-it-import-")
        self.addCleanup(shutil.rmtree, self.dir, ignore_errors=True)
        self.d = Daemon()
        self.addCleanup(self.d.__exit__)
        self.d.start()
        self.url = f"http://127.0.0.1:{self.d.http_port}"
        self.to = f"127.0.0.1:{self.d.ingest_port}"

    def write(self, name, text, encoding="utf-8"):
        path = os.path.join(self.dir, name)
        with open(path, "w", encoding=encoding, newline="") as f:
            f.write(text)
        return path

    def import_(self, path, *args, code=0):
        return run("import", path, "--to", self.to, "--url", self.url, *args, code=code)

    def test_renamed_reordered_columns_round_trip_exactly(self):
        rng = random.Random(20260101)
        # The file's columns: a quoted time column, the feed's channels renamed and out of
        # order (one name holding the delimiter), and a column that feeds nothing.
        header = ["Zeitstempel", "dT vert [K]", "Flow, m/s", "Qualität", "dT hor [K]"]
        rows = []  # (t_us, [flow, dtemp_h, dtemp_v] or None)
        lines = [",".join(csv_quote(h) for h in header)]
        offsets = [0, 60, -330, 345]  # Z, +01:00, -05:30, +05:45
        for k in range(300):
            t_us = START_US + k * 100_000 + rng.randrange(0, 50_000)  # microseconds that are not round
            # Smooth, instrument-like history (the daemon's sensor screen marks
            # absurd jumps suspect), with digits that are not round.
            values = [(c + 1) * math.sin(0.05 * k + c) + rng.uniform(-1e-3, 1e-3) for c in range(3)]
            if k % 17 == 3:
                values[rng.randrange(3)] = None  # a missing channel: an empty cell
            if k == 5:
                values = [-0.0, 0.1 + 0.2, 5e-324]  # sign of zero, 0.30000000000000004, the smallest subnormal
            cells = ["" if v is None else repr(v) for v in values]
            time_cell = rfc3339(t_us, offsets[k % 4])
            lines.append(",".join([csv_quote(time_cell) if k % 2 else time_cell, cells[2],
                                   csv_quote(cells[0]) if k % 3 == 0 else cells[0], csv_quote("gut, \"A\""),
                                   cells[1]]))
            rows.append((t_us, values))
        path = self.write("history.csv", "\n".join(lines) + "\n")
        out = self.import_(path, "--feed", "loop-a", "--time-column", "zeitstempel", "--map", "Flow, m/s=flow",
                           "--map", "dT hor [K]=dtemp_h", "--map", "dT vert [K]=dtemp_v")
        self.assertIn("time <- 'Zeitstempel' (column 1, auto); flow <- 'Flow, m/s' (3); "
                      "dtemp_h <- 'dT hor [K]' (5); dtemp_v <- 'dT vert [K]' (2)", out.stderr)
        self.assertIn("ignoring 1 column that feeds no channel: 'Qualität' (4)", out.stderr)
        self.assertIn(f"imported {path} into feed loop-a: 300 rows read, 300 accepted, 0 rejected, 0 skipped",
                      out.stderr)
        self.assertNotIn("rejected:", out.stderr)

        got = exported(self.url, "loop-a", START_S, START_S + 3600)
        same_bits(self, got, sorted(rows))
        self.assertEqual(stored(self.d, "loop-a"), expected_stored(rows))

        # Again: identical rows already stored are accepted without duplicates.
        out = self.import_(path, "--feed", "loop-a", "--time-column", "Zeitstempel", "--map", "Flow, m/s=flow",
                           "--map", "dT hor [K]=dtemp_h", "--map", "dT vert [K]=dtemp_v")
        self.assertIn("300 accepted, 0 rejected", out.stderr)
        self.assertEqual(stored(self.d, "loop-a"), expected_stored(rows))
        self.assertEqual(self.d.stop(), 0)

    def test_epoch_times_and_scale(self):
        # rig-b (x, v): milliseconds, ';' delimited, CRLF with a byte order mark (as
        # spreadsheet exports write), columns named like the channels, in another order.
        rng = random.Random(7)
        rows, lines = [], ["timestamp;v;x;unit"]
        for k in range(200):
            t_ms = START_S * 1000 + k * 50 + (k % 3)  # whole milliseconds, not on the 50 ms grid
            v, x = rng.uniform(-5, 5), rng.uniform(-1e3, 1e3)
            lines.append(f"{t_ms};{v!r};{x!r};mm")
            rows.append((t_ms * 1000, [x * 0.001, v * -2.5]))  # mm -> m; v negated and scaled
        path = self.write("ms.csv", "\ufeff" + "\r\n".join(lines) + "\r\n")
        out = self.import_(path, "--feed", "rig-b", "--delimiter", ";", "--time-format", "epoch-ms",
                           "--scale", "x=0.001", "--scale", "v=-2.5")
        self.assertIn("time <- 'timestamp' (column 1, epoch-ms); x <- 'x' (3) x 0.001; v <- 'v' (2) x -2.5",
                      out.stderr)
        self.assertIn("200 rows read, 200 accepted, 0 rejected, 0 skipped", out.stderr)
        same_bits(self, exported(self.url, "rig-b", START_S, START_S + 3600), rows)
        self.assertEqual(stored(self.d, "rig-b"), expected_stored(rows))

        # Epoch seconds with fractions, auto-detected, into loop-a (dtemp_v has no column: missing),
        # the file on stdin.
        lines, rows = ["T,flow,dtemp_h"], []
        for k in range(50):
            t_text = "%d.%06d" % (START_S + 10 + k // 4, (k % 4) * 250_000 + 1)
            lines.append(f"{t_text},{k * 0.5!r},{-k / 3!r}")
            rows.append((int(t_text.replace(".", "")), [k * 0.5 * 4.0, -k / 3, None]))
        out = run("import", "-", "--feed", "loop-a", "--to", self.to, "--url", self.url, "--scale", "flow=4",
                  stdin="\n".join(lines) + "\n")
        self.assertIn("time <- 'T' (column 1, auto); flow <- 'flow' (2) x 4; dtemp_h <- 'dtemp_h' (3); "
                      "dtemp_v: no column (missing in every row)", out.stderr)
        self.assertIn("imported stdin into feed loop-a: 50 rows read, 50 accepted", out.stderr)
        same_bits(self, exported(self.url, "loop-a", START_S, START_S + 3600), rows)
        self.assertEqual(stored(self.d, "loop-a"), expected_stored(rows))
        self.assertEqual(self.d.stop(), 0)

    def test_malformed_rows_each_get_one_reason_with_their_line(self):
        t = lambda k: "%d.%06d" % (START_S + k // 10, (k % 10) * 100_000)  # noqa: E731
        lines = [
            "time,dtemp_v,Flow,dtemp_h",                       # 1: header (Flow is mapped with --map)
            f"{t(0)},0.5,1.5,-0.5",                            # 2
            f"{t(1)},0.6,1.6,-0.6",                            # 3
            f"{t(2)},0.7,abc,-0.7",                            # 4: not-a-number
            f"{t(3)},0.8,1.8,-0.8",                            # 5
            "2026-13-01T00:00:00Z,0.9,1.9,-0.9",               # 6: bad-time (no such month)
            f"{t(5)},1.0,2.0",                                 # 7: field-count (too few)
            f"{t(6)},1.1,2.1,-1.1,7.5",                        # 8: field-count (a value with no column)
            f"{t(7)},1.2,2.2,-1.2",                            # 9
            f"{t(0)},0.5,1.5,-0.25",                           # 10: duplicate-time (line 2's time, another value)
            "%d.000000,1,2,3" % (START_S - 7 * 3600),          # 11: too-old (7 h before the newest, retention 6 h)
            f"{t(8)},1.3,2.3,-1.3",                            # 12
            "",                                                # 13: blank: skipped
            f"{t(9)},1.4,\"2.4,-1.4",                          # 14: bad-csv (a quote not closed)
            f"{t(10)},1.5,2.5,-1.5",                           # 15
            f"{t(1)},0.6,1.6,-0.6",                            # 16: line 3 again, identical: accepted, stored once
            f"{t(11)},,,",                                     # 17: no-values
            f"{t(12)},nan,2.7,-1.7",                           # 18: non-finite
            "2026-01-01T00:00:09,1.8,2.8,-1.8",                # 19: bad-time (no UTC offset)
            f"{t(14)},\"1.9\",\" 2.9 \",\"-1.9\"",             # 20: quoted numbers
            f"{t(15)},2.0,\"3.0,-2.0",                         # 21: bad-csv (a quote closed only on line 23)
            f"{t(16)},2.1,3.1,-2.1",                           # 22: read again after line 21: stored
            f"{t(17)},2.2,3.2\",-2.2",                         # 23: not-a-number ('3.2"')
        ]
        good = {2: (0, [1.5, -0.5, 0.5]), 3: (1, [1.6, -0.6, 0.6]), 5: (3, [1.8, -0.8, 0.8]),
                9: (7, [2.2, -1.2, 1.2]), 12: (8, [2.3, -1.3, 1.3]), 15: (10, [2.5, -1.5, 1.5]),
                20: (14, [2.9, -1.9, 1.9]), 22: (16, [3.1, -2.1, 2.1])}
        bad = {4: "not-a-number", 6: "bad-time", 7: "field-count", 8: "field-count", 10: "duplicate-time",
               11: "too-old", 14: "bad-csv", 17: "no-values", 18: "non-finite", 19: "bad-time", 21: "bad-csv",
               23: "not-a-number"}
        path = self.write("bad.csv", "\n".join(lines) + "\n")
        out = self.import_(path, "--feed", "loop-a", "--map", "Flow=flow", code=1)
        self.assertIn(f"imported {path} into feed loop-a: 22 rows read, 9 accepted, 12 rejected, 1 skipped",
                      out.stderr)
        self.assertIn("rejected: 2 bad-csv, 2 bad-time, 1 duplicate-time, 2 field-count, 1 no-values, "
                      "1 non-finite, 2 not-a-number, 1 too-old", out.stderr)
        reasons = re.findall(rf"^  {re.escape(path)}:(\d+): (\S+) (.*)$", out.stderr, re.M)
        self.assertEqual(sorted(int(line) for line, _, _ in reasons), sorted(bad), out.stderr)
        for line, code, text in reasons:
            self.assertEqual(code, bad[int(line)], text)
        text = {int(line): text for line, _, text in reasons}
        self.assertIn("column 'Flow' (3, channel flow): 'abc' is not a number", text[4])
        self.assertIn("'2026-13-01T00:00:00Z' is not an RFC 3339 time", text[6])
        self.assertIn("3 fields where the header has 4 columns", text[7])
        self.assertIn("a value in field 5 has no column", text[8])
        self.assertIn("field 3 opens a quote ('\"') that closes on line 20 with text after it", text[14])
        self.assertIn("'2026-01-01T00:00:09' has no UTC offset", text[19])
        self.assertIn("a quoted field runs from this line to line 23 and the record is no valid row", text[21])
        self.assertIn("reading on from line 22", text[21])
        self.assertIn("'3.2\"' is not a number", text[23])
        self.assertRegex(out.stderr, r"too-old: 1 row lay more than the feed's retention \(6h\) before its newest "
                                     r"sample \(2026-01-01T00:00:01.6Z\)")
        want = [(START_US + k * 100_000, v) for k, v in good.values()]
        same_bits(self, exported(self.url, "loop-a", START_S - 86400, START_S + 3600), sorted(want))
        self.assertEqual(stored(self.d, "loop-a"), expected_stored(want))
        self.assertEqual(self.d.stop(), 0)

    def test_first_twenty_in_full_in_line_order_then_counts(self):
        # The daemon's too-old replies arrive after the local not-a-number finds of later
        # lines; the report still shows the first 20 by line.
        lines = ["t,x,v", f"{START_S}.000000,1,2"]
        for k in range(30):
            if k % 2:
                lines.append(f"{START_S + 1 + k}.000000,oops,1")
            else:
                lines.append("%d.000000,1,2" % (START_S - 7 * 3600 - k))
        path = self.write("many.csv", "\n".join(lines) + "\n")
        out = self.import_(path, "--feed", "rig-b", code=1)
        self.assertIn("31 rows read, 1 accepted, 30 rejected", out.stderr)
        shown = [int(n) for n in re.findall(rf"^  {re.escape(path)}:(\d+): ", out.stderr, re.M)]
        self.assertEqual(shown, list(range(3, 23)))
        self.assertIn("  and 10 more: 5 not-a-number, 5 too-old", out.stderr)
        self.assertEqual(self.d.stop(), 0)

    def test_usage_errors_and_connection_failures(self):
        path = self.write("h.csv", "when,flow\n1767225600,1\n")
        out = self.import_(path, "--feed", "loop-a", code=2)
        self.assertIn("no time column: none is named t, time or timestamp (in any case); name it with "
                      "--time-column; the header: 'when' (1), 'flow' (2)", out.stderr)
        out = self.import_(path, "--feed", "loop-a", "--time-column", "when", "--map", "flux=flow", code=2)
        self.assertIn("--map 'flux=flow': no column named 'flux'", out.stderr)
        out = self.import_(path, "--feed", "loop-a", "--time-column", "when", "--scale", "dtemp_h=2", code=2)
        self.assertIn("no column feeds channel dtemp_h", out.stderr)
        out = self.import_(path, "--feed", "nosuch", "--time-column", "when", code=2)
        self.assertIn("has no such feed; its feeds: loop-a, rig-b", out.stderr)
        semi = self.write("semi.csv", "time;flow\n1767225600;1\n")
        out = self.import_(semi, "--feed", "loop-a", code=2)
        self.assertIn("is the file delimited by ';' or tabs?", out.stderr)
        self.import_(path, "--feed", "loop-a", "--time-format", "iso", code=2)
        self.import_(path, "--feed", "loop-a", "--delimiter", "|", code=2)
        self.assertEqual(run("import", path, "--feed", "loop-a", "--to", "nowhere", "--url", self.url,
                             code=2).returncode, 2)
        self.assertEqual(run("import", "--feed", "loop-a", "--to", self.to, code=2).returncode, 2)  # no file
        s = socket.socket()
        s.bind(("127.0.0.1", 0))
        closed = s.getsockname()[1]
        s.close()
        out = run("import", path, "--feed", "loop-a", "--time-column", "when", "--to", f"127.0.0.1:{closed}",
                  "--url", self.url, code=1)
        self.assertIn("cannot connect", out.stderr)
        out = run("import", path, "--feed", "loop-a", "--time-column", "when", "--to", self.to,
                  "--url", f"http://127.0.0.1:{closed}", code=1)
        self.assertIn("cannot connect", out.stderr)
        self.assertEqual(stored(self.d, "loop-a"), [])
        out = self.import_(path, "--feed", "loop-a", "--time-column", "when")
        self.assertIn("1 rows read, 1 accepted", out.stderr)
        self.assertEqual(self.d.stop(), 0)


if __name__ == "__main__":
    unittest.main()
