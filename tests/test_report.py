"""``wellwright demo --quick`` end to end, and the report it writes.

The demo runs once per module; every check below reads its output. Its time is
measured by ``benchmarks/bench_demo.py``, never asserted here (a loaded machine is
slow). Sources of the checks: the report's required content is the project's spec
(issue 6); "data drawn" is common practice (a figure whose pixels are all one colour
shows nothing).
"""

from __future__ import annotations

import base64
import io
import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest
from wellwright.optimize.cli import main
from wellwright.optimize.report.build import FILES_DIR, SECTIONS


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo") / "run"
    assert main(["demo", "--quick", "--no-progress", "--out", str(out)]) == 0
    return out


def _html(out: Path) -> str:
    return (out / "report.html").read_text(encoding="utf-8")


def _has_data(png: bytes) -> bool:
    img = mpimg.imread(io.BytesIO(png), format="png")
    rgb = img[..., :3].reshape(-1, 3)
    return float(rgb.var()) > 0 and len(np.unique(rgb, axis=0)) > 2


def test_every_section_is_present(demo_dir):
    out = demo_dir
    text = _html(out)
    for anchor, heading in SECTIONS:
        assert f'id="{anchor}"' in text, anchor
        assert heading.split(". ", 1)[1].split(":")[0] in text
    # the pieces issue 6 names, each by a phrase the report must carry
    for phrase in [
        "figure of merit",
        "Where the search looked",
        "Candidates found",
        "Optimisation history",
        "Pareto front",
        "Growth sheet",
        "monolayers (ML)",
        "thickness (nm)",
        "peak (circle) and valley (square)",
        "resonance",
        "T(E)",
        "Wilson",
        "failures by spec",
        "Tornado",
        "Tolerance allocation",
        "Calibrate before a growth decision",
        "Invented demo scenario",
        "numpy",
        "scipy",
        "optuna",
        "SALib",
        "Python",
        "search sampler seed",
        "tolerance seed",
        "kA/cm",
        "(mV)",
        "In0.53Ga0.47As",
    ]:
        assert phrase in text, phrase


def test_report_is_self_contained(demo_dir):
    out = demo_dir
    text = _html(out)
    assert "<script" not in text.lower()
    assert not re.search(r"""(src|href)\s*=\s*["'](https?:|//|file:)""", text)
    assert "<link" not in text.lower()
    assert "<style>" in text


def test_embedded_figures_decode_and_show_data(demo_dir):
    out = demo_dir
    images = re.findall(r'src="data:image/png;base64,([^"]+)"', _html(out))
    # per reported design (2): I-V, band, T(E), ranking, tornado; plus history, Pareto, yield
    assert len(images) >= 2 * 5 + 3
    for b64 in images:
        assert _has_data(base64.b64decode(b64))


def test_files_beside_the_report(demo_dir):
    out = demo_dir
    files = out / FILES_DIR
    for name in [
        "yield.csv",
        "designs_ranked.csv",
        "growth_sheet_rank01.csv",
        "allocation_rank01.csv",
        "spec.csv",
        "design_space.csv",
        "report.json",
        "rank01_iv.png",
        "rank01_band.png",
        "rank01_transmission.png",
        "history.png",
        "pareto.png",
        "yield.png",
    ]:
        assert (files / name).is_file(), name
    for png in files.glob("*.png"):
        assert _has_data(png.read_bytes()), png.name
    sheet = (files / "growth_sheet_rank01.csv").read_text().splitlines()
    assert sheet[0] == "layer,name,material,x,monolayers,nm,doping_cm3,note"
    assert any(",barrier1,AlAs," in row for row in sheet)


def test_report_command_rebuilds(demo_dir):
    out = demo_dir
    (out / "report.html").unlink()
    assert main(["report", str(out)]) == 0
    assert "Reproducing this run" in _html(out)


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.skipif(CHROMIUM is None, reason="no chromium installed (Debian package 'chromium')")
def test_report_opens_in_headless_chromium(demo_dir, tmp_path):
    out = demo_dir
    shot = tmp_path / "shot.png"
    cmd = [
        CHROMIUM,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={tmp_path / 'profile'}",
        f"--screenshot={shot}",
        "--window-size=1200,3000",
        (out / "report.html").resolve().as_uri(),
    ]
    subprocess.run(cmd, check=True, timeout=120, capture_output=True)
    assert shot.is_file()
    img = mpimg.imread(str(shot))
    assert img.shape[0] >= 2900 and img.shape[1] >= 1100
    assert _has_data(shot.read_bytes())


def test_importance_legend_names_figures_of_merit_in_words():
    """The importances figure's legend reads "peak current density", not the JSON key."""
    from wellwright.optimize.search.figures import importances_figure

    fig = importances_figure(
        {
            "peak_current_density_a_cm2": {"barrier1": 0.7, "well": 0.3},
            "pvcr": {"barrier1": 0.4, "well": 0.6},
        }
    )
    texts = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert texts == ["peak current density", "PVCR"]


# --------------------------------------------------------------------------- from files alone
# The report is built from the run folder's finished files alone (issue 16; the project's
# data-flow rule in DESIGN.md): no physics rerun, no Optuna storage reopened.

#: Physics entry points the report used to call; each is made to raise below.
PHYSICS_ENTRY_POINTS = {
    "wellwright.physics.iv": ("sweep", "current_at_bias", "stack_iv", "band_profile"),
    "wellwright.physics.transmission": ("transmission",),
    "wellwright.physics.resonances": ("find_resonances",),
    "wellwright.physics.current": ("current_density_a_cm2", "contact_fermi_levels_ev"),
}


def _forbid_physics_and_storage(monkeypatch) -> list[str]:
    """Make every physics entry point and Optuna's study loading raise, wherever a module
    holds a reference to them (``from ... import name`` copies included); returns the calls."""
    import importlib

    calls: list[str] = []

    def trap(name):
        def raiser(*args, **kwargs):
            calls.append(name)
            raise AssertionError(f"the report called {name}")

        return raiser

    originals = {}
    for mod_name, funcs in PHYSICS_ENTRY_POINTS.items():
        mod = importlib.import_module(mod_name)
        for f in funcs:
            originals[id(getattr(mod, f))] = f"{mod_name}.{f}"
    try:
        import optuna

        originals[id(optuna.load_study)] = "optuna.load_study"
        originals[id(optuna.create_study)] = "optuna.create_study"
    except ImportError:  # pragma: no cover - optuna is a dependency
        pass
    for mod in list(sys.modules.values()):
        if not getattr(mod, "__name__", "").startswith(("wellwright", "optuna")):
            continue
        for attr, value in list(vars(mod).items()):
            if id(value) in originals and callable(value):
                monkeypatch.setattr(mod, attr, trap(originals[id(value)]))
    return calls


def _without_build_time(text: str) -> str:
    return re.sub(r"built \d{4}-\d\d-\d\d \d\d:\d\d UTC", "built (time)", text)


def test_report_from_finished_files_alone(demo_dir, tmp_path, monkeypatch):
    """Same report with the storage deleted and every physics entry point raising."""
    from wellwright.optimize.report.build import build_report

    run = tmp_path / "run"
    shutil.copytree(demo_dir, run)
    build_report(run)
    before_html = _without_build_time(_html(run))
    before_files = {p.name: p.read_bytes() for p in (run / FILES_DIR).iterdir()}

    db = run / "search" / "study.db"
    assert db.is_file()
    db.unlink()
    calls = _forbid_physics_and_storage(monkeypatch)
    from wellwright.optimize.shared import figures as shared_figures

    with pytest.raises(AssertionError, match="band_profile"):  # the trap holds in copies too
        shared_figures.band_profile(None, [0.0])
    calls.clear()
    shutil.rmtree(run / FILES_DIR)
    (run / "report.html").unlink()
    build_report(run)
    assert calls == []
    assert _without_build_time(_html(run)) == before_html
    after_files = {p.name: p.read_bytes() for p in (run / FILES_DIR).iterdir()}
    assert sorted(after_files) == sorted(before_files)
    for name, data in before_files.items():
        if name != "report.json":  # holds nothing time-dependent, but compare it as JSON
            assert after_files[name] == data, name
    assert json.loads(after_files["report.json"]) == json.loads(before_files["report.json"])


def test_report_imports_no_search_engine_storage_or_optuna(demo_dir):
    """In a fresh process, building the report loads neither Optuna nor the search engine."""
    code = (
        "import sys, shutil, tempfile, pathlib;"
        "from wellwright.optimize.report.build import build_report;"
        f"src = pathlib.Path({str(demo_dir)!r});"
        "dst = pathlib.Path(tempfile.mkdtemp()) / 'run'; shutil.copytree(src, dst);"
        "build_report(dst);"
        "bad = [m for m in sys.modules if m == 'optuna' or m.startswith(("
        "'optuna.', 'wellwright.optimize.search.engine', 'wellwright.optimize.search.storage',"
        "'wellwright.optimize.search.designs', 'sqlalchemy'))];"
        "shutil.rmtree(dst.parent); print(bad)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize(
    "missing",
    [
        "search/trials.csv",
        "tolerance/rank01/design/design.json",
        "tolerance/rank02/design/band_diagram.png",
    ],
)
def test_report_of_a_folder_missing_a_stage_record_is_one_line(demo_dir, tmp_path, missing, capsys):
    """A folder from before the stages wrote the report's records (or with a file removed):
    one line naming the file and saying to rerun, exit status 2, nothing written
    (the project's rule for bad input)."""
    run = tmp_path / "run"
    shutil.copytree(demo_dir, run)
    (run / missing).unlink()
    shutil.rmtree(run / FILES_DIR)
    (run / "report.html").unlink(missing_ok=True)
    capsys.readouterr()
    assert main(["report", str(run)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1
    assert missing.split("/")[-1] in err[0] and "rerun 'wellwright run'" in err[0]
    assert not (run / "report.html").exists() and not (run / FILES_DIR).exists()


@pytest.mark.parametrize(
    "damaged",
    [
        "search/designs.json",
        "tolerance/rank01/tolerance.json",
        "tolerance/rank02/design/design.json",
    ],
)
def test_report_of_a_folder_with_a_record_that_is_not_json_is_one_line(
    demo_dir, tmp_path, damaged, capsys
):
    """A finished record replaced by text that is not JSON (fuzz find: a traceback, exit 1):
    one line naming the file, that it is not valid JSON and where, exit status 2, nothing
    written (as for a missing record)."""
    run = tmp_path / "run"
    shutil.copytree(demo_dir, run)
    (run / damaged).write_text("{bad", encoding="utf-8")
    shutil.rmtree(run / FILES_DIR)
    (run / "report.html").unlink(missing_ok=True)
    capsys.readouterr()
    assert main(["report", str(run)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"wellwright report: {run / damaged}: ")
    assert "not valid JSON (" in err[0] and "line 1, column 2" in err[0]
    assert not (run / "report.html").exists() and not (run / FILES_DIR).exists()


def test_a_budget_below_the_methods_smallest_design_is_said_to_be_raised():
    # fuzz find: `wellwright run --samples 8 --method sobol` reported "(144 of a budget of 8
    # evaluations used)": Sobol's smallest design here was 8 base samples of D + 2 = 18
    # evaluations, so the budget was raised to 144
    from wellwright.optimize.report.build import _resolution_text

    ranking = {"resolved": False, "leader": "a", "indistinguishable_from_zero": []}
    raised = _resolution_text({**ranking, "evaluations": 144, "budget": 8})
    assert "of a budget of" not in raised
    assert "144 evaluations used: the budget of 8 (--samples)" in raised
    assert "smallest design, so it was raised by 136" in raised
    kept = _resolution_text({**ranking, "evaluations": 96, "budget": 128})
    assert "96 of a budget of 128 evaluations used" in kept


def test_control_table_names_no_control_first_when_every_score_is_zero(tmp_path):
    # fuzz find: a Monte Carlo run with 100 % yield scores every control 0.0 and has no
    # ranking; the table's head named the first layer of the stack
    from wellwright.optimize.report.build import _control_html
    from wellwright.optimize.tolerance.analysis import NO_CONTROL_STANDS_OUT

    measure = "correlation of |deviation| with failure (Monte Carlo)"
    order = [
        {"control": f"layer {n}", "parameters": [f"{n}.x"], "score": 0.0, "measure": measure}
        for n in ("emitter", "spacer1")
    ]
    html = _control_html({"control_order": order}, tmp_path, "rank01")
    assert NO_CONTROL_STANDS_OUT in html and "emitter first" not in html
    assert html.count("no effect distinguishable from zero") == 2


def test_control_table_does_not_rank_what_is_indistinguishable_from_zero(tmp_path):
    # the table said "layer well 0.75" under a ranking that listed the well's thickness as
    # "no effect distinguishable from zero" (the quick demo's report): one rule for both
    from wellwright.optimize.report.build import _control_html

    measure = "Morris mu* of pass/fail"
    record = {
        "ranking": {"indistinguishable_from_zero": ["well.thickness_ml", "In.flux"]},
        "control_order": [
            {"control": "layer well", "parameters": ["well.thickness_ml"], "score": 0.75},
            {"control": "layer barrier1", "parameters": ["barrier1.thickness_ml"], "score": 0.5},
            {"control": "In cell", "parameters": ["In.flux"], "score": 0.1},
        ],
    }
    for row in record["control_order"]:
        row["measure"] = measure
    html = _control_html(record, tmp_path, "rank01")
    assert "layer barrier1 first" in html
    assert html.count("no effect distinguishable from zero") == 2
    assert "0.75" not in html
    record["ranking"]["indistinguishable_from_zero"].append("barrier1.thickness_ml")
    assert "no source cell or layer stands out" in _control_html(record, tmp_path, "rank01")


def test_report_cautions_where_the_island_mixture_was_truncated_too_far(demo_dir, tmp_path):
    """A tolerance record whose island check says 'indicative only' puts a caution at the top
    of that design's growth check (issue 17: the truncation error stated where it matters)."""
    from wellwright.optimize.report.build import build_report

    run = tmp_path / "run"
    shutil.copytree(demo_dir, run)
    tol = sorted((run / "tolerance").glob("rank*/tolerance.json"))[0]
    rec = json.loads(tol.read_text())
    rec["islands"]["warning"] = "the island mixture misses it (invented for the test)"
    tol.write_text(json.dumps(rec))
    build_report(run)
    html = _html(run)
    assert "<b>Monolayer islands.</b> The island mixture misses it (invented for the test)" in html


def test_report_describes_the_model_from_the_run_record(demo_dir, tmp_path):
    """The model section comes from what ran (tolerance.json's model record), not from
    re-reading the study: a record that says another roughness shows in the report."""
    from wellwright.optimize.report.build import build_report
    from wellwright.optimize.shared.model_text import model_from_record, model_record
    from wellwright.physics.stack import ModelOptions

    odd = ModelOptions(electrostatics="linear", roughness_height_nm=0.77, broadening_mev=1.5)
    assert model_from_record(model_record(odd)) == odd
    run = tmp_path / "run"
    shutil.copytree(demo_dir, run)
    for tol in sorted((run / "tolerance").glob("rank*/tolerance.json")):
        rec = json.loads(tol.read_text())
        rec["model"]["roughness_height_nm"] = 0.77
        tol.write_text(json.dumps(rec))
    build_report(run)
    assert "height 0.77 nm" in _html(run)


def test_candidates_count_distinct_designs_not_copies():
    # the full demo's report said "250 complete trials, 138 meet the spec" for a search of
    # 150 designs: a design the sampler suggests again is stored as a copy of its first
    # evaluation, so the count a designer wants is of distinct designs (exact, no physics)
    from wellwright.optimize.report.build import _distinct_designs

    points = [
        {"params": {"a": 4.0, "b": 0.5}, "feasible": False},
        {"params": {"b": 0.5, "a": 4.0}, "feasible": False},  # a copy, keys in another order
        {"params": {"a": 5.0, "b": 0.5}, "feasible": True},
        {"params": {"a": 5.0, "b": 0.5}, "feasible": True},
        {"params": {"a": 6.0, "b": float("nan")}, "feasible": False},
        {"params": {"a": 6.0, "b": float("nan")}, "feasible": False},
    ]
    assert _distinct_designs(points) == (3, 1)


def test_failure_bars_sit_by_their_design_label():
    # Only the causes some design has get a slot, centred on the design's label (before, one
    # cause among five sat 0.32 below its label, the empty causes' slots pushing it down).
    from wellwright.optimize.report.figures import yield_figure

    causes = ["peak_current_density_a_cm2", "peak_voltage_v", "pvcr", "no_ndr", "solve_failed"]
    record = {
        "design": {"rank": 1},
        "yield": {"value": 0.6, "ci_low": 0.5, "ci_high": 0.7, "passed": 38, "samples": 64},
        "failures": {k: 26 if k == causes[0] else 0 for k in causes},
    }
    fig = yield_figure([record])
    bars = [p for p in fig.axes[1].patches if p.get_width() > 0]
    assert len(bars) == 1
    centre = bars[0].get_y() + 0.5 * bars[0].get_height()
    assert centre == pytest.approx(0.0, abs=1e-9)  # the label's tick is at 0
    assert bars[0].get_width() == pytest.approx(100 * 26 / 64)
