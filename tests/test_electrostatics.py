"""Tests of scattering broadening and self-consistent electrostatics (issue 7).

Each check names its source or says "common practice".
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from helpers_physics import M_BARRIER, M_WELL, V_BARRIER_EV, custom_table
from wellwright.physics.bands import linear_profile
from wellwright.physics.broadening import broadened_peak, broadening_correction
from wellwright.physics.constants import (
    BOLTZMANN_EV_K,
    ELEMENTARY_CHARGE_C,
    VACUUM_PERMITTIVITY_F_M,
)
from wellwright.physics.current import EnergyGrid, current_density_a_cm2
from wellwright.physics.electrostatics import (
    WELL_ABS_CM2,
    WELL_TOLERANCE,
    ElectrostaticsConvergenceError,
    solve_poisson_1d,
    solve_stack_poisson,
    well_charge_residual_cm2,
)
from wellwright.physics.fermi import fermi_level_ev
from wellwright.physics.iv import current_at_bias, stack_iv, sweep, sweep_hysteresis
from wellwright.physics.stack import load_stack, parse_stack

STUDY = Path(__file__).resolve().parents[1] / "studies" / "gaas_low_power_memory.toml"


def _stack_dict(
    *,
    collector_spacer_nm=10.0,
    electrostatics="linear",
    broadening_mev=0.0,
    doping=1e18,
    transport="coherent",
):
    """Invented GaAs/AlAs double-barrier stack (like the demo study), for tests.

    The electrostatics tests run on the coherent current (set explicitly: the default
    transport is the scattering-assisted channel)."""
    return {
        "temperature_k": 300,
        "substrate": "GaAs",
        "model": {
            "electrostatics": electrostatics,
            "broadening_mev": broadening_mev,
            "transport": transport,
        },
        "layers": [
            {"name": "emitter", "material": "GaAs", "doping_cm3": doping},
            {"name": "es", "material": "GaAs", "thickness_nm": 3.0},
            {"name": "b1", "material": "AlAs", "thickness_ml": 10},
            {"name": "w", "material": "GaAs", "thickness_ml": 20},
            {"name": "b2", "material": "AlAs", "thickness_ml": 10},
            {"name": "cs", "material": "GaAs", "thickness_nm": collector_spacer_nm},
            {"name": "collector", "material": "GaAs", "doping_cm3": doping},
        ],
    }


BIAS = np.linspace(0.0, 0.6, 31)


# ----------------------------------------------------------------------------- broadening


def test_zero_broadening_reproduces_coherent_exactly():
    # definition of the model (wellwright.physics.broadening): Gamma_s = 0 is the coherent kernel
    table = load_stack(STUDY).table()
    profile = linear_profile(table, BIAS)
    j0 = current_density_a_cm2(profile, table=table, bias_v=BIAS[None, :])
    j1 = current_density_a_cm2(profile, table=table, bias_v=BIAS[None, :], broadening_ev=0.0)
    assert np.array_equal(j0, j1)


def test_broadened_lorentzian_conserves_area():
    # Jonson and Grincwajg, APL 51, 1729 (1987): peak T_p G/(G+G_s), width G+G_s, area conserved.
    # With a constant supply S = 1 on [E_r - a, E_r + a] the correction is analytic:
    # int L dE = T W atan(2a/W) (elementary integral of the Breit-Wigner line).
    tp, g, gs, a = 0.8, 1e-4, 3e-3, 0.5
    corr = broadening_correction(
        center_ev=np.array([[0.3]]),
        width_ev=np.array([[g]]),
        peak=np.array([[tp]]),
        valid=np.array([[True]]),
        low_ev=np.array([0.3 - a]),
        high_ev=np.array([0.3 + a]),
        supply=np.ones_like,
        broadening_ev=gs,
    )
    tpb, gb = broadened_peak(tp, width_ev=g, broadening_ev=gs)
    expected = tpb * gb * np.arctan(2 * a / gb) - tp * g * np.arctan(2 * a / g)
    # quadrature error of each term below 1e-8 of its value (64-node rule, smooth in s)
    assert corr[0] == pytest.approx(expected, abs=1e-8 * tp * g)
    assert tpb * gb == pytest.approx(tp * g, rel=1e-14)


@pytest.mark.parametrize("well_nm", [5.0, 8.0, 12.0])
def test_broadened_current_does_not_depend_on_the_energy_grid(well_nm: float) -> None:
    # Common practice: a numerical setting must not change the model's result. The
    # broadened current used to depend on which lines the grid resolved (only those were
    # broadened) and on lines far above the Fermi level whose Lorentzian tails the kernel
    # carried down to it: 8-13 % between these two grids (measured). Now every line
    # narrower than kT is broadened, over +-10 kT (wellwright.physics.broadening); measured <= 0.15 %.
    # (At 25 mV the 12 nm well has a third line carrying current: resolved since the grid
    # resolves a third line where it matters; before, 0.6 % off even without broadening.)
    v, mw, mb = V_BARRIER_EV, M_WELL, M_BARRIER
    table = custom_table(
        [0, 0, v, 0, v, 0, 0], [mw, mw, mb, mw, mb, mw, mw], [0, 2.0, 3.0, well_nm, 3.0, 2.0, 0]
    )
    bias = np.linspace(0.025, 0.8, 32)
    profile = linear_profile(table, bias)
    fine = EnergyGrid(n_coarse=320, n_resonances=4, n_candidates=10, n_per_resonance=64)
    j = [
        current_density_a_cm2(
            profile, table=table, bias_v=bias[None, :], grid=g, broadening_ev=3e-3
        )
        for g in (EnergyGrid(), fine)
    ]
    np.testing.assert_allclose(j[0], j[1], rtol=5e-3)


def test_broadening_raises_valley_and_lowers_pvcr():
    # common practice: scattering broadening raises the valley current and lowers the PVCR
    coherent = stack_iv(parse_stack(_stack_dict()), BIAS).metrics_of(0)
    broad = stack_iv(parse_stack(_stack_dict(broadening_mev=3.0)), BIAS).metrics_of(0)
    assert broad["valley_current_density_a_cm2"] > 1.5 * coherent["valley_current_density_a_cm2"]
    assert broad["pvcr"] < 0.7 * coherent["pvcr"]


# ----------------------------------------------------------------------------- Poisson


def test_poisson_matches_depletion_approximation():
    # S. M. Sze and K. K. Ng, Physics of Semiconductor Devices, 3rd ed., ch. 2:
    # depletion layer at a fixed-potential boundary, W = sqrt(2 eps (V - kT/q) / (q N)),
    # depletion charge Q = q N W. Nondegenerate n-GaAs at 1e16 cm^-3, 0.5 V band bending.
    n_d, v_b, temp, eps_r, mass = 1e16, 0.5, 300.0, 12.9, 0.067
    length_nm, h_nm = 800.0, 0.5
    n = int(length_nm / h_nm) + 1
    width = np.full(n, h_nm)
    width[[0, -1]] = 0.0
    mu = float(fermi_level_ev(n_d, mass_m0=mass, temperature_k=temp))
    x = np.cumsum(width) - 0.5 * width
    sol = solve_poisson_1d(
        width_nm=width[None],
        permittivity_r=np.full((1, n), eps_r),
        donor_cm3=np.full((1, n), n_d),
        band_offset_ev=np.zeros((1, n)),
        fermi_ev=np.full((1, n), mu),
        mass_m0=np.full((1, n), mass),
        temperature_k=temp,
        electron_mask=np.ones((1, n), bool),
        left_ev=np.array([0.0]),
        right_ev=np.array([v_b]),
        initial_ev=v_b * (x / x[-1])[None] ** 8,
    )
    kt = BOLTZMANN_EV_K * temp
    eps = eps_r * VACUUM_PERMITTIVITY_F_M
    w_sze = np.sqrt(2 * eps * (v_b - kt) / (ELEMENTARY_CHARGE_C * n_d * 1e6))
    q_sze = ELEMENTARY_CHARGE_C * n_d * 1e6 * w_sze
    q_num = ELEMENTARY_CHARGE_C * np.sum(width * 1e-9 * (n_d - sol.electron_cm3[0]) * 1e6)
    assert q_num == pytest.approx(
        q_sze, rel=5e-3
    )  # Sze's kT/q term is exact to O(exp(-V/kT)) for Boltzmann
    # parabolic band bending inside the depleted region, V_b (1 - d/W)^2 (depletion approximation)
    d = (x[-1] - x) * 1e-9
    inside = d < 0.6 * w_sze
    parabola = (v_b - kt) * (1 - d[inside] / w_sze) ** 2 + kt
    np.testing.assert_allclose(sol.potential_ev[0, inside], parabola, atol=0.01)
    # far bulk: flat and neutral (zero field)
    assert (
        abs(sol.potential_ev[0, : n // 4]).max() < 1e-4
    )  # > 7 Debye lengths (42 nm) from the edge


def test_zero_bias_flat_contacts_and_neutral():
    # common practice (Sze ch. 2): far from the barriers the contacts are flat and the device is neutral
    table = parse_stack(_stack_dict(doping=2e17)).table()
    grid, sol = solve_stack_poisson(table, np.array([0.0]))
    u = sol.potential_ev[0, 0]
    far = (grid.center_nm[0] < -60.0) | (grid.center_nm[0] > grid.center_nm[0, -1] - 20.0)
    assert np.abs(u[far]).max() < 2e-3
    donors = table.doping_cm3[0, grid.layer_index]
    net = np.sum(grid.width_nm[0] * (donors - sol.electron_cm3[0, 0]))
    total = np.sum(grid.width_nm[0] * donors)
    assert abs(net) < 1e-3 * total
    j = current_at_bias(
        table,
        np.array([0.0]),
        model=parse_stack(_stack_dict(electrostatics="self-consistent")).model,
    )
    assert abs(j[0, 0]) < 1e-6


def test_self_consistent_peak_voltage_above_linear():
    # common practice: bias spent on accumulation and collector-spacer depletion raises V_p
    lin = stack_iv(parse_stack(_stack_dict()), BIAS).metrics_of(0)
    sc = stack_iv(parse_stack(_stack_dict(electrostatics="self-consistent")), BIAS).metrics_of(0)
    assert sc["peak_voltage_v"] > lin["peak_voltage_v"] + 0.03


def test_longer_collector_spacer_raises_peak_voltage():
    # common practice: a longer undoped collector spacer raises the peak voltage
    bias = np.linspace(0.0, 0.9, 46)
    short = stack_iv(
        parse_stack(_stack_dict(collector_spacer_nm=5.0, electrostatics="self-consistent")), bias
    )
    long_ = stack_iv(
        parse_stack(_stack_dict(collector_spacer_nm=30.0, electrostatics="self-consistent")), bias
    )
    assert long_.metrics_of(0)["peak_voltage_v"] > short.metrics_of(0)["peak_voltage_v"] + 0.05


def test_nonconvergence_raises_clear_error():
    table = load_stack(STUDY).table()
    with pytest.raises(ElectrostaticsConvergenceError, match="did not converge in 1 steps"):
        solve_stack_poisson(table, np.array([0.5]), max_iterations=1)


def test_well_charge_converges_near_a_fold():
    # Regression: on this GaAs/Al0.35Ga0.65As stack (seeded random, invented) the well-charge
    # residual F(n) - n still grew with n between 6e10 and 2e11 cm^-2 at 0.6144 V (a fold of
    # F(n) = n), so steps to the target crept by ~1 % per iteration and ran out of 60 steps;
    # the doubling push past the target reaches the root (2.195e11 cm^-2, where the
    # neighbouring biases converge) in about 25 (measured). No external reference: the
    # check is that the iteration converges and lands on the neighbours' root.
    def layer(material, ml=None, doping=0.0, x=None):
        d = {"material": material, "doping_cm3": doping}
        if x is not None:
            d["x"] = x
        if ml is not None:
            d["thickness_ml"] = ml
        return d

    x = 0.347860525600196
    stack = parse_stack(
        {
            "substrate": "GaAs",
            "layers": [
                layer("GaAs", doping=1.4855418103512404e18),
                layer("GaAs", 51.65749675269987),
                layer("AlGaAs", 11.267290713613573, x=x),
                layer("GaAs", 14.20406633474093),
                layer("AlGaAs", 15.075274275829196, x=x),
                layer("GaAs", 51.536683133794504),
                layer("GaAs", doping=2.932780159831983e17),
            ],
        }
    )
    table = stack.table()
    _, sol = solve_stack_poisson(table, np.array([0.61439209]))
    _, near = solve_stack_poisson(table, np.array([0.6144]))
    assert sol.well_sheet_cm2[0, 0] == pytest.approx(near.well_sheet_cm2[0, 0], rel=1e-3)
    assert sol.iterations < 60


def _random_stack(rng):
    """Seeded random double-barrier GaAs/AlGaAs/InGaAs stacks (invented, for the convergence test)."""
    doping = 10 ** rng.uniform(17.0, 18.7)
    well = rng.choice(["GaAs", "In0.1Ga0.9As"])
    x_b = rng.uniform(0.3, 1.0)
    return parse_stack(
        {
            "substrate": "GaAs",
            "model": {"electrostatics": "self-consistent"},
            "layers": [
                {"material": "GaAs", "doping_cm3": doping},
                {"name": "es", "material": "GaAs", "thickness_nm": rng.uniform(0.5, 20.0)},
                {
                    "name": "b1",
                    "material": "AlGaAs",
                    "x": x_b,
                    "thickness_ml": int(rng.integers(4, 14)),
                },
                {"name": "w", "material": well, "thickness_ml": int(rng.integers(12, 30))},
                {
                    "name": "b2",
                    "material": "AlGaAs",
                    "x": x_b,
                    "thickness_ml": int(rng.integers(4, 14)),
                },
                {"name": "cs", "material": "GaAs", "thickness_nm": rng.uniform(0.5, 50.0)},
                {"material": "GaAs", "doping_cm3": 10 ** rng.uniform(17.0, 18.7)},
            ],
        }
    )


def _convergence_fraction(n_stacks, bias, seed):
    rng = np.random.default_rng(seed)
    converged = 0
    for _ in range(n_stacks):
        st = _random_stack(rng)
        try:
            grid, sol = solve_stack_poisson(st.table(), bias)
        except ElectrostaticsConvergenceError as exc:  # the clear error the spec allows
            assert "did not converge in" in str(exc)
            continue
        assert np.all(np.isfinite(sol.potential_ev))
        assert np.all(sol.well_sheet_cm2 >= 0)
        converged += 1
    return converged / n_stacks


def test_convergence_random_stacks():
    # bounded iteration: converges for seeded random stacks from -0.3 to 1.2 V (past the second
    # resonance of most of these wells), or raises ElectrostaticsConvergenceError
    assert _convergence_fraction(10, np.linspace(-0.3, 1.2, 11), seed=7) >= 0.9


@pytest.mark.slow
def test_convergence_random_stacks_many():
    assert _convergence_fraction(40, np.linspace(-0.3, 1.5, 19), seed=11) >= 0.9


def test_hysteresis_from_well_charge():
    # Charge build-up in the well makes the I-V bistable near the peak: the up sweep stays on
    # the charged, high-current branch to a higher bias than the down sweep (V. J. Goldman,
    # D. C. Tsui and J. E. Cunningham, Phys. Rev. Lett. 58, 1256 (1987), from memory).
    # Away from the peak the solution is unique and both branches agree.
    stack = parse_stack(_stack_dict(electrostatics="self-consistent"))
    bias = np.linspace(0.0, 0.5, 11)
    h = sweep_hysteresis(stack.table(), bias, model=stack.model)
    direct = current_at_bias(stack.table(), bias, model=stack.model)
    differ = ~np.isclose(h.up_a_cm2[0], h.down_a_cm2[0], rtol=1e-3, atol=1e-6)
    assert np.all(h.up_a_cm2[0] >= (1 - 1e-3) * h.down_a_cm2[0])
    assert (
        np.count_nonzero(differ) <= 2
    )  # at most a narrow window (none is resolved for this stack)
    # outside the window: unique solution, equal to the one reached from the linear start
    np.testing.assert_allclose(h.up_a_cm2[0, ~differ], direct[0, ~differ], rtol=1e-3, atol=1e-6)
    # inside it the direct solve lands on one of the two branches
    for i in np.nonzero(differ)[0]:
        assert (
            min(
                abs(direct[0, i] / h.up_a_cm2[0, i] - 1), abs(direct[0, i] / h.down_a_cm2[0, i] - 1)
            )
            < 1e-3
        )


def test_well_charge_screened_and_raises_well_potential():
    # Gauss's law (Sze ch. 1) with zero field at both bulk ends: the contacts screen the
    # stored charge completely, so the device stays neutral; the stored sheet density is
    # of the order measured in such wells, ~1e11 cm^-2 (from memory).
    stack = parse_stack(_stack_dict(electrostatics="self-consistent"))
    table = stack.table()
    grid, sol = solve_stack_poisson(table, np.array([0.28]))
    n_w = sol.well_sheet_cm2[0, 0]
    assert 3e10 < n_w < 1e12
    w_cm = grid.width_nm[0] * 1e-7
    donors = table.doping_cm3[0, grid.layer_index]
    inside = (grid.layer_index >= 2) & (grid.layer_index <= 4)
    assert np.sum(w_cm[inside] * sol.electron_cm3[0, 0, inside]) == pytest.approx(n_w, rel=1e-9)
    net = np.sum(w_cm * (donors - sol.electron_cm3[0, 0]))
    assert abs(net) < 1e-3 * n_w
    # Gauss's law sign: negative stored charge raises the well's potential energy
    _, sol0 = solve_stack_poisson(table, np.array([0.28]), well_charge=False)
    well = grid.layer_index == 3
    rise = sol.potential_ev[0, 0, well].mean() - sol0.potential_ev[0, 0, well].mean()
    eps = 12.9 * VACUUM_PERMITTIVITY_F_M  # GaAs-like, order of magnitude only
    scale = ELEMENTARY_CHARGE_C * n_w * 1e4 / eps * 5e-9  # field of the sheet over ~5 nm
    assert 0.1 * scale < rise < 2.0 * scale


def test_stack_file_accepts_self_consistent():
    stack = parse_stack(_stack_dict(electrostatics="self-consistent", broadening_mev=2.0))
    assert stack.model.electrostatics == "self-consistent"
    assert sweep(
        stack.table(), BIAS[:5], model=stack.model, refine=False
    ).current_density_a_cm2.shape == (1, 5)


def _property_strategy_test():
    """Convergence over the property-test strategy of tests/test_properties.py (hypothesis)."""
    from hypothesis import HealthCheck, given, settings
    from test_properties import gaas_algaas_stacks

    @settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
    @given(stack=gaas_algaas_stacks())
    def check(stack):
        # converges, or raises the clear ElectrostaticsConvergenceError (the spec allows either)
        try:
            _, sol = solve_stack_poisson(stack.table(), np.linspace(-0.3, 1.0, 6))
        except ElectrostaticsConvergenceError as exc:
            assert "did not converge in" in str(exc)
            return
        assert np.all(np.isfinite(sol.potential_ev)) and np.all(sol.well_sheet_cm2 >= 0)

    return check


test_convergence_property_strategy = _property_strategy_test()


def test_potential_carried_to_another_grid_keeps_a_linear_drop_exactly() -> None:
    # analytic: linear interpolation reproduces a linear function exactly, so the linear
    # drop of one batch's grid is the linear drop on another's (the start potential of the
    # up-branch continuation, physics.iv._up_branch); the same grid returns the array itself
    from wellwright.physics.electrostatics import potential_on_grid

    rng = np.random.default_rng(4)
    src = np.sort(rng.uniform(-20.0, 40.0, (2, 30)), axis=1)
    src[:, 0], src[:, -1] = -20.0, 40.0
    dst = np.sort(rng.uniform(-20.0, 40.0, (2, 23)), axis=1)
    slope = np.array([[0.01, -0.02, 0.0], [0.005, 0.03, -0.01]])  # (stacks, biases) eV/nm
    u = slope[:, :, None] * src[:, None, :] + 0.1
    got = potential_on_grid(u, source_center_nm=src, target_center_nm=dst)
    np.testing.assert_allclose(got, slope[:, :, None] * dst[:, None, :] + 0.1, atol=1e-12)
    assert potential_on_grid(u, source_center_nm=src, target_center_nm=src.copy()) is u


def test_well_charge_step_equals_the_estimate_both_polarities(monkeypatch) -> None:
    # the iteration's per-solve well-charge step (_well_charge_target: fixed parts made once,
    # the state search compiled) against well_sheet_density_cm2 on the same potentials, in a
    # batch of three stacks (padding slices) and under reverse bias: the same numbers
    from wellwright.physics import electrostatics as es

    stack = load_stack(STUDY)
    base = stack.table()
    table = base.take([0, 0, 0]).with_thickness_nm(
        base.thickness_nm[[0, 0, 0]] * np.array([[1.0], [1.1], [0.93]])
    )
    bias = np.array([-0.6, -0.3, 0.0, 0.25, 0.45, 0.7])
    grid, sol = solve_stack_poisson(table, bias, well_charge=False)
    mu = fermi_level_ev(
        table.doping_cm3[:, 0], mass_m0=table.mass_m0[:, 0], temperature_k=table.temperature_k
    )
    mass_w = table.mass_m0[:, 3]
    args = {"mu_emitter_ev": mu, "well_mass_m0": mass_w}
    expected = es.well_sheet_density_cm2(
        table, grid, potential_ev=sol.potential_ev, bias_v=bias, **args
    )[0]
    assert np.all(expected[:, 3:] > 0)  # states charged under forward bias
    got = es._well_charge_target(table, grid, **args)(
        sol.potential_ev, np.broadcast_to(bias, expected.shape)
    )
    np.testing.assert_array_equal(got, expected)
    # the iteration's open entries (stack row of each, in any order and number): the same
    # numbers per entry, to rounding: the compiled refinement evaluates the probes of
    # several entries in one chunk of lanes, and a padded stack's zero-width slices are
    # skipped exactly only in a chunk of its own (measured: 5e-14 relative here)
    n_nodes = sol.potential_ev.shape[-1]
    pick = np.array([17, 0, 5, 11, 12, 3])
    stack = pick // bias.size
    flat_u = sol.potential_ev.reshape(-1, n_nodes)[pick]
    flat_bias = np.broadcast_to(bias, expected.shape).reshape(-1)[pick]
    step = es._well_charge_target(table, grid, **args)
    np.testing.assert_allclose(
        step(flat_u, flat_bias, stack), expected.reshape(-1)[pick], rtol=1e-12, atol=0
    )
    # where the compiled search is not in use the step is the estimate itself
    monkeypatch.setattr(es, "compiled_kernel", lambda name: None)
    fallback = es._well_charge_target(table, grid, **args)
    np.testing.assert_array_equal(
        fallback(sol.potential_ev, np.broadcast_to(bias, expected.shape)), expected
    )
    np.testing.assert_allclose(
        fallback(flat_u, flat_bias, stack), expected.reshape(-1)[pick], rtol=1e-12, atol=0
    )


def test_solve_setup_kept_only_for_the_same_stacks_and_settings(monkeypatch) -> None:
    # the setup of a solve is reused for stacks of equal values and equal settings (a sweep
    # solves the same stacks many times) and made again when a value, a setting, a module
    # constant it reads or the routines in use change; the solve's result is the same
    from wellwright.physics import electrostatics as es

    table = load_stack(STUDY).table()
    bias = np.array([0.3])
    monkeypatch.setattr(es, "_SETUPS", [])
    made = []
    real = es._make_setup

    def counted(*a, **k):
        made.append(1)
        return real(*a, **k)

    monkeypatch.setattr(es, "_make_setup", counted)
    first = solve_stack_poisson(table, bias)[1]
    again = solve_stack_poisson(table.take([0]), bias)[1]  # an equal table, another object
    assert len(made) == 1
    np.testing.assert_array_equal(again.potential_ev, first.potential_ev)
    thicker = table.with_thickness_nm(table.thickness_nm * 1.01)
    solve_stack_poisson(thicker, bias)
    assert len(made) == 2
    solve_stack_poisson(table, bias, tolerance_ev=1e-8)
    assert len(made) == 3
    monkeypatch.setattr(es, "WELL_SEARCH_EDGE_POWER", 1.0)
    solve_stack_poisson(table, bias)
    assert len(made) == 4
    if es.compiled_kernel("poisson_newton") is not None:  # the numpy backend: nothing to switch
        monkeypatch.setattr(es, "compiled_kernel", lambda name: None)
        solve_stack_poisson(table, bias)
        assert len(made) == 5


def _wide_insb_well():
    """An invented InSb/AlSb stack with a 13.2 nm well (a random scan's stack, rounded):
    five lines lie in the well-charge estimate's window at 0.47 V."""
    layers = [
        {"name": "emitter", "material": "InSb", "doping_cm3": 1.5e18},
        {"name": "spacer1", "material": "InSb", "thickness_nm": 7.29},
        {"name": "barrier1", "material": "AlSb", "thickness_nm": 2.11},
        {"name": "well", "material": "InSb", "thickness_nm": 13.2},
        {"name": "barrier2", "material": "AlSb", "thickness_nm": 2.11},
        {"name": "spacer2", "material": "InSb", "thickness_nm": 5.75},
        {"name": "collector", "material": "InSb", "doping_cm3": 3.0e18},
    ]
    return parse_stack({"temperature_k": 342.0, "substrate": "InSb", "layers": layers})


def test_the_charge_of_a_wide_well_with_many_lines_is_continuous() -> None:
    # The charge map F(n_w) (the charge the states hold in the potential a well charge n_w
    # makes) moves continuously with n_w where the states' energies do (common practice: a
    # level moves continuously with the potential). With the four tallest maxima of the
    # coarse T taken as the states, which ones they were changed from one n_w to the next
    # in this wide well: F jumped between 0.3e11 and 8.6e11 cm^-2, and the self-consistent
    # I-V by 30 % between biases 5 mV apart (measured 2026-12-05). The four lowest are taken
    # now; they hold the charge.
    stack = _wide_insb_well()
    table = stack.table()
    n_w = np.linspace(0.0, 1.2e12, 49)
    charge = well_charge_residual_cm2(table, 0.47, n_w)[0] + n_w
    assert np.all(np.abs(np.diff(charge)) < 0.1 * charge.max()), charge / 1e11
    # and the self-consistent I-V rises smoothly towards its peak (0.56 V)
    j = current_at_bias(table, np.linspace(0.45, 0.55, 21), model=stack.model)[0]
    assert np.all(np.diff(j) > 0), j


def test_the_well_charge_residual_vanishes_at_the_solved_charge() -> None:
    """``well_charge_residual_cm2`` (the diagnostic the continuation is checked against) is
    the equation the solver solves: at the solver's own charge its residual is within the
    solver's tolerance (WELL_TOLERANCE of the charge plus WELL_ABS_CM2, from a fresh start
    so the two need not agree bit for bit: four times that), and it changes sign there. No
    external reference: a consistency check of two paths to one equation."""
    table = load_stack(STUDY).table()
    for bias_v in (0.26, 0.30):
        _, solved = solve_stack_poisson(table, np.array([bias_v]))
        n = float(solved.well_sheet_cm2[0, 0])
        assert n > 1e10
        r = well_charge_residual_cm2(table, bias_v, np.array([n, 0.9 * n, 1.1 * n]))[0]
        assert abs(r[0]) <= 4 * (WELL_TOLERANCE * n + WELL_ABS_CM2)
        assert r[1] > 0 > r[2]
