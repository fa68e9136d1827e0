"""The default model against published devices, and the trade's common-practice trends.

``tests/reference_devices.py`` lists published double-barrier RTDs with their measured
figures of merit, each cited, with what was checked in which public source, what stays
from memory, and what was assumed where the paper is silent; its docstring says how the
devices were chosen (every one found with a printed structure) and lists those found
without one. The comparison (slow: one self-consistent sweep per device, seconds each)
prints every device's result.

Tolerances: Jp within x2 and PVCR within x3 of the measured value, for at least
``MIN_SHARE_JP`` and ``MIN_SHARE_PVCR`` of the devices that give the value; devices with a
stated reason (``expected_miss``, only X-valley current in AlAs barriers, which the README
says is not modelled, and only where the model's own X-valley check flags a barrier at the
peak bias, which the test asserts) are reported but not counted. Measured (default model,
2026-12-05, after the channel's kinetic energy in the well became the state's own
``<E_n - U>``): Jp 2 of 2; PVCR 5 of 6 (Zhang 21.9 against 17, Smet et al. 33.1 against 42
at 300 K and 38.8 against 85 at 77 K, Sollner et al. 10.8 against 6, Inata et al. 15.4
against 15; miss: Broekaert and Fonstad, 15.9 against 3; Goodhue et al. 28.9, the expected
miss). Before (2026-12-04, after the phonon entry took the well's bulk floor): Jp 2 of 2 within x2 (Zhang
et al. 2006: 2.6e3 against 3e3 A/cm^2; Broekaert and Fonstad 1990: 5.5e5 against > 4.5e5
A/cm^2); PVCR 5 of 6 within x3 (Zhang 20.1 against 17, Smet et al. at 300 K 26.0 against
42 and at 77 K 28.6 against 85, just inside, Sollner et al. 10.5 against 6, Inata et al.
15.2 against 15; miss: Broekaert and Fonstad's thin barriers, 15.5 against 3). Goodhue et
al.'s GaAs/AlAs device (27.9 against 3.5) is the expected miss; counted, PVCR would be 5 of
7. With the interface floor in the phonon entry (earlier that day): PVCR 4 of 6 (Zhang 19.0,
Smet 20.8 and 23.1, Sollner 9.4, Inata 14.3, Broekaert 13.7, Goodhue 20.0); with the bulk
emission rate before that: Zhang 15.1, Smet 15.3 and 17.4, Sollner 8.7, Inata 12.2,
Broekaert 12.0, Goodhue 16.5. Before the roughness width took the level's exact shift per
interface displacement (2026-12-03): PVCR 3 of 6 (Zhang 8.3, Smet 7.6 and 8.0, Broekaert
10.8, Sollner 8.7, Inata 11.1). Only one device (Zhang et al.) has its structure and figures
checked in a public source; it is within tolerance on both. The structures of the six
others are from memory (``from_memory``), so their hits and misses test the model less than
they seem to.

Common practice (no single source; facts of the trade):
- the valley current rises and the PVCR falls with temperature;
- thicker barriers raise the PVCR;
- at low temperature a phonon replica appears about one LO-phonon energy, divided by the
  fraction of the bias dropped before the well, above the peak (measured: V. J. Goldman,
  D. C. Tsui and J. E. Cunningham, Phys. Rev. B 36, 7635 (1987); from memory).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
from reference_devices import DEVICES, Device, verified
from wellwright.physics.iv import current_at_bias, locate_peak_valley, sweep
from wellwright.physics.stack import ModelOptions, parse_stack, read_toml
from wellwright.physics.valleys import x_valley_issues

JP_FACTOR = 2.0
PVCR_FACTOR = 3.0
#: Jp: the model reaches 2 of 2 (measured Dec 2026); 0.9 asks for all of them, a margin
#: below the measured share that with two devices cannot allow a miss.
MIN_SHARE_JP = 0.9
#: PVCR: the model reaches 4 of 6 (measured 2026-12-04); issue 12 asks for "most", more
#: than half: 0.6 fails at 3 of 6.
MIN_SHARE_PVCR = 0.6
BIAS = np.linspace(0.0, 2.0, 81)


def device_stack(d: Device, *, temperature_k: float | None = None, model: dict | None = None):
    """The device as a stack: contacts and spacers around its printed layers."""
    contact = {"material": d.contact}
    layers = [
        {"name": "emitter", **contact, "doping_cm3": d.doping_cm3},
        {"name": "emitter_spacer", **contact, "thickness_nm": d.spacer_nm},
    ]
    layers += [
        {"name": f"layer{i}", "material": m, "thickness_ml": ml}
        for i, (m, ml) in enumerate(d.layers, 1)
    ]
    layers += [
        {"name": "collector_spacer", **contact, "thickness_nm": d.spacer_nm},
        {"name": "collector", **contact, "doping_cm3": d.doping_cm3},
    ]
    data = {
        "temperature_k": d.temperature_k if temperature_k is None else temperature_k,
        "substrate": d.substrate,
        "layers": layers,
    }
    if model:
        data["model"] = model
    return parse_stack(data, source=d.key)


def _within(model_value, measured, factor):
    return model_value is not None and 1.0 / factor <= model_value / measured <= factor


@pytest.mark.slow
def test_default_model_against_published_devices():
    """Jp within x2 and PVCR within x3 for most published devices (default model)."""
    hits = {"jp": [], "pvcr": []}
    checked = {"jp": [], "pvcr": []}  # devices whose structure and figures were verified
    lines = []
    for d in DEVICES:
        stack = device_stack(d)
        m = sweep(stack.table(), BIAS, model=stack.model).metrics_of(0)
        jp, pvcr, vp = m["peak_current_density_a_cm2"], m["pvcr"], m["peak_voltage_v"]
        ok_jp = None if d.jp_a_cm2 is None else _within(jp, d.jp_a_cm2, JP_FACTOR)
        ok_pvcr = _within(pvcr, d.pvcr, PVCR_FACTOR)
        if d.expected_miss:
            # the only accepted reason is X-valley current the model leaves out: its own
            # check must flag a barrier's X edge within reach of the emitter at the peak
            assert vp is not None and x_valley_issues(stack, vp), d.key
        else:
            for key, ok in (("jp", ok_jp), ("pvcr", ok_pvcr)):
                if ok is not None:
                    hits[key].append(ok)
                    if verified(d):
                        checked[key].append(ok)
        memory = ", ".join(d.from_memory) or "-"
        lines.append(
            f"{d.key:28s} {d.temperature_k:5.0f} K  Jp {jp or float('nan'):9.3g} "
            f"(meas. {d.jp_a_cm2 or float('nan'):.3g}: {ok_jp})  "
            f"PVCR {pvcr or float('nan'):5.3g} (meas. {d.pvcr:g}: {ok_pvcr})  "
            f"Vp {vp or float('nan'):.3f} V (meas. {d.vp_v or float('nan'):.3g})  "
            f"from memory: {memory}"
            + (f"  expected miss: {d.expected_miss[:60]}..." if d.expected_miss else "")
        )
    shares = {k: f"{sum(v)} of {len(v)}" for k, v in hits.items()}
    shares_checked = {k: f"{sum(v)} of {len(v)}" for k, v in checked.items()}
    print("\n".join(["", f"default model: {ModelOptions()}", *lines]))
    print(f"within tolerance: {shares}; of devices with verified structure: {shares_checked}")
    for key, minimum in (("jp", MIN_SHARE_JP), ("pvcr", MIN_SHARE_PVCR)):
        assert hits[key], key
        share = np.mean(hits[key])
        assert share >= minimum, f"{key}: {share:.0%} of devices within tolerance"


def _ingaas_alas(barrier_ml=5, temperature_k=300.0, model=None):
    d = next(x for x in DEVICES if x.key == "broekaert1990_thin_barriers")
    layers = (("AlAs", barrier_ml), ("In0.53Ga0.47As", 15), ("AlAs", barrier_ml))
    return device_stack(
        Device(**{**d.__dict__, "layers": layers}), temperature_k=temperature_k, model=model
    )


@pytest.mark.slow
def test_valley_current_rises_and_pvcr_falls_with_temperature():
    """Common practice: warmer devices have higher valley currents and lower PVCR."""
    results = {}
    for t in (77.0, 300.0):
        stack = _ingaas_alas(temperature_k=t)
        results[t] = sweep(stack.table(), BIAS, model=stack.model).metrics_of(0)
    print({t: (r["valley_current_density_a_cm2"], r["pvcr"]) for t, r in results.items()})
    assert (
        results[300.0]["valley_current_density_a_cm2"]
        > results[77.0]["valley_current_density_a_cm2"]
    )
    assert results[300.0]["pvcr"] < results[77.0]["pvcr"]


@pytest.mark.slow
@pytest.mark.xfail(
    strict=True,
    reason="known limitation: the model's valley current is mostly the roughness channel, "
    "which depends little on temperature (measured: PVCR 24.8 at 77 K, 21.5 at 300 K)",
)
def test_pvcr_at_77k_a_few_times_that_at_300k():
    """Common practice for InGaAs/AlAs (e.g. 85 against 42 in Smet et al. 1992, table):
    the 77 K PVCR is a few times the 300 K one; here at least 1.8 times."""
    pvcr = {}
    for t in (77.0, 300.0):
        stack = _ingaas_alas(temperature_k=t)
        pvcr[t] = sweep(stack.table(), BIAS, model=stack.model).metrics_of(0)["pvcr"]
    assert pvcr[77.0] > 1.8 * pvcr[300.0]


def test_thicker_barriers_raise_pvcr():
    """Common practice: a thicker barrier lowers Jp and raises the PVCR (linear drop for
    speed; the trend is the channel's, not the electrostatics')."""
    model = {"electrostatics": "linear", "transport": "scattering-assisted"}
    pvcr, jp = [], []
    for ml in (4, 6, 8):
        stack = _ingaas_alas(barrier_ml=ml, model=model)
        m = sweep(stack.table(), BIAS, model=stack.model).metrics_of(0)
        pvcr.append(m["pvcr"])
        jp.append(m["peak_current_density_a_cm2"])
    print("barrier 4/6/8 ML: Jp", jp, "PVCR", pvcr)
    assert jp[0] > jp[1] > jp[2]
    # (measured with the default roughness: 10.3, 12.5, 11.4; the rise saturates from 6 ML,
    # where the roughness floor of the valley grows with the barrier's height above the state)
    assert pvcr[0] < pvcr[1] and pvcr[0] < pvcr[2]


def _bias_fraction_to_well_centre(stack) -> float:
    """The fraction of a linear drop's bias dropped up to the centre of the well (the layer
    after the spacer and the first barrier): length up to there over the whole length."""
    thick = [layer.thickness_nm for layer in stack.layers[1:-1]]
    return (sum(thick[:2]) + 0.5 * thick[2]) / sum(thick)


def test_phonon_replica_one_phonon_above_the_peak():
    """At 4.2 K the current beyond the peak falls a second time about hbar w_LO / eta after
    the main fall, eta the fraction of the bias dropped up to the well's centre (linear drop,
    so that eta is known: the length up to the well centre over the whole length).

    The replica is the main resonance's current shifted by one phonon: emitter electrons one
    phonon energy above the state enter it by emission until the state has dropped one phonon
    energy below the emitter's band edge, where that current has its own cliff. Measured as a
    shoulder or weak peak in the valley (Goldman, Tsui and Cunningham 1987, from memory); the
    test looks for the cliff: a second maximum of the fall rate -dJ/dV whose excess over the
    lowest fall rate between the two is a visible part of the current. With the emission
    term used until 2026-12-03 (landing weight 1/(1 + |y - E_n|/e_w), Frohlich's 1/q^2
    without the sum over the phonon's q_z; the state's line in the entry) the shoulder was
    three times fainter and this test failed."""
    d = next(x for x in DEVICES if x.key == "sollner1983_gaas_algaas")
    model = {"electrostatics": "linear", "transport": "scattering-assisted"}
    stack = device_stack(d, temperature_k=4.2, model=model)
    bias = np.linspace(0.0, 0.5, 251)
    j = current_at_bias(stack.table(), bias, model=stack.model)[0]
    peaks, valleys = locate_peak_valley(bias, j[None, :])
    peak, valley = int(peaks[0]), int(valleys[0])  # the first (main) peak and its valley
    assert 0 < peak < valley
    fall = -np.diff(j) / np.diff(bias)  # fall rate between neighbouring points
    mid = 0.5 * (bias[1:] + bias[:-1])
    cliff = peak + int(np.argmax(fall[peak:valley]))
    # the local maxima of the fall rate between the main cliff and the valley, each with its
    # excess over the lowest fall rate between the cliff and it, per unit current there
    # (1/V); the most prominent one is the replica's
    inner = np.arange(cliff + 1, valley - 1)
    tops = inner[(fall[inner] >= fall[inner - 1]) & (fall[inner] >= fall[inner + 1])]
    assert tops.size, "the fall rate has no second maximum after the main cliff"
    excess = [(fall[i] - np.min(fall[cliff : i + 1])) / j[i] for i in tops]
    second = int(tops[int(np.argmax(excess))])
    lowest = float(np.min(fall[cliff : second + 1]))
    expected = stack.layers[3].lo_phonon_ev / _bias_fraction_to_well_centre(stack)
    print(
        f"peak {bias[peak]:.3f} V, main cliff {mid[cliff]:.3f} V, second fall {mid[second]:.3f} V "
        f"(fall rate {fall[second]:.3g} against {lowest:.3g} A/cm^2/V before it, current "
        f"{j[second]:.3g} A/cm^2), expected "
        f"+{expected:.3f} V"
    )
    # a visible shoulder: the excess fall takes 0.7 % of the current per mV (measured: 9.0 /V
    # at 0.215 V; 11.5 /V with the interface floor in the phonon entry, until 2026-12-04, and
    # 16.5 /V with the bulk emission rate before it; 5.2 /V, a faint shoulder, with the
    # emission term used until 2026-12-03)
    assert (fall[second] - lowest) / j[second] > 7.0, "no second fall after the main cliff"
    assert mid[second] - mid[cliff] == pytest.approx(expected, rel=0.3)


def test_phonon_replica_of_a_wide_well_is_a_weak_peak():
    """The replica of a 12.3 nm (42 ML) In0.53Ga0.47As well between 5 ML AlAs barriers at
    37 K (the layers of ``studies/inp_thz_oscillator.toml`` with a wider well and contacts
    doped 1.6e17 cm^-3, an invented scenario; linear drop) stays well below the main peak:
    measured replicas are a shoulder or a weak peak in the valley (Goldman, Tsui and
    Cunningham 1987, from memory), the replica's maximum here below a third of the peak
    (this project's bound). Measured 0.14 (2026-12-04); 1.02 while the phonon entry took the
    interface floor of roughness (until 2026-12-04), whose ``e_w^3 / e_k`` overstates the
    well's bulk density 3-11 times on wells this wide (``tests/test_scattering.py``)."""
    data = read_toml(Path(__file__).resolve().parents[1] / "studies" / "inp_thz_oscillator.toml")
    data["temperature_k"] = 37.0
    data["model"] = {"electrostatics": "linear", "transport": "scattering-assisted"}
    for layer in data["layers"]:
        if "doping_cm3" in layer:
            layer["doping_cm3"] = 1.6e17
        if layer["name"] == "well":
            layer["thickness_ml"] = 42
    stack = parse_stack(data, source="wide well")
    bias = np.linspace(0.0, 0.4, 401)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the grid-accuracy warning: not tested
        j = current_at_bias(stack.table(), bias, model=stack.model)[0]
    peaks, _ = locate_peak_valley(bias, j[None, :])
    peak = int(peaks[0])
    cliff = peak + int(np.argmax(j[peak] - j[peak:] > 0.5 * j[peak]))  # past the main fall
    reach_v = 1.5 * stack.layers[3].lo_phonon_ev / _bias_fraction_to_well_centre(stack)
    inner = np.arange(
        cliff + 1, min(np.count_nonzero(bias <= bias[cliff] + reach_v), bias.size - 1)
    )
    tops = inner[(j[inner] >= j[inner - 1]) & (j[inner] >= j[inner + 1])]  # maxima to past it
    assert tops.size, "no replica"
    replica = float(np.max(j[tops]))
    print(f"peak {j[peak]:.4g} A/cm^2 at {bias[peak]:.3f} V; replica {replica / j[peak]:.3f} of it")
    assert replica < j[peak] / 3.0
