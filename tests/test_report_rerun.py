"""The report's "rerun with" command reproduces the run it reports.

A fuzz run of the command line found the command naming only the study file's and the
folder's names (no path, no options: ``--trials`` was lost), no command at all in the line
about a missing ``designs.json``, and blank values in the settings table.
"""

from __future__ import annotations

import html
import re
import shlex
import shutil
from pathlib import Path

import pytest
from test_bad_input import _one_error_line
from test_pipeline import _tiny_study
from wellwright.optimize.cli import main
from wellwright.optimize.report.build import FILES_DIR


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    """A run made with relative paths and options that change what it does."""
    tmp = tmp_path_factory.mktemp("rerun")
    _tiny_study(tmp)
    argv = ["run", "tiny.toml", "--out", "run", "--trials", "7", "--continue-infeasible"]
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(tmp)
        assert main([*argv, "--no-progress"]) == 0
    return tmp / "run"


def _reproduce_section(run: Path) -> str:
    text = (run / "report.html").read_text(encoding="utf-8")
    return text[text.index('<section id="reproduce">') :]


def _command(run: Path) -> list[str]:
    code = re.search(r"rerun with</p><pre><code>(.*?)</code></pre>", _reproduce_section(run))
    assert code is not None
    return shlex.split(html.unescape(code.group(1)))


def test_the_command_reproduces_the_run_from_anywhere(run, tmp_path, monkeypatch, capsys):
    argv = _command(run)
    assert argv[:2] == ["wellwright", "run"]
    for option in (["--trials", "7"], ["--continue-infeasible"]):
        assert shlex.join(option) in shlex.join(argv), option
    monkeypatch.chdir(tmp_path)
    capsys.readouterr()
    assert main(argv[1:]) == 0
    said = capsys.readouterr().out
    for stage in ("search", "tolerance rank01", "report"):
        assert f"{stage}: done earlier, skipped" in said, said


def test_the_settings_table_has_a_value_for_every_setting(run):
    table = _reproduce_section(run).split('<th class="l">setting</th>', 1)[1]
    table = table[: table.index("</table>")]
    rows = re.findall(r'<tr><td class="l">(.*?)</td><td class="">(.*?)</td></tr>', table)
    assert len(rows) > 5
    assert all(value.strip() and value != "None" for _, value in rows), rows


def test_a_missing_designs_file_is_one_line_with_the_command(run, tmp_path, capsys):
    copy = tmp_path / "copy"
    shutil.copytree(run, copy)
    (copy / "search" / "designs.json").unlink()
    shutil.rmtree(copy / FILES_DIR)
    (copy / "report.html").unlink()
    argv = _command(run)
    argv[argv.index("--out") + 1] = str(copy.resolve())
    capsys.readouterr()
    assert main(["report", str(copy)]) == 2
    line = _one_error_line(capsys, "report")
    assert "designs.json" in line and line.endswith(shlex.join(argv))
    assert not (copy / "report.html").exists() and not (copy / FILES_DIR).exists()


def test_the_command_hides_a_storage_password():
    from wellwright.optimize.study.run_folder import rerun_command

    record = {
        "study": {"path": "/studies/my study.toml"},
        "options": {"storage": "postgresql+psycopg2://ann:s3cret@db:5432/rtd", "trials": 40},
    }
    argv = shlex.split(rerun_command("/runs/a", record))
    assert argv[2] == "/studies/my study.toml"
    assert "s3cret" not in " ".join(argv) and "postgresql+psycopg2://ann:***@db:5432/rtd" in argv
