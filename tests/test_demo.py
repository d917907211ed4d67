"""The bundled demo: committed data equal the generator's output, the dosed demo's profiles agree with scipy, and
the fits recover the true values."""

from __future__ import annotations

import itertools
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import solve_ivp

from inference import fit_study
from inference.physics.arrhenius import ln_rate_constant
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
    demo.DOSED_STUDY_FILE,
    demo.DOSED_RUNS_FILE,
    demo.DOSED_TEMPERATURES_FILE,
    demo.DOSED_FEEDS_FILE,
    demo.DOSED_MEASUREMENTS_FILE,
    demo.AREA_STUDY_FILE,
    demo.AREA_RUNS_FILE,
    demo.AREA_MEASUREMENTS_FILE,
)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory) -> tuple[Path, subprocess.CompletedProcess]:
    """One full ``arrhenia demo`` (every fitted demo study, the comparison, the predictions), shared by the tests
    that read its results."""
    out = tmp_path_factory.mktemp("demo") / "demo"
    run = subprocess.run(
        [sys.executable, "-m", "inference", "demo", "--out", str(out)], capture_output=True, text=True, timeout=1800
    )
    return out, run


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


def test_check_prints_the_resolved_dosed_study(run_cli):
    code, out, _ = run_cli("check", REPO / "data_demo" / demo.DOSED_STUDY_FILE)
    assert code == 0
    assert "5 runs" in out and "90 measurements" in out  # 32 samples of A, P and I; 6 of I below the limit
    assert "not measured: B" in out
    assert "coupling: A + B -> P, mass_action" in out


def test_dosed_demo_profiles_agree_with_solve_ivp():
    # The generator's profiles (Arrhenia's compiled solver under each run's temperature log and pump programme)
    # against scipy's DOP853 (rtol 1e-11) on the balances of a fed batch written out here: for concentrations,
    # dc/dt = S^T r + Q (c_feed - c) / V and dV/dt = Q (the semi-batch balance, e.g. Levenspiel ch. 5; from
    # memory). T(t) is the log joined by straight lines, so the reference integrates piece by piece between the
    # log's times and the pump's switching times.
    _, _, _, setups, times = demo.dosed_setups()
    initial = np.array([[a0, 0.0, 0.0, 0.0] for _, _, _, a0, *_ in demo.DOSED_RUNS])
    profiles = demo.dosed_profiles(setups, times, initial)
    (_, k1, ea1), (_, k2, ea2) = demo.TRUE_DOSED.values()
    feed = np.array([0.0, demo.DOSED_FEED_B, 0.0, 0.0])
    for setup, sampled, start, profile in zip(setups, times, initial, profiles, strict=True):

        def balances(t, y, setup=setup):
            c, volume = y[:4], y[4]
            kelvin = np.interp(t, setup.history[:, 0], setup.history[:, 1])
            r1 = np.exp(ln_rate_constant(kelvin, np.log(k1), ea1, demo.T_REF_K)) * c[0] * c[1]
            r2 = np.exp(ln_rate_constant(kelvin, np.log(k2), ea2, demo.T_REF_K)) * c[2]
            flow = sum(f.rate for f in setup.feeds if f.start <= t < f.stop)
            return [*(np.array([-r1, -r1, r1 - r2, r2]) + flow * (feed - c) / volume), flow]

        switches = {0.0, *setup.history[:, 0], *(f.start for f in setup.feeds), *(f.stop for f in setup.feeds)}
        edges = sorted(t for t in switches | {float(sampled[-1])} if t <= sampled[-1])
        state, reference = np.array([*start, setup.volume]), {}
        for a, b in itertools.pairwise(edges):
            piece = solve_ivp(balances, (a, b), state, method="DOP853", rtol=1e-11, atol=1e-14, dense_output=True)
            reference |= {t: piece.sol(t)[:4] for t in sampled if a <= t <= b}
            state = piece.y[:, -1]
        expected = np.array([reference[t] for t in sampled])
        np.testing.assert_allclose(profile, expected, rtol=1e-6, atol=1e-9)


def test_rate_constant_example_recovers_true_values(tmp_path):
    result = fit_study(
        REPO / "data_demo" / demo.RATE_STUDY_FILE, out=tmp_path / "res", draws=500, tune=500, chains=2, quiet=True
    )
    summary = result.summary.set_index("parameter")
    truths = {"Ea[closure]": demo.TRUE_EA_J_PER_MOL / 1000, "k[closure, 65 degC]": demo.TRUE_K_REF_PER_MIN}
    for name, truth in truths.items():
        assert summary.loc[name, "q05"] < truth < summary.loc[name, "q95"], name


def test_network_demo_end_to_end_recovers_true_parameters(demo_run):
    out, run = demo_run
    assert run.returncode == 0, run.stderr
    assert "BLAS" not in run.stderr  # PyTensor's notice about its pip install is not the user's business
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


def test_dosed_demo_recovers_true_parameters(demo_run):
    out, run = demo_run
    assert run.returncode in (0, 3), run.stderr  # 3: some fit's verdict is not "pass"; its verdict is read below
    fit = out / "results" / "demo-dosed-heatup"
    assert json.loads((fit / "diagnostics.json").read_text())["verdict"] != "fail"
    summary = pd.read_csv(fit / "summary.csv").set_index("parameter")
    for reaction, (_, k60, ea) in demo.TRUE_DOSED.items():  # T_ref is 60 degC in dosed_study.yaml
        for name, truth in ((f"Ea[{reaction}]", ea / 1000), (f"k_ref[{reaction}]", k60)):
            assert summary.loc[name, "q05"] < truth < summary.loc[name, "q95"], name
    checks = pd.read_csv(fit / "fit_checks.csv")
    assert len(checks) == 90 and set(checks["run"]) == {r[0] for r in demo.DOSED_RUNS}


def test_area_percent_demo_recovers_true_parameters_from_shares_and_limits(demo_run):
    # Area % of A -> P -> I with I below its 0.05 % reporting limit early on (censored): first-order steps are
    # pinned by shares alone. Truth within 3 posterior sd (see tests/test_network_model.py::assert_recovered).
    out, run = demo_run
    assert run.returncode in (0, 3), run.stderr
    fit = out / "results" / "demo-area-percent"
    assert json.loads((fit / "diagnostics.json").read_text())["verdict"] != "fail"
    summary = pd.read_csv(fit / "summary.csv").set_index("parameter")
    for reaction, (_, k60, ea) in demo.TRUE_AREA.items():  # T_ref is 60 degC in area_study.yaml
        for name, truth in ((f"Ea[{reaction}]", ea / 1000), (f"k_ref[{reaction}]", k60)):
            row = summary.loc[name]
            assert abs(row["mean"] - truth) < 3 * row["sd"], (name, truth, row["mean"], row["sd"])
    checks = pd.read_csv(fit / "fit_checks.csv")
    assert {"quantity", "censored"} <= set(checks.columns)
    assert (checks["censored"] == "below").sum() == sum(
        line.count("<") for line in (REPO / "data_demo" / demo.AREA_MEASUREMENTS_FILE).read_text().splitlines()
    )
    assert (fit / "figures" / "measured_quantities.png").exists()
