"""``wellwright demo``: the whole pipeline on the invented demo scenario shipped in the package."""

from __future__ import annotations

import argparse
import os
from pathlib import Path

from wellwright.optimize.cli.pipeline import run_pipeline
from wellwright.physics.errors import InputError

#: The scenario files shipped as package data (pyproject.toml: optimize/cli/scenarios/*.toml).
SCENARIOS = Path(__file__).resolve().parent / "scenarios"
DEMO_LABEL = "Invented demo scenario (not measured data)"


def scenario_path(quick: bool) -> str:
    """The packaged scenario file (``demo.toml`` or ``demo_quick.toml``)."""
    return "demo_quick.toml" if quick else "demo.toml"


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "demo",
        help="run the whole job on an invented demo scenario and print where the report is",
        description="Run search, growth tolerance and report on the InP oscillator scenario "
        "shipped with wellwright (an invented demo, not measured data). Full size it is long "
        "(about 1.5 h on two cores, README); --quick takes about a minute. Rerunning resumes.",
    )
    p.add_argument(
        "--out",
        metavar="DIR",
        help="run folder (default: wellwright_demo, or wellwright_demo_quick)",
    )
    p.add_argument(
        "--quick",
        action="store_true",
        help="fewer trials, samples and bias points, Morris instead of Sobol",
    )
    p.add_argument(
        "--fresh",
        action="store_true",
        help="delete what an earlier run wrote in the folder and start from scratch (as for run)",
    )
    p.add_argument("--no-progress", action="store_true", help="no progress bars")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    out = (
        Path(args.out)
        if args.out
        else Path("wellwright_demo_quick" if args.quick else "wellwright_demo")
    )
    if out.exists() and not out.is_dir():
        raise InputError("exists and is not a folder", key="--out", source=str(out))
    run_pipeline(
        SCENARIOS / scenario_path(args.quick),
        out_dir=out,
        settings={"jobs": 1 if args.quick else (os.cpu_count() or 1)},
        progress=not args.no_progress,
        label=DEMO_LABEL,
        fresh=args.fresh,
    )
    print(f"report: {(out / 'report.html').resolve()}")
    return 0
