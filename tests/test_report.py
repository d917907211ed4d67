"""report.html: self-contained, and readable when a real browser renders it (headless Chromium)."""

from __future__ import annotations

import re
import shutil
import subprocess

import matplotlib.image
import pytest
from conftest import BASE_STUDY, BASE_TABLE

from inference import fit_study

CHROMIUM_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--disable-quic",
]


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    (folder / "k.csv").write_text(BASE_TABLE)
    (folder / "study.yaml").write_text(BASE_STUDY + "report: {k_at: [20]}\n")
    result = fit_study(folder / "study.yaml", out=folder / "res", quiet=True)
    return result.results_dir / "report.html"


def test_report_is_self_contained(report):
    text = report.read_text()
    assert "<img" in text and "data:image/png;base64," in text
    # Nothing is fetched: no src or href pointing anywhere but embedded data.
    assert not re.search(r'(src|href)="(?!data:)', text)
    for heading in ("Study", "Parameters (posterior)", "Classical estimates beside them", "Figures", "Cautions"):
        assert f"<h2>{heading}</h2>" in text
    assert "EXTRAPOLATED: k at 20 degC" in text
    assert "@media print" in text
    assert "<td>None</td>" not in text and "<td>nan</td>" not in text  # a value that does not apply is blank


def test_report_renders_in_headless_chromium(report, tmp_path):
    browser = shutil.which("chromium") or shutil.which("chromium-browser")
    if browser is None:
        pytest.skip("chromium is not installed here (.ci/run installs Debian's chromium package)")
    profile = tmp_path / "profile"
    common = [browser, *CHROMIUM_FLAGS, f"--user-data-dir={profile}"]
    dom = subprocess.run([*common, "--dump-dom", report.as_uri()], capture_output=True, text=True, timeout=120)
    assert dom.returncode == 0, dom.stderr[-2000:]
    visible = re.sub(r"<[^>]+>", " ", dom.stdout)
    for phrase in ("Diagnostics:", "Ea[step]", "k_ref[step]", "Least squares", "process-safety review"):
        assert phrase in visible, phrase
    shot = tmp_path / "report.png"
    subprocess.run(
        [*common, f"--screenshot={shot}", "--window-size=1200,2400", report.as_uri()],
        capture_output=True,
        text=True,
        timeout=120,
        check=True,
    )
    pixels = matplotlib.image.imread(shot)
    assert pixels.shape[0] >= 2000 and pixels.shape[1] >= 1100
    gray = pixels[..., :3].mean(axis=-1)
    assert gray.std() > 0.05  # text, tables and figures, not a blank page
    assert (gray < 0.5).mean() > 0.005  # some dark ink (text) on the page
