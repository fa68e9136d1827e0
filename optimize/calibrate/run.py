"""One calibration, end to end: read, validate, fit, write the files of the output folder.

Files (``--out DIR``): ``calibration.json`` (the record), ``calibrated.toml``
(the as-grown stack with the fitted model parameters), ``overlay.png``
(measured and fitted I-V), ``figures_of_merit.csv`` (measured vs fitted Jp,
Vp, Jv, Vv, PVCR), ``calibration.html`` (self-contained page with the
grower's sentence). Everything is validated before anything is written.
"""

from __future__ import annotations

import base64
import html
import warnings
from pathlib import Path
from typing import Any

from wellwright.optimize.calibrate.fit import run_fit
from wellwright.optimize.calibrate.measured import read_measured
from wellwright.optimize.calibrate.problem import build_problem
from wellwright.optimize.calibrate.record import (
    FOM_KEYS,
    CalibrationWarning,
    calibrated_toml,
    calibration_record,
)
from wellwright.optimize.shared.outputs import atomic_write_text, write_csv, write_json
from wellwright.physics.stack import read_toml

__all__ = ["calibrate", "write_outputs"]

CAUTION = (
    "The fit is only as good as the model: a calibrated model reproduces this wafer's I-V with "
    "the stated corrections; check it on a second wafer before a growth decision rests on it."
)


def calibrate(
    stack_path: str | Path,
    measured: list[str | Path],
    *,
    fit: list[str] | None = None,
    starts: int = 2,
    seed: int = 0,
    progress=None,
) -> tuple[Any, Any, dict[str, Any]]:
    """Read and fit; returns the problem, the fit result and the record (nothing written).

    Each of the record's ``warnings`` (a fit that may not be trusted) is also issued as a
    :class:`~wellwright.optimize.calibrate.record.CalibrationWarning`.

    Parameters
    ----------
    stack_path
        The stack (or study without ranges) file.
    measured
        Measured I-V files.
    fit
        ``--fit`` items; None: the default set.
    starts
        Largest number of local fits.
    seed
        Seed of the fit's random starts
        (:func:`~wellwright.optimize.calibrate.fit.run_fit`); the record keeps it
        (``command.seed`` and ``method.seed``).
    progress
        Callable receiving one-line progress messages; None: silent.
    """
    data = read_toml(stack_path)
    measurements = [read_measured(p) for p in measured]
    problem = build_problem(data, measurements, source=str(stack_path), fit=fit)
    result = run_fit(problem, starts=starts, seed=seed, progress=progress)
    command = {
        "stack": str(stack_path),
        "measured": [str(p) for p in measured],
        "fit": fit or "default",
        "starts": starts,
        "seed": seed,
    }
    record = calibration_record(problem, result, command=command)
    for w in record["warnings"]:
        warnings.warn(w["text"], CalibrationWarning, stacklevel=2)
    return problem, result, record


def write_outputs(out: str | Path, problem, result, record: dict[str, Any]) -> Path:
    """Write the output folder (each file atomically).

    Parameters
    ----------
    out
        The output folder.
    problem
        The fitted problem.
    result
        The fit.
    record
        The calibration record (:func:`calibrate`).
    """
    from wellwright.optimize.calibrate.figures import overlay_figure

    out = Path(out)
    write_json(out / "calibration.json", record)
    note = (
        f"As-grown stack calibrated by wellwright calibrate from {problem.source} and "
        f"{', '.join(Path(m.source).name for m in problem.measurements)}.\n"
        "Fitted layers in monolayers (a fractional value is monolayer islands, in the fit and "
        "in every command), the others in nm as the fit took them: iv gives the fitted curve."
    )
    atomic_write_text(out / "calibrated.toml", calibrated_toml(problem, result, note=note))
    overlay_figure(record, out / "overlay.png")
    header = ["file", "figure"] + ["measured", "fitted", "unit"]
    rows = []
    for t in record["figures_of_merit"]:
        for key, short, unit, scale in FOM_KEYS:
            m, f = t["measured"][key], t["fitted"][key]
            rows.append(
                [
                    Path(t["source"]).name,
                    short,
                    None if m is None else m * scale,
                    None if f is None else f * scale,
                    unit,
                ]
            )
    write_csv(out / "figures_of_merit.csv", header, rows)
    atomic_write_text(out / "calibration.html", page(record, rows, out / "overlay.png"))
    return out


def bound_text(row: dict[str, Any]) -> str:
    """`` (at its upper bound: ...)`` for a fitted parameter at a bound of its range, else ``""``."""
    if not row.get("at_bound"):
        return ""
    return f" (at its {row['at_bound']} bound: the data may need a value beyond the range)"


def page(record: dict[str, Any], fom_rows: list[list[Any]], png: Path) -> str:
    """The standalone calibration.html: inline CSS, the overlay as base64 PNG, no scripts or links.

    Parameters
    ----------
    record
        The calibration record.
    fom_rows
        Rows of the figures-of-merit table (file, figure, measured, fitted, unit).
    png
        The overlay figure, embedded.
    """
    img = base64.b64encode(png.read_bytes()).decode()
    esc = html.escape

    def num(v, digits=4):
        return "" if v is None else f"{v:.{digits}g}"

    prows = "".join(
        f"<tr><td>{esc(p['name'])}</td><td>{num(p['nominal'])}</td><td><b>{num(p['value'])}</b>"
        f"{esc(bound_text(p))}</td><td>{num(p['ci_low'])} to {num(p['ci_high'])}</td>"
        f"<td>{esc(p['unit'])}</td></tr>"
        for p in record["parameters"]
    )
    warned = "".join(f"<li>{esc(w['text'])}</li>" for w in record["warnings"])
    if warned:
        warned = f'<h2>Warnings</h2><ul class="caution">{warned}</ul>\n'
    frows = "".join(
        f"<tr><td>{esc(str(r[0]))}</td><td>{esc(r[1])}</td><td>{num(r[2])}</td><td>{num(r[3])}</td><td>{esc(r[4])}</td></tr>"
        for r in fom_rows
    )
    notes = (
        "".join(f"<li>{esc(n['text'])}</li>" for n in record["identifiability"]) or "<li>none</li>"
    )
    res = record["residual"]
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>Calibration of {esc(record["stack"])}</title>
<style>
body {{ font-family: sans-serif; max-width: 1100px; margin: 2em auto; color: #222; }}
table {{ border-collapse: collapse; margin: 0.5em 0 1.5em; }}
td, th {{ border: 1px solid #bbb; padding: 3px 8px; text-align: right; }}
td:first-child, th:first-child {{ text-align: left; }}
.grower {{ font-size: 1.1em; background: #eef5fb; border-left: 4px solid #0072B2; padding: 0.7em 1em; }}
.caution {{ color: #8a4b00; }}
img {{ max-width: 100%; }}
</style></head><body>
<h1>Calibration against the measured I-V</h1>
<p>Stack: {esc(record["stack"])}; measured: {esc(", ".join(record["measured"]))};
model: {esc(record["physics_model"]["label"])}.</p>
{warned}<h2>For the grower</h2>
<p class="grower">{esc(record["grower"])}</p>
<h2>Measured and fitted I-V</h2>
<img alt="measured and fitted I-V" src="data:image/png;base64,{img}">
<h2>Figures of merit</h2>
<table><tr><th>file</th><th>figure</th><th>measured</th><th>fitted</th><th>unit</th></tr>{frows}</table>
<h2>Fitted parameters (95 % intervals)</h2>
<table><tr><th>parameter</th><th>nominal</th><th>fitted</th><th>interval</th><th>unit</th></tr>{prows}</table>
<h2>What the data cannot separate</h2><ul>{notes}</ul>
<h2>Fit</h2>
<p>{res["points"]} points; scatter in ln current {res["scatter_ln_current"]:.3f};
chi-square per point {res["chi2_per_point"]:.2f}. {esc(record["method"]["loss"])}.
Uncertainties: {esc(record["method"]["uncertainty"])}. Multistart: {esc(record["method"]["multistart"])}.</p>
<p class="caution">{esc(CAUTION)}</p>
</body></html>
"""
