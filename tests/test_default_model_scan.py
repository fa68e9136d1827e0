"""A wide scan of the default model (self-consistent, scattering-assisted) over random stacks.

Random double barriers of every material system (``tests/test_grid_random_stacks.py``'s
``random_stack``: 4-400 K, contact doping 1e16-1e19 cm^-3, thin and thick barriers, wells
1.5-15 nm, with and without nonparabolicity; invented scenarios), each swept over 121 biases
of one polarity (drawn) up to 0.3-2 V with the default model, and the same biases with the
coherent current alone. Statistical test (seeded draws), kept apart from the pinned
regression tests; common practice throughout (no single source):

- every current and figure of merit is computed (no exception, no NaN in the curve);
- the current flows with the bias (its sign), except at round-off level (below 1e-9 of the
  stack's largest current);
- the scattering-assisted channel makes no isolated jump of the current that the coherent
  current does not have: a sample more than twice or less than half both its neighbours,
  above 5 % of the stack's largest current and 1e-3 A/cm^2 (an isolated sample is no
  physics at 121 biases over a volt; narrow peaks of the coherent current itself at low temperature and the
  self-consistent peak's sharpening before its cliff are left to the coherent curve).
  Measured on this seed: 0 of 200 (1 of 200 with the probe's uniform search grid and no
  confinement test, physics/scattering.py note 6; by a cruder count, any jump of the total
  not of the coherent curve at 5 %, 6 of 600 stacks of other seeds then, 2 of 900 now). The
  bound, 2 %, allows a few stacks of the kinds DEVELOPERS.md lists as known gaps.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pytest
from test_grid_random_stacks import random_stack
from wellwright.physics.iv import current_at_bias, sweep
from wellwright.physics.stack import ModelOptions

N_STACKS = 200
N_BIASES = 121
SEED = 5
MAX_JUMP_SHARE = 0.02
#: currents below this carry no design (1e-10 A through a 10 um^2 mesa)
FLOOR_A_CM2 = 1e-3


def _default_model(stack):
    """The stack with the default model (its drawn nonparabolicity kept)."""
    return replace(stack, model=ModelOptions(nonparabolicity=stack.model.nonparabolicity))


def _describe(stack) -> str:
    layers = " ".join(f"{x.name} {x.material} {x.thickness_nm:.2f} nm" for x in stack.layers[1:-1])
    return f"{stack.temperature_k:.0f} K, {layers}, doping {stack.layers[0].doping_cm3:.2g}"


def _jumps(j: np.ndarray, floor_a_cm2: float = 0.0, share: float = 0.0) -> set[int]:
    """Samples more than twice or less than half both neighbours, where the larger neighbour
    is above ``floor_a_cm2`` and ``share`` of the curve's largest current."""
    a = np.abs(j)
    lo, hi = np.minimum(a[:-2], a[2:]), np.maximum(a[:-2], a[2:])
    jump = (a[1:-1] > 2.0 * hi) | (a[1:-1] < 0.5 * lo)
    big = hi > max(share * a.max(), floor_a_cm2)
    return set((np.nonzero(jump & big)[0] + 1).tolist())


@pytest.mark.slow
def test_default_model_over_random_stacks_of_every_system() -> None:
    rng = np.random.default_rng(SEED)
    made_by_channel, failures = [], []
    for i in range(N_STACKS):
        stack = _default_model(random_stack(rng))
        top = rng.uniform(0.3, 2.0)
        sign = -1.0 if rng.random() < 0.5 else 1.0
        bias = np.sort(sign * np.linspace(0.0, top, N_BIASES))
        label = f"stack {i}: {_describe(stack)}, {sign * top:+.2f} V"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # grid-accuracy and X-valley warnings: not tested here
            curves = sweep(stack.table(), bias, model=stack.model)
            metrics = curves.metrics_of(0)
            coherent = current_at_bias(
                stack.table(), bias, model=replace(stack.model, transport="coherent")
            )[0]
        j = curves.current_density_a_cm2[0]
        vp = metrics["peak_voltage_v"]  # None where the curve has no NDR peak
        if not np.all(np.isfinite(j)) or (vp is not None and not np.isfinite(vp)):
            failures.append(f"{label}: not finite")
        biased = (bias != 0) & (np.abs(j) > 1e-9 * np.abs(j).max())
        if np.any(np.sign(j[biased]) != np.sign(bias[biased])):
            failures.append(f"{label}: current against the bias")
        if _jumps(j, FLOOR_A_CM2, 0.05) - _jumps(coherent):
            made_by_channel.append(label)
    print(f"{len(made_by_channel)} of {N_STACKS} with channel-made jumps:", made_by_channel)
    assert not failures, failures
    assert len(made_by_channel) <= MAX_JUMP_SHARE * N_STACKS, made_by_channel


#: mirror scan: stacks, seed, and the share of them allowed to differ (statistical)
MIRROR_STACKS = 60
MIRROR_SEED = 4
MIRROR_MAX_SHARE = 0.05
MIRROR_KEYS = (
    "peak_current_density_a_cm2",
    "peak_voltage_v",
    "valley_current_density_a_cm2",
    "valley_voltage_v",
    "peak_current_density_up_a_cm2",
    "peak_voltage_up_v",
    "bistable_window_v",
)


def _mirror_differences(forward: dict, reverse: dict) -> list[str]:
    """The figures of a reverse sweep of a stack's mirror that differ from the stack's forward
    ones with V -> -V: currents by 1 %, biases by 5 mV (issue 12's grid tolerances); NaN on
    both sides agrees."""
    out = []
    for key in MIRROR_KEYS:
        a, b = (np.nan if m.get(key) is None else float(m[key]) for m in (forward, reverse))
        if "voltage" in key:
            b = -b
        if np.isnan(a) and np.isnan(b):
            continue
        tolerance = 0.01 * max(abs(a), abs(b)) if "current" in key else 5e-3
        if not abs(a - b) <= tolerance:
            out.append(f"{key} {a:.4g}/{b:.4g}")
    return out


@pytest.mark.slow
def test_a_mirrored_stack_in_reverse_gives_the_forward_figures() -> None:
    """Statistical test (seeded draws): a stack's layers in reverse order, swept to negative
    biases, are the same device seen from the other contact (common practice: mirror
    symmetry), so every figure of merit, the up sweep's included, is the forward one with
    V -> -V. Over random stacks of every system with the default model, 61 biases up to
    0.3-2 V. Measured on 2026-12-05: 1 of 210 stacks of seeds 1, 3, 4 and 5 differed (seed
    4 stack 41, whose current is 4e-7 A/cm^2: its peak voltage 7 mV apart), after two faults
    were fixed (the reverse branch started past zero bias; the up sweep was followed on
    forward sweeps only). Bound: 5 %."""
    rng = np.random.default_rng(MIRROR_SEED)
    differ = []
    for i in range(MIRROR_STACKS):
        stack = _default_model(random_stack(rng))
        mirrored = replace(stack, layers=tuple(stack.layers[::-1]))
        bias = np.linspace(0.0, rng.uniform(0.3, 2.0), 61)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # grid-accuracy and X-valley warnings: not tested
            forward = sweep(stack.table(), bias, model=stack.model).metrics_of(0)
            reverse = sweep(mirrored.table(), -bias[::-1], model=stack.model).metrics_of(0)
        found = _mirror_differences(forward, reverse)
        if found:
            differ.append(f"stack {i} ({_describe(stack)}): " + "; ".join(found))
    assert len(differ) <= MIRROR_MAX_SHARE * MIRROR_STACKS, "\n".join(differ)
