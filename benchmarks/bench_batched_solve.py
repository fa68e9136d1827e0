"""Benchmark: batched I-Vs of the default model per CPU-second, before and after a change.

Times two batched workloads of the default model (self-consistent electrostatics,
scattering-assisted channel) by the process's CPU time, with the time spent in each
compiled routine (``timing.KernelClock``, wall time inside the calls):

- ``tolerance``: the as-grown Monte Carlo of the InP example (``--samples`` samples,
  31 biases, batches of ``--batch``, as ``bench_tolerance.py`` draws them);
- ``random``: one ``sweep`` of ``--stacks`` random stacks of every material system (the
  draw of ``tests/test_grid_random_stacks.py``, seed 5; an invented scenario), 0 to 1.5 V,
  61 biases, in one batch.

With ``--baseline REF`` the code of the git commit ``REF`` is unpacked and built
(``timing.before_after_trees``) and one worker process per tree runs the workloads, the two
taking turns run by run; it prints the medians of ``--repeats`` runs of each side, the
curves per CPU-second, the compiled routines' share of the run's wall time and their
seconds per routine, and the ratio after / before. Without it, this tree only.

Run: ``python benchmarks/bench_batched_solve.py [--baseline REF] [--repeats 3]
[--samples 32] [--batch 32] [--stacks 32]``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from timing import KernelClock, TreeWorker, before_after_trees  # noqa: E402

REPO = Path(__file__).resolve().parents[1]


def _workloads(samples: int, batch: int, stacks: int) -> dict:
    """name -> (n_curves, run()) of this process's ``wellwright``."""
    sys.path.insert(0, str(REPO / "tests"))
    from test_grid_random_stacks import random_stack
    from wellwright.optimize.study.growth import growth_model
    from wellwright.optimize.tolerance.analysis import Runner
    from wellwright.physics.iv import sweep
    from wellwright.physics.stack import LayerTable, load_stack

    inp = load_stack(REPO / "studies" / "inp_thz_oscillator.toml")
    grown = growth_model(inp).as_grown(growth_model(inp).draw_z(samples, 0), seed=1)
    runner = Runner(np.linspace(0.0, 1.0, 31), model=inp.model, batch_size=batch)
    runner(grown.take(slice(0, 2)))  # warm up imports

    rng = np.random.default_rng(5)
    drawn = [random_stack(rng) for _ in range(stacks)]
    table = LayerTable.from_stacks(drawn)
    model = replace(
        drawn[0].model,
        electrostatics="self-consistent",
        transport="scattering-assisted",
        nonparabolicity=True,
    )
    bias = np.linspace(0.0, 1.5, 61)
    return {
        "tolerance": (samples, lambda: runner(grown)),
        "random": (stacks, lambda: sweep(table, bias, model=model)),
    }


def _run(work: dict, name: str) -> dict:
    n, fn = work[name]
    with KernelClock() as clock:
        c0, w0 = time.process_time(), time.perf_counter()
        fn()
        cpu, wall = time.process_time() - c0, time.perf_counter() - w0
    return {
        "curves": n,
        "cpu": cpu,
        "wall": wall,
        "kernel": clock.seconds,
        "routines": {k: t for k, (_, t) in clock.by_routine.items()},
    }


def worker(tree: str) -> None:
    """Answer workload names on stdin with one run's timings (JSON) each (the sizes from
    the environment, set by the parent)."""
    sys.path.insert(0, tree)
    import wellwright.physics

    print(json.dumps(str(Path(wellwright.physics.__file__).parent.resolve())), flush=True)
    samples, batch, stacks = (int(v) for v in os.environ["WELLWRIGHT_BENCH_SIZES"].split(","))
    work = _workloads(samples, batch, stacks)
    for line in sys.stdin:
        print(json.dumps(_run(work, line.strip())), flush=True)


def _report(name: str, side: str, runs: list) -> float:
    cpu = float(np.median([r["cpu"] for r in runs]))
    share = float(np.median([r["kernel"] / r["wall"] for r in runs]))
    routines = {
        k: float(np.median([r["routines"].get(k, 0.0) for r in runs])) for k in runs[0]["routines"]
    }
    top = ", ".join(f"{k} {t:.2f} s" for k, t in sorted(routines.items(), key=lambda kv: -kv[1]))
    print(
        f"  {name:9s} {side:6s}: {runs[0]['curves'] / cpu:6.1f} curves per CPU-second "
        f"({cpu:.2f} CPU-s), compiled share of wall time {share:.0%} ({top})"
    )
    return cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baseline", metavar="REF", help="also run the code of commit REF")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--samples", type=int, default=32)
    ap.add_argument("--batch", type=int, default=32)
    ap.add_argument("--stacks", type=int, default=32)
    ap.add_argument("--worker", help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.worker:
        worker(a.worker)
        return
    names = ("tolerance", "random")
    print(
        f"tolerance: {a.samples} as-grown InP samples, 31 biases, batches of {a.batch}; "
        f"random: {a.stacks} random stacks, 61 biases, one batch; medians of {a.repeats}"
    )
    if not a.baseline:
        work = _workloads(a.samples, a.batch, a.stacks)
        for name in names:
            _report(name, "this", [_run(work, name) for _ in range(a.repeats)])
        return
    with tempfile.TemporaryDirectory() as tmp:
        trees = before_after_trees(a.baseline, Path(tmp), REPO)
        os.environ["WELLWRIGHT_BENCH_SIZES"] = f"{a.samples},{a.batch},{a.stacks}"
        workers = {side: TreeWorker(__file__, tree) for side, tree in trees.items()}
        try:
            runs: dict = {(n, s): [] for n in names for s in workers}
            for _ in range(a.repeats):
                for name in names:
                    for side, w in workers.items():
                        runs[(name, side)].append(w.ask(name))
            print(f"before ({a.baseline}) / after (this tree), run by run in turn:")
            for name in names:
                cpu = {side: _report(name, side, runs[(name, side)]) for side in workers}
                print(
                    f"  {name:9s} curves per CPU-second, after / before: {cpu['before'] / cpu['after']:.2f}x"
                )
        finally:
            for w in workers.values():
                w.close()


if __name__ == "__main__":
    main()
