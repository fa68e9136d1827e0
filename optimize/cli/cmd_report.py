"""``wellwright report``: (re)build the HTML report of a finished run folder."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "report",
        help="(re)build DIR/report.html from a finished 'wellwright run'",
        description="Rebuild the self-contained HTML report, its PNG figures and CSV/JSON tables "
        "from the files of a finished run folder (no physics is rerun and the search storage is "
        "not opened; a folder missing a stage's file is told to rerun 'wellwright run').",
    )
    p.add_argument("dir", metavar="DIR", help="run folder made by 'wellwright run' or 'demo'")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from wellwright.optimize.report.build import build_report

    path = build_report(args.dir)
    print(f"report: {path.resolve()}")
    return 0
