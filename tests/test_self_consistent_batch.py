"""The default (self-consistent) model: a stack's result does not depend on its batch partners,
and the well-charge estimate behind it is smooth in bias.

Found by comparing Monte Carlo samples of the InP oscillator design swept 32 at a time and
one at a time (the tolerance stage does the former): 1 sample in 64 differed by 2.4 % in
Jp and every sample by ~1e-4. Three causes, each checked here:

1. The Poisson grid took each layer's slice count from the batch's thickest stack; now each
   stack keeps its own slices, padded with zero-width nodes that carry no charge
   (``electrostatics.extended_slice_grid``).
2. An entry of the well-charge iteration went on iterating until its whole bias column had
   converged; now its result is taken when it converges itself.
3. The well-state search behind the charge estimate used 64 uniform nodes over
   ``[edge, mu + 12 kT]``; the state that carries the charge near the peak sits a few meV
   above the emitter edge, where ``T`` is not Lorentzian, and was misfitted by up to 16 %
   of the largest charge, differently at neighbouring biases: the I-V showed isolated
   +20 % spikes before the peak, and the refined peak found one of them.

Found later by the same comparison over random stacks of every material system (the
random-stack draw of ``tests/test_grid_random_stacks.py`` under the default model, batches
of eight): Jp off by up to 7 % and the valley bias by up to 45 mV on 2 of 128 stacks:

4. The scattering-assisted channel's state below the emitter edge is not Lorentzian; its
   width was the curvature of 1/T over the refinement's last bracket, whose spacing follows
   rounding-level differences of T (a batch's padding), and moved by 2.4 %: the current
   jittered by 1 % from bias to bias and between batches. The width now comes from T at
   the half-maximum points (``scattering._half_maximum_width``).
5. When a partner's self-consistent solve failed, the whole batch was solved again by
   continuation in bias, which follows the charged branch of a bistable stack that the
   direct solve leaves; now each stack is solved again alone
   (``electrostatics.solve_self_consistent``).

References: the batch checks compare a computation with itself (an exact property of the
method, common practice for batched numerics); the charge estimate is checked against the
same search on a 2048-node uniform grid (a grid-refinement reference).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from wellwright.physics import electrostatics
from wellwright.physics.electrostatics import solve_stack_poisson, well_sheet_density_cm2
from wellwright.physics.fermi import fermi_level_ev
from wellwright.physics.iv import current_at_bias, sweep
from wellwright.physics.stack import LayerTable, load_stack

ROOT = Path(__file__).resolve().parents[1]
STACK = load_stack(ROOT / "studies" / "inp_thz_oscillator.toml")
#: An as-grown Monte Carlo sample of the InP design whose I-V showed the spikes (invented
#: scenario: one monolayer more in the first barrier, one less in the well, spacers off by a
#: few per cent, the InGaAs layers' indium and the collector's doping drifted), pinned.
VARIANT = {
    "thickness_nm": [0.0, 2.0533199, 1.64486165, 4.10732436, 1.37071804, 4.98683842, 0.0],
    "edge_ev": [0.14122248, 0.14095441, 1.43495468, 0.14048614, 1.43495468, 0.14083931, 0.14179804],
    "mass_m0": [0.04300775, 0.04297972, 0.15, 0.04293082, 0.15, 0.04296769, 0.04306801],
    "nonparabolicity_per_ev": [1.24202149, 1.24330924, 0.24058984, 1.24556095, 0.24058984,
                               1.24386241, 1.23926001],
    "doping_cm3": [2.01242113e18, 0.0, 0.0, 0.0, 0.0, 0.0, 1.80959121e18],
    "permittivity_r": [14.09224651, 14.09380568, 10.06, 14.09652699, 10.06, 14.09447481,
                       14.08889592],
}  # fmt: skip


def _variant():
    return dataclasses.replace(
        STACK.table(), **{k: np.array([v], float) for k, v in VARIANT.items()}
    )


def _batch():
    """The variant, the nominal design and two partners with more and fewer slices."""
    nominal = STACK.table().thickness_nm[0]
    thick = nominal.copy()
    thick[-2] += 3.0  # a thicker collector spacer: more slices in that layer
    thin = nominal.copy()
    thin[3] -= 0.6
    table = (
        STACK.table().take(np.zeros(3, int)).with_thickness_nm(np.vstack([nominal, thick, thin]))
    )
    return LayerTable.concatenate([_variant(), table])


def test_poisson_potential_does_not_depend_on_batch_partners() -> None:
    table = _batch()
    bias = np.linspace(0.0, 0.8, 9)
    grid_b, sol_b = solve_stack_poisson(table, bias)
    for i in range(table.n_stacks):
        grid_a, sol_a = solve_stack_poisson(table.take([i]), bias)
        real_a, real_b = grid_a.width_nm[0] > 0, grid_b.width_nm[i] > 0
        assert real_a.sum() == real_b.sum()  # the stack's own slices, in any batch
        np.testing.assert_allclose(
            sol_b.potential_ev[i][:, real_b], sol_a.potential_ev[0][:, real_a], rtol=0, atol=1e-9
        )
        np.testing.assert_allclose(sol_b.well_sheet_cm2[i], sol_a.well_sheet_cm2[0], rtol=1e-8)


def test_default_model_metrics_do_not_depend_on_batch_partners() -> None:
    table = _batch()
    bias = np.linspace(0.0, 1.0, 31)
    together = sweep(table, bias, model=STACK.model)
    for i in range(table.n_stacks):
        alone = sweep(table.take([i]), bias, model=STACK.model).metrics_of(0)
        got = together.metrics_of(i)
        assert got["peak_current_density_a_cm2"] == pytest.approx(
            alone["peak_current_density_a_cm2"], rel=1e-6
        )
        assert got["peak_voltage_v"] == pytest.approx(alone["peak_voltage_v"], abs=1e-7)
        # the scattering channel fits each well state's width from a few transmission samples:
        # rounding-level changes of the potential move that fit by ~0.3 % of the width, the
        # valley current by ~1e-3 (measured); not a batch effect
        assert got["valley_current_density_a_cm2"] == pytest.approx(
            alone["valley_current_density_a_cm2"], rel=5e-3
        )


def _charge_at_zero_well(table, bias, **search):
    grid, sol = solve_stack_poisson(table, bias, well_charge=False)
    mu = fermi_level_ev(
        table.doping_cm3[:, 0], mass_m0=table.mass_m0[:, 0], temperature_k=table.temperature_k
    )
    return well_sheet_density_cm2(
        table, grid, potential_ev=sol.potential_ev, bias_v=bias, mu_emitter_ev=mu,
        well_mass_m0=np.array([0.041]),
    )[0][0]  # fmt: skip


def test_well_charge_estimate_against_a_fine_uniform_search(monkeypatch) -> None:
    from wellwright.physics import resonances

    table = _variant()
    bias = np.linspace(0.3, 0.7, 41)
    default = _charge_at_zero_well(table, bias)
    original = resonances.find_resonances

    def search(n_coarse, power):
        def find(profile, **kw):
            return original(profile, **dict(kw, n_coarse=n_coarse, edge_power=power))

        monkeypatch.setattr(resonances, "find_resonances", find)
        return _charge_at_zero_well(table, bias)

    reference = search(2048, 1.0)
    uniform = search(64, 1.0)
    # relative to the charge at each bias (near the peak it is a few per cent of the largest)
    scale = reference + 1e-3 * reference.max()
    assert np.max(np.abs(default - reference) / scale) < 1e-2  # measured 2.7e-3
    assert np.max(np.abs(uniform - reference) / scale) > 3e-2  # the fault: measured 0.78


def test_no_isolated_spikes_before_the_peak(monkeypatch) -> None:
    # 29 biases 0.5 mV apart just below this variant's peak (its current falls at 0.527 V):
    # each current within 2 % of the mean of its neighbours. With the uniform well-state
    # search the current jumped by +19 % at 0.5235 V and +21 % at 0.5245 V (measured; by
    # 2.9 % once the channel's emitter coupling took the accumulation layer into account,
    # 2026-12-03: the check below still fails with that search).
    table = _variant()
    bias = np.linspace(0.512, 0.526, 29)

    def worst_spike():
        j = current_at_bias(table, bias, model=STACK.model)[0]
        return np.max(np.abs(j[1:-1] / (0.5 * (j[:-2] + j[2:])) - 1.0))

    assert worst_spike() < 0.02
    monkeypatch.setattr(electrostatics, "WELL_SEARCH_EDGE_POWER", 1.0)
    assert worst_spike() > 0.02  # the old search shows the spikes


@pytest.mark.slow
@pytest.mark.parametrize("seed", [0, 5])
def test_no_isolated_spikes_over_as_grown_samples(seed: int) -> None:
    # Statistical scan (seeded Monte Carlo samples of both example designs, default model,
    # 2.5 mV steps): no current more than 5 % off the mean of two neighbours that agree
    # within 2 %. Measured: 0 of 48 stacks per seed; with the uniform well-state search, 3 of
    # 48 for seed 0 (+31 to +33 % on two InP samples).
    from wellwright.optimize.study.growth import growth_model

    spiky = []
    for name, top_v in (("inp_thz_oscillator", 1.0), ("gaas_low_power_memory", 0.8)):
        stack = load_stack(ROOT / "studies" / f"{name}.toml")
        model = growth_model(stack)
        table = model.as_grown(model.draw_z(24, seed), seed=seed + 1)
        bias = np.linspace(0.0, top_v, 401)
        j = current_at_bias(table, bias, model=stack.model)
        mid = 0.5 * (j[:, :-2] + j[:, 2:])
        scale = np.maximum(np.abs(mid), 1e-30)
        spike = (np.abs(j[:, 1:-1] - mid) / scale > 0.05) & (
            np.abs(j[:, :-2] - j[:, 2:]) / scale < 0.02
        )
        spiky += [
            f"{name} sample {i} at {bias[1:-1][spike[i]]} V" for i in np.nonzero(spike.any(1))[0]
        ]
    assert not spiky, spiky


def _three_wells():
    """The InP design and its well 0.3 nm thinner and thicker (bistable, windows of 14-18 mV;
    valleys 0.74-1.0 V), one table."""
    nominal = STACK.table().thickness_nm[0]
    rows = [nominal.copy() for _ in range(3)]
    rows[1][3] -= 0.3
    rows[2][3] += 0.3
    return STACK.table().take(np.zeros(3, int)).with_thickness_nm(np.vstack(rows))


def _calls_in_progress(monkeypatch, owner, name) -> list[int]:
    """Wrap ``owner.name`` so that it counts its calls in progress; returns the counter."""
    depth, real = [0], getattr(owner, name)

    def counted(*args, **kwargs):
        depth[0] += 1
        try:
            return real(*args, **kwargs)
        finally:
            depth[0] -= 1

    monkeypatch.setattr(owner, name, counted)
    return depth


def test_a_stack_failing_its_up_branch_leaves_its_partners_branches(monkeypatch) -> None:
    # Three bistable InP stacks (the design, its well 0.3 nm thinner and thicker; windows of
    # 14-18 mV) swept together, where a continuation solve of the up branch fails to converge
    # in the batch (injected: the second such solve of any batch of more than one stack). Each
    # stack's up branch must be the one it has alone; before, the failure ended every
    # stack's branch at its first step (measured: windows of 0.13 mV against 16).
    from wellwright.physics import iv
    from wellwright.physics.electrostatics import ElectrostaticsConvergenceError

    table = _three_wells()
    bias = np.linspace(0.0, 1.0, 61)
    alone = [sweep(table.take([i]), bias, model=STACK.model).metrics_of(0) for i in range(3)]

    solves, real_solve = [0], iv.solve_stack_poisson
    depth = _calls_in_progress(monkeypatch, iv, "_up_branch")

    def solve(table, *args, **kwargs):
        if depth[0] and table.n_stacks > 1:
            solves[0] += 1
            if solves[0] >= 2:
                raise ElectrostaticsConvergenceError("injected")
        return real_solve(table, *args, **kwargs)

    monkeypatch.setattr(iv, "solve_stack_poisson", solve)
    together = sweep(table, bias, model=STACK.model)
    assert solves[0] >= 2  # the failure happened
    for i in range(3):
        got, want = together.metrics_of(i), alone[i]
        assert want["bistable_window_v"] > 0.01
        assert got["bistable_window_v"] == pytest.approx(want["bistable_window_v"], abs=1e-6)
        assert got["peak_voltage_up_v"] == pytest.approx(want["peak_voltage_up_v"], abs=1e-6)
        assert got["peak_current_density_up_a_cm2"] == pytest.approx(
            want["peak_current_density_up_a_cm2"], rel=1e-6
        )


def test_a_stack_failing_beyond_the_sweep_leaves_its_partners_valleys(monkeypatch) -> None:
    # Three InP stacks swept to 0.7 V, short of their valleys (0.74-1.0 V), so each
    # valley is sought beyond the sweep's end; a solve there fails to converge in the batch
    # (injected: any batch of more than one stack in that search). Each stack's valley must be
    # the one it has alone; before, the failure ended every stack's search at the sweep's
    # end (the valley bounded by it).
    from wellwright.physics import iv
    from wellwright.physics.electrostatics import ElectrostaticsConvergenceError

    table = _three_wells()
    bias = np.linspace(0.0, 0.7, 36)
    alone = [sweep(table.take([i]), bias, model=STACK.model).metrics_of(0) for i in range(3)]

    real_current = iv._Devices.current
    inside = _calls_in_progress(monkeypatch, iv, "_extend_valleys")

    def current(self, bias_v, *args, **kwargs):
        if inside[0] and self.n > 1:
            raise ElectrostaticsConvergenceError("injected")
        return real_current(self, bias_v, *args, **kwargs)

    monkeypatch.setattr(iv._Devices, "current", current)
    together = sweep(table, bias, model=STACK.model)
    for i in range(3):
        got, want = together.metrics_of(i), alone[i]
        assert want["valley_bounded_by_sweep"] == 0.0 and want["valley_voltage_v"] > 0.7
        assert got["valley_bounded_by_sweep"] == 0.0
        # the current is what must agree; a flat valley's bias moves with rounding-level
        # changes of its current (measured, second stack: 0.990 V alone, 1.000 V here after
        # the fallback, its current 3e-4 lower; swept to 0.8 V without any failure,
        # 0.9974 V alone and 0.9962 V in this batch, the current the same to 2e-5)
        assert got["valley_voltage_v"] == pytest.approx(want["valley_voltage_v"], abs=0.02)
        assert got["valley_current_density_a_cm2"] == pytest.approx(
            want["valley_current_density_a_cm2"], rel=5e-3
        )


def _random_group(seed: int):
    """Eight random stacks (draws 16-23 of ``seed``) of the random-stack scan, default model."""
    from test_grid_random_stacks import random_stack

    rng = np.random.default_rng(seed)
    stacks = [random_stack(rng) for _ in range(24)][16:]
    return stacks, dataclasses.replace(
        stacks[0].model,
        electrostatics="self-consistent",
        transport="scattering-assisted",
        nonparabolicity=True,
    )


#: seed 7: a GaAs/AlGaAs stack whose channel state's width moved with the batch (Jp 0.5 %);
#: seed 11: a bistable GaAs/AlAs stack beside a partner whose direct solve fails (Jp 7 %)
@pytest.mark.parametrize("seed", [7, 11])
def test_random_stacks_figures_of_merit_do_not_depend_on_batch_partners(seed: int) -> None:
    """Each stack's refined figures of merit in a batch of eight equal its own alone (exact
    property of the method): currents to 1e-4, biases to 0.1 mV. Before causes 4 and 5 were
    fixed: Jp 4.8e-3 (seed 7) and 6.8e-2 (seed 11) off."""
    stacks, model = _random_group(seed)
    bias = np.linspace(0.0, 1.5, 41)
    batch = sweep(LayerTable.from_stacks(stacks), bias, model=model)
    for i, stack in enumerate(stacks):
        alone = sweep(LayerTable.from_stacks([stack]), bias, model=model).metrics_of(0)
        beside = batch.metrics_of(i)
        for key in ("peak_current_density_a_cm2", "valley_current_density_a_cm2"):
            if alone[key] is None:
                assert beside[key] is None, (i, key)
                continue
            assert beside[key] == pytest.approx(alone[key], rel=1e-4), (i, key)
        for key in ("peak_voltage_v", "valley_voltage_v"):
            if alone[key] is not None:
                assert beside[key] == pytest.approx(alone[key], abs=1e-4), (i, key)
