"""``wellwright calibrate``: measured files, the fit's recovery of known growth errors, identifiability.

The "measured" sweeps here are invented: the project's own model from a stack
with known growth errors plus noise (wellwright.optimize.calibrate.synthetic).
What is checked against outside sources: J = I / A with 1 um^2 = 1e-8 cm^2
(unit definition); the terminal bias V + I R of a series resistance (Ohm's
law, common practice); a fit's 95 % intervals covering the truth in about
95 % of seeded trials (what a confidence interval means; the statistical
test, marked slow, allows >= 90 % of 20).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from wellwright.optimize.calibrate.fit import run_fit
from wellwright.optimize.calibrate.measured import read_measured
from wellwright.optimize.calibrate.problem import build_problem, up_sweep
from wellwright.optimize.calibrate.synthetic import synthetic_measurement
from wellwright.optimize.cli.app import main
from wellwright.physics.errors import InputError
from wellwright.physics.stack import read_toml

REPO = Path(__file__).resolve().parents[1]
STACK = REPO / "studies" / "inp_thz_oscillator.toml"


def _stack_data() -> dict:
    """The example stack with the fast model these fitting tests were written for (linear
    drop, coherent current), set explicitly: the default is self-consistent with the
    scattering-assisted channel."""
    data = read_toml(STACK)
    data.setdefault("model", {}).update(electrostatics="linear", transport="coherent")
    return data


#: Barrier one monolayer thick, well one thin, the InGaAs source 2 % fast, 20 ohm um^2.
TRUTH = {
    "barrier1.thickness_ml": 6.0,
    "well.thickness_ml": 14.0,
    "InGaAs.rate": 1.02,
    "series_resistance_ohm_um2": 20.0,
}
BIAS = np.linspace(0.0, 1.0, 61)


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def _csv(rows: int = 12, header: str = "bias_v,current_density_a_cm2") -> str:
    lines = [header] + [f"{0.05 * i:.2f},{100.0 * (i + 1)}" for i in range(rows)]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- measured files


def test_current_with_area_line_is_current_density(tmp_path):
    # J = I / A; 100 um^2 = 1e-6 cm^2 (unit definition)
    text = "# area_um2 = 100\n" + _csv(header="bias_v,current_a").replace("100.0", "1.0")
    m = read_measured(_write(tmp_path / "a.csv", text))
    lines = text.splitlines()
    first_current = float(lines[2].split(",")[1])
    assert m.area_um2 == 100
    assert m.current_density_a_cm2[0] == pytest.approx(first_current / 1e-6)


def test_reverse_sweep_is_stored_increasing(tmp_path):
    text = "bias_v,current_density_a_cm2\n" + "\n".join(
        f"{-0.05 * i:.2f},{-1.0 - i}" for i in range(12)
    )
    m = read_measured(_write(tmp_path / "r.csv", text))
    assert np.all(np.diff(m.bias_v) > 0) and m.bias_v[-1] == 0.0


BAD_FILES = {
    "no_header": (
        "0.0,1.0\n" + "\n".join(f"{0.1 * i},{i}" for i in range(1, 12)),
        "line 1: no header",
    ),
    "non_numeric": (
        _csv().replace("0.15,", "0.15x,"),
        "line 5, column 1 (bias_v): '0.15x' is not a number",
    ),
    "few_points": (_csv(rows=9), "9 data rows; a sweep needs at least 10"),
    "non_monotonic": (
        _csv().replace("0.20,", "0.10,"),
        "line 6, column 1 (bias_v): biases must run strictly away from zero bias, increasing",
    ),
    # one file is one polarity (studies/README.md): a sweep through zero is two files
    "both_polarities": (
        "bias_v,current_density_a_cm2\n"
        + "\n".join(f"{0.05 * i - 0.1:.2f},{100.0 * (i - 2)}" for i in range(12)),
        "line 2, column 1 (bias_v): -0.1 V in a sweep to 0.45 V; one file is one polarity",
    ),
    # ... swept away from zero: a positive sweep written from its end down to zero
    "positive_sweep_written_down": (
        "bias_v,current_density_a_cm2\n"
        + "\n".join(f"{0.05 * (11 - i):.2f},{100.0 * (12 - i)}" for i in range(12)),
        "line 3, column 1 (bias_v): biases must run strictly away from zero bias, increasing",
    ),
    "negative_sweep_written_up": (
        "bias_v,current_density_a_cm2\n"
        + "\n".join(f"{-0.05 * (11 - i):.2f},{-100.0 * (12 - i)}" for i in range(12)),
        "line 3, column 1 (bias_v): biases must run strictly away from zero bias, decreasing",
    ),
    "nan": (
        _csv().replace(",400.0", ",nan"),
        "line 5, column 2 (current_density_a_cm2): nan is not a finite number",
    ),
    "no_area": (_csv(header="bias_v,current_a"), "current_a needs the mesa area"),
    # found by a fuzz run: "'big' outside [0.01, 1e+08]" before
    "area_not_a_number": (
        "# area_um2 = big\n" + _csv(header="bias_v,current_a"),
        "line 1: area_um2 = 'big' is not a number",
    ),
    "empty_cell": (
        _csv().replace(",300.0", ","),
        "line 4, column 2 (current_density_a_cm2): empty cell",
    ),
    # a fuzz find: probes swapped, fitted as if the signs were right (the overlay then drew
    # the measurement below zero and the fit above it)
    "current_against_the_bias": (
        "bias_v,current_density_a_cm2\n"
        + "\n".join(f"{0.05 * i:.2f},{-100.0 * (i + 1)}" for i in range(12)),
        "most currents are negative on a positive sweep; the current carries the sign of the bias",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD_FILES))
def test_bad_measured_file(case, tmp_path, capsys):
    text, message = BAD_FILES[case]
    path = _write(tmp_path / f"{case}.csv", text)
    with pytest.raises(InputError, match=message.replace("(", r"\(").replace(")", r"\)")):
        read_measured(path)
    out = tmp_path / "out"
    status = main(["calibrate", str(STACK), "--measured", str(path), "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert len(err) == 1 and str(path) in err[0] and message.split(":")[0] in err[0]
    assert not out.exists()  # nothing written


def test_study_ranges_are_refused(tmp_path):
    data = _stack_data()
    data["layers"][2]["thickness_ml"] = {"min": 4, "max": 8}
    m = synthetic_measurement(_stack_data(), {}, np.linspace(0, 1, 11))
    with pytest.raises(InputError, match="layer 3.*the stack that was grown"):
        build_problem(data, [m])


def test_unknown_fit_name_lists_choices():
    m = synthetic_measurement(_stack_data(), {}, np.linspace(0, 1, 11))
    with pytest.raises(InputError, match="--fit.*not a fittable parameter.*barrier1.thickness_ml"):
        build_problem(_stack_data(), [m], fit=["barrier9.thickness_ml"])


def test_shipped_invented_measurement_is_of_the_default_model():
    # the demo data set pairs with a stack file that sets no model: it must have been made by
    # the default model, or `wellwright calibrate` fits one model to another's curve (the data
    # were once made with the linear coherent model; PVCR ~111 against ~19 now)
    from wellwright.physics.stack import ModelOptions, parse_stack

    csv = REPO / "studies" / "inp_thz_wafer1_invented.csv"
    line = next(x for x in csv.read_text().splitlines() if x.startswith("# model:"))
    model = parse_stack(read_toml(STACK)).model
    assert model == ModelOptions()  # the stack file takes the default
    assert f"{model.electrostatics} electrostatics, {model.transport} transport" in line
    assert f"roughness_height_nm {model.roughness_height_nm:g}," in line


def test_the_fit_models_the_same_device_as_iv():
    # consistency (the fit reports what the grower missed in the model `iv` uses): at the
    # nominal the fit's forward model is the stack's own current to rounding. A fuzz find:
    # the fit's tables dropped the layers' LO-phonon energies and high-frequency
    # permittivities, so the scattering channel took GaAs's for InGaAs and AlAs: 5-8 % more
    # current through the NDR and valley, and roughness, rates and layers fitted off their
    # true values outside their intervals
    from wellwright.optimize.calibrate.measured import Measurement
    from wellwright.physics.iv import current_at_bias
    from wellwright.physics.stack import parse_stack

    data = read_toml(STACK)  # the default model: the scattering channel uses the phonons
    stack = parse_stack(data)
    v = np.linspace(0.0, 1.0, 21)
    problem = build_problem(data, [Measurement("x", v, np.ones(v.size), None)])
    table, weights = problem.tables(np.zeros((1, len(problem.names))))  # whole monolayers:
    for key in ("lo_phonon_ev", "permittivity_high_r"):  # one island corner of weight 1
        np.testing.assert_array_equal(getattr(table, key)[:1], getattr(stack.table(), key))
    rows = current_at_bias(table, v, model=problem.model_options(np.zeros(len(problem.names))))
    own = current_at_bias(stack.table(), v, model=stack.model)
    np.testing.assert_allclose(weights @ rows, own, rtol=1e-9)


# --------------------------------------------------------------------------- series resistance


def test_series_resistance_shifts_bias_by_i_r():
    # Ohm's law (common practice): V_terminal = V + J R; R = 50 ohm um^2 = 5e-7 ohm cm^2
    v = np.linspace(0.0, 1.0, 201)
    j = 1e5 * v  # a linear intrinsic curve, A/cm^2
    terminal = np.array([0.3, 0.6])
    got = up_sweep(v, j, 50.0, terminal)
    expect = 1e5 * terminal / (1.0 + 1e5 * 5e-7)
    assert got == pytest.approx(expect, rel=1e-9)


def test_series_resistance_folds_ndr_into_a_jump():
    # a measured up sweep stays on the rising branch up to the fold of V + J R and then jumps
    # to the low-current branch (common practice); R = 10 ohm um^2 = 1e-7 ohm cm^2
    v = np.linspace(0.0, 1.0, 401)
    j = np.where(v < 0.5, 2e5 * v, 1e4)
    rise, after = np.linspace(0.05, 0.5, 10), np.linspace(0.52, 0.9, 10)
    assert up_sweep(v, j, 10.0, rise) == pytest.approx(2e5 * rise / (1 + 2e5 * 1e-7), rel=1e-9)
    assert up_sweep(v, j, 10.0, after) == pytest.approx(1e4, rel=1e-9)


def test_series_resistance_jump_lands_on_the_low_branch():
    # beyond the fold of V + J R an up sweep is on the low-current branch (common practice):
    # at a terminal bias V_t there, J solves V_t = V + J(V) R on that branch. Intrinsic curve:
    # a rise to 1e5 A/cm^2 at 0.5 V, a gentle fall (5e5 A/cm^2/V) to 5e4 at 0.6 V, a steep one
    # (4e6 A/cm^2/V) to 1e4 at 0.61 V, then flat; R = 50 ohm um^2 = 5e-7 ohm cm^2 folds V + J R
    # where the fall steepens beyond 1 / R = 2e6 A/cm^2/V: at 0.6 V, terminal 0.625 V
    r_cm2 = 5e-7
    v = np.linspace(0.0, 1.0, 1001)
    j = np.interp(v, [0.0, 0.5, 0.6, 0.61, 1.0], [0.0, 1e5, 5e4, 1e4, 1e4])
    fold = 0.6 + 5e4 * r_cm2
    assert up_sweep(v, j, 50.0, np.array([fold + 1e-4])) == pytest.approx(1e4, rel=1e-6)
    # before the fold, the gently falling branch: V_t = V + J R with J = 3.5e5 - 5e5 V
    vt = 0.6
    vi = (vt - 3.5e5 * r_cm2) / (1.0 - 5e5 * r_cm2)
    assert up_sweep(v, j, 50.0, np.array([vt])) == pytest.approx(3.5e5 - 5e5 * vi, rel=1e-4)


# --------------------------------------------------------------------------- the model's curve


def test_ndr_jump_resolved_to_a_millivolt():
    # the terminal bias where an up sweep with series resistance jumps off the peak, under the
    # default model (a sharp top just before the jump): the calibration's grid (121 uniform
    # biases plus the points inside each stack's cliff) against the same model on 2001
    # uniform biases (a grid-convergence reference, common practice). The uniform 121 alone
    # (8.3 mV spacing) misses it by several millivolts, which put the demo's measured peak
    # point on the wrong branch
    from wellwright.optimize.calibrate.problem import CLIFF_POINTS
    from wellwright.physics.iv import current_at_bias
    from wellwright.physics.stack import parse_stack

    data = read_toml(STACK)  # the default model
    m = synthetic_measurement(data, {}, BIAS, noise=0.0)
    problem = build_problem(data, [m], fit=["series_resistance_ohm_um2"])
    (c,) = problem.intrinsic_currents(np.zeros((1, 1)))
    assert c.shape[2] == 121 + CLIFF_POINTS

    def jump_v(v, j, r_ohm_um2=20.0):
        ext = v + j * r_ohm_um2 * 1e-8
        peak = int(np.argmax(np.where(v < 0.8, j, 0.0)))
        return float(ext[: peak + 1].max())

    stack = parse_stack(data)
    ref_v, coarse_v = np.linspace(0.0, 1.0, 2001), np.linspace(0.0, 1.0, 121)
    ref = jump_v(ref_v, current_at_bias(stack.table(), ref_v, model=stack.model)[0])
    coarse = jump_v(coarse_v, current_at_bias(stack.table(), coarse_v, model=stack.model)[0])
    assert abs(jump_v(c[0, 0], c[0, 1]) - ref) < 1.5e-3, (jump_v(c[0, 0], c[0, 1]), ref)
    assert abs(coarse - ref) > 3e-3  # what the cliff points are for


def test_interval_below_a_value_just_above_a_whole_monolayer_uses_its_own_cell():
    # the island current is linear in a thickness within a whole-monolayer cell (area-weighted
    # mixture, the growth model's definition), and a barrier's current falls more gently
    # above a whole monolayer than it rises below it (tunnelling through a thicker barrier
    # decays exponentially, common practice): for barrier2 a fiftieth of a monolayer above
    # 5 ML the lower slope is the gentle one of its own cell, smaller than the quarter step's
    from wellwright.optimize.calibrate.fit import Objective

    data = _stack_data()
    m = synthetic_measurement(data, TRUTH, BIAS, noise=0.02, seed=1)
    problem = build_problem(data, [m])
    obj = Objective(problem, 0.02)
    j = problem.index("barrier2.thickness_ml")
    z = problem.deviations_of({**TRUTH, "barrier2.thickness_ml": 5.02}) / np.array(
        [q.scale for q in problem.parameters]
    )
    _, uppers, lowers = obj.central_jacobian(z)
    assert len(lowers) == 2 and len(uppers) == 1  # one within-cell step, down to 5 ML
    across, within = lowers[0][:, j], lowers[1][:, j]
    assert np.linalg.norm(within) < np.linalg.norm(across)


def test_a_thickness_at_the_top_of_its_range_is_refined_in_the_cell_below():
    # a barrier fitted to the thick end of its range (a whole monolayer, nominal + 4 ML) was
    # put in the whole-monolayer cell above it, outside the range: a cell of zero width, which
    # least squares refuses (a traceback on currents far too small for the stack)
    from wellwright.optimize.calibrate.fit import Objective, _local

    data = _stack_data()
    m = synthetic_measurement(data, TRUTH, BIAS, noise=0.02, seed=1)
    problem = build_problem(data, [m])
    obj = Objective(problem, 0.05)
    j = problem.index("barrier1.thickness_ml")
    z0 = np.zeros(len(problem.parameters))
    z0[j] = obj.upper[j]
    z, cost = _local(obj, z0, 2)
    assert obj.lower[j] <= z[j] <= obj.upper[j] and np.isfinite(cost)


# --------------------------------------------------------------------------- the fit


def _recovered(problem, result, truth):
    """Whether each true value lies in its reported 95 % interval."""
    from wellwright.optimize.calibrate.record import _rows

    rows = {r["name"]: r for r in _rows(problem, result)}
    return {n: rows[n]["ci_low"] <= t <= rows[n]["ci_high"] for n, t in truth.items()}


def _round_trip(
    seed: int, rate_sigma: float | None = None
) -> tuple[dict[str, bool], object, object]:
    data = _stack_data()
    if rate_sigma is not None:  # the study's stated rate spread, the rate's prior
        data.setdefault("growth", {})["rate_sigma"] = rate_sigma
    m = synthetic_measurement(data, TRUTH, BIAS, noise=0.02, seed=seed)
    problem = build_problem(data, [m])
    result = run_fit(problem)
    truth = {**TRUTH, "barrier2.thickness_ml": 5.0}
    return _recovered(problem, result, truth), problem, result


def test_round_trip_one_seed_finds_the_growth_errors():
    # the known errors come back: each fitted value within its own 95 % interval of the truth
    ok, problem, result = _round_trip(11)
    assert set(ok) == set(TRUTH) | {"barrier2.thickness_ml"}
    assert all(ok.values()), ok
    # the errors are found, not only covered: the whole monolayers are the right ones
    vals = dict(zip(problem.names, result.values))
    assert round(vals["barrier1.thickness_ml"]) == 6 and round(vals["well.thickness_ml"]) == 14


@pytest.mark.slow
def test_round_trip_coverage_statistical():
    """Statistical test: each parameter's 95 % interval holds its true value in >= 90 % of
    20 seeded trials (a 95 % interval covers the truth in 95 % of repeats, by definition;
    18 of 20 leaves room for sampling: P(<= 17 of 20 | p = 0.95) = 0.075).

    The interval is a posterior's, with the study's ``[growth]`` spreads as Gaussian priors,
    so it covers at the nominal rate for truths the prior holds typical; here the study
    states a 2 % rate spread and the 2 % rate error is one sigma of it. Under the default
    1 % spread the same error is two sigmas, the prior shrinks the rate towards 1 (to
    1.008-1.014) and the series resistance follows it through their correlation: measured
    15 of 20 for the resistance (misses 22.2-22.8 against 20), as a Bayesian interval at a
    fixed truth two prior sigmas out should (common practice: shrinkage of a posterior
    mean towards its prior). Measured with the 2 % spread: 20, 20, 20, 20 and 18 of 20
    (barrier1, well, barrier2, rate, resistance)."""
    hits: dict[str, int] = {}
    for seed in range(20):
        ok, _, _ = _round_trip(100 + seed, rate_sigma=0.02)
        for name, covered in ok.items():
            hits[name] = hits.get(name, 0) + int(covered)
    assert all(h >= 18 for h in hits.values()), hits


def test_symmetric_stack_barriers_not_separable():
    # one polarity of a symmetric double barrier: the current through the resonance depends on
    # the two barriers' transmissions symmetrically (Buttiker, IBM J. Res. Dev. 32, 63 (1988):
    # T_peak = 4 G1 G2 / (G1 + G2)^2), so the data fix their sum, not each one
    data = _stack_data()
    data["layers"][5]["thickness_nm"] = 2.0  # spacers alike: a symmetric stack
    m = synthetic_measurement(data, {"series_resistance_ohm_um2": 10.0}, BIAS, noise=0.02, seed=5)
    problem = build_problem(
        data,
        [m],
        fit=[
            "barrier1.thickness_ml",
            "barrier2.thickness_ml",
            "well.thickness_ml",
            "series_resistance_ohm_um2",
        ],
    )
    result = run_fit(problem)
    from wellwright.optimize.calibrate.record import identifiability

    notes = [n for n in identifiability(problem, result) if n["kind"] == "not_separable"]
    pair = [
        n
        for n in notes
        if set(n["parameters"]) == {"barrier1.thickness_ml", "barrier2.thickness_ml"}
    ]
    assert pair, notes
    assert pair[0]["combination"] == "sum"
    # the sum is recovered to a tenth of a monolayer (one seed: its interval's coverage is the
    # statistical test's business)
    assert pair[0]["value"] == pytest.approx(10.0, abs=0.1)
    assert pair[0]["ci_low"] < pair[0]["value"] < pair[0]["ci_high"]


def test_two_areas_separate_series_resistances():
    # R = R_specific / A + R_fixed (common practice): one area cannot tell the parts apart,
    # two areas can; the intrinsic curve (barrier) is recovered alongside. With 31 and 79 ohm
    # um^2 the NDR region folds into a jump 80 mV down its slope, and the 16 um^2 file has a
    # point 0.3 mV beyond the fold: it needs the fold resolved, the low branch taken beyond
    # it, and a start near the resistances (failed before all three: R_specific 8.5 against 15)
    data = _stack_data()
    truth = {
        "barrier1.thickness_ml": 6.0,
        "series_resistance_ohm_um2": 15.0,
        "series_resistance_ohm": 1.0,
    }
    fit = list(truth)
    ms = [
        synthetic_measurement(data, truth, BIAS, area_um2=a, noise=0.02, seed=s)
        for a, s in ((16.0, 1), (64.0, 2))
    ]
    problem = build_problem(data, ms, fit=fit)
    result = run_fit(problem)
    ok = _recovered(problem, result, truth)
    assert all(ok.values()), (ok, result.values, result.sd)
    one = build_problem(data, ms[:1], fit=fit)
    from wellwright.optimize.calibrate.record import identifiability

    notes = identifiability(one, run_fit(one))
    assert any(
        set(n["parameters"]) == {"series_resistance_ohm_um2", "series_resistance_ohm"}
        for n in notes
    )


# --------------------------------------------------------------------------- the command


def test_command_writes_record_stack_and_page(tmp_path, capsys):
    data = _stack_data()
    m = synthetic_measurement(data, TRUTH, BIAS, noise=0.02, seed=3)
    csv = tmp_path / "m.csv"
    csv.write_text(
        "bias_v,current_density_a_cm2\n"
        + "".join(f"{v:.4f},{j:.6g}\n" for v, j in zip(m.bias_v, m.current_density_a_cm2))
    )
    out = tmp_path / "cal"
    stack = tmp_path / "stack.toml"  # the example stack with the fast model, as above
    text = STACK.read_text().replace(
        "[model]\n", '[model]\nelectrostatics = "linear"\ntransport = "coherent"\n', 1
    )
    stack.write_text(text)
    assert main(["calibrate", str(stack), "--measured", str(csv), "--out", str(out), "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    names = {p["name"] for p in record["parameters"]}
    assert {"barrier1.thickness_ml", "InGaAs.rate", "series_resistance_ohm_um2"} <= names
    for p in record["parameters"]:
        assert {"name", "nominal", "value", "ci_low", "ci_high", "unit"} <= set(p)
    for f in (
        "calibration.json",
        "calibrated.toml",
        "overlay.png",
        "figures_of_merit.csv",
        "calibration.html",
    ):
        assert (out / f).is_file(), f
    page = (out / "calibration.html").read_text()
    assert "data:image/png;base64," in page and "<script" not in page and "http" not in page
    assert "barrier1" in record["grower"]
    # a good fit: nothing at a bound of its range, no warning (record nor stderr)
    assert record["warnings"] == [] and not any(p["at_bound"] for p in record["parameters"])
    assert "warning" not in capsys.readouterr().err
    # the record names the physics the fit used, here the stack file's fast model
    physics = record["physics_model"]
    assert physics["electrostatics"] == "linear" and physics["transport"] == "coherent"
    assert physics["label"] == "Tsu-Esaki coherent, linear drop"
    # the calibrated stack runs through `iv` and gives the fitted device (consistency: a
    # fuzz find had its rate-scaled spacers in fractional monolayers, which `iv` takes as
    # islands where the fit had a uniform layer)
    assert (
        main(["iv", str(out / "calibrated.toml"), "--out", str(tmp_path / "iv"), "--no-figures"])
        == 0
    )
    got = json.loads((tmp_path / "iv" / "metrics.json").read_text())["metrics"]
    fitted = record["figures_of_merit"][0]["fitted_continuous"]
    for key in ("peak_current_density_a_cm2", "valley_current_density_a_cm2"):  # measured:
        assert got[key] == pytest.approx(fitted[key], rel=1e-3), key  # 2e-4, 4e-4 (1.8e-3 before)


def _fast_stack_file(tmp_path: Path) -> Path:
    """The example stack with the fast model (linear drop, coherent current) as a file."""
    stack = tmp_path / "stack.toml"
    text = STACK.read_text().replace(
        "[model]\n", '[model]\nelectrostatics = "linear"\ntransport = "coherent"\n', 1
    )
    stack.write_text(text)
    return stack


def _measured_file(tmp_path: Path, seed: int) -> Path:
    m = synthetic_measurement(_stack_data(), TRUTH, BIAS, noise=0.02, seed=seed)
    csv = tmp_path / f"m{seed}.csv"
    csv.write_text(
        "bias_v,current_density_a_cm2\n"
        + "".join(f"{v:.4f},{j:.6g}\n" for v, j in zip(m.bias_v, m.current_density_a_cm2))
    )
    return csv


def test_a_fit_that_cannot_be_trusted_says_so(tmp_path, capsys):
    # invented: the fast model's sweep of the stack grown with TRUTH, every current divided by
    # 80 (1/154 of the nominal stack's largest current, within what the stack can carry at the
    # thick ends of the fitted thicknesses' ranges): the fit runs, cannot follow, and says so
    # in every output: a parameter at a bound of its range, the poor fit, the units
    m = synthetic_measurement(_stack_data(), TRUTH, BIAS, noise=0.02, seed=3)
    csv = tmp_path / "m.csv"
    csv.write_text(
        "bias_v,current_density_a_cm2\n"
        + "".join(f"{v:.4f},{j / 80:.6g}\n" for v, j in zip(m.bias_v, m.current_density_a_cm2))
    )
    out = tmp_path / "cal"
    stack = _fast_stack_file(tmp_path)
    assert main(["calibrate", str(stack), "--measured", str(csv), "--out", str(out)]) == 0
    captured = capsys.readouterr()
    record = json.loads((out / "calibration.json").read_text())
    warns = record["warnings"]
    assert {"at_bound", "poor_fit", "units"} <= {w["kind"] for w in warns}
    shown = [
        x for x in captured.err.splitlines() if x.startswith("wellwright calibrate: warning: ")
    ]
    assert shown == [f"wellwright calibrate: warning: {w['text']}" for w in warns]  # one line each
    units = next(w["text"] for w in warns if w["kind"] == "units")
    assert str(csv) in units and "1/154 of the nominal stack's" in units
    assert "current_density_a_cm2 in A/cm^2" in units
    bound = [p for p in record["parameters"] if p["at_bound"]]
    assert bound
    for p in bound:  # the printed summary marks the parameter's line
        line = next(x for x in captured.out.splitlines() if x.strip().startswith(p["name"]))
        assert f"(at its {p['at_bound']} bound: the data may need a value beyond the range)" in line
    assert record["grower"].startswith("This fit cannot be trusted (see its warnings).")
    assert "This fit cannot be trusted" in captured.out
    page = (out / "calibration.html").read_text()
    assert "<h2>Warnings</h2>" in page and "poor fit: scatter in ln J" in page
    assert f"at its {bound[0]['at_bound']} bound" in page


def test_at_a_bound_only_where_the_range_is_a_choice():
    # a bound that is a physical limit (no series resistance) holds a result, not a sign of a
    # range too narrow; the tolerance is a thousandth of the range
    from wellwright.optimize.calibrate.problem import FitParameter
    from wellwright.optimize.calibrate.record import _at_bound

    r = FitParameter("r", "resistance", "ohm um^2", 0.0, 10.0, 0.0, 0.0, 1e5)
    assert _at_bound(r, 0.0) is None and _at_bound(r, 1e5 - 50.0) == "upper"
    t = FitParameter("b.thickness_ml", "thickness", "ML", 5.0, 1.0, 0.5, -4.0, 4.0)
    assert _at_bound(t, -3.995) == "lower" and _at_bound(t, -3.9) is None


def test_same_seed_same_record_and_seed_recorded(tmp_path):
    # determinism (project rule, common practice): the fit's one random step (random starts
    # of the continuous parameters) is seeded; one seed gives one record, and the record says
    # which seed it was
    from wellwright.optimize.calibrate.run import calibrate
    from wellwright.optimize.shared.outputs import json_ready

    stack, csv = _fast_stack_file(tmp_path), _measured_file(tmp_path, 7)
    records = [json_ready(calibrate(stack, [csv], seed=123)[2]) for _ in range(2)]
    assert json.dumps(records[0]) == json.dumps(records[1])
    assert records[0]["command"]["seed"] == 123 and records[0]["method"]["seed"] == 123
    assert "8 random starts" in records[0]["method"]["multistart"]  # the random step ran


@pytest.mark.parametrize("value", ["-1", "4294967296", "1.5"])
def test_bad_seed_is_one_line(value, tmp_path, capsys):
    out = tmp_path / "out"
    csv = _write(tmp_path / "m.csv", _csv())
    argv = ["calibrate", str(STACK), "--measured", str(csv), "--seed", value, "--out", str(out)]
    try:
        status = main(argv)
    except SystemExit as stop:  # argparse's own usage error (not a whole number)
        status = stop.code
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2 and len(err) == 1 and "--seed" in err[0], err
    assert not out.exists()


# --------------------------------------------------------------------------- carried forward


def _linked_study(tmp_path, model):
    from wellwright.optimize.study.study import load_study

    (tmp_path / "cal").mkdir()
    record = {"kind": "wellwright calibration", "model": model}
    (tmp_path / "cal" / "calibration.json").write_text(json.dumps(record))
    text = (REPO / "studies" / "inp_thz_search.toml").read_text()
    text += '\n[calibration]\nfrom = "cal/calibration.json"\n'
    (tmp_path / "study.toml").write_text(text)
    return load_study(tmp_path / "study.toml")


def test_study_uses_the_linked_calibration(tmp_path):
    from wellwright.optimize.study.study import load_study

    model = {
        "AlAs.offset_ev": 0.05,
        "InGaAs.rate": 1.02,
        "series_resistance_ohm_um2": 20.0,
        "broadening_mev": 1.5,
    }
    linked = _linked_study(tmp_path, model)
    plain = load_study(REPO / "studies" / "inp_thz_search.toml")
    params = {"barrier1.thickness_ml": 5, "well.thickness_ml": 15}
    a, b = linked.stack(params), plain.stack(params)
    layer = {lay.name: lay for lay in a.layers}
    nominal = {lay.name: lay for lay in b.layers}
    assert layer["barrier1"].conduction_band_ev == pytest.approx(
        nominal["barrier1"].conduction_band_ev + 0.05
    )
    assert layer["well"].thickness_nm == pytest.approx(nominal["well"].thickness_nm * 1.02)
    assert layer["emitter_spacer"].thickness_nm == pytest.approx(2.0 * 1.02)
    assert layer["barrier1"].thickness_nm == pytest.approx(nominal["barrier1"].thickness_nm)
    assert a.model.broadening_mev == 1.5 and a.device.series_resistance_ohm_um2 == 20.0
    assert linked.fingerprint() != plain.fingerprint()  # a new calibration redoes the search
    from wellwright.optimize.report.build import _calibration_note

    assert "calibrated against a measured device" in _calibration_note(linked)
    assert "not calibrated" in _calibration_note(plain)


def test_study_link_to_a_missing_calibration_is_one_line(tmp_path):
    text = (
        REPO / "studies" / "inp_thz_search.toml"
    ).read_text() + '\n[calibration]\nfrom = "nope.json"\n'
    (tmp_path / "s.toml").write_text(text)
    from wellwright.optimize.study.study import load_study

    with pytest.raises(InputError, match="calibration.from.*not found"):
        load_study(tmp_path / "s.toml")


def test_a_negative_sweep_recovers_its_series_resistance(tmp_path):
    # a fuzz run's negative sweep gave R 11.8 (9.4-14.3) against the true 15: its own data
    # (interpolated across the fold of the NDR); made by the project's invented-measurement
    # routine and written as a user's file (0 down to -1 V), both polarities come back
    # inside their intervals (the fast model, as the other fits here). The routine refuses
    # biases that are not increasing (decreasing ones gave every current zero, silently).
    from wellwright.optimize.calibrate.measured import read_measured

    truth = {"barrier1.thickness_ml": 6.0, "series_resistance_ohm_um2": 15.0}
    with pytest.raises(ValueError, match="strictly increasing"):
        synthetic_measurement(_stack_data(), truth, -BIAS, noise=0.01, seed=5)
    m = synthetic_measurement(_stack_data(), truth, -BIAS[::-1], noise=0.01, seed=5)
    rows = [f"{v:.4f},{j:.6e}" for v, j in zip(m.bias_v[::-1], m.current_density_a_cm2[::-1])]
    csv = _write(tmp_path / "neg.csv", "bias_v,current_density_a_cm2\n" + "\n".join(rows) + "\n")
    problem = build_problem(_stack_data(), [read_measured(csv)], fit=list(truth))
    recovered = _recovered(problem, run_fit(problem, seed=0), truth)
    assert all(recovered.values()), recovered
