"""Conduction-band profiles: slice the stack and apply a bias.

The kernel sees only a :class:`Profile`: a piecewise-constant band edge on
slices, with the two contacts as the first and last slice. How the potential
was obtained (linear drop here, self-consistent electrostatics elsewhere) is
not its concern; :func:`profile_from_potential` is the one place where an
electrostatic potential becomes a profile.

Energies are in eV and measured from the emitter's band edge, so that the
emitter contact sits at 0 and, under bias ``V``, the collector at ``-V``.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from typing import TYPE_CHECKING

import numpy as np

from .fermi import fermi_level_ev

if TYPE_CHECKING:
    from .stack import LayerTable

__all__ = [
    "Profile",
    "SliceGrid",
    "slice_grid",
    "linear_drop_ev",
    "builtin_offset_ev",
    "profile_from_potential",
    "profile_builder",
    "real_nodes",
    "linear_profile",
]


@dataclass(frozen=True)
class SliceGrid:
    """Geometry of the slices between the contacts, shared by a batch of stacks.

    Every interior layer ``j`` is cut into ``counts[j]`` equal slices, the
    same count for every stack of the batch, so stacks of different
    thicknesses still fit in one array.

    Attributes
    ----------
    layer_index
        ``(n_slices,)`` layer of each slice; slice 0 is the emitter, the last slice the collector.
    width_nm
        ``(n_stacks, n_slices)`` slice widths; 0 for the two contacts.
    center_nm
        ``(n_stacks, n_slices)`` slice centres measured from the emitter interface
        (contacts: their interface positions).
    """

    layer_index: np.ndarray
    width_nm: np.ndarray
    center_nm: np.ndarray

    @property
    def length_nm(self) -> np.ndarray:
        """``(n_stacks,)`` total thickness between the contacts.

        A running sum, which zero-width padding slices leave exactly unchanged
        (a pairwise sum would regroup the terms around them).
        """
        return np.cumsum(self.width_nm, axis=-1)[..., -1]

    @property
    def n_slices(self) -> int:
        return self.layer_index.size


@dataclass(frozen=True)
class Profile:
    """Piecewise-constant band profile, the kernel's input.

    Arrays share a trailing slice axis ``n_slices`` and broadcast over the
    leading batch axes (typically ``(n_stacks, n_biases)``).

    Attributes
    ----------
    edge_ev
        Band edge of each slice, eV, emitter edge at 0.
    mass_m0
        Band-edge effective mass of each slice, in m0.
    nonparabolicity_per_ev
        Kane nonparabolicity of each slice: m(E) = m (1 + alpha (E - edge)).
    width_nm
        Slice widths, 0 for the contacts (first and last slice).
    layer_index
        ``(n_slices,)`` layer of each slice.
    """

    edge_ev: np.ndarray
    mass_m0: np.ndarray
    nonparabolicity_per_ev: np.ndarray
    width_nm: np.ndarray
    layer_index: np.ndarray

    @property
    def n_slices(self) -> int:
        return self.layer_index.size

    @cached_property
    def batch_shape(self) -> tuple[int, ...]:
        """The broadcast batch shape (computed once: the current asks for it often)."""
        return np.broadcast_shapes(
            self.edge_ev.shape[:-1], self.mass_m0.shape[:-1], self.width_nm.shape[:-1]
        )

    def take(self, index) -> Profile:
        """Select along the batch axes, e.g. ``profile.take((0, 3))`` for stack 0, bias 3."""

        def sel(a: np.ndarray) -> np.ndarray:
            return np.broadcast_to(a, self.batch_shape + a.shape[-1:])[index]

        return Profile(
            edge_ev=sel(self.edge_ev),
            mass_m0=sel(self.mass_m0),
            nonparabolicity_per_ev=sel(self.nonparabolicity_per_ev),
            width_nm=sel(self.width_nm),
            layer_index=self.layer_index,
        )

    @cached_property
    def slice_arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Edge, mass, nonparabolicity and width as C-contiguous ``batch_shape + (n_slices,)`` arrays.

        Computed once per profile (the compiled kernel reads them on every call).
        """
        shape = self.batch_shape + (self.n_slices,)
        edge, mass, alpha, width = (
            np.ascontiguousarray(
                a if np.shape(a) == shape else np.broadcast_to(a, shape), dtype=float
            )
            for a in (self.edge_ev, self.mass_m0, self.nonparabolicity_per_ev, self.width_nm)
        )
        return edge, mass, alpha, width

    def positions_nm(self) -> np.ndarray:
        """Slice boundaries (``n_slices - 1`` interfaces), emitter interface at 0."""
        return np.cumsum(self.width_nm, axis=-1)[..., :-1]


def slice_grid(table: LayerTable, *, slice_nm: float = 0.25, own_counts: bool = False) -> SliceGrid:
    """Cut each interior layer into slices no wider than ``slice_nm``.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    slice_nm
        Largest slice width; the count per layer is set by the thickest
        instance of that layer in the batch.
    own_counts
        Give every stack its own count per layer (as if it were alone) and pad
        to the batch's count with zero-width slices that repeat the layer's
        last slice (same centre, so the same potential): an exact identity in
        the transmission recursion, which the compiled kernel skips. A stack's
        result then does not depend on its batch partners. In a Poisson grid
        the padding nodes carry no charge and are tied to their neighbours
        (:func:`physics.electrostatics.extended_slice_grid`).
    """
    thick = table.thickness_nm[:, 1:-1]
    own = np.maximum(1, np.ceil(thick / slice_nm - 1e-9).astype(int))
    counts = own.max(axis=0)
    layer = np.repeat(np.arange(counts.size), counts)  # interior layer of each slice
    k = np.concatenate([np.arange(c) for c in counts]) if counts.size else np.zeros(0, int)
    layer_index = np.concatenate([[0], layer + 1, [table.n_layers - 1]])
    n_stacks = table.n_stacks
    if own_counts:
        n_own = own[:, layer]
        step = thick[:, layer] / n_own
        width = np.where(k < n_own, step, 0.0)
        start = np.cumsum(thick, axis=1) - thick  # each layer's start
        center = start[:, layer] + (np.minimum(k, n_own - 1) + 0.5) * step
    else:
        width = thick[:, layer] / counts[layer]
        center = np.cumsum(width, axis=1) - 0.5 * width
    zero = np.zeros((n_stacks, 1))
    total = thick.sum(axis=1, keepdims=True)
    width = np.concatenate([zero, width, zero], axis=1)
    center = np.concatenate([zero, center, total], axis=1)
    return SliceGrid(layer_index=layer_index, width_nm=width, center_nm=center)


def linear_drop_ev(
    grid: SliceGrid, bias_v: np.ndarray, *, builtin_ev: np.ndarray | float = 0.0
) -> np.ndarray:
    """Electrostatic potential energy of a bias dropping linearly between the contacts.

    Parameters
    ----------
    grid
        Slices of ``n_stacks`` stacks.
    bias_v
        Applied bias, ``(n_biases,)`` or ``(n_stacks, n_biases)``; positive
        drives electrons from the first layer (emitter) to the last (collector).
    builtin_ev
        ``(n_stacks,)`` extra drop that aligns the contact Fermi levels at zero
        bias when the two contacts differ (0 for identical contacts).

    Returns
    -------
    ndarray
        ``(n_stacks, n_biases, n_slices)``: 0 in the emitter, ``-(bias + builtin)`` in the collector.
    """
    n_stacks = grid.width_nm.shape[0]
    bias = np.asarray(bias_v, float)
    bias = np.broadcast_to(
        bias if bias.ndim == 2 else np.atleast_1d(bias)[None, :],
        (n_stacks, bias.shape[-1] if bias.ndim else 1),
    )
    drop = bias + np.broadcast_to(np.asarray(builtin_ev, float), (n_stacks,))[:, None]
    frac = grid.center_nm / grid.length_nm[:, None]
    frac[:, -1] = 1.0
    return -drop[:, :, None] * frac[:, None, :]


def builtin_offset_ev(table: LayerTable) -> np.ndarray:
    """Drop that aligns the two contacts' Fermi levels at zero bias, ``(n_stacks,)``, eV.

    With the emitter edge at 0, the collector edge must sit at
    ``mu_E - V - mu_C'`` (``mu`` measured from each contact's own edge), so the
    drop beyond ``V`` is ``(E_c,C - E_c,E) - mu_E + mu_C'``.
    """
    mu_e = fermi_level_ev(
        table.doping_cm3[:, 0], mass_m0=table.mass_m0[:, 0], temperature_k=table.temperature_k
    )
    mu_c = fermi_level_ev(
        table.doping_cm3[:, -1], mass_m0=table.mass_m0[:, -1], temperature_k=table.temperature_k
    )
    return (table.edge_ev[:, -1] - table.edge_ev[:, 0]) - mu_e + mu_c


def profile_from_potential(table: LayerTable, grid: SliceGrid, potential_ev: np.ndarray) -> Profile:
    """Band profile from layer band edges plus a potential energy on the slices.

    Parameters
    ----------
    table
        Layer parameters, ``(n_stacks, n_layers)``.
    grid
        Slices from :func:`slice_grid`.
    potential_ev
        ``(n_stacks, n_biases, n_slices)`` electrostatic potential energy of
        an electron, eV, with the emitter contact at 0.

    Notes
    -----
    A zero-width padding slice inside the stack (a stack's own slice counts in a
    batch, :func:`slice_grid`) takes the potential of the slice before it, so the
    profile repeats the layer's last slice whatever the potential's value at the
    padding node (a Poisson node at the layer's end, for the self-consistent model):
    a stack's profile, and every quantity read from its slices, is then the same
    in any batch.
    """
    return profile_builder(table, grid)(potential_ev)


def real_nodes(grid: SliceGrid) -> tuple[np.ndarray, np.ndarray]:
    """Which nodes of ``grid`` are real (not a batch's zero-width padding inside a stack; the
    contacts always are) and, per node, the last real node at or before it, whose potential a
    padding node takes; ``(n_stacks, n_nodes)`` each."""
    real = grid.width_nm > 0
    real[:, [0, -1]] = True
    before = np.maximum.accumulate(np.where(real, np.arange(real.shape[-1]), 0), axis=-1)
    return real, before


def profile_builder(table: LayerTable, grid: SliceGrid):
    """:func:`profile_from_potential` for one table and grid, its fixed parts computed once:
    returns ``build(potential_ev) -> Profile`` (for solvers that make many profiles of the
    same stacks, such as the well-charge iteration of the self-consistent model).

    Parameters
    ----------
    table
        Layer parameters, ``(n_stacks, n_layers)``.
    grid
        Slices from :func:`slice_grid`.
    """
    li = grid.layer_index
    edge = (table.edge_ev - table.edge_ev[:, :1])[:, li][:, None, :]
    real, before = real_nodes(grid)
    # each padding node (stack, node) and the real node before it, whose potential it takes
    stack, node = np.nonzero(~real)
    source = before[stack, node]
    mass = table.mass_m0[:, li][:, None, :]
    alpha = table.nonparabolicity_per_ev[:, li][:, None, :]
    width = grid.width_nm[:, None, :]

    def build(potential_ev: np.ndarray) -> Profile:
        edge_ev = edge + potential_ev
        if stack.size:
            edge_ev[stack, :, node] = edge[stack, 0, node][:, None] + potential_ev[stack, :, source]
        return Profile(
            edge_ev=edge_ev,
            mass_m0=mass,
            nonparabolicity_per_ev=alpha,
            width_nm=width,
            layer_index=li,
        )

    return build


def linear_profile(table: LayerTable, bias_v: np.ndarray, *, slice_nm: float = 0.25) -> Profile:
    """Profile of ``table`` at each bias with the bias dropping linearly between the contacts.

    ``bias_v`` is ``(n_biases,)`` or ``(n_stacks, n_biases)``. Returns a
    :class:`Profile` with batch shape ``(n_stacks, n_biases)``.

    Parameters
    ----------
    table
        Layers of ``n_stacks`` stacks.
    bias_v
        Bias, V, ``(n_biases,)`` or ``(n_stacks, n_biases)``.
    slice_nm
        Largest slice width, nm (see :func:`slice_grid`).
    """
    grid = slice_grid(table, slice_nm=slice_nm, own_counts=True)
    potential = linear_drop_ev(grid, bias_v, builtin_ev=builtin_offset_ev(table))
    return profile_from_potential(table, grid, potential)
