"""The whole job in stages: design search, growth tolerance of the top designs, report.

A run folder ``DIR`` holds::

    DIR/pipeline.json        stage status, settings and fingerprints (this module)
    DIR/study.toml           the study file as it was when the run started
    DIR/search/              the design search (designs.json, study.db, figures)
    DIR/tolerance/rankNN/    the tolerance analysis of each reported design
    DIR/report.html          the report, with DIR/report_files/ beside it

Stages meet only through their files (plain records: ``designs.json``,
``tolerance.json``). Each stage records a fingerprint of what it depends on
(the study file's bytes and the stage's own settings); rerunning skips a
stage whose fingerprint is unchanged and whose outputs exist, and reruns it
and everything after it otherwise. The search resumes from its Optuna storage
(kept between runs), so a run interrupted anywhere continues where it stopped;
a tolerance analysis interrupted half way is redone for that design only.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
from wellwright.optimize.shared import names
from wellwright.optimize.shared.outputs import atomic_write_text, write_json
from wellwright.optimize.study.run_folder import (
    FORMAT_VERSION,
    PIPELINE_FILE,
    STUDY_COPY,
    fingerprint,
    load_run,
    study_from_run,
    study_from_text,
)
from wellwright.optimize.study.study import MAX_TRIALS, Study
from wellwright.physics.errors import InputError

__all__ = [
    "RunSettings",
    "run_pipeline",
    "load_run",
    "run_settings",
    "study_from_run",
    "PIPELINE_FILE",
    "STAGES",
]

STAGES = ("search", "tolerance", "report")
METHODS = ("mc", "sobol", "morris")
#: Keys of the study file's ``[report]`` table read by this module.
REPORT_KEYS = ("designs", "samples", "method", "seed", "allocate", "target_yield", "bias_points")


@dataclass(frozen=True)
class RunSettings:
    """Settings of one pipeline run (command line over ``[report]`` over defaults).

    Attributes
    ----------
    trials
        Complete search trials the study should hold (None: ``[search] trials``).
    designs
        Top-ranked designs that get a tolerance analysis and a report section.
    samples
        Monte Carlo samples (also the evaluation budget of Sobol/Morris).
    method
        ``mc``, ``sobol`` or ``morris``.
    seed
        Seed of every random step of the tolerance stage; the search seed is
        ``[search] seed`` unless ``search_seed`` is given.
    allocate
        Parameters whose tolerance is allocated (top of the ranking).
    target_yield
        Yield the allocation must keep.
    bias_points
        Bias points of the tolerance sweeps (None: the study's ``[sweep] points``).
    search_seed, workers, storage
        Passed to :func:`wellwright.optimize.search.engine.run_search`.
    jobs
        joblib workers of the tolerance stage.
    """

    trials: int | None = None
    designs: int = 2
    samples: int = 128
    method: str = "sobol"
    seed: int = 0
    allocate: int = 2
    target_yield: float = 0.9
    bias_points: int | None = None
    search_seed: int | None = None
    workers: int | None = None
    storage: str | None = None
    jobs: int = 1


def _fail(message: str, key: str, source: str | None = None) -> InputError:
    return InputError(message, source=source, key=key)


def _int_in(value: Any, key: str, lo: int, hi: int, source: str | None) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not lo <= value <= hi:
        raise _fail(f"must be a whole number in [{lo}, {hi}], got {value!r}", key, source)
    return value


def check_settings(s: RunSettings, *, source: str | None = None) -> RunSettings:
    """Validate every setting; raises :class:`InputError` naming the key."""
    if s.trials is not None:
        _int_in(s.trials, "trials", 0, MAX_TRIALS, source)
    _int_in(s.designs, "designs", 1, 20, source)
    _int_in(s.samples, "samples", 8, 1_000_000, source)
    if s.method not in METHODS:
        raise _fail(f"must be one of {', '.join(METHODS)}, got {s.method!r}", "method", source)
    _int_in(s.seed, "seed", 0, 2**32 - 1, source)
    _int_in(s.allocate, "allocate", 0, 50, source)
    if (
        isinstance(s.target_yield, bool)
        or not isinstance(s.target_yield, int | float)
        or not 0.0 < s.target_yield < 1.0
    ):
        raise _fail(f"must be a number in (0, 1), got {s.target_yield!r}", "target_yield", source)
    if s.bias_points is not None:
        _int_in(s.bias_points, "bias_points", 5, 2001, source)
    if s.search_seed is not None:
        _int_in(s.search_seed, "seed", 0, 2**32 - 1, source)
    return s


def run_settings(study: Study, overrides: dict[str, Any] | None = None) -> RunSettings:
    """Defaults, then the study file's ``[report]`` table (and ``[tolerance] designs``),
    then ``overrides`` (command-line values that are not None)."""
    table = study.reserved.get("report", {})
    for key in table:
        if key not in REPORT_KEYS:
            raise InputError(
                f"unknown key; allowed: {', '.join(REPORT_KEYS)}",
                source=study.source,
                key=f"report.{key}",
            )
    values: dict[str, Any] = {}
    tol = study.reserved.get("tolerance", {})
    if "designs" in tol:
        values["designs"] = tol["designs"]
    values.update(table)
    s = RunSettings(**values)
    try:
        check_settings(s, source=study.source)
    except InputError as exc:  # name the key as the file has it
        raise InputError(
            exc.message, source=study.source, key=f"report.{exc.key}" if exc.key else "report"
        ) from None
    if overrides:
        s = replace(s, **{k: v for k, v in overrides.items() if v is not None})
        try:
            check_settings(s)
        except InputError as exc:  # name the option as the command line has it
            option = f"--{exc.key.replace('_', '-')}" if exc.key else None
            raise InputError(exc.message, key=option) from None
    return s


# --------------------------------------------------------------------------- run folder


def _save(run_dir: Path, record: dict[str, Any]) -> None:
    write_json(run_dir / PIPELINE_FILE, record)


# --------------------------------------------------------------------------- stages


def _stage_search(study: Study, s: RunSettings, run_dir: Path, progress: bool) -> dict[str, Any]:
    from wellwright.optimize.search.engine import run_search

    out = run_dir / "search"
    result = run_search(
        study,
        trials=s.trials,
        workers=s.workers,
        storage=s.storage,
        out_dir=out,
        seed=s.search_seed,
        progress=progress,
    )
    return {
        "storage": result.storage,
        "study_name": result.study_name,
        "complete": result.n_complete,
        "feasible": result.n_feasible,
        "designs_file": str((out / "designs.json").relative_to(run_dir)),
        "seed": study.search.seed if s.search_seed is None else s.search_seed,
        "notes": list(result.notes),
    }


def _design_bias(study: Study, s: RunSettings) -> np.ndarray:
    sw = study.sweep
    if s.bias_points is None:
        return sw.bias_v
    return np.linspace(sw.bias_min_v, sw.bias_max_v, s.bias_points)


def tolerance_of_design(
    study: Study, design: dict[str, Any], s: RunSettings, out_dir: Path, *, progress: bool
) -> dict[str, Any]:
    """The tolerance analysis of one design record of ``designs.json``."""
    from wellwright.optimize.study.growth import growth_model, parse_growth
    from wellwright.optimize.tolerance.analysis import Runner, Spec, run_tolerance

    stack = study.stack(design["params"])
    settings, per_layer = parse_growth(
        study.reserved.get("growth"),
        study.layer_growth,
        layer_names=[layer.name for layer in stack.layers],
        source=study.source,
    )
    model = growth_model(stack, settings, per_layer)
    runner = Runner(
        _design_bias(study, s),
        model=stack.model,
        series_resistance_ohm_um2=stack.device.series_resistance_ohm_um2,
        n_jobs=s.jobs,
        progress=progress,
    )
    return run_tolerance(
        model,
        Spec.from_study(study),
        runner,
        method=s.method,
        samples=s.samples,
        seed=s.seed,
        allocate=s.allocate,
        target_yield=s.target_yield,
        out_dir=out_dir,
        design={"rank": design["rank"], "trial": design["trial"], "params": design["params"]},
    )


def _stage_fingerprints(study_bytes: bytes, s: RunSettings, designs: list[dict] | None) -> dict:
    search = fingerprint(study_bytes, s.trials, s.search_seed, s.storage)
    fp = {"search": search}
    tol_settings = [s.samples, s.method, s.seed, s.allocate, s.target_yield, s.bias_points]
    for d in designs or []:
        fp[f"tolerance:{d['rank']}"] = fingerprint(study_bytes, d["params"], tol_settings)
    return fp


def _log(progress: bool, text: str) -> None:
    if progress:
        print(text, flush=True)


class SpecNotMet(RuntimeError):
    """No searched design meets the spec; the message is one line naming the closest design
    and what it misses. The command line exits with :data:`EXIT_SPEC_NOT_MET`."""


#: Exit status of ``wellwright run`` when no design meets the spec (documented in the README).
EXIT_SPEC_NOT_MET = 3


def closest_miss(study: Study, design: dict[str, Any]) -> str:
    """One line: the closest design and each window of the spec it misses, by how much."""
    misses = []
    for w in study.targets:
        value = design["metrics"].get(w.metric)
        if value is None:
            misses.append(f"{names.words(w.metric)}: none (no NDR in the sweep)")
            continue
        if w.low <= value <= w.high:
            continue
        bound = w.low if value < w.low else w.high
        side = "below the minimum" if value < w.low else "above the maximum"
        misses.append(
            f"{names.words(w.metric)} {names.format_value(w.metric, value, with_unit=True)}, "
            f"{side} {names.format_value(w.metric, bound, with_unit=True)} "
            f"by {names.format_value(w.metric, abs(value - bound), with_unit=True)}"
        )
    if not misses:
        misses = [
            f"a constraint ({', '.join(k for k, v in design['constraints'].items() if v > 0)})"
        ]
    params = ", ".join(f"{k} = {v:g}" for k, v in design["params"].items())
    return (
        f"no design meets the spec; the closest (trial {design['trial']}: {params}) misses "
        + "; ".join(misses)
        + " (widen the ranges or relax the spec; --continue-infeasible analyses it anyway)"
    )


def run_pipeline(
    study_path: str | Path,
    *,
    out_dir: str | Path,
    settings: dict[str, Any] | None = None,
    progress: bool = True,
    label: str | None = None,
    report: Callable[..., Any] | None = None,
    continue_infeasible: bool = False,
) -> dict[str, Any]:
    """Run, or resume, the whole pipeline of a study file into ``out_dir``.

    Parameters
    ----------
    study_path
        Study file (TOML).
    out_dir
        Run folder (created).
    settings
        Overrides of :class:`RunSettings` fields (None values ignored).
    progress
        Progress bars and one line per stage.
    label
        A label shown in the report header (e.g. "invented demo scenario").
    report
        Report builder ``report(run_dir) -> Path`` (default
        :func:`wellwright.optimize.report.build.build_report`).
    continue_infeasible
        Go on to the tolerance stage and the report when no design meets the
        spec (default: stop with :class:`SpecNotMet` after the search).

    Returns
    -------
    dict
        The ``pipeline.json`` record.

    Raises
    ------
    InputError
        For a bad study file or setting, before anything is written.
    SpecNotMet
        When no searched design meets the spec (unless ``continue_infeasible``).
    """
    path = Path(study_path)
    try:
        study_bytes = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", source=str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read file ({exc.strerror})", source=str(path)) from None
    study = study_from_text(
        study_bytes.decode("utf-8", errors="replace"),
        source=str(path),
        name=path.stem,
        base_dir=path.parent,
    )
    s = run_settings(study, settings)
    if not study.targets:
        raise InputError(
            "the tolerance stage needs at least one window (e.g. pvcr = {min = 3})",
            source=study.source,
            key="targets",
        )
    run_dir = Path(out_dir)
    if run_dir.exists() and not run_dir.is_dir():
        raise InputError("exists and is not a folder", key="--out", source=str(run_dir))
    if run_dir.is_dir() and any(run_dir.iterdir()) and not (run_dir / PIPELINE_FILE).is_file():
        raise InputError(
            "folder exists, is not empty and is not a run folder; give a new --out",
            key="--out",
            source=str(run_dir),
        )
    old: dict[str, Any] = {}
    if (run_dir / PIPELINE_FILE).is_file():
        old = load_run(run_dir)

    run_dir.mkdir(parents=True, exist_ok=True)
    record: dict[str, Any] = {
        "format": FORMAT_VERSION,
        "study": {
            "path": str(path.resolve()),
            "name": path.stem,
            "fingerprint": fingerprint(study_bytes),
            "changed_since_last_run": bool(old)
            and old.get("study", {}).get("fingerprint") != fingerprint(study_bytes),
        },
        "label": label if label is not None else old.get("label"),
        "settings": asdict(s),
        "stages": dict(old.get("stages", {})),
    }
    stages = record["stages"]
    fp = _stage_fingerprints(study_bytes, s, None)

    # search
    prev = stages.get("search", {})
    done = (
        prev.get("status") == "done"
        and prev.get("fingerprint") == fp["search"]
        and (run_dir / "search" / "designs.json").is_file()
    )
    if done:
        _log(progress, "search: done earlier, skipped")
    else:
        _log(progress, "search: running (resumes from its storage)")
        stages["search"] = {"status": "running", "fingerprint": fp["search"]}
        stages.pop("report", None)
        _save(run_dir, record)
        stages["search"] = {
            "status": "done",
            "fingerprint": fp["search"],
            **_stage_search(study, s, run_dir, progress),
        }
        _save(run_dir, record)
    # the copy the report reads; written once the search accepted this file
    atomic_write_text(run_dir / STUDY_COPY, study_bytes.decode("utf-8", errors="replace"))
    designs = json.loads((run_dir / "search" / "designs.json").read_text(encoding="utf-8"))
    chosen = designs[: s.designs]
    if not chosen:
        raise InputError(
            "the search produced no design to analyse; run more trials (--trials)",
            source=study.source,
        )
    if not chosen[0].get("feasible") and not continue_infeasible:
        raise SpecNotMet(closest_miss(study, chosen[0]))
    fp = _stage_fingerprints(study_bytes, s, chosen)

    # tolerance, one design at a time
    tol = dict(stages.get("tolerance", {}))
    wanted = {f"rank{d['rank']:02d}" for d in chosen}
    for key in list(tol):
        if key not in wanted:
            del tol[key]
    for d in chosen:
        key = f"rank{d['rank']:02d}"
        out = run_dir / "tolerance" / key
        prev = tol.get(key, {})
        f = fp[f"tolerance:{d['rank']}"]
        if (
            prev.get("status") == "done"
            and prev.get("fingerprint") == f
            and (out / "tolerance.json").is_file()
        ):
            _log(progress, f"tolerance {key}: done earlier, skipped")
            continue
        _log(progress, f"tolerance {key} (trial {d['trial']}): {s.method}, {s.samples} samples")
        tol[key] = {"status": "running", "fingerprint": f}
        stages["tolerance"] = tol
        stages.pop("report", None)
        _save(run_dir, record)
        rec = tolerance_of_design(study, d, s, out, progress=progress)
        tol[key] = {
            "status": "done",
            "fingerprint": f,
            "rank": d["rank"],
            "trial": d["trial"],
            "dir": str(out.relative_to(run_dir)),
            "yield": rec["yield"]["value"],
        }
        stages["tolerance"] = tol
        _save(run_dir, record)
    stages["tolerance"] = tol

    # report
    report_fp = fingerprint(fp)
    prev = stages.get("report", {})
    if (
        prev.get("status") == "done"
        and prev.get("fingerprint") == report_fp
        and (run_dir / "report.html").is_file()
    ):
        _log(progress, "report: done earlier, skipped")
        return record
    _log(progress, "report: building")
    if report is None:
        from wellwright.optimize.report.build import build_report

        report = build_report
    stages["report"] = {"status": "running"}
    _save(run_dir, record)
    html = report(run_dir)
    stages["report"] = {
        "status": "done",
        "fingerprint": report_fp,
        "file": str(Path(html).relative_to(run_dir)),
    }
    _save(run_dir, record)
    return record
