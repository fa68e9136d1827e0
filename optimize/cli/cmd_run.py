"""``wellwright run``: search, growth tolerance of the top designs, report, in one resumable run."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from wellwright.optimize.cli.pipeline import (
    EXIT_SPEC_NOT_MET,
    METHODS,
    RUN_OPTIONS,
    SpecNotMet,
    run_pipeline,
)
from wellwright.optimize.study.study import MAX_JOBS, MAX_WORKERS, check_process_count


def add_run_options(p: argparse.ArgumentParser) -> None:
    """Options shared by ``run`` (all of them) and ``demo`` (none: it uses its scenario's)."""
    p.add_argument(
        "--trials",
        type=int,
        metavar="N",
        help="complete search trials the study should hold (default: [search] trials)",
    )
    p.add_argument(
        "--designs",
        type=int,
        metavar="K",
        help="top designs to check against growth and report (default: [report] designs, else 2)",
    )
    p.add_argument(
        "--samples",
        type=int,
        metavar="N",
        help="Monte Carlo samples per design, also the Sobol/Morris budget "
        "(default: [report] samples, else 128)",
    )
    p.add_argument(
        "--method",
        choices=METHODS,
        help="sensitivity method: sobol, morris (cheap screening) or mc (yield only) "
        "(default: [report] method, else sobol)",
    )
    p.add_argument(
        "--seed",
        type=int,
        metavar="S",
        help="seed of the tolerance stage (default: [report] seed, else 0); the search "
        "uses [search] seed",
    )
    p.add_argument("--workers", type=int, metavar="K", help="search processes sharing the study")
    p.add_argument(
        "--storage",
        metavar="URL",
        help="SQLAlchemy URL of the search study, e.g. postgresql+psycopg2://user@host/db "
        "(default: SQLite file DIR/search/study.db)",
    )
    p.add_argument(
        "--jobs",
        type=int,
        metavar="J",
        help="processes for the tolerance samples (default: all cores)",
    )


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "run",
        help="the whole job: search, growth tolerance of the top designs, HTML report",
        description="Search a study file's design space, check the top designs against growth "
        "spreads (yield, Sobol/Morris ranking, tornado, tolerance allocation) and write "
        "DIR/report.html. Rerunning the same command skips finished stages and resumes the "
        "search from its storage; a changed study file reruns what depends on it. A folder "
        "holding the run of another study is refused unless --fresh is given.",
    )
    p.add_argument(
        "study",
        help="study file (TOML) with ranges, [targets] and optionally [growth] and [report]",
    )
    p.add_argument("--out", metavar="DIR", help="run folder (default: <study name>_run)")
    add_run_options(p)
    p.add_argument(
        "--continue-infeasible",
        action="store_true",
        help="analyse and report the closest designs even when none meets the spec "
        "(default: stop after the search with exit status 3)",
    )
    p.add_argument(
        "--fresh",
        action="store_true",
        help="delete what an earlier run wrote in DIR (search storage file, designs, tolerance "
        "results, report) and start there from scratch (default: resume; a folder holding "
        "another study's run is refused)",
    )
    p.add_argument("--no-progress", action="store_true", help="no progress bars")
    p.set_defaults(func=run)


def overrides(args: argparse.Namespace) -> dict:
    """The run settings the options give (None: not given; ``jobs`` defaults to every core).

    Parameters
    ----------
    args
        The parsed command line.
    """
    return {k: getattr(args, k) for k in RUN_OPTIONS} | {"jobs": args.jobs or os.cpu_count() or 1}


def run(args: argparse.Namespace) -> int:
    from wellwright.optimize.search.engine import check_storage_url

    if args.storage is not None:
        check_storage_url(args.storage)
    # the search's and the tolerance stage's own checks, before the run folder is written
    # (a fuzz run's '--workers 0' left pipeline.json and study.toml behind; '--jobs 0' ran)
    check_process_count(args.workers, high=MAX_WORKERS, key="--workers")
    check_process_count(args.jobs, high=MAX_JOBS, key="--jobs")
    out = Path(args.out) if args.out else Path(f"{Path(args.study).stem}_run")
    try:
        run_pipeline(
            args.study,
            out_dir=out,
            settings=overrides(args),
            progress=not args.no_progress,
            continue_infeasible=args.continue_infeasible,
            fresh=args.fresh,
        )
    except SpecNotMet as exc:  # after the search: its results stay in DIR/search/
        print(f"wellwright run: {exc}", file=sys.stderr)
        return EXIT_SPEC_NOT_MET
    print(f"report: {(out / 'report.html').resolve()}")
    return 0
