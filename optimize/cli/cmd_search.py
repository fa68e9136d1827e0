"""``wellwright search``: find stacks that meet a study file's spec."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from wellwright.optimize.shared.outputs import check_output_folder
from wellwright.optimize.study.study import (
    MAX_ROBUST_SAMPLES,
    MAX_TRIALS,
    MAX_WORKERS,
    MIN_ROBUST_SAMPLES,
    check_process_count,
    load_study,
)
from wellwright.physics import checks
from wellwright.physics.errors import InputError


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "search",
        help="search a study file's design space for stacks that meet its spec",
        description="Search the ranges of a study file with Optuna for stacks that meet "
        "its [targets], "
        "keeping every trial in a database so that rerunning the command resumes the study. "
        "Writes designs.csv, designs.json, growth sheets, history/Pareto/importance figures "
        "and the I-V figures of the best design.",
    )
    p.add_argument(
        "study", help="study file (TOML): a stack file with ranges, [targets], [search], ..."
    )
    p.add_argument(
        "--trials",
        type=int,
        metavar="N",
        help="complete trials the study should hold when done, counting those already in "
        "storage (default: [search] trials)",
    )
    p.add_argument(
        "--workers",
        type=int,
        metavar="K",
        help="processes sharing the study (default: [search] workers)",
    )
    p.add_argument(
        "--storage",
        metavar="URL",
        help="SQLAlchemy database URL, e.g. postgresql+psycopg2://user@host/db, to share the "
        "study between machines (default: SQLite file DIR/study.db)",
    )
    p.add_argument("--out", metavar="DIR", help="output folder (default: <study name>_out)")
    p.add_argument("--seed", type=int, metavar="S", help="sampler seed (default: [search] seed)")
    p.add_argument(
        "--robust",
        action="store_true",
        default=None,
        help="make the objective the Monte Carlo yield of each design under the study's "
        "[growth] spreads, with the same random draws for every design, seeded by "
        "[search] seed (default: [search] robust)",
    )
    p.add_argument(
        "--robust-samples",
        type=int,
        metavar="N",
        help="as-grown samples per design of a robust search "
        "(default: [search] robust_samples, 32)",
    )
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.set_defaults(func=run)


def _check_args(args: argparse.Namespace) -> None:
    if args.trials is not None and not 0 <= args.trials <= MAX_TRIALS:
        raise InputError(f"{args.trials} outside [0, {MAX_TRIALS}]", key="--trials")
    check_process_count(args.workers, high=MAX_WORKERS, key="--workers")
    if args.seed is not None:
        checks.seed(args.seed, key="--seed")
    if args.robust_samples is not None and not (
        MIN_ROBUST_SAMPLES <= args.robust_samples <= MAX_ROBUST_SAMPLES
    ):
        raise InputError(
            f"{args.robust_samples} outside [{MIN_ROBUST_SAMPLES}, {MAX_ROBUST_SAMPLES}]",
            key="--robust-samples",
        )
    if args.storage is not None:
        from wellwright.optimize.search.storage import check_storage_url

        check_storage_url(args.storage)
    if args.out is not None:
        check_output_folder(args.out)


def _fmt(value: float | None, factor: float = 1.0, spec: str = ".3g") -> str:
    return "-" if value is None else format(value * factor, spec)


def run(args: argparse.Namespace) -> int:
    _check_args(args)
    study = load_study(args.study)
    out = Path(args.out) if args.out else Path(f"{study.name}_out")
    from wellwright.optimize.search.engine import run_search  # Optuna: only when searching

    result = run_search(
        study,
        trials=args.trials,
        workers=args.workers,
        storage=args.storage,
        out_dir=out,
        seed=args.seed,
        progress=not args.no_progress,
        robust=args.robust,
        robust_samples=args.robust_samples,
    )
    robust = bool(result.designs) and result.designs[0].get("yield") is not None
    print(
        f"study '{result.study_name}': {result.n_designs} distinct designs evaluated, "
        f"{result.n_designs_feasible} meet the spec and constraints ({result.n_complete} "
        "complete trials, the sampler's repeats stored as copies)"
    )
    print(f"storage: {result.storage}")
    if result.designs:
        print(
            f"{'rank':>4} {'trial':>6} {'ok':>3} {'Jp kA/cm2':>10} {'Vp mV':>7} "
            f"{'PVCR':>7} {'yield':>6}  parameters"
        )
        for d in result.designs[:5]:
            m = d["metrics"]
            params = ", ".join(f"{k}={v:.4g}" for k, v in d["params"].items())
            print(
                f"{d['rank']:>4} {d['trial']:>6} {'yes' if d['feasible'] else 'no':>3} "
                f"{_fmt(m['peak_current_density_a_cm2'], 1e-3, '.1f'):>10} "
                f"{_fmt(m['peak_voltage_v'], 1e3, '.0f'):>7} "
                f"{_fmt(m['pvcr'], 1.0, '.2f'):>7} "
                f"{_fmt(d['yield']['value'] if robust else None, 1.0, '.2f'):>6}  {params}"
            )
    if result.best is None:
        print(
            "no design meets the spec yet: widen the ranges, relax the targets or run more trials"
        )
    for note in result.notes:
        print(f"note: {note}", file=sys.stderr)
    print(f"results in {result.out_dir}/ (designs.csv, designs.json, growth_sheets/, history.png)")
    return 0
