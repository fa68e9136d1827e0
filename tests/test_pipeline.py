"""The pipeline stages: settings, resume, and what a changed study file reruns.

Uses a tiny study (few trials, few samples) so that it runs in seconds; the
stage bookkeeping is what is checked, not the physics.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from wellwright.optimize.cli.cmd_demo import SCENARIOS
from wellwright.optimize.cli.pipeline import PIPELINE_FILE, load_run, run_pipeline
from wellwright.physics.errors import InputError

QUICK = SCENARIOS / "demo_quick.toml"


def _tiny_study(tmp_path: Path, extra: str = "") -> Path:
    text = QUICK.read_text(encoding="utf-8")
    text = text.replace("trials = 16", "trials = 6").replace("samples = 32", "samples = 8")
    text = text.replace("designs = 2", "designs = 1").replace("allocate = 1", "allocate = 0")
    text = text.replace('method = "morris"', 'method = "mc"')
    path = tmp_path / "tiny.toml"
    path.write_text(text + extra, encoding="utf-8")
    return path


def _fake_report(run_dir: Path) -> Path:
    out = Path(run_dir) / "report.html"
    out.write_text("<html></html>", encoding="utf-8")
    return out


def test_rerun_skips_finished_stages_and_changed_file_reruns(tmp_path, capsys):
    # common practice: a resumable pipeline redoes only what its inputs changed
    study = _tiny_study(tmp_path)
    out = tmp_path / "run"
    rec = run_pipeline(study, out_dir=out, report=_fake_report)
    assert rec["stages"]["search"]["status"] == "done"
    assert rec["stages"]["tolerance"]["rank01"]["status"] == "done"
    assert (out / "search" / "study.db").is_file()
    assert (out / "tolerance" / "rank01" / "tolerance.json").is_file()
    capsys.readouterr()

    run_pipeline(study, out_dir=out, report=_fake_report)
    said = capsys.readouterr().out
    assert "search: done earlier, skipped" in said
    assert "tolerance rank01: done earlier, skipped" in said
    assert "report: done earlier, skipped" in said

    # a changed growth table: the search resumes (same space, storage kept), tolerance reruns
    changed = study.read_text().replace("Ga = {flux_sigma = 0.01}", "Ga = {flux_sigma = 0.008}")
    assert changed != study.read_text()
    study.write_text(changed)
    rec = run_pipeline(study, out_dir=out, report=_fake_report)
    said = capsys.readouterr().out
    assert "tolerance rank01 (trial" in said
    assert rec["study"]["changed_since_last_run"] is True
    assert rec["stages"]["search"]["complete"] == 6  # the storage kept its trials
    assert json.loads((out / PIPELINE_FILE).read_text())["stages"]["report"]["status"] == "done"


def test_interrupted_tolerance_is_redone(tmp_path, capsys):
    # common practice: a stage marked running (killed half way) is not trusted
    study = _tiny_study(tmp_path)
    out = tmp_path / "run"
    run_pipeline(study, out_dir=out, report=_fake_report)
    rec = json.loads((out / PIPELINE_FILE).read_text())
    rec["stages"]["tolerance"]["rank01"]["status"] = "running"
    (out / PIPELINE_FILE).write_text(json.dumps(rec))
    capsys.readouterr()
    run_pipeline(study, out_dir=out, report=_fake_report)
    said = capsys.readouterr().out
    assert "search: done earlier, skipped" in said
    assert "tolerance rank01 (trial" in said


def test_stages_write_what_the_report_reads_and_a_rerun_adds_missing_records(tmp_path, capsys):
    # the report reads finished files only (issue 16): the search writes its history as
    # trials.csv, each reported design's nominal curves go to tolerance/rankNN/design/;
    # a folder missing them (made before they existed) gets them on a rerun, without
    # redoing the tolerance analysis (common practice: redo only what is missing)
    import csv

    study = _tiny_study(tmp_path)
    out = tmp_path / "run"
    run_pipeline(study, out_dir=out, report=_fake_report)
    design = out / "tolerance" / "rank01" / "design"
    record = json.loads((design / "design.json").read_text())
    for name in ("iv.csv", "iv.png", "band_diagram.png", "transmission.png"):
        assert (design / name).is_file(), name
    designs = json.loads((out / "search" / "designs.json").read_text())
    assert record["trial"] == designs[0]["trial"]
    # the nominal sweep is the search's: the same figures of merit as designs.json
    assert record["metrics"]["peak_current_density_a_cm2"] == pytest.approx(
        designs[0]["metrics"]["peak_current_density_a_cm2"], rel=1e-9
    )
    rows = list(csv.DictReader((out / "search" / "trials.csv").read_text().splitlines()))
    assert len(rows) == 6
    assert {int(r["trial"]) for r in rows} == set(range(6))
    assert designs[0]["trial"] in {int(r["trial"]) for r in rows if r["feasible"] == "1"}

    tolerance_json = (out / "tolerance" / "rank01" / "tolerance.json").stat().st_mtime_ns
    for p in design.iterdir():
        p.unlink()
    (out / "search" / "trials.csv").unlink()
    capsys.readouterr()
    rec = run_pipeline(study, out_dir=out, report=_fake_report)
    said = capsys.readouterr().out
    assert "tolerance rank01: done earlier; writing the design's curves" in said
    assert (design / "design.json").is_file() and (out / "search" / "trials.csv").is_file()
    assert (out / "tolerance" / "rank01" / "tolerance.json").stat().st_mtime_ns == tolerance_json
    assert rec["stages"]["search"]["complete"] == 6  # resumed from its storage, no new trial
    assert rec["stages"]["report"]["status"] == "done"


def test_a_design_the_model_cannot_evaluate_does_not_stop_the_run(tmp_path, monkeypatch):
    # the project's rule: one failed sample never stops a run; the report then says so
    # in the design's card instead of showing figures
    import wellwright.physics.iv as iv
    from wellwright.optimize.report.build import build_report
    from wellwright.physics.electrostatics import ElectrostaticsConvergenceError

    study = _tiny_study(tmp_path)
    out = tmp_path / "run"
    run_pipeline(study, out_dir=out, progress=False)
    design = out / "tolerance" / "rank01" / "design"
    for p in design.iterdir():
        p.unlink()

    def fails(*args, **kwargs):
        raise ElectrostaticsConvergenceError("Poisson-Newton did not converge (test)")

    monkeypatch.setattr(iv, "stack_iv", fails)
    rec = run_pipeline(study, out_dir=out, progress=False)
    assert rec["stages"]["report"]["status"] == "done"
    record = json.loads((design / "design.json").read_text())
    assert record["metrics"] is None and record["figures"] == {}
    assert "did not converge" in record["error"]
    text = build_report(out).read_text(encoding="utf-8")
    assert "could not compute this design" in text and "not available" in text
    assert not (out / "report_files" / "rank01_iv.png").exists()


def test_linked_calibration_is_kept_in_the_run_folder_and_a_change_is_not_skipped(tmp_path):
    # the report is built from the run folder alone (issue 16), and a calibration shapes
    # every result: the run keeps a copy, the report reads the copy, and a changed
    # calibration is part of the stages' fingerprints (common practice: a stage is not
    # skipped when an input changed); the search then meets its storage holding trials of
    # the old model, which it refuses in one line (not silently reusing old designs)
    from wellwright.optimize.report.build import build_report

    cal = tmp_path / "cal" / "calibration.json"
    cal.parent.mkdir()
    record = {"kind": "wellwright calibration", "model": {"series_resistance_ohm_um2": 10.0}}
    cal.write_text(json.dumps(record))
    study = _tiny_study(tmp_path, '\n[calibration]\nfrom = "cal/calibration.json"\n')
    out = tmp_path / "run"
    run_pipeline(study, out_dir=out, progress=False)
    assert json.loads((out / "calibration.json").read_text()) == record

    cal.unlink()  # the original is gone: the report still says what the run used
    (out / "report.html").unlink()
    text = build_report(out).read_text(encoding="utf-8")
    assert "calibrated against a measured device" in text
    assert "series_resistance_ohm_um2 = 10" in text

    record["model"]["series_resistance_ohm_um2"] = 30.0
    cal.write_text(json.dumps(record))
    with pytest.raises(InputError, match="search.study_name"):
        run_pipeline(study, out_dir=out, progress=False)


@pytest.mark.parametrize(
    ("extra", "match"),
    [
        ("\nbogus = 1\n", "report.bogus"),
        ("\ncolour = 'red'\n", "report.colour"),
    ],
)
def test_bad_report_table_writes_nothing(tmp_path, extra, match):
    study = _tiny_study(tmp_path, extra)
    out = tmp_path / "run"
    with pytest.raises(InputError, match=match):
        run_pipeline(study, out_dir=out, report=_fake_report)
    assert not out.exists()


def test_bad_report_value_is_one_plain_line(tmp_path):
    # One line naming the file and the key once (it used to nest the inner message, file
    # and key included, inside the outer one)
    path = _tiny_study(tmp_path)
    text = path.read_text(encoding="utf-8").replace("samples = 8", "samples = -3")
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError) as info:
        run_pipeline(path, out_dir=tmp_path / "run", report=_fake_report)
    line = info.value.one_line()
    assert "report.samples" in line
    assert line.count("tiny.toml") == 1
    assert not (tmp_path / "run").exists()


def test_bad_growth_spread_stops_the_run_before_its_search(tmp_path):
    # Bad input writes nothing (the project's rule): a [growth] spread is read by the later
    # tolerance stage, but a bad one used to be found only after the search had run.
    path = _tiny_study(tmp_path)
    text = path.read_text(encoding="utf-8")
    path.write_text(
        text.replace("thickness_ml_sigma = 0.5", "thickness_ml_sigma = -1"), encoding="utf-8"
    )
    out = tmp_path / "run"
    with pytest.raises(InputError, match="growth.thickness_ml_sigma"):
        run_pipeline(path, out_dir=out, report=_fake_report)
    assert not out.exists()


@pytest.mark.parametrize(
    ("settings", "match"),
    [
        ({"designs": 0}, "designs"),
        ({"samples": 3}, "samples"),
        ({"method": "fast"}, "method"),
        ({"trials": -1}, "trials"),
    ],
)
def test_bad_settings_write_nothing(tmp_path, settings, match):
    out = tmp_path / "run"
    with pytest.raises(InputError, match=match):
        run_pipeline(_tiny_study(tmp_path), out_dir=out, settings=settings)
    assert not out.exists()


def test_load_run_rejects_other_folders(tmp_path):
    with pytest.raises(InputError, match="not a run folder"):
        load_run(tmp_path)
    with pytest.raises(InputError, match="not a folder"):
        load_run(tmp_path / "missing")


def test_out_folder_that_is_not_a_run_is_refused(tmp_path):
    out = tmp_path / "busy"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    with pytest.raises(InputError, match="not a run folder"):
        run_pipeline(_tiny_study(tmp_path), out_dir=out)
    assert sorted(p.name for p in out.iterdir()) == ["keep.txt"]
