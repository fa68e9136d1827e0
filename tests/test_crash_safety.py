"""Crash safety (issue 18, item 2): a run folder is resumable from the first byte written,
a fresh SQLite storage opened by several processes at once works for all of them, and
temporaries of interrupted writes are removed on the next run.

The expectations are the project's own rules (DESIGN.md: "results that resume after an
interruption"); the race is the one measured in issue 18 (5 of 10 simultaneous starts failed
with "UNIQUE constraint failed: alembic_version").
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import study_text
from wellwright.optimize.cli import main
from wellwright.optimize.shared.outputs import remove_temporaries

#: A spec that any design with an NDR peak meets, so that a short run reaches its report.
EASY = "peak_current_density_a_cm2 = {min = 1}\n"
RUN = ["--trials", "4", "--samples", "8", "--method", "mc", "--designs", "1", "--no-progress"]

_OPEN = """
import sys, time
from wellwright.optimize.search.storage import make_storage
start = float(sys.argv[2])
while time.time() < start:
    pass
make_storage("sqlite:///" + sys.argv[1])
"""


def test_fresh_sqlite_storage_created_by_several_processes_at_once(tmp_path):
    db = tmp_path / "study.db"
    start = time.time() + 3.0  # every process has imported Optuna by then
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", _OPEN, str(db), repr(start)],
            stderr=subprocess.PIPE,
            text=True,
        )
        for _ in range(6)
    ]
    errors = [p.communicate(timeout=300)[1] for p in procs]
    assert [p.returncode for p in procs] == [0] * 6, errors


def test_folder_holding_only_the_study_copy_resumes(write_study, tmp_path):
    # a run killed right after its first write: the folder has study.toml and nothing else
    study = write_study(study_text(targets=EASY))
    out = tmp_path / "run"
    out.mkdir()
    (out / "study.toml").write_bytes(study.read_bytes())
    # and an interrupted write's hidden temporaries, text and PNG
    (out / ".pipeline.json.abc123.tmp").write_text("{")
    (out / "search").mkdir()
    (out / "search" / ".history.x1y2.png").write_bytes(b"\x89PNG")
    assert main(["run", str(study), "--out", str(out), *RUN]) == 0
    assert (out / "report.html").is_file()
    assert not list(out.rglob(".*.tmp")) and not (out / "search" / ".history.x1y2.png").exists()


def test_remove_temporaries_leaves_user_files(tmp_path):
    keep = [tmp_path / "notes.tmp", tmp_path / ".hidden.png", tmp_path / "fig.png"]
    for path in keep:
        path.write_text("x")
    (tmp_path / ".iv.k3j2.png").write_text("x")
    assert remove_temporaries(tmp_path) == 1
    assert all(path.exists() for path in keep)


def test_interrupt_during_the_first_stage_leaves_a_resumable_folder(write_study, tmp_path):
    # SIGTERM during the search (the first stage): the same command then finishes the run
    study = write_study(study_text(targets=EASY))
    out = tmp_path / "run"
    argv = [sys.executable, "-m", "wellwright.optimize.cli", "run", str(study), "--out", str(out)]
    env = {**os.environ, "MPLBACKEND": "Agg"}
    proc = subprocess.Popen(
        [*argv, "--trials", "200", "--no-progress"], env=env, stderr=subprocess.PIPE, text=True
    )
    db = out / "search" / "study.db"
    deadline = time.time() + 120
    while not db.exists() and proc.poll() is None and time.time() < deadline:
        time.sleep(0.05)
    proc.terminate()
    _, err = proc.communicate(timeout=120)
    assert proc.returncode in (2, 130), err  # one line, not a traceback
    assert "Traceback" not in err
    assert (out / "study.toml").is_file()
    assert main(["run", str(study), "--out", str(out), *RUN]) == 0


# ----------------------------------------------------------------------------- SIGKILL


def _descendants(pid: int) -> set[int]:
    """Every living process below ``pid`` (Linux /proc)."""
    parents: dict[int, int] = {}
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        parents[int(stat.parent.name)] = int(fields[1])
    found, frontier = set(), {pid}
    while frontier:
        frontier = {child for child, parent in parents.items() if parent in frontier} - found
        found |= frontier
    return found


def _alive(pids: set[int]) -> set[int]:
    alive = set()
    for pid in pids:
        try:
            state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state != "Z":
            alive.add(pid)
    return alive


def _stage_running(out: Path, stage: str) -> bool:
    import json

    try:
        record = json.loads((out / "pipeline.json").read_text())
    except (OSError, ValueError):
        return False
    entry = record.get("stages", {}).get(stage)
    if stage == "tolerance":
        return bool(entry) and any(v.get("status") == "running" for v in entry.values())
    return bool(entry) and entry.get("status") == "running"


def _kill_during(study: Path, out: Path, stage: str, delay_s: float, argv: list[str]) -> None:
    cmd = [sys.executable, "-m", "wellwright.optimize.cli", "run", str(study), "--out", str(out)]
    env = {**os.environ, "MPLBACKEND": "Agg"}
    proc = subprocess.Popen([*cmd, *argv], env=env, stderr=subprocess.DEVNULL)
    deadline = time.time() + 240
    while not _stage_running(out, stage):
        if proc.poll() is not None:  # a fast machine finished the stage between two looks
            assert proc.returncode == 0, f"the run failed before its {stage} stage"
            return
        assert time.time() < deadline
        time.sleep(0.02)
    time.sleep(delay_s)
    workers = _descendants(proc.pid)
    proc.kill()
    proc.wait()
    deadline = time.time() + 20  # workers watch their parent every 0.5 s
    while _alive(workers) and time.time() < deadline:
        time.sleep(0.2)
    assert not _alive(workers), f"orphaned workers after a kill in the {stage} stage"


def _kill_and_resume(write_study, tmp_path, seed: int, stages: tuple[str, ...]) -> None:
    import random

    rng = random.Random(seed)  # the moments are random, the seed makes them repeatable
    study = write_study(study_text(targets=EASY))
    argv = ["--trials", "12", "--samples", "64", "--method", "mc", "--designs", "1"]
    argv += ["--workers", "2", "--jobs", "2", "--no-progress"]
    for stage in stages:
        out = tmp_path / f"run_{stage}"
        _kill_during(study, out, stage, rng.uniform(0.0, 1.5), argv)
        assert main(["run", str(study), "--out", str(out), *argv]) == 0
        assert (out / "report.html").is_file()


def test_sigkill_in_every_stage_resumes_without_orphans(write_study, tmp_path):
    # one random moment per stage; tests/test_crash_safety.py::test_sigkill_long has many
    _kill_and_resume(write_study, tmp_path, 1, ("search", "tolerance", "report"))


@pytest.mark.slow
def test_sigkill_long(write_study, tmp_path):
    for seed in range(2, 4):  # two more random moments per stage (each costs a run)
        _kill_and_resume(write_study, tmp_path / str(seed), seed, ("search", "tolerance", "report"))


def test_an_upgrade_redoes_every_stage(write_study, tmp_path, monkeypatch, capsys):
    # issue 16: fingerprints include the package version (a rerun after an upgrade must not
    # mix old and new results)
    from wellwright.optimize.cli.pipeline import run_pipeline
    from wellwright.optimize.study import run_folder

    study = write_study(study_text(targets=EASY))
    settings = {"trials": 4, "samples": 8, "method": "mc", "designs": 1}
    run_pipeline(study, out_dir=tmp_path / "r", settings=settings, progress=True)
    run_pipeline(study, out_dir=tmp_path / "r", settings=settings, progress=True)
    same = capsys.readouterr().out
    assert "search: done earlier, skipped" in same and "report: done earlier, skipped" in same
    monkeypatch.setattr(run_folder, "package_version", lambda: "99.0")
    record = run_pipeline(study, out_dir=tmp_path / "r", settings=settings, progress=True)
    upgraded = capsys.readouterr().out
    assert "done earlier" not in upgraded and record["version"] == "99.0", upgraded
