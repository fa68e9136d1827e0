"""Quantum transmitting boundary method: a finite-difference reference for T(E).

An independent check of :func:`physics.transmission.transmission`: it shares
only the :class:`~physics.bands.Profile`, not the kernel's arithmetic. The
profile is resampled onto a uniform grid and the discrete Schrodinger equation
is solved once per energy with open (transmitting) boundaries [1]_.

Notes
-----
Grid. Node ``j = 0 .. N`` sits at ``x_j = j a``, from the emitter interface
(``x = 0``) to the collector interface (``x = L``), with ``a = L / N`` and
``N = ceil(L / step_nm)``, so the two contact interfaces are always nodes and
``a <= step_nm``. Each half point ``x_{j+1/2}`` takes the band edge, mass and
nonparabolicity of the slice that contains it; a node takes the mean of the
band edges of its two half points. Where slice boundaries fall on nodes this
is the second-order treatment of a band-edge step; elsewhere a boundary is
effectively moved to the nearest node or half point (a first-order error).

Equation. With ``w_{j+1/2} = HBAR2_2M0_EV_NM2 / (a^2 m_{j+1/2}(E))`` the
symmetric position-dependent-mass (BenDaniel-Duke [2]_) discretisation is

    -w_{j+1/2} psi_{j+1} - w_{j-1/2} psi_{j-1} + (w_{j+1/2} + w_{j-1/2} + V_j - E) psi_j = 0.

Leads. In a flat lead the same equation has plane waves ``z^j`` with the
discrete dispersion ``E - V = 2 w (1 - cos k a)`` [1]_, so ``z = exp(i k a)``
with ``cos k a = 1 - (E - V) / (2 w)``. An incident wave from the emitter,
``psi_j = z_E^j + r z_E^-j`` for ``j <= 0``, and an outgoing wave
``psi_j = t z_C^(j-N)`` for ``j >= N`` close the system into one tridiagonal
solve [1]_. Probability current on a bond is ``(2 w / hbar) Im(psi_j^* psi_{j+1})``,
hence ``T = |t|^2 (w_C sin k_C a) / (w_E sin k_E a)`` and ``R = |r|^2``.
Because the leads use the discrete dispersion, the only error against the
continuum is that of the interior finite differences, O(a^2).

Mass. ``m(E) = m (1 + alpha (E - E_c))`` per slice [3]_, held at ``m / 2``
where the two-band form would fall below it: the same model choice as
documented in :mod:`physics.transmission` (a choice of physics, stated
there, so that the two codes solve the same problem).

References
----------
.. [1] C. S. Lent and D. J. Kirkner, "The quantum transmitting boundary
   method", J. Appl. Phys. 67, 6353 (1990).
.. [2] D. J. BenDaniel and C. B. Duke, Phys. Rev. 152, 683 (1966).
.. [3] E. O. Kane, J. Phys. Chem. Solids 1, 249 (1957).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_banded

from ..bands import Profile
from ..constants import HBAR2_2M0_EV_NM2

__all__ = ["UniformGrid", "uniform_grid", "qtbm_transmission"]

_MIN_MASS_FACTOR = 0.5  # model choice shared with physics.transmission (see module Notes)


@dataclass(frozen=True)
class UniformGrid:
    """A single (unbatched) profile resampled on a uniform grid over ``[0, L]``.

    Attributes
    ----------
    step_nm
        Actual grid spacing ``a = L / N`` (at most the requested step).
    x_nm
        ``(N + 1,)`` node positions, emitter interface at 0.
    half_slice
        ``(N + 2,)`` slice index of the half points ``-1/2, 1/2, ..., N + 1/2``
        (the first is in the emitter, the last in the collector).
    edge_half_ev
        ``(N + 2,)`` band edge at those half points.
    potential_ev
        ``(N + 1,)`` band edge at the nodes: mean of the two neighbouring half points.
    """

    step_nm: float
    x_nm: np.ndarray
    half_slice: np.ndarray
    edge_half_ev: np.ndarray
    potential_ev: np.ndarray

    def mass_half_m0(self, energy_ev: np.ndarray | float, profile: Profile) -> np.ndarray:
        """Energy-dependent mass at the half points, shape ``energy.shape + (N + 2,)``.

        Parameters
        ----------
        energy_ev
            Energies, eV from the emitter band edge, any shape.
        profile
            The single profile this grid was built from.
        """
        e = np.asarray(energy_ev, float)[..., None]
        s = self.half_slice
        factor = 1.0 + profile.nonparabolicity_per_ev[s] * (e - profile.edge_ev[s])  # [3]
        return profile.mass_m0[s] * np.maximum(factor, _MIN_MASS_FACTOR)


def _single(profile: Profile) -> Profile:
    """The profile with its batch axes removed; they must all have length 1."""
    if int(np.prod(profile.batch_shape, dtype=int)) != 1:
        raise ValueError(f"expected a single profile, got batch shape {profile.batch_shape}")
    n = profile.n_slices
    return Profile(
        edge_ev=np.broadcast_to(profile.edge_ev, profile.batch_shape + (n,))
        .reshape(n)
        .astype(float),
        mass_m0=np.broadcast_to(profile.mass_m0, profile.batch_shape + (n,))
        .reshape(n)
        .astype(float),
        nonparabolicity_per_ev=np.broadcast_to(
            profile.nonparabolicity_per_ev, profile.batch_shape + (n,)
        )
        .reshape(n)
        .astype(float),
        width_nm=np.broadcast_to(profile.width_nm, profile.batch_shape + (n,))
        .reshape(n)
        .astype(float),
        layer_index=np.asarray(profile.layer_index),
    )


def uniform_grid(profile: Profile, *, step_nm: float) -> UniformGrid:
    """Resample a single piecewise-constant profile onto a uniform grid.

    Parameters
    ----------
    profile
        Profile without batch axes (or with batch axes of length 1).
    step_nm
        Largest grid spacing, nm.

    Notes
    -----
    See the module Notes for the half-point rule.
    """
    if not step_nm > 0:
        raise ValueError(f"step_nm must be positive, got {step_nm!r}")
    p = _single(profile)
    if p.n_slices < 3:
        raise ValueError("a profile needs two contacts and at least one slice between them")
    bounds = np.cumsum(p.width_nm)
    length = float(bounds[-1])
    n = max(1, int(np.ceil(length / step_nm - 1e-9)))
    a = length / n if length > 0 else step_nm
    x = a * np.arange(n + 1)
    x_half = a * (np.arange(-1, n + 1) + 0.5)
    # slice i spans (bounds[i-1], bounds[i]); zero-width slices are never chosen
    half_slice = np.clip(np.searchsorted(bounds, x_half, side="right"), 1, p.n_slices - 2)
    half_slice[0], half_slice[-1] = 0, p.n_slices - 1  # the two leads
    edge_half = p.edge_ev[half_slice]
    potential = 0.5 * (edge_half[:-1] + edge_half[1:])
    return UniformGrid(
        step_nm=a, x_nm=x, half_slice=half_slice, edge_half_ev=edge_half, potential_ev=potential
    )


def _lead_factor(cos_ka: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``z = exp(i k a)`` of the outgoing (or decaying) wave and ``sin k a`` (0 if evanescent)."""
    prop = np.abs(cos_ka) <= 1.0
    c = np.where(prop, cos_ka, 1.0)
    z_prop = c + 1j * np.sqrt(1.0 - c**2)
    c_ev = np.where(prop, 2.0, cos_ka)
    z_ev = c_ev - np.sign(c_ev) * np.sqrt(c_ev**2 - 1.0)  # |z| < 1: decays away from the stack
    z = np.where(prop, z_prop, z_ev)
    return z, np.where(prop, z_prop.imag, 0.0)


def _qtbm_single(
    energy: np.ndarray, p: Profile, grid: UniformGrid
) -> tuple[np.ndarray, np.ndarray]:
    a = grid.step_nm
    w = HBAR2_2M0_EV_NM2 / (a * a * grid.mass_half_m0(energy, p))  # (nE, N+2): bonds -1/2 .. N+1/2
    v_e, v_c = p.edge_ev[0], p.edge_ev[-1]
    w_e, w_c = w[:, 0], w[:, -1]
    z_e, sin_e = _lead_factor(1.0 - (energy - v_e) / (2.0 * w_e))  # [1], discrete lead dispersion
    z_c, sin_c = _lead_factor(1.0 - (energy - v_c) / (2.0 * w_c))
    n_nodes = grid.x_nm.size
    trans = np.zeros(energy.shape)
    refl = np.zeros(energy.shape)
    ab = np.zeros((3, n_nodes), complex)
    for i, e in enumerate(energy):
        if sin_e[i] <= 0.0:
            continue  # no propagating state in the emitter: T = R = 0
        wl, wr = w[i, :-1], w[i, 1:]  # bond left and right of each node
        diag = (wl + wr + grid.potential_ev - e).astype(complex)
        diag[0] -= wl[0] * z_e[i]  # psi_-1 = z psi_0 + (1/z - z)
        diag[-1] -= wr[-1] * z_c[i]  # psi_N+1 = z_C psi_N
        ab[0, 1:] = -wr[:-1]
        ab[1] = diag
        ab[2, :-1] = -wl[1:]
        rhs = np.zeros(n_nodes, complex)
        rhs[0] = wl[0] * (1.0 / z_e[i] - z_e[i])
        psi = solve_banded((1, 1), ab, rhs, overwrite_ab=False, check_finite=False)
        trans[i] = abs(psi[-1]) ** 2 * (w_c[i] * sin_c[i]) / (w_e[i] * sin_e[i])
        refl[i] = abs(psi[0] - 1.0) ** 2
    return trans, refl


def qtbm_transmission(
    energy_ev: np.ndarray, *, profile: Profile, step_nm: float = 0.05
) -> tuple[np.ndarray, np.ndarray]:
    """Transmission and reflection of ``profile`` by the QTBM on a uniform grid.

    Parameters
    ----------
    energy_ev
        1-D energies, eV from the emitter band edge.
    profile
        Band profile; batch axes, if any, are looped over in Python.
    step_nm
        Largest grid spacing, nm. The error against the continuum result
        falls as ``step_nm**2`` when the slice boundaries fall on grid nodes.

    Returns
    -------
    transmission, reflection : ndarray
        Shape ``profile.batch_shape + (n_energies,)``. Both are 0 where the
        emitter has no propagating state; ``T = 0`` where the collector has none.

    Raises
    ------
    ValueError
        If an energy lies above the top of the discrete band of a lead
        (``step_nm`` too coarse for that energy).

    References
    ----------
    .. [1] C. S. Lent and D. J. Kirkner, J. Appl. Phys. 67, 6353 (1990).
    .. [2] D. J. BenDaniel and C. B. Duke, Phys. Rev. 152, 683 (1966).
    """
    energy = np.atleast_1d(np.asarray(energy_ev, float))
    if energy.ndim != 1:
        raise ValueError(f"energy_ev must be 1-D, got shape {energy.shape}")
    batch = profile.batch_shape
    trans = np.zeros(batch + energy.shape)
    refl = np.zeros(batch + energy.shape)
    for index in np.ndindex(*batch) if batch else [()]:
        p = _single(profile.take(index)) if batch else _single(profile)
        grid = uniform_grid(p, step_nm=step_nm)
        a2 = grid.step_nm**2
        for j in (0, -1):
            m = grid.mass_half_m0(energy, p)[:, j]
            if np.any((energy - p.edge_ev[j]) * m / HBAR2_2M0_EV_NM2 * a2 > 4.0):
                raise ValueError(
                    "an energy lies above the discrete band of a contact; "
                    f"reduce step_nm (now {step_nm:g})"
                )
        trans[index], refl[index] = _qtbm_single(energy, p, grid)
    return trans, refl
