"""Durability: a SIGKILL loses nothing acknowledged, and a full disk makes the
daemon refuse (never acknowledge) until room returns, then recover by itself."""

import os
import re
import subprocess
import threading
import time
import unittest

from harness import Daemon, fill_disk, t_text, now_us


def stream_until(client, lines, stop_event, chunk=500):
    for s in range(0, len(lines), chunk):
        if stop_event.is_set():
            return
        try:
            client.send_lines(lines[s:s + chunk])
        except OSError:
            return
        time.sleep(0.002)


class CrashTest(unittest.TestCase):
    def test_sigkill_mid_stream_keeps_every_acknowledged_sample(self):
        with Daemon() as d:
            d.start()
            base = now_us() - 3_600_000_000
            lines = [f"loop-a,{t_text(base + i * 10_000)},{i},1,2" for i in range(200_000)]
            c = d.connect()
            stop = threading.Event()
            sender = threading.Thread(target=stream_until, args=(c, lines, stop), daemon=True)
            sender.start()
            # Kill once a good number of samples were acknowledged, mid-stream.
            replies = c.wait_replies(20_000, timeout=120)
            self.assertGreaterEqual(len(replies), 20_000)
            d.kill()
            stop.set()
            c.wait_closed()
            replies = c.wait_replies(0)
            acked = []
            for i, r in enumerate(replies):
                self.assertEqual(r, f"ok {i + 1}")
                acked.append(base + i * 10_000)  # replies are in line order
            c.close()

            d.start()  # same folder, same database
            stored = set(d.stored_times("loop-a"))
            missing = [t for t in acked if t not in stored]
            self.assertEqual(missing, [], "every sample acknowledged before the kill is present")
            self.assertEqual(d.sql("PRAGMA integrity_check"), [["ok"]])
            # The restarted daemon keeps ingesting.
            c2 = d.connect()
            c2.send_lines([f"loop-a,{t_text(base + 300_000 * 10_000)},1,2,3"])
            self.assertEqual(c2.wait_replies(1), ["ok 1"])
            c2.close()
            self.assertEqual(d.stop(), 0)


@unittest.skipUnless(os.geteuid() == 0, "needs root to mount a small tmpfs as a full disk")
class StorageFullTest(unittest.TestCase):
    """A real full disk: the database lives on a tiny tmpfs that fills up."""

    def setUp(self):
        self.mnt = None
        d = Daemon()
        self.daemon = d
        self.mnt = os.path.join(d.dir, "disk")
        os.makedirs(self.mnt)
        r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", self.mnt], capture_output=True, text=True)
        if r.returncode != 0:
            self.mnt = None
            d.__exit__(None, None, None)
            self.skipTest("cannot mount tmpfs here: " + r.stderr.strip())
        with open(d.config_path) as f:
            text = f.read()
        d.db = os.path.join(self.mnt, "window.db")
        with open(d.config_path, "w") as f:
            f.write(text.replace(os.path.join(d.dir, "window.db"), d.db))

    def tearDown(self):
        try:
            self.daemon.__exit__(None, None, None)
        finally:
            if self.mnt:
                subprocess.run(["umount", "-l", self.mnt])

    def test_full_disk_refuses_then_recovers(self):
        d = self.daemon
        d.start()
        base = now_us() - 3_600_000_000
        c = d.connect()
        i = 0
        acked, refused = [], []
        # Fill the disk: send in rounds until replies say storage-unavailable.
        def send_round(n, values):
            """Sends n lines after the i sent so far; sorts their times into
            acked and refused; returns how many were refused."""
            nonlocal i
            times = [base + (i + k) * 10_000 for k in range(n)]
            c.send_lines([f"loop-a,{t_text(t)},{i + k},{values}" for k, t in enumerate(times)])
            replies = c.wait_replies(i + n, timeout=60)
            round_refused = 0
            for k, t in enumerate(times):
                r = replies[i + k]
                if r.startswith("ok "):
                    acked.append(t)
                else:
                    self.assertRegex(r, r"^error \d+ storage-unavailable ")
                    refused.append(t)
                    round_refused += 1
            i += n
            return round_refused

        for _ in range(400):
            if send_round(500, "1.25,-3.5"):
                break
        self.assertTrue(refused, "the 1 MiB disk filled up")
        status, body = d.http_get("/v1/heartbeat")
        self.assertEqual(status, 200)
        self.assertFalse(body["storage_available"])

        # A smaller commit could still fit in what is left, so take the rest
        # of the disk, as another process writing logs would.
        filler = os.path.join(self.mnt, "filler")
        fill_disk(filler)
        # Commits that fit in space SQLite already holds (its WAL file) may
        # still succeed and are acknowledged honestly; once nothing fits,
        # every line is refused. Send rounds until a whole round is refused.
        whole_round_refused = False
        for _ in range(50):
            if send_round(200, "1,1") == 200:
                whole_round_refused = True
                break
        self.assertTrue(whole_round_refused, "a full disk refuses every line")
        status, body = d.http_get("/v1/heartbeat")
        self.assertFalse(body["storage_available"])

        # Room returns: ingest recovers by itself on the same connection.
        os.remove(filler)
        subprocess.run(["mount", "-o", "remount,size=64m", self.mnt], check=True)
        recovered = False
        for _ in range(100):
            t_us = base + i * 10_000
            c.send_lines([f"loop-a,{t_text(t_us)},{i},2,2"])
            r = c.wait_replies(i + 1, timeout=30)[i]
            i += 1
            if r.startswith("ok "):
                acked.append(t_us)
                recovered = True
                break
            refused.append(t_us)
            time.sleep(0.1)
        self.assertTrue(recovered, "ingest resumed after the disk had room again")
        status, body = d.http_get("/v1/heartbeat")
        self.assertTrue(body["storage_available"])
        self.assertEqual(d.stop(), 0, d.read_log())
        stored = set(d.stored_times("loop-a"))
        self.assertTrue(set(acked) <= stored, "every acknowledged sample is stored")
        self.assertFalse(set(refused) & stored, "no refused sample is stored")
        self.assertEqual(d.sql("PRAGMA integrity_check"), [["ok"]])


if __name__ == "__main__":
    unittest.main()
