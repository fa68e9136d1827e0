"""Figures of one stack: I-V with peak and valley, band diagram with resonances, T(E).

Matplotlib lives here and in the other figure modules of ``optimize``, never
in ``physics``. Colours are the Okabe-Ito colour-blind-safe palette.
"""

from __future__ import annotations

from typing import Any

import matplotlib.pyplot as plt
import numpy as np
from wellwright.physics.current import contact_fermi_levels_ev
from wellwright.physics.iv import (
    IVCurves,
    band_profile,
    external_bias_v,
    higher_peak_beyond_valley,
)
from wellwright.physics.resonances import find_resonances
from wellwright.physics.stack import Stack
from wellwright.physics.transmission import transmission
from wellwright.physics.valleys import indirect_edges_ev

from .model_text import model_label

__all__ = [
    "PALETTE",
    "model_label",
    "iv_figure",
    "band_diagram_figure",
    "transmission_figure",
    "iv_figures",
    "style",
]

#: Okabe-Ito palette (M. Okabe and K. Ito, "Color Universal Design", 2002).
PALETTE = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky": "#56B4E9",
    "green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "purple": "#CC79A7",
}
CONTACT_DRAW_NM = 12.0  #: flat contact drawn beyond the modelled region


def style() -> None:
    """Readable defaults for report-sized figures."""
    plt.rcParams.update(
        {
            "font.size": 11,
            "axes.titlesize": 12,
            "axes.labelsize": 11,
            "axes.grid": True,
            "grid.alpha": 0.3,
            "axes.spines.top": False,
            "axes.spines.right": False,
            "figure.dpi": 100,
        }
    )


def iv_figure(
    curves: IVCurves, i: int = 0, *, title: str = "", series_resistance_ohm_um2: float = 0.0
):
    """J(V) with the first NDR peak and its valley marked: linear (kA/cm²) and log (A/cm²) panels.

    The drawn curve passes through the refined peak and valley, so the
    markers sit on it; a valley on the last bias of the sweep is marked as
    bounded by the sweep (the true valley lies beyond it). With a series
    resistance the same current is also drawn against the terminal bias
    V + J R (dashed), the bias a measurement reports; the marks and figures of
    merit stay on the intrinsic curve.

    Parameters
    ----------
    curves
        The sweep (:class:`wellwright.physics.iv.IVCurves`).
    i
        Which stack of the batch.
    title
        Figure title.
    series_resistance_ohm_um2
        Specific series resistance; 0 draws the intrinsic curve only.
    """
    style()
    fig, (ax, lx) = plt.subplots(
        2, 1, figsize=(6.4, 6.4), sharex=True, gridspec_kw={"height_ratios": [3, 2]}
    )
    m: dict[str, Any] = curves.metrics_of(i)  # None where undefined, checked below
    v, j = curves.curve_of(i)  # with the biases computed beyond the end or between points
    # computed beyond the sweep to find the valley (points added between the sweep's, about
    # a resonance narrower than its spacing, are no extension)
    beyond_end = bool(np.any(v > curves.bias_v[-1]))
    extended = beyond_end or bool(np.any(v < curves.bias_v[0]))
    marks = _peak_valley_marks(m)
    higher = higher_peak_beyond_valley(
        v,
        j,
        peak_current_a_cm2=m["peak_current_density_a_cm2"],
        valley_voltage_v=m["valley_voltage_v"],
    )
    v, j = _through_marks(v, j, marks)
    for axis, scale in ((ax, 1e-3), (lx, 1.0)):
        _draw_iv_panel(
            axis, v, j, marks, scale=scale, linear=axis is ax, r_ohm_um2=series_resistance_ohm_um2
        )
    if extended:
        end = float(curves.bias_v[-1] if beyond_end else curves.bias_v[0])
        for axis in (ax, lx):
            axis.axvline(end, ls=":", color="0.45", lw=1, label="sweep end" if axis is ax else None)
    if marks:
        ax.annotate(
            _peak_valley_text(m, extended, series_resistance_ohm_um2) + _higher_peak_note(higher),
            xy=(0.03, 0.97),
            xycoords="axes fraction",
            va="top",
            fontsize=9,
            bbox={"boxstyle": "round", "fc": "white", "ec": "0.7"},
        )
    else:
        ax.text(0.03, 0.95, "no NDR in this sweep", transform=ax.transAxes, va="top")
    _iv_axes(ax, lx, j, title=title, r_ohm_um2=series_resistance_ohm_um2)
    fig.align_ylabels()
    fig.tight_layout()
    return fig


def _peak_valley_marks(m: dict) -> list[tuple[str, float, float]]:
    """``(name, bias_v, current_density_a_cm2)`` of the first NDR peak and its valley, the
    current with the sign of the bias as on the curve (the figures of merit are magnitudes);
    none without NDR."""
    marks = []
    if m["peak_voltage_v"] is not None:
        for name in ("peak", "valley"):
            v = m[f"{name}_voltage_v"]
            marks.append((name, v, float(np.sign(v)) * m[f"{name}_current_density_a_cm2"]))
    return marks


def _through_marks(
    v: np.ndarray, j: np.ndarray, marks: list[tuple[str, float, float]]
) -> tuple[np.ndarray, np.ndarray]:
    """The curve with the refined peak and valley inserted in bias order, so the markers
    sit on it."""
    if not marks:
        return v, j
    extra_v = np.array([x for _, x, _ in marks])
    extra_j = np.array([y for _, _, y in marks])
    order = np.argsort(np.concatenate([v, extra_v]), kind="stable")
    return np.concatenate([v, extra_v])[order], np.concatenate([j, extra_j])[order]


def _draw_iv_panel(
    axis,
    v: np.ndarray,
    j: np.ndarray,
    marks: list[tuple[str, float, float]],
    *,
    scale: float,
    linear: bool,
    r_ohm_um2: float,
) -> None:
    """One panel of the I-V figure: the curve, the curve at the terminals (with a series
    resistance) and the peak and valley marks.

    Parameters
    ----------
    axis
        Matplotlib axes to draw on.
    v
        Intrinsic bias, V.
    j
        Current density, A/cm², signed.
    marks
        ``(name, bias_v, current_density_a_cm2)`` of the peak and valley (:func:`iv_figure`).
    scale
        Factor from A/cm² to the panel's unit (linear panel only).
    linear
        The linear panel (labels the legend entries); else the log panel of ``|J|``.
    r_ohm_um2
        Specific series resistance, Ω µm²; 0: no terminal curve.
    """
    y = j * scale if linear else np.where(j != 0, np.abs(j), np.nan)
    axis.plot(v, y, color=PALETTE["blue"], lw=2, label="intrinsic" if r_ohm_um2 > 0 else "current")
    if r_ohm_um2 > 0:
        axis.plot(
            external_bias_v(v, j, series_resistance_ohm_um2=r_ohm_um2),
            y,
            color=PALETTE["blue"],
            lw=1.2,
            ls="--",
            label=f"at the terminals ({r_ohm_um2:g} Ω µm²)" if linear else None,
        )
    for (name, x, yv), marker, color in zip(marks, ("o", "s"), ("vermillion", "green")):
        axis.plot(
            x,
            yv * scale if linear else abs(yv),
            marker,
            ms=9,
            mfc="none",
            mec=PALETTE[color],
            mew=2,
            clip_on=False,
            zorder=5,
            label="first NDR peak" if name == "peak" else "its valley",
        )


def _iv_axes(ax, lx, j: np.ndarray, *, title: str, r_ohm_um2: float) -> None:
    """Limits, labels, legend and title of the I-V figure's linear (``ax``) and log (``lx``)
    panels; ``j`` the drawn current density, A/cm²."""
    jk = j / 1e3
    top = float(np.nanmax(jk)) if np.isfinite(jk).any() else 1.0
    low = float(np.nanmin(jk)) if np.isfinite(jk).any() else 0.0
    span = max(top - min(low, 0.0), 1e-12)
    ax.set_ylim(min(low, 0.0) - 0.04 * span, top + 0.55 * span)  # room for the text box
    ax.set_ylabel("current density (kA/cm²)")
    ax.legend(loc="upper right", fontsize=9)
    ax.set_title(title or "I-V")
    positive = np.abs(j)[np.abs(j) > 0]
    if positive.size:
        lx.set_yscale("log")
        lx.set_ylim(max(positive.min() / 3, positive.max() * 1e-7), positive.max() * 3)
    lx.set_ylabel("|current density| (A/cm², log)")
    lx.set_xlabel(
        "bias (V): intrinsic (solid), at the terminals V + J R (dashed)"
        if r_ohm_um2 > 0
        else "bias (V)"
    )


def _peak_valley_text(m: dict, extended: bool, series_resistance_ohm_um2: float) -> str:
    """The I-V figure's box: Jp and Vp (and Vp at the terminals with a series resistance),
    Jv and Vv (as bounds when the valley is bounded by the sweep) and the PVCR."""
    bounded = m.get("valley_bounded_by_sweep") == 1.0
    valley_text = (
        f"$J_v$ ≤ {m['valley_current_density_a_cm2'] / 1e3:.3g} kA/cm² at "
        f"{m['valley_voltage_v'] * 1e3:.0f} mV, the last bias\ncomputed: the valley lies beyond"
        if bounded
        else f"$J_v$ = {m['valley_current_density_a_cm2'] / 1e3:.3g} kA/cm² at "
        f"{m['valley_voltage_v'] * 1e3:.0f} mV"
    )
    pvcr = (
        f"PVCR {'≥' if bounded else '='} {m['pvcr']:.1f}"
        if m["pvcr"] is not None
        else "PVCR undefined (valley current ≤ 0)"
    )
    beyond = "\n(continued past the sweep end)" if extended else ""
    terminal = ""
    if series_resistance_ohm_um2 > 0:
        vp_terminal = float(
            external_bias_v(
                m["peak_voltage_v"],
                np.sign(m["peak_voltage_v"]) * m["peak_current_density_a_cm2"],
                series_resistance_ohm_um2=series_resistance_ohm_um2,
            )
        )
        terminal = f",\n{vp_terminal * 1e3:.0f} mV at the terminals"
    return (
        f"first NDR peak: $J_p$ = {m['peak_current_density_a_cm2'] / 1e3:.3g} kA/cm² at "
        f"{m['peak_voltage_v'] * 1e3:.0f} mV{terminal}\n{valley_text}\n{pvcr}{beyond}"
        + _bistable_note(m)
    )


def _higher_peak_note(higher: tuple[float, float] | None) -> str:
    """A line for the I-V box where a higher clear NDR peak follows the first one's valley."""
    if higher is None:
        return ""
    return f"\nhigher peak after it: {higher[1] / 1e3:.3g} kA/cm² at {higher[0] * 1e3:.0f} mV"


def _bistable_note(m: dict) -> str:
    """A line for the I-V box where the self-consistent I-V is bistable past the peak."""
    if not (m.get("bistable_window_v") or 0.0) > 0.0:
        return ""
    return (
        f"\nbistable over {'≥' if m.get('bistable_window_to_sweep_end') == 1.0 else ''}"
        f"{m['bistable_window_v'] * 1e3:.2g} mV past the peak\n(up sweep's "
        f"peak {m['peak_current_density_up_a_cm2'] / 1e3:.3g} kA/cm²)"
    )


def _slice_edges_nm(profile) -> tuple[np.ndarray, np.ndarray]:
    """Left and right edge of each slice of the profile, nm, emitter interface at 0."""
    right = np.cumsum(profile.width_nm)
    left = right - profile.width_nm
    origin = left[np.argmax(profile.layer_index == 1)]
    return left - origin, right - origin


def _layer_spans(profile) -> list[tuple[float, float, int]]:
    """``(z0, z1, layer)`` of each interior layer from the profile's slices, emitter interface at 0."""
    left, right = _slice_edges_nm(profile)
    li = profile.layer_index
    spans = []
    for idx in range(1, int(li.max())):
        where = np.nonzero(li == idx)[0]
        spans.append((float(left[where[0]]), float(right[where[-1]]), idx))
    return spans


def _first_contact(biases_v) -> str:
    """What the stack's first layer is at these biases, for the axes measured from it: the
    emitter in forward bias, the collector in reverse (electrons then enter from the last
    layer)."""
    b = np.asarray(biases_v, float)
    if np.all(b >= 0):
        return "emitter"
    return "collector (layer 1)" if np.all(b < 0) else "layer 1"


def band_diagram_figure(stack: Stack, bias_v: float, *, title: str = ""):
    """Conduction-band edges at ``bias_v`` (Gamma; X and L dashed) with resonances and Fermi levels.

    Parameters
    ----------
    stack
        The design.
    bias_v
        Bias, V.
    title
        Figure title; empty: a default.
    """
    style()
    table = stack.table()
    profile = band_profile(table, [bias_v], model=stack.model).take((0, 0))
    edge = profile.edge_ev
    spans = _layer_spans(profile)
    bounds = _slice_edges_nm(profile)[1][:-1]  # slice edges, 0 = emitter interface
    length = spans[-1][1]
    fig, ax = plt.subplots(figsize=(7.0, 5.2))
    xs = np.concatenate(
        [[float(bounds[0]) - CONTACT_DRAW_NM], bounds, [float(bounds[-1]) + CONTACT_DRAW_NM]]
    )
    _draw_band_edges(ax, stack, profile, xs)
    active = profile.layer_index[1:-1]
    top = float(edge[1:-1][(active > 0) & (active < profile.layer_index.max())].max())
    emitter_edge = stack.layers[0].conduction_band_ev
    barriers = [
        (z0, z1)
        for z0, z1, idx in spans
        if stack.layers[idx].conduction_band_ev > emitter_edge + 0.05
    ]
    _draw_layers(ax, stack, spans, barriers)
    mu_e, mu_c = (float(x[0]) for x in contact_fermi_levels_ev(table))
    ax.hlines(mu_e, xs[0], 0, colors=PALETTE["orange"], linestyles="--", lw=2, label="Fermi levels")
    ax.hlines(edge[-1] + mu_c, length, xs[-1], colors=PALETTE["orange"], linestyles="--", lw=2)
    _draw_resonances(ax, profile, barriers, top=top, length_nm=length)
    first = _first_contact([bias_v])
    ax.set_xlabel(f"position from the {first} interface (nm)")
    ax.set_ylabel(f"energy from the {first} band edge (eV)")
    ax.set_xlim(max(xs[0], -25.0), min(xs[-1], length + 35.0))  # the active region, some contact
    ax.set_ylim(min(float(edge.min()), 0.0) - 0.1, top * 1.15 + 0.1)
    # below the axes: the emitter side now carries the X and L edges
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=3, fontsize=8, frameon=False)
    model = "linear drop" if stack.model.electrostatics == "linear" else "self-consistent"
    ax.set_title(title or f"band diagram at {bias_v * 1e3:.0f} mV ({model})")
    return fig


def _draw_band_edges(ax, stack: Stack, profile, xs: np.ndarray) -> None:
    """The Gamma edge (solid) and the X and L edges (dashed, where defined) as steps over the
    slice edges ``xs`` (nm; the contacts drawn flat beyond)."""

    def steps(e: np.ndarray) -> np.ndarray:
        return np.concatenate([[e[0]], e[1:-1], [e[-1], e[-1]]])

    edge = profile.edge_ev
    ax.step(
        xs, steps(edge), where="post", color=PALETTE["black"], lw=1.8, label="Γ edge (transport)"
    )
    x_edge, l_edge = indirect_edges_ev(stack, profile)
    for valley_edge, name, color, dash in (
        (x_edge, "X", "green", "--"),
        (l_edge, "L", "purple", ":"),
    ):
        if np.isfinite(valley_edge).any():
            ax.step(
                xs,
                steps(valley_edge),
                where="post",
                color=PALETTE[color],
                ls=dash,
                lw=1.3,
                label=f"{name} edge (no current modelled)",
            )


def _draw_layers(
    ax,
    stack: Stack,
    spans: list[tuple[float, float, int]],
    barriers: list[tuple[float, float]],
) -> None:
    """Shade the barriers and name each interior layer and its material on a top axis (one
    rotated line per layer, above the plot, so thin neighbours and the title stay apart)."""
    for z0, z1, _ in spans:
        if (z0, z1) in barriers:
            ax.axvspan(z0, z1, color=PALETTE["sky"], alpha=0.25, lw=0)
    names = ax.secondary_xaxis("top")
    names.set_xticks(
        [0.5 * (z0 + z1) for z0, z1, _ in spans],
        labels=[f"{stack.layers[i].name} ({stack.layers[i].label})" for _, _, i in spans],
        rotation=90,
        fontsize=7,
    )
    names.tick_params(length=0, pad=2)


def _draw_resonances(
    ax, profile, barriers: list[tuple[float, float]], *, top: float, length_nm: float
) -> None:
    """The four lowest resonance levels below ``top`` (the highest edge of the active region,
    eV; ``length_nm``: its length), each drawn over the slices between the first and the last
    barrier where it lies above the band edge (in each well it can live in, not across a
    barrier between them) and labelled with its energy and width.

    The lowest, not the tallest: in a stack of three barriers the lines that carry the
    current (190 and 255 meV at 30 mV on an InGaAs/AlAs one) are lower in ``T`` than the
    broad ones near the barriers' top, and the tallest four labelled a 550 meV line ``E1``
    (found by a fuzz run, 2026-12-05)."""
    edge = profile.edge_ev
    res = find_resonances(
        profile,
        energy_min_ev=max(0.0, float(edge[-1])) - 0.3,
        energy_max_ev=top,
        n_max=0,
        n_first=4,
    )
    left, right = _slice_edges_nm(profile)
    w0, w1 = (barriers[0][1], barriers[-1][0]) if len(barriers) >= 2 else (0.0, length_nm)
    inside = (left >= w0 - 1e-9) & (right <= w1 + 1e-9)
    label_z = (barriers[-1][1] if barriers else length_nm) + 0.4
    # labels at least this far apart (eV), each moved up from its level where two are near
    # (a 0.08 meV line 27 meV below the next one in reverse bias: the labels overlapped)
    gap, below = 0.045 * (top - float(np.min(edge))), -np.inf
    order = np.argsort(res.energy_ev)
    for n, k in enumerate([k for k in order if res.valid[k]], start=1):
        e_r, g = float(res.energy_ev[k]), float(res.width_ev[k])
        for a, b in _runs(inside & (edge < e_r)) or [(0, 0)]:
            z0, z1 = (left[a], right[b - 1]) if b > a else (w0, w1)  # (no allowed slice: all)
            ax.hlines(e_r, z0, z1, colors=PALETTE["vermillion"], lw=2)
        below = max(e_r, below + gap)
        ax.text(
            label_z,
            below,
            f"E{n} = {e_r * 1e3:.0f} meV, Γ = {_fmt_energy(g)}",
            fontsize=8,
            va="center",
            color=PALETTE["vermillion"],
            bbox={"fc": "white", "ec": "none", "alpha": 0.8, "pad": 0.5},  # over the X, L lines
        )
    if np.any(res.valid):
        ax.plot([], [], color=PALETTE["vermillion"], lw=2, label="resonances")


def _runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """``(start, stop)`` of each run of True in ``mask``."""
    d = np.diff(np.concatenate([[0], mask.astype(int), [0]]))
    return list(zip(np.nonzero(d == 1)[0].tolist(), np.nonzero(d == -1)[0].tolist()))


def _fmt_energy(value_ev: float) -> str:
    """A level's width in meV or µeV; below 0.1 µeV in eV (it printed as "0.0 µeV")."""
    if value_ev >= 1e-3:
        return f"{value_ev * 1e3:.2f} meV"
    if value_ev >= 1e-7:
        return f"{value_ev * 1e6:.1f} µeV"
    return f"{value_ev:.2g} eV"


def transmission_figure(stack: Stack, biases_v: list[float], *, title: str = ""):
    """T(E) on a log scale at each bias.

    Parameters
    ----------
    stack
        The design.
    biases_v
        Biases, V, one curve each (up to four colours).
    title
        Figure title; empty: "transmission".
    """
    style()
    table = stack.table()
    profile = band_profile(table, biases_v, model=stack.model)
    top = float(profile.edge_ev[0, 0, 1:-1].max())
    energy = np.linspace(1e-4, max(top * 1.3, 0.3), 4000)
    t = transmission(energy, profile=profile)[0]
    res = find_resonances(profile, energy_min_ev=0.0, energy_max_ev=energy[-1], n_max=10)
    fig, ax = plt.subplots(figsize=(6.4, 4.2))
    colors = [PALETTE["blue"], PALETTE["vermillion"], PALETTE["green"], PALETTE["purple"]]
    for b, (bias, color) in enumerate(zip(biases_v, colors)):
        # add the exact resonance peaks so narrow ones are drawn at full height
        e = np.concatenate([energy, res.energy_ev[0, b][res.valid[0, b]]])
        tt = np.concatenate([t[b], res.peak_transmission[0, b][res.valid[0, b]]])
        o = np.argsort(e)
        ax.semilogy(
            e[o] * 1e3, np.maximum(tt[o], 1e-30), color=color, lw=1.6, label=f"{bias * 1e3:.0f} mV"
        )
    ax.set_xlabel(f"energy from the {_first_contact(biases_v)} band edge (meV)")
    ax.set_ylabel("transmission T(E)")
    ax.set_ylim(bottom=max(1e-20, float(np.nanmin(np.maximum(t, 1e-20)))), top=2.0)
    ax.legend(title="bias")
    ax.set_title(title or "transmission")
    return fig


def iv_figures(
    stack: Stack, curves: IVCurves, out_dir, *, i: int = 0, prefix: str = "", label: str = ""
) -> dict[str, str]:
    """Write the three standard figures of one design; returns ``{name: path}``.

    Parameters
    ----------
    stack
        The design.
    curves
        Computed I-V curves.
    out_dir
        Folder the PNG files go to.
    i
        Index of the design in ``curves``.
    prefix
        Start of the file names.
    label
        Start of the titles (e.g. "rank 1"); empty: default titles.
    """
    from pathlib import Path

    from wellwright.optimize.shared.outputs import save_figure

    out = Path(out_dir)
    m = curves.metrics_of(i)
    # without an NDR peak the figures are drawn at mid-sweep, and say so (a fuzz run's designs
    # with no NDR had "conduction band at the peak, 500 mV")
    v_peak = m["peak_voltage_v"]
    peak = v_peak if v_peak is not None else float(curves.bias_v[-1]) / 2
    where = "at the peak" if v_peak is not None else "at mid-sweep (no NDR peak)"
    head = f"{label}: " if label else ""
    paths = {
        "iv": save_figure(
            iv_figure(
                curves,
                i,
                title=f"{head}I-V ({model_label(stack)})",
                series_resistance_ohm_um2=stack.device.series_resistance_ohm_um2,
            ),
            out / f"{prefix}iv.png",
        ),
        "band_diagram": save_figure(
            band_diagram_figure(
                stack,
                peak,
                title=f"{head}conduction band {where}, {peak * 1e3:.0f} mV" if label else "",
            ),
            out / f"{prefix}band_diagram.png",
        ),
        "transmission": save_figure(
            transmission_figure(stack, [0.0, peak], title=f"{head}transmission" if label else ""),
            out / f"{prefix}transmission.png",
        ),
    }
    return {k: str(v) for k, v in paths.items()}
