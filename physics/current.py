"""Tsu-Esaki current density on an adaptive energy grid.

For parabolic contacts with the transverse momentum conserved, the current
density is [1]_

    J = (q m_E k_B T) / (2 pi^2 hbar^3) * int T(E) ln[(1 + exp((mu_E - E)/kT)) /
                                                     (1 + exp((mu_C - E)/kT))] dE,

with ``m_E`` the emitter mass and ``mu_E``, ``mu_C`` the emitter and
collector Fermi levels (``mu_C = mu_E - qV``). The integral runs from the
higher of the two contact band edges to ``max(mu) + 30 kT`` (the supply
beyond is below ``exp(-30)``), so the current over the barriers is included.

The energy grid is adaptive. A coarse grid over the window, dense at its
lower edge (``E = low + (high - low) u^2``, ``u`` uniform, where T rises like
the square root of the emitter's kinetic energy; five more nodes between the
edge and the first node, geometrically closer to the edge, :data:`EDGE_NODES_U`),
locates the transmission peaks that carry most current; each is refined to its
centre ``E_r`` and width ``Gamma`` (:mod:`physics.resonances`). Around each resonance an
interval of ``max(30 Gamma, 4 coarse spacings)`` is integrated with
Gauss-Legendre nodes in ``s`` under the map ``E = E_r + (Gamma/2) sinh(s)``,
which turns a Lorentzian into ``(Gamma/2) sech(s) ds``, smooth at every scale,
so a fixed number of nodes resolves resonances of any width (tested to
1 ueV; :mod:`physics.quadrature`). The rest of the window is integrated on the coarse nodes with the
weights of their piecewise-linear interpolant. No uniform fine grid is used.

References
----------
.. [1] R. Tsu and L. Esaki, Appl. Phys. Lett. 22, 562 (1973).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .bands import Profile
from .broadening import broadening_correction
from .constants import BOLTZMANN_EV_K, ELECTRON_MASS_KG, ELEMENTARY_CHARGE_C, HBAR_J_S
from .fermi import fermi_level_ev
from .quadrature import sinh_gauss_legendre
from .resonances import local_peaks, refine_grid_peaks
from .scattering import ScatteringParameters, coherent_factor, sequential_integral_ev2
from .stack import LayerTable
from .transmission import transmission, transmission_rows

__all__ = [
    "EnergyGrid",
    "current_density_a_cm2",
    "contact_fermi_levels_ev",
    "supply_function_ev",
    "energy_window_ev",
]

#: e^3 m0 / (2 pi^2 hbar^3), A m^-2 eV^-2: J = this * m_E/m0 * int T S dE with S, E in eV.
TSU_ESAKI_A_M2_EV2 = ELEMENTARY_CHARGE_C**3 * ELECTRON_MASS_KG / (2.0 * np.pi**2 * HBAR_J_S**3)
WINDOW_KT = 30.0
#: Extra coarse nodes between the window's lower edge and its first node, as fractions of
#: that node's u: energies 1/4 ... 1/1024 of its energy. A state about to leave through
#: the emitter edge is a ueV line a fraction of a meV above it, below the first node
#: (~0.2 meV), and would otherwise not show as a coarse-grid maximum (measured: 0.01 % of
#: the biases of as-grown GaAs and InP variants missed up to 3/4 of their current).
EDGE_NODES_U = 0.5 ** np.arange(5, 0, -1)
#: A third or later line is resolved only where it is narrower than the coarse spacing and
#: its estimated share of the current, ``T_p Gamma S(E_r)`` over that of all lines
#: narrower than kT, is at least this (else the coarse nodes integrate it).
MIN_SHARE = 1e-3


@dataclass(frozen=True)
class EnergyGrid:
    """Settings of the adaptive energy grid."""

    #: points over the window (quadratic map, dense at its lower edge), plus the
    #: EDGE_NODES_U: 64 in all, a whole number of the compiled kernel's 8-item chunks
    n_coarse: int = 59
    n_resonances: int = 3  #: at most this many resolved per (stack, bias) (see MIN_SHARE)
    n_candidates: int = 6  #: coarse-grid peaks refined before the n_resonances are chosen
    n_per_resonance: int = 32  #: Gauss-Legendre nodes per resonance (sinh map)
    refine_iterations: int = 6  #: bracketed refinement rounds per candidate (two energies each)


def contact_fermi_levels_ev(table: LayerTable) -> tuple[np.ndarray, np.ndarray]:
    """Fermi levels above their own band edges of emitter and collector, ``(n_stacks,)`` each."""
    t = table.temperature_k
    mu_e = fermi_level_ev(table.doping_cm3[:, 0], table.mass_m0[:, 0], t)
    mu_c = fermi_level_ev(table.doping_cm3[:, -1], table.mass_m0[:, -1], t)
    return mu_e, mu_c


def supply_function_ev(energy_ev, mu_emitter_ev, mu_collector_ev, kt_ev):
    """kT ln[(1 + exp((mu_E - E)/kT)) / (1 + exp((mu_C - E)/kT))], eV, overflow-safe."""
    x = (mu_emitter_ev - energy_ev) / kt_ev
    return kt_ev * (_softplus(x) - _softplus(x - (mu_emitter_ev - mu_collector_ev) / kt_ev))


def _softplus(x: np.ndarray) -> np.ndarray:
    """ln(1 + e^x) without overflow (twice as fast as np.logaddexp(0, x))."""
    return np.maximum(x, 0.0) + np.log1p(np.exp(-np.abs(x)))


def energy_window_ev(
    profile: Profile, mu_emitter_ev, bias_v, kt_ev
) -> tuple[np.ndarray, np.ndarray]:
    """Integration window ``(low, high)``, batch-shaped, eV from the emitter edge."""
    collector_edge = profile.edge_ev[..., -1]
    low = np.maximum(0.0, collector_edge)
    high = np.maximum(mu_emitter_ev, mu_emitter_ev - bias_v) + WINDOW_KT * kt_ev
    high = np.maximum(high, low + WINDOW_KT * kt_ev)
    return low, high


def _linear_weights(nodes: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Weights ``w`` with ``sum(w f)`` = integral over [a, b] of the piecewise-linear interpolant of f.

    ``nodes`` is ``batch + (n,)`` and sorted; ``a``, ``b`` are ``batch``.
    """
    e0, e1 = nodes[..., :-1], nodes[..., 1:]
    lo = np.minimum(np.maximum(a[..., None], e0), e1)  # [a, b] clipped to each cell
    hi = np.minimum(np.maximum(b[..., None], e0), e1)
    # cell [e0, e1] of width h: the hat functions integrate over [lo, hi] to
    # (hi - lo)(2 e1 - lo - hi) / 2h (left node) and (hi - lo)(lo + hi - 2 e0) / 2h (right)
    d = (hi - lo) / (2.0 * np.maximum(e1 - e0, 1e-300))
    mid2 = lo + hi
    w = np.zeros(nodes.shape)
    w[..., :-1] += d * (2.0 * e1 - mid2)
    w[..., 1:] += d * (mid2 - 2.0 * e0)
    return w


def _trapezoid_weights(nodes: np.ndarray) -> np.ndarray:
    """Trapezoid weights on sorted ``nodes`` (``batch + (n,)``): the interpolant's integral over their span."""
    h = np.diff(nodes, axis=-1)
    w = np.zeros(nodes.shape)
    w[..., :-1] += 0.5 * h
    w[..., 1:] += 0.5 * h
    return w


def _resonance_intervals(center, width, spacing, valid, low, high):
    """Non-overlapping integration intervals around resonances, ``batch + (n_res,)`` each.

    The valid slots come first, sorted by ``center``; the others are ignored.
    """
    half_span = np.maximum(4.0 * spacing, 30.0 * width)
    a = np.maximum(center - half_span, low[..., None])
    b = np.minimum(center + half_span, high[..., None])
    for r in range(center.shape[-1] - 1):  # cut overlapping neighbours halfway between centres
        cut = 0.5 * (center[..., r] + center[..., r + 1])
        overlap = (b[..., r] > a[..., r + 1]) & valid[..., r + 1]
        b[..., r] = np.where(overlap, np.maximum(np.minimum(b[..., r], cut), a[..., r]), b[..., r])
        a[..., r + 1] = np.where(
            overlap, np.minimum(np.maximum(a[..., r + 1], cut), b[..., r + 1]), a[..., r + 1]
        )
    return a, np.maximum(a, b)


def current_density_a_cm2(
    profile: Profile,
    *,
    table: LayerTable,
    bias_v: np.ndarray,
    grid: EnergyGrid = EnergyGrid(),
    broadening_ev: float = 0.0,
    scattering: ScatteringParameters | None = None,
) -> np.ndarray:
    """Tsu-Esaki current density for each (stack, bias) of ``profile``.

    Parameters
    ----------
    profile
        Band profiles, batch shape ``(n_stacks, n_biases)``.
    table
        The layers the profiles were built from (contacts: doping, mass, temperature).
    bias_v
        Biases broadcastable to ``(n_stacks, n_biases)``; ``mu_C = mu_E - bias``.
    grid
        Adaptive grid settings.
    broadening_ev
        Scattering broadening ``Gamma_s``, eV, of every resonance narrower than
        ``kT`` found on the coarse grid (up to ``grid.n_candidates``, resolved or
        not; :mod:`physics.broadening`); 0 (default) is the coherent result.
    scattering
        Settings of the scattering-assisted channel (:mod:`physics.scattering`):
        the coherent lines narrower than kT are reduced to their coherent part
        and the sequential current through the well's states is added. ``None``
        (default) or a channel without scattering: the coherent current.

    Returns
    -------
    ndarray
        ``(n_stacks, n_biases)`` current density, A/cm^2, positive from emitter to collector.
    """
    shape = profile.batch_shape
    bias = np.broadcast_to(np.asarray(bias_v, float), shape)
    kt = (BOLTZMANN_EV_K * table.temperature_k)[:, None] * np.ones(shape)
    mu_e = (contact_fermi_levels_ev(table)[0])[:, None] * np.ones(shape)
    mu_c = mu_e - bias
    low, high = energy_window_ev(profile, mu_e, bias, kt)

    # quadratic map: dense at the window's lower edge, where T rises like sqrt(E - low)
    u = np.linspace(0.0, 1.0, grid.n_coarse)
    u = np.concatenate([u[:1], u[1] * EDGE_NODES_U, u[1:]])
    coarse = low[..., None] + (high - low)[..., None] * u**2
    t_coarse = transmission(coarse, profile=profile)
    weights = _trapezoid_weights(coarse)  # the coarse nodes span [low, high]
    if grid.n_resonances > 0:
        # refine every candidate peak, then keep those carrying most current: a resonance of
        # 1 ueV width looks tiny on the coarse grid, its weight (pi/2) T_p Gamma S(E_r) does not
        n_cand = max(grid.n_candidates, grid.n_resonances)
        index, valid = local_peaks(t_coarse, n_cand)
        # the peak heights only rank the candidates (and scale the broadening): the
        # parabola's value is good enough, no extra evaluation
        center, width, peak = refine_grid_peaks(
            coarse,
            t_coarse,
            index,
            valid,
            profile=profile,
            iterations=grid.refine_iterations,
            exact_peak=False,
        )
        # at least the regular grid's spacing at its first node (the edge nodes' spacing is
        # no scale for a line's integration interval: its tails beyond are left to the
        # coarse nodes' linear interpolant)
        first_node = (high - low)[..., None] * u[EDGE_NODES_U.size + 1] ** 2
        spacing = np.maximum(np.gradient(coarse, axis=-1), 2.0 * first_node)
        spacing = np.take_along_axis(spacing, index, axis=-1)
        valid &= (
            np.isfinite(width)
            & (width > 0)
            & (center > low[..., None])
            & (center < high[..., None])
        )
        # every line found, resolved or not, is broadened
        lines = {"center_ev": center, "width_ev": width, "peak": peak, "valid": valid}
        share = np.abs(supply_function_ev(center, mu_e[..., None], mu_c[..., None], kt[..., None]))
        share = np.where(valid, np.nan_to_num(peak * width * share), -1.0)
        keep = np.argsort(-share, axis=-1)[..., : grid.n_resonances]
        narrow = np.sum(np.where(width < kt[..., None], np.maximum(share, 0.0), 0.0), axis=-1)
        center, width, spacing, valid, share = (
            np.take_along_axis(x, keep, axis=-1) for x in (center, width, spacing, valid, share)
        )
        # beyond the first two, a line is resolved only where the coarse nodes cannot
        # integrate it (narrower than their spacing) and it carries a share of the current
        # (of the lines narrower than kT: a broad feature's T_p Gamma is no measure of it)
        valid[..., 2:] &= (width[..., 2:] < spacing[..., 2:]) & (
            share[..., 2:] >= MIN_SHARE * narrow[..., None]
        )
        # the resolved lines in order of energy, the unused slots after them (never computed)
        center = np.where(valid, center, high[..., None])
        width = np.where(valid, np.maximum(width, 1e-12), 1.0)
        order = np.argsort(np.where(valid, center, np.inf), axis=-1)
        center, width, spacing, valid = (
            np.take_along_axis(x, order, axis=-1) for x in (center, width, spacing, valid)
        )
        a, b = _resonance_intervals(center, width, spacing, valid, low, high)
        for r in range(a.shape[-1]):  # each resolved line's interval leaves the coarse rule
            m = valid[..., r]
            if m.any():
                weights[m] -= _linear_weights(coarse[m], a[..., r][m], b[..., r][m])
    sequential = None
    if scattering is not None and scattering.active and grid.n_resonances > 0:
        sequential, _, gamma_s = sequential_integral_ev2(
            profile,
            table=table,
            bias_v=bias,
            mu_emitter_ev=mu_e,
            kt_ev=kt,
            high_ev=high,
            lines=lines,
            params=scattering,
        )
        narrow = lines["valid"] & (lines["width_ev"] < kt[..., None])
        reduce = dict(
            center_ev=lines["center_ev"],
            width_ev=lines["width_ev"],
            valid=narrow,
            gamma_s_ev=gamma_s,
        )
        t_coarse = t_coarse * coherent_factor(coarse, **reduce)
    supply = supply_function_ev(coarse, mu_e[..., None], mu_c[..., None], kt[..., None])
    integral = np.sum(weights * t_coarse * supply, axis=-1)
    if grid.n_resonances > 0 and valid.any():
        # the resolved lines only (unused slots cost nothing), one row per line
        where = np.nonzero(valid)
        rows = where[:-1]
        nodes, node_weights = sinh_gauss_legendre(
            center[where], width[where], a[where], b[where], grid.n_per_resonance
        )
        t_lines = transmission_rows(nodes, profile=profile, rows=rows)
        if sequential is not None:
            t_lines = t_lines * coherent_factor(nodes, **{k: v[rows] for k, v in reduce.items()})
        s_lines = supply_function_ev(
            nodes, mu_e[rows][:, None], mu_c[rows][:, None], kt[rows][:, None]
        )
        np.add.at(integral, rows, np.sum(node_weights * t_lines * s_lines, axis=-1))
    if broadening_ev > 0.0 and grid.n_resonances > 0:
        integral = integral + broadening_correction(
            **lines,
            low_ev=low,
            high_ev=high,
            supply=lambda e: supply_function_ev(
                e, mu_e[..., None, None], mu_c[..., None, None], kt[..., None, None]
            ),
            broadening_ev=broadening_ev,
            kt_ev=kt,
        )
    if sequential is not None:
        integral = integral + sequential
    mass_e = table.mass_m0[:, 0][:, None]
    j = TSU_ESAKI_A_M2_EV2 * mass_e * integral * 1e-4
    return j
