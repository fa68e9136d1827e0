"""Fermi-Dirac statistics of the contacts: density of states, Fermi levels.

The contacts are treated as parabolic, fully ionised n-type bulk, the same
picture the Tsu-Esaki supply function assumes.

References
----------
.. [1] J. S. Blakemore, "Approximations for Fermi-Dirac integrals, especially
   the function F_1/2(eta) used to describe electron density in a
   semiconductor", Solid-State Electron. 25, 1067 (1982) (definition and
   normalisation of F_1/2).
.. [2] W. B. Joyce and R. W. Dixon, Appl. Phys. Lett. 31, 354 (1977).
.. [3] S. M. Sze and K. K. Ng, Physics of Semiconductor Devices, 3rd ed.
   (Wiley, 2007), Eq. 1.16 (effective density of states N_c).
"""

from __future__ import annotations

import numpy as np

from .constants import BOLTZMANN_EV_K, ELECTRON_MASS_KG, ELEMENTARY_CHARGE_C, HBAR_J_S

__all__ = [
    "effective_density_of_states_cm3",
    "fermi_dirac_half",
    "reduced_fermi_level",
    "fermi_level_ev",
    "joyce_dixon_reduced_fermi_level",
]

# Gauss-Legendre nodes on [0, 1] for the F_1/2 integral after the substitution eps = t^2.
# 100 nodes on each side of the Fermi step t = sqrt(eta) (see fermi_dirac_half).
_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(100)
_NODES = 0.5 * (_NODES + 1.0)
_WEIGHTS = 0.5 * _WEIGHTS


def effective_density_of_states_cm3(mass_m0, temperature_k):
    """N_c = 2 (m kT / (2 pi hbar^2))^(3/2) in cm^-3 ([3], Eq. 1.16)."""
    mass = np.asarray(mass_m0, float) * ELECTRON_MASS_KG
    kt_j = BOLTZMANN_EV_K * np.asarray(temperature_k, float) * ELEMENTARY_CHARGE_C
    return 2.0 * (mass * kt_j / (2.0 * np.pi * HBAR_J_S**2)) ** 1.5 * 1e-6


def fermi_dirac_half(eta):
    """Normalised Fermi-Dirac integral F_1/2(eta) = 2/sqrt(pi) int_0^inf sqrt(e)/(1+exp(e-eta)) de.

    Computed by Gauss-Legendre quadrature over ``t = sqrt(e)`` up to
    ``t_max = sqrt(max(eta, 0) + 60)``; the neglected tail is below
    ``exp(-60)`` relative. The range is split at the Fermi step ``t = sqrt(eta)``
    (for eta > 0), one Gauss-Legendre rule on each side: a single rule across the
    step loses accuracy as eta grows (1e-7 relative at eta = 50). Accurate to
    about 1e-12 relative for eta in [-50, 200].
    """
    eta = np.asarray(eta, float)
    t_step = np.sqrt(np.maximum(eta, 0.0))
    t_max = np.sqrt(np.maximum(eta, 0.0) + 60.0)

    def part(t_lo: np.ndarray, t_hi: np.ndarray) -> np.ndarray:
        t = t_lo[..., None] + (t_hi - t_lo)[..., None] * _NODES
        integrand = 2.0 * t**2 * np.exp(-np.logaddexp(0.0, t**2 - eta[..., None]))
        return (t_hi - t_lo) * (integrand @ _WEIGHTS)

    return 2.0 / np.sqrt(np.pi) * (part(np.zeros_like(t_step), t_step) + part(t_step, t_max))


def reduced_fermi_level(density_ratio):
    """Solve F_1/2(eta) = n / N_c for eta (vectorised bisection, 80 steps).

    Parameters
    ----------
    density_ratio
        n / N_c, positive.
    """
    ratio = np.asarray(density_ratio, float)
    if np.any(ratio <= 0):
        raise ValueError("density ratio n/N_c must be positive")
    lo = np.full(ratio.shape, -60.0)
    hi = np.full(ratio.shape, 300.0)
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        above = fermi_dirac_half(mid) > ratio
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
    return 0.5 * (lo + hi)


def fermi_level_ev(doping_cm3, mass_m0, temperature_k):
    """Fermi level above the band edge of fully ionised n-type bulk, eV."""
    nc = effective_density_of_states_cm3(mass_m0, temperature_k)
    kt = BOLTZMANN_EV_K * np.asarray(temperature_k, float)
    return kt * reduced_fermi_level(np.asarray(doping_cm3, float) / nc)


def joyce_dixon_reduced_fermi_level(density_ratio):
    """Joyce-Dixon approximation [2] of eta for r = n/N_c (valid for r up to about 8)."""
    r = np.asarray(density_ratio, float)
    a1, a2, a3, a4 = 1.0 / np.sqrt(8.0), -4.95009e-3, 1.48386e-4, -4.42563e-6
    return np.log(r) + a1 * r + a2 * r**2 + a3 * r**3 + a4 * r**4
