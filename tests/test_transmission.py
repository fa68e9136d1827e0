"""Tests of wellwright.physics.transmission (and the resonance finder) against analytic results.

Sources are named beside each check. Reference formulas are written out
independently in ``helpers_physics`` with CODATA constants from scipy.
"""

from __future__ import annotations

import importlib

import numpy as np
import pytest
from helpers_physics import (
    HBAR2_2M0_EV_NM2,
    M_BARRIER,
    M_WELL,
    V_BARRIER_EV,
    airy_ramp_transmission,
    barrier_transmission,
    custom_table,
    double_barrier_profile,
    finite_well_levels,
    flat_profile,
    log_barrier_transmission_below_top,
    log_thick_barrier_transmission,
    polish_peak,
    single_barrier_profile,
    step_transmission,
    t_at,
    wave_vector_per_nm,
)
from wellwright.physics.bands import linear_profile
from wellwright.physics.resonances import find_resonances
from wellwright.physics.transmission import transmission

# the module (the package re-exports its function under the same name)
kernel = importlib.import_module("wellwright.physics.transmission")

# Relative tolerance for closed-form single-interface/single-layer results: the kernel does a
# handful of complex multiplications per interface, so 1e-10 leaves four to five orders of
# magnitude above float64 round-off (measured: a few 1e-15).
ANALYTIC_RTOL = 1e-10


@pytest.fixture(autouse=True, params=kernel.BACKENDS)
def kernel_backend(request, monkeypatch) -> str:
    """Every analytic check here runs on each implementation built on this machine."""
    monkeypatch.setattr(kernel, "DEFAULT_BACKEND", request.param)
    return request.param


# ----------------------------------------------------------------------------- rectangular barrier


@pytest.mark.parametrize("m_in", [0.067, 0.092, 0.15])
def test_rectangular_barrier_below_and_above_top(m_in: float) -> None:
    # Griffiths, Introduction to QM, 2nd ed., Problem 2.33 (Eq. for T below and above V0);
    # with a barrier mass m_in != m_out the BenDaniel-Duke form with q = k/m (helpers).
    height, width, m_out = 0.3, 5.0, 0.067
    energy = np.concatenate([np.linspace(0.002, 0.298, 150), np.linspace(0.302, 1.2, 150)])
    p = flat_profile([0, height, 0], [m_out, m_in, m_out], [0, width, 0])
    t, r = transmission(energy, profile=p, return_reflection=True)
    ref = barrier_transmission(energy, height_ev=height, width_nm=width, m_out=m_out, m_in=m_in)
    np.testing.assert_allclose(t, ref, rtol=ANALYTIC_RTOL, atol=0)
    # flux conservation: exact for a lossless barrier; round-off only
    np.testing.assert_allclose(t + r, 1.0, rtol=0, atol=1e-12)


def test_above_barrier_resonances_are_perfect() -> None:
    # Griffiths 2nd ed., Problem 2.33: T = 1 where k' a = n pi above the barrier (equal masses).
    height, width, m = 0.3, 5.0, 0.067
    n = np.arange(1, 5)
    k_prime = n * np.pi / width
    energy = height + HBAR2_2M0_EV_NM2 * k_prime**2 / m
    p = flat_profile([0, height, 0], m, [0, width, 0])
    np.testing.assert_allclose(transmission(energy, profile=p), 1.0, rtol=0, atol=1e-12)


def test_slicing_a_flat_barrier_changes_nothing() -> None:
    # A constant barrier cut into many equal slices is the same potential: the slice
    # interfaces must be transparent (common practice check of the recursion). 30 nm in
    # 0.25 nm slices: 120 interfaces, round-off grows with their number (measured 7e-13
    # relative), so 1e-9, the R + T tolerance.
    height, width, m = 1.0, 30.0, 0.067
    table = custom_table([0, height, 0], m, [0, width, 0])
    p = linear_profile(table, [0.0], slice_nm=0.25)
    assert p.n_slices == 122
    energy = np.linspace(0.01, 1.5, 60)
    t = transmission(energy, profile=p)[0, 0]
    ref = barrier_transmission(energy, height_ev=height, width_nm=width, m_out=m, m_in=m)
    np.testing.assert_allclose(t, ref, rtol=1e-9, atol=0)


# ----------------------------------------------------------------------------- mass step


@pytest.mark.parametrize(
    ("step", "m1", "m2"), [(0.2, 0.067, 0.092), (-0.3, 0.043, 0.067), (0.5, 0.15, 0.041)]
)
def test_step_with_mass_discontinuity(step: float, m1: float, m2: float) -> None:
    # BenDaniel and Duke, Phys. Rev. 152, 683 (1966): psi and psi'/m continuous, so
    # T = 4 q1 q2 / (q1 + q2)^2 with q = k/m (not k).
    energy = max(step, 0.0) + np.linspace(1e-4, 1.0, 200)
    p = flat_profile([0, step], [m1, m2], [0, 0])
    t, r = transmission(energy, profile=p, return_reflection=True)
    np.testing.assert_allclose(
        t, step_transmission(energy, step_ev=step, m1=m1, m2=m2), rtol=ANALYTIC_RTOL
    )
    np.testing.assert_allclose(t + r, 1.0, atol=1e-12)
    # matching with k instead of k/m would give a different answer: the test can tell them apart
    k1, k2 = wave_vector_per_nm(energy, m1), wave_vector_per_nm(energy - step, m2)
    assert np.max(np.abs(t - 4 * k1 * k2 / (k1 + k2) ** 2)) > 1e-3


def test_no_propagating_contact_state() -> None:
    # Documented behaviour (module docstring): T = 0 where a contact has no propagating
    # state, R = 1 where the emitter has none. Physics: below the collector edge no flux
    # can leave (common practice).
    p = flat_profile([0, 0.2], [0.067, 0.067], [0, 0])
    t, r = transmission(np.array([0.05, 0.15]), profile=p, return_reflection=True)
    np.testing.assert_array_equal(t, [0.0, 0.0])
    np.testing.assert_allclose(r, 1.0, atol=1e-12)
    p_rev = flat_profile([0.2, 0], [0.067, 0.067], [0, 0])
    t, r = transmission(np.array([0.1]), profile=p_rev, return_reflection=True)
    assert t[0] == 0.0 and r[0] == 1.0


# ----------------------------------------------------------------------------- stability


@pytest.mark.parametrize(
    ("height", "width", "m"), [(1.0, 30.0, 0.067), (1.0, 30.0, 0.15), (2.0, 100.0, 0.15)]
)
def test_thick_high_barrier_is_stable(height: float, width: float, m: float) -> None:
    # Issue 2 requirement: 1 eV over 30 nm gives no NaN/overflow, T in [0, 1], R + T = 1 to 1e-9.
    # 2 eV over 100 nm with m = 0.15 (2 kappa a ~ 560, T ~ 1e-244) pushes further.
    energy = np.linspace(1e-3, height - 1e-3, 80)
    p = flat_profile([0, height, 0], m, [0, width, 0])
    with np.errstate(over="raise", invalid="raise", divide="raise"):  # overflow / NaN fails
        t, r = transmission(energy, profile=p, return_reflection=True)
    assert np.all(np.isfinite(t)) and np.all(np.isfinite(r))
    assert np.all((t >= 0) & (t <= 1)) and np.all((r >= 0) & (r <= 1))
    np.testing.assert_allclose(t + r, 1.0, rtol=0, atol=1e-9)
    # Exact analytic barrier (Griffiths 2nd ed., Problem 2.33) in log form: ln T to 1e-9
    # absolute (= 1e-9 relative in T), the round-off allowance of an accumulated logarithm.
    assert np.all(t > 0)  # down to 1e-244: no spurious underflow to 0
    log_exact = log_barrier_transmission_below_top(
        energy, height_ev=height, width_nm=width, m_out=m, m_in=m
    )
    np.testing.assert_allclose(np.log(t), log_exact, rtol=0, atol=1e-9)
    # Thick-barrier asymptote 16 E (V-E)/V^2 exp(-2 kappa a) (same source, kappa a >> 1;
    # also the WKB exponent with its exact prefactor). Its neglected terms are
    # O(exp(-2 kappa a)); where 2 kappa a > 25 they are below 2e-11, so 1e-9 in ln T.
    kappa = wave_vector_per_nm(height - energy, m)
    thick = 2 * kappa * width > 25
    assert np.count_nonzero(thick) > 60
    log_asym = log_thick_barrier_transmission(
        energy, height_ev=height, width_nm=width, m_out=m, m_in=m
    )
    np.testing.assert_allclose(np.log(t[thick]), log_asym[thick], rtol=0, atol=1e-9)


def test_thick_barrier_in_slices_is_stable() -> None:
    # Same requirement with the barrier cut into 0.25 nm slices and tilted by a bias
    # (120 interfaces): finite, T in [0, 1], R + T = 1 to 1e-9.
    table = custom_table([0, 1.0, 0], 0.067, [0, 30.0, 0])
    p = linear_profile(table, np.array([0.0, 0.3, 0.9]), slice_nm=0.25)
    energy = np.linspace(1e-3, 1.2, 100)
    with np.errstate(over="raise", invalid="raise", divide="raise"):
        t, r = transmission(energy, profile=p, return_reflection=True)
    assert np.all(np.isfinite(t)) and np.all(np.isfinite(r))
    assert np.all((t >= 0) & (t <= 1))
    np.testing.assert_allclose(t + r, 1.0, rtol=0, atol=1e-9)


# ----------------------------------------------------------------------------- double barrier


def _ground_resonance(profile):
    res = find_resonances(profile, energy_min_ev=1e-3, energy_max_ev=0.2, n_coarse=400)
    i = int(np.nanargmin(res.energy_ev))
    return float(res.energy_ev[i]), float(res.width_ev[i])


@pytest.mark.parametrize("barrier_nm", [2.0, 3.0, 4.0, 6.0])
def test_symmetric_double_barrier_is_transparent_at_resonance(barrier_nm: float) -> None:
    # Ricco and Azbel, Phys. Rev. B 29, 1970 (1984): T_peak = 4 T1 T2/(T1+T2)^2 = 1 for
    # identical barriers (common practice: unity resonant transmission). The peak is
    # located independently by scipy's bounded Brent search; 1e-6 is the tolerance.
    p = double_barrier_profile(barrier_nm, barrier_nm)
    e_guess, g_guess = _ground_resonance(p)
    _, t_peak = polish_peak(p, e_guess, g_guess)
    assert t_peak == pytest.approx(1.0, abs=1e-6)


@pytest.mark.parametrize(("b1", "b2"), [(3.0, 4.0), (4.0, 5.0), (4.0, 6.0), (5.0, 7.0), (3.0, 6.0)])
def test_asymmetric_double_barrier_peak_follows_ricco_azbel(b1: float, b2: float) -> None:
    # Ricco and Azbel (1984): T_peak ~ 4 T1 T2 / (T1 + T2)^2 with T1, T2 the single-barrier
    # transmissions at the resonance energy. It is the leading order in small T1, T2; the
    # corrections are first order in the T's (measured: relative error ~0.5 max(T1, T2)),
    # so the tolerance is max(T1, T2) relative.
    p = double_barrier_profile(b1, b2)
    e_guess, g_guess = _ground_resonance(p)
    e_peak, t_peak = polish_peak(p, e_guess, g_guess)
    t1 = t_at(e_peak, single_barrier_profile(b1))
    t2 = t_at(e_peak, single_barrier_profile(b2))
    predicted = 4 * t1 * t2 / (t1 + t2) ** 2
    assert t_peak == pytest.approx(predicted, rel=max(t1, t2))
    assert t_peak < 0.9  # clearly below 1: the asymmetry matters


def test_resonances_approach_finite_well_levels() -> None:
    # Bound states of the finite well (textbook transcendental equations, BenDaniel-Duke
    # matching, solved with brentq) are the limit of the resonances as the barriers grow.
    # Common practice: the shift falls like exp(-2 kappa b) (tunnelling coupling to the
    # continuum), so successive 1 nm steps must shrink it by exp(2 kappa) within 5 %.
    levels = finite_well_levels(
        depth_ev=V_BARRIER_EV, width_nm=5.0, m_well=M_WELL, m_barrier=M_BARRIER
    )
    e0 = levels[0]
    barriers = [2.0, 3.0, 4.0, 5.0, 6.0, 7.0]
    errors = []
    for b in barriers:
        p = double_barrier_profile(b, b)
        e_guess, g_guess = _ground_resonance(p)
        e_peak, _ = polish_peak(p, e_guess, g_guess)
        errors.append(abs(e_peak - e0))
    errors = np.array(errors)
    assert np.all(np.diff(errors) < 0), errors  # shrinks monotonically
    assert errors[-1] < 2e-6  # eV; from 1.7 meV at 2 nm (measured 1.2 ueV at 7 nm)
    kappa = wave_vector_per_nm(V_BARRIER_EV - e0, M_BARRIER)
    np.testing.assert_allclose(errors[1:-1] / errors[2:], np.exp(2 * kappa), rtol=0.05)


def test_find_resonances_locates_finite_well_levels_of_thick_well() -> None:
    # Two levels below the top for a 10 nm well (finite-well equations, brentq); with 8 nm
    # barriers the resonance shift is below 1e-4 eV for both, well below their spacing.
    levels = finite_well_levels(
        depth_ev=V_BARRIER_EV, width_nm=10.0, m_well=M_WELL, m_barrier=M_BARRIER
    )
    below = [e for e in levels if e < 0.25]
    p = double_barrier_profile(8.0, 8.0, well_nm=10.0)
    res = find_resonances(p, energy_min_ev=1e-3, energy_max_ev=0.25, n_coarse=600, n_max=6)
    found = np.sort(res.energy_ev[res.valid])
    assert found.size == len(below)
    np.testing.assert_allclose(found, below, rtol=0, atol=1e-4)


# ----------------------------------------------------------------------------- uniform field (Airy)

RAMP = {"height_ev": 0.3, "width_nm": 10.0, "drop_ev": 0.2, "mass_m0": 0.067}


def _ramp_kernel(energy, slice_nm, *, height_ev, width_nm, drop_ev, mass_m0):
    table = custom_table([0, height_ev, 0], mass_m0, [0, width_nm, 0])
    p = linear_profile(table, [drop_ev], slice_nm=slice_nm)
    assert p.edge_ev[0, 0, -1] == pytest.approx(-drop_ev)  # collector at -qV (issue 2 bias model)
    return transmission(energy, profile=p)[0, 0]


def test_uniform_field_converges_to_airy_at_second_order() -> None:
    # Exact reference: Airy functions (scipy.special.airy), see helpers. The kernel samples
    # the ramp at slice centres (midpoint rule), so the error must fall as h^2: halving the
    # slice divides it by 4 (measured 4.00-4.08); accepted range [3.6, 4.4].
    energy = np.linspace(0.005, 0.6, 120)
    ref = airy_ramp_transmission(energy, **RAMP)
    widths = [1.0, 0.5, 0.25, 0.125, 0.0625]
    errors = np.array([np.max(np.abs(_ramp_kernel(energy, h, **RAMP) / ref - 1)) for h in widths])
    ratios = errors[:-1] / errors[1:]
    assert np.all((ratios > 3.6) & (ratios < 4.4)), ratios
    assert errors[-1] < 5e-5


@pytest.mark.parametrize(
    ("ramp", "bound"),
    [
        # measured max relative error of T at the default slice_nm = 0.25 over
        # E in [0.005, 1.5 V0]: 4.0e-4, 1.8e-3 and 8.0e-4; bounds are 2.5x the measurement.
        ({"height_ev": 0.3, "width_nm": 10.0, "drop_ev": 0.2, "mass_m0": 0.067}, 1e-3),  # 200 kV/cm
        (
            {"height_ev": 0.3, "width_nm": 10.0, "drop_ev": 0.5, "mass_m0": 0.067},
            4.5e-3,
        ),  # 500 kV/cm
        ({"height_ev": 1.0, "width_nm": 5.0, "drop_ev": 0.5, "mass_m0": 0.067}, 2e-3),  # 1 MV/cm
    ],
)
def test_default_slice_discretisation_error(ramp: dict, bound: float) -> None:
    # Stated discretisation error of the default slicing (issue 2): relative error of T
    # against the exact Airy solution at slice_nm = 0.25 (wellwright.physics.stack.ModelOptions default).
    from wellwright.physics.stack import ModelOptions

    energy = np.linspace(0.005, 1.5 * ramp["height_ev"], 300)
    ref = airy_ramp_transmission(energy, **ramp)
    t = _ramp_kernel(energy, ModelOptions().slice_nm, **ramp)
    assert np.max(np.abs(t / ref - 1)) < bound


# ----------------------------------------------------------------------------- batching


def _batch_table():
    # three stacks of one layer count whose thicknesses give the same slice counts
    edges = [[0, 0.3, 0, 0.3, 0], [0, 0.35, 0, 0.25, 0], [0, 0.5, 0.05, 0.4, 0]]
    thick = [[0, 2.0, 5.0, 2.0, 0], [0, 1.8, 4.9, 1.9, 0], [0, 1.76, 4.8, 2.0, 0]]
    return custom_table(
        edges, [0.067, 0.09, 0.067, 0.09, 0.067], thick, alphas_per_ev=[0.6, 0.3, 0.6, 0.3, 0.6]
    )


def test_batched_call_equals_loop_of_single_calls() -> None:
    # Issue 2: one call over (stacks, biases, energies) by broadcasting. Each (stack, bias)
    # row must equal the same row computed alone, bit for bit (same element-wise operations).
    table = _batch_table()
    bias = np.array([0.0, 0.1, 0.25, -0.2])
    p = linear_profile(table, bias)
    energy = np.random.default_rng(1).uniform(0.0, 0.8, (3, 4, 50))
    t = transmission(energy, profile=p)
    assert t.shape == (3, 4, 50)
    for s in range(3):
        for b in range(4):
            np.testing.assert_array_equal(
                transmission(energy[s, b], profile=p.take((s, b))), t[s, b]
            )
            alone = linear_profile(table.take([s]), [bias[b]])
            assert alone.n_slices == p.n_slices
            np.testing.assert_array_equal(transmission(energy[s, b], profile=alone)[0, 0], t[s, b])
            # energy by energy: numpy's vectorised and scalar loops of exp/sqrt may differ in
            # the last bits (measured up to 7e-15 relative), so 1e-13 here
            for i in range(0, 50, 7):
                one = transmission(energy[s, b, i : i + 1], profile=p.take((s, b)))
                np.testing.assert_allclose(one, t[s, b, i : i + 1], rtol=1e-13, atol=1e-300)


def test_batch_partner_changes_nothing() -> None:
    # A stack keeps its own slice counts in a batch (wellwright.physics.bands.slice_grid, own_counts):
    # the padding up to the thickest partner's count is zero-width copies of a layer's last
    # slice, an exact identity of the recursion (BenDaniel-Duke matching across zero
    # thickness), so T equals the stack's own to round-off (1e-12; the compiled kernel
    # skips the copies, the numpy one multiplies by them).
    thin = custom_table([0, 0.3, 0], 0.067, [0, 10.0, 0])
    both = custom_table([[0, 0.3, 0], [0, 0.3, 0]], 0.067, [[0, 10.0, 0], [0, 13.0, 0]])
    energy = np.linspace(0.005, 0.45, 100)
    p_alone, p_batch = linear_profile(thin, [0.2]), linear_profile(both, [0.2])
    assert p_batch.n_slices > p_alone.n_slices  # padded
    t_alone = transmission(energy, profile=p_alone)[0, 0]
    t_batch = transmission(energy, profile=p_batch)[0, 0]
    np.testing.assert_allclose(t_batch, t_alone, rtol=1e-12, atol=0)


# ----------------------------------------------------------------------------- nonparabolicity


@pytest.mark.parametrize(("alpha_out", "alpha_in"), [(0.0, 0.5), (1.24, 0.24), (0.7, 0.7)])
def test_nonparabolic_barrier_matches_analytic_with_energy_dependent_masses(
    alpha_out: float, alpha_in: float
) -> None:
    # The same BenDaniel-Duke barrier formula with m(E) = m (1 + alpha (E - V)) on each side
    # (Kane two-band form as used by Nelson, Miller and Kleinman, Phys. Rev. B 35, 7770 (1987)).
    # Energies keep 1 + alpha (E - V) >= 0.5 so the kernel's documented cap is not active.
    height, width, m_out, m_in = 0.5, 3.0, 0.043, 0.15
    energy = np.linspace(0.005, 1.2, 300)
    assert np.all(1 + alpha_in * (energy - height) > 0.5)
    p = flat_profile(
        [0, height, 0], [m_out, m_in, m_out], [0, width, 0], [alpha_out, alpha_in, alpha_out]
    )
    ref = barrier_transmission(
        energy,
        height_ev=height,
        width_nm=width,
        m_out=m_out,
        m_in=m_in,
        alpha_out=alpha_out,
        alpha_in=alpha_in,
    )
    np.testing.assert_allclose(transmission(energy, profile=p), ref, rtol=ANALYTIC_RTOL)
    # and via a LayerTable at zero bias (flat bands, identical contacts)
    table = custom_table(
        [0, height, 0],
        [m_out, m_in, m_out],
        [0, width, 0],
        alphas_per_ev=[alpha_out, alpha_in, alpha_out],
    )
    t_table = transmission(energy, profile=linear_profile(table, [0.0]))[0, 0]
    np.testing.assert_allclose(t_table, ref, rtol=1e-9)


def test_nonparabolic_mass_cap_as_documented() -> None:
    # Documented behaviour, no published source: more than 1/(2 alpha) below a band edge
    # the mass is held at m/2 (module docstring). Checked with the analytic barrier and
    # the capped mass.
    height, width, m, alpha = 0.8, 2.0, 0.067, 3.0
    energy = np.linspace(0.01, 0.6, 50)  # 1 + alpha (E - V) < 0.5 for all of these
    assert np.all(1 + alpha * (energy - height) < 0.5)
    p = flat_profile([0, height, 0], m, [0, width, 0], [0.0, alpha, 0.0])
    ref = barrier_transmission(energy, height_ev=height, width_nm=width, m_out=m, m_in=m / 2)
    np.testing.assert_allclose(transmission(energy, profile=p), ref, rtol=ANALYTIC_RTOL)
