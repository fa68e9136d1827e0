"""Growth-variation model: [growth] parsing, seeds, as-grown sampling, island model."""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest
from wellwright.optimize.study.growth import (
    DEFAULT_GROWTH,
    GrowthSettings,
    as_generator,
    growth_model,
    parse_growth,
    split_layer_growth,
)
from wellwright.physics import materials
from wellwright.physics.errors import InputError
from wellwright.physics.islands import area_weight_matrix, island_mixture
from wellwright.physics.iv import current_at_bias, locate_peak_valley, sweep
from wellwright.physics.stack import load_stack, parse_stack

STACK_FILE = Path(__file__).resolve().parents[1] / "studies" / "inp_thz_oscillator.toml"


@pytest.fixture(scope="module")
def stack():
    return load_stack(STACK_FILE)


def _raw():
    return tomllib.loads(STACK_FILE.read_text())


# --------------------------------------------------------------------------- seeds


def test_seed_helper_normalises_and_reproduces():
    # common practice (STYLE.md item 11): int/Generator/None; seed 0 is a seed, not "no seed"
    a = as_generator(0).standard_normal(5)
    b = as_generator(0).standard_normal(5)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, as_generator(1).standard_normal(5))
    g = np.random.default_rng(3)
    assert as_generator(g) is g
    assert isinstance(as_generator(None), np.random.Generator)
    with pytest.raises(TypeError, match="seed"):
        as_generator("7")


def test_same_seed_same_as_grown_tables(stack):
    m = growth_model(stack)
    t1 = m.as_grown(m.draw_z(6, 11), seed=12)
    t2 = m.as_grown(m.draw_z(6, 11), seed=12)
    for key in t1.__dict__:
        assert np.array_equal(getattr(t1, key), getattr(t2, key)), key


# --------------------------------------------------------------------------- parsing


def test_growth_defaults_are_typical_practice():
    # defaults stated in the issue as typical practice (common practice)
    settings, per_layer = parse_growth(None)
    assert settings == DEFAULT_GROWTH == GrowthSettings(0.5, 0.01, 0.005, 0.05)
    assert per_layer == {}


@pytest.mark.parametrize(
    ("table", "layer_growth", "key", "text"),
    [
        ({"thickness_sigma": 0.5}, None, "growth.thickness_sigma", "allowed: thickness_ml_sigma"),
        ({"rate_sigma": -0.01}, None, "growth.rate_sigma", r"outside \[0, 0.5\]"),
        ({"x_sigma": "small"}, None, "growth.x_sigma", "must be a number"),
        ({"doping_sigma": True}, None, "growth.doping_sigma", "must be a number"),
        ([1, 2], None, "growth", "must be a table"),
        ({}, {"barrier1": {"rate_sigma": 0.02}}, "growth.rate_sigma", "per material"),
        ({}, {"barrier1": 0.3}, "growth", "must be a table"),
        ({}, {"nosuch": {"x_sigma": 0.01}}, "growth", "no layer named 'nosuch'"),
        ({"island_layers": 9}, None, "growth.island_layers", r"whole number in \[0, 8\]"),
        ({"island_layers": 1.5}, None, "growth.island_layers", "whole number"),
    ],
)
def test_bad_growth_entries_name_the_key(table, layer_growth, key, text):
    with pytest.raises(InputError, match=text) as info:
        parse_growth(
            table, layer_growth, layer_names=("emitter", "barrier1", "collector"), source="s.toml"
        )
    assert info.value.key == key
    assert f"key '{key}'" in str(info.value)


def test_layer_override_and_strip():
    raw = _raw()
    raw["layers"][2]["growth"] = {"thickness_ml_sigma": 0.2}
    stripped, growth = split_layer_growth(raw)
    assert growth == {"barrier1": {"thickness_ml_sigma": 0.2}}
    assert "growth" not in stripped["layers"][2] and "growth" in raw["layers"][2]  # input untouched
    stack = parse_stack(stripped)
    settings, per_layer = parse_growth(
        {"rate_sigma": 0.02}, growth, layer_names=[lay.name for lay in stack.layers]
    )
    m = growth_model(stack, settings, per_layer)
    sig = dict(zip(m.names, m.sigmas))
    assert sig["barrier1.thickness_ml"] == 0.2 and sig["barrier2.thickness_ml"] == 0.5
    assert sig["AlAs.rate"] == 0.02 and sig["InGaAs.rate"] == 0.02
    assert "emitter.thickness_ml" not in sig  # contacts have no thickness
    assert {"emitter.doping", "collector.doping", "well.x"} <= set(sig)


# --------------------------------------------------------------------------- sampling


def test_rate_error_is_shared_by_every_layer_of_a_material(stack):
    # the model's definition: t = n (1 + r_material) + d
    m = growth_model(
        stack, GrowthSettings(thickness_ml_sigma=0.5, rate_sigma=0.02, x_sigma=0, doping_sigma=0)
    )
    z = np.zeros((1, len(m.names)))
    z[0, m.names.index("AlAs.rate")] = 1.0
    ml = m.thickness_ml(z)[0]
    names = [lay.name for lay in stack.layers]
    assert ml[names.index("barrier1")] == pytest.approx(5 * 1.02)
    assert ml[names.index("barrier2")] == pytest.approx(5 * 1.02)
    assert ml[names.index("well")] == pytest.approx(15.0)


def test_composition_goes_through_material_parameters(stack):
    m = growth_model(
        stack, GrowthSettings(thickness_ml_sigma=0, rate_sigma=0, x_sigma=0.01, doping_sigma=0)
    )
    z = np.zeros((2, len(m.names)))
    j = m.names.index("well.x")
    z[:, j] = [-2.0, 2.0]
    t = m.as_grown(z, islands="nearest")
    i = [lay.name for lay in stack.layers].index("well")
    a_sub = materials.lattice_constant_nm("InP", None, temperature_k=300.0)
    ref = materials.material_parameters(
        "InGaAs", np.array([0.51, 0.55]), temperature_k=300.0, substrate_lattice_nm=a_sub
    )
    np.testing.assert_allclose(t.edge_ev[:, i], ref.conduction_band_ev, rtol=1e-12)
    np.testing.assert_allclose(t.mass_m0[:, i], ref.mass_m0, rtol=1e-12)
    np.testing.assert_allclose(t.thickness_nm[:, i], 15 * np.asarray(ref.monolayer_nm), rtol=1e-12)


def test_island_sampling_draws_neighbours_with_area_weights(stack):
    # island model (module docstring): upper whole thickness with probability = fractional part
    m = growth_model(
        stack, GrowthSettings(thickness_ml_sigma=0.5, rate_sigma=0, x_sigma=0, doping_sigma=0)
    )
    n = 4000
    z = np.zeros((n, len(m.names)))
    z[:, m.names.index("barrier1.thickness_ml")] = 0.5 / 0.5  # +0.5 ML on a 5 ML barrier
    t = m.as_grown(z, seed=5)
    i = [lay.name for lay in stack.layers].index("barrier1")
    ml = t.thickness_nm[:, i] / stack.layers[i].monolayer_nm
    assert set(np.round(ml, 9)) == {5.0, 6.0}  # whole monolayers only
    share = np.mean(ml > 5.5)
    assert abs(share - 0.5) < 4 * np.sqrt(0.25 / n)  # binomial, 4 sigma (common practice)


def test_half_monolayer_is_the_mean_of_the_two_whole_monolayer_curves(stack):
    # island model (physics/islands.py; parallel islands under one mesa, common practice):
    # a barrier at exactly 5.5 ML is half 5 ML, half 6 ML; the device curve is the exact
    # mean of the two curves, and its figures of merit are those of that mixed curve
    i = [lay.name for lay in stack.layers].index("barrier1")
    ml = np.full((1, len(stack.layers)), np.nan)
    ml[0, i] = 5.5
    mix = island_mixture(ml)
    assert mix.whole_ml[:, i].tolist() == [5.0, 6.0] and mix.area_share.tolist() == [0.5, 0.5]
    table = stack.table().take(np.array([0, 0]))
    thick = table.thickness_nm.copy()
    thick[:, i] = mix.whole_ml[:, i] * stack.layers[i].monolayer_nm
    table = table.with_thickness_nm(thick)
    bias = np.linspace(0.0, 1.0, 41)
    w = area_weight_matrix(mix.owner, area_share=mix.area_share, n_samples=1)
    two = sweep(table, bias, model=stack.model, refine=False)
    mixed = sweep(table, bias, model=stack.model, refine=False, area_weights=w)
    mean = 0.5 * (two.current_density_a_cm2[0] + two.current_density_a_cm2[1])
    np.testing.assert_allclose(mixed.current_density_a_cm2[0], mean, rtol=1e-12)
    p, v = locate_peak_valley(bias[bias >= 0], mean[None, bias >= 0])
    assert mixed.metrics["peak_current_density_a_cm2"][0] == pytest.approx(mean[p[0]], rel=1e-12)
    assert mixed.metrics["valley_voltage_v"][0] == pytest.approx(bias[v[0]], rel=1e-12)
    # not the mean of the two stacks' figures of merit (the peaks sit at different biases)
    jp = two.metrics["peak_current_density_a_cm2"]
    assert mixed.metrics["peak_current_density_a_cm2"][0] < 0.5 * (jp[0] + jp[1])
    # refined on the mixed curve: never below the sampled peak of that curve
    refined = sweep(table, bias, model=stack.model, area_weights=w)
    assert refined.metrics["peak_current_density_a_cm2"][0] >= mean[p[0]]
    # and not the current of a 5.5 ML barrier: the exponential barrier dependence makes the
    # mean of the neighbours differ from it by more than 2 % somewhere (common practice)
    raw = _raw()
    raw["layers"][2]["thickness_ml"] = 5.5
    s55 = parse_stack(raw)
    j55 = current_at_bias(s55.table(), bias[1:], model=s55.model)[0]
    assert np.max(np.abs(mean[1:] - j55) / np.abs(mean[1:])) > 0.02


def test_grow_gives_each_sample_its_island_mixture(stack):
    # every sample's stacks carry whole monolayers in the island layers, their shares sum
    # to 1, and the share-weighted mean thickness is the continuous as-grown one (the
    # mixture's definition)
    m = growth_model(stack, GrowthSettings(0.5, 0.01, 0.0, 0.05))  # compositions fixed
    z = m.draw_z(5, 3)
    g = m.grow(z)
    ml = m.thickness_ml(z)
    mono = np.array([lay.monolayer_nm or np.nan for lay in stack.layers])
    whole = g.table.thickness_nm / mono
    inner = np.isfinite(ml[0])
    np.testing.assert_allclose(np.round(whole[:, inner]), whole[:, inner], atol=1e-9)
    np.testing.assert_allclose(np.bincount(g.owner, weights=g.area_share), 1.0, rtol=1e-12)
    mean = np.array(
        [np.bincount(g.owner, weights=g.area_share * whole[:, k]) for k in range(ml.shape[1])]
    ).T
    np.testing.assert_allclose(mean[:, inner], np.maximum(ml[:, inner], 1.0), rtol=1e-12)


# --------------------------------------------------------------------------- source cells

CELLS_ONLY = {"thickness_ml_sigma": 0.0, "cells": {"In": {}, "Ga": {}, "Al": {}, "Si": {}}}


def _cells_model(stack, table):
    settings, per_layer = parse_growth(table, layer_names=[lay.name for lay in stack.layers])
    return growth_model(stack, settings, per_layer)


def test_cells_name_what_the_grower_controls(stack):
    m = _cells_model(stack, {"cells": {"In": {"drift_sigma": 0.004}, "Ga": {}, "Al": {}, "Si": {}}})
    assert set(m.names) == {
        *(f"{n}.thickness_ml" for n in ("emitter_spacer", "barrier1", "well", "barrier2")),
        "collector_spacer.thickness_ml",
        "In.flux",
        "In.flux_drift",
        "Ga.flux",
        "Al.flux",
        "Si.flux",
    }  # with cells: no per-material rate, no per-layer x or doping unless given
    p = {q.name: q for q in m.parameters}
    names = [lay.name for lay in stack.layers]
    assert set(p["Al.flux"].layers) == {names.index("barrier1"), names.index("barrier2")}
    assert set(p["Si.flux"].layers) == {0, len(names) - 1}
    assert p["In.flux"].control == "In cell" and p["well.thickness_ml"].control == "layer well"


def test_composition_and_thickness_from_two_fluxes_against_closed_form(stack):
    # x = F_In / (F_In + F_Ga), growth rate proportional to F_In + F_Ga, growth time fixed
    # (common practice of group-III-limited MBE); first order: dx = x (1 - x) (e_In - e_Ga),
    # dt / t = x e_In + (1 - x) e_Ga (closed form, differentiating the two expressions)
    m = _cells_model(stack, CELLS_ONLY)
    w = [lay.name for lay in stack.layers].index("well")
    x0, t0 = 0.53, 15.0
    for e_in, e_ga in [(0.02, 0.0), (0.0, -0.03), (0.015, 0.01)]:
        z = np.zeros((1, len(m.names)))
        z[0, m.names.index("In.flux")] = e_in / 0.01
        z[0, m.names.index("Ga.flux")] = e_ga / 0.01
        ml, x, _ = m.grown_fields(z)
        f_in, f_ga = x0 * (1 + e_in), (1 - x0) * (1 + e_ga)
        assert x[0, w] == pytest.approx(f_in / (f_in + f_ga), rel=1e-12)
        assert ml[0, w] == pytest.approx(t0 * (f_in + f_ga), rel=1e-12)
    # first-order propagation: finite difference at a small error against the closed form
    h = 1e-6
    for cell, dx_de, dt_de in [("In", x0 * (1 - x0), x0), ("Ga", -x0 * (1 - x0), 1 - x0)]:
        z = np.zeros((1, len(m.names)))
        z[0, m.names.index(f"{cell}.flux")] = h / 0.01
        ml, x, _ = m.grown_fields(z)
        assert (x[0, w] - x0) / h == pytest.approx(dx_de, rel=1e-5)
        assert (ml[0, w] / t0 - 1) / h == pytest.approx(dt_de, rel=1e-5)


def test_dopant_cell_moves_every_doped_layer_over_its_growth_rate(stack):
    # N = F_dopant / growth rate (common practice)
    m = _cells_model(stack, CELLS_ONLY)
    z = np.zeros((1, len(m.names)))
    z[0, m.names.index("Si.flux")] = 2.0  # +10 %
    z[0, m.names.index("Ga.flux")] = 1.0  # +1 % Ga
    t = m.as_grown(z, islands="nearest")
    rate = 0.53 + 0.47 * 1.01
    assert t.doping_cm3[0, 0] == pytest.approx(2e18 * 1.10 / rate, rel=1e-12)
    assert t.doping_cm3[0, -1] == pytest.approx(2e18 * 1.10 / rate, rel=1e-12)


def test_layers_sharing_cells_have_correlated_compositions(stack):
    # statistical test: the well and the collector spacer (both In0.53Ga0.47As) share the In
    # and Ga cells: their sampled compositions correlate with r = 1 when only the cells err
    # (model definition), and with r ~ 0 when only per-layer errors are on (|r| < 4/sqrt(n),
    # the normal approximation of r under independence, common practice)
    names = [lay.name for lay in stack.layers]
    a, b = names.index("well"), names.index("collector_spacer")
    n = 2000
    m = _cells_model(stack, CELLS_ONLY)
    x = m.composition(m.draw_z(n, 1))
    assert np.std(x[:, a]) > 1e-3
    assert np.corrcoef(x[:, a], x[:, b])[0, 1] == pytest.approx(1.0, abs=1e-12)
    m = _cells_model(
        stack,
        {
            "thickness_ml_sigma": 0.0,
            "x_sigma": 0.005,
            "cells": {c: {"flux_sigma": 0.0} for c in ("In", "Ga", "Al", "Si")},
        },
    )
    x = m.composition(m.draw_z(n, 2))
    assert np.std(x[:, a]) > 1e-3
    assert abs(np.corrcoef(x[:, a], x[:, b])[0, 1]) < 4 / np.sqrt(n)


def test_cell_drift_grows_over_the_run(stack):
    # model definition: flux (1 + d s), s = place in the run (0 first contact, 1 last)
    m = _cells_model(
        stack,
        {
            "thickness_ml_sigma": 0.0,
            "doping_sigma": 0.0,
            "cells": {
                "In": {"flux_sigma": 0, "drift_sigma": 0.01},
                "Ga": {"flux_sigma": 0},
                "Al": {"flux_sigma": 0},
            },
        },
    )
    assert m.names == ("In.flux_drift",)
    x = m.composition(np.array([[1.0]]))[0]
    assert x[0] == pytest.approx(0.53, abs=1e-12)  # start of the run
    assert x[-1] == pytest.approx(0.53 * 1.01 / (0.53 * 1.01 + 0.47), rel=1e-12)
    inner = x[1:-1][np.isfinite(x[1:-1])]
    assert np.all(np.diff(inner) > 0)


@pytest.mark.parametrize(
    ("table", "key", "text"),
    [
        ({"cells": {"B": {}}}, "growth.cells.B", "unknown cell; allowed: Al, Ga, In, Si"),
        ({"cells": {"In": {"flux": 0.01}}}, "growth.cells.In.flux", "allowed: flux_sigma"),
        ({"cells": {"In": {"flux_sigma": 0.9}}}, "growth.cells.In.flux_sigma", "outside"),
        ({"cells": {"In": 0.01}}, "growth.cells.In", "must be a table"),
        ({"cells": {}}, "growth.cells", "must be a table of cells"),
        ({"rate_sigma": 0.01, "cells": {"In": {}}}, "growth.rate_sigma", "not with"),
        ({"cells": {"Si": {}, "Te": {}}}, "growth.cells", "more than one dopant"),
    ],
)
def test_bad_cells_name_the_key(table, key, text):
    with pytest.raises(InputError, match=text) as info:
        parse_growth(table, source="s.toml")
    assert info.value.key == key


def test_a_layer_from_an_undeclared_cell_is_named(stack):
    with pytest.raises(InputError, match="AlAs grows from the Al cell") as info:
        _cells_model(stack, {"cells": {"In": {}, "Ga": {}}})
    assert info.value.layer == 2


def test_iv_command_mixes_a_fractional_layer_and_says_so(tmp_path, capsys):
    # `wellwright iv` on a stack file with barrier1 at 5.5 ML: the curve is the island
    # mixture (the mean of the 5 ML and 6 ML curves, physics/islands.py), and it says so
    import json

    from wellwright.optimize.cli import main

    text = STACK_FILE.read_text().replace("thickness_ml = 5\n", "thickness_ml = 5.5\n", 1)
    path = tmp_path / "half.toml"
    path.write_text(text)
    out = tmp_path / "iv"
    assert main(["iv", str(path), "--out", str(out), "--points", "21", "--no-figures"]) == 0
    said = capsys.readouterr().out
    assert "layer 3 'barrier1' at 5.5 ML: islands of 5 ML (50 % of the area) and 6 ML" in said
    rec = json.loads((out / "metrics.json").read_text())
    assert len(rec["islands"]) == 1
    raw = _raw()
    bias = np.linspace(0.0, 1.0, 21)
    j = []
    for ml in (5, 6):
        raw["layers"][2]["thickness_ml"] = ml
        s = parse_stack(raw)
        j.append(current_at_bias(s.table(), bias, model=s.model)[0])
    iv = np.loadtxt(out / "iv.csv", delimiter=",", skiprows=1)
    # 1e-3: one batch of two stacks against two one-stack calls (shared adaptive grid)
    np.testing.assert_allclose(iv[:, 1], 0.5 * (j[0] + j[1]), rtol=1e-3, atol=1e-6)
