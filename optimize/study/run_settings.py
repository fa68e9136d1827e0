"""Settings of ``wellwright run``: the study file's ``[report]`` and ``[tolerance]`` tables.

Validated by :func:`wellwright.optimize.study.study.parse_study`, so every command that
reads a study file checks these tables (unknown keys, types, ranges), not only ``run``.
The command line overrides them (:func:`with_overrides`).
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace
from typing import Any

from wellwright.physics import checks
from wellwright.physics.errors import InputError

__all__ = [
    "MAX_TRIALS",
    "METHODS",
    "REPORT_KEYS",
    "TOLERANCE_KEYS",
    "RunSettings",
    "check_settings",
    "settings_from_tables",
    "with_overrides",
]

MAX_TRIALS = 1_000_000
METHODS = ("mc", "sobol", "morris")
#: Keys of the study file's ``[report]`` table.
REPORT_KEYS = ("designs", "samples", "method", "seed", "allocate", "target_yield", "bias_points")
#: Keys of ``[tolerance]`` (its other settings are in ``[report]``).
TOLERANCE_KEYS = ("designs",)


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


def check_settings(s: RunSettings, **where: Any) -> RunSettings:
    """Validate every setting; raises :class:`InputError` naming the key (``where``: the
    source and a ``prefix`` for the key, e.g. ``report.`` or ``--``).

    Parameters
    ----------
    s
        The settings.
    **where
        ``source`` and ``prefix`` (put before each key in the message).
    """
    prefix = where.pop("prefix", "")

    def at(key: str) -> dict[str, Any]:
        return {**where, "key": f"{prefix}{key}"}

    if s.trials is not None:
        checks.whole(s.trials, low=1, high=MAX_TRIALS, **at("trials"))
    checks.whole(s.designs, low=1, high=20, **at("designs"))
    checks.whole(s.samples, low=8, high=1_000_000, **at("samples"))
    checks.choice(s.method, METHODS, **at("method"))
    checks.seed(s.seed, **at("seed"))
    checks.whole(s.allocate, low=0, high=50, **at("allocate"))
    checks.number(
        s.target_yield, low=0, high=1, open_low=True, open_high=True, **at("target_yield")
    )
    if s.bias_points is not None:
        checks.whole(s.bias_points, low=5, high=2001, **at("bias_points"))
    if s.search_seed is not None:
        checks.seed(s.search_seed, **at("seed"))
    return s


def settings_from_tables(report: Any, tolerance: Any, *, source: str | None = None) -> RunSettings:
    """Defaults, then ``[tolerance] designs``, then ``[report]``, validated, keys named as
    the file has them.

    Parameters
    ----------
    report, tolerance
        The study's ``[report]`` and ``[tolerance]`` tables (``None`` when absent).
    source
        The study file, for messages.
    """
    report = {} if report is None else report
    tolerance = {} if tolerance is None else tolerance
    checks.table(
        tolerance,
        TOLERANCE_KEYS,
        hint=" (the tolerance stage's other settings are keys of [report])",
        source=source,
        key="tolerance",
    )
    checks.table(report, REPORT_KEYS, source=source, key="report")
    if "designs" in tolerance:
        checks.whole(tolerance["designs"], low=1, high=20, source=source, key="tolerance.designs")
    s = RunSettings(**{**tolerance, **report})
    return check_settings(s, source=source, prefix="report.")


def with_overrides(s: RunSettings, overrides: dict[str, Any] | None) -> RunSettings:
    """``s`` with the command line's values (None: not given), each named as its option.

    Parameters
    ----------
    s
        The study's settings.
    overrides
        Command-line values by setting name (``None``: not given); ``None``: no overrides.
    """
    if not overrides:
        return s
    known = {f.name for f in fields(RunSettings)}
    s = replace(s, **{k: v for k, v in overrides.items() if v is not None and k in known})
    try:
        return check_settings(s, prefix="--")
    except InputError as exc:  # --target_yield -> --target-yield
        raise InputError(exc.message, key=(exc.key or "").replace("_", "-") or None) from None
