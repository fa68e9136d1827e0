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
locates the transmission peaks; the maxima of ``T S`` (not of ``T``: lines above
the barriers, with no supply, must not crowd out those that carry the current)
are refined to their centre ``E_r`` and width ``Gamma``
(:mod:`physics.resonances`). A line is resolved where the coarse rule cannot
integrate it (narrower than :data:`RESOLVE_SPACINGS` coarse spacings: on the
non-uniform coarse grid the trapezoid rule is only second order on a
Lorentzian) and its stake, ``T_p S(E_r)`` times the larger of its width and
the spacing (what the coarse rule can get wrong on it), is at least
:data:`MIN_SHARE` of the current of the narrow lines. Around each resolved
line, an interval of ``max(LINE_SPAN_WIDTHS Gamma, D)`` (``D``: to where the
coarse spacing is ``D / 4``, :func:`_coarse_reach`), cut halfway to any other
line found, is integrated with Gauss-Legendre nodes under the map
``E = E_r + (Gamma/2) sinh(s)``, which turns a Lorentzian into ``(Gamma/2)
sech(s) ds`` (:mod:`physics.quadrature`, three panels: the core and the two
tails), taken in ``v = sqrt(E - low)`` so that a line at the band edge, where
T rises like ``sqrt(E - low)``, is smooth too (:func:`_line_rule`). Tested on
lines from tens of meV down to 1e-14 eV wide against a brute-force integrator
(``tests/test_grid_random_stacks.py``). The rest of the window is integrated
on the coarse nodes with the weights of their piecewise-linear interpolant. No
uniform fine grid is used.

References
----------
.. [1] R. Tsu and L. Esaki, Appl. Phys. Lett. 22, 562 (1973).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np

from .bands import Profile
from .broadening import broadened_lines
from .constants import BOLTZMANN_EV_K, ELECTRON_MASS_KG, ELEMENTARY_CHARGE_C, HBAR_J_S
from .fermi import fermi_dirac_zero, fermi_level_ev
from .quadrature import sinh_gauss_legendre
from .resonances import local_peaks, refine_bracketed, refine_grid_peaks
from .scattering import (
    HUMP_ACTION,
    ScatteringParameters,
    coherent_factor,
    injecting_hump,
    sequential_integral_ev2,
)
from .stack import LayerTable
from .transmission import transmission, transmission_rows

__all__ = [
    "EnergyGrid",
    "GridAccuracyWarning",
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
#: A line is resolved only where the coarse rule's possible error on it, ``T_p S(E_r)``
#: times the larger of its width and the coarse spacing, is at least this fraction of
#: the current of the lines narrower than kT (their ``T_p Gamma S(E_r)``) ...
MIN_SHARE = 1e-3
#: ... and it is narrower than this many coarse spacings: a Lorentzian on a uniform grid
#: of spacing ``h`` is integrated by the trapezoid rule to about ``2 exp(-pi Gamma / h)``
#: (1.6e-4 at 3 spacings), a narrower one is not.
RESOLVE_SPACINGS = 15.0
#: A resolved line's interval spans this many widths either side, and at least to where
#: the coarse spacing is a quarter of the distance (:func:`_coarse_reach`): the coarse
#: rule integrates the Lorentzian's tails beyond to ~1e-4.
LINE_SPAN_WIDTHS = 5.0
#: Stacks with a bias whose coarse rule's estimated error exceeds this share of its
#: integral are done again on a coarse grid of twice the nodes, up to MAX_COARSE nodes
#: (:func:`_refined`); beyond, a :class:`GridAccuracyWarning`.
REFINE_TOLERANCE = 2e-2
MAX_COARSE = 256
#: ... and so are stacks whose window is wider than this mean coarse spacing allows.
MAX_MEAN_SPACING_EV = 0.025
#: ... and so are stacks where a line's rule sees another line (:func:`_second_maxima`)
#: whose stake exceeds this share of the stack's largest current (tighter than
#: REFINE_TOLERANCE: a line on the tail nodes of a broad one's rule is not integrated at all;
#: measured: an InGaAs line 86 meV from a broad one, 1.0 % of the largest current off, its
#: stake 1.0 %).
HIDDEN_LINE_TOLERANCE = 5e-3
#: A line narrower than this is not integrated reliably: T(E) in double precision is not
#: smooth on its scale (measured: a 1e-15 eV line through 6-8 nm AlSb barriers, its
#: integral changing by 1-5 % with the rule's nodes and the refinement rounds; lines of
#: 2e-14 to 5e-14 eV through 6-9 nm AlSb, their widths changing by up to 25 % and the
#: stack's current by 0.15-0.5 % with the rounding of T, e.g. the padding slices a batch
#: gives it; a stack alone against in a batch of 240 random ones: 3e-5 with 5e-14 eV lines,
#: 1e-6 with 6e-13 eV, 2e-7 with 1e-12 eV). Where such lines carry more than
#: REFINE_TOLERANCE of a stack's largest current, a :class:`GridAccuracyWarning` at once
#: (a finer coarse grid does not help; it may lose the line: measured 59 % off).
LINE_WIDTH_FLOOR_EV = 1e-13
#: Neighbouring nodes of a line's rule whose ``T S`` differ by more than this factor ...
STEEP_RATIO = 4.0
#: ... carrying more than this share of a stack's largest current refine the stack, with
#: twice the nodes per line: a line broader than kT on a steep background at a high bias
#: (T rising 1e4-fold across its interval while the supply falls) has T S peak on its rule's
#: sparse tail nodes (measured: 0.9 and 1.6 % off, shares 1.0 and 0.32; at most 0.09 over
#: the example spaces' stacks, where the rules are right).
STEEP_SHARE = 0.15
#: Behind a hump of the injecting side (a thick undoped spacer's space charge, its WKB action
#: at the injecting contact's edge above ``scattering.HUMP_ACTION``, the well-charge search's
#: gate) the candidates are also looked for on this many uniform nodes from the window's
#: lower edge to 2 kT above the hump's top (:func:`_hump_candidates`). Below the top the
#: well's and the pocket's states mix into lines of 1e-9 to 1e-4 eV some 10 meV apart, on
#: the flanks of a broad one: the coarse grid (3.5 meV apart there at 256 nodes) found the
#: broad line only, and the current at -0.276 and -0.275 V of a GaAs/AlAs stack at 400 K
#: with a 100 nm spacer was 0.25 and 2.8 times the brute force's (measured 2026-12-05).
#: The same count as the well-charge search's dense grid
#: (``electrostatics.WELL_SEARCH_DENSE_NODES``: 1024 missed a line 8e-7 eV wide there).
HUMP_SEARCH_NODES = 4096
#: ... and the search's top lies this many kT above the hump's top
HUMP_SEARCH_KT = 2.0


class GridAccuracyWarning(UserWarning):
    """The energy grid's own error estimate stays above its tolerance after refinement."""


@dataclass(frozen=True)
class EnergyGrid:
    """Settings of the adaptive energy grid."""

    #: points over the window (quadratic map, dense at its lower edge), plus the
    #: EDGE_NODES_U: 64 in all, a whole number of the compiled kernel's 8-item chunks
    n_coarse: int = 59
    n_resonances: int = 6  #: at most this many resolved per (stack, bias) (see MIN_SHARE)
    n_candidates: int = 8  #: coarse-grid peaks refined before the n_resonances are chosen
    n_per_resonance: int = 40  #: Gauss-Legendre nodes per resonance (sinh map, three panels)
    refine_iterations: int = 6  #: bracketed refinement rounds per candidate (two energies each)


def contact_fermi_levels_ev(table: LayerTable) -> tuple[np.ndarray, np.ndarray]:
    """Fermi levels above their own band edges of emitter and collector, ``(n_stacks,)`` each."""
    t = table.temperature_k
    mu_e = fermi_level_ev(table.doping_cm3[:, 0], mass_m0=table.mass_m0[:, 0], temperature_k=t)
    mu_c = fermi_level_ev(table.doping_cm3[:, -1], mass_m0=table.mass_m0[:, -1], temperature_k=t)
    return mu_e, mu_c


def resolved_current_floor_a_cm2(table: LayerTable) -> np.ndarray:
    """The current a line :data:`LINE_WIDTH_FLOOR_EV` wide carries at full transmission from
    the emitter's supply, A/cm^2, ``(n_stacks,)``: Tsu-Esaki's integral over the line,
    ``(pi/2) W`` times the supply at its Fermi level or ``kT``, whichever is larger. The energy
    grid does not resolve narrower lines (double precision in ``T``), so a maximum of the
    current below this is no figure of the device (about 1e-5 A/cm^2 for a GaAs emitter at
    1e18 cm^-3; found on GaAs/AlAs stacks with 40 ML barriers, whose currents of 1e-15 to
    1e-10 A/cm^2 dropped out at some biases and gave a PVCR of 17)."""
    mu_e, _ = contact_fermi_levels_ev(table)
    supply_ev = np.maximum(mu_e, BOLTZMANN_EV_K * table.temperature_k)
    area_ev2 = 0.5 * np.pi * LINE_WIDTH_FLOOR_EV * supply_ev
    return TSU_ESAKI_A_M2_EV2 * table.mass_m0[:, 0] * area_ev2 * 1e-4


def supply_function_ev(energy_ev, *, mu_emitter_ev, mu_collector_ev, kt_ev):
    """kT ln[(1 + exp((mu_E - E)/kT)) / (1 + exp((mu_C - E)/kT))], eV, overflow-safe.

    Of the sign of ``mu_E - mu_C`` at every energy, also where rounding of the two
    logarithms would flip it (so no current flows against the bias).

    Parameters
    ----------
    energy_ev
        Longitudinal energies ``E``, eV from the emitter band edge.
    mu_emitter_ev, mu_collector_ev
        Fermi levels ``mu_E`` and ``mu_C`` on the same scale, eV, broadcasting with
        ``energy_ev``.
    kt_ev
        Thermal energy ``kT``, eV.
    """
    x = (mu_emitter_ev - energy_ev) / kt_ev
    drop = mu_emitter_ev - mu_collector_ev
    s = kt_ev * (fermi_dirac_zero(x) - fermi_dirac_zero(x - drop / kt_ev))
    return np.where(drop >= 0.0, np.maximum(s, 0.0), np.minimum(s, 0.0))


def energy_window_ev(
    profile: Profile, *, mu_emitter_ev, bias_v, kt_ev
) -> tuple[np.ndarray, np.ndarray]:
    """Integration window ``(low, high)``, batch-shaped, eV from the emitter edge.

    Parameters
    ----------
    profile
        Band profiles, batch shape ``profile.batch_shape``.
    mu_emitter_ev
        Emitter Fermi level above its band edge, eV, batch-shaped.
    bias_v
        Bias of each profile, V, batch-shaped.
    kt_ev
        Thermal energy ``kT``, eV, broadcasting with the batch.
    """
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


def _distinct(center, width, valid, share):
    """``valid`` without repeats: of two candidates refined onto one line (centres closer
    than the narrower's width), the one of lower ``share`` is dropped."""
    gap = np.abs(center[..., :, None] - center[..., None, :])
    same = gap < np.minimum(width[..., :, None], width[..., None, :])
    n = center.shape[-1]
    # j repeats i when both are valid, they coincide and i ranks first (share, then slot)
    first = (share[..., :, None] > share[..., None, :]) | (
        (share[..., :, None] == share[..., None, :]) & (np.arange(n)[:, None] < np.arange(n))
    )
    repeat = np.any(same & first & valid[..., :, None] & valid[..., None, :], axis=-2)
    return valid & ~repeat


def _line_intervals(center, half_span, width, others, others_valid, low, high):
    """Integration interval of each resolved line, ``batch + (n_res,)`` each.

    ``half_span`` either side, inside the window, and cut halfway to the nearest
    other line found (``others``, ``batch + (n_cand,)``, resolved or not): an
    interval that reached into another line would integrate it on this line's
    nodes, far too sparse there.
    """
    d = others[..., None, :] - center[..., :, None]  # (..., n_res, n_cand)
    apart = others_valid[..., None, :] & (d != 0.0)  # every other line, however close
    below = np.max(np.where(apart & (d < 0), d, -np.inf), axis=-1)
    above = np.min(np.where(apart & (d > 0), d, np.inf), axis=-1)
    a = np.maximum(center - np.minimum(half_span, -0.5 * below), low[..., None])
    b = np.minimum(center + np.minimum(half_span, 0.5 * above), high[..., None])
    return a, np.maximum(a, b)


def _coarse_reach(depth, span, n_coarse: int):
    """Distance ``D`` from a line at ``depth`` above the window's edge to where the coarse
    spacing is ``D / 4``: beyond it, the coarse rule integrates the line's tails.

    On ``E = low + span u^2`` with ``du = 1 / (n_coarse - 1)`` the spacing at ``E`` is
    ``2 sqrt(span (E - low)) du``; ``D = 4 h(E_r + D)`` is ``D^2 = c^2 (depth + D)`` with
    ``c = 8 sqrt(span) du``. The spacing at the line itself is no measure: it grows
    away from the edge (measured: a line 0.2 meV above it, 0.8 % of the current off).
    """
    c2 = 64.0 * span / (n_coarse - 1) ** 2
    return 0.5 * (c2 + np.sqrt(c2 * c2 + 4.0 * c2 * np.maximum(depth, 0.0)))


def _line_rule(center, width, a, b, edge, n: int):
    """Nodes (ascending) and weights for ``[a, b]`` around a line, in ``v = sqrt(E - edge)``.

    T rises like ``sqrt(E - edge)`` from the window's lower edge, a singularity for a
    Gauss rule in ``E`` when a line's interval reaches it (a state within a few widths
    above a band edge: measured 5 % of a stack's largest current); ``T dE = T 2 v dv``
    is smooth in ``v``. The line maps to centre ``sqrt(E_r - edge)`` and the width that
    keeps its upper half-maximum point, ``2 (sqrt(E_r - edge + W/2) - sqrt(E_r - edge))``
    (``W / (2 sqrt(E_r - edge))`` far above the edge, where the map is locally linear).
    """
    depth = np.maximum(center - edge, 0.0)
    v_center = np.sqrt(depth)
    v_width = width / (np.sqrt(depth + 0.5 * width) + v_center)  # no cancellation
    v_a = np.sqrt(np.maximum(a - edge, 0.0))
    v_b = np.sqrt(np.maximum(b - edge, 0.0))
    v, weight = sinh_gauss_legendre(v_center, width_ev=v_width, low_ev=v_a, high_ev=v_b, n=n)
    return edge[..., None] + v**2, weight * 2.0 * v


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
        the coherent transmission through the well's states is reduced to its
        coherent part and the sequential current through them is added. ``None``
        (default) or a channel without scattering: the coherent current.

    Returns
    -------
    ndarray
        ``(n_stacks, n_biases)`` current density, A/cm^2, positive from emitter to collector.
    """
    shape = profile.batch_shape
    bias = np.broadcast_to(np.asarray(bias_v, float), shape)
    mu_e, mu_c, kt = _contacts(table, bias)
    low, high = energy_window_ev(profile, mu_emitter_ev=mu_e, bias_v=bias, kt_ev=kt)
    u, coarse = _coarse_nodes(low, high, grid.n_coarse)
    t_coarse = transmission(coarse, profile=profile)
    supply = supply_function_ev(
        coarse, mu_emitter_ev=mu_e[..., None], mu_collector_ev=mu_c[..., None], kt_ev=kt[..., None]
    )
    weights = _trapezoid_weights(coarse)  # the coarse nodes span [low, high]
    lines = None
    if grid.n_resonances > 0:
        lines = _find_lines(
            profile,
            coarse,
            u,
            t_coarse,
            supply,
            low=low,
            high=high,
            mu_e=mu_e,
            mu_c=mu_c,
            kt=kt,
            grid=grid,
            hump=injecting_hump(profile, table=table, bias_v=bias),
        )
        _leave_line_intervals(weights, coarse, lines)
    sequential, reduce = _sequential_channel(
        profile, table, lines, scattering, bias=bias, mu_e=mu_e, kt=kt, high=high
    )
    if reduce is not None:
        t_coarse = t_coarse * coherent_factor(coarse, **reduce)
    integral = np.sum(weights * t_coarse * supply, axis=-1)
    hidden = steep = doubtful = np.zeros(shape)
    if lines is not None and lines.valid.any():
        hidden, steep, doubtful = _add_resolved_lines(
            integral,
            lines,
            profile=profile,
            low=low,
            mu_e=mu_e,
            mu_c=mu_c,
            kt=kt,
            n_nodes=grid.n_per_resonance,
            reduce=reduce,
        )
    # of the sign of the bias, as T >= 0 and the supply has that sign everywhere (the
    # weights are not all >= 0 where two resolved lines' intervals overlap)
    integral = _of_sign(integral, bias)
    if broadening_ev > 0.0 and lines is not None:
        integral = _broadened(
            integral,
            lines,
            bias=bias,
            low=low,
            high=high,
            mu_e=mu_e,
            mu_c=mu_c,
            kt=kt,
            broadening_ev=broadening_ev,
        )
    if sequential is not None:
        integral = integral + sequential
    mass_e = table.mass_m0[:, 0][:, None]
    j = TSU_ESAKI_A_M2_EV2 * mass_e * integral * 1e-4
    rough = _rough(coarse, t_coarse * supply, lines, integral, low=low, high=high, grid=grid)
    # a line hidden in a resolved line's interval, against the stack's largest current
    largest = np.abs(integral).max(axis=-1, keepdims=True)
    rough |= (hidden > HIDDEN_LINE_TOLERANCE * largest) | (steep > STEEP_SHARE * largest)
    _warn_doubtful(doubtful, largest)
    if rough.any():
        j = _refined(j, rough, profile, table, bias, grid, broadening_ev, scattering)
    return j


def _warn_doubtful(doubtful, largest) -> None:
    """A :class:`GridAccuracyWarning` where lines narrower than :data:`LINE_WIDTH_FLOOR_EV`
    carry more than :data:`REFINE_TOLERANCE` of a stack's ``largest`` current."""
    if np.any(doubtful > REFINE_TOLERANCE * largest):  # no finer grid helps: said at once
        warnings.warn(
            GridAccuracyWarning(
                f"the energy grid cannot integrate lines narrower than {LINE_WIDTH_FLOOR_EV:.0e}"
                " eV reliably (T in double precision); such lines carry more than "
                f"{REFINE_TOLERANCE:.1%} of the current at some biases, which may be less accurate"
            ),
            stacklevel=3,
        )


def _contacts(table: LayerTable, bias: np.ndarray):
    """``mu_E``, ``mu_C`` and ``kT``, eV, shaped like ``bias`` (``(n_stacks, n_biases)``)."""
    kt = (BOLTZMANN_EV_K * table.temperature_k)[:, None] * np.ones(bias.shape)
    mu_e = (contact_fermi_levels_ev(table)[0])[:, None] * np.ones(bias.shape)
    return mu_e, mu_e - bias, kt


def _coarse_nodes(low, high, n_coarse: int):
    """The coarse grid's map ``u`` and its nodes over ``[low, high]``, ``batch + (n,)``.

    Quadratic, ``E = low + (high - low) u^2``: dense at the window's lower edge, where T
    rises like ``sqrt(E - low)``; plus the :data:`EDGE_NODES_U` below the first node.
    """
    u = np.linspace(0.0, 1.0, n_coarse)
    u = np.concatenate([u[:1], u[1] * EDGE_NODES_U, u[1:]])
    return u, low[..., None] + (high - low)[..., None] * u**2


def _sequential_channel(profile, table, lines, scattering, *, bias, mu_e, kt, high):
    """The scattering-assisted channel's current integral and the states that reduce the
    coherent T (:func:`scattering.sequential_integral_ev2`), or ``(None, None)``."""
    if scattering is None or not scattering.active or lines is None:
        return None, None
    sequential, _, reduce = sequential_integral_ev2(
        profile,
        table=table,
        bias_v=bias,
        mu_emitter_ev=mu_e,
        kt_ev=kt,
        high_ev=high,
        lines=lines.found,
        params=scattering,
        hump_action=lines.hump_action,
    )
    return sequential, reduce


def _of_sign(integral, bias):
    """``integral`` where it has the sign of ``bias``, else zero."""
    sign = np.sign(bias)
    return sign * np.maximum(sign * integral, 0.0)


def _broadened(integral, lines: _Lines, *, bias, low, high, mu_e, mu_c, kt, broadening_ev):
    """``integral`` with every line found replaced by its broadened form
    (:func:`broadening.broadened_lines`), never against the bias."""
    removed, added = broadened_lines(
        **lines.found,
        low_ev=low,
        high_ev=high,
        supply=_supply_of(mu_e[..., None, None], mu_c[..., None, None], kt[..., None, None]),
        broadening_ev=broadening_ev,
        kt_ev=kt,
    )
    # where the Lorentzian model of a line overstates T (a line cut by a band edge,
    # an asymmetric one) the lines removed can outweigh the coherent current and the
    # lines added: the current is then zero, never against the bias
    return _of_sign(integral - removed + added, bias)


@dataclass(frozen=True)
class _Lines:
    """Lines of T found on the coarse grid of each (stack, bias)."""

    found: dict  #: every line found (center_ev, width_ev, peak, valid): broadened, reservoirs
    center: np.ndarray  #: the lines resolved by their own rule, ``batch + (n_resonances,)``
    width: np.ndarray
    valid: np.ndarray  #: which slots hold a resolved line
    a: np.ndarray  #: each resolved line's integration interval [a, b]
    b: np.ndarray
    #: more lines the coarse rule cannot integrate than the grid resolves, batch-shaped
    crowded: np.ndarray
    #: the WKB action of the injecting side's hump (``scattering.injecting_hump``), batch-shaped
    hump_action: np.ndarray | None = None


def _find_lines(
    profile, coarse, u, t_coarse, supply, *, low, high, mu_e, mu_c, kt, grid, hump=None
) -> _Lines:
    """The lines of ``T`` on the coarse grid, and those to be resolved with their intervals.

    ``coarse`` (nodes), ``t_coarse`` and ``supply`` are ``batch + (n,)`` on the map ``u``
    of :func:`current_density_a_cm2`; the other arrays are batch-shaped. ``hump``: which
    hump's action and top (``scattering.injecting_hump``; the dense search of
    :func:`_hump_candidates` where the action exceeds ``scattering.HUMP_ACTION``), or ``None``.
    """
    # refine every candidate peak, then keep those carrying most current: a resonance of
    # 1 ueV width looks tiny on the coarse grid, its weight (pi/2) T_p Gamma S(E_r) does not
    n_cand = max(grid.n_candidates, grid.n_resonances)
    # the maxima of T S, not of T: a wide well has more lines than candidates, and
    # those above the barriers (T ~ 1, no supply) would crowd out those that carry
    # the current (measured: a 14 nm InSb well lost its main line, -12 %)
    index, valid = local_peaks(t_coarse, n_cand, weight=np.abs(supply))
    # the peak heights only rank the candidates (and scale the broadening): the
    # parabola's value is good enough, no extra evaluation
    center, width, peak = refine_grid_peaks(
        coarse,
        t=t_coarse,
        index=index,
        valid=valid,
        profile=profile,
        iterations=grid.refine_iterations,
        exact_peak=False,
    )
    # at least the regular grid's spacing at its first node (the edge nodes' spacing is
    # no scale for a line's integration interval: its tails beyond are left to the
    # coarse nodes' linear interpolant)
    first_node = (high - low)[..., None] * u[EDGE_NODES_U.size + 1] ** 2
    cell = np.diff(coarse, axis=-1)
    wider = np.maximum(
        np.concatenate([cell[..., :1], cell], -1), np.concatenate([cell, cell[..., -1:]], -1)
    )
    spacing_all = np.maximum(wider, 2.0 * first_node)  # the wider cell beside each node
    spacing = np.take_along_axis(spacing_all, index, axis=-1)
    window, candidates = (low, high, mu_e, mu_c, kt), (center, width, peak, valid, spacing)
    candidates, limit = _hump_candidates(
        profile, hump, candidates, coarse, spacing_all, window, grid
    )
    center, width, peak, valid, spacing = candidates
    valid &= (
        np.isfinite(width) & (width > 0) & (center > low[..., None]) & (center < high[..., None])
    )
    supply_r = np.abs(
        supply_function_ev(
            center,
            mu_emitter_ev=mu_e[..., None],
            mu_collector_ev=mu_c[..., None],
            kt_ev=kt[..., None],
        )
    )
    share = np.where(valid, np.nan_to_num(peak * width * supply_r), -1.0)
    valid = _distinct(center, width, valid, share)
    share = np.where(valid, share, -1.0)
    # every line found, resolved or not, is broadened
    lines: dict = {"center_ev": center, "width_ev": width, "peak": peak, "valid": valid}
    others, others_valid = center, valid
    # what the coarse rule could get wrong on a line it does not resolve: up to T_p S
    # over a cell, far more than the line's own share T_p Gamma S when it is narrow
    stake = np.where(valid, np.nan_to_num(peak * np.maximum(width, spacing) * supply_r), -1.0)
    keep = np.argsort(-stake, axis=-1)[..., : grid.n_resonances]
    narrow = np.sum(np.where(width < kt[..., None], np.maximum(share, 0.0), 0.0), axis=-1)
    # a line is resolved where the coarse nodes cannot integrate it (narrower than
    # RESOLVE_SPACINGS of their spacing) and their error on it could reach MIN_SHARE
    # of the current of the lines narrower than kT (a broad feature's T_p Gamma is no
    # measure of the current)
    wanted = (width < RESOLVE_SPACINGS * spacing) & (stake >= MIN_SHARE * narrow[..., None])
    # more such lines than slots (or every candidate one of them: there may be more
    # maxima than candidates) leaves lines to the coarse rule, whose own estimate does
    # not see a line between its nodes (measured: an InSb well with ten lines in a
    # 1.1 eV supply window, 12 % off, no estimate above the tolerance)
    n_wanted = np.sum(wanted & valid, axis=-1)
    crowded = (n_wanted > grid.n_resonances) | (n_wanted >= limit)
    center, width, valid, wanted = (
        np.take_along_axis(x, keep, axis=-1) for x in (center, width, valid, wanted)
    )
    valid &= wanted
    center = np.where(valid, center, high[..., None])
    width = np.where(valid, np.maximum(width, 1e-15), 1.0)  # widths of 2e-14 eV measured
    half_span = np.maximum(
        _coarse_reach(center - low[..., None], (high - low)[..., None], grid.n_coarse),
        LINE_SPAN_WIDTHS * width,
    )
    a, b = _line_intervals(center, half_span, width, others, others_valid, low, high)
    action = None if hump is None else hump[0]
    return _Lines(lines, center, width, valid, a, b, crowded, hump_action=action)


def _hump_candidates(profile, hump, candidates, coarse, spacing, window, grid):
    """The coarse grid's candidate lines ``candidates`` (centre, width, peak, ``valid`` and
    the coarse spacing at each, ``batch + (n_cand,)``) and after them those of a dense search
    behind a hump (``hump``: the hump's action and top, eV, batch-shaped): the
    ``n_cand`` highest maxima of ``T S`` on :data:`HUMP_SEARCH_NODES` uniform nodes from the
    window's lower edge to :data:`HUMP_SEARCH_KT` kT above the top (inside the window),
    refined as the coarse grid's are, each with the ``spacing`` of the coarse node above it
    (no slot valid elsewhere). ``window``: ``(low, high, mu_e, mu_c, kt)``, batch-shaped.
    Returns the candidates and how many slots count as all of them (``crowded``); only the
    coarse grid's where no entry lies behind a hump (action above ``scattering.HUMP_ACTION``)
    or ``hump`` is ``None``."""
    n_cand = candidates[0].shape[-1]
    if hump is None or not (hump[0] > HUMP_ACTION).any():
        return candidates, n_cand
    low, high, mu_e, mu_c, kt = window
    behind, top = hump[0] > HUMP_ACTION, hump[1]
    rows = np.nonzero(behind)
    shape = behind.shape + (n_cand,)
    center, width, peak = np.zeros(shape), np.full(shape, np.nan), np.full(shape, np.nan)
    valid = np.zeros(shape, bool)
    lo = low[rows]
    hi = np.clip(top[rows] + HUMP_SEARCH_KT * kt[rows], lo + 1e-6, high[rows])
    energy = lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, HUMP_SEARCH_NODES)
    t = transmission_rows(energy, profile=profile, rows=rows)
    contacts = (mu_e[rows][:, None], mu_c[rows][:, None], kt[rows][:, None])
    index, ok = local_peaks(t, n_cand, weight=np.abs(_supply_of(*contacts)(energy)))
    center[rows] = np.take_along_axis(energy, index, axis=-1)
    where = np.nonzero(ok)
    if where[0].size:
        around = index[where][:, None] + np.array([-1, 0, 1])
        c, w, p = refine_bracketed(
            energy[where[0][:, None], around],
            t[where[0][:, None], around],
            profile=profile,
            rows=tuple(r[where[0]] for r in rows),
            iterations=grid.refine_iterations,
            exact_peak=False,
        )
        sub_c, sub_w, sub_p = center[rows], width[rows], peak[rows]
        sub_c[where], sub_w[where], sub_p[where] = c, w, p
        center[rows], width[rows], peak[rows] = sub_c, sub_w, sub_p
    valid[rows] = ok
    above = np.sum(coarse[..., None, :] < center[..., :, None], axis=-1)
    above = np.take_along_axis(spacing, np.minimum(above, coarse.shape[-1] - 1), axis=-1)
    merged = tuple(
        np.concatenate([x, y], axis=-1)
        for x, y in zip(candidates, (center, width, peak, valid, above), strict=True)
    )
    return merged, np.where(behind, 2 * n_cand, n_cand)


def _supply_of(mu_e, mu_c, kt):
    """The supply function of these contacts as a function of energy alone."""
    return lambda e: supply_function_ev(e, mu_emitter_ev=mu_e, mu_collector_ev=mu_c, kt_ev=kt)


def _leave_line_intervals(weights, coarse, lines: _Lines) -> None:
    """Take each resolved line's interval out of the coarse rule's ``weights`` (in place)."""
    for r in range(lines.a.shape[-1]):
        m = lines.valid[..., r]
        if m.any():
            weights[m] -= _linear_weights(coarse[m], lines.a[..., r][m], lines.b[..., r][m])


def _rough(coarse, f, lines: _Lines | None, integral, *, low, high, grid) -> np.ndarray:
    """The (stack, bias) whose coarse grid must be refined: the error estimate of the rule
    on ``f = T S`` beyond :data:`REFINE_TOLERANCE` of the stack's largest current, a
    window too wide for the coarse spacing, or more lines to resolve than slots."""
    if lines is not None:
        estimate = _cell_errors(coarse, f, lines.a, lines.b, lines.valid).sum(axis=-1)
    else:
        estimate = _cell_errors(coarse, f, None, None, None).sum(axis=-1)
    # against each stack's largest current in the batch: the accuracy asked of an I-V
    rough = estimate > REFINE_TOLERANCE * np.abs(integral).max(axis=-1, keepdims=True)
    # lines closer than the coarse spacing show as one maximum: in a wide window (a high
    # Fermi level, a hot contact, a large bias) the grid is refined whatever the estimate
    # (measured: InSb at 7e18 cm^-3 and -1.2 V, a 2.1 eV window, a line missed, -7 %)
    rough |= (high - low) / (grid.n_coarse - 1) > MAX_MEAN_SPACING_EV
    if lines is not None:
        rough |= lines.crowded
    return rough


def _add_resolved_lines(
    integral, lines: _Lines, *, profile, low, mu_e, mu_c, kt, n_nodes, reduce
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Add to ``integral`` (batch-shaped, in place) each resolved line's integral on its own
    rule; ``reduce``: the scattering channel's states (:func:`coherent_factor`), or ``None``.

    Returns what the rules may get wrong (batch-shaped): the stake of the lines they saw
    in their intervals besides their own (:func:`_second_maxima`), lines the coarse grid
    did not separate (a finer coarse grid may separate them); the part of the lines'
    integrals on nodes where ``T S`` is steep (:func:`_steep_share`; more nodes help); and
    the integral of the lines narrower than :data:`LINE_WIDTH_FLOOR_EV` (no grid integrates
    them reliably)."""
    # the resolved lines only (unused slots cost nothing), one row per line
    where = np.nonzero(lines.valid)
    rows = where[:-1]
    nodes, node_weights = _line_rule(
        lines.center[where], lines.width[where], lines.a[where], lines.b[where], low[rows], n_nodes
    )
    t_full = transmission_rows(nodes, profile=profile, rows=rows)
    t_lines = t_full
    if reduce is not None:
        t_lines = t_full * coherent_factor(nodes, **{k: v[rows] for k, v in reduce.items()})
    s_lines = supply_function_ev(
        nodes,
        mu_emitter_ev=mu_e[rows][:, None],
        mu_collector_ev=mu_c[rows][:, None],
        kt_ev=kt[rows][:, None],
    )
    per_line = np.sum(node_weights * t_lines * s_lines, axis=-1)
    np.add.at(integral, rows, per_line)
    hidden = np.zeros(integral.shape)
    # on the whole T: the scattering channel's reduction dips at a line's centre, no line
    np.add.at(hidden, rows, _second_maxima(nodes, t_full, t_full * np.abs(s_lines)))
    steep = np.zeros(integral.shape)
    np.add.at(steep, rows, _steep_share(nodes, node_weights, t_lines * s_lines))
    doubtful = np.zeros(integral.shape)
    too_narrow = lines.width[where] < LINE_WIDTH_FLOOR_EV
    np.add.at(doubtful, rows, np.where(too_narrow, np.abs(per_line), 0.0))
    return hidden, steep, doubtful


def _steep_share(nodes, weights, f) -> np.ndarray:
    """The part of a line's integral on nodes where ``T S`` changes by more than
    :data:`STEEP_RATIO` to a neighbour, ``(rows,)``."""
    g = np.abs(f)  # on the rule's nodes, ascending (_line_rule)
    tiny = 1e-300
    up = np.maximum(g[..., 1:], tiny) / np.maximum(g[..., :-1], tiny)
    jump = (up > STEEP_RATIO) | (up < 1.0 / STEEP_RATIO)
    steep = np.zeros(g.shape, bool)
    steep[..., 1:] |= jump
    steep[..., :-1] |= jump
    return np.sum(np.where(steep, weights * g, 0.0), axis=-1)


def _second_maxima(nodes, t, f) -> np.ndarray:
    """Stake of the maxima of ``T`` on a line's rule other than its largest, ``(rows,)``
    (``nodes``, ``t`` and ``f = T |S|`` are ``(rows, n)``): each such maximum's rise of
    ``f`` above its surroundings (the higher of the lowest ``f`` between it and the maximum
    or end of the rule on either side) times its nodes' spacing, what the rule may get wrong
    on a line there (as for the coarse rule). Maxima of ``T``, not of ``f``: the supply's
    fall on T's rise from a band edge makes a shoulder of ``f`` that is no line (measured: 8
    of 48 as-grown InP stacks flagged at every grid, none off). The rise, not ``f`` itself:
    a flat shoulder of ``T`` between two overlapping lines, with a maximum 1e-5 above its
    surroundings, had a stake of 3.8 % of the stack's largest current and was refined to
    the largest grid, still flagged (an as-grown InP stack at 0.4653 V, measured
    2026-12-05); a narrow line on a broad one's tail rises by nearly its whole ``f``.

    A line the coarse grid did not separate from the resolved one (closer than its
    spacing) lies inside the interval, on the tail nodes of the other's rule, far too
    sparse there (measured: two InSb lines 21 meV apart at 1.5 eV, 9 % of the current,
    no estimate above the tolerance).
    """
    # the rule's nodes ascend (_line_rule); strict maxima: the nodes clipped to an
    # interval's end repeat, a plateau is no line
    rows, n = t.shape
    peak = np.zeros(t.shape, bool)
    peak[:, 1:-1] = (t[:, 1:-1] > t[:, :-2]) & (t[:, 1:-1] > t[:, 2:])
    # the lowest f between neighbouring maxima: segments starting at each row's start and
    # at each maximum, over the flattened rows
    starts = np.flatnonzero(peak.ravel() | (np.arange(rows * n) % n == 0))
    lowest = np.minimum.reduceat(f.ravel(), starts)
    at = np.searchsorted(starts, np.flatnonzero(peak.ravel()))
    rise = np.zeros(t.shape)
    # a maximum's left segment (from the row's start or the maximum before) and its own
    rise.ravel()[starts[at]] = np.maximum(
        f.ravel()[starts[at]] - np.maximum(lowest[at - 1], lowest[at]), 0.0
    )
    spacing = np.zeros(t.shape)
    spacing[:, 1:-1] = 0.5 * (nodes[:, 2:] - nodes[:, :-2])
    stake = np.where(peak, rise * spacing, 0.0)
    # all but the largest maximum (the line itself)
    main = np.argmax(np.where(peak, f, -1.0), axis=-1)[:, None]
    return stake.sum(axis=-1) - np.take_along_axis(stake, main, axis=-1)[:, 0]


def _refined(j, rough, profile, table, bias, grid, broadening_ev, scattering):
    """``j`` with the stacks of the ``rough`` biases done again on a coarse grid of twice
    the nodes, with twice the resolved lines and candidates, whole sweeps (one grid per
    I-V), up to ``MAX_COARSE`` nodes; a :class:`GridAccuracyWarning` where the estimate
    is still too large there, or lines are still left to the coarse rule."""
    n_edge = EDGE_NODES_U.size
    if grid.n_coarse + n_edge >= MAX_COARSE:
        warnings.warn(
            GridAccuracyWarning(
                "the energy grid's error estimate stays above "
                f"{REFINE_TOLERANCE:.1%} of the current at some biases after refinement "
                f"to {MAX_COARSE} coarse nodes, or more lines than it resolves "
                f"({grid.n_resonances}); those currents may be less accurate"
            ),
            stacklevel=3,
        )
        return j
    stacks = np.nonzero(rough.any(axis=-1))[0]
    j = j.copy()
    j[stacks] = current_density_a_cm2(
        profile.take((stacks,)),
        table=table.take(stacks),
        bias_v=bias[stacks],
        grid=replace(
            grid,
            n_coarse=2 * (grid.n_coarse + n_edge) - n_edge,
            n_resonances=2 * grid.n_resonances,
            n_per_resonance=2 * grid.n_per_resonance,
            n_candidates=2 * grid.n_candidates,
        ),
        broadening_ev=broadening_ev,
        scattering=scattering,
    )
    return j


def _cell_errors(coarse, f, a, b, valid):
    """Estimated error of the coarse rule per cell, ``batch + (n - 1,)``: ``h^3 |f''| / 12``
    (second divided differences at the cell's nodes), times the part of the cell the
    coarse rule integrates (outside the resolved lines' intervals ``[a, b]``)."""
    h = np.diff(coarse, axis=-1)
    slope = np.diff(f, axis=-1) / np.maximum(h, 1e-300)
    d2 = np.zeros(f.shape)
    d2[..., 1:-1] = np.abs(np.diff(slope, axis=-1)) / np.maximum(h[..., :-1] + h[..., 1:], 1e-300)
    error = h**3 / 6.0 * np.maximum(d2[..., :-1], d2[..., 1:])  # f'' = 2 d2
    if a is not None:
        e0, e1 = coarse[..., :-1], coarse[..., 1:]
        covered = np.zeros(h.shape)
        # the slots in order (a slot holding no line anywhere adds nothing)
        for r in np.nonzero(valid.reshape(-1, valid.shape[-1]).any(axis=0))[0]:
            lo = np.minimum(np.maximum(a[..., r, None], e0), e1)
            hi = np.minimum(np.maximum(b[..., r, None], e0), e1)
            covered += np.where(valid[..., r, None], hi - lo, 0.0)
        error = error * np.clip(1.0 - covered / np.maximum(h, 1e-300), 0.0, 1.0)
    return error
