"""Questions about k from a saved posterior (`question: k_at | temperature_at`): answers against closed forms
computed from the same posterior draws, the first-order half-life, a round trip, the extended law's inverse against
scipy's brentq, and bad questions (exit 2, one line naming the file and the key)."""

from __future__ import annotations

import math
import textwrap
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from conftest import BASE_STUDY, BASE_TABLE
from scipy.optimize import brentq

from inference import fit_study, load_study, predict
from inference.errors import StudyError
from inference.inputs.schema import ScenarioUnits
from inference.physics.arrhenius import R, ln_rate_constant
from inference.posterior.draws import pick_draws
from inference.workflows.predict import _QuestionUnits, load_scenarios, temperature_for_ln_k

#: Odd, so that the median over the picked draws is one draw's value (the round trip is then exact).
DRAWS = 301


@pytest.fixture(scope="module")
def k_fit(tmp_path_factory):
    """One fit of the five rate constants of ``conftest.BASE_TABLE`` (k in 1/s, 30-70 degC)."""
    folder = tmp_path_factory.mktemp("k-predict")
    (folder / "study.yaml").write_text(BASE_STUDY)
    (folder / "k.csv").write_text(BASE_TABLE)
    return folder, fit_study(folder / "study.yaml", out=folder / "res", quiet=True)


def _ask(folder, text: str, out: str):
    path = folder / f"{out}.yaml"
    path.write_text(textwrap.dedent(text))
    return predict(folder / "res", path, out=folder / out, overwrite=True, quiet=True)


def _draws(result) -> tuple[np.ndarray, np.ndarray, float]:
    """ln k_ref (ln of 1/s) and Ea (J/mol) of the draws ``predict`` picks, and T_ref (K)."""
    posterior = result.idata.posterior
    picks = pick_draws(posterior, DRAWS)
    assert picks.size % 2 == 1
    stacked = posterior.stack(sample=("chain", "draw")).isel(sample=picks)
    ln_k_ref = stacked["ln_k_ref"].sel(reaction="step").values
    ea = stacked["Ea"].sel(reaction="step").values
    return ln_k_ref, ea, result.reference_temperature_K


def _quantiles(values: np.ndarray) -> dict[str, float]:
    q05, median, q95 = np.quantile(values, [0.05, 0.5, 0.95])
    return {"q05": q05, "median": median, "q95": q95}


def test_temperature_for_k_is_the_closed_form_of_every_draw(k_fit):
    folder, fit = k_fit
    predicted = _ask(
        folder,
        f"""\
        draws: {DRAWS}
        scenarios:
          - name: fast
            question: temperature_at
            reaction: step
            k: 2.0e-3
        """,
        "fast",
    )
    ln_k_ref, ea, reference = _draws(fit)
    # The Arrhenius law about T_ref solved for T: 1/T = 1/T_ref - (ln k - ln k_ref) R / Ea (exact algebra).
    exact = 1.0 / (1.0 / reference - (math.log(2.0e-3) - ln_k_ref) * R / ea)
    assert temperature_for_ln_k(math.log(2.0e-3), ln_k_ref, ea, reference) == pytest.approx(exact, rel=1e-12)
    row = predicted.summary.set_index("quantity").loc["temperature for k[step] = 0.002 1/s"]
    assert row["unit"] == "degC" and row["share"] == 1.0
    for column, value in _quantiles(exact - 273.15).items():
        assert row[column] == pytest.approx(value, rel=1e-9), column
    assert not row["extrapolated"]  # about 57 degC, inside 30-70 degC


def test_first_order_half_life_is_ln2_over_k_with_flags_files_and_cautions(k_fit):
    folder, fit = k_fit
    predicted = _ask(
        folder,
        f"""\
        units: {{time: min}}
        draws: {DRAWS}
        scenarios:
          - name: k-table
            question: k_at
            reaction: step
            temperatures: [35, 80]
            order: 1
        """,
        "k-table",
    )
    ln_k_ref, ea, reference = _draws(fit)
    summary = predicted.summary.set_index("quantity")
    for celsius, outside in ((35, False), (80, True)):
        k = np.exp(ln_rate_constant(celsius + 273.15, ln_k_ref, ea, reference))
        # First-order decay c = c0 exp(-k t) halves at t = ln 2 / k (the integrated rate law, from memory); k in 1/s,
        # the half-life in min.
        for quantity, values, unit in (
            (f"k[step, {celsius} degC]", k, "1/s"),
            (f"half_life[step, {celsius} degC]", math.log(2.0) / k / 60.0, "min"),
        ):
            row = summary.loc[quantity]
            assert row["unit"] == unit
            assert row["extrapolated"] == outside
            for column, value in _quantiles(values).items():
                assert row[column] == pytest.approx(value, rel=1e-9), (quantity, column)
    out = folder / "k-table"
    assert {"k-table.csv", "k-table.png", "summary.csv", "cautions.txt", "report.html", "manifest.json"} <= {
        p.name for p in out.iterdir()
    }
    table = pd.read_csv(out / "k-table.csv")
    assert list(table.columns) == [
        "scenario",
        "temperature_degC",
        "quantity",
        "unit",
        "median",
        "q05",
        "q25",
        "q75",
        "q95",
        "extrapolated",
    ]
    assert table["extrapolated"].tolist() == [False, False, True, True]
    assert pd.read_csv(out / "summary.csv")["extrapolated"].tolist() == [False, False, True, True]
    cautions = (out / "cautions.txt").read_text()
    assert "EXTRAPOLATED: scenario k-table: temperature 80 degC is 10 K above" in cautions
    assert "process-safety review" in cautions


def test_the_temperature_for_the_median_k_at_t0_is_t0(k_fit):
    folder, _ = k_fit
    at = _ask(
        folder,
        f"""\
        draws: {DRAWS}
        scenarios: [{{name: at, question: k_at, reaction: step, temperatures: [45]}}]
        """,
        "round-trip-k",
    )
    median_k = float(at.summary.set_index("quantity").loc["k[step, 45 degC]", "median"])
    back = _ask(
        folder,
        f"""\
        draws: {DRAWS}
        scenarios: [{{name: back, question: temperature_at, reaction: step, k: {median_k!r}}}]
        """,
        "round-trip-t",
    )
    # Per draw T(k*) < T0 exactly when k(T0) > k*, so with an odd number of draws the median temperature is that of
    # the draw whose k(T0) is the median k: T0 itself.
    assert float(back.summary["median"].iloc[0]) == pytest.approx(45.0, abs=1e-8)


def test_the_extended_law_is_inverted_on_its_rising_branch():
    rng = np.random.default_rng(11)
    count = 40
    ln_k_ref = rng.normal(-5.0, 1.0, count)
    ea = rng.uniform(30e3, 150e3, count)
    reference = 350.0
    for n in (-2.0, -0.5, -1e-7, 0.0, 1e-7, 0.8, 2.5):
        exponent = np.full(count, n)
        truth = rng.uniform(260.0, 600.0, count)
        if n < 0:  # k peaks at T = Ea/(R |n|); the rising branch lies below it
            truth = np.minimum(truth, 0.9 * ea / (R * -n))
        for d in range(count):
            wanted = float(ln_rate_constant(truth[d], ln_k_ref[d], ea[d], reference, n))
            found = temperature_for_ln_k(wanted, ln_k_ref[d : d + 1], ea[d : d + 1], reference, exponent[d : d + 1])

            def gap(kelvin, d=d, wanted=wanted, n=n):
                return float(ln_rate_constant(kelvin, ln_k_ref[d], ea[d], reference, n)) - wanted

            high = 0.999999 * ea[d] / (R * -n) if n < 0 else 1e5
            assert found[0] == pytest.approx(brentq(gap, 10.0, high, xtol=1e-12, rtol=1e-14), rel=1e-9), (n, d)
    # Out of reach: above A (n = 0) or above the peak (n < 0); never for n > 0.
    unreachable = temperature_for_ln_k(30.0, np.array([-5.0, -5.0, -5.0]), np.full(3, 50e3), 350.0, [0.0, -1.0, 1.0])
    assert np.isinf(unreachable[:2]).all() and np.isfinite(unreachable[2])


def test_half_life_units_and_the_second_order_closed_form():
    # Second order with equal initial concentrations: 1/c = 1/c0 + k t halves at t = 1 / (k c0) (integrated rate
    # law, from memory). k = 2 L/(mol s), c0 = 0.5 mmol/L: 1000 s = 16.67 min.
    stated = _QuestionUnits("degC", "min", "mmol/L")
    assert stated.half_life_numerator("L/(mol*s)", 2.0, 0.5) / 2.0 == pytest.approx(1000.0 / 60.0, rel=1e-12)
    assert stated.half_life_numerator("1/h", 1.0, None) == pytest.approx(60.0 * math.log(2.0), rel=1e-12)
    # A rate-constant study states only k's unit: the time and concentration are the ones it implies.
    study = SimpleNamespace(
        units=SimpleNamespace(temperature="degC", time=None, concentration=None, rate_constant="L/(mol*min)")
    )
    implied = _QuestionUnits.of(SimpleNamespace(units=ScenarioUnits()), study, "s.yaml")
    assert (implied.time, implied.concentration) == ("min", "mol/l")
    assert implied.half_life_numerator("L/(mol*min)", 2.0, 0.25) == pytest.approx(4.0, rel=1e-12)


SECOND_ORDER = BASE_STUDY.replace("rate_constant: 1/s", "rate_constant: L/(mol*s)")
ZEROTH_ORDER = BASE_STUDY.replace("rate_constant: 1/s", "rate_constant: mol/(L*s)")
QUESTION = "scenarios:\n  - {name: q, question: k_at, reaction: step, temperatures: [40]}\n"


@pytest.mark.parametrize(
    ("study", "text", "key", "fragment"),
    [
        (BASE_STUDY, QUESTION.replace("step", "stp"), "scenarios[0].reaction", "'stp' is not a reaction"),
        (BASE_STUDY, QUESTION.replace("[40]", "[40], order: 2"), "scenarios[0].order", "of order 1"),
        (SECOND_ORDER, QUESTION.replace("[40]", "[40], order: 2"), "scenarios[0].c0", "needs 'c0'"),
        (BASE_STUDY, QUESTION.replace("[40]", "[40], c0: 1"), "scenarios[0].c0", "second-order"),
        (ZEROTH_ORDER, QUESTION.replace("[40]", "[40], order: 0"), "scenarios[0].order", "not order 0"),
        (
            BASE_STUDY,
            "scenarios:\n  - {name: q, question: temperature_at, reaction: step, k: -0.1}\n",
            "scenarios[0].k",
            "greater than 0",
        ),
        (
            BASE_STUDY,
            "scenarios:\n  - {name: q, question: temperature_at, reaction: step, half_life: 0}\n",
            "scenarios[0].half_life",
            "greater than 0",
        ),
        (BASE_STUDY, QUESTION.replace("question: k_at", "question: temperature_at"), "scenarios[0]", "one target"),
        (BASE_STUDY, QUESTION.replace("[40]", "[40], until: 5"), "scenarios[0]", "'until' is for reactor"),
        (BASE_STUDY, QUESTION.replace("question: k_at, ", ""), "scenarios[0]", "give either 'reactor'"),
        (
            BASE_STUDY,
            "scenarios:\n  - {name: b, reactor: batch, temperature: 40, initial: {A: 1}, until: 5}\n",
            "scenarios[0].reactor",
            "need a reaction network",
        ),
    ],
)
def test_bad_questions_name_the_file_and_key(tmp_path, study, text, key, fragment):
    (tmp_path / "study.yaml").write_text(study)
    (tmp_path / "k.csv").write_text(BASE_TABLE)
    (tmp_path / "q.yaml").write_text(text)
    with pytest.raises(StudyError) as raised:
        load_scenarios(tmp_path / "q.yaml", load_study(tmp_path / "study.yaml"))
    message = str(raised.value)
    assert "q.yaml" in message and key in message and fragment in message, message


@pytest.mark.parametrize(
    ("question", "key", "fragment"),
    [
        ("{name: q, question: temperature_at, reaction: step, k: 1.0e+30}", "scenarios[0].k", "no posterior draw"),
        ("{name: q, question: k_at, reaction: nope, temperatures: [40]}", "scenarios[0].reaction", "not a reaction"),
        ("{name: q, question: k_at, reaction: step, temperatures: [-280]}", "scenarios[0].temperatures", "zero"),
    ],
)
def test_bad_questions_exit_2_on_one_line(k_fit, run_cli, question, key, fragment):
    folder, _ = k_fit
    path = folder / "bad.yaml"
    path.write_text(f"scenarios:\n  - {question}\n")
    code, _, stderr = run_cli("predict", folder / "res", path, "--out", folder / "bad-out")
    assert code == 2, stderr
    assert len(stderr.strip().splitlines()) == 1
    assert "bad.yaml" in stderr and key in stderr and fragment in stderr, stderr
    assert not (folder / "bad-out").exists()


def test_a_network_step_is_asked_the_same_questions(fitted, tmp_path):
    # The chain A -> B -> C of conftest: the first-order step's half-life is ln 2 / k at the same draws.
    from inference.posterior.draws import parameter_draws

    _, result = fitted
    path = tmp_path / "q.yaml"
    path.write_text(
        f"draws: {DRAWS}\nscenarios:\n  - {{name: q, question: k_at, reaction: first, temperatures: [60]}}\n"
    )
    summary = predict(result.results_dir, path, out=tmp_path / "q", quiet=True).summary.set_index("quantity")
    posterior = result.idata.posterior
    draws = parameter_draws(result.study, posterior, result.reference_temperature_K, pick_draws(posterior, DRAWS))
    k = np.exp(draws.ln_k(333.15)[:, 0])
    row = summary.loc["half_life[first, 60 degC]"]
    assert row["unit"] == "min"
    assert row["median"] == pytest.approx(np.median(math.log(2.0) / k), rel=1e-9)


def test_questions_in_the_study_file_are_answered_by_the_fit(make_study):
    # A rate-constant study may list its questions under `scenarios:`; `fit` answers them after sampling, as it
    # does a network's reactor scenarios. t1/2 = ln 2 / k (first order; textbook).
    study = make_study(
        BASE_STUDY + "scenarios:\n  - {name: at-50, question: k_at, reaction: step, temperatures: [50]}\n"
    )
    result = fit_study(study, out=study.parent / "res", quiet=True)
    summary = pd.read_csv(study.parent / "res" / "predictions" / "summary.csv").set_index("quantity")
    k = summary.loc["k[step, 50 degC]", "median"]
    assert summary.loc["k[step, 50 degC]", "unit"] == "1/s"
    assert math.isclose(summary.loc["half_life[step, 50 degC]", "median"], math.log(2) / k, rel_tol=0.02)
    assert result.predictions is not None


def test_a_reactor_scenario_in_a_rate_constant_study_file_is_refused(make_study, run_cli):
    study = make_study(
        BASE_STUDY + "scenarios:\n  - {name: b, reactor: batch, temperature: 50, initial: {A: 1}, until: 10}\n"
    )
    code, _, err = run_cli("check", study)
    assert code == 2 and err.count("\n") == 1
    assert "scenarios[0].reactor" in err and "question" in err
