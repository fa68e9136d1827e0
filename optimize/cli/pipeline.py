"""The whole job in stages: design search, growth tolerance of the top designs, report.

A run folder ``DIR`` holds::

    DIR/pipeline.json        stage status, settings and fingerprints (this module)
    DIR/study.toml           the study file as it was when the run started
    DIR/calibration.json     the calibration the study links to, as the run used it
    DIR/search/              the design search (designs.json, trials.csv, study.db, figures)
    DIR/tolerance/rankNN/    the tolerance analysis of each reported design; its design/
                             folder holds the nominal I-V, band diagram and T(E)
    DIR/report.html          the report, with DIR/report_files/ beside it

Stages meet only through their files (plain records: ``designs.json``,
``trials.csv``, ``tolerance.json``, ``design/design.json``); the report reads
these and runs no physics and opens no Optuna storage. Each stage records a fingerprint of what it depends on
(the study file's bytes and the stage's own settings); rerunning skips a
stage whose fingerprint is unchanged and whose outputs exist, and reruns it
and everything after it otherwise. The search resumes from its Optuna storage
(kept between runs), so a run interrupted anywhere continues where it stopped;
a tolerance analysis interrupted half way is redone for that design only.

A folder holds the run of one study: the name its search is stored under and what
defines that search (``pipeline.json`` records both). A study file that differs in
either is another study, refused there unless ``fresh`` deletes the earlier run.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable
from dataclasses import asdict
from pathlib import Path
from typing import Any

import numpy as np
from wellwright.optimize.search.history import TRIALS_FILE
from wellwright.optimize.shared.outputs import (
    atomic_write,
    check_output_folder,
    remove_temporaries,
    write_json,
)
from wellwright.optimize.study import run_folder
from wellwright.optimize.study.run_folder import (
    CALIBRATION_COPY,
    DESIGN_DIR,
    DESIGN_IV,
    DESIGN_RECORD,
    FORMAT_VERSION,
    PIPELINE_FILE,
    STUDY_COPY,
    fingerprint,
    folder_identity,
    linked_calibration,
    load_run,
    stage_fingerprint,
    study_from_run,
    study_from_text,
    study_identity,
)
from wellwright.optimize.study.run_settings import (
    METHODS,
    RunSettings,
    check_settings,
    settings_from_tables,
    with_overrides,
)
from wellwright.optimize.study.study import Study
from wellwright.optimize.study.targets import window_report
from wellwright.physics.errors import InputError

__all__ = [
    "RunSettings",
    "run_pipeline",
    "load_run",
    "run_settings",
    "study_from_run",
    "PIPELINE_FILE",
    "STAGES",
    "METHODS",
    "RUN_OPTIONS",
    "check_settings",
]

STAGES = ("search", "tolerance", "report")
#: The settings ``wellwright run`` takes as options of the same name (``--trials`` ...): what
#: the command line passes as ``settings``, and what the record's rerun command repeats.
RUN_OPTIONS = ("trials", "designs", "samples", "method", "seed", "workers", "storage", "jobs")
#: What a run writes in its folder, removed by ``fresh`` (the record last, so that a folder
#: left half cleared still names its study); the report's files are added from its module.
RUN_ENTRIES = ("search", "tolerance", "report.html", CALIBRATION_COPY, PIPELINE_FILE, STUDY_COPY)


def run_settings(study: Study, overrides: dict[str, Any] | None = None) -> RunSettings:
    """Defaults, then the study file's ``[tolerance] designs`` and ``[report]`` table,
    then the command-line values.

    Parameters
    ----------
    study
        The study.
    overrides
        Command-line values; None values are ignored.
    """
    tables = settings_from_tables(
        study.reserved.get("report"), study.reserved.get("tolerance"), source=study.source
    )
    return with_overrides(tables, overrides)


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
        "designs": result.n_designs,
        "designs_feasible": result.n_designs_feasible,
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
    """The tolerance analysis of one design record of ``designs.json``.

    Parameters
    ----------
    study
        The study.
    design
        One record of ``designs.json`` (``rank``, ``trial``, ``params``).
    s
        The run's settings (method, samples, seed, allocation, target yield, jobs).
    out_dir
        Folder of the tolerance outputs.
    progress
        Show progress bars.
    """
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
    runner = Runner.for_stack(
        stack,
        _design_bias(study, s),
        n_jobs=s.jobs,
        progress=progress,
        at_bias_v=study.at_bias_v,
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
        variables=study.variables,
    )


def write_design_files(study: Study, design: dict[str, Any], out_dir: Path) -> dict[str, Any]:
    """The nominal I-V, band diagram and T(E) of one design record, for the report.

    Writes ``out_dir/iv.csv``, ``iv.png``, ``band_diagram.png``,
    ``transmission.png`` and ``design.json`` (last, so that its presence means
    the folder is complete); returns the ``design.json`` record. The sweep is
    the study's, as in the search. A design the model cannot evaluate (the
    search's evaluation errors) gets a record with its ``error`` and no
    figures: one design never stops the run.

    Parameters
    ----------
    study
        The study.
    design
        One record of ``designs.json`` (``rank``, ``trial``, ``params``).
    out_dir
        Folder the files go to.
    """
    from wellwright.optimize.shared.figures import iv_figures
    from wellwright.optimize.shared.model_text import model_label
    from wellwright.optimize.shared.outputs import write_csv
    from wellwright.physics.electrostatics import ElectrostaticsConvergenceError
    from wellwright.physics.iv import stack_iv

    stack = study.stack(design["params"])
    record: dict[str, Any] = {
        "rank": design["rank"],
        "trial": design["trial"],
        "params": design["params"],
        "model": model_label(stack),
        "metrics": None,
        "figures": {},
        "error": None,
    }
    try:
        curves = stack_iv(stack, study.sweep.bias_v, island_layers=study.island_layers)
        write_csv(
            out_dir / DESIGN_IV,
            ["bias_v", "current_density_a_cm2"],
            zip(curves.bias_v.tolist(), curves.current_density_a_cm2[0].tolist(), strict=True),
        )
        figures = iv_figures(stack, curves, out_dir, label=f"rank {design['rank']}")
    except ElectrostaticsConvergenceError as exc:
        record["error"] = str(exc)
    else:
        record["metrics"] = curves.metrics_of(0)
        record["figures"] = {k: Path(v).name for k, v in figures.items()}
    write_json(out_dir / DESIGN_RECORD, record)
    return record


def _stage_fingerprints(study_bytes: bytes, s: RunSettings, designs: list[dict] | None) -> dict:
    search = stage_fingerprint(study_bytes, s.trials, s.search_seed, s.storage)
    fp = {"search": search}
    tol_settings = [s.samples, s.method, s.seed, s.allocate, s.target_yield, s.bias_points]
    for d in designs or []:
        fp[f"tolerance:{d['rank']}"] = stage_fingerprint(study_bytes, d["params"], tol_settings)
    return fp


def _given_options(settings: dict[str, Any] | None, continue_infeasible: bool) -> dict[str, Any]:
    """The options of ``wellwright run`` this run was given (:data:`RUN_OPTIONS` that are
    set, and ``continue_infeasible``), for the record's rerun command."""
    settings = settings or {}
    given = {k: settings[k] for k in RUN_OPTIONS if settings.get(k) is not None}
    return {**given, "continue_infeasible": True} if continue_infeasible else given


def _check_same_study(run_dir: Path, old: dict[str, Any], study: Study, path: Path) -> None:
    """:class:`InputError` when the folder holds the run of another study (another search
    name, or the same name made from another search space, spec, sweep or model)."""
    held = folder_identity(run_dir, old) if old else None
    if held is None or held == study_identity(study):
        return
    was = f"run folder {run_dir} holds the run of study '{held['search_name']}'"
    was += f" ({old['study']['path']})"
    if held["search_name"] == study.optuna_name:
        why = f"made from another search space, spec, sweep or model than {path.resolve()}"
        where, key = "another --out or [search] study_name", "search.study_name"
    else:
        why = f"not of '{study.optuna_name}' ({path.resolve()})"
        where, key = "another --out", "--out"
    raise InputError(
        f"{was}, {why}; give {where}, or add --fresh to delete that run and start this one there",
        source=str(path),
        key=key,
    )


def _clear(run_dir: Path) -> None:
    """Delete what earlier runs wrote in the folder (:data:`RUN_ENTRIES`, the report's files)."""
    from wellwright.optimize.report.build import FILES_DIR

    for name in (FILES_DIR, *RUN_ENTRIES):
        entry = run_dir / name
        if entry.is_dir():
            shutil.rmtree(entry)
        else:
            entry.unlink(missing_ok=True)


def _is_run_folder(run_dir: Path) -> bool:
    """Empty, or holding a study copy or a pipeline record (a run stopped at any moment)."""
    return (
        not any(run_dir.iterdir())
        or (run_dir / STUDY_COPY).is_file()
        or (run_dir / PIPELINE_FILE).is_file()
    )


def _log(progress: bool, text: str) -> None:
    if progress:
        print(text, flush=True)


class SpecNotMet(RuntimeError):
    """No searched design meets the spec; the message is one line naming the closest design
    and what it misses. The command line exits with :data:`EXIT_SPEC_NOT_MET`."""


#: Exit status of ``wellwright run`` when no design meets the spec (documented in the README).
EXIT_SPEC_NOT_MET = 3


def closest_miss(study: Study, design: dict[str, Any], *, tied: int = 1) -> str:
    """One line: the closest design and each window of the spec it misses, by how much.

    Parameters
    ----------
    study
        The study (its targets).
    design
        The closest design's record (``trial``, ``params``, ``metrics``, ``constraints``).
    tied
        How many designs miss the spec by exactly as much (itself included): more than one,
        and none is closer than another, which the line says.
    """
    misses = [r["text"] for r in window_report(study.targets, design["metrics"]) if not r["inside"]]
    if not misses:
        misses = [
            f"a constraint ({', '.join(k for k, v in design['constraints'].items() if v > 0)})"
        ]
    params = ", ".join(f"{k} = {v:g}" for k, v in design["params"].items())
    which = (
        f"the closest (trial {design['trial']}: {params})"
        if tied <= 1
        else f"{tied} designs miss it by as much and none comes closer; the first of them "
        f"(trial {design['trial']}: {params})"
    )
    return (
        f"no design meets the spec; {which} misses "
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
    fresh: bool = False,
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
    fresh
        Delete what an earlier run wrote in ``out_dir`` and start there from scratch
        (default: resume it, and refuse a folder holding the run of another study).

    Returns
    -------
    dict
        The ``pipeline.json`` record.

    Raises
    ------
    InputError
        For a bad study file or setting, or a folder holding another study's run (unless
        ``fresh``), before anything is written.
    SpecNotMet
        When no searched design meets the spec (unless ``continue_infeasible``).
    """
    path = Path(study_path)
    study_bytes, study, s = _checked_study(path, settings)
    run_dir = check_output_folder(out_dir, key="--out")
    if run_dir.is_dir() and not _is_run_folder(run_dir):
        raise InputError(
            "folder exists, is not empty and is not a run folder; give a new --out",
            key="--out",
            source=str(run_dir),
        )
    old: dict[str, Any] = {}
    if (run_dir / PIPELINE_FILE).is_file() and not fresh:
        old = load_run(run_dir)
    _check_same_study(run_dir, old, study, path)
    if fresh and run_dir.is_dir():
        _clear(run_dir)
    inputs = _write_inputs(run_dir, study, study_bytes)
    record: dict[str, Any] = {
        "format": FORMAT_VERSION,
        "study": {
            "path": str(path.resolve()),
            "name": path.stem,
            "fingerprint": fingerprint(study_bytes),
            "changed_since_last_run": bool(old)
            and old.get("study", {}).get("fingerprint") != fingerprint(study_bytes),
            **study_identity(study),
        },
        "label": label if label is not None else old.get("label"),
        "version": run_folder.package_version(),
        "settings": asdict(s),
        "options": _given_options(settings, continue_infeasible),
        "stages": dict(old.get("stages", {})),
    }
    _search_stage(study, s, run_dir, record, _stage_fingerprints(inputs, s, None), progress)
    # the copy the report reads; written once the search accepted this file
    designs = json.loads((run_dir / "search" / "designs.json").read_text(encoding="utf-8"))
    chosen = designs[: s.designs]
    if not chosen:
        raise InputError(
            "the search produced no design to analyse; run more trials (--trials)",
            source=study.source,
        )
    if not chosen[0].get("feasible") and not continue_infeasible:
        miss = chosen[0].get("spec_violation")
        tied = sum(d.get("spec_violation") == miss for d in designs) if miss is not None else 1
        raise SpecNotMet(closest_miss(study, chosen[0], tied=tied))
    fp = _stage_fingerprints(inputs, s, chosen)
    _tolerance_stage(study, s, run_dir, record, fp, chosen, progress)
    # the report shows the command of the run: a new study path or new options rebuild it
    report_fp = fingerprint(fp, record["study"]["path"], record["options"])
    _report_stage(run_dir, record, report_fp, report, progress)
    return record


def _checked_study(path: Path, settings: dict[str, Any] | None) -> tuple[bytes, Study, RunSettings]:
    """The study file's bytes, the study and the run's settings, checked before anything is
    written (:class:`InputError` otherwise)."""
    try:
        study_bytes = path.read_bytes()
    except FileNotFoundError:
        raise InputError("file not found", source=str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read file ({exc.strerror})", source=str(path)) from None
    study = study_from_text(study_bytes, source=str(path), name=path.stem, base_dir=path.parent)
    s = run_settings(study, settings)
    if (study.search.trials if s.trials is None else s.trials) < 1:
        raise InputError("a run needs at least one trial", source=study.source, key="search.trials")
    if not study.targets:
        raise InputError(
            "the tolerance stage needs at least one window (e.g. pvcr = {min = 3})",
            source=study.source,
            key="targets",
        )
    return study_bytes, study, s


def _write_inputs(run_dir: Path, study: Study, study_bytes: bytes) -> bytes:
    """Copy the study (and the calibration it links to) into the run folder; returns the bytes
    every stage's fingerprint is made of.

    The linked calibration shapes every result: kept beside the study copy (the report reads
    it from there) and part of every fingerprint (a new calibration reruns). The first bytes
    written are the study copy, so a run stopped at any later moment (even before
    ``pipeline.json`` exists) is a run folder that the same command resumes.
    """
    cal = linked_calibration(study)
    cal_bytes = None if cal is None else cal.read_bytes()  # parse_study read it a moment ago
    remove_temporaries(run_dir)
    atomic_write(run_dir / STUDY_COPY, study_bytes)
    if cal_bytes is None:
        (run_dir / CALIBRATION_COPY).unlink(missing_ok=True)
        return study_bytes
    atomic_write(run_dir / CALIBRATION_COPY, cal_bytes)
    return study_bytes + b"\0calibration\0" + cal_bytes


def _search_stage(
    study: Study,
    s: RunSettings,
    run_dir: Path,
    record: dict[str, Any],
    fp: dict[str, str],
    progress: bool,
) -> None:
    """The search stage: skipped when done with the same fingerprint, else run (resuming
    from its storage), recorded in ``record['stages']`` and saved before and after."""
    stages = record["stages"]
    prev = stages.get("search", {})
    if (
        prev.get("status") == "done"
        and prev.get("fingerprint") == fp["search"]
        and (run_dir / "search" / "designs.json").is_file()
        and (run_dir / "search" / TRIALS_FILE).is_file()  # absent in folders before it existed
    ):
        _log(progress, "search: done earlier, skipped")
        return
    if progress:
        from wellwright.optimize.search.storage import storage_url, stored_trials

        held = stored_trials(study, storage_url(s.storage, run_dir / "search"))
        _log(
            progress,
            f"search: resuming {held} complete trials from its storage"
            if held
            else "search: running",
        )
    stages["search"] = {"status": "running", "fingerprint": fp["search"]}
    stages.pop("report", None)
    _save(run_dir, record)
    stages["search"] = {
        "status": "done",
        "fingerprint": fp["search"],
        **_stage_search(study, s, run_dir, progress),
    }
    _save(run_dir, record)


def _tolerance_stage(
    study: Study,
    s: RunSettings,
    run_dir: Path,
    record: dict[str, Any],
    fp: dict[str, str],
    chosen: list[dict[str, Any]],
    progress: bool,
) -> None:
    """The tolerance stage, one chosen design at a time, each skipped when done with the same
    fingerprint; designs no longer chosen leave the record."""
    stages = record["stages"]
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
            if (out / DESIGN_DIR / DESIGN_RECORD).is_file():
                _log(progress, f"tolerance {key}: done earlier, skipped")
            else:  # a folder from before the design files existed: add them only
                _log(progress, f"tolerance {key}: done earlier; writing the design's curves")
                write_design_files(study, d, out / DESIGN_DIR)
                stages.pop("report", None)
            continue
        _log(progress, f"tolerance {key} (trial {d['trial']}): {s.method}, {s.samples} samples")
        tol[key] = {"status": "running", "fingerprint": f}
        stages["tolerance"] = tol
        stages.pop("report", None)
        _save(run_dir, record)
        rec = tolerance_of_design(study, d, s, out, progress=progress)
        if rec.get("ranking"):  # a raised budget or a ranking with nothing to rank, said now
            from wellwright.optimize.tolerance.analysis import (
                evaluations_text,
                ranking_without_variance,
            )

            said = ranking_without_variance(rec["ranking"])
            _log(progress, f"tolerance {key}: {evaluations_text(rec['ranking'])}")
            if said:
                _log(progress, f"tolerance {key}: {said}")
        write_design_files(study, d, out / DESIGN_DIR)
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


def _report_stage(
    run_dir: Path,
    record: dict[str, Any],
    report_fp: str,
    report: Callable[..., Any] | None,
    progress: bool,
) -> None:
    """The report stage: skipped when done with the same fingerprint, else built."""
    stages = record["stages"]
    prev = stages.get("report", {})
    if (
        prev.get("status") == "done"
        and prev.get("fingerprint") == report_fp
        and (run_dir / "report.html").is_file()
    ):
        _log(progress, "report: done earlier, skipped")
        return
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
