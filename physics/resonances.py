"""Quasi-bound states: resonance energies, widths and lifetimes from T(E).

Near an isolated resonance T(E) is a Lorentzian [1]_,
``T = T_p (G/2)^2 / ((E - E_r)^2 + (G/2)^2)``, so ``1/T`` is a parabola in
``E`` whose vertex is ``E_r`` and whose curvature gives the width ``G``.
Peaks are found as local maxima on a coarse grid and refined by fitting
that parabola through three points that close in on the vertex, which
converges to widths far below the coarse spacing (tested to 1 ueV) in a
handful of batched kernel calls. The lifetime is ``hbar / G``.

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
from .transmission import transmission, transmission_rows

__all__ = ["Resonances", "find_resonances", "refine_peaks", "local_peaks"]

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


def local_peaks(
    values: np.ndarray, n_max: int, *, weight: np.ndarray | None = None
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

    Returns ``(index, valid)``, both of shape ``batch + (n_max,)``; missing
    peaks are padded with index 1 and ``valid = False``.
    """
    v = values
    inner = (v[..., 1:-1] > v[..., :-2]) & (v[..., 1:-1] >= v[..., 2:])
    rank = v if weight is None else v * weight
    score = np.where(inner, rank[..., 1:-1], -np.inf)
    order = np.argsort(-score, axis=-1)[..., :n_max]
    valid = np.take_along_axis(score, order, axis=-1) > -np.inf
    index = np.where(valid, order + 1, 1)
    if index.shape[-1] < n_max:  # fewer grid points than n_max
        pad = n_max - index.shape[-1]
        index = np.concatenate([index, np.ones(index.shape[:-1] + (pad,), int)], axis=-1)
        valid = np.concatenate([valid, np.zeros(valid.shape[:-1] + (pad,), bool)], axis=-1)
    return index, valid


def refine_peaks(
    guess_ev: np.ndarray,
    step_ev: np.ndarray,
    *,
    profile: Profile,
    iterations: int = 4,
    valid: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Refine transmission peaks by parabola fits of 1/T, batched.

    Parameters
    ----------
    guess_ev
        ``batch + (n,)`` starting energies (coarse-grid maxima).
    step_ev
        Initial half-spacing of the three fit points, broadcastable to ``guess_ev``.
    profile
        Profiles with batch shape broadcastable to ``batch``.
    iterations
        Kernel calls; each evaluates three energies per peak.
    valid
        Optional mask shaped like ``guess_ev`` (batch = ``profile.batch_shape``): only
        these peaks are refined (padding slots cost nothing); the others are
        returned with NaN width and peak.

    Returns
    -------
    energy_ev, width_ev, peak_transmission
        Arrays shaped like ``guess_ev``. Where a fit fails (no curvature) the
        width is NaN.
    """
    if valid is None:

        def t_of(e: np.ndarray) -> np.ndarray:  # batch + (n, 3)
            return transmission(e.reshape(e.shape[:-2] + (-1,)), profile=profile).reshape(e.shape)

        return _refine(guess_ev, step_ev, t_of, iterations)
    # refine the real peaks only, as one flat list, each on its own profile
    where = np.nonzero(valid)  # batch indices of each peak, then its slot
    step = np.broadcast_to(np.asarray(step_ev, float), valid.shape)
    picked = _refine(
        np.asarray(guess_ev, float)[where],
        step[where],
        lambda e: transmission_rows(e, profile=profile, rows=where[:-1]),
        iterations,
    )
    out = (np.array(guess_ev, float), np.full(valid.shape, np.nan), np.full(valid.shape, np.nan))
    for full, part in zip(out, picked):
        full[where] = part
    return out


def _refine(guess_ev, step_ev, t_of, iterations: int):
    """The parabola iteration of :func:`refine_peaks`; ``t_of(e)`` gives T at ``e = peaks + (3,)``."""
    center = np.array(guess_ev, float)
    step = np.broadcast_to(np.asarray(step_ev, float), center.shape).copy()
    width = np.full(center.shape, np.nan)
    peak = np.full(center.shape, np.nan)
    offsets = np.array([-1.0, 0.0, 1.0])
    for _ in range(iterations):
        e = center[..., None] + step[..., None] * offsets  # peaks + (3,)
        t = t_of(e)
        y = 1.0 / np.maximum(t, 1e-150)  # keeps slope**2 finite
        # parabola through (-h, y0), (0, y1), (h, y2) in units of h
        curv = 0.5 * (y[..., 0] + y[..., 2]) - y[..., 1]
        slope = 0.5 * (y[..., 2] - y[..., 0])
        good = curv > 0
        shift = np.where(good, -slope / (2.0 * np.where(good, curv, 1.0)), 0.0)
        shift = np.clip(shift, -2.0, 2.0)  # stay near the points that were fitted
        y_min = y[..., 1] - 0.25 * slope**2 / np.where(good, curv, 1.0)
        half_width = np.where(
            good & (y_min > 0), step * np.sqrt(np.abs(y_min / np.where(good, curv, 1.0))), np.nan
        )
        center = center + shift * step
        width = 2.0 * half_width
        peak = np.where(good & (y_min > 0), 1.0 / y_min, t[..., 1])
        # close in: next points about one width apart, at most 20x tighter per step
        target = np.where(np.isfinite(half_width), half_width, 0.25 * step)
        step = np.clip(target, step / 20.0, step / 1.5)
    return center, width, np.clip(peak, 0.0, 1.0)


def find_resonances(
    profile: Profile,
    *,
    energy_min_ev: float | np.ndarray,
    energy_max_ev: float | np.ndarray,
    n_coarse: int = 200,
    n_max: int = 4,
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
    """
    lo = np.broadcast_to(np.asarray(energy_min_ev, float), profile.batch_shape)
    hi = np.broadcast_to(np.asarray(energy_max_ev, float), profile.batch_shape)
    grid = lo[..., None] + (hi - lo)[..., None] * np.linspace(0.0, 1.0, n_coarse)
    t = transmission(grid, profile=profile)
    index, valid = local_peaks(t, n_max)
    guess = np.take_along_axis(grid, index, axis=-1)
    spacing = (hi - lo)[..., None] / (n_coarse - 1)
    energy, width, peak = refine_peaks(guess, 0.5 * spacing, profile=profile)
    valid = valid & np.isfinite(width) & (width > 0)
    nan = np.nan
    return Resonances(
        energy_ev=np.where(valid, energy, nan),
        width_ev=np.where(valid, width, nan),
        peak_transmission=np.where(valid, peak, nan),
        valid=valid,
    )
