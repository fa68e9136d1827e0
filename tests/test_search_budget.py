"""Trials spent on new designs: enumeration of a small space, repeats not counted.

Check values: the brute-force optimum over every design of the space (this
test's construction), with a synthetic evaluator (a smooth bowl of the two
thicknesses) so that the test measures the search, not the physics.
"""

from __future__ import annotations

import itertools

import numpy as np
import optuna
from conftest import study_text
from optuna.trial import TrialState
from wellwright.optimize.search.designs import at_range_limit
from wellwright.optimize.search.engine import design_budget, run_search
from wellwright.optimize.study.study import load_study
from wellwright.physics.iv import METRIC_NAMES

SPACE = {"barrier": "{min = 2, max = 16}", "well": "{min = 10, max = 24}"}  # 15 x 15 designs
TARGETS = "peak_current_density_a_cm2 = {min = 1.0e5, max = 1.6e5}\npvcr = {min = 3}\n"


def bowl_evaluator(stacks, bias_v):
    """Figures of merit that depend smoothly on the barrier and well monolayers (synthetic)."""
    b = np.array([s.layers[3].thickness_ml for s in stacks], float)
    w = np.array([s.layers[4].thickness_ml for s in stacks], float)
    out = {k: np.full(len(stacks), 1.0) for k in METRIC_NAMES}
    out["peak_current_density_a_cm2"] = 1.3e5 * (
        1 + 0.011 * (b - 9.3) ** 2 + 0.007 * (w - 17.6) ** 2
    )
    out["pvcr"] = 3.0 + 0.1 * w - 0.05 * b
    return out


def _study(write_study, name, sampler="tpe"):
    extra = f'[sweep]\npoints = 5\n[search]\nsampler = "{sampler}"\nseed = 2\n'
    text = study_text(extra=extra, targets=TARGETS, **SPACE)
    return load_study(write_study(text, name))


def _brute_force_best(study):
    """Score of every design of the space; the unique best one."""
    designs = [
        {"barrier1.thickness_ml": b, "well.thickness_ml": w}
        for b, w in itertools.product(range(2, 17), range(10, 25))
    ]
    metrics = bowl_evaluator([study.stack(p) for p in designs], None)
    score = study.single_score(metrics)
    order = np.argsort(score)
    assert score[order[0]] < score[order[1]], "the test needs a unique optimum"
    return designs[order[0]]


def _complete(result):
    study = optuna.load_study(study_name=result.study_name, storage=result.storage)
    return study.get_trials(deepcopy=False, states=(TrialState.COMPLETE,))


def test_small_space_is_enumerated_each_design_once_and_the_optimum_found(write_study, tmp_path):
    study = _study(write_study, "grid15")
    assert design_budget(study, 500) == 225
    r = run_search(
        study,
        trials=500,
        out_dir=tmp_path / "o",
        progress=False,
        write=False,
        evaluator=bowl_evaluator,
    )
    trials = _complete(r)
    keys = [study.parameter_key(t.params) for t in trials]
    assert len(trials) == 225 and len(set(keys)) == 225  # every design, each once
    assert r.timing["evaluated"] == 225 and r.timing["copied"] == 0
    best = _brute_force_best(study)
    assert r.designs[0]["params"] == best
    assert r.designs[0]["at_range_limit"] == at_range_limit(study, best)
    # resuming a finished enumeration evaluates nothing
    again = run_search(
        study,
        trials=500,
        out_dir=tmp_path / "o",
        progress=False,
        write=False,
        evaluator=bowl_evaluator,
    )
    assert again.timing["evaluated"] == 0 and again.n_complete == 225


def test_a_repeated_design_is_not_counted_toward_the_budget(write_study, tmp_path):
    study = _study(write_study, "tpe15")
    budget = 40  # below the 225 designs: TPE, which repeats designs near its optimum
    r = run_search(
        study,
        trials=budget,
        out_dir=tmp_path / "o",
        progress=False,
        write=False,
        evaluator=bowl_evaluator,
    )
    trials = _complete(r)
    new = [t for t in trials if "duplicate_of" not in t.user_attrs]
    assert len(new) == budget
    assert len({study.parameter_key(t.params) for t in new}) == budget  # never evaluated twice
    assert r.timing["evaluated"] == budget
    assert len(trials) == budget + r.timing["copied"]


def test_designs_at_an_end_of_their_range_are_flagged(write_study):
    study = _study(write_study, "limits")
    assert at_range_limit(study, {"barrier1.thickness_ml": 9, "well.thickness_ml": 17}) == []
    assert at_range_limit(study, {"barrier1.thickness_ml": 2, "well.thickness_ml": 24}) == [
        "barrier1.thickness_ml",
        "well.thickness_ml",
    ]
    assert at_range_limit(study, {"barrier1.thickness_ml": 16, "well.thickness_ml": 11}) == [
        "barrier1.thickness_ml"
    ]
