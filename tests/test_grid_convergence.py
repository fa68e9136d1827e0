"""Convergence of the adaptive energy grid over random stacks of the example design spaces.

The default grid against one five times finer (more coarse nodes, more
resolved lines, more candidates and Gauss-Legendre nodes) on the same
kernel: random designs drawn from the two example search spaces (both with
their own model options, the GaAs one with 3 meV broadening) and wide
as-grown variants of the two example stacks, on fine bias sweeps. A grid
refinement check, common practice; it would have caught three faults found
this way (a peak refined away from beside the band edge, a state below the
first coarse node, broadening that depended on the grid: before them, these
cases measured worst errors of 1.4 to 33 % of a stack's largest current). The tolerance is the 0.5 % accuracy
the physics issue asks of Jp, here of each stack's largest current at every
bias (worst measured 3.2e-3, at high bias on a broad feature).
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from wellwright.optimize.study.growth import GrowthSettings, growth_model
from wellwright.optimize.study.study import load_study
from wellwright.physics.current import EnergyGrid
from wellwright.physics.iv import current_at_bias
from wellwright.physics.stack import LayerTable, load_stack

STUDIES = Path(__file__).resolve().parents[1] / "studies"
FINE = EnergyGrid(n_coarse=320, n_resonances=4, n_candidates=10, n_per_resonance=64)
TOLERANCE = 5e-3
N_STACKS = 48
N_BIASES = 97


def _random_designs(path: Path, n: int, seed: int):
    study = load_study(path)
    rng = np.random.default_rng(seed)
    stacks = []
    while len(stacks) < n:
        params = {}
        for v in study.variables:
            if v.integer:
                params[v.name] = int(rng.integers(int(v.low), int(v.high) + 1))
            elif v.log:
                params[v.name] = float(np.exp(rng.uniform(np.log(v.low), np.log(v.high))))
            else:
                x = rng.uniform(v.low, v.high)
                params[v.name] = float(
                    v.low + round((x - v.low) / v.step) * v.step if v.step else x
                )
        try:
            stacks.append(study.stack(params))
        except Exception:  # noqa: BLE001 - a corner of the space the file check does not reach
            continue
    bias = study.sweep.bias_v
    return LayerTable.from_stacks(stacks), np.linspace(bias[0], bias[-1], N_BIASES), stacks[0].model


def _as_grown(path: Path, n: int, seed: int, bias_max_v: float):
    stack = load_stack(path)
    wide = GrowthSettings(thickness_ml_sigma=1.5, rate_sigma=0.03, x_sigma=0.02, doping_sigma=0.2)
    model = growth_model(stack, wide)
    table = model.as_grown(model.draw_z(n, seed), seed=seed + 1)
    return table, np.linspace(0.0, bias_max_v, N_BIASES), stack.model


CASES = {
    "inp_search": lambda: _random_designs(STUDIES / "inp_thz_search.toml", N_STACKS, 11),
    "gaas_search_broadened": lambda: _random_designs(
        STUDIES / "gaas_low_power_search.toml", N_STACKS, 12
    ),
    "inp_as_grown": lambda: _as_grown(STUDIES / "inp_thz_oscillator.toml", N_STACKS, 13, 1.2),
    "gaas_as_grown": lambda: _as_grown(STUDIES / "gaas_low_power_memory.toml", N_STACKS, 14, 0.9),
}


#: the grid is the coherent current's: the studies' models with the linear drop and the
#: coherent current (the defaults before the scattering-assisted channel, set explicitly)
FAST = {"electrostatics": "linear", "transport": "coherent"}
#: the scattering-assisted channel's own nodes do not change with the grid; the lines it
#: takes from the coherent grid do (measured: 1.5 % at most on inp_search)
CHANNEL_TOLERANCE = 2e-2


@pytest.mark.parametrize("case", sorted(CASES))
def test_default_grid_agrees_with_a_five_times_finer_one(case: str) -> None:
    table, bias, model = CASES[case]()
    model = replace(model, **FAST)
    j = current_at_bias(table, bias, model=model)
    ref = current_at_bias(table, bias, model=model, grid=FINE)
    scale = np.abs(ref).max(axis=1, keepdims=True)
    error = np.abs(j - ref) / scale
    i, k = np.unravel_index(np.argmax(error), error.shape)
    assert error.max() < TOLERANCE, (
        f"stack {i} at {bias[k]:.3f} V: {j[i, k]:.5g} against {ref[i, k]:.5g} A/cm^2"
    )


def test_scattering_channel_on_a_five_times_finer_grid() -> None:
    """The scattering-assisted current (linear drop for speed) on the default and the fine
    grid: within CHANNEL_TOLERANCE of the largest current of each stack."""
    table, bias, model = CASES["inp_search"]()
    model = replace(model, electrostatics="linear", transport="scattering-assisted")
    j = current_at_bias(table, bias, model=model)
    ref = current_at_bias(table, bias, model=model, grid=FINE)
    error = np.abs(j - ref) / np.abs(ref).max(axis=1, keepdims=True)
    assert error.max() < CHANNEL_TOLERANCE
