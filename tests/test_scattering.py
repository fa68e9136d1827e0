"""The scattering-assisted current channel (physics/scattering.py).

Checks against sources outside the project:
- particle conservation of Buttiker's virtual reservoir (M. Buttiker, IBM J. Res. Dev. 32,
  63 (1988)): the reservoir draws no net current, so emitter and collector currents agree;
- the zero-scattering limit: the coherent Tsu-Esaki current (R. Tsu and L. Esaki, Appl.
  Phys. Lett. 22, 562 (1973));
- detailed balance: no current at zero bias (thermodynamics);
- mirror symmetry: a symmetric stack gives J(-V) = -J(V) (common practice);
- the Frohlich coupling constant of GaAs, about 0.068 (textbook value, e.g. B. K. Ridley,
  Quantum Processes in Semiconductors; from memory);
- interface-roughness scattering is elastic: it does not freeze out in the cold (common
  practice), so the channel's valley current is continuous in temperature;
- the spectral weights of the entries against the exact scattering state of a flat double
  barrier (plane-wave matching, textbook): at the interface for roughness, over the well
  for the phonon entry; and the phonon entry's rate against Fermi's golden rule computed
  by quadrature.
"""

from __future__ import annotations

import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from helpers_physics import HBAR2_2M0_EV_NM2
from wellwright.physics import scattering
from wellwright.physics.current import current_density_a_cm2
from wellwright.physics.iv import band_profile, current_at_bias, sweep
from wellwright.physics.stack import ModelOptions, parse_stack, read_toml


def _stack(temperature_k=300.0, spacer_nm=(2.0, 2.0), barrier_ml=5, well_ml=15):
    """An In0.53Ga0.47As/AlAs double barrier on InP (a common design, numbers invented)."""
    layer = lambda name, mat, **kw: {"name": name, "material": mat, **kw}  # noqa: E731
    return parse_stack(
        {
            "temperature_k": temperature_k,
            "substrate": "InP",
            "layers": [
                layer("emitter", "In0.53Ga0.47As", doping_cm3=2e18),
                layer("spacer1", "In0.53Ga0.47As", thickness_nm=spacer_nm[0]),
                layer("barrier1", "AlAs", thickness_ml=barrier_ml),
                layer("well", "In0.53Ga0.47As", thickness_ml=well_ml),
                layer("barrier2", "AlAs", thickness_ml=barrier_ml),
                layer("spacer2", "In0.53Ga0.47As", thickness_nm=spacer_nm[1]),
                layer("collector", "In0.53Ga0.47As", doping_cm3=2e18),
            ],
        },
        source="test",
    )


def _fluxes(stack, bias_v):
    """Emitter-side and collector-side sequential integrals of the channel."""
    params = scattering.ScatteringParameters()
    seen = {}
    original = scattering.sequential_fluxes_ev2

    def spy(*args, **kwargs):
        seen["result"] = original(*args, **kwargs)
        return seen["result"]

    table = stack.table()
    profile = band_profile(table, bias_v)
    try:
        scattering.sequential_fluxes_ev2 = spy
        current_density_a_cm2(profile, table=table, bias_v=bias_v[None, :], scattering=params)
    finally:
        scattering.sequential_fluxes_ev2 = original
    return seen["result"][0], seen["result"][1]


@pytest.mark.parametrize("temperature_k", [300.0, 77.0])
def test_reservoir_conserves_current(temperature_k):
    """Emitter current = collector current of the channel, at every bias of both polarities."""
    stack = _stack(temperature_k)
    bias = np.linspace(-1.0, 1.0, 21)
    left, right = _fluxes(stack, bias)
    scale = np.max(np.abs(left))
    assert scale > 0
    np.testing.assert_allclose(left, right, rtol=0, atol=1e-9 * scale)


def test_layout_found_per_stack_gives_the_same_numbers():
    """The well and barriers found once per stack (slices the same at every bias) give the
    channel's numbers of the per-bias search bit for bit (a regression pin, no physics)."""
    stacks = [_stack(), _stack(spacer_nm=(3.0, 1.0), barrier_ml=6, well_ml=12)]
    table = type(stacks[0].table()).concatenate([s.table() for s in stacks])
    bias = np.linspace(0.0, 1.0, 11)
    seen = []
    original = scattering.sequential_fluxes_ev2

    def spy(**kwargs):
        seen.append(kwargs)
        return original(**kwargs)

    profile = band_profile(table, bias)
    try:
        scattering.sequential_fluxes_ev2 = spy
        current_density_a_cm2(
            profile,
            table=table,
            bias_v=np.broadcast_to(bias, profile.batch_shape),
            scattering=scattering.ScatteringParameters(),
        )
    finally:
        scattering.sequential_fluxes_ev2 = original
    assert seen and all(k["per_stack"] for k in seen)
    for kwargs in seen:
        fast = original(**kwargs)
        full = kwargs["edge"].shape  # the per-bias search reads every bias's layer data
        slow = original(
            **dict(
                kwargs,
                barrier=np.broadcast_to(kwargs["barrier"], full),
                phonon=tuple(np.broadcast_to(p, full) for p in kwargs["phonon"]),
                per_stack=False,
            )
        )
        np.testing.assert_array_equal(fast[0], slow[0])
        np.testing.assert_array_equal(fast[1], slow[1])
        for key in slow[2]:
            np.testing.assert_array_equal(fast[2][key], slow[2][key])


def test_vanishes_without_scattering():
    """The channel goes to zero with the scattering: the coherent current to 1e-6."""
    stack = _stack()
    table = stack.table()
    bias = np.linspace(-0.9, 0.9, 19)
    profile = band_profile(table, bias)
    coherent = current_density_a_cm2(profile, table=table, bias_v=bias[None, :])
    off = scattering.ScatteringParameters(roughness_height_nm=0.0, phonon_scale=0.0)
    assert not off.active
    same = current_density_a_cm2(profile, table=table, bias_v=bias[None, :], scattering=off)
    np.testing.assert_array_equal(same, coherent)
    weak = scattering.ScatteringParameters(roughness_height_nm=1e-5, phonon_scale=1e-9)
    limit = current_density_a_cm2(profile, table=table, bias_v=bias[None, :], scattering=weak)
    np.testing.assert_allclose(limit, coherent, rtol=1e-6, atol=1e-6 * np.abs(coherent).max())
    full = current_density_a_cm2(
        profile, table=table, bias_v=bias[None, :], scattering=scattering.ScatteringParameters()
    )
    assert np.max(np.abs(full - coherent)) > 0.05 * np.abs(coherent).max()  # it does act


def test_no_current_at_zero_bias_and_mirror_symmetry():
    """Detailed balance at V = 0; a symmetric stack conducts alike both ways."""
    stack = _stack()
    model = ModelOptions(electrostatics="linear", transport="scattering-assisted")
    bias = np.array([-0.6, -0.3, 0.0, 0.3, 0.6])
    j = current_at_bias(stack.table(), bias, model=model)[0]
    assert abs(j[2]) < 1e-6 * np.abs(j).max()
    np.testing.assert_allclose(j[::-1], -j, rtol=1e-6, atol=1e-6 * np.abs(j).max())


def test_valley_current_raised_peak_kept():
    """The channel carries current through the state after it drops below the emitter edge
    (the valley, S. Luryi, Appl. Phys. Lett. 47, 490 (1985)): the valley current rises
    several times while the peak, whose area Buttiker's reservoir conserves, changes little.
    Measured 4.7 times (PVCR 18.9 against 90.7) with the phonon entry's bulk floor; 5.5 times
    (16.1) with the interface floor it took until 2026-12-04, when the bound was 5."""
    stack = _stack()
    bias = np.linspace(0.0, 1.0, 51)
    linear = ModelOptions(electrostatics="linear", transport="coherent")
    coherent = sweep(stack.table(), bias, model=linear).metrics
    assisted = sweep(stack.table(), bias, model=replace(linear, transport="scattering-assisted"))
    m = assisted.metrics
    assert (
        0.8 < m["peak_current_density_a_cm2"][0] / coherent["peak_current_density_a_cm2"][0] < 1.5
    )
    assert m["valley_current_density_a_cm2"][0] > 3 * coherent["valley_current_density_a_cm2"][0]
    assert 1.5 < m["pvcr"][0] < coherent["pvcr"][0] / 3


def test_frohlich_constant_of_gaas():
    """alpha = (e^2 / 4 pi eps0 hbar) sqrt(m / 2 hbar w) (1/eps_inf - 1/eps_s): GaAs ~ 0.068
    (textbook value, from memory), from the material table's phonon data."""
    from wellwright.physics import materials

    p = materials.band_parameters("GaAs")
    coulomb_ev_nm = 1.439964  # e^2 / (4 pi eps0), eV nm (CODATA)
    m_over_hbar2 = p["mass_m0"] / (2.0 * HBAR2_2M0_EV_NM2)
    alpha = (
        coulomb_ev_nm
        * np.sqrt(m_over_hbar2 / (2.0 * p["lo_phonon_ev"]))
        * (1.0 / p["permittivity_high_r"] - 1.0 / p["permittivity_r"])
    )
    assert alpha == pytest.approx(0.068, rel=0.1)
    assert scattering.COULOMB_EV_NM == pytest.approx(coulomb_ev_nm, rel=1e-6)


def test_transport_key_is_checked():
    """A bad transport name is one clear input error naming the key."""
    from wellwright.physics.errors import InputError

    with pytest.raises(InputError, match="model.transport"):
        parse_stack(
            {"model": {"transport": "ballistic"}, "layers": _stack_layers()}, source="bad.toml"
        )


def _stack_layers():
    return [
        {"name": "e", "material": "GaAs", "doping_cm3": 1e18},
        {"name": "b", "material": "AlAs", "thickness_ml": 6},
        {"name": "c", "material": "GaAs", "doping_cm3": 1e18},
    ]


def test_channel_stays_on_in_the_cold():
    """A GaAs/Al0.25Ga0.75As double barrier (5 nm barriers and well, invented numbers) in its
    valley at 0.2 V, linear drop, 2-40 K: the scattering-assisted current stays well above
    the coherent one and changes by less than 30 % between neighbouring temperatures. Its
    state is 0.6 meV wide; before, a state had to be narrower than kT, and below about 8 K
    the channel was off (the current equal to the coherent one, then 4.5 times higher at
    12 K)."""
    layer = lambda name, mat, **kw: {"name": name, "material": mat, **kw}  # noqa: E731
    barrier = "Al0.25Ga0.75As"
    currents = {}
    for transport in ("coherent", "scattering-assisted"):
        out = []
        for t in (2.0, 4.2, 6.0, 8.0, 12.0, 25.0, 40.0):
            stack = parse_stack(
                {
                    "temperature_k": t,
                    "layers": [
                        layer("emitter", "GaAs", doping_cm3=1e18),
                        layer("spacer1", "GaAs", thickness_nm=2.0),
                        layer("barrier1", barrier, thickness_nm=5.0),
                        layer("well", "GaAs", thickness_nm=5.0),
                        layer("barrier2", barrier, thickness_nm=5.0),
                        layer("spacer2", "GaAs", thickness_nm=2.0),
                        layer("collector", "GaAs", doping_cm3=1e18),
                    ],
                    "model": {"electrostatics": "linear", "transport": transport},
                }
            )
            out.append(current_at_bias(stack.table(), np.array([0.2]), model=stack.model)[0, 0])
        currents[transport] = np.array(out)
    channel, coherent = currents["scattering-assisted"], currents["coherent"]
    print(channel, coherent)
    assert np.all(channel > 2.0 * coherent)
    assert np.all(np.abs(np.diff(np.log(channel))) < np.log(1.3))


def _scan_stack(materials, layers_nm, doping_cm3, temperature_k, substrate=None, model=None):
    """A double barrier of the wide random scan over material systems (seeded draws of
    ``tests/test_grid_random_stacks.py``'s ``random_stack`` with the default model;
    invented layers, as drawn)."""
    contact, barrier = materials
    names = ("spacer1", "barrier1", "well", "barrier2", "spacer2")
    mats = (contact, barrier, contact, barrier, contact)
    layers = [{"name": "emitter", "material": contact, "doping_cm3": doping_cm3[0]}]
    layers += [
        {"name": n, "material": m, "thickness_nm": t}
        for n, m, t in zip(names, mats, layers_nm, strict=True)
    ]
    layers.append({"name": "collector", "material": contact, "doping_cm3": doping_cm3[1]})
    data = {"temperature_k": temperature_k, "layers": layers}
    if substrate:
        data["substrate"] = substrate
    if model:
        data["model"] = model
    return parse_stack(data, source="scan")


def _double_barrier(contact, barrier, layers_nm, doping_cm3, temperature_k):
    """Emitter, spacer, barrier, well, barrier, spacer, collector on InP (invented numbers),
    linear drop with the scattering-assisted channel."""
    return _scan_stack(
        (contact, barrier),
        layers_nm,
        doping_cm3,
        temperature_k,
        substrate="InP",
        model={"electrostatics": "linear", "transport": "scattering-assisted"},
    )


#: Two stacks of the random-stack scan (tests/test_grid_random_stacks.py, draws 127 and 119)
#: where the channel's current jumped in bias: (stack, biases)
JUMPS = {
    # a wide well tilted by the bias: its lowest state lay below the well's mean band edge,
    # e_w was clamped, the floor of note 2 vanished and the current rose 18 -> 224 A/cm^2
    # for 15 mV
    "tilted_well": (
        _double_barrier(
            "GaAs0.51Sb0.49",
            "AlAs0.56Sb0.44",
            (7.69, 1.85, 12.49, 1.85, 2.36),
            (5.7e17, 3.3e17),
            15.0,
        ),
        np.linspace(0.76, 0.80, 9),
    ),
    # the lowest state's narrow line was among the coarse grid's three tallest maxima at
    # some temperatures only: at 150 K the channel took the next state, 8 times the current
    "missed_state": (
        _double_barrier(
            "In0.53Ga0.47As",
            "AlAs0.56Sb0.44",
            (0.43, 2.57, 9.06, 1.61, 7.83),
            (4.9e17, 3.4e17),
            150.0,
        ),
        np.linspace(0.80, 0.88, 9),
    ),
}


def _share_off(stack, bias):
    """The channel's share of the current (total over coherent, log) at each inner bias less
    the mean of its neighbours'; and the two currents."""
    total = current_at_bias(stack.table(), bias, model=stack.model)[0]
    coherent_model = replace(stack.model, transport="coherent")
    coherent = current_at_bias(stack.table(), bias, model=coherent_model)[0]
    share = np.log(total / coherent)
    return share[1:-1] - 0.5 * (share[:-2] + share[2:]), total, coherent


@pytest.mark.parametrize("case", sorted(JUMPS))
def test_channel_smooth_in_bias_where_its_state_changes_character(case):
    """The channel's share of the current (scattering-assisted over coherent) changes
    smoothly with bias: at no bias more than 10 % off the mean of its neighbours (in log).
    Common practice: nothing in either current has structure on a 5 mV scale here (the
    coherent current is smooth)."""
    stack, bias = JUMPS[case]
    off, channel, coherent = _share_off(stack, bias)
    print(case, channel, coherent)
    assert np.all(np.abs(off) < np.log(1.1))


def test_no_spike_where_the_state_crosses_the_emitter_edge():
    """GaAs/AlAs/In0.04Ga0.96As (7/21/8 ML, draw 5 of the GaAs search space in
    tests/test_grid_convergence.py), default model: at the peak's cliff (the well's charge
    collapses) its state sits within a few of its widths above the emitter band edge,
    where the device's ``T`` shows no Lorentzian line. It was taken for the state's line
    there; the emitter width fitted to it, divided by the emitter's coupling that vanishes
    at the edge, overstated ``Gamma_L(z)`` 20 times and the current was 22,000 A/cm^2
    within 4 uV of bias, against 3,400 before the cliff and 1,800 after it (and the peak
    refinement reported that spike as Jp; measured before the emitter coupling took the
    accumulation layer into account, after which the cliff falls by 17 %). Common practice: no physics of the stack has
    structure on a micro-volt scale here. Checked: every current from 10 uV before the
    cliff to 10 uV after it is at most 5 % above the current 1 mV before it."""
    layer = lambda name, mat, **kw: {"name": name, "material": mat, **kw}  # noqa: E731
    stack = parse_stack(
        {
            "temperature_k": 300.0,
            "layers": [
                layer("emitter", "GaAs", doping_cm3=1e18),
                layer("spacer1", "GaAs", thickness_nm=3.0),
                layer("barrier1", "AlAs", thickness_ml=7),
                layer("well", "In0.04Ga0.96As", thickness_ml=21),
                layer("barrier2", "AlAs", thickness_ml=8),
                layer("spacer2", "GaAs", thickness_nm=10.0),
                layer("collector", "GaAs", doping_cm3=1e18),
            ],
        }
    )
    table, model = stack.table(), stack.model
    assert model == ModelOptions()  # the default model

    def current(v):
        return current_at_bias(table, np.atleast_1d(v), model=model)[0]

    bias = np.linspace(0.24, 0.29, 51)
    j = current(bias)
    k = int(np.argmin(np.diff(j)))  # the cliff lies between bias[k] and bias[k + 1]
    assert j[k + 1] < 0.9 * j[k]
    lo, hi = bias[k], bias[k + 1]
    for _ in range(16):  # the cliff to 15 nV: the current above the two sides' mean
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if current(mid)[0] > 0.5 * (j[k] + j[k + 1]) else (lo, mid)
    window = current(lo + np.linspace(-10e-6, 10e-6, 21))
    print(f"cliff at {lo:.7f} V; before {j[k]:.1f}, window {window.min():.1f}-{window.max():.1f}")
    assert window.max() <= 1.05 * j[k]


def _coupling_scales(table, bias, model):
    """Per matched state (its line found in the device's own ``T``): the scale
    ``Gamma_L(E_n) / tau_L(E_n)`` from that exact line alone (before the channel mixes it
    with the probe's near the emitter edge) and from the probe's (the profile with its
    emitter side lowered), both as the channel computes them."""
    seen, pairs = {}, []
    match, widths = scattering._match_lines, scattering._state_widths

    def spy_match(e_p, gamma_p, peak_p, valid, lines, top):
        seen["probe"] = (e_p, gamma_p, peak_p)
        return match(e_p, gamma_p, peak_p, valid, lines, top)

    def spy_widths(edge, mass, width, geo, barriers, e_n, width_c, peak_c, matched, kt, *rest):
        out = widths(edge, mass, width, geo, barriers, e_n, width_c, peak_c, matched, kt, *rest)
        e_p, gamma_p, peak_p = seen["probe"]
        probe = widths(
            edge,
            mass,
            width,
            geo,
            barriers,
            *seen["probe"],
            0 * matched,
            kt,
            rest[0],
            (gamma_p, peak_p, e_p),
            rest[2],
        )
        both = matched & (probe["scale"] > 0)
        pairs.extend(zip(out["line_scale"][both], probe["scale"][both], e_n[both], strict=True))
        return out

    try:
        scattering._match_lines, scattering._state_widths = spy_match, spy_widths
        current_at_bias(table, bias, model=model)
    finally:
        scattering._match_lines, scattering._state_widths = match, widths
    return np.array(pairs)


def test_emitter_coupling_agrees_with_the_exact_lines():
    """The channel's emitter coupling ``Gamma_L(z) = scale tau_L(z)`` (module note 4) takes
    its scale from one state's line; its energy dependence is the WKB ``tau_L``. Two lines
    give the scale independently: the device's own ``T`` (exact transfer matrix) where the
    state lies above the emitter edge, and the probe's. Where ``tau_L`` has the right energy
    dependence the two agree at every bias. Over 8 as-grown samples of each example design
    (default model, 31 biases): 5-95 % of the ratios within 0.8-1.25, all within 0.4-2.5
    (measured: 0.92-1.03 and 0.91-1.62 on 387 states; 0.85-1.07 and 0.61-2.2 over 842
    states of four random-stack sets). With the emitter's bulk wave number in the
    interface factor, as until 2026-12-03 (not the one next to the barrier, where an
    accumulation layer lowers the band edge), the device's scale rose 2.5 times as the GaAs
    example's state fell from 53 to 5 meV above the edge, and the ratios here spread to
    0.93-1.33 and up to 3.6 (this test failed; measured)."""
    from wellwright.optimize.study.growth import growth_model
    from wellwright.physics.stack import load_stack

    root = Path(__file__).resolve().parents[1]
    ratios = []
    for name, top_v in (("inp_thz_oscillator", 0.6), ("gaas_low_power_memory", 0.4)):
        stack = load_stack(root / "studies" / f"{name}.toml")
        grown = growth_model(stack)
        table = grown.as_grown(grown.draw_z(8, 3), seed=4)
        pairs = _coupling_scales(table, np.linspace(0.05, top_v, 31), stack.model)
        ratios.append(pairs[:, 0] / pairs[:, 1])
        print(name, len(pairs), np.percentile(ratios[-1], [0, 5, 50, 95, 100]).round(3))
    r = np.concatenate(ratios)
    assert r.size > 200
    assert 0.8 <= np.percentile(r, 5) and np.percentile(r, 95) <= 1.25
    assert 0.4 <= r.min() and r.max() <= 2.5


def test_no_channel_through_lines_that_are_not_states_of_the_well():
    """A line of the probe counts as the well's state only where its kinetic energy in the
    well is at least a quarter of the box energy of the effective width (module note 6).
    Common practice (uncertainty principle): a state confined to a well of width ``w_eff``
    has a kinetic energy of the order of ``hbar^2 pi^2 / (2 m w_eff^2)`` or more; measured
    0.34-0.93 of it on the example stacks and the reference devices.

    GaAs/Al0.79Ga0.21As, 1.4 nm barriers, 2.15 nm well, contacts 2e16 cm^-3, 126 K, default
    model: at some biases the probe's coarse search took a small maximum 30 meV above the
    well's bottom (0.02 of the box energy; the well's ground state lies 0.27 eV above it)
    as the lowest state, and the channel fell twentyfold there against its neighbours (24
    against 480 and 650 A/cm^2 at 0.56 V); 9 such jumps over the sweep. Checked: the
    channel's share of the current (total over coherent) at each bias within a factor 2
    of its neighbours' (log) mean (measured after: within 13 %)."""
    stack = _scan_stack(
        ("GaAs", "Al0.79Ga0.21As"),
        (5.581246891809655, 1.4206844776794456, 2.147464005530859, 1.382741576010408,
         2.899317561336827),
        (2.3816458255214976e16, 1.2889047901985372e16),
        125.68629947363576,
        None,
    )  # fmt: skip
    bias = np.linspace(0.0, 1.462752009073673, 121)[36:56]
    off, total, coherent = _share_off(stack, bias)
    print(np.c_[bias, total, coherent])
    assert np.all(np.abs(off) < np.log(2.0))


def _total_and_coherent(stack, bias):
    """The current of ``stack`` over ``bias`` with its own model and with the coherent one
    alone, A/cm^2 (the X-valley and grid-accuracy warnings: not tested here)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        coherent_model = replace(stack.model, transport="coherent")
        return (
            current_at_bias(stack.table(), bias, model=stack.model)[0],
            current_at_bias(stack.table(), bias, model=coherent_model)[0],
        )


def test_no_channel_through_ripples_of_a_nearly_transparent_stack():
    """A maximum of the probe's ``T`` whose ``T`` half a fitted width away is not below it
    is a ripple, not a quasi-bound state's line (a line falls to half its peak there:
    Breit-Wigner, common practice): the channel takes no state from it.

    GaAs/Al0.31Ga0.69As, 0.65 nm barriers (0.27 eV), 3.69 nm well, contacts 1.5e16 and
    2.6e16 cm^-3, 64 K, default model (rounded from seed 120 of the grid-independence scan;
    invented): ``T`` lies between 0.45 and 0.99 across the whole well, so there is no state.
    Before, where the ripple's half-maximum points were not below its peak the fit's width
    was kept and the ripple became a state at 43 of 500 biases over 0-1 V, each time taking
    up to 7.3 % of the current away (a one-bias dip of 3 % at 0.513 V made a peak that 61
    biases did not see and 241 did). Checked: the default model's current is the coherent
    one (to 1e-9) at every bias of 0.40-0.85 V."""
    stack = _scan_stack(
        ("GaAs", "Al0.31Ga0.69As"),
        (3.60, 0.65, 3.69, 0.65, 7.43),
        (1.46e16, 2.65e16),
        64.0,
    )
    bias = np.linspace(0.40, 0.85, 91)
    total, coherent = _total_and_coherent(stack, bias)
    assert total == pytest.approx(coherent, rel=1e-9)


def test_no_step_where_a_state_stops_being_matched_near_the_emitter_edge():
    """Where a state's line comes within its own width of the emitter edge it stops being
    matched to the device's line (``_match_lines``), and the edge mixing (weight 0 there)
    must carry every quantity of the state over to the probe's. It carried the scale and the
    drain width but not the state's centre and coherent width: on an InP/In0.52Al0.48As
    stack (2.59 and 3.30 nm barriers, a 4.71 nm well, 332 K, no nonparabolicity; rounded
    from seed 121 of the grid-independence scan, invented) the line's centre was 6.26 meV
    against the probe's 7.48 and the coherent width 6.24 against 5.47 meV at 0.2470 V, and
    the current stepped by +3 % between 0.2470 and 0.2475 V, a second maximum that 241
    biases saw and 61 did not. Checked: the channel's share of the current (total over
    coherent, minus 1) changes by less than 0.5 % of the current between neighbouring
    biases 0.5 mV apart over 0.240-0.255 V (measured after: at most 0.22 %; before: 3.0 %)."""
    stack = _scan_stack(
        ("InP", "In0.52Al0.48As"),
        (7.55, 2.59, 4.71, 3.30, 1.69),
        (1.65e17, 1.47e17),
        332.0,
        "InP",
        model={"nonparabolicity": False},
    )
    bias = np.linspace(0.240, 0.255, 31)
    total, coherent = _total_and_coherent(stack, bias)
    share = total / coherent - 1.0
    print(np.c_[bias, share])
    assert np.max(np.abs(np.diff(share))) < 5e-3


def test_channel_keeps_a_narrow_lowest_state_near_the_bottom_of_the_search():
    """The probe's coarse search is quadratic in energy from the bottom of its window, where
    the lowest state (the one carried) lies: a line tens of ueV wide on a rising background
    makes a local maximum of ``T`` only where the grid is finer than about 15 meV around it.

    GaAs/AlAs, 5.6 nm barriers, 12.5 nm well, contacts 1e17 cm^-3, 276 K, no
    nonparabolicity, default model, 0-0.35 V: on the uniform 32-point grid (30 meV apart
    here) the well's lowest state (0.2 meV wide) was missed at some biases and the channel
    switched to the next state; the channel's share of the current (total over coherent)
    jumped by 2.6 times against its neighbours. Common practice: at 276 K nothing in the
    current has structure on the 3 mV scale of the sweep. Checked: the share within a factor
    2 of its neighbours' (log) mean at every bias (measured after: within 1.4 times)."""
    stack = _scan_stack(
        ("GaAs", "AlAs"),
        (3.084904045519173, 5.617640727473464, 12.541494717707517, 5.617640727473464,
         3.0131840600812643),
        (1.262523664987871e17, 1.0266762708225198e17),
        276.02727188098635,
        model={"nonparabolicity": False},
    )  # fmt: skip
    bias = np.linspace(0.0, 0.3537215291811787, 121)[1:]
    off = _share_off(stack, bias)[0]
    print(np.abs(off).max(), bias[1:-1][np.argmax(np.abs(off))])
    assert np.all(np.abs(off) < np.log(2.0))


def _well_geometry(layers):
    """Oriented slice arrays and geometry of a well between two thick barriers: ``layers``
    are ``(band edge eV, mass m0, width nm)`` of the barrier, the well's slices, the barrier;
    zero-width contacts at both ends."""
    rows = [(0.0, layers[0][1], 0.0), *layers, (0.0, layers[-1][1], 0.0)]
    edge, mass, width = (np.array([[r[i] for r in rows]]) for i in range(3))
    barrier = edge > scattering.BARRIER_MIN_EV
    ones = np.ones_like(edge)
    geo = scattering._geometry(edge, mass, width, barrier, 0.036 * ones, 10.9 * ones, 12.9 * ones)
    return geo, edge, mass, width


def _finite_well_level(width_nm, depth_ev, m_w, m_b):
    """Ground level of a symmetric finite well with the BenDaniel-Duke matching (``psi`` and
    ``psi'/m`` continuous): ``tan(k w / 2) = m_w kappa / (m_b k)`` (textbook even state)."""
    from scipy.optimize import brentq

    def mismatch(e):
        k = np.sqrt(m_w * e / HBAR2_2M0_EV_NM2)
        kappa = np.sqrt(m_b * (depth_ev - e) / HBAR2_2M0_EV_NM2)
        return np.tan(0.5 * k * width_nm) - m_w * kappa / (m_b * k)

    top = min(depth_ev, HBAR2_2M0_EV_NM2 / m_w * (np.pi / width_nm) ** 2) * (1 - 1e-12)
    return brentq(mismatch, 1e-9, top, xtol=1e-15)


def _fd_lowest_state(layers, dz):
    """The lowest level (eV), its eigenvector and the band edge on the mesh of a
    finite-difference BenDaniel-Duke Hamiltonian of ``layers`` (band edge eV, mass m0, width
    nm), mesh ``dz`` nm, ``1/m`` taken between nodes (scipy's ``eigh_tridiagonal``; an
    independent numerical reference)."""
    from scipy.linalg import eigh_tridiagonal

    u = np.concatenate([np.full(round(w / dz), e) for e, _, w in layers])
    m = np.concatenate([np.full(round(w / dz), mm) for _, mm, w in layers])
    t = HBAR2_2M0_EV_NM2 * 0.5 * (1 / m[:-1] + 1 / m[1:]) / dz**2  # 1/m between nodes
    diag = u.copy()
    diag[:-1] += t
    diag[1:] += t
    level, psi = eigh_tridiagonal(diag, -t, select="i", select_range=(0, 0))
    return level[0], psi[:, 0], u


def _random_well(rng, max_field):
    """A random finite well (1.5-15 nm, 0.2-1.5 eV deep, masses 0.02-0.15 m0 either side),
    flat or tilted by a field up to ``max_field(w, depth)`` eV/nm: ``layers(extra_left,
    extra_right)`` (5 nm barriers, the well cut into 0.25 nm slices, its end slices widened
    by the extras), and the well's depth."""
    w, depth = rng.uniform(1.5, 15.0), rng.uniform(0.2, 1.5)
    m_w, m_b = rng.uniform(0.02, 0.15, 2)
    field = rng.choice([0.0, rng.uniform(0.005, max_field(w, depth))])  # eV/nm

    def layers(extra_left=0.0, extra_right=0.0):
        n = max(1, round(w / 0.25))
        d = w / n
        z = (np.arange(n) + 0.5) * d
        well = [(-field * zi, m_w, d) for zi in z]
        well[0] = (well[0][0], m_w, d + extra_left)
        well[-1] = (well[-1][0], m_w, d + extra_right)
        return [(depth, m_b, 5.0), *well, (depth - field * w, m_b, 5.0)]

    return layers, depth


@pytest.mark.parametrize(
    ("width_nm", "depth_ev", "m_w", "m_b"),
    [(5.0, 1.0, 0.067, 0.067), (4.4, 1.2, 0.043, 0.15), (2.4, 0.5, 0.067, 0.092)],
)
def test_interface_slope_is_the_finite_well_levels_derivative(width_nm, depth_ev, m_w, m_b):
    """The roughness width's matrix element ``-dE_n/dz_i`` (note 5) against the derivative of
    the exact level of a symmetric finite well in its width (source: the textbook even-state
    condition with BenDaniel-Duke matching; moving one interface by ``dz`` widens the well by
    ``dz``), equal and unequal masses (GaAs-like, InGaAs/AlAs-like, GaAs/AlGaAs-like)."""
    level = _finite_well_level(width_nm, depth_ev, m_w, m_b)
    h = 1e-4
    slope = -(
        _finite_well_level(width_nm + h, depth_ev, m_w, m_b)
        - _finite_well_level(width_nm - h, depth_ev, m_w, m_b)
    ) / (2 * h)
    barrier = (depth_ev, m_b, 10.0)
    geo, edge, mass, width = _well_geometry([barrier, (0.0, m_w, width_nm), barrier])
    got = scattering._well_shots(np.array([[level]]), geo, edge=edge, mass=mass, width=width)[0]
    np.testing.assert_allclose(got[0, 0], [slope, slope], rtol=1e-6)


def test_interface_slope_of_a_well_with_an_insert():
    """A well with a deep insert (InGaAs/InAs/InGaAs-like, 0.9/1.8/0.9 nm, in AlAs-like
    barriers) and an uneven one: ``-dE_n/dz_i`` at each interface against the derivative of
    the lowest level of a finite-difference BenDaniel-Duke Hamiltonian (scipy's
    ``eigh_tridiagonal``, 1 pm mesh; an independent numerical reference), within 1 %."""
    bar = (1.2, 0.15, 6.0)
    cases = [
        [bar, (0.0, 0.043, 0.9), (-0.55, 0.026, 1.8), (0.0, 0.043, 0.9), bar],
        [bar, (0.0, 0.043, 1.5), (-0.55, 0.026, 1.2), (0.0, 0.043, 0.6), bar],
    ]

    def lowest(layers):
        return _fd_lowest_state(layers, 0.001)[0]

    for layers in cases:
        level = lowest(layers)
        h = 0.01
        expect = []
        for i in (1, len(layers) - 2):  # the well's first and last slice widened outwards
            wider = [list(x) for x in layers]
            wider[i][2] += h
            expect.append(-(lowest(wider) - level) / h)
        geo, edge, mass, width = _well_geometry(layers)
        got = scattering._well_shots(np.array([[level]]), geo, edge=edge, mass=mass, width=width)[0]
        np.testing.assert_allclose(got[0, 0], expect, rtol=0.01)


@pytest.mark.parametrize("seed", range(6))
def test_interface_slope_over_random_wells(seed):
    """Random finite wells (1.5-15 nm, 0.2-1.5 eV deep, masses 0.02-0.15 m0 either side),
    flat and tilted by a field (the well cut into 0.25 nm slices, as under bias):
    ``-dE_n/dz_i`` against the derivative of the lowest level of a finite-difference
    BenDaniel-Duke Hamiltonian (scipy's ``eigh_tridiagonal``, 2 pm mesh), within 1.5 %
    (the mesh's and the one-sided difference's error; an independent numerical reference)."""
    layers, _ = _random_well(np.random.default_rng(seed), lambda w, depth: 0.03)

    def lowest(ls):
        return _fd_lowest_state(ls, 0.002)[0]

    base = layers()
    level = lowest(base)
    h = 0.02
    expect = [
        -(lowest(layers(extra_left=h)) - level) / h,
        -(lowest(layers(extra_right=h)) - level) / h,
    ]
    geo, edge, mass, width = _well_geometry(base)
    got = scattering._well_shots(np.array([[level]]), geo, edge=edge, mass=mass, width=width)[0]
    np.testing.assert_allclose(got[0, 0], expect, rtol=0.015)


@pytest.mark.parametrize("seed", range(6))
def test_kinetic_energy_over_random_wells(seed):
    """Random finite wells (1.5-15 nm, 0.2-1.5 eV deep, masses 0.02-0.15 m0 either side),
    flat and tilted by a field up to 0.06 eV/nm and half the depth across the well (cut into
    0.25 nm slices, as under bias; the steep ones with part of the well above the level): the
    shot's ``<E_n - U>`` over the
    well (:func:`_well_shots`) against that of the lowest eigenvector of a finite-difference
    BenDaniel-Duke Hamiltonian (scipy's ``eigh_tridiagonal``, 2 pm mesh; an independent
    numerical reference), within 1 % of the level's depth below the barrier (the mesh's
    error)."""
    # the far barrier kept at least half the depth above the well's end
    make, depth = _random_well(
        np.random.default_rng(seed), lambda w, depth: min(0.06, 0.5 * depth / w)
    )
    layers = make()
    dz = 0.002
    level, psi, u = _fd_lowest_state(layers, dz)
    inside = np.zeros(u.size, bool)
    start = round(5.0 / dz)
    inside[start : start + sum(round(t / dz) for _, _, t in layers[1:-1])] = True
    expect = np.sum(psi[inside] ** 2 * (level - u[inside])) / np.sum(psi[inside] ** 2)
    geo, edge, mass, width = _well_geometry(layers)
    for compiled in (True, False):
        _, got = scattering._well_shots(
            np.array([[level]]), geo, edge=edge, mass=mass, width=width, compiled=compiled
        )
        assert abs(got[0, 0] - expect) <= 0.01 * (depth - level), (got[0, 0], expect)


def test_kinetic_energy_of_a_triangular_well_is_a_third_of_its_level():
    """The state's kinetic energy in the well ``e_w = <E_n - U>`` over ``|psi|^2`` (the
    shot of :func:`_well_shots`) in a triangular well ``U = F z`` behind a high wall: by the
    virial theorem ``2 <T> = <z dU/dz> = <U>``, so ``<T> = E_1 / 3`` with
    ``E_1 = a_1 (hbar^2 F^2 / 2 m)^(1/3)``, ``a_1 = 2.33810741`` the first zero of ``Ai``
    (Abramowitz and Stegun, table 10.13; textbook). A 20 eV wall, 0.05 nm slices, 30 nm of
    ramp; within 1 %. The width-weighted mean edge of the classically allowed slices (until
    2026-12-05) gives ``E_1 / 2`` here (a linear edge under the level)."""
    hb2_2m = HBAR2_2M0_EV_NM2 / 0.067
    for field in (0.01, 0.03):  # eV/nm
        level = 2.33810741 * (hb2_2m * field**2) ** (1.0 / 3.0)
        d = 0.05
        z = (np.arange(600) + 0.5) * d
        rows = [(0.0, 0.067, 0.0), (20.0, 0.067, 5.0)]
        rows += [(field * zi, 0.067, d) for zi in z]
        rows += [(field * 30.0 + 1.0, 0.067, 5.0), (0.0, 0.067, 0.0)]
        edge, mass, width = (np.array([[r[i] for r in rows]]) for i in range(3))
        barrier = np.zeros(edge.shape, bool)
        barrier[0, [1, -2]] = True
        ones = np.ones_like(edge)
        geo = scattering._geometry(
            edge, mass, width, barrier, 0.036 * ones, 10.9 * ones, 12.9 * ones
        )
        for compiled in (True, False):
            _, kinetic = scattering._well_shots(
                np.array([[level]]), geo, edge=edge, mass=mass, width=width, compiled=compiled
            )
            np.testing.assert_allclose(kinetic[0, 0], level / 3.0, rtol=0.01)


def test_no_steps_of_the_channel_where_a_tilted_wells_slices_cross_its_state():
    """A wide tilted well whose edge rises above its state in part: the channel's ``e_w``
    (note 2) came from the slices where the state is classically allowed, and stepped as a
    slice crossed ``E_n``. On a stack of the grid scan (GaAs/AlAs, 3.5 and 2.1 nm barriers,
    14.2 nm well, 309 K, reverse bias; seed 154, stack 35 of
    ``benchmarks/scan_grid_independence.py``'s draws, invented layers as drawn; linear drop)
    the current fell 2 % between -0.08450 and -0.08455 V and so every 4-5 mV (measured;
    this test failed). Now ``e_w`` is ``<E_n - U>`` over ``|psi|^2``: neighbouring currents
    50 uV apart within 0.1 % (common practice: no steps where nothing physical changes)."""
    stack = _scan_stack(
        ("GaAs", "AlAs"),
        (1.4850205531357095, 3.491495857818932, 14.229367082283082, 2.144374266090423,
         7.894612166831356),
        (1.0518405798141917e18, 5.920490463385395e17),
        308.52087868923195,
        model={"electrostatics": "linear"},
    )  # fmt: skip
    bias = np.linspace(-0.0830, -0.0870, 81)
    j = _scan_currents(stack, bias)
    step = np.abs(np.diff(np.log(j)))
    print(np.round(j, 3))
    assert step.max() < 1e-3, (bias[np.argmax(step)], step.max())


def _scan_currents(stack, bias):
    """``|J|`` of ``stack`` (its own model) over ``bias``, A/cm^2."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the X-valley and grid-accuracy warnings: not tested
        return np.abs(current_at_bias(stack.table(), bias, model=stack.model)[0])


def _onset_steps(stack, bias):
    """Ratios of neighbouring currents of ``stack`` (its own model) over ``bias``."""
    j = _scan_currents(stack, bias)
    return j[1:] / j[:-1]


def test_no_spike_where_a_line_reaches_the_emitter_edge_from_above():
    """Where a matched line nears the emitter edge its own scale ``Gamma_L / tau_L`` rises
    (note 4); the channel mixes it with the probe's within a few kT of the edge. On a stack
    of the wide scan (InAs/AlSb, 12.4 nm well, 361 K, reverse bias; seed 11, stack 63 of
    ``tests/test_default_model_scan.py``'s draws, invented layers as drawn), 21 biases across
    the state's crossing: no sample above 1.5 times both its neighbours (common practice: no
    isolated spike at 3 mV steps). With the line's scale alone (until 2026-12-04) the current
    at 0.42 meV above the edge was 86.8 A/cm^2 between 15.1 and 44.3 (this test failed;
    measured)."""
    stack = _scan_stack(
        ("InAs", "AlSb"),
        (7.572146276973339, 2.5379309931092684, 12.366284411431096, 2.5379309931092684,
         3.5994424643198983),
        (5.5936073837581e16, 9.183834264198144e16),
        361.3025552895251,
        substrate="InAs",
    )  # fmt: skip
    bias = np.linspace(-0.2233, -0.1638, 21)
    j = _scan_currents(stack, bias)
    print(np.round(j, 2))
    spike = j[1:-1] > 1.5 * np.maximum(j[:-2], j[2:])
    assert not spike.any(), bias[1:-1][spike]


def test_no_dip_where_a_state_crosses_the_emitter_edge_behind_a_thinner_barrier():
    """A matched line's two widths are the roots of ``T_p = 4 G_L G_R / G^2`` (note 4); the
    drain's is the root nearer the probe's ``Gamma_R`` (the probe differs from the device on
    the source side only). On a stack of the wide scan (In0.53Ga0.47As/AlAs0.56Sb0.44, 3.4 nm
    emitter and 4.3 nm collector barrier, 9.9 nm well, 3.3e18 cm^-3, 380 K; seed 26, stack 8
    of ``tests/test_default_model_scan.py``'s draws, invented layers as drawn), as the well's
    state passes the emitter edge (0.209-0.211 V): the WKB rule gave the larger root to the
    thinner emitter barrier although ``Gamma_L`` vanishes at the edge, so ``Gamma_R`` fell 30
    times (1.6e-10 against 5.2e-9 eV) and the current dipped to 4.0 and 3.3 A/cm^2 between
    9.8 and 14.0 (measured; this test failed). Checked: after the profile's step at 0.208 V
    (the well's charge collapses: the coherent current steps too), the current within 10 % of
    its neighbours (common practice: no dip at 1.3 mV steps; measured after: within 2 %), and
    the state's drain width within 20 % over the biases (the collector barrier's coupling
    moves smoothly with the bias)."""
    stack = _scan_stack(
        ("In0.53Ga0.47As", "AlAs0.56Sb0.44"),
        (3.943190396736685, 3.3934311527760874, 9.906286889887502, 4.276859719737243,
         3.1420562900715177),
        (3.3037956645522683e18, 5.535867538422424e18),
        380.3433979565663,
        substrate="InP",
    )  # fmt: skip
    bias = np.linspace(0.2089, 0.2229, 12)
    seen = []
    original = scattering._state_widths

    def spy(*args, **kwargs):
        out = original(*args, **kwargs)
        seen.append(out["gamma_r"][0, :, 0])
        return out

    with warnings.catch_warnings(), pytest.MonkeyPatch.context() as mp:
        warnings.simplefilter("ignore")  # the X-valley and grid-accuracy warnings: not tested
        mp.setattr(scattering, "_state_widths", spy)
        j = current_at_bias(stack.table(), bias, model=stack.model)[0]
    drain = seen[0]
    print(np.round(j, 3), drain)
    assert drain.max() < 1.2 * drain.min()
    ratio = j[1:-1] / np.sqrt(j[:-2] * j[2:])
    assert np.all(np.abs(np.log(ratio)) < np.log(1.1)), (bias[1:-1], np.round(ratio, 3))


def test_no_rise_of_a_broad_state_across_the_emitter_edge():
    """Near the emitter edge a matched line's own scale ``Gamma_L / tau_L`` is mixed with
    the probe's (note 4) over the energies the channel samples about the state: its supply's
    ``kT`` and its line's half width. On a stack of the wide scan (GaAs/AlAs, 2.7 nm well,
    7.8e18 cm^-3, 53 K; seed 32, stack 194 of ``tests/test_default_model_scan.py``'s draws,
    invented layers as drawn), after the well's charge collapses (0.900-0.905 V) the state
    (roughness width 0.14 eV) crosses the emitter edge 8 meV above it. With the mixing over
    ``kT`` (4.5 meV) alone the line's scale (0.02, against the probe's 0.33) held until within
    a few meV of the edge, and the current rose 14 times in 15 mV (4.9 to 70 kA/cm^2;
    measured; this test failed). Checked: neighbours at 5 mV steps within a factor 1.2
    (common practice: a smooth valley side; measured after: at most 1.12)."""
    stack = _scan_stack(
        ("GaAs", "AlAs"),
        (5.650288332856169, 1.9802633000046101, 2.6924623042791733, 2.270739731208806,
         7.078231362884806),
        (7.843992558781921e18, 1.1977225618693808e19),
        52.51954500231996,
    )  # fmt: skip
    bias = np.linspace(0.905, 0.94, 8)
    step = _onset_steps(stack, bias)
    assert np.all(np.abs(np.log(step)) < np.log(1.2)), (bias[1:], np.round(step, 3))


def test_a_broad_state_above_the_energy_window_sets_in_smoothly():
    """The probe searches for states up to the lower barrier's inner edge, above the energy
    window too (note 6): a broad state above the window reaches into it with its line's tail.
    On a stack of the wide scan (GaAs/AlAs, 0.76 nm barriers, 2.8 nm well, 70 K; seed 50,
    stack 89 of ``tests/test_default_model_scan.py``'s draws, invented layers as drawn) the
    state (0.18 eV, 44 meV wide, roughness width 0.1 eV) entered the window (30 kT above the
    Fermi level) at 0.157 V and the current rose 11.6 times between 0.1545 and 0.1600 V
    (measured; this test failed). Checked: neighbours at 5.5 mV steps within a factor 1.1
    (common practice: no step where nothing in the device changes; measured after: 1.03)."""
    stack = _scan_stack(
        ("GaAs", "AlAs"),
        (3.545784775865409, 0.7626838461152492, 2.814328586388453, 0.7626838461152492,
         2.311827094121726),
        (1.4760260463534912e17, 1.6837186100825117e17),
        69.90704009057413,
    )  # fmt: skip
    step = _onset_steps(stack, np.linspace(0.116, 0.182, 13))
    assert np.all(np.abs(np.log(step)) < np.log(1.1)), np.round(step, 3)


def test_a_state_near_the_barrier_top_fades_into_the_channel():
    """A state takes the scattering rates in full from two widths below the lower barrier's
    inner edge and none within one (a smoothstep between; note 6). On a stack of the wide
    scan (GaAs/Al0.54Ga0.46As, 1.3 nm barriers, 1.55 nm well, 2.3e18 cm^-3, 230 K; seed 50,
    stack 46, invented layers as drawn) the state, 0.13 eV wide, came within its width of
    the barrier's edge below 0.035 V, and the channel switched on at full strength between
    0.030 and 0.0375 V: the current rose 7.1 times (measured; this test failed). Checked:
    neighbours at 7.5 mV steps from 0.0075 V within a factor 2.1 (the coherent current rises
    twofold from 0.0075 to 0.015 V; measured after: 2.02, 1.52, 1.35 and falling, as the
    coherent current's)."""
    stack = _scan_stack(
        ("GaAs", "Al0.54Ga0.46As"),
        (0.9547587439456413, 1.2955659529268932, 1.5484940657122652, 1.3293186647742912,
         7.3007148375560575),
        (2.2748225120437786e18, 2.441492986846145e18),
        229.97064768767862,
    )  # fmt: skip
    step = _onset_steps(stack, np.linspace(0.0075, 0.06, 8))
    assert np.all(step < 2.1), np.round(step, 3)


def test_no_step_where_the_wkb_couplings_of_the_two_barriers_cross():
    """Where no device line fixes the drain's root (a state below the emitter edge), the
    probe's two roots go to the leads by the WKB couplings' ratio ``rho = tau_L / tau_R``,
    with the share ``1 / (1 + rho^-6)`` of the larger-to-the-emitter assignment (geometric
    mixing, the product ``Gamma_L Gamma_R`` and so ``T_p`` kept; note 4). On a stack of the
    wide scan (In0.53Ga0.47As/AlAs, 1.80 and 1.95 nm barriers, 11.1 nm well, 152 K; seed 50,
    stack 84, invented layers as drawn) the two estimates cross in the valley while the
    line's roots differ 4.4 times: ``Gamma_R`` went from 1.0e-5 to 4.4e-5 eV between 0.580
    and 0.585 V and the current fell 3.2 times (measured; this test failed). Checked:
    neighbours at 5 mV steps within a factor 1.1 (common practice: a smooth valley;
    measured after: at most 1.07)."""
    stack = _scan_stack(
        ("In0.53Ga0.47As", "AlAs"),
        (3.3949622737056937, 1.7956819625127718, 11.05708269136326, 1.9455229502121956,
         4.92249729044008),
        (9.01335342263624e17, 6.192792648073275e17),
        152.1735862110339,
        substrate="InP",
    )  # fmt: skip
    step = _onset_steps(stack, np.linspace(0.55, 0.61, 13))
    assert np.all(np.abs(np.log(step)) < np.log(1.1)), np.round(step, 3)


def test_no_spike_where_a_matched_line_near_the_emitter_edge_is_no_clean_line():
    """A device line within a few ``kT`` (and half widths) of the emitter edge is no clean
    Breit-Wigner line: its drain width, like its scale, is mixed with the probe's (note 4).
    On a stack of the wide scan (GaAs/Al0.54Ga0.46As, 2.76 and 1.98 nm barriers, 13.4 nm
    well, 4.2e18 cm^-3, 181 K, reverse bias; seed 52, stack 51, invented layers as drawn),
    2.4 meV above the edge neither root of the device line was near the probe's drain width
    (4.7e-4 and about 2e-6 eV against 2.5e-5): the nearer one by ratio, 4.7e-4, went to the
    drain at -0.430 V and 2.4e-6 at -0.425 V, and the current spiked to 1.24 times its
    neighbours' mean at -0.430 V (measured; this test failed). Checked: each sample at 5 mV
    steps within 5 % of its neighbours' geometric mean (common practice: no isolated spike;
    measured after: within 2.6 %)."""
    stack = _scan_stack(
        ("GaAs", "Al0.54Ga0.46As"),
        (4.329535144806863, 2.762453369043886, 13.356013267421154, 1.975306370532046,
         0.3021529535847527),
        (4.159215347400868e18, 6.825277504472547e18),
        181.3432512839054,
    )  # fmt: skip
    j = _scan_currents(stack, np.linspace(-0.445, -0.42, 6))
    ratio = j[1:-1] / np.sqrt(j[:-2] * j[2:])
    assert np.all(np.abs(np.log(ratio)) < np.log(1.05)), np.round(ratio, 3)


def test_no_step_where_a_line_stops_being_matched():
    """The near-edge weight of a matched line's own scale and drain width is counted from
    the matching threshold (the state and its line lie above the emitter edge by more than
    their widths), so it is 0 where the line stops being matched (note 4). On a stack of the
    wide scan (In0.53Ga0.47As/AlAs, 3 ML barriers, 4.3 nm well, 6.8e18 cm^-3, 334 K; seed
    55, stack 38, invented layers as drawn) the state's line, 15 meV wide, stops being
    matched between 0.435 and 0.440 V; counted from the edge the weight was still 0.29
    there, the scale jumped from 0.06 to the probe's 0.14 and the current 1.58 times
    (measured; this test failed). Checked: neighbours at 5 mV steps within a factor 1.2
    (measured after: at most 1.13; the line's own width still enters the coherent part
    while matched)."""
    stack = _scan_stack(
        ("In0.53Ga0.47As", "AlAs"),
        (5.547788846416653, 0.8825300926843793, 4.335118339796741, 0.8825300926843793,
         0.6032289385286838),
        (6.792253766053124e18, 8.45957875995444e18),
        334.18493992865046,
        substrate="InP",
    )  # fmt: skip
    step = _onset_steps(stack, np.linspace(0.43, 0.47, 9))
    assert np.all(np.abs(np.log(step)) < np.log(1.2)), np.round(step, 3)


#: Two stacks of the wide scan (seed 80 of ``tests/test_default_model_scan.py``'s draws,
#: stacks 39 and 49, invented layers as drawn) whose matched line is 15 and 23 meV wide:
#: (stack, biases across the bias where its width's fit moved)
BROAD_LINES = {
    "InP/InAlAs 183 K": (
        _scan_stack(
            ("InP", "In0.52Al0.48As"),
            (3.6361638361085658, 3.9045490804706753, 1.9037523925044122, 4.438476153310469,
             3.4491852737489705),
            (9.299679393503443e17, 1.535446124247088e18),
            182.61127986601196,
            substrate="InP",
        ),
        np.linspace(0.1146, 0.1158, 7),
    ),
    "GaAs/AlGaAs 150 K": (
        _scan_stack(
            ("GaAs", "Al0.56Ga0.44As"),
            (7.366743009729093, 1.8471244612440199, 2.476998283232162, 1.8471244612440199,
             1.291122412762942),
            (3.364883564271426e18, 2.5950124781593723e18),
            150.12814668552934,
        ),
        np.linspace(0.0285, 0.0320, 8),
    ),
}  # fmt: skip


@pytest.mark.parametrize("case", sorted(BROAD_LINES))
def test_no_step_where_a_broad_lines_fit_moves(case):
    """A matched line's width and peak are taken as the probe's are, from ``T`` computed at
    its centre and its half-maximum points (note 4). Taken from the coherent line search's
    fit (the curvature of 1/T over its last bracket, whose start moves with the coarse
    grid's nodes), a broad line's width moved by 10 % between neighbouring biases (16.1 to
    14.5 meV; 23.2 to 21.8 meV) and its peak went from 0.98 to the fit's clipped 1.0, so
    the split of the width into its two leads' parts moved by a quarter and the current
    fell 15 % (rose 12 % and fell 8 % on the second stack) within 0.2 mV, the coherent
    current smooth (measured; this test failed). Common practice: nothing in either current
    has structure on this scale. Checked: the channel's share of the current at each bias
    within 2 % of the mean of its neighbours' (in log; measured after: at most 0.07 %)."""
    stack, bias = BROAD_LINES[case]
    off, channel, coherent = _share_off(stack, bias)
    print(case, np.round(channel, 1), np.round(coherent, 1))
    assert np.all(np.abs(off) < np.log(1.02)), np.round(off, 4)


def test_no_step_where_the_drain_width_passes_between_the_roots():
    """On a matched line the root nearer the probe's ``Gamma_R`` goes to the collector (note
    4); near the roots' geometric mean the two assignments are now mixed, as sharply as the
    WKB share. Chosen outright, on the first stack of ``BROAD_LINES`` at 0.362 V (a line 18
    meV wide, roots 5.9 and 10 meV) the assignment flipped, ``Gamma_R`` went from 5.9 to 10
    meV and the current fell 13 % within 0.5 mV, the coherent current smooth (measured; this
    test failed). Common practice: nothing in either current has structure on this scale.
    Checked as the broad lines above: within 2 % of the neighbours' mean (in log; measured
    after: 0.01 %)."""
    stack, _ = BROAD_LINES["InP/InAlAs 183 K"]
    off, channel, coherent = _share_off(stack, np.linspace(0.3600, 0.3640, 9))
    print(np.round(channel, 1), np.round(coherent, 1))
    assert np.all(np.abs(off) < np.log(1.02)), np.round(off, 4)


@pytest.mark.parametrize(
    "name, bias_v",
    [
        ("gaas_low_power_memory", (0.25, 0.3, 0.315, 0.33, 0.5)),
        ("inp_thz_oscillator", (0.4, 0.48, 0.8)),
    ],
)
def test_channel_energy_integral_converged(name, bias_v):
    """Grid convergence of the channel's total-energy integral (common practice): the
    current with the default nodes (48 uniform, 8 of them above the supply's top, the
    higher Fermi level + 10 kT, and 64 about the state) within 1 % of that with four times
    as many, on the example stacks (default model) about their peaks and valleys (measured:
    at most 0.6 % and 0.2 %). With the 48 uniform nodes spread over the whole window (30 kT
    above the Fermi level) and 32 about the state (until 2026-12-04) the GaAs example's
    current was 1.3 to 1.9 % off (measured; this test failed), and the error's jitter
    between neighbouring biases made its peak refinement take a second round."""
    studies = Path(__file__).resolve().parents[1] / "studies"
    stack = parse_stack(read_toml(studies / f"{name}.toml"), source=name)
    table, bias = stack.table(), np.array(bias_v)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the X-valley and grid-accuracy warnings: not tested
        profile = band_profile(table, bias, model=stack.model)
        default = scattering.ScatteringParameters()
        j = {
            k: current_density_a_cm2(
                profile,
                table=table,
                bias_v=bias[None, :],
                scattering=replace(
                    default, n_uniform=k * default.n_uniform, n_line=k * default.n_line
                ),
            )[0]
            for k in (1, 4)
        }
    error = np.abs(j[1] / j[4] - 1.0)
    print(np.round(100 * error, 3))
    assert np.all(error < 0.01), np.round(100 * error, 3)


def _plane_wave_coefficients(energy_ev, edges_nm, band_ev, mass_m0):
    """Wave numbers and ``(A, B)`` of ``A e^{ikx} + B e^{-ikx}`` in each region of a flat
    profile with one mass (regions split at ``edges_nm``), for a unit wave leaving on the
    right: the textbook matching of psi and psi' at each interface, from the collector back
    to the emitter (written for these checks, not the package's kernel). Returns ``k`` and
    the coefficients, emitter's last."""
    k = [np.sqrt(complex((energy_ev - u) * mass_m0 / HBAR2_2M0_EV_NM2)) for u in band_ev]
    coef = [(1.0 + 0j, 0j)]
    for r in range(len(edges_nm) - 1, -1, -1):
        x, (a, b) = edges_nm[r], coef[-1]
        f = a * np.exp(1j * k[r + 1] * x) + b * np.exp(-1j * k[r + 1] * x)
        df = 1j * k[r + 1] * (a * np.exp(1j * k[r + 1] * x) - b * np.exp(-1j * k[r + 1] * x))
        coef.append(
            (
                0.5 * (f + df / (1j * k[r])) * np.exp(-1j * k[r] * x),
                0.5 * (f - df / (1j * k[r])) * np.exp(1j * k[r] * x),
            )
        )
    return k, coef


def _flat_double_barrier(well_nm, barrier_nm, barrier_ev):
    """Region edges (nm) and band edges (eV) of a flat double barrier for
    :func:`_plane_wave_coefficients`: emitter, barrier, well, barrier, collector."""
    edges = [0.0, barrier_nm, barrier_nm + well_nm, 2.0 * barrier_nm + well_nm]
    return edges, [0.0, barrier_ev, 0.0, barrier_ev, 0.0]


def _density_at_inner_interface(energy_ev, *, well_nm, barrier_nm, barrier_ev, mass_m0):
    """|psi|^2 of an emitter scattering state (unit incident amplitude, per unit wave number)
    at the well side of the emitter barrier of a flat double barrier with one mass
    (:func:`_plane_wave_coefficients`)."""
    edges, band = _flat_double_barrier(well_nm, barrier_nm, barrier_ev)
    k, coef = _plane_wave_coefficients(energy_ev, edges, band, mass_m0)
    (a_in, _), (a_w, b_w) = coef[-1], coef[2]  # the emitter's and the well's coefficients
    inner = a_w * np.exp(1j * k[2] * edges[1]) + b_w * np.exp(-1j * k[2] * edges[1])
    return abs(inner) ** 2 / abs(a_in) ** 2 / k[0].real


@pytest.mark.parametrize("barrier_nm", [1.4, 2.0])
@pytest.mark.parametrize("well_nm", [4.0, 8.0, 12.5])
def test_non_resonant_floor_is_the_exact_density_to_order_one(well_nm, barrier_nm):
    """The spectral weight ``K(z)`` of module note 2 (Lorentzian plus the floor ``1/eps_n^2``
    of :func:`scattering.non_resonant_floor2_ev2`, derived for the module) against the exact
    density of an emitter scattering state at the well side of the emitter barrier, both
    relative to their values at the resonance, 10-100 meV above the lowest state (flat band,
    0.05 m0 throughout, 1 eV barriers: an invented InGaAs/AlAs-like case). The exact density
    oscillates with energy (nodes of the scattering state near the interface, the next state's
    rise), so the check is on the geometric mean over the band: within x10 either way
    (measured 3.4-4.4 on the 4 and 8 nm wells, 0.36-0.38 on the 12.5 nm ones; the Lorentzian
    alone is 2.9-3.8 times above the exact density on the 4 nm wells, 1.2 on the 8 nm ones and
    40 times below it on the 12.5 nm ones, whose state is near the next one and where the
    floor is needed; the test fails with the floor 100 times larger). Analytic matching of
    plane waves; no source beyond the textbook (common practice)."""
    density = lambda e: _density_at_inner_interface(  # noqa: E731
        e, well_nm=well_nm, barrier_nm=barrier_nm, barrier_ev=1.0, mass_m0=0.05
    )
    grid = np.linspace(1e-4, 0.5, 20001)
    d = np.array([density(e) for e in grid])
    first = int(np.nonzero((d[1:-1] > d[:-2]) & (d[1:-1] >= d[2:]))[0][0]) + 1
    e_n = grid[first]
    above = d > 0.5 * d[first]  # the line's half-maximum points, on this grid
    lo = first - int(np.argmin(above[first::-1]))
    hi = first + int(np.argmin(above[first:]))
    gamma = grid[hi] - grid[lo]
    floor2 = scattering.non_resonant_floor2_ev2(1.0 - e_n, e_n)  # e_k, e_w (flat well: E_n)
    dz = np.geomspace(0.01, 0.1, 41)
    exact = np.array([density(e_n + x) for x in dz]) / d[first]
    model = (1.0 / (dz**2 + gamma**2 / 4) + 1.0 / floor2) / (4.0 / gamma**2 + 1.0 / floor2)
    ratio = float(np.exp(np.mean(np.log(model / exact))))
    print(
        f"well {well_nm} nm, barrier {barrier_nm} nm: E_n {1e3 * e_n:.0f} meV, floor/exact {ratio:.2f}"
    )
    assert 0.1 < ratio < 10.0


def _well_bulk_weight(*, well_nm, barrier_nm, barrier_ev, mass_m0, above_ev):
    """The exact weight of the phonon entry (module note 3) of a flat double barrier: the
    density in the well of an emitter scattering state at ``E_n + above_ev``, weighted by
    the lowest state's ``|psi_n|^2`` (``int |psi_n|^2 |chi|^2``; the Frohlich coupling acts
    over the whole well), divided by the emitter barrier's own transmission (the model's
    ``Gamma_L(z)`` carries that) and relative to both at ``E_n``. Returns the weights, the
    state's energy and its line's full width at half maximum (eV)."""
    from scipy.integrate import trapezoid  # (numpy's own only from numpy 2.0)
    from scipy.optimize import brentq, minimize_scalar

    edges, band = _flat_double_barrier(well_nm, barrier_nm, barrier_ev)
    x = np.linspace(barrier_nm, barrier_nm + well_nm, 401)

    def chi(e):  # the scattering state in the well, per unit incident flux
        k, coef = _plane_wave_coefficients(e, edges, band, mass_m0)
        (a_in, _), (a_w, b_w) = coef[-1], coef[2]
        return (a_w * np.exp(1j * k[2] * x) + b_w * np.exp(-1j * k[2] * x)) / a_in

    def barrier_t(e):  # the emitter barrier alone
        _, coef = _plane_wave_coefficients(e, [0.0, barrier_nm], [0.0, barrier_ev, 0.0], mass_m0)
        return 1.0 / abs(coef[-1][0]) ** 2

    centre = lambda e: abs(chi(e)[200]) ** 2  # noqa: E731  (the well's middle: a maximum
    # of the lowest state)
    scan = np.linspace(1e-4, 0.95 * barrier_ev, 4001)
    d = np.array([centre(e) for e in scan])
    i = int(np.nonzero((d[1:-1] > d[:-2]) & (d[1:-1] >= d[2:]))[0][0]) + 1
    e_n = minimize_scalar(lambda e: -centre(e), bounds=(scan[i - 1], scan[i + 1])).x
    half = lambda e: centre(e) - 0.5 * centre(e_n)  # noqa: E731
    lo = e_n - 1e-6
    while half(lo) > 0:
        lo = e_n - 2.0 * (e_n - lo)
    hi = e_n + 1e-6
    while half(hi) > 0:
        hi = e_n + 2.0 * (hi - e_n)
    gamma = brentq(half, e_n, hi) - brentq(half, max(lo, 1e-9), e_n)
    psi_n = np.abs(chi(e_n)) ** 2
    psi_n /= trapezoid(psi_n, x)
    bulk = lambda e: trapezoid(psi_n * np.abs(chi(e)) ** 2, x) / barrier_t(e)  # noqa: E731
    return np.array([bulk(e_n + a) for a in above_ev]) / bulk(e_n), e_n, gamma


@pytest.mark.parametrize("mass_m0", [0.041, 0.067])
@pytest.mark.parametrize("barrier_ev", [0.3, 1.0])
@pytest.mark.parametrize(("well_nm", "barrier_nm"), [(3.0, 1.4), (6.0, 2.0), (12.5, 1.4)])
def test_phonon_entry_floor_is_the_exact_bulk_density(well_nm, barrier_nm, barrier_ev, mass_m0):
    """The phonon entry's spectral weight, the Lorentzian plus the bulk floor
    ``1/eps_b^2`` (:func:`scattering.bulk_floor2_ev2`, derived for the module from a
    Fabry-Perot resonator), against the exact weight of a flat double barrier
    (:func:`_well_bulk_weight`), both relative to their values at the resonance and
    averaged geometrically over 20-60 meV above the state (one LO-phonon energy and about):
    within x3 (measured 0.96-2.6 here; 0.55-2.8 over 90 wells of 3-16 nm, barriers 0.3-1 eV
    high and 1.4-3 nm thick, in a coarser scan of 2026-12-04). The interface floor of
    roughness (:func:`scattering.non_resonant_floor2_ev2`), which the phonon entry took until
    2026-12-04, overstates it on wide wells: 3.2-10.7 times on the 12.5 nm wells here (the
    test fails with it), up to 20 times in that scan. Analytic matching of plane waves; no
    source beyond the textbook (common practice)."""
    above = np.linspace(0.02, 0.06, 9)
    exact, e_n, gamma = _well_bulk_weight(
        well_nm=well_nm,
        barrier_nm=barrier_nm,
        barrier_ev=barrier_ev,
        mass_m0=mass_m0,
        above_ev=above,
    )
    half2 = 0.25 * gamma**2
    lorentzian = half2 / (above**2 + half2)
    model = lorentzian + half2 / scattering.bulk_floor2_ev2(e_n)  # flat well: e_w = E_n
    interface = lorentzian + half2 / scattering.non_resonant_floor2_ev2(barrier_ev - e_n, e_n)
    mean = lambda r: float(np.exp(np.mean(np.log(r))))  # noqa: E731
    print(
        f"well {well_nm} nm, barriers {barrier_nm} nm {barrier_ev} eV, {mass_m0} m0: E_n "
        f"{1e3 * e_n:.0f} meV, width {1e3 * gamma:.3g} meV; model/exact {mean(model / exact):.2f}"
        f" (interface floor {mean(interface / exact):.2f})"
    )
    assert 1 / 3 < mean(model / exact) < 3.0


def _golden_rule_emission_per_alpha_hw(q_nm, *, width_nm, depth_ev, mass_m0, hw_ev):
    """Fermi's golden rule for an electron in the lowest state of a finite square well (one
    mass) with no lateral momentum that emits a bulk LO phonon and lands in the same state
    with lateral momentum ``q``: with Frohlich's ``|M_Q|^2 = e^2 hbar w (1/eps_inf - 1/eps_s) /
    (2 eps0 V Q^2)`` (textbook, e.g. B. K. Ridley, Quantum Processes in Semiconductors; from
    memory) and the 2-D final states, ``hbar W = 2 pi alpha hbar w q_LO G(q)``,
    ``G = int dq_z/(2 pi) |F(q_z)|^2 / (q^2 + q_z^2)``, ``F`` the Fourier transform of
    ``|psi|^2`` and ``hbar^2 q_LO^2 / 2 m = hbar w`` (derived for this check). Returns
    ``hbar W / (alpha hbar w)`` at each ``q`` (1/nm) and the state's energy (eV)."""
    from scipy.integrate import trapezoid  # (numpy's own only from numpy 2.0)

    e_n = _finite_well_level(width_nm, depth_ev, mass_m0, mass_m0)
    k = np.sqrt(mass_m0 * e_n / HBAR2_2M0_EV_NM2)
    kappa = np.sqrt(mass_m0 * (depth_ev - e_n) / HBAR2_2M0_EV_NM2)
    z = np.linspace(0.0, 0.5 * width_nm + 14.0 / kappa, 8001)  # the even state, z >= 0
    inside = z <= 0.5 * width_nm
    outside = np.cos(0.5 * k * width_nm) ** 2 * np.exp(-2.0 * kappa * (z - 0.5 * width_nm))
    density = np.where(inside, np.cos(k * z) ** 2, outside)
    density /= 2.0 * trapezoid(density, z)
    q_z = np.linspace(0.0, 80.0 / width_nm + 40.0 * kappa, 6001)
    form = np.array([2.0 * trapezoid(density * np.cos(t * z), z) for t in q_z])
    g = np.array([2.0 * trapezoid(form**2 / (q**2 + q_z**2), q_z) for q in q_nm]) / (2 * np.pi)
    q_lo = np.sqrt(mass_m0 * hw_ev / HBAR2_2M0_EV_NM2)
    return 2.0 * np.pi * q_lo * g, e_n


@pytest.mark.parametrize(
    ("width_nm", "depth_ev", "mass_m0"),
    [
        (3.0, 1.2, 0.043),
        (4.4, 1.2, 0.043),
        (12.5, 1.2, 0.043),
        (20.0, 0.3, 0.043),
        (5.0, 0.25, 0.067),
    ],
)
def test_phonon_entry_width_is_the_golden_rule_rate(width_nm, depth_ev, mass_m0):
    """The phonon entry's width at a landing momentum ``q`` (module notes 3 and 5:
    :func:`scattering.lo_emission_width_ev` times :func:`scattering.lo_landing_weight` at
    ``q / q_w``, ``hbar^2 q_w^2 / 2 m = e_w``) against the golden-rule rate of the same
    transition computed here by quadrature (:func:`_golden_rule_emission_per_alpha_hw`), for
    ``q`` from 0.05 to 5 ``q_w``: within 25 % (measured 0.84-0.99 on InGaAs- and GaAs-like
    wells of 3 to 20 nm). The bulk rate ``2 alpha hbar w`` with the landing weight
    ``(pi/2)/(r (1 + pi r/2))`` used until 2026-12-04 was 2.2-3.2 times the golden rule on the
    3 nm well and 0.7-1.1 times on the 12.5 nm one (its ``q_w`` where the rule has ``q_LO``)."""
    hw = 0.034
    r = np.geomspace(0.05, 5.0, 13)
    e_w = _finite_well_level(width_nm, depth_ev, mass_m0, mass_m0)
    q_w = np.sqrt(mass_m0 * e_w / HBAR2_2M0_EV_NM2)
    golden, _ = _golden_rule_emission_per_alpha_hw(
        r * q_w, width_nm=width_nm, depth_ev=depth_ev, mass_m0=mass_m0, hw_ev=hw
    )
    model = scattering.lo_emission_width_ev(1.0, hw, e_w) * scattering.lo_landing_weight(r) / hw
    ratio = model / golden
    print(f"well {width_nm} nm, e_w {1e3 * e_w:.0f} meV: model / golden rule {np.round(ratio, 2)}")
    assert np.all((ratio > 0.75) & (ratio < 1.25))


def test_channel_fades_where_a_broad_line_stops_being_resolved():
    """A state whose line no longer dips below its peak on its way to the next line (barriers
    nearly transparent) is no quasi-bound state: the channel fades with the dip (module
    note 6) instead of staying at full strength until the coarse search stops seeing a
    maximum, and the search grid ends at the barrier's inner edge, not at a window's top
    far above it.

    GaAs/Al0.22Ga0.78As, 0.63 and 0.61 nm barriers (0.2 eV), a 14.55 nm well, contacts
    3.5e18 cm^-3, 356 K, default model (rounded from seed 120 of the grid-independence scan,
    stack 34; invented). Before, the search grid ran to the window's top 1 eV up, its nodes
    were 14 meV apart near the lowest line (21 meV wide, peak 0.6 on a background rising
    from 0.05 to 0.9), which was a maximum at some biases only; the channel's share of the
    current (total over coherent, minus 1) jumped between 0.3 and 0.02 at 0.09, 0.10 and
    0.15 V. Common practice: at 356 K nothing in the current has structure on a 2.5 mV
    scale. Checked: the share changes by less than 0.15 between neighbouring biases 2.5 mV
    apart over 0-0.2 V (measured before: 0.33; after: 0.12 at 0.1025 V, where the matched
    device line's fitted width, 22 or 26 meV, depends on the sweep's energy grid, a
    fragility of broad lines that stays (DEVELOPERS.md); elsewhere below 0.04), and the
    channel has faded with its line's dip by 0.14 V (share below 0.05; before: 0.31)."""
    stack = _scan_stack(
        ("GaAs", "Al0.22Ga0.78As"),
        (3.36, 0.63, 14.55, 0.61, 5.59),
        (3.45e18, 3.55e18),
        356.0,
    )
    bias = np.linspace(0.0, 0.2, 81)[1:]
    total, coherent = _total_and_coherent(stack, bias)
    share = total / coherent - 1.0
    print(np.c_[bias, share])
    assert np.max(np.abs(np.diff(share))) < 0.15
    assert abs(share[np.argmin(np.abs(bias - 0.14))]) < 0.05


def test_a_narrow_state_just_above_the_window_is_found_at_every_bias():
    """The probe's search goes on above the energy window's top to the barrier's inner edge
    (a state above the window reaches into it with its line's tail); its nodes there start
    at the window grid's own last step and grow geometrically, so that a narrow state just
    above the top is found at every bias (module note 6).

    GaAs0.51Sb0.49/AlAs0.56Sb0.44 on InP, 0.62 nm barriers, a 9.88 nm well, contacts 9e16
    and 9.8e16 cm^-3, 5 K, default model (rounded from seed 140 of the grid-independence
    scan, stack 55; invented). The window's top lies some 27 meV above the emitter edge, the
    lowest state (3 meV wide) 6 meV above it; before, the nodes above the top were 170 meV
    apart, the state was a maximum at some biases only, the lowest state found switched
    between it and one 0.5 eV up, and the current fell 35 % between 0.0395 and 0.0400 V
    (61 biases then gave Jp 2.55e4 A/cm^2 at 0.157 V, 241 biases 131 at 0.039 V). Common
    practice: a current smooth where nothing crosses a band edge or a Fermi level. Checked:
    the current changes by less than 10 % between neighbouring biases 0.5 mV apart over
    0.03-0.06 V (measured before: 35 %; after: 4 %, the steep rise of the current at 5 K)."""
    stack = _scan_stack(
        ("GaAs0.51Sb0.49", "AlAs0.56Sb0.44"),
        (6.33, 0.62, 9.88, 0.62, 4.93),
        (9.0e16, 9.8e16),
        5.0,
        substrate="InP",
    )
    bias = np.linspace(0.03, 0.06, 61)
    total, _ = _total_and_coherent(stack, bias)
    assert np.max(np.abs(np.diff(total)) / total[:-1]) < 0.1


def test_a_faint_coherent_line_beside_a_state_is_not_the_state() -> None:
    """Invented GaAs/AlAs stack (8 ML barriers, a 16 ML well, 40 and 100 nm spacers, contacts
    2e18 cm^-3, 400 K, reverse bias; a fuzz run's search design): at -0.440 V, in a batch of
    biases only, the current routine found a coherent line of peak 8e-9 within a width of the
    state whose probe line peaks at 0.99; matched as the state's own, its Gamma_L took the
    channel from 870 to 0.8 A/cm^2 at that one bias, a PVCR of 1078 that a search ranked
    first. No external reference: the current is smooth in the bias (neighbours 1 mV apart
    within 2 %, measured 0.6 %; before, 1000x) and the same in a batch and alone (1e-6)."""
    layers = [
        ("emitter", "GaAs", {"doping_cm3": 2e18}),
        ("sp1", "GaAs", {"thickness_nm": 40, "doping_cm3": 1e16}),
        ("b1", "AlAs", {"thickness_ml": 8}),
        ("well", "GaAs", {"thickness_ml": 16}),
        ("b2", "AlAs", {"thickness_ml": 8}),
        ("sp2", "GaAs", {"thickness_nm": 100}),
        ("collector", "GaAs", {"doping_cm3": 2e18}),
    ]
    stack = parse_stack(
        {
            "temperature_k": 400.0,
            "substrate": "GaAs",
            "layers": [{"name": n, "material": m, **k} for n, m, k in layers],
        },
        source="invented",
    )
    table = stack.table()
    bias = -np.linspace(0.435, 0.445, 11)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the grid's accuracy warning: not what is tested
        batch = current_at_bias(table, bias, model=stack.model)[0]
        alone = current_at_bias(table, bias[5:6], model=stack.model)[0]
    assert np.max(np.abs(np.diff(np.log(np.abs(batch))))) < np.log(1.02)
    assert batch[5] == pytest.approx(alone[0], rel=1e-6)
