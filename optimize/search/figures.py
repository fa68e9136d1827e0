"""Figures of a design search: optimisation history, Pareto front, parameter importances.

The history and the Pareto front are drawn from plain trial records
(:func:`wellwright.optimize.search.history.trial_points`, the rows of
``search/trials.csv``), so the report draws them without the Optuna storage.

Colours are the Okabe-Ito colour-blind-safe palette (M. Okabe and K. Ito,
"Color Universal Design", 2002); figures of merit are drawn in the trade's
units (kA/cm^2, mV).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.figure import Figure
from wellwright.optimize.shared import names
from wellwright.optimize.shared.figures import PALETTE
from wellwright.optimize.shared.outputs import save_figure
from wellwright.optimize.study.study import Study

__all__ = [
    "metric_axis",
    "history_figure",
    "pareto_figure",
    "importances_figure",
    "save_history",
    "save_pareto",
    "save_importances",
    "OKABE_ITO",
]

OKABE_ITO = PALETTE  # one palette for every figure: wellwright.optimize.shared.figures.PALETTE


def metric_axis(metric: str) -> tuple[str, float]:
    """Axis label and the factor from the metric's unit to the trade's (:mod:`~wellwright.optimize.shared.names`)."""
    return names.label(metric), names.quantity(metric).factor


def _best_so_far(values: np.ndarray, maximize: bool) -> np.ndarray:
    return np.maximum.accumulate(values) if maximize else np.minimum.accumulate(values)


def history_figure(study: Study, trials: Sequence[dict[str, Any]]) -> Figure:
    """Score (or each objective) per trial with the best so far.

    ``trials``: plain records ``{"trial", "feasible", "values"}`` of the complete
    trials (:func:`wellwright.optimize.search.history.trial_points`).

    Parameters
    ----------
    study
        The study (its objectives and score).
    trials
        Plain records ``{"trial", "feasible", "values"}`` of the complete trials
        (:func:`wellwright.optimize.search.history.trial_points`).
    """
    trials = sorted(trials, key=lambda t: t["trial"])
    number = np.array([t["trial"] for t in trials])
    feasible = np.array([bool(t["feasible"]) for t in trials])
    if not study.multi_objective:
        fig = Figure(figsize=(7.0, 4.2))
        ax = fig.add_subplot()
        score = np.array([t["values"][0] for t in trials], float)
        ax.plot(
            number[~feasible],
            score[~feasible],
            "x",
            color=OKABE_ITO["orange"],
            ms=5,
            label="off spec or constraint violated",
        )
        ax.plot(
            number[feasible],
            score[feasible],
            "o",
            color=OKABE_ITO["blue"],
            ms=5,
            label="meets spec",
        )
        ax.step(
            number,
            _best_so_far(score, False),
            where="post",
            color=OKABE_ITO["black"],
            lw=1.8,
            label="best so far",
        )
        ax.set_yscale("symlog", linthresh=0.1)
        ax.axhline(0.0, color="0.6", lw=0.8)
        ax.set_xlabel("trial")
        ax.set_ylabel("score (dimensionless; > 0 spec violation, ≤ 0 −merit)")
        ax.set_title(
            f"optimisation history: {study.optuna_name} ({len(trials)} trials, "
            f"{int(feasible.sum())} meet the spec)"
        )
        ax.legend(loc="upper right", fontsize=8)
        ax.grid(alpha=0.3)
        return fig
    n = len(study.objectives)
    fig = Figure(figsize=(7.0, 2.8 * n))
    for i, o in enumerate(study.objectives):
        ax = fig.add_subplot(n, 1, i + 1)
        label, factor = metric_axis(o.metric)
        v = np.array([t["values"][i] for t in trials], float) * factor
        ok = feasible & np.isfinite(v)
        ax.plot(number[ok], v[ok], "o", color=OKABE_ITO["blue"], ms=4, label="meets spec")
        if ok.any():
            best = _best_so_far(
                np.where(ok, v, -np.inf if o.direction == "maximize" else np.inf),
                o.direction == "maximize",
            )
            shown = np.isfinite(best)
            ax.step(
                number[shown],
                best[shown],
                where="post",
                color=OKABE_ITO["black"],
                lw=1.8,
                label=f"best so far ({o.direction})",
            )
        else:
            ax.text(0.5, 0.5, "no trial meets the spec yet", ha="center", transform=ax.transAxes)
        ax.set_ylabel(label)
        ax.grid(alpha=0.3)
        ax.legend(loc="best", fontsize=8)
    ax.set_xlabel("trial")
    fig.suptitle(f"optimisation history: {study.optuna_name} ({len(trials)} trials)")
    fig.align_ylabels()
    fig.subplots_adjust(hspace=0.35)
    return fig


def _front_mask(x: np.ndarray, y: np.ndarray, max_x: bool, max_y: bool) -> np.ndarray:
    sx, sy = (-1 if max_x else 1), (-1 if max_y else 1)
    px, py = sx * x, sy * y
    dominated = np.zeros(x.size, bool)
    for i in range(x.size):
        dominated[i] = np.any((px <= px[i]) & (py <= py[i]) & ((px < px[i]) | (py < py[i])))
    return ~dominated


def pareto_figure(study: Study, trials: Sequence[dict[str, Any]]) -> Figure:
    """The first two objectives of the designs that meet the spec, the Pareto front marked
    (``trials`` as in :func:`history_figure`).

    Parameters
    ----------
    study
        The study (its first two objectives).
    trials
        Plain records ``{"trial", "feasible", "values", "params"}`` of the complete trials
        (:func:`wellwright.optimize.search.history.trial_points`); a repeated design counts once.
    """
    o1, o2 = study.objectives[:2]
    (l1, f1), (l2, f2) = metric_axis(o1.metric), metric_axis(o2.metric)
    distinct = {tuple(sorted(t["params"].items())): t for t in reversed(trials)}  # first of each
    trials = sorted(distinct.values(), key=lambda t: t["trial"])  # a repeat is no new design
    ok = [t for t in trials if t["feasible"] and all(math.isfinite(v) for v in t["values"][:2])]
    fig = Figure(figsize=(6.4, 4.8))
    ax = fig.add_subplot()
    if ok:
        x = np.array([t["values"][0] for t in ok]) * f1
        y = np.array([t["values"][1] for t in ok]) * f2
        front = _front_mask(x, y, o1.direction == "maximize", o2.direction == "maximize")
        ax.plot(x[~front], y[~front], "o", color=OKABE_ITO["sky"], ms=5, label="meets spec")
        order = np.argsort(x[front])
        ax.plot(
            x[front][order],
            y[front][order],
            "D-",
            color=OKABE_ITO["vermillion"],
            ms=6,
            lw=1.5,
            label=f"Pareto front ({int(front.sum())})",
        )
        ax.legend(loc="best", fontsize=8)
    else:
        ax.text(0.5, 0.5, "no trial meets the spec yet", ha="center", transform=ax.transAxes)
    ax.set_xlabel(f"{l1} [{o1.direction}]")
    ax.set_ylabel(f"{l2} [{o2.direction}]")
    extra = "; objectives 3+ not shown" if len(study.objectives) > 2 else ""
    ax.set_title(
        f"Pareto front of {len(ok)} designs meeting the spec "
        f"({len(trials) - len(ok)} others not shown{extra})",
        fontsize=10,
    )
    ax.grid(alpha=0.3)
    return fig


def importances_figure(importances: dict[str, dict[str, float]]) -> Figure:
    """Horizontal bars of each target's normalised parameter importances."""
    targets = list(importances)
    params = sorted(
        {p for imp in importances.values() for p in imp},
        key=lambda p: -max(imp.get(p, 0.0) for imp in importances.values()),
    )
    fig = Figure(figsize=(6.4, 1.2 + 0.45 * len(params) * max(1, len(targets)) ** 0.5))
    ax = fig.add_subplot()
    colours = [OKABE_ITO[c] for c in ("blue", "vermillion", "green", "purple", "orange", "sky")]
    height = 0.8 / len(targets)
    ypos = np.arange(len(params))
    for k, name in enumerate(targets):
        vals = [importances[name].get(p, 0.0) for p in params]
        ax.barh(
            ypos + (k - (len(targets) - 1) / 2) * height,
            vals,
            height=height,
            color=colours[k % len(colours)],
            label=names.words(name),
        )
    ax.set_yticks(ypos, [names.variable_label(p) for p in params])
    ax.invert_yaxis()
    ax.set_xlabel("importance (fraction of total, dimensionless)")
    ax.set_title("which parameters matter (Optuna PED-ANOVA importances)", fontsize=10)
    if len(targets) > 1:
        ax.legend(loc="lower right", fontsize=8)
    ax.grid(axis="x", alpha=0.3)
    return fig


def save_history(study: Study, trials: Sequence[dict[str, Any]], path: str | Path) -> Path:
    """Save :func:`history_figure` as PNG at ``path``.

    Parameters
    ----------
    study
        The study.
    trials
        Plain records ``{"trial", "feasible", "values"}`` of the complete trials
        (:func:`wellwright.optimize.search.history.trial_points`).
    path
        PNG file to write.
    """
    return save_figure(history_figure(study, trials), path)


def save_pareto(study: Study, trials: Sequence[dict[str, Any]], path: str | Path) -> Path:
    """Save :func:`pareto_figure` as PNG at ``path``.

    Parameters
    ----------
    study
        The study.
    trials
        Plain records ``{"trial", "feasible", "values"}`` of the complete trials
        (:func:`wellwright.optimize.search.history.trial_points`).
    path
        PNG file to write.
    """
    return save_figure(pareto_figure(study, trials), path)


def save_importances(importances: dict[str, dict[str, float]], path: str | Path) -> Path:
    """Save :func:`importances_figure` as PNG at ``path``.

    Parameters
    ----------
    importances
        Parameter importances by objective
        (:func:`wellwright.optimize.search.designs.parameter_importances`).
    path
        PNG file to write.
    """
    return save_figure(importances_figure(importances), path)
