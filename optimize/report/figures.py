"""Figures drawn only for the run report: yield per design, sensitivity ranking.

The figures of one stack come from :mod:`wellwright.optimize.shared.figures`, the search and
tolerance figures from :mod:`wellwright.optimize.search.figures` and
:mod:`wellwright.optimize.tolerance.figures`. Colours are the Okabe-Ito colour-blind-safe
palette (:data:`wellwright.optimize.shared.figures.PALETTE`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from matplotlib.figure import Figure
from wellwright.optimize.shared import names
from wellwright.optimize.shared.figures import PALETTE, style
from wellwright.optimize.tolerance.figures import sensitivity_figure

__all__ = ["yield_figure", "ranking_figure", "ranking_rows"]


def yield_figure(records: list[dict[str, Any]]) -> Figure:
    """Left: yield of each design with its Wilson interval; right: failures by spec."""
    style()
    n = len(records)
    fig = Figure(figsize=(10.0, 0.55 * n + 2.6))
    ax, bx = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1, 1.3]})
    labels = [f"rank {r['design'].get('rank', '?')}" for r in records][::-1]
    ypos = np.arange(n)
    ys = [r["yield"] for r in records][::-1]
    value = np.array([100 * y["value"] for y in ys])
    lo = np.array([100 * y["ci_low"] for y in ys])
    hi = np.array([100 * y["ci_high"] for y in ys])
    ax.barh(ypos, value, 0.55, color=PALETTE["blue"], label="Monte Carlo yield")
    ax.errorbar(
        value,
        ypos,
        xerr=[value - lo, hi - value],
        fmt="none",
        ecolor=PALETTE["black"],
        capsize=5,
        lw=1.5,
        label="95 % Wilson interval",
    )
    for y, v, yy in zip(ypos, value, ys, strict=True):
        ax.text(
            1.0,
            y + 0.3,
            f"{v:.0f} % ({yy['passed']}/{yy['samples']} samples)",
            va="bottom",
            fontsize=9,
        )  # above its bar, clear of the interval
    ax.set_yticks(ypos, labels)
    ax.set_ylim(-0.5, n - 0.2)  # room for the top bar's label below the title
    ax.set_xlim(0, 105)
    ax.set_xlabel("yield against the spec (%)")
    ax.set_title("yield under growth spreads")
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.3), ncol=2, fontsize=8)

    every = list(records[0]["failures"])  # a cause keeps its colour whichever others occur
    keys = [k for k in every if any(r["failures"].get(k, 0) for r in records)]
    colors = [
        PALETTE[c]
        for c in ("vermillion", "orange", "sky", "green", "purple", "yellow", "blue", "black")
    ]
    # slots for the causes that occur only, centred on their design's label
    width = min(0.55, 0.8 / max(1, len(keys)))
    for j, k in enumerate(keys):
        share = [100 * r["failures"].get(k, 0) / max(1, r["yield"]["samples"]) for r in records][
            ::-1
        ]
        bx.barh(
            ypos + (j + 0.5 - 0.5 * len(keys)) * width,
            share,
            width,
            color=colors[every.index(k) % len(colors)],
            label=names.words(k),
        )
    if not keys:
        bx.text(50, (n - 1) / 2, "no sample failed", ha="center", va="center")
    bx.set_yticks(ypos, labels)
    bx.set_ylim(ax.get_ylim())
    bx.set_xlim(0, 100)
    bx.set_xlabel("samples missing this spec (%)")
    bx.set_title("why samples fail")
    if keys:
        bx.legend(loc="upper center", bbox_to_anchor=(0.5, -0.3), ncol=3, fontsize=8)
    fig.tight_layout()
    return fig


def ranking_rows(record: dict[str, Any]) -> tuple[str, str, list[dict[str, Any]]]:
    """The sensitivity ranking of a tolerance record: (method, output, rows).

    The indices of the spec metric that most samples miss (a continuous
    output: better resolved with few samples than the 0/1 pass/fail), else of
    pass/fail, the peak current density, the peak voltage; Sobol total
    indices, else Morris mu*; empty for a Monte Carlo run.
    """
    fails = {
        k: v
        for k, v in (record.get("failures") or {}).items()
        if k not in ("no_ndr", "solve_failed") and v
    }
    first = sorted(fails, key=lambda k: -fails[k])[:1]
    for method, table, score in (
        ("sobol", record.get("sobol") or {}, "total_index"),
        ("morris", record.get("morris") or {}, "mu_star"),
    ):
        for output in (*first, "pass", "peak_current_density_a_cm2", "peak_voltage_v"):
            rows = table.get(output)
            if rows and any(r[score] > 0 for r in rows):
                return method, output, rows
    return "", "", []


def ranking_figure(record: dict[str, Any], *, top: int = 10) -> Figure | None:
    """Which growth parameter matters most (:func:`ranking_rows`), as
    :func:`wellwright.optimize.tolerance.figures.sensitivity_figure` draws it; None for a
    Monte Carlo run.

    Parameters
    ----------
    record
        The tolerance record (see :func:`ranking_rows`).
    top
        Most parameters shown.
    """
    method, output, rows = ranking_rows(record)
    if not rows:
        return None
    return sensitivity_figure(method, output, rows, top=top)
