"""Benchmark: one calibration of a 61-point measured I-V with the default fit set (issue 13).

Fits the invented measurement ``studies/inp_thz_wafer1_invented.csv`` (61
points) to ``studies/inp_thz_oscillator.toml`` with the default fit set
under the default model (self-consistent electrostatics with the
scattering-assisted channel; fit set: three layer thicknesses, the InGaAs
rate, the channel's roughness height, the series resistance): the
whole-monolayer stage (27 stacks), the random starts, the local fits and the
covariance, as ``wellwright calibrate`` runs them, without writing files.
``--fast`` runs the same fit under the fast model (linear drop, coherent
current) after it, for the side-by-side ratio. Prints the wall and CPU time
of each run, the parameter rows evaluated, and the ratio to the target (30 s
on one core). Threads are pinned to one.

Run: ``python benchmarks/bench_calibrate.py [--repeats N] [--fast]``.
"""

from __future__ import annotations

import argparse
import copy
import os
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from wellwright.optimize.calibrate.fit import run_fit  # noqa: E402
from wellwright.optimize.calibrate.measured import read_measured  # noqa: E402
from wellwright.optimize.calibrate.problem import build_problem  # noqa: E402
from wellwright.physics.stack import read_toml  # noqa: E402

STUDIES = Path(__file__).resolve().parents[1] / "studies"
TARGET_S = 30.0


def _time(problem, repeats: int, label: str) -> float:
    walls, cpus = [], []
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        result = run_fit(problem, seed=0)
        walls.append(time.perf_counter() - w0)
        cpus.append(time.process_time() - c0)
        print(
            f"  {label}: wall {walls[-1]:6.2f} s   cpu {cpus[-1]:6.2f} s   "
            f"parameter rows evaluated {result.evaluations}"
        )
    values = ", ".join(f"{n} {v:.4g}" for n, v in zip(problem.names, result.values))
    print(f"  {label}: fitted {values}")
    return min(cpus)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--fast", action="store_true", help="also the fast model, side by side")
    args = parser.parse_args()
    meas = read_measured(STUDIES / "inp_thz_wafer1_invented.csv")
    data = read_toml(STUDIES / "inp_thz_oscillator.toml")
    problem = build_problem(data, [meas])
    model = problem.stack.model
    print(
        f"{meas.bias_v.size}-point sweep; model: {model.electrostatics} electrostatics, "
        f"{model.transport} transport; fit set: {', '.join(problem.names)}"
    )
    best = _time(problem, args.repeats, "default model")
    print(
        f"best CPU time {best:.2f} s; target {TARGET_S:.0f} s; ratio target/best {TARGET_S / best:.2f}"
    )
    if args.fast:
        fast = copy.deepcopy(data)
        fast.setdefault("model", {}).update(electrostatics="linear", transport="coherent")
        quick = _time(build_problem(fast, [meas]), args.repeats, "fast model")
        print(
            f"fast model (fitted to the default model's curve) {quick:.2f} s; ratio {best / quick:.1f}"
        )


if __name__ == "__main__":
    main()
