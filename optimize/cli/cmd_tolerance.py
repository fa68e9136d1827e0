"""``wellwright tolerance``: will a design survive growth? Yield, ranking, allocation."""

from __future__ import annotations

import argparse
import json
import os
import warnings
from pathlib import Path
from typing import Any

import numpy as np
from wellwright.optimize.shared import names
from wellwright.optimize.shared.outputs import check_output_folder
from wellwright.optimize.study.growth import growth_model, parse_growth, split_layer_growth
from wellwright.optimize.study.study import MAX_JOBS, Study, check_process_count, load_study
from wellwright.optimize.tolerance.analysis import (
    METHODS,
    Runner,
    Spec,
    control_summary,
    evaluations_text,
    ranking_without_variance,
    run_tolerance,
)
from wellwright.physics import checks
from wellwright.physics.errors import InputError
from wellwright.physics.stack import CriticalThicknessWarning, Stack, parse_stack, read_toml

MAX_SAMPLES = 1_000_000


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "tolerance",
        help="growth tolerance of a design: Monte Carlo yield, Sobol/Morris ranking, tornado, allocation",
        description="Draw as-grown samples of a design with the study's [growth] spreads, evaluate them "
        "against its [targets] and write DIR/tolerance.json with CSV tables and PNG figures beside it.",
    )
    p.add_argument("study", help="study file (TOML) with [targets] and optionally [growth]")
    p.add_argument(
        "--design",
        default="best",
        metavar="best|RANK|FILE",
        help="'best' or a rank from the study's finished search (designs.json), "
        "or a stack file whose layers carry the study's layer names (default: best)",
    )
    p.add_argument(
        "--search-dir",
        metavar="DIR",
        help="folder of the finished search (default: <study name>_out)",
    )
    p.add_argument(
        "--samples",
        type=int,
        default=256,
        metavar="N",
        help="Monte Carlo samples; also the evaluation budget of Sobol/Morris (default: 256)",
    )
    p.add_argument(
        "--method",
        choices=METHODS,
        default="sobol",
        help="sobol (default), morris (cheap screening) or mc (yield, tornado, allocation only)",
    )
    p.add_argument(
        "--second-order",
        action="store_true",
        help="with sobol: also the pairwise interaction indices (costs 2 D + 2 instead of "
        "D + 2 evaluations per base sample)",
    )
    p.add_argument(
        "--bias-points",
        type=int,
        metavar="P",
        help="bias points per I-V over the study's [sweep] range (default: its points)",
    )
    p.add_argument(
        "--allocate",
        type=int,
        default=3,
        metavar="K",
        help="allocate tolerances of the K top-ranked parameters (default: 3; 0: none)",
    )
    p.add_argument(
        "--target-yield",
        type=float,
        default=0.9,
        metavar="Y",
        help="yield the allocation must keep, in (0, 1) (default: 0.9)",
    )
    p.add_argument("--jobs", type=int, metavar="J", help="worker processes (default: all cores)")
    p.add_argument(
        "--cluster",
        metavar="tcp://HOST:8786",
        help="run the batches on a Dask cluster (joblib dask backend)",
    )
    p.add_argument(
        "--out", metavar="DIR", help="output folder (default: <search dir>/tolerance_<design>)"
    )
    p.add_argument(
        "--seed", type=int, default=0, metavar="S", help="seed of every random step (default: 0)"
    )
    p.add_argument("--no-progress", action="store_true", help="no progress bars")
    p.set_defaults(func=run)


def _check_args(args: argparse.Namespace) -> None:
    if args.second_order and args.method != "sobol":
        raise InputError(
            f"needs --method sobol (the second-order indices are Sobol's), not {args.method}",
            key="--second-order",
        )
    if not 8 <= args.samples <= MAX_SAMPLES:
        raise InputError(f"{args.samples} outside [8, {MAX_SAMPLES}]", key="--samples")
    if args.bias_points is not None and not 5 <= args.bias_points <= 2001:
        raise InputError(f"{args.bias_points} outside [5, 2001]", key="--bias-points")
    if not 0 <= args.allocate <= 50:
        raise InputError(f"{args.allocate} outside [0, 50]", key="--allocate")
    if not 0.0 < args.target_yield < 1.0:
        raise InputError(f"{args.target_yield:g} outside (0, 1)", key="--target-yield")
    check_process_count(args.jobs, high=MAX_JOBS, key="--jobs")
    checks.seed(args.seed, key="--seed")
    if args.cluster is not None and not args.cluster.startswith(("tcp://", "tls://")):
        raise InputError(
            f"{args.cluster!r} is not a scheduler address like tcp://HOST:8786", key="--cluster"
        )
    if args.out is not None:
        check_output_folder(args.out)


def _from_search(study: Study, which: str, search_dir: Path) -> tuple[Stack, dict[str, Any]]:
    path = search_dir / "designs.json"
    if not path.is_file():
        raise InputError(
            f"no finished search: {path} not found; run 'wellwright search' first "
            "or give --search-dir or a stack FILE",
            key="--design",
        )
    designs = json.loads(path.read_text(encoding="utf-8"))
    rank = 1 if which == "best" else int(which)
    match = [d for d in designs if d.get("rank") == rank]
    if not match:
        raise InputError(f"rank {rank} not in {path} (ranks 1 to {len(designs)})", key="--design")
    rec = match[0]
    if which == "best" and not rec.get("feasible"):
        raise InputError(
            f"the search in {search_dir} has no design meeting the spec; give a RANK to "
            "analyse an off-spec design",
            key="--design",
        )
    _check_same_space(study, rec["params"], path)
    stack = study.stack(rec["params"])
    return stack, {
        "source": str(path),
        "rank": rank,
        "trial": rec.get("trial"),
        "params": rec["params"],
    }


def _check_same_space(study: Study, params: dict[str, Any], path: Path) -> None:
    """One line where a search's design does not belong to ``study``: other parameters, or a
    value outside the study's range (a fuzz run analysed an InP study's design with a GaAs
    study, its well outside the study's range, and reported a yield of 0 %)."""
    names = set(study.parameter_names)
    if set(params) != names:
        raise InputError(
            f"its designs are not of this study: parameters {', '.join(sorted(params))} "
            f"against the study's {', '.join(sorted(names)) or '(none)'}; give the study file "
            "the search ran",
            source=str(path),
            key="--search-dir",
        )
    for v in study.variables:
        if not v.contains(float(params[v.name])):
            raise InputError(
                f"its design has {v.name} = {params[v.name]:g}, outside this study's range "
                f"[{v.low:g}, {v.high:g}]; give the study file the search ran",
                source=str(path),
                key="--search-dir",
            )


def _from_file(study: Study, path: Path) -> tuple[Stack, dict[str, Any], dict[str, Any]]:
    data, layer_growth = split_layer_growth(read_toml(path))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CriticalThicknessWarning)
        stack = parse_stack(data, source=str(path))
    names = [layer.name for layer in stack.layers]
    missing = [n for n in study.layer_names if n not in names]
    if missing:
        raise InputError(
            f"has no layer named {', '.join(repr(m) for m in missing)}; its layers must carry the "
            f"study's layer names ({', '.join(study.layer_names)})",
            source=str(path),
            key="name",
        )
    return stack, {"source": str(path)}, layer_growth


def run(args: argparse.Namespace) -> int:
    _check_args(args)
    study = load_study(args.study)
    search_dir = Path(args.search_dir) if args.search_dir else Path(f"{study.name}_out")
    stack, design, file_growth, label = _chosen_design(args, study, search_dir)
    settings, per_layer = parse_growth(
        study.reserved.get("growth"),
        {**study.layer_growth, **file_growth},
        layer_names=[layer.name for layer in stack.layers],
        source=study.source,
    )
    model = growth_model(stack, settings, per_layer)
    if not study.targets:
        raise InputError(
            "needs at least one window (e.g. pvcr = {min = 3}) for a yield",
            source=study.source,
            key="targets",
        )
    sw = study.sweep
    bias = (
        sw.bias_v
        if args.bias_points is None
        else np.linspace(sw.bias_min_v, sw.bias_max_v, args.bias_points)
    )
    out = Path(args.out) if args.out else search_dir / f"tolerance_{label}"
    backend, n_jobs = _parallelism(args)
    runner = Runner.for_stack(
        stack,
        bias,
        n_jobs=n_jobs,
        backend=backend,
        progress=not args.no_progress,
        at_bias_v=study.at_bias_v,
    )
    rec = run_tolerance(
        model,
        Spec.from_study(study),
        runner,
        method=args.method,
        samples=args.samples,
        seed=args.seed,
        allocate=args.allocate,
        target_yield=args.target_yield,
        out_dir=out,
        design=design,
        second_order=args.second_order,
        variables=study.variables,
    )
    _print_summary(rec)
    print(f"results in {out}/ (tolerance.json, samples.csv, figures)")
    return 0


def _chosen_design(
    args: argparse.Namespace, study: Study, search_dir: Path
) -> tuple[Stack, dict[str, Any], dict[str, Any], str]:
    """The design ``--design`` names: the stack, its design record, the growth keys of its
    file (empty for a design of the search) and the label of its output folder."""
    is_rank = args.design.isascii() and args.design.isdigit()  # not '²' or Arabic-Indic digits
    if args.design == "best" or is_rank:
        if is_rank and int(args.design) < 1:
            raise InputError("ranks start at 1", key="--design")
        stack, design = _from_search(study, args.design, search_dir)
        return stack, design, {}, "best" if args.design == "best" else f"rank{int(args.design)}"
    path = Path(args.design)
    if not path.is_file():
        raise InputError(
            f"{args.design!r} is neither 'best', a rank nor an existing stack file",
            key="--design",
        )
    stack, design, file_growth = _from_file(study, path)
    return stack, design, file_growth, path.stem


def _parallelism(args: argparse.Namespace) -> tuple[str | None, int]:
    """joblib's backend and workers: ``--jobs`` local workers (default: every core), or every
    worker of the dask cluster ``--cluster``."""
    if not args.cluster:
        return None, args.jobs or os.cpu_count() or 1
    try:
        from dask.distributed import Client
    except ImportError:
        raise InputError(
            "needs dask.distributed installed (pip install 'dask[distributed]')",
            key="--cluster",
        ) from None
    Client(args.cluster)  # registers itself as joblib's dask backend target
    return "dask", -1


def _print_summary(rec: dict[str, Any]) -> None:
    """The tolerance record in a few lines: yields, failures, ranking, what to control,
    the nominal against the spec, re-centring, allocation and notes."""
    y = rec["yield"]
    print(
        f"yield {100 * y['value']:.1f} % (95 % Wilson interval {100 * y['ci_low']:.1f} to "
        f"{100 * y['ci_high']:.1f} %) over {y['samples']} as-grown samples"
    )
    if "wafer_yield" in rec:
        w = rec["wafer_yield"]
        print(
            f"wafer yield {100 * w['value']:.1f} % (95 % Wilson interval {100 * w['ci_low']:.1f} "
            f"to {100 * w['ci_high']:.1f} %) over a {rec['wafer']['diameter_mm']:g} mm wafer; "
            "the yield above is at its centre"
        )
    warning = (rec.get("islands") or {}).get("warning")
    if warning:
        print(f"warning: {warning}")
    fails = {k: v for k, v in rec["failures"].items() if v}
    if fails:
        print("failures: " + ", ".join(f"{k} {v}" for k, v in fails.items()))
    _print_ranking(rec)
    if rec.get("control_order"):
        print(
            f"control hardest (by {rec['control_order'][0]['measure']}): "
            + control_summary(rec, top=3, parameters=True)
        )
    for text in rec.get("nominal_misses", []):
        print(f"the nominal design misses the spec: {text}")
    if rec.get("nominal_closest"):
        print(f"the nominal design meets every window; the closest: {rec['nominal_closest']}")
    recentred = rec.get("recentre")
    if recentred is not None:
        print(f"re-centring: {recentred['text']}")
    for a in rec["allocation"]:
        print(
            f"allocation {a['parameter']} (sigma {a['nominal_sigma']:.3g} {a['unit']}): {a['advice']}"
        )
    for note in rec["notes"]:
        print(f"note: {note}")


def _print_ranking(rec: dict[str, Any]) -> None:
    """The Sobol ranking of pass/fail, or where every sample passed (or failed) that in words
    and the ranking of the peak current density instead; and the evaluations used."""
    ranking = rec.get("ranking") or {}
    uniform = ranking_without_variance(ranking)
    if uniform is not None:
        print(f"ranking: {uniform}")
    output = next((k for k in ("pass", "peak_current_density_a_cm2") if rec["sobol"].get(k)), None)
    if output is not None and (output == "pass" or uniform is not None):
        print(
            f"ranking (total Sobol index of {names.words(output)}): "
            + ", ".join(
                f"{r['parameter']} {r['total_index']:.2f}" for r in rec["sobol"][output][:5]
            )
        )
    if ranking:
        print(f"{rec['settings']['method'].capitalize()}: {evaluations_text(ranking)}")
