"""Broadening never gives current against the bias: random stacks of every material system.

The Tsu-Esaki supply function has the sign of ``mu_E - mu_C`` at every energy
and ``T >= 0`` [R. Tsu and L. Esaki, Appl. Phys. Lett. 22, 562 (1973)], so the
coherent current has the sign of the bias; the broadened lines are
Lorentzians, also ``>= 0`` (M. Jonson and A. Grincwajg, Appl. Phys. Lett. 51,
1729 (1987)). A statistical check over random stacks (seeded), not a pinned
regression: at every bias the current has the sign of the bias or is zero,
is exactly zero at zero bias, and every valley current found is >= 0.
"""

from __future__ import annotations

import numpy as np
import pytest
from test_grid_random_stacks import random_case
from wellwright.physics.broadening import broadened_lines
from wellwright.physics.iv import current_at_bias, locate_peak_valley
from wellwright.physics.stack import ModelOptions


@pytest.mark.filterwarnings("ignore::wellwright.physics.current.GridAccuracyWarning")
@pytest.mark.parametrize("broadening_mev", [1.0, 10.0])
def test_broadened_current_never_flows_against_the_bias(broadening_mev: float) -> None:
    _, table, bias = random_case(80, 21, seed=int(broadening_mev * 10))
    fast = ModelOptions(
        broadening_mev=broadening_mev, electrostatics="linear", transport="coherent"
    )
    j = current_at_bias(table, bias, model=fast)
    assert np.all(np.isfinite(j))
    against = j * np.sign(bias) < 0.0
    i, k = np.unravel_index(np.argmax(against), against.shape)
    assert not against.any(), f"stack {i} at {bias[i, k]:.3f} V: {j[i, k]:.3g} A/cm^2"
    assert np.all(j[:, bias[0] == 0.0] == 0.0)
    forward = bias[0] >= 0.0  # every row's biases run from -top to +top
    i_peak, i_valley = locate_peak_valley(bias[:, forward], j[:, forward])
    found = i_valley >= 0
    valley = np.take_along_axis(j[:, forward], np.maximum(i_valley, 0)[:, None], 1)[:, 0]
    assert np.all(valley[found] >= 0.0)


def test_broadened_lines_have_the_sign_of_the_supply() -> None:
    # Lorentzians are >= 0: both parts carry the sign of the supply (here of the bias).
    center = np.array([[0.05, 0.2]])
    width = np.array([[1e-4, 2e-3]])
    for drop in (0.3, -0.3):
        removed, added = broadened_lines(
            center_ev=center,
            width_ev=width,
            peak=np.array([[0.9, 0.5]]),
            valid=np.array([[True, True]]),
            low_ev=np.array([0.0]),
            high_ev=np.array([1.0]),
            supply=lambda e, d=drop: np.full(e.shape, d),
            broadening_ev=3e-3,
            kt_ev=0.0259,
        )
        assert np.sign(removed[0]) == np.sign(added[0]) == np.sign(drop)
