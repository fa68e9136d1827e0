"""Shared builders and independent reference formulas for the physics tests.

Everything here is written from the published formulas named beside each
function, with constants from ``scipy.constants`` (CODATA), not from the
project's own modules, so that the tests compare the kernel against an
independent evaluation. Only the builders (``flat_profile``,
``custom_table``) use the project's data classes, to feed the kernel.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
from scipy import constants as sc
from scipy.optimize import brentq, minimize_scalar
from scipy.special import airy
from wellwright.physics.bands import Profile
from wellwright.physics.stack import LayerTable
from wellwright.physics.transmission import transmission

#: hbar^2 / (2 m0) in eV nm^2 from CODATA (scipy.constants), written out independently.
HBAR2_2M0_EV_NM2 = sc.hbar**2 / (2.0 * sc.m_e) / sc.e * 1e18
#: Boltzmann constant in eV/K (CODATA).
KB_EV_K = sc.k / sc.e

# A GaAs / Al0.3Ga0.7As-like pair of custom materials (round numbers, invented for the
# tests; close to common textbook values): well mass 0.067, barrier mass 0.092, offset 0.3 eV.
M_WELL = 0.067
M_BARRIER = 0.092
V_BARRIER_EV = 0.3


# ----------------------------------------------------------------------------- builders


def flat_profile(edges_ev, masses_m0, widths_nm, alphas_per_ev=None) -> Profile:
    """One piecewise-constant profile (batch shape ``()``); first and last entries: contacts."""
    edges = np.asarray(edges_ev, float)
    n = edges.size
    masses = np.broadcast_to(np.asarray(masses_m0, float), (n,)).copy()
    alphas = (
        np.zeros(n)
        if alphas_per_ev is None
        else np.broadcast_to(np.asarray(alphas_per_ev, float), (n,)).copy()
    )
    widths = np.asarray(widths_nm, float).copy()
    widths[0] = widths[-1] = 0.0
    return Profile(
        edge_ev=edges,
        mass_m0=masses,
        nonparabolicity_per_ev=alphas,
        width_nm=widths,
        layer_index=np.arange(n),
    )


def custom_table(
    edges_ev,
    masses_m0,
    thickness_nm,
    *,
    doping_cm3: float = 1e18,
    temperature_k: float = 300.0,
    alphas_per_ev=0.0,
    permittivity_r: float = 12.9,
) -> LayerTable:
    """A LayerTable of custom layers; rows are stacks (1-D input gives one stack)."""
    edges = np.atleast_2d(np.asarray(edges_ev, float))
    shape = edges.shape

    def full(x):
        return np.broadcast_to(np.asarray(x, float), shape).copy()

    doping = np.zeros(shape)
    doping[:, 0] = doping[:, -1] = doping_cm3
    return LayerTable(
        edge_ev=edges,
        mass_m0=full(masses_m0),
        nonparabolicity_per_ev=full(alphas_per_ev),
        thickness_nm=full(thickness_nm),
        doping_cm3=doping,
        permittivity_r=full(permittivity_r),
        temperature_k=np.full(shape[0], float(temperature_k)),
    )


def double_barrier_profile(b1_nm: float, b2_nm: float, well_nm: float = 5.0) -> Profile:
    """Flat-band double barrier of the GaAs/AlGaAs-like custom pair, contacts of well material."""
    v, mw, mb = V_BARRIER_EV, M_WELL, M_BARRIER
    return flat_profile([0, v, 0, v, 0], [mw, mb, mw, mb, mw], [0, b1_nm, well_nm, b2_nm, 0])


def single_barrier_profile(b_nm: float) -> Profile:
    v, mw, mb = V_BARRIER_EV, M_WELL, M_BARRIER
    return flat_profile([0, v, 0], [mw, mb, mw], [0, b_nm, 0])


def t_at(energy_ev: float, profile: Profile) -> float:
    """Kernel transmission at one energy of a single profile, as a float."""
    return float(np.asarray(transmission(np.array([energy_ev]), profile=profile)).reshape(-1)[0])


def write_stack(folder: Path, text: str, name: str = "stack.toml") -> Path:
    path = Path(folder) / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


# ----------------------------------------------------------------------------- reference formulas


def wave_vector_per_nm(kinetic_ev, mass_m0):
    """|k| = sqrt(2 m |E - V|) / hbar in 1/nm."""
    return np.sqrt(mass_m0 * np.abs(kinetic_ev) / HBAR2_2M0_EV_NM2)


def barrier_transmission(
    energy_ev, *, height_ev, width_nm, m_out, m_in, alpha_out=0.0, alpha_in=0.0
):
    """Rectangular barrier with BenDaniel-Duke matching (psi and psi'/m continuous).

    Griffiths, Introduction to Quantum Mechanics, 2nd ed., Problem 2.33 (equal masses):
    ``1/T = 1 + V^2/(4E(V-E)) sinh^2(kappa a)`` below the top and
    ``1/T = 1 + V^2/(4E(E-V)) sin^2(k' a)`` above it. With the mass step
    [BenDaniel and Duke, Phys. Rev. 152, 683 (1966)] the same derivation with
    ``q = k/m`` gives ``1/T = 1 + ((q1^2 + q2^2)^2 / (4 q1^2 q2^2)) sinh^2(kappa a)``
    (evanescent, ``q2 = kappa/m_in``) and ``1/T = 1 + ((q1^2 - q2^2)^2 / (4 q1^2 q2^2))
    sin^2(k' a)`` (propagating); for equal masses these reduce to Griffiths'.
    Energy-dependent masses ``m(E) = m (1 + alpha (E - V_layer))`` are plugged in per side.
    """
    e = np.asarray(energy_ev, float)
    m1 = m_out * (1.0 + alpha_out * e)
    m2 = m_in * (1.0 + alpha_in * (e - height_ev))
    q1 = wave_vector_per_nm(e, m1) / m1
    k2 = wave_vector_per_nm(e - height_ev, m2)
    q2 = k2 / m2
    below = e < height_ev
    with np.errstate(over="ignore"):
        s2 = np.where(below, np.sinh(k2 * width_nm) ** 2, np.sin(k2 * width_nm) ** 2)
    coef = np.where(below, (q1**2 + q2**2) ** 2, (q1**2 - q2**2) ** 2) / (4.0 * q1**2 * q2**2)
    return 1.0 / (1.0 + coef * s2)


def log_thick_barrier_transmission(energy_ev, *, height_ev, width_nm, m_out, m_in):
    """ln T of the thick-barrier (kappa a >> 1) limit of the analytic barrier.

    ``T -> 16 q1^2 q2^2 / (q1^2 + q2^2)^2 exp(-2 kappa a)``; for equal masses
    ``16 E (V - E) / V^2 exp(-2 kappa a)`` (Griffiths 2nd ed., Problem 2.33; also the
    WKB exponent with its exact prefactor). Neglected terms are O(exp(-2 kappa a)) relative.
    """
    e = np.asarray(energy_ev, float)
    q1 = wave_vector_per_nm(e, m_out) / m_out
    kappa = wave_vector_per_nm(height_ev - e, m_in)
    q2 = kappa / m_in
    return np.log(16.0 * q1**2 * q2**2 / (q1**2 + q2**2) ** 2) - 2.0 * kappa * width_nm


def log_barrier_transmission_below_top(energy_ev, *, height_ev, width_nm, m_out, m_in):
    """ln T of the analytic barrier below its top, overflow-free for any thickness.

    ``ln T = -ln(1 + C sinh^2(kappa a))`` with ``C = (q1^2 + q2^2)^2 / (4 q1^2 q2^2)``
    (Griffiths 2nd ed., Problem 2.33, BenDaniel-Duke q = k/m) and
    ``ln sinh(x) = x + ln(1 - exp(-2x)) - ln 2``.
    """
    e = np.asarray(energy_ev, float)
    q1 = wave_vector_per_nm(e, m_out) / m_out
    kappa = wave_vector_per_nm(height_ev - e, m_in)
    q2 = kappa / m_in
    x = kappa * width_nm
    log_c = np.log((q1**2 + q2**2) ** 2 / (4.0 * q1**2 * q2**2))
    log_sinh = x + np.log1p(-np.exp(-2.0 * x)) - np.log(2.0)
    return -np.logaddexp(0.0, log_c + 2.0 * log_sinh)


def step_transmission(energy_ev, *, step_ev, m1, m2):
    """Potential step with a mass step: ``T = 4 q1 q2 / (q1 + q2)^2``, ``q = k/m``.

    Flux continuity with BenDaniel-Duke matching [Phys. Rev. 152, 683 (1966)];
    ``E`` above both edges (emitter edge at 0, collector edge ``step_ev``).
    """
    e = np.asarray(energy_ev, float)
    q1 = wave_vector_per_nm(e, m1) / m1
    q2 = wave_vector_per_nm(e - step_ev, m2) / m2
    return 4.0 * q1 * q2 / (q1 + q2) ** 2


def finite_well_levels(*, depth_ev, width_nm, m_well, m_barrier) -> list[float]:
    """Bound states of a finite square well with BenDaniel-Duke matching, eV above the well bottom.

    Even states: ``(k/m_w) tan(k L/2) = kappa/m_b``; odd states:
    ``-(k/m_w) cot(k L/2) = kappa/m_b`` (the textbook finite-well equations,
    e.g. Griffiths 2nd ed., Sec. 2.6, with ``psi'/m`` matched [BenDaniel and Duke 1966]).
    Roots by ``scipy.optimize.brentq`` on each branch between poles.
    """

    def even(e):
        k = wave_vector_per_nm(e, m_well)
        return (k / m_well) * np.sin(k * width_nm / 2) - (
            wave_vector_per_nm(depth_ev - e, m_barrier) / m_barrier
        ) * np.cos(k * width_nm / 2)

    def odd(e):
        k = wave_vector_per_nm(e, m_well)
        return -(k / m_well) * np.cos(k * width_nm / 2) - (
            wave_vector_per_nm(depth_ev - e, m_barrier) / m_barrier
        ) * np.sin(k * width_nm / 2)

    # multiplied through by cos / sin: no poles, roots unchanged (sign changes only at roots
    # of the original equation or where both factors vanish, which cannot happen here)
    grid = np.linspace(depth_ev * 1e-9, depth_ev * (1 - 1e-9), 4001)
    levels = []
    for f in (even, odd):
        v = f(grid)
        for i in np.nonzero(np.sign(v[:-1]) != np.sign(v[1:]))[0]:
            levels.append(brentq(f, grid[i], grid[i + 1], xtol=1e-15, rtol=1e-15))
    return sorted(levels)


def airy_ramp_transmission(energy_ev, *, height_ev, width_nm, drop_ev, mass_m0):
    """Exact T of a trapezoidal barrier in a uniform field, constant mass, from Airy functions.

    Potential: 0 for z < 0 (emitter), ``V0 - F z`` on ``[0, L]`` with ``F = U/L``,
    ``-U`` for z > L (collector). In the barrier ``-c psi'' + (V0 - F z) psi = E psi``
    with ``c = hbar^2/2m``; with ``l = (c/F)^(1/3)`` and ``x = (V0 - E - F z)/(F l)`` it
    becomes Airy's equation ``psi_xx = x psi``, so ``psi = A Ai(x) + B Bi(x)`` and
    ``psi' = -(A Ai'(x) + B Bi'(x)) / l``. Matching ``psi`` and ``psi'`` (constant mass)
    to ``exp(ikz) + r exp(-ikz)`` at z = 0 and to ``t exp(ik_C (z - L))`` at z = L gives
    four linear equations; ``T = (k_C / k) |t|^2``. Reference implementation of Ai, Bi:
    scipy.special.airy.
    """
    c = HBAR2_2M0_EV_NM2 / mass_m0
    force = drop_ev / width_nm
    ell = (c / force) ** (1.0 / 3.0)
    out = []
    for e in np.atleast_1d(np.asarray(energy_ev, float)):
        k = np.sqrt(e / c)
        k_c = np.sqrt((e + drop_ev) / c)
        x0 = (height_ev - e) / (force * ell)
        x1 = (height_ev - e - force * width_nm) / (force * ell)
        ai0, aip0, bi0, bip0 = airy(x0)
        ai1, aip1, bi1, bip1 = airy(x1)
        a = np.array(
            [
                [-1.0, ai0, bi0, 0.0],
                [1j * k, -aip0 / ell, -bip0 / ell, 0.0],
                [0.0, ai1, bi1, -1.0],
                [0.0, -aip1 / ell, -bip1 / ell, -1j * k_c],
            ],
            complex,
        )
        rhs = np.array([1.0, 1j * k, 0.0, 0.0], complex)
        _, _, _, t = np.linalg.solve(a, rhs)
        out.append(k_c / k * abs(t) ** 2)
    return np.array(out)


def polish_peak(profile: Profile, guess_ev: float, width_ev: float) -> tuple[float, float]:
    """Transmission maximum near ``guess_ev`` by scipy's bounded Brent search on 1/T.

    Independent of wellwright.physics.resonances' own refinement; ``xatol`` is 1e-7 of the width.
    """
    res = minimize_scalar(
        lambda e: 1.0 / max(t_at(e, profile), 1e-300),
        bounds=(guess_ev - width_ev, guess_ev + width_ev),
        method="bounded",
        options={"xatol": 1e-7 * width_ev},
    )
    return float(res.x), t_at(float(res.x), profile)


def brute_force_fwhm(
    profile: Profile, center_ev: float, width_ev: float, n: int = 20001
) -> tuple[float, float, float]:
    """Peak energy, peak T and FWHM of T(E) from a uniform fine scan of +-10 widths.

    Half-maximum crossings by linear interpolation between scan points
    (spacing 1e-3 of the width: interpolation error far below 1e-3 of the FWHM).
    """
    e = np.linspace(center_ev - 10 * width_ev, center_ev + 10 * width_ev, n)
    t = np.asarray(transmission(e, profile=profile)).reshape(-1)
    i = int(np.argmax(t))
    half = 0.5 * t[i]
    lo = np.nonzero(t[:i] < half)[0][-1]
    hi = i + np.nonzero(t[i:] < half)[0][0]
    e_lo = np.interp(half, [t[lo], t[lo + 1]], [e[lo], e[lo + 1]])
    e_hi = np.interp(half, [t[hi], t[hi - 1]], [e[hi], e[hi - 1]])
    return float(e[i]), float(t[i]), float(e_hi - e_lo)


# ----------------------------------------------------------------------------- stack files

#: A valid stack (invented test scenario): GaAs contacts, Al0.3Ga0.7As / GaAs double barrier.
VALID_LAYERS: tuple[dict, ...] = (
    {"name": "emitter", "material": "GaAs", "doping_cm3": 1e18},
    {"name": "spacer1", "material": "GaAs", "thickness_nm": 2.0},
    {"name": "barrier1", "material": "AlGaAs", "x": 0.3, "thickness_ml": 10},
    {"name": "well", "material": "GaAs", "thickness_nm": 5.0},
    {"name": "barrier2", "material": "Al0.3Ga0.7As", "thickness_ml": 10},
    {"name": "spacer2", "material": "GaAs", "thickness_nm": 2.0},
    {"name": "collector", "material": "GaAs", "doping_cm3": 1e18},
)


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, float) and value != value:
        return "nan"
    return repr(value)


def stack_toml(
    layers=VALID_LAYERS,
    *,
    top: dict | None = None,
    model: dict | None = None,
    device: dict | None = None,
) -> str:
    """TOML text of a stack file from plain dictionaries (keys written as given)."""
    top = {"temperature_k": 300} if top is None else top
    lines = [f"{k} = {_toml_value(v)}" for k, v in top.items()]
    for name, table in (("model", model), ("device", device)):
        if table is not None:
            lines += ["", f"[{name}]"] + [f"{k} = {_toml_value(v)}" for k, v in table.items()]
    for layer in layers:
        lines += ["", "[[layers]]"] + [f"{k} = {_toml_value(v)}" for k, v in layer.items()]
    return "\n".join(lines) + "\n"


def _edit(index: int, **changes) -> tuple[dict, ...]:
    """VALID_LAYERS with layer ``index`` changed; a value of None removes the key."""
    layers = [dict(layer) for layer in VALID_LAYERS]
    for key, value in changes.items():
        if value is None:
            layers[index].pop(key, None)
        else:
            layers[index][key] = value
    return tuple(layers)


def _custom_layer(**keys) -> tuple[dict, ...]:
    layers = [dict(layer) for layer in VALID_LAYERS]
    layer = {"name": "well", "material": "custom", "thickness_nm": 5.0, **keys}
    layers[3] = {k: v for k, v in layer.items() if v is not None}
    return tuple(layers)


#: Every bad-input class of issue 2: (id, TOML text or None for a missing file,
#: layer index or None, key or None, regex of the message after the location).
BAD_STACKS: list[tuple[str, str | None, int | None, str | None, str]] = [
    (
        "unknown_material",
        stack_toml(_edit(2, material="Unobtainium", x=None)),
        2,
        "material",
        r"unknown material 'Unobtainium'; known materials: GaAs, AlAs, InAs, InP"
        r".*AlGaAs, InGaAs, InAlAs",
    ),
    ("x_above_1", stack_toml(_edit(2, x=1.3)), 2, "x", r"1\.3 outside \[0, 1\]"),
    ("x_below_0", stack_toml(_edit(2, x=-0.1)), 2, "x", r"-0\.1 outside \[0, 1\]"),
    (
        "trade_fraction_above_1",
        stack_toml(_edit(4, material="In1.5Ga0.5As")),
        4,
        "material",
        r"fraction 1\.5 of In outside the allowed range \[0, 1\]",
    ),
    (
        "ternary_without_x",
        stack_toml(_edit(2, x=None)),
        2,
        "material",
        r"needs a composition x in the allowed range \[0, 1\]",
    ),
    (
        "missing_thickness",
        stack_toml(_edit(3, thickness_nm=None)),
        3,
        "thickness_ml",
        r"missing; give thickness_ml or thickness_nm",
    ),
    (
        "both_thickness_keys",
        stack_toml(_edit(3, thickness_ml=17)),
        3,
        "thickness_nm",
        r"exactly one of thickness_ml and thickness_nm",
    ),
    (
        "thickness_zero",
        stack_toml(_edit(3, thickness_nm=0.0)),
        3,
        "thickness_nm",
        r"0 outside \(0, 1000\] nm",
    ),
    (
        "thickness_negative",
        stack_toml(_edit(1, thickness_nm=-2.0)),
        1,
        "thickness_nm",
        r"-2 outside \(0, 1000\] nm",
    ),
    (
        "thickness_ml_zero",
        stack_toml(_edit(2, thickness_ml=0)),
        2,
        "thickness_ml",
        r"0 outside \(0, \d+\] monolayers",
    ),
    (
        "thickness_absurd_nm",
        stack_toml(_edit(3, thickness_nm=5000.0)),
        3,
        "thickness_nm",
        r"5000 outside \(0, 1000\] nm",
    ),
    (
        "thickness_absurd_ml",
        stack_toml(_edit(2, thickness_ml=100000)),
        2,
        "thickness_ml",
        r"100000 outside \(0, \d+\] monolayers",
    ),
    (
        "thickness_nan",
        stack_toml(_edit(3, thickness_nm=float("nan"))),
        3,
        "thickness_nm",
        r"must be a finite number",
    ),
    (
        "undoped_emitter",
        stack_toml(_edit(0, doping_cm3=None)),
        0,
        "doping_cm3",
        r"contacts must be n-doped",
    ),
    (
        "undoped_collector",
        stack_toml(_edit(6, doping_cm3=0.0)),
        6,
        "doping_cm3",
        r"contacts must be n-doped",
    ),
    (
        "doping_negative",
        stack_toml(_edit(3, doping_cm3=-1e17)),
        3,
        "doping_cm3",
        r"outside \[0, 1e\+21\] cm\^-3",
    ),
    (
        "unknown_top_key",
        stack_toml(top={"temperature_k": 300, "colour": "blue"}),
        None,
        "colour",
        r"unknown key; allowed: device, layers, model, substrate, temperature_k",
    ),
    (
        "unknown_layer_key",
        stack_toml(_edit(3, thicknes_nm=5.0)),
        3,
        "thicknes_nm",
        r"unknown key; allowed: .*thickness_nm",
    ),
    (
        "unknown_model_key",
        stack_toml(model={"nonparabolic": True}),
        None,
        "model.nonparabolic",
        r"unknown key; allowed: .*nonparabolicity",
    ),
    (
        "unknown_device_key",
        stack_toml(device={"area_cm2": 1.0}),
        None,
        "device.area_cm2",
        r"unknown key; allowed: .*area_um2",
    ),
    (
        "wrong_type_thickness",
        stack_toml(_edit(3, thickness_nm="5")),
        3,
        "thickness_nm",
        r"must be a number, got '5'",
    ),
    (
        "wrong_type_bool_doping",
        stack_toml(_edit(0, doping_cm3=True)),
        0,
        "doping_cm3",
        r"must be a number, got True",
    ),
    (
        "wrong_type_material",
        stack_toml(_edit(3, material=5)),
        3,
        "material",
        r"must be a str, got 5",
    ),
    (
        "wrong_type_model",
        stack_toml(model={"strain": "yes"}),
        None,
        "model.strain",
        r"must be true or false, got 'yes'",
    ),
    (
        "wrong_type_temperature",
        stack_toml(top={"temperature_k": "hot"}),
        None,
        "temperature_k",
        r"must be a number",
    ),
    (
        "temperature_out_of_range",
        stack_toml(top={"temperature_k": 0}),
        None,
        "temperature_k",
        r"outside \[1, 1000\] K",
    ),
    (
        "mass_out_of_range",
        stack_toml(_edit(3, mass_m0=0.0)),
        3,
        "mass_m0",
        r"outside \[0\.001, 10\]",
    ),
    (
        "slice_out_of_range",
        stack_toml(model={"slice_nm": 5.0}),
        None,
        "model.slice_nm",
        r"outside \[0\.01, 2\] nm",
    ),
    (
        "unknown_electrostatics",
        stack_toml(model={"electrostatics": "magic"}),
        None,
        "model.electrostatics",
        r"'magic' is not one of",
    ),
    (
        "unknown_substrate",
        stack_toml(top={"temperature_k": 300, "substrate": "Cheese"}),
        None,
        "substrate",
        r"unknown material 'Cheese'",
    ),
    (
        "bad_toml",
        "temperature_k = 300\n[[layers]\nmaterial = 'GaAs'\n",
        None,
        None,
        r"not valid TOML",
    ),
    ("missing_file", None, None, None, r"file not found"),
    (
        "too_few_layers",
        stack_toml(VALID_LAYERS[:1] + VALID_LAYERS[-1:]),
        None,
        "layers",
        r"needs at least 3 layers.*got 2",
    ),
    ("no_layers", stack_toml(()), None, "layers", r"needs a list of \[\[layers\]\] tables"),
    (
        "duplicate_names",
        stack_toml(_edit(5, name="spacer1")),
        5,
        "name",
        r"name 'spacer1' used twice",
    ),
    (
        "custom_without_mass",
        stack_toml(_custom_layer(conduction_band_ev=0.0)),
        3,
        "mass_m0",
        r"custom material needs conduction_band_ev and mass_m0",
    ),
    (
        "custom_without_band_edge",
        stack_toml(_custom_layer(mass_m0=0.067)),
        3,
        "conduction_band_ev",
        r"custom material needs conduction_band_ev and mass_m0",
    ),
    (
        "custom_with_x",
        stack_toml(_custom_layer(conduction_band_ev=0.0, mass_m0=0.067, x=0.2)),
        3,
        "x",
        r"custom material takes no composition",
    ),
    (
        "custom_ml_without_monolayer",
        stack_toml(
            _custom_layer(conduction_band_ev=0.0, mass_m0=0.067, thickness_nm=None, thickness_ml=10)
        ),
        3,
        "thickness_ml",
        r"thickness_ml needs monolayer_nm",
    ),
]


# ----------------------------------------------------------------------------- brute-force current

#: Sample spacings of a nested uniform grid one level finer than its parent's.
NEST_FACTOR = 32
#: A nested grid spans this many parent spacings either side of a sharp maximum.
NEST_HALF_SPAN = 16
#: A maximum is sharp (nested further) while fewer than this many samples lie above its half.
NEST_RESOLVED = 10


def _supply_ev(energy_ev, mu_emitter_ev, mu_collector_ev, kt_ev):
    """Tsu-Esaki supply kT ln[(1 + e^((mu_E - E)/kT)) / (1 + e^((mu_C - E)/kT))] (Tsu and Esaki 1973)."""
    return kt_ev * (
        np.logaddexp(0.0, (mu_emitter_ev - energy_ev) / kt_ev)
        - np.logaddexp(0.0, (mu_collector_ev - energy_ev) / kt_ev)
    )


def _trapezoid_rows(f, e):
    return np.sum(0.5 * (f[:, 1:] + f[:, :-1]) * np.diff(e, axis=1), axis=1)


def _sharp_maxima(t, max_per_row):
    """(row, index) of interior local maxima of ``t`` (rows, n) with fewer than
    NEST_RESOLVED samples above their half, at most ``max_per_row`` highest per row.

    Sharpness is judged before the cap: ranked by height alone, the broad maxima
    above the barriers (T ~ 1, many samples each) took the slots of the narrow
    lines that carry the current (measured: an InSb well with ten lines in the
    supply window, 15 % off at 4096 energies).
    """
    inner = (t[:, 1:-1] > t[:, :-2]) & (t[:, 1:-1] >= t[:, 2:])
    rows, k = [], []
    for r in range(t.shape[0]):
        sharp = []
        for i in np.nonzero(inner[r])[0] + 1:
            lo, hi = max(0, i - NEST_RESOLVED), min(t.shape[1], i + NEST_RESOLVED + 1)
            if np.count_nonzero(t[r, lo:hi] >= 0.5 * t[r, i]) < NEST_RESOLVED:
                sharp.append(i)
        for i in sorted(sharp, key=lambda i: -t[r, i])[:max_per_row]:
            rows.append(r)
            k.append(i)
    return np.array(rows, int), np.array(k, int)


def _cut_overlaps(row, i0, i1, k):
    """Neighbouring segments of one row that overlap meet halfway between their maxima."""
    order = np.lexsort((k, row))
    row, i0, i1, k = row[order], i0[order], i1[order], k[order]
    for j in range(row.size - 1):
        if row[j] == row[j + 1] and i1[j] > i0[j + 1]:
            mid = (k[j] + k[j + 1]) // 2
            i1[j], i0[j + 1] = mid, mid
    return order, i0, i1


def brute_force_current_a_cm2(table, bias_v, *, model, n_energy=4096, window_kt=40.0):
    """Tsu-Esaki current density (A/cm^2, ``(n_stacks, n_biases)``) by brute force.

    The Tsu-Esaki integral [R. Tsu and L. Esaki, Appl. Phys. Lett. 22, 562 (1973)]
    of the kernel's own T(E) (a check of the energy grid and its quadrature, not of
    T) by the trapezoid rule on ``n_energy`` energies from the higher contact band
    edge ``E_0`` to ``window_kt`` kT above the higher Fermi level, uniform in
    ``u = sqrt(E - E_0)`` (T rises like ``sqrt(E - E_0)`` at that edge, smooth in ``u``),
    with nested uniform grids (``NEST_FACTOR`` times finer, +-``NEST_HALF_SPAN``
    parent spacings, up to eight levels) around every maximum that the samples
    do not resolve, so a line of any width is integrated on about
    ``NEST_RESOLVED`` samples across its half maximum or more. No line finding by
    fits, no Lorentzian model, no Gauss rule: nothing shared with
    :mod:`physics.current` but T(E), the band profile and the contact Fermi levels.
    """
    from wellwright.physics.current import contact_fermi_levels_ev
    from wellwright.physics.iv import band_profile
    from wellwright.physics.transmission import transmission_rows

    bias = np.asarray(bias_v, float)
    profile = band_profile(table, bias, model=model)
    shape = profile.batch_shape
    bias = np.broadcast_to(bias if bias.ndim == 2 else bias[None, :], shape)
    kt = np.broadcast_to((KB_EV_K * table.temperature_k)[:, None], shape)
    mu = np.broadcast_to(contact_fermi_levels_ev(table)[0][:, None], shape)
    rows = tuple(np.indices(shape).reshape(len(shape), -1))
    mu_e, mu_c, kt = mu[rows], (mu - bias)[rows], kt[rows]
    low = np.maximum(0.0, profile.edge_ev[..., -1][rows])
    high = np.maximum(mu_e, mu_c) + window_kt * kt

    def integrand(u, r):  # T and T S dE/du at u = sqrt((E - low) / (high - low))
        span = (high - low)[r, None]
        energy = low[r, None] + span * u**2
        t = transmission_rows(energy, profile=profile, rows=tuple(x[r] for x in rows))
        return t, t * _supply_ev(energy, mu_e[r, None], mu_c[r, None], kt[r, None]) * 2 * span * u

    everything = np.arange(low.size)
    seg_e = np.broadcast_to(np.linspace(0.0, 1.0, n_energy), (low.size, n_energy))
    seg_t, seg_f = integrand(seg_e, everything)
    integral = _trapezoid_rows(seg_f, seg_e)
    seg_row = everything
    src, k = _sharp_maxima(seg_t, 16)
    for _level in range(8):
        if src.size == 0:
            break
        n_parent = seg_e.shape[1]
        i0 = np.clip(k - NEST_HALF_SPAN, 0, n_parent - 1)
        i1 = np.clip(k + NEST_HALF_SPAN, 0, n_parent - 1)
        order, i0, i1 = _cut_overlaps(src, i0, i1, k)
        src = src[order]
        r = seg_row[src]
        # the parent's trapezoid over [i0, i1], replaced by a finer grid's
        idx = np.arange(n_parent)
        cell = (idx[:-1] >= i0[:, None]) & (idx[1:] <= i1[:, None])
        pe, pf = seg_e[src], seg_f[src]
        parent = np.sum(
            np.where(cell, 0.5 * (pf[:, 1:] + pf[:, :-1]) * np.diff(pe, axis=1), 0.0), 1
        )
        a = np.take_along_axis(pe, i0[:, None], 1)[:, 0]
        b = np.take_along_axis(pe, i1[:, None], 1)[:, 0]
        child_e = a[:, None] + (b - a)[:, None] * np.linspace(
            0.0, 1.0, 2 * NEST_HALF_SPAN * NEST_FACTOR + 1
        )
        child_t, child_f = integrand(child_e, r)
        np.add.at(integral, r, _trapezoid_rows(child_f, child_e) - parent)
        seg_e, seg_t, seg_f, seg_row = child_e, child_t, child_f, r
        src, k = _sharp_maxima(seg_t, 2)
    # e^3 m0 / (2 pi^2 hbar^3) in A m^-2 eV^-2, times m_E / m0, to A/cm^2
    constant = sc.e**3 * sc.m_e / (2.0 * np.pi**2 * sc.hbar**3) * 1e-4
    mass = np.broadcast_to(table.mass_m0[:, 0][:, None], shape)[rows]
    return (constant * mass * integral).reshape(shape)
