"""Benchmark: what the valley extension and the currents at stated biases cost (issue 14).

A batch of 8 stacks of the GaAs/AlAs example (barriers 8 to 11 ML, wells 18 and 22 ML)
is swept with the default model and with the fast one (linear drop, coherent current),
timed in turn, one sweep of each case per round (medians of the rounds), so that a change
of the shared machine's load falls on all cases alike:

- ``reach``: a sweep that reaches every valley (61 points to 1 V): no extension;
- ``cut``: the same spacing ending inside the NDR region of some stacks (0.45 V with the
  default model, 0.3 V with the fast one): those (and only those) are extended beyond the
  end until their current rises again;
- ``at-bias``: ``reach`` plus the current at one stated bias (0.3 V) of every stack.

Printed: seconds per sweep, the ratios to ``reach``, how many stacks were extended and by
how many biases. Run: ``python benchmarks/bench_sweep_extras.py [--rounds N]``.
"""

from __future__ import annotations

import argparse
import os
import time
from dataclasses import replace
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from wellwright.physics.iv import sweep  # noqa: E402
from wellwright.physics.stack import LayerTable, load_stack  # noqa: E402

STACK = Path(__file__).resolve().parents[1] / "studies" / "gaas_low_power_memory.toml"


def batch():
    stack = load_stack(STACK)
    tables = []
    mono = {i: lay.monolayer_nm for i, lay in enumerate(stack.layers)}
    for barrier in (8, 9, 10, 11):
        for well in (18, 22):
            t = stack.table()
            nm = t.thickness_nm.copy()
            nm[0, 2] = nm[0, 4] = barrier * mono[2]
            nm[0, 3] = well * mono[3]
            tables.append(t.with_thickness_nm(nm))
    return stack, LayerTable.concatenate(tables)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    args = parser.parse_args()
    stack, table = batch()
    fast = replace(stack.model, electrostatics="linear", transport="coherent")
    step = 1.0 / 60
    for label, model, cut in (("fast", fast, 0.3), ("default", stack.model, 0.45)):
        cases = {
            "reach": (np.linspace(0.0, 1.0, 61), ()),
            "cut": (np.arange(0.0, cut + 1e-9, step), ()),
            "at-bias": (np.linspace(0.0, 1.0, 61), (0.3,)),
        }
        times: dict[str, list[float]] = {k: [] for k in cases}
        info = {}
        sweep(table, cases["reach"][0], model=model)  # warm-up (imports, compiled tables)
        for _ in range(args.rounds):
            for name, (bias, at) in cases.items():
                t0 = time.process_time()
                curves = sweep(table, bias, model=model, at_bias_v=at)
                times[name].append(time.process_time() - t0)
                if name == "cut" and curves.extension_a_cm2 is not None:
                    ext = np.isfinite(curves.extension_a_cm2)
                    info = {
                        "extended": int(np.count_nonzero(ext.any(axis=1))),
                        "biases": int(ext.sum()),
                        "bounded": int(np.nansum(curves.metrics["valley_bounded_by_sweep"])),
                    }
        med = {k: float(np.median(v)) for k, v in times.items()}
        print(f"{label} model, {table.n_stacks} stacks, median CPU s of {args.rounds} rounds:")
        for name in cases:
            print(f"  {name:8s} {med[name]:7.2f} s  ({med[name] / med['reach']:.2f}x reach)")
        print(
            f"  cut at {cut:g} V: {info.get('extended', 0)} of {table.n_stacks} stacks extended, "
            f"{info.get('biases', 0)} extra (stack, bias) points, "
            f"{info.get('bounded', 0)} still bounded at 1.5x the end"
        )


if __name__ == "__main__":
    main()
