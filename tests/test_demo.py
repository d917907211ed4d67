"""The bundled demo: committed data equal the generator's output, and ``arrhenia demo`` recovers the truth."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd

from inference import demo

REPO = Path(__file__).resolve().parents[1]


def test_committed_demo_data_are_what_the_generator_writes(tmp_path):
    demo.write_demo(tmp_path)
    for name in (demo.STUDY_FILE, demo.RATE_CONSTANTS_FILE):
        assert (tmp_path / name).read_text() == (REPO / "data_demo" / name).read_text(), name


def test_check_prints_the_resolved_study(run_cli):
    code, out, _ = run_cli("check", REPO / "data_demo" / "study.yaml")
    assert code == 0
    assert "18 measured rate constants" in out
    assert "T_ref = 337.29 K" in out  # 1/mean(1/T) over 40..90 degC, three replicates each


def test_demo_end_to_end_recovers_true_parameters(tmp_path):
    out = tmp_path / "demo"
    run = subprocess.run(
        [sys.executable, "-m", "inference", "demo", "--out", str(out)], capture_output=True, text=True, timeout=600
    )
    assert run.returncode == 0, run.stderr
    assert "diagnostics: PASS" in run.stdout
    assert "EXTRAPOLATED: k at 25 degC" in run.stdout  # 25 degC is below the 40-90 degC data
    summary = pd.read_csv(out / "results" / "summary.csv").set_index("parameter")
    truths = {"Ea[closure]": demo.TRUE_EA_J_PER_MOL / 1000, "k[closure, 65 degC]": demo.TRUE_K_REF_PER_MIN}
    for name, truth in truths.items():
        assert summary.loc[name, "q05"] < truth < summary.loc[name, "q95"], name
    again = subprocess.run(
        [sys.executable, "-m", "inference", "demo", "--out", str(out)], capture_output=True, text=True, timeout=600
    )
    assert again.returncode == 2
    assert "--overwrite" in again.stderr
