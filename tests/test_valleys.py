"""X and L valley edges of a stack under bias, and the X-valley warning.

Check values: the X and L edges of each layer come from
:mod:`wellwright.physics.materials` (checked against I. Vurgaftman, J. R. Meyer and
L. R. Ram-Mohan, J. Appl. Phys. 89, 5815 (2001) in ``test_materials.py``); here the
hand arithmetic of a band edge plus the electrostatic potential is checked, and
that a thick GaAs/AlAs stack at its peak is flagged while an InGaAs/AlAs stack at
zero bias is not (common practice: Gamma-X transfer through AlAs barriers matters
in GaAs/AlAs devices, e.g. H. C. Liu, Appl. Phys. Lett. 51, 1019 (1987), from memory).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from wellwright.optimize.cli import main
from wellwright.physics.constants import BOLTZMANN_EV_K
from wellwright.physics.current import contact_fermi_levels_ev
from wellwright.physics.iv import band_profile, stack_iv
from wellwright.physics.stack import load_stack
from wellwright.physics.valleys import (
    X_VALLEY_MARGIN_KT,
    indirect_edges_ev,
    x_valley_issues,
    x_valley_message,
)

ROOT = Path(__file__).resolve().parents[1]
GAAS = ROOT / "studies" / "gaas_low_power_memory.toml"
INP = ROOT / "studies" / "inp_thz_oscillator.toml"


def test_edges_follow_the_potential() -> None:
    stack = load_stack(GAAS)
    profile = band_profile(stack.table(), [0.3], model=stack.model).take((0, 0))
    x_edge, l_edge = indirect_edges_ev(stack, profile)
    gamma = np.array([layer.conduction_band_ev for layer in stack.layers])
    x_layers = np.array([layer.x_valley_ev for layer in stack.layers])
    li = profile.layer_index
    # X - Gamma on every slice is the layer's own X - Gamma offset (hand arithmetic)
    np.testing.assert_allclose(x_edge - profile.edge_ev, (x_layers - gamma)[li], atol=1e-12)
    # GaAs: X above L above Gamma; AlAs barrier: X below Gamma (V, common practice)
    barrier = li == 2
    assert np.all(x_edge[barrier] < profile.edge_ev[barrier])
    contact = li == 0
    assert np.all(x_edge[contact] > l_edge[contact]) and np.all(l_edge[contact] > 0.0)


def test_no_issue_at_zero_bias() -> None:
    for path in (GAAS, INP):
        assert x_valley_issues(load_stack(path), 0.0) == []


def test_thick_alas_flagged_at_peak() -> None:
    stack = load_stack(GAAS)
    peak = stack_iv(stack, np.linspace(0.0, 1.0, 61)).metrics_of(0)["peak_voltage_v"]
    issues = x_valley_issues(stack, peak)
    assert [i.name for i in issues] == ["barrier2"]
    assert issues[0].layer == 5 and issues[0].label == "AlAs"
    # clearance by hand: lowest X edge in barrier2 minus the emitter Fermi level
    table = stack.table()
    profile = band_profile(table, [peak], model=stack.model).take((0, 0))
    x_edge, _ = indirect_edges_ev(stack, profile)
    mu = float(contact_fermi_levels_ev(table)[0][0])
    expected = float(x_edge[profile.layer_index == 4].min()) - mu
    assert issues[0].clearance_ev == pytest.approx(expected, abs=1e-12)
    assert expected < X_VALLEY_MARGIN_KT * BOLTZMANN_EV_K * 300.0
    line = x_valley_message(issues, peak)
    assert "\n" not in line and "barrier2" in line and "not modelled" in line
    assert x_valley_message([], peak) == ""


def test_cli_warning_is_one_line(tmp_path, capsys) -> None:
    status = main(["iv", str(GAAS), "--out", str(tmp_path / "out"), "--no-figures"])
    assert status == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("wellwright iv: warning: X-valley edge")
    saved = json.loads((tmp_path / "out" / "metrics.json").read_text())
    assert saved["warnings"] == [err[0].removeprefix("wellwright iv: warning: ")]
