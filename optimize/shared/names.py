"""One table of names: every figure of merit and growth parameter in words, with its trade unit.

The keys (``peak_current_density_a_cm2``, ``barrier1.thickness``) carry SI-ish
units and stay the machine names of JSON and CSV columns;
:data:`wellwright.physics.iv.METRIC_NAMES` is the list of metric keys. What a
person reads (the command line, figure axes, report tables, the units row of
a CSV) comes from here: words, the trade's unit, the factor from the key's
unit to it and a number format. Units are written with Unicode (kA/cm², µm²),
which matplotlib, HTML and CSV all show as is.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, replace
from typing import Any

__all__ = [
    "Quantity",
    "QUANTITIES",
    "quantity",
    "words",
    "unit",
    "label",
    "to_display",
    "format_value",
    "SIGNIFICANT_DIGITS",
    "format_bound",
    "typical",
    "parameter_words",
    "variable_label",
]


@dataclass(frozen=True)
class Quantity:
    """How a figure of merit is shown.

    ``factor`` converts the key's unit to ``unit``; ``typical`` is a magnitude
    of the quantity for an RTD in the key's unit (common practice), used only
    to scale a pushed objective that has no window.
    """

    words: str
    unit: str = ""
    factor: float = 1.0
    fmt: str = ".3g"
    typical: float = 1.0
    note: str = ""


#: Significant digits a shown value keeps at least (:func:`format_value`).
SIGNIFICANT_DIGITS = 3

#: Figures of merit: the keys of every sweep, the device quantities of a mesa and the
#: spec-failure reasons.
QUANTITIES: dict[str, Quantity] = {
    "peak_current_density_a_cm2": Quantity(
        "peak current density", "kA/cm²", 1e-3, ".1f", 1e5, "first NDR peak"
    ),
    "peak_voltage_v": Quantity("peak voltage", "mV", 1e3, ".0f", 0.5),
    "valley_current_density_a_cm2": Quantity("valley current density", "kA/cm²", 1e-3, ".3g", 1e4),
    "valley_voltage_v": Quantity("valley voltage", "mV", 1e3, ".0f", 0.8),
    "pvcr": Quantity("PVCR", "", 1.0, ".1f", 3.0, "peak-to-valley current ratio"),
    "delta_current_density_a_cm2": Quantity(
        "peak minus valley current density", "kA/cm²", 1e-3, ".1f", 1e5
    ),
    "delta_voltage_v": Quantity("valley minus peak voltage", "mV", 1e3, ".0f", 0.2),
    "rf_power_density_w_cm2": Quantity(
        "oscillator output power density", "µW/µm²", 1e-2, ".3g", 1e4, "(3/16) ΔJ ΔV"
    ),
    "ndr_conductance_s_cm2": Quantity(
        "negative differential conductance", "mS/µm²", 1e-5, ".3g", -1e6, "steepest in the NDR"
    ),
    "ndr_bias_v": Quantity("bias of the steepest NDR", "mV", 1e3, ".0f", 0.5),
    "capacitance_f_cm2": Quantity(
        "capacitance at the peak", "fF/µm²", 1e7, ".3g", 5e-7, "depletion approximation"
    ),
    "resonance_lifetime_s": Quantity(
        "resonance lifetime at the peak", "ps", 1e12, ".3g", 3e-13, "ħ/Γ"
    ),
    "transit_delay_s": Quantity("collector transit delay", "ps", 1e12, ".3g", 1e-13),
    "cutoff_frequency_hz": Quantity(
        "cutoff frequency", "GHz", 1e-9, ".0f", 5e11, "estimate from G, C, R_s, delays"
    ),
    "current_density_at_bias_a_cm2": Quantity(
        "current density at the stated bias", "kA/cm²", 1e-3, ".3g", 1e4, "computed at that bias"
    ),
    "valley_bounded_by_sweep": Quantity(
        "valley bounded by the sweep end",
        "",
        1.0,
        ".0f",
        1.0,
        "1: the current still falls at the last bias computed; valley figures are bounds",
    ),
    # the up sweep where the self-consistent I-V is bistable past the peak
    "peak_current_density_up_a_cm2": Quantity(
        "peak current density of the up sweep", "kA/cm²", 1e-3, ".1f", 1e5, "charged branch"
    ),
    "peak_voltage_up_v": Quantity("peak voltage of the up sweep", "mV", 1e3, ".0f", 0.5),
    "bistable_window_v": Quantity(
        "bistable window past the peak", "mV", 1e3, ".1f", 0.01, "0: single-valued"
    ),
    "bistable_window_to_sweep_end": Quantity(
        "bistable window reaching the sweep's end",
        "",
        1.0,
        ".0f",
        1.0,
        "1: the charged branch still holds at the last bias computed, where the check stops; "
        "the window is a lower bound",
    ),
    # device quantities of a mesa ([device] area_um2)
    "peak_current_ma": Quantity("peak current", "mA", 1.0, ".3g"),
    "valley_current_ma": Quantity("valley current", "mA", 1.0, ".3g"),
    "ndr_conductance_ms": Quantity("negative differential conductance", "mS", 1.0, ".3g"),
    "capacitance_ff": Quantity("capacitance", "fF", 1.0, ".3g"),
    "rf_power_uw": Quantity("oscillator output power", "µW", 1.0, ".3g"),
    "current_at_bias_ma": Quantity("current at the stated bias", "mA", 1.0, ".3g"),
    # reasons a sample fails
    "no_ndr": Quantity("no NDR in the sweep"),
    "solve_failed": Quantity("self-consistent solve did not converge"),
    "pass": Quantity("pass or fail"),
}

#: Growth-parameter kinds (the suffix of ``<layer or source>.<kind>``) in words, with unit.
GROWTH_KINDS = {
    "thickness_ml": ("thickness error", "ML"),
    "thickness": ("thickness error", "ML"),
    "flux": ("cell flux", "relative"),
    "flux_drift": ("cell flux drift over the run", "relative"),
    "rate": ("growth rate", "relative"),
    "x": ("composition x", "absolute"),
    "doping": ("doping", "relative"),
    "radius_mm": ("radius", "mm"),
}
#: Design-variable keys (the suffix of ``<layer>.<key>``) in words, with unit.
VARIABLE_KEYS = {
    "thickness_ml": ("thickness", "ML"),
    "thickness_nm": ("thickness", "nm"),
    "x": ("composition x", ""),
    "doping_cm3": ("doping", "cm⁻³"),
}


#: Keys of a quantity at a stated bias (``current_density_at_0.3_v_a_cm2``,
#: ``current_at_0.3_v_ma``: :func:`wellwright.physics.iv.at_bias_key`) -> their row.
AT_BIAS_KEY = re.compile(
    r"^(current_density|current)_at_(?P<bias>[-+0-9.e]+)_v_(?P<unit>a_cm2|ma)$"
)


def quantity(key: str) -> Quantity:
    """The row of ``key``; an unknown key gets its own name in words and no unit.

    A key at a stated bias takes the row of ``current_density_at_bias_a_cm2`` or
    ``current_at_bias_ma`` with the bias in its words ("current density at 0.3 V").
    """
    found = QUANTITIES.get(key)
    if found is not None:
        return found
    at = AT_BIAS_KEY.match(key)
    if at is not None:
        row = QUANTITIES[
            "current_density_at_bias_a_cm2" if at["unit"] == "a_cm2" else "current_at_bias_ma"
        ]
        return replace(row, words=row.words.replace("the stated bias", f"{at['bias']} V"))
    return Quantity(key.replace("_", " "))


def words(key: str) -> str:
    """The quantity in words, without unit (``peak_current_density_a_cm2``: "peak current density")."""
    return quantity(key).words


def unit(key: str) -> str:
    """The trade unit shown for ``key`` ("" for a ratio)."""
    return quantity(key).unit


def label(key: str, *, dimensionless: str = "") -> str:
    """Words and unit for an axis or a column: "peak current density (kA/cm²)".

    Parameters
    ----------
    key
        Name of the quantity in the names table.
    dimensionless
        Shown in brackets for a quantity without unit; empty: nothing.
    """
    q = quantity(key)
    u = q.unit or dimensionless
    return f"{q.words} ({u})" if u else q.words


def to_display(key: str, value: Any) -> float | None:
    """``value`` (in the key's unit) in the trade unit; None for None or NaN.

    Parameters
    ----------
    key
        Name of the quantity in the names table.
    value
        Value in the key's unit, or None.
    """
    if value is None:
        return None
    v = float(value)
    return None if math.isnan(v) else v * quantity(key).factor


def format_value(key: str, value: Any, *, with_unit: bool = False) -> str:
    """``value`` in the trade unit with the quantity's format; "-" when missing.

    Where the format would round away any of the first :data:`SIGNIFICANT_DIGITS`
    significant digits (a small current in kA/cm², a cutoff below 1 GHz), the value is
    shown with that many significant digits instead.

    Parameters
    ----------
    key
        Name of the quantity in the names table.
    value
        Value in the key's unit, or None.
    with_unit
        Append the trade unit.
    """
    v = to_display(key, value)
    if v is None:
        return "-"
    text = format(v, quantity(key).fmt)
    short = format(v, f".{SIGNIFICANT_DIGITS}g")
    if format(float(text), f".{SIGNIFICANT_DIGITS}g") != short:  # "0.0" for 0.0268 kA/cm²
        text = short
    u = quantity(key).unit
    return f"{text} {u}" if with_unit and u else text


def format_bound(key: str, value: Any, *, bounded: bool, with_unit: bool = False) -> str:
    """:func:`format_value`, marked where the valley was bounded by the sweep end.

    When bounded and ``key`` is one of :data:`wellwright.physics.iv.BOUNDED_BY_SWEEP`:
    "≥ 476" (the true value is at least this), "≤ 33.1" (at most), or "265 (valley bounded)"
    (derived from a bound, either way).

    Parameters
    ----------
    key
        Name of the quantity in the names table.
    value
        Value in the key's unit, or None.
    bounded
        Whether the valley was bounded by the sweep end for this design.
    with_unit
        Append the trade unit.
    """
    from wellwright.physics.iv import BOUNDED_BY_SWEEP

    text = format_value(key, value, with_unit=with_unit)
    if not bounded or key not in BOUNDED_BY_SWEEP or text == "-":
        return text
    side = BOUNDED_BY_SWEEP[key]
    return {"lower": f"≥ {text}", "upper": f"≤ {text}"}.get(side, f"{text} (valley bounded)")


def typical(key: str) -> float:
    """Typical magnitude of ``key`` in its own unit (1 when not listed)."""
    return quantity(key).typical


def parameter_words(name: str) -> str:
    """A growth parameter in words with its unit: ``barrier1.thickness`` -> "barrier1 thickness error (ML)".

    ``AlAs.rate`` -> "AlAs growth rate (relative)"; an unknown kind keeps its
    name with the dot as a space.
    """
    owner, _, kind = name.rpartition(".")
    if kind in GROWTH_KINDS and owner:
        text, u = GROWTH_KINDS[kind]
        return f"{owner} {text} ({u})"
    return name.replace(".", " ")


def variable_label(name: str) -> str:
    """A design variable in words with unit: ``barrier1.thickness_ml`` -> "barrier1 thickness (ML)"."""
    owner, _, key = name.rpartition(".")
    if key in VARIABLE_KEYS and owner:
        text, u = VARIABLE_KEYS[key]
        return f"{owner} {text} ({u})" if u else f"{owner} {text}"
    return name.replace(".", " ")
