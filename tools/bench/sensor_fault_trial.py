#!/usr/bin/python3
"""How often the drift monitor names a drifting sensor, on Lorenz-63 through
the real lyapcastd in lockstep (a trial, not a test: the result is a rate).

Per seed: 90 s of Lorenz-63 at 100 Hz (lyapcast simulate), sensor x's
calibration drifting by RATE per second from 60 s on (our own scenario).
Reports each seed's first three alarms after the drift began as read by
the attribution (`sensor x`, `sensor y`, ..., `process`), whether a drift
retrain ran, and the totals. The integration harness starts the daemon.

    build/... tools/bench/sensor_fault_trial.py [--seeds 8] [--rate 0.5] [--step-bias 0]

Needs LYAPCASTD and LYAPCAST_CLI (paths of the built binaries), as the
integration tests do; defaults are build/daemon/lyapcastd and
build/tools/cli/lyapcast under the repository."""

import argparse
import json
import os
import re
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
os.environ.setdefault("LYAPCASTD", os.path.join(ROOT, "build", "daemon", "lyapcastd"))
os.environ.setdefault("LYAPCAST_CLI", os.path.join(ROOT, "build", "tools", "cli", "lyapcast"))
os.environ.setdefault("LYAPCAST_SQLITE3", "/usr/bin/sqlite3")
sys.path.insert(0, os.path.join(ROOT, "tests", "integration"))

import test_plant_feeds as plant  # noqa: E402  (the feed, the simulator call, the daemon setup)
from harness import wait_settled  # noqa: E402

ALARM = re.compile(r"ignoring channel '(\w+)' explains it|: drift: change test alarm")


def trial(seed, rate, step_bias):
    t = plant.PlantFeedTest("test_faults_on_one_sensor_are_named_and_cause_no_drift_retrain")
    t.setUp()
    lines = t.simulate(f"trial-{seed}.csv", "90s", seed=seed)
    for k, line in enumerate(lines):
        feed, ts, x, y, z = line.split(",")
        second = float(ts) - plant.START_S
        if second >= 60:
            x = repr(float(x) + step_bias + rate * (second - 60))
        lines[k] = f"{feed},{ts},{x},{y},{z}"
    with t.daemon(f"trial-{seed}") as d:
        d.start()
        t.send(d, lines)
        wait_settled(d)
        versions = t.versions(d)
        log = d.read_log(tail=50000)
    readings = []
    for m in ALARM.finditer(log):
        readings.append(f"sensor {m.group(1)}" if m.group(1) else "process")
    drift = [v["trained_to"] for v in versions if v["trigger"] == "drift"]
    t.doCleanups()
    return readings[:3], drift


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--seeds", type=int, default=8)
    p.add_argument("--rate", type=float, default=0.5, help="calibration drift of x per second of data")
    p.add_argument("--step-bias", type=float, default=0.0, help="offset added to x from 60 s on")
    a = p.parse_args()
    first_x = 0
    retrained = 0
    wrong = 0
    for seed in range(1, a.seeds + 1):
        readings, drift = trial(seed, a.rate, a.step_bias)
        first_x += bool(readings) and readings[0] == "sensor x"
        retrained += bool(drift)
        wrong += any(r.startswith("sensor") and r != "sensor x" for r in readings)
        print(f"seed {seed}: first alarms {readings or ['none']}; drift retrains at {[round(x, 1) for x in drift]}")
    print(f"{a.seeds} seeds, x drifting {a.rate}/s from 60 s: first alarm named x in {first_x}; "
          f"a drift retrain ran in {retrained}; another sensor named in {wrong}")
    print(json.dumps({"seeds": a.seeds, "rate": a.rate, "step_bias": a.step_bias, "first_alarm_named_x": first_x,
                      "drift_retrain": retrained, "other_sensor_named": wrong}))


if __name__ == "__main__":
    main()
