"""Figures of a tolerance analysis: histograms with the spec window, Sobol bars, tornado.

Colours: the Okabe-Ito colour-blind-safe palette (M. Okabe and K. Ito,
"Color Universal Design", 2002; hex values from memory). Units are the
trade's, from :mod:`wellwright.optimize.shared.names`.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
from wellwright.optimize.shared import names
from wellwright.optimize.shared.figures import PALETTE

__all__ = ["save_all", "OKABE_ITO"]

OKABE_ITO = PALETTE  # one palette for every figure: wellwright.optimize.shared.figures.PALETTE


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def save_histograms(record: dict[str, Any], mc: dict[str, Any], path: Path) -> Path:
    from wellwright.optimize.shared.outputs import save_figure

    plt = _plt()
    spec = {s["metric"]: s for s in record["spec"]}
    shown = list(spec) or ["peak_current_density_a_cm2", "peak_voltage_v", "pvcr"]
    fig, axes = plt.subplots(1, len(shown), figsize=(4.2 * len(shown), 3.4), squeeze=False)
    for ax, name in zip(axes[0], shown):
        f, label = names.quantity(name).factor, names.label(name)
        v = np.asarray(mc["metrics"][name], float) * f
        v = v[np.isfinite(v)]
        if v.size:
            ax.hist(
                v,
                bins=max(5, min(40, int(math.sqrt(v.size)) * 2)),
                color=OKABE_ITO["sky"],
                edgecolor=OKABE_ITO["blue"],
            )
        s = spec.get(name)
        if s is not None:
            for bound in ("min", "max"):
                if s[bound] is not None:
                    ax.axvline(
                        s[bound] * f,
                        color=OKABE_ITO["vermillion"],
                        lw=2,
                        ls="--",
                        label=f"spec {bound}",
                    )
        nominal = record["nominal"].get(name)
        if nominal is not None:
            ax.axvline(nominal * f, color=OKABE_ITO["black"], lw=1, label="nominal design")
        ax.legend(fontsize=8)
        ax.set_xlabel(label)
        ax.set_ylabel("samples")
    y = record["yield"]
    fig.suptitle(
        f"as-grown samples: yield {100 * y['value']:.0f} % "
        f"({100 * y['ci_low']:.0f}-{100 * y['ci_high']:.0f} %, n = {y['samples']})"
    )
    return save_figure(fig, path)


def save_sobol(record: dict[str, Any], path: Path, *, key: str = "pass") -> Path | None:
    from wellwright.optimize.shared.outputs import save_figure

    table = record["sobol"].get(key)
    if not table:
        return None
    plt = _plt()
    rows = table[:12][::-1]
    ypos = np.arange(len(rows))
    fig, ax = plt.subplots(figsize=(6.4, 0.35 * len(rows) + 1.4))
    ax.barh(
        ypos + 0.2,
        [r["total_index"] for r in rows],
        0.4,
        xerr=[r["total_conf"] for r in rows],
        color=OKABE_ITO["blue"],
        label="total index",
    )
    ax.barh(
        ypos - 0.2,
        [r["first_index"] for r in rows],
        0.4,
        xerr=[r["first_conf"] for r in rows],
        color=OKABE_ITO["orange"],
        label="first-order index",
    )
    ax.set_yticks(ypos, [names.parameter_words(r["parameter"]) for r in rows])
    what = names.words(key)
    ax.set_xlabel(f"Sobol index of {what} (share of variance, dimensionless)")
    ax.legend(fontsize=8, loc="lower right")
    return save_figure(fig, path)


def save_tornado(
    record: dict[str, Any], path: Path, *, metric: str = "peak_current_density_a_cm2"
) -> Path | None:
    from wellwright.optimize.shared.outputs import save_figure

    f, label = names.quantity(metric).factor, names.label(metric)
    nominal = record["nominal"].get(metric)
    rows = [
        r
        for r in record["tornado"]
        if r["minus"][metric] is not None and r["plus"][metric] is not None
    ]
    if nominal is None or not rows:
        return None
    plt = _plt()
    rows = rows[::-1]
    ypos = np.arange(len(rows))
    fig, ax = plt.subplots(figsize=(6.4, 0.4 * len(rows) + 1.4))
    n = nominal * f
    ax.barh(
        ypos,
        [r["minus"][metric] * f - n for r in rows],
        left=n,
        color=OKABE_ITO["sky"],
        label="-1 ML",
    )
    ax.barh(
        ypos,
        [r["plus"][metric] * f - n for r in rows],
        left=n,
        color=OKABE_ITO["vermillion"],
        label="+1 ML",
    )
    ax.axvline(n, color=OKABE_ITO["black"], lw=1)
    ax.set_yticks(ypos, [r["layer"] for r in rows])
    ax.set_xlabel(label)
    ax.set_title("one layer at a time, ±1 monolayer")
    ax.legend(fontsize=8)
    return save_figure(fig, path)


def save_all(record: dict[str, Any], mc: dict[str, Any], out: Path) -> dict[str, str]:
    files = {"histograms": str(save_histograms(record, mc, out / "histograms.png"))}
    for key in record["sobol"]:
        p = save_sobol(record, out / f"sobol_{key}.png", key=key)
        if p is not None:
            files[f"sobol_{key}_png"] = str(p)
    for metric in ("peak_current_density_a_cm2", "peak_voltage_v"):
        p = save_tornado(record, out / f"tornado_{metric}.png", metric=metric)
        if p is not None:
            files[f"tornado_{metric}"] = str(p)
    return files
