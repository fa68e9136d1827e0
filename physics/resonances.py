"""Quasi-bound states: resonance energies, widths and lifetimes from T(E).

Near an isolated resonance T(E) is a Lorentzian [1]_,
``T = T_p (G/2)^2 / ((E - E_r)^2 + (G/2)^2)``, so ``1/T`` is a parabola in
``E`` whose vertex is ``E_r`` and whose curvature gives the width ``G``.
Peaks are found as local maxima on a coarse grid; each maximum and its two
neighbours bracket a peak, and :func:`refine_bracketed` shrinks that
bracket by sampling the parabola's vertex +- the half width it implies and
keeping the best sample with its neighbours, so the peak cannot be lost;
this converges to widths far below the coarse spacing (tested to 1 ueV,
whichever coarse grid) in six batched rounds of two evaluations. The
lifetime is ``hbar / G``.

References
----------
.. [1] B. Ricco and M. Ya. Azbel, Phys. Rev. B 29, 1970 (1984) (Breit-Wigner
   form of double-barrier transmission).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .bands import Profile
from .constants import ELEMENTARY_CHARGE_C, HBAR_J_S
from .transmission import (
    compiled_bracket_rounds,
    compiled_grid_states,
    compiled_refine_peaks,
    transmission,
    transmission_rows,
)

__all__ = [
    "Resonances",
    "find_resonances",
    "refine_bracketed",
    "refine_grid_peaks",
    "grid_maxima",
    "local_peaks",
    "parabola_through",
]

HBAR_EV_FS = HBAR_J_S / ELEMENTARY_CHARGE_C * 1e15


@dataclass(frozen=True)
class Resonances:
    """Resonances of a batch of profiles, padded to a common count.

    Arrays have shape ``batch + (n_max,)``; entries beyond a profile's own
    count have ``valid = False`` and NaN values.
    """

    energy_ev: np.ndarray
    width_ev: np.ndarray  #: full width at half maximum, Gamma
    peak_transmission: np.ndarray
    valid: np.ndarray

    @property
    def lifetime_fs(self) -> np.ndarray:
        """hbar / Gamma in femtoseconds."""
        return HBAR_EV_FS / self.width_ev


#: Rounds :func:`refine_bracketed` adds, beyond those asked, for lines whose bracket still
#: shows no fitted width (e.g. a coarse node within a width of a ueV line's peak, whose
#: neighbours lie far out in its tails): measured, such a line needs 8 rounds.
EXTRA_ROUNDS = 6
#: A bracket wider than this many probe spreads also gets a bisection probe (see
#: :func:`refine_bracketed`).
LOOSE_BRACKET = 20.0
#: A fitted line whose bracket is still wider than this many half widths gets the extra
#: rounds too: its far points carry the background, which can pull the fit off a line
#: far narrower than the bracket (measured: a 2e-14 eV line on a 1e-14 background fitted
#: 5e-11 eV off its centre after six rounds, the current 65 % low).
LOOSE_FIT = 20.0


def local_peaks(
    values: np.ndarray, n_max: int, *, weight: np.ndarray | None = None, first: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Indices of the ``n_max`` highest interior local maxima of ``values`` along the last axis.

    Parameters
    ----------
    values
        Sampled function, ``batch + (n,)``.
    n_max
        Number of peaks kept.
    weight
        Optional ranking: peaks are ordered by ``values * weight`` instead of ``values``.
    first
        Keep the first ``n_max`` maxima along the axis instead of the highest.

    Returns
    -------
    index, valid
        Both ``batch + (n_max,)``; missing peaks are padded with index 1 and
        ``valid = False``.
    """
    v = values
    inner = (v[..., 1:-1] > v[..., :-2]) & (v[..., 1:-1] >= v[..., 2:])
    rank = v if weight is None else v * weight
    if first:
        rank = -np.broadcast_to(np.arange(v.shape[-1], dtype=float), v.shape)
    score = np.where(inner, rank[..., 1:-1], -np.inf)
    order = np.argsort(-score, axis=-1)[..., :n_max]
    valid = np.take_along_axis(score, order, axis=-1) > -np.inf
    index = np.where(valid, order + 1, 1)
    if index.shape[-1] < n_max:  # fewer grid points than n_max
        pad = n_max - index.shape[-1]
        index = np.concatenate([index, np.ones(index.shape[:-1] + (pad,), int)], axis=-1)
        valid = np.concatenate([valid, np.zeros(valid.shape[:-1] + (pad,), bool)], axis=-1)
    return index, valid


def parabola_through(x: np.ndarray, y: np.ndarray):
    """Vertex offset from ``x[..., 1]``, curvature ``a`` and minimum of the parabola through
    three points ``(..., 3)`` (sorted, unevenly spaced); where ``a <= 0`` (no minimum) the
    offset is 0. The offset is kept within the outer two points. Two equal abscissae (a
    search grid whose nodes above its window repeat the window's top where the barrier's edge
    lies below it) give NaN slopes and so the offset 0, as the compiled kernel computes
    (until 2026-12-04 a divide warning here, an error under the tests, on the numpy path).

    Parameters
    ----------
    x
        Abscissae, ``(..., 3)``, sorted.
    y
        Ordinates at them, ``(..., 3)``.
    """
    d0 = x[..., 0] - x[..., 1]
    d2 = x[..., 2] - x[..., 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        s0 = (y[..., 0] - y[..., 1]) / d0  # secant slopes on each side
        s2 = (y[..., 2] - y[..., 1]) / d2
        a = (s2 - s0) / (d2 - d0)  # y = y1 + b u + a u^2, u = E - x1
    b = s0 - a * d0
    good = a > 0
    u = np.where(good, -b / (2.0 * np.where(good, a, 1.0)), 0.0)
    u = np.clip(u, d0, d2)
    return u, a, y[..., 1] + b * u + a * u**2


def _half_width(a: np.ndarray, y_min: np.ndarray) -> np.ndarray:
    """Half width ``sqrt(y_min / a)`` of the line whose 1/T parabola has curvature ``a`` and
    minimum ``y_min``; NaN where the parabola has no positive minimum."""
    fitted = (a > 0) & (y_min > 0)
    return np.where(fitted, np.sqrt(np.abs(y_min / np.where(fitted, a, 1.0))), np.nan)


def _bracket_round(x, y, profile, rows):
    """One round of :func:`refine_bracketed` on brackets ``x`` ``(n, 3)`` with ``y = 1/T``."""
    n = x.shape[0]
    u, a, y_min = parabola_through(x, y)
    left, right = x[:, 1] - x[:, 0], x[:, 2] - x[:, 1]
    vertex = x[:, 1] + u
    half = _half_width(a, y_min)
    # probes: the vertex +- half width, inside the bracket. Where the parabola dips below
    # zero the line is far narrower than the bracket: a twentieth of its smaller side
    # (the bracket keeps the best sample, so shrinking fast cannot lose the peak); a
    # quarter where the points show no curvature at all
    room = np.minimum(vertex - x[:, 0], x[:, 2] - vertex)
    h = np.where(np.isfinite(half), half, np.where(a > 0, 0.05, 0.25) * np.minimum(left, right))
    h = np.clip(h, 1e-3 * room, 0.9 * room)
    probes = [vertex - h, vertex + h]
    # safeguard: the vertex is exact for points on one Lorentzian, but a point that is not
    # (T -> 0 at a band edge) pulls it to the wrong side of the middle point; while the
    # bracket is much wider than the probes' spread, also bisect the side away from the vertex
    loose = np.nonzero(np.maximum(left, right) > LOOSE_BRACKET * h)[0]
    third = x[:, 0].copy()  # (a repeat of the left end where not needed: never the best)
    third_y = y[:, 0].copy()
    if loose.size:
        go_left = np.where(u[loose] == 0.0, left[loose] > right[loose], u[loose] > 0.0)
        mid = x[loose, 1] + np.where(go_left, -0.5 * left[loose], 0.5 * right[loose])
        third[loose] = mid
        t_mid = transmission_rows(mid[:, None], profile=profile, rows=tuple(r[loose] for r in rows))
        third_y[loose] = 1.0 / np.maximum(t_mid[:, 0], 1e-150)
    t = transmission_rows(np.stack(probes, axis=-1), profile=profile, rows=rows)
    xs = np.concatenate([x, np.stack(probes, axis=-1), third[:, None]], axis=-1)
    ys = np.concatenate([y, 1.0 / np.maximum(t, 1e-150), third_y[:, None]], axis=-1)
    order = np.arange(n)[:, None]
    sort = np.argsort(xs, axis=-1, kind="stable")
    xs, ys = xs[order, sort], ys[order, sort]
    best = np.argmin(ys[:, 1:-1], axis=-1) + 1  # the best sample is never an end point
    pick = best[:, None] + np.array([-1, 0, 1])
    return xs[order, pick], ys[order, pick]


def refine_bracketed(
    bracket_ev: np.ndarray,
    bracket_t: np.ndarray,
    *,
    profile: Profile,
    rows: tuple[np.ndarray, ...],
    iterations: int = 6,
    exact_peak: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Refine transmission peaks inside brackets, two kernel evaluations per round.

    Parameters
    ----------
    bracket_ev, bracket_t
        ``(n_peaks, 3)`` sorted energies and their T with the middle one the
        highest (a coarse-grid maximum and its neighbours: free, already computed).
    profile, rows
        Peak ``i`` is on the profile ``rows`` gives for it (one index array per
        axis of ``profile.batch_shape``, e.g. from :func:`numpy.nonzero`).
    iterations
        Rounds; each samples the vertex of the parabola of 1/T through the
        bracket +- the half width that parabola implies, then keeps the best
        sample and its two neighbours as the new bracket. Brackets whose
        parabola still has no positive minimum, or whose bracket is still wider
        than :data:`LOOSE_FIT` half widths, get up to :data:`EXTRA_ROUNDS` more.
    exact_peak
        Compute T at the final vertex (one more evaluation) instead of taking
        the parabola's minimum (off by the background's distortion, ~1e-4 relative).

    Returns
    -------
    energy_ev, width_ev, peak_transmission
        ``(n_peaks,)``: the vertex and 2 x half width of the last bracket's
        parabola of 1/T (exact for a Breit-Wigner line; NaN width where it has no
        minimum), and T computed at the vertex (or at the best sample, if higher).

    Notes
    -----
    The best sample always stays inside the bracket, so a round can never lose
    the peak it started from (a symmetric three-point stencil moved by its own
    fit can, when the coarse points sit far out in the tails of a line much
    narrower than their spacing).
    """
    x = np.array(bracket_ev, float)
    y = 1.0 / np.maximum(np.asarray(bracket_t, float), 1e-150)  # 1/T <= 1e150: parabolas finite
    if x.shape[0]:
        done = compiled_refine_peaks(
            x,
            y,
            profile=profile,
            rows=rows,
            iterations=iterations,
            extra_rounds=EXTRA_ROUNDS,
            loose_bracket=LOOSE_BRACKET,
            loose_fit=LOOSE_FIT,
            exact_peak=exact_peak,
        )
        if done is not None:  # the rounds and the end below in one compiled call
            return done
        if _compiled_rounds(x, y, profile, rows, iterations):
            return _final_vertex(x, y, profile, rows, exact_peak)
    active = np.arange(x.shape[0])
    for round_ in range(iterations + EXTRA_ROUNDS):
        if round_ >= iterations:  # extra rounds only for lines not yet fitted or bracketed
            u, a, y_min = parabola_through(x[active], y[active])
            half = _half_width(a, y_min)
            loose = (x[active, 2] - x[active, 0]) > LOOSE_FIT * half
            active = active[~np.isfinite(half) | loose]
            if active.size == 0:
                break
        x[active], y[active] = _bracket_round(
            x[active], y[active], profile, tuple(r[active] for r in rows)
        )
    return _final_vertex(x, y, profile, rows, exact_peak)


def _compiled_rounds(x, y, profile, rows, iterations) -> bool:
    """The rounds of :func:`refine_bracketed` in the compiled kernel (``x``, ``y`` updated in
    place), where it is the kernel in use; False (nothing done) otherwise.

    The same arithmetic as the loop over :func:`_bracket_round` (the readable reference,
    which the numpy backend runs; ``tests/test_kernel_backends.py`` compares the two), with
    every round's probes in one kernel call and no Python work per round.
    """
    return compiled_bracket_rounds(
        x,
        y,
        profile=profile,
        rows=rows,
        iterations=iterations,
        extra_rounds=EXTRA_ROUNDS,
        loose_bracket=LOOSE_BRACKET,
        loose_fit=LOOSE_FIT,
    )


def _final_vertex(x, y, profile, rows, exact_peak):
    """Centre, width and peak T of the refined brackets (the end of :func:`refine_bracketed`)."""
    u, a, y_min = parabola_through(x, y)
    half = _half_width(a, y_min)
    fitted = np.isfinite(half)
    center = x[:, 1] + u
    if exact_peak:  # not read off the parabola, whose minimum carries the background
        peak = transmission_rows(center[:, None], profile=profile, rows=rows)[:, 0]
    else:
        peak = np.where(fitted, 1.0 / np.where(fitted, y_min, 1.0), 0.0)
    return center, 2.0 * half, np.clip(np.maximum(peak, 1.0 / y[:, 1]), 0.0, 1.0)


_AROUND = np.array([-1, 0, 1])


def refine_grid_peaks(
    energy_ev: np.ndarray,
    *,
    t: np.ndarray,
    index: np.ndarray,
    valid: np.ndarray,
    profile: Profile,
    iterations: int = 6,
    exact_peak: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Local maxima of T on a grid (from :func:`local_peaks`), refined (:func:`refine_bracketed`).

    ``energy_ev`` and ``t`` are ``profile.batch_shape + (n,)``; ``index`` and
    ``valid`` ``batch + (n_max,)``. Returns ``energy_ev, width_ev,
    peak_transmission`` shaped like ``index``; slots without a peak are not
    computed (NaN width and peak).

    Parameters
    ----------
    energy_ev
        Grid energies, eV, ``profile.batch_shape + (n,)``, sorted.
    t
        Transmission on them, same shape.
    index, valid
        Grid index of each peak and whether the slot holds one, ``batch + (n_max,)`` (from
        :func:`local_peaks`).
    profile
        The band profiles ``t`` was computed on.
    iterations, exact_peak
        As for :func:`refine_bracketed`.
    """
    where = np.nonzero(valid)
    batch_of = where[:-1]
    center = np.take_along_axis(energy_ev, index, axis=-1)
    width = np.full(center.shape, np.nan)
    peak = np.full(center.shape, np.nan)
    if where[0].size:
        if energy_ev.shape == t.shape and energy_ev.shape[:-1] == index.shape[:-1]:
            # each maximum and its neighbours, picked directly (the same values as below)
            pick = tuple(b[:, None] for b in batch_of) + (index[where][:, None] + _AROUND,)
            e3, t3 = energy_ev[pick], t[pick]
        else:
            around = index[..., None] + _AROUND
            e3 = np.take_along_axis(energy_ev[..., None, :], around, axis=-1)[where]
            t3 = np.take_along_axis(t[..., None, :], around, axis=-1)[where]
        c, w, p = refine_bracketed(
            e3,
            t3,
            profile=profile,
            rows=batch_of,
            iterations=iterations,
            exact_peak=exact_peak,
        )
        center[where], width[where], peak[where] = c, w, p
    return center, width, peak


def grid_maxima(
    grid_ev: np.ndarray, *, profile: Profile, n_max: int, n_first: int = 0
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """T on a grid per profile, its ``n_max`` highest local maxima (then the ``n_first``
    first along the grid) and their refinement: :func:`local_peaks` and
    :func:`refine_grid_peaks`, in one compiled call where the compiled kernel is in use (the
    numpy statement here is the reference, ``tests/test_kernel_backends.py`` compares them).

    Parameters
    ----------
    grid_ev
        Energies, eV, ``profile.batch_shape + (n,)``, sorted along the last axis.
    profile
        Band profiles.
    n_max, n_first
        Slots for the highest maxima, and after them for the first ones.

    Returns
    -------
    tuple
        Centre, width, peak transmission and whether the slot holds a maximum, each
        ``profile.batch_shape + (n_max + n_first,)`` (see :func:`refine_grid_peaks`).
    """
    found = compiled_grid_states(
        grid_ev,
        profile=profile,
        n_max=n_max,
        n_first=n_first,
        iterations=6,
        extra_rounds=EXTRA_ROUNDS,
        loose_bracket=LOOSE_BRACKET,
        loose_fit=LOOSE_FIT,
        exact_peak=True,
    )
    if found is not None:
        return found
    t = transmission(grid_ev, profile=profile)
    index, valid = local_peaks(t, n_max)
    if n_first:
        first, first_ok = local_peaks(t, n_first, first=True)
        index = np.concatenate([index, first], axis=-1)
        valid = np.concatenate([valid, first_ok], axis=-1)
    energy, width, peak = refine_grid_peaks(
        grid_ev, t=t, index=index, valid=valid, profile=profile, exact_peak=True
    )
    return energy, width, peak, valid


def find_resonances(
    profile: Profile,
    *,
    energy_min_ev: float | np.ndarray,
    energy_max_ev: float | np.ndarray,
    n_coarse: int = 200,
    n_max: int = 4,
    edge_power: float = 1.0,
    n_first: int = 0,
) -> Resonances:
    """Resonances of ``profile`` between two energies (eV from the emitter edge).

    Parameters
    ----------
    profile
        Band profiles, batch shape ``batch``.
    energy_min_ev, energy_max_ev
        Search window, scalars or broadcastable to ``batch``.
    n_coarse
        Points of the coarse grid on which peaks are first located.
    n_max
        Largest number of resonances reported per profile (the highest peaks).
    n_first
        After those, slots for the first resonances along the grid (the lowest; a
        resonance among both is reported in both).
    edge_power
        Coarse nodes at ``lo + (hi - lo) u**edge_power`` for ``u`` uniform in [0, 1]:
        1 is a uniform grid; above 1 the nodes crowd towards ``energy_min_ev`` (a line
        within a few meV of a band edge, where ``T`` rises from 0 and is not
        Lorentzian, needs nodes finer than its width to be fitted).
    """
    lo = np.broadcast_to(np.asarray(energy_min_ev, float), profile.batch_shape)
    hi = np.broadcast_to(np.asarray(energy_max_ev, float), profile.batch_shape)
    u = np.linspace(0.0, 1.0, n_coarse) ** edge_power
    grid = lo[..., None] + (hi - lo)[..., None] * u
    grid = np.broadcast_to(grid, profile.batch_shape + grid.shape[-1:])
    energy, width, peak, valid = grid_maxima(grid, profile=profile, n_max=n_max, n_first=n_first)
    valid = valid & np.isfinite(width) & (width > 0)
    nan = np.nan
    return Resonances(
        energy_ev=np.where(valid, energy, nan),
        width_ev=np.where(valid, width, nan),
        peak_transmission=np.where(valid, peak, nan),
        valid=valid,
    )
