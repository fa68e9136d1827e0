"""The calibration record (calibration.json), the calibrated stack file and the grower's sentence."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from wellwright.optimize.calibrate.fit import (
    CORRELATED,
    PRIOR_DOMINATED,
    UNITS_FACTOR,
    Z95,
    FitResult,
    units_hint,
)
from wellwright.optimize.calibrate.problem import FitParameter, Problem
from wellwright.optimize.shared.model_text import model_record
from wellwright.physics.iv import locate_peak_valley

__all__ = [
    "calibration_record",
    "identifiability",
    "grower_sentence",
    "calibrated_toml",
    "figures_of_merit",
    "fit_warnings",
    "CalibrationWarning",
]

GROWTH_KINDS = ("thickness", "rate", "x", "doping")
FOM_KEYS = (
    ("peak_current_density_a_cm2", "Jp", "kA/cm^2", 1e-3),
    ("peak_voltage_v", "Vp", "V", 1.0),
    ("valley_current_density_a_cm2", "Jv", "kA/cm^2", 1e-3),
    ("valley_voltage_v", "Vv", "V", 1.0),
    ("pvcr", "PVCR", "", 1.0),
)
#: A fitted value within this fraction of its range's width from a bound is at the bound.
BOUND_TOLERANCE = 1e-3
#: Bounds that are physical limits, not a choice of range, by kind: a value there (no series
#: resistance, no valley channel, a binary alloy) is a result, not a sign of a range too narrow.
PHYSICAL_LIMITS = {"resistance": (0.0,), "model": (0.0,), "x": (0.0, 1.0)}
#: Scatter in ln J above which the fit is poor: the fitted curve misses a typical measured point
#: by more than a factor 1.35, far beyond a probe's noise of a few % (the invented wafer, 2 % noise,
#: fits to 0.019), so the model does not reproduce the curve's shape and the values fitted to
#: it are not growth errors to act on.
POOR_FIT_SCATTER = 0.3


class CalibrationWarning(UserWarning):
    """A calibration that ran but whose result may not be trusted (:func:`fit_warnings`)."""


def figures_of_merit(bias_v: np.ndarray, current: np.ndarray) -> dict[str, float | None]:
    """Jp, Vp, Jv, Vv, PVCR of one sampled curve (first NDR peak of the forward branch,
    else the reverse one; magnitudes), at the sampled points.

    Parameters
    ----------
    bias_v
        Sampled biases, V.
    current
        Current densities there, A/cm^2.
    """
    out: dict[str, float | None] = {k: None for k, *_ in FOM_KEYS}
    for sign in (1.0, -1.0):
        side = np.nonzero(sign * bias_v > 0)[0]
        if side.size < 3:
            continue
        side = side[np.argsort(np.abs(bias_v[side]))]
        v, j = np.abs(bias_v[side]), np.abs(current[side])
        ip, iv = locate_peak_valley(v, j[None, :])
        if ip[0] < 0:
            continue
        out.update(
            peak_current_density_a_cm2=float(j[ip[0]]),
            peak_voltage_v=float(sign * v[ip[0]]),
            valley_current_density_a_cm2=float(j[iv[0]]),
            valley_voltage_v=float(sign * v[iv[0]]),
            pvcr=float(j[ip[0]] / j[iv[0]]) if j[iv[0]] > 0 else None,
        )
        return out
    return out


def identifiability(problem: Problem, result: FitResult) -> list[dict[str, Any]]:
    """Notes on what the data cannot separate.

    - two parameters correlated beyond ``CORRELATED``: not separable; for two
      thicknesses the sum (negative correlation) or the difference (positive)
      is what the data fix, given with its interval;
    - a parameter whose posterior sigma is above ``PRIOR_DOMINATED`` of its
      prior sigma: the data say little about it, its value is mostly its prior.

    Parameters
    ----------
    problem
        The fitted problem.
    result
        The fit (values, standard deviations, correlation).
    """
    notes: list[dict[str, Any]] = []
    params = problem.parameters
    corr = result.correlation
    for a in range(len(params)):
        for b in range(a + 1, len(params)):
            rho = float(corr[a, b])
            if abs(rho) < CORRELATED:
                continue
            pa, pb = params[a], params[b]
            note: dict[str, Any] = {
                "kind": "not_separable",
                "parameters": [pa.name, pb.name],
                "correlation": rho,
            }
            text = (
                f"{pa.name} and {pb.name} are not separable from these data "
                f"(correlation {rho:+.2f})"
            )
            if pa.kind == pb.kind == "thickness":
                s = 1.0 if rho < 0 else -1.0
                value = result.values[a] + s * result.values[b]
                var = (
                    result.sd[a] ** 2
                    + result.sd[b] ** 2
                    + 2 * s * rho * result.sd[a] * result.sd[b]
                )
                half = Z95 * float(np.sqrt(max(var, 0.0)))
                what = "sum" if s > 0 else "difference"
                note.update(
                    combination=what, value=value, ci_low=value - half, ci_high=value + half
                )
                text += f"; their {what} is recovered: {value:.2f} ML ({value - half:.2f} to {value + half:.2f}, 95 %)"
            note["text"] = text
            notes.append(note)
    for j, p in enumerate(params):
        if p.sigma > 0:
            prior_sd = p.sigma * (1.0 if p.kind != "doping" else p.nominal)
            if p.kind == "rate":
                prior_sd = p.sigma
            if result.sd[j] > PRIOR_DOMINATED * prior_sd:
                notes.append(
                    {
                        "kind": "prior_dominated",
                        "parameters": [p.name],
                        "text": f"{p.name}: the data say little; its value is mostly the prior "
                        f"(posterior sigma {result.sd[j]:.3g} against prior {prior_sd:.3g})",
                    }
                )
    for alt in result.alternatives:
        if alt["ambiguous"]:
            diffs = [
                f"{n} {alt['values'][n]:.2f}"
                for n, p in zip(problem.names, params)
                if p.kind == "thickness"
            ]
            notes.append(
                {
                    "kind": "ambiguous",
                    "parameters": [p.name for p in params if p.kind == "thickness"],
                    "delta_chi2": alt["delta_chi2"],
                    "text": "another whole-monolayer solution fits almost as well "
                    f"(chi-square larger by {alt['delta_chi2']:.1f}): {', '.join(diffs)}",
                }
            )
    return notes


def _at_bound(p: FitParameter, dev: float) -> str | None:
    """``"lower"`` or ``"upper"`` when the deviation ``dev`` lies within ``BOUND_TOLERANCE`` of
    that bound of ``p``'s range, unless the bound is a physical limit (``PHYSICAL_LIMITS``)."""
    for side, bound in (("lower", p.lower), ("upper", p.upper)):
        limit = any(abs(p.nominal + bound - v) < 1e-9 for v in PHYSICAL_LIMITS.get(p.kind, ()))
        if abs(dev - bound) <= BOUND_TOLERANCE * (p.upper - p.lower) and not limit:
            return side
    return None


def _rows(problem: Problem, result: FitResult) -> list[dict[str, Any]]:
    rows = []
    for j, p in enumerate(problem.parameters):
        v, sd = float(result.values[j]), float(result.sd[j])
        sd_lo = sd if result.sd_low is None else float(result.sd_low[j])
        sd_hi = sd if result.sd_high is None else float(result.sd_high[j])
        lo, hi = v - Z95 * sd_lo, v + Z95 * sd_hi
        if p.kind == "resistance" or p.kind == "model":
            lo = max(lo, p.nominal + p.lower)
        ends = []
        for bound in (p.lower, p.upper):  # the range in the reported unit
            dev = result.dev.copy()
            dev[j] = bound
            ends.append(float(problem.values(dev[None, :])[0, j]))
        rows.append(
            {
                "name": p.name,
                "nominal": p.nominal,
                "value": v,
                "ci_low": lo,
                "ci_high": hi,
                "unit": p.unit,
                "sd": sd,
                "range": ends,
                "at_bound": _at_bound(p, float(result.dev[j])),
            }
        )
    return rows


def fit_warnings(result: FitResult, rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Why a fit that ran may not be trusted, one line of ``text`` each.

    - a fitted parameter at a bound of its range (``at_bound``): the data may need a value
      beyond it;
    - the scatter in ln J above ``POOR_FIT_SCATTER``: the model does not reproduce the curve;
    - a sweep's largest current density more than ``UNITS_FACTOR`` from the nominal stack's
      (:func:`~wellwright.optimize.calibrate.fit.current_scale`): the units, most likely.

    Parameters
    ----------
    result
        The fit.
    rows
        Fitted parameter rows (``name``, ``value``, ``unit``, ``range``, ``at_bound``).
    """
    out: list[dict[str, Any]] = []
    for r in rows:
        if r["at_bound"]:
            lo, hi = r["range"]
            out.append(
                {
                    "kind": "at_bound",
                    "parameters": [r["name"]],
                    "text": f"{r['name']} = {r['value']:.5g} {r['unit']} is at its {r['at_bound']} "
                    f"bound (range {lo:.5g} to {hi:.5g}): the data may need a value beyond the "
                    "range; do not act on this fit",
                }
            )
    if result.scatter > POOR_FIT_SCATTER:
        out.append(
            {
                "kind": "poor_fit",
                "text": f"poor fit: scatter in ln J {result.scatter:.3g}, above "
                f"{POOR_FIT_SCATTER:g} (a typical point off by a factor "
                f"{math.exp(result.scatter):.3g}): the model does not reproduce this I-V and the "
                "fitted values are doubtful",
            }
        )
    for sc in result.scale:
        ratio = sc["measured_a_cm2"] / max(sc["nominal_a_cm2"], 1e-300)
        if 1 / UNITS_FACTOR <= ratio <= UNITS_FACTOR:
            continue
        times = f"{ratio:.3g} times" if ratio > 1 else f"1/{1 / ratio:.3g} of"
        out.append(
            {
                "kind": "units",
                "source": sc["source"],
                "text": f"{sc['source']}: the largest measured current density, "
                f"{sc['measured_a_cm2']:.3g} A/cm^2, is {times} the nominal stack's "
                f"({sc['nominal_a_cm2']:.3g}), more than growth errors give; "
                f"{units_hint(sc['column'])}",
            }
        )
    return out


def grower_sentence(rows: list[dict[str, Any]], problem: Problem) -> str:
    """What to tell the grower: the growth parameters whose 95 % interval excludes the nominal, largest first.

    Parameters
    ----------
    rows
        Fitted parameter rows (``name``, ``value``, ``nominal``, ``sd``, ``ci_low``,
        ``ci_high``).
    problem
        The fitted problem (the kind of each parameter).
    """
    kinds = {p.name: p.kind for p in problem.parameters}
    off = []
    for r in rows:
        kind = kinds[r["name"]]
        if kind not in GROWTH_KINDS or r["ci_low"] <= r["nominal"] <= r["ci_high"]:
            continue
        z = abs(r["value"] - r["nominal"]) / max(r["sd"], 1e-300)
        off.append((z, r, kind))
    if not off:
        return (
            "The growth matches the nominal stack within the 95 % intervals of this fit: "
            "no layer or source is shown to be off."
        )
    parts = []
    for _, r, kind in sorted(off, key=lambda t: -t[0]):
        obj, _, _ = r["name"].rpartition(".")
        fmt = {"thickness": ".2f", "rate": ".3f", "x": ".3f"}.get(kind, ".2e")
        ci = f"95 % interval {r['ci_low']:{fmt}} to {r['ci_high']:{fmt}}"
        if r.get("at_bound"):
            ci += f"; at the {r['at_bound']} bound of the fit's range"
        if kind == "thickness":
            d = r["value"] - r["nominal"]
            parts.append(
                f"layer {obj} grew {r['value']:.2f} ML against {r['nominal']:.3g} nominal "
                f"({d:+.2f} ML; {ci})"
            )
        elif kind == "rate":
            d = 100 * (r["value"] - 1.0)
            parts.append(
                f"the {obj} source ran {abs(d):.1f} % {'fast' if d > 0 else 'slow'} "
                f"(rate factor {r['value']:.3f}; {ci})"
            )
        elif kind == "x":
            parts.append(
                f"layer {obj} has composition {r['value']:.3f} against {r['nominal']:.3f} ({ci})"
            )
        else:
            parts.append(
                f"layer {obj} is doped {r['value']:.2e} cm^-3 against {r['nominal']:.2e} ({ci})"
            )
    return "Off from the nominal stack: " + "; ".join(parts) + "."


def calibration_record(
    problem: Problem, result: FitResult, *, command: dict[str, Any]
) -> dict[str, Any]:
    """The calibration.json record (plain data).

    Parameters
    ----------
    problem
        The fitted problem.
    result
        The fit.
    command
        The command's settings, stored as given.
    """
    rows = _rows(problem, result)
    warnings = fit_warnings(result, rows)
    grower = grower_sentence(rows, problem)
    if warnings:
        grower = "This fit cannot be trusted (see its warnings). " + grower
    fine = []
    for meas in problem.measurements:
        lo, hi = meas.bias_v[0], meas.bias_v[-1]
        fine.append(np.linspace(lo, hi, 401))
    pred = problem.predict(result.dev[None, :])
    curves, table = [], []
    fine_meas = [
        type(m)(m.source, v, np.ones(v.size), m.area_um2, m.temperature_k)
        for m, v in zip(problem.measurements, fine)
    ]
    fine_problem = _with_measurements(problem, fine_meas)
    fine_pred = fine_problem.predict(result.dev[None, :])
    for meas, p, v, fp in zip(problem.measurements, pred, fine, fine_pred):
        curves.append(
            {
                "source": meas.source,
                "area_um2": meas.area_um2,
                "temperature_k": meas.temperature_k,
                "bias_v": meas.bias_v,
                "measured_a_cm2": meas.current_density_a_cm2,
                "fitted_a_cm2": p[0],
                "fine_bias_v": v,
                "fine_fitted_a_cm2": fp[0],
            }
        )
        # like with like: the fitted curve at the measured biases (a sweep samples the top of a
        # peak that ends in a jump no better than its spacing); the continuous curve's own
        # figures beside them
        table.append(
            {
                "source": meas.source,
                "measured": figures_of_merit(meas.bias_v, meas.current_density_a_cm2),
                "fitted": figures_of_merit(meas.bias_v, p[0]),
                "fitted_continuous": figures_of_merit(v, fp[0]),
            }
        )
    model = {
        r["name"]: r["value"]
        for r, p in zip(rows, problem.parameters)
        if p.kind in ("model", "resistance", "offset", "rate")
    }
    return {
        "kind": "wellwright calibration",
        "stack": problem.source,
        "measured": [m.source for m in problem.measurements],
        "parameters": rows,
        "correlations": {"names": list(problem.names), "matrix": result.correlation},
        "model": model,
        # the physics the fit used: the stack's [model] with the fitted options
        "physics_model": model_record(problem.model_options(result.dev)),
        "residual": {
            "points": result.n_points,
            "scatter_ln_current": result.scatter,
            "chi2": result.chi2,
            "chi2_per_point": result.chi2 / max(result.n_points, 1),
        },
        "identifiability": identifiability(problem, result),
        "warnings": warnings,
        "alternatives": result.alternatives,
        "figures_of_merit": table,
        "grower": grower,
        "method": {
            "loss": "soft_l1 in ln current, f_scale 2 sigma; peak, NDR and valley regions weighted alike",
            "uncertainty": "Gauss-Newton covariance (J^T J)^-1 at the optimum, priors included; "
            "95 % intervals value +- 1.96 sd (a thickness's halves from the one-sided "
            "slopes where wider)",
            "multistart": f"{result.combos} whole-monolayer combinations and "
            f"{result.random_starts} random starts scored, {result.starts} local fits",
            "seed": result.seed,
            "model_evaluations": result.evaluations,
        },
        "command": command,
        "curves": curves,
    }


def _with_measurements(problem: Problem, measurements: list) -> Problem:
    from dataclasses import replace

    return replace(problem, measurements=tuple(measurements))


def calibrated_toml(problem: Problem, result: FitResult, *, note: str) -> str:
    """A stack file of the as-grown stack with the fitted model parameters.

    Thicknesses as the fit modelled them, so that ``wellwright iv`` on the file gives the
    fitted curve: the fitted layers in monolayers (a fractional value is monolayer islands in
    the fit and in every command), the others (spacers scaled by a source's rate) in nm, a
    uniform layer as in the fit. Compositions, doping,
    band-edge corrections (as ``conduction_band_ev`` of the layers), model
    options and the specific series resistance are written; an
    area-independent resistance is noted in a comment.

    Parameters
    ----------
    problem
        The fitted problem.
    result
        The fit.
    note
        Text written as comment lines at the top.
    """
    stack = problem.stack
    dev, vals = result.dev, dict(zip(problem.names, result.values))
    ml = problem.thickness_ml(dev[None, :])[0]
    table, _ = problem.tables(dev[None, :], continuous=True)
    lines = [f"# {line}" for line in note.splitlines()]
    lines += [f"temperature_k = {stack.temperature_k:g}"]
    if stack.substrate:
        lines.append(f'substrate = "{stack.substrate}"')
    model = problem.model_options(dev)
    lines += ["", "[model]"]
    for key, value in model.__dict__.items():
        lines.append(f"{key} = {_toml(value)}")
    r_spec = vals.get("series_resistance_ohm_um2", stack.device.series_resistance_ohm_um2)
    lines += ["", "[device]", f"series_resistance_ohm_um2 = {max(r_spec, 0.0):.6g}"]
    if stack.device.area_um2 is not None:
        lines.append(f"area_um2 = {stack.device.area_um2:g}")
    if "series_resistance_ohm" in vals:
        lines.append(
            f"# plus an area-independent {vals['series_resistance_ohm']:.4g} ohm (probes, lines)"
        )
    offsets = {
        p.layers: result.dev[j] for j, p in enumerate(problem.parameters) if p.kind == "offset"
    }
    n = len(stack.layers)
    for i, layer in enumerate(stack.layers):
        lines += ["", "[[layers]]", f'name = "{layer.name}"']
        if layer.material == "custom":
            lines += ['material = "custom"', f"mass_m0 = {layer.mass_m0:.6g}"]
            if layer.monolayer_nm:
                lines.append(f"monolayer_nm = {layer.monolayer_nm:.6g}")
        else:
            lines.append(f'material = "{layer.material}"')
            x = vals.get(f"{layer.name}.x", layer.x)
            if x is not None:
                lines.append(f"x = {x:.6g}")
        if 0 < i < n - 1:
            if i in problem.island_layers:  # as the fit took it: islands, as `iv` takes it
                whole = abs(ml[i] - round(ml[i])) < 5e-4  # no islands of 0 % of the area
                lines.append(f"thickness_ml = {round(ml[i]) if whole else f'{ml[i]:.4f}'}")
            else:  # a uniform layer in the fit (a rate-scaled spacer): its thickness in nm
                lines.append(f"thickness_nm = {table.thickness_nm[0, i]:.6g}")
        doping = table.doping_cm3[0, i]
        if doping > 0:
            lines.append(f"doping_cm3 = {doping:.6g}")
        if layer.material == "custom" or any(i in idx for idx in offsets):
            lines.append(f"conduction_band_ev = {table.edge_ev[0, i]:.6g}")
    return "\n".join(lines) + "\n"


def _toml(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'"{value}"'
    return f"{value:.6g}" if isinstance(value, float) else str(value)
