"""Wall time of ``wellwright demo --quick`` and of ``wellwright demo``, as a user sees them.

Each runs as a fresh process (interpreter start, imports, the search, the tolerance
analysis, the report), the way a new user runs it after ``pip install``. The README's
times come from here; the machine (cores, load average) is printed beside them, since
a loaded machine is slower. No test asserts these times.

Usage: ``python benchmarks/bench_demo.py [--quick]``  (``--quick``: the quick demo only)
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time


def _wall_s(argv: list[str]) -> float:
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        subprocess.run(
            [sys.executable, "-m", "wellwright.optimize.cli", *argv, "--no-progress"],
            cwd=tmp,
            check=True,
            stdout=subprocess.DEVNULL,
        )
        return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="the quick demo only")
    args = parser.parse_args()
    load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
    print(f"machine: {os.cpu_count()} cores, load average {load} (1, 5, 15 min)")
    runs = [["demo", "--quick"]] + ([] if args.quick else [["demo"]])
    for argv in runs:
        print(f"wellwright {' '.join(argv)}: {_wall_s(argv):.0f} s")


if __name__ == "__main__":
    main()
