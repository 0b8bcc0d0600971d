"""Ingest over real TCP sockets against the real daemon, checked with the
sqlite3 shell: every acknowledged sample stored exactly once, no rejected
one stored, every line answered once and in order."""

import json
import os
import re
import threading
import time
import unittest

from harness import Daemon, t_text, now_us

LINES_TOTAL = 100_000
CONNECTIONS = 4
BAD_EVERY = 50  # one line in 50 is bad


def bad_line(kind, t_us):
    """A bad line of the given kind and the reply code it must get."""
    t = t_text(t_us)
    return {
        "unknown-feed": (f"loop-z,{t},1,2,3", "unknown-feed"),
        "field-count": (f"loop-a,{t},1,2", "field-count"),
        "not-a-number": (f"loop-a,{t},1,abc,3", "not-a-number"),
        "non-finite": (f"loop-a,{t},1,nan,3", "non-finite"),
        "bad-time": (f"loop-a,yesterday,1,2,3", "bad-time"),
        "future-time": (f"loop-a,{t_text(now_us() + 3_600_000_000)},1,2,3", "future-time"),
        "unknown-channel": ('{"feed":"loop-a","t":%s,"values":{"flow":1,"bogus":2}}' % t, "unknown-channel"),
        "duplicate-channel": ('{"feed":"loop-a","t":%s,"values":{"flow":1,"flow":2}}' % t, "duplicate-channel"),
        "bad-json": ('{"feed":"loop-a","t":%s,"values":{"flow":1' % t, "bad-json"),
        "bad-encoding": (f"loop-a,{t},1,2,\udcff3", "bad-encoding"),  # raw byte 0xff
        "too-old": (f"loop-a,{t_text(t_us - 7 * 3600 * 1_000_000)},1,2,3", "too-old"),
    }[kind]


BAD_KINDS = ["unknown-feed", "field-count", "not-a-number", "non-finite", "bad-time", "future-time",
             "unknown-channel", "duplicate-channel", "bad-json", "bad-encoding", "too-old"]


class IngestStreamTest(unittest.TestCase):
    def test_100k_lines_over_four_sockets_with_bad_lines(self):
        with Daemon() as d:
            d.start()
            base = now_us() - 7_200_000_000  # two hours ago: inside retention, not future
            # Seed the feed's newest time so too-old is measured against it.
            seed = d.connect()
            seed.send_lines([f"loop-a,{t_text(base + (LINES_TOTAL + 100) * 10_000)},0,0,0"])
            self.assertEqual(seed.wait_replies(1), ["ok 1"])
            seed.close()

            per_conn = LINES_TOTAL // CONNECTIONS
            plans = []
            for c in range(CONNECTIONS):
                lines, expect = [], []  # expect: ("ok", t_us) or ("error", code, t_us)
                for i in range(per_conn):
                    k = c * per_conn + i
                    t_us = base + k * 10_000
                    if i % BAD_EVERY == BAD_EVERY - 1:
                        kind = BAD_KINDS[(k // BAD_EVERY) % len(BAD_KINDS)]
                        line, code = bad_line(kind, t_us)
                        lines.append(line)
                        expect.append(("error", code, t_us))
                    elif i % 2:
                        lines.append('{"feed":"loop-a","t":%s,"values":{"flow":%d,"dtemp_h":1.5,"dtemp_v":-2}}'
                                     % (t_text(t_us), k))
                        expect.append(("ok", t_us))
                    else:
                        lines.append(f"loop-a,{t_text(t_us)},{k},1.5,-2")
                        expect.append(("ok", t_us))
                plans.append((lines, expect))

            results = [None] * CONNECTIONS

            def run(c):
                client = d.connect()
                lines, _ = plans[c]
                # Send in slices so several commits happen while reading.
                for s in range(0, len(lines), 2000):
                    client.send_lines(lines[s:s + 2000])
                results[c] = client.wait_replies(len(lines), timeout=300)
                client.close()

            threads = [threading.Thread(target=run, args=(c,)) for c in range(CONNECTIONS)]
            for t in threads:
                t.start()
            for t in threads:
                t.join(timeout=600)

            acked, rejected = set(), set()
            for c in range(CONNECTIONS):
                lines, expect = plans[c]
                replies = results[c]
                self.assertEqual(len(replies), len(lines), f"connection {c}: every line gets one reply")
                n_ok = 0
                for i, (reply, exp) in enumerate(zip(replies, expect)):
                    if exp[0] == "ok":
                        n_ok += 1
                        self.assertEqual(reply, f"ok {n_ok}", f"connection {c} line {i + 1}")
                        acked.add(exp[1])
                    else:
                        m = re.match(r"^error (\d+) ([a-z-]+) (.+)$", reply)
                        self.assertIsNotNone(m, f"connection {c} line {i + 1}: {reply!r}")
                        self.assertEqual(int(m.group(1)), i + 1, reply)
                        self.assertEqual(m.group(2), exp[1], f"line {lines[i]!r} -> {reply!r}")
                        rejected.add(exp[2])

            self.assertEqual(d.stop(), 0, d.read_log())
            stored = d.stored_times("loop-a")
            self.assertEqual(len(stored), len(set(stored)), "no sample stored twice")
            stored_set = set(stored)
            self.assertTrue(acked <= stored_set, "every acknowledged sample is stored")
            self.assertFalse(rejected & stored_set, "no rejected sample is stored")
            self.assertEqual(len(stored_set), len(acked) + 1)  # plus the seed
            self.assertEqual(d.sql("PRAGMA integrity_check"), [["ok"]])


class IngestProtocolTest(unittest.TestCase):
    @classmethod
    def setUpClass(cls):
        cls.d = Daemon(extra_config="limits: {max_line: 256, max_connections: 8, idle_timeout: 2s}").start()
        cls.base = now_us() - 600_000_000

    @classmethod
    def tearDownClass(cls):
        cls.d.stop()
        cls.d.__exit__(None, None, None)

    def test_long_line_is_rejected_and_connection_stays_usable(self):
        c = self.d.connect()
        c.send(b"loop-a," + b"9" * 5000 + b"\n")
        c.send_lines([f"rig-b,{t_text(self.base)},1,2"])
        replies = c.wait_replies(2)
        self.assertRegex(replies[0], r"^error 1 line-too-long ")
        self.assertEqual(replies[1], "ok 1")
        c.close()

    def test_crlf_and_unterminated_last_line(self):
        c = self.d.connect()
        c.send(f"rig-b,{t_text(self.base + 10_000)},1,2\r\nrig-b,{t_text(self.base + 20_000)},3,4".encode())
        c.close_write()
        replies = c.wait_replies(2)
        self.assertEqual(replies, ["ok 1", "ok 2"])
        self.assertTrue(c.wait_closed())
        c.close()

    def test_duplicate_timestamp(self):
        c = self.d.connect()
        t = t_text(self.base + 30_000)
        c.send_lines([f"rig-b,{t},5,6", f"rig-b,{t},5,6", f"rig-b,{t},5,7"])
        replies = c.wait_replies(3)
        self.assertEqual(replies[:2], ["ok 1", "ok 2"], "an identical resend is accepted once")
        self.assertRegex(replies[2], r"^error 3 duplicate-time ")
        c.close()

    def test_binary_garbage_never_closes_the_connection(self):
        c = self.d.connect()
        c.send(bytes(range(256)).replace(b"\n", b"") + b"\n")
        c.send(b"\x00\x01\x02\n")
        c.send_lines([f"rig-b,{t_text(self.base + 40_000)},1,2"])
        replies = c.wait_replies(3)
        self.assertRegex(replies[0], r"^error 1 bad-encoding ")
        self.assertRegex(replies[1], r"^error 2 bad-encoding ")
        self.assertEqual(replies[2], "ok 1")
        c.close()

    def test_rfc3339_time_and_missing_channel(self):
        c = self.d.connect()
        c.send_lines(['{"feed":"loop-a","t":"%s","values":{"flow":0.5,"dtemp_v":null}}'
                      % "2026-01-01T00:00:00Z", f"loop-a,{t_text(self.base + 50_000)},,1,2"])
        replies = c.wait_replies(2)
        # 2026-01-01 may be older than the feed's newest minus retention; both answers are valid codes.
        self.assertRegex(replies[0], r"^(ok 1|error 1 too-old .+)$")
        self.assertRegex(replies[1], r"^ok [12]$")
        c.close()

    def test_idle_connection_is_closed(self):
        c = self.d.connect()
        self.assertTrue(c.wait_closed(timeout=20), "idle_timeout 2s closes the connection")
        c.close()

    def test_connection_limit(self):
        clients = [self.d.connect() for _ in range(8)]
        for i, c in enumerate(clients):  # make sure all 8 are established
            c.send_lines([f"rig-b,{t_text(self.base + 100_000 + i * 1000)},1,2"])
            c.wait_replies(1)
        extra = self.d.connect()
        replies = extra.wait_replies(1)
        self.assertRegex(replies[0], r"^error 0 too-many-connections ")
        self.assertTrue(extra.wait_closed())
        for c in clients + [extra]:
            c.close()
        # Wait until the daemon has seen the closes, so later tests can connect.
        for _ in range(500):
            if self.d.http_get("/v1/feeds")[1]["ingest"]["connections"] == 0:
                break
            time.sleep(0.02)

    def test_http_feeds_and_heartbeat(self):
        status, body = self.d.http_get("/v1/heartbeat")
        self.assertEqual(status, 200)
        self.assertIs(body["alive"], True)
        status, body = self.d.http_get("/v1/feeds")
        self.assertEqual(status, 200)
        ids = [f["id"] for f in body["feeds"]]
        self.assertEqual(ids, ["loop-a", "rig-b"])
        self.assertEqual([c["name"] for c in body["feeds"][0]["channels"]], ["flow", "dtemp_h", "dtemp_v"])
        self.assertEqual(body["feeds"][0]["step_s"], 0.1)
        status, body = self.d.http_get("/v1/nope")
        self.assertEqual(status, 404)
        self.assertEqual(body["error"]["code"], "not-found")


class AuthTest(unittest.TestCase):
    def test_ingest_token_required(self):
        with Daemon() as d:
            token_path = os.path.join(d.dir, "ingest.token")
            with open(token_path, "w") as f:
                f.write("s3cret-token\n")
            with open(d.config_path, "a") as f:
                f.write(f"auth:\n  ingest_token_file: {token_path}\n")
            d.start()
            t = t_text(now_us() - 1_000_000)
            good = d.connect()
            good.send_lines(["auth s3cret-token", f"rig-b,{t},1,2"])
            self.assertEqual(good.wait_replies(2), ["ok auth", "ok 1"])
            good.close()
            bad = d.connect()
            bad.send_lines(["auth wrong", f"rig-b,{t},1,2"])
            replies = bad.wait_replies(2)
            self.assertRegex(replies[0], r"^error 1 bad-auth ")
            self.assertTrue(bad.wait_closed())
            bad.close()
            none = d.connect()
            none.send_lines([f"rig-b,{t},1,2"])
            self.assertRegex(none.wait_replies(1)[0], r"^error 1 bad-auth ")
            none.close()
            self.assertEqual(d.stop(), 0)
            self.assertNotIn("s3cret-token", d.read_log(), "tokens are never logged")


class BackpressureTest(unittest.TestCase):
    def test_client_that_does_not_read_is_slowed_not_dropped(self):
        """A sender that never reads its replies fills the daemon's bounded
        reply buffer; the daemon then stops reading, TCP buffers fill, and the
        sender blocks. Once it reads again, every line is answered and stored."""
        import socket
        with Daemon(extra_config="limits: {commit_batch: 256}") as d:
            d.start()
            base = now_us() - 3_600_000_000
            total = 1_500_000  # ~16 MB of replies: more than every buffer on the way holds
            payload = "".join(f"rig-b,{t_text(base + i * 1000)},{i},0\n" for i in range(total)).encode()
            sock = socket.create_connection(("127.0.0.1", d.ingest_port), timeout=60)
            sock.setsockopt(socket.SOL_SOCKET, socket.SO_RCVBUF, 64 * 1024)
            sock.settimeout(3.0)
            sent = 0
            blocked = False
            try:
                while sent < len(payload):
                    sent += sock.send(payload[sent:sent + 65536])
            except socket.timeout:
                blocked = True
            self.assertTrue(blocked, "the sender was slowed down by TCP backpressure")
            self.assertLess(sent, len(payload))
            # Read replies while sending the rest.
            replies = bytearray()
            sock.settimeout(60)

            def reader():
                while replies.count(b"\n") < total:
                    chunk = sock.recv(1 << 20)
                    if not chunk:
                        break
                    replies.extend(chunk)

            t = threading.Thread(target=reader)
            t.start()
            sock.sendall(payload[sent:])
            t.join(timeout=300)
            lines = replies.decode().splitlines()
            self.assertEqual(len(lines), total)
            self.assertEqual(lines[-1], f"ok {total}", "nothing was dropped")
            sock.close()
            self.assertEqual(d.stop(), 0)
            self.assertEqual(len(d.stored_times("rig-b")), total)


class HttpAccessTest(unittest.TestCase):
    def test_read_token_guards_get(self):
        with Daemon() as d:
            for name, token in (("read", "reader-token"), ("admin", "admin-token")):
                with open(os.path.join(d.dir, f"{name}.token"), "w") as f:
                    f.write(token + "\n")
            with open(d.config_path, "a") as f:
                f.write(f"auth:\n  read_token_file: {d.dir}/read.token\n  admin_token_file: {d.dir}/admin.token\n")
            d.start()
            status, body = d.http_get("/v1/feeds")
            self.assertEqual(status, 401)
            self.assertEqual(body["error"]["code"], "unauthorized")
            status, body = d.http_get("/v1/feeds", {"Authorization": "Bearer wrong"})
            self.assertEqual(status, 401)
            for token in ("reader-token", "admin-token"):
                status, body = d.http_get("/v1/feeds", {"Authorization": f"Bearer {token}"})
                self.assertEqual(status, 200, token)
            status, _ = d.http_get("/v1/heartbeat")
            self.assertEqual(status, 200, "liveness needs no token")
            self.assertEqual(d.stop(), 0)
            log = d.read_log()
            self.assertNotIn("reader-token", log)
            self.assertNotIn("admin-token", log)


class ShutdownTest(unittest.TestCase):
    def test_sigterm_answers_everything_received(self):
        with Daemon() as d:
            d.start()
            base = now_us() - 60_000_000
            c = d.connect()
            lines = [f"loop-a,{t_text(base + i * 1000)},{i},0,0" for i in range(20_000)]
            c.send_lines(lines)
            c.wait_replies(1)
            code = d.stop()
            self.assertEqual(code, 0, d.read_log())
            replies = c.wait_replies(len(lines), timeout=30)
            acked = {int(r.split()[1]) for r in replies if r.startswith("ok ")}
            self.assertEqual(len(acked), len([r for r in replies if r.startswith("ok ")]))
            stored = d.stored_times("loop-a")
            self.assertGreaterEqual(len(stored), len(acked), "every acknowledged sample is stored")
            # Every reply is well formed; lines received before the stop are answered.
            for r in replies:
                self.assertRegex(r, r"^(ok \d+|error \d+ [a-z-]+ .+)$")
            c.close()


class ConfigRefusalTest(unittest.TestCase):
    def test_changed_channels_refused_with_exit_2(self):
        with Daemon() as d:
            d.start()
            self.assertEqual(d.stop(), 0)
            with open(d.config_path) as f:
                text = f.read()
            with open(d.config_path, "w") as f:
                f.write(text.replace("channels: [x, v]", "channels: [x, v, a]"))
            import subprocess
            from harness import LYAPCASTD
            out = subprocess.run([LYAPCASTD, "--config", d.config_path], capture_output=True, text=True,
                                 errors="replace", timeout=30)
            self.assertEqual(out.returncode, 2)
            self.assertIn("rig-b", out.stdout + out.stderr)

    def test_check_config(self):
        import subprocess
        from harness import LYAPCASTD
        with Daemon() as d:
            ok = subprocess.run([LYAPCASTD, "--check-config", d.config_path], capture_output=True, text=True)
            self.assertEqual(ok.returncode, 0, ok.stderr)
            with open(d.config_path, "a") as f:
                f.write("bogus_key: 1\n")
            bad = subprocess.run([LYAPCASTD, "--check-config", d.config_path], capture_output=True, text=True)
            self.assertEqual(bad.returncode, 2)
            self.assertIn("bogus_key", bad.stderr)

    def test_expression_errors_are_config_errors(self):
        import subprocess
        from harness import LYAPCASTD
        with Daemon() as d:
            with open(d.config_path) as f:
                text = f.read()
            with open(d.config_path, "w") as f:
                f.write(text.replace("    step: 0.05s\n", "    step: 0.05s\n    dynamics:\n"
                                     "      equations: {x: \"v\", v: \"-k*x + vv\"}\n      constants: {k: 2}\n"))
            bad = subprocess.run([LYAPCASTD, "--check-config", d.config_path], capture_output=True, text=True)
            self.assertEqual(bad.returncode, 2, bad.stdout)
            self.assertIn("'rig-b'", bad.stderr)
            self.assertIn("equations.v", bad.stderr)
            self.assertIn("'vv'", bad.stderr)
            self.assertIn("position", bad.stderr)
            run = subprocess.run([LYAPCASTD, "--config", d.config_path], capture_output=True, text=True, timeout=30)
            self.assertEqual(run.returncode, 2)


if __name__ == "__main__":
    unittest.main()
