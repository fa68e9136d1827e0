"""An impossible spec stops 'wellwright run' after the search with exit status 3 and one line.

Common practice (a command's documented exit status); the tiny study is the
quick demo with a PVCR no RTD model reaches, so no design can meet it.
"""

from __future__ import annotations

import json

from test_pipeline import _tiny_study
from wellwright.optimize.cli import main
from wellwright.optimize.cli.pipeline import EXIT_SPEC_NOT_MET


def _impossible(tmp_path):
    path = _tiny_study(tmp_path)
    text = path.read_text(encoding="utf-8")
    spec = "pvcr = {min = 5, max = 40}"  # the quick demo's PVCR window
    assert spec in text
    path.write_text(text.replace(spec, "pvcr = {min = 1e9}"), encoding="utf-8")
    return path


def test_impossible_spec_stops_after_the_search_with_status_3(tmp_path, capsys):
    study = _impossible(tmp_path)
    out = tmp_path / "run"
    assert EXIT_SPEC_NOT_MET == 3
    assert main(["run", str(study), "--out", str(out), "--no-progress"]) == 3
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1
    line = err[0]
    assert line.startswith("wellwright run: no design meets the spec; the closest (trial ")
    assert "PVCR" in line and "below the minimum" in line and "--continue-infeasible" in line
    assert (out / "search" / "designs.json").is_file()  # the search's results are kept
    assert not (out / "tolerance").exists() and not (out / "report.html").exists()
    best = json.loads((out / "search" / "designs.json").read_text())[0]
    assert f"trial {best['trial']}" in line


def test_continue_infeasible_goes_on(tmp_path, capsys):
    study = _impossible(tmp_path)
    out = tmp_path / "run"
    argv = ["run", str(study), "--out", str(out), "--no-progress", "--continue-infeasible"]
    assert main(argv) == 0
    assert (out / "tolerance" / "rank01" / "tolerance.json").is_file()
    assert (out / "report.html").is_file()
