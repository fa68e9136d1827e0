"""Start-up of ``wellwright iv --no-figures`` as a whole process.

Runs the command as a child process ``--runs`` times (default 15) on
``studies/inp_thz_oscillator.toml`` and prints the median CPU time (user +
system, from the children's resource usage, which the machine's other load
disturbs far less than wall time) of

- a bare ``python -c pass`` and ``python -c "import numpy"`` (the floor);
- the whole command;
- the I-V itself, timed inside one process after its imports;

so start-up = whole command - I-V. It also lists which of the libraries that
``iv`` must not load (optuna, sqlalchemy, SALib, matplotlib, scipy) the
command loaded, and the thread counts the command ran with: the command sets
``OPENBLAS_NUM_THREADS``, ``OMP_NUM_THREADS`` and ``MKL_NUM_THREADS`` to 1
where the environment leaves them unset
(:data:`wellwright.optimize.cli.THREAD_VARIABLES`); run the script with
``OPENBLAS_NUM_THREADS=2`` to time the command with OpenBLAS's thread pool.
For the import tree itself:
``python -X importtime -m wellwright.optimize.cli iv STACK --no-figures``.

The package is byte-compiled first (``compileall``, as ``pip install`` does
for a regular install): with ``PYTHONDONTWRITEBYTECODE`` set and no
``__pycache__``, every process would compile the package's sources again,
about 0.15 s of CPU that a user's installed command does not pay.

Target (issue 15): start-up under 0.3 s of the process's time.

Usage: ``python benchmarks/bench_startup.py [--runs N]``
"""

from __future__ import annotations

import argparse
import compileall
import os
import resource
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
STACK = REPO / "studies" / "inp_thz_oscillator.toml"
HEAVY = ("optuna", "sqlalchemy", "SALib", "matplotlib", "scipy")

#: Child: run the command in-process, then report the I-V's own CPU time and the heavy modules.
CHILD = """
import os, sys, time
from wellwright.optimize.cli import THREAD_VARIABLES, main
argv = ["iv", sys.argv[1], "--no-figures", "--out", sys.argv[2]]
main(argv)  # imports, first call
t0 = time.process_time()
main(argv)
print(time.process_time() - t0)
print(" ".join(f"{{k}}={{os.environ.get(k, 'unset')}}" for k in THREAD_VARIABLES))
print(" ".join(m for m in {heavy!r} if m in sys.modules))
"""


def cpu_seconds(argv: list[str], runs: int, env: dict[str, str] | None = None) -> float:
    """Median CPU seconds (user + system) of ``runs`` child processes."""
    times = []
    for _ in range(runs):
        r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        subprocess.run(
            argv, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env
        )
        r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
        times.append(r1.ru_utime - r0.ru_utime + r1.ru_stime - r0.ru_stime)
    return statistics.median(times)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--runs", type=int, default=15, help="child processes per measurement")
    args = p.parse_args(argv)
    py = sys.executable
    import wellwright.optimize
    import wellwright.physics

    for package in (wellwright.physics, wellwright.optimize):
        compileall.compile_dir(Path(package.__file__).parent, quiet=1)
    load = os.getloadavg()[0]
    with tempfile.TemporaryDirectory() as tmp:
        command = [py, "-m", "wellwright.optimize.cli", "iv", str(STACK), "--no-figures"]
        command += ["--out", tmp]
        bare = cpu_seconds([py, "-c", "pass"], args.runs)
        from wellwright.optimize.cli import THREAD_VARIABLES

        # numpy as the command loads it: with its thread defaults where the user set none
        env = THREAD_VARIABLES | dict(os.environ)
        numpy = cpu_seconds([py, "-c", "import numpy"], args.runs, env)
        whole = cpu_seconds(command, args.runs)
        ivs, loaded, threads = [], "", ""
        for _ in range(args.runs):
            out = subprocess.run(
                [py, "-c", CHILD.format(heavy=HEAVY), str(STACK), tmp],
                check=True,
                capture_output=True,
                text=True,
            ).stdout.splitlines()
            ivs.append(float(out[-3]))
            threads, loaded = out[-2], out[-1]
    iv = statistics.median(ivs)
    print(
        f"median CPU seconds over {args.runs} processes each "
        f"(load average {load:.2f} at the start, {os.getloadavg()[0]:.2f} at the end)"
    )
    print(f"  python -c pass                 {bare:6.3f}")
    print(f"  python -c 'import numpy'       {numpy:6.3f}  (the command's thread settings)")
    print(f"  wellwright iv --no-figures     {whole:6.3f}")
    print(f"  the I-V itself (in-process)    {iv:6.3f}")
    startup = whole - iv
    verdict = "met" if startup < 0.3 else "NOT met"
    print(f"start-up (command - I-V): {startup:.3f} s (target < 0.3 s: {verdict})")
    print(f"heavy libraries loaded by 'iv': {loaded.strip() or 'none'}")
    user = [
        k for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS") if k in os.environ
    ]
    source = f"as set by the user ({', '.join(user)})" if user else "the command's defaults applied"
    print(f"thread counts in the command: {threads} ({source})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
