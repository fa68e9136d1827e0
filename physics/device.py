"""Device and oscillator figures of merit of an I-V: what a circuit or THz-oscillator designer asks for.

Computed by :func:`wellwright.physics.iv.sweep` for every I-V, per unit area
(the device quantities of a mesa follow from :func:`device_quantities`):

- ``rf_power_density_w_cm2``: the largest oscillator output of the cubic
  NDR, ``(3/16) Delta J Delta V`` (:func:`rf_power_density_w_cm2`);
- ``ndr_conductance_s_cm2`` and ``ndr_bias_v``: the most negative ``dJ/dV``
  between peak and valley and where it is (:func:`ndr_conductance_s_cm2`);
- ``capacitance_f_cm2``: the depletion-approximation capacitance at the peak
  bias (:func:`depletion_capacitance_f_cm2`);
- ``resonance_lifetime_s``: ``hbar / Gamma`` of the resonance that carries
  the peak current (:func:`peak_resonance_lifetime_s`);
- ``transit_delay_s``: the transit delay through the collector depletion
  region (:func:`collector_transit_delay_s`);
- ``cutoff_frequency_hz``: the frequency up to which the terminals show a
  negative resistance (:func:`cutoff_frequency_hz`).

These are small-signal estimates from the static I-V and the depletion
approximation; the stored well charge, the emitter accumulation width and
any inductance of the contacts are left out (see each function).
"""

from __future__ import annotations

import numpy as np

from .bands import Profile
from .constants import BOLTZMANN_EV_K, ELEMENTARY_CHARGE_C, HBAR_J_S, VACUUM_PERMITTIVITY_F_M
from .current import contact_fermi_levels_ev
from .electrostatics import BARRIER_EV
from .fermi import fermi_dirac_zero
from .resonances import find_resonances
from .stack import LayerTable

__all__ = [
    "DEVICE_METRIC_NAMES",
    "SATURATION_VELOCITY_CM_S",
    "rf_power_density_w_cm2",
    "ndr_conductance_s_cm2",
    "depletion_capacitance_f_cm2",
    "peak_resonance_lifetime_s",
    "collector_transit_delay_s",
    "cutoff_frequency_hz",
    "device_quantities",
]

#: Per-area figures of merit this module adds to every sweep (see the module docstring).
DEVICE_METRIC_NAMES: tuple[str, ...] = (
    "rf_power_density_w_cm2",
    "ndr_conductance_s_cm2",
    "ndr_bias_v",
    "capacitance_f_cm2",
    "resonance_lifetime_s",
    "transit_delay_s",
    "cutoff_frequency_hz",
)
#: Electron saturation velocity used for the collector transit, cm/s: about 1e7 cm/s in
#: GaAs, InP and In0.53Ga0.47As at 300 K (S. M. Sze and K. K. Ng, Physics of Semiconductor
#: Devices, 3rd ed., 2007, ch. 1; value from memory). Overshoot in thin depletion regions
#: makes the true delay shorter.
SATURATION_VELOCITY_CM_S = 1.0e7


def rf_power_density_w_cm2(delta_current_density_a_cm2, delta_voltage_v):
    """Largest oscillator output of a cubic NDR, ``P = (3/16) Delta J Delta V``, W/cm^2.

    Parameters
    ----------
    delta_current_density_a_cm2
        Peak minus valley current density, A/cm^2.
    delta_voltage_v
        Valley minus peak voltage, V.

    Notes
    -----
    Derivation (stands on its own): about the middle of the NDR region write
    the I-V as the cubic through the peak (``v = -dV/2``) and the valley
    (``v = +dV/2``) with zero slope at both,
    ``J(v) = J0 - G v + a v^3`` with ``G = 3 dJ / (2 dV)`` and
    ``a = 2 dJ / dV^3``. Driven by ``v = A cos(wt)``, the current's component
    at ``w`` is ``(-G A + (3/4) a A^3) cos(wt)``, so the power the diode
    delivers is ``P(A) = (G A^2 - (3/4) a A^4) / 2``. It is largest at
    ``A^2 = 2 G / (3 a) = dV^2 / 2``, where ``P = G A^2 / 4 = (3/16) dJ dV``.
    ``tests/test_device.py`` checks this against a numerical Fourier
    integral of the cubic.

    References
    ----------
    .. [1] C. S. Kim and A. Brandli, "High-frequency high-power operation of
       tunnel diodes", IRE Trans. Circuit Theory 8, 416 (1961) (the (3/16)
       result for tunnel-diode oscillators; citation from memory, the
       derivation above stands on its own).
    """
    return 3.0 / 16.0 * np.asarray(delta_current_density_a_cm2) * np.asarray(delta_voltage_v)


def ndr_conductance_s_cm2(bias_v, current_density_a_cm2, *, peak_v, valley_v):
    """Most negative ``dJ/dV`` between peak and valley and its bias, on the sweep grid.

    Parameters
    ----------
    bias_v
        ``(n,)`` increasing bias magnitudes of one branch, V.
    current_density_a_cm2
        ``(n_stacks, n)`` current magnitudes on that branch, A/cm^2.
    peak_v, valley_v
        ``(n_stacks,)`` peak and valley bias magnitudes, V (NaN: no NDR).

    Returns
    -------
    conductance_s_cm2, at_bias_v
        ``(n_stacks,)``: the steepest slope between neighbouring sweep points
        whose interval lies between peak and valley (or the peak-to-valley
        chord, if steeper or if no interval fits), S/cm^2, and the middle of
        that interval, V. A drop sharper than the sweep spacing reads as the
        drop over one spacing, so ``|G|`` is then a lower bound.

    References
    ----------
    .. [1] Finite-difference slope of the sampled I-V, common practice.
    """
    v = np.asarray(bias_v, float)
    j = np.asarray(current_density_a_cm2, float)
    vp = np.asarray(peak_v, float)[:, None]
    vv = np.asarray(valley_v, float)[:, None]
    slope = np.diff(j, axis=1) / np.diff(v)[None, :]
    inside = (v[None, :-1] >= vp - 1e-12) & (v[None, 1:] <= vv + 1e-12)
    slope = np.where(inside & np.isfinite(slope), slope, np.inf)  # NaN: not computed there
    mid = np.broadcast_to(0.5 * (v[1:] + v[:-1]), slope.shape)
    k = np.argmin(slope, axis=1)
    rows = np.arange(j.shape[0])
    g, at = slope[rows, k], mid[rows, k]
    with np.errstate(invalid="ignore", divide="ignore"):
        jp = _interp_rows(vp[:, 0], v, j)
        jv = _interp_rows(vv[:, 0], v, j)
        chord = (jv - jp) / (vv[:, 0] - vp[:, 0])
    use_chord = ~(g <= chord)
    g = np.where(use_chord, chord, g)
    at = np.where(use_chord, 0.5 * (vp[:, 0] + vv[:, 0]), at)
    bad = ~(np.isfinite(vp[:, 0]) & np.isfinite(vv[:, 0]))
    return np.where(bad, np.nan, g), np.where(bad, np.nan, at)


def _interp_rows(x, v, j):
    """``j[s]`` interpolated at ``x[s]`` for every row ``s`` (NaN stays NaN)."""
    out = np.full(x.shape, np.nan)
    ok = np.isfinite(x)
    for s in np.nonzero(ok)[0]:  # per stack: one interpolation, not physics
        out[s] = np.interp(x[s], v, j[s])
    return out


def _barrier_layers(table: LayerTable) -> np.ndarray:
    """``(n_stacks, n_layers)`` mask of barrier layers (edge ``BARRIER_EV`` above both contacts)."""
    edge = table.edge_ev
    is_barrier = edge > np.maximum(edge[:, :1], edge[:, -1:]) + BARRIER_EV
    is_barrier[:, [0, -1]] = False
    return is_barrier


def depletion_capacitance_f_cm2(table: LayerTable, bias_v):
    """Depletion-approximation capacitance per area and depletion edge, at a bias.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        ``(n_stacks,)`` bias magnitude across the device, V.

    Returns
    -------
    capacitance_f_cm2, edge_nm, collector_depletion_nm
        ``(n_stacks,)``: ``dQ/dV`` in F/cm^2; the depletion edge measured from
        the emitter side of the first barrier, nm; the depleted length behind
        the last barrier (collector spacer plus the depleted part of the
        doped collector), nm.

    Notes
    -----
    The emitter's accumulated electrons are a sheet at the first barrier;
    from there the bias falls over the undoped barriers, well and spacers and
    over the depleted donors of the collector side, which are fully ionised
    up to the depletion edge ``X`` and neutral beyond (the depletion
    approximation [1]_). With ``Q(x)`` the donor charge per area between the
    sheet and ``x``, Gauss's law gives the field ``(Q(X) - Q(x)) / eps(x)`` and

        ``V = integral_0^X (Q(X) - Q(x)) / eps(x) dx``,

    solved for ``X`` layer by layer (a quadratic within each doped layer).
    A change ``dQ`` at the edge raises the field by ``dQ / eps(x)`` everywhere
    before it, so ``C = dQ / dV = 1 / integral_0^X dx / eps(x)``: the undoped
    layers and the depleted region in series. For a uniform permittivity, an
    undoped length ``d`` and a collector doping ``N`` this is Sze's result
    ``C = eps / (d + W)`` with ``W = sqrt(d^2 + 2 eps V / (q N)) - d``.
    The built-in potential, the width of the accumulation layer and the
    charge stored in the well are left out (each makes the true capacitance
    somewhat different; the well charge raises it in the NDR region [2]_).

    References
    ----------
    .. [1] S. M. Sze and K. K. Ng, Physics of Semiconductor Devices, 3rd ed.
       (Wiley, 2007), ch. 2 (depletion approximation, abrupt junction).
    .. [2] E. R. Brown, C. D. Parker and T. C. L. G. Sollner, Appl. Phys.
       Lett. 54, 934 (1989) (RTD capacitance as eps / d over the depleted
       and undoped length; citation from memory).
    """
    eps0_cm = VACUUM_PERMITTIVITY_F_M * 1e-2  # F/cm
    q = ELEMENTARY_CHARGE_C
    n_stacks, n_layers = table.edge_ev.shape
    barrier = _barrier_layers(table)
    first = np.where(barrier.any(axis=1), np.argmax(barrier, axis=1), 1)
    last = np.where(
        barrier.any(axis=1), n_layers - 1 - np.argmax(barrier[:, ::-1], axis=1), n_layers - 2
    )
    v_target = np.maximum(np.asarray(bias_v, float), 0.0)
    cap = np.full(n_stacks, np.nan)
    edge_nm = np.full(n_stacks, np.nan)
    collector_nm = np.full(n_stacks, np.nan)
    for s in range(n_stacks):  # per stack: a walk over a handful of layers, not physics
        if not np.isfinite(v_target[s]):
            continue
        r = 0.0  # integral dx / eps_r, cm
        volt = 0.0  # V at an edge placed at the running position
        pos = 0.0  # cm from the sheet
        behind = 0.0  # cm from the collector side of the last barrier
        for k in range(first[s], n_layers):
            n = table.doping_cm3[s, k]
            e = table.permittivity_r[s, k]
            d = np.inf if k == n_layers - 1 else table.thickness_nm[s, k] * 1e-7
            # inside this layer, V(w) = volt + q/eps0 (n r w + n w^2 / (2 e))
            end_volt = volt + q / eps0_cm * (n * r * d + n * d * d / (2 * e)) if n > 0 else volt
            if n > 0 and end_volt >= v_target[s]:
                w = e * (-r + np.sqrt(r * r + 2 * (v_target[s] - volt) * eps0_cm / (q * n * e)))
                r, pos = r + w / e, pos + w
                behind += w if k > last[s] else 0.0
                break
            if not np.isfinite(d):  # undoped collector contact: no finite edge
                r = np.nan
                break
            volt = end_volt
            r += d / e
            pos += d
            behind += d if k > last[s] else 0.0
        cap[s] = eps0_cm / r
        edge_nm[s] = pos * 1e7
        collector_nm[s] = behind * 1e7
    return cap, edge_nm, collector_nm


def collector_transit_delay_s(
    collector_depletion_nm, *, saturation_velocity_cm_s=SATURATION_VELOCITY_CM_S
):
    """Transit delay through the collector depletion region, ``tau = L / (2 v_sat)``, s.

    The factor 1/2 is the delay of the terminal current behind electrons
    that cross a depletion region of length ``L`` at the saturated velocity
    (Ramo's theorem: the induced current flows during the whole transit, on
    average half of it late).

    Parameters
    ----------
    collector_depletion_nm
        Depletion length ``L`` on the collector side, nm, any shape.
    saturation_velocity_cm_s
        Saturated electron velocity ``v_sat``, cm/s.

    References
    ----------
    .. [1] S. M. Sze and K. K. Ng, Physics of Semiconductor Devices, 3rd ed.
       (Wiley, 2007), ch. 5 (collector space-charge transit time
       ``W / (2 v_s)`` of bipolar transistors; citation from memory).
    """
    return np.asarray(collector_depletion_nm, float) * 1e-7 / (2.0 * saturation_velocity_cm_s)


def peak_resonance_lifetime_s(profile: Profile, table: LayerTable) -> np.ndarray:
    """``hbar / Gamma`` of the resonance that carries the current at the peak, s.

    Parameters
    ----------
    profile
        Band profiles at each stack's peak bias, batch shape ``(n_stacks, 1)``.
    table
        The stacks' layers (for the emitter Fermi level).

    Notes
    -----
    The resonances between 0.1 eV below the emitter edge and 10 kT above the
    emitter Fermi level are found from ``T(E)``
    (:func:`wellwright.physics.resonances.find_resonances`); the one carrying
    the peak is the one with the largest coherent current estimate
    ``T_peak Gamma S(E_r)`` (the Lorentzian's area times the emitter supply
    ``S = kT ln(1 + exp((mu - E)/kT))`` at ``max(E_r, 0)``), counting only
    lines above ``-Gamma``, since below the emitter edge no electron is
    injected [1]_.

    References
    ----------
    .. [1] R. Tsu and L. Esaki, Appl. Phys. Lett. 22, 562 (1973) (supply
       function of the coherent current).
    """
    kt = BOLTZMANN_EV_K * table.temperature_k
    mu, _ = contact_fermi_levels_ev(table)
    res = find_resonances(profile, energy_min_ev=-0.1, energy_max_ev=(mu + 10 * kt)[:, None])
    e = res.energy_ev[:, 0]
    g = res.width_ev[:, 0]
    x = (mu[:, None] - np.maximum(e, 0.0)) / kt[:, None]
    supply = fermi_dirac_zero(x)
    weight = np.where(res.valid[:, 0] & (e > -g), res.peak_transmission[:, 0] * g * supply, -1.0)
    k = np.argmax(weight, axis=1)
    rows = np.arange(k.size)
    gamma = np.where(weight[rows, k] > 0, g[rows, k], np.nan)
    return HBAR_J_S / (gamma * ELEMENTARY_CHARGE_C)


def cutoff_frequency_hz(
    ndr_conductance_s_cm2, *, capacitance_f_cm2, series_resistance_ohm_cm2=0.0, delay_s=0.0
):
    """Highest frequency at which the device's terminals show a negative resistance, Hz.

    Parameters
    ----------
    ndr_conductance_s_cm2
        NDR conductance ``G < 0``, S/cm^2.
    capacitance_f_cm2
        Device capacitance ``C``, F/cm^2.
    series_resistance_ohm_cm2
        Series resistance ``R_s`` times area, ohm cm^2.
    delay_s
        Delay ``tau`` of the conduction current behind the voltage (resonance
        lifetime plus collector transit).

    Returns
    -------
    numpy.ndarray
        ``f_max``; 0 where ``|G| R_s >= 1`` (no negative resistance at any
        frequency), NaN where ``G`` is not negative.

    Notes
    -----
    Small-signal circuit: ``R_s`` in series with ``C`` in parallel with the
    delayed conductance ``G exp(-i w tau)``; the terminals show a negative
    resistance while ``R_s + Re(1/Y) < 0`` with
    ``Y = G exp(-i w tau) + i w C``. With ``tau = 0`` this is the classic
    resistive cutoff [1]_

        ``f_max = (|G| / (2 pi C)) sqrt(1 / (|G| R_s) - 1)``,

    and with ``R_s = 0`` the limit ``1 / (4 tau)`` where the delayed
    conductance changes sign. To first order in ``w tau`` the delayed
    conductance is the quantum-inductance model of [2]_,
    ``G / (1 + i w tau)``; the exponential form is this project's choice. Without
    ``R_s`` the crossing is ``1 / (4 tau)``; with it, the first crossing is found on a
    log grid from 1 MHz to 100 THz and refined by bisection.

    References
    ----------
    .. [1] E. R. Brown, J. R. Soderstrom, C. D. Parker, L. J. Mahoney,
       K. M. Molvar and T. C. McGill, Appl. Phys. Lett. 58, 2291 (1991)
       (resistive cutoff of an RTD; citation from memory).
    .. [2] E. R. Brown, C. D. Parker and T. C. L. G. Sollner, Appl. Phys.
       Lett. 54, 934 (1989) (quasi-bound-state lifetime as an inductance;
       citation from memory).
    """
    g = np.atleast_1d(np.asarray(ndr_conductance_s_cm2, float))
    c = np.broadcast_to(np.asarray(capacitance_f_cm2, float), g.shape)
    r = np.broadcast_to(np.asarray(series_resistance_ohm_cm2, float), g.shape)
    tau = np.broadcast_to(np.nan_to_num(np.asarray(delay_s, float)), g.shape)
    freq = np.logspace(6, 14, 321)
    # without R_s, Re Y = G cos(w tau): negative up to w tau = pi/2, f = 1/(4 tau) (the grid's
    # range kept: 0 below its first frequency, its last where tau = 0)
    quarter = 0.25 / np.where(tau > 0, tau, np.inf)
    out = np.where(
        tau <= 0, freq[-1], np.where(quarter < freq[0], 0.0, np.minimum(quarter, freq[-1]))
    )
    k = np.nonzero(r != 0)[0]  # with R_s: the first crossing on the grid, then bisection
    if k.size:
        out[k] = _first_crossing_hz(g[k], c[k], r[k], tau[k], freq)
    ok = (g < 0) & np.isfinite(c) & (c > 0)
    return np.where(ok, out, np.nan).reshape(np.shape(ndr_conductance_s_cm2))


def _first_crossing_hz(g, c, r, tau, freq):
    """:func:`cutoff_frequency_hz` where ``R_s > 0``: the first frequency of ``freq`` (log
    grid) where ``R_s |Y|^2 + Re Y`` turns positive, refined by bisection (50 halvings);
    the grid's last frequency where it never does, 0 where it never is negative."""

    def excess(f):  # R_s |Y|^2 + Re Y: < 0 where the terminals show negative resistance
        w = 2 * np.pi * f
        y = g[:, None] * np.exp(-1j * w * tau[:, None]) + 1j * w * c[:, None]
        return r[:, None] * np.abs(y) ** 2 + y.real

    neg = excess(np.broadcast_to(freq, (g.size, freq.size))) < 0
    first_pos = np.argmax(~neg, axis=1)
    lo = np.where(first_pos > 0, freq[np.maximum(first_pos - 1, 0)], np.nan)
    hi = freq[first_pos]
    for _ in range(50):
        mid = np.sqrt(lo * hi)
        below = excess(mid[:, None])[:, 0] < 0
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    out = np.where(neg.all(axis=1), freq[-1], np.sqrt(lo * hi))
    return np.where(~neg[:, 0] & (g < 0), 0.0, out)  # |G| R_s >= 1: never negative


def device_quantities(metrics: dict[str, np.ndarray], *, area_um2: float) -> dict[str, np.ndarray]:
    """Quantities of a mesa of ``area_um2`` from the per-area figures of merit.

    Returns ``peak_current_ma``, ``valley_current_ma``, ``ndr_conductance_ms``,
    ``capacitance_ff``, ``rf_power_uw`` (missing inputs give NaN). Unit
    conversions only.

    Parameters
    ----------
    metrics
        Per-area figures of merit by name (A/cm^2, S/cm^2, F/cm^2, W/cm^2), arrays of one shape.
    area_um2
        Mesa area, um^2.
    """
    area_cm2 = area_um2 * 1e-8
    nan = np.full(np.shape(next(iter(metrics.values()), np.nan)), np.nan)

    def get(key):
        return np.asarray(metrics.get(key, nan), float)

    return {
        "peak_current_ma": get("peak_current_density_a_cm2") * area_cm2 * 1e3,
        "valley_current_ma": get("valley_current_density_a_cm2") * area_cm2 * 1e3,
        "ndr_conductance_ms": get("ndr_conductance_s_cm2") * area_cm2 * 1e3,
        "capacitance_ff": get("capacitance_f_cm2") * area_cm2 * 1e15,
        "rf_power_uw": get("rf_power_density_w_cm2") * area_cm2 * 1e6,
    }


def device_figures(
    table: LayerTable,
    bias_v: np.ndarray,
    *,
    current_density_a_cm2: np.ndarray,
    metrics: dict[str, np.ndarray],
    peak_profile: Profile | None,
    rows: np.ndarray,
    series_resistance_ohm_um2=0.0,
) -> dict[str, np.ndarray]:
    """Every name of :data:`DEVICE_METRIC_NAMES` for the stacks of a sweep.

    ``bias_v``/``current_density_a_cm2`` are the branch the peak was found on
    (magnitudes); ``metrics`` holds the peak and valley figures; ``rows`` are
    the stacks with NDR and ``peak_profile`` their band profiles at the peak
    bias (batch ``(rows.size, 1)``).

    Parameters
    ----------
    table
        Layers of the ``n_stacks`` stacks of the sweep.
    bias_v
        Bias magnitudes of the branch, V, ``(n_biases,)``.
    current_density_a_cm2
        Current density magnitudes on it, A/cm^2, ``(n_stacks, n_biases)``.
    metrics
        Peak and valley figures of merit by name, ``(n_stacks,)`` each.
    peak_profile
        Band profiles of the ``rows`` at their peak bias, batch ``(rows.size, 1)``; ``None``
        skips the resonance lifetime.
    rows
        Indices of the stacks with NDR.
    series_resistance_ohm_um2
        Series resistance times area, ohm um^2, scalar or ``(n_stacks,)``.
    """
    n = table.n_stacks
    out = {k: np.full(n, np.nan) for k in DEVICE_METRIC_NAMES}
    if rows.size == 0:
        return out
    vp = metrics["peak_voltage_v"][rows]
    vv = metrics["valley_voltage_v"][rows]
    out["rf_power_density_w_cm2"][rows] = rf_power_density_w_cm2(
        metrics["delta_current_density_a_cm2"][rows], metrics["delta_voltage_v"][rows]
    )
    g, at = ndr_conductance_s_cm2(
        bias_v, current_density_a_cm2[rows], peak_v=np.abs(vp), valley_v=np.abs(vv)
    )
    out["ndr_conductance_s_cm2"][rows] = g
    out["ndr_bias_v"][rows] = at * np.sign(vp)
    sub = table.take(rows)
    cap, _, collector_nm = depletion_capacitance_f_cm2(sub, np.abs(vp))
    out["capacitance_f_cm2"][rows] = cap
    out["transit_delay_s"][rows] = collector_transit_delay_s(collector_nm)
    if peak_profile is not None:
        out["resonance_lifetime_s"][rows] = peak_resonance_lifetime_s(peak_profile, sub)
    delay = np.nan_to_num(out["resonance_lifetime_s"][rows]) + out["transit_delay_s"][rows]
    r_cm2 = np.broadcast_to(np.asarray(series_resistance_ohm_um2, float), (n,))[rows] * 1e-8
    out["cutoff_frequency_hz"][rows] = cutoff_frequency_hz(
        g, capacitance_f_cm2=cap, series_resistance_ohm_cm2=r_cm2, delay_s=delay
    )
    return out
