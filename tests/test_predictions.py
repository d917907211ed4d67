"""Reactor predictions from a saved posterior: files, answers against the physics, flags and bad scenarios."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from inference.physics.arrhenius import R
from inference.workflows.predict import _first_crossing

TRUE = {"first": (0.12, 60_000.0), "second": (0.04, 75_000.0)}  # k at 330 K (1/min), Ea (J/mol)
SCENARIOS = """\
scenarios:
  - name: batch-60C
    reactor: batch
    temperature: 60
    initial: {A: 1.0}
    until: 120
    key_reactant: A
    products: [B]
    target_conversion: 0.9
    spec: {conversion: 0.5, by: 10}
    intermediate: B
  - name: cstr-60C
    reactor: cstr
    temperature: 60
    initial: {A: 1.0}
    residence_times: [5, 20]
    key_reactant: A
    target_conversion: 0.5
"""


def test_fit_runs_the_study_scenarios(fitted):
    _, result = fitted
    folder = result.results_dir / "predictions"
    names = {p.name for p in folder.iterdir()}
    assert {"batch-60C.csv", "batch-60C.png", "cstr-60C.csv", "summary.csv", "cautions.txt", "manifest.json"} <= names
    table = pd.read_csv(folder / "batch-60C.csv")
    # Column names carry the time unit; fractions say so in `unit` (first-hour readability).
    assert list(table.columns) == ["scenario", "time_min", "quantity", "unit", "median", "q05", "q25", "q75", "q95"]
    assert set(table.loc[table["quantity"] == "conversion[A]", "unit"]) == {"fraction"}
    assert {"c[A]", "c[B]", "c[C]", "conversion[A]", "yield[B]", "selectivity[B]"} <= set(table["quantity"])
    cstr = pd.read_csv(folder / "cstr-60C.csv")
    assert "residence_time_min" in cstr.columns


def test_answers_agree_with_the_closed_forms_at_the_posterior(fitted):
    _, result = fitted
    summary = pd.read_csv(result.results_dir / "predictions" / "summary.csv").set_index("quantity")
    posterior = result.idata.posterior
    kelvin = 333.15
    ln_k = posterior["ln_k_ref"] - posterior["Ea"] / R * (1 / kelvin - 1 / 330.0)
    k1 = np.exp(ln_k.sel(reaction="first")).values.ravel()
    k2 = np.exp(ln_k.sel(reaction="second")).values.ravel()
    # First order batch: t(X) = -ln(1 - X)/k1; CSTR: tau(X) = X / (k1 (1 - X)); consecutive first-order steps
    # peak at t_max = ln(k2/k1)/(k2 - k1) (Levenspiel, Chemical Reaction Engineering, ch. 3 and 5; from memory).
    checks = {
        "time to 90% conversion of A": -np.log(0.1) / k1,
        "residence_time to 50% conversion of A": 0.5 / (k1 * 0.5),
        "time of maximum B": np.log(k2 / k1) / (k2 - k1),
    }
    for quantity, exact in checks.items():
        row = summary.loc[quantity]
        # Same posterior, different subsets of draws and grid resolution: medians agree to about 1 %.
        assert row["median"] == pytest.approx(np.median(exact), rel=0.01), quantity
        assert row["q05"] < np.median(exact) < row["q95"], quantity
    spec = summary.loc["conversion of A at 10 min"]
    assert spec["share"] == pytest.approx(np.mean(1 - np.exp(-k1 * 10) >= 0.5), abs=0.05)


def test_a_cstr_residence_time_is_read_off_its_log_spaced_grid_without_bias():
    # Steady-state CSTR design equations (Levenspiel, Chemical Reaction Engineering, ch. 5; from memory):
    # first order X / (1 - X) = k tau, second order k c0 tau = X / (1 - X)^2. On the 48-point grid of the search
    # (0.01 .. 1000, ratio 1.28 per point), read at 50 % and 90 % conversion.
    taus = np.geomspace(0.01, 1000.0, 48)
    k = np.array([0.37, 2.9, 11.0])
    first = k[:, None] * taus / (1 + k[:, None] * taus)
    damkohler = k[:, None] * taus  # second order, c0 = 1: X = 1 + (1 - sqrt(1 + 4 Da)) / (2 Da)
    second = 1 + (1 - np.sqrt(1 + 4 * damkohler)) / (2 * damkohler)
    for target in (0.5, 0.9):
        odds = target / (1 - target)
        np.testing.assert_allclose(_first_crossing(taus, first, target, log_odds=True), odds / k, rtol=1e-12)
        exact = target / (1 - target) ** 2 / k
        np.testing.assert_allclose(_first_crossing(taus, second, target, log_odds=True), exact, rtol=2e-3)
        # Linear in tau, as the search read it before: late by up to 1.3 % on this grid.
        assert np.max(_first_crossing(taus, first, target) / (odds / k)) > 1.005


def test_extrapolated_scenario_is_flagged(fitted, run_cli, tmp_path):
    _, result = fitted
    scenarios = tmp_path / "hot.yaml"
    scenarios.write_text(SCENARIOS.replace("temperature: 60", "temperature: 95"))
    code, out, _ = run_cli("predict", result.results_dir, scenarios, "--out", tmp_path / "hot", "--draws", "100")
    assert code == 0
    assert "EXTRAPOLATED: scenario batch-60C: temperature 95 degC is 30 K above" in out
    assert "process-safety review" in out
    assert "EXTRAPOLATED" in (tmp_path / "hot" / "cautions.txt").read_text()


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        (SCENARIOS.replace("initial: {A: 1.0}\n    until", "initial: {Z: 1.0}\n    until"), "scenarios[0].initial"),
        (
            SCENARIOS.replace(
                "    temperature: 60\n    initial: {A: 1.0}\n    until", "    initial: {A: 1.0}\n    until"
            ),
            "needs 'temperature'",
        ),
        (SCENARIOS.replace("reactor: cstr", "reactor: tank"), "scenarios[1].reactor"),
        (SCENARIOS.replace("until: 120", "untl: 120"), "did you mean 'until'"),
        (SCENARIOS.replace("initial: {A: 1.0}\n    until", "initial: {B: 1.0}\n    until"), "needs a positive amount"),
        ("scenarios: []\n", "scenarios"),
    ],
)
def test_bad_scenarios_give_exit_2(fitted, run_cli, tmp_path, text, fragment):
    _, result = fitted
    scenarios = tmp_path / "bad.yaml"
    scenarios.write_text(text)
    out = tmp_path / "bad-out"
    code, _, stderr = run_cli("predict", result.results_dir, scenarios, "--out", out)
    assert code == 2, stderr
    assert len(stderr.strip().splitlines()) == 1
    assert fragment in stderr
    assert not out.exists()


def test_predict_needs_a_results_folder(run_cli, tmp_path):
    (tmp_path / "s.yaml").write_text(SCENARIOS)
    code, _, stderr = run_cli("predict", tmp_path / "nowhere", tmp_path / "s.yaml")
    assert code == 2
    assert "results folder not found" in stderr


def test_scenario_units_are_honoured(fitted, tmp_path):
    # The same batch stated in hours, degF and mmol/L gives the same answers converted (exact unit factors).
    from inference import predict

    _, result = fitted
    stated = tmp_path / "imperial.yaml"
    stated.write_text("""\
units: {time: h, temperature: degF, concentration: mmol/L}
draws: 200
scenarios:
  - name: batch
    reactor: batch
    temperature: 140
    initial: {A: 1000}
    until: 2
    key_reactant: A
    target_conversion: 0.9
    intermediate: B
""")
    plain = tmp_path / "plain.yaml"
    plain.write_text("""\
draws: 200
scenarios:
  - name: batch
    reactor: batch
    temperature: 60
    initial: {A: 1.0}
    until: 120
    key_reactant: A
    target_conversion: 0.9
    intermediate: B
""")
    a = predict(result.results_dir, stated, out=tmp_path / "a", quiet=True).summary.set_index("quantity")
    b = predict(result.results_dir, plain, out=tmp_path / "b", quiet=True).summary.set_index("quantity")
    assert a.loc["time to 90% conversion of A", "unit"] == "h"
    assert a.loc["time to 90% conversion of A", "median"] == pytest.approx(
        b.loc["time to 90% conversion of A", "median"] / 60, rel=1e-3
    )
    assert a.loc["maximum concentration of B", "median"] == pytest.approx(
        1000 * b.loc["maximum concentration of B", "median"], rel=1e-3
    )


def test_temperature_for_a_half_life_inverts_the_same_law_as_the_profiles(fitted):
    # Found: `temperature_for: {reaction, half_life}` inverted the plain Arrhenius law inline, ignoring the
    # temperature exponent and a new run's shift that the profiles apply. Reference: the extended law
    # k = k_ref (T/T_ref)^n exp(-(Ea/R)(1/T - 1/T_ref)) e^shift solved for k = ln 2 / t_half by scipy's brentq.
    from dataclasses import replace
    from types import SimpleNamespace

    from scipy.optimize import brentq

    from inference.inputs.schema import TemperatureFor
    from inference.posterior.draws import parameter_draws, pick_draws
    from inference.workflows.predict import _Predictor

    _, result = fitted
    posterior = result.idata.posterior
    draws = parameter_draws(result.study, posterior, 330.0, pick_draws(posterior, 40))
    rng = np.random.default_rng(5)
    exponent = np.zeros_like(draws.ln_k_ref)
    exponent[:, 0] = 1.5
    draws = replace(draws, exponent=exponent, new_run_shift=rng.normal(0.0, 0.3, draws.ln_k_ref.shape))
    predictor = _Predictor(result.study, draws, (318.15, 338.15))
    half_life = 2.0
    target = TemperatureFor(between=(0.0, 150.0), reaction="first", half_life=half_life)
    found = predictor.temperature_for(SimpleNamespace(temperature_for=target), "test")

    for d in range(draws.size):
        ln_k_ref, ea, shift = draws.ln_k_ref[d, 0], draws.ea[d, 0], draws.new_run_shift[d, 0]

        def gap(kelvin, ln_k_ref=ln_k_ref, ea=ea, shift=shift):
            law = ln_k_ref + 1.5 * np.log(kelvin / 330.0) - ea / R * (1 / kelvin - 1 / 330.0) + shift
            return law - np.log(np.log(2.0) / half_life)

        if gap(273.15) > 0 or gap(423.15) < 0:
            assert np.isnan(found[d])
        else:
            assert found[d] == pytest.approx(brentq(gap, 273.15, 423.15, xtol=1e-10), abs=1e-6)
    assert np.isfinite(found).sum() > draws.size // 2  # the check above ran on most draws
