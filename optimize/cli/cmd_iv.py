"""``wellwright iv``: the I-V of one stack, its figures of merit and figures."""

from __future__ import annotations

import functools
import json
import sys
import warnings
from pathlib import Path

import numpy as np
from wellwright.optimize.cli.app import warning_lines
from wellwright.optimize.shared import names
from wellwright.optimize.shared.model_text import model_record
from wellwright.optimize.shared.outputs import (
    check_output_folder,
    json_ready,
    write_csv,
    write_json,
)
from wellwright.optimize.study.space import island_text
from wellwright.physics.errors import InputError
from wellwright.physics.iv import (
    BOUNDED_BY_SWEEP,
    METRIC_NAMES,
    VALLEY_BOUNDED,
    VALLEY_EXTENSION_FACTOR,
    external_bias_v,
    higher_peak_beyond_valley,
    metrics_branch,
    stack_iv,
)
from wellwright.physics.stack import load_stack, read_toml
from wellwright.physics.valleys import x_valley_issues, x_valley_message

MAX_POINTS = 2001
MAX_ABS_BIAS_V = 10.0


def register(sub) -> None:
    p = sub.add_parser(
        "iv",
        help="I-V curve, figures of merit and figures of one stack",
        description="Compute the I-V of a stack file with the model its [model] table sets "
        "(default: the Tsu-Esaki current plus the scattering-assisted channel, self-consistent "
        "electrostatics), its peak, valley and PVCR, and write iv.csv, metrics.json and three "
        "PNG figures.",
    )
    p.add_argument("stack", help="stack file (TOML)")
    p.add_argument(
        "--bias-min", type=float, default=0.0, metavar="V", help="first bias, V (default 0)"
    )
    p.add_argument(
        "--bias-max", type=float, default=1.0, metavar="V", help="last bias, V (default 1.0)"
    )
    p.add_argument(
        "--points", type=int, default=61, metavar="N", help="evenly spaced biases (default 61)"
    )
    p.add_argument("--out", metavar="DIR", help="output folder (default: <stack name>_iv)")
    p.add_argument("--json", action="store_true", help="print the results as JSON on stdout")
    p.add_argument("--no-figures", action="store_true", help="skip the PNG figures")
    p.set_defaults(func=run)


def check_sweep(bias_min: float, bias_max: float, points: int) -> np.ndarray:
    """The sweep's biases, or an InputError naming the option.

    Parameters
    ----------
    bias_min, bias_max
        First and last bias, V (``--bias-min``, ``--bias-max``), each within
        ``+-MAX_ABS_BIAS_V``, the last above the first.
    points
        Number of biases (``--points``), 2 to ``MAX_POINTS``.
    """
    for key, v in (("--bias-min", bias_min), ("--bias-max", bias_max)):
        if not np.isfinite(v) or abs(v) > MAX_ABS_BIAS_V:
            raise InputError(f"{v:g} outside [-{MAX_ABS_BIAS_V:g}, {MAX_ABS_BIAS_V:g}] V", key=key)
    if bias_max <= bias_min:
        raise InputError(f"must be above --bias-min ({bias_min:g} V)", key="--bias-max")
    if not 2 <= points <= MAX_POINTS:
        raise InputError(f"{points} outside [2, {MAX_POINTS}]", key="--points")
    return np.linspace(bias_min, bias_max, points)


def iv_record(stack, curves) -> dict:
    """The JSON record of ``wellwright iv``: biases, currents, metrics, device-level values.

    The curve is the sweep followed by the biases computed beyond its end where the
    valley fell on its last point (:func:`wellwright.physics.iv.sweep`);
    ``bounded_by_sweep`` lists the figures that are bounds because the valley was not
    reached even there (empty otherwise); ``higher_peak_beyond_valley`` a higher clear NDR
    peak of the swept curve after the first one's valley
    (:func:`wellwright.physics.iv.higher_peak_beyond_valley`), or None.

    Parameters
    ----------
    stack
        The stack.
    curves
        Its computed I-V curves (the first one is recorded).
    """
    bias, j = curves.curve_of(0)
    record = {
        "stack": stack.source,
        "model": model_record(stack),
        "temperature_k": stack.temperature_k,
        "bias_v": bias,
        "current_density_a_cm2": j,
        "metrics": curves.metrics_of(0),
    }
    m = record["metrics"]
    bounded = m.get(VALLEY_BOUNDED) == 1.0
    record["bounded_by_sweep"] = [k for k in BOUNDED_BY_SWEEP if bounded]
    higher = higher_peak_beyond_valley(
        bias,
        j,
        peak_current_a_cm2=m["peak_current_density_a_cm2"],
        valley_voltage_v=m["valley_voltage_v"],
    )
    record["higher_peak_beyond_valley"] = (
        None if higher is None else {"bias_v": higher[0], "current_density_a_cm2": higher[1]}
    )
    dev = stack.device
    if dev.series_resistance_ohm_um2 > 0:
        record["external_bias_v"] = external_bias_v(
            bias, j, series_resistance_ohm_um2=dev.series_resistance_ohm_um2
        )
        for name in ("peak", "valley"):
            v, jj = m[f"{name}_voltage_v"], m[f"{name}_current_density_a_cm2"]
            m[f"{name}_voltage_external_v"] = (
                None
                if v is None
                else float(  # (the figures of merit are magnitudes: the current's sign is V's)
                    external_bias_v(
                        v, np.sign(v) * jj, series_resistance_ohm_um2=dev.series_resistance_ohm_um2
                    )
                )
            )
    if dev.area_um2 is not None:
        record["current_ma"] = j * dev.area_um2 * 1e-8 * 1e3
        for name in ("peak", "valley"):
            jj = m[f"{name}_current_density_a_cm2"]
            m[f"{name}_current_ma"] = None if jj is None else jj * dev.area_um2 * 1e-5
    return json_ready(record)


def model_warnings(stack, metrics: dict, bias: np.ndarray) -> list[str]:
    """Plain-line warnings about what the model leaves out for this stack (X-valley current).

    Parameters
    ----------
    stack
        The stack.
    metrics
        Its figures of merit (the peak voltage is checked, else the sweep's end).
    bias
        The sweep's biases, V.
    """
    peak = metrics.get("peak_voltage_v")
    at, where = (peak, " (the peak)") if peak is not None else (float(bias[-1]), " (no peak)")
    message = x_valley_message(x_valley_issues(stack, at), at, where=where)
    return [message] if message else []


def fractional_layers(path: str | Path, stack) -> tuple[list[int], list[str]]:
    """Layers the file gives a fractional ``thickness_ml``, and one line on each
    saying how it is modelled (monolayer islands, :mod:`wellwright.physics.islands`).

    Parameters
    ----------
    path
        The stack file (read again for the thicknesses as given).
    stack
        The parsed stack.
    """
    raw = read_toml(path).get("layers", [])
    index, lines = [], []
    for i, (lay, given) in enumerate(zip(stack.layers, raw, strict=False)):
        t = given.get("thickness_ml") if isinstance(given, dict) else None
        if isinstance(t, (int, float)) and not float(t).is_integer():
            index.append(i)
            lines.append(f"layer {i + 1} '{lay.name}' at {t:g} ML: {island_text(t)}")
    return index, lines


def run(args) -> int:
    bias = check_sweep(args.bias_min, args.bias_max, args.points)
    with warnings.catch_warnings(record=True) as caught:  # kept for metrics.json, said at the end
        stack = load_stack(args.stack)
        out = check_output_folder(args.out if args.out else f"{Path(args.stack).stem}_iv")
        islands, island_lines = fractional_layers(args.stack, stack)
        curves = stack_iv(stack, bias, island_layers=islands)
        record = iv_record(stack, curves)
        own = model_warnings(stack, record["metrics"], bias)
    record["warnings"] = warning_lines([*(w.message for w in caught), *own])
    record["islands"] = island_lines
    cols = ["bias_v", "current_density_a_cm2"] + [
        k for k in ("external_bias_v", "current_ma") if k in record
    ]
    write_csv(out / "iv.csv", cols, zip(*(record[c] for c in cols)))
    write_json(
        out / "metrics.json",
        {
            "stack": stack.source,
            "model": record["model"],
            "temperature_k": stack.temperature_k,
            "metrics": record["metrics"],
            "higher_peak_beyond_valley": record["higher_peak_beyond_valley"],
            "warnings": record["warnings"],
            "islands": island_lines,
        },
    )
    if not args.no_figures:
        from wellwright.optimize.shared.figures import iv_figures

        iv_figures(stack, curves, out)
    if args.json:
        json.dump(record, sys.stdout, indent=2)
        print()
    else:
        _print_text(stack, record, bias)
        print(f"  results in {out}/")
    for line in record["warnings"]:  # printed by the command line after this output
        warnings.warn(line, stacklevel=1)
    return 0


def _print_text(stack, record: dict, bias: np.ndarray) -> None:
    """The I-V in words: the sweep, the model, the figures of merit and what bounds them
    (every figure through :mod:`wellwright.optimize.shared.names`)."""
    m = record["metrics"]
    print(f"{stack.source}: {len(bias)} biases from {bias[0]:g} to {bias[-1]:g} V")
    print(f"  model: {record['model']['label']}, {stack.temperature_k:g} K")
    _print_added_biases(np.asarray(record["bias_v"]), bias)
    for line in record["islands"]:
        print(f"  {line}")
    branch = metrics_branch(bias)
    if branch is None:
        print("  fewer than three biases of either polarity: no figures of merit (raise --points)")
        return
    if m["peak_current_density_a_cm2"] is None:
        print("  no negative differential resistance in this sweep")
        return
    both = np.any(bias > 0) and np.any(bias < 0)
    side = ("positive" if branch[1] > 0 else "negative") + " biases"
    print(
        f"  first NDR peak and its valley (of the {side}; the sweep's other polarity is drawn, "
        "not analysed: sweep it alone for its figures):"
        if both
        else "  first NDR peak and its valley:"
    )
    bound = bool(record["bounded_by_sweep"])
    for key in METRIC_NAMES:
        if key == VALLEY_BOUNDED:
            continue
        value = names.format_bound(key, m[key], bounded=bound, with_unit=True)
        print(f"  {names.words(key):<38} {value}")
    shown = functools.partial(names.format_value, with_unit=True)
    if m.get("peak_voltage_external_v") is not None:  # the biases above are the device's own
        terminal = [
            f"{what} {shown('peak_voltage_v', m[f'{what}_voltage_external_v'])}"
            for what in ("peak", "valley")
            if m.get(f"{what}_voltage_external_v") is not None
        ]
        print(
            "  the voltages above are across the layers; at the terminals, with the series "
            f"resistance ({stack.device.series_resistance_ohm_um2:g} ohm um^2): "
            + ", ".join(terminal)
        )
    if bound:
        print(
            f"  valley not reached: the current still falls at "
            f"{shown('valley_voltage_v', m['valley_voltage_v'])}, the last bias computed (sweep "
            f"extended to {VALLEY_EXTENSION_FACTOR:g} times its end), so the valley "
            "figures are bounds (≥, ≤: where the true value lies; '(valley bounded)': "
            "derived from one): raise --bias-max"
        )
    higher = record["higher_peak_beyond_valley"]
    if higher is not None:
        print(
            "  a higher NDR peak follows: "
            f"{shown('peak_current_density_a_cm2', higher['current_density_a_cm2'])} at "
            f"{shown('peak_voltage_v', higher['bias_v'])} (a sample of the sweep, not "
            "refined; the figures above are the first peak's)"
        )
    if (m.get("bistable_window_v") or 0.0) > 0.0:
        print(
            f"  bistable over {_at_least(m)}{shown('bistable_window_v', m['bistable_window_v'])}"
            " past the peak: an up sweep keeps the well's charge there (the curve is the down "
            "sweep's branch); the up sweep's peak "
            f"{shown('peak_current_density_up_a_cm2', m['peak_current_density_up_a_cm2'])} at "
            f"{shown('peak_voltage_up_v', m['peak_voltage_up_v'])}"
        )


def _at_least(m: dict) -> str:
    """'at least ' where the bistable window reaches the sweep's end (a lower bound)."""
    return "at least " if m.get("bistable_window_to_sweep_end") == 1.0 else ""


def _print_added_biases(computed: np.ndarray, bias: np.ndarray) -> None:
    """Say where the I-V computed biases beyond the user's: past the sweep's end (a valley
    not reached) or between its points (a resonance narrower than its spacing)."""
    inside = (computed > bias[0]) & (computed < bias[-1]) & ~np.isin(computed, bias)
    extended = len(computed) - len(bias) - int(inside.sum())
    if extended:
        print(
            f"  valley beyond the sweep end: {extended} more biases to "
            f"{computed[-1 if bias[-1] > 0 else 0]:g} V"
        )
    if inside.any():
        print(
            f"  a resonance narrower than the sweep's spacing: {int(inside.sum())} more "
            f"biases between {computed[inside].min():g} and {computed[inside].max():g} V"
        )
