"""The run report: one self-contained HTML file with figures and tables beside it.

:func:`build_report` reads the finished files of a run folder (see
:mod:`wellwright.optimize.cli.pipeline`; it runs no physics and opens no Optuna
storage: the stages wrote the records and figures it needs) and writes
``DIR/report.html`` (inline CSS, figures embedded as base64 PNG, no scripts, no
external resources: it opens from disk with no network) and
``DIR/report_files/`` holding the same figures as PNG and the tables as CSV,
with ``report.json`` gathering every table of the report.

Sections, in order: the brief (spec, constraints, design space); the
candidates (ranked designs with figures of merit); the search (history and
Pareto front); one card per reported design (growth sheet, I-V with peak and
valley, band diagram with resonance levels, T(E)); the growth check (yield
with Wilson interval and failures by spec, sensitivity ranking, tornado,
tolerance allocation); the model and its limits; reproducing the run.
"""

from __future__ import annotations

import base64
import csv
import html
import json
import platform
import re
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from wellwright.optimize.search.history import TRIALS_FILE, read_trials
from wellwright.optimize.shared import names
from wellwright.optimize.shared.model_text import (
    model_assumptions,
    model_from_record,
    model_label,
)
from wellwright.optimize.shared.outputs import (
    atomic_write,
    atomic_write_text,
    save_figure,
    write_csv,
    write_json,
)
from wellwright.optimize.study.run_folder import (
    DESIGN_DIR,
    DESIGN_RECORD,
    hide_password,
    load_run,
    rerun_command,
    study_from_run,
)
from wellwright.optimize.study.study import Study
from wellwright.optimize.tolerance.analysis import (
    control_summary,
    controls_standing_out,
    evaluations_text,
    ranking_without_variance,
)
from wellwright.physics.errors import InputError

__all__ = ["build_report", "SECTIONS", "versions"]

#: (anchor, heading) of every section, in order; tests check each is present.
SECTIONS = (
    ("brief", "1. The brief: spec and design space"),
    ("candidates", "2. Candidates found"),
    ("search", "3. How the search went"),
    ("designs", "4. Reported designs: growth sheets and simulated curves"),
    ("growth", "5. Will it survive growth? Yield, sensitivity, tolerances"),
    ("model", "6. Model, assumptions and caution"),
    ("reproduce", "7. Reproducing this run"),
)
FILES_DIR = "report_files"

CSS = """
body{font-family:"DejaVu Sans",Helvetica,Arial,sans-serif;color:#1a1a1a;margin:0;
background:#f4f4f1;line-height:1.45}
main{max-width:1080px;margin:0 auto;padding:24px 32px 48px;background:#fff}
header{border-bottom:4px solid #0072B2;padding-bottom:10px;margin-bottom:8px}
h1{font-size:1.7em;margin:0 0 4px}h2{font-size:1.3em;margin-top:2.2em;
border-bottom:1px solid #ccc;padding-bottom:4px;color:#0b3c5d}
h3{font-size:1.1em;margin-top:1.6em}
.tag{display:inline-block;background:#E69F00;color:#000;font-weight:bold;padding:2px 8px;
border-radius:3px;font-size:.85em;margin-right:6px}
.caution{border-left:6px solid #D55E00;background:#fdf1e8;padding:8px 14px;margin:14px 0}
.ok{color:#006b4f;font-weight:bold}.bad{color:#a33c00;font-weight:bold}
table{border-collapse:collapse;margin:8px 0 14px;font-size:.9em}
th,td{border:1px solid #d0d0d0;padding:3px 8px;text-align:right}
th{background:#eef3f7}td.l,th.l{text-align:left}
figure{margin:10px 0 18px}figure img{max-width:100%;border:1px solid #e2e2e2}
figcaption{font-size:.85em;color:#444}
.pair{display:flex;flex-wrap:wrap;gap:14px}.pair figure{flex:1 1 460px;margin:6px 0}
.card{border:1px solid #cfd8de;border-radius:6px;padding:4px 18px 10px;margin:18px 0}
nav ol{columns:2;font-size:.92em}code{background:#f0f0f0;padding:0 3px}
.small{font-size:.85em;color:#444}
"""

CAUTION = (
    "Every figure in this report is a simulated estimate from a model with the assumptions "
    "listed in section 6. Calibrate it against measured devices from your own growth and "
    "processing before any growth decision; use it to compare designs and to see trends and "
    "sensitivities, not as a prediction of a wafer."
)

#: Figures of merit in the candidates table, then in its oscillator and device table.
METRIC_COLUMNS = (
    "peak_current_density_a_cm2",
    "peak_voltage_v",
    "valley_current_density_a_cm2",
    "valley_voltage_v",
    "pvcr",
    "delta_current_density_a_cm2",
)
DEVICE_COLUMNS = (
    "rf_power_density_w_cm2",
    "ndr_conductance_s_cm2",
    "capacitance_f_cm2",
    "resonance_lifetime_s",
    "transit_delay_s",
    "cutoff_frequency_hz",
)


# --------------------------------------------------------------------------- helpers


def versions() -> dict[str, str]:
    """Versions of wellwright and the libraries whose numbers shape the results."""
    from importlib.metadata import PackageNotFoundError, version

    out = {}
    for name in ("wellwright", "numpy", "scipy", "optuna", "SALib", "matplotlib", "joblib"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    out["Python"] = platform.python_version()
    return out


RERUN = (
    "missing: the run folder was made before every stage wrote the report's records (or a "
    "file was removed); rerun 'wellwright run' on the same study and folder, which writes only "
    "what is missing"
)


#: What to do about a damaged record (the rerun writes again only what is missing).
REWRITE = "remove it and rerun 'wellwright run' on the same study and folder to write it again"


def _read_text(path: Path) -> str:
    """A finished file of the run folder; one line naming it and what to do when absent."""
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(RERUN, source=str(path)) from None
    except OSError as exc:
        raise InputError(f"unreadable ({exc.strerror})", source=str(path)) from None


def _read_json(path: Path, shape: type = dict) -> Any:
    """A finished JSON record of the run folder (:func:`_read_text`): one line naming it
    where it is not valid JSON or not the JSON ``shape`` (dict or list) its stage writes."""
    try:
        data = json.loads(_read_text(path))
    except json.JSONDecodeError as exc:
        raise InputError(
            f"not valid JSON ({exc.msg} at line {exc.lineno}, column {exc.colno}); {REWRITE}",
            source=str(path),
        ) from None
    if not isinstance(data, shape):
        kind = "list" if shape is list else "object"
        raise InputError(f"not the JSON {kind} its stage writes; {REWRITE}", source=str(path))
    return data


def _read_csv(path: Path) -> tuple[list[str], list[list[str]]]:
    """The header and the rows of a CSV file of the run folder (:func:`_read_text`)."""
    head, *rows = csv.reader(_read_text(path).splitlines())
    return head, rows


def _copy_csv(src: Path, dest: Path) -> list[list[str]]:
    """Copy a CSV file a stage wrote into the report's files; returns its rows."""
    head, rows = _read_csv(src)
    write_csv(dest, head, rows)
    return rows


def _needed_files(run_dir: Path, reported: list[dict], tol_dirs: list[Path]) -> list[Path]:
    """Every finished file the report reads: checked before anything is written."""
    out = [run_dir / "search" / "designs.json", run_dir / "search" / TRIALS_FILE]
    for tdir in tol_dirs:
        design = tdir / DESIGN_DIR / DESIGN_RECORD
        out += [tdir / "tolerance.json", design]
        if design.is_file():  # and the figures it lists
            figures = _read_json(design).get("figures") or {}
            out += [design.parent / name for name in figures.values()]
    out += [_sheet_path(run_dir, d) for d in reported if d.get("layers") is not None]
    return out


def _esc(value: Any) -> str:
    return html.escape("" if value is None else str(value))


def _num(value: Any, factor: float = 1.0, spec: str = ".3g") -> str:
    if value is None or (isinstance(value, float) and value != value):
        return "-"
    return format(value * factor, spec)


def _table(head: list[str], rows: list[list[Any]], *, left: int = 1, raw: bool = False) -> str:
    """An HTML table; the first ``left`` columns left-aligned; ``raw`` head is trusted HTML."""
    out = ["<table><thead><tr>"]
    for i, h in enumerate(head):
        out.append(f'<th class="{"l" if i < left else ""}">{h if raw else _esc(h)}</th>')
    out.append("</tr></thead><tbody>")
    for row in rows:
        out.append("<tr>")
        for i, v in enumerate(row):
            out.append(f'<td class="{"l" if i < left else ""}">{v}</td>')
        out.append("</tr>")
    out.append("</tbody></table>")
    return "".join(out)


class _Figures:
    """Collects the report's PNG files and embeds them."""

    def __init__(self, folder: Path) -> None:
        self.folder = folder
        self.names: list[str] = []

    def add_figure(self, fig: Any, name: str) -> Path:
        path = save_figure(fig, self.folder / name, dpi=110)
        self.names.append(name)
        return path

    def add_file(self, src: Path, name: str) -> Path | None:
        if not src.is_file():
            return None
        self.names.append(name)
        return atomic_write(self.folder / name, src.read_bytes())

    def html(self, name: str, caption: str, alt: str) -> str:
        path = self.folder / name
        if not path.is_file():
            return f'<p class="small">({_esc(caption)}: not available)</p>'
        data = base64.b64encode(path.read_bytes()).decode("ascii")
        return (
            f'<figure><img alt="{_esc(alt)}" src="data:image/png;base64,{data}">'
            f'<figcaption>{caption} <span class="small">[{FILES_DIR}/{_esc(name)}]</span>'
            "</figcaption></figure>"
        )


# --------------------------------------------------------------------------- sections


def metric_axis(metric: str) -> tuple[str, float]:
    """HTML label in words with the trade unit, and the factor to it (one table: ``names``)."""
    return _esc(names.label(metric)), names.quantity(metric).factor


def _short(param: str) -> str:
    """``barrier1.thickness_ml`` -> "barrier1 thickness (ML)" for table headings."""
    return _esc(names.variable_label(param))


def _brief(study: Study, files: Path) -> tuple[str, dict[str, Any]]:
    spec_rows, spec_csv = [], []
    for w in study.targets:
        label, factor = metric_axis(w.metric)
        lo = None if w.low == float("-inf") else w.low * factor
        hi = None if w.high == float("inf") else w.high * factor
        spec_rows.append([label, _num(lo, spec=".4g"), _num(hi, spec=".4g")])
        spec_csv.append([w.metric, lo, hi, html.unescape(re.sub("<[^>]+>", "", label))])
    objectives = [f"{o.direction} {o.metric}" for o in study.objectives]
    c = study.constraints
    cons = []
    if c.max_active_thickness_nm is not None:
        cons.append(f"active thickness at most {c.max_active_thickness_nm:g} nm")
    if c.critical_thickness:
        cons.append("every strained layer below its Matthews-Blakeslee critical thickness")
    for w in c.metric_bounds:
        cons.append(w.describe())
    var_rows, var_csv = [], []
    for v in study.variables:
        unit = "ML" if v.key == "thickness_ml" else ("cm^-3" if v.key == "doping_cm3" else "")
        step = "1 ML" if v.integer else ("-" if v.step is None else f"{v.step:g}")
        var_rows.append(
            [
                _esc(v.name),
                _esc(v.key),
                _num(v.low, spec=".4g"),
                _num(v.high, spec=".4g"),
                _esc(step),
                "log" if v.log else "linear",
                _esc(unit),
            ]
        )
        var_csv.append([v.name, v.key, v.low, v.high, step, v.log, unit])
    write_csv(files / "spec.csv", ["metric", "min_trade_unit", "max_trade_unit", "label"], spec_csv)
    write_csv(
        files / "design_space.csv",
        ["parameter", "key", "min", "max", "step", "log", "unit"],
        var_csv,
    )
    body = [
        "<p>A design meets the spec when every figure of merit below lies in its window "
        "(units as in the column headings).</p>",
        _table(["figure of merit", "min", "max"], spec_rows, raw=True),
        f"<p><b>Pushed once the spec is met:</b> {_esc(', '.join(objectives) or 'closeness to the spec')}"
        f"{' (several objectives: a Pareto front)' if study.multi_objective else ''}.</p>",
        f"<p><b>Constraints:</b> {_esc('; '.join(cons) or 'none')}.</p>",
        "<h3>Where the search looked</h3>",
        _table(["parameter", "key", "min", "max", "step", "scale", "unit"], var_rows),
        f'<p class="small">Study file: <code>{_esc(study.source)}</code>; each trial sweeps '
        f"{study.sweep.points} bias points from {study.sweep.bias_min_v * 1e3:.0f} to "
        f"{study.sweep.bias_max_v * 1e3:.0f} mV at {study.base.get('temperature_k', 300)} K.</p>",
    ]
    data = {"spec": spec_csv, "objectives": objectives, "constraints": cons, "space": var_csv}
    return "".join(body), data


def _distinct_designs(points: list[dict[str, Any]]) -> tuple[int, int]:
    """How many distinct designs the trials hold, and how many of them meet the spec (a
    search stores a design it suggests again as a copy of the first evaluation)."""
    seen: dict[tuple, bool] = {}
    for p in points:
        key = tuple((k, repr(v)) for k, v in sorted(p["params"].items()))
        seen[key] = seen.get(key, False) or bool(p["feasible"])
    return len(seen), sum(seen.values())


def _candidates(
    study: Study, designs: list[dict], reported: int, search: dict, points: list[dict[str, Any]]
) -> str:
    # the currents at the spec's stated biases follow the standard columns
    columns = (*METRIC_COLUMNS, *(k for k in study.metric_names if names.AT_BIAS_KEY.match(k)))
    head = (
        ["rank", "trial", "meets spec"]
        + [metric_axis(k)[0] for k in columns]
        + [_short(n) for n in study.parameter_names]
        + ["at a range limit"]
    )
    rows = []
    for d in designs:
        m = d["metrics"]
        ok = '<span class="ok">yes</span>' if d["feasible"] else '<span class="bad">no</span>'
        star = " *" if d["rank"] <= reported else ""
        rows.append(
            [f"{d['rank']}{star}", d["trial"], ok]
            + [names.format_bound(k, m.get(k), bounded=_bounded(d)) for k in columns]
            + [_num(d["params"].get(n), spec=".4g") for n in study.parameter_names]
            + [_esc(", ".join(names.variable_label(v) for v in d.get("at_range_limit") or []))]
        )
    limits = sorted({v for d in designs[:reported] for v in d.get("at_range_limit") or []})
    bounded = [str(d["rank"]) for d in designs if _bounded(d)]
    beyond = (
        "<p><b>Valley beyond the sweep:</b> for rank "
        + _esc(", ".join(bounded))
        + " the current still falls at the last bias computed (the sweep was extended beyond "
        "its end to look for the valley), so the valley figures are bounds: ≥ and "
        "≤ say where the true value lies, “valley bounded” marks a figure derived from one. "
        "Raise the sweep's end bias ([sweep] bias_max_v) to find the valley.</p>"
        if bounded
        else ""
    )
    distinct, distinct_ok = _distinct_designs(points)
    widen = (
        "<p><b>At a range limit:</b> the analysed designs sit at an end of the range of "
        + _esc(", ".join(names.variable_label(v) for v in limits))
        + "; the best design may lie beyond it: widen that range and search again.</p>"
        if limits
        else ""
    )
    return (
        f"<p>{distinct} distinct designs evaluated, {distinct_ok} of them meet the spec and "
        f"every constraint ({search.get('complete', '?')} complete trials: a design the "
        "sampler suggests again is stored as a copy, not evaluated again). The ten best "
        f"distinct designs, best first; * marks the {reported} analysed below.</p>"
        + widen
        + beyond
        + '<div style="overflow-x:auto">'
        + _table(head, rows, left=1, raw=True)
        + "</div>"
        + _device_table(designs, reported)
    )


def _bounded(design: dict) -> bool:
    """The design's valley was not reached even beyond the sweep end (its figures are bounds:
    designs.json lists them under ``bounded_by_sweep``)."""
    return bool(design.get("bounded_by_sweep"))


def _resolution_text(ranking: dict | None) -> str:
    """Whether the growth ranking is resolved, the budget it used, and what has no effect."""
    if not ranking:
        return ""
    words = names.parameter_words
    uniform = ranking_without_variance(ranking)
    if uniform is not None:  # nothing to rank: said, not "not resolved, rerun"
        return (
            f"<p><b>No ranking of pass/fail:</b> {_esc(uniform)} ({evaluations_text(ranking)}).</p>"
        )
    if ranking.get("resolved"):
        head = (
            f"<p><b>Ranking of pass/fail resolved:</b> {_esc(words(ranking['leader']))} leads "
            "beyond the "
            "confidence intervals"
            + (f" of {_esc(words(ranking['runner_up']))}" if ranking.get("runner_up") else "")
        )
    else:
        head = (
            "<p><b>Ranking of pass/fail not resolved:</b> the leader cannot be told apart from "
            "the next "
            "parameter within their confidence intervals; treat the first places as a tie, or "
            "rerun with more --samples"
        )
    zero = ranking.get("indistinguishable_from_zero") or []
    tail = (
        f" No effect distinguishable from zero (not ranked): "
        f"{_esc(', '.join(words(p) for p in zero))}."
        if zero
        else ""
    )
    return f"{head} ({evaluations_text(ranking)}).{tail}</p>"


def _device_table(designs: list[dict], reported: int) -> str:
    """The oscillator and device figures of the same designs (per area, and per mesa when
    the study gives ``[device] area_um2``)."""
    keys = [k for k in DEVICE_COLUMNS if any(d["metrics"].get(k) is not None for d in designs)]
    device_keys = sorted({k for d in designs for k in (d.get("device") or {})})
    if not keys:
        return ""
    head = ["rank"] + [metric_axis(k)[0] for k in keys] + [metric_axis(k)[0] for k in device_keys]
    rows = []
    for d in designs:
        star = " *" if d["rank"] <= reported else ""
        rows.append(
            [f"{d['rank']}{star}"]
            + [names.format_bound(k, d["metrics"].get(k), bounded=_bounded(d)) for k in keys]
            + [
                names.format_bound(k, (d.get("device") or {}).get(k), bounded=_bounded(d))
                for k in device_keys
            ]
        )
    return (
        "<p>Oscillator and device figures of the same designs: output power (3/16) ΔJ ΔV of "
        "the cubic NDR, the steepest negative differential conductance on the sweep grid, the "
        "depletion-approximation capacitance at the peak bias (stored well charge not "
        "included), the resonance lifetime ħ/Γ at the peak, the collector transit delay and "
        "the cutoff-frequency estimate from these and the series resistance "
        "(formulas and sources: <code>wellwright.physics.device</code>).</p>"
        + '<div style="overflow-x:auto">'
        + _table(head, rows, left=1, raw=True)
        + "</div>"
    )


def _sheet_path(run_dir: Path, d: dict) -> Path:
    return run_dir / "search" / "growth_sheets" / f"rank{d['rank']:02d}_trial{d['trial']:05d}.csv"


def _design_card(
    d: dict, figs: _Figures, files: Path, run_dir: Path, design_dir: Path
) -> tuple[str, dict]:
    """One reported design's card: its growth sheet and its nominal curves (I-V, T(E), band
    diagram) as the stages wrote them; returns its HTML and its record for ``report.json``."""
    tag = f"rank{d['rank']:02d}"
    sheet: list[list[Any]] = []
    path = _sheet_path(run_dir, d)
    if path.is_file():  # the growth sheet as the search wrote it (none when its stack failed)
        head, lines = _read_csv(path)
        sheet = [[int(r[0]), *r[1:]] for r in lines]
        write_csv(files / f"growth_sheet_{tag}.csv", head, sheet)
    rows = _sheet_rows(sheet)
    # the nominal curves and figures, written by the stage that computed them
    design = _read_json(design_dir / DESIGN_RECORD)
    m = design["metrics"]
    _copy_design_figures(design.get("figures") or {}, figs, files, design_dir, tag)
    status = (
        '<span class="ok">meets the spec</span>'
        if d["feasible"]
        else '<span class="bad">misses the spec (closest found)</span>'
    )
    body = [
        f'<div class="card"><h3 id="design-{tag}">Design rank {d["rank"]} (trial {d["trial"]}): '
        f"{status}</h3>",
        "<p><b>Growth sheet</b> (emitter first; contacts grown as thick as the process needs)</p>",
        _table(SHEET_HEAD, rows, left=3, raw=True),
        (
            f'<p class="bad">The model could not compute this design\'s curves: '
            f"{_esc(design['error'])}</p>"
            if design.get("error")
            else ""
        ),
        _curve_figures_html(figs, tag, d["rank"]),
        "</div>",
    ]
    return "".join(body), {"rank": d["rank"], "growth_sheet": sheet, "metrics": m}


#: Column headings of a growth sheet in a design card (trusted HTML).
SHEET_HEAD = [
    "layer",
    "name",
    "material",
    "x",
    "monolayers (ML)",
    "thickness (nm)",
    "doping (cm<sup>-3</sup>)",
    "note",
]


def _sheet_rows(sheet: list[list[Any]]) -> list[list[Any]]:
    """The rows of a growth sheet as HTML cells (contacts' thickness as "contact")."""
    rows = []
    for r in sheet:
        layer, name, label, x, ml, nm, dop, note = r
        contact = r[0] in (0, len(sheet) - 1)
        rows.append(
            [
                layer,
                _esc(name),
                _esc(label),
                x or "-",
                ml or ("contact" if contact else "-"),
                nm or "-",
                "-" if float(dop) == 0 else _num(float(dop), spec=".2e"),
                _esc(note),
            ]
        )
    return rows


def _copy_design_figures(
    written: dict[str, str], figs: _Figures, files: Path, design_dir: Path, tag: str
) -> None:
    """Copy the design's I-V, band diagram and T(E) figures (``written``: kind -> file name in
    ``design_dir``); a figure not computed (the model failed on the design) leaves no stale
    copy either."""
    for kind, name in (("iv", "iv"), ("band_diagram", "band"), ("transmission", "transmission")):
        if kind in written:
            figs.add_file(design_dir / written[kind], f"{tag}_{name}.png")
        else:
            (files / f"{tag}_{name}.png").unlink(missing_ok=True)


def _curve_figures_html(figs: _Figures, tag: str, rank: int) -> str:
    """The I-V and T(E) figures side by side, then the band diagram, of a design card."""
    return "".join(
        [
            '<div class="pair">',
            figs.html(
                f"{tag}_iv.png",
                "I-V with the peak (circle) and valley (square) marked; "
                "current density in kA/cm<sup>2</sup>.",
                f"I-V of rank {rank}",
            ),
            figs.html(
                f"{tag}_transmission.png",
                "Transmission T(E) on a log scale at zero bias and at the peak voltage.",
                f"T(E) of rank {rank}",
            ),
            "</div>",
            figs.html(
                f"{tag}_band.png",
                "Conduction-band edge at the peak voltage with the "
                "quasi-bound (resonance) levels, their widths, and the contact Fermi levels.",
                f"band diagram of rank {rank}",
            ),
        ]
    )


def _wafer_yield_html(records: list[dict], files: Path) -> str:
    """Yield over the wafer's area beside the yield at its centre (``wafer_yield``)."""
    rows, out = [], []
    for r in records:
        w = r.get("wafer_yield")
        if w is None:
            continue
        d = r["wafer"]["diameter_mm"]
        out.append(
            [r["design"].get("rank"), d, w["value"], w["ci_low"], w["ci_high"], w["samples"]]
        )
        rows.append(
            [
                f"rank {r['design'].get('rank')}",
                f"{d:g} mm",
                f"{100 * w['value']:.1f} %",
                f"{100 * w['ci_low']:.1f} to {100 * w['ci_high']:.1f} %",
                f"{100 * r['yield']['value']:.1f} %",
            ]
        )
    if not rows:
        return ""
    write_csv(
        files / "wafer_yield.csv",
        ["rank", "diameter_mm", "wafer_yield", "ci_low", "ci_high", "samples"],
        out,
    )
    return (
        "<p><b>Yield per wafer</b>: the share of the wafer's area on which a device meets the "
        "spec (the same as-grown samples, each placed uniformly over the wafer with the "
        "study's [growth.wafer] radial profile), beside the yield at the centre above.</p>"
        + _table(["design", "wafer", "wafer yield", "95 % interval", "at the centre"], rows)
    )


def _control_html(record: dict[str, Any], files: Path, tag: str) -> str:
    """What the grower controls hardest: source cells and layers, ranked (``control_order``)."""
    order = record.get("control_order") or []
    if not order:
        return ""
    write_csv(
        files / f"control_order_{tag}.csv",
        ["control", "score", "measure", "parameters"],
        [[c["control"], c["score"], c["measure"], " ".join(c["parameters"])] for c in order],
    )
    # a group scoring zero, or whose every parameter has an effect indistinguishable from zero
    # (the ranking's resolution, tolerance.json "ranking"), is not ranked
    rows = [
        [
            _esc(c["control"]),
            f"{c['score']:.3g}" if standing else "no effect distinguishable from zero",
            _esc(", ".join(names.parameter_words(p) for p in c["parameters"])),
        ]
        for c, standing in zip(order, controls_standing_out(record), strict=True)
    ]
    return (
        f"<p><b>Control hardest</b> (per source cell and layer, by {_esc(order[0]['measure'])}): "
        f"{_esc(control_summary(record))}.</p>"
        + _table(["what the grower controls", "score", "growth parameters"], rows)
    )


def _allocation_html(
    record: dict[str, Any], files: Path, tag: str, figs: _Figures, tdir: Path
) -> str:
    """The nominal design against the spec, the re-centred design when the target yield is out
    of reach, and the allocation: one thing to do per row (``allocation``, ``recentre``)."""
    body = [_nominal_spec_html(record)]
    if record.get("recentre") is not None:
        body.append(_recentre_html(record["recentre"], files, tag, figs, tdir))
    alloc = record.get("allocation", [])
    src = tdir / "allocation.csv"
    if src.is_file():  # as the tolerance stage wrote it
        _copy_csv(src, files / f"allocation_{tag}.csv")
    arows = [
        [
            _esc(names.parameter_words(a["parameter"])),
            f"{a['nominal_sigma']:.3g} {_esc(a['unit'])}",
            "-" if a["allowed_sigma"] is None else f"{a['allowed_sigma']:.3g} {_esc(a['unit'])}",
            _num(a.get("yield_at_allowed"), 100, ".0f") + " %",
            _esc(a.get("advice") or a["note"] or ""),
        ]
        for a in alloc
    ]
    ty = alloc[0]["target_yield"] if alloc else record.get("settings", {}).get("target_yield", 0.9)
    body.append(
        f"<p><b>Tolerance allocation</b>: the largest one-sigma spread of each "
        f"top-ranked parameter that still keeps {100 * ty:.0f} % yield, the others at "
        "their nominal spreads (bisection with common random numbers). A parameter is "
        "recommended for tightening only when the gain is measurable: an exact McNemar test "
        "on the paired samples (Q. McNemar, Psychometrika 12, 153 (1947)) and a gain beyond "
        "the half-width of the yield's own interval; otherwise it has no measurable "
        "effect. Where the target is missed even with a parameter held exactly, tightening "
        "it alone cannot reach it: the design must be re-centred, or the spec or the target "
        "yield relaxed.</p>"
    )
    body.append(
        _table(["parameter", "nominal sigma", "allowed sigma", "yield there", "what to do"], arows)
        if arows
        else '<p class="small">No allocation in this run.</p>'
    )
    return "".join(body)


def _nominal_spec_html(record: dict[str, Any]) -> str:
    """The windows the nominal design misses without growth errors, or the one it is nearest
    to leaving (``nominal_misses``, ``nominal_closest``); empty when neither is recorded."""
    misses = record.get("nominal_misses") or []
    if misses:
        return (
            "<p><b>The nominal design misses the spec</b> even without growth errors: "
            + _esc("; ".join(misses))
            + ".</p>"
        )
    if record.get("nominal_closest"):
        return (
            "<p>The nominal design meets every window of the spec; the closest: "
            + _esc(record["nominal_closest"])
            + ".</p>"
        )
    return ""


def _recentre_html(rc: dict[str, Any], files: Path, tag: str, figs: _Figures, tdir: Path) -> str:
    """The re-centring (``recentre`` of tolerance.json): its verdict and budget, its figure,
    and the re-centred growth sheet when it is a measurable gain."""
    budget = rc["budget"]
    body = [
        "<p><b>Re-centring</b> (the yield is below the target): "
        + _esc(rc["text"])
        + ".</p>"
        + f'<p class="small">Searched: {_esc(rc["method"])}; {budget["candidates"]} '
        f"designs, {budget['devices']} as-grown devices ({budget['stacks']} stacks). The "
        "gain is judged by "
        + _esc(rc["gain"]["test"] if rc.get("gain") else "the screen")
        + ".</p>"
    ]
    if figs.add_file(tdir / "recentre.png", f"{tag}_recentre.png") is not None:
        body.append(
            figs.html(
                f"{tag}_recentre.png",
                "Re-centring: the yield of each whole-monolayer design near the nominal on "
                "the screening samples (left; green: meets the spec without growth "
                "errors), and the chosen design's yield against the nominal's on samples "
                "the choice never saw, with 95 % Wilson intervals (right).",
                "re-centring",
            )
        )
    path = tdir / "growth_sheet_recentred.csv"
    if rc.get("better") and path.is_file():  # as the tolerance stage wrote it
        sheet = _copy_csv(path, files / f"growth_sheet_recentred_{tag}.csv")
        check = "; ".join(c["text"] for c in rc.get("spec_check", []))
        body.append(
            "<p>Growth sheet of the re-centred design "
            f"({'meets' if rc.get('meets_spec') else 'misses'} the spec without growth "
            f"errors: {_esc(check)}):</p>"
            + _table(
                ["layer", "material", "monolayers", "nm", "doping (cm⁻³)", "note"],
                [[row[1], row[2], row[4], row[5], row[6], row[7]] for row in sheet],
            )
        )
    return "".join(body)


def _growth(
    records: list[dict], figs: _Figures, files: Path, run_dir: Path, tol_dirs: list[Path]
) -> tuple[str, list[dict]]:
    """The growth-check section: the yields of every design, then one card per design;
    returns its HTML and the records for ``report.json``."""
    body = [_yield_summary(records, figs, files)]
    out: list[dict] = []
    for r, tdir in zip(records, tol_dirs, strict=True):
        html, rec = _growth_card(r, figs, files, tdir.relative_to(run_dir), tdir)
        body.append(html)
        out.append(rec)
    return "".join(body), out


def _yield_summary(records: list[dict], figs: _Figures, files: Path) -> str:
    """The yield of each design with its interval and failures by spec (``yield.csv``,
    ``yield.png``) and the wafer yields."""
    from wellwright.optimize.report.figures import yield_figure

    figs.add_figure(yield_figure(records), "yield.png")
    yrows, ycsv = [], []
    for r in records:
        y = r["yield"]
        fails = ", ".join(f"{names.words(k)}: {v}" for k, v in r["failures"].items() if v)
        yrows.append(
            [
                f"rank {r['design'].get('rank')}",
                f"{100 * y['value']:.1f} %",
                f"{100 * y['ci_low']:.1f} to {100 * y['ci_high']:.1f} %",
                f"{y['passed']} / {y['samples']}",
                _esc(fails or "none"),
            ]
        )
        ycsv.append(
            [
                r["design"].get("rank"),
                y["value"],
                y["ci_low"],
                y["ci_high"],
                y["passed"],
                y["samples"],
                *[r["failures"].get(k, 0) for k in r["failures"]],
            ]
        )
    write_csv(
        files / "yield.csv",
        [
            "rank",
            "yield",
            "ci_low",
            "ci_high",
            "passed",
            "samples",
            *[f"fail:{k}" for k in records[0]["failures"]],
        ],
        ycsv,
    )
    params = records[0].get("parameters", [])
    spreads = ", ".join(f"{p['name']} {p['sigma']:g} {p['unit']}" for p in params[:6])
    return "".join(
        [
            "<p>Each design is grown many times in simulation with the study's one-sigma "
            f"growth spreads ({_esc(spreads)}{', ...' if len(params) > 6 else ''}); the yield "
            "is the share of as-grown samples that still meet the spec, with its 95 % Wilson "
            "score interval (E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927)).</p>",
            _table(["design", "yield", "95 % interval", "passed", "failures by spec"], yrows),
            _wafer_yield_html(records, files),
            figs.html(
                "yield.png",
                "Yield with its interval (left) and the share of samples "
                "missing each spec (right; a sample can miss several).",
                "yield",
            ),
        ]
    )


def _growth_card(r: dict, figs: _Figures, files: Path, where: Path, tdir: Path) -> tuple[str, dict]:
    """One design's growth check: ranking, control table, wafer map, tornado, allocation and
    notes (``where``: its tolerance folder within the run folder, ``tdir`` on disk)."""
    from wellwright.optimize.report.figures import ranking_figure, ranking_rows

    rank = r["design"].get("rank")
    tag = f"rank{rank:02d}"
    body = [f'<div class="card"><h3>Growth check of rank {rank}</h3>']
    warning = (r.get("islands") or {}).get("warning")
    if warning:
        said = warning[:1].upper() + warning[1:]  # a sentence after the heading
        body.append(f'<div class="caution"><b>Monolayer islands.</b> {_esc(said)}.</div>')
    method, output, rows = ranking_rows(r)
    fig = ranking_figure(r)
    if fig is not None:
        figs.add_figure(fig, f"{tag}_ranking.png")
        score = "total_index" if method == "sobol" else "mu_star"
        write_csv(
            files / f"ranking_{tag}.csv",
            ["parameter", method + "_" + score, "output"],
            [[x["parameter"], x[score], output] for x in rows],
        )
        what = names.words(output)
        top = ", ".join(_esc(names.parameter_words(x["parameter"])) for x in rows[:3])
        body.append(
            f"<p><b>Largest effect on {_esc(what)}:</b> {top} (ranked by "
            f"{'total Sobol index' if method == 'sobol' else 'Morris mu*'}; the figure "
            "below). Which to hold tightest for the yield: the pass/fail ranking and the "
            "control table that follow.</p>"
        )
        body.append(_resolution_text(r.get("ranking")))
        body.append(
            figs.html(
                f"{tag}_ranking.png",
                "Growth parameters ranked by their share "
                "of the output's variance (Sobol) or mean elementary effect "
                "(Morris); bars show 95 % confidence.",
                "ranking",
            )
        )
    else:
        body.append(
            '<p class="small">No Sobol or Morris ranking in this run '
            "(method mc, or every index zero).</p>"
        )
    body.append(_control_html(r, files, tag))
    if figs.add_file(tdir / "wafer_map.png", f"{tag}_wafer_map.png") is not None:
        body.append(
            figs.html(
                f"{tag}_wafer_map.png",
                "Wafer map: the probability that a device meets the spec in each "
                "equal-area ring (left; from the as-grown samples placed uniformly over the "
                "wafer), the nominal design's peak current density across the wafer with "
                "only the reactor's radial profile (middle), and both against the radius "
                "with 95 % Wilson intervals (right).",
                "wafer map",
            )
        )
    src = tdir / "tornado_peak_current_density_a_cm2.png"
    if figs.add_file(src, f"{tag}_tornado.png") is not None:
        body.append(
            figs.html(
                f"{tag}_tornado.png",
                "Tornado: peak current density when one "
                "layer at a time is grown one monolayer thinner or thicker.",
                "tornado",
            )
        )
    body.append(_allocation_html(r, files, tag, figs, tdir))
    notes = r.get("notes", [])
    if notes:
        body.append('<p class="small">Notes: ' + _esc("; ".join(notes)) + "</p>")
    body.append(
        f'<p class="small">Full record: <code>{_esc(where)}/tolerance.json</code></p></div>'
    )
    rec = {
        "rank": rank,
        "yield": r["yield"],
        "failures": r["failures"],
        "ranking": {"method": method, "output": output, "rows": rows},
        "allocation": r.get("allocation", []),
    }
    return "".join(body), rec


def _search_figures(study: Study, points: list[dict[str, Any]], figs: _Figures) -> str:
    """History and Pareto front, drawn from the search's ``trials.csv``."""
    from wellwright.optimize.search import figures as search_figures

    body = []
    figs.add_figure(search_figures.history_figure(study, points), "history.png")
    if study.multi_objective:
        figs.add_figure(search_figures.pareto_figure(study, points), "pareto.png")
    body.append(
        figs.html(
            "history.png",
            "Optimisation history: each trial, and the best so far "
            "among designs that meet the spec.",
            "optimisation history",
        )
    )
    if study.multi_objective:
        body.append(
            figs.html(
                "pareto.png",
                "Pareto front of the pushed objectives among designs that meet the spec.",
                "Pareto front",
            )
        )
    else:
        body.append(
            '<p class="small">Single objective: no Pareto front (give two or more '
            "entries in <code>maximize</code>/<code>minimize</code> for one).</p>"
        )
    return "".join(body)


# --------------------------------------------------------------------------- driver


def _calibration_note(study) -> str:
    """The calibration the study links to, or that there is none (the caution stays either way)."""
    from wellwright.optimize.study.calibration import calibration_lines

    lines = calibration_lines(study.reserved, base_dir=Path(study.source).parent)
    if not lines:
        return "<p>The model is not calibrated against a measured device of this study.</p>"
    return (
        f"<p><b>{_esc(lines[0])}</b> Applied to every design and as-grown sample: "
        + ", ".join(_esc(x) for x in lines[1:])
        + ".</p>"
    )


def _finished_tolerance_dirs(run_dir: Path, record: dict[str, Any]) -> dict[str, Path]:
    """The tolerance folders of the designs whose tolerance stage finished (``rankNN`` ->
    folder), by rank;
    :class:`InputError` when the search or every tolerance stage has not finished."""
    stages = record.get("stages", {})
    if stages.get("search", {}).get("status") != "done":
        raise InputError(
            "the search stage has not finished; rerun 'wellwright run'", source=str(run_dir)
        )
    tol = stages.get("tolerance", {})
    done = sorted(k for k, v in tol.items() if v.get("status") == "done")
    if not done:
        raise InputError("no finished tolerance stage; rerun 'wellwright run'", source=str(run_dir))
    return {k: run_dir / tol[k]["dir"] for k in done}


def _settings_used(record: dict[str, Any], study: Study) -> dict[str, Any]:
    """The run's settings as they took effect: a setting left to the study file (None in the
    record) takes the study's value; the search seed and the storage, which the search
    stage records, are its.

    Parameters
    ----------
    record
        The run's ``pipeline.json`` record.
    study
        The study of the run (from its copy).
    """
    search = record["stages"]["search"]
    left_to_study = {
        "trials": study.search.trials,
        "workers": study.search.workers,
        "bias_points": study.sweep.points,
    }
    out = {}
    for key, value in record.get("settings", {}).items():
        if key == "search_seed":
            value = search.get("seed")
        elif key == "storage":
            value = hide_password(str(search.get("storage") or value))
        elif value is None:
            value = left_to_study.get(key)
        out[key] = value
    return out


def _reproduce_html(
    record: dict[str, Any],
    run_dir: Path,
    vers: dict[str, str],
    seeds: dict[str, Any],
    settings: dict[str, Any],
) -> str:
    """How to reproduce the run: the study's fingerprint, the command, versions, seeds,
    settings (:func:`_settings_used`) and the search storage."""
    search = record["stages"]["search"]
    vrows = [[_esc(k), _esc(v)] for k, v in vers.items()]
    srows = [[_esc(k), _esc(v)] for k, v in seeds.items()]
    srows += [[_esc(k), _esc(v)] for k, v in settings.items() if k not in ("seed", "search_seed")]
    return (
        "<p>The same study file, settings, seeds and versions give the same numbers. The study "
        f"file as run is kept in <code>study.toml</code> (fingerprint "
        f"<code>{_esc(record['study']['fingerprint'])}</code>); rerun with</p>"
        f"<pre><code>{_esc(rerun_command(run_dir, record))}</code></pre>"
        + '<div class="pair"><div>'
        + _table(["package", "version"], vrows)
        + "</div><div>"
        + _table(["setting", "value"], srows)
        + "</div></div>"
        + f'<p class="small">Search storage: <code>{_esc(settings.get("storage"))}</code> '
        f"(study <code>{_esc(search.get('study_name'))}</code>; open it with optuna.load_study "
        "or the Optuna dashboard).</p>"
    )


def build_report(run_dir: str | Path) -> Path:
    """(Re)build ``DIR/report.html`` and ``DIR/report_files/`` from a finished run.

    Raises
    ------
    InputError
        When ``run_dir`` is not a run folder or its search or tolerance stage
        has not finished.
    """
    run_dir = Path(run_dir)
    record = load_run(run_dir)
    stages = record.get("stages", {})
    finished = _finished_tolerance_dirs(run_dir, record)
    study = study_from_run(run_dir, record)
    _check_needed_files(run_dir, record, [], [])  # the search's records, before reading them
    designs = _read_json(run_dir / "search" / "designs.json", list)
    reported = [d for d in designs if f"rank{d['rank']:02d}" in finished]
    tol_dirs = [finished[f"rank{d['rank']:02d}"] for d in reported]
    _check_needed_files(run_dir, record, reported, tol_dirs)
    records = [_read_json(d / "tolerance.json") for d in tol_dirs]
    points = read_trials(run_dir / "search" / TRIALS_FILE, study)
    files = run_dir / FILES_DIR
    figs = _Figures(files)
    search = stages["search"]
    settings = _settings_used(record, study)
    # the model that ran, from the run's own record (tolerance.json), else from the study copy
    ran = [r["model"] for r in records if isinstance(r.get("model"), dict)]
    model = model_from_record(ran[0]) if ran else study.stack(designs[0]["params"]).model

    brief_html, brief_data = _brief(study, files)
    figs.add_file(run_dir / "search" / "designs.csv", "designs_ranked.csv")
    figs.names.remove("designs_ranked.csv")
    cards = [
        _design_card(d, figs, files, run_dir, tdir / DESIGN_DIR)
        for d, tdir in zip(reported, tol_dirs, strict=True)
    ]
    growth_html, growth_data = _growth(records, figs, files, run_dir, tol_dirs)
    vers = versions()
    seeds = {
        "search sampler seed": settings.get("search_seed"),
        "tolerance seed": settings.get("seed"),
    }
    label = record.get("label")
    title = f"wellwright report: {study.name}"
    now = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    section_body = {
        "brief": brief_html,
        "candidates": _candidates(study, designs, len(reported), search, points),
        "search": _search_figures(study, points, figs),
        "designs": "".join(h for h, _ in cards),
        "growth": growth_html,
        "model": _model_html(study, model),
        "reproduce": _reproduce_html(record, run_dir, vers, seeds, settings),
    }
    page = _page(
        title, label, study, f"built {now} by wellwright {vers['wellwright']}", section_body
    )
    write_json(
        files / "report.json",
        {
            "title": title,
            "label": label,
            "sections": [h for _, h in SECTIONS],
            "brief": brief_data,
            "designs": [data for _, data in cards],
            "growth": growth_data,
            "versions": vers,
            "seeds": seeds,
            "settings": settings,
            "figures": figs.names,
        },
    )
    return atomic_write_text(run_dir / "report.html", page)


def _check_needed_files(
    run_dir: Path, record: dict[str, Any], reported: list[dict], tol_dirs: list[Path]
) -> None:
    """One line naming the first finished file the report needs that is missing
    (:func:`_needed_files`), with the command that writes it."""
    for path in _needed_files(run_dir, reported, tol_dirs):
        if not path.is_file():
            raise InputError(f"{RERUN}: {rerun_command(run_dir, record)}", source=str(path))


def _model_html(study: Study, model: Any) -> str:
    """The model section: the calibration, the model that produced every figure and its
    assumptions, and the caution."""
    return (
        _calibration_note(study)
        + f"<p>Model that produced every figure here: <b>{_esc(model_label(model))}</b>.</p>"
        + "<ul>"
        + "".join(f"<li>{_esc(a)}</li>" for a in model_assumptions(model))
        + "</ul>"
        f'<div class="caution"><b>Calibrate before a growth decision.</b> {_esc(CAUTION)}</div>'
    )


def _page(
    title: str, label: str | None, study: Study, built: str, section_body: dict[str, str]
) -> str:
    """The whole HTML page: head with the inline style, header (``label`` tag, title,
    ``built``: when and by which version), caution, contents, then each section of
    :data:`SECTIONS` from ``section_body`` (anchor -> HTML)."""
    parts = [
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">',
        f"<title>{_esc(title)}</title><style>{CSS}</style></head><body><main>",
        "<header>",
        f'<span class="tag">{_esc(label)}</span>' if label else "",
        f"<h1>{_esc(title)}</h1>",
        f'<div class="small">RTD design study <code>{_esc(study.source)}</code>; {_esc(built)}.'
        "</div></header>",
        f'<div class="caution"><b>Caution.</b> {_esc(CAUTION)}</div>',
        "<nav><b>Contents</b><ol>"
        + "".join(f'<li><a href="#{a}">{_esc(h.split(". ", 1)[1])}</a></li>' for a, h in SECTIONS)
        + "</ol></nav>",
    ]
    for anchor, heading in SECTIONS:
        parts.append(
            f'<section id="{anchor}"><h2>{_esc(heading)}</h2>{section_body[anchor]}</section>'
        )
    parts.append(
        '<p class="small">Tables as CSV and figures as PNG are in '
        f"<code>{FILES_DIR}/</code> beside this file.</p></main></body></html>"
    )
    return "".join(parts)
