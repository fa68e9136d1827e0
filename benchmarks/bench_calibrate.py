"""Benchmark: one calibration of a 61-point measured I-V with the default fit set (issue 13).

Fits the invented measurement ``studies/inp_thz_wafer1_invented.csv`` (61
points) to ``studies/inp_thz_oscillator.toml`` with the default fit set
under the default model (self-consistent electrostatics with the
scattering-assisted channel; fit set: three layer thicknesses, the InGaAs
rate, the channel's roughness height, the series resistance): the
whole-monolayer stage (27 stacks), the random starts, the local fits and the
covariance, as ``wellwright calibrate`` runs them, without writing files.
Prints the wall and CPU time of each run, the parameter rows evaluated and
the stacks computed, the fitted values with their 95 % intervals, and the
ratio to the target (30 s CPU on one core). Threads are pinned to one.

``--fast`` runs the same fit under the fast model (linear drop, coherent
current) after it, for the side-by-side ratio.

``--baseline REF`` also fits with the code of the git commit ``REF``
(before/after): the commit is unpacked into a temporary folder, its compiled
kernel built there, and one worker process per tree (the baseline and this
one) runs the fit, the two taking turns; medians of ``--repeats``, fitted
values and intervals side by side. ``--alone`` adds a second baseline run in
which every kernel call computes its stacks one at a time: the same
algorithm and physics, only the self-consistent solve's batch partners
removed (it rounds differently in a batch: up to ~5e-4 of the current on
the demo's stacks), which shows how far that rounding alone moves the fit.

Run: ``python benchmarks/bench_calibrate.py [--repeats N] [--fast] [--baseline REF [--alone]]``.
"""

from __future__ import annotations

import argparse
import copy
import json
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from timing import TreeWorker, before_after_trees  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
STUDIES = REPO / "studies"
TARGET_S = 30.0


def _problem(fast: bool = False):
    from wellwright.optimize.calibrate.measured import read_measured
    from wellwright.optimize.calibrate.problem import build_problem
    from wellwright.physics.stack import read_toml

    meas = read_measured(STUDIES / "inp_thz_wafer1_invented.csv")
    data = read_toml(STUDIES / "inp_thz_oscillator.toml")
    if fast:
        data = copy.deepcopy(data)
        data.setdefault("model", {}).update(electrostatics="linear", transport="coherent")
    return build_problem(data, [meas])


def _one_at_a_time():
    """Every kernel call of the calibration computes its stacks one at a time (``--alone``);
    returns the function that undoes it."""
    from wellwright.optimize.calibrate import problem as module

    def alone(fn):
        def call(table, bias_v, **kw):
            bias = np.asarray(bias_v, float)
            rows = [
                fn(table.take(np.array([i])), bias if bias.ndim == 1 else bias[i : i + 1], **kw)
                for i in range(table.n_stacks)
            ]
            return np.concatenate(rows, axis=0)

        return call

    if not hasattr(module, "current_at_bias"):  # the code since the kernel cache
        raise SystemExit("--alone applies to a tree whose calibration calls current_at_bias")
    real = module.current_at_bias
    module.current_at_bias = alone(real)
    return lambda: setattr(module, "current_at_bias", real)


def fit_once(fast: bool = False, alone: bool = False) -> dict:
    """One calibration: times, counts, fitted values and interval bounds (plain JSON)."""
    from wellwright.optimize.calibrate import problem as module
    from wellwright.optimize.calibrate.fit import run_fit

    undo = [_one_at_a_time()] if alone else []
    problem = _problem(fast)
    computed: dict = {}
    if hasattr(module, "KernelCache"):  # count the stacks the fit's cache computed
        real = module.KernelCache.__init__

        def counting(self):
            real(self)
            computed["cache"] = self

        module.KernelCache.__init__ = counting
        undo.append(lambda: setattr(module.KernelCache, "__init__", real))
    try:
        w0, c0 = time.perf_counter(), time.process_time()
        result = run_fit(problem, seed=0)
        wall, cpu = time.perf_counter() - w0, time.process_time() - c0
    finally:
        for fn in undo:
            fn()
    cache = computed.get("cache")
    sd_low = result.sd if result.sd_low is None else result.sd_low
    sd_high = result.sd if result.sd_high is None else result.sd_high
    return {
        "wall": wall,
        "cpu": cpu,
        "rows": result.evaluations,
        "stacks": None if cache is None else cache.computed,
        "reused_profiles": None if cache is None else cache.reused_profiles,
        "names": list(problem.names),
        "values": [float(v) for v in result.values],
        "low": [float(v - 1.959963984540054 * s) for v, s in zip(result.values, sd_low)],
        "high": [float(v + 1.959963984540054 * s) for v, s in zip(result.values, sd_high)],
        "chi2": float(result.chi2),
        "alternatives": len(result.alternatives),
    }


def _print_fit(label: str, out: dict) -> None:
    counts = f"parameter rows {out['rows']}"
    if out.get("stacks") is not None:
        counts += f", stacks computed {out['stacks']} (profiles reused {out['reused_profiles']})"
    print(f"  {label}: wall {out['wall']:6.2f} s   cpu {out['cpu']:6.2f} s   {counts}")


def _print_values(label: str, out: dict) -> None:
    print(f"  {label}: chi-square {out['chi2']:.2f}, alternatives {out['alternatives']}")
    for n, v, lo, hi in zip(out["names"], out["values"], out["low"], out["high"]):
        print(f"    {n:28s} {v:10.5g}  ({lo:.5g} to {hi:.5g})")


def worker(tree: str) -> None:
    """Answer ``variant`` lines on stdin (``plain``/``alone``) with one fit's record (JSON)."""
    sys.path.insert(0, tree)
    import wellwright.physics

    print(json.dumps(str(Path(wellwright.physics.__file__).parent.resolve())), flush=True)
    for line in sys.stdin:
        print(json.dumps(fit_once(alone=line.strip() == "alone")), flush=True)


def before_after(ref: str, repeats: int, alone: bool) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        trees = before_after_trees(ref, Path(tmp), REPO)
        workers = {side: TreeWorker(__file__, tree) for side, tree in trees.items()}
        runs: dict[str, list[dict]] = {"before": [], "after": []}
        if alone:
            runs["before, one stack per kernel call"] = []
        try:
            print(f"before ({ref}) / after (this tree), each in its own process, in turn:")
            for _ in range(repeats):
                for label in runs:
                    side = "before" if label.startswith("before") else "after"
                    out = workers[side].ask("alone" if label != side else "plain")
                    runs[label].append(out)
                    _print_fit(label, out)
        finally:
            for w in workers.values():
                w.close()
    cpu = {k: float(np.median([r["cpu"] for r in v])) for k, v in runs.items()}
    wall = {k: float(np.median([r["wall"] for r in v])) for k, v in runs.items()}
    for label, out in runs.items():
        _print_values(label, out[-1])
    print(
        f"median CPU before {cpu['before']:.2f} s, after {cpu['after']:.2f} s: "
        f"{cpu['before'] / cpu['after']:.2f}x (wall {wall['before']:.1f} s -> {wall['after']:.1f} s); "
        f"target {TARGET_S:.0f} s, ratio target/after {TARGET_S / cpu['after']:.2f}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--fast", action="store_true", help="also the fast model, side by side")
    parser.add_argument("--baseline", metavar="REF", help="also fit with the code of commit REF")
    parser.add_argument(
        "--alone", action="store_true", help="with --baseline: also one stack per kernel call"
    )
    parser.add_argument("--worker", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        worker(args.worker)
        return
    if args.baseline:
        before_after(args.baseline, args.repeats, args.alone)
        return
    problem = _problem()
    model = problem.stack.model
    print(
        f"{problem.measurements[0].bias_v.size}-point sweep; model: {model.electrostatics} "
        f"electrostatics, {model.transport} transport; fit set: {', '.join(problem.names)}"
    )
    runs = [fit_once() for _ in range(args.repeats)]
    for out in runs:
        _print_fit("default model", out)
    _print_values("default model", runs[-1])
    best = float(np.median([r["cpu"] for r in runs]))
    print(
        f"median CPU time {best:.2f} s; target {TARGET_S:.0f} s; ratio target/median "
        f"{TARGET_S / best:.2f}"
    )
    if args.fast:
        quick = [fit_once(fast=True) for _ in range(args.repeats)]
        for out in quick:
            _print_fit("fast model", out)
        t = float(np.median([r["cpu"] for r in quick]))
        print(f"fast model (fitted to the default model's curve) {t:.2f} s; ratio {best / t:.1f}")


if __name__ == "__main__":
    main()
