"""Timing helper shared by the benchmark scripts (run them as ``python benchmarks/NAME.py``)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def median_time(fn, repeats: int, *, warmup: bool = False) -> float:
    """Median wall time of ``repeats`` calls of ``fn``, seconds; optionally one untimed call first."""
    if warmup:
        fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


class KernelClock:
    """Context manager summing the wall time spent inside the compiled kernel.

    Wraps every routine of the compiled extension (``physics/_slices.c``: the transmission,
    the resonance refinement, the Poisson-Newton iteration, whatever it holds) as reached
    through ``wellwright.physics.transmission._slices`` for the duration, so a benchmark can
    split a run into compiled time and everything else (Python and numpy).
    ``by_routine`` holds each routine's ``[calls, seconds]``.
    """

    def __init__(self) -> None:
        self.by_routine: dict[str, list] = {}

    @property
    def seconds(self) -> float:
        return sum(t for _, t in self.by_routine.values())

    @property
    def calls(self) -> int:
        return sum(n for n, _ in self.by_routine.values())

    def __enter__(self) -> KernelClock:
        import importlib

        tm = importlib.import_module(
            "wellwright.physics.transmission"
        )  # the module, not the function
        self._module = tm
        self._inner = tm._slices
        self._forget_setups()
        clock = self

        class _Timed:
            def __getattr__(self, name):
                routine = getattr(clock._inner, name)
                if not callable(routine):
                    return routine

                def timed(*args):
                    t0 = time.perf_counter()
                    try:
                        return routine(*args)
                    finally:
                        entry = clock.by_routine.setdefault(name, [0, 0.0])
                        entry[0] += 1
                        entry[1] += time.perf_counter() - t0

                return timed

        tm._slices = _Timed()
        return self

    def __exit__(self, *exc) -> None:
        self._module._slices = self._inner
        self._forget_setups()

    @staticmethod
    def _forget_setups() -> None:
        """The self-consistent solve keeps its setups, which hold the compiled routines they
        were made with: made outside the clock, they would run unwrapped inside it."""
        import importlib

        es = importlib.import_module("wellwright.physics.electrostatics")
        getattr(es, "_SETUPS", []).clear()

    def breakdown(self) -> str:
        """``name s, ...`` of each compiled routine, largest first."""
        items = sorted(self.by_routine.items(), key=lambda kv: -kv[1][1])
        return ", ".join(f"{k} {t:.2f} s" for k, (_, t) in items)


def before_after_trees(ref: str, tmp: Path, repo: Path) -> dict[str, Path]:
    """Folders under ``tmp`` where ``import wellwright`` finds the code of commit ``ref``
    (``"before"``, unpacked with its compiled kernel built in place) and of ``repo`` as it
    is (``"after"``)."""
    archive = subprocess.run(
        ["git", "-C", str(repo), "archive", ref], check=True, capture_output=True
    ).stdout
    base = tmp / "repo"
    base.mkdir(parents=True)
    subprocess.run(["tar", "-x", "-C", str(base)], input=archive, check=True)
    # the build runs setup.py directly, so it needs a setuptools that reads the commit's
    # pyproject.toml (77 and newer for its SPDX licence); a venv's own may be older (65 in
    # Python 3.11's) or absent (3.12 on): a private copy, as pip's isolated builds fetch one
    tools = tmp / "build-tools"
    subprocess.run(
        [sys.executable, "-m", "pip", "install", "-q", "--target", str(tools), "setuptools>=77"],
        check=True,
        capture_output=True,
    )
    subprocess.run(
        [sys.executable, "setup.py", "-q", "build_ext", "--inplace"],
        cwd=base,
        env={**os.environ, "PYTHONPATH": str(tools)},
        check=True,
        capture_output=True,
    )
    if not list((base / "physics").glob("_slices*.so")):
        raise SystemExit(f"the compiled kernel of {ref} did not build")
    trees = {}
    for side, source in (("before", base), ("after", repo)):
        (tmp / side / "wellwright").mkdir(parents=True)
        for part in ("physics", "optimize"):
            (tmp / side / "wellwright" / part).symlink_to(source / part)
        trees[side] = tmp / side
    return trees


class TreeWorker:
    """A benchmark script run as ``script --worker TREE`` in its own process, importing
    ``wellwright`` from ``tree`` (checked): one request line in, one JSON line out."""

    def __init__(self, script: str, tree: Path) -> None:
        env = dict(os.environ, PYTHONPATH=str(tree))
        self.proc = subprocess.Popen(
            [sys.executable, script, "--worker", str(tree)],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
            env=env,
            cwd=tempfile.gettempdir(),  # never the repository: import the tree's code
        )
        assert self.proc.stdout is not None
        loaded = json.loads(self.proc.stdout.readline())
        if Path(loaded) != (tree / "wellwright" / "physics").resolve():
            raise SystemExit(f"worker for {tree} imported {loaded}")

    def ask(self, request: str):
        """The worker's answer to one request line (decoded JSON)."""
        assert self.proc.stdin is not None and self.proc.stdout is not None
        self.proc.stdin.write(request + "\n")
        self.proc.stdin.flush()
        return json.loads(self.proc.stdout.readline())

    def close(self) -> None:
        if self.proc.stdin:
            self.proc.stdin.close()
        self.proc.wait()
