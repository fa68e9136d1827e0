"""The figures of merit do not depend on the sweep's bias grid (issue 12, item 4).

Tolerances from the issue: Jp and Jv within 1 %, Vp and Vv within 5 mV between
sweeps of 61, 121, 241 and 481 biases over 0-1 V, with the self-consistent
model, on a narrow-resonance stack (``gaas_low_power_memory``: lines of a few
ueV, the peak on the edge of a current cliff about 0.3 mV wide) and a
broad-resonance one (``inp_thz_oscillator``: Gamma of a few meV). No external
reference: the check is that the refined peak and valley are properties of the
I-V, not of the grid (common practice for any extremum search). Measured
before the adaptive refinement (one round of nine biases and a parabola): the
narrow stack gave Jp 545, 650, 650 and 661 A/cm^2 with 61, 121, 241 and 481
biases (18 % apart); now 661.8-662.4 A/cm^2 (0.1 %).
"""

from __future__ import annotations

import dataclasses
from itertools import combinations
from pathlib import Path

import numpy as np
import pytest
from wellwright.physics.iv import FOLD_TOLERANCE_V, current_at_bias, sweep, sweep_hysteresis
from wellwright.physics.stack import ModelOptions, load_stack

ROOT = Path(__file__).resolve().parents[1]
NARROW = ROOT / "studies" / "gaas_low_power_memory.toml"
BROAD = ROOT / "studies" / "inp_thz_oscillator.toml"
J_RTOL = 0.01
V_ATOL = 5e-3


def _invented(temperature_k: float, substrate: str | None, *layers: tuple, model=None):
    """An invented stack (numbers rounded from a random scan, not a measured device) from
    ``(name, material, keys)`` tuples, emitter first; ``substrate`` None for the default,
    ``model`` the ``[model]`` keys that differ from the defaults."""
    from wellwright.physics.stack import parse_stack

    data = {
        "temperature_k": temperature_k,
        "layers": [{"name": n, "material": m, **keys} for n, m, keys in layers],
    }
    if substrate is not None:
        data["substrate"] = substrate
    if model is not None:
        data["model"] = model
    return parse_stack(data, source="invented")


def _metrics(path: Path, points: int) -> dict:
    stack = load_stack(path)
    # coherent transport: the bistable window and the up sweep's peak are checked against
    # sweep_hysteresis on this model; the default model's peak and valley are checked below
    # (test_default_model_peak_and_valley_independent_of_the_grid). An earlier channel's
    # current jumped by +15 % where the InP stack's resonance crosses the emitter edge
    # (0.4810 V); measured smooth there on 2026-12-04 (0.2 mV steps, 0.478-0.4832 V)
    model = dataclasses.replace(stack.model, electrostatics="self-consistent", transport="coherent")
    curves = sweep(stack.table(), np.linspace(0.0, 1.0, points), model=model)
    return curves.metrics_of(0)


def _on_61_and_241(stack, end_v: float) -> tuple[dict, dict]:
    """The stack's figures of merit (its own model) swept from 0 to ``end_v`` on 61 and on
    241 biases, in increasing order."""
    return tuple(
        sweep(stack.table(), np.sort(np.linspace(0.0, end_v, n)), model=stack.model).metrics_of(0)
        for n in (61, 241)
    )


def _scan_draw(seed: int, draw: int):
    """Draw ``draw`` (from 0) of ``random_stack`` with ``seed`` as the grid-independence scan
    makes it (``benchmarks/scan_grid_independence.py``: the default model, an end bias and a
    polarity per draw): the stack, its signed end bias and the generator, for further draws."""
    from test_default_model_scan import _default_model
    from test_grid_random_stacks import random_stack

    rng = np.random.default_rng(seed)
    for _ in range(draw + 1):
        stack = _default_model(random_stack(rng))
        top, sign = rng.uniform(0.3, 2.0), -1.0 if rng.random() < 0.5 else 1.0
    return stack, sign * top, rng


def _charge_collapse(table, lo: float, hi: float) -> tuple[float, float]:
    """The biases 1 nV apart between which single solves' well charge falls below 1e11
    cm^-2 (charged at ``lo``, collapsed at ``hi``, V), by bisection."""
    from wellwright.physics.electrostatics import solve_stack_poisson

    def charge(v: float) -> float:
        return float(solve_stack_poisson(table, np.array([v]))[1].well_sheet_cm2[0, 0])

    assert charge(lo) > 1e11 > charge(hi)
    while hi - lo > 1e-9:
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if charge(mid) > 1e11 else (lo, mid)
    return lo, hi


def _agree(a: dict, b: dict) -> None:
    for name in ("peak", "valley", "peak_up"):
        j, v = f"{name}_current_density_a_cm2", f"{name}_voltage_v"
        if name == "peak_up":
            j, v = "peak_current_density_up_a_cm2", "peak_voltage_up_v"
        assert a[j] == pytest.approx(b[j], rel=J_RTOL), name
        assert a[v] == pytest.approx(b[v], abs=V_ATOL), name
    assert a["bistable_window_v"] == pytest.approx(b["bistable_window_v"], abs=V_ATOL)


def test_cliff_peak_same_on_61_and_121_biases() -> None:
    # fails on the one-round refinement: 545 against 650 A/cm^2
    _agree(_metrics(NARROW, 61), _metrics(NARROW, 121))


@pytest.mark.slow
@pytest.mark.parametrize("path", [NARROW, BROAD], ids=["narrow", "broad"])
def test_figures_of_merit_independent_of_the_grid(path: Path) -> None:
    runs = {n: _metrics(path, n) for n in (61, 121, 241, 481)}
    for a, b in combinations(runs, 2):
        _agree(runs[a], runs[b])


@pytest.mark.parametrize("path", [NARROW, BROAD], ids=["narrow", "broad"])
def test_default_model_figures_independent_of_the_grid(path: Path) -> None:
    """The same figures with the default model (self-consistent, scattering-assisted
    channel), on 61 to 481 biases: peak, valley, the up sweep's peak and the bistable
    window. Measured: Jp within 0.1 %, Vp within 1.3 mV, the windows 1.38 mV (GaAs) and
    16.0 mV (InP) on every grid. Before, the GaAs stack's window was 7.5 mV on 61 biases and
    0 on 121 to 481: the up-branch check started from the first refinement sample that had
    fallen by NDR_DROP, which lay on the smooth decline after the top on the finer grids,
    where the single solves are still on the charged branch (they fall off it 5.5 mV after
    the top, at 0.3200 V)."""
    stack = load_stack(path)
    runs = {
        n: sweep(stack.table(), np.linspace(0.0, 1.0, n), model=stack.model).metrics_of(0)
        for n in (61, 121, 241, 481)
    }
    for a, b in combinations(runs, 2):
        _agree(runs[a], runs[b])


def test_bistable_window_after_a_smooth_top_against_the_hysteresis_sweep() -> None:
    """The GaAs example with the default model has a smooth top at 0.3145 V; its single
    solves fall off the charged branch at 0.3200 V, and an up sweep stays on it up to 0.3210
    V (sweep_hysteresis, 0.25 mV steps: the reference, the same physics solved by plain
    continuation). The window is the width where the two sweeps differ, not the distance
    from the top to the fold (6.6 mV before, from the top); the up sweep's peak is the top.
    Checked to two reference steps."""
    stack = load_stack(NARROW)
    m = sweep(stack.table(), np.linspace(0.0, 1.0, 61), model=stack.model).metrics_of(0)
    step_v = 2.5e-4
    bias = np.arange(m["peak_voltage_v"], m["peak_voltage_v"] + 0.012, step_v)
    h = sweep_hysteresis(stack.table(), bias, model=stack.model)
    apart = np.nonzero(h.up_a_cm2[0] > 1.5 * h.down_a_cm2[0])[0]
    assert apart.size and apart[0] > 0  # bistable, and not from the top on
    reference = bias[apart[-1]] - bias[apart[0]]
    assert m["bistable_window_v"] == pytest.approx(reference, abs=2 * step_v)
    assert m["peak_current_density_up_a_cm2"] == pytest.approx(
        m["peak_current_density_a_cm2"], rel=1e-9
    )


def _against_hysteresis(path: Path, m: dict, step_v: float) -> None:
    """The window and the up sweep's peak of ``m`` against sweep_hysteresis on a grid of
    ``step_v`` across the window (the reference: same physics, solved by plain continuation)."""
    window = m["bistable_window_v"]
    assert m["peak_voltage_up_v"] == pytest.approx(m["peak_voltage_v"] + window, abs=step_v)
    stack = load_stack(path)
    model = dataclasses.replace(stack.model, electrostatics="self-consistent", transport="coherent")
    bias = np.arange(m["peak_voltage_v"] - 2 * step_v, m["peak_voltage_up_v"] + 3 * step_v, step_v)
    h = sweep_hysteresis(stack.table(), bias, model=model)
    up, down = h.up_a_cm2[0], h.down_a_cm2[0]
    inside = (bias > m["peak_voltage_v"] + step_v / 2) & (
        bias < m["peak_voltage_up_v"] - step_v / 2
    )
    assert inside.any() and np.all(up[inside] > 2.0 * down[inside])  # two branches
    beyond = bias > m["peak_voltage_up_v"] + step_v / 2
    assert np.allclose(up[beyond], down[beyond], rtol=1e-3)  # one branch again
    # the refined up peak lies on the edge of the up branch's cliff: the fold search stops
    # within FOLD_TOLERANCE_V of the fold, so its peak is at least the grid's best that far
    # below it. (Not the grid's best outright: on the narrow stack the branch's current rises
    # 18 % within the last 0.25 mV before its fold, and a 3 uV shift of this grid moved its
    # best from 517 to 438 A/cm^2; measured 2026-12-04.)
    below = bias <= m["peak_voltage_up_v"] - FOLD_TOLERANCE_V
    assert m["peak_current_density_up_a_cm2"] >= up[below].max() * (1 - J_RTOL)
    # the fold lies between the reference's last point on the up branch and its next one
    # (a continuation with finite steps leaves a branch up to one step before its fold)
    assert m["peak_voltage_up_v"] == pytest.approx(bias[np.argmax(up)], abs=2 * step_v)


def test_bistable_window_reported_with_the_up_sweep() -> None:
    # Both stacks are bistable just above their peaks with the self-consistent well charge:
    # a sweep_hysteresis up sweep stays on the charged branch beyond the bias where the down
    # sweep and the single solves drop. Measured: the InP stack up to about 0.50 V against
    # 0.481 V (up 233 kA/cm^2 at 0.500 V, down 13.5), a window of some 19 mV; the narrow
    # GaAs stack over about 1.5 mV (up 438 A/cm^2 at 0.3208 V, down 2.7). (Before the well
    # state search crowded its nodes towards the emitter edge, the GaAs stack's charge was
    # misestimated near the peak and it came out single-valued.) The metrics say so: the
    # window and the up sweep's peak, checked against the reference on a grid finer than
    # each window.
    broad, narrow = _metrics(BROAD, 61), _metrics(NARROW, 61)
    assert 5e-3 < broad["bistable_window_v"] < 0.1
    assert 5e-4 < narrow["bistable_window_v"] < 5e-3
    _against_hysteresis(BROAD, broad, 2e-3)
    _against_hysteresis(NARROW, narrow, 2.5e-4)


def test_the_up_sweep_is_followed_on_the_reverse_branch_too() -> None:
    """Mirror symmetry (common practice): the InP example's layers in reverse order, swept
    to negative biases, are the same device seen from the other contact, so its figures of
    merit are the example's forward ones with V -> -V, the up sweep's peak and bistable
    window included. (The up sweep was followed on forward sweeps only; a reverse sweep
    reported a window of 0 and the single solves' peak as the up sweep's, where the forward
    sweep has a 20 mV window and 213 against 205 kA/cm^2.) To the grid-independence
    tolerances."""
    stack = load_stack(BROAD)
    mirrored = dataclasses.replace(stack, layers=tuple(stack.layers[::-1]))
    bias = np.linspace(0.0, 0.8, 61)
    fwd = sweep(stack.table(), bias, model=stack.model).metrics_of(0)
    rev = sweep(mirrored.table(), -bias[::-1], model=stack.model).metrics_of(0)
    assert fwd["bistable_window_v"] > 5e-3  # bistable forward (see the test above)
    for name in ("peak", "valley", "peak_up"):
        j, v = f"{name}_current_density_a_cm2", f"{name}_voltage_v"
        if name == "peak_up":
            j, v = "peak_current_density_up_a_cm2", "peak_voltage_up_v"
        assert rev[j] == pytest.approx(fwd[j], rel=J_RTOL), name
        assert rev[v] == pytest.approx(-fwd[v], abs=V_ATOL), name
    assert rev["bistable_window_v"] == pytest.approx(fwd["bistable_window_v"], abs=V_ATOL)


def _charged_root_exists(table, bias_v: float, top_cm2: float) -> bool:
    """Whether the well-charge equation ``F(n) = n`` at ``bias_v`` has a charged stable root
    besides the least one: its residual over 400 charges up to ``top_cm2``
    (``well_charge_residual_cm2``: no root search, no start, so no path that could skip a
    root), counting its falls through zero. The reference of the up sweep's end."""
    from wellwright.physics.electrostatics import well_charge_residual_cm2

    sign = np.sign(well_charge_residual_cm2(table, bias_v, np.linspace(0.0, top_cm2, 400))[0])
    return np.count_nonzero((sign[:-1] > 0) & (sign[1:] <= 0)) >= 2


def test_the_up_sweep_ends_where_the_charged_branch_does() -> None:
    """The up sweep's last bias on the charged branch against a brute-force scan of the
    well-charge equation, on the InP example (whose single solves leave the branch at its
    peak, so that last bias is the peak's plus the window): the end lies within
    ``FOLD_TOLERANCE_V`` of the fold, the charged root there one tolerance before it and gone
    one tolerance past it (at the end itself the root's residual is within the solve's
    tolerance of zero: the fold lies 4 uV before it). The fold search ran out of its 12 steps
    on a 1 mV bracket before it halved its bracket instead of stepping past a known fall
    again (then: the root there, gone 1 mV past). Measured
    before: a continued solve whose residual at its start was negative stepped half-way to
    zero charge, skipped the charged root and counted the branch as left while it still
    held: the window was 16.0 mV where the branch holds to 0.5033-0.5043 V (20.0 mV); over
    the 218 stacks of benchmarks/check_default_metrics.py an up sweep's peak moved by 10 mV
    and another's current by 4.9 % (each checked against this scan)."""
    stack = load_stack(BROAD)
    table = stack.table()
    m = sweep(table, np.linspace(0.0, 0.8, 61), model=stack.model).metrics_of(0)
    last = m["peak_voltage_v"] + m["bistable_window_v"]
    assert m["bistable_window_v"] > 5e-3
    assert _charged_root_exists(table, last - FOLD_TOLERANCE_V, 8e11)
    assert not _charged_root_exists(table, last + FOLD_TOLERANCE_V, 8e11)


@pytest.mark.parametrize("fold_v", [0.5219, 0.5237, 0.5251, 0.5262])
@pytest.mark.parametrize("false_reach_v", [None, 4e-4, 5e-4])
def test_the_fold_search_halves_its_bracket_and_checks_a_far_fall_again(
    fold_v, false_reach_v
) -> None:
    """The fold search's arithmetic against a made-up branch (no physics): the branch holds
    below a fold about 22-26 mV past the start. With ``false_reach_v``, a step reaching that
    far or further from the last bias that held also falls within 1 mV of the fold, as a continued
    solve from a far state can skip the charged root there (seen on an as-grown InP stack,
    DEVELOPERS.md). After at most ``FOLD_STEPS`` steps its last held bias must lie within
    ``FOLD_TOLERANCE_V`` below the fold, no bias tried more than twice, the second time from nearer (a
    fall seen from further back than the last bias that held is tried again from there).
    Before (steps doubled again after each hold, past a known fall): 12 steps ended on a
    1 mV bracket, and a far fall was taken for the fold."""
    from wellwright.physics.iv import FOLD_STEPS, _FoldSearch

    search = _FoldSearch.start(np.array([0.5]), np.array([2e-3]), np.array([0.8]))
    active, tried, seen = np.array([True]), [], {}
    for _ in range(FOLD_STEPS):
        if not active[0]:
            break
        v = search.trial()
        reach = v[0] - search.v_hi[0]
        hold = v[0] < fold_v
        if false_reach_v is not None and fold_v - v[0] < 1e-3 and reach >= false_reach_v:
            hold = False
        tried.append(v[0])
        seen.setdefault(round(v[0], 9), []).append(reach)
        active = active & ~search.update(v, np.array([hold]), active)
    assert fold_v - FOLD_TOLERANCE_V <= search.v_hi[0] < fold_v, tried
    assert all(len(r) == 1 or (len(r) == 2 and r[1] < r[0]) for r in seen.values()), tried


def test_the_fold_search_ends_where_the_valley_leaves_no_room() -> None:
    """A branch whose valley (the search's end) lies at its start: one step, no more (the
    step cannot move, whether it holds or falls)."""
    from wellwright.physics.iv import _FoldSearch

    for hold in (True, False):
        search = _FoldSearch.start(np.array([0.5]), np.array([2e-3]), np.array([0.5]))
        v = search.trial()
        assert v[0] == 0.5
        assert search.update(v, np.array([hold]), np.array([True]))[0]


def test_a_continued_solve_keeps_to_the_root_nearest_its_start() -> None:
    """Continuation in bias (``initial_well_cm2``) follows the root nearest its start: the
    InP example's charged state at 0.4973 V continued to 0.5013 V, where its residual at the
    start is negative and the unstable root (2.3e11 cm^-2) lies above half the start's charge,
    lands on the charged root the brute-force scan finds there (3.8-3.9e11), not on the
    least one (4e8). Fails on the bisection towards zero charge used before."""
    from wellwright.physics.electrostatics import solve_stack_poisson

    table = load_stack(BROAD).table()
    assert _charged_root_exists(table, 0.5013, 8e11)
    _, charged = solve_stack_poisson(table, np.array([0.4830]))  # on the branch (peak)
    for v in (0.4853, 0.4893, 0.4933, 0.4973, 0.5013):
        _, charged = solve_stack_poisson(
            table,
            np.array([v]),
            initial_ev=charged.potential_ev,
            initial_well_cm2=charged.well_sheet_cm2,
        )
    assert 3.75e11 < charged.well_sheet_cm2[0, 0] < 4.0e11


def test_up_branch_starts_from_a_peak_solved_in_a_larger_batch() -> None:
    # A regression found by running the demo: the up branch continues the peak's solve of the
    # stacks with NDR, but only for those whose current fell just above the peak, and a
    # Poisson grid's slices per layer follow the batch's thickest stack. When the subset lost
    # that stack the start potential had one node too many (a broadcast error ended the run).
    # The start is now carried to the subset's grid by position; the result must be the one
    # of a peak solved with the stack alone (same solution, other start: to the solver's
    # tolerance). No external reference: a property of the continuation, not of the physics.
    from wellwright.physics.current import EnergyGrid
    from wellwright.physics.iv import _solve_at, _take_solution, _up_branch

    stack = load_stack(BROAD)
    model = dataclasses.replace(stack.model, electrostatics="self-consistent", transport="coherent")
    alone = stack.table()
    thick = alone.thickness_nm.copy()
    thick[0, -2] += 3.0  # the collector spacer 3 nm thicker: more slices in that layer
    pair = alone.take(np.array([0, 0])).with_thickness_nm(
        np.vstack([alone.thickness_nm[0], thick[0]])
    )
    m = _metrics(BROAD, 61)
    vp = np.array([m["peak_voltage_v"]])
    v_after = vp + 5e-3  # inside the window (test above: some 19 mV)
    j_after = current_at_bias(alone, v_after[:, None], model=model)[:, 0]
    vv = np.array([m["valley_voltage_v"]])
    grid = EnergyGrid()
    results = []
    for peak_table, rows in ((alone, [0]), (pair, [0])):
        g, sol = _solve_at(peak_table, np.array([[vp[0]], [vp[0]]])[: peak_table.n_stacks], model)
        peak = (g.center_nm[rows], _take_solution(sol, np.array(rows)))
        ends = (vv, np.array([0.8]))
        results.append(_up_branch(alone, model, grid, vp, v_after, j_after, ends, peak=peak))
    (v1, j1, w1, _), (v2, j2, w2, _) = results
    assert w1[0] > 0.0  # bistable: the case that takes the continuation
    assert v2 == pytest.approx(v1, abs=FOLD_TOLERANCE_V) and w2 == pytest.approx(
        w1, abs=FOLD_TOLERANCE_V
    )
    assert j2 == pytest.approx(j1, rel=1e-3)


def _jump_stack():
    """Invented GaAs/Al0.83Ga0.17As double barrier (a stack of a random scan, rounded) whose
    self-consistent I-V in reverse bias jumps up by 23 % where its well charge collapses
    (3.3e11 to 1.4e10 cm^-2 between -0.16075 and -0.16100 V) and falls back to the level
    before the jump within 3 mV (measured)."""
    return _invented(
        204.0,
        "GaAs",
        ("emitter", "GaAs", {"doping_cm3": 9e17}),
        ("spacer1", "GaAs", {"thickness_nm": 3.69}),
        ("barrier1", "AlGaAs", {"x": 0.83, "thickness_nm": 1.24}),
        ("well", "GaAs", {"thickness_nm": 7.96}),
        ("barrier2", "AlGaAs", {"x": 0.83, "thickness_nm": 0.84}),
        ("spacer2", "GaAs", {"thickness_nm": 1.47}),
        ("collector", "GaAs", {"doping_cm3": 1.2e18}),
    )


@pytest.mark.parametrize("end_v", [0.80, 0.83])
def test_peak_just_past_a_jump_of_the_well_charge(end_v: float) -> None:
    """The default model's Jp where the peak lies just past an upward jump of the current: the
    refinement zooms onto a jump of the well charge beside its best sample. Before (the
    current's fall alone deciding), 61 biases up to -0.80 V gave 2.04e5 A/cm^2 (the plateau
    before the jump, both neighbours 3.5 mV away lower by 2-3 %) and up to -0.83 V 2.29e5 (the
    zoom went to the far side, where the branch declines), against 2.51e5 on finer grids.
    Tolerances of the issue (1 %, 5 mV); the reference is the same model on 241 biases."""
    stack = _jump_stack()
    metrics = {
        n: sweep(stack.table(), -np.linspace(0.0, end_v, n)[::-1], model=stack.model).metrics_of(0)
        for n in (61, 241)
    }
    coarse, fine = metrics[61], metrics[241]
    assert coarse["peak_current_density_a_cm2"] == pytest.approx(
        fine["peak_current_density_a_cm2"], rel=J_RTOL
    )
    assert coarse["peak_voltage_v"] == pytest.approx(fine["peak_voltage_v"], abs=V_ATOL)


def test_a_top_narrower_than_the_samples_is_zoomed_into() -> None:
    """A peak whose first refinement samples have both fallen by NDR_DROP beside the best one
    is zoomed into further, not taken from a parabola through them. Invented GaAs/AlGaAs
    stack (rounded from a random scan): its self-consistent current rises slowly to 4.911e5
    A/cm^2 at 0.2061 V and drops 3 % just after. Swept 0-1.8 V on 61 biases the first round's
    samples (7.5 mV apart) lay 5 % below the best on both sides, a parabola through them
    agreed with its vertex's current to 1e-3, and the peak came out at 4.873e5 A/cm^2 and
    0.2027 V (0.8 % low, inside the issue's 1 % only by chance: 1.05 % on the scan's own
    stack). Checked here to the refinement's own tolerance (REFINE_RELATIVE_TOLERANCE)
    against 241 biases."""
    from wellwright.physics.iv import REFINE_RELATIVE_TOLERANCE

    stack = _invented(
        167.0,
        "GaAs",
        ("emitter", "GaAs", {"doping_cm3": 1e18}),
        ("spacer1", "GaAs", {"thickness_nm": 7.59}),
        ("barrier1", "AlGaAs", {"x": 0.65, "thickness_nm": 1.05}),
        ("well", "GaAs", {"thickness_nm": 5.59}),
        ("barrier2", "AlGaAs", {"x": 0.65, "thickness_nm": 1.05}),
        ("spacer2", "GaAs", {"thickness_nm": 4.06}),
        ("collector", "GaAs", {"doping_cm3": 1.5e18}),
    )
    coarse, fine = _on_61_and_241(stack, 1.8)
    assert coarse["peak_current_density_a_cm2"] == pytest.approx(
        fine["peak_current_density_a_cm2"], rel=REFINE_RELATIVE_TOLERANCE
    )
    assert coarse["peak_voltage_v"] == pytest.approx(fine["peak_voltage_v"], abs=1e-3)


def test_a_peak_some_spans_beyond_the_bracket_is_reached() -> None:
    """A best sample on the refinement bracket's edge moves the bracket and doubles it, so
    a peak a few spans away is reached before the rounds run out. Draw 24 of
    ``random_stack`` seed 113 (invented In0.53Ga0.47As/AlAs0.56Sb0.44 stack, 228 K, reverse
    bias to -1.13 V): the first round's cliff rule zoomed onto a 2.4 % step of the current
    3 mV beyond the peak, and moving one 0.24 mV span a round the zoom ended 2.7 mV short
    of it: Jp 2.137e4 A/cm^2 on 61 biases against 2.171e4 on 241 (1.6 %; 0.4 % now, the top
    itself wiggles by 0.3 % with the channel's state choice). Tolerance of the issue (1 %)."""
    stack, end_v, _ = _scan_draw(113, 24)
    coarse, fine = _on_61_and_241(stack, end_v)
    assert coarse["peak_current_density_a_cm2"] == pytest.approx(
        fine["peak_current_density_a_cm2"], rel=J_RTOL
    )
    assert coarse["peak_voltage_v"] == pytest.approx(fine["peak_voltage_v"], abs=V_ATOL)


def test_a_step_beside_the_best_sample_is_no_cliff_where_the_top_is_on_the_other_flank() -> None:
    """The cliff rule takes a neighbour fallen by NDR_DROP as the side of a cliff; where the
    parabola through the best sample and the two beyond it on the other side peaks between
    the best sample and its neighbour there, the fall is a step of the current past the top
    and the zoom goes to that flank. Invented In0.53Ga0.47As/AlAs0.56Sb0.44 stack (rounded
    from a random scan) in reverse bias to -1.11 V on 61 biases: neighbours 2.3 % lower (a
    step) and 0.2 % lower; the zoom resolved the step's edge and gave 2.154e4 A/cm^2 at
    -0.3114 V against the top's 2.190e4 at -0.3058 V (1.65 %, 5.6 mV). Tolerances of the
    issue; the reference is 241 biases."""
    ingaas = {"x": 0.53}
    stack = _invented(
        228.0,
        "InP",
        ("emitter", "InGaAs", {**ingaas, "doping_cm3": 2.6e18}),
        ("spacer1", "InGaAs", {**ingaas, "thickness_nm": 3.35}),
        ("barrier1", "AlAsSb", {"x": 0.44, "thickness_nm": 1.65}),
        ("well", "InGaAs", {**ingaas, "thickness_nm": 11.26}),
        ("barrier2", "AlAsSb", {"x": 0.44, "thickness_nm": 1.60}),
        ("spacer2", "InGaAs", {**ingaas, "thickness_nm": 7.18}),
        ("collector", "InGaAs", {**ingaas, "doping_cm3": 3.1e18}),
    )
    coarse, fine = _on_61_and_241(stack, -1.11)
    assert coarse["peak_current_density_a_cm2"] == pytest.approx(
        fine["peak_current_density_a_cm2"], rel=J_RTOL
    )
    assert coarse["peak_voltage_v"] == pytest.approx(fine["peak_voltage_v"], abs=V_ATOL)


def test_a_valley_the_current_hardly_rises_from_is_followed_beyond_the_end() -> None:
    """A valley floor with a bump near the sweep's end (an invented GaAs/AlAs stack rounded
    from a random scan, seed 110, stack 15, at 329 K to 1.2 V): on 241 biases the current
    rose by 0.09 % after a local minimum 5 mV before the end, and that was the valley (Jv 316
    A/cm^2 at 1.195 V; the floor rises 4 % and falls to 242 at 1.61 V), while 61 biases
    ended on a falling current and went on beyond the end to 1.61 V. A valley is now
    established only where the current rises after it by more than ``CLEAR_NDR_DROP`` of its
    own, so both go on: Jv within 1 % (issue 12's tolerance)."""
    stack = _invented(
        329.0,
        None,
        ("emitter", "GaAs", {"doping_cm3": 3.46e16}),
        ("spacer1", "GaAs", {"thickness_nm": 0.51}),
        ("barrier1", "AlAs", {"thickness_nm": 1.13}),
        ("well", "GaAs", {"thickness_nm": 4.8}),
        ("barrier2", "AlAs", {"thickness_nm": 1.13}),
        ("spacer2", "GaAs", {"thickness_nm": 6.76}),
        ("collector", "GaAs", {"doping_cm3": 2.88e16}),
        model={"nonparabolicity": False},
    )
    found = [
        sweep(stack.table(), np.linspace(0.0, 1.2, n), model=stack.model).metrics_of(0)
        for n in (61, 241)
    ]
    print([(m["valley_current_density_a_cm2"], m["valley_voltage_v"]) for m in found])
    coarse, fine = found
    assert coarse["valley_current_density_a_cm2"] == pytest.approx(
        fine["valley_current_density_a_cm2"], rel=J_RTOL
    )


def test_a_failed_solve_in_the_collapse_bracket_leaves_the_partners_alone(monkeypatch) -> None:
    """A single solve that does not converge while the bias where the single solves lose the
    well's charge is halved (physics/iv.py, _collapse_bracket) ends no sweep: that stack keeps
    the bracket it has, and its batch partner's window is the one it gets alone. A property
    of the control flow (no outside reference): the failure is forced on the second of two
    copies of the GaAs example (its collector spacer 0.01 nm thicker) inside the bracket."""
    from wellwright.physics import iv as iv_module
    from wellwright.physics.electrostatics import ElectrostaticsConvergenceError

    stack = load_stack(NARROW)
    alone = stack.table()
    thick = alone.thickness_nm.copy()
    thick[0, -2] += 0.01
    pair = alone.take(np.array([0, 0])).with_thickness_nm(
        np.vstack([alone.thickness_nm[0], thick[0]])
    )
    marked = float(thick[0, -2])
    solve = iv_module._solve_at
    calls: list = []

    def failing(table, bias_v, model):
        inside = np.any((bias_v > 0.3170) & (bias_v < 0.3198))
        if bias_v.shape[-1] == 1 and inside and np.any(table.thickness_nm[:, -2] == marked):
            calls.append(bias_v.size)
            raise ElectrostaticsConvergenceError("forced in the test")
        return solve(table, bias_v, model)

    bias = np.linspace(0.0, 1.0, 61)
    expected = sweep(alone, bias, model=stack.model).metrics_of(0)
    monkeypatch.setattr(iv_module, "_solve_at", failing)
    both = sweep(pair, bias, model=stack.model)
    first = both.metrics_of(0)
    for name in ("bistable_window_v", "peak_current_density_up_a_cm2", "peak_voltage_up_v"):
        assert first[name] == pytest.approx(expected[name], rel=1e-6, abs=1e-9), name
    assert np.isfinite(both.metrics_of(1)["bistable_window_v"])
    assert calls  # the failure was met


def test_a_sharp_valley_beside_the_cliff_is_zoomed_into() -> None:
    """A valley close to the NDR cliff is no parabola on the first round's samples: on 61
    biases its three samples about the best were nearly symmetric (11470, 10760 and 11511
    A/cm^2, 6.9 mV apart), the vertex's current agreed with the parabola's to 6e-4 and the
    round ended 2.6 mV from the minimum, which lies between the best sample and the cliff:
    Jv 1.076e4 against 1.065e4 A/cm^2 on 241 biases (1.04 %). A sharp valley's parabola
    must now also predict the samples two spacings out. Invented GaAs/Al0.34Ga0.66As stack
    (rounded from a random scan, seed 126) in reverse bias to -1.65 V; tolerances of the
    issue, the reference 241 biases."""
    stack = _invented(
        237.0,
        None,
        ("emitter", "GaAs", {"doping_cm3": 1.04e18}),
        ("spacer1", "GaAs", {"thickness_nm": 7.94}),
        ("barrier1", "AlGaAs", {"x": 0.34, "thickness_nm": 3.46}),
        ("well", "GaAs", {"thickness_nm": 12.34}),
        ("barrier2", "AlGaAs", {"x": 0.34, "thickness_nm": 3.46}),
        ("spacer2", "GaAs", {"thickness_nm": 5.25}),
        ("collector", "GaAs", {"doping_cm3": 9.5e17}),
    )
    coarse, fine = _on_61_and_241(stack, -1.65)
    assert coarse["valley_current_density_a_cm2"] == pytest.approx(
        fine["valley_current_density_a_cm2"], rel=J_RTOL
    )
    assert coarse["valley_voltage_v"] == pytest.approx(fine["valley_voltage_v"], abs=V_ATOL)


def test_a_peak_just_past_a_collapse_of_the_well_charge_is_zoomed_to_the_collapse() -> None:
    """Where the current jumps up as the well's charge collapses and then falls steeply on
    the discharged branch (about 60 A/cm^2, 0.12 %, per uV past the collapse), staying above
    the current before the collapse for longer than SPIKE_MIN_WIDTH_V, the peak is the
    current just past the collapse, and the zoom goes on to REFINE_JUMP_TOLERANCE_V there.
    Draw 46 of ``random_stack`` seed 131 (invented InP/In0.52Al0.48As stack, 347 K, 4.42 and
    6.58 nm barriers, a 4.79 nm well, contacts 1.3e18 cm^-3, forward bias to 1.01 V): the
    current jumps from 48552 to 50230 A/cm^2 at 0.25814 V and stays above 48552 for 80 uV.
    Reference: the same model's current 1 nV past the collapse, which single solves' well
    charge locates by bisection to 1 nV. Checked: Jp on 61 and 241 biases within 0.5 % of it
    (measured: 61 to 481 biases within 0.4 %, the rest the single solves' choice of branch
    within a few uV of the collapse; before the zoom to the collapse, 61 to 481 biases 1.4 %
    apart). Until 2026-12-05 this test took a copy with rounded layers, whose discharged
    branch stays above the current before the collapse for 37 uV only: its peak is now that
    current (test_a_spike_narrower_than_the_zoom_past_a_jump_of_the_charge_is_not_the_peak)."""
    stack, end_v, _ = _scan_draw(131, 46)
    table = stack.table()
    # charged at 0.2581 V, collapsed at 0.2583 V (measured: 2.0e11 and 8.7e9 cm^-2)
    lo, hi = _charge_collapse(table, 0.2581, 0.2583)
    limit = current_at_bias(table, np.array([hi + 1e-9]), model=stack.model)[0][0]
    before = current_at_bias(table, np.array([lo]), model=stack.model)[0][0]
    assert limit > 1.02 * before  # the current jumps up at the collapse
    coarse, fine = _on_61_and_241(stack, end_v)
    for m in (coarse, fine):
        assert m["peak_current_density_a_cm2"] == pytest.approx(limit, rel=5e-3)
        assert m["peak_voltage_v"] == pytest.approx(hi, abs=V_ATOL)


def test_a_spike_past_a_step_of_the_well_charge_is_zoomed_into() -> None:
    """A step of the well charge between neighbouring refinement samples, large against the
    round's other steps though no collapse, is a jump the zoom goes to (the single solves
    change branch there). Draw 10 of ``random_stack`` seed 131 (invented
    In0.53Ga0.47As/AlAs stack, a 13.2 nm well, 301 K, contacts 4.6e18 and 8.5e18 cm^-3,
    reverse bias to -1.55 V): the charge steps from 1.26e12 to 1.63e12 cm^-2 within 0.1 mV
    at -1.0210 V and the current spikes 4 % above its plateau within 0.3 mV past it. Before,
    61 biases gave the plateau, 1.215e6 A/cm^2, against 1.268e6 on 121 to 481 biases (4.2 %).
    Checked: 61 and 241 biases within 1e-4 (measured after: 3e-6)."""
    stack, end_v, _ = _scan_draw(131, 10)
    coarse, fine = _on_61_and_241(stack, end_v)
    assert coarse["peak_current_density_a_cm2"] == pytest.approx(
        fine["peak_current_density_a_cm2"], rel=1e-4
    )
    assert coarse["peak_voltage_v"] == pytest.approx(fine["peak_voltage_v"], abs=1e-4)


def test_a_valley_is_refined_past_its_peak_only() -> None:
    """A valley's refinement stays past its peak (``_keep_within_bounds``). Draw 30 of ``random_stack`` seed 144 (invented GaSb/AlSb
    stack, a 7.8 nm well, 365 K, forward bias to 1.10 V), whose first resonance is found
    between the sweep points where the well charge falls: on 61 biases the valley's first
    bracket (the sweep's largest spacing, 18 mV) reached below the peak 15 mV away, its best
    sample lay on the rising flank there, and the bracket moved with the current's fall
    round by round to -0.64 V, a valley of -2.1e5 A/cm^2 on a forward sweep (no PVCR).
    Checked: the valley lies past the peak with a positive current, and 61 and 241 biases
    agree within the issue's tolerances (measured after: Jv within 3e-4, Vv 0.4 mV)."""
    stack, end_v, _ = _scan_draw(144, 30)
    coarse, fine = _on_61_and_241(stack, end_v)
    assert coarse["peak_voltage_v"] < coarse["valley_voltage_v"]
    assert coarse["valley_current_density_a_cm2"] > 0
    for name in ("peak", "valley"):
        j, v = f"{name}_current_density_a_cm2", f"{name}_voltage_v"
        assert coarse[j] == pytest.approx(fine[j], rel=J_RTOL), name
        assert coarse[v] == pytest.approx(fine[v], abs=V_ATOL), name


def test_a_valley_refined_past_its_peak_is_refined_again_beyond_it(monkeypatch) -> None:
    """A peak and a valley refined towards each other can pass one another; such a valley is
    refined again, bound to lie past the refined peak. Found on draw 26 of ``random_stack``
    seed 146 (an InAs/AlSb stack at 19 K, a PVCR of about 1.07 where the single solves land
    on either of two charge states): on 61 biases the valley was reported 6 mV before its
    peak. That stack no longer has an NDR since its collector's Fermi level is no longer
    held at 300 kT (2026-12-05), and no draw of seeds 140-149 crosses, so the crossing is
    made here: a stand-in for the devices' current (a line rising to a top at 0.30 V, then
    93 % of the top and rising again) and a first refinement that returns the valley 6 mV
    before the peak. Checked: the valley refined again lies at or past the refined peak, at
    the foot of the drop (no external reference: the order of the figures)."""
    from wellwright.physics import iv as ivm
    from wellwright.physics.current import EnergyGrid

    def curve(v):
        v = np.asarray(v, float)
        return np.where(v < 0.30, 1.0 + v, 0.93 * 1.30 + 0.5 * (v - 0.30))

    class Curves:  # what _peak_and_valley asks of its devices
        weights = None

        def __init__(self, n: int) -> None:
            self.n = n

        def take(self, rows):
            return Curves(len(rows))

        def twice(self):
            return Curves(2 * self.n)

        def current(self, bias_v, model, grid, *, keep=None):
            b = np.asarray(bias_v, float)
            return curve(np.broadcast_to(b, (self.n, b.shape[-1])) if b.ndim == 1 else b)

    real, calls = ivm._refine, []

    def crossed_first(devices, model, grid, center_v, half_span_v, sign, peaks, bounds_v):
        out = real(devices, model, grid, center_v, half_span_v, sign, peaks, bounds_v)
        calls.append(bool(np.any(peaks)))
        if len(calls) == 1:  # the valley (second half) 6 mV before the peak
            center = out[0].copy()
            center[1] = center[0] - 0.006
            return (center, *out[1:])
        return out

    monkeypatch.setattr(ivm, "_refine", crossed_first)
    v = np.linspace(0.0, 0.6, 61)
    j = curve(v)[None, :]
    ip, iv = ivm.locate_peak_valley(v, j)
    model = ModelOptions(electrostatics="linear", transport="coherent")
    vp, jp, vv, jv, _, _ = ivm._peak_and_valley(
        Curves(1),
        model,
        EnergyGrid(),
        v,
        j,
        np.arange(1),
        ip,
        iv,
        np.zeros(1, bool),
        1.0,
        refine=True,
    )
    assert calls == [True, False]  # refined again, the valley alone
    assert vv[0] >= vp[0] and jv[0] < jp[0]
    assert vv[0] == pytest.approx(0.30, abs=1e-4)  # the foot of the drop


@pytest.mark.parametrize(
    ("seed", "draw", "between"),
    [
        (131, 8, True),
        (128, 52, True),
        (133, 30, True),
        (130, 17, True),
        (130, 5, True),
        (129, 20, True),
        (138, 17, True),
        (143, 6, False),
    ],
)
def test_a_resonance_narrower_than_the_sweep_is_found_where_the_well_charge_collapses(
    seed: int, draw: int, between: bool
) -> None:
    """A fall of the well charge before the peak marks a state
    leaving the emitter's supply window, with a resonance's NDR where it has left that can
    be narrower than the sweep's spacing: the current is computed on either side of the
    charge's low point, and where it shows a clear NDR peak there the stack is swept again
    with those points (``_hidden_collapse``, ``_look_between``). Draws of ``random_stack``
    (invented stacks): seed 131, draw 8, GaAs/AlGaAs with a 12.3 nm well at 211 K, whose
    first state's resonance falls 19 % within 4 mV at 0.094 V (the charge from 1.8e11 to
    1.7e10 cm^-2), which 61 biases (11 mV apart) missed: Jp 3.24e4 A/cm^2 at 0.259 V (the
    second state's) against 7.91e3 at 0.094 V on 241 biases; seed 128, draw 52, InP/InAlAs
    with a 12.7 nm well at 207 K, whose charge falls 3.3 times between points 30 mV apart
    and whose current falls 36 % within 2 mV just past the second of them: 3.11e4 at 0.202 V
    against 1.01e4 at 0.062 V; seed 133, draw 30, InP/InAlAs with a 13.1 nm well at 251 K in
    reverse bias, whose charge falls over some 30 mV (to 0.30 of the point before on 61
    biases, 0.50 on 121, 0.65 on 241: a rule between neighbouring points found its 14 % NDR
    at -0.069 V on 61 biases only), so the fall is measured against the largest charge so
    far; seed 130, draw 17, InGaAs/InAlAs with a 14.4 nm well at 376 K and 4.7e16 cm^-3,
    whose charge never reaches 1e10 cm^-2 (7e9) and falls to a third where the current falls
    39 % within 3 mV at -0.048 V; seed 130, draw 5, InAs/AlSb with a 13.6 nm well, whose
    charge falls only to 0.63 of its largest (other states stay filled) where the current
    falls 17 % within 4 mV at -0.204 V (hence a fall to 0.7, not half); seed 129, draw 20,
    InGaAs/InAlAs at 7.5e18 cm^-3, whose charge falls twice, first at 0.29 V with no NDR
    and then at 0.62 V where the current falls 16 % (hence every fall before the peak, not
    only the first); seed 138, draw 17, InP/InAlAs with a 14.7 nm well at 112 K, whose
    charge falls from 4.8e11 to 3.3e11 cm^-2 (the first state leaving) and then, never back
    to 0.7 of that top, from 3.0e11 to 1.5e11 where the second state's current falls 19 %
    within 7 mV at 0.200 V: 61 biases gave Jp 6.32e5 A/cm^2 at 0.334 V against 2.62e5 on 241
    (hence a fall measured from the last fall's low point on); seed 143, draw 6, GaAs/AlGaAs
    with a 12.7 nm well at 51 K in reverse bias, whose charge falls from 5.9e10 to 6.3e8
    cm^-2 between points 30 mV apart and on to 1.8e8 at the next, while the current falls
    69 % within 4 mV past -0.052 V, before the first fallen point: 61 biases gave Jp 1.52e5
    A/cm^2 at -0.236 V against 2.55e4 at -0.053 V (hence the first interval from the last
    point before the fall, not from the point before the low one). Since the reverse branch
    starts at zero bias as the forward one does, that peak's sample is the first past zero
    and the sweep's own points show it (``between`` False: no points between are needed).
    Checked: 61 and 241 biases agree within the issue's tolerances (measured after: Jp
    within 0.1 %, Jv 0.1 %), the stack in a batch (with the next draw) as alone, and its
    curve holds the points between (where ``between``)."""
    from test_default_model_scan import _default_model
    from test_grid_random_stacks import random_stack
    from wellwright.physics.stack import LayerTable

    stack, end_v, rng = _scan_draw(seed, draw)
    partner = _default_model(random_stack(rng)).table()
    coarse, fine = _on_61_and_241(stack, end_v)
    for name in ("peak", "valley"):
        j, v = f"{name}_current_density_a_cm2", f"{name}_voltage_v"
        assert coarse[j] == pytest.approx(fine[j], rel=J_RTOL), name
        assert coarse[v] == pytest.approx(fine[v], abs=V_ATOL), name
    bias = np.sort(np.linspace(0.0, end_v, 61))
    pair = sweep(LayerTable.concatenate([stack.table(), partner]), bias, model=stack.model)
    assert pair.metrics_of(0)["peak_current_density_a_cm2"] == pytest.approx(
        coarse["peak_current_density_a_cm2"], rel=1e-9
    )
    assert (pair.curve_of(0)[0].size > bias.size) == between  # the points between the two


def test_the_up_sweep_follows_its_branch_past_the_valley() -> None:
    """The charged branch can hold past the single solves' valley; the up sweep follows it
    to its fold, each step past the valley held only apart from the single solve there. On an
    invented InSb/AlSb stack (random-stack seed 1, draw 2; 213 K) the brute-force scan of the
    well-charge equation (``well_charge_residual_cm2``) has the charged root one
    ``FOLD_TOLERANCE_V`` before the window's end and none one past it, 9 mV past the valley.
    Before, the search stopped at the valley: a window of 7.3 mV where the branch holds
    16.5 mV."""
    from test_default_model_scan import _default_model
    from test_grid_random_stacks import random_stack

    rng = np.random.default_rng(1)
    for _ in range(3):  # the scan's draws: stack, sweep end, polarity
        stack = _default_model(random_stack(rng))
        top, _ = rng.uniform(0.3, 2.0), rng.random()
    table = stack.table()
    m = sweep(table, np.linspace(0.0, top, 61), model=stack.model).metrics_of(0)
    end = m["peak_voltage_v"] + m["bistable_window_v"]
    assert end > m["valley_voltage_v"] + 5e-3
    assert m["bistable_window_to_sweep_end"] == 0.0
    assert _charged_root_exists(table, end - FOLD_TOLERANCE_V, 6e11)
    assert not _charged_root_exists(table, end + FOLD_TOLERANCE_V, 6e11)


def test_a_window_that_reaches_the_last_bias_computed_says_so() -> None:
    """Where the charged branch still holds at the last bias computed (the search's end), the
    window is a lower bound and ``bistable_window_to_sweep_end`` says so: the InP example's up
    branch (fold 20.8 mV past its peak, test above) checked only 5 mV past its start."""
    from wellwright.physics.current import EnergyGrid
    from wellwright.physics.iv import _solve_at, _up_branch

    stack = load_stack(BROAD)
    table, m = stack.table(), _metrics(BROAD, 61)
    vp = np.array([m["peak_voltage_v"]])
    v_after, v_stop = vp + 2e-3, vp + 5e-3
    j_after = current_at_bias(table, v_after[:, None], model=stack.model)[:, 0]
    g, sol = _solve_at(table, vp[:, None], stack.model)
    ends = (np.array([m["valley_voltage_v"]]), v_stop)
    _, _, window, reached = _up_branch(
        table, stack.model, EnergyGrid(), vp, v_after, j_after, ends, peak=(g.center_nm, sol)
    )
    assert reached[0] and window[0] == pytest.approx(5e-3)
    assert _metrics(BROAD, 61)["bistable_window_to_sweep_end"] == 0.0


def test_a_spike_narrower_than_the_zoom_past_a_jump_of_the_charge_is_not_the_peak() -> None:
    """Where the single solves jump to a low-charge root of the well-charge equation as it is
    born (the current jumps up) and the current on it falls below the current before the jump
    within SPIKE_MIN_WIDTH_V (40 uV), the peak is the current before the jump. Draw 26 of
    ``random_stack`` seed 151 (invented In0.53Ga0.47As/AlAs stack, 2.55 and 3.20 nm barriers,
    a 13.67 nm well, 137 K, forward bias to 1.80 V): at 1.56412 V the current jumps from 4665
    to about 5000 A/cm^2 and is below 4665 again within 4 uV; where that happens and how high
    the spike is moved by 4 uV and 5 % with the well-charge iteration's tolerance. Before, 61
    biases reported the spike (5043 A/cm^2) and 121 to 481 biases the current before the jump
    (4665): 8 % apart. Reference: the same model's current on the charged side of the jump,
    located by bisection of single solves' well charge to 1 nV. Checked: Jp on 61 and 241
    biases within 1e-3 of it (measured after: within 6e-5) and Vp within 5 mV. A spike that
    stays up longer is the peak
    (test_a_peak_just_past_a_collapse_of_the_well_charge_is_zoomed_to_the_collapse: 80 uV)."""
    stack, end_v, _ = _scan_draw(151, 26)
    table = stack.table()
    # charged at 1.5640 V, collapsed at 1.5643 V (measured: 5.3e11 and 2.7e10 cm^-2)
    lo, hi = _charge_collapse(table, 1.5640, 1.5643)
    before = current_at_bias(table, np.array([lo]), model=stack.model)[0][0]
    coarse, fine = _on_61_and_241(stack, end_v)
    for m in (coarse, fine):
        assert m["peak_current_density_a_cm2"] == pytest.approx(before, rel=1e-3)
        assert m["peak_voltage_v"] == pytest.approx(lo, abs=V_ATOL)
