"""The stored sample format, read back with tools outside the project: the
sqlite3 shell decodes the row, and Python's struct module (IEEE 754 binary64,
little-endian, as documented in lib/store/window_store.h) packs the expected
bytes. A sample sent over TCP must land as exactly those bytes."""

import os
import struct
import sys
import unittest

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "integration"))
from harness import Daemon, t_text, now_us  # noqa: E402


class StoredFormatTest(unittest.TestCase):
    def test_values_mask_and_time_as_documented(self):
        with Daemon() as d:
            d.start()
            t_us = now_us() - 5_000_000
            c = d.connect()
            # dtemp_h missing; values chosen to be exact in binary64.
            c.send_lines([f"loop-a,{t_text(t_us)},0.3125,,-1.5e-3"])
            self.assertEqual(c.wait_replies(1), ["ok 1"])
            c.close()
            self.assertEqual(d.stop(), 0)
            rows = d.sql("SELECT t_us, mask, hex(vals) FROM samples JOIN feeds USING (feed_id) "
                         "WHERE feeds.name = 'loop-a'")
            self.assertEqual(len(rows), 1)
            stored_t, mask, vals_hex = rows[0]
            self.assertEqual(int(stored_t), t_us)
            self.assertEqual(int(mask), 0b010, "bit 1 = dtemp_h missing")
            self.assertEqual(vals_hex, struct.pack("<dd", 0.3125, -1.5e-3).hex().upper())
            self.assertEqual(d.sql("SELECT suspect, suspect_vals IS NULL OR length(suspect_vals) = 0 FROM samples"),
                             [["0", "1"]], "no suspect reading, no raw suspect values")
            self.assertEqual(d.sql("PRAGMA user_version"), [["5"]])
            self.assertEqual(d.sql("PRAGMA journal_mode"), [["wal"]])
            self.assertEqual(d.sql("SELECT name, channels FROM feeds ORDER BY feed_id"),
                             [["loop-a", "flow,dtemp_h,dtemp_v"], ["rig-b", "x,v"]])


if __name__ == "__main__":
    unittest.main()
