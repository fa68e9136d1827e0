"""The overlay figure: measured and fitted I-V, linear and log current, with figures of merit."""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import Any

import matplotlib.pyplot as plt
import numpy as np
from wellwright.optimize.shared.figures import PALETTE, style
from wellwright.optimize.shared.outputs import save_figure

__all__ = ["overlay_figure"]

COLOURS = ("blue", "vermillion", "green", "purple", "orange", "sky")


def _fom_text(fom: dict[str, Any]) -> str:
    if fom.get("peak_current_density_a_cm2") is None:
        return "no NDR"
    return (
        f"Jp {fom['peak_current_density_a_cm2'] / 1e3:.1f} kA/cm$^2$ at {fom['peak_voltage_v']:.3f} V, "
        f"Jv {fom['valley_current_density_a_cm2'] / 1e3:.2f} kA/cm$^2$ at {fom['valley_voltage_v']:.3f} V, "
        f"PVCR {fom['pvcr']:.1f}"
    )


def overlay_figure(record: dict[str, Any], path: str | Path) -> Path:
    """Measured points and fitted curves, linear (left) and log |J| (right), peak and valley marked.

    Parameters
    ----------
    record
        The calibration record (``calibration.json``): its curves and figures of merit.
    path
        PNG file to write.
    """
    style()
    fig, axes = plt.subplots(1, 2, figsize=(12.0, 4.9))
    lines = []
    for k, (curve, fom) in enumerate(zip(record["curves"], record["figures_of_merit"])):
        c = PALETTE[COLOURS[k % len(COLOURS)]]
        name = Path(curve["source"]).name
        if curve.get("area_um2"):
            name += f", {curve['area_um2']:g} um$^2$"
        v, jm = np.asarray(curve["bias_v"]), np.asarray(curve["measured_a_cm2"])
        vf, jf = np.asarray(curve["fine_bias_v"]), np.asarray(curve["fine_fitted_a_cm2"])
        for ax, f in ((axes[0], lambda j: j / 1e3), (axes[1], np.abs)):
            tag = f": {name}" if len(record["curves"]) > 1 else ""  # one file: named below
            ax.plot(v, f(jm), "o", ms=4, mfc="none", color=c, label=f"measured{tag}")
            ax.plot(vf, f(jf), "-", lw=1.8, color=c, label=f"fitted{tag}")
            for which, marker in (("measured", "s"), ("fitted", "D")):
                m = fom[which]
                if m.get("peak_voltage_v") is None:
                    continue
                for key in ("peak", "valley"):
                    ax.plot(
                        m[f"{key}_voltage_v"],
                        f(np.sign(m[f"{key}_voltage_v"]) * m[f"{key}_current_density_a_cm2"]),
                        marker, ms=8, mfc="none" if which == "measured" else c, mec=PALETTE["black"],
                        zorder=5,
                    )  # fmt: skip
        text = f"{name}\n  measured: {_fom_text(fom['measured'])}\n  fitted:   {_fom_text(fom['fitted'])}"
        if fom.get("fitted_continuous"):
            text += f"\n  (fitted curve between the measured biases: {_fom_text(fom['fitted_continuous'])})"
        lines.append(text)
    lines += [
        textwrap.fill(f"warning: {w['text']}", 130, subsequent_indent="  ")
        for w in record["warnings"]
    ]
    axes[0].set_ylabel("current density (kA/cm$^2$)")
    axes[1].set_ylabel("|current density| (A/cm$^2$)")
    axes[1].set_yscale("log")
    for ax in axes:
        ax.set_xlabel("applied bias (V)")
    axes[0].legend(fontsize=8, loc="center right")  # clear of the peak and the valley
    axes[0].set_title(
        f"Measured and fitted I-V ({record['physics_model']['label']})\nsquares: measured "
        "peak/valley; diamonds: fitted, at the measured biases",
        fontsize=10,
        loc="left",
    )
    res = record["residual"]
    axes[1].set_title(
        f"log scale; scatter in ln J {res['scatter_ln_current']:.3f}", fontsize=10, loc="left"
    )
    fig.text(0.01, -0.02, "\n".join(lines), fontsize=8.5, family="monospace", va="top")
    fig.tight_layout()
    return save_figure(fig, path)
