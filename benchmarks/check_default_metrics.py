"""Check for speed work on the default model: the same figures of merit before and after.

Not a benchmark but its companion: a change meant only to make the default model
(self-consistent electrostatics, scattering-assisted channel) faster must not move its
results. This sweeps, with the code of a git commit ``REF`` and with the code as it is
(each in its own process, the commit unpacked with its compiled kernel built, as
``--baseline`` of the benchmarks does), 218 stacks with the default model, 61 biases each:

- the four cases of ``tests/test_grid_convergence.py``: 48 random designs of each example
  search space (``studies/*_search.toml``) and 48 wide as-grown variants of each example
  stack (1.5 ML thickness sigma, 3 % rate, 0.02 composition, 20 % doping), in batches of 16,
  and the first 6 of each case alone (a batch of one takes other paths);
- the two example stacks alone (0 to 0.8 V);

and prints how many stacks (and how many of them bistable) were compared and, per figure
of merit and for the swept I-V (relative to the stack's largest current), the largest
relative difference (0 where identical) and where it is, then the median change of the main
figures (for a physics change, which is meant to move them). It exits
with status 1 where a difference exceeds ``--rtol`` (default 1e-6).

Run: ``python benchmarks/check_default_metrics.py REF [--rtol 1e-6]`` (about a minute a side).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from timing import before_after_trees  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
#: the figures whose typical change a physics change reports (:func:`_print_medians`)
MAIN_FIGURES = (
    "peak_current_density_a_cm2",
    "valley_current_density_a_cm2",
    "pvcr",
    "peak_voltage_v",
)


def metrics(out: str) -> None:
    """Sweep the stacks with the ``wellwright`` on the path; their metrics as JSON to ``out``."""
    from dataclasses import replace

    import numpy as np

    sys.path.insert(0, str(REPO / "tests"))
    from test_grid_convergence import CASES
    from wellwright.physics.iv import sweep
    from wellwright.physics.stack import load_stack

    found: dict = {}

    def record(key, result):
        for i in range(result.current_density_a_cm2.shape[0]):
            found[f"{key} {i}"] = {k: float(np.asarray(v)[i]) for k, v in result.metrics.items()}
            found[f"{key} {i}"]["curve"] = result.current_density_a_cm2[i].tolist()

    for case in sorted(CASES):
        table, bias, model = CASES[case]()
        model = replace(model, electrostatics="self-consistent", transport="scattering-assisted")
        bias = np.linspace(bias[0], bias[-1], 61)
        for start in range(0, table.n_stacks, 16):
            part = table.take(slice(start, start + 16))
            record(f"{case} batch{start}", sweep(part, bias, model=model))
        for i in range(6):
            record(f"{case} alone{i}", sweep(table.take(slice(i, i + 1)), bias, model=model))
    for name in ("inp_thz_oscillator", "gaas_low_power_memory"):
        stack = load_stack(REPO / "studies" / f"{name}.toml")
        model = replace(
            stack.model,
            electrostatics="self-consistent",
            transport="scattering-assisted",
            broadening_mev=0.0,
        )
        record(name, sweep(stack.table(), np.linspace(0.0, 0.8, 61), model=model))
    Path(out).write_text(json.dumps(found))


def compare(before: dict, after: dict, rtol: float) -> bool:
    """Print the largest relative difference per figure of merit; True if all within ``rtol``."""
    assert before.keys() == after.keys()
    worst: dict = {}
    bistable = sum(1 for m in before.values() if m.get("bistable_window_v", 0.0) > 0.0)
    for key, old in before.items():
        for name, x in old.items():
            if name not in after[key]:  # a figure one side does not have (added or renamed)
                continue
            y = after[key][name]
            if name == "curve":  # the swept I-V: relative to the stack's largest current
                scale = max(max(abs(v) for v in x), 1e-300)
                x, y = 0.0, max(abs(a - b) for a, b in zip(x, y, strict=True)) / scale
                name = "I-V curve (of its largest |J|)"
            if math.isnan(x) and math.isnan(y):
                continue
            if math.isnan(x) or math.isnan(y):
                d = math.inf
            else:
                d = abs(y - x) / (abs(x) if x else 1.0)
            if d >= worst.get(name, (-1.0,))[0]:
                worst[name] = (d, key, x, y)
    print(f"{len(before)} stacks ({bistable} bistable), largest relative difference per figure:")
    for name, (d, key, x, y) in sorted(worst.items(), key=lambda kv: -kv[1][0]):
        print(f"  {name:32s} {d:.2e}  ({key}: {x:.9g} -> {y:.9g})")
    _print_medians(before, after)
    return all(v[0] <= rtol for v in worst.values())


def _print_medians(before: dict, after: dict) -> None:
    """For a physics change: the median and the 5th-95th percentiles of the ratio after/before
    of the main figures over the stacks where both are finite and positive."""
    import numpy as np

    print("ratio after/before, median (5th-95th percentile) over the stacks:")
    for name in MAIN_FIGURES:
        r = np.array([after[k][name] / before[k][name] for k in before if before[k][name] > 0])
        r = r[np.isfinite(r) & (r > 0)]
        if r.size:
            lo, med, hi = np.percentile(r, [5, 50, 95])
            print(f"  {name:32s} {med:.4g} ({lo:.4g}-{hi:.4g}), {r.size} stacks")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("ref", nargs="?", help="git commit to compare with")
    parser.add_argument("--rtol", type=float, default=1e-6)
    parser.add_argument("--metrics", help=argparse.SUPPRESS)  # worker: write metrics here
    args = parser.parse_args()
    if args.metrics:
        metrics(args.metrics)
        return
    if not args.ref:
        parser.error("give the git commit to compare with")
    with tempfile.TemporaryDirectory() as tmp:
        trees = before_after_trees(args.ref, Path(tmp), REPO)
        found = {}
        for side, tree in trees.items():
            out = Path(tmp) / f"{side}.json"
            subprocess.run(
                [sys.executable, __file__, "--metrics", str(out)],
                check=True,
                env=dict(os.environ, PYTHONPATH=str(tree)),
                cwd=tempfile.gettempdir(),  # never the repository: import the tree's code
            )
            found[side] = json.loads(out.read_text())
    if not compare(found["before"], found["after"], args.rtol):
        raise SystemExit(1)


if __name__ == "__main__":
    main()
