"""A valley the sweep does not reach is marked in every record (issue 14, item 5).

The physics of the extension is tested in tests/test_iv_metrics.py; here a design whose
valley lies beyond 1.5 times its sweep's end (the conftest InP stack with 5 ML barriers
and a 14 ML well peaks near 0.39 V and has its valley near 0.67 V under the fast model,
measured on a 61-point sweep to 1 V; a sweep to 0.42 V extends only to 0.63 V) carries the
flag in designs.json/csv, tolerance.json and the report's cells. The machinery tests run
the fast model (conftest), as the flag does not depend on the bias model.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from conftest import study_text
from wellwright.optimize.search.engine import run_search
from wellwright.optimize.shared import names
from wellwright.optimize.study.growth import GrowthSettings, growth_model
from wellwright.optimize.study.study import parse_study
from wellwright.optimize.tolerance.analysis import Runner, Spec, run_tolerance
from wellwright.physics.iv import BOUNDED_BY_SWEEP, sweep
from wellwright.physics.stack import parse_toml

SHORT_SWEEP = "[sweep]\nbias_max_v = 0.42\npoints = 22\n"


def _study(extra: str = SHORT_SWEEP):
    text = study_text(
        barrier="{min = 5, max = 6}",
        well="14",
        targets="peak_current_density_a_cm2 = {min = 1}\n",
        extra=extra,
    )
    return parse_study(parse_toml(text, source="s.toml"), source="s.toml")


def test_the_example_valley_lies_beyond_the_extension_cap() -> None:
    # the premise of this file, on the long sweep (reference: 61 points to 1 V)
    study = _study("")
    stack = study.stack({"barrier1.thickness_ml": 5})
    m = sweep(stack.table(), np.linspace(0.0, 1.0, 61), model=stack.model).metrics
    assert m["valley_bounded_by_sweep"][0] == 0.0
    assert m["valley_voltage_v"][0] > 1.5 * 0.42 > m["peak_voltage_v"][0]


def test_bounded_valley_in_designs_json_and_csv(tmp_path) -> None:
    result = run_search(_study(), trials=2, out_dir=tmp_path / "o", progress=False)
    assert result.n_complete == 2
    designs = json.loads((tmp_path / "o" / "designs.json").read_text())
    for d in designs:
        assert d["metrics"]["valley_bounded_by_sweep"] == 1.0
        assert d["bounded_by_sweep"] == list(BOUNDED_BY_SWEEP)
        # the valley is the last bias computed: 1.5 times the end, on the sweep's spacing
        assert d["metrics"]["valley_voltage_v"] == pytest.approx(0.62, abs=1e-9)
    rows = list(csv.DictReader((tmp_path / "o" / "designs.csv").open()))
    assert all(r["valley_bounded_by_sweep"] == "1" for r in rows)
    assert all("valley_voltage_v" in r["bounded_by_sweep"].split() for r in rows)
    # the report's design tables read the record: bounds marked, and a sentence says why
    from wellwright.optimize.report.build import _candidates

    html = _candidates(_study(), designs, 1, {"complete": 2, "feasible": 2}, [])
    assert "Valley beyond the sweep" in html and "≥ 620" in html  # valley voltage, mV
    assert "≤" in html  # the valley current


def test_bounded_valley_in_tolerance_json(tmp_path) -> None:
    # A small Monte Carlo (8 samples, no ranking): the record counts the bounded samples and
    # says so in a note; the flag itself gets no Sobol or Morris entry (it is counted).
    study = _study()
    stack = study.stack({"barrier1.thickness_ml": 5})
    growth = GrowthSettings(thickness_ml_sigma=0.3, rate_sigma=0.0, x_sigma=0.0, doping_sigma=0.0)
    run = Runner(study.sweep.bias_v, model=stack.model)
    rec = run_tolerance(
        growth_model(stack, growth),
        Spec.from_study(study),
        run,
        method="mc",
        samples=8,
        seed=1,
        allocate=0,
        out_dir=tmp_path / "t",
        figures=False,
        island_checks=0,
    )
    flag = json.loads((tmp_path / "t" / "tolerance.json").read_text())["valley_bounded_by_sweep"]
    # "of": samples with NDR in the sweep (a thinner sample may peak beyond 0.42 V)
    assert flag["nominal"] is True and 0 < flag["samples"] <= flag["of"] <= 8
    assert any("valley bounded by the sweep end" in n for n in rec["notes"])
    head = (tmp_path / "t" / "samples.csv").read_text().splitlines()[0].split(",")
    assert "valley_bounded_by_sweep" in head


def test_bounded_values_are_marked_in_text() -> None:
    # names.format_bound: the side of each bound (physics.iv.BOUNDED_BY_SWEEP)
    assert names.format_bound("pvcr", 8.9, bounded=True) == "≥ 8.9"
    assert names.format_bound("valley_voltage_v", 0.37, bounded=True, with_unit=True) == "≥ 370 mV"
    assert names.format_bound("valley_current_density_a_cm2", 32.5, bounded=True) == "≤ 0.0325"
    assert names.format_bound("ndr_bias_v", 0.265, bounded=True) == "265 (valley bounded)"
    assert names.format_bound("peak_voltage_v", 0.215, bounded=True) == "215"
    assert names.format_bound("pvcr", 8.9, bounded=False) == "8.9"
    assert names.format_bound("pvcr", None, bounded=True) == "-"


def test_iv_figure_marks_the_sweep_end_only_when_the_sweep_was_extended() -> None:
    # the figure said "continued past the sweep end" and drew a sweep-end line at 0 V on
    # every curve with a peak (the two marks added to the curve were counted as extension)
    from wellwright.optimize.shared.figures import iv_figure

    study = _study("")
    stack = study.stack({"barrier1.thickness_ml": 5})
    texts = {}
    for label, bias in (("long", np.linspace(0.0, 1.0, 61)), ("short", np.linspace(0, 0.42, 22))):
        fig = iv_figure(sweep(stack.table(), bias, model=stack.model))
        ax = fig.axes[0]
        legend = [t.get_text() for t in ax.get_legend().get_texts()]
        texts[label] = (legend, " ".join(t.get_text() for t in ax.texts))
    assert "sweep end" not in texts["long"][0] and "continued" not in texts["long"][1]
    assert "sweep end" in texts["short"][0] and "continued past the sweep end" in texts["short"][1]
