"""The I-V figure with a series resistance: the terminal-bias curve a measurement reports."""

from __future__ import annotations

import numpy as np
import pytest
from wellwright.optimize.shared.figures import iv_figure
from wellwright.physics.iv import sweep
from wellwright.physics.stack import parse_stack

FAST = {"electrostatics": "linear", "transport": "coherent"}  # the figure, not the physics


def _stack():
    return parse_stack(
        {
            "temperature_k": 300.0,
            "model": FAST,
            "layers": [
                {"name": "emitter", "material": "GaAs", "thickness_nm": 20, "doping_cm3": 2e18},
                {"name": "spacer", "material": "GaAs", "thickness_nm": 2},
                {"name": "barrier1", "material": "AlAs", "thickness_ml": 6},
                {"name": "well", "material": "GaAs", "thickness_ml": 18},
                {"name": "barrier2", "material": "AlAs", "thickness_ml": 6},
                {"name": "spacer2", "material": "GaAs", "thickness_nm": 2},
                {"name": "collector", "material": "GaAs", "thickness_nm": 20, "doping_cm3": 2e18},
            ],
        }
    )


@pytest.mark.parametrize("r_ohm_um2", [0.0, 25.0])
def test_terminal_curve_is_shifted_by_the_series_drop(r_ohm_um2: float) -> None:
    # common practice: the terminal bias is V + J R (J in A/cm^2, R in ohm um^2 = 1e-8 ohm cm^2)
    stack = _stack()
    curves = sweep(stack.table(), np.linspace(0.0, 0.6, 31), model=stack.model)
    fig = iv_figure(curves, series_resistance_ohm_um2=r_ohm_um2)
    ax = fig.axes[0]
    lines = [ln for ln in ax.get_lines() if ln.get_linestyle() in ("-", "--")]
    dashed = [ln for ln in lines if ln.get_linestyle() == "--"]
    if r_ohm_um2 == 0.0:
        assert not dashed
        return
    (solid,) = [ln for ln in lines if ln.get_linestyle() == "-" and len(ln.get_xdata()) > 2]
    v, j_ka = np.asarray(solid.get_xdata()), np.asarray(solid.get_ydata())
    v_terminal = np.asarray(dashed[0].get_xdata())
    np.testing.assert_allclose(v_terminal, v + j_ka * 1e3 * r_ohm_um2 * 1e-8, rtol=1e-12)
    m = curves.metrics_of(0)
    vp_terminal = m["peak_voltage_v"] + m["peak_current_density_a_cm2"] * r_ohm_um2 * 1e-8
    text = " ".join(t.get_text() for t in ax.texts)
    assert f"{vp_terminal * 1e3:.0f} mV at the terminals" in text


def test_the_marks_lie_on_the_curve_in_reverse_bias_too() -> None:
    # the figures of merit are magnitudes; on a reverse sweep the drawn current is negative,
    # so the marks take the bias's sign (they were drawn at +Jp, above the plot, before
    # 2026-12-05). No external reference: the marks must sit on the drawn curve.
    stack = _stack()
    curves = sweep(stack.table(), np.linspace(-0.6, 0.0, 31), model=stack.model)
    m = curves.metrics_of(0)
    assert m["peak_voltage_v"] < 0
    ax = iv_figure(curves).axes[0]
    drawn = next(ln for ln in ax.get_lines() if ln.get_label() == "current")
    v, y = (np.asarray(a, float) for a in drawn.get_data())
    for label, name in (("first NDR peak", "peak"), ("its valley", "valley")):
        mark = next(ln for ln in ax.get_lines() if ln.get_label() == label)
        x_mark, y_mark = (float(np.asarray(a)[0]) for a in mark.get_data())
        assert x_mark == pytest.approx(m[f"{name}_voltage_v"])
        assert y_mark == pytest.approx(-m[f"{name}_current_density_a_cm2"] / 1e3)
        assert y_mark == pytest.approx(float(np.interp(x_mark, v, y)), rel=1e-9)


def test_the_band_diagram_keeps_its_level_labels_apart() -> None:
    # Two levels 27 meV apart (the InP example at -0.459 V: a 0.06 meV line near the
    # collector's edge below the well's second state) had their labels drawn over each other;
    # each label now keeps a gap of 4.5 % of the drawn energy range from the one below. No
    # external reference: readability of the figure.
    from pathlib import Path

    from wellwright.optimize.shared.figures import band_diagram_figure
    from wellwright.physics.stack import load_stack

    stack = load_stack(Path(__file__).resolve().parents[1] / "studies" / "inp_thz_oscillator.toml")
    ax = band_diagram_figure(stack, -0.459).axes[0]
    heights = sorted(t.get_position()[1] for t in ax.texts if t.get_text().startswith("E"))
    assert len(heights) >= 3
    lo, hi = ax.get_ylim()
    assert np.min(np.diff(heights)) >= 0.03 * (hi - lo)


def test_the_axes_name_the_first_layer_for_what_it_is_at_the_bias() -> None:
    # The band diagram and transmission axes are measured from the first layer's band edge
    # and interface. In reverse bias that layer collects (electrons enter from the last
    # one); the axes said "emitter" there. Common practice: the emitter is the contact
    # electrons are injected from.
    from pathlib import Path

    from wellwright.optimize.shared.figures import band_diagram_figure, transmission_figure
    from wellwright.physics.stack import load_stack

    stack = load_stack(Path(__file__).resolve().parents[1] / "studies" / "inp_thz_oscillator.toml")
    forward = band_diagram_figure(stack, 0.3).axes[0]
    reverse = band_diagram_figure(stack, -0.3).axes[0]
    assert "emitter" in forward.get_ylabel() and "emitter" in forward.get_xlabel()
    assert "collector" in reverse.get_ylabel() and "emitter" not in reverse.get_xlabel()
    assert "collector" in transmission_figure(stack, [-0.3]).axes[0].get_xlabel()
    assert "emitter" in transmission_figure(stack, [0.0, 0.3]).axes[0].get_xlabel()


def test_the_band_diagram_names_the_lowest_levels_and_draws_them_in_their_wells() -> None:
    # Invented InGaAs/AlAs stack of three 5 ML barriers and wells of 12 and 16 ML (a fuzz
    # run's): the band diagram labelled a 550 meV line "E1" (the tallest four maxima of T
    # were drawn) and drew every level across the middle barrier. Reference: the lowest
    # maximum of T on a dense uniform grid of 20000 energies (the transmission itself, not
    # the resonance search the figure uses), within 1 meV; each level drawn only over the
    # wells, not over the middle barrier (below its top).
    from wellwright.optimize.shared.figures import band_diagram_figure
    from wellwright.physics.iv import band_profile
    from wellwright.physics.transmission import transmission

    layers = [("emitter", "In0.53Ga0.47As", {"doping_cm3": 2e18})]
    layers += [("spacer1", "In0.53Ga0.47As", {"thickness_nm": 2.0})]
    for name, material, ml in (
        ("b1", "AlAs", 5),
        ("w1", "In0.53Ga0.47As", 12),
        ("b2", "AlAs", 5),
        ("w2", "In0.53Ga0.47As", 16),
        ("b3", "AlAs", 5),
    ):
        layers.append((name, material, {"thickness_ml": ml}))
    layers += [("spacer2", "In0.53Ga0.47As", {"thickness_nm": 5.0})]
    layers += [("collector", "In0.53Ga0.47As", {"doping_cm3": 2e18})]
    stack = parse_stack(
        {
            "temperature_k": 300.0,
            "substrate": "InP",
            "model": FAST,
            "layers": [{"name": n, "material": m, **k} for n, m, k in layers],
        }
    )
    ax = band_diagram_figure(stack, 0.03).axes[0]
    labels = {t.get_text().split(" = ")[0]: t for t in ax.texts if t.get_text().startswith("E")}
    e1_mev = float(labels["E1"].get_text().split(" = ")[1].split(" meV")[0])
    profile = band_profile(stack.table(), [0.03], model=stack.model)
    energy = np.linspace(1e-3, 0.5, 20000)
    t = transmission(energy, profile=profile)[0, 0]
    inner = np.nonzero((t[1:-1] > t[:-2]) & (t[1:-1] >= t[2:]))[0] + 1
    assert e1_mev == pytest.approx(energy[inner[0]] * 1e3, abs=1.0)
    # the middle barrier (b2) spans from the end of w1 to the start of w2: no level over it
    segments = [seg for coll in ax.collections for seg in coll.get_segments()]
    levels = [s for s in segments if np.isclose(s[0][1], e1_mev / 1e3, atol=1e-3)]
    assert len(levels) == 2  # one in each well
    (a0, a1), (b0, b1) = sorted((s[0][0], s[1][0]) for s in levels)
    assert a1 < b0  # a gap between them: the middle barrier


def test_figures_of_a_design_without_a_peak_do_not_say_at_the_peak(tmp_path, monkeypatch) -> None:
    # fuzz find: a design with no NDR had its band diagram titled "conduction band at the
    # peak, 500 mV" and narrow levels labelled "Γ = 0.0 µeV". No external reference: the
    # words must match the curve (no peak) and a width must not print as zero.
    import matplotlib.figure
    from wellwright.optimize.shared import figures

    titles: list[str] = []
    real = matplotlib.figure.Figure.savefig

    def keep_title(fig, *a, **k):
        titles.extend(ax.get_title() for ax in fig.axes)
        return real(fig, *a, **k)

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", keep_title)
    data = {
        "temperature_k": 300.0,
        "model": FAST,
        "layers": [
            {"name": "emitter", "material": "GaAs", "thickness_nm": 20, "doping_cm3": 2e18},
            {"name": "barrier", "material": "AlAs", "thickness_ml": 6},
            {"name": "collector", "material": "GaAs", "thickness_nm": 20, "doping_cm3": 2e18},
        ],
    }
    single = parse_stack(data)
    curves = sweep(single.table(), np.linspace(0.0, 0.6, 21), model=single.model)
    assert curves.metrics_of(0)["peak_voltage_v"] is None
    figures.iv_figures(single, curves, tmp_path, label="rank 1")
    band = next(t for t in titles if "conduction band" in t)
    assert "no NDR peak" in band and "at the peak" not in band
    assert figures._fmt_energy(3e-11) == "3e-11 eV" and figures._fmt_energy(2e-6) == "2.0 µeV"
