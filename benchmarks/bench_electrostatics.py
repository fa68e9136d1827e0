"""Benchmark: the default model against the fast linear coherent one (issues 7 and 12).

Prints the median time of a 61-point I-V (peak/valley refinement included)
of the demo stack with the linear drop and the coherent current, with the
self-consistent electrostatics, with the scattering-assisted channel, and
with both (the default model), measured side by side in one run, and their
ratios to the linear coherent one. Also the same with scattering broadening
(3 meV), and an up/down hysteresis sweep. Targets: self-consistent < 10
(issue 7); the default model (self-consistent with the scattering-assisted
channel) at most 10 (issue 12). Then the cost of the peak and valley refinement (issue
12): no refinement, the former single round, and the zoom until the extremum is resolved.

Run: ``python benchmarks/bench_electrostatics.py [--quick]``.
"""

from __future__ import annotations

import argparse
import os
from dataclasses import replace
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from timing import median_time  # noqa: E402
from wellwright.physics import iv  # noqa: E402
from wellwright.physics.iv import (
    sweep,  # noqa: E402
    sweep_hysteresis,  # noqa: E402
)
from wellwright.physics.stack import load_stack  # noqa: E402

STUDY = Path(__file__).resolve().parents[1] / "studies" / "gaas_low_power_memory.toml"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    args = parser.parse_args()
    repeats = 3 if args.quick else 9
    stack = load_stack(STUDY)
    table = stack.table()
    bias = np.linspace(0.0, 0.8, 61)
    results = {}
    coherent = replace(stack.model, transport="coherent")
    assisted = replace(stack.model, transport="scattering-assisted")
    for name, model in {
        "linear": replace(coherent, electrostatics="linear"),
        "self-consistent": replace(coherent, electrostatics="self-consistent"),
        "linear + scattering-assisted": replace(assisted, electrostatics="linear"),
        "default (s.-c. + scat.-assisted)": replace(assisted, electrostatics="self-consistent"),
        "linear + 3 meV broadening": replace(coherent, electrostatics="linear", broadening_mev=3.0),
        "self-consistent + 3 meV": replace(
            coherent, electrostatics="self-consistent", broadening_mev=3.0
        ),
    }.items():
        results[name] = median_time(
            lambda m=model: sweep(table, bias, model=m), repeats, warmup=True
        )
        print(f"61-point I-V, {name:34s} {1e3 * results[name]:8.1f} ms")
    for name, target in (
        ("self-consistent", "< 10, issue 7"),
        ("linear + scattering-assisted", "no target"),
        ("default (s.-c. + scat.-assisted)", "<= 10, issue 12"),
    ):
        ratio = results[name] / results["linear"]
        print(f"ratio {name} / linear coherent: {ratio:.2f} ({target})")
    sc = replace(assisted, electrostatics="self-consistent")
    print("cost of the peak/valley refinement (issue 12), same 61-point I-V:")
    for name, model in (
        ("linear coherent", replace(coherent, electrostatics="linear")),
        ("self-consistent coherent", replace(coherent, electrostatics="self-consistent")),
        ("default", sc),
    ):
        times = {}
        for label, refine, rounds in (
            ("no refinement", False, iv.REFINE_MAX_ROUNDS),
            ("one round (before)", True, 1),
            ("zoom until resolved", True, iv.REFINE_MAX_ROUNDS),
        ):
            saved, iv.REFINE_MAX_ROUNDS = iv.REFINE_MAX_ROUNDS, rounds
            try:
                times[label] = median_time(
                    lambda m=model, r=refine: sweep(table, bias, model=m, refine=r),
                    repeats,
                    warmup=True,
                )
            finally:
                iv.REFINE_MAX_ROUNDS = saved
        base = times["no refinement"]
        print(
            f"  {name:24s} "
            + ", ".join(f"{k} {1e3 * t:.1f} ms ({t / base:.2f}x)" for k, t in times.items())
        )
    t_h = median_time(
        lambda: sweep_hysteresis(table, bias, model=sc), max(1, repeats // 3), warmup=True
    )
    print(f"up+down hysteresis sweep, 61 points each, default model: {1e3 * t_h:.1f} ms")


if __name__ == "__main__":
    main()
