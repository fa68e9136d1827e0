"""III-V materials: band edges, masses, nonparabolicity, strain and monolayers.

Binaries GaAs, AlAs, InAs, InP, GaSb, AlSb, InSb and the ternaries AlGaAs
(x = Al fraction), InGaAs (x = In fraction), InAlAs (x = In fraction), GaAsSb and
AlAsSb (x = Sb fraction). The Gamma valley is described fully (edge, mass,
nonparabolicity, strain); of the X and L valleys only the band edges are given
(unstrained; [1]_ gives no X or L deformation potentials for these materials).
AlAs, AlSb, AlAsSb and AlGaAs above x of about 0.4 are indirect: their X
minimum lies below the Gamma edge. The transport uses the Gamma valley only.

Energies are in eV on the common scale of [1]_ (InSb valence-band maximum at
0 eV). The data and their sources are in :mod:`physics.material_data`; every
function here accepts a ternary composition ``x`` as a float or as an array of
any shape (vectorised, no loop over x).

References
----------
.. [1] I. Vurgaftman, J. R. Meyer and L. R. Ram-Mohan, "Band parameters for
   III-V compound semiconductors and their alloys", J. Appl. Phys. 89, 5815
   (2001).
.. [2] Y. P. Varshni, "Temperature dependence of the energy gap in
   semiconductors", Physica 34, 149 (1967).
.. [3] C. G. Van de Walle, "Band lineups and deformation potentials in the
   model-solid theory", Phys. Rev. B 39, 1871 (1989).
.. [4] J. W. Matthews and A. E. Blakeslee, "Defects in epitaxial multilayers:
   I. Misfit dislocations", J. Cryst. Growth 27, 118 (1974).
.. [5] D. F. Nelson, R. C. Miller and D. A. Kleinman, "Band nonparabolicity
   effects in semiconductor quantum wells", Phys. Rev. B 35, 7770 (1987).
.. [6] S. Adachi, Properties of Group-IV, III-V and II-VI Semiconductors
   (Wiley, Chichester, 2005).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from numbers import Real

import numpy as np

from .errors import InputError
from .material_data import BINARIES, TERNARIES, BinaryData

__all__ = [
    "KNOWN_MATERIALS",
    "MaterialParameters",
    "band_parameters",
    "VALLEYS",
    "critical_thickness_nm",
    "kane_nonparabolicity_per_ev",
    "lowest_valley",
    "lattice_constant_nm",
    "material_parameters",
    "material_table",
    "matthews_blakeslee_thickness_nm",
    "parse_material",
    "trade_name",
    "valley_edges_ev",
    "varshni_gap_ev",
]

FloatOrArray = float | np.ndarray

#: Canonical material names: binaries first, then ternaries.
KNOWN_MATERIALS: tuple[str, ...] = tuple(BINARIES) + tuple(TERNARIES)

_BY_LOWER_NAME = {name.lower(): name for name in KNOWN_MATERIALS}
_FRACTION_TOLERANCE = 1e-6  # trade-notation fractions must sum to 1 within this
_X_SLACK = 1e-12  # rounding slack accepted (and clipped) at x = 0 and x = 1
_MATCHED_MISMATCH = 1e-5  # |f| below this counts as lattice matched
_REFERENCE_TEMPERATURE_K = 300.0  # temperature of the tabulated lattice constants in [1]


# ----------------------------------------------------------------------------- names


def _known_list() -> str:
    return ", ".join(KNOWN_MATERIALS)


def _unknown(name: object) -> InputError:
    return InputError(
        f"unknown material {name!r}; known materials: {_known_list()} "
        "(ternaries also in trade notation, e.g. In0.53Ga0.47As)"
    )


def _format_x(x: object) -> str:
    return f"{x:g}" if isinstance(x, Real) else repr(x)


def _check_x(x: object) -> FloatOrArray:
    """Validate a composition (scalar or array) and return it as float or float array."""
    if isinstance(x, bool):
        raise InputError(f"x = {x!r} is not a number; give x in the allowed range [0, 1]")
    try:
        arr = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"x = {x!r} is not a number; give x in the allowed range [0, 1]") from None
    bad = ~np.isfinite(arr) | (arr < -_X_SLACK) | (arr > 1.0 + _X_SLACK)
    if np.any(bad):
        first = arr[bad].flat[0] if arr.ndim else arr
        raise InputError(f"x = {float(first):g} outside the allowed range [0, 1]")
    arr = np.clip(arr, 0.0, 1.0)
    return float(arr) if arr.ndim == 0 else arr


def _check_temperature(temperature_k: object) -> float:
    try:
        t = float(temperature_k)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise InputError(f"temperature_k = {temperature_k!r} is not a number") from None
    if not (math.isfinite(t) and t > 0.0):
        raise InputError(f"temperature_k = {t:g} must be finite and > 0")
    return t


def _check_lattice(substrate_lattice_nm: object) -> float:
    try:
        a = float(substrate_lattice_nm)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise InputError(
            f"substrate_lattice_nm = {substrate_lattice_nm!r} is not a number"
        ) from None
    if not (math.isfinite(a) and a > 0.0):
        raise InputError(f"substrate_lattice_nm = {a:g} must be finite and > 0")
    return a


_TRADE_RE = re.compile(r"(?:[A-Z][a-z]?(?:\d+(?:\.\d*)?|\.\d+)?)+")
_TOKEN_RE = re.compile(r"([A-Z][a-z]?)(\d+(?:\.\d*)?|\.\d+)?")


def _ternary_key(formula: tuple[tuple[str, str | None], ...]) -> tuple[frozenset[str], str, int]:
    """Key identifying a ternary by its mixed pair, common element and its position."""
    common = [(i, el) for i, (el, role) in enumerate(formula) if role is None]
    ((index, element),) = common
    mixed = frozenset(el for el, role in formula if role is not None)
    return mixed, element, index


_BY_TRADE_KEY = {_ternary_key(t.formula): name for name, t in TERNARIES.items()}


def _parse_trade(text: str) -> tuple[str, float]:
    """``'In0.53Ga0.47As'`` -> ``('InGaAs', 0.53)``; the mixed pair may be in either order."""
    if not _TRADE_RE.fullmatch(text):
        raise _unknown(text)
    tokens = _TOKEN_RE.findall(text)
    with_fraction = [(el, float(num)) for el, num in tokens if num]
    common = [(i, el) for i, (el, num) in enumerate(tokens) if not num]
    if len(tokens) != 3 or len(with_fraction) != 2 or len(common) != 1:
        raise _unknown(text)
    key = (frozenset(el for el, _ in with_fraction), common[0][1], common[0][0])
    canonical = _BY_TRADE_KEY.get(key)
    if canonical is None or len(key[0]) != 2:
        raise _unknown(text)
    fractions = dict(with_fraction)
    for el, value in fractions.items():
        if not 0.0 <= value <= 1.0:
            raise InputError(
                f"{text!r}: fraction {value:g} of {el} outside the allowed range [0, 1]"
            )
    total = sum(fractions.values())
    if abs(total - 1.0) > _FRACTION_TOLERANCE:
        raise InputError(f"{text!r}: fractions sum to {total:g}; they must sum to 1")
    (x_element,) = [el for el, role in TERNARIES[canonical].formula if role == "x"]
    return canonical, fractions[x_element]


def parse_material(name: str, x: float | None = None) -> tuple[str, float | None]:
    """Resolve a material name, in canonical or trade notation, and its composition.

    Parameters
    ----------
    name
        A canonical name from :data:`KNOWN_MATERIALS` (case-insensitive, e.g.
        ``'InGaAs'``) or trade notation (``'In0.53Ga0.47As'``,
        ``'GaAs0.51Sb0.49'``; the two mixed elements may come in either order).
    x
        Composition of a ternary when the name does not carry it: In fraction
        for InGaAs and InAlAs, Al fraction for AlGaAs, Sb fraction for GaAsSb
        and AlAsSb. Must be ``None`` for a binary.

    Returns
    -------
    tuple
        ``(canonical_name, x)``, with ``x`` ``None`` for a binary.

    Raises
    ------
    physics.errors.InputError
        (a ``ValueError``) for an unknown name (the message lists
        :data:`KNOWN_MATERIALS`), x outside the allowed range [0, 1], a binary
        given an x, a ternary without x, trade-notation fractions not summing to
        1 within 1e-6, or an x given both ways with different values.

    Examples
    --------
    >>> parse_material("In0.53Ga0.47As")
    ('InGaAs', 0.53)
    >>> parse_material("AlGaAs", 0.3)
    ('AlGaAs', 0.3)
    >>> parse_material("GaAs")
    ('GaAs', None)
    """
    if not isinstance(name, str):
        raise _unknown(name)
    text = name.strip()
    canonical = _BY_LOWER_NAME.get(text.lower())
    name_x: float | None = None
    if canonical is None:
        canonical, name_x = _parse_trade(text)
    if canonical in BINARIES:
        if x is not None:
            raise InputError(f"{canonical} is a binary and takes no composition (got x = {x!r})")
        return canonical, None
    given_x = None if x is None else _check_x(x)
    if name_x is None and given_x is None:
        raise InputError(
            f"{canonical} needs a composition x in the allowed range [0, 1], "
            f"e.g. {trade_name(canonical, TERNARIES[canonical].representative_x[0])}"
        )
    if name_x is not None and given_x is not None:
        if np.any(np.abs(np.asarray(given_x) - name_x) > _FRACTION_TOLERANCE):
            raise InputError(f"{text!r} has x = {name_x:g} but x = {_format_x(x)} was also given")
        return canonical, name_x
    return canonical, name_x if name_x is not None else given_x  # type: ignore[return-value]


def _fraction_text(value: float) -> str:
    return f"{value:.3f}".rstrip("0").rstrip(".")


def trade_name(name: str, x: float | None) -> str:
    """Trade notation of a material: ``('InGaAs', 0.53)`` -> ``'In0.53Ga0.47As'``.

    Binaries are returned unchanged. Fractions are written with up to three
    decimals, trailing zeros dropped; the complement is computed from the
    rounded x so that the two written fractions sum to 1.

    Parameters
    ----------
    name
        Canonical or trade-notation name (see :func:`parse_material`).
    x
        Composition of a ternary (scalar), ``None`` for a binary.

    Returns
    -------
    str
        E.g. ``'Al0.3Ga0.7As'``, ``'GaAs0.51Sb0.49'``, ``'InP'``.
    """
    canonical, x_value = parse_material(name, x)
    if x_value is None:
        return canonical
    if np.ndim(x_value) != 0:
        raise InputError("trade_name needs a scalar x")
    x_rounded = round(float(x_value), 3)
    fractions = {"x": x_rounded, "1-x": round(1.0 - x_rounded, 3)}
    return "".join(
        el if role is None else el + _fraction_text(fractions[role])
        for el, role in TERNARIES[canonical].formula
    )


def _resolve(name: str, x: object) -> tuple[str, FloatOrArray | None]:
    """Canonical name and validated x (scalar or array) for the public functions."""
    canonical = _BY_LOWER_NAME.get(name.strip().lower()) if isinstance(name, str) else None
    if canonical is None or canonical in BINARIES or x is None:
        return parse_material(name, x)  # type: ignore[arg-type]
    return canonical, _check_x(x)


# ----------------------------------------------------------------------------- formulas


def varshni_gap_ev(
    gap_0k_ev: FloatOrArray,
    *,
    alpha_ev_per_k: FloatOrArray,
    beta_k: FloatOrArray,
    temperature_k: FloatOrArray,
) -> FloatOrArray:
    """Band gap at temperature T from the Varshni relation [2]_.

    Parameters
    ----------
    gap_0k_ev
        Gap at 0 K, eV.
    alpha_ev_per_k
        Varshni alpha, eV/K (the tables of [1]_ quote meV/K).
    beta_k
        Varshni beta, K.
    temperature_k
        Temperature, K.

    Returns
    -------
    float or numpy.ndarray
        Gap at T, eV.

    Notes
    -----
    .. math:: E_g(T) = E_g(0) - \\frac{\\alpha T^2}{T + \\beta}

    References
    ----------
    .. [1] Vurgaftman et al., J. Appl. Phys. 89, 5815 (2001).
    .. [2] Y. P. Varshni, Physica 34, 149 (1967).
    """
    return gap_0k_ev - alpha_ev_per_k * temperature_k**2 / (temperature_k + beta_k)


def kane_nonparabolicity_per_ev(gap_ev: FloatOrArray, *, mass_m0: FloatOrArray) -> FloatOrArray:
    """Conduction-band nonparabolicity parameter of the two-band Kane model.

    Parameters
    ----------
    gap_ev
        Gamma gap, eV.
    mass_m0
        Band-edge effective mass / m0.

    Returns
    -------
    float or numpy.ndarray
        alpha in 1/eV, for the dispersion
        :math:`E (1 + \\alpha E) = \\hbar^2 k^2 / 2 m^*`, i.e. an energy-dependent
        mass :math:`m(E) = m^* (1 + \\alpha E)` to first order.

    Notes
    -----
    .. math:: \\alpha = \\frac{1}{E_g} \\left(1 - \\frac{m^*}{m_0}\\right)^2

    The two-band Kane form with the free-electron term, as used for quantum
    wells by Nelson, Miller and Kleinman [1]_ (attribution from memory; check
    the form against the paper's equations). It ignores the spin-orbit band;
    the Kane energy and spin-orbit splitting are available from
    :func:`band_parameters` for a three-band model.

    References
    ----------
    .. [1] D. F. Nelson, R. C. Miller and D. A. Kleinman, Phys. Rev. B 35,
       7770 (1987).
    """
    return (1.0 - mass_m0) ** 2 / gap_ev


def matthews_blakeslee_thickness_nm(
    mismatch: FloatOrArray,
    *,
    burgers_nm: FloatOrArray,
    poisson_ratio: FloatOrArray,
    cos_alpha: float = 0.5,
    cos_lambda: float = 0.5,
) -> FloatOrArray:
    """Matthews-Blakeslee critical thickness [1]_ for a given misfit.

    Parameters
    ----------
    mismatch
        Misfit f = |a_s - a| / a (dimensionless, >= 0).
    burgers_nm
        Burgers vector length b, nm.
    poisson_ratio
        Poisson ratio nu.
    cos_alpha, cos_lambda
        Cosines of the angle between dislocation line and Burgers vector, and
        between the slip direction and the interface direction normal to the
        dislocation line; 0.5 and 0.5 for 60-degree dislocations on {111}.

    Returns
    -------
    float or numpy.ndarray
        Critical thickness h_c, nm. ``inf`` where ``mismatch < 1e-5``
        (lattice matched). ``0.0`` where the equation has no solution (see
        Notes).

    Notes
    -----
    h_c solves ([1]_, force balance on a threading dislocation)

    .. math:: h_c = \\frac{b (1 - \\nu\\cos^2\\alpha)}{2\\pi f (1 + \\nu)\\cos\\lambda}
              \\left(\\ln\\frac{h_c}{b} + 1\\right).

    With :math:`u = h_c / b` and :math:`K` the prefactor over b this is
    :math:`u = K(\\ln u + 1)`, solved in closed form as
    :math:`u = -K\\,W_{-1}(-1/(K e))` with the lower branch of the Lambert W
    function (the larger of the two roots, the physical one; the other lies
    below :math:`u = K`). Real roots exist only for :math:`K \\ge 1`; for
    :math:`K < 1` (a misfit of roughly 20 % or more, beyond any alloy here) no
    coherent thickness exists and 0.0 is returned.

    References
    ----------
    .. [1] J. W. Matthews and A. E. Blakeslee, J. Cryst. Growth 27, 118 (1974).
    """
    f = np.abs(np.asarray(mismatch, dtype=float))
    b = np.asarray(burgers_nm, dtype=float)
    nu = np.asarray(poisson_ratio, dtype=float)
    matched = f < _MATCHED_MISMATCH
    f_safe = np.where(matched, 1.0, f)
    k = (1.0 - nu * cos_alpha**2) / (2.0 * np.pi * f_safe * (1.0 + nu) * cos_lambda)
    solvable = k >= 1.0 - 1e-12  # K = 1 within rounding: the double root u = 1
    k_safe = np.where(solvable, np.maximum(k, 1.0), 1.0)
    # W_-1 is NaN exactly at its branch point -1/e; step just inside it (error ~1e-7 in u).
    z = np.maximum(-1.0 / (k_safe * np.e), -1.0 / np.e + 1e-15)
    w = lambert_w_lower(z)
    h = np.where(matched, np.inf, np.where(solvable, -b * k_safe * w, 0.0))
    return float(h) if h.ndim == 0 else h


def lambert_w_lower(z: np.ndarray) -> np.ndarray:
    """The lower real branch ``W_-1(z)`` of the Lambert W function, ``z`` in ``(-1/e, 0)``.

    Written with numpy (``scipy.special.lambertw`` costs a command's start a
    quarter of a second of imports; the tests compare the two).

    Notes
    -----
    Start from the series about the branch point, ``W = -1 + p - p^2/3 +
    11 p^3/72`` with ``p = -sqrt(2 (1 + e z))``, for ``z < -0.25``, else from
    the asymptotic form ``L1 - L2 + L2/L1`` (``L1 = ln(-z)``, ``L2 = ln(-L1)``);
    then four steps of Halley's iteration on ``w e^w - z`` [1]_ (each roughly
    triples the correct digits; the start is within a few per cent).

    References
    ----------
    .. [1] R. M. Corless, G. H. Gonnet, D. E. G. Hare, D. J. Jeffrey and
       D. E. Knuth, "On the Lambert W function", Adv. Comput. Math. 5, 329
       (1996): the branch-point series (Eq. 4.22) and Halley's iteration
       (Eq. 5.9), from memory.
    """
    z = np.asarray(z, dtype=float)
    p = -np.sqrt(np.maximum(2.0 * (1.0 + np.e * z), 0.0))
    l1 = np.log(-np.minimum(z, -1e-300))
    l2 = np.log(-np.minimum(l1, -1e-300))
    w = np.where(z < -0.25, -1.0 + p - p**2 / 3.0 + 11.0 / 72.0 * p**3, l1 - l2 + l2 / l1)
    for _ in range(4):
        ew = np.exp(w)
        f = w * ew - z
        denominator = ew * (w + 1.0) - (w + 2.0) * f / (2.0 * w + 2.0)
        step = np.where(
            np.abs(w + 1.0) > 1e-7, f / np.where(denominator == 0, 1.0, denominator), 0.0
        )
        w = w - step
    return w


# ----------------------------------------------------------------------------- parameters

_PARAMETER_KEYS = (
    "lattice_nm",
    "gap_ev",
    "valence_band_offset_ev",
    "mass_m0",
    "kane_energy_ev",
    "spin_orbit_ev",
    "c11_gpa",
    "c12_gpa",
    "deformation_ac_ev",
    "permittivity_r",
    "gap_x_ev",
    "gap_l_ev",
    "lo_phonon_ev",
    "permittivity_high_r",
)
#: Names of the conduction-band valleys, in the order of :func:`valley_edges_ev`.
VALLEYS = ("Gamma", "X", "L")


def _binary_values(data: BinaryData, temperature_k: float) -> dict[str, float]:
    lattice_angstrom = data.lattice_300k_angstrom + data.lattice_expansion_angstrom_per_k * (
        temperature_k - _REFERENCE_TEMPERATURE_K
    )

    def gap(gap_0k_ev: float, alpha_mev_per_k: float, beta_k: float) -> float:
        return float(
            varshni_gap_ev(
                gap_0k_ev,
                alpha_ev_per_k=alpha_mev_per_k * 1e-3,
                beta_k=beta_k,
                temperature_k=temperature_k,
            )
        )

    return {
        "lattice_nm": lattice_angstrom / 10.0,
        "gap_ev": gap(data.gap_gamma_0k_ev, data.varshni_alpha_mev_per_k, data.varshni_beta_k),
        "valence_band_offset_ev": data.valence_band_offset_ev,
        "mass_m0": data.mass_gamma_m0,
        "kane_energy_ev": data.kane_energy_ev,
        "spin_orbit_ev": data.spin_orbit_ev,
        "c11_gpa": data.c11_gpa,
        "c12_gpa": data.c12_gpa,
        "deformation_ac_ev": data.deformation_ac_ev,
        "permittivity_r": data.permittivity_r,
        "gap_x_ev": gap(data.gap_x_0k_ev, data.varshni_alpha_x_mev_per_k, data.varshni_beta_x_k),
        "gap_l_ev": gap(data.gap_l_0k_ev, data.varshni_alpha_l_mev_per_k, data.varshni_beta_l_k),
        "lo_phonon_ev": 1e-3 * data.lo_phonon_mev,
        "permittivity_high_r": data.permittivity_high_r,
    }


def _output(value: FloatOrArray) -> FloatOrArray:
    return float(value) if np.ndim(value) == 0 else np.asarray(value, dtype=float)


def _bulk(canonical: str, x: FloatOrArray | None, temperature_k: float) -> dict[str, FloatOrArray]:
    if canonical in BINARIES:
        return dict(_binary_values(BINARIES[canonical], temperature_k))
    alloy = TERNARIES[canonical]
    at_0 = _binary_values(BINARIES[alloy.binary_x0], temperature_k)
    at_1 = _binary_values(BINARIES[alloy.binary_x1], temperature_k)
    xa = np.asarray(x, dtype=float)
    values: dict[str, FloatOrArray] = {}
    for key in _PARAMETER_KEYS:
        value = xa * at_1[key] + (1.0 - xa) * at_0[key]  # Vegard / linear interpolation
        if key in alloy.bowing:
            c0, c1 = alloy.bowing[key]
            value = value - xa * (1.0 - xa) * (c0 + c1 * xa)  # bowing, convention of [1]
        values[key] = _output(value)
    return values


def band_parameters(
    name: str, x: FloatOrArray | None = None, *, temperature_k: float = 300.0
) -> dict[str, FloatOrArray]:
    """All bulk (unstrained) parameters of a material at temperature T.

    Parameters
    ----------
    name
        Canonical name (or trade notation with scalar x, see :func:`parse_material`).
    x
        Ternary composition, float or array of any shape; ``None`` for a binary.
    temperature_k
        Temperature, K (> 0). Affects the lattice constant and the gap only.

    Returns
    -------
    dict
        ``lattice_nm`` (relaxed, at T), ``gap_ev`` (Gamma gap at T),
        ``valence_band_offset_ev`` (common scale, InSb VBM = 0), ``mass_m0``
        (Gamma), ``kane_energy_ev``, ``spin_orbit_ev``, ``c11_gpa``,
        ``c12_gpa``, ``deformation_ac_ev`` (conduction-band hydrostatic),
        ``permittivity_r`` (static), ``gap_x_ev`` and ``gap_l_ev`` (X and L
        minima above the valence-band maximum at T), ``lo_phonon_ev`` and
        ``permittivity_high_r`` (LO phonon, high-frequency permittivity; linear in
        x). Floats for a scalar or no x, arrays shaped like x otherwise.

    Notes
    -----
    Binary values are the recommended values of [1]_ (lattice constant and
    gap temperature dependence as in [1]_, Varshni form [2]_). Ternaries:
    linear in x between the binaries plus bowing,
    :math:`P(x) = x P_1 + (1 - x) P_0 - x (1 - x) C`, with the bowing parameters
    of [1]_ (gap, VBO, mass, Ep, spin-orbit, a_c, X and L gaps where given;
    the AlGaAs Gamma gap bowing is :math:`C = -0.127 + 1.310 x`). X and L
    gaps follow the Varshni form with their own alpha and beta from [1]_. The gap bowing is applied to
    the interpolated gap at T (bowing taken temperature independent, as in
    [1]_). Permittivities are from [3]_ (not in [1]_), linear in x. The values
    of [1]_ were transcribed from memory and have since been checked against
    openbandparams (which cites [1]_), all agreeing except the AlAsSb VBO
    bowing (unconfirmed); the permittivities are from memory, most agreeing
    with the Ioffe archive. Details per value in :mod:`physics.material_data`.

    References
    ----------
    .. [1] Vurgaftman et al., J. Appl. Phys. 89, 5815 (2001).
    .. [2] Y. P. Varshni, Physica 34, 149 (1967).
    .. [3] S. Adachi, Properties of Group-IV, III-V and II-VI Semiconductors
       (Wiley 2005).
    """
    canonical, x_value = _resolve(name, x)
    return _bulk(canonical, x_value, _check_temperature(temperature_k))


def lattice_constant_nm(
    name: str, x: FloatOrArray | None = None, *, temperature_k: float = 300.0
) -> FloatOrArray:
    """Relaxed lattice constant at temperature T, nm.

    Parameters
    ----------
    name
        Canonical name (or trade notation with scalar x).
    x
        Ternary composition (float or array); ``None`` for a binary.
    temperature_k
        Temperature, K (> 0).

    Returns
    -------
    float or numpy.ndarray
        :math:`a(T) = a(300\\,K) + (da/dT)(T - 300\\,K)` for binaries [1]_,
        linear in x for ternaries (Vegard's law, as recommended in [1]_).

    References
    ----------
    .. [1] Vurgaftman et al., J. Appl. Phys. 89, 5815 (2001).
    """
    return band_parameters(name, x, temperature_k=temperature_k)["lattice_nm"]


@dataclass(frozen=True)
class MaterialParameters:
    """Parameters of one layer material as the transport kernel needs them.

    Each numeric field is a float, or an array shaped like ``x`` when ``x`` is
    an array.
    """

    name: str  #: canonical material name
    x: float | None | np.ndarray  #: ternary composition, None for a binary
    conduction_band_ev: FloatOrArray  #: Gamma edge on the common scale (strain shift included)
    mass_m0: FloatOrArray  #: Gamma effective mass / m0
    nonparabolicity_per_ev: FloatOrArray  #: Kane alpha, 1/eV
    gap_ev: FloatOrArray  #: Gamma gap at T, unstrained
    lattice_nm: FloatOrArray  #: relaxed lattice constant at T
    monolayer_nm: FloatOrArray  #: a_perp / 2 (strained) or a / 2
    strain_xx: FloatOrArray  #: in-plane strain, 0 when unstrained
    permittivity_r: FloatOrArray  #: static relative permittivity
    x_valley_ev: FloatOrArray = float("nan")  #: X-valley edge, common scale, unstrained
    l_valley_ev: FloatOrArray = float("nan")  #: L-valley edge, common scale, unstrained
    lo_phonon_ev: FloatOrArray = 0.0362  #: zone-centre LO-phonon energy, eV
    permittivity_high_r: FloatOrArray = 10.89  #: high-frequency relative permittivity


def _pseudomorphic_strain(
    bulk: dict[str, FloatOrArray], substrate_lattice_nm: float
) -> tuple[FloatOrArray, FloatOrArray, FloatOrArray]:
    """In-plane strain, growth-direction strain and conduction-band shift on (001)."""
    a = bulk["lattice_nm"]
    eps_xx = (substrate_lattice_nm - a) / a
    eps_zz = -2.0 * bulk["c12_gpa"] / bulk["c11_gpa"] * eps_xx  # biaxial stress, (001)
    shift_ev = bulk["deformation_ac_ev"] * (2.0 * eps_xx + eps_zz)  # a_c Tr(eps), Van de Walle
    return eps_xx, eps_zz, shift_ev


def material_parameters(
    name: str,
    x: FloatOrArray | None = None,
    *,
    temperature_k: float = 300.0,
    substrate_lattice_nm: float | None = None,
    strain: bool = True,
) -> MaterialParameters:
    """Band edge, mass, nonparabolicity, strain and monolayer of a layer material.

    Parameters
    ----------
    name
        Canonical name (as from :func:`parse_material`; trade notation with
        scalar x is also accepted).
    x
        Ternary composition, float or array of any shape (vectorised); ``None``
        for a binary.
    temperature_k
        Temperature, K (> 0).
    substrate_lattice_nm
        In-plane lattice constant the layer is grown on, nm, at the same
        temperature (e.g. ``lattice_constant_nm('InP', temperature_k=T)``).
        ``None``: the layer is taken relaxed.
    strain
        If False the layer is taken relaxed even with a substrate given.

    Returns
    -------
    MaterialParameters

    Notes
    -----
    Conduction band edge (Gamma) on the common scale of [1]_:
    :math:`E_c = \\mathrm{VBO} + E_g(T) + \\Delta E_c`, the valence-band
    offset taken temperature independent as in [1]_. For a layer coherently
    strained to a (001) substrate of lattice :math:`a_s` ([2]_):

    .. math::
        \\varepsilon_{xx} = \\frac{a_s - a}{a}, \\quad
        \\varepsilon_{zz} = -2\\frac{c_{12}}{c_{11}}\\varepsilon_{xx}, \\quad
        \\Delta E_c = a_c (2\\varepsilon_{xx} + \\varepsilon_{zz}),

    and the monolayer thickness is :math:`a_\\perp / 2` with
    :math:`a_\\perp = a (1 + \\varepsilon_{zz})`; :math:`a / 2` unstrained.
    ``gap_ev`` is the unstrained gap; the valence bands (and their strain
    splitting) are not described. The X and L edges are
    :math:`\\mathrm{VBO} + E_g^{X,L}(T)`, unstrained: [1]_ gives no X or L
    deformation potentials for these materials, so their strain shift (and
    the splitting of the X valleys under biaxial strain, which can reach
    0.1-0.2 eV for AlAs on InP; an estimate, not computed here) is omitted. Nonparabolicity from
    :func:`kane_nonparabolicity_per_ev` with the unstrained gap and mass.
    Whether the layer is thinner than its critical thickness is not checked
    here (see :func:`critical_thickness_nm`).

    References
    ----------
    .. [1] Vurgaftman et al., J. Appl. Phys. 89, 5815 (2001).
    .. [2] C. G. Van de Walle, Phys. Rev. B 39, 1871 (1989).
    """
    canonical, x_value = _resolve(name, x)
    bulk = _bulk(canonical, x_value, _check_temperature(temperature_k))
    a = bulk["lattice_nm"]
    if substrate_lattice_nm is not None and strain:
        eps_xx, eps_zz, shift_ev = _pseudomorphic_strain(bulk, _check_lattice(substrate_lattice_nm))
        monolayer = a * (1.0 + eps_zz) / 2.0
    else:
        eps_xx, shift_ev, monolayer = 0.0 * a, 0.0, a / 2.0
    return MaterialParameters(
        name=canonical,
        x=x_value,
        conduction_band_ev=_output(bulk["valence_band_offset_ev"] + bulk["gap_ev"] + shift_ev),
        mass_m0=bulk["mass_m0"],
        nonparabolicity_per_ev=_output(
            kane_nonparabolicity_per_ev(bulk["gap_ev"], mass_m0=bulk["mass_m0"])
        ),
        gap_ev=bulk["gap_ev"],
        lattice_nm=a,
        monolayer_nm=_output(monolayer),
        strain_xx=_output(eps_xx),
        permittivity_r=bulk["permittivity_r"],
        x_valley_ev=_output(bulk["valence_band_offset_ev"] + bulk["gap_x_ev"]),
        l_valley_ev=_output(bulk["valence_band_offset_ev"] + bulk["gap_l_ev"]),
        lo_phonon_ev=bulk["lo_phonon_ev"],
        permittivity_high_r=bulk["permittivity_high_r"],
    )


def valley_edges_ev(params: MaterialParameters) -> dict[str, FloatOrArray]:
    """Conduction-band edges of the Gamma, X and L valleys (common scale, eV).

    Gamma with its strain shift, X and L unstrained (see
    :func:`material_parameters`). Keys are :data:`VALLEYS`.
    """
    return dict(zip(VALLEYS, (params.conduction_band_ev, params.x_valley_ev, params.l_valley_ev)))


def lowest_valley(params: MaterialParameters) -> str:
    """Name of the lowest conduction-band valley of a scalar material: 'Gamma', 'X' or 'L'."""
    edges = valley_edges_ev(params)
    return min(edges, key=lambda k: float(edges[k]))


def critical_thickness_nm(
    name: str,
    x: FloatOrArray | None = None,
    *,
    substrate_lattice_nm: float,
    temperature_k: float = 300.0,
) -> FloatOrArray:
    """Matthews-Blakeslee critical thickness of a layer on a substrate, nm.

    Parameters
    ----------
    name
        Canonical name (or trade notation with scalar x).
    x
        Ternary composition (float or array); ``None`` for a binary.
    substrate_lattice_nm
        Substrate lattice constant, nm, at the same temperature.
    temperature_k
        Temperature, K (> 0), for the layer's lattice constant.

    Returns
    -------
    float or numpy.ndarray
        Critical thickness, nm; ``inf`` when lattice matched
        (:math:`f < 10^{-5}`), ``0.0`` when the equation has no solution (see
        :func:`matthews_blakeslee_thickness_nm`).

    Notes
    -----
    Evaluates :func:`matthews_blakeslee_thickness_nm` [1]_ for 60-degree
    dislocations (:math:`\\cos\\alpha = \\cos\\lambda = 0.5`) with
    :math:`b = a/\\sqrt{2}`, :math:`\\nu = c_{12}/(c_{11} + c_{12})` and
    :math:`f = |a_s - a|/a`, elastic constants from [2]_. A single-layer
    equilibrium estimate: MBE layers often stay coherent somewhat beyond it,
    and a stack of several strained layers needs its own (stricter) check.

    References
    ----------
    .. [1] J. W. Matthews and A. E. Blakeslee, J. Cryst. Growth 27, 118 (1974).
    .. [2] Vurgaftman et al., J. Appl. Phys. 89, 5815 (2001).
    """
    canonical, x_value = _resolve(name, x)
    bulk = _bulk(canonical, x_value, _check_temperature(temperature_k))
    a = np.asarray(bulk["lattice_nm"])
    substrate = _check_lattice(substrate_lattice_nm)
    c11, c12 = np.asarray(bulk["c11_gpa"]), np.asarray(bulk["c12_gpa"])
    return matthews_blakeslee_thickness_nm(
        np.abs(substrate - a) / a,
        burgers_nm=a / math.sqrt(2.0),
        poisson_ratio=c12 / (c11 + c12),
    )


def material_table(temperature_k: float = 300.0) -> list[dict]:
    """Unstrained parameters of every binary and of the ternaries at representative x.

    Parameters
    ----------
    temperature_k
        Temperature, K (> 0).

    Returns
    -------
    list of dict
        One row per binary, then per ternary at its representative
        compositions (AlGaAs x = 0.3, InGaAs 0.53 and InAlAs 0.52 lattice
        matched to InP, GaAsSb 0.49, AlAsSb 0.44; their end points are the
        binary rows). Keys: ``material`` (trade name), ``x``, ``lattice_nm``,
        ``gap_ev``, ``conduction_band_ev`` (Gamma edge), ``x_valley_ev``,
        ``l_valley_ev`` (X and L edges, same scale), ``lowest_valley``,
        ``mass_m0``, ``nonparabolicity_per_ev``, ``monolayer_nm``,
        ``permittivity_r``, ``source``.
    """
    t = _check_temperature(temperature_k)
    entries: list[tuple[str, float | None, str]] = [
        (name, None, data.source) for name, data in BINARIES.items()
    ]
    entries += [
        (name, x, alloy.source) for name, alloy in TERNARIES.items() for x in alloy.representative_x
    ]
    rows = []
    for name, x, source in entries:
        p = material_parameters(name, x, temperature_k=t)
        rows.append(
            {
                "material": trade_name(name, x),
                "x": x,
                "lattice_nm": p.lattice_nm,
                "gap_ev": p.gap_ev,
                "conduction_band_ev": p.conduction_band_ev,
                "x_valley_ev": p.x_valley_ev,
                "l_valley_ev": p.l_valley_ev,
                "lowest_valley": lowest_valley(p),
                "mass_m0": p.mass_m0,
                "nonparabolicity_per_ev": p.nonparabolicity_per_ev,
                "monolayer_nm": p.monolayer_nm,
                "permittivity_r": p.permittivity_r,
                "source": source,
            }
        )
    return rows
