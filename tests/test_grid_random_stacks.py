"""The default energy grid against a brute-force integrator over random stacks of every material system.

Random double-barrier stacks of every material system of the material table
(:data:`SYSTEMS`), 4-400 K, contact doping 1e16-1e19 cm^-3, barriers 0.3-2 nm
or 2-6 nm (symmetric or not), wells 1.5-15 nm, spacers, both bias polarities
up to 2 V, with and without nonparabolicity, linear bias model: the current on
the default adaptive grid against :func:`helpers_physics.brute_force_current_a_cm2`
(the trapezoid rule on 4096 energies uniform in sqrt(E - edge), with nested
uniform grids around every unresolved maximum; no line fits, no Gauss rule;
4096 and 16384 energies agree to 1e-4 of each stack's largest current). A
grid-refinement check, common practice, seeded. Tolerance: 0.5 % of each
stack's largest current at every bias (the accuracy issue 18 asks for).
Before the fixes of issue 18, 20 of 200 stacks failed (5 by more than 5 %).
Statistical tests (seeded draws): the share of stacks beyond the tolerance is
bounded (see each test), as the grid does not yet meet it everywhere; and a
stack beyond it must have raised a :class:`GridAccuracyWarning` (the run-time
estimate) but for a bounded few, each named in the failure message.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
from helpers_physics import brute_force_current_a_cm2
from wellwright.physics import current
from wellwright.physics.current import GridAccuracyWarning
from wellwright.physics.errors import InputError
from wellwright.physics.iv import current_at_bias
from wellwright.physics.stack import CriticalThicknessWarning, LayerTable, ModelOptions, parse_stack

TOLERANCE = 5e-3
#: (contact and well material, barrier material, substrate, typical barrier ML range):
#: every binary and ternary of the material table appears.
SYSTEMS = (
    ("GaAs", "AlAs", None),
    ("GaAs", "Al{x:.2f}Ga{y:.2f}As", None),
    ("In0.53Ga0.47As", "In0.52Al0.48As", "InP"),
    ("In0.53Ga0.47As", "AlAs", "InP"),
    ("In0.53Ga0.47As", "AlAs0.56Sb0.44", "InP"),
    ("GaAs0.51Sb0.49", "AlAs0.56Sb0.44", "InP"),
    ("InP", "In0.52Al0.48As", "InP"),
    ("InAs", "AlSb", None),
    ("GaSb", "AlSb", None),
    ("InSb", "AlSb", None),
)


def random_stack(rng: np.random.Generator):
    """One random double-barrier stack and its model options (an invented test scenario)."""
    while True:
        contact, barrier, substrate = SYSTEMS[rng.integers(len(SYSTEMS))]
        x = rng.uniform(0.15, 1.0)
        barrier = barrier.format(x=x, y=1.0 - x)
        thin = rng.random() < 0.5
        b1 = rng.uniform(0.3, 2.0) if thin else rng.uniform(2.0, 6.0)
        b2 = b1 if rng.random() < 0.5 else b1 * rng.uniform(0.6, 1.6)
        doping = 10.0 ** rng.uniform(16.0, 19.0)
        layers = [
            {"name": "emitter", "material": contact, "doping_cm3": doping},
            {"name": "spacer1", "material": contact, "thickness_nm": rng.uniform(0.3, 8.0)},
            {"name": "barrier1", "material": barrier, "thickness_nm": b1},
            {"name": "well", "material": contact, "thickness_nm": rng.uniform(1.5, 15.0)},
            {"name": "barrier2", "material": barrier, "thickness_nm": b2},
            {"name": "spacer2", "material": contact, "thickness_nm": rng.uniform(0.3, 8.0)},
            {"name": "collector", "material": contact, "doping_cm3": doping * rng.uniform(0.5, 2)},
        ]
        data = {
            "temperature_k": float(rng.uniform(4.0, 400.0)),
            "layers": layers,
            # the grid of the coherent current, linear drop (set explicitly: the default is
            # self-consistent with the scattering-assisted channel)
            "model": {
                "nonparabolicity": bool(rng.random() < 0.7),
                "electrostatics": "linear",
                "transport": "coherent",
            },
        }
        if substrate:
            data["substrate"] = substrate
        try:
            with warnings.catch_warnings():  # strained layers may relax: fine for the grid
                warnings.simplefilter("ignore", CriticalThicknessWarning)
                return parse_stack(data)
        except InputError:  # e.g. a strained layer beyond its critical thickness
            continue


def random_case(n_stacks: int, n_biases: int, seed: int):
    """Table of ``n_stacks`` random stacks and their biases ``(n_stacks, n_biases)``, both signs."""
    rng = np.random.default_rng(seed)
    stacks = [random_stack(rng) for _ in range(n_stacks)]
    top = rng.uniform(0.2, 2.0, n_stacks)[:, None]
    bias = top * np.linspace(-1.0, 1.0, n_biases)
    return stacks, LayerTable.from_stacks(stacks), bias


def _double_barrier(contact, barrier, barrier_nm, well_nm, doping_cm3, temperature_k, substrate):
    layers = [
        {"name": "emitter", "material": contact, "doping_cm3": doping_cm3},
        {"name": "barrier1", "material": barrier, "thickness_nm": barrier_nm[0]},
        {"name": "well", "material": contact, "thickness_nm": well_nm},
        {"name": "barrier2", "material": barrier, "thickness_nm": barrier_nm[1]},
        {"name": "collector", "material": contact, "doping_cm3": doping_cm3},
    ]
    fast = {"electrostatics": "linear", "transport": "coherent"}  # explicit, as above
    data = {"temperature_k": temperature_k, "layers": layers, "model": fast}
    if substrate:
        data["substrate"] = substrate
    return parse_stack(data)


#: The worst stack of issue 18's audit (invented layers, symmetric): the default grid gave
#: 2.26e6 A/cm^2 at 0.325 V against 7.36e5 by brute force, and a false first peak.
ISSUE_CASES = {
    "ingaas_inalas_wide_well": (
        ("In0.53Ga0.47As", "In0.52Al0.48As", (3.29, 3.29), 11.8, 7.3e18, 301.0, "InP"),
        np.linspace(-0.6, 0.6, 25),
    ),
    "gaas_alas_thin_and_thick": (
        ("GaAs", "AlAs", (0.7, 9.6), 5.0, 1e18, 300.0, None),
        np.linspace(-1.92, 1.92, 13),
    ),
}


@pytest.mark.parametrize("case", sorted(ISSUE_CASES))
def test_issue_cases_against_brute_force(case: str) -> None:
    args, bias = ISSUE_CASES[case]
    stack = _double_barrier(*args)
    table = stack.table()
    j = current_at_bias(table, bias, model=stack.model)
    ref = brute_force_current_a_cm2(table, bias, model=stack.model)
    error = np.abs(j - ref) / np.abs(ref).max()
    k = int(np.argmax(error))
    assert error.max() < TOLERANCE, f"{bias[k]:.3f} V: {j[0, k]:.5g} against {ref[0, k]:.5g} A/cm^2"


def grid_errors(n_stacks: int, n_biases: int, seed: int):
    """Error of the default grid against the brute force, relative to each stack's largest
    current, ``(n_stacks, n_biases)``."""
    stacks, table, bias = random_case(n_stacks, n_biases, seed)
    model = ModelOptions(electrostatics="linear", transport="coherent")  # explicit, as above
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GridAccuracyWarning)
        j = current_at_bias(table, bias, model=model)
    ref = brute_force_current_a_cm2(table, bias, model=model)
    scale = np.abs(ref).max(axis=1, keepdims=True)
    return stacks, bias, j, ref, np.abs(j - ref) / np.maximum(scale, 1e-300)


def _assert_rare(stacks, bias, j, ref, error, *, share: float, worst: float) -> None:
    """At most ``share`` of the stacks beyond TOLERANCE anywhere, none beyond ``worst``."""
    over = error.max(axis=1) > TOLERANCE
    i, k = np.unravel_index(np.argmax(error), error.shape)
    s = stacks[i]
    where = (
        f"worst: stack {i} ({s.layers[0].material}/{s.layers[2].material}, "
        f"{s.temperature_k:.0f} K, barriers {s.layers[2].thickness_nm:.2f}/"
        f"{s.layers[4].thickness_nm:.2f} nm) at {bias[i, k]:.3f} V: {j[i, k]:.5g} against "
        f"{ref[i, k]:.5g} A/cm^2, {error[i, k]:.2%} of its largest current"
    )
    assert over.mean() <= share, f"{over.sum()} of {over.size} stacks beyond 0.5 %; {where}"
    assert error.max() < worst, where


def test_default_grid_against_brute_force_over_random_stacks() -> None:
    # Statistical: the issue asks for no stack beyond 0.5 % but those that warn; measured
    # on this draw, 1 of 240: 0.75 % on 3e-12 A/cm^2 through 6-9 nm AlSb, carried by lines
    # of 2e-14 eV (it warns, see the batch-partner test below). Before the tails of a line's
    # rule took nodes inside its core (physics.quadrature), also 1.0 % on a 3e-4 A/cm^2
    # current through 6-7 nm AlAs barriers at 1.7 V (silent); before the fixes of issue 18,
    # about 10 % of stacks, 2.5 % beyond 5 %.
    _assert_rare(*grid_errors(240, 9, 2026), share=0.005, worst=0.01)


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5, 6, 7, 8])
def test_long_scan_against_brute_force(seed: int) -> None:
    # Statistical, 2400 stacks at 13 biases: measured 0-1 stacks of 300 per draw beyond
    # 0.5 % (2 of 2400, both InAs/AlSb carried by lines narrower than 1e-13 eV, both
    # warned): 1.7 % (1.6e-13 A/cm^2 at 12 K) and 2.2 % (a 1e-15 eV line); before the
    # checks for crowded, hidden and steep lines, 14 of 2400, up to 12 % (with the
    # corrected reference).
    _assert_rare(*grid_errors(300, 13, 100 + seed), share=0.01, worst=0.06)


def silent_errors(n_stacks: int, n_biases: int, seed: int):
    """Stacks (one table each) beyond TOLERANCE that raised no GridAccuracyWarning:
    ``(index, description)`` of each, and how many warned."""
    stacks, _, bias = random_case(n_stacks, n_biases, seed)
    model = ModelOptions(electrostatics="linear", transport="coherent")  # explicit, as above
    silent, n_warned = [], 0
    for i, s in enumerate(stacks):
        table = LayerTable.from_stacks([s])  # one stack per call: the warning names it
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", GridAccuracyWarning)
            j = current_at_bias(table, bias[i : i + 1], model=model)
        warned = any(issubclass(w.category, GridAccuracyWarning) for w in caught)
        n_warned += warned
        ref = brute_force_current_a_cm2(table, bias[i : i + 1], model=model)
        error = np.abs(j - ref) / max(np.abs(ref).max(), 1e-300)
        if error.max() > TOLERANCE and not warned:
            k = int(np.argmax(error))
            silent.append(
                f"stack {i} ({s.layers[0].material}/{s.layers[2].material}, "
                f"{s.temperature_k:.0f} K) at {bias[i, k]:.3f} V: {error.max():.2%}"
            )
    return silent, n_warned


def test_stacks_beyond_the_tolerance_raise_the_grid_warning() -> None:
    # Statistical (seeded draw, 160 stacks, one I-V per call so a warning belongs to its
    # stack): a stack beyond 0.5 % of its largest current is either fixed or warned of.
    # Measured on this draw: none silent; 1 warned (a 1e-15 eV line through 6-8 nm AlSb,
    # 1.6 % off). The draw of the scan above had one silent stack (1.0 %: InGaAs/AlAs at
    # 1.68 V, a 35 meV line whose interval lay within its rule's core panel, so 16 of its
    # 40 nodes were used); it is 0.1 % since the tails take nodes inside the core.
    silent, n_warned = silent_errors(160, 9, 2027)
    assert not silent, f"beyond 0.5 % without a GridAccuracyWarning: {silent}"
    assert n_warned <= 0.05 * 160, f"{n_warned} of 160 stacks warned: too many false alarms"


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5, 6, 7, 8])
def test_long_scan_stacks_beyond_the_tolerance_raise_the_grid_warning(seed: int) -> None:
    # Statistical, 2400 stacks at 13 biases, one I-V per call: measured none silent, 2 of
    # 2400 beyond 0.5 % (both warned), 0-2 warnings per 300 stacks (passes with the line
    # width floor raised to 1e-13 eV; the warnings were not counted again). Before the
    # check of steep lines, 2 silent (0.9 and 1.6 %, lines broader than kT on a steep
    # background at a high bias).
    silent, n_warned = silent_errors(300, 13, 100 + seed)
    assert not silent, f"beyond 0.5 % without a GridAccuracyWarning: {silent}"
    assert n_warned <= 0.02 * 300, f"{n_warned} of 300 stacks warned: too many false alarms"


def test_grid_accuracy_warning_when_refinement_cannot_reach_the_tolerance(monkeypatch) -> None:
    # With a tolerance no grid can meet, the stack is refined to the largest grid and
    # the shortfall reported, not hidden.
    monkeypatch.setattr(current, "REFINE_TOLERANCE", 0.0)
    stack = _double_barrier("GaAs", "AlAs", (1.7, 1.7), 4.5, 1e18, 300.0, None)
    with pytest.warns(GridAccuracyWarning, match="error estimate stays above"):
        j = current_at_bias(stack.table(), np.array([0.1, 0.3]), model=stack.model)
    assert np.all(np.isfinite(j))


def test_cli_prints_the_grid_warning_as_one_line(monkeypatch, tmp_path, capsys) -> None:
    from wellwright.optimize.cli import main

    monkeypatch.setattr(current, "REFINE_TOLERANCE", 0.0)
    study = Path(__file__).resolve().parents[1] / "studies" / "gaas_low_power_memory.toml"
    assert main(["iv", str(study), "--no-figures", "--out", str(tmp_path / "out")]) == 0
    lines = [x for x in capsys.readouterr().err.splitlines() if "energy grid" in x]
    assert lines
    assert all(x.startswith("wellwright iv: warning: the energy grid") for x in lines)


def test_a_stack_current_does_not_depend_on_its_batch_partners() -> None:
    # Statistical (seeded draw, the 240 stacks of the batch scan above): each stack's I-V
    # computed alone against in the batch of all 240, where it gets padding slices and
    # shares the compiled kernel's lanes with others. Within 0.1 % of its largest current
    # (a fifth of the grid's tolerance), or the stack warned alone (lines narrower than
    # LINE_WIDTH_FLOOR_EV, whose T is rounding-sensitive). Measured on this draw: 4e-7 at
    # most beside lines of 6e-13 eV and wider; 9e-6 and 1e-2 beside 4.7e-14 and 1.7e-14 eV
    # lines (the second warns; with the former floor of 1e-14 eV it did not, and this
    # test failed).
    stacks, table, bias = random_case(240, 9, 2026)
    model = ModelOptions(electrostatics="linear", transport="coherent")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", GridAccuracyWarning)
        batched = current_at_bias(table, bias, model=model)
    apart = []
    for i, s in enumerate(stacks):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", GridAccuracyWarning)
            alone = current_at_bias(LayerTable.from_stacks([s]), bias[i : i + 1], model=model)
        warned = any(issubclass(w.category, GridAccuracyWarning) for w in caught)
        diff = np.abs(alone[0] - batched[i]).max() / max(np.abs(alone).max(), 1e-300)
        if diff > 0.2 * TOLERANCE and not warned:
            apart.append(f"stack {i} ({s.layers[0].material}/{s.layers[2].material}): {diff:.1e}")
    assert not apart, apart


def test_no_warning_on_a_flat_shoulder_between_two_overlapping_lines() -> None:
    # An as-grown variant of the InP example (the default model) at 0.4653 V: T on the narrow
    # line's rule has a flat shoulder at 0.633 before the broad line, with a maximum 1e-5
    # above its surroundings. Counted at its whole T |S| it was a hidden line of 3.8 % of
    # the current, refined to the largest grid and still warned of; counted by its rise it
    # is none. The default grid's current is within the tolerance of a grid eight times
    # finer (grid refinement, common practice; measured 6.6e-4).
    from dataclasses import replace

    from test_grid_convergence import CASES
    from wellwright.physics.current import EnergyGrid

    table, _, model = CASES["inp_as_grown"]()
    table, model = table.take([6]), replace(model, electrostatics="self-consistent")
    bias = np.array([0.4653])
    with warnings.catch_warnings():
        warnings.simplefilter("error", GridAccuracyWarning)
        j = current_at_bias(table, bias, model=model)
    finer = EnergyGrid(n_coarse=8 * 64 - 5, n_resonances=48, n_candidates=64, n_per_resonance=320)
    ref = current_at_bias(table, bias, model=model, grid=finer)
    assert abs(j[0, 0] / ref[0, 0] - 1.0) < TOLERANCE


def test_a_hidden_line_is_counted_by_its_rise_above_its_surroundings() -> None:
    # _second_maxima on invented T: a narrow second line on the main line's tail counts by
    # its height above the dip before it; a shoulder with a maximum 1e-5 above its
    # surroundings counts by that 1e-5 (analytic: the rule's nodes and values are given)
    nodes = np.linspace(0.0, 1.0, 11)[None, :]
    line = np.array([[0.1, 0.5, 1.0, 0.5, 0.2, 0.1, 0.05, 0.3, 0.05, 0.02, 0.01]])
    shoulder = np.array([[0.1, 0.5, 1.0, 0.7, 0.6, 0.6 + 1e-5, 0.6, 0.59, 0.4, 0.2, 0.1]])
    stake_line = current._second_maxima(nodes, line, line)[0]
    stake_shoulder = current._second_maxima(nodes, shoulder, shoulder)[0]
    assert stake_line == pytest.approx((0.3 - 0.05) * 0.1, rel=1e-12)
    assert stake_shoulder == pytest.approx(1e-5 * 0.1, rel=1e-6)
