"""The operator page served at `/`, in a real browser: Debian's headless
Chromium driven through chromedriver with python3-selenium.

The real lyapcastd (lockstep) ingests a simulated Lorenz-63 stream from
`lyapcast simulate`, so a model exists; the page must draw each channel's
observed data and forecast as SVG lines, mark the stream's few sentinel
readings (-9999, a configured bad-quality code) as suspect points without
letting them set the scale, name each channel's suspect count, and show the
verdict, drift ratio and model version that GET /v1/feeds/{id}/status
reports, with the advisory note visible. With auth.read_token_file the page asks for the read token,
keeps it in sessionStorage and sends it only as an Authorization header (never
in any URL the browser requested). Screenshots are saved to
$LYAPCAST_ARTIFACT_DIR (else the system temp folder) and their paths printed.

Skips (unittest.SkipTest) only when selenium cannot be imported or Chromium /
chromedriver are missing or cannot start."""

import datetime
import inspect
import json
import math
import os
import shutil
import subprocess
import tempfile
import time
import unittest
import urllib.error
import urllib.request

from harness import Daemon, IngestClient, daemon_config, wait_settled

CLI = os.environ.get("LYAPCAST_CLI", "lyapcast")
CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"
TOKEN = "page-test-read-token-5f1c2a"

# The lockstep Lorenz-63 feed of test_retraining.py (a model within seconds),
# with health thresholds wide enough that the verdict cannot change while the
# test reads it (data age is wall time and keeps growing).
LORENZ_FEED = """
  - id: lorenz
    channels: [x, y, z]
    units: [{unit_x}, mm, mm]
    step: 10ms
    dynamics:
      equations: {{x: "s*(y - x)", y: "x*(r - z) - y", z: "x*y - b*z"}}
      constants: {{s: 10, r: 28, b: 2.6666666666666667}}
    quality: {{x: {{bad_values: [-9999]}}}}
    model: {{hidden: [32, 32]}}
    retrain:
      lyapunov_fraction: 5
      min_interval: 5s
      max_interval: 10s
      min_pairs: 1500
      iterations: 400
      batch: 128
      learning_rate: 0.003
    health: {{data_age_alert: 1h, data_age_alarm: 2h, model_age_alert_lyapunov: 20, model_age_alarm_lyapunov: 50}}
"""
IDLE_FEED = """
  - id: idle
    channels: [level]
    units: [m]
    step: 1s
"""


SENTINELS = (-50, -40, -30)  # indices of stream lines whose x becomes -9999


def config(db, feeds, extra=""):
    return daemon_config(db, feeds, "training:\n  threads: 1\n  lockstep: true\n" + extra)


def run(*args):
    out = subprocess.run([CLI, *args], capture_output=True, text=True, timeout=300)
    if out.returncode != 0:
        raise AssertionError(f"lyapcast {' '.join(args)} exited {out.returncode}:\n{out.stderr}")
    return out


def artifact_dir():
    d = os.environ.get("LYAPCAST_ARTIFACT_DIR") or tempfile.gettempdir()
    os.makedirs(d, exist_ok=True)
    return d


def simulate(workdir, seconds):
    """A Lorenz stream ending a little before now (so no sample is in the future)."""
    cfg = os.path.join(workdir, "sim.yaml")
    with open(cfg, "w") as f:
        f.write("feeds:" + LORENZ_FEED.format(unit_x="mm"))
    start = datetime.datetime.now(datetime.timezone.utc).replace(microsecond=0) - datetime.timedelta(
        seconds=seconds + 5)
    path = os.path.join(workdir, "stream.csv")
    run("simulate", "-c", cfg, "--duration", f"{seconds}s", "--transient", "20s",
        "--start", start.strftime("%Y-%m-%dT%H:%M:%SZ"), "--seed", "5", "--noise", "0.002", "-o", path)
    with open(path) as f:
        return f.read().splitlines()


def ingest(d, lines):
    client = IngestClient(d.ingest_port)
    try:
        client.send_lines(lines)
        replies = client.wait_replies(len(lines), timeout=120)
    finally:
        client.close()
    bad = [r for r in replies if not r.startswith("ok")]
    if len(replies) != len(lines) or bad:
        raise AssertionError(f"ingest: {len(replies)}/{len(lines)} replies, errors {bad[:3]}\n{d.read_log()}")


def raw_get(port, path, method="GET"):
    req = urllib.request.Request(f"http://127.0.0.1:{port}{path}", method=method)
    try:
        with urllib.request.urlopen(req, timeout=10) as r:
            return r.status, dict(r.headers), r.read()
    except urllib.error.HTTPError as e:
        return e.code, dict(e.headers), e.read()


def start_browser(workdir):
    """Headless Chromium with network logging, or SkipTest when it cannot run."""
    try:
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service
    except ImportError as e:
        raise unittest.SkipTest(f"python3-selenium is not importable ({e}); tools/install-deps installs it")
    for path in (CHROMIUM, CHROMEDRIVER):
        if not os.access(path, os.X_OK):
            raise unittest.SkipTest(f"{path} is missing; tools/install-deps installs chromium and chromium-driver")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                "--window-size=1400,1000", "--no-first-run", "--no-default-browser-check",
                "--disable-extensions", "--disable-background-networking", "--disable-sync",
                "--disable-component-update", "--password-store=basic",
                f"--user-data-dir={os.path.join(workdir, 'chromium-profile')}"):
        options.add_argument(arg)
    options.set_capability("goog:loggingPrefs", {"performance": "ALL", "browser": "ALL"})
    log_path = os.path.join(workdir, "chromedriver.log")
    try:
        # selenium 4.11 renamed log_path (Debian 12 ships 4.8) to log_output.
        if "log_output" in inspect.signature(Service.__init__).parameters:
            service = Service(executable_path=CHROMEDRIVER, log_output=log_path)
        else:
            service = Service(executable_path=CHROMEDRIVER, log_path=log_path)
        driver = webdriver.Chrome(service=service, options=options)
    except Exception as e:  # noqa: BLE001 - any failure to start the browser is a skip
        raise unittest.SkipTest(f"headless Chromium could not start through chromedriver: {e}")
    driver.set_page_load_timeout(30)
    driver.set_script_timeout(30)
    return driver


def wait_for(driver, predicate, timeout, what):
    deadline = time.monotonic() + timeout
    last_error = None
    while time.monotonic() < deadline:
        try:
            value = predicate()
            if value:
                return value
        except Exception as e:  # noqa: BLE001 - elements are replaced on every poll
            last_error = e
        time.sleep(0.2)
    raise AssertionError(f"timed out after {timeout}s waiting for {what} (last error: {last_error})\n"
                         f"page text:\n{driver.find_element('tag name', 'body').text[:3000]}")


# Reads in one script call (the page re-renders every 2 s).
READ_FEED_JS = """
const sec = document.querySelector('section.feed[data-feed="' + arguments[0] + '"]');
if (!sec) return null;
const field = (name) => { const e = sec.querySelector('[data-field="' + name + '"]'); return e ? e.getAttribute('data-value') : undefined; };
const series = {};
for (const p of sec.querySelectorAll('polyline[data-series]')) {
  const key = p.getAttribute('data-channel') + '/' + p.getAttribute('data-series');
  const n = (p.getAttribute('points') || '').trim().split(/\\s+/).filter((s) => s.includes(',')).length;
  series[key] = (series[key] || 0) + n;
}
return {
  verdict: field('verdict'),
  verdict_text: (sec.querySelector('[data-field="verdict"]') || {}).textContent,
  drift_ratio: field('drift-ratio'),
  model_version: field('model-version'),
  series: series,
  horizon_lines: sec.querySelectorAll('line[data-mark="horizon"]').length,
  plots: sec.querySelectorAll('svg.plot').length,
  model_rows: Array.from(sec.querySelectorAll('table.models tr[data-version]')).map(
      (r) => [r.getAttribute('data-version'), r.getAttribute('data-status')]),
  no_data: Boolean(sec.querySelector('[data-field="no-data"]')),
  no_model: Boolean(sec.querySelector('[data-field="no-model"]')),
  suspect_marks: Array.from(sec.querySelectorAll('path[data-series="suspect"]')).map(
      (p) => [p.getAttribute('data-channel'), p.getAttribute('data-raw')]),
  suspect_notes: Object.fromEntries(Array.from(sec.querySelectorAll('[data-field="suspect"]')).map(
      (e) => [e.getAttribute('data-channel'), e.getAttribute('data-value')])),
  x_observed_y: Array.from(sec.querySelectorAll('polyline[data-series="observed"][data-channel="x"]')).flatMap(
      (p) => p.getAttribute('points').trim().split(/\s+/).map((s) => Number(s.split(',')[1]))),
  text: sec.innerText,
};
"""


def requested(driver):
    """(url, request headers) of every request the browser sent, from the performance log."""
    out = []
    for entry in driver.get_log("performance"):
        msg = json.loads(entry["message"])["message"]
        if msg.get("method") == "Network.requestWillBeSent":
            req = msg["params"]["request"]
            out.append((req["url"], req.get("headers", {})))
        elif msg.get("method") == "Network.requestWillBeSentExtraInfo":
            out.append(("", msg["params"].get("headers", {})))
    return out


def screenshot(driver, name):
    height = driver.execute_script("return document.documentElement.scrollHeight")
    driver.set_window_size(1400, min(max(int(height) + 40, 800), 6000))
    path = os.path.join(artifact_dir(), name)
    driver.save_screenshot(path)
    print(f"\nscreenshot: {path}", flush=True)
    return path


class OperatorPageTest(unittest.TestCase):
    """One daemon with a trained model, shared by the tests of this class."""

    @classmethod
    def setUpClass(cls):
        cls.dir = tempfile.mkdtemp(prefix="lyapcast-page-it-")
        cls.daemon = None
        try:
            lines = simulate(cls.dir, 40)
            # Three sentinel readings of x within the plotted last second.
            for k in SENTINELS:
                feed, t, x, y, z = lines[k].split(",")
                lines[k] = f"{feed},{t},-9999,{y},{z}"
            workdir = os.path.join(cls.dir, "daemon")
            os.makedirs(workdir)
            feeds = LORENZ_FEED.format(unit_x="mm") + IDLE_FEED
            cls.daemon = Daemon(workdir=workdir, config_text=config(os.path.join(workdir, "window.db"), feeds))
            cls.daemon.start()
            ingest(cls.daemon, lines)
            feed = wait_settled(cls.daemon)
            if feed["model"] is None:
                raise AssertionError("no model after the stream:\n" + cls.daemon.read_log())
        except BaseException:
            cls.tearDownClass()
            raise

    @classmethod
    def tearDownClass(cls):
        if cls.daemon is not None:
            cls.daemon.__exit__(None, None, None)
        if not os.environ.get("LYAPCAST_KEEP_TEST_DIRS"):
            shutil.rmtree(cls.dir, ignore_errors=True)

    def test_page_files_are_served_without_a_token_with_their_headers(self):
        port = self.daemon.http_port
        for path, ctype in (("/", "text/html"), ("/page/app.js", "text/javascript"), ("/page/style.css", "text/css")):
            status, headers, body = raw_get(port, path)
            self.assertEqual(status, 200, path)
            self.assertTrue(headers["Content-Type"].startswith(ctype), headers)
            self.assertEqual(headers["Cache-Control"], "no-cache")
            csp = headers["Content-Security-Policy"]
            self.assertIn("script-src 'self'", csp)
            self.assertIn("style-src 'self'", csp)
            self.assertNotIn("unsafe-inline", csp)
            self.assertGreater(len(body), 500)
            head_status, head_headers, head_body = raw_get(port, path, method="HEAD")
            self.assertEqual((head_status, head_body), (200, b""), path)
            self.assertTrue(head_headers["Content-Type"].startswith(ctype))
        _, _, html = raw_get(port, "/")
        self.assertIn(b'<script src="/page/app.js"', html)
        self.assertNotIn(b"<script>", html)  # no inline script
        status, headers, _ = raw_get(port, "/", method="POST")
        self.assertEqual(status, 405)
        self.assertIn("GET", headers["Allow"])
        for path in ("/page/", "/page/missing.js", "/index.html", "/page/app.js/x"):
            self.assertEqual(raw_get(port, path)[0], 404, path)

    def test_page_draws_the_forecast_and_shows_the_status(self):
        d = self.daemon
        driver = start_browser(self.dir)
        try:
            driver.get(f"http://127.0.0.1:{d.http_port}/")
            status_code, status = d.http_get("/v1/feeds/lorenz/status")
            self.assertEqual(status_code, 200)

            def drawn():
                page = driver.execute_script(READ_FEED_JS, "lorenz")
                if not page or page["horizon_lines"] < 3:
                    return None
                if any(page["series"].get(f"{ch}/observed", 0) < 100 for ch in "xyz"):
                    return None
                if any(page["series"].get(f"{ch}/forecast", 0) + page["series"].get(f"{ch}/beyond", 0) < 100
                       for ch in "xyz"):
                    return None
                return page

            page = wait_for(driver, drawn, 20, "the lorenz feed's plots with observed data, forecast and horizon")
            self.assertEqual(page["plots"], 3)

            # The figures shown are the status route's (read twice around the
            # page so that a change between polls cannot make this flaky).
            def matches():
                s1 = d.http_get("/v1/feeds/lorenz/status")[1]
                p = driver.execute_script(READ_FEED_JS, "lorenz")
                s2 = d.http_get("/v1/feeds/lorenz/status")[1]
                key = lambda s: (s["health"]["verdict"], s["drift"]["ratio"], s["model"]["version"])  # noqa: E731
                if key(s1) != key(s2):
                    return None
                verdict, ratio, version = key(s1)
                shown_ratio = None if p["drift_ratio"] == "null" else float(p["drift_ratio"])
                same_ratio = (ratio is None and shown_ratio is None) or (
                    ratio is not None and shown_ratio is not None and math.isclose(ratio, shown_ratio, rel_tol=1e-12))
                if p["verdict"] == verdict and same_ratio and p["model_version"] == str(version):
                    return p, s1
                return None

            page, status = wait_for(driver, matches, 15, "the page to show the status route's figures")
            self.assertIn(page["verdict"], ("normal", "alert", "alarm", "indeterminate"))
            self.assertEqual(page["verdict_text"], status["health"]["verdict"])
            if status["drift"]["ratio"] is None:  # a retrain just before the stream's end: still warming up
                self.assertIn("warming up", page["text"])
            for reason in status["health"]["reasons"]:
                self.assertIn(reason, page["text"])
            self.assertIn("Lyapunov time", page["text"])
            self.assertIn(status["lyapunov"]["chosen"]["source"], page["text"])
            self.assertIn("[mm]", page["text"])  # channel units from /v1/feeds

            # Suspect readings: a mark per sentinel on x's plot, none on y or
            # z, the count from status beside x's name; the sentinels do not
            # set x's scale (its observed line spans most of the plot's 162 px).
            self.assertEqual(status["suspect"]["x"]["count"], len(SENTINELS), status["suspect"])
            self.assertEqual(page["suspect_marks"], [["x", "-9999"]] * len(SENTINELS))
            self.assertEqual(page["suspect_notes"], {"x": str(len(SENTINELS))})
            self.assertIn(f"{len(SENTINELS)} suspect readings, the last -9999 at", page["text"])
            self.assertGreater(max(page["x_observed_y"]) - min(page["x_observed_y"]), 100, "x's real data fill the plot")

            # Model history: the active version and every other version listed.
            _, models = d.http_get("/v1/feeds/lorenz/models?limit=20")
            self.assertEqual(page["model_rows"], [[str(m["version"]), m["status"]] for m in models["models"]])
            self.assertIn([str(status["model"]["version"]), "active"], page["model_rows"])

            # The feed without data says so in words.
            idle = driver.execute_script(READ_FEED_JS, "idle")
            self.assertTrue(idle["no_data"], idle["text"])
            self.assertEqual(idle["verdict"], "indeterminate")
            self.assertIn("No data yet", idle["text"])

            advisory = driver.find_element("id", "advisory")
            self.assertTrue(advisory.is_displayed())
            self.assertIn("advisory", advisory.text)
            self.assertIn("safety systems", advisory.text)
            self.assertIn("licensed engineering practice", advisory.text)

            # No script errors and no Content-Security-Policy violations.
            errors = [e for e in driver.get_log("browser") if e.get("level") == "SEVERE"]
            self.assertEqual(errors, [])
            screenshot(driver, "lyapcast-operator-page.png")

            # Polling pauses while the tab is hidden and resumes when it shows.
            conn = lambda: driver.find_element("id", "conn-state").get_attribute("data-state")  # noqa: E731
            set_hidden = ("Object.defineProperty(document, 'hidden', {configurable: true, get: () => arguments[0]});"
                          "document.dispatchEvent(new Event('visibilitychange'));")
            driver.execute_script(set_hidden, True)
            wait_for(driver, lambda: conn() == "paused", 10, "the page to say polling is paused")
            time.sleep(1.0)  # a poll already under way finishes
            requested(driver)  # drains the log
            time.sleep(4.5)  # more than two polling periods
            self.assertEqual([u for u, _ in requested(driver) if "/v1/" in u], [], "polled while hidden")
            self.assertEqual(conn(), "paused")
            driver.execute_script(set_hidden, False)
            wait_for(driver, lambda: conn() == "live" and any("/v1/" in u for u, _ in requested(driver)), 10,
                     "polling to resume when the tab shows")
        finally:
            driver.quit()


class OperatorPageTokenTest(unittest.TestCase):
    def setUp(self):
        self.dir = tempfile.mkdtemp(prefix="lyapcast-page-token-it-")
        if not os.environ.get("LYAPCAST_KEEP_TEST_DIRS"):
            self.addCleanup(shutil.rmtree, self.dir, ignore_errors=True)

    def test_page_asks_for_the_read_token_and_sends_it_only_as_a_header(self):
        workdir = os.path.join(self.dir, "daemon")
        os.makedirs(workdir)
        token_file = os.path.join(workdir, "read.token")
        with open(token_file, "w") as f:
            f.write(TOKEN + "\n")
        os.chmod(token_file, 0o600)
        # A unit holding markup must show as text (the page escapes everything).
        feeds = LORENZ_FEED.format(unit_x='"<b id=injected>x-unit</b>"') + IDLE_FEED
        lines = simulate(self.dir, 6)  # too little for a model: the page must say so
        with Daemon(workdir=workdir, config_text=config(os.path.join(workdir, "window.db"), feeds,
                                                        f"auth:\n  read_token_file: {token_file}\n")) as d:
            d.start()
            ingest(d, lines)
            self.assertEqual(d.http_get("/v1/feeds")[0], 401)
            driver = start_browser(self.dir)
            try:
                driver.get(f"http://127.0.0.1:{d.http_port}/")
                form = wait_for(driver, lambda: driver.find_element("id", "auth").is_displayed(), 15,
                                "the token form")
                self.assertTrue(form)

                # A wrong token is refused and the form asks again.
                driver.find_element("id", "auth-token").send_keys("not-the-token")
                driver.find_element("id", "auth-submit").click()
                wait_for(driver, lambda: driver.find_element("id", "auth").is_displayed()
                         and "not accepted" in driver.find_element("id", "auth-message").text, 15,
                         "the refusal of a wrong token")
                self.assertIsNone(driver.execute_script("return sessionStorage.getItem('lyapcast.readToken')"))

                driver.find_element("id", "auth-token").send_keys(TOKEN)
                driver.find_element("id", "auth-submit").click()

                def shown():
                    page = driver.execute_script(READ_FEED_JS, "lorenz")
                    if not page or not page["no_model"] or page["series"].get("x/observed", 0) < 100:
                        return None
                    return page

                page = wait_for(driver, shown, 20, "the feed data after entering the token")
                self.assertFalse(driver.find_element("id", "auth").is_displayed())
                self.assertEqual(driver.execute_script("return sessionStorage.getItem('lyapcast.readToken')"), TOKEN)
                self.assertIn("No model yet", page["text"])
                self.assertEqual(page["verdict"], "indeterminate")
                self.assertIn("[<b id=injected>x-unit</b>]", page["text"])
                self.assertEqual(driver.find_elements("id", "injected"), [])
                self.assertEqual(driver.find_element("id", "auth-token").get_attribute("value"), "")

                # The token went out only as an Authorization header.
                requests = requested(driver)
                urls = [u for u, _ in requests if u]
                self.assertTrue(any("/v1/feeds" in u for u in urls), urls)
                for url in urls:
                    self.assertNotIn(TOKEN, url)
                    self.assertNotIn("not-the-token", url)
                self.assertNotIn(TOKEN, driver.current_url)
                sent = [h for _, h in requests
                        if any(k.lower() == "authorization" and v == f"Bearer {TOKEN}" for k, v in h.items())]
                self.assertTrue(sent, "no request carried 'Authorization: Bearer <token>'")
                self.assertNotIn(TOKEN, d.read_log())

                screenshot(driver, "lyapcast-operator-page-token.png")
                errors = [e for e in driver.get_log("browser")
                          if e.get("level") == "SEVERE" and "401" not in e.get("message", "")]
                self.assertEqual(errors, [])
            finally:
                driver.quit()
            self.assertEqual(d.stop(), 0)


if __name__ == "__main__":
    unittest.main()
