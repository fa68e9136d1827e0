"""Benchmark: the linear coherent 61-point I-V (refinement included) against a git commit.

Issue 15 asks this I-V to be 2x faster than at the issue (commit 1b13cd1). The commit
is unpacked and its compiled kernel built (as ``--baseline`` of the other benchmarks
does); one worker process per tree times the same stacks (the commit's example files,
read by each tree's own parser) with the linear drop and the coherent current, the two
workers taking turns I-V by I-V, by the process's CPU time. ``bench_electrostatics.py
--baseline`` cannot reach so far back: it also times models that commit does not have.

Run: ``python benchmarks/bench_iv_baseline.py [REF] [--repeats N]`` (REF default 1b13cd1).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

#: (example file, top of the sweep, V)
STACKS = (("inp_thz_oscillator.toml", 1.2), ("gaas_low_power_memory.toml", 0.8))
#: the fast model, in the keys the tree knows (older trees had only the linear coherent one)
FAST = {"electrostatics": "linear", "transport": "coherent"}


def worker() -> None:
    """Answer ``PATH VMAX`` lines with the CPU seconds of one linear coherent I-V."""
    import wellwright.physics as physics
    from wellwright.physics.iv import sweep
    from wellwright.physics.stack import ModelOptions, load_stack

    print(json.dumps(str(Path(physics.__file__).parent.resolve())), flush=True)
    known = {f.name for f in dataclasses.fields(ModelOptions)}
    fast = {k: v for k, v in FAST.items() if k in known}
    cache = {}
    for line in sys.stdin:
        path, vmax = line.split()
        if path not in cache:
            stack = load_stack(path)
            model = dataclasses.replace(stack.model, **fast)
            cache[path] = (stack.table(), model, np.linspace(0.0, float(vmax), 61))
        table, model, bias = cache[path]
        t0 = time.process_time()
        sweep(table, bias, model=model)
        print(json.dumps(time.process_time() - t0), flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("ref", nargs="?", default="1b13cd1")
    parser.add_argument("--repeats", type=int, default=25)
    parser.add_argument("--worker", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        worker()
        return
    from timing import TreeWorker, before_after_trees

    tmp = Path(tempfile.mkdtemp())
    repo = Path(__file__).resolve().parents[1]
    trees = before_after_trees(args.ref, tmp, repo)
    workers = {side: TreeWorker(__file__, tree) for side, tree in trees.items()}
    print(f"linear coherent 61-point I-V with refinement, {args.ref} against this tree")
    for name, vmax in STACKS:
        request = f"{tmp / 'repo' / 'studies' / name} {vmax}"
        times: dict[str, list[float]] = {side: [] for side in workers}
        for _ in range(3):  # warm-up
            for w in workers.values():
                w.ask(request)
        for _ in range(args.repeats):
            for side, w in workers.items():
                times[side].append(w.ask(request))
        before, after = (1e3 * float(np.median(times[s])) for s in ("before", "after"))
        print(
            f"  {Path(name).stem:24s} {args.ref} {before:6.1f} ms  now {after:6.1f} ms  "
            f"speed-up {before / after:.2f}x (target 2x, issue 15; medians of {args.repeats})"
        )
    for w in workers.values():
        w.close()


if __name__ == "__main__":
    main()
