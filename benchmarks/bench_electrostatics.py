"""Benchmark: the default model against the fast linear coherent one (issues 7, 12 and 15).

Prints the median time of a 61-point I-V (peak/valley refinement and the
bistability check included) of the two example stacks with the linear drop
and the coherent current, with the self-consistent electrostatics, with the
scattering-assisted channel, and with both (the default model), and their
ratios to the linear coherent one. The models are timed in turn, one I-V of
each per round, so that a change of the shared machine's load falls on all of
them alike. Targets: self-consistent < 10 (issue 7); the default model
(self-consistent with the scattering-assisted channel) at most 10 (issue 12).
Then the cost of the peak and valley refinement on the GaAs stack: no
refinement, the former single round, and the zoom until the extremum is resolved.

``--baseline REF`` also times the same I-Vs with the code of the git commit
``REF`` (before/after): the commit is unpacked into a temporary folder, its
compiled kernel built there, and one worker process per tree (this one and the
baseline) times the I-Vs, the two taking turns I-V by I-V.

``--cpu`` times each I-V by the process's CPU time instead of the wall clock (the ratios
then move less with the load of a shared machine; the refinement rows stay wall time).

``--breakdown`` prints instead where the default model's I-V spends its time: the
phases of the sweep, the number of self-consistent solves and well-charge steps, the
current calls and the compiled routines.

Run: ``python benchmarks/bench_electrostatics.py [--quick | --repeats N] [--cpu] [--baseline REF]
[--breakdown]``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
from dataclasses import replace
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from timing import KernelClock, TreeWorker, before_after_trees  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
STUDIES = {
    "GaAs": REPO / "studies" / "gaas_low_power_memory.toml",
    "InP": REPO / "studies" / "inp_thz_oscillator.toml",
}
BIAS = np.linspace(0.0, 0.8, 61)
#: name -> (electrostatics, transport, broadening_mev)
MODELS = {
    "linear coherent": ("linear", "coherent", 0.0),
    "self-consistent coherent": ("self-consistent", "coherent", 0.0),
    "linear + scattering-assisted": ("linear", "scattering-assisted", 0.0),
    "default (s.-c. + scat.-assisted)": ("self-consistent", "scattering-assisted", 0.0),
}
TARGETS = {
    "self-consistent coherent": "< 10, issue 7",
    "linear + scattering-assisted": "no target",
    "default (s.-c. + scat.-assisted)": "<= 10, issue 12",
}


def _model(stack, name):
    electrostatics, transport, broadening = MODELS[name]
    return replace(
        stack.model, electrostatics=electrostatics, transport=transport, broadening_mev=broadening
    )


def _timed_sweep(study: str, model_name: str, stacks: dict) -> float:
    """Wall time of one 61-point I-V, s (the stack loaded once per process)."""
    import time

    from wellwright.physics.iv import sweep
    from wellwright.physics.stack import load_stack

    if study not in stacks:
        stacks[study] = load_stack(STUDIES[study])
    stack = stacks[study]
    model = _model(stack, model_name)
    clock = time.process_time if os.environ.get("WELLWRIGHT_BENCH_CPU") else time.perf_counter
    t0 = clock()
    sweep(stack.table(), BIAS, model=model)
    return clock() - t0


def worker(tree: str) -> None:
    """Answer ``study<TAB>model`` lines on stdin with one I-V's wall time (JSON) each."""
    sys.path.insert(0, tree)
    import wellwright.physics

    print(json.dumps(str(Path(wellwright.physics.__file__).parent.resolve())), flush=True)
    stacks: dict = {}
    for line in sys.stdin:
        study, model_name = line.rstrip("\n").split("\t")
        print(json.dumps(_timed_sweep(study, model_name, stacks)), flush=True)


def _interleaved(timers: dict, repeats: int) -> dict:
    """Median of ``repeats`` calls of each timer, called in turn (one warm-up call each)."""
    for fn in timers.values():
        fn()
    samples: dict = {k: [] for k in timers}
    for _ in range(repeats):
        for k, fn in timers.items():
            samples[k].append(fn())
    return {k: float(np.median(v)) for k, v in samples.items()}


def ratios(repeats: int) -> None:
    """Default model and the others against the linear coherent one, in this process."""
    stacks: dict = {}
    for study in STUDIES:
        times = _interleaved(
            {m: (lambda s=study, m=m: _timed_sweep(s, m, stacks)) for m in MODELS}, repeats
        )
        print(f"{study} example, 61-point I-V with refinement (medians of {repeats}, in turn):")
        for name, t in times.items():
            print(f"  {name:34s} {1e3 * t:8.1f} ms")
        for name, target in TARGETS.items():
            ratio = times[name] / times["linear coherent"]
            print(f"  ratio {name} / linear coherent: {ratio:.2f} ({target})")


def refinement_cost(repeats: int) -> None:
    from wellwright.physics import iv
    from wellwright.physics.stack import load_stack

    stack = load_stack(STUDIES["GaAs"])
    table = stack.table()
    print("cost of the peak/valley refinement (issue 12), GaAs, same 61-point I-V:")
    for name in ("linear coherent", "self-consistent coherent", "default (s.-c. + scat.-assisted)"):
        model = _model(stack, name)
        timers = {}
        for label, refine, rounds in (
            ("no refinement", False, iv.REFINE_MAX_ROUNDS),
            ("one round (before)", True, 1),
            ("zoom until resolved", True, iv.REFINE_MAX_ROUNDS),
        ):

            def run(refine=refine, rounds=rounds, model=model):
                import time

                saved, iv.REFINE_MAX_ROUNDS = iv.REFINE_MAX_ROUNDS, rounds
                try:
                    t0 = time.perf_counter()
                    iv.sweep(table, BIAS, model=model, refine=refine)
                    return time.perf_counter() - t0
                finally:
                    iv.REFINE_MAX_ROUNDS = saved

            timers[label] = run
        times = _interleaved(timers, repeats)
        base = times["no refinement"]
        print(
            f"  {name:32s} "
            + ", ".join(f"{k} {1e3 * t:.1f} ms ({t / base:.2f}x)" for k, t in times.items())
        )


def breakdown(repeats: int) -> None:
    """Where the default model's I-V spends its time (issue 12: why not 10x), per stack.

    Wraps the phases of :func:`wellwright.physics.iv.sweep` (the main sweep, the peak and
    valley refinement with its solves, which also serve as the peak's, the up-branch check)
    and counts the
    self-consistent solves, their well-charge steps (each one Poisson solve and one search
    for the quasi-bound states), the current calls and the compiled routines' time.
    """
    import time

    from wellwright.physics import electrostatics as es
    from wellwright.physics import iv
    from wellwright.physics.stack import load_stack

    clock: dict = {}

    def timed_callable(fn, key):
        def call(*a, **k):
            t0 = time.perf_counter()
            try:
                return fn(*a, **k)
            finally:
                entry = clock.setdefault(key, [0, 0.0])
                entry[0] += 1
                entry[1] += time.perf_counter() - t0

        return call

    def timed(module, name, key):
        inner = getattr(module, name)
        setattr(module, name, timed_callable(inner, key))
        return inner

    def timed_steps(module, name, key):  # a factory whose products are timed
        inner = getattr(module, name)

        def factory(*a, **k):
            return timed_callable(inner(*a, **k), key)

        setattr(module, name, factory)
        return inner

    saved = {
        (iv, "_refine"): timed(iv, "_refine", "refinement (_refine)"),
        (iv, "_up_branch"): timed(iv, "_up_branch", "up-branch check (_up_branch)"),
        (iv, "_solve_at"): timed(iv, "_solve_at", "s.-c. solves (refinement)"),
        (iv, "solve_stack_poisson"): timed(iv, "solve_stack_poisson", "s.-c. solves (iv)"),
        # the sweep's and the valley extension's solves (band_profile); the refinement's go
        # through _solve_at, both through electrostatics.solve_self_consistent
        (iv, "self_consistent_profile"): timed(
            iv, "self_consistent_profile", "s.-c. solves (profile)"
        ),
        # the charge estimate of each well-charge step (the Poisson solve is the compiled
        # poisson_newton below)
        (es, "_well_charge_target"): timed_steps(
            es, "_well_charge_target", "well-charge steps (charge estimate)"
        ),
        (iv, "_current_of_profile"): timed(iv, "_current_of_profile", "current calls"),
    }
    es._SETUPS.clear()  # solve setups made before the wrappers hold unwrapped steps
    try:
        for study, path in STUDIES.items():
            stack = load_stack(path)
            model = _model(stack, "default (s.-c. + scat.-assisted)")
            with KernelClock() as compiled:  # every routine of the extension, timed
                iv.sweep(stack.table(), BIAS, model=model)
                clock.clear()
                compiled.by_routine.clear()
                t0 = time.perf_counter()
                for _ in range(repeats):
                    iv.sweep(stack.table(), BIAS, model=model)
                total = (time.perf_counter() - t0) / repeats
            clock.update({f"compiled {k}": v for k, v in compiled.by_routine.items()})
            print(f"{study} example, default model, per 61-point I-V ({1e3 * total:.0f} ms):")
            for key, (n, t) in sorted(clock.items(), key=lambda kv: -kv[1][1]):
                print(
                    f"  {key:36s} {n / repeats:7.1f} calls {1e3 * t / repeats:8.1f} ms"
                    f" ({100 * t / repeats / total:4.1f} %)"
                )
    finally:
        for (module, name), fn in saved.items():
            setattr(module, name, fn)
        es._SETUPS.clear()


def before_after(ref: str, repeats: int) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        trees = before_after_trees(ref, Path(tmp), REPO)
        workers = {side: TreeWorker(__file__, tree) for side, tree in trees.items()}
        try:
            print(
                f"before ({ref}) / after (this tree), each in its own process, I-V by I-V "
                f"in turn (medians of {repeats}):"
            )
            for study in STUDIES:
                timers = {
                    (side, m): (lambda w=w, s=study, m=m: float(w.ask(f"{s}\t{m}")))
                    for m in ("linear coherent", "default (s.-c. + scat.-assisted)")
                    for side, w in workers.items()
                }
                times = _interleaved(timers, repeats)
                for side in workers:
                    lin = times[(side, "linear coherent")]
                    default = times[(side, "default (s.-c. + scat.-assisted)")]
                    print(
                        f"  {study} {side:6s}: linear coherent {1e3 * lin:7.1f} ms, default "
                        f"{1e3 * default:7.1f} ms, ratio default / linear {default / lin:.2f}"
                    )
                speedup = (
                    times[("before", "default (s.-c. + scat.-assisted)")]
                    / times[("after", "default (s.-c. + scat.-assisted)")]
                )
                print(f"  {study} default model, before / after: {speedup:.2f}x")
        finally:
            for w in workers.values():
                w.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    parser.add_argument(
        "--repeats", type=int, metavar="N", help="I-Vs of each model per median (9; 3 with --quick)"
    )
    parser.add_argument("--baseline", metavar="REF", help="also time the code of commit REF")
    parser.add_argument(
        "--breakdown", action="store_true", help="where the default model's time goes"
    )
    parser.add_argument(
        "--cpu",
        action="store_true",
        help="time the I-Vs by the process's CPU time, not wall time (steadier on a shared machine)",
    )
    parser.add_argument("--worker", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        worker(args.worker)
        return
    if args.cpu:  # read by _timed_sweep here and in the --baseline workers
        os.environ["WELLWRIGHT_BENCH_CPU"] = "1"
    repeats = args.repeats if args.repeats else (3 if args.quick else 9)
    if args.breakdown:
        breakdown(repeats)
        return
    ratios(repeats)
    refinement_cost(repeats)
    if args.baseline:
        before_after(args.baseline, repeats)


if __name__ == "__main__":
    main()
