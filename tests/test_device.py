"""Device and oscillator figures of merit (wellwright.physics.device), each against its source.

- (3/16) Delta J Delta V: a numerical Fourier integral of the cubic I-V that
  the estimate is derived from (C. S. Kim and A. Brandli, IRE Trans. Circuit
  Theory 8, 416 (1961), citation from memory; the derivation is in the
  function's docstring);
- capacitance: the depletion approximation of S. M. Sze and K. K. Ng,
  Physics of Semiconductor Devices, 3rd ed. (2007), ch. 2, written out here
  in closed form for a long undoped collector spacer;
- lifetime: hbar / Gamma of the resonance found by
  wellwright.physics.resonances.find_resonances at the peak bias;
- cutoff frequency: the closed-form resistive cutoff of E. R. Brown et al.,
  Appl. Phys. Lett. 58, 2291 (1991) (citation from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import minimize_scalar
from wellwright.physics import parse_stack
from wellwright.physics.constants import (
    ELEMENTARY_CHARGE_C,
    HBAR_J_S,
    VACUUM_PERMITTIVITY_F_M,
)
from wellwright.physics.device import (
    cutoff_frequency_hz,
    depletion_capacitance_f_cm2,
    device_quantities,
    ndr_conductance_s_cm2,
    rf_power_density_w_cm2,
)
from wellwright.physics.iv import band_profile, stack_iv
from wellwright.physics.resonances import find_resonances
from wellwright.physics.stack import LayerTable


def _stack(collector_spacer_nm: float = 5.0, collector_doping: float = 2e18, r_s: float = 0.0):
    """Invented test scenario: an In0.53Ga0.47As/AlAs double barrier on InP."""
    layers = [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "es", "material": "In0.53Ga0.47As", "thickness_nm": 2.0},
        {"name": "b1", "material": "AlAs", "thickness_ml": 5},
        {"name": "well", "material": "In0.53Ga0.47As", "thickness_ml": 15},
        {"name": "b2", "material": "AlAs", "thickness_ml": 5},
        {"name": "cs", "material": "In0.53Ga0.47As", "thickness_nm": collector_spacer_nm},
        {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": collector_doping},
    ]
    return parse_stack(
        {
            "temperature_k": 300,
            "substrate": "InP",
            "layers": layers,
            "device": {"series_resistance_ohm_um2": r_s},
        }
    )


# ----------------------------------------------------------------------------- (3/16) estimate


def _cubic_power(amplitude: float, dj: float, dv: float) -> float:
    """Power the cubic NDR delivers at v = A cos(wt): -<J(v) v> over one period, numerically."""
    g, a = 1.5 * dj / dv, 2.0 * dj / dv**3  # cubic through peak and valley with zero slope

    def integrand(phase):
        v = amplitude * np.cos(phase)
        return (-g * v + a * v**3) * v

    return -quad(integrand, 0.0, 2 * np.pi)[0] / (2 * np.pi)


@pytest.mark.parametrize(("dj", "dv"), [(1.0, 1.0), (1.7e5, 0.25), (2e3, 0.08)])
def test_rf_power_is_the_maximum_of_the_cubic_oscillator(dj, dv):
    """Source: the cubic-NDR derivation (Kim and Brandli 1961, from memory), done numerically."""
    best = minimize_scalar(
        lambda amp: -_cubic_power(amp, dj, dv), bounds=(0.0, dv), method="bounded"
    )
    assert -best.fun == pytest.approx(float(rf_power_density_w_cm2(dj, dv)), rel=1e-6)
    assert best.x == pytest.approx(dv / np.sqrt(2), rel=1e-3)  # optimum amplitude dV / sqrt(2)


def test_ndr_conductance_of_a_sampled_cubic():
    """The steepest slope of the cubic J = -G v + a v^3 is -G = -3 dJ / (2 dV) at its middle (analytic)."""
    dj, dv = 1e5, 0.2
    v = np.linspace(0.0, 1.0, 2001)
    x = v - 0.5
    j = 2e5 - 1.5 * dj / dv * x + 2 * dj / dv**3 * x**3
    g, at = ndr_conductance_s_cm2(v, j[None, :], peak_v=np.array([0.4]), valley_v=np.array([0.6]))
    assert g[0] == pytest.approx(-1.5 * dj / dv, rel=1e-4)
    assert at[0] == pytest.approx(0.5, abs=1e-3)
    g, _ = ndr_conductance_s_cm2(v, j[None, :], peak_v=np.array([np.nan]), valley_v=np.array([0.6]))
    assert np.isnan(g[0])


# ----------------------------------------------------------------------------- capacitance


def test_capacitance_of_a_long_undoped_collector_spacer_follows_the_depletion_formula():
    """Sze (depletion approximation): C = 1 / (sum d_i / eps_i + W / eps_c), V = q N W^2 / (2 eps_c) + q N W sum d_i / eps_i."""
    stack = _stack(collector_spacer_nm=100.0, collector_doping=1e17)
    table = stack.table()
    eps0 = VACUUM_PERMITTIVITY_F_M * 1e-2  # F/cm
    q = ELEMENTARY_CHARGE_C
    undoped = stack.layers[2:6]  # from the first barrier to the end of the spacer
    s = sum(layer.thickness_nm * 1e-7 / (layer.permittivity_r * eps0) for layer in undoped)
    eps_c = stack.layers[-1].permittivity_r * eps0
    n = 1e17
    for bias in (0.0, 0.3, 1.2):
        # quadratic in W: q N W^2 / (2 eps_c) + q N s W - V = 0
        a, b = q * n / (2 * eps_c), q * n * s
        w = (-b + np.sqrt(b * b + 4 * a * bias)) / (2 * a)
        expected = 1.0 / (s + w / eps_c)
        cap, edge_nm, collector_nm = depletion_capacitance_f_cm2(table, np.array([bias]))
        assert cap[0] == pytest.approx(expected, rel=1e-9)
        assert collector_nm[0] == pytest.approx(100.0 + w * 1e7, rel=1e-9)
    # at zero bias the long spacer dominates: C close to the parallel plate eps / d
    d_cm = sum(layer.thickness_nm for layer in undoped) * 1e-7
    cap, _, _ = depletion_capacitance_f_cm2(table, np.array([0.0]))
    assert cap[0] == pytest.approx(stack.layers[-2].permittivity_r * eps0 / d_cm, rel=0.05)


def test_capacitance_falls_with_bias():
    """The depletion edge moves into the collector as the bias rises (Sze, ch. 2)."""
    table = _stack().table()
    tables = LayerTable.concatenate([table] * 3)
    cap, _, _ = depletion_capacitance_f_cm2(tables, np.array([0.1, 0.4, 0.8]))
    assert cap[0] > cap[1] > cap[2] > 0


# ----------------------------------------------------------------------------- lifetime, f_max


def test_lifetime_is_hbar_over_gamma_of_the_resonance_at_the_peak():
    """Source: the resonance finder's width at the peak bias (hbar / Gamma, Ricco and Azbel 1984)."""
    stack = _stack()
    curves = stack_iv(stack, np.linspace(0.0, 1.0, 41))
    m = curves.metrics_of(0)
    profile = band_profile(stack.table(), np.array([[m["peak_voltage_v"]]]), model=stack.model)
    res = find_resonances(profile, energy_min_ev=-0.1, energy_max_ev=0.4)
    e, g = res.energy_ev[0, 0], res.width_ev[0, 0]
    lowest = np.nanargmin(np.where(e > -g, e, np.nan))  # the ground state carries the first peak
    assert m["resonance_lifetime_s"] == pytest.approx(
        HBAR_J_S / (g[lowest] * ELEMENTARY_CHARGE_C), rel=1e-6
    )
    assert 1e-15 < m["resonance_lifetime_s"] < 1e-10


def test_cutoff_frequency_reduces_to_the_resistive_cutoff_and_the_delay_limit():
    """Brown et al. 1991: f = |G| / (2 pi C) sqrt(1 / (|G| R_s) - 1) without delay; 1/(4 tau) without R_s."""
    g, c = np.array([-4e6, -1e5]), np.array([6e-7, 2e-7])
    r = np.array([5e-8, 2e-6])
    expected = -g / (2 * np.pi * c) * np.sqrt(1 / (-g * r) - 1)
    assert cutoff_frequency_hz(
        g, capacitance_f_cm2=c, series_resistance_ohm_cm2=r
    ) == pytest.approx(expected, rel=1e-6)
    tau = 3e-13
    assert cutoff_frequency_hz(g, capacitance_f_cm2=c, delay_s=tau) == pytest.approx(
        1 / (4 * tau), rel=1e-6
    )
    # |G| R_s >= 1: no negative resistance at any frequency
    assert cutoff_frequency_hz(
        np.array([-1e6]), capacitance_f_cm2=np.array([1e-6]), series_resistance_ohm_cm2=2e-6
    )[0] == pytest.approx(0.0)
    assert np.isnan(cutoff_frequency_hz(np.array([1e6]), capacitance_f_cm2=np.array([1e-6]))[0])


def test_every_sweep_carries_the_device_figures_and_series_resistance_lowers_fmax():
    """Consistency: rf power from the sweep's own Delta J, Delta V; R_s only lowers f_max (Brown 1991)."""
    bias = np.linspace(0.0, 1.0, 41)
    m0 = stack_iv(_stack(), bias).metrics_of(0)
    m1 = stack_iv(_stack(r_s=5.0), bias).metrics_of(0)
    assert m0["rf_power_density_w_cm2"] == pytest.approx(
        3 / 16 * m0["delta_current_density_a_cm2"] * m0["delta_voltage_v"]
    )
    assert m0["ndr_conductance_s_cm2"] < 0
    assert m0["peak_voltage_v"] < m0["ndr_bias_v"] < m0["valley_voltage_v"]
    assert m0["capacitance_f_cm2"] > 0 and m0["transit_delay_s"] > 0
    assert 0 < m1["cutoff_frequency_hz"] < m0["cutoff_frequency_hz"]
    dq = device_quantities({k: np.array([v]) for k, v in m0.items() if v is not None}, area_um2=2.0)
    assert dq["peak_current_ma"][0] == pytest.approx(m0["peak_current_density_a_cm2"] * 2e-8 * 1e3)
    assert dq["capacitance_ff"][0] == pytest.approx(m0["capacitance_f_cm2"] * 2e-8 * 1e15)
