"""Benchmark: one calibration of a 61-point measured I-V with the default fit set (issue 13).

Fits the invented measurement ``studies/inp_thz_wafer1_invented.csv`` (61
points) to ``studies/inp_thz_oscillator.toml`` with the default fit set
(three layer thicknesses, the InGaAs rate, the series resistance): the
whole-monolayer stage (27 stacks), the local fits and the covariance, as
``wellwright calibrate`` runs them, without writing files. Prints the wall
and CPU time of each run, the stacks the kernel computed, and the ratio to
the target (30 s on one core). Threads are pinned to one.

Run: ``python benchmarks/bench_calibrate.py [--repeats N]``.
"""

from __future__ import annotations

import argparse
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


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    data = read_toml(STUDIES / "inp_thz_oscillator.toml")
    meas = read_measured(STUDIES / "inp_thz_wafer1_invented.csv")
    problem = build_problem(data, [meas])
    print(f"{meas.bias_v.size}-point sweep, fit set: {', '.join(problem.names)}")
    walls, cpus = [], []
    for _ in range(args.repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        result = run_fit(problem)
        walls.append(time.perf_counter() - w0)
        cpus.append(time.process_time() - c0)
        print(
            f"  wall {walls[-1]:6.2f} s   cpu {cpus[-1]:6.2f} s   "
            f"parameter rows evaluated {result.evaluations}"
        )
    best = min(cpus)
    print(
        f"best CPU time {best:.2f} s; target {TARGET_S:.0f} s; ratio target/best {TARGET_S / best:.1f}"
    )


if __name__ == "__main__":
    main()
