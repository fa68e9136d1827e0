"""Figures of a tolerance analysis: histograms with the spec window, Sobol bars, tornado, wafer
map, re-centring.

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
from wellwright.optimize.shared.figures import PALETTE, style

__all__ = ["save_all", "save_wafer_map", "save_recentre", "sensitivity_figure", "OKABE_ITO"]

OKABE_ITO = PALETTE  # one palette for every figure: wellwright.optimize.shared.figures.PALETTE


def _subplots(*grid: int, figsize: tuple[float, float], constrained: bool = False, **kw: Any):
    """A figure and its axes without pyplot, so that saving a figure never changes the
    caller's matplotlib backend (a notebook keeps its inline plots)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize, layout="constrained") if constrained else Figure(figsize=figsize)
    return fig, fig.subplots(*grid, **kw)


def save_histograms(record: dict[str, Any], mc: dict[str, Any], path: Path) -> Path:
    """Histograms of the figures of merit of the as-grown samples, with spec bounds and the nominal design.

    Parameters
    ----------
    record
        The tolerance record (spec, nominal figures, yield).
    mc
        The Monte Carlo samples (``metrics`` by name, in SI units).
    path
        PNG file to write.
    """
    from wellwright.optimize.shared.outputs import save_figure

    spec = {s["metric"]: s for s in record["spec"]}
    shown = list(spec) or ["peak_current_density_a_cm2", "peak_voltage_v", "pvcr"]
    fig, axes = _subplots(1, len(shown), figsize=(4.2 * len(shown), 3.4), squeeze=False)
    for ax, name in zip(axes[0], shown):
        f, label = names.quantity(name).factor, names.label(name)
        v = np.asarray(mc["metrics"][name], float) * f
        v = v[np.isfinite(v)]
        if v.size:
            counts, _, _ = ax.hist(
                v,
                bins=max(5, min(40, int(math.sqrt(v.size)) * 2)),
                color=OKABE_ITO["sky"],
                edgecolor=OKABE_ITO["blue"],
            )
            # headroom above the tallest bar, where the legend goes (it hid low bars)
            ax.set_ylim(0.0, 1.5 * max(float(np.max(counts)), 1.0))
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
        ax.legend(fontsize=8, loc="upper right")
        ax.set_xlabel(label)
        ax.set_ylabel("samples")
    y = record["yield"]
    fig.suptitle(
        f"as-grown samples: yield {100 * y['value']:.0f} % "
        f"({100 * y['ci_low']:.0f}-{100 * y['ci_high']:.0f} %, n = {y['samples']})"
    )
    return save_figure(fig, path)


def _error_bars(values: list[float]) -> list[float] | None:
    """Error bars for ``barh``; None where no value is finite (an index without a confidence
    interval: every bar would be empty, and matplotlib 3.7.0, the lowest version allowed,
    fails on an all-NaN list)."""
    return values if np.isfinite(np.asarray(values, float)).any() else None


def sensitivity_figure(method: str, output: str, rows: list[dict[str, Any]], *, top: int = 12):
    """Which growth parameter matters most for ``output``: horizontal bars, most important on
    top, with the confidence intervals as error bars.

    Parameters
    ----------
    method
        ``sobol`` (total and first-order indices) or ``morris`` (mu*).
    output
        The output the rows are of (``pass`` or a metric name).
    rows
        Rows of the record's ``sobol`` or ``morris`` table, most important first.
    top
        Most parameters shown.
    """
    from matplotlib.figure import Figure

    style()
    rows = rows[:top][::-1]
    ypos = np.arange(len(rows))
    fig = Figure(figsize=(7.5, 0.42 * len(rows) + 1.8))
    ax = fig.add_subplot()
    if method == "sobol":
        for shift, score, colour, label in (
            (0.2, "total", "blue", "total index"),
            (-0.2, "first", "orange", "first-order index"),
        ):
            ax.barh(
                ypos + shift,
                [r[f"{score}_index"] for r in rows],
                0.4,
                xerr=_error_bars([r[f"{score}_conf"] for r in rows]),
                color=PALETTE[colour],
                label=label,
                error_kw={"capsize": 3},
            )
        ax.set_xlabel(f"Sobol index of {names.words(output)} (share of variance, 0 to 1)")
        ax.set_xlim(left=min(0.0, ax.get_xlim()[0]))
    else:
        factor = names.quantity(output).factor
        ax.barh(
            ypos,
            [factor * r["mu_star"] for r in rows],
            0.6,
            xerr=_error_bars([factor * r["mu_star_conf"] for r in rows]),
            color=PALETTE["blue"],
            label="mu* (mean |elementary effect|)",
            error_kw={"capsize": 3},
        )
        ax.set_xlabel(f"Morris mu* of {names.label(output)} (per 5 sigma of the parameter)")
        ax.set_xlim(left=0.0)
    ax.set_yticks(ypos, [names.parameter_words(r["parameter"]) for r in rows])
    ax.set_title(f"which growth error matters most ({'Sobol' if method == 'sobol' else 'Morris'})")
    ax.legend(fontsize=8, loc="lower right")
    fig.tight_layout()
    return fig


def save_sobol(record: dict[str, Any], path: Path, *, key: str = "pass") -> Path | None:
    """:func:`sensitivity_figure` of the Sobol indices of ``key`` at ``path``; ``None`` without that table.

    Parameters
    ----------
    record
        The tolerance record (its ``sobol`` tables).
    path
        PNG file to write.
    key
        ``pass`` or a figure-of-merit name.
    """
    from wellwright.optimize.shared.outputs import save_figure

    table = record["sobol"].get(key)
    if not table:
        return None
    return save_figure(sensitivity_figure("sobol", key, table), path)


def save_tornado(
    record: dict[str, Any], path: Path, *, metric: str = "peak_current_density_a_cm2"
) -> Path | None:
    """Tornado chart: ``metric`` at each parameter's minus and plus settings around the nominal; ``None`` without data.

    Parameters
    ----------
    record
        The tolerance record.
    path
        PNG file to write.
    metric
        The figure of merit shown.
    """
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
    rows = rows[::-1]
    ypos = np.arange(len(rows))
    fig, ax = _subplots(figsize=(6.4, 0.4 * len(rows) + 1.4))
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


def _disk(ax, radius_mm: float, values_of_r, *, cmap: str, vmin: float, vmax: float):
    """Colour a wafer disk by a function of the radius; outline and a 10 mm scale."""
    x = np.linspace(-radius_mm, radius_mm, 241)
    xx, yy = np.meshgrid(x, x)
    rr = np.hypot(xx, yy)
    img = np.ma.masked_where(rr > radius_mm, values_of_r(np.minimum(rr, radius_mm)))
    im = ax.imshow(
        img,
        origin="lower",
        extent=(-radius_mm, radius_mm, -radius_mm, radius_mm),
        cmap=cmap,
        vmin=vmin,
        vmax=vmax,
    )
    t = np.linspace(0, 2 * np.pi, 361)
    ax.plot(radius_mm * np.cos(t), radius_mm * np.sin(t), color=OKABE_ITO["black"], lw=1)
    ax.set_aspect("equal")
    ax.grid(False)
    ax.set_xlabel("x (mm)")
    ax.set_ylabel("y (mm)")
    return im


def save_wafer_map(record: dict[str, Any], path: Path) -> Path | None:
    """Wafer map: pass probability by equal-area ring, nominal Jp across the wafer, and both
    against the radius with the rings' Wilson intervals.

    Parameters
    ----------
    record
        The tolerance record (its wafer section).
    path
        PNG file to write.
    """
    from wellwright.optimize.shared.outputs import save_figure

    wafer = record.get("wafer")
    if not wafer:
        return None
    radius = 0.5 * wafer["diameter_mm"]
    rings = wafer["rings"]
    r_out = np.array([g["r_out_mm"] for g in rings])
    p_ring = np.array([g["value"] if g["samples"] else np.nan for g in rings])
    prof_r = np.array([q["radius_mm"] for q in wafer["profile"]])
    key = "peak_current_density_a_cm2"
    q = names.quantity(key)
    jp = np.array([np.nan if v[key] is None else v[key] * q.factor for v in wafer["profile"]])
    fig, axes = _subplots(1, 3, figsize=(15.5, 4.6), constrained=True)
    im = _disk(
        axes[0],
        radius,
        lambda r: p_ring[np.clip(np.searchsorted(r_out, r, side="left"), 0, len(rings) - 1)],
        cmap="viridis",
        vmin=0.0,
        vmax=1.0,
    )
    fig.colorbar(im, ax=axes[0], shrink=0.85, label="probability to meet the spec")
    axes[0].set_title("meets the spec (by equal-area ring)")
    finite = jp[np.isfinite(jp)]
    lo, hi = (finite.min(), finite.max()) if finite.size else (0.0, 1.0)
    pad = max(1e-9, 0.02 * abs(hi))
    im = _disk(
        axes[1],
        radius,
        lambda r: np.interp(r, prof_r, jp),
        cmap="cividis",
        vmin=lo - pad,
        vmax=hi + pad,
    )
    fig.colorbar(im, ax=axes[1], shrink=0.85, label=names.label(key))
    axes[1].set_title("nominal design, reactor profile only")
    ax = axes[2]
    mid = 0.5 * (np.array([g["r_in_mm"] for g in rings]) + r_out)
    err = np.array([[g["value"] - g["ci_low"], g["ci_high"] - g["value"]] for g in rings]).T
    err = np.clip(err, 0.0, None)  # a yield of 0 or 1 sits on its interval's end (rounding)
    ax.errorbar(
        mid, p_ring, yerr=err, fmt="o", color=OKABE_ITO["blue"], capsize=3, label="pass probability"
    )
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlim(0, radius)
    ax.set_xlabel("radius on the wafer (mm)")
    ax.set_ylabel("probability to meet the spec", color=OKABE_ITO["blue"])
    twin = ax.twinx()
    twin.plot(prof_r, jp, color=OKABE_ITO["vermillion"], lw=2, label="nominal Jp")
    for s in record["spec"]:
        if s["metric"] == key:
            for bound in ("min", "max"):
                if s[bound] is not None:
                    twin.axhline(s[bound] * q.factor, color=OKABE_ITO["vermillion"], ls="--", lw=1)
    twin.set_ylabel(names.label(key), color=OKABE_ITO["vermillion"])
    twin.grid(False)
    ax.set_title("against the radius (bars: 95 % Wilson; dashed: Jp spec)")
    wy, py = record["wafer_yield"], record["yield"]
    fig.suptitle(
        f"wafer {wafer['diameter_mm']:g} mm: wafer yield {100 * wy['value']:.0f} % "
        f"({100 * wy['ci_low']:.0f}-{100 * wy['ci_high']:.0f} %), at the centre "
        f"{100 * py['value']:.0f} % (n = {wy['samples']})"
    )
    return save_figure(fig, path)


def save_recentre(record: dict[str, Any], path: Path, *, shown: int = 12) -> Path | None:
    """The re-centring: yield of each nearby whole-monolayer design on the screening samples
    (best first, the nominal's as a line), and the chosen one's yield with its 95 % Wilson
    interval on the samples the choice never saw, beside the nominal's on the same samples.

    Parameters
    ----------
    record
        The tolerance record (its ``recentre`` record); no figure without candidates.
    path
        PNG file to write.
    shown
        Largest number of candidate designs shown.
    """
    from wellwright.optimize.shared.outputs import save_figure

    rc = record.get("recentre")
    if not rc or not rc.get("candidates"):
        return None
    cands = rc["candidates"][:shown][::-1]
    fig, (ax, bx) = _subplots(
        1, 2, figsize=(11.5, 1.4 + 0.32 * len(cands)), gridspec_kw={"width_ratios": [3, 1.4]}
    )
    y = np.arange(len(cands))
    colours = [OKABE_ITO["green"] if c["meets_spec"] else OKABE_ITO["sky"] for c in cands]
    ax.barh(y, [100 * c["screen_yield"] for c in cands], color=colours, edgecolor="none")
    for k, c in enumerate(cands):
        v = 100 * c["screen_yield"]
        ax.text(v + 1, k, f"{v:.0f} %", va="center", fontsize=7)
    ax.set_yticks(y, [c["label"] for c in cands], fontsize=8)
    chosen = (rc.get("design") or {}).get("label")
    for tick in ax.get_yticklabels():
        if tick.get_text() == chosen:
            tick.set_fontweight("bold")
    nominal = 100 * rc["nominal_screen_yield"]
    ax.axvline(
        nominal,
        color=OKABE_ITO["black"],
        lw=1.5,
        zorder=3,
        label=f"nominal design ({nominal:.0f} %)",
    )
    ax.set_xlim(0, 112)
    ax.set_xticks([0, 20, 40, 60, 80, 100])
    ax.set_xlabel(f"yield on the {rc['budget']['screen_samples']} screening samples (%)")
    from matplotlib.patches import Patch

    ax.legend(
        handles=[
            ax.get_lines()[0],
            Patch(color=OKABE_ITO["green"], label="meets the spec without growth errors"),
            Patch(color=OKABE_ITO["sky"], label="misses it without growth errors"),
        ],
        fontsize=7,
        loc="lower right",
    )
    total = rc["budget"]["candidates"]
    which = f"all {total}" if len(cands) == total else f"best {len(cands)} of {total}"
    ax.set_title(f"nearby designs ({which}; chosen in bold)", fontsize=9)
    if rc.get("design") is not None:
        pts = [
            ("nominal", rc["nominal_yield"]),
            ("re-centred" if rc.get("better") else "best nearby", rc["yield"]),
        ]
        for k, (_, rec) in enumerate(pts):
            v = 100 * rec["value"]
            err = [[max(v - 100 * rec["ci_low"], 0.0)], [max(100 * rec["ci_high"] - v, 0.0)]]
            colour = OKABE_ITO["black"] if k == 0 else OKABE_ITO["vermillion"]
            bx.errorbar([k], [v], yerr=err, fmt="o", color=colour, capsize=4)
        bx.set_xticks([0, 1], [p[0] for p in pts], fontsize=8)
        bx.set_xlim(-0.7, 1.7)
        bx.set_ylim(0, 100)
        bx.set_ylabel(f"yield on {rc['yield']['samples']} unseen samples (%)")
        verdict = "measurable gain" if rc.get("better") else "gain within the noise"
        bx.set_title(f"{100 * rc['gain']['gain']:+.0f} points: {verdict}", fontsize=8)
    else:
        bx.axis("off")
        bx.text(0.5, 0.5, "no nearby design\nbeats the nominal", ha="center", va="center")
    fig.suptitle("Re-centring: whole-monolayer designs near the nominal, same growth spreads")
    fig.tight_layout()
    return save_figure(fig, path)


def save_all(record: dict[str, Any], mc: dict[str, Any], out: Path) -> dict[str, str]:
    """Every tolerance figure the record supports; returns their paths by name.

    Parameters
    ----------
    record
        The tolerance record.
    mc
        The Monte Carlo samples.
    out
        Output folder.
    """
    files = {"histograms": str(save_histograms(record, mc, out / "histograms.png"))}
    p = save_recentre(record, out / "recentre.png")
    if p is not None:
        files["recentre"] = str(p)
    p = save_wafer_map(record, out / "wafer_map.png")
    if p is not None:
        files["wafer_map"] = str(p)
    for key in record["sobol"]:
        p = save_sobol(record, out / f"sobol_{key}.png", key=key)
        if p is not None:
            files[f"sobol_{key}_png"] = str(p)
    for metric in ("peak_current_density_a_cm2", "peak_voltage_v"):
        p = save_tornado(record, out / f"tornado_{metric}.png", metric=metric)
        if p is not None:
            files[f"tornado_{metric}"] = str(p)
    return files
