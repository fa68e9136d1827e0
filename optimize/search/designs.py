"""Designs as plain records: ranking, ``designs.csv`` / ``designs.json``, growth sheets, importances.

The search, the tolerance analyses and the reports meet through these records
(see :func:`design_record`), not through each other's internals.
"""

from __future__ import annotations

import functools
import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import optuna
from optuna.trial import FrozenTrial, TrialState
from wellwright.optimize.shared.model_text import model_label
from wellwright.optimize.study.space import (  # re-exported
    GROWTH_SHEET_HEADER,
    growth_sheet_rows,
    layer_records,
)
from wellwright.physics.device import device_quantities
from wellwright.physics.iv import BOUNDED_BY_SWEEP, VALLEY_BOUNDED

if TYPE_CHECKING:
    from wellwright.optimize.study.study import Study

__all__ = [
    "layer_records",
    "design_record",
    "rank_trials",
    "growth_sheet_rows",
    "parameter_importances",
    "write_outputs",
    "finite_or_none",
    "GROWTH_SHEET_HEADER",
    "MIN_TRIALS_FOR_IMPORTANCE",
]

MIN_TRIALS_FOR_IMPORTANCE = 20


# --------------------------------------------------------------------------- records


@dataclass
class SearchResult:
    """What :func:`run_search` returns.

    Attributes
    ----------
    study_name, storage
        Where the Optuna study is (``optuna.load_study(study_name=..., storage=...)``).
    out_dir
        Output folder.
    n_complete, n_feasible
        Complete trials in the study, and how many of them meet spec and constraints
        (copies of a design the sampler suggested again included).
    n_designs, n_designs_feasible
        The same without the copies: distinct designs evaluated, and how many meet them.
    designs
        The ``[search] top`` best designs, best first, one per distinct parameter
        set, as plain records (see :func:`design_record` and :func:`rank_trials`,
        which ranks any number).
    files
        Output files by kind.
    timing
        Seconds spent by this run's workers: ``sampler`` (ask and suggest),
        ``physics`` (the evaluator), ``storage`` (tell, attributes, claims),
        ``total``; and counts ``evaluated``, ``copied`` (duplicates not recomputed).
    notes
        Anything skipped (e.g. importances with too few trials).
    """

    study_name: str
    storage: str
    out_dir: Path
    n_complete: int
    n_feasible: int
    designs: list[dict[str, Any]]
    directions: tuple[str, ...]
    files: dict[str, str] = field(default_factory=dict)
    timing: dict[str, float] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    n_designs: int = 0
    n_designs_feasible: int = 0

    @property
    def best(self) -> dict[str, Any] | None:
        """The top design if it meets the spec and the constraints, else None."""
        return self.designs[0] if self.designs and self.designs[0]["feasible"] else None


def _tidy(value: Any) -> Any:
    """A float on a step grid without its rounding noise (0.5800000000000001 -> 0.58)."""
    return float(f"{value:.12g}") if isinstance(value, float) else value


def finite_or_none(value: float) -> float | None:
    return float(value) if math.isfinite(value) else None


def at_range_limit(study: Study, params: dict[str, Any]) -> list[str]:
    """Variables whose value sits on the lower or upper end of its range (the optimum may
    lie beyond it: widen the range).

    Parameters
    ----------
    study
        The study (its variables and their ranges).
    params
        The design's values, variable name -> value.
    """
    out = []
    for v in study.variables:
        value = params.get(v.name)
        if value is None or not v.low < v.high:
            continue
        tol = 1e-9 * max(abs(v.low), abs(v.high), 1.0)
        if value <= v.low + tol or value >= v.high - tol:
            out.append(v.name)
    return out


def design_record(study: Study, trial: FrozenTrial) -> dict[str, Any]:
    """One evaluated design as a plain record.

    Keys: ``trial`` (number), ``feasible``, ``score`` (single objective: the
    nominal score, also in a robust search) or ``objectives`` (metric ->
    value), ``yield`` (robust search: {value, ci_low, ci_high, samples,
    passed, confidence, failures}; else None), ``spec_violation``, ``constraints``,
    ``metrics`` (every name of :attr:`wellwright.optimize.study.study.Study.metric_names`:
    :data:`wellwright.physics.iv.METRIC_NAMES` and the currents at the spec's stated biases;
    None for NaN),
    ``params`` (parameter name -> value), ``layers`` (name, material,
    label, x, thickness_ml, thickness_nm, doping_cm3; contacts have no
    thickness), ``active_thickness_nm``, ``at_range_limit`` (the variables at an end of
    their range, :func:`at_range_limit`), ``bounded_by_sweep`` (where the metric
    ``valley_bounded_by_sweep`` is 1, the figures of
    :data:`wellwright.physics.iv.BOUNDED_BY_SWEEP`, which are then bounds; else empty),
    ``stack`` (a stack dictionary for
    :func:`wellwright.physics.stack.parse_stack`), ``model`` (the model that computed the
    metrics, in words) and, when the study gives
    ``[device] area_um2``, ``device`` (the mesa's current in mA, conductance in
    mS, capacitance in fF, output power in uW:
    :func:`wellwright.physics.device.device_quantities`).

    Parameters
    ----------
    study
        The study.
    trial
        The Optuna trial of the design (its user attributes hold the evaluation).
    """
    a = trial.user_attrs
    rec: dict[str, Any] = {"trial": trial.number, "feasible": bool(a.get("feasible", False))}
    if study.multi_objective:
        rec["objectives"] = {
            o.metric: finite_or_none(v) for o, v in zip(study.objectives, trial.values, strict=True)
        }
    else:
        rec["score"] = a.get("score", trial.value) if study.search.robust else trial.value
    rec["yield"] = a.get("yield") if study.search.robust else None
    rec["spec_violation"] = a.get("spec_violation")
    rec["constraints"] = dict(a.get("constraints", {}))
    metrics = a.get("metrics", {})
    rec["metrics"] = {k: metrics.get(k) for k in study.metric_names}
    rec["params"] = {k: _tidy(v) for k, v in trial.params.items()}
    rec["layers"] = a.get("layers")
    rec["active_thickness_nm"] = (
        None
        if rec["layers"] is None
        else sum(layer["thickness_nm"] or 0.0 for layer in rec["layers"])
    )
    rec["stack"] = study.stack_dict(trial.params)
    rec["at_range_limit"] = at_range_limit(study, trial.params)
    # the valley not reached even beyond the sweep end: these figures are bounds
    bounded = rec["metrics"].get(VALLEY_BOUNDED) == 1.0
    rec["bounded_by_sweep"] = [k for k in BOUNDED_BY_SWEEP if bounded]
    rec["model"] = model_label(study.stack(trial.params))
    area = (rec["stack"].get("device") or {}).get("area_um2")
    if area is not None:  # the mesa's own quantities (mA, mS, fF, uW)
        per_area = {k: np.array([np.nan if v is None else v]) for k, v in rec["metrics"].items()}
        rec["device"] = {
            k: finite_or_none(float(v[0]))
            for k, v in device_quantities(per_area, area_um2=float(area)).items()
        }
    return rec


# --------------------------------------------------------------------------- ranking


def _pareto_ranks(values: np.ndarray, directions: Sequence[str]) -> np.ndarray:
    """Non-domination rank (0 = Pareto front) of each row of objective values."""
    sign = np.array([-1.0 if d == "maximize" else 1.0 for d in directions])
    v = values * sign
    n = v.shape[0]
    ranks = np.full(n, -1)
    remaining = np.arange(n)
    r = 0
    while remaining.size:
        sub = v[remaining]
        le = np.all(sub[:, None, :] <= sub[None, :, :], axis=2)
        lt = np.any(sub[:, None, :] < sub[None, :, :], axis=2)
        dominated = np.any(le & lt, axis=0)
        front = remaining[~dominated]
        ranks[front] = r
        remaining = remaining[dominated]
        r += 1
    return ranks


def _robust_order(t: FrozenTrial) -> tuple[float, float, float, int]:
    a = t.user_attrs
    y = (a.get("yield") or {}).get("value")
    y = 0.0 if y is None or not math.isfinite(y) else float(y)
    score = a.get("score")
    return (
        -y,
        float(a.get("spec_violation", math.inf)),
        math.inf if score is None else float(score),
        t.number,
    )


def rank_trials(
    study: Study, trials: Sequence[FrozenTrial], *, top: int | None = None
) -> list[dict[str, Any]]:
    """Rank complete trials, best first, one record per distinct parameter set.

    Feasible designs (on spec, constraints met) come first: by score for a
    single objective; by Pareto rank, then the first objective, for several.
    Then the others, by total constraint violation, then spec violation.

    A robust search (``[search] robust``) ranks the designs that meet the
    constraints first, by yield (highest first), then by nominal spec
    violation and score; then the others as above.

    Parameters
    ----------
    study
        The study.
    trials
        Trials of the search; only complete ones are ranked, the first of each parameter set.
    top
        Keep only the best ``top`` records; None: all.
    """
    seen: dict[tuple, FrozenTrial] = {}
    for t in sorted(trials, key=lambda t: t.number):
        if t.state == TrialState.COMPLETE:
            seen.setdefault(study.parameter_key(t.params), t)
    unique = list(seen.values())
    feasible = [t for t in unique if t.user_attrs.get("feasible")]
    others = [t for t in unique if not t.user_attrs.get("feasible")]
    if study.search.robust:
        feasible = [t for t in unique if not any(v > 0 for v in t.constraints.values())]
        others = [t for t in unique if any(v > 0 for v in t.constraints.values())]
        feasible.sort(key=_robust_order)
        pareto: set[int] = set()
    elif study.multi_objective and feasible:
        vals = np.array([t.values for t in feasible], float)
        ranks = _pareto_ranks(vals, study.directions)
        sign0 = -1.0 if study.directions[0] == "maximize" else 1.0
        order = sorted(
            range(len(feasible)), key=lambda i: (ranks[i], sign0 * vals[i, 0], feasible[i].number)
        )
        feasible = [feasible[i] for i in order]
        pareto = {feasible[i].number for i in range(len(feasible)) if ranks[order[i]] == 0}
    else:
        feasible.sort(key=lambda t: (t.value, t.number))
        pareto = set()

    def violation(t: FrozenTrial) -> tuple[float, float, int]:
        c = sum(v for v in t.constraints.values() if v > 0)
        return (c, float(t.user_attrs.get("spec_violation", math.inf)), t.number)

    others.sort(key=violation)
    ranked = feasible + others
    if top is not None:
        ranked = ranked[:top]
    records = []
    for i, t in enumerate(ranked, start=1):
        rec = {"rank": i, **design_record(study, t)}
        if study.multi_objective:
            rec["pareto"] = t.number in pareto
        records.append(rec)
    return records


# --------------------------------------------------------------------------- outputs


def _designs_table(
    study: Study, designs: list[dict[str, Any]]
) -> tuple[list[str], list[list[Any]]]:
    head = ["rank", "trial", "feasible"]
    head += (
        [f"objective:{o.metric}" for o in study.objectives] if study.multi_objective else ["score"]
    )
    if study.search.robust:
        head += ["yield", "yield_ci_low", "yield_ci_high"]
    head += ["spec_violation", *study.metric_names, *study.parameter_names, "active_thickness_nm"]
    head += ["at_range_limit", "bounded_by_sweep"]
    device_keys = sorted({k for d in designs for k in (d.get("device") or {})})
    head += device_keys
    rows = []
    for d in designs:
        row = [d["rank"], d["trial"], d["feasible"]]
        row += list(d["objectives"].values()) if study.multi_objective else [d["score"]]
        if study.search.robust:
            y = d["yield"] or {}
            row += [y.get("value"), y.get("ci_low"), y.get("ci_high")]
        row += [d["spec_violation"], *(d["metrics"].get(k) for k in study.metric_names)]
        row += [d["params"].get(n) for n in study.parameter_names] + [d["active_thickness_nm"]]
        row += [" ".join(d.get("at_range_limit") or []), " ".join(d.get("bounded_by_sweep") or [])]
        row += [(d.get("device") or {}).get(k) for k in device_keys]
        rows.append([f"{v:.6g}" if isinstance(v, float) else v for v in row])
    return head, rows


def _feasible_objective(t: FrozenTrial, *, i: int, maximize: bool) -> float:
    """Objective ``i`` as a value to minimise; designs off spec count as the worst."""
    v = t.values[i]
    if not (t.user_attrs.get("feasible") and math.isfinite(v)):
        return math.inf
    return -v if maximize else v


def parameter_importances(
    study: Study, ostudy: optuna.Study, complete: list[FrozenTrial]
) -> dict[str, Any]:
    """Optuna's parameter importances of the score (or of each objective).

    Skipped (with a ``note``) below :data:`MIN_TRIALS_FOR_IMPORTANCE` complete
    trials or with fewer than two parameters; multi-objective importances are
    over the designs that meet the spec.

    Parameters
    ----------
    study
        The study.
    ostudy
        The Optuna study of the search.
    complete
        Its complete trials.
    """
    if len(study.variables) < 2:
        return {"note": "fewer than two search parameters; nothing to rank"}
    if len(complete) < MIN_TRIALS_FOR_IMPORTANCE:
        return {
            "note": f"only {len(complete)} complete trials; importances need "
            f"{MIN_TRIALS_FOR_IMPORTANCE}"
        }
    out: dict[str, Any] = {}
    targets: list[tuple[str, Callable[[FrozenTrial], float]]] = []
    if study.multi_objective:
        for i, o in enumerate(study.objectives):
            targets.append(
                (
                    o.metric,
                    functools.partial(_feasible_objective, i=i, maximize=o.direction == "maximize"),
                )
            )
    else:
        targets.append(("score", lambda t: float(t.values[0])))
    for name, target in targets:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                imp = optuna.importance.get_param_importances(ostudy, target=target)
            out[name] = {k: float(v) for k, v in imp.items()}
        except Exception as exc:  # noqa: BLE001 - too few distinct values, all-infinite targets, ...
            out[name] = {"note": f"not computed ({type(exc).__name__}: {exc})"}
    return out


def write_outputs(
    study: Study, ostudy: optuna.Study, result: SearchResult, complete: list[FrozenTrial]
) -> None:
    """Write designs.csv/json, growth sheets, trials.csv, history/Pareto/importance figures
    and the best I-V.

    Parameters
    ----------
    study
        The study.
    ostudy
        The Optuna study of the search.
    result
        The search result; written to its ``out_dir``, its ``files`` and ``notes`` updated.
    complete
        The complete trials.
    """
    from wellwright.optimize.search import figures as search_figures
    from wellwright.optimize.search.history import TRIALS_FILE, trial_points, write_trials
    from wellwright.optimize.shared.outputs import write_csv, write_json

    out = result.out_dir
    files = result.files
    files["designs_json"] = str(write_json(out / "designs.json", result.designs))
    head, rows = _designs_table(study, result.designs)
    files["designs_csv"] = str(write_csv(out / "designs.csv", head, rows))

    sheets = out / "growth_sheets"
    keep = set()
    for d in result.designs:
        if d["layers"] is None:
            continue
        path = write_csv(
            sheets / f"rank{d['rank']:02d}_trial{d['trial']:05d}.csv",
            GROWTH_SHEET_HEADER,
            growth_sheet_rows(d),
        )
        keep.add(path.name)
    if sheets.is_dir():
        for old in sheets.glob("rank*_trial*.csv"):
            if old.name not in keep:
                old.unlink()
    files["growth_sheets"] = str(sheets)

    # the history as a plain record: the report draws it from here, not from the storage
    points = trial_points(complete)
    files["trials_csv"] = str(write_trials(out / TRIALS_FILE, study, points))
    if points:
        files["history"] = str(search_figures.save_history(study, points, out / "history.png"))
        if study.multi_objective:
            files["pareto"] = str(search_figures.save_pareto(study, points, out / "pareto.png"))
    importances = parameter_importances(study, ostudy, complete)
    files["importances_json"] = str(write_json(out / "importances.json", importances))
    plotted = {k: v for k, v in importances.items() if isinstance(v, dict) and "note" not in v}
    if plotted:
        files["importances"] = str(
            search_figures.save_importances(plotted, out / "importances.png")
        )
    else:
        note = importances.get("note") or next(
            (v["note"] for v in importances.values() if "note" in v), ""
        )
        result.notes.append(f"parameter importances skipped: {note}")

    best = result.best
    if best is not None:
        try:
            from wellwright.optimize.shared.figures import iv_figures
        except ImportError:
            result.notes.append(
                "I-V figures of the best design skipped (wellwright.optimize.shared.figures not available)"
            )
        else:
            from wellwright.physics.iv import stack_iv

            stack = study.stack(best["params"])
            curves = stack_iv(stack, study.sweep.bias_v, island_layers=study.island_layers)
            paths = iv_figures(stack, curves, out / "best_design")
            files.update({f"best_{k}": str(v) for k, v in paths.items()})
    result.files = files
