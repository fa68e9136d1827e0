"""Transmission T(E) of a piecewise-constant band profile, batched and stable.

The kernel propagates the reflection ratio of the two plane-wave amplitudes
from the collector back to the emitter, one interface at a time (a
one-sided scattering-matrix recursion). Amplitudes are always referred to
the edge of a slice where the evanescent factor decays, so thick and high
barriers give neither overflow nor loss of R + T = 1; the transmission
amplitude is accumulated as a logarithm.

Notes
-----
In slice ``j`` the envelope is ``a_j exp(i k_j z) + b_j exp(-i k_j z)``
(``z`` from the slice's left edge) with ``Im k_j >= 0``. BenDaniel-Duke
matching [1]_ of ``psi`` and ``psi'/m`` at the interface between slices
``j`` and ``j+1`` with ``eta = (k_{j+1}/m_{j+1}) / (k_j/m_j)`` and
``rho_{j+1} = b_{j+1}/a_{j+1}`` gives at the right edge of slice ``j``

    rho' = [(1 + rho) - eta (1 - rho)] / [(1 + rho) + eta (1 - rho)],
    a_j exp(i k_j d_j) = a_{j+1} [(1 + rho) + eta (1 - rho)] / 2,

and at its left edge ``rho_j = rho' exp(2 i k_j d_j)``, a factor of modulus
<= 1. The collector carries no incoming wave (``rho = 0``). Then
``T = Re(k_C/m_C) / Re(k_E/m_E) |a_C / a_E|^2`` and ``R = |rho_E|^2``.

Two implementations compute the same numbers: a compiled one
(``physics/_slices.c``, real arithmetic, SIMD across energies; built at
install where a C compiler exists) and the numpy one below, which is the
readable reference and the fallback. They agree to 1e-10 relative (tested).

The energy-dependent (nonparabolic) mass is ``m(E) = m (1 + alpha (E - E_c))``
[2]_; below a band edge by more than ``1/(2 alpha)`` it is held at ``m/2``
(a cap on an extrapolation the two-band model does not support there).

References
----------
.. [1] D. J. BenDaniel and C. B. Duke, Phys. Rev. 152, 683 (1966).
.. [2] E. O. Kane, J. Phys. Chem. Solids 1, 249 (1957); the energy-dependent
   mass form as used by D. F. Nelson, R. C. Miller and D. A. Kleinman,
   Phys. Rev. B 35, 7770 (1987).
"""

from __future__ import annotations

import os
from types import ModuleType
from typing import Literal, overload

import numpy as np

from .bands import Profile
from .constants import HBAR2_2M0_EV_NM2
from .errors import InputError

_slices: ModuleType | None
try:
    from . import _slices  # type: ignore[attr-defined,no-redef]
except ImportError:  # built without a C compiler: the numpy implementation serves
    _slices = None

__all__ = [
    "transmission",
    "transmission_rows",
    "transmission_where",
    "wave_numbers_per_nm",
    "BACKENDS",
    "DEFAULT_BACKEND",
]

#: Implementations available here; ``"compiled"`` only when the extension was built.
BACKENDS = ("compiled", "numpy") if _slices is not None else ("numpy",)
#: Used when ``transmission(backend=None)``; ``WELLWRIGHT_KERNEL=numpy`` forces the fallback
#: (checked at the first call, so that a bad value is an input error, not an import failure).
DEFAULT_BACKEND = os.environ.get("WELLWRIGHT_KERNEL", BACKENDS[0])

_MIN_MASS_FACTOR = 0.5
#: Smallest |k^2| (1/nm^2) used: k = 0 exactly (E on a band edge) would make eta singular,
#: and a tinier k amplifies round-off by 1/k. Below it, k^2 is replaced by it (an energy
#: error below ~1e-12 eV, and only that close to a band edge).
K2_FLOOR_PER_NM2 = 1e-12


def wave_numbers_per_nm(
    energy_ev: np.ndarray, *, edge_ev: np.ndarray, mass_m0: np.ndarray, alpha_per_ev: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Complex wave number ``k`` (1/nm, ``Im k >= 0``) and ``k/m`` (1/nm per m0).

    All arguments broadcast together; energies and edges in eV.

    Parameters
    ----------
    energy_ev
        Energies, eV.
    edge_ev
        Band edges, eV.
    mass_m0
        Band-edge masses, m0.
    alpha_per_ev
        Nonparabolicity, 1/eV.
    """
    kinetic = energy_ev - edge_ev
    mass = alpha_per_ev * kinetic
    mass += 1.0
    np.maximum(mass, _MIN_MASS_FACTOR, out=mass)
    mass *= mass_m0
    k2 = mass * kinetic
    k2 *= 1.0 / HBAR2_2M0_EV_NM2
    k2 = np.where(np.abs(k2) < K2_FLOOR_PER_NM2, K2_FLOOR_PER_NM2, k2)
    k = np.sqrt(k2.astype(complex))
    return k, k / mass


@overload
def transmission(
    energy_ev: np.ndarray,
    *,
    profile: Profile,
    return_reflection: Literal[False] = False,
    backend: str | None = None,
) -> np.ndarray: ...


@overload
def transmission(
    energy_ev: np.ndarray,
    *,
    profile: Profile,
    return_reflection: Literal[True],
    backend: str | None = None,
) -> tuple[np.ndarray, np.ndarray]: ...


def transmission(
    energy_ev: np.ndarray,
    *,
    profile: Profile,
    return_reflection: bool = False,
    backend: str | None = None,
) -> np.ndarray | tuple[np.ndarray, np.ndarray]:
    """Transmission probability through ``profile`` at each energy.

    Parameters
    ----------
    energy_ev
        Energies, eV from the emitter band edge, shape ``batch + (n_energies,)``
        where ``batch`` broadcasts with ``profile.batch_shape``.
    profile
        Piecewise-constant band profile; first and last slice are the contacts.
    return_reflection
        Also return the reflection probability.
    backend
        ``"compiled"`` or ``"numpy"`` (see :data:`BACKENDS`); default :data:`DEFAULT_BACKEND`.

    Returns
    -------
    transmission : ndarray
        In [0, 1], shape ``broadcast(batch, profile.batch_shape) + (n_energies,)``;
        0 where either contact has no propagating state.
    reflection : ndarray
        Only with ``return_reflection``; 1 where the emitter has no propagating state.
    """
    energy = np.asarray(energy_ev, float)
    if _backend(backend) == "compiled":
        return _compiled(energy, profile, return_reflection)
    return _numpy(energy, profile, return_reflection)


def transmission_rows(
    energy_ev: np.ndarray,
    *,
    profile: Profile,
    rows: tuple[np.ndarray, ...],
    backend: str | None = None,
) -> np.ndarray:
    """T(E) of groups of energies, each group on its own profile of the batch.

    ``energy_ev`` is ``(n_groups, n_energies)``; ``rows`` indexes
    ``profile.batch_shape`` (one array per batch axis, e.g. from
    :func:`numpy.nonzero`), one profile per group. Equals
    ``transmission(energy_ev, profile=profile.take(rows))`` without the copy
    of the selected profiles.

    Parameters
    ----------
    energy_ev
        Energies, eV from the emitter band edge, ``(n_groups, n_energies)``.
    profile
        Band profiles, batch ``profile.batch_shape``.
    rows
        The profile of each group, one index array of length ``n_groups`` per batch axis.
    backend
        As for :func:`transmission`.
    """
    energy = np.asarray(energy_ev, float)
    if _backend(backend) == "compiled":
        if profile.batch_shape:
            flat_rows = np.ravel_multi_index(rows, profile.batch_shape).astype(np.int64)
        else:  # one profile for every group
            flat_rows = np.zeros(energy.shape[0], np.int64)
        return _compiled(energy, profile, False, rows=flat_rows)
    return _numpy(energy, profile.take(rows), False)


def transmission_where(
    energy_ev: np.ndarray, *, profile: Profile, mask: np.ndarray, backend: str | None = None
) -> np.ndarray:
    """T(E) of groups of energies, evaluated only where ``mask`` is set (0 elsewhere).

    ``energy_ev`` is ``profile.batch_shape + (n_groups, n_energies)`` and ``mask``
    ``profile.batch_shape + (n_groups,)``: e.g. the nodes of each candidate
    resonance, of which only the real ones (not the padding) need the kernel
    (a convenience over :func:`transmission_rows`).

    Parameters
    ----------
    energy_ev
        Energies, eV from the emitter band edge, ``profile.batch_shape + (n_groups,
        n_energies)``.
    profile
        Band profiles.
    mask
        Groups to compute, ``profile.batch_shape + (n_groups,)``.
    backend
        As for :func:`transmission`.
    """
    energy = np.asarray(energy_ev, float)
    out = np.zeros(energy.shape)
    where = np.nonzero(mask)
    if where[0].size:
        out[where] = transmission_rows(
            energy[where], profile=profile, rows=where[:-1], backend=backend
        )
    return out


def compiled_kernel(name: str):
    """The compiled routine ``name`` of the extension where the compiled kernel is the one in
    use (not forced to numpy, built with that routine); None otherwise, and the caller runs
    its numpy reference."""
    routine = getattr(_slices, name, None)
    if routine is None or _backend(None) != "compiled":
        return None
    return routine


def compiled_bracket_rounds(
    x: np.ndarray,
    y: np.ndarray,
    *,
    profile: Profile,
    rows: tuple[np.ndarray, ...],
    iterations: int,
    extra_rounds: int,
    loose_bracket: float,
    loose_fit: float,
) -> bool:
    """Run the bracketing rounds of :func:`physics.resonances.refine_bracketed` compiled.

    ``x``, ``y`` ``(n, 3)`` (energies and 1/T of each bracket, bracket ``i`` on the
    profile ``rows`` gives) are updated in place. Returns False, doing nothing, where the
    default backend is not the compiled kernel (the caller then runs its numpy rounds).

    Parameters
    ----------
    x, y
        Energies (eV) and 1/T of each bracket, ``(n, 3)``, updated in place.
    profile, rows
        Bracket ``i`` is on the profile ``rows`` gives for it (one index array per batch axis).
    iterations, extra_rounds
        Rounds, and further rounds for brackets still loose, as in
        :func:`physics.resonances.refine_bracketed`.
    loose_bracket, loose_fit
        Its :data:`~physics.resonances.LOOSE_BRACKET` (probe spreads) and
        :data:`~physics.resonances.LOOSE_FIT` (half widths).
    """
    rounds = compiled_kernel("refine_brackets")
    if rounds is None:
        return False
    if profile.batch_shape:
        flat = np.ravel_multi_index(rows, profile.batch_shape).astype(np.int64)
    else:  # one profile for every bracket
        flat = np.zeros(x.shape[0], np.int64)
    xs, ys = np.ascontiguousarray(x, dtype=float), np.ascontiguousarray(y, dtype=float)
    rounds(
        profile.n_slices,
        *profile.slice_arrays,
        1.0 / HBAR2_2M0_EV_NM2,
        np.ascontiguousarray(flat),
        xs,
        ys,
        int(iterations),
        int(extra_rounds),
        float(loose_bracket),
        float(loose_fit),
    )
    x[...], y[...] = xs, ys
    return True


def compiled_refine_peaks(
    x: np.ndarray,
    y: np.ndarray,
    *,
    profile: Profile,
    rows: tuple[np.ndarray, ...],
    iterations: int,
    extra_rounds: int,
    loose_bracket: float,
    loose_fit: float,
    exact_peak: bool,
) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """:func:`compiled_bracket_rounds` and then the end of
    :func:`physics.resonances.refine_bracketed` in one compiled call.

    Parameters
    ----------
    x, y, profile, rows, iterations, extra_rounds, loose_bracket, loose_fit
        As for :func:`compiled_bracket_rounds` (``x``, ``y`` are not changed here).
    exact_peak
        T computed at each line's centre, else read off the parabola.

    Returns
    -------
    tuple or None
        ``(n,)`` centre, width and peak transmission of each line; None where the
        compiled routine is not in use (the caller runs its numpy statement).
    """
    refine = compiled_kernel("refine_peaks")
    if refine is None:
        return None
    if profile.batch_shape:
        flat = np.ravel_multi_index(rows, profile.batch_shape).astype(np.int64)
    else:  # one profile for every bracket
        flat = np.zeros(x.shape[0], np.int64)
    xs = np.array(x, dtype=float, order="C", copy=True)
    ys = np.array(y, dtype=float, order="C", copy=True)
    out = np.empty((x.shape[0], 3))
    refine(
        profile.n_slices,
        *profile.slice_arrays,
        1.0 / HBAR2_2M0_EV_NM2,
        np.ascontiguousarray(flat),
        xs,
        ys,
        int(iterations),
        int(extra_rounds),
        float(loose_bracket),
        float(loose_fit),
        int(bool(exact_peak)),
        out,
    )
    return out[:, 0], out[:, 1], out[:, 2]


def compiled_grid_states(
    grid_ev: np.ndarray,
    *,
    profile: Profile,
    n_max: int,
    iterations: int,
    extra_rounds: int,
    loose_bracket: float,
    loose_fit: float,
    exact_peak: bool,
    n_first: int = 0,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None:
    """T on a grid per profile, its ``n_max`` highest local maxima and their refinement
    (:func:`physics.resonances.local_peaks` and :func:`physics.resonances.refine_grid_peaks`,
    the latter as :func:`compiled_refine_peaks`) in one compiled call.

    Parameters
    ----------
    grid_ev
        Energies, eV, ``profile.batch_shape + (n,)``, sorted along the last axis.
    profile
        Band profiles.
    n_max
        Slots for the highest maxima per profile, highest first.
    iterations, extra_rounds, loose_bracket, loose_fit, exact_peak
        As for :func:`compiled_refine_peaks`.
    n_first
        Further slots, after those: the first maxima along the grid
        (:func:`physics.resonances.local_peaks` with ``first=True``).

    Returns
    -------
    tuple or None
        Centre, width and peak transmission and whether the slot holds a maximum (where
        not, as :func:`physics.resonances.refine_grid_peaks`: the grid's second energy, NaN
        width and peak), each ``profile.batch_shape + (n_max + n_first,)``; None where the
        compiled routine is not in use (the caller runs the numpy statement).
    """
    states = compiled_kernel("grid_states")
    if (
        states is None
        or not (0 <= n_max <= 64 and 0 <= n_first <= 64 and n_max + n_first >= 1)
        or grid_ev.shape[-1] < 3
    ):
        return None
    batch = profile.batch_shape
    energy = np.ascontiguousarray(np.broadcast_to(grid_ev, batch + grid_ev.shape[-1:]), float)
    out = np.empty(batch + (n_max + n_first, 4))
    states(
        profile.n_slices,
        energy.shape[-1],
        energy,
        *profile.slice_arrays,
        1.0 / HBAR2_2M0_EV_NM2,
        int(n_max),
        int(n_first),
        int(iterations),
        int(extra_rounds),
        float(loose_bracket),
        float(loose_fit),
        int(bool(exact_peak)),
        out,
    )
    return out[..., 0], out[..., 1], out[..., 2], out[..., 3] > 0.0


def _backend(backend: str | None) -> str:
    if backend is None:
        if DEFAULT_BACKEND not in BACKENDS:
            raise InputError(
                f"{DEFAULT_BACKEND!r} is not a kernel built here; allowed: {', '.join(BACKENDS)}",
                source="environment",
                key="WELLWRIGHT_KERNEL",
            )
        return DEFAULT_BACKEND
    if backend not in BACKENDS:
        raise ValueError(f"backend {backend!r}: allowed are {', '.join(BACKENDS)}")
    return backend


def _compiled(energy: np.ndarray, profile: Profile, return_reflection: bool, rows=None):
    """The compiled kernel on the broadcast energies and the profiles' slice arrays.

    Without ``rows`` energies and profiles broadcast together; with ``rows``
    (int64, one per row of ``energy``) row ``g`` of ``energy`` runs on profile
    ``rows[g]`` of the flattened ``profile.batch_shape``. The profiles are
    never copied per call (:attr:`Profile.slice_arrays` is computed once).
    """
    assert _slices is not None  # callers pick this backend only where it is built
    batch = profile.batch_shape
    if rows is None:
        full = np.broadcast_shapes(energy.shape[:-1], batch)
        e = np.ascontiguousarray(np.broadcast_to(energy, full + energy.shape[-1:]))
        if full != batch:  # energies beyond the profiles' batch: map each row to its profile
            index = np.arange(int(np.prod(batch))).reshape(batch)
            rows = np.ascontiguousarray(np.broadcast_to(index, full).ravel(), dtype=np.int64)
    else:
        e = np.ascontiguousarray(energy)
    t = np.empty(e.shape)
    r = np.empty(e.shape) if return_reflection else None
    _slices.transmission(
        profile.n_slices,
        e.shape[-1],
        e,
        *profile.slice_arrays,
        1.0 / HBAR2_2M0_EV_NM2,
        t,
        r,
        rows,
    )
    return (t, r) if return_reflection else t


def _numpy(energy: np.ndarray, profile: Profile, return_reflection: bool):
    """The numpy implementation: the recursion of the module notes, vectorised over the batch."""
    edge = profile.edge_ev[..., None, :]
    mass = profile.mass_m0[..., None, :]
    alpha = profile.nonparabolicity_per_ev[..., None, :]
    width = profile.width_nm[..., None, :]
    e = energy[..., None]
    n = profile.n_slices

    def slice_waves(j: int) -> tuple[np.ndarray, np.ndarray]:
        return wave_numbers_per_nm(
            e[..., 0], edge_ev=edge[..., j], mass_m0=mass[..., j], alpha_per_ev=alpha[..., j]
        )

    k_next, q_next = slice_waves(n - 1)
    q_collector = q_next
    shape = np.broadcast_shapes(energy.shape, edge.shape[:-1])
    rho = np.zeros(shape, complex)
    log_gain = np.zeros(shape)  # log |a_j / a_C|, accumulated in part through `product`
    product = np.ones(shape, complex)  # running product of den/2, renormalised now and then
    u = np.empty(shape, complex)
    v = np.empty(shape, complex)
    for j in range(n - 2, -1, -1):
        k_j, q_j = slice_waves(j)
        np.add(rho, 1.0, out=u)
        np.subtract(1.0, rho, out=v)
        v *= q_next
        v /= q_j  # v = eta (1 - rho)
        np.subtract(u, v, out=rho)
        u += v  # u = den
        rho /= u
        product *= u
        if j > 0:
            rho *= np.exp(2j * width[..., j] * k_j)
            log_gain += k_j.imag * width[..., j]
        if (n - j) % 24 == 0:  # keep the product inside the floating-point range
            mag = np.abs(product)
            log_gain += np.log(mag)
            product /= mag
        q_next = q_j
    q_emitter = q_next
    log_gain += np.log(np.abs(product)) - (n - 1) * np.log(2.0)

    flux_in = q_emitter.real
    flux_out = q_collector.real
    ok = flux_in > 0.0
    ratio = np.divide(flux_out, flux_in, out=np.zeros(shape), where=ok)
    t = np.clip(ratio * np.exp(-2.0 * log_gain), 0.0, 1.0)
    if not return_reflection:
        return t
    r = np.where(ok, np.clip(np.abs(rho) ** 2, 0.0, 1.0), 1.0)
    return t, r
