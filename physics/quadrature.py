"""The quadrature rule of resonance lines: Gauss-Legendre under a sinh map.

Under ``E = E_r + (W/2) sinh(s)`` a Lorentzian of centre ``E_r`` and FWHM
``W`` becomes ``(W/2) sech(s) ds``, smooth on every scale, so a fixed number
of Gauss-Legendre nodes in ``s`` integrates a line of any width, and whatever
smooth function multiplies it, over any interval. Used for the resolved lines
of the current (:mod:`physics.current`) and the broadening correction
(:mod:`physics.broadening`).

References
----------
.. [1] P. J. Davis and P. Rabinowitz, Methods of Numerical Integration, 2nd ed.
   (Academic Press, 1984) (Gauss-Legendre rules and changes of variable; from memory).
"""

from __future__ import annotations

import functools

import numpy as np

__all__ = ["sinh_gauss_legendre"]


@functools.lru_cache(maxsize=8)
def _legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    return np.polynomial.legendre.leggauss(n)


def sinh_gauss_legendre(center_ev, width_ev, low_ev, high_ev, n: int):
    """Nodes and weights of ``n`` points for ``[low, high]`` around a line at ``center``.

    All four arrays broadcast together to ``shape``; returns ``energy_ev`` and
    ``weight_ev``, each ``shape + (n,)``, with ``sum(weight * f(energy))``
    approximating the integral of ``f`` over ``[low, high]``.
    """
    nodes, weights = _legendre(n)
    half = 0.5 * np.asarray(width_ev, float)
    s_a = np.arcsinh((low_ev - center_ev) / half)
    s_b = np.arcsinh((high_ev - center_ev) / half)
    mid, rad = 0.5 * (s_a + s_b), 0.5 * (s_b - s_a)
    s = mid[..., None] + rad[..., None] * nodes
    energy = center_ev[..., None] + half[..., None] * np.sinh(s)
    return energy, rad[..., None] * weights * half[..., None] * np.cosh(s)
