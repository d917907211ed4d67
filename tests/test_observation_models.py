"""Measured quantities (signals, compositions, combinations, conversions, yields) and censored values, against
scipy's distributions, closed forms and finite differences."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from inference.inputs.measured import default_quantity, measured_values, measurement_design, resolve_quantities
from inference.inputs.schema import LogNormalPrior, MeasuredQuantity, Noise
from inference.physics import closed_form
from inference.physics.network import build_network, parse_equation

SPECIES = ("A", "B", "C")


def _pointwise_logp(noise: Noise, predicted: np.ndarray, sigma: float, observed, lower=None, upper=None):
    import pymc as pm

    from inference.model.builder import _likelihood

    with pm.Model(coords={"measurement": np.arange(observed.size)}) as model:
        _likelihood(noise, predicted, sigma, observed, lower, upper)
    return pm.logp(model["observation"], observed).eval()


def test_censored_likelihood_matches_scipy_for_every_noise_model():
    # Reference: scipy.stats normal, lognormal and Student-t densities and CDFs; a value known only to lie below
    # (above) its limit contributes log P(Y < limit) (log P(Y > limit)), the standard censored likelihood.
    predicted = np.array([0.5, 0.2, 0.05, 0.9])
    observed = np.array([0.45, 0.25, 0.01, 1.2])  # the third is below 0.01, the fourth above 1.2
    lower = np.array([-np.inf, -np.inf, 0.01, -np.inf])
    upper = np.array([np.inf, np.inf, np.inf, 1.2])
    sigma = 0.3
    absolute = _pointwise_logp(Noise(model="absolute"), predicted, 0.1, observed, lower, upper)
    expected = stats.norm.logpdf(observed, predicted, 0.1)
    expected[2] = stats.norm.logcdf(0.01, predicted[2], 0.1)
    expected[3] = stats.norm.logsf(1.2, predicted[3], 0.1)
    # PyTensor's normal log CDF agrees with scipy's to about 1e-8 (a different erfc evaluation).
    np.testing.assert_allclose(absolute, expected, rtol=1e-7)

    proportional = _pointwise_logp(Noise(model="proportional"), predicted, sigma, observed, lower, upper)
    expected = stats.lognorm.logpdf(observed, sigma, scale=predicted)
    expected[2] = stats.lognorm.logcdf(0.01, sigma, scale=predicted[2])
    expected[3] = stats.lognorm.logsf(1.2, sigma, scale=predicted[3])
    np.testing.assert_allclose(proportional, expected, rtol=1e-7)

    robust = _pointwise_logp(Noise(model="robust", nu=4.0), predicted, sigma, observed, lower, upper)
    expected = stats.t.logpdf(np.log(observed), 4.0, np.log(predicted), sigma) - np.log(observed)
    expected[2] = stats.t.logcdf(np.log(0.01), 4.0, np.log(predicted[2]), sigma)
    expected[3] = stats.t.logsf(np.log(1.2), 4.0, np.log(predicted[3]), sigma)
    np.testing.assert_allclose(robust, expected, rtol=1e-8)


def test_a_limit_above_which_a_value_lies_leaves_its_density_and_censors_draws():
    # A row's detection limit applies to whatever is measured there: a value above it keeps the plain density
    # (scipy.stats.lognorm.logpdf), one at it is censored (logcdf), and draws from the node never fall below it.
    import pymc as pm

    from inference.model.builder import _likelihood

    predicted, observed, limit = np.array([0.05, 0.05]), np.array([0.08, 0.01]), np.array([0.01, 0.01])
    logp = _pointwise_logp(Noise(model="proportional"), predicted, 0.5, observed, limit)
    expected = [stats.lognorm.logpdf(0.08, 0.5, scale=0.05), stats.lognorm.logcdf(0.01, 0.5, scale=0.05)]
    np.testing.assert_allclose(logp, expected, rtol=1e-7)

    with pm.Model(coords={"measurement": np.arange(2)}) as model:
        _likelihood(Noise(model="proportional"), np.array([0.012, 0.012]), 0.5, observed, limit)
    draws = pm.draw(model["observation"], draws=2000, random_seed=1)
    assert draws.min() == 0.01  # clipped at the limit, not below it
    # P(lognormal(ln 0.012, 0.5) <= 0.01) from scipy; 2000 x 2 draws give an se of about 0.008.
    share = stats.lognorm.cdf(0.01, 0.5, scale=0.012)
    assert abs((draws == 0.01).mean() - share) < 0.04


def test_uncensored_likelihood_unchanged():
    # Without limits the node is the plain density (scipy.stats.norm.logpdf).
    predicted, observed = np.array([1.0, 2.0]), np.array([1.1, 1.7])
    logp = _pointwise_logp(Noise(model="absolute"), predicted, 0.2, observed)
    np.testing.assert_allclose(logp, stats.norm.logpdf(observed, predicted, 0.2), rtol=1e-12)


def _declared():
    return (
        MeasuredQuantity(quantity="pct_B", kind="composition", species="B", among=("A", "B"), scale=100.0),
        MeasuredQuantity(quantity="area_B", kind="signal", species="B", response=2.5e4, offset=10.0),
        MeasuredQuantity(
            quantity="abs_254",
            kind="combination",
            weights={"A": 300.0, "C": LogNormalPrior(median=900.0, factor=2.0)},
            path_length=0.5,
        ),
        MeasuredQuantity(quantity="conv_A", kind="conversion", species="A"),
        MeasuredQuantity(quantity="yield_C", kind="yield", species="C", of="A"),
    )


def test_composition_of_first_order_decay_matches_closed_form():
    # A -> B, first order: c_A = c0 exp(-k t), c_B = c0 (1 - exp(-k t)) (Levenspiel, ch. 3, from memory), so the
    # share of B among A and B is exactly 1 - exp(-k t), whatever c0.
    k, c0 = 0.3, 1.7
    times = np.linspace(0.0, 8.0, 9)
    net = build_network(("A", "B"), ("r",), (parse_equation("A -> B"),))
    profile = closed_form.concentrations("first", net, np.array([c0, 0.0]), k, times)
    quantities = resolve_quantities(_declared()[:1], ("A", "B"), "study.yaml")
    design = measurement_design(
        quantities,
        np.zeros(times.size, dtype=int),
        np.zeros(times.size, dtype=int),
        np.arange(times.size),
        ("R1",),
        np.array([[c0, 0.0]]),
        np.ones(times.size),
        np.ones(1),
        False,
    )
    basis = profile[design.basis_time, design.basis_species]
    values = measured_values(design, basis, design.fixed_weights, design.fixed_scales)
    np.testing.assert_allclose(values, 100.0 * (1.0 - np.exp(-k * times)), rtol=1e-12, atol=1e-12)


def test_each_kind_of_quantity_is_the_formula_it_declares():
    # Worked by hand: c = (A, B, C) = (1.0, 0.5, 0.25) at a time when the run's volume grew from 1.0 to 1.5 and
    # A started at 2.0 (amounts: conversion 1 - 1.5 * 1.0 / 2.0, yield 1.5 * 0.25 / 2.0).
    quantities = (*resolve_quantities(_declared(), SPECIES, "study.yaml"), default_quantity(0, "A"))
    m = len(quantities)
    design = measurement_design(
        quantities,
        np.arange(m),
        np.zeros(m, dtype=int),
        np.zeros(m, dtype=int),
        ("R1",),
        np.array([[2.0, 0.0, 0.0]]),
        np.full(m, 1.5),
        np.array([1.0]),
        False,
    )
    c = np.array([1.0, 0.5, 0.25])
    basis = c[design.basis_species]
    weights = np.concatenate([design.fixed_weights, [900.0]])
    values = measured_values(design, basis, weights, design.fixed_scales)
    expected = [
        100 * 0.5 / 1.5,
        2.5e4 * 0.5 + 10.0,
        0.5 * (300 * 1.0 + 900 * 0.25),
        1 - 1.5 / 2.0,
        1.5 * 0.25 / 2.0,
        1.0,
    ]
    np.testing.assert_allclose(values, expected, rtol=1e-12)
    assert [f.label for f in design.fitted_weights] == ["abs_254:C"]


@pytest.mark.parametrize(
    ("declared", "problem"),
    [
        (MeasuredQuantity(quantity="x", kind="signal", species="Z", response=2.0), "'Z' is not a species"),
        (MeasuredQuantity(quantity="x", kind="yield", species="C", of="Q"), "'Q' is not a species"),
    ],
)
def test_unknown_species_in_a_declaration_is_refused(declared, problem):
    from inference.errors import StudyError

    with pytest.raises(StudyError, match=problem):
        resolve_quantities((declared,), SPECIES, "study.yaml")


@pytest.mark.parametrize(
    ("fields", "problem"),
    [
        ({"kind": "composition", "species": "A", "among": ("A",)}, "two or more species"),
        ({"kind": "signal", "species": "A"}, "needs 'response'"),
        ({"kind": "combination", "weights": {"A": -3.0}}, "greater than 0"),
        ({"kind": "combination", "weights": {"A": {"median": -3.0, "factor": 2.0}}}, "greater than 0"),
        ({"kind": "conversion", "species": "A", "among": ("A", "B")}, "does not apply"),
    ],
)
def test_bad_declarations_fail_validation(fields, problem):
    import pydantic

    # The study file's lists reach the schema as tuples (``config.lists_to_tuples``), as here.
    with pytest.raises(pydantic.ValidationError, match=problem):
        MeasuredQuantity.model_validate({"quantity": "x", **fields})


# --- Studies that declare measured quantities, end to end -------------------------------------------------------

QUANTITY_STUDY = """\
study: quantities
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, B, C]
reactions:
  - name: first
    equation: A -> B
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
  - name: second
    equation: B -> C
    k_ref: {median: 0.05, factor: 10}
    Ea: {mean: 70, sd: 20}
reference_temperature: 330 K
noise: {model: NOISE, sigma: {scale: 0.2}, per_species: true}
observations:
  - {quantity: area_A, kind: signal, species: A, response: {median: 2.0e4, factor: 3}}
  - {quantity: pct_B, kind: composition, species: B, among: [A, B, C], scale: 100}
  - {quantity: abs_300, kind: combination, weights: {B: {median: 800, factor: 3}, C: 500}}
  - {quantity: conv_A, kind: conversion, species: A}
"""
QUANTITY_RUNS = "run,temperature,A,B,C\nr1,50,1.0,0,0\nr2,70,0.8,0,0\n"
QUANTITY_DATA = (
    "run,time,area_A,pct_B,abs_300,conv_A,C\n"
    "r1,0,20500,,,,\n"
    "r1,2,16800,14.5,120,0.16,<0.01\n"
    "r1,6,11900,31,260,0.41,0.05\n"
    "r2,0,16100,,,,\n"
    "r2,1,11800,24,170,0.27,0.02\n"
    "r2,4,5200,40,420,0.67,>0.3\n"
)


def _write_quantity_study(folder, noise="proportional", data=QUANTITY_DATA):
    (folder / "runs.csv").write_text(QUANTITY_RUNS)
    (folder / "measurements.csv").write_text(data)
    path = folder / "study.yaml"
    text = QUANTITY_STUDY.replace("NOISE", noise)
    if noise == "absolute":  # sigma on the scale of peak areas (~1e4), so the log-density is not ~1e10
        text = text.replace("sigma: {scale: 0.2}", "sigma: {scale: 500}")
    path.write_text(text)
    return path


@pytest.mark.parametrize("noise", ["proportional", "absolute", "robust"])
def test_declared_quantities_and_censoring_give_exact_gradients(tmp_path, noise):
    # The model's log-density gradient (declared quantities, fitted factors, censored values) against central
    # finite differences of the log-density itself.
    from test_network_model import T_REF, _gradient_check

    from inference import load_study
    from inference.workflows.kinds import open_problem

    problem = open_problem(load_study(_write_quantity_study(tmp_path, noise)))
    obs = problem.obs
    assert list(obs.censored[obs.censored != ""]) == ["below", "above"]
    model = problem.build_model(T_REF)
    assert {"response", "weight"} <= set(model.named_vars)
    _gradient_check(model)


def test_check_reads_quantities_and_says_which_factor_is_unpinned(tmp_path, run_cli):
    path = _write_quantity_study(tmp_path)
    code, out, err = run_cli("check", path)
    assert code == 0, err
    # area_A is calibrated (time 0 of a known A0); B's weight in abs_300 is not, and B is measured on no absolute
    # scale (only as a share).
    text = out + err
    assert "'abs_300:B' has no calibration point" in text, text
    assert "'area_A' has no calibration point" not in text


@pytest.mark.parametrize(
    ("data", "where", "problem"),
    [
        ("run,time,area_A\nr1,1,<abc\n", "column 'area_A'", "is not a number or a limit"),
        ("run,time,area_A\nr1,1,<0\n", "column 'area_A'", "must be positive"),
        ("run,time,area_A\nr1,1,<-2\n", "column 'area_A'", "must be positive"),
        ("run,time,area_Q\nr1,1,3.0\n", "unknown column 'area_Q'", "did you mean 'area_A'"),
        ("run,time,species,value\nr1,1,area_Q,3.0\n", "column 'species'", "'area_Q' is not a species"),
        ("run,time,area_A\nr1,1,0\n", "column 'area_A'", "not positive"),
    ],
)
def test_bad_measured_values_exit_2_naming_file_and_column(tmp_path, run_cli, data, where, problem):
    path = _write_quantity_study(tmp_path, data=data)
    code, _, err = run_cli("check", path)
    assert code == 2
    assert len(err.strip().splitlines()) == 1, err
    assert "measurements.csv" in err and where in err and problem in err, err


@pytest.mark.parametrize(
    ("replace", "where"),
    [
        ("species: A, response: {median: 2.0e4", "species: Z, response: {median: 2.0e4"),
        ("among: [A, B, C]", "among: [B]"),
        ("C: 500}", "C: -500}"),
        ("B: {median: 800, factor: 3}", "B: {median: -800, factor: 3}"),
    ],
)
def test_bad_declarations_exit_2_naming_the_key(tmp_path, run_cli, replace, where):
    path = _write_quantity_study(tmp_path)
    path.write_text(path.read_text().replace(replace, where))
    code, _, err = run_cli("check", path)
    assert code == 2
    assert len(err.strip().splitlines()) == 1, err
    assert "study.yaml" in err and "observations" in err, err


def test_verdict_names_a_factor_confounded_with_an_initial_concentration():
    # Draws where ln(response) = -ln(initial) + small noise (the data pin only their product) against draws
    # where they are independent: only the first is called confounded.
    import xarray as xr

    from inference.posterior.diagnostics import confounded_factors

    rng = np.random.default_rng(2)
    ln_c0 = rng.normal(0.0, 0.2, (2, 500))

    def posterior(ln_response):
        return xr.Dataset(
            {
                "response": (("chain", "draw", "response_factor"), np.exp(ln_response)[..., None]),
                "initial": (("chain", "draw", "run", "uncertain_species"), np.exp(ln_c0)[..., None, None]),
                "Ea": (("chain", "draw", "reaction"), rng.normal(6e4, 1e3, (2, 500, 1))),
            },
            coords={"response_factor": ["area_A"], "run": ["r1"], "uncertain_species": ["A"], "reaction": ["r"]},
        )

    advice = confounded_factors(posterior(9.0 - ln_c0 + rng.normal(0.0, 0.01, (2, 500))))
    assert len(advice) == 1 and "response[area_A] and initial[r1, A] are confounded" in advice[0], advice
    assert confounded_factors(posterior(rng.normal(9.0, 0.2, (2, 500)))) == []
