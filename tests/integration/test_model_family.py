"""model.family through the real daemon: with `auto`, retraining fits both
the neural flow map and the polynomial map on Lorenz-63 (a published system:
Sprott 2003), serves the better one, and status, the CLI, the version list
and forecasts all say which family serves and why. The figures themselves
are checked in tests/schedule/retrain_job_test.cpp; here, that every path
carries a polynomial map."""

import os
import unittest
import urllib.request

from harness import run_cli, wait_settled
import test_plant_feeds as plant

FEED_AUTO = plant.FEED_NO_DYNAMICS.replace("model: {hidden: [32, 32]}", "model: {hidden: [32, 32], family: auto}")


class ModelFamilyTest(unittest.TestCase):
    def setUp(self):
        # The plant-feed tests' Lorenz feed, simulator call and daemon setup.
        self.plant = plant.PlantFeedTest("test_jittered_feeds_flag_a_parameter_change")
        self.plant.setUp()
        self.addCleanup(self.plant.doCleanups)
        self.dir = self.plant.dir

    def test_auto_serves_the_polynomial_map_on_lorenz_and_says_why(self):
        self.assertIn("family: auto", FEED_AUTO)
        p = self.plant
        lines = p.simulate("auto.csv", "40s")
        with p.daemon("auto", FEED_AUTO) as d:
            d.start()
            p.send(d, lines)
            wait_settled(d)
            status = p.status(d)
            model = status["model"]
            # Clean Lorenz-63 at 10 ms: the exact polynomial fit is far
            # ahead of 400 iterations of the network.
            self.assertEqual(model["family"], "polynomial_map", model)
            self.assertIn("polynomial map chosen (one-step error on", model["family_reason"])
            self.assertIn("polynomial degree", model["family_reason"])
            stored = d.sql("SELECT json_extract(details, '$.family'), json_extract(details, '$.family_choice') "
                           "FROM models WHERE status = 'active'")
            self.assertEqual(stored[0][0], "polynomial_map", stored)
            # The file is a version-3 model file (family code 1).
            url = f"http://127.0.0.1:{d.http_port}"
            with urllib.request.urlopen(f"{url}/v1/feeds/lorenz/models/{model['version']}/file", timeout=10) as r:
                body = r.read()
            self.assertEqual(body[:8], b"LYAPMODL")
            self.assertEqual(int.from_bytes(body[8:12], "little"), 3)
            self.assertEqual(body[24], 1)
            # Forecasts run on it, and the exponent of the served model is
            # Lorenz-63's 0.9056 (Sprott 2003) within 10 % (common practice
            # for a learned map).
            code, fc = d.http_get("/v1/feeds/lorenz/forecast?horizon=2s")
            self.assertEqual(code, 200, fc)
            self.assertEqual(fc["model_version"], model["version"])
            self.assertAlmostEqual(model["lyapunov_per_s"], 0.9056, delta=0.09)
            out = run_cli("status", "--url", url, "--feed", "lorenz")
            self.assertIn("family    polynomial_map: polynomial map chosen", out.stdout)
            path = os.path.join(self.dir, "served.model")
            with open(path, "wb") as f:
                f.write(body)
            offline = run_cli("forecast", "--model", path, "--from", "1,1,20", "--steps", "3")
            self.assertEqual(len(offline.stdout.strip().splitlines()), 4, offline.stdout)


if __name__ == "__main__":
    unittest.main()
