"""Time-domain wave packet through a band profile: an independent check of T(E).

A Gaussian packet is launched in the emitter toward the stack and propagated
with Visscher's explicit staggered scheme [1]_ on the same uniform grid and
half-point rule as :mod:`physics.references.qtbm`. Its transmitted fraction
must equal T(E) averaged over the packet's energy distribution, which
:func:`expected_transmission` computes from any T(E) function; the time
record shows the charge build-up in the well and its decay.

Notes
-----
Scheme [1]_. With ``psi = R + i I`` and ``H`` the real symmetric
finite-difference Hamiltonian (BenDaniel-Duke symmetric form [2]_, mass at
half points), ``R`` lives at integer and ``I`` at half-integer time steps:

    R(t + dt)      = R(t) + (dt / hbar) H I(t + dt/2)
    I(t + 3 dt/2)  = I(t + dt/2) - (dt / hbar) H R(t + dt)

and ``P(t) = R(t)^2 + I(t + dt/2) I(t - dt/2)`` is the probability density
whose sum is conserved exactly by the recursion for symmetric ``H`` [1]_.
For an eigenvalue ``lambda`` of ``H`` one step multiplies ``(R, I)`` by a
matrix of determinant 1 and trace ``2 - (lambda dt / hbar)^2``, so the
scheme is stable for ``|lambda| dt <= 2 hbar`` (Visscher's limit [1]_,
restated here from that eigen-analysis). We bound ``max |lambda|`` by
Gershgorin's theorem, ``G = max_j (|H_jj| + |H_j,j-1| + |H_j,j+1|)``, and
take ``dt = hbar / G``: half of the limit.

Model choices (stated departures):

* the mass of every slice is evaluated once, at the packet's centre energy
  ``m (1 + alpha (E0 - E_c))``, since a time-domain Hamiltonian cannot
  carry an energy-dependent mass; with ``alpha = 0`` this is exact;
* the grid extends into the flat contacts far enough that nothing reaches its
  ends before ``max_time_fs`` (hard walls beyond, no absorbing layer), and
  only the part of the grid where the packet has non-negligible amplitude
  (above ``1e-6`` of its initial peak) is updated, widened as the packet spreads;
* the packet ``psi(x, 0) = (2 pi s^2)^(-1/4) exp(-(x - x0)^2 / (4 s^2) + i k0 x)``
  has rms width ``s = width_nm`` of ``|psi|^2``; ``k0`` follows from the
  centre energy by the grid's dispersion ``E = 2 w (1 - cos k a)``;
  ``I(+-dt/2)`` come from a 4th-order Taylor series of ``exp(-i H t / hbar)``;
  by default the centre starts ``8 s + 2`` nm before the emitter interface,
  so the initial overlap with the stack is ~``exp(-16)`` in amplitude;
* the run stops once the centre has had time to arrive and less than
  ``stop_tolerance`` of the probability is within ``6 s`` of the barriers,
  or at ``max_time_fs``.

Regions. "First" and "last barrier" are the first and last layer between the
contacts whose band edge lies above the emitter's edge (by more than 1 meV)
at zero bias. The zero-bias edge of each slice is estimated by removing a
straight-line drop between the contact edges, i.e. assuming both contacts
have the same band edge at zero bias (the usual symmetric n+ contacts) and
a straight-line potential; slices of the contact layers never count. Where
the layer table is at hand (as in ``wellwright packet``), pass
``barrier_layers`` from its zero-bias band offsets instead. ``left`` is the
probability before the first barrier, ``in_well`` from the start of the
first barrier to the end of the last (barriers included), ``right`` after it.
Without any barrier the whole region between the contacts is used.

References
----------
.. [1] P. B. Visscher, "A fast explicit algorithm for the time-dependent
   Schrodinger equation", Computers in Physics 5, 596 (1991).
.. [2] D. J. BenDaniel and C. B. Duke, Phys. Rev. 152, 683 (1966).
.. [3] S. Gershgorin, "Uber die Abgrenzung der Eigenwerte einer Matrix",
   Izv. Akad. Nauk SSSR, Otd. Fiz.-Mat. Nauk 6, 749 (1931) (citation from memory).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..bands import Profile
from ..constants import ELEMENTARY_CHARGE_C, HBAR2_2M0_EV_NM2, HBAR_J_S
from .qtbm import _MIN_MASS_FACTOR, _single, uniform_grid

__all__ = [
    "PacketResult",
    "propagate_packet",
    "expected_transmission",
    "barrier_span_nm",
    "HBAR_EV_FS",
]

#: hbar in eV fs.
HBAR_EV_FS = HBAR_J_S / ELEMENTARY_CHARGE_C * 1e15
_AMPLITUDE_CUT = 1e-14  # relative amplitude below which the initial packet is set to 0
_AMPLITUDE_FLOOR = 1e-6  # relative amplitude (1e-12 in density) that widens the updated grid
_CHECK_EVERY = 50  # steps between window checks; the scheme moves 2 nodes per step at most
_BAND = 4 * _CHECK_EVERY  # nodes added when the window is widened
_EDGE_PROBABILITY_STOP = 1e-8  # probability near a grid end that stops the run


@dataclass(frozen=True)
class PacketResult:
    """Time record of one wave packet run; see :func:`propagate_packet`.

    Attributes
    ----------
    time_fs, left, in_well, right
        Recorded times and the probability in the three regions (module Notes).
    reflected, transmitted, in_well_final
        ``left``, ``right`` and ``in_well`` at the last recorded time.
    norm_error_max
        Largest ``|sum P(t) / sum P(0) - 1|`` over the run.
    edge_probability_max
        Largest probability found within 100 nodes of either grid end (should be ~0).
    stop_reason
        ``"left the stack"``, ``"max time"`` or ``"grid edge"`` (more than 1e-8
        of the probability within 100 nodes of a grid end: the run stops there).
    dt_fs, step_nm, stability_bound_ev
        Time step, grid spacing and the Gershgorin bound ``G`` of ``max |eigenvalue of H|``.
    x_nm, potential_ev, mass_half_m0
        Grid nodes, band edge at the nodes and mass at the ``n + 1`` half points
        ``x_0 - a/2 .. x_n-1 + a/2`` (hard walls beyond the end nodes): the
        Hamiltonian, rebuildable from these alone.
    barrier_span_nm
        Start of the first and end of the last barrier.
    snapshot_time_fs, snapshot_density_per_nm
        A few instants and the density ``P`` on the grid at each, spread from the
        launch to the time when less than 5 % of the probability remains within
        ``6 width_nm`` of the barriers (or the end of the run).
    energy_mev, width_nm
        Packet centre energy above the emitter edge and its rms width.
    """

    time_fs: np.ndarray
    left: np.ndarray
    in_well: np.ndarray
    right: np.ndarray
    reflected: float
    transmitted: float
    in_well_final: float
    norm_error_max: float
    edge_probability_max: float
    stop_reason: str
    dt_fs: float
    step_nm: float
    stability_bound_ev: float
    x_nm: np.ndarray
    potential_ev: np.ndarray
    mass_half_m0: np.ndarray
    barrier_span_nm: tuple[float, float]
    snapshot_time_fs: np.ndarray
    snapshot_density_per_nm: np.ndarray
    energy_mev: float
    width_nm: float


def barrier_span_nm(
    profile: Profile, *, barrier_layers: tuple[int, int] | None = None
) -> tuple[float, float]:
    """Start of the first barrier and end of the last, nm from the emitter interface.

    Parameters
    ----------
    profile
        A single profile.
    barrier_layers
        ``(first, last)`` layer indices to use instead of the zero-bias rule
        of the module Notes.
    """
    p = _single(profile)
    right = np.cumsum(p.width_nm)
    left = right - p.width_nm
    length = float(right[-1])
    layers = np.asarray(p.layer_index)
    if barrier_layers is None:
        centre = np.where(length > 0, (left + 0.5 * p.width_nm) / max(length, 1e-300), 0.0)
        centre[-1] = 1.0
        drop = p.edge_ev[0] - p.edge_ev[-1]  # the bias, if both contacts share a zero-bias edge
        edge0 = p.edge_ev + drop * centre
        interior = np.setdiff1d(layers, [layers[0], layers[-1]])  # contact regions never count
        above = [j for j in interior if edge0[layers == j].mean() > p.edge_ev[0] + 1e-3]
        if not above:
            return 0.0, length
        barrier_layers = (int(above[0]), int(above[-1]))
    first, last = barrier_layers
    in_first, in_last = layers == first, layers == last
    if not in_first.any() or not in_last.any() or first > last:
        raise ValueError(f"barrier_layers {barrier_layers} are not layers of this profile")
    return float(left[in_first].min()), float(right[in_last].max())


def _grid_wave(energy_kin_ev: float, w_ev: float, step_nm: float) -> float:
    """Wave number on the grid, ``E = 2 w (1 - cos k a)`` solved for ``k``."""
    c = 1.0 - energy_kin_ev / (2.0 * w_ev)
    if not -1.0 <= c <= 1.0:
        raise ValueError(
            f"kinetic energy {energy_kin_ev * 1e3:.1f} meV is outside the grid's band; "
            "reduce step_nm"
        )
    return float(np.arccos(c) / step_nm)


def propagate_packet(
    *,
    profile: Profile,
    energy_mev: float,
    width_nm: float,
    step_nm: float = 0.2,
    max_time_fs: float = 2000.0,
    start_gap_nm: float | None = None,
    stop_tolerance: float = 1e-4,
    record_interval_fs: float = 0.5,
    n_snapshots: int = 6,
    barrier_layers: tuple[int, int] | None = None,
    progress: Callable[[float, float], None] | None = None,
) -> PacketResult:
    """Launch a Gaussian packet from the emitter and follow it through the stack.

    Parameters
    ----------
    profile
        A single band profile (batch axes of length 1 are accepted), at its bias.
    energy_mev
        Centre energy of the packet above the emitter band edge, meV.
    width_nm
        rms width of the packet's probability density, nm.
    step_nm
        Largest grid spacing, nm (slice boundaries on grid nodes give O(a^2) accuracy).
    max_time_fs
        Longest simulated time, fs; the grid is made long enough for it.
    start_gap_nm
        Distance of the packet centre from the emitter interface; default ``8 width_nm + 2``.
    stop_tolerance
        Stop once the centre has reached the stack and less than this
        probability remains within ``6 width_nm`` of the barriers.
    record_interval_fs
        Interval of the time record, fs.
    n_snapshots
        Number of density snapshots kept (see :class:`PacketResult`).
    barrier_layers
        Override of the barrier rule, see :func:`barrier_span_nm`.
    progress
        Called now and then with ``(time_fs, max_time_fs)``.

    Returns
    -------
    PacketResult

    References
    ----------
    .. [1] P. B. Visscher, Computers in Physics 5, 596 (1991).
    .. [2] D. J. BenDaniel and C. B. Duke, Phys. Rev. 152, 683 (1966).
    .. [3] S. Gershgorin, Izv. Akad. Nauk SSSR, Otd. Fiz.-Mat. Nauk 6, 749 (1931).
    """
    _check_positive(energy_mev=energy_mev, width_nm=width_nm, max_time_fs=max_time_fs)
    p = _single(profile)
    sigma = float(width_nm)
    e0 = float(p.edge_ev[0]) + energy_mev * 1e-3
    gap = 8.0 * sigma + 2.0 if start_gap_nm is None else float(start_gap_nm)
    lat = _lattice(p, e0=e0, sigma=sigma, gap=gap, step_nm=step_nm, max_time_fs=max_time_fs)
    a, dt = lat.step_nm, lat.dt_fs
    real, imag, imag_prev, lo, hi, floor = _launch(lat, sigma=sigma, gap=gap)
    xb1, xb2 = barrier_span_nm(p, barrier_layers=barrier_layers)
    regions = _Regions.of(lat.x_nm, (xb1, xb2), near_nm=6 * sigma, step_nm=a)

    dens = real[lo:hi] ** 2 + imag[lo:hi] * imag_prev[lo:hi]
    rec = _TimeRecord(regions, dens, lo, hi, step_nm=a, n_snapshots=n_snapshots)
    steps_per_record = max(1, int(round(record_interval_fs / dt)))
    n_steps_max = int(np.ceil(max_time_fs / dt))
    t_arrive = gap / (2 * lat.lead_w_ev * a * np.sin(lat.k0_per_nm * a) / HBAR_EV_FS)
    stop_reason, step, t_seen = "max time", 0, None
    while step < n_steps_max:
        record = (step + 1) % steps_per_record == 0 or step + 1 == n_steps_max
        if step % _CHECK_EVERY == 0:
            lo, hi = _widened(real, imag, lo, hi, floor)
        # [1]: R(t+dt) = R(t) + dt/hbar H I(t+dt/2), I(t+3dt/2) = I(t+dt/2) - dt/hbar H R(t+dt)
        real[lo:hi] += lat.apply_eps_h(imag, lo, hi)
        if record:
            imag_prev[lo:hi] = imag[lo:hi]
        imag[lo:hi] -= lat.apply_eps_h(real, lo, hi)
        step += 1
        if not record:
            continue
        dens = real[lo:hi] ** 2 + imag[lo:hi] * imag_prev[lo:hi]  # [1], conserved density
        t = step * dt
        near = rec.add(t, dens, lo, hi)
        if progress is not None and rec.n_records % 200 == 0:
            progress(t, max_time_fs)
        if rec.edge_max > _EDGE_PROBABILITY_STOP:
            stop_reason = "grid edge"
            break
        if t_seen is None and t >= t_arrive and near < 0.05:
            t_seen = t  # the packet has mostly left the barriers' neighbourhood
        if t >= t_arrive and near < stop_tolerance:
            stop_reason = "left the stack"
            break
    times = rec.times
    snap_t, snap_d = rec.spread_snapshots(
        dens, lo, hi, until_fs=times[-1] if t_seen is None else t_seen
    )
    if progress is not None:
        progress(times[-1], max_time_fs)
    return PacketResult(
        **rec.fields(),
        stop_reason=stop_reason,
        dt_fs=dt,
        step_nm=a,
        stability_bound_ev=lat.bound_ev,
        x_nm=lat.x_nm,
        potential_ev=lat.potential_ev,
        mass_half_m0=lat.mass_half_m0,
        barrier_span_nm=(xb1, xb2),
        snapshot_time_fs=snap_t,
        snapshot_density_per_nm=snap_d,
        energy_mev=float(energy_mev),
        width_nm=sigma,
    )


def _check_positive(**values: float) -> None:
    for name, value in values.items():
        if not value > 0:
            raise ValueError(f"{name} must be positive, got {value!r}")


@dataclass(frozen=True)
class _Lattice:
    """The packet's grid, its Hamiltonian and time step (module Notes)."""

    x_nm: np.ndarray  #: nodes
    potential_ev: np.ndarray  #: band edge at the nodes
    mass_half_m0: np.ndarray  #: mass at the n + 1 half points
    eps_diag: np.ndarray  #: (dt / hbar) H_jj
    eps_off: np.ndarray  #: (dt / hbar) |H_j,j+1|
    step_nm: float
    dt_fs: float
    bound_ev: float  #: Gershgorin bound of max |eigenvalue of H|
    k0_per_nm: float  #: centre wave number in the emitter
    lead_w_ev: float  #: emitter bond hbar^2 / (2 m a^2)

    def apply_eps_h(self, v: np.ndarray, lo: int, hi: int) -> np.ndarray:
        """``(dt/hbar) H v`` on ``[lo, hi)`` for ``v`` zero outside it."""
        ed, eo = self.eps_diag, self.eps_off
        out = ed[lo:hi] * v[lo:hi]
        out[:-1] -= eo[lo : hi - 1] * v[lo + 1 : hi]
        out[1:] -= eo[lo : hi - 1] * v[lo : hi - 1]
        return out


def _lattice(
    p: Profile, *, e0: float, sigma: float, gap: float, step_nm: float, max_time_fs: float
) -> _Lattice:
    """Grid long enough that nothing reaches its ends before ``max_time_fs``; H and ``dt``."""
    stack = uniform_grid(p, step_nm=step_nm)
    a = stack.step_nm

    # lead speeds bound the grid length: fastest relevant component k0 + 10 / (2 sigma)
    def lead_w(j: int) -> float:
        factor = 1.0 + p.nonparabolicity_per_ev[j] * (e0 - p.edge_ev[j])
        return HBAR2_2M0_EV_NM2 / (a * a * p.mass_m0[j] * max(factor, _MIN_MASS_FACTOR))

    w_e, w_c = lead_w(0), lead_w(-1)
    k0 = _grid_wave(e0 - p.edge_ev[0], w_e, a)
    k_hi = min(k0 + 5.0 / sigma, np.pi / (2 * a))  # k0 + 10 rms widths of |phi(k)|^2
    e_hi = p.edge_ev[0] + 2 * w_e * (1 - np.cos(k_hi * a))
    v_e = 2 * w_e * a * np.sin(k_hi * a) / HBAR_EV_FS  # nm/fs, group velocity dE/(hbar dk)
    c_c = np.clip(1.0 - (e_hi - p.edge_ev[-1]) / (2.0 * w_c), -1.0, 1.0)
    v_c = 2 * w_c * a * np.sqrt(1 - c_c**2) / HBAR_EV_FS
    v_max = max(v_e, v_c)
    reach = v_max * max_time_fs + 10.0 * sigma + 50.0
    n_left = int(np.ceil(max(gap + 10 * sigma, reach - gap) / a)) + 2 * _BAND
    n_right = int(np.ceil(reach / a)) + 2 * _BAND
    n_stack = stack.x_nm.size
    if n_left + n_stack + n_right > 5_000_000:
        raise ValueError("grid too long (over 5e6 nodes): shorten max_time_fs or enlarge step_nm")

    half_slice = np.concatenate(
        [np.zeros(n_left, int), stack.half_slice, np.full(n_right, p.n_slices - 1)]
    )
    x = a * np.arange(-n_left, n_stack - 1 + n_right + 1)
    edge_half = p.edge_ev[half_slice]
    potential = 0.5 * (edge_half[:-1] + edge_half[1:])
    factor = 1.0 + p.nonparabolicity_per_ev[half_slice] * (e0 - edge_half)
    mass_half = p.mass_m0[half_slice] * np.maximum(factor, _MIN_MASS_FACTOR)
    w = HBAR2_2M0_EV_NM2 / (a * a * mass_half)  # bonds: half points -1/2 .. n-1/2
    diag = potential + w[:-1] + w[1:]
    off = w[1:-1]  # between node j and j + 1
    bound = float(np.max(np.abs(diag) + w[:-1] + w[1:]))  # Gershgorin [3]
    dt = HBAR_EV_FS / bound  # half of Visscher's limit 2 hbar / max|lambda| [1]
    eps = dt / HBAR_EV_FS
    return _Lattice(
        x_nm=x,
        potential_ev=potential,
        mass_half_m0=mass_half,
        eps_diag=eps * diag,
        eps_off=eps * off,
        step_nm=a,
        dt_fs=dt,
        bound_ev=bound,
        k0_per_nm=k0,
        lead_w_ev=w_e,
    )


def _launch(
    lat: _Lattice, *, sigma: float, gap: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, int, int, float]:
    """The Gaussian packet as ``R(0)``, ``I(dt/2)``, ``I(-dt/2)``; its window ``[lo, hi)``
    and the amplitude that widens the window (module Notes)."""
    x, a, n = lat.x_nm, lat.step_nm, lat.x_nm.size
    k0 = lat.k0_per_nm
    psi0 = (2 * np.pi * sigma**2) ** -0.25 * np.exp(
        -((x + gap) ** 2) / (4 * sigma**2) + 1j * k0 * x
    )
    psi0 /= np.sqrt(np.sum(np.abs(psi0) ** 2) * a)
    floor = _AMPLITUDE_FLOOR * np.abs(psi0).max()
    big = np.flatnonzero(np.abs(psi0) > _AMPLITUDE_CUT * np.abs(psi0).max())
    lo, hi = max(0, big[0] - _BAND), min(n, big[-1] + 1 + _BAND)
    psi0[:lo] = 0
    psi0[hi:] = 0

    def taylor(sign: float) -> np.ndarray:
        """``psi(sign dt / 2)`` by a 4th-order series of ``exp(-i H t / hbar)``."""
        term, total = psi0.copy(), psi0.copy()
        for order in range(1, 5):
            new = np.zeros(n, complex)
            new[lo:hi] = lat.apply_eps_h(term.real, lo, hi) + 1j * lat.apply_eps_h(
                term.imag, lo, hi
            )
            term = -1j * 0.5 * sign * new / order
            total += term
        return total

    return psi0.real.copy(), taylor(+1.0).imag, taylor(-1.0).imag, lo, hi, floor


def _widened(real: np.ndarray, imag: np.ndarray, lo: int, hi: int, floor: float) -> tuple[int, int]:
    """The updated window ``[lo, hi)``, widened by a band where the packet reaches its ends."""
    amp = np.abs(real) + np.abs(imag)
    if lo > 0 and amp[lo : lo + _BAND].max() > floor:
        lo = max(0, lo - _BAND)
    if hi < len(amp) and amp[hi - _BAND : hi].max() > floor:
        hi = min(len(amp), hi + _BAND)
    return lo, hi


@dataclass(frozen=True)
class _Regions:
    """Node ranges of the three regions (module Notes), the barriers' neighbourhood and the
    zones at the grid ends watched for probability."""

    i1: int  #: first node in the barrier region
    i2: int  #: first node after it
    near_lo: int
    near_hi: int
    n: int
    edge_zone: int = 100

    @classmethod
    def of(
        cls, x: np.ndarray, span_nm: tuple[float, float], *, near_nm: float, step_nm: float
    ) -> _Regions:
        a = step_nm
        xb1, xb2 = span_nm
        return cls(
            i1=int(np.searchsorted(x, xb1 - 1e-9 * a)),
            i2=int(np.searchsorted(x, xb2 + 1e-9 * a, side="right")),
            near_lo=int(np.searchsorted(x, xb1 - near_nm)),
            near_hi=int(np.searchsorted(x, xb2 + near_nm, side="right")),
            n=x.size,
        )

    def fractions(
        self, dens: np.ndarray, lo: int, hi: int, a: float
    ) -> tuple[float, float, float, float]:
        """Probability left of, in and right of the barrier region, and near the barriers,
        of the density ``dens`` on the window ``[lo, hi)``."""

        def part(u: int, v: int) -> float:
            u, v = max(u, lo), min(v, hi)
            return float(dens[u - lo : v - lo].sum() * a) if v > u else 0.0

        return (
            part(0, self.i1),
            part(self.i1, self.i2),
            part(self.i2, self.n),
            part(self.near_lo, self.near_hi),
        )

    def at_grid_ends(self, dens: np.ndarray, lo: int, hi: int) -> float:
        """Sum of ``dens`` (window ``[lo, hi)``) within ``edge_zone`` nodes of either grid end."""
        zone, n = self.edge_zone, self.n
        return float(
            dens[: max(0, zone - lo)].sum() + dens[len(dens) - max(0, hi - (n - zone)) :].sum()
        )


class _TimeRecord:
    """The run's time record: probability of the three regions (relative to the start),
    the conservation and grid-end checks, and density snapshots, thinned by halves to
    at most ``4 n_snapshots``."""

    def __init__(
        self,
        regions: _Regions,
        dens: np.ndarray,
        lo: int,
        hi: int,
        *,
        step_nm: float,
        n_snapshots: int,
    ) -> None:
        self.regions, self.a, self.n_snapshots = regions, step_nm, n_snapshots
        self.q0 = float(dens.sum() * step_nm)
        left, well, right, _ = regions.fractions(dens, lo, hi, step_nm)
        self.times = [0.0]
        self.lefts, self.wells, self.rights = [left / self.q0], [well / self.q0], [right / self.q0]
        self.norm_err, self.edge_max = 0.0, 0.0
        self.n_records, self.snap_every = 0, 1
        self.snaps = [(0.0, self._padded(dens, lo, hi))]

    def _padded(self, dens: np.ndarray, lo: int, hi: int) -> np.ndarray:
        return np.pad(dens / self.q0, (lo, self.regions.n - hi))

    def add(self, t: float, dens: np.ndarray, lo: int, hi: int) -> float:
        """Record the density ``dens`` on ``[lo, hi)`` at ``t``; returns the relative
        probability near the barriers."""
        q0 = self.q0
        left, well, right, near = self.regions.fractions(dens, lo, hi, self.a)
        self.norm_err = max(self.norm_err, abs((left + well + right) / q0 - 1.0))
        self.edge_max = max(self.edge_max, self.regions.at_grid_ends(dens, lo, hi) * self.a / q0)
        self.times.append(t)
        self.lefts.append(left / q0)
        self.wells.append(well / q0)
        self.rights.append(right / q0)
        self.n_records += 1
        if self.n_records % self.snap_every == 0:
            self.snaps.append((t, self._padded(dens, lo, hi)))
            if len(self.snaps) > 4 * max(self.n_snapshots, 2):
                self.snaps = self.snaps[::2]
                self.snap_every *= 2
        return near / q0

    def fields(self) -> dict[str, Any]:
        """The time record's fields of :class:`PacketResult`."""
        return dict(
            time_fs=np.array(self.times),
            left=np.array(self.lefts),
            in_well=np.array(self.wells),
            right=np.array(self.rights),
            reflected=self.lefts[-1],
            transmitted=self.rights[-1],
            in_well_final=self.wells[-1],
            norm_error_max=self.norm_err,
            edge_probability_max=self.edge_max,
        )

    def spread_snapshots(
        self, dens: np.ndarray, lo: int, hi: int, *, until_fs: float
    ) -> tuple[np.ndarray, np.ndarray]:
        """About ``n_snapshots`` snapshots spread evenly from the launch to ``until_fs``
        (the last density ``dens`` on ``[lo, hi)`` added as a snapshot if it is not one)."""
        snaps = self.snaps
        if snaps[-1][0] != self.times[-1]:
            snaps.append((self.times[-1], self._padded(dens, lo, hi)))
        snap_t = np.array([s[0] for s in snaps])
        wanted = np.linspace(0.0, until_fs, max(self.n_snapshots, 2))
        pick = np.unique(np.abs(snap_t[None, :] - wanted[:, None]).argmin(axis=1))
        return np.array([snaps[i][0] for i in pick]), np.array([snaps[i][1] for i in pick])


def expected_transmission(
    *,
    profile: Profile,
    energy_mev: float,
    width_nm: float,
    transmission_fn: Callable[..., np.ndarray] | None = None,
    n_points: int = 2001,
) -> float:
    """T(E) averaged over the energy distribution of the packet of :func:`propagate_packet`.

    The packet's momentum distribution is ``|phi(k)|^2 ~ exp(-2 s^2 (k - k0)^2)``
    (Fourier transform of the Gaussian, ``s = width_nm``); each component
    ``k > 0`` is mapped to its kinetic energy in the emitter by the two-band
    dispersion ``hbar^2 k^2 / 2m = E (1 + alpha E)`` [1]_ and weighted by
    ``T(E)``; components ``k <= 0`` move away from the stack and count as
    reflected.

    Parameters
    ----------
    profile
        A single band profile.
    energy_mev
        Centre energy above the emitter band edge, meV (fixes ``k0``).
    width_nm
        rms width of the packet's probability density, nm.
    transmission_fn
        ``fn(energy_ev, *, profile) -> T`` (a tuple's first item is used);
        default :func:`physics.transmission.transmission`, imported on first use.
    n_points
        Points of the uniform ``k`` grid over ``k0 +- 6 / (2 s)``; the energy
        spacing must be finer than the narrowest resonance it should resolve.

    Returns
    -------
    float

    Notes
    -----
    The packet run uses the grid's dispersion and the mass at the centre
    energy; the difference to this continuum mapping is O((k a)^2) in energy
    and, with nonparabolicity, of order ``alpha`` times the energy spread.

    References
    ----------
    .. [1] E. O. Kane, J. Phys. Chem. Solids 1, 249 (1957).
    .. [2] Gaussian wave packet and its momentum distribution: any QM text,
       e.g. D. J. Griffiths, Introduction to Quantum Mechanics, 2nd ed., Sec. 2.4
       (section number from memory).
    """
    if transmission_fn is None:
        from ..transmission import transmission  # lazy: kernel module

        transmission_fn = transmission
    p = _single(profile)
    mass, alpha = float(p.mass_m0[0]), float(p.nonparabolicity_per_ev[0])
    e0 = energy_mev * 1e-3
    k0 = np.sqrt(mass * e0 * (1 + alpha * e0) / HBAR2_2M0_EV_NM2)
    s_k = 1.0 / (2.0 * width_nm)
    k = np.linspace(k0 - 6 * s_k, k0 + 6 * s_k, n_points)
    weight = np.exp(-0.5 * ((k - k0) / s_k) ** 2) * (k[1] - k[0]) / (np.sqrt(2 * np.pi) * s_k)
    kk = k[k > 0]
    x = HBAR2_2M0_EV_NM2 * kk**2 / mass
    kinetic = 2 * x / (1 + np.sqrt(1 + 4 * alpha * x))  # root of alpha E^2 + E - x = 0
    out = transmission_fn(p.edge_ev[0] + kinetic, profile=p)
    t = np.asarray(out[0] if isinstance(out, tuple) else out, float).reshape(kk.shape)
    return float(np.sum(weight[k > 0] * t))
