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
import re
import shutil
import subprocess
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
