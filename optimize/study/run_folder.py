"""The record of a run folder: ``pipeline.json``, the study copy, stage fingerprints, which
study the folder holds and the command that reproduces its run.

Written by :mod:`wellwright.optimize.cli.pipeline`, read by the report; kept
here, below both, so that the report never imports the pipeline.
"""

from __future__ import annotations

import hashlib
import json
import re
import shlex
from pathlib import Path
from typing import Any

from wellwright.optimize.study.study import Study, parse_study
from wellwright.physics.errors import InputError
from wellwright.physics.stack import parse_toml

PIPELINE_FILE = "pipeline.json"
STUDY_COPY = "study.toml"
#: The calibration a study links to (``[calibration] from``), copied as the run used it.
CALIBRATION_COPY = "calibration.json"
FORMAT_VERSION = 1
#: Inside ``tolerance/rankNN/``: the nominal design's curves and figures, written by the
#: stage that computes them and copied into the report (which runs no physics).
DESIGN_DIR = "design"
#: Inside :data:`DESIGN_DIR`: rank, trial, parameters, model, figures of merit, the
#: figures written (``{"iv", "band_diagram", "transmission"}: file name``) and the error
#: of a design the model could not evaluate (JSON); the I-V (CSV); the figures (PNG).
DESIGN_RECORD = "design.json"
DESIGN_IV = "iv.csv"


def package_version() -> str:
    """The installed wellwright version (``unknown`` when run from an uninstalled tree)."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("wellwright")
    except PackageNotFoundError:
        return "unknown"


def stage_fingerprint(*parts: Any) -> str:
    """A stage's fingerprint: its inputs and the package version, so that a rerun after an
    upgrade redoes the stage instead of mixing old and new results."""
    return fingerprint(package_version(), *parts)


def fingerprint(*parts: Any) -> str:
    h = hashlib.sha256()
    for p in parts:
        h.update(p if isinstance(p, bytes) else json.dumps(p, sort_keys=True, default=str).encode())
        h.update(b"\0")
    return h.hexdigest()[:16]


def study_from_text(text: str | bytes, *, source: str, name: str, base_dir: str | Path) -> Study:
    """The study in ``text`` (bytes must be UTF-8).

    Parameters
    ----------
    text
        The study file's contents.
    source
        File name for messages.
    name
        Default study name.
    base_dir
        Folder that relative paths in the study are relative to.
    """
    return parse_study(parse_toml(text, source=source), source=source, name=name, base_dir=base_dir)


def load_run(run_dir: str | Path) -> dict[str, Any]:
    """The ``pipeline.json`` record of a run folder.

    Raises
    ------
    InputError
        When ``run_dir`` is not a folder made by ``wellwright run``.
    """
    d = Path(run_dir)
    path = d / PIPELINE_FILE
    if not d.is_dir():
        raise InputError("not a folder; give the output folder of 'wellwright run'", source=str(d))
    if not path.is_file() or not (d / STUDY_COPY).is_file():
        raise InputError(
            f"not a run folder (no {PIPELINE_FILE} and {STUDY_COPY}); "
            "make one with 'wellwright run STUDY.toml --out DIR'",
            source=str(d),
        )
    try:
        rec = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise InputError(f"unreadable ({exc})", source=str(path)) from None
    if not isinstance(rec, dict) or rec.get("format") != FORMAT_VERSION:
        raise InputError("not a pipeline record of this wellwright version", source=str(path))
    return rec


def linked_calibration(study: Study) -> Path | None:
    """The calibration file a study links to (``[calibration] from``), else None."""
    table = study.reserved.get("calibration") or {}
    link = table.get("from")
    return None if link is None else Path(study.source).parent / link


def study_from_run(run_dir: str | Path, record: dict[str, Any]) -> Study:
    """The study of a run, from the copies the run keeps (the originals may have moved or
    changed): the study file, and the calibration it links to.

    Parameters
    ----------
    run_dir
        The run folder.
    record
        The run's record (its ``study`` entry gives the original path and the name).
    """
    d = Path(run_dir)
    text = (d / STUDY_COPY).read_text(encoding="utf-8")
    origin = record["study"]
    source = origin["path"]
    data = parse_toml(text, source=source)
    table = data.get("calibration")
    if isinstance(table, dict) and "from" in table and (d / CALIBRATION_COPY).is_file():
        data = {**data, "calibration": {**table, "from": str((d / CALIBRATION_COPY).resolve())}}
    return parse_study(data, source=source, name=origin["name"], base_dir=Path(source).parent)


def study_identity(study: Study) -> dict[str, str]:
    """What makes two study files one study of a run folder: the name its search is stored
    under and the fingerprint of what defines the search (space, spec, sweep, model).

    Files that agree on both share the search's trials; what else they differ in (growth,
    ``[report]``) reruns only the stages after the search.
    """
    return {"search_name": study.optuna_name, "search_fingerprint": study.fingerprint()}


def folder_identity(run_dir: str | Path, record: dict[str, Any]) -> dict[str, str] | None:
    """The :func:`study_identity` of the study a run folder holds: as its record has it, else
    (a folder of an earlier version) from its study copy; None when neither tells.

    Parameters
    ----------
    run_dir
        The run folder.
    record
        Its ``pipeline.json`` record.
    """
    origin = record.get("study") or {}
    if "search_name" in origin and "search_fingerprint" in origin:
        return {k: origin[k] for k in ("search_name", "search_fingerprint")}
    try:
        return study_identity(study_from_run(run_dir, record))
    except (InputError, KeyError, TypeError, OSError):
        return None


def hide_password(url: str) -> str:
    """A database URL with its password replaced by ``***`` (for a report that is passed on)."""
    return re.sub(r"(://[^:/@]+:)[^@/]*@", r"\1***@", url)


def rerun_command(run_dir: str | Path, record: dict[str, Any]) -> str:
    """The shell command that reproduces a run: ``wellwright run`` on the study file it ran,
    with this folder as ``--out`` and the options the run was given (``options`` of its
    record; a storage URL's password hidden).

    Parameters
    ----------
    run_dir
        The run folder (absolute in the command).
    record
        Its ``pipeline.json`` record.
    """
    argv = [
        "wellwright",
        "run",
        str(record["study"]["path"]),
        "--out",
        str(Path(run_dir).resolve()),
    ]
    for key, value in (record.get("options") or {}).items():
        flag = "--" + key.replace("_", "-")
        if value is True:
            argv.append(flag)
        elif value is not None and value is not False:
            argv += [flag, hide_password(str(value)) if key == "storage" else str(value)]
    return shlex.join(argv)
