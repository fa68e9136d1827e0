"""Every bad-input class of issue 18 (item 7): one line, exit status 2, nothing written.

Also the property-based fuzz of the parsers (hypothesis): whatever a stack or study file
holds, the parsers raise the project's :class:`InputError` or nothing. The source of every
expectation is the project's rule for bad input (DESIGN.md, "Errors"); "one line, exit 2"
is common practice for command-line tools (argparse does the same for usage errors).
"""

from __future__ import annotations

import copy
import os
import subprocess
import sys
import warnings
from pathlib import Path

import pytest
from conftest import study_text
from helpers_physics import VALID_LAYERS, stack_toml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from wellwright.optimize.cli import main
from wellwright.optimize.study.study import parse_study
from wellwright.physics.errors import InputError
from wellwright.physics.stack import parse_stack, parse_toml

#: A spec that any design with an NDR peak meets, so that a short run reaches its report.
EASY = "peak_current_density_a_cm2 = {min = 1}\n"


def _listing(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


def _one_error_line(capsys, command: str) -> str:
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"wellwright {command}: ") and "Traceback" not in err
    return lines[0]


@pytest.fixture
def stack_file(tmp_path: Path) -> Path:
    path = tmp_path / "stack.toml"
    path.write_text(stack_toml(), encoding="utf-8")
    return path


# ----------------------------------------------------------------------------- file content


@pytest.mark.parametrize(
    ("content", "message"),
    [
        ("temperature_k = 300\n# caf\xe9\n".encode("latin-1"), "not UTF-8 text (byte 25 is 0xe9)"),
        (stack_toml(top={"temperature_k": 10**400}).encode(), "digits is too large"),
        (("temperature_k = " + "1" * 5000 + "\n").encode(), "not valid TOML"),
        ("\ufeff".encode() + stack_toml().encode(), "starts with a byte-order mark"),
    ],
    ids=["latin-1", "int-too-large-for-a-float", "int-past-python-digit-limit", "utf-8-bom"],
)
def test_unreadable_numbers_and_encodings(tmp_path, monkeypatch, capsys, content, message):
    monkeypatch.chdir(tmp_path)
    path = tmp_path / "bad.toml"
    path.write_bytes(content)
    before = _listing(tmp_path)
    assert main(["iv", str(path), "--points", "5"]) == 2
    assert message in _one_error_line(capsys, "iv")
    assert _listing(tmp_path) == before


def test_huge_integer_in_a_layer_names_the_layer_from_1(tmp_path, capsys):
    layers = [dict(x) for x in VALID_LAYERS]
    layers[3]["thickness_nm"] = 10**30 * 10**300
    path = tmp_path / "s.toml"
    path.write_text(stack_toml(layers), encoding="utf-8")
    assert main(["iv", str(path), "--points", "5", "--out", str(tmp_path / "o")]) == 2
    line = _one_error_line(capsys, "iv")
    assert "layer 4 ('well'), key 'thickness_nm'" in line and "too large" in line
    assert not (tmp_path / "o").exists()


def test_a_study_file_given_to_iv_is_named_as_one(write_study, tmp_path, capsys):
    # a fuzz find: "key 'targets': unknown key" did not say what the file is
    study = write_study(study_text())
    assert main(["iv", str(study), "--points", "5", "--out", str(tmp_path / "o")]) == 2
    line = _one_error_line(capsys, "iv")
    assert "key 'targets': a study file's table" in line and "search, tolerance or run" in line
    assert not (tmp_path / "o").exists()


def test_tiny_step_is_refused_before_the_search(write_study, tmp_path, capsys):
    path = write_study(
        study_text(barrier="{min = 4, max = 7}", well_x="{min = 0.4, max = 0.6, step = 1e-300}")
    )
    out = tmp_path / "o"
    assert main(["search", str(path), "--out", str(out), "--no-progress"]) == 2
    line = _one_error_line(capsys, "search")
    assert "key 'x.step'" in line and "too small" in line and "layer 4 ('well')" in line
    assert not out.exists()


# ----------------------------------------------------------------------------- output folders


@pytest.mark.parametrize("where", ["file", "under-a-file"])
@pytest.mark.parametrize("command", ["iv", "search", "run"])
def test_out_naming_a_file(tmp_path, write_study, stack_file, capsys, where, command):
    blocker = tmp_path / "blocker"
    blocker.write_text("not a folder\n")
    out = blocker if where == "file" else blocker / "sub" / "dir"
    source = stack_file if command == "iv" else write_study(study_text())
    before = _listing(tmp_path)
    argv = [command, str(source), "--out", str(out)]
    assert main(argv + ([] if command == "iv" else ["--no-progress"])) == 2
    line = _one_error_line(capsys, command)
    assert "key '--out'" in line
    assert _listing(tmp_path) == before


def test_read_only_output_folder(tmp_path, stack_file, capsys, monkeypatch):
    # as root a chmod does not stop a write, so the refusal of the file system is simulated
    # where the check asks for it (os.access), and a real chmod is used when not root
    ro = tmp_path / "ro"
    ro.mkdir()
    if os.geteuid() == 0:
        real = os.access
        monkeypatch.setattr(os, "access", lambda p, m: False if Path(p) == ro else real(p, m))
    else:
        ro.chmod(0o555)
    assert main(["iv", str(stack_file), "--points", "5", "--out", str(ro / "o")]) == 2
    assert "is not writable" in _one_error_line(capsys, "iv")
    assert list(ro.iterdir()) == []


def test_write_error_mid_run_is_one_line_and_resumable(write_study, tmp_path, capsys, monkeypatch):
    # a full disk during the search stage: one line, exit 2, and the folder stays a run folder
    from wellwright.optimize.search import engine

    def full_disk(*args, **kwargs):
        raise OSError(28, "No space left on device", str(tmp_path / "run" / "search" / "x"))

    monkeypatch.setattr(engine, "write_outputs", full_disk)
    study = write_study(study_text(targets=EASY))
    argv = ["run", str(study), "--out", str(tmp_path / "run"), "--trials", "4", "--no-progress"]
    argv += ["--samples", "8", "--method", "mc", "--designs", "1"]
    assert main(argv) == 2
    assert "No space left on device" in _one_error_line(capsys, "run")
    assert (tmp_path / "run" / "study.toml").is_file()
    monkeypatch.undo()
    assert main(argv) == 0  # the same command resumes


# ----------------------------------------------------------------------------- options


@pytest.mark.parametrize("design", ["\u00b2", "\u0661", "0"])
def test_design_rank_with_non_ascii_digits(write_study, tmp_path, capsys, design):
    study = write_study(study_text())
    assert main(["tolerance", str(study), "--design", design, "--out", str(tmp_path / "t")]) == 2
    assert "--design" in _one_error_line(capsys, "tolerance")
    assert not (tmp_path / "t").exists()


def test_run_with_zero_trials_writes_nothing(write_study, tmp_path, capsys):
    study = write_study(study_text())
    before = _listing(tmp_path)
    assert main(["run", str(study), "--out", str(tmp_path / "r"), "--trials", "0"]) == 2
    assert "key '--trials'" in _one_error_line(capsys, "run")
    assert _listing(tmp_path) == before


@pytest.mark.parametrize(
    ("option", "value", "key"),
    [
        ("--workers", "0", "--workers"),
        ("--jobs", "0", "--jobs"),
        ("--jobs", "-2", "--jobs"),
        ("--storage", "mysql://nobody@nohost/db", "--storage"),
    ],
)
def test_run_options_are_checked_before_the_run_folder(
    write_study, tmp_path, capsys, option, value, key
):
    # fuzz finds: '--workers 0' and an unsupported database left pipeline.json and
    # study.toml in the run folder before failing; '--jobs 0' and '--jobs -2' were accepted
    study = write_study(study_text())
    before = _listing(tmp_path)
    argv = ["run", str(study), "--out", str(tmp_path / "r"), option, value, "--no-progress"]
    assert main(argv) == 2
    assert f"key '{key}'" in _one_error_line(capsys, "run")
    assert _listing(tmp_path) == before


def test_broken_pipe_gives_no_traceback():
    # `wellwright materials --json | head -c 10`: the reader leaves early
    proc = subprocess.run(
        f"{sys.executable} -m wellwright.optimize.cli materials --json | head -c 10",
        shell=True,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert len(proc.stdout) == 10
    assert "Traceback" not in proc.stderr and "BrokenPipe" not in proc.stderr


# ----------------------------------------------------------------------------- study tables


@pytest.mark.parametrize(
    ("extra", "key"),
    [
        ("[tolerance]\nsamples = 64\n", "tolerance.samples"),
        ("[tolerance]\ndesigns = 0\n", "tolerance.designs"),
        ("[report]\nsample = 64\n", "report.sample"),
        ("[report]\nseed = 4294967296\n", "report.seed"),
    ],
)
@pytest.mark.parametrize("command", ["search", "run"])
def test_every_table_is_checked_by_every_command(
    write_study, tmp_path, capsys, extra, key, command
):
    study = write_study(study_text(extra=extra))
    assert main([command, str(study), "--out", str(tmp_path / "o"), "--no-progress"]) == 2
    line = _one_error_line(capsys, command)
    assert f"{study}, key '{key}'" in line
    assert not (tmp_path / "o").exists()


#: Bad current-at-bias targets (issue 14, item 1): the key the line names and a part of its
#: message (the study's sweep is 0 to 1 V; the stack gives no [device] area).
AT_BIAS_CASES = [
    (
        "current_density_at_bias = {bias_v = 1.5, min = 1}",
        "targets.current_density_at_bias.bias_v",
        "bias_v 1.5 V outside the sweep [0, 1] V",
    ),
    (
        "current_density_at_bias = {bias_v = -0.2, max = 1e5}",
        "targets.current_density_at_bias.bias_v",
        "outside the sweep",
    ),
    (
        "current_density_at_bias = {bias_v = 0.3}",
        "targets.current_density_at_bias",
        "needs min and/or max in A/cm^2",
    ),
    ("current_density_at_bias = {min = 1}", "targets.current_density_at_bias", "needs bias_v"),
    (
        "current_density_at_bias = {bias_v = 0.3, min = 1, maximum = 5}",
        "targets.current_density_at_bias.maximum",
        "unknown key; allowed: bias_v, min, max",
    ),
    (
        'current_density_at_bias = {bias_v = "0.3", min = 1}',
        "targets.current_density_at_bias.bias_v",
        "must be a number",
    ),
    (
        "current_density_at_bias = [{bias_v = 0.1, min = 1}, {bias_v = 0.2}]",
        "targets.current_density_at_bias[2]",
        "needs min and/or max",
    ),
    (
        "current_density_at_bias = [{bias_v = 0.1, min = 1}, {bias_v = 0.1, max = 9}]",
        "targets.current_density_at_bias[2].bias_v",
        "given twice",
    ),
    (
        "current_density_at_bias = [{bias_v = 0.1, min = 1}, {bias_v = 2, max = 9}]",
        "targets.current_density_at_bias[2].bias_v",
        "bias_v 2 V outside the sweep [0, 1] V",
    ),
    ("current_density_at_bias = [1, 2]", "targets.current_density_at_bias[1]", "must be a table"),
    (
        "current_density_at_bias = {bias_v = 0.3, min = 5, max = 1}",
        "targets.current_density_at_bias.max",
        "must be below max",
    ),
    (
        "current_at_bias_ma = {bias_v = 0.3, min = 1}",
        "targets.current_at_bias_ma",
        "needs the mesa area",
    ),
    (
        "current_density_at_bias_v = {bias_v = 0.3, min = 1}",
        "targets.current_density_at_bias_v",
        "current_density_at_bias, current_at_bias_ma",
    ),
]


@pytest.mark.parametrize(("target", "key", "message"), AT_BIAS_CASES)
def test_bad_current_at_bias_targets_one_line_exit_2(
    write_study, tmp_path, capsys, target, key, message
):
    # One line naming the study file and the key, exit 2, nothing written (DESIGN.md, Errors)
    study = write_study(study_text(targets=EASY + target + "\n"))
    assert main(["search", str(study), "--out", str(tmp_path / "o"), "--no-progress"]) == 2
    line = _one_error_line(capsys, "search")
    assert f"{study}, key '{key}'" in line, line
    assert message in line, line
    assert not (tmp_path / "o").exists()


def test_baseline_errors_name_the_study_and_the_key(write_study, tmp_path, capsys):
    (tmp_path / "base.toml").write_text("temperature_k = 300\n[[layers]]\nmaterial = 1\n")
    study = write_study(study_text(extra='[search]\nbaseline = "base.toml"\n'))
    assert main(["search", str(study), "--out", str(tmp_path / "o")]) == 2
    line = _one_error_line(capsys, "search")
    assert line.startswith(
        f"wellwright search: {study}, key 'search.baseline': baseline stack file"
    )
    assert "base.toml" in line


# ----------------------------------------------------------------------------- iv outcomes


def test_iv_self_consistent_failure_is_one_line(stack_file, tmp_path, capsys, monkeypatch):
    from wellwright.optimize.cli import cmd_iv
    from wellwright.physics.electrostatics import ElectrostaticsConvergenceError

    def fails(*args, **kwargs):
        raise ElectrostaticsConvergenceError("did not converge in 60 steps")

    monkeypatch.setattr(cmd_iv, "stack_iv", fails)
    assert main(["iv", str(stack_file), "--points", "5", "--out", str(tmp_path / "o")]) == 2
    assert "self-consistent electrostatics did not converge" in _one_error_line(capsys, "iv")
    assert not (tmp_path / "o").exists()


def test_iv_text_with_a_peak_and_no_pvcr(stack_file, tmp_path, capsys, monkeypatch):
    # issue 18 item 4: a peak exists but the PVCR is undefined (valley current <= 0)
    import numpy as np
    from wellwright.optimize.cli import cmd_iv

    real = cmd_iv.stack_iv

    def no_pvcr(*args, **kwargs):
        curves = real(*args, **kwargs)
        assert np.isfinite(curves.metrics["peak_voltage_v"][0])  # this stack has a peak
        curves.metrics["pvcr"][0] = np.nan
        return curves

    monkeypatch.setattr(cmd_iv, "stack_iv", no_pvcr)
    out = tmp_path / "o"
    assert main(["iv", str(stack_file), "--out", str(out), "--bias-max", "0.6"]) == 0
    from wellwright.optimize.shared import names

    lines = [x for x in capsys.readouterr().out.splitlines() if names.words("pvcr") in x]
    assert lines and lines[0].split()[-1] == "-"  # shown as missing, not a TypeError
    assert (out / "iv.png").is_file()


def test_warning_is_one_plain_line_after_the_output(tmp_path, capsys):
    # AlAs on InP is tensile-strained; 40 ML exceeds the Matthews-Blakeslee critical thickness
    # (J. W. Matthews and A. E. Blakeslee, J. Cryst. Growth 27, 118 (1974))
    layers = [
        {"name": "emitter", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
        {"name": "barrier", "material": "AlAs", "thickness_ml": 40},
        {"name": "collector", "material": "In0.53Ga0.47As", "doping_cm3": 2e18},
    ]
    path = tmp_path / "s.toml"
    path.write_text(stack_toml(layers, top={"substrate": "InP"}), encoding="utf-8")
    assert (
        main(["iv", str(path), "--points", "5", "--no-figures", "--out", str(tmp_path / "o")]) == 0
    )
    err = capsys.readouterr().err.strip().splitlines()
    mine = [line for line in err if "Matthews-Blakeslee" in line]
    assert len(mine) == 1 and mine[0].startswith("wellwright iv: warning: ")
    assert "layer 2 ('barrier')" in mine[0] and ".py" not in mine[0]
    assert all(line.startswith("wellwright") and "warning: " in line for line in err)
    # with an error as well, the error is the only line
    path.write_text(stack_toml(layers, top={"substrate": "InP", "temperature_k": -1}))
    assert main(["iv", str(path), "--points", "5"]) == 2
    _one_error_line(capsys, "iv")


# ----------------------------------------------------------------------------- calibrate

STUDIES = Path(__file__).resolve().parents[1] / "studies"


@pytest.mark.parametrize(
    ("header", "factor", "area"),
    [
        ("bias_v,current_density_a_cm2", 1.0, True),  # A read as A/cm^2
        ("bias_v,current_density_a_cm2", 1.0, False),
        ("bias_v,current_a", 1e3, True),  # mA read as A
    ],
    ids=["amps-as-density", "amps-as-density-no-area", "milliamps"],
)
def test_measured_current_far_off_in_units_is_one_line(tmp_path, capsys, header, factor, area):
    # the shipped INVENTED wafer (studies/make_invented_wafer1.py) with its currents given in
    # the wrong unit: far outside what the stack can carry at any thickness within the fit's
    # ranges, so refused before the fit (the first case ended in a traceback from the local
    # fit's bounds)
    lines = (STUDIES / "inp_thz_wafer1_invented.csv").read_text().splitlines()
    if not area:
        lines = [x for x in lines if not x.startswith("# area_um2")]
    start = lines.index("bias_v,current_a")
    rows = [f"{v},{float(i) * factor:.6e}" for v, i in (x.split(",") for x in lines[start + 1 :])]
    csv = tmp_path / "m.csv"
    csv.write_text("\n".join(lines[:start] + [header] + rows) + "\n")
    out = tmp_path / "out"
    stack = STUDIES / "inp_thz_oscillator.toml"
    assert main(["calibrate", str(stack), "--measured", str(csv), "--out", str(out)]) == 2
    line = _one_error_line(capsys, "calibrate")
    assert f"{csv}: column {header.split(',')[1]}: the largest current density" in line
    assert "far outside what the stack can carry within the fit's ranges" in line
    assert "check the units" in line
    assert not out.exists()


# ----------------------------------------------------------------------------- fuzz

JUNK = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(10**400), max_value=10**400),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=12),
    st.lists(st.integers(), max_size=3),
    st.dictionaries(st.sampled_from(["min", "max", "step", "log", "x"]), st.integers(), max_size=3),
)
STACK_KEYS = sorted({k for layer in VALID_LAYERS for k in layer} | {"doping_cm3", "mass_m0", "x"})


def _base_stack() -> dict:
    return {"temperature_k": 300, "layers": [dict(x) for x in VALID_LAYERS]}


@st.composite
def edited_stacks(draw):
    data = _base_stack()
    for _ in range(draw(st.integers(1, 3))):
        where = draw(st.sampled_from(["layer", "top", "model", "device", "drop"]))
        value = draw(JUNK)
        layers = data["layers"]
        if where in ("layer", "drop") and not (isinstance(layers, list) and layers):
            continue  # the layers list itself was replaced by junk
        if where == "layer":
            layer = data["layers"][draw(st.integers(0, len(data["layers"]) - 1))]
            if isinstance(layer, dict):  # the list may itself be junk (a list of integers)
                layer[draw(st.sampled_from(STACK_KEYS + ["junk"]))] = value
        elif where == "drop":
            data["layers"].pop(draw(st.integers(0, len(data["layers"]) - 1)))
        else:
            keys = {"top": ["temperature_k", "substrate", "layers", "junk"]}.get(
                where, ["broadening_mev", "slice_nm", "strain", "electrostatics", "area_um2"]
            )
            table = data if where == "top" else data.setdefault(where, {})
            if isinstance(table, dict):
                table[draw(st.sampled_from(keys))] = value
    return data


def _only_input_errors(fn, *args, **kwargs) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            fn(*args, **kwargs)
        except InputError as exc:
            assert "\n" not in str(exc)


FUZZ = settings(
    max_examples=1200, derandomize=True, deadline=None, suppress_health_check=list(HealthCheck)
)


@FUZZ
@given(edited_stacks())
def test_fuzz_stack_parser_raises_only_input_errors(data):
    _only_input_errors(parse_stack, data, source="fuzz")


@FUZZ
@given(st.binary(max_size=200) | st.text(max_size=200).map(lambda t: "[[layers]]\n" + t))
def test_fuzz_toml_reader_raises_only_input_errors(data):
    _only_input_errors(parse_toml, data, source="fuzz")


STUDY = parse_toml(study_text(), source="conftest")


@settings(
    max_examples=400, derandomize=True, deadline=None, suppress_health_check=list(HealthCheck)
)
@given(
    st.sampled_from(["search", "sweep", "report", "tolerance", "growth", "targets", "constraints"]),
    st.sampled_from(
        [
            "trials",
            "seed",
            "designs",
            "samples",
            "bias_max_v",
            "points",
            "pvcr",
            "step",
            "thickness_ml_sigma",
            "max_active_thickness_nm",
            "method",
            "baseline",
            "junk",
        ]
    ),
    JUNK,
)
def test_fuzz_study_parser_raises_only_input_errors(table, key, value):
    data = copy.deepcopy(STUDY)
    data.setdefault(table, {})[key] = value
    _only_input_errors(parse_study, data, source="fuzz")


@pytest.mark.parametrize("command", ["search", "run"])
def test_a_growth_cell_missing_is_said_before_the_search(write_study, tmp_path, capsys, command):
    # fuzz find: [growth.cells] without the Al cell for an AlAs barrier was found by 'run' only
    # after the whole search (which it wrote), without the layer's name, and not by 'search'
    cells = "[growth]\nthickness_ml_sigma = 0.5\n[growth.cells]\nIn = {flux_sigma = 0.01}\n"
    study = write_study(study_text(extra=cells + "Ga = {flux_sigma = 0.01}\n"))
    before = _listing(tmp_path)
    argv = [command, str(study), "--out", str(tmp_path / "r"), "--no-progress"]
    assert main(argv) == 2
    line = _one_error_line(capsys, command)
    assert "('barrier1')" in line and "key 'growth.cells'" in line and "Al cell" in line
    assert _listing(tmp_path) == before
