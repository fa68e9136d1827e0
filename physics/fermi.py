"""Fermi-Dirac statistics: the Fermi-Dirac integrals, density of states, Fermi levels.

The one home of the Fermi-Dirac integrals used in physics/: the occupation
(order -1), ``F_0`` (the Tsu-Esaki supply function and 2D sheet densities) and
``F_1/2`` (3D densities: contacts and the Thomas-Fermi charge), the last both by
quadrature and as a fast tabulated interpolant for Newton iterations.
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
.. [4] NIST Digital Library of Mathematical Functions, section 25.12 (complete
   Fermi-Dirac integrals: F_j(x) = -Li_{j+1}(-e^x), so F_0(x) = ln(1 + e^x)).
"""

from __future__ import annotations

import numpy as np

from .constants import BOLTZMANN_EV_K, ELECTRON_MASS_KG, ELEMENTARY_CHARGE_C, HBAR_J_S

__all__ = [
    "effective_density_of_states_cm3",
    "occupation",
    "fermi_dirac_zero",
    "fermi_dirac_half",
    "fermi_dirac_half_tabulated",
    "fermi_dirac_half_spline",
    "reduced_fermi_level",
    "fermi_level_ev",
    "joyce_dixon_reduced_fermi_level",
]

# Gauss-Legendre nodes on [0, 1] for the F_1/2 integral after the substitution eps = t^2.
# 100 nodes on each side of the Fermi step t = sqrt(eta) (see fermi_dirac_half).
_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(100)
_NODES = 0.5 * (_NODES + 1.0)
_WEIGHTS = 0.5 * _WEIGHTS


def effective_density_of_states_cm3(mass_m0, *, temperature_k):
    """N_c = 2 (m kT / (2 pi hbar^2))^(3/2) in cm^-3 ([3], Eq. 1.16).

    Parameters
    ----------
    mass_m0
        Density-of-states mass, m0, any shape.
    temperature_k
        Temperature, K, broadcasting with ``mass_m0``.
    """
    mass = np.asarray(mass_m0, float) * ELECTRON_MASS_KG
    kt_j = BOLTZMANN_EV_K * np.asarray(temperature_k, float) * ELEMENTARY_CHARGE_C
    return 2.0 * (mass * kt_j / (2.0 * np.pi * HBAR_J_S**2)) ** 1.5 * 1e-6


def occupation(energy_ev, *, mu_ev, kt_ev):
    """Fermi-Dirac occupation ``1 / (1 + exp((E - mu) / kT))``, overflow-safe.

    The integral of order -1, ``F_-1((mu - E)/kT)`` [4]_, written as
    ``(1 - tanh((E - mu) / 2kT)) / 2``, which neither overflows nor divides.

    Parameters
    ----------
    energy_ev
        Energies E, eV, any shape broadcasting with the others.
    mu_ev
        Fermi level mu, eV, on the same scale as ``energy_ev``.
    kt_ev
        Thermal energy kT, eV, positive.
    """
    return 0.5 * (1.0 - np.tanh(0.5 * (energy_ev - mu_ev) / kt_ev))


def fermi_dirac_zero(eta):
    """Fermi-Dirac integral of order 0, ``F_0(eta) = ln(1 + exp(eta))`` [4]_, overflow-safe.

    Written ``max(eta, 0) + log1p(exp(-|eta|))``: exact in both limits (``eta`` for
    large ``eta``, ``exp(eta)`` for very negative ``eta``) and about twice as fast as
    ``np.logaddexp(0, eta)``. The supply function of the Tsu-Esaki current and the
    sheet density of a 2D subband are ``kT F_0``.

    Parameters
    ----------
    eta
        Reduced energy ``(mu - E) / kT``, any shape.
    """
    eta = np.asarray(eta, float)
    return np.maximum(eta, 0.0) + np.log1p(np.exp(-np.abs(eta)))


def fermi_dirac_half(eta):
    """Normalised Fermi-Dirac integral F_1/2(eta) = 2/sqrt(pi) int_0^inf sqrt(e)/(1+exp(e-eta)) de.

    Computed by Gauss-Legendre quadrature over ``t = sqrt(e)`` up to
    ``t_max = sqrt(max(eta, 0) + 60)``; the neglected tail is below
    ``exp(-60)`` relative. The range is split at the Fermi step ``t = sqrt(eta)``
    (for eta > 0), one Gauss-Legendre rule on each side: a single rule across the
    step loses accuracy as eta grows (1e-7 relative at eta = 50). Accurate to
    about 1e-12 relative for eta in [-50, 200]; above 200 the Sommerfeld series is taken
    (:data:`_SOMMERFELD_ETA`).
    """
    return _fermi_dirac_half_and_slope(eta)[0]


def _fermi_dirac_half_and_slope(eta):
    """F_1/2(eta) and its derivative F_-1/2(eta) on the quadrature of :func:`fermi_dirac_half`."""
    eta = np.asarray(eta, float)
    t_step = np.sqrt(np.maximum(eta, 0.0))
    t_max = np.sqrt(np.maximum(eta, 0.0) + 60.0)
    t = np.concatenate(
        [t_step[..., None] * _NODES, t_step[..., None] + (t_max - t_step)[..., None] * _NODES],
        axis=-1,
    )
    w = np.concatenate([t_step[..., None] * _WEIGHTS, (t_max - t_step)[..., None] * _WEIGHTS], -1)
    # the occupation 1 / (1 + e^x), x = t^2 - eta, as e^-x / (1 + e^-x) above the Fermi
    # step: overflow-safe and exact in relative terms in both tails (as exp(-logaddexp(0, x))
    # to rounding, about three times faster: numpy vectorises exp, not logaddexp)
    x = t * t - eta[..., None]
    e = np.exp(-np.abs(x))
    occupation = np.where(x > 0.0, e, 1.0) / (1.0 + e)
    weighted = (4.0 / np.sqrt(np.pi)) * w * (t * t) * occupation
    value = np.sum(weighted, axis=-1)
    # d/d eta of the occupation is occ (1 - occ); the moving split point adds nothing
    # (the integrand is continuous there)
    slope = np.sum(weighted * (1.0 - occupation), axis=-1)
    deep = eta > _SOMMERFELD_ETA
    if np.any(deep):
        value, slope = np.where(
            deep, _sommerfeld_half_and_slope(np.maximum(eta, 1.0)), (value, slope)
        )
    return value, slope


#: Above this eta :func:`_fermi_dirac_half_and_slope` takes the Sommerfeld series: the
#: quadrature's error grows with eta beyond it (1e-12 at 200, 6e-8 at 1000, 1e-6 at 1560
#: against mpmath's polylog), the series' first omitted term is below 1e-13 there.
_SOMMERFELD_ETA = 200.0


def _sommerfeld_half_and_slope(eta):
    """F_1/2 and F_-1/2 by the Sommerfeld expansion of ``F_j = eta^(j+1) / Gamma(j+2) (1 +
    j(j+1) pi^2/6 eta^-2 + j(j+1)(j-1)(j-2) 7 pi^4/360 eta^-4 + ...)``, exponentially small
    terms left out (e.g. J. S. Blakemore, Solid-State Electron. 25, 1067 (1982); from
    memory, checked against mpmath's polylog in the tests)."""
    x = 1.0 / (eta * eta)
    p2, p4 = np.pi**2, np.pi**4
    value = (
        (4.0 / (3.0 * np.sqrt(np.pi))) * eta**1.5 * (1.0 + p2 / 8.0 * x + 7.0 * p4 / 640.0 * x * x)
    )
    slope = (2.0 / np.sqrt(np.pi)) * np.sqrt(eta) * (1.0 - p2 / 24.0 * x - 7.0 * p4 / 384.0 * x * x)
    return value, slope


#: The tabulated ``ln F_1/2`` of :func:`fermi_dirac_half_tabulated`: range and step of eta.
_ETA_LO, _ETA_HI, _ETA_STEP = -30.0, 120.0, 0.02
_TABLE: dict[str, np.ndarray] = {}
#: Etas per block of the table's quadrature (:func:`_hermite_table`).
_TABLE_BLOCK = 256


def _hermite_table() -> np.ndarray:
    """Cubic Hermite coefficients of ``ln F_1/2`` per cell of the table ``(n_cells, 4)``,
    highest power first, from the quadrature's values and slopes at the cells' ends."""
    h = _ETA_STEP
    grid = np.arange(_ETA_LO, _ETA_HI + 0.5 * h, h)
    # in blocks of _TABLE_BLOCK etas: the same numbers (each eta's sum is its own), but the
    # quadrature's arrays stay in cache (one block of 200 nodes ~ 0.4 MB instead of 12 MB):
    # a fraction of the CPU time in a new process, which would otherwise page in the
    # large arrays
    parts = [
        _fermi_dirac_half_and_slope(grid[i : i + _TABLE_BLOCK])
        for i in range(0, grid.size, _TABLE_BLOCK)
    ]
    f = np.concatenate([p[0] for p in parts])
    df = np.concatenate([p[1] for p in parts])
    y, s = np.log(f), df / f  # ln F and its slope F_-1/2 / F_1/2
    m = np.diff(y) / h
    cubic = (s[:-1] + s[1:] - 2.0 * m) / h**2
    square = (3.0 * m - 2.0 * s[:-1] - s[1:]) / h
    return np.ascontiguousarray(np.stack([cubic, square, s[:-1], y[:-1]], axis=1))


def fermi_dirac_half_tabulated(eta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """F_1/2(eta) and its derivative dF_1/2/d eta = F_-1/2(eta), fast, for Newton iterations.

    ``ln F_1/2`` is tabulated once with the quadrature of :func:`fermi_dirac_half`, values
    and slopes, on ``[-30, 120]`` (step 0.02) and interpolated by the cubic Hermite
    polynomial of each cell (relative error 2e-11 in ``F_1/2``, 4e-9 in its derivative,
    measured on 2e5 random eta; the not-a-knot spline of step 0.01 it replaces, 5e-12 and
    5e-10, took scipy's import and twice the quadrature's nodes at a command's start);
    below ``-30`` the nondegenerate limit ``F_1/2 = exp(eta)`` is used (relative
    error ``exp(eta) / 2^1.5`` < 1e-13, [1]_); above 120 the degenerate limit
    ``(4 / (3 sqrt(pi))) eta^1.5`` (relative error ~1e-4, [1]_).

    Parameters
    ----------
    eta
        Reduced Fermi level ``(mu - E_c) / kT``, ndarray of any shape.

    Returns
    -------
    value, slope
        ``F_1/2(eta)`` and ``dF_1/2/d eta``, the shape of ``eta``.
    """
    coef = _TABLE.get("coef")
    if coef is None:
        coef = _TABLE["coef"] = _hermite_table()
    # the cubic evaluated directly on its uniform cells
    e = np.clip(eta, _ETA_LO, _ETA_HI)
    cell = np.minimum(((e - _ETA_LO) / _ETA_STEP).astype(np.intp), coef.shape[0] - 1)
    dx = e - (_ETA_LO + cell * _ETA_STEP)
    c3, c2, c1, c0 = (coef[cell, k] for k in range(4))
    log_f = ((c3 * dx + c2) * dx + c1) * dx + c0
    f = np.exp(log_f)
    df = f * ((3.0 * c3 * dx + 2.0 * c2) * dx + c1)
    low = eta < _ETA_LO
    high = eta > _ETA_HI
    if np.any(low):
        f = np.where(low, np.exp(np.maximum(eta, -700.0)), f)
        df = np.where(low, f, df)
    if np.any(high):
        c = 4.0 / (3.0 * np.sqrt(np.pi))
        f = np.where(high, c * np.maximum(eta, 0.0) ** 1.5, f)
        df = np.where(high, 1.5 * c * np.sqrt(np.maximum(eta, 0.0)), df)
    return f, df


def fermi_dirac_half_spline() -> tuple[np.ndarray, float, float, float]:
    """The table :func:`fermi_dirac_half_tabulated` evaluates, for compiled code doing the same.

    Returns
    -------
    coef, eta_lo, eta_step, eta_hi
        Cubic coefficients of ``ln F_1/2`` per cell ``(n_cells, 4)``, highest power first,
        on the uniform cells from ``eta_lo`` by ``eta_step`` to ``eta_hi`` (built on first use).
    """
    if "coef" not in _TABLE:
        fermi_dirac_half_tabulated(np.zeros(1))
    return _TABLE["coef"], _ETA_LO, _ETA_STEP, _ETA_HI


def reduced_fermi_level(density_ratio):
    """Solve F_1/2(eta) = n / N_c for eta.

    Newton's method on ``ln F_1/2(eta) = ln(n/N_c)`` (``ln F_1/2`` is increasing
    and concave, so the iteration is monotone after one step) from the
    Joyce-Dixon estimate [2]_ (degenerate limit ``eta = (3 sqrt(pi) r / 4)^(2/3)``
    for large ratios), vectorised, to 1e-13 in eta.

    Parameters
    ----------
    density_ratio
        n / N_c, positive.
    """
    ratio = np.asarray(density_ratio, float)
    if np.any(ratio <= 0):
        raise ValueError("density ratio n/N_c must be positive")
    target = np.log(ratio)
    degenerate = (0.75 * np.sqrt(np.pi) * ratio) ** (2.0 / 3.0)
    eta = np.where(ratio < 8.0, joyce_dixon_reduced_fermi_level(np.minimum(ratio, 8.0)), degenerate)
    for _ in range(50):
        value, slope = _fermi_dirac_half_and_slope(eta)
        step = (target - np.log(value)) * value / slope
        # no upper bound: a contact at 1 K is degenerate by eta of several thousand (a bound
        # of 300 held the InP example's emitter at 26 meV instead of 135 and cut its current
        # 10 times below about 8 K; found 2026-12-05)
        eta = np.maximum(eta + step, -60.0)
        if np.all(np.abs(step) < 1e-13 * np.maximum(1.0, np.abs(eta))):
            break
    return eta


def fermi_level_ev(doping_cm3, *, mass_m0, temperature_k):
    """Fermi level above the band edge of fully ionised n-type bulk, eV.

    Solved once per distinct (doping, mass, temperature), all new ones in one
    vectorised Newton solve, and remembered: a sweep asks for the same few
    contacts many times.

    Parameters
    ----------
    doping_cm3
        Ionised donor density, cm^-3, positive, any shape.
    mass_m0
        Band-edge mass, m0, broadcasting with ``doping_cm3``.
    temperature_k
        Temperature, K, broadcasting likewise.
    """
    doping, mass, temperature = np.broadcast_arrays(
        *(np.asarray(a, float) for a in (doping_cm3, mass_m0, temperature_k))
    )
    if doping.size <= _DIRECT_LOOKUPS:  # a sweep's few contacts: plain look-ups, no sorting
        keys = list(
            zip(doping.ravel().tolist(), mass.ravel().tolist(), temperature.ravel().tolist())
        )
        levels = [_FERMI_LEVELS.get(key) for key in keys]
        if None not in levels:
            return np.array(levels).reshape(doping.shape)
    rows = np.stack([doping.ravel(), mass.ravel(), temperature.ravel()], axis=-1)
    distinct, inverse = np.unique(rows, axis=0, return_inverse=True)
    found = [_FERMI_LEVELS.get(tuple(key)) for key in distinct.tolist()]
    new = np.array([f is None for f in found])
    if new.any():
        d, m, t = distinct[new].T
        solved = (
            BOLTZMANN_EV_K
            * t
            * reduced_fermi_level(d / effective_density_of_states_cm3(m, temperature_k=t))
        )
        if len(_FERMI_LEVELS) > _FERMI_CACHE_SIZE:
            _FERMI_LEVELS.clear()
        for key, level in zip(distinct[new].tolist(), solved.tolist(), strict=True):
            _FERMI_LEVELS[tuple(key)] = level
        found = [_FERMI_LEVELS[tuple(key)] for key in distinct.tolist()]
    return np.array(found)[inverse.ravel()].reshape(doping.shape)


#: Fermi levels already solved, keyed by (doping, mass, temperature).
_FERMI_LEVELS: dict[tuple[float, float, float], float] = {}
_FERMI_CACHE_SIZE = 65536
#: Up to this many contacts are looked up one by one (faster than sorting out the distinct ones).
_DIRECT_LOOKUPS = 256


def joyce_dixon_reduced_fermi_level(density_ratio):
    """Joyce-Dixon approximation [2] of eta for r = n/N_c (valid for r up to about 8)."""
    r = np.asarray(density_ratio, float)
    a1, a2, a3, a4 = 1.0 / np.sqrt(8.0), -4.95009e-3, 1.48386e-4, -4.42563e-6
    return np.log(r) + a1 * r + a2 * r**2 + a3 * r**3 + a4 * r**4
