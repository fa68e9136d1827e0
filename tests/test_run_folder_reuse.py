"""A run folder holds the run of one study: reusing it for another is refused unless asked.

A fuzz run of the command line found a folder reused for another study file overwritten
without a word, and a renamed study starting a second search beside the first while the
output said "resuming". One finished run of the tiny study of ``tests/test_pipeline.py`` is
made once and copied for each case.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from test_bad_input import _one_error_line
from test_pipeline import _fake_report, _tiny_study
from wellwright.optimize.cli import main
from wellwright.optimize.cli.pipeline import PIPELINE_FILE, run_pipeline


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> tuple[Path, Path]:
    """(study file, run folder) of a finished run of a study named after its file."""
    tmp = tmp_path_factory.mktemp("reuse")
    path = _tiny_study(tmp)
    text = "".join(
        line for line in path.read_text().splitlines(True) if not line.startswith("study_name")
    )
    path.write_text(text, encoding="utf-8")
    run_pipeline(path, out_dir=tmp / "run", report=_fake_report, progress=False)
    return path, tmp / "run"


def _copy(run: Path, tmp_path: Path) -> Path:
    out = tmp_path / "run"
    shutil.copytree(run, out)
    return out


def _contents(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def _stored_studies(run: Path) -> list[str]:
    import optuna

    url = f"sqlite:///{run / 'search' / 'study.db'}"
    return sorted(s.study_name for s in optuna.get_all_study_summaries(url))


def _renamed(study: Path, tmp_path: Path) -> Path:
    """The same file under another name (its search is stored under the new name)."""
    new = tmp_path / "renamed.toml"
    new.write_bytes(study.read_bytes())
    return new


def _other_space(study: Path, tmp_path: Path) -> Path:
    """The same name (the file's) with another range of the well."""
    new = tmp_path / "edited" / study.name
    new.parent.mkdir()
    text = study.read_text()
    new.write_text(text.replace("min = 10, max = 20", "min = 11, max = 19"))
    assert new.read_text() != text
    return new


@pytest.mark.parametrize(
    ("make", "key"),
    [(_renamed, "--out"), (_other_space, "search.study_name")],
    ids=["renamed", "other-space"],
)
def test_a_folder_holding_another_study_is_refused_and_left_as_it_was(
    finished, tmp_path, capsys, make, key
):
    # the project's rule for bad input: one line, exit status 2, nothing written
    study, run = finished
    out = _copy(run, tmp_path)
    before = _contents(out)
    other = make(study, tmp_path)
    capsys.readouterr()
    assert main(["run", str(other), "--out", str(out), "--no-progress"]) == 2
    line = _one_error_line(capsys, "run")
    assert str(out) in line and f"key '{key}'" in line and "--fresh" in line
    assert str(study.resolve()) in line and str(other.resolve()) in line
    assert _contents(out) == before


def test_fresh_starts_the_folder_over_for_another_study(finished, tmp_path):
    study, run = finished
    out = _copy(run, tmp_path)
    (out / "notes.txt").write_text("mine")  # not the run's: kept
    other = _renamed(study, tmp_path)
    assert main(["run", str(other), "--out", str(out), "--fresh", "--no-progress"]) == 0
    record = json.loads((out / PIPELINE_FILE).read_text())
    assert record["study"]["path"] == str(other.resolve())
    assert _stored_studies(out) == [other.stem]  # the old study's trials went with it
    assert (out / "notes.txt").read_text() == "mine"


def test_resuming_is_said_only_where_the_storage_holds_the_studys_trials(
    finished, tmp_path, capsys
):
    study, run = finished
    complete = json.loads((run / PIPELINE_FILE).read_text())["stages"]["search"]["complete"]
    out = _copy(run, tmp_path)
    shutil.rmtree(out / "search")  # the storage is gone: nothing to resume
    capsys.readouterr()
    run_pipeline(study, out_dir=out, report=_fake_report)
    said = capsys.readouterr().out
    assert "search: running" in said and "resuming" not in said

    # one more trial asked: the search goes on from the trials it holds
    run_pipeline(study, out_dir=out, report=_fake_report, settings={"trials": complete + 1})
    said = capsys.readouterr().out
    assert f"search: resuming {complete} complete trials from its storage" in said
    assert _stored_studies(out) == [study.stem]
