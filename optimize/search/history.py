"""The search history as a plain record: ``search/trials.csv``, one row per complete trial.

The search writes it beside ``designs.json``; the history and Pareto figures
(:mod:`wellwright.optimize.search.figures`) and the run report draw from it, so
that neither needs the Optuna storage once the search has finished.

Columns: ``trial`` (Optuna's trial number), ``feasible`` (1 when the design
meets the spec and every constraint, else 0), the trial's objective values
(``score`` for a single objective; one column per pushed figure of merit,
named as in :mod:`wellwright.optimize.shared.names` and in its SI unit, for
several), then the design's parameters. ``inf`` and ``nan`` are written as
such (Python's ``float`` reads them back).
"""

from __future__ import annotations

import csv
import math
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from wellwright.optimize.shared.outputs import write_csv
from wellwright.physics.errors import InputError

if TYPE_CHECKING:
    from wellwright.optimize.study.study import Study

__all__ = ["TRIALS_FILE", "value_names", "trial_points", "write_trials", "read_trials"]

#: File name inside the search's output folder.
TRIALS_FILE = "trials.csv"


def value_names(study: Study) -> list[str]:
    """Names of the objective-value columns: ``score``, or the pushed figures of merit."""
    if study.multi_objective:
        return [o.metric for o in study.objectives]
    return ["score"]


def trial_points(trials: Iterable[Any]) -> list[dict[str, Any]]:
    """Plain records ``{"trial", "feasible", "values", "params"}`` of complete Optuna trials,
    in trial order (anything with ``number``, ``values``, ``params`` and ``user_attrs``)."""
    return [
        {
            "trial": int(t.number),
            "feasible": bool(t.user_attrs.get("feasible")),
            "values": [float(v) for v in t.values],
            "params": dict(t.params),
        }
        for t in sorted(trials, key=lambda t: t.number)
    ]


def write_trials(path: str | Path, study: Study, points: Sequence[dict[str, Any]]) -> Path:
    """Write ``points`` (from :func:`trial_points`) as ``trials.csv``.

    Parameters
    ----------
    path
        CSV file to write.
    study
        The study (names of the objectives and parameters).
    points
        The trial records.
    """
    names = value_names(study)
    params = list(study.parameter_names)
    rows = [
        [p["trial"], int(p["feasible"])]
        + [repr(float(v)) for v in p["values"][: len(names)]]
        + [p["params"].get(k) for k in params]
        for p in points
    ]
    return write_csv(path, ["trial", "feasible", *names, *params], rows)


def read_trials(path: str | Path, study: Study) -> list[dict[str, Any]]:
    """The records :func:`write_trials` wrote, in trial order.

    Parameters
    ----------
    path
        The ``trials.csv`` file.
    study
        The study it was written for.

    Raises
    ------
    InputError
        When the file is missing, or its columns do not match the study's objectives.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(
            "missing: the run folder was made before the search kept its history as a file; "
            "rerun 'wellwright run' on it (finished stages are reused)",
            source=str(path),
        ) from None
    reader = csv.reader(text.splitlines())
    header = next(reader, [])
    names = value_names(study)
    if header[2 : 2 + len(names)] != names:
        raise InputError(
            f"columns {header[2 : 2 + len(names)]} do not match the study's objectives {names}; "
            "rerun 'wellwright run' on the run folder",
            source=str(path),
        )
    params = header[2 + len(names) :]
    out = []
    for row in reader:
        out.append(
            {
                "trial": int(row[0]),
                "feasible": row[1] == "1",
                "values": [float(v) for v in row[2 : 2 + len(names)]],
                "params": {
                    k: (float(v) if v != "" else math.nan)
                    for k, v in zip(params, row[2 + len(names) :], strict=True)
                },
            }
        )
    return sorted(out, key=lambda p: p["trial"])
