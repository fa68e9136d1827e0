"""Study files: ranges, ties, spec scoring, constraints and bad input.

The scoring checks test this project's own documented definitions (in
``wellwright.optimize.study.study``); the critical-thickness check uses Matthews and
Blakeslee, J. Cryst. Growth 27, 118 (1974), through wellwright.physics.materials.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from conftest import study_text
from wellwright.optimize.study.study import NAN_VIOLATION, Window, load_study, parse_study
from wellwright.physics import materials
from wellwright.physics.errors import InputError
from wellwright.physics.iv import METRIC_NAMES
from wellwright.physics.stack import CriticalThicknessWarning, parse_stack


def _metrics(**values: float) -> dict[str, np.ndarray]:
    given = {k: np.atleast_1d(np.asarray(v, float)) for k, v in values.items()}
    n = max(v.size for v in given.values())
    return {k: given.get(k, np.full(n, np.nan)) for k in METRIC_NAMES}


# --------------------------------------------------------------------------- valid files


def test_ranges_ties_and_defaults(write_study):
    study = load_study(write_study(study_text(well_x="{min = 0.45, max = 0.7, step = 0.01}")))
    assert study.name == "study"
    assert study.parameter_names == ("barrier1.thickness_ml", "well.thickness_ml", "well.x")
    barrier = study.variables[0]
    assert barrier.integer and barrier.step == 1 and barrier.layers == (2, 4)  # same_as shares it
    assert study.sweep.bias_max_v == 1.0 and study.sweep.points == 61  # documented defaults
    assert study.search.trials == 100 and study.search.sampler == "tpe"
    stack = study.stack({"barrier1.thickness_ml": 6, "well.thickness_ml": 12, "well.x": 0.61})
    assert stack.layers[2].thickness_ml == 6 and stack.layers[4].thickness_ml == 6
    assert stack.layers[4].material == "AlAs" and stack.layers[4].name == "barrier2"
    assert stack.layers[3].label == "In0.61Ga0.39As"


def test_stack_dict_is_a_stack_file(write_study):
    study = load_study(write_study(study_text()))
    data = study.stack_dict({"barrier1.thickness_ml": 5, "well.thickness_ml": 15})
    stack = parse_stack(data)
    assert [layer.name for layer in stack.layers] == list(study.layer_names)
    assert study.parameters_of(stack) == {"barrier1.thickness_ml": 5, "well.thickness_ml": 15}


def test_log_range_and_reserved_tables_pass_through(write_study):
    text = study_text(
        extra="[growth]\nthickness_ml_sigma = 0.5\n[tolerance]\ndesigns = 3\n"
        "[report]\nsamples = 64\n[sweep]\nbias_max_v = 1.2\npoints = 41\n"
    )
    text = text.replace('doping_cm3 = 2e18\n"""', "")  # no-op guard
    text = text.replace(
        'name = "collector"\nmaterial = "In0.53Ga0.47As"\ndoping_cm3 = 2e18',
        'name = "collector"\nmaterial = "In0.53Ga0.47As"\n'
        "doping_cm3 = {min = 1e17, max = 5e18, log = true}\ngrowth = {doping_sigma = 0.1}",
    )
    study = load_study(write_study(text))
    var = study.variables[-1]
    assert var.name == "collector.doping_cm3" and var.log and not var.integer
    assert study.reserved == {
        "growth": {"thickness_ml_sigma": 0.5},
        "tolerance": {"designs": 3},
        "report": {"samples": 64},
    }
    assert study.layer_growth == {"collector": {"doping_sigma": 0.1}}
    assert study.sweep.points == 41 and study.sweep.bias_v[-1] == pytest.approx(1.2)


def test_fingerprint_follows_the_space(write_study):
    a = load_study(write_study(study_text(), "a"))
    b = load_study(write_study(study_text(), "b"))
    c = load_study(write_study(study_text(barrier="{min = 4, max = 8}"), "c"))
    assert a.fingerprint() == b.fingerprint() != c.fingerprint()


# --------------------------------------------------------------------------- scoring


def test_window_distance_and_margin():
    # our definition: distance outside / half width; margin negative inside
    w = Window("pvcr", 2.0, 4.0, 1.0)
    assert w.distance(np.array([3.0, 5.0, 0.5])).tolist() == [0.0, 1.0, 1.5]
    assert w.margin(np.array([3.0, 5.0])).tolist() == [-1.0, 1.0]
    assert np.isnan(w.distance(np.array([np.nan]))[0])


def test_spec_violation_orders_designs_by_how_far_off(write_study):
    study = load_study(
        write_study(
            study_text(
                targets="peak_current_density_a_cm2 = {min = 2e5, max = 3e5}\npvcr = {min = 3}\n"
            )
        )
    )
    jp = np.array([2.5e5, 3.5e5, 4.5e5, 2.5e5, np.nan])
    pvcr = np.array([5.0, 5.0, 5.0, 1.5, np.nan])
    v = study.spec_violation(_metrics(peak_current_density_a_cm2=jp, pvcr=pvcr))
    assert v[0] == 0.0
    assert v[1] == pytest.approx(math.log1p(1.0))  # 0.5e5 outside a half width of 0.5e5
    assert v[1] < v[2]
    assert v[3] == pytest.approx(math.log1p(0.5))  # one-sided: scale is the bound, 1.5 below 3
    assert v[4] == 2 * NAN_VIOLATION  # no NDR: both figures missing
    score = study.single_score(_metrics(peak_current_density_a_cm2=jp, pvcr=pvcr))
    assert score[0] <= 0 < score[1] < score[2]


def test_single_score_pushes_the_objective_once_on_spec(write_study):
    study = load_study(write_study(study_text(targets='pvcr = {min = 3}\nmaximize = ["pvcr"]\n')))
    score = study.single_score(_metrics(pvcr=np.array([4.0, 10.0, 100.0, 2.0])))
    assert score[2] < score[1] < score[0] < 0 < score[3]
    assert not study.multi_objective and study.directions == ("minimize",)


def test_multi_objective_directions_and_spec_constraint(write_study):
    study = load_study(
        write_study(
            study_text(
                targets='pvcr = {min = 3}\nmaximize = ["pvcr"]\n'
                'minimize = ["valley_current_density_a_cm2"]\n'
            )
        )
    )
    assert study.multi_objective and study.directions == ("maximize", "minimize")
    assert study.constraint_names[-1] == "spec"
    vals = study.objective_values(
        _metrics(pvcr=[np.nan, 5.0], valley_current_density_a_cm2=[np.nan, 1e3])
    )
    assert vals[0].tolist() == [-math.inf, math.inf] and vals[1].tolist() == [5.0, 1e3]


# --------------------------------------------------------------------------- constraints


def test_critical_thickness_constraint_matches_matthews_blakeslee(write_study):
    # Matthews and Blakeslee (1974) via wellwright.physics.materials.critical_thickness_nm:
    # AlAs on InP is ~3.5 % mismatched, so 5 ML is coherent and 60 ML is not.
    study = load_study(
        write_study(
            study_text(
                barrier="{min = 4, max = 60}", extra="[constraints]\ncritical_thickness = true\n"
            )
        )
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error", CriticalThicknessWarning)  # the study silences it
        thin = study.stack({"barrier1.thickness_ml": 5})
        thick = study.stack({"barrier1.thickness_ml": 60})
    a_s = float(materials.lattice_constant_nm("InP"))
    h_c = float(materials.critical_thickness_nm("AlAs", substrate_lattice_nm=a_s))
    c_thin = study.constraint_values(thin, {})["critical_thickness"]
    c_thick = study.constraint_values(thick, {})["critical_thickness"]
    assert c_thin < 0 < c_thick
    assert c_thick == pytest.approx((thick.layers[2].thickness_nm - h_c) / h_c, rel=1e-9)


def test_thickness_and_metric_bound_constraints(write_study):
    study = load_study(
        write_study(
            study_text(
                extra="[constraints]\nmax_active_thickness_nm = 14\n"
                "valley_voltage_v = {max = 0.9}\n"
            )
        )
    )
    stack = study.stack({"barrier1.thickness_ml": 4, "well.thickness_ml": 10})
    c = study.constraint_values(stack, {"valley_voltage_v": 0.45})
    assert c["max_active_thickness_nm"] == pytest.approx((stack.active_thickness_nm - 14) / 14)
    assert c["metric:valley_voltage_v"] == pytest.approx(-0.5)  # (0.45 - 0.9) / 0.9
    assert (
        study.constraint_values(stack, {"valley_voltage_v": math.nan})["metric:valley_voltage_v"]
        == 1.0
    )
    assert study.constraint_values(None, {})["stack_valid"] == 1.0


# --------------------------------------------------------------------------- bad files


@pytest.mark.parametrize(
    "edit, match",
    [
        (lambda t: t + "[wishes]\nmore = 1\n", r"key 'wishes': unknown key; allowed: .*targets"),
        (
            lambda t: t.replace('material = "AlAs"', "material = {min = 1, max = 2}"),
            r"layer 3 \('[^']+'\), key 'material': cannot be a range; keys that may be ranges: .*thickness_ml",
        ),
        (
            lambda t: t.replace("{min = 4, max = 7}", "{min = 4.5, max = 7}"),
            r"key 'thickness_ml.min': 4.5 is not a whole number of monolayers",
        ),
        (
            lambda t: t.replace("{min = 4, max = 7}", "{min = 7, max = 4}"),
            r"key 'thickness_ml.max': min \(7\) must be below max \(4\)",
        ),
        (
            lambda t: t.replace("{min = 4, max = 7}", "{max = 7}"),
            r"key 'thickness_ml.min': range needs min and max",
        ),
        (
            lambda t: t.replace("{min = 4, max = 7}", "{min = 4, max = 7, stride = 1}"),
            r"key 'thickness_ml.stride': unknown range key 'stride'",
        ),
        (
            lambda t: t.replace("x = 0.53", "x = {min = 0.4, max = 0.6, step = 0.01, log = true}"),
            r"key 'x.step': give either step or log = true, not both",
        ),
        (
            lambda t: t.replace("x = 0.53", "x = {min = 0.4, max = 0.6, step = 0.03}"),
            r"key 'x.step': max - min \(0.2\) must be a whole number of steps",
        ),
        (
            lambda t: t.replace("x = 0.53", "x = {min = 0.5, max = 1.5}"),
            r"layer 4 \('[^']+'\), key 'x': with every range at its max: 1.5 outside \[0, 1\]",
        ),
        (  # a fixed key's error is not blamed on the ranges
            lambda t: t.replace("temperature_k = 300", "temperature_k = 0.5"),
            r"key 'temperature_k': 0.5 outside \[1, 1000\] K$",
        ),
        (
            lambda t: t.replace("pvcr = {min = 3}", "pvrc = {min = 3}"),
            r"key 'targets.pvrc': unknown figure of merit; allowed: peak_current_density_a_cm2",
        ),
        (
            lambda t: t.replace("pvcr = {min = 3}", "pvcr = {target = 3}"),
            r"key 'targets.pvcr': give target and tolerance together",
        ),
        (
            lambda t: t.replace("pvcr = {min = 3}", "pvcr = {min = 3, max = 2}"),
            r"key 'targets.pvcr.max': min \(3\) must be below max \(2\)",
        ),
        (
            lambda t: t.replace("pvcr = {min = 3}", "pvcr = 3"),
            r"key 'targets.pvcr': must be a window \{min = .., max = ..\}",
        ),
        (
            lambda t: t.replace("pvcr = {min = 3}", 'maximize = ["peak_current"]'),
            r"key 'targets.maximize': unknown figure of merit 'peak_current'",
        ),
        (
            lambda t: t.replace("pvcr = {min = 3}", 'maximize = ["pvcr"]\nminimize = ["pvcr"]'),
            r"key 'targets.minimize': 'pvcr' is listed twice",
        ),
        (
            lambda t: t.split("[targets]")[0] + "[targets]\n",
            r"key 'targets': needs a window for at least one figure of merit",
        ),
        (
            lambda t: t.replace('same_as = "barrier1"', 'same_as = "barrier7"'),
            r"layer 5 \('[^']+'\), key 'same_as': 'barrier7' is not a layer name; layers: emitter, spacer1",
        ),
        (
            lambda t: t.replace('same_as = "barrier1"', 'same_as = "barrier1"\nthickness_ml = 3'),
            r"layer 5 \('[^']+'\), key 'same_as': a layer with same_as takes only name \(and growth\); "
            r"remove thickness_ml",
        ),
        (
            lambda t: t.replace(
                'name = "barrier1"\nmaterial = "AlAs"\nthickness_ml = {min = 4, max = 7}',
                'name = "barrier1"\nsame_as = "barrier2"',
            ),
            r"layer 3 \('[^']+'\), key 'same_as': same_as chain loops back to this layer",
        ),
        (  # a contact has no thickness to share (found by a fuzz run: a missing key before)
            lambda t: t.replace('same_as = "barrier1"', 'same_as = "emitter"'),
            r"layer 5 \('[^']+'\), key 'same_as': 'emitter' is a contact \(the first or last "
            r"layer\), which has no thickness to share",
        ),
        (
            lambda t: t.replace('name = "well"', 'name = "barrier1"'),
            r"layer 4 \('[^']+'\), key 'name': name 'barrier1' used twice",
        ),
        (
            lambda t: t + '[search]\nsampler = "cmaes"\n',
            r"key 'search.sampler': 'cmaes' is not one of tpe, nsga2, random",
        ),
        (
            lambda t: t + "[search]\ntrials = -5\n",
            r"key 'search.trials': must be a whole number in \[0, 1000000\], got -5",
        ),
        (
            lambda t: t + "[search]\ntrails = 5\n",
            r"key 'search.trails': unknown key; allowed: trials",
        ),
        (
            lambda t: t + "[search]\nbaseline = {barrier1.thickness_ml = 9}\n",
            r"key 'search.baseline': barrier1.thickness_ml = 9 outside its range "
            r"\{min = 4, max = 7\}",
        ),
        (
            lambda t: t + "[search]\nbaseline = {well.x = 0.5}\n",
            r"key 'search.baseline': 'well.x' is not a search parameter",
        ),
        (
            lambda t: t + '[search]\nbaseline = "nowhere.toml"\n',
            r"key 'search.baseline': baseline stack file .*nowhere.toml' not found",
        ),
        (
            lambda t: t + "[sweep]\nbias_max_v = -1\n",
            r"key 'sweep.bias_max_v': must be above bias_min_v \(0 V\)",
        ),
        (  # the metrics take one branch (physics.iv.metrics_branch): the other was ignored
            lambda t: t + "[sweep]\nbias_min_v = -1\nbias_max_v = 1\n",
            r"key 'sweep': -1 to 1 V spans both polarities",
        ),
        (
            lambda t: t + "[sweep]\npoints = 3\n",
            r"key 'sweep.points': must be a whole number in \[5, 2001\]",
        ),
        (
            lambda t: t + "[constraints]\nmax_thickness = 3\n",
            r"key 'constraints.max_thickness': unknown figure of merit; "
            r"allowed: .*max_active_thickness_nm",
        ),
        (
            lambda t: t + '[constraints]\ncritical_thickness = "yes"\n',
            r"key 'constraints.critical_thickness': must be true or false",
        ),
        (
            lambda t: t.replace('name = "well"', 'name = "well"\ngrowth = 3'),
            r"layer 4 \('[^']+'\), key 'growth': must be a table",
        ),
    ],
)
def test_bad_study_files_name_the_key(write_study, edit, match):
    path = write_study(edit(study_text()))
    with pytest.raises(InputError, match=match) as info:
        load_study(path)
    assert str(path) in str(info.value)  # the file is named
    assert "\n" not in str(info.value)  # one line


def _known_stack(barrier_ml: int, well_ml: int) -> str:
    """A plain stack file with the study's layer names."""
    text = study_text().split("[targets]")[0]
    text = text.replace("{min = 4, max = 7}", str(barrier_ml)).replace(
        "{min = 10, max = 18}", str(well_ml)
    )
    return text.replace('same_as = "barrier1"', f'material = "AlAs"\nthickness_ml = {barrier_ml}')


def test_baseline_stack_file_outside_the_range(write_study, tmp_path):
    base = _known_stack(9, 12)
    (tmp_path / "known.toml").write_text(base)
    path = write_study(study_text(extra='[search]\nbaseline = "known.toml"\n'))
    with pytest.raises(
        InputError, match=r"known.toml, key 'barrier1.thickness_ml': 9 outside the study's range"
    ):
        load_study(path)


def test_baseline_stack_file_gives_the_parameters(write_study, tmp_path):
    base = _known_stack(5, 15)
    (tmp_path / "known.toml").write_text(base)
    study = load_study(
        write_study(
            study_text(extra='[search]\nbaseline = ["known.toml", {well = {thickness_ml = 11}}]\n')
        )
    )
    assert study.search.baseline == (
        {"barrier1.thickness_ml": 5, "well.thickness_ml": 15},
        {"well.thickness_ml": 11},
    )


def test_not_a_table_and_missing_file(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        load_study(tmp_path / "absent.toml")
    with pytest.raises(InputError, match=r"key 'targets': must be a table"):
        parse_study({"layers": [], "targets": 3})
