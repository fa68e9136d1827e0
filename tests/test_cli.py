"""Tests of the ``wellwright`` command: bad input, JSON output, figures, help, warnings.

Contract (issue 2 and DESIGN.md): bad input gives exit status 2 and one line on
stderr naming the file, layer and key, never a traceback, and nothing is
written. Most checks call ``wellwright.optimize.cli`` in-process (fast); one bad-input
case, the JSON run and the warning run go through the installed console script.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from helpers_physics import BAD_STACKS, stack_toml, write_stack
from wellwright.optimize.cli import build_parser, main
from wellwright.optimize.shared import names

ROOT = Path(__file__).resolve().parents[1]
STUDY = ROOT / "studies" / "inp_thz_oscillator.toml"
METRIC_KEYS = (
    "peak_current_density_a_cm2",
    "peak_voltage_v",
    "valley_current_density_a_cm2",
    "valley_voltage_v",
    "pvcr",
)


def _command() -> list[str]:
    exe = shutil.which("wellwright")
    return [exe] if exe else [sys.executable, "-m", "wellwright.optimize.cli"]


def _run(args: list[str], cwd: Path, timeout: float = 120) -> subprocess.CompletedProcess:
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run(
        [*_command(), *args], cwd=cwd, capture_output=True, text=True, timeout=timeout, env=env
    )


def _listing(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


# ----------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("case", "text", "layer", "key", "message"), BAD_STACKS, ids=[c[0] for c in BAD_STACKS]
)
def test_bad_stack_exit_2_one_line_nothing_written(
    tmp_path, monkeypatch, capsys, case, text, layer, key, message
) -> None:
    monkeypatch.chdir(tmp_path)
    path = tmp_path / "absent.toml" if text is None else write_stack(tmp_path, text)
    before = _listing(tmp_path)
    out = tmp_path / "results"
    assert main(["iv", str(path), "--out", str(out), "--points", "5"]) == 2
    # and with the default output folder (<stack name>_iv in the working folder)
    assert main(["iv", str(path), "--points", "5"]) == 2
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 2 and lines[0] == lines[1]
    line = lines[0]
    assert line.startswith(f"wellwright iv: {path}")
    if layer is not None:
        assert f"layer {layer + 1}" in line  # counted from 1 (issue 18)
    if key is not None:
        assert f"key '{key}'" in line
    assert "Traceback" not in captured.err and captured.out == ""
    assert not out.exists()
    assert _listing(tmp_path) == before


@pytest.mark.parametrize(
    ("options", "expected"),
    [
        (["--points", "1"], "key '--points': 1 outside [2, 2001]"),
        (["--bias-min", "0.5", "--bias-max", "0.2"], "key '--bias-max': must be above --bias-min"),
        (["--bias-max", "50"], "key '--bias-max': 50 outside [-10, 10] V"),
        (["--points", "many"], "invalid int value: 'many'"),
    ],
)
def test_bad_options_exit_2(tmp_path, monkeypatch, capsys, options, expected) -> None:
    monkeypatch.chdir(tmp_path)
    path = write_stack(tmp_path, stack_toml())
    out = tmp_path / "results"
    try:
        status = main(["iv", str(path), "--out", str(out), *options])
    except SystemExit as exc:  # argparse usage errors
        status = exc.code
    assert status == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and expected in err
    assert "Traceback" not in err
    assert not out.exists()


def test_console_script_bad_input(tmp_path) -> None:
    # the installed entry point, not only main(): exit 2, one line, no traceback
    path = write_stack(tmp_path, stack_toml(top={"temperature_k": 300, "colour": "blue"}))
    result = _run(["iv", str(path), "--out", str(tmp_path / "results")], cwd=tmp_path)
    assert result.returncode == 2
    assert result.stderr.strip().splitlines() == [
        f"wellwright iv: {path}, key 'colour': unknown key; allowed: "
        "device, layers, model, substrate, temperature_k"
    ]
    assert result.stdout == ""
    assert not (tmp_path / "results").exists()


# ----------------------------------------------------------------------------- a real run


@pytest.fixture(scope="module")
def study_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("iv_run")
    result = _run(["iv", str(STUDY), "--json", "--out", str(folder / "out")], cwd=folder)
    return result, folder / "out"


def test_iv_json_record(study_run) -> None:
    result, _ = study_run
    assert result.returncode == 0, result.stderr
    record = json.loads(result.stdout)
    bias = np.array(record["bias_v"])
    j = np.array(record["current_density_a_cm2"])
    # defaults: 61 evenly spaced biases from 0 to 1 V inclusive (issue 2)
    np.testing.assert_allclose(bias, np.linspace(0.0, 1.0, 61), rtol=0, atol=1e-15)
    assert j.shape == bias.shape and np.all(np.isfinite(j))
    assert j[0] == 0.0 and np.all(j[1:] > 0)
    m = record["metrics"]
    for key in METRIC_KEYS:
        assert isinstance(m[key], float), key
    assert m["pvcr"] == pytest.approx(
        m["peak_current_density_a_cm2"] / m["valley_current_density_a_cm2"], rel=1e-12
    )
    assert 0 < m["peak_voltage_v"] < m["valley_voltage_v"] < 1.0
    # the peak is a local maximum of the sweep: no sweep point exceeds it nearby
    near = np.abs(bias - m["peak_voltage_v"]) < 0.05
    assert m["peak_current_density_a_cm2"] >= j[near].max()


def test_iv_files_and_figures(study_run) -> None:
    import matplotlib.image as mpimg

    result, out = study_run
    assert result.returncode == 0, result.stderr
    names = {p.name for p in out.iterdir()}
    assert {"iv.csv", "metrics.json", "iv.png", "band_diagram.png", "transmission.png"} <= names
    assert not [n for n in names if n.startswith(".") or n.endswith(".tmp")]  # no temporaries left
    for name in ("iv.png", "band_diagram.png", "transmission.png"):
        image = mpimg.imread(out / name)
        assert image.ndim == 3 and min(image.shape[:2]) > 100, name
        assert float(np.std(image)) > 0.0, name  # not blank
    saved = json.loads((out / "metrics.json").read_text())
    assert saved["metrics"] == json.loads(result.stdout)["metrics"]
    # the file says which model produced it (issue 12: every output names its model)
    assert saved["model"] == json.loads(result.stdout)["model"]
    assert saved["model"]["label"].startswith("Tsu-Esaki")
    rows = (out / "iv.csv").read_text().strip().splitlines()
    assert rows[0] == "bias_v,current_density_a_cm2" and len(rows) == 62


def test_series_resistance_and_area_in_json(tmp_path, capsys) -> None:
    # [device] table: V_ext = V + J R (R in ohm um^2, J in A/cm^2: factor 1e-8) and
    # I = J A (A in um^2 = 1e-8 cm^2; in mA: x 1e3), hand arithmetic.
    text = STUDY.read_text().replace(
        "[model]", "[device]\narea_um2 = 4.0\nseries_resistance_ohm_um2 = 20.0\n\n[model]"
    )
    path = write_stack(tmp_path, text)
    status = main(
        [
            "iv",
            str(path),
            "--out",
            str(tmp_path / "out"),
            "--points",
            "11",
            "--bias-max",
            "0.5",
            "--no-figures",
            "--json",
        ]
    )
    assert status == 0
    record = json.loads(capsys.readouterr().out)
    v, j = np.array(record["bias_v"]), np.array(record["current_density_a_cm2"])
    np.testing.assert_allclose(record["external_bias_v"], v + j * 20.0 * 1e-8, rtol=1e-12)
    np.testing.assert_allclose(record["current_ma"], j * 4.0 * 1e-8 * 1e3, rtol=1e-12)
    m = record["metrics"]
    if m["peak_voltage_v"] is not None:
        assert m["peak_voltage_external_v"] == pytest.approx(
            m["peak_voltage_v"] + m["peak_current_density_a_cm2"] * 20.0 * 1e-8, rel=1e-12
        )
        assert m["peak_current_ma"] == pytest.approx(
            m["peak_current_density_a_cm2"] * 4.0 * 1e-5, rel=1e-12
        )


def test_series_resistance_in_reverse_bias(tmp_path, capsys) -> None:
    # V_ext = V + J R with the signed current (hand arithmetic): in reverse bias both are
    # negative, so the terminal peak lies further from zero (the figures of merit are
    # magnitudes; the terminal bias was computed with +Jp before 2026-12-05)
    text = STUDY.read_text().replace(
        "[model]", "[device]\nseries_resistance_ohm_um2 = 20.0\n\n[model]"
    )
    path = write_stack(tmp_path, text)
    args = ["iv", str(path), "--out", str(tmp_path / "out"), "--points", "31"]
    args += ["--bias-min", "-0.6", "--bias-max", "0", "--no-figures", "--json"]
    assert main(args) == 0
    m = json.loads(capsys.readouterr().out)["metrics"]
    assert m["peak_voltage_v"] < 0
    assert m["peak_voltage_external_v"] == pytest.approx(
        m["peak_voltage_v"] - m["peak_current_density_a_cm2"] * 20.0 * 1e-8, rel=1e-12
    )
    # ... and the text says both (a fuzz find: it gave the layers' voltage alone, unlabelled)
    assert main(args[:-1]) == 0
    text = capsys.readouterr().out
    said = names.format_value("peak_voltage_v", m["peak_voltage_external_v"], with_unit=True)
    assert f"at the terminals, with the series resistance (20 ohm um^2): peak {said}" in text


def test_critical_thickness_warns_but_succeeds(tmp_path) -> None:
    # 40 ML AlAs on InP exceeds its Matthews-Blakeslee critical thickness (J. Cryst.
    # Growth 27, 118 (1974)): the command warns on stderr and still succeeds (issue 2).
    layers = [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "spacer", "material": "In0.53Ga0.47As", "thickness_nm": 2.0},
        {"name": "barrier", "material": "AlAs", "thickness_ml": 40},
        {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
    ]
    path = write_stack(tmp_path, stack_toml(layers, top={"temperature_k": 300, "substrate": "InP"}))
    result = _run(
        ["iv", str(path), "--out", str(tmp_path / "out"), "--points", "5", "--no-figures"],
        cwd=tmp_path,
    )
    assert result.returncode == 0, result.stderr
    assert "Matthews-Blakeslee critical thickness" in result.stderr
    assert "Traceback" not in result.stderr
    assert (tmp_path / "out" / "iv.csv").exists()


# ----------------------------------------------------------------------------- help


def _subcommands() -> list[str]:
    parser = build_parser()
    actions = [a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction"]
    return sorted(actions[0].choices)


def test_every_subcommand_has_help(capsys) -> None:
    commands = _subcommands()
    assert {"iv", "materials"} <= set(commands)
    for command in [None, *commands]:
        argv = ["--help"] if command is None else [command, "--help"]
        with pytest.raises(SystemExit) as info:
            main(argv)
        assert info.value.code == 0, command
        assert "usage:" in capsys.readouterr().out


def test_console_script_help(tmp_path) -> None:
    result = _run(["--help"], cwd=tmp_path)
    assert result.returncode == 0 and "iv" in result.stdout


def test_iv_nonconvergence_one_line_exit_2(tmp_path, monkeypatch, capsys) -> None:
    # issue 12: a self-consistent solve that does not converge is one line and exit 2, never a
    # traceback, and nothing is written (the failure is invented by a stand-in)
    import wellwright.optimize.cli.cmd_iv as cmd_iv
    from wellwright.physics.electrostatics import ElectrostaticsConvergenceError

    def fails(*args, **kwargs):
        raise ElectrostaticsConvergenceError("well-charge iteration did not converge in 60 steps")

    monkeypatch.setattr(cmd_iv, "stack_iv", fails)
    out = tmp_path / "out"
    assert main(["iv", str(STUDY), "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "did not converge" in err[0] and err[0].startswith("wellwright iv:")
    assert not out.exists()


def test_iv_text_says_when_the_valley_is_bounded_by_the_sweep(tmp_path, capsys) -> None:
    # Issue 14: a valley the sweep does not reach even when extended to 1.5 times its end is
    # never silently reported. The GaAs/AlAs example stack under the fast linear-drop model
    # (the default self-consistent one is slower and not what is tested here) peaks near
    # 0.22 V and has its valley near 0.40 V (a 61-point sweep to 1 V): a sweep to 0.25 V
    # (extension cap 0.375 V) misses it, so the text marks the valley figures as bounds.
    text = (ROOT / "studies" / "gaas_low_power_memory.toml").read_text()
    path = write_stack(tmp_path, text + '\n[model]\nelectrostatics = "linear"\n')

    def run(bias_max: str, points: str) -> tuple[str, dict]:
        out = tmp_path / f"out{bias_max}"
        args = ["iv", str(path), "--out", str(out), "--bias-max", bias_max, "--points", points]
        assert main([*args, "--no-figures"]) == 0
        return capsys.readouterr().out, json.loads((out / "metrics.json").read_text())

    full_text, full = run("1.0", "61")
    assert full["metrics"]["valley_bounded_by_sweep"] == 0.0
    assert full["metrics"]["valley_voltage_v"] > 1.5 * 0.25
    assert "bounds" not in full_text and "≥" not in full_text
    cut_text, cut = run("0.25", "26")
    assert cut["metrics"]["valley_bounded_by_sweep"] == 1.0
    assert cut["metrics"]["valley_voltage_v"] == pytest.approx(0.37, abs=1e-9)  # last computed
    assert "valley not reached" in cut_text and "raise --bias-max" in cut_text
    lines = {line.split("  ")[1].strip(): line for line in cut_text.splitlines() if "  " in line}
    assert "≥" in lines["PVCR"] and "≤" in lines["valley current density"]
    assert "≥" in lines["valley voltage"] and "≥" in lines["oscillator output power density"]
    assert "≥" not in lines["peak voltage"] and "≤" not in lines["peak voltage"]


def test_iv_names_a_higher_peak_after_the_first_valley(tmp_path, capsys) -> None:
    # An invented InGaAs/AlAs stack (4 ML barriers, a 20 ML well; the fast linear drop, as
    # the quick demo's search ran it): a first NDR peak near 0.22 V and a second
    # resonance's peak near 0.9 V more than three times higher. The figures of merit stay
    # the first peak's (the documented rule); the text and metrics.json name the other.
    layers = [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "spacer1", "material": "In0.53Ga0.47As", "thickness_ml": 7},
        {"name": "barrier1", "material": "AlAs", "thickness_ml": 4},
        {"name": "well", "material": "In0.53Ga0.47As", "thickness_ml": 20},
        {"name": "barrier2", "material": "AlAs", "thickness_ml": 4},
        {"name": "spacer2", "material": "In0.53Ga0.47As", "thickness_nm": 5.0},
        {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
    ]
    top = {"temperature_k": 300, "substrate": "InP"}
    path = write_stack(tmp_path, stack_toml(layers, top=top, model={"electrostatics": "linear"}))
    out = tmp_path / "out"
    args = ["iv", str(path), "--out", str(out), "--bias-max", "1.2", "--no-figures"]
    assert main(args) == 0
    text = capsys.readouterr().out
    record = json.loads((out / "metrics.json").read_text())
    higher = record["higher_peak_beyond_valley"]
    assert record["metrics"]["peak_voltage_v"] < 0.3
    assert 0.8 < higher["bias_v"] < 1.0
    assert higher["current_density_a_cm2"] > 3 * record["metrics"]["peak_current_density_a_cm2"]
    assert "a higher NDR peak follows" in text


def test_iv_says_where_it_added_points_between_the_sweeps(tmp_path, capsys) -> None:
    # An invented GaAs/Al0.4Ga0.6As stack with a 12.33 nm well at 211 K (rounded from a
    # random scan): its first state's resonance falls 19 % within 4 mV near 0.094 V, between
    # two of 61 sweep points; the sweep computes points between them (the well's charge falls
    # there) and says so, not as a valley beyond the sweep end.
    layers = [
        {"name": "emitter", "material": "GaAs", "doping_cm3": 6.5e17},
        {"name": "spacer1", "material": "GaAs", "thickness_nm": 5.13},
        {"name": "barrier1", "material": "AlGaAs", "x": 0.4, "thickness_nm": 2.65},
        {"name": "well", "material": "GaAs", "thickness_nm": 12.33},
        {"name": "barrier2", "material": "AlGaAs", "x": 0.4, "thickness_nm": 3.88},
        {"name": "spacer2", "material": "GaAs", "thickness_nm": 6.60},
        {"name": "collector", "material": "GaAs", "doping_cm3": 8.8e17},
    ]
    path = write_stack(
        tmp_path, stack_toml(layers, top={"temperature_k": 211, "substrate": "GaAs"})
    )
    out = tmp_path / "out"
    args = ["iv", str(path), "--out", str(out), "--bias-max", "0.67", "--no-figures"]
    assert main(args) == 0
    text = capsys.readouterr().out
    record = json.loads((out / "metrics.json").read_text())
    assert 0.09 < record["metrics"]["peak_voltage_v"] < 0.1
    assert "a resonance narrower than the sweep's spacing" in text
    assert "valley beyond the sweep end" not in text


def test_iv_records_every_warning_it_says(tmp_path, capsys, monkeypatch) -> None:
    # fuzz find: the critical-thickness and energy-grid warnings went to stderr only, and
    # metrics.json and --json said "warnings": [] (only the X-valley line was recorded). Now
    # every warning of the run is in both, once each, in the words of stderr. 40 ML AlAs on
    # InP exceeds its Matthews-Blakeslee critical thickness (J. Cryst. Growth 27, 118 (1974));
    # a stand-in raises a grid warning during the I-V, twice.
    import warnings

    import wellwright.optimize.cli.cmd_iv as cmd_iv
    from wellwright.physics.current import GridAccuracyWarning

    real = cmd_iv.stack_iv

    def warns(*args, **kwargs):
        warnings.simplefilter("always")  # (inside the command's own record of warnings)
        for _ in range(2):
            text = "the energy grid's error\n estimate stays high"
            warnings.warn(text, GridAccuracyWarning, stacklevel=2)
        return real(*args, **kwargs)

    monkeypatch.setattr(cmd_iv, "stack_iv", warns)
    layers = [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "barrier", "material": "AlAs", "thickness_ml": 40},
        {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
    ]
    path = write_stack(tmp_path, stack_toml(layers, top={"substrate": "InP"}))
    out = tmp_path / "out"
    args = ["iv", str(path), "--points", "5", "--no-figures", "--json", "--out", str(out)]
    assert main(args) == 0
    captured = capsys.readouterr()
    said = [line.removeprefix("wellwright iv: warning: ") for line in captured.err.splitlines()]
    assert any("Matthews-Blakeslee" in line for line in said)
    assert said.count("the energy grid's error estimate stays high") == 1
    assert json.loads(captured.out)["warnings"] == said
    assert json.loads((out / "metrics.json").read_text())["warnings"] == said


def test_iv_text_keeps_three_significant_digits_of_small_figures(tmp_path, capsys) -> None:
    # fuzz find: the InP example with 14 ML AlAs barriers printed "peak current density
    # 0.0 kA/cm²" (26.8 A/cm²), "peak minus valley 0.0 kA/cm²" and "cutoff frequency 0 GHz"
    # (126 MHz) beside a valley of "0.00171 kA/cm²". Every figure printed now agrees with
    # metrics.json to three significant digits.
    from wellwright.optimize.shared import names

    layers = [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "spacer1", "material": "In0.53Ga0.47As", "thickness_nm": 2.0},
        {"name": "barrier1", "material": "AlAs", "thickness_ml": 14},
        {"name": "well", "material": "In0.53Ga0.47As", "thickness_ml": 15},
        {"name": "barrier2", "material": "AlAs", "thickness_ml": 14},
        {"name": "spacer2", "material": "In0.53Ga0.47As", "thickness_nm": 5.0},
        {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
    ]
    path = write_stack(tmp_path, stack_toml(layers, top={"substrate": "InP"}))
    out = tmp_path / "out"
    assert main(["iv", str(path), "--points", "21", "--no-figures", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    metrics = json.loads((out / "metrics.json").read_text())["metrics"]
    assert metrics["peak_current_density_a_cm2"] < 100  # tens of A/cm²
    shown = {line[2:40].strip(): line[40:].split()[0] for line in text.splitlines()[3:]}
    checked = [k for k, v in metrics.items() if names.words(k) in shown and v]
    assert {"delta_current_density_a_cm2", "cutoff_frequency_hz"} < set(checked)
    for key in checked:
        number = float(shown[names.words(key)])
        assert number == pytest.approx(names.to_display(key, metrics[key]), rel=5e-3), key


def test_iv_text_says_which_biases_it_analysed(tmp_path, capsys) -> None:
    # fuzz finds: '--points 3' (0, 0.5 and 1 V, a clear fall between the last two) printed "no
    # negative differential resistance" though the figures of merit need three biases of one
    # polarity; a sweep from -1 to 1 V analysed the positive biases only without saying so.
    # The rule is physics.iv.metrics_branch's; no external reference (what the text says).
    text = (ROOT / "studies" / "gaas_low_power_memory.toml").read_text()
    path = write_stack(tmp_path, text + '\n[model]\nelectrostatics = "linear"\n')

    def run(*options: str) -> str:
        out = tmp_path / f"out{len(options)}{options[-1]}"
        assert main(["iv", str(path), "--out", str(out), "--no-figures", *options]) == 0
        return capsys.readouterr().out

    assert "fewer than three biases of either polarity" in run("--points", "3")
    both = run("--bias-min", "-1", "--bias-max", "1", "--points", "81")
    assert "of the positive biases; the sweep's other polarity is drawn, not analysed" in both
    assert "other polarity" not in run("--points", "41")
