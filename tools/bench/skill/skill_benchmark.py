#!/usr/bin/python3
"""Forecast skill of lyapcast's learned flow map against outside references
(echo-state network, SINDy, NVAR) on published chaotic flows.

For each system (systems.py) and condition (clean; noisy: 1 % Gaussian
sensor noise relative to each channel's std and 10 % of the samples
dropped at random), one series from the equations (DOP853, rtol = atol =
1e-10): the first 70 % trains (its last 15 % is the validation slice that
chooses hyperparameters and lyapcast's early-stopping checkpoint; every
method fits on the 85 % before it), the last 30 % tests. From each of
--starts forecast starts spread over the test slice: the valid prediction
time (data time until sqrt(mean_c ((x_c - xhat_c) / std_c)^2) first
exceeds 0.5, Vlachas et al., Neural Networks 126 (2020) 191) in Lyapunov
times, always against the CLEAN trajectory; the one-step error (RMS over
the test slice of the one-step prediction error against the clean next
state, in units of each channel's std, averaged over channels); training
and selection time.

What each method gets at a forecast start:
  lyapcast  the observed state at the start only (its MLP maps one state to
            the next); trained with `lyapcast train` on the ingest CSV of
            the observed training samples (dropped samples are absent rows),
            forecasts with `lyapcast forecast --model`, one-step errors
            with `lyapcast score`.
  ESN       listens to the --esn-warmup observed steps up to and including
            the start (dropped samples linearly interpolated), then runs
            closed loop.
  SINDy     the observed state at the start; fitted on consecutive observed
            pairs only.
  NVAR      the start and the k - 1 steps before it (interpolated where
            dropped); fitted on pairs whose current and next step are
            observed.

    tools/bench/skill/skill_benchmark.py [--quick] [--systems lorenz63,chen] [--conditions clean,noisy]
        [--starts 50] [--iterations 20000] [--seed 1] [--out-json FILE]

Needs /usr/bin/python3 with Debian's numpy and scipy, and the lyapcast CLI
(env LYAPCAST_CLI, default build/tools/cli/lyapcast under the
repository). Human-readable lines on
stdout, progress on stderr, one JSON line last."""

import argparse
import json
import math
import os
import re
import subprocess
import sys
import tempfile
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(os.path.dirname(HERE)))
sys.path.insert(0, HERE)

import baselines as bl  # noqa: E402
from systems import SYSTEMS, largest_lyapunov, simulate  # noqa: E402

TRAIN_SHARE = 0.70       # first 70 % trains, the rest tests (issue 13)
VALIDATION_SHARE = 0.15  # of the training part: the validation slice
NOISE = 0.01             # sensor noise std, relative to each channel's std
DROP = 0.10              # share of samples dropped at random
T0_US = 1_767_225_600 * 1_000_000   # 2026-01-01T00:00:00Z, the series' first sample
METHODS = ("lyapcast", "esn", "sindy", "nvar")
LABEL = {"lyapcast": "lyapcast", "esn": "ESN", "sindy": "SINDy", "nvar": "NVAR"}


def log(msg):
    print(msg, file=sys.stderr, flush=True)


def default_cli():
    return os.environ.get("LYAPCAST_CLI") or os.path.join(ROOT, "build", "tools", "cli", "lyapcast")


# ----------------------------------------------------------------- lyapcast
class Lyapcast:
    """lyapcast through its CLI, offline, on files in `work`."""

    def __init__(self, cli, work, system, iterations, seed, family="auto"):
        self.cli, self.work, self.system, self.iterations, self.seed = cli, work, system, iterations, seed
        self.family = family
        self.chosen = None  # the family lyapcast train wrote
        self.dt_us = round(system.dt * 1e6)
        self.feed = system.name.replace("_", "-")
        self.config = os.path.join(work, f"{self.feed}.yaml")
        with open(self.config, "w") as f:
            # No dynamics and no constraints: lyapcast learns from the data
            # alone, as the baselines do. The model and retrain settings are
            # the documented defaults (docs/configuration.md) except
            # validation, which holds out the same 15 % slice the baselines
            # choose their hyperparameters on.
            f.write(f"""# forecast skill benchmark: {system.name}, written by {os.path.basename(__file__)}
storage: {{path: unused.db, retention: 3650d}}
feeds:
  - id: {self.feed}
    channels: [{", ".join(system.channels)}]
    step: {self.dt_us}us
    model: {{hidden: [64, 64], activation: tanh, rollout: 4, max_gap: 8}}
    retrain: {{validation: {VALIDATION_SHARE}, iterations: {iterations}, batch: 256,
              learning_rate: 1e-3, weight_decay: 0, clip: 1.0}}
""")

    def _time(self, i):
        us = T0_US + int(i) * self.dt_us
        return f"{us // 1_000_000}.{us % 1_000_000:06d}"

    def _write_csv(self, path, rows):
        with open(path, "w") as f:
            for i, v in rows:
                f.write(f"{self.feed},{self._time(i)}," + ",".join(repr(float(x)) for x in v) + "\n")

    def _run(self, args, what):
        p = subprocess.run([self.cli] + args, capture_output=True, text=True)
        if p.returncode != 0:
            raise RuntimeError(f"lyapcast {what} failed ({p.returncode}): {p.stderr.strip()[-2000:]}")
        return p.stdout

    def train(self, obs, observed, end, tag):
        csv = os.path.join(self.work, f"{self.feed}-{tag}-train.csv")
        self._write_csv(csv, ((i, obs[i]) for i in range(end) if observed[i]))
        self.model = os.path.join(self.work, f"{self.feed}-{tag}.model")
        t0 = time.time()
        out = self._run(["train", "--config", self.config, "--feed", self.feed, "--csv", csv, "--out", self.model,
                         "--iterations", str(self.iterations), "--seed", str(self.seed), "--family", self.family],
                        "train")
        wall = time.time() - t0
        m = re.search(r"model written to .* \((\w+)\)", out)
        self.chosen = m.group(1) if m else None
        m = re.search(r"trained (\d+) iterations in ([0-9.]+) s", out)
        return wall, (float(m.group(2)) if m else wall)

    def forecast(self, obs, starts, steps, history=0):
        """From obs[s] (history 0), or from the start `lyapcast forecast
        --history` fits to the `history` + 1 observations up to obs[s]
        (dropped ones left empty)."""
        out = np.empty((len(starts), steps, obs.shape[1]))
        path = os.path.join(self.work, f"{self.feed}-history.csv")
        for b, s in enumerate(starts):
            if history > 0:
                with open(path, "w") as f:
                    for row in obs[max(s - history, 0):s + 1]:
                        f.write(",".join("" if np.isnan(x) else repr(float(x)) for x in row) + "\n")
                start = ["--history", path]
            else:
                start = ["--from=" + ",".join(repr(float(x)) for x in obs[s])]
            text = self._run(["forecast", "--model", self.model, *start, "--steps", str(steps)], "forecast")
            rows = [line.split(",") for line in text.strip().splitlines()[1:]]
            if len(rows) != steps:
                raise RuntimeError(f"lyapcast forecast gave {len(rows)} rows, expected {steps}")
            out[b] = np.array([[float(x) for x in r[2:]] for r in rows])
        return out

    def one_step(self, obs, idx, clean, tag):
        """One-step predictions from obs[idx] scored against clean[idx + 1],
        through `lyapcast score`: a file of (start, target) pairs three
        grid steps apart, so the only one-step pairs in it are those
        (nothing is interpolated across a two-step gap). Returns the RMSE
        per channel in channel units (score prints 4 significant digits)."""
        path = os.path.join(self.work, f"{self.feed}-{tag}-pairs.csv")
        rows = []
        for k, i in enumerate(idx):
            rows.append((3 * k, obs[i]))
            rows.append((3 * k + 1, clean[i + 1]))
        self._write_csv(path, rows)
        text = self._run(["score", "--model", self.model, "--input", path], "score")
        pairs = int(re.search(r"scored (\d+) one-step pairs", text).group(1))
        if pairs != len(idx):
            raise RuntimeError(f"lyapcast score scored {pairs} pairs, expected {len(idx)}")
        rmse = []
        for name in self.system.channels:
            m = re.search(rf"^\s+{re.escape(name)}\s+\S+\s+\d+\s+(\S+)", text, re.M)
            rmse.append(float(m.group(1)))
        return np.array(rmse)


# ----------------------------------------------------------------- data
def observe(clean, condition, rng, std):
    """(series on the grid with dropped points interpolated, observed mask,
    the observations with NaN where dropped)."""
    n = clean.shape[0]
    if condition == "clean":
        return clean.copy(), np.ones(n, bool), clean.copy()
    noisy = clean + NOISE * std * rng.standard_normal(clean.shape)
    observed = rng.random(n) >= DROP
    observed[0] = observed[-1] = True   # interpolation needs both ends
    t = np.arange(n)
    series = np.column_stack([np.interp(t, t[observed], noisy[observed, c]) for c in range(clean.shape[1])])
    obs = np.where(observed[:, None], noisy, np.nan)
    return series, observed, obs


def spread(cand, k):
    return cand[np.linspace(0, len(cand) - 1, k).round().astype(int)]


def scores(pred, truth, std, dt, lyap_time):
    steps = bl.valid_steps(bl.normalized_error(pred, truth, std))
    vpt = steps * dt / lyap_time
    return {"vpt_mean": float(np.mean(vpt)), "vpt_median": float(np.median(vpt)),
            "capped": int(np.sum(steps == pred.shape[1])), "vpt": [round(float(v), 3) for v in vpt]}


def one_step_error(pred, target, std):
    return float(np.mean(np.sqrt(np.mean(((pred - target) / std) ** 2, axis=0))))


# ----------------------------------------------------------------- one run
def run_condition(a, sysm, cond, clean, lyap_time, cli, work, sys_index):
    n = clean.shape[0]
    train_end = int(round(TRAIN_SHARE * n))
    fit_end = train_end - int(round(VALIDATION_SHARE * train_end))
    horizon = int(math.ceil(a.horizon * lyap_time / sysm.dt))
    std = clean[:train_end].std(axis=0)   # the scoring scale: each channel's std (clean training part)
    rng = np.random.default_rng([a.seed, sys_index, 0 if cond == "clean" else 1])
    series, observed, obs = observe(clean, cond, rng, std)
    cand = np.arange(train_end, n - horizon - 1)
    starts = spread(cand[observed[cand]], a.starts)
    truth = clean[starts[:, None] + 1 + np.arange(horizon)[None, :]]
    idx = np.arange(train_end, n - 1)
    idx = idx[observed[idx]]
    target = clean[idx + 1]
    # The validation slice knows only the observations.
    val_std = np.nanstd(obs[:fit_end], axis=0)
    warmup = min(a.esn_warmup, fit_end // 4)
    val = bl.Validation(series, observed, fit_end, train_end, a.val_starts, horizon, val_std)
    res = {"horizon_steps": horizon, "starts": len(starts), "one_step_pairs": len(idx),
           "train_samples": int(observed[:train_end].sum()), "fit_samples": int(observed[:fit_end].sum())}
    tag = f"{sysm.name} {cond}"

    log(f"{tag}: lyapcast train (family {a.family}, {a.iterations} iterations)")
    lc = Lyapcast(cli, work, sysm, a.iterations, a.seed, a.family)
    wall, fit_s = lc.train(np.where(observed[:, None], obs, 0.0), observed, train_end, cond)
    history = int(round(a.history * lyap_time / sysm.dt))
    r = scores(lc.forecast(obs, starts, horizon, history), truth, std, sysm.dt, lyap_time)
    r.update(one_step=float(np.mean(lc.one_step(obs, idx, clean, cond) / std)), train_s=wall, fit_s=fit_s,
             select_s=0.0, family=lc.chosen, history_steps=history,
             gets=(f"the {history + 1} observations up to the start, fitted by its model (forecast --history)"
                   if history > 0 else "the observed state at the start"))
    res["lyapcast"] = r

    log(f"{tag}: ESN random search ({a.esn_trials} reservoirs x {len(bl.RIDGE_BETAS)} ridge values)")
    m, settings, sel = bl.select_esn(series, observed, fit_end, val, a.esn_trials, a.esn_sizes, warmup, a.seed,
                                     log=log)
    t0 = time.time()
    bl.ESN(series.shape[1], warmup=warmup, **{k: v for k, v in settings.items() if k != "beta"}).fit(
        series, observed, fit_end, settings["beta"])
    fit_s = time.time() - t0
    r = scores(m.forecast(series, observed, starts, horizon), truth, std, sysm.dt, lyap_time)
    m.drive_all(series)
    r.update(one_step=one_step_error(m.one_step(series, observed, idx), target, std), train_s=fit_s, fit_s=fit_s,
             select_s=sel, settings=settings, warmup_steps=warmup,
             gets=f"the {warmup} observed steps up to the start (listening), then closed loop")
    res["esn"] = r

    log(f"{tag}: SINDy grid")
    m, settings, sel = bl.select_sindy(series, observed, fit_end, val, log=log)
    t0 = time.time()
    bl.SINDy(settings["degree"], settings["threshold"], settings["ridge"]).fit(series, observed, 0, fit_end)
    fit_s = time.time() - t0
    r = scores(m.forecast(series, observed, starts, horizon), truth, std, sysm.dt, lyap_time)
    r.update(one_step=one_step_error(m.one_step(series, observed, idx), target, std), train_s=fit_s, fit_s=fit_s,
             select_s=sel, settings=settings, gets="the observed state at the start")
    res["sindy"] = r

    log(f"{tag}: NVAR grid")
    m, settings, sel = bl.select_nvar(series, observed, fit_end, val, log=log)
    t0 = time.time()
    bl.NVAR(**settings).fit(series, observed, 0, fit_end)
    fit_s = time.time() - t0
    r = scores(m.forecast(series, observed, starts, horizon), truth, std, sysm.dt, lyap_time)
    r.update(one_step=one_step_error(m.one_step(series, observed, idx), target, std), train_s=fit_s, fit_s=fit_s,
             select_s=sel, settings=settings, gets=f"the start and the {settings['k'] - 1} steps before it")
    res["nvar"] = r

    best = max(("esn", "sindy", "nvar"), key=lambda k: res[k]["vpt_mean"])
    res["best_baseline"] = best
    res["ratio_vpt_mean"] = res["lyapcast"]["vpt_mean"] / res[best]["vpt_mean"] if res[best]["vpt_mean"] > 0 else None
    return res


def print_condition(name, cond, res):
    print(f"  {cond}: {res['starts']} starts, horizon {res['horizon_steps']} steps, "
          f"{res['one_step_pairs']} one-step pairs, {res['fit_samples']} fit samples")
    print(f"    {'method':<9} {'VPT mean':>9} {'median':>7} {'capped':>6} {'one-step':>9} {'fit s':>7} {'select s':>8}"
          "  settings")
    for k in METHODS:
        r = res[k]
        s = bl._fmt(r["settings"]) if "settings" in r else f"{r.get('fit_s', 0):.1f} s of fit"
        if r.get("family"):
            s += f"; served {r['family']}"
        print(f"    {LABEL[k]:<9} {r['vpt_mean']:9.2f} {r['vpt_median']:7.2f} {r['capped']:6d} {r['one_step']:9.2e} "
              f"{r['train_s']:7.1f} {r['select_s']:8.1f}  {s}")
    ratio = res["ratio_vpt_mean"]
    print(f"    lyapcast / best baseline ({LABEL[res['best_baseline']]}), mean VPT: "
          f"{'n/a' if ratio is None else f'{ratio:.2f}'}")


def main():
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0],
                                formatter_class=argparse.RawDescriptionHelpFormatter,
                                epilog="\n".join(__doc__.splitlines()[1:]))
    p.add_argument("--systems", default=",".join(SYSTEMS), help=f"comma list of {', '.join(SYSTEMS)}")
    p.add_argument("--conditions", default="clean,noisy")
    p.add_argument("--starts", type=int, default=50, help="forecast starts over the test slice")
    p.add_argument("--iterations", type=int, default=20000, help="lyapcast train --iterations")
    p.add_argument("--history", type=float, default=0.5,
                   help="lyapcast's forecast start is fitted to this many Lyapunov times of observations up to it "
                        "(forecast --history, as the daemon's forecast?history=N); 0: the observed state alone "
                        "(default 0.5: with the smoothed polynomial fit it lengthened noisy forecasts, see "
                        "docs/performance.md)")
    p.add_argument("--family", default="auto", choices=["neural", "polynomial", "auto"],
                   help="lyapcast train --family (default auto: the daemon's choice between its families)")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--length", type=float, default=400, help="series length in Lyapunov times")
    p.add_argument("--horizon", type=float, default=25, help="longest forecast in Lyapunov times (VPT cap)")
    p.add_argument("--lyap-length", type=float, default=1000,
                   help="Lyapunov times integrated to compute each largest exponent")
    p.add_argument("--esn-trials", type=int, default=16, help="reservoirs tried by the random search")
    p.add_argument("--esn-sizes", default="500,1000", help="reservoir sizes the search draws from")
    p.add_argument("--esn-warmup", type=int, default=500, help="steps the ESN listens before a forecast")
    p.add_argument("--val-starts", type=int, default=20, help="forecast starts on the validation slice")
    p.add_argument("--quick", action="store_true", help="tiny sizes for a smoke run (2 systems, 5 starts, ...)")
    p.add_argument("--out-json", help="also write the JSON line to this file")
    p.add_argument("--workdir", help="keep the configs, CSVs and models here (default a temporary folder)")
    a = p.parse_args()
    if a.quick:
        given = set(arg.split("=")[0] for arg in sys.argv[1:])
        quick = {"--systems": ("systems", "lorenz63,sprott_b"), "--starts": ("starts", 5),
                 "--iterations": ("iterations", 300), "--length": ("length", 100), "--horizon": ("horizon", 8),
                 "--lyap-length": ("lyap_length", 60), "--esn-trials": ("esn_trials", 2),
                 "--esn-sizes": ("esn_sizes", "100"), "--esn-warmup": ("esn_warmup", 100),
                 "--val-starts": ("val_starts", 5)}
        for opt, (attr, v) in quick.items():
            if opt not in given:
                setattr(a, attr, v)
    a.esn_sizes = [int(s) for s in str(a.esn_sizes).split(",")]
    names = [s for s in a.systems.split(",") if s]
    for s in names:
        if s not in SYSTEMS:
            p.error(f"unknown system {s!r}; choose from {', '.join(SYSTEMS)}")
    conditions = [c for c in a.conditions.split(",") if c]
    for c in conditions:
        if c not in ("clean", "noisy"):
            p.error(f"unknown condition {c!r}: clean or noisy")
    cli = default_cli()
    if not os.path.exists(cli):
        p.error(f"lyapcast CLI not found at {cli} (set LYAPCAST_CLI)")

    started = time.time()
    tmp = None
    if a.workdir:
        os.makedirs(a.workdir, exist_ok=True)
        work = a.workdir
    else:
        tmp = tempfile.TemporaryDirectory(prefix="lyapcast-skill-")
        work = tmp.name
    print(f"forecast skill benchmark: lyapcast {a.iterations} iterations; ESN {a.esn_trials} reservoirs of "
          f"{'/'.join(map(str, a.esn_sizes))} nodes; {a.starts} starts; series {a.length:g} Lyapunov times, "
          f"horizon {a.horizon:g}; seed {a.seed}; CLI {cli}")
    out = {"benchmark": "forecast_skill", "settings": {
        "systems": names, "conditions": conditions, "starts": a.starts, "iterations": a.iterations, "family": a.family, "history_lyapunov_times": a.history, "seed": a.seed,
        "length_lyapunov_times": a.length, "horizon_lyapunov_times": a.horizon, "lyap_length": a.lyap_length,
        "esn_trials": a.esn_trials, "esn_sizes": a.esn_sizes, "esn_warmup": a.esn_warmup, "val_starts": a.val_starts,
        "quick": a.quick, "noise": NOISE, "drop": DROP, "train_share": TRAIN_SHARE,
        "validation_share": VALIDATION_SHARE, "vpt_threshold": bl.VPT_THRESHOLD}, "systems": {}}
    for si, name in enumerate(names):
        sysm = SYSTEMS[name]
        t0 = time.time()
        log(f"{name}: largest exponent from the equations ({a.lyap_length:g} Lyapunov times)")
        lam, spread_ = largest_lyapunov(sysm, a.lyap_length / sysm.lyap_published)
        rel = (lam - sysm.lyap_published) / sysm.lyap_published
        used = lam if abs(rel) > 0.10 else sysm.lyap_published
        lyap_time = 1.0 / used
        n = int(math.ceil(a.length * lyap_time / sysm.dt))
        log(f"{name}: exponent {lam:.4f} ({time.time() - t0:.1f} s); simulating {n} samples")
        clean = simulate(sysm, n)
        entry = {"dt": sysm.dt, "lyapunov_published": sysm.lyap_published, "lyapunov_computed": lam,
                 "lyapunov_spread": spread_, "lyapunov_disagreement": rel, "lyapunov_used": used,
                 "lyapunov_source": sysm.source_exponent, "published_from_memory": sysm.from_memory,
                 "lyapunov_time": lyap_time, "steps_per_lyapunov_time": lyap_time / sysm.dt, "samples": n,
                 "conditions": {}}
        flag = "" if abs(rel) <= 0.10 else "  DISAGREES by more than 10 %: the computed value sets the Lyapunov time"
        print(f"\n{name}: largest exponent published {sysm.lyap_published:.4f} ({sysm.source_exponent}"
              f"{'; quoted from memory' if sysm.from_memory else ''}), computed {lam:.4f} "
              f"(spread {spread_:.4f}; {rel * 100:+.1f} %){flag}")
        print(f"  Lyapunov time {lyap_time:.4g}, step {sysm.dt:g} = 1/{lyap_time / sysm.dt:.0f} of it, {n} samples")
        for cond in conditions:
            # The system's place in the full list: a run of a subset draws the same
            # noise and drops as a full run.
            res = run_condition(a, sysm, cond, clean, lyap_time, cli, work, list(SYSTEMS).index(name))
            entry["conditions"][cond] = res
            print_condition(name, cond, res)
            sys.stdout.flush()
        out["systems"][name] = entry

    print("\nsummary: mean (median) valid prediction time in Lyapunov times; one-step error in channel std")
    head = f"{'system':<10} {'cond':<6}" + "".join(f" {LABEL[k]:>13}" for k in METHODS) + f" {'ratio':>6}" + \
        "".join(f" {'1-step ' + LABEL[k]:>15}" for k in METHODS)
    print(head)
    for name, e in out["systems"].items():
        for cond, r in e["conditions"].items():
            line = f"{name:<10} {cond:<6}" + "".join(
                f" {r[k]['vpt_mean']:6.2f} ({r[k]['vpt_median']:4.1f})" for k in METHODS)
            line += f" {r['ratio_vpt_mean']:6.2f}" if r["ratio_vpt_mean"] is not None else f" {'n/a':>6}"
            line += "".join(f" {r[k]['one_step']:15.2e}" for k in METHODS)
            family = r["lyapcast"].get("family")
            print(line + (f"  lyapcast served {family}" if family else ""))
    out["wall_s"] = time.time() - started
    print(f"wall time {out['wall_s']:.0f} s")
    bad = not_finite(out)
    line = json.dumps(out, separators=(",", ":"), allow_nan=False) if not bad else json.dumps(out)
    if a.out_json:
        with open(a.out_json, "w") as f:
            f.write(line + "\n")
    print(line)
    if tmp:
        tmp.cleanup()
    if bad:
        # The ctest smoke relies on this: every figure of every method finite.
        log(f"not finite: {', '.join(bad)}")
        sys.exit(1)


def not_finite(out):
    bad = []
    for name, e in out["systems"].items():
        for key in ("lyapunov_computed", "lyapunov_time"):
            if not math.isfinite(e[key]):
                bad.append(f"{name} {key}")
        for cond, r in e["conditions"].items():
            for k in METHODS:
                for key in ("vpt_mean", "vpt_median", "one_step", "train_s"):
                    if not math.isfinite(r[k][key]):
                        bad.append(f"{name} {cond} {k} {key}")
    return bad


if __name__ == "__main__":
    main()
