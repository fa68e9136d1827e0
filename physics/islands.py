"""Monolayer islands: a fractional layer thickness as a mixture of whole-monolayer stacks.

A layer grown to ``t`` monolayers with ``n = floor(t)`` and ``f = t - n``
covers the area fraction ``1 - f`` with ``n`` monolayers and ``f`` with
``n + 1`` (lateral islands of the growth front). A mesa of a few um^2 spans
many islands, each wider than the electrons' lateral coherence length, so it
conducts as islands in parallel: its current density is the area-weighted
mean of the currents of the whole-monolayer stacks, and its figures of merit
are those of that mixed curve (common practice; islands of tens of nm to um
on interrupted III-V growth fronts, far below a mesa's size, is a statement
from memory of the growth literature, not checked against one source here).
Islands of different layers are laterally independent, so the share of a
combination of whole thicknesses is the product of the layers' shares.

With ``k`` fractional layers a sample has ``2**k`` combinations. The
combinations are kept in order of area share, at most ``max_stacks`` per
sample (exactly the ``max_stacks`` largest shares: the shares are products,
so a best combination's first layers are among the best partial
combinations, and a beam of that width finds them), and their shares
renormalised to 1. The dropped share ``d`` bounds the error of the mixed
current: ``|J_kept - J_all| <= d * max_c |J_c - J_kept|``, at most ``d``
times the spread of the stacks' currents.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["IslandMixture", "island_mixture", "area_weight_matrix", "mixed_current"]


@dataclass(frozen=True)
class IslandMixture:
    """Whole-monolayer stacks of a batch of samples and their area shares.

    Attributes
    ----------
    owner
        ``(n_rows,)`` sample of each stack (sorted).
    whole_ml
        ``(n_rows, n_layers)`` whole monolayer counts (NaN where the input was NaN).
    area_share
        ``(n_rows,)`` share of its sample's area; each sample's shares sum to 1.
    """

    owner: np.ndarray
    whole_ml: np.ndarray
    area_share: np.ndarray


def island_mixture(thickness_ml: np.ndarray, *, layers: np.ndarray | None = None) -> IslandMixture:
    """Whole-monolayer combinations of the fractional thicknesses of ``layers``.

    Parameters
    ----------
    thickness_ml
        ``(n_samples, n_layers)`` continuous monolayer counts; NaN for a
        layer without islands (a contact), left as NaN in ``whole_ml``.
    layers
        ``(n_layers,)`` bool: the layers taken as islands (all by default);
        the others keep their continuous thickness (see module docstring).
        ``2**k`` combinations per sample for ``k`` fractional island layers
        (fewer where a layer is a whole number).
    """
    t = np.atleast_2d(np.asarray(thickness_ml, float))
    n, n_layers = t.shape
    mask = np.ones(n_layers, bool) if layers is None else np.asarray(layers, bool)
    low = np.where(mask, np.floor(t), t)
    frac = np.where(np.isfinite(t) & mask, t - low, 0.0)
    weight = np.ones((n, 1))
    upper = np.zeros((n, 1, n_layers), bool)
    for i in np.nonzero(np.any(frac > 0, axis=0))[0]:  # a loop over layers, vectorised over samples
        f = frac[:, i, None]
        weight = np.concatenate([weight * (1.0 - f), weight * f], axis=1)
        upper = np.concatenate([upper, upper], axis=1)
        upper[:, weight.shape[1] // 2 :, i] = True
    sample, slot = np.nonzero(weight > 0)
    return IslandMixture(
        owner=sample,
        whole_ml=low[sample] + upper[sample, slot],
        area_share=weight[sample, slot],
    )


def area_weight_matrix(owner: np.ndarray, *, area_share: np.ndarray, n_samples: int) -> np.ndarray:
    """Dense ``(n_samples, n_rows)`` area weights from each row's sample and share.

    Parameters
    ----------
    owner
        Sample (device) of each row, ``(n_rows,)`` integers in ``[0, n_samples)``.
    area_share
        Area share of each row within its sample, ``(n_rows,)``.
    n_samples
        Number of samples (rows of the result).
    """
    w = np.zeros((n_samples, owner.size))
    w[owner, np.arange(owner.size)] = area_share
    return w


def mixed_current(current_density_a_cm2: np.ndarray, *, area_weights: np.ndarray) -> np.ndarray:
    """Current density of devices made of laterally parallel stacks, ``(n_devices, n_biases)``.

    ``J_device = sum_s w[device, s] J_s`` for ``current_density_a_cm2``
    ``(n_stacks, n_biases)`` and ``area_weights`` ``(n_devices, n_stacks)``
    (area shares; parallel conduction of islands, see module docstring).

    Parameters
    ----------
    current_density_a_cm2
        Current density of each whole-monolayer stack, A/cm^2, ``(n_stacks, n_biases)``.
    area_weights
        Area shares, ``(n_devices, n_stacks)``, each row summing to 1.
    """
    return np.asarray(area_weights, float) @ np.asarray(current_density_a_cm2, float)
