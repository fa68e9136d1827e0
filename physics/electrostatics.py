"""Self-consistent electrostatics: 1D Poisson with Thomas-Fermi electrons.

An alternative to the linear bias drop (:func:`physics.bands.linear_profile`)
selected by ``[model] electrostatics = "self-consistent"``. Poisson's
equation for the electron potential energy ``U`` (eV) [1]_,

    d/dx (eps dU/dx) = q (N_D^+ - n),

is solved on the slices of the stack plus a finite length of each contact
(``contact_nm``, default 80 nm, several depletion widths at 1e17-1e18
cm^-3) by a finite-volume scheme (harmonic mean of the permittivity between
slice centres). The donors are fully ionised. The electrons outside the
double-barrier region follow the Thomas-Fermi approximation with
Fermi-Dirac statistics [2]_,

    n(x) = N_c(x) F_1/2((mu(x) - E_c(x)) / kT),

with the emitter's quasi-Fermi level ``mu_E`` on the emitter side of the
middle of the barrier region and the collector's ``mu_C = mu_E - qV`` on the
collector side. Inside the barrier region (first barrier to last barrier,
a barrier being a layer whose edge is more than :data:`BARRIER_EV` above both
contacts) no Thomas-Fermi charge is counted; instead the electrons stored in
the quasi-bound states (:func:`well_sheet_density_cm2`, a simple documented
estimate) are spread uniformly over the well slices, iterated to
self-consistency around the Poisson solve (``well_charge=True``, default).
Boundary conditions at the far ends of the contact regions are Dirichlet
values of bulk charge neutrality (emitter edge at 0, collector edge at
``mu_E - mu_C - V``), the same as the linear model's end points; the field
there is then close to zero when the contact regions are long enough
(checked by the tests).

The nonlinear Poisson system is solved by Newton's method with a tridiagonal
Jacobian (:func:`scipy.linalg.solve_banded`), each step scaled down so that
no node moves by more than :data:`MAX_STEP_EV` (damping), from the linear
drop or a given start; it stops when the largest update is below
``tolerance_ev`` and raises :class:`ElectrostaticsConvergenceError`
after ``max_iterations``. The well charge is a scalar per (stack, bias),
found as the root of ``F(n_w) - n_w`` (``F``: the charge of the states of
the potential that ``n_w`` produces, each evaluation a full search for the
states, so ``F`` is one function of ``n_w``) by secant steps until the root
is bracketed and Illinois regula falsi after (from a warm start, towards the
root nearest it), an iteration that also raises
that error after ``max_well_iterations``.

Known limits: the quasi-bound states are detected on a coarse grid of
``T(E)``, so ``F`` can jump when a peak appears or disappears from detection;
such a jump is accepted as the fixed point to the bracket width. With the
charge estimate used here the stored charge vanishes as a state reaches the
injecting band edge, so the shift of the peak voltage by the stored charge is
small and no bistability is resolved for the demo stack on a 50 mV grid.
:func:`physics.iv.current_at_bias` solves every bias from the linear drop, so
in a bistable range it reports one branch; :func:`wellwright.physics.iv.sweep_hysteresis` gives both.

The resulting potential, including the band bending in both contact
regions (accumulation in front of the emitter barrier, depletion behind the
collector barrier), feeds :func:`physics.bands.profile_from_potential`; the
contact regions become slices of the profile, so the kernel sees the
accumulation notch and the depletion region.

References
----------
.. [1] S. M. Sze and K. K. Ng, Physics of Semiconductor Devices, 3rd ed.
   (Wiley, 2007), ch. 1-2 (Poisson's equation, depletion approximation).
.. [2] J. S. Blakemore, Solid-State Electron. 25, 1067 (1982) (F_1/2).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, fields, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from .bands import (
    Profile,
    SliceGrid,
    builtin_offset_ev,
    profile_builder,
    profile_from_potential,
    real_nodes,
    slice_grid,
)
from .constants import BOLTZMANN_EV_K, ELEMENTARY_CHARGE_C, VACUUM_PERMITTIVITY_F_M
from .fermi import (
    effective_density_of_states_cm3,
    fermi_dirac_half_spline,
    fermi_dirac_half_tabulated,
    fermi_dirac_zero,
    fermi_level_ev,
)
from .transmission import compiled_kernel

if TYPE_CHECKING:
    from .stack import LayerTable

__all__ = [
    "ElectrostaticsConvergenceError",
    "PoissonSolution",
    "solve_poisson_1d",
    "extended_slice_grid",
    "solve_stack_poisson",
    "solve_by_continuation",
    "solve_self_consistent",
    "self_consistent_profile",
    "well_sheet_density_cm2",
    "well_charge_residual_cm2",
]

#: Layers whose edge lies this far above both contacts' edges count as barriers, eV.
BARRIER_EV = 0.05
#: Largest change of the potential of any node in one Newton step, eV.
MAX_STEP_EV = 0.1
#: The Poisson-Newton solve's convergence (largest update, eV) and its iteration limit.
POISSON_TOLERANCE_EV = 1e-7
POISSON_MAX_ITERATIONS = 60
CONTACT_NM = 80.0
#: Width of the contact-region slice next to the stack, nm; the slices grow outwards.
CONTACT_SLICE_NM = 0.5
CONTACT_GRADING = 1.15
#: Well-charge iteration: mixing step, relative tolerance and absolute tolerance (cm^-2;
#: 1e7 cm^-2 changes the field by about 14 V/cm).
WELL_MIXING = 0.5
WELL_TOLERANCE = 1e-4
WELL_ABS_CM2 = 1e7
#: Crowding of the well-state search's 64 coarse nodes towards the injecting edge
#: (:func:`physics.resonances.find_resonances`): a uniform grid misfits the state that
#: carries the charge when it nears that edge (measured on as-grown InGaAs/AlAs stacks:
#: up to 16 % of the largest charge off, noisy in bias, so the I-V showed isolated 20 %
#: spikes before the peak); with nodes at u**3 the charge is within 3e-4 of a
#: 2048-node uniform grid on the same stacks.
WELL_SEARCH_EDGE_POWER = 3.0
#: The well-state search's node count (the coarse grid above) ...
WELL_SEARCH_NODES = 64
#: ... and, where the injecting side holds a barrier of its own (the space-charge hump of a
#: thick undoped spacer: a WKB action ``int kappa dz`` at the injecting contact's band edge
#: over the slices between that contact and the first barrier above
#: :data:`WELL_SEARCH_HUMP_ACTION`), this many. Below such a hump the well's states and
#: the states of the pocket between the hump and the barrier are coupled to the contact
#: through the hump only and mix: lines of 1e-9 to 1e-4 eV, some 10 meV apart, 0.15 eV
#: above the edge, where the 64 nodes are 11 meV apart and show one of four lines at
#: some potentials and another at the next, so the charge map jumped by three orders of
#: magnitude between charges 1 % apart (measured 2026-12-05 on a GaAs/AlAs stack at
#: 400 K with 40 and 100 nm spacers, reverse bias: action 48-56; the single solves'
#: charges 0 to 1.8e10 cm^-2 at biases 1 mV apart). On 4096 nodes the charge there is
#: within 2.5e-4 of 16384 nodes over -0.6 to -0.1 V (101 biases) and continuous in bias
#: but at the model's own folds; 1024 nodes still missed a line 8e-7 eV wide (peak 0.13)
#: at 3 of those biases (6 % of the largest charge; the single solves fell to 0 there).
#: Cost: the search of such an entry about 64 times the usual one (101 biases of that
#: stack solved in 4 s against 0.3 s); stacks below the threshold are not touched.
WELL_SEARCH_DENSE_NODES = 4096
#: The action above which the dense search is used. The 218 stacks of
#: ``benchmarks/check_default_metrics.py`` reach 3.2 (and the GaAs example 4.3 in reverse
#: bias), so they keep the 64 nodes; at 8.6-10.5 (20 nm spacers, 400 K) the two searches
#: give the same charge within 1.6e-5, so switching there is continuous; at 14-15 (30 nm)
#: the 64 nodes are 7.6 % off (measured 2026-12-05).
WELL_SEARCH_HUMP_ACTION = 6.0
#: Resistance between two neighbouring zero-width Poisson nodes, relative to the smallest
#: of the row (they are tied together; see :func:`_fixed_parts`).
ZERO_WIDTH_TIE = 1e-9


class ElectrostaticsConvergenceError(RuntimeError):
    """The Poisson-Newton iteration did not converge in its bounded number of steps."""


@dataclass(frozen=True)
class PoissonSolution:
    """Result of :func:`solve_poisson_1d`; arrays ``batch + (n_nodes,)``."""

    potential_ev: np.ndarray  #: electron potential energy U, eV
    electron_cm3: np.ndarray  #: Thomas-Fermi electrons plus the well charge
    iterations: int
    well_sheet_cm2: np.ndarray | None = None  #: electrons in the well, cm^-2, ``batch``
    #: entries given up because their well charge was shown to lie below
    #: ``abandon_below_cm2`` (:func:`solve_stack_poisson`): not converged; ``batch``
    abandoned: np.ndarray | None = None
    #: with ``keep_failed`` (:func:`solve_stack_poisson`): the entries whose well-charge
    #: iteration did not converge in its steps (their last iterate); ``batch``
    failed: np.ndarray | None = None


def _fixed_parts(
    shape,
    *,
    width_nm,
    permittivity_r,
    donor_cm3,
    band_offset_ev,
    mass_m0,
    temperature_k,
    electron_mask,
):
    """The parts of :func:`solve_poisson_1d`'s system that do not change with ``U``, in SI
    units, broadcast to ``shape`` (``batch + (n_nodes,)``): widths (m), permittivities,
    donors (m^-3), band offsets, the electron mask, kT ``batch + (1,)``, N_c (m^-3) and the
    conductances between neighbouring centres ``batch + (n_nodes - 1,)`` (F/m^2)."""
    batch = shape[:-1]
    w = np.broadcast_to(width_nm, shape) * 1e-9
    eps = np.broadcast_to(permittivity_r, shape) * VACUUM_PERMITTIVITY_F_M
    donors = np.broadcast_to(donor_cm3, shape) * 1e6
    offset = np.broadcast_to(band_offset_ev, shape)
    mask = np.broadcast_to(electron_mask, shape)
    kt = np.broadcast_to(BOLTZMANN_EV_K * np.asarray(temperature_k, float), batch)[..., None]
    nc = (
        effective_density_of_states_cm3(
            np.broadcast_to(mass_m0, shape),
            temperature_k=np.broadcast_to(kt / BOLTZMANN_EV_K, shape),
        )
        * 1e6
    )
    # conductance between neighbouring centres: 1/G = (w_i/2)/eps_i + (w_i+1/2)/eps_i+1
    resist = 0.5 * w[..., :-1] / eps[..., :-1] + 0.5 * w[..., 1:] / eps[..., 1:]
    if np.any(resist[..., [0, -1]] <= 0) or not np.all(np.any(resist > 0, axis=-1)):
        raise ValueError("a contact node's neighbour has zero width")
    # Two neighbouring zero-width nodes (a stack's padding slices in a batch, see
    # extended_slice_grid) are tied together: a resistance ZERO_WIDTH_TIE times the row's
    # smallest, so the nodes of non-zero width see the stack's own system to ~1e-9.
    smallest = np.min(np.where(resist > 0, resist, np.inf), axis=-1, keepdims=True)
    resist = np.where(resist > 0, resist, ZERO_WIDTH_TIE * smallest)
    return w, eps, donors, offset, mask, kt, nc, 1.0 / resist


class _NewtonSystem:
    """The parts of the Poisson system that stay fixed while the well charge is iterated
    (conductances, widths, donors, band offsets, where electrons are counted, N_c, kT; SI
    units as in :func:`solve_poisson_1d`), one row per profile, for the compiled Newton
    iteration (``physics/_slices.c``: ``poisson_newton``)."""

    def __init__(self, *, g, w, donors, offset, mask, nc, kt):
        def c(a):
            return np.ascontiguousarray(a, dtype=float)

        self.g, self.w, self.donors, self.offset = c(g), c(w), c(donors), c(offset)
        self.mask, self.nc, self.kt = c(mask), c(nc), c(kt).reshape(-1)
        # the routine and the F_1/2 table, looked up once (a setup is made again when the
        # routine in use changes: _solve_setup)
        self.newton = compiled_kernel("poisson_newton")
        self.spline = fermi_dirac_half_spline()

    def solve(self, rows, u, mu, fixed, *, tolerance_ev, max_iterations, max_step_ev):
        """Solve entry ``e`` (rows of ``u``, ``mu``, ``fixed`` in eV, eV, m^-3; ``u`` holds
        the start with the boundary values in place, overwritten where it is a writeable
        C-ordered float array) on profile row ``rows[e]``; returns the potential, the
        electron density (m^-3) and the largest number of steps used."""
        n = self.w.shape[-1]
        if not (u.flags.c_contiguous and u.flags.writeable and u.dtype == float):
            u = np.array(u, dtype=float, order="C")
        electrons = np.empty(u.shape)
        used, failed, worst = self.newton(
            n,
            np.ascontiguousarray(rows, dtype=np.int64),
            u,
            self.g,
            self.w,
            self.donors,
            self.offset,
            np.ascontiguousarray(mu, dtype=float),
            self.mask,
            np.ascontiguousarray(fixed, dtype=float),
            self.nc,
            self.kt,
            *self.spline,
            float(tolerance_ev),
            float(max_step_ev),
            int(max_iterations),
            ELEMENTARY_CHARGE_C,
            electrons,
        )
        if failed and not np.isfinite(worst):
            raise ElectrostaticsConvergenceError(
                f"Poisson-Newton iteration diverged (non-finite update) at step {used}"
            )
        if failed:
            raise ElectrostaticsConvergenceError(
                f"Poisson-Newton iteration did not converge in {max_iterations} steps: "
                f"largest update {worst:.3g} eV > tolerance {tolerance_ev:g} eV"
            )
        return u, electrons, used


def solve_poisson_1d(
    *,
    width_nm: np.ndarray,
    permittivity_r: np.ndarray,
    donor_cm3: np.ndarray,
    band_offset_ev: np.ndarray,
    fermi_ev: np.ndarray,
    mass_m0: np.ndarray,
    temperature_k: np.ndarray | float,
    electron_mask: np.ndarray,
    left_ev: np.ndarray,
    right_ev: np.ndarray,
    initial_ev: np.ndarray,
    tolerance_ev: float = POISSON_TOLERANCE_EV,
    max_iterations: int = POISSON_MAX_ITERATIONS,
    fixed_electron_cm3: np.ndarray | float = 0.0,
    max_step_ev: float = MAX_STEP_EV,
) -> PoissonSolution:
    """Solve ``d/dx(eps dU/dx) = q (N_D - n(U))`` on cells by damped Newton ([1]_).

    Node ``i`` is the centre of a cell of width ``width_nm[i]``; the first and
    last nodes (normally of width 0) carry the Dirichlet values ``left_ev`` and
    ``right_ev``. All arrays broadcast to ``batch + (n_nodes,)`` except
    ``left_ev``, ``right_ev`` (``batch``) and ``temperature_k`` (``batch`` or scalar).

    Parameters
    ----------
    band_offset_ev
        Band edge without the electrostatic potential; ``E_c = offset + U``.
    fermi_ev
        Local quasi-Fermi level, eV (same frame as the band edge).
    electron_mask
        True where free electrons (Thomas-Fermi) are counted.
    initial_ev
        Start of the iteration (its end values are replaced by the boundary values).
    fixed_electron_cm3
        Extra electron density that does not depend on ``U`` (the well charge).
    max_step_ev
        Damping: no node moves by more than this in one Newton step, eV.

    Raises
    ------
    ElectrostaticsConvergenceError
        When the largest update is still above ``tolerance_ev`` after ``max_iterations`` steps.
    """
    u = np.array(initial_ev, float, copy=True)
    shape = u.shape
    batch = shape[:-1]
    n_nodes = shape[-1]
    u[..., 0] = np.broadcast_to(left_ev, batch)
    u[..., -1] = np.broadcast_to(right_ev, batch)
    w, eps, donors, offset, mask, kt, nc, g = _fixed_parts(
        shape,
        width_nm=width_nm,
        permittivity_r=permittivity_r,
        donor_cm3=donor_cm3,
        band_offset_ev=band_offset_ev,
        mass_m0=mass_m0,
        temperature_k=temperature_k,
        electron_mask=electron_mask,
    )
    mu = np.broadcast_to(fermi_ev, shape)
    fixed = np.broadcast_to(np.asarray(fixed_electron_cm3, float) * 1e6, shape)

    def density(u_):
        eta = (mu - offset - u_) / kt
        f, df = fermi_dirac_half_tabulated(eta)
        n = np.where(mask, nc * f, 0.0) + fixed
        dn_du = np.where(mask, -nc * df / kt, 0.0)
        return n, dn_du

    flat = int(np.prod(batch)) if batch else 1
    if compiled_kernel("poisson_newton") is not None and n_nodes >= 3:
        # the same iteration compiled, each entry to its own tolerance (the loop of
        # _newton_reference is the reference; tests/test_kernel_backends.py compares the two)
        system = _NewtonSystem(
            g=g.reshape(flat, n_nodes - 1),
            w=w.reshape(flat, n_nodes),
            donors=donors.reshape(flat, n_nodes),
            offset=offset.reshape(flat, n_nodes),
            mask=mask.reshape(flat, n_nodes),
            nc=nc.reshape(flat, n_nodes),
            kt=kt.reshape(flat),
        )
        u_flat, electrons, used = system.solve(
            np.arange(flat),
            u.reshape(flat, n_nodes),
            mu.reshape(flat, n_nodes),
            fixed.reshape(flat, n_nodes),
            tolerance_ev=tolerance_ev,
            max_iterations=max_iterations,
            max_step_ev=max_step_ev,
        )
        return PoissonSolution(
            potential_ev=u_flat.reshape(shape),
            electron_cm3=electrons.reshape(shape) * 1e-6,
            iterations=used,
        )
    return _newton_reference(
        u,
        g,
        w,
        donors,
        density,
        tolerance_ev=tolerance_ev,
        max_iterations=max_iterations,
        max_step_ev=max_step_ev,
    )


def _newton_reference(u, g, w, donors, density, *, tolerance_ev, max_iterations, max_step_ev):
    """The damped Newton iteration of :func:`solve_poisson_1d` in numpy, every system of the
    batch in one banded solve; ``u`` (start, boundary values set) is updated in place;
    ``density(u)`` gives the electron density (m^-3) and its derivative."""
    from scipy.linalg import solve_banded  # here: the linear model never pays its import

    batch, n_nodes = u.shape[:-1], u.shape[-1]
    flat = int(np.prod(batch)) if batch else 1
    q = ELEMENTARY_CHARGE_C
    worst = np.inf
    for iteration in range(1, max_iterations + 1):
        n, dn_du = density(u)
        flux = g * np.diff(u, axis=-1)  # C/m^2 (U in V-equivalent eV)
        residual = (
            flux[..., 1:] - flux[..., :-1] - q * w[..., 1:-1] * (donors[..., 1:-1] - n[..., 1:-1])
        )
        diag = -(g[..., 1:] + g[..., :-1]) + q * w[..., 1:-1] * dn_du[..., 1:-1]
        ab = np.zeros(batch + (3, n_nodes - 2))
        ab[..., 0, 1:] = g[..., 1:-1]  # coupling i -> i+1 for interior rows
        ab[..., 1, :] = diag
        ab[..., 2, :-1] = g[..., 1:-1]
        # every system of the batch in one banded solve: laid end to end they stay
        # decoupled, because each block's first upper and last lower entries are zero
        ab_long = ab.reshape(flat, 3, n_nodes - 2).transpose(1, 0, 2).reshape(3, -1)
        step = solve_banded((1, 1), ab_long, -residual.reshape(-1), check_finite=False)
        step = step.reshape(batch + (n_nodes - 2,))
        biggest = np.max(np.abs(step), axis=-1, keepdims=True)
        scale = np.minimum(1.0, max_step_ev / np.maximum(biggest, 1e-300))
        u[..., 1:-1] += scale * step
        worst = float(np.max(biggest)) if biggest.size else 0.0
        if not np.isfinite(worst):
            raise ElectrostaticsConvergenceError(
                f"Poisson-Newton iteration diverged (non-finite update) at step {iteration}"
            )
        if worst < tolerance_ev:
            n, _ = density(u)
            return PoissonSolution(potential_ev=u, electron_cm3=n * 1e-6, iterations=iteration)
    raise ElectrostaticsConvergenceError(
        f"Poisson-Newton iteration did not converge in {max_iterations} steps: "
        f"largest update {worst:.3g} eV > tolerance {tolerance_ev:g} eV"
    )


def extended_slice_grid(
    table: LayerTable,
    *,
    slice_nm: float = 0.25,
    contact_nm: float = CONTACT_NM,
    contact_slice_nm: float = CONTACT_SLICE_NM,
) -> SliceGrid:
    """Slices of the stack plus ``contact_nm`` of each contact as ordinary slices.

    The first and last slices (width 0) are the semi-infinite contacts at
    ``-contact_nm`` and ``L + contact_nm``; the contact-region slices carry
    the contact's layer index, so :func:`physics.bands.profile_from_potential`
    gives them the contact's material. Inside the stack every stack has its own
    slice count per layer (:func:`physics.bands.slice_grid` with ``own_counts``),
    padded to the batch's count with zero-width slices at the layer's end.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    slice_nm
        Largest slice width inside the stack, nm.
    contact_nm
        Length of each contact region solved for, nm.
    contact_slice_nm
        Width of the contact-region slice next to the stack, nm; the slices grow outwards by
        :data:`CONTACT_GRADING`.
    """
    # each stack's own slices, padded with zero-width ones (tied nodes without charge in the
    # Poisson system, identities in the transmission): a stack's potential does not depend
    # on its batch partners
    base = slice_grid(table, slice_nm=slice_nm, own_counts=True)
    # graded: contact_slice_nm next to the stack, growing by CONTACT_GRADING per slice
    n_ext = max(
        1,
        int(
            np.ceil(
                np.log1p(contact_nm * (CONTACT_GRADING - 1.0) / contact_slice_nm)
                / np.log(CONTACT_GRADING)
            )
        ),
    )
    w_near = CONTACT_GRADING ** np.arange(n_ext)
    w_near *= contact_nm / w_near.sum()  # nearest the stack first
    n_stacks = table.n_stacks
    li = np.concatenate(
        [[0] * (n_ext + 1), base.layer_index[1:-1], [table.n_layers - 1] * (n_ext + 1)]
    )
    zero = np.zeros((n_stacks, 1))
    left = np.broadcast_to(w_near[::-1], (n_stacks, n_ext))
    right_ext = np.broadcast_to(w_near, (n_stacks, n_ext))
    width = np.concatenate([zero, left, base.width_nm[:, 1:-1], right_ext, zero], axis=1)
    right = np.cumsum(width, axis=1)
    center = right - 0.5 * width - contact_nm
    return SliceGrid(layer_index=li, width_nm=width, center_nm=center)


def potential_on_grid(
    potential_ev: np.ndarray, *, source_center_nm: np.ndarray, target_center_nm: np.ndarray
) -> np.ndarray:
    """A potential on one slice grid carried to another of the same stacks, by position.

    A batch pads every stack's slices of a layer to the largest count in the batch
    (:func:`extended_slice_grid`), so a solve of some of a batch's stacks has other padding
    than the batch's; this moves a start potential between them (linear between nodes; the
    potential is continuous).

    Parameters
    ----------
    potential_ev
        ``(n_stacks, n_biases, n_source)`` potential on the source nodes, eV.
    source_center_nm, target_center_nm
        ``(n_stacks, n_source)`` and ``(n_stacks, n_target)`` node positions, nm
        (:attr:`SliceGrid.center_nm`).

    Returns
    -------
    ndarray
        ``(n_stacks, n_biases, n_target)``; ``potential_ev`` itself when the grids agree.
    """
    if source_center_nm.shape == target_center_nm.shape and np.array_equal(
        source_center_nm, target_center_nm
    ):
        return potential_ev
    n_stacks, n_biases = potential_ev.shape[:2]
    out = np.empty((n_stacks, n_biases, target_center_nm.shape[1]))
    for s in range(n_stacks):
        for b in range(n_biases):
            out[s, b] = np.interp(target_center_nm[s], source_center_nm[s], potential_ev[s, b])
    return out


def _barrier_region(table: LayerTable, grid: SliceGrid) -> tuple[np.ndarray, np.ndarray]:
    """Mask of slices inside [first barrier, last barrier] and the split position, per stack."""
    edge = table.edge_ev
    top = np.maximum(edge[:, :1], edge[:, -1:])
    is_barrier = edge > top + BARRIER_EV
    is_barrier[:, [0, -1]] = False
    li = grid.layer_index
    n_stacks = table.n_stacks
    inside = np.zeros((n_stacks, li.size), bool)
    split = np.empty(n_stacks)
    length = grid.center_nm[:, -1] - grid.center_nm[:, 0]
    for s in range(n_stacks):  # per stack: a layer search, not physics
        idx = np.nonzero(is_barrier[s])[0]
        if idx.size == 0:
            interior = (li > 0) & (li < table.n_layers - 1)
            split[s] = (
                0.5 * (grid.center_nm[s, interior].min() + grid.center_nm[s, interior].max())
                if interior.any()
                else 0.0
            )
            continue
        inside[s] = (li >= idx[0]) & (li <= idx[-1])
        pos = grid.center_nm[s, inside[s]]
        split[s] = 0.5 * (pos.min() + pos.max())
    del length
    return inside, split


def _injecting_sides(inside: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The nodes before the first barrier and after the last (``inside``: the barrier region
    of :func:`_barrier_region`, ``(n_stacks, n_nodes)``): the injecting side of forward and
    of reverse bias; none for a stack without barriers."""
    node = np.arange(inside.shape[-1])
    has = inside.any(axis=-1, keepdims=True)
    first = np.argmax(inside, axis=-1)[:, None]
    last = inside.shape[-1] - 1 - np.argmax(inside[:, ::-1], axis=-1)[:, None]
    return has & (node < first), has & (node > last)


def _hump_action(edge_ev, mass_m0, width_nm, side, injecting_ev):
    """WKB action ``int kappa dz`` at the injecting contact's band edge ``injecting_ev``
    (batch-shaped) over the slices ``side`` (the injecting side, :func:`_injecting_sides`)
    whose edge lies above it; arrays ``batch + (n_nodes,)`` or broadcasting to that
    (Landau and Lifshitz, Quantum Mechanics, WKB transparency ``exp(-2 int kappa dz)``)."""
    from .constants import HBAR2_2M0_EV_NM2

    above = np.maximum(edge_ev - np.asarray(injecting_ev)[..., None], 0.0)
    kappa = np.sqrt(above * mass_m0 / HBAR2_2M0_EV_NM2)
    return np.sum(np.where(side, kappa * width_nm, 0.0), axis=-1)


def solve_stack_poisson(
    table: LayerTable,
    bias_v: np.ndarray,
    *,
    slice_nm: float = 0.25,
    contact_nm: float = CONTACT_NM,
    contact_slice_nm: float = CONTACT_SLICE_NM,
    initial_ev: np.ndarray | None = None,
    tolerance_ev: float = POISSON_TOLERANCE_EV,
    max_iterations: int = POISSON_MAX_ITERATIONS,
    well_charge: bool = True,
    initial_well_cm2: np.ndarray | None = None,
    max_well_iterations: int = 60,
    max_step_ev: float = MAX_STEP_EV,
    abandon_below_cm2: np.ndarray | None = None,
    keep_failed: bool = False,
) -> tuple[SliceGrid, PoissonSolution]:
    """Self-consistent potential of each stack at each bias.

    Parameters
    ----------
    table
        ``n_stacks`` stacks.
    bias_v
        ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    initial_ev
        Optional start ``(n_stacks, n_biases, n_nodes)`` (e.g. the previous
        bias's solution); default the linear drop across the stack.
    well_charge
        Include the charge of the quasi-bound states
        (:func:`well_sheet_density_cm2`), iterated to self-consistency around
        the Poisson-Newton solve (secant, then Illinois regula falsi; see the
        module notes); raises :class:`ElectrostaticsConvergenceError`
        after ``max_well_iterations``.
    initial_well_cm2
        Start of the well sheet density ``(n_stacks, n_biases)``, cm^-2.
    max_step_ev
        Damping of the Poisson-Newton steps (see :func:`solve_poisson_1d`).
    abandon_below_cm2
        Optional ``(n_stacks, n_biases)`` charges, cm^-2: an entry whose well-charge
        iteration evaluates a charge at or below this with ``F(n_w) < n_w`` (so its root
        lies in ``[0, n_w]``: ``F >= 0``) stops there, not converged, and is flagged in
        ``solution.abandoned`` (a continuation that only needs to know that the charge
        collapsed, :func:`physics.iv.sweep`'s up-branch check).
    keep_failed
        Entries whose well-charge iteration does not converge keep their last iterate and
        are flagged in ``solution.failed`` instead of raising (the Poisson-Newton solve
        still raises; :func:`solve_self_consistent` mends them).

    Returns
    -------
    grid, solution
        The extended slice grid and the potential on its nodes,
        ``(n_stacks, n_biases, n_nodes)``.
    """
    setup = _solve_setup(
        table,
        slice_nm=slice_nm,
        contact_nm=contact_nm,
        contact_slice_nm=contact_slice_nm,
        tolerance_ev=tolerance_ev,
        max_iterations=max_iterations,
        max_step_ev=max_step_ev,
    )
    grid = setup.grid
    n_stacks = table.n_stacks
    bias = np.asarray(bias_v, float)
    bias = np.broadcast_to(
        bias if bias.ndim == 2 else np.atleast_1d(bias)[None, :],
        (n_stacks, np.atleast_1d(bias).shape[-1]),
    )
    right, fermi = setup.contacts(bias)
    if initial_ev is None:
        initial_ev = setup.linear_drop(right)
    poisson = setup.poisson
    well = (
        np.zeros(bias.shape)
        if initial_well_cm2 is None
        else np.broadcast_to(initial_well_cm2, bias.shape).copy()
    )
    has_well = setup.target is not None
    solution = poisson(initial_ev, well if well_charge and has_well else 0.0 * well, fermi, right)
    if not (well_charge and has_well):
        return grid, replace(solution, well_sheet_cm2=np.zeros(bias.shape))
    return grid, _iterate_well_charge(
        poisson,
        solution,
        well,
        max_well_iterations=max_well_iterations,
        well_target=setup.target,
        bias=bias,
        fermi=fermi,
        right=right,
        abandon_below_cm2=(
            None
            if abandon_below_cm2 is None
            else np.broadcast_to(abandon_below_cm2, bias.shape).copy()
        ),
        keep_failed=keep_failed,
    )


@dataclass(frozen=True)
class _SolveSetup:
    """The parts of :func:`solve_stack_poisson` that depend on the stacks and the settings
    only (not on the bias, the start or the charge)."""

    grid: SliceGrid
    mu_e: np.ndarray  #: emitter Fermi level, eV, ``(n_stacks,)``
    builtin_ev: np.ndarray  #: :func:`physics.bands.builtin_offset_ev`
    emitter_side: np.ndarray  #: nodes on the emitter's side of the split
    frac: np.ndarray  #: the linear start's fraction of the drop at each node
    poisson: Callable[..., PoissonSolution]  #: :func:`_stack_poisson_solver`
    #: :func:`_well_charge_target`; None where no stack has a well
    target: Callable[[np.ndarray, np.ndarray], np.ndarray] | None

    def contacts(self, bias: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The collector's potential (eV, as in the linear model) and each node's
        quasi-Fermi level (eV) at biases ``bias`` ``(n_stacks, n_biases)``."""
        right = -(bias + self.builtin_ev[:, None])
        fermi = np.where(
            self.emitter_side[:, None, :],
            self.mu_e[:, None, None],
            (self.mu_e[:, None] - bias)[:, :, None],
        )
        return right, fermi

    def linear_drop(self, right: np.ndarray) -> np.ndarray:
        """The potential falling linearly to the collector's ``right`` ``(n_stacks, n_biases)``
        (the solve's default start), ``(n_stacks, n_biases, n_nodes)``, eV."""
        return right[:, :, None] * self.frac[:, None, :]


#: The well-charge step keeps its per-shape arrays (:class:`_WellChargeStep`) for at most
#: this many batch shapes (or sets of entries), each of at most this many slice values (3
#: arrays of 8 bytes each).
STEP_KEEP_SHAPES = 8
STEP_KEEP_VALUES = 1 << 15

#: Setups of the last few solves (a sweep solves the same stacks 20 to 30 times: its main
#: solve, the refinement rounds, the up-branch steps); found by the stacks' values, not by
#: the table object, so an equal table made again reuses it and a changed one does not.
_SETUPS: list = []
_SETUPS_KEPT = 8


_TABLE_FIELDS: list = []  # the names of LayerTable's fields (read once)
#: the compiled routines a setup is built around (a setup is made again when one is not in use)
_SETUP_ROUTINES = ("poisson_newton", "grid_states", "charge_arguments", "charge_sums")


def _table_values(table: LayerTable) -> tuple:
    if not _TABLE_FIELDS:
        _TABLE_FIELDS.extend(f.name for f in fields(table))
    return tuple(getattr(table, name) for name in _TABLE_FIELDS)


def _same_values(a: tuple, b: tuple) -> bool:
    # (x == y).all() is np.array_equal for arrays of one shape (NaN unequal), without its
    # Python layer: this runs for every solve of a sweep
    return all(
        (x is None and y is None)
        or (x is not None and y is not None and x.shape == y.shape and bool((x == y).all()))
        for x, y in zip(a, b, strict=True)
    )


def _solve_setup(table: LayerTable, **settings) -> _SolveSetup:
    """The setup of :func:`solve_stack_poisson` for ``table`` and ``settings`` (its
    keyword arguments ``slice_nm``, ``contact_nm``, ``contact_slice_nm``, ``tolerance_ev``,
    ``max_iterations``, ``max_step_ev``), made once and kept in :data:`_SETUPS`."""
    values = _table_values(table)
    # what the setup also reads: the module's constants and the routines in use
    settings = dict(
        settings,
        constants=(BARRIER_EV, WELL_SEARCH_EDGE_POWER, CONTACT_GRADING, ZERO_WIDTH_TIE),
        compiled=tuple(compiled_kernel(n) is not None for n in _SETUP_ROUTINES),
    )
    for entry in _SETUPS:
        if entry[1] == settings and _same_values(entry[0], values):
            return entry[2]
    values = tuple(None if v is None else np.array(v, copy=True) for v in values)
    setup = _make_setup(
        table, **{k: v for k, v in settings.items() if k not in ("constants", "compiled")}
    )
    _SETUPS.insert(0, (values, settings, setup))
    del _SETUPS[_SETUPS_KEPT:]
    return setup


def _make_setup(
    table: LayerTable,
    *,
    slice_nm: float,
    contact_nm: float,
    contact_slice_nm: float,
    tolerance_ev: float,
    max_iterations: int,
    max_step_ev: float,
) -> _SolveSetup:
    grid = extended_slice_grid(
        table, slice_nm=slice_nm, contact_nm=contact_nm, contact_slice_nm=contact_slice_nm
    )
    n_stacks = table.n_stacks
    li = grid.layer_index
    mu_e = fermi_level_ev(
        table.doping_cm3[:, 0], mass_m0=table.mass_m0[:, 0], temperature_k=table.temperature_k
    )
    inside, split = _barrier_region(table, grid)
    offset = (table.edge_ev - table.edge_ev[:, :1])[:, li]
    length = grid.center_nm[:, -1] - grid.center_nm[:, 0] - 2.0 * contact_nm
    frac = np.clip(grid.center_nm / np.maximum(length, 1e-9)[:, None], 0.0, 1.0)
    well_slices = inside & (offset < np.maximum(offset[:, :1], offset[:, -1:]) + BARRIER_EV)
    well_nm = np.sum(np.where(well_slices, grid.width_nm, 0.0), axis=1)
    poisson = _stack_poisson_solver(
        table,
        grid,
        inside=inside,
        offset=offset,
        well_slices=well_slices,
        well_nm=well_nm,
        tolerance_ev=tolerance_ev,
        max_iterations=max_iterations,
        max_step_ev=max_step_ev,
    )
    target = None
    if np.any(well_nm > 0):
        mass_w = np.array(
            [
                table.mass_m0[s, li[well_slices[s]]].min() if well_slices[s].any() else 1.0
                for s in range(n_stacks)
            ]
        )
        target = _well_charge_target(
            table, grid, mu_emitter_ev=mu_e, well_mass_m0=mass_w, sides=_injecting_sides(inside)
        )
    return _SolveSetup(
        grid=grid,
        mu_e=mu_e,
        builtin_ev=builtin_offset_ev(table),
        emitter_side=grid.center_nm < split[:, None],
        frac=frac,
        poisson=poisson,
        target=target,
    )


def _iterate_well_charge(
    poisson,
    solution,
    well,
    *,
    max_well_iterations,
    well_target,
    bias,
    fermi,
    right,
    abandon_below_cm2=None,
    keep_failed=False,
) -> PoissonSolution:
    """The well-charge iteration of :func:`solve_stack_poisson` around ``poisson``.

    Each (stack, bias) entry is its own problem. An entry's potential, density and charge
    go to the outputs the first time it converges (or settles, or is abandoned) and it
    leaves the iteration: each step computes the open entries only, in one flat batch
    (each entry carries its stack's row), so a stack's result does not depend on how long
    its batch partners iterate and converged entries cost nothing. (The compiled state
    search rounds a padded stack's entry differently with different partners, ~1e-13 in
    ``T``: tests/test_electrostatics.py.)

    Parameters
    ----------
    poisson
        ``poisson(start, well_cm2, fermi, right, stack)`` (:func:`_stack_poisson_solver`).
    solution
        The solve with the start charge ``well`` (cm^-2, ``(n_stacks, n_biases)``).
    max_well_iterations
        Limit of outer iterations.
    well_target
        ``well_target(potential_ev, bias_v, stack)``: the charge the states hold in a
        potential (:class:`_WellChargeStep`).
    bias, fermi, right
        Bias (V), quasi-Fermi levels and collector potential (eV) of each entry.
    abandon_below_cm2
        Optional charges, cm^-2, of each entry: see :func:`solve_stack_poisson`.
    keep_failed
        Entries still open after ``max_well_iterations`` keep their last iterate and are
        flagged in ``failed`` (else the iteration raises).
    """
    shape = bias.shape
    n_nodes = solution.potential_ev.shape[-1]
    # the outputs, one row per entry (stack-major, as the (n_stacks, n_biases) arrays)
    out_u = solution.potential_ev.reshape(-1, n_nodes).copy()
    out_n = solution.electron_cm3.reshape(-1, n_nodes).copy()
    out_well = np.array(well, dtype=float).reshape(-1)
    abandoned = np.zeros(bias.size, bool)
    # the open entries: their index in the outputs, their stack row and their arrays
    entry = np.arange(bias.size)
    stack = entry // shape[1]
    u = solution.potential_ev.reshape(-1, n_nodes)
    used = solution.iterations
    well = out_well.copy()
    bias = bias.reshape(-1)
    fermi = np.broadcast_to(fermi, shape + (n_nodes,)).reshape(-1, n_nodes)
    right = right.reshape(-1)
    below = None if abandon_below_cm2 is None else abandon_below_cm2.reshape(-1)
    root = _WellChargeRoot.start(well.shape, warm=well > 0)  # a cold start's charge is 0
    most = 0

    def result(iterations, failed=None):
        return PoissonSolution(
            potential_ev=out_u.reshape(shape + (n_nodes,)),
            electron_cm3=out_n.reshape(shape + (n_nodes,)),
            iterations=iterations,
            well_sheet_cm2=out_well.reshape(shape),
            abandoned=abandoned.reshape(shape) if below is not None else None,
            failed=failed,
        )

    for outer in range(1, max_well_iterations + 1):
        if entry.size == out_well.size:  # every entry open: the batch's own shape, whose
            # parts _WellChargeStep keeps (small batches); the same arithmetic per entry
            target = well_target(u.reshape(shape + (n_nodes,)), bias.reshape(shape)).reshape(-1)
        else:
            target = well_target(u, bias, stack)
        residual = target - well
        converged = np.abs(residual) <= WELL_TOLERANCE * np.abs(target) + WELL_ABS_CM2
        # the root lies in [0, well] (F >= 0 > residual): below the charge to give up at
        settled = root.settled
        if below is None:
            gone = None
            new = converged | settled
        else:
            gone = ~converged & ~settled & (residual < 0) & (well <= below)
            new = converged | settled | gone
        if new.any():
            out_u[entry[new]] = u[new]
            out_n[entry[new]] = solution.electron_cm3.reshape(-1, n_nodes)[new]
            out_well[entry[new]] = well[new]
            if gone is not None:
                abandoned[entry[new]] = gone[new]
            most = max(most, used + outer)
            if new.all():
                return result(most)
            keep = ~new
            entry, stack, u, well, bias, fermi, right = (
                x[keep] for x in (entry, stack, u, well, bias, fermi, right)
            )
            target, residual = target[keep], residual[keep]
            below = None if below is None else below[keep]
            root.keep_entries(keep)
        well = root.next_well(well, residual, target=target)
        solution = poisson(u, well, fermi, right, stack)
        u, used = solution.potential_ev, solution.iterations
    if keep_failed:  # the open entries' last iterates, flagged
        failed = np.zeros(out_well.size, bool)
        failed[entry] = True
        out_u[entry], out_well[entry] = u.reshape(-1, n_nodes), well
        out_n[entry] = solution.electron_cm3.reshape(-1, n_nodes)
        return result(max(most, used + max_well_iterations), failed.reshape(shape))
    raise ElectrostaticsConvergenceError(
        f"well-charge iteration did not converge in {max_well_iterations} steps: largest change "
        f"{float(np.max(np.abs(residual))):.3g} cm^-2"
    )


def _stack_poisson_solver(
    table: LayerTable,
    grid: SliceGrid,
    *,
    inside: np.ndarray,
    offset: np.ndarray,
    well_slices: np.ndarray,
    well_nm: np.ndarray,
    tolerance_ev: float,
    max_iterations: int,
    max_step_ev: float,
):
    """The Poisson solve of :func:`solve_stack_poisson`: ``poisson(start, well_cm2, fermi,
    right, stack=None)`` from a start potential with the well charge spread over
    ``well_slices``, on the batch's shape or on entries (``stack``: each one's row); the
    compiled Newton iteration on the stacks' fixed parts (built once) where it is built,
    else :func:`solve_poisson_1d`."""
    li = grid.layer_index
    n_stacks = table.n_stacks
    per_stack = {  # solve_poisson_1d's arguments of each stack, (n_stacks, n_nodes)
        "width_nm": grid.width_nm,
        "permittivity_r": table.permittivity_r[:, li],
        "donor_cm3": table.doping_cm3[:, li],
        "band_offset_ev": offset,
        "mass_m0": table.mass_m0[:, li],
        "electron_mask": ~inside,
    }
    system = None
    if compiled_kernel("poisson_newton") is not None and li.size >= 3:
        # the stacks' fixed parts once for every bias and well-charge step (compiled Newton)
        w, _, donors, offset_si, mask, kt, nc, g = _fixed_parts(
            (n_stacks, li.size), temperature_k=table.temperature_k, **per_stack
        )
        system = _NewtonSystem(
            g=g, w=w, donors=donors, offset=offset_si, mask=mask, nc=nc, kt=kt[:, 0]
        )
    rows_of: dict = {}  # the Newton system's row of each entry, per bias count
    spread_nm = np.maximum(well_nm, 1e-9)

    def poisson(start, well_cm2, fermi, right, stack=None):
        """``start``, ``fermi`` ``(n_stacks, n_biases, n_nodes)``, ``well_cm2``, ``right``
        ``(n_stacks, n_biases)``; or, with ``stack`` (the stack row of each of ``n``
        entries), ``(n, n_nodes)`` and ``(n,)``. The compiled Newton iteration gives each
        entry the same numbers either way."""
        if stack is None:
            spread, where = well_cm2 / spread_nm[:, None] * 1e7, well_slices[:, None, :]
        else:
            spread, where = well_cm2 / spread_nm[stack] * 1e7, well_slices[stack]
        shape = right.shape + (li.size,)
        if system is None:  # the numpy statement, on the stacks' rows of each entry
            fixed = np.where(where, spread[..., None], 0.0)
            return solve_poisson_1d(
                **{k: v[:, None, :] if stack is None else v[stack] for k, v in per_stack.items()},
                fermi_ev=fermi,
                temperature_k=(
                    table.temperature_k[:, None] if stack is None else table.temperature_k[stack]
                ),
                left_ev=np.zeros(right.shape),
                right_ev=right,
                initial_ev=np.broadcast_to(start, shape),
                tolerance_ev=tolerance_ev,
                max_iterations=max_iterations,
                fixed_electron_cm3=fixed,
                max_step_ev=max_step_ev,
            )
        # as solve_poisson_1d, without rebuilding the fixed parts (the charge in m^-3)
        fixed = np.where(where, (spread * 1e6)[..., None], 0.0)
        u0 = np.array(
            start if start.shape == shape else np.broadcast_to(start, shape), dtype=float, order="C"
        )
        u0[..., 0] = 0.0
        u0[..., -1] = right
        rows = stack
        if rows is None:
            if right.shape[1] not in rows_of:
                rows_of[right.shape[1]] = np.repeat(np.arange(n_stacks), right.shape[1])
            rows = rows_of[right.shape[1]]
        u, electrons, used = system.solve(
            rows,
            u0.reshape(-1, li.size),
            (fermi if fermi.shape == shape else np.broadcast_to(fermi, shape)).reshape(-1, li.size),
            fixed.reshape(-1, li.size),
            tolerance_ev=tolerance_ev,
            max_iterations=max_iterations,
            max_step_ev=max_step_ev,
        )
        return PoissonSolution(
            potential_ev=u.reshape(shape),
            electron_cm3=electrons.reshape(shape) * 1e-6,
            iterations=used,
        )

    return poisson


@dataclass
class _WellChargeRoot:
    """Root search of ``residual(well) = F(well) - well`` per (stack, bias), cm^-2.

    ``F >= 0``, so a root lies in ``[0, F]``: a bracket ``[lo, hi]`` with
    ``residual(lo) >= 0 >= residual(hi)`` is kept; until both ends are evaluated, secant
    (or mixing) steps; then regula falsi with the Illinois modification. A cold start
    (charge 0) evaluates ``lo`` first. A warm start whose residual is negative (a
    continuation in bias) has ``hi`` only: its open steps go on below it towards the
    nearest root, and only a step that is not usable halves ``[0, hi]`` (halving at once
    skipped the charged root of a bistable stack wherever the unstable root lay above
    half the start's charge, and the up sweep left the branch early: the InP example's
    up sweep ended at 0.4993 V where its branch holds to 0.5033 V). A collapsed
    bracket with a large residual is reopened once; collapsing again, it is a jump of
    ``F`` and the charge is settled at the jump. A warm start settles at its first
    collapse: its branch continues to the jump (a state pinned at the emitter's band
    edge), and the reopened search, halving ``[0, hi]``, fell to a lower root (an
    as-grown InP stack's and a random InGaAs/AlAs stack's up sweeps ended 0.8 and 8.8 mV
    before their branches).

    The state of every entry is kept packed, one row per quantity (:attr:`ROWS`; flags as
    0 and 1), as the compiled ``well_root_step`` reads and writes it.
    """

    state: np.ndarray  #: ``(13,) + shape``, the rows of ROWS
    has_previous: bool  #: the last two rows hold the last step's (well, residual)

    #: lo, r_lo, hi, r_hi: the bracket and its residuals; lo_known: residual(lo) evaluated
    #: (else lo = 0 is a bound only); last_side: +1 lo moved last, -1 hi moved last
    #: (Illinois); reopened: the bracket collapsed once and was reopened; settled: it
    #: collapsed again, a jump of F accepted at the jump; frozen: the charge of the settled
    #: entries; push: growth of the step past the target (see next_well); warm: started from
    #: a charge (a continuation), settled at its first collapse
    ROWS = ("lo", "r_lo", "lo_known", "hi", "r_hi", "last_side", "reopened", "settled",
            "frozen", "push", "warm", "previous_well", "previous_residual")  # fmt: skip

    @classmethod
    def start(cls, shape: tuple[int, ...], warm: np.ndarray | None = None) -> _WellChargeRoot:
        state = np.zeros((len(cls.ROWS),) + tuple(shape))
        state[cls.ROWS.index("hi")] = np.inf
        state[cls.ROWS.index("push")] = 0.5
        if warm is not None:
            state[cls.ROWS.index("warm")] = warm
        return cls(state=state, has_previous=False)

    @property
    def settled(self) -> np.ndarray:
        return self.state[self.ROWS.index("settled")] != 0

    @property
    def reopened(self) -> np.ndarray:
        return self.state[self.ROWS.index("reopened")] != 0

    def keep_entries(self, keep: np.ndarray) -> None:
        """Keep the entries ``keep`` (a mask of the last axis) and drop the others."""
        self.state = np.compress(keep, self.state, axis=-1)  # C-ordered, as the step needs

    def next_well(
        self,
        well: np.ndarray,
        residual: np.ndarray,
        *,
        target: np.ndarray,
        done: np.ndarray | None = None,
    ) -> np.ndarray:
        """The next charge of every entry (``done`` entries, if given, keep theirs)."""
        step = compiled_kernel("well_root_step")
        if step is not None:  # the statement below, compiled (the same numbers, tested)
            new = np.array(well, dtype=float, order="C", copy=True)
            self.has_previous = bool(
                step(
                    self.state,
                    new,
                    np.ascontiguousarray(residual, dtype=float),
                    np.ascontiguousarray(target, dtype=float),
                    np.zeros(well.shape)
                    if done is None
                    else np.ascontiguousarray(done, dtype=float),
                    int(self.has_previous),
                    WELL_MIXING,
                    WELL_TOLERANCE,
                    WELL_ABS_CM2,
                )
            )
            return new
        return self._next_well_numpy(
            well, residual, target=target, done=np.zeros(well.shape, bool) if done is None else done
        )

    def _next_well_numpy(self, well, residual, *, target, done):
        """:meth:`next_well` as written for plain arrays (the reference of ``well_root_step``):
        the state is read here and stored at the end."""
        lo, r_lo, lo_known, hi, r_hi, last_side, reopened, settled, frozen, push, *rest = self.state
        warm, last = rest[0] != 0, rest[1:]
        lo_known, reopened, settled = lo_known != 0, reopened != 0, settled != 0
        last_side = last_side.astype(int)
        previous = tuple(last) if self.has_previous else None
        # Root of residual(well) = F(well) - well per (stack, bias). F >= 0, so a root lies in
        # [0, F]: keep a bracket [lo, hi] with residual(lo) >= 0 >= residual(hi). Until both
        # ends are known, secant (or mixing) steps; then regula falsi with the Illinois modification
        # (M. Dowell and P. Jarratt, BIT 11, 168 (1971), from memory), superlinear, always inside.
        # entries already within tolerance keep their charge (each entry's F depends on its
        # own charge only)
        up = residual >= 0
        moved_lo = ~done & up & (well >= lo)
        moved_hi = ~done & ~up & (well <= hi)
        lo_known |= moved_lo
        lo, r_lo = np.where(moved_lo, well, lo), np.where(moved_lo, residual, r_lo)
        hi, r_hi = np.where(moved_hi, well, hi), np.where(moved_hi, residual, r_hi)
        side = np.where(moved_lo, 1, np.where(moved_hi, -1, 0))
        r_hi = np.where((side == 1) & (last_side == 1), 0.5 * r_hi, r_hi)  # stale end: halve
        r_lo = np.where((side == -1) & (last_side == -1), 0.5 * r_lo, r_lo)
        last_side = np.where(side != 0, side, last_side)
        candidate = well + WELL_MIXING * residual
        if previous is not None:
            d_well, d_res = well - previous[0], residual - previous[1]
            ok = (np.abs(d_well) > 0) & (d_res != 0)
            candidate = np.where(ok, well - residual * d_well / np.where(ok, d_res, 1.0), candidate)
        ceiling = 4.0 * np.maximum(target, well) + WELL_ABS_CM2  # F is bounded
        open_ok = np.isfinite(candidate) & (candidate > lo) & (candidate < ceiling)
        # with no lower end known yet (0 a bound only: a warm start whose residual is
        # negative), an open step below hi goes on towards the nearest root
        lo_open = ~lo_known & ~reopened
        bracketed = np.isfinite(hi) & ~(lo_open & open_ok & (candidate < hi))
        denom = np.where(bracketed, r_lo - r_hi, 1.0)
        falsi = np.where(
            lo_known & (denom > 0),
            (lo * -r_hi + np.where(bracketed, hi, 0.0) * r_lo) / denom,
            0.5 * (lo + hi),
        )
        previous = (well, residual)
        # No bracket and no usable secant step: where the residual still grows with the
        # charge (F's slope above 1, near a fold of F(n) = n), a step to the target creeps by
        # ~1 % per iteration; each such step in a row doubles the push past the target, up
        # to the ceiling, until the residual changes sign (measured: a GaAs/AlGaAs stack at
        # 0.614 V crept from 6e10 to 9e10 cm^-2 in 50 steps towards its root at 2.2e11).
        creeping = ~bracketed & ~open_ok & (residual > 0)
        push = np.where(creeping, 2.0 * push, 1.0)
        fallback = np.minimum(well + push * residual, np.maximum(ceiling, target))
        step = np.where(bracketed, falsi, np.where(open_ok, candidate, fallback))
        well = np.where(done, well, step)
        # A collapsed bracket with a large residual: either an inconsistent evaluation -- reopen
        # it once -- or, if it collapses again, a jump of F (a state appearing at the edge of
        # detection): the fixed point is the jump itself, accepted to the bracket width.
        collapsed = bracketed & ((hi - lo) <= WELL_TOLERANCE * np.abs(hi) + WELL_ABS_CM2) & ~done
        if np.any(collapsed):
            again = collapsed & (reopened | warm)
            frozen = np.where(again, 0.5 * (lo + hi), frozen)
            settled |= again
            first = collapsed & ~reopened & ~warm
            reopened |= first
            lo, lo_known = np.where(first, 0.0, lo), lo_known & ~first
            hi = np.where(first, np.inf, hi)
            last_side = np.where(first, 0, last_side)
            well = np.where(first, target, well)
            previous = None
        well = np.where(settled, frozen, well)
        kept = last if previous is None else previous
        rows = (lo, r_lo, lo_known, hi, r_hi, last_side, reopened, settled, frozen, push, warm)
        rows = (*rows, *kept)
        self.state = np.stack([np.broadcast_to(r, well.shape) for r in rows]).astype(float)
        self.has_previous = previous is not None
        return well


def _well_charge_target(table, grid, *, mu_emitter_ev, well_mass_m0, sides=None):
    """``target(potential_ev, bias_v)``: the first output of :func:`well_sheet_density_cm2`
    (the same numbers, tested), its parts that do not change during a solve made once, the
    state search in one compiled call (``grid_states``) and the charge from the states in
    two (``charge_arguments``, ``charge_sums``; :class:`_WellChargeStep`); the function
    itself where those routines are not in use.

    Parameters
    ----------
    table, grid, mu_emitter_ev, well_mass_m0
        As for :func:`well_sheet_density_cm2`.
    sides
        :func:`_injecting_sides` of the stacks' barrier region (made from ``table`` and
        ``grid`` where not given).
    """
    if sides is None:
        sides = _injecting_sides(_barrier_region(table, grid)[0])
    states = compiled_kernel("grid_states")
    passes = (compiled_kernel("charge_arguments"), compiled_kernel("charge_sums"))
    if states is None or None in passes:
        profile_of = profile_builder(table, grid)

        def target(potential_ev, bias_v, stack=None):
            if stack is None:
                return well_sheet_density_cm2(
                    table,
                    grid,
                    potential_ev=potential_ev,
                    bias_v=bias_v,
                    mu_emitter_ev=mu_emitter_ev,
                    well_mass_m0=well_mass_m0,
                    profile_of=profile_of,
                )[0]
            # entries (stack row of each): each entry a stack of its own with one bias
            return well_sheet_density_cm2(
                table.take(stack),
                SliceGrid(grid.layer_index, grid.width_nm[stack], grid.center_nm[stack]),
                potential_ev=potential_ev[:, None, :],
                bias_v=bias_v[:, None],
                mu_emitter_ev=mu_emitter_ev[stack],
                well_mass_m0=well_mass_m0[stack],
            )[0][:, 0]

        return target
    return _WellChargeStep(
        table,
        grid,
        mu_emitter_ev=mu_emitter_ev,
        well_mass_m0=well_mass_m0,
        states=states,
        passes=passes,
        sides=sides,
    )


class _WellChargeStep:
    """:func:`well_sheet_density_cm2`'s charge for one solve's stacks, called once per
    well-charge step: the profile arrays (:func:`physics.bands.profile_builder`'s), the
    constants and, per batch shape or per set of entries (the iteration calls on the same
    entries until one leaves), the kernel's rows, the padding nodes and the forward-bias
    search window are made once; the state search is the compiled ``grid_states``, the
    charge from its states the compiled ``charge_arguments`` and ``charge_sums`` around
    numpy's ``expm1``, ``exp`` and ``log1p`` (the estimate's arithmetic in its order, bit
    for bit: tests/test_electrostatics.py, tests/test_kernel_backends.py)."""

    def __init__(self, table, grid, *, mu_emitter_ev, well_mass_m0, states, passes, sides):
        from .constants import ELECTRON_MASS_KG, HBAR2_2M0_EV_NM2, HBAR_J_S
        from .resonances import EXTRA_ROUNDS, LOOSE_BRACKET, LOOSE_FIT

        li = grid.layer_index
        self.n_slices = li.size
        self.base = np.ascontiguousarray((table.edge_ev - table.edge_ev[:, :1])[:, li][:, None, :])
        # a padding node (zero width inside a stack) takes the potential of the real node
        # before it, as in profile_builder
        real, self.source = real_nodes(grid)
        self.padded = ~real[:, None, :]
        self.fixed_rows = (table.mass_m0[:, li], table.nonparabolicity_per_ev[:, li], grid.width_nm)
        self.kept: dict = {}  # _parts per batch shape, and of the last entries (key None)
        self.kt = (BOLTZMANN_EV_K * table.temperature_k)[:, None]
        self.mu_fwd = mu_emitter_ev[:, None]
        self.u = np.linspace(0.0, 1.0, WELL_SEARCH_NODES) ** WELL_SEARCH_EDGE_POWER
        self.u_dense = np.linspace(0.0, 1.0, WELL_SEARCH_DENSE_NODES) ** WELL_SEARCH_EDGE_POWER
        self.sides = sides  # the injecting side's nodes in forward and in reverse bias
        self.n2d_cm2 = (
            well_mass_m0[:, None]
            * ELECTRON_MASS_KG
            * self.kt
            * ELEMENTARY_CHARGE_C
            / (np.pi * HBAR_J_S**2)
            * 1e-4
        )[..., None]
        self.states, self.passes = states, passes
        # the four lowest states (n_max 0, n_first 4), as well_sheet_density_cm2
        self.settings = (1.0 / HBAR2_2M0_EV_NM2, 0, 4, 6, EXTRA_ROUNDS, LOOSE_BRACKET, LOOSE_FIT, 1)

    def _window(self, mu, edge, kt):
        """The search grid of well_sheet_density_cm2 (find_resonances with 64 nodes)."""
        lo = edge + 1e-6
        hi = mu + 12.0 * kt
        return lo[..., None] + (hi - lo)[..., None] * self.u

    def _parts(self, shape, stack):
        """The parts fixed for a batch shape (``stack`` None) or for entries (``stack``: the
        stack row of each, ``shape`` ``(n_entries, n_slices)``), kept while small (a setup
        lives on in _SETUPS): the profile's base, the kernel's mass, nonparabolicity and width
        rows, the padding nodes (their index, their base and the index of the potential they
        take), the emitter Fermi level, kT and the 2D density of states times kT (each one
        value per entry, contiguous, as the charge passes read them) and the forward-bias
        search window."""
        key = shape if stack is None else None
        found = self.kept.get(key)
        if found is not None and (stack is None or found[0] is stack):
            return found[1]
        if stack is None:  # each (stack, bias) reads its stack's row
            base, kt, mu, n2d_cm2 = self.base, self.kt, self.mu_fwd, self.n2d_cm2
            rows = tuple(
                np.ascontiguousarray(np.broadcast_to(a[:, None, :], shape)) for a in self.fixed_rows
            )
            at = np.nonzero(np.broadcast_to(self.padded, shape))
            source = at[:-1] + (self.source[at[0], at[-1]],)
            window_mu = np.broadcast_to(mu, shape[:-1])
            sides = tuple(side[:, None, :] for side in self.sides)
        else:
            base, kt, mu = self.base[stack, 0], self.kt[stack, 0], self.mu_fwd[stack, 0]
            n2d_cm2, rows = self.n2d_cm2[stack, 0], tuple(a[stack] for a in self.fixed_rows)
            at = np.nonzero(self.padded[stack, 0])
            source = (at[0], self.source[stack[at[0]], at[1]])
            window_mu = mu
            sides = tuple(side[stack] for side in self.sides)
        edge = np.zeros(shape[:-1])
        pad = (at, np.broadcast_to(base, shape)[at], source) if at[0].size else None
        window = (np.ascontiguousarray(window_mu), edge, self._window(window_mu, edge, kt))
        per_entry = tuple(
            np.ascontiguousarray(np.broadcast_to(a, shape[:-1])) for a in (kt, n2d_cm2[..., 0])
        )
        parts = (base, rows, pad, kt, mu, per_entry, window, sides)
        if math.prod(shape) <= STEP_KEEP_VALUES:
            if len(self.kept) >= STEP_KEEP_SHAPES:
                self.kept.clear()
            self.kept[key] = (stack, parts)
        return parts

    def __call__(self, potential_ev, bias_v, stack=None):
        """The charge at ``potential_ev`` (``(n_stacks, n_biases, n_slices)``) and ``bias_v``
        (``(n_stacks, n_biases)``); or, with ``stack`` (``(n,)`` row of each entry), of ``n``
        entries: ``potential_ev`` ``(n, n_slices)``, ``bias_v`` ``(n,)``. The same numbers
        per entry either way."""
        shape = potential_ev.shape
        base, rows, pad, kt, mu_fwd, (kt_e, n2d_e), forward_window, sides = self._parts(
            shape, stack
        )
        edge_ev = np.ascontiguousarray(base + potential_ev)
        if pad is not None:
            at, base_at, source = pad
            edge_ev[at] = base_at + potential_ev[source]
        bias = np.asarray(bias_v, float)
        if (bias >= 0).all():
            mu, edge, energy = forward_window
        else:
            forward = bias >= 0
            mu = np.where(forward, mu_fwd, mu_fwd - bias)
            edge = np.where(forward, 0.0, edge_ev[..., -1])
            energy = self._window(mu, edge, kt)
        out = np.empty(shape[:-1] + (4, 4))
        self.states(self.n_slices, WELL_SEARCH_NODES, energy, edge_ev, *rows, *self.settings, out)
        # entries behind a hump on their injecting side: the search again on the dense grid
        # (well_sheet_density_cm2's second search, the same numbers)
        side = np.where((bias >= 0)[..., None], sides[0], sides[1])
        dense = _hump_action(edge_ev, rows[0], rows[2], side, edge) > WELL_SEARCH_HUMP_ACTION
        if dense.any():
            at = np.nonzero(dense)
            lo = np.broadcast_to(edge, dense.shape)[at] + 1e-6
            hi = np.broadcast_to(mu, dense.shape)[at] + 12.0 * kt_e[at]
            fine = np.empty((at[0].size, 4, 4))
            self.states(
                self.n_slices,
                WELL_SEARCH_DENSE_NODES,
                np.ascontiguousarray(lo[:, None] + (hi - lo)[:, None] * self.u_dense),
                np.ascontiguousarray(edge_ev[at]),
                *(np.ascontiguousarray(r[at]) for r in rows),
                *self.settings,
                fine,
            )
            out[at] = fine
        # well_sheet_density_cm2's charge from the states: the arguments of its expm1 and of
        # fermi_dirac_zero's exp, then the sum over the states from their values
        arguments, sums = self.passes
        switch, tail = np.empty(shape[:-1] + (4,)), np.empty(shape[:-1] + (4,))
        arguments(4, out, edge, mu, kt_e, switch, tail)
        charge = np.empty(shape[:-1])
        sums(4, out, mu, kt_e, n2d_e, np.expm1(switch), np.log1p(np.exp(tail)), charge)
        return charge


def well_sheet_density_cm2(
    table, grid, *, potential_ev, bias_v, mu_emitter_ev, well_mass_m0, profile_of=None
):
    """Estimate of the electron sheet density in the quasi-bound states, cm^-2.

    Each 2D subband ``E_1`` (the four lowest maxima of ``T(E)`` on a 64-point grid
    of the current profile, :func:`physics.resonances.find_resonances`,
    between the injecting contact's band edge and ``mu + 12 kT``, its nodes
    crowded towards that edge by :data:`WELL_SEARCH_EDGE_POWER`, 4096 where a hump on the
    injecting side narrows the lines, :data:`WELL_SEARCH_HUMP_ACTION`; their
    contributions are summed; the lowest, not the tallest: the lower states hold the
    charge, and in a wide well with more lines in the window the tallest on the coarse
    grid changed from one potential to the next, so the charge jumped, by up to 20
    times, and the self-consistent I-V with it: a 13 nm InSb well, measured
    2026-12-05) is fed by the injecting contact (the emitter for ``V >= 0``) at rate
    ``Gamma_E`` and emptied at ``Gamma``; with the transverse momentum conserved each 2D
    state at ``E_1 + E_par`` has
    occupancy ``(Gamma_E / Gamma) f(E_1 + E_par)``, so, with the 2D density
    of states ``m_w / (pi hbar^2)`` (spin included; standard, stated from
    memory),

        n_w = (Gamma_E / Gamma) (m_w kT / (pi hbar^2)) ln(1 + exp((mu - E_1) / kT)).

    ``Gamma_E / Gamma`` is taken from the Breit-Wigner peak ``T_p = 4 Gamma_E
    Gamma_C / Gamma^2`` (B. Ricco and M. Ya. Azbel, Phys. Rev. B 29, 1970
    (1984)) as the smaller root ``(1 - sqrt(1 - T_p)) / 2``: an assumption
    (the injecting side is the more opaque one, as near the peak of a
    symmetric stack under forward bias). This is a simple estimate, not taken
    from a specific publication. Because ``Gamma_E`` vanishes at the injecting
    contact's band edge and the Lorentzian fit fails there, the fraction is
    multiplied by ``1 - exp(-(E_1 - E_edge) / kT)``, a regularisation (a
    departure) that keeps the charge continuous as a state crosses the edge.
    The charge supplied by the other contact and that of states above the
    window are neglected.

    Returns ``n_w`` ``(n_stacks, n_biases)`` and the states ``E_1``
    ``(n_stacks, n_biases, 4)``, NaN where there is none.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    grid
        The extended slice grid of the potential (:func:`extended_slice_grid`).
    potential_ev
        Electron potential energy on its nodes, eV, ``(n_stacks, n_biases, n_nodes)``.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    mu_emitter_ev
        Emitter Fermi level above its band edge, eV, ``(n_stacks,)``.
    well_mass_m0
        Mass of the well, m0, ``(n_stacks,)``.
    profile_of
        Optional :func:`physics.bands.profile_builder` of ``table`` and ``grid`` (the
        iteration's, built once).
    """
    from .constants import ELECTRON_MASS_KG, HBAR_J_S
    from .resonances import find_resonances

    profile = (
        profile_from_potential(table, grid, potential_ev)
        if profile_of is None
        else profile_of(potential_ev)
    )
    kt = (BOLTZMANN_EV_K * table.temperature_k)[:, None]
    bias = np.asarray(bias_v, float)
    forward = bias >= 0
    mu = np.where(forward, mu_emitter_ev[:, None], mu_emitter_ev[:, None] - bias)
    edge = np.where(forward, 0.0, profile.edge_ev[..., -1])
    top = mu + 12.0 * kt
    search: dict[str, Any] = {"n_max": 0, "n_first": 4, "edge_power": WELL_SEARCH_EDGE_POWER}
    res = find_resonances(
        profile, energy_min_ev=edge + 1e-6, energy_max_ev=top, n_coarse=WELL_SEARCH_NODES, **search
    )
    e1, tp, ok = res.energy_ev, res.peak_transmission, res.valid
    # behind a hump on the injecting side (a thick undoped spacer), the dense search
    before, after = _injecting_sides(_barrier_region(table, grid)[0])
    side = np.where(forward[..., None], before[:, None, :], after[:, None, :])
    shape = profile.batch_shape
    dense = _hump_action(profile.edge_ev, profile.mass_m0, profile.width_nm, side, edge)
    dense = np.broadcast_to(dense > WELL_SEARCH_HUMP_ACTION, shape)
    if dense.any():
        at = np.nonzero(dense)
        n = (profile.n_slices,)
        fine = find_resonances(
            Profile(
                edge_ev=np.broadcast_to(profile.edge_ev, shape + n)[at],
                mass_m0=np.broadcast_to(profile.mass_m0, shape + n)[at],
                nonparabolicity_per_ev=np.broadcast_to(profile.nonparabolicity_per_ev, shape + n)[
                    at
                ],
                width_nm=np.broadcast_to(profile.width_nm, shape + n)[at],
                layer_index=profile.layer_index,
            ),
            energy_min_ev=np.broadcast_to(edge, shape)[at] + 1e-6,
            energy_max_ev=np.broadcast_to(top, shape)[at],
            n_coarse=WELL_SEARCH_DENSE_NODES,
            **search,
        )
        e1, tp, ok = (np.array(x, copy=True) for x in (e1, tp, ok))
        e1[at], tp[at], ok[at] = fine.energy_ev, fine.peak_transmission, fine.valid
    e1 = np.where(ok, e1, np.nan)
    tp = np.where(ok, tp, 0.0)
    fraction = 0.5 * (1.0 - np.sqrt(1.0 - np.clip(tp, 0.0, 1.0)))
    # regularisation (a departure): the Lorentzian fit is unreliable for a state at the
    # injecting edge, where Gamma_E vanishes; switch the occupancy on over the first kT
    fraction = fraction * -np.expm1(
        -np.maximum(np.where(ok, e1, 0.0) - edge[..., None], 0.0) / kt[..., None]
    )
    n2d_cm2 = (
        well_mass_m0[:, None]
        * ELECTRON_MASS_KG
        * kt
        * ELEMENTARY_CHARGE_C
        / (np.pi * HBAR_J_S**2)
        * 1e-4
    )[..., None]
    supply = fermi_dirac_zero((mu[..., None] - np.where(ok, e1, 0.0)) / kt[..., None])
    return np.sum(np.where(ok, fraction * n2d_cm2 * supply, 0.0), axis=-1), e1


def well_charge_residual_cm2(
    table: LayerTable, bias_v: float, charge_cm2: np.ndarray, *, slice_nm: float = 0.25
) -> np.ndarray:
    """``F(n) - n`` of the well-charge equation of each stack at one bias for each charge
    ``n``: ``F`` the charge the quasi-bound states hold in the potential that ``n`` in the
    well produces (one Poisson solve and one state search per charge, all in one batch).

    A diagnostic: its falls through zero are the stable self-consistent states at that
    bias, found without a root search and so without a start or a path (the brute-force
    reference of the solver's continuation: tests, ``benchmarks/scan_charge_roots.py``).

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks (at least one with a well).
    bias_v
        The bias, V.
    charge_cm2
        ``(m,)`` well charges, cm^-2, the same for every stack.
    slice_nm
        Largest slice width inside the stack, nm (as :func:`solve_stack_poisson`).

    Returns
    -------
    numpy.ndarray
        ``(n_stacks, m)`` residuals, cm^-2.
    """
    setup = _solve_setup(
        table, slice_nm=slice_nm, contact_nm=CONTACT_NM, contact_slice_nm=CONTACT_SLICE_NM,
        tolerance_ev=POISSON_TOLERANCE_EV, max_iterations=POISSON_MAX_ITERATIONS,
        max_step_ev=MAX_STEP_EV,
    )  # fmt: skip
    if setup.target is None:
        raise ValueError("no stack of the table has a well")
    charge = np.broadcast_to(np.asarray(charge_cm2, float), (table.n_stacks, np.size(charge_cm2)))
    bias = np.full(charge.shape, float(bias_v))
    right, fermi = setup.contacts(bias)
    solved = setup.poisson(setup.linear_drop(right), charge, fermi, right)
    return setup.target(solved.potential_ev, bias) - charge


def solve_self_consistent(
    table: LayerTable, bias_v: np.ndarray, *, slice_nm: float = 0.25, **options
) -> tuple[SliceGrid, PoissonSolution]:
    """Self-consistent solve of every stack at each bias, with the fallbacks.

    All biases of all stacks at once (:func:`solve_stack_poisson`). An entry (stack, bias)
    whose well-charge iteration does not converge is solved again by continuation from a
    solved entry of its stack (:func:`_mend_failed`); the other entries keep their own
    solves, which do not depend on one another. (Until 2026-12-05 one such entry sent the
    whole stack to continuation from zero bias, the up sweep, whose charged branch then
    stood for the single solves' everywhere: whether a failing bias was among the sweep's
    decided the stack's figures; an InSb/AlSb stack at 11 K gave Jp 7.1e5 A/cm^2 on 61
    biases and 1.3e5 on 241.) Where the Poisson solve itself does not converge, each stack
    of a batch is solved again alone, and a stack that fails alone by continuation in bias
    (:func:`solve_by_continuation`). So a stack's result is the one it gets alone, whether
    or not a batch partner's solve fails.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    slice_nm
        Largest slice width inside the stack, nm.
    **options
        Further settings of :func:`solve_stack_poisson` (``initial_ev`` on this table's
        grid, ``(n_stacks, n_biases, n_nodes)``).
    """
    try:
        grid, solution = solve_stack_poisson(
            table, bias_v, slice_nm=slice_nm, keep_failed=True, **options
        )
    except ElectrostaticsConvergenceError:
        if table.n_stacks == 1:
            return solve_by_continuation(table, bias_v, slice_nm=slice_nm, **options)
    else:
        if solution.failed is not None and solution.failed.any():
            bias = np.broadcast_to(np.asarray(bias_v, float), solution.failed.shape)
            solution = _mend_failed(table, grid, bias, solution, slice_nm=slice_nm, **options)
        return grid, replace(solution, failed=None)
    grid_options = {k: options[k] for k in ("contact_nm", "contact_slice_nm") if k in options}
    grid = extended_slice_grid(table, slice_nm=slice_nm, **grid_options)
    bias = np.asarray(bias_v, float)
    bias = np.broadcast_to(bias, (table.n_stacks, bias.shape[-1]))
    initial = options.pop("initial_ev", None)
    per_entry = {
        k: options.pop(k) for k in ("initial_well_cm2", "abandon_below_cm2") if k in options
    }
    parts = []
    for s in range(table.n_stacks):
        one, moves, back = _one_stack(table, grid, s, slice_nm=slice_nm, **options)
        start = None if initial is None else potential_on_grid(initial[s : s + 1], **moves)
        rows = {k: None if v is None else np.asarray(v)[s : s + 1] for k, v in per_entry.items()}
        _, sol = solve_self_consistent(
            one, bias[s : s + 1], slice_nm=slice_nm, initial_ev=start, **rows, **options
        )
        parts.append(
            (
                potential_on_grid(sol.potential_ev, **back),
                potential_on_grid(sol.electron_cm3, **back),
                sol,
            )
        )
    return grid, PoissonSolution(
        potential_ev=np.concatenate([u for u, _, _ in parts]),
        electron_cm3=np.concatenate([n for _, n, _ in parts]),
        iterations=max(sol.iterations for _, _, sol in parts),
        well_sheet_cm2=np.concatenate([sol.well_sheet_cm2 for _, _, sol in parts]),
        abandoned=None
        if per_entry.get("abandon_below_cm2") is None
        else np.concatenate([sol.abandoned for _, _, sol in parts]),
    )


def _one_stack(table, grid, s, *, slice_nm, **options):
    """Stack ``s`` of ``table`` alone, and the moves of a potential from the batch's ``grid``
    to that stack's own grid and back (keyword arguments of :func:`potential_on_grid`)."""
    one = table.take(slice(s, s + 1))
    grid_options = {k: options[k] for k in ("contact_nm", "contact_slice_nm") if k in options}
    own = extended_slice_grid(one, slice_nm=slice_nm, **grid_options).center_nm
    batch = grid.center_nm[s : s + 1]
    return (
        one,
        {"source_center_nm": batch, "target_center_nm": own},
        {"source_center_nm": own, "target_center_nm": batch},
    )


def _mend_failed(table, grid, bias, solution, *, slice_nm, **options) -> PoissonSolution:
    """``solution`` with its ``failed`` entries solved again by continuation in bias, each
    from its stack's solved entry at the next larger ``|V|`` (the down sweep's branch, the
    one the single solves land on where two exist), else the next smaller; in order of
    decreasing ``|V|``, so that a run of failed entries is followed down. A stack with no
    solved entry is solved by :func:`solve_by_continuation`. Raises
    :class:`ElectrostaticsConvergenceError` where a continuation fails."""
    u, n, w = (np.array(x) for x in (solution.potential_ev, solution.electron_cm3,
                                      solution.well_sheet_cm2))  # fmt: skip
    failed = np.array(solution.failed)
    for s in np.nonzero(failed.any(axis=1))[0]:
        one, to_own, back = _one_stack(table, grid, s, slice_nm=slice_nm, **options)
        order, solved = np.argsort(np.abs(bias[s]), kind="stable"), ~failed[s]
        if not solved.any():
            _, sol = solve_by_continuation(one, bias[s : s + 1], slice_nm=slice_nm, **options)
            u[s], n[s] = (
                potential_on_grid(x, **back)[0] for x in (sol.potential_ev, sol.electron_cm3)
            )
            w[s] = np.asarray(sol.well_sheet_cm2)[0]
            continue
        step = _continuation_step(one, slice_nm=slice_nm, **options)
        for pos in range(order.size - 1, -1, -1):
            i = order[pos]
            if solved[i]:
                continue
            later = [j for j in order[pos + 1 :] if solved[j]]
            j = later[0] if later else [j for j in order[:pos] if solved[j]][-1]
            start = (
                None,
                PoissonSolution(  # (grid, solution), as the step returns them
                    potential_ev=potential_on_grid(u[s : s + 1, j : j + 1], **to_own),
                    electron_cm3=potential_on_grid(n[s : s + 1, j : j + 1], **to_own),
                    iterations=0,
                    well_sheet_cm2=w[s : s + 1, j : j + 1],
                ),
            )
            _, sol = _continue_to(step, bias[s : s + 1, j], start, bias[s : s + 1, i])
            u[s, i] = potential_on_grid(sol.potential_ev, **back)[0, 0]
            n[s, i] = potential_on_grid(sol.electron_cm3, **back)[0, 0]
            w[s, i], solved[i] = np.asarray(sol.well_sheet_cm2)[0, 0], True
    return replace(solution, potential_ev=u, electron_cm3=n, well_sheet_cm2=w)


def self_consistent_profile(
    table: LayerTable,
    bias_v: np.ndarray,
    *,
    slice_nm: float = 0.25,
    initial_ev: np.ndarray | None = None,
    **options,
) -> Profile:
    """Profile of ``table`` at each bias with the self-consistent potential.

    Same contract as :func:`physics.bands.linear_profile` (batch shape
    ``(n_stacks, n_biases)``); the profile also contains the contact regions
    as slices. Solved by :func:`solve_self_consistent` (its fallbacks included).

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    slice_nm
        Largest slice width inside the stack, nm.
    initial_ev
        Optional start of the potential, ``(n_stacks, n_biases, n_nodes)``, eV.
    **options
        Further settings of :func:`solve_stack_poisson`.
    """
    grid, solution = solve_self_consistent(
        table, bias_v, slice_nm=slice_nm, initial_ev=initial_ev, **options
    )
    return profile_from_potential(table, grid, solution.potential_ev)


#: Continuation: damping and iteration limits relative to the defaults, and how many times
#: a failed bias step is halved.
CONTINUATION_DAMPING = 0.25
CONTINUATION_ITERATIONS = 3
CONTINUATION_HALVINGS = 4


def solve_by_continuation(
    table: LayerTable, bias_v: np.ndarray, **options
) -> tuple[SliceGrid, PoissonSolution]:
    """Solve bias by bias, each from the previous bias's potential and well charge.

    The columns of ``bias_v`` (``(n_biases,)`` or ``(n_stacks, n_biases)``)
    are solved in order of increasing mean ``|V|``, starting from zero bias,
    each from the last converged solution (continuation in bias), with :data:`CONTINUATION_DAMPING` times the Newton step limit and
    :data:`CONTINUATION_ITERATIONS` times the iteration limits. A step that
    still fails is split into halves, up to :data:`CONTINUATION_HALVINGS`
    times (intermediate biases whose solutions only serve as starts). Every
    stack of the batch takes each step together. Costs one solve per bias
    (sequential), so it is the fallback, not the default.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    **options
        Settings of :func:`solve_stack_poisson` (its limits scaled as above).

    Raises
    ------
    ElectrostaticsConvergenceError
        When a step fails even after the halvings, naming the bias.
    """
    n_stacks = table.n_stacks
    bias = np.asarray(bias_v, float)
    bias = np.broadcast_to(
        bias if bias.ndim == 2 else np.atleast_1d(bias)[None, :],
        (n_stacks, np.atleast_1d(bias).shape[-1]),
    )
    step = _continuation_step(table, **options)
    order = np.argsort(np.mean(np.abs(bias), axis=0), kind="stable")
    done: dict[int, tuple[SliceGrid, PoissonSolution]] = {}
    last_v = np.zeros(n_stacks)  # the chain starts at zero bias (flat bands: an easy solve)
    last = step(last_v, None)
    for k in order:
        done[int(k)] = last = _continue_to(step, last_v, last, bias[:, k])
        last_v = bias[:, k]
    grid = done[int(order[0])][0]
    cols = [done[k][1] for k in range(bias.shape[1])]
    return grid, PoissonSolution(
        potential_ev=np.concatenate([c.potential_ev for c in cols], axis=1),
        electron_cm3=np.concatenate([c.electron_cm3 for c in cols], axis=1),
        iterations=sum(c.iterations for c in cols),
        well_sheet_cm2=np.concatenate([c.well_sheet_cm2 for c in cols], axis=1),
    )


def _continuation_step(table: LayerTable, **options):
    """``step(v, start)``: the solve (grid, solution) of ``table`` at biases ``v``
    ``(n_stacks,)`` from the grid and solution ``start`` (None: from the linear drop), with :data:`CONTINUATION_DAMPING`
    times the Newton step limit and :data:`CONTINUATION_ITERATIONS` times the iteration
    limits of ``options`` (settings of :func:`solve_stack_poisson`)."""
    opts = dict(options)
    for key in ("initial_ev", "initial_well_cm2"):
        opts.pop(key, None)
    opts["max_step_ev"] = CONTINUATION_DAMPING * opts.get("max_step_ev", MAX_STEP_EV)
    opts["max_iterations"] = CONTINUATION_ITERATIONS * opts.get("max_iterations", 60)
    opts["max_well_iterations"] = CONTINUATION_ITERATIONS * opts.get("max_well_iterations", 60)

    def step(v, start):
        if start is None:
            return solve_stack_poisson(table, v[:, None], **opts)
        return solve_stack_poisson(
            table,
            v[:, None],
            initial_ev=start[1].potential_ev,
            initial_well_cm2=start[1].well_sheet_cm2,
            **opts,
        )

    return step


def _continue_to(step, last_v, last, target):
    """The solution at ``target`` continued from ``last`` at ``last_v`` (``(n_stacks,)`` each)
    by ``step`` (:func:`_continuation_step`): one step, split into halves up to
    :data:`CONTINUATION_HALVINGS` times where it fails (the intermediate biases' solutions
    only serve as starts). Raises :class:`ElectrostaticsConvergenceError` naming the bias."""
    steps = 1
    while True:
        try:
            start = last
            for f in np.arange(1, steps + 1) / steps:
                start = step(last_v + f * (target - last_v), start)
            return start
        except ElectrostaticsConvergenceError:
            if steps >= 2**CONTINUATION_HALVINGS:
                raise ElectrostaticsConvergenceError(
                    f"self-consistent solve did not converge at {float(target[0]):.4g} V "
                    f"even by continuation in bias ({steps} steps from the last converged bias)"
                ) from None
            steps *= 2
