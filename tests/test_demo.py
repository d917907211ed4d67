"""The bundled demo: committed data equal the generator's output, and the fits recover the true values."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pandas as pd

from inference import fit_study
from inference.workflows import demo

REPO = Path(__file__).resolve().parents[1]
DEMO_FILES = (
    demo.STUDY_FILE,
    demo.ALTERNATIVE_STUDY_FILE,
    demo.RUNS_FILE,
    demo.MEASUREMENTS_FILE,
    demo.RATE_STUDY_FILE,
    demo.RATE_CONSTANTS_FILE,
    demo.CATALYST_STUDY_FILE,
    demo.CATALYST_RUNS_FILE,
    demo.CATALYST_MEASUREMENTS_FILE,
)


def test_committed_demo_data_are_what_the_generator_writes(tmp_path):
    demo.write_demo(tmp_path)
    for name in DEMO_FILES:
        assert (tmp_path / name).read_text() == (REPO / "data_demo" / name).read_text(), name


def test_check_prints_the_resolved_network_study(run_cli):
    code, out, _ = run_cli("check", REPO / "data_demo" / demo.STUDY_FILE)
    assert code == 0
    assert "5 runs" in out and "180 measurements" in out
    assert "not measured: B" in out
    assert "coupling: A + B -> C, mass_action" in out


def test_check_prints_the_resolved_rate_constant_study(run_cli):
    code, out, _ = run_cli("check", REPO / "data_demo" / demo.RATE_STUDY_FILE)
    assert code == 0
    assert "18 measured rate constants" in out
    assert "T_ref = 337.29 K" in out  # 1/mean(1/T) over 40..90 degC, three replicates each (arithmetic)


def test_rate_constant_example_recovers_true_values(tmp_path):
    result = fit_study(
        REPO / "data_demo" / demo.RATE_STUDY_FILE, out=tmp_path / "res", draws=500, tune=500, chains=2, quiet=True
    )
    summary = result.summary.set_index("parameter")
    truths = {"Ea[closure]": demo.TRUE_EA_J_PER_MOL / 1000, "k[closure, 65 degC]": demo.TRUE_K_REF_PER_MIN}
    for name, truth in truths.items():
        assert summary.loc[name, "q05"] < truth < summary.loc[name, "q95"], name


def test_network_demo_end_to_end_recovers_true_parameters(tmp_path):
    out = tmp_path / "demo"
    run = subprocess.run(
        [sys.executable, "-m", "inference", "demo", "--out", str(out)], capture_output=True, text=True, timeout=900
    )
    assert run.returncode == 0, run.stderr
    assert "diagnostics: PASS" in run.stdout
    assert "EXTRAPOLATED: k at 25 degC" in run.stdout  # 25 degC is below the 40-80 degC runs
    fit = out / "results" / "demo-coupling"
    summary = pd.read_csv(fit / "summary.csv").set_index("parameter")
    for reaction, (k60, ea) in demo.TRUE_NETWORK.items():
        for name, truth in ((f"Ea[{reaction}]", ea / 1000), (f"k[{reaction}, 60 degC]", k60)):
            assert summary.loc[name, "q05"] < truth < summary.loc[name, "q95"], name
    figures = {p.name for p in (fit / "figures").iterdir()}
    assert {"arrhenius.png", "pair.png"} | {f"run_{r[0]}.png" for r in demo.RUNS} <= figures
    # The demo data were made with the second-order law, so the comparison must prefer it.
    comparison = pd.read_csv(out / "results" / "comparison" / "comparison.csv")
    best = comparison[comparison["rank"] == 1]
    assert set(best["candidate"]) == {"demo-coupling"}
    assert "demo-coupling is preferred over demo-coupling-first-order" in run.stdout
    again = subprocess.run(
        [sys.executable, "-m", "inference", "demo", "--out", str(out)], capture_output=True, text=True, timeout=600
    )
    assert again.returncode == 2
    assert "--overwrite" in again.stderr
