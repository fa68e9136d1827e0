"""Benchmark of the design search: trials per second and where the wall time goes.

Runs a 500-trial study (``--quick``: 100) of an invented InGaAs/AlAs-on-InP
double-barrier space on one worker and on two, and prints

- trials per second (wall clock of the search itself, outputs not written);
- the share of the workers' time in the sampler (ask and suggest), in the
  physics (the evaluator call) and in storage (tell, attributes, claims);
- the sampler's cost per trial as the study grows, for TPE with and without
  ``multivariate``, measured on an in-memory study with a cheap synthetic
  objective so that only the sampler is timed.

Target: sampler overhead under 25 % of wall time at 500 trials.

Usage: ``python benchmarks/bench_search.py [--quick]``
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402
import optuna  # noqa: E402
from wellwright.optimize.search.engine import run_search  # noqa: E402
from wellwright.optimize.study.study import parse_study  # noqa: E402

#: Invented benchmark scenario (not a measured device).
STUDY = {
    "temperature_k": 300,
    "substrate": "InP",
    "layers": [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "spacer1", "material": "In0.53Ga0.47As", "thickness_nm": 2.0},
        {"name": "barrier1", "material": "AlAs", "thickness_ml": {"min": 3, "max": 8}},
        {
            "name": "well",
            "material": "InGaAs",
            "x": {"min": 0.45, "max": 0.70, "step": 0.01},
            "thickness_ml": {"min": 8, "max": 22},
        },
        {"name": "barrier2", "same_as": "barrier1"},
        {
            "name": "spacer2",
            "material": "In0.53Ga0.47As",
            "thickness_nm": {"min": 2.0, "max": 10.0, "step": 0.5},
        },
        {
            "name": "collector",
            "material": "In0.53Ga0.47As",
            "doping_cm3": {"min": 5e17, "max": 5e18, "log": True},
        },
    ],
    "targets": {
        "peak_current_density_a_cm2": {"min": 2e5, "max": 4e5},
        "peak_voltage_v": {"max": 0.6},
        "pvcr": {"min": 5},
        "maximize": ["pvcr"],
    },
    "constraints": {"critical_thickness": True},
    "search": {"seed": 1},
}


def bench_run(trials: int, workers: int) -> dict[str, float]:
    study = parse_study(STUDY, name=f"bench_w{workers}")
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        r = run_search(
            study, trials=trials, workers=workers, out_dir=Path(tmp), progress=False, write=False
        )
        wall = time.perf_counter() - t0
    t = r.timing
    busy = t["total"]
    return {
        "trials": r.n_complete,
        "workers": workers,
        "wall_s": wall,
        "trials_per_s": r.n_complete / wall,
        "sampler": t["sampler"] / busy,
        "physics": t["physics"] / busy,
        "storage": t["storage"] / busy,
        "other": max(0.0, 1.0 - (t["sampler"] + t["physics"] + t["storage"]) / busy),
        "copied": t["copied"],
    }


def sampler_cost(trials: int, multivariate: bool, seed: int = 0) -> list[tuple[int, float]]:
    """Mean seconds per ask+suggest in windows of trials, on an in-memory study."""
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sampler = optuna.samplers.TPESampler(
            seed=seed, multivariate=multivariate, n_startup_trials=10, constant_liar=True
        )
    study = optuna.create_study(sampler=sampler)
    rng = np.random.default_rng(seed)
    times = []
    for _ in range(trials):
        t0 = time.perf_counter()
        trial = study.ask()
        b = trial.suggest_int("barrier1.thickness_ml", 3, 8)
        w = trial.suggest_int("well.thickness_ml", 8, 22)
        x = trial.suggest_float("well.x", 0.45, 0.70, step=0.01)
        s = trial.suggest_float("spacer2.thickness_nm", 2.0, 10.0, step=0.5)
        d = trial.suggest_float("collector.doping_cm3", 5e17, 5e18, log=True)
        times.append(time.perf_counter() - t0)
        value = (b - 5) ** 2 + 0.1 * (w - 14) ** 2 + 50 * (x - 0.6) ** 2 + 0.01 * s + 1e-19 * d
        study.tell(trial, value + 0.01 * rng.standard_normal())
    window = max(1, trials // 5)
    return [(i + window, float(np.mean(times[i : i + window]))) for i in range(0, trials, window)]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="100 trials instead of 500")
    args = p.parse_args(argv)
    trials = 100 if args.quick else 500

    rows = [bench_run(trials, 1), bench_run(trials, 2)]
    print(f"\nsearch of {trials} trials (real physics, SQLite storage, TPE multivariate)")
    print(
        f"{'workers':>7} {'wall s':>8} {'trials/s':>9} {'sampler':>8} {'physics':>8} "
        f"{'storage':>8} "
        f"{'other':>6} {'copied':>7}"
    )
    for r in rows:
        print(
            f"{r['workers']:>7} {r['wall_s']:>8.1f} {r['trials_per_s']:>9.2f} {r['sampler']:>8.1%} "
            f"{r['physics']:>8.1%} {r['storage']:>8.1%} {r['other']:>6.1%} {r['copied']:>7.0f}"
        )
    speedup = rows[1]["trials_per_s"] / rows[0]["trials_per_s"]
    print(f"2-worker speed-up: {speedup:.2f}x")
    verdict = "met" if rows[0]["sampler"] < 0.25 else "NOT met"
    print(
        f"target sampler overhead < 25 % of wall time at {trials} trials (1 worker): {verdict} "
        f"({rows[0]['sampler']:.1%})"
    )

    print("\nTPE cost per trial (ask + 5 suggests) as the study grows, in-memory, no physics")
    costs = {mv: sampler_cost(trials, mv) for mv in (True, False)}
    print(f"{'trials':>7} {'multivariate ms':>16} {'independent ms':>15}")
    for (n, a), (_, b) in zip(costs[True], costs[False], strict=True):
        print(f"{n:>7} {a * 1e3:>16.1f} {b * 1e3:>15.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
