"""Benchmark of the tolerance analysis: batched against one-stack-at-a-time evaluation.

Prints, measured side by side in one run (ratios matter more than absolute
times on a shared machine):

1. seconds for ``N`` as-grown samples of the InP demo stack evaluated one
   stack per kernel call, and in batches of ``--batch`` stacks per call, and
   the ratio (issue 5 target: >= 10); and the time of each run inside the
   compiled kernel, the same work either way, so one-at-a-time time over its
   kernel time bounds what any batching can gain; and the kernel's share of the
   batched run (issue 15 target: >= 80 %);
2. optionally (``--sobol``) the time of a Sobol run with 8 parameters and
   ``--base`` base samples on ``--jobs`` processes: N (2 D + 2) = 18,432 evaluations
   for N = 1024 with the second-order indices (default), N (D + 2) with ``--first-total``.

Run: ``python benchmarks/bench_tolerance.py [--samples 32] [--batch 32] [--points 31]
[--sobol --base 1024 --jobs 2 [--first-total]]``.
"""

from __future__ import annotations

import argparse
import os
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from timing import KernelClock  # noqa: E402
from wellwright.optimize.study.growth import GrowthSettings, growth_model  # noqa: E402
from wellwright.optimize.tolerance.analysis import Runner, Spec, sobol_analysis  # noqa: E402
from wellwright.physics.stack import load_stack  # noqa: E402

STACK = Path(__file__).resolve().parents[1] / "studies" / "inp_thz_oscillator.toml"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=32)
    ap.add_argument("--batch", type=int, default=32)
    ap.add_argument("--points", type=int, default=31)
    ap.add_argument("--sobol", action="store_true")
    ap.add_argument("--base", type=int, default=1024)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--first-total", action="store_true", help="Sobol without second order")
    ap.add_argument("--quick", action="store_true", help="16 samples, Sobol with N = 64 if asked")
    a = ap.parse_args()
    if a.quick:
        a.samples, a.base = 16, 64

    stack = load_stack(STACK)
    model = growth_model(stack)
    table = model.as_grown(model.draw_z(a.samples, 0), seed=1)
    bias = np.linspace(0.0, 1.0, a.points)
    one = Runner(bias, model=stack.model, batch_size=1)
    many = Runner(bias, model=stack.model, batch_size=a.batch)
    many(table.take(slice(0, 2)))  # warm up imports and caches
    with KernelClock() as k1:
        t0 = time.perf_counter()
        m1 = one(table)
        t1 = time.perf_counter()
    with KernelClock() as k2:
        m2 = many(table)
        t2 = time.perf_counter()
    d = np.nanmax(np.abs(m1["peak_current_density_a_cm2"] / m2["peak_current_density_a_cm2"] - 1))
    print(
        f"{a.samples} samples, {a.points} biases: one at a time {t1 - t0:.2f} s, "
        f"batches of {a.batch} {t2 - t1:.2f} s, ratio {(t1 - t0) / (t2 - t1):.1f} "
        f"(max relative Jp difference {d:.1e})"
    )
    if k1.calls:
        print(
            f"  of which in the compiled kernel: one at a time {k1.seconds:.2f} s "
            f"({k1.calls} calls), batched {k2.seconds:.2f} s ({k2.calls} calls); "
            f"the same work either way, so batching alone cannot beat "
            f"{(t1 - t0) / k1.seconds:.1f}x (one-at-a-time time / its kernel time)"
        )
        share = k2.seconds / (t2 - t1)
        verdict = "met" if share >= 0.8 else "NOT met"
        print(
            f"  kernel share of the batched Monte Carlo run: {share:.0%} "
            f"(issue 15 target >= 80 %: {verdict})"
        )

    if a.sobol:
        # 8 parameters: thicknesses of the five layers, two rates, well composition
        g = GrowthSettings(x_sigma=0.005, doping_sigma=0.0)
        full = growth_model(stack, g)
        keep = [p for p in full.parameters if p.kind in ("thickness", "rate") or p.name == "well.x"]
        sub = type(full)(
            stack=stack,
            parameters=tuple(keep),
            nominal=full.nominal,
            nominal_ml=full.nominal_ml,
            substrate_lattice_nm=full.substrate_lattice_nm,
        )
        run = Runner(bias, model=stack.model, batch_size=a.batch, n_jobs=a.jobs, progress=True)
        spec = Spec((("peak_current_density_a_cm2", 1.4e5, 2.1e5), ("pvcr", 3.0, np.inf)))
        t0 = time.perf_counter()
        s = sobol_analysis(
            sub, spec, run, base_samples=a.base, second_order=not a.first_total, seed=0
        )
        order = "first and total" if a.first_total else "first, total and second order"
        print(
            f"Sobol ({order}), {len(keep)} parameters, N = {a.base}: {s['evaluations']} "
            f"evaluations in {time.perf_counter() - t0:.0f} s on {a.jobs} processes"
        )


if __name__ == "__main__":
    main()
