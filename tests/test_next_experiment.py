"""Which experiment next: the reweighting estimates against exact answers, the ranking against real refits, the
files written, and bad input.

Exact answers come from the conjugate normal linear model of ln k on 1/T with known noise (Bishop, Pattern
Recognition and Machine Learning, 2006, sec. 3.3, eqs. 3.50-3.51): the posterior covariance after one more point x
of noise sd s is (S^-1 + x x^T / s^2)^-1 whatever the point's value, and the expected information gain about the
parameters is (1/2) ln(1 + x^T S x / s^2) (the mutual information of a linear Gaussian model; from memory).
"""

from __future__ import annotations

import json
import shutil
import textwrap

import numpy as np
import pandas as pd
import pytest
import xarray as xr
from scipy import stats
from test_network_model import _simulate, arrhenius_k

from inference import fit_study, load_study, rank_experiments
from inference.inputs.candidates import CandidateRun, load_candidates, resolve_candidates
from inference.inputs.data import read_observations
from inference.inputs.schema import Noise
from inference.model.builder import network_solver
from inference.physics.arrhenius import R
from inference.posterior import design
from inference.posterior.draws import parameter_draws, pick_draws

T_REF = 330.0
#: The conjugate design of tests/test_conjugate.py: two points at each of 35, 50, 65, 80 degC, sd of ln k 0.15.
DATA_C = np.repeat([35.0, 50.0, 65.0, 80.0], 2)
REL_SD = 0.15
TRUE_LN_K_REF, TRUE_EA = np.log(2e-3), 85_000.0


def _x(celsius: float | np.ndarray) -> np.ndarray:
    """Rows of the design matrix of ln k = ln k_ref - (Ea/R)(1/T - 1/T_ref) in (ln k_ref, Ea)."""
    kelvin = np.atleast_1d(celsius) + 273.15
    return np.column_stack([np.ones_like(kelvin), -(1 / kelvin - 1 / T_REF) / R])


def _conjugate_posterior(prior_mean, prior_sd, ln_k):
    x = _x(DATA_C)
    precision = np.diag(1 / np.asarray(prior_sd) ** 2)
    covariance = np.linalg.inv(precision + x.T @ x / REL_SD**2)
    mean = covariance @ (precision @ np.asarray(prior_mean) + x.T @ ln_k / REL_SD**2)
    return mean, covariance


def _exact_sd_after(covariance, celsius: float, sd: float, replicates: int = 1) -> float:
    """Posterior sd of Ea (J/mol) after ``replicates`` points at ``celsius`` with noise sd ``sd`` (Bishop 3.51)."""
    x = _x(celsius)[0]
    updated = np.linalg.inv(np.linalg.inv(covariance) + replicates * np.outer(x, x) / sd**2)
    return float(np.sqrt(updated[1, 1]))


#: (temperature in degC, sd of ln k, replicates): exact sds 8 % or more apart, so the ranking is no coin toss.
CANDIDATES_C = [(35.0, 0.15, 1), (57.5, 0.15, 3), (95.0, 0.15, 1), (110.0, 0.05, 1)]


def _write_conjugate(folder, ln_k: np.ndarray):
    """The rate-constant study of the conjugate design with stated errors (known noise); its path."""
    (folder / "k.csv").write_text(
        "temperature,k,k_rel_sd\n"
        + "".join(f"{t:g},{np.exp(y):.17g},{REL_SD:g}\n" for t, y in zip(DATA_C, ln_k, strict=True))
    )
    (folder / "study.yaml").write_text(
        textwrap.dedent(
            f"""\
            study: conjugate
            units: {{temperature: degC, energy: J/mol, rate_constant: 1/s}}
            data: {{rate_constants: k.csv}}
            reactions:
              - name: step
                k_ref: {{median: 0.001, factor: 50}}
                Ea: {{mean: 80000, sd: 10000}}
            reference_temperature: {T_REF} K
            sampling: {{draws: 1500, tune: 700, chains: 2, seed: 5}}
            """
        )
    )
    return folder / "study.yaml"


def test_expected_sd_and_gain_match_the_conjugate_closed_form(tmp_path):
    # Independent draws from the exact posterior, so the only errors are the method's Monte Carlo errors.
    rng = np.random.default_rng(20261202)
    mean, covariance = _conjugate_posterior([TRUE_LN_K_REF, 80_000.0], [2.3, 10_000.0], np.zeros(DATA_C.size))
    draws = rng.multivariate_normal(mean, covariance, size=4000)
    target = draws[:, 1] / 1000  # Ea in kJ/mol
    noise = Noise(model="proportional")
    sources = rng.choice(draws.shape[0], 400, replace=False)
    study = load_study(_write_conjugate(tmp_path, np.zeros(DATA_C.size)))
    posterior = xr.Dataset(
        {name: (("sample", "reaction"), draws[:, [i]]) for i, name in enumerate(["ln_k_ref", "Ea"])},
        coords={"reaction": ["step"]},
    )
    linear = design.Linearised.of(design.parameter_columns(study), posterior, target)
    # The linearised estimate rests on the draws' covariance: the normal-theory se of a sample sd, sd/sqrt(2(D-1)).
    relative = 1 / np.sqrt(2 * (draws.shape[0] - 1))
    estimated, exact = [], []
    for celsius, sd, replicates in CANDIDATES_C:
        predicted = np.repeat((draws @ _x(celsius)[0])[:, None], replicates, axis=1)
        sigma = np.full_like(predicted, sd)
        simulated = design.simulate(predicted[sources], sigma[sources], noise, rng)
        loglik = design.log_likelihood(simulated, predicted, sigma, noise)
        result = design.reweigh(loglik, target)
        expected = _exact_sd_after(covariance, celsius, sd, replicates) / 1000
        # Four Monte Carlo standard errors: a false alarm in well under 1 run in 10,000 per check.
        assert abs(result.expected_sd - expected) < 4 * result.se, (celsius, result, expected)
        x = _x(celsius)[0]
        gain = 0.5 * np.log(1 + replicates * (x @ covariance @ x) / sd**2)
        assert abs(result.gain - gain) < 4 * result.gain_se, (celsius, result.gain, gain)
        # The nested Monte Carlo estimator (Ryan 2003) of the same gain; its terms are independent across data sets.
        terms = loglik[np.arange(sources.size), sources] - (
            np.logaddexp.reduce(loglik, axis=1) - np.log(draws.shape[0])
        )
        assert abs(design.nested_gain(loglik, sources) - gain) < 4 * terms.std() / np.sqrt(sources.size)
        run = CandidateRun("c", celsius + 273.15, "c", reaction=0, replicates=replicates)
        jacobian = design.rate_constant_jacobian(linear.columns, study, run, 1.0, T_REF, noise)
        fisher = design.fisher_information(
            [jacobian], [design.fisher_weight(np.full(replicates, sd), noise)], linear.scale
        )
        linear_sd, linear_gain = linear.effect(fisher)
        assert abs(linear_sd - expected) < 4 * relative * expected, (celsius, linear_sd, expected)
        assert abs(linear_gain - gain) < 4 * relative, (celsius, linear_gain, gain)
        estimated.append(result.expected_sd)
        exact.append(expected)
    assert list(np.argsort(estimated)) == list(np.argsort(exact))


def test_log_likelihood_is_the_noise_models_density():
    # scipy.stats' normal and Student-t densities; the proportional model's on the log of the values.
    rng = np.random.default_rng(5)
    observed, predicted, sigma = rng.normal(size=(3, 4)), rng.normal(size=(5, 4)), rng.uniform(0.1, 0.5, (5, 4))
    for noise, density in (
        (Noise(model="absolute"), lambda y, m, s: stats.norm.logpdf(y, m, s)),
        (Noise(model="robust", nu=4.0), lambda y, m, s: stats.t.logpdf(y, 4.0, m, s)),
    ):
        expected = np.array([[density(y, m, s).sum() for m, s in zip(predicted, sigma, strict=True)] for y in observed])
        assert np.allclose(design.log_likelihood(observed, predicted, sigma, noise), expected, rtol=1e-12)
    assert np.allclose(design.model_scale(np.array([1.0, np.e]), Noise(model="proportional")), [0.0, 1.0])


@pytest.fixture(scope="module")
def conjugate_fit(tmp_path_factory):
    """The rate-constant model with stated errors (known noise), fitted: its folder and exact posterior."""
    folder = tmp_path_factory.mktemp("conjugate")
    rng = np.random.default_rng(11)
    ln_k = (_x(DATA_C) @ [TRUE_LN_K_REF, TRUE_EA]) + REL_SD * rng.standard_normal(DATA_C.size)
    study = load_study(_write_conjugate(folder, ln_k))
    prior = study.reactions[0].prior
    _, covariance = _conjugate_posterior([prior.ln_k_ref_mean, prior.ea_mean], [prior.ln_k_ref_sd, prior.ea_sd], ln_k)
    fit_study(study, out=folder / "res", quiet=True)
    return folder, covariance


def test_ranking_from_a_fitted_posterior_matches_the_closed_form(conjugate_fit, run_cli, tmp_path):
    folder, covariance = conjugate_fit
    candidates = tmp_path / "candidates.yaml"
    lines = ["draws: 3000", "simulations: 400", "candidates:"]
    for index, (celsius, sd, replicates) in enumerate(CANDIDATES_C):
        lines.append(f"  - {{name: c{index}, temperature: {celsius}, noise: {sd}, replicates: {replicates}}}")
    candidates.write_text("\n".join(lines) + "\n")
    out = tmp_path / "next"
    code, stdout, stderr = run_cli("next", folder / "res", candidates, "--target", "Ea[step]", "--out", out)
    assert code == 0, stderr
    assert "EXTRAPOLATED: candidate c3" in stdout
    assert {p.name for p in out.iterdir()} == {
        "ranking.csv",
        "expected_sd.png",
        "summary.txt",
        "cautions.txt",
        "report.html",
        "manifest.json",
    }
    table = pd.read_csv(out / "ranking.csv").set_index("candidate")
    exact = {f"c{i}": _exact_sd_after(covariance, c, sd, n) for i, (c, sd, n) in enumerate(CANDIDATES_C)}
    for name, row in table.iterrows():
        # MCMC draws: the standard error treats the picked draws as independent (ESS here is near the draw count).
        assert abs(row["expected_sd"] - exact[name]) < 4 * row["expected_sd_se"], (
            name,
            row["expected_sd"],
            exact[name],
        )
        # The draws' covariance: sd/sqrt(2 n) with n >= 1000 effective draws (2 chains x 1500 of this model).
        assert abs(row["expected_sd_linearised"] - exact[name]) < 4 * exact[name] / np.sqrt(2 * 1000)
        assert row["unit"] == "J/mol" and row["target"] == "Ea[step]" and row["estimate"] == "reweighting"
    assert list(table.sort_values("rank").index) == sorted(exact, key=exact.get)
    assert table.loc["c3", "extrapolated"] and not table.loc["c1", "extrapolated"]
    assert json.loads((out / "manifest.json").read_text())["kind"] == "next_experiment"
    assert "would" in (out / "summary.txt").read_text()


def test_a_results_folder_that_no_longer_matches_is_refused(conjugate_fit, run_cli, tmp_path):
    folder, _ = conjugate_fit
    candidates = tmp_path / "candidates.yaml"
    candidates.write_text("target: Ea[step]\ncandidates:\n  - {name: a, temperature: 90, noise: 0.1}\n")
    copy = tmp_path / "res"
    shutil.copytree(folder / "res", copy)
    with (copy / "posterior.nc").open("ab") as handle:
        handle.write(b"\0")
    code, _, stderr = run_cli("next", copy, candidates, "--out", tmp_path / "out1")
    assert code == 2 and "posterior.nc" in stderr and len(stderr.strip().splitlines()) == 1
    data = folder / "k.csv"
    original = data.read_text()
    try:
        data.write_text(original + "90,0.5,0.15\n")
        code, _, stderr = run_cli("next", folder / "res", candidates, "--out", tmp_path / "out2")
    finally:
        data.write_text(original)
    assert code == 2 and "k.csv" in stderr and len(stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out1").exists() and not (tmp_path / "out2").exists()


RATE_CONSTANT_CASES = [
    ("unknown target", "  - {name: a, temperature: 90}\n", "Ea[nope]", ["--target", "'nope' is not a reaction"]),
    ("target not computable", "  - {name: a, temperature: 90}\n", "dH[step]", ["--target", "not reversible"]),
    ("batch keys", "  - {name: a, temperature: 90, times: [1, 2]}\n", "Ea[step]", ["candidates[0].times"]),
    ("below absolute zero", "  - {name: a, temperature: -300}\n", "Ea[step]", ["candidates[0].temperature"]),
    ("ramped", "  - {name: a, programme: [[0, 40], [60, 90]]}\n", "Ea[step]", ["candidates[0].programme", "for runs"]),
    (
        "flow",
        "  - {name: a, reactor: cstr, temperature: 90, feed: {A: 1}, residence_times: [5]}\n",
        "Ea[step]",
        ["candidates[0].reactor", "for runs"],
    ),
    ("twice", "  - {name: a, temperature: 90}\n  - {name: a, temperature: 95}\n", "Ea[step]", ["used twice"]),
]


@pytest.mark.parametrize(
    ("body", "target", "expected"), [c[1:] for c in RATE_CONSTANT_CASES], ids=[c[0] for c in RATE_CONSTANT_CASES]
)
def test_bad_rate_constant_candidates(conjugate_fit, run_cli, tmp_path, body, target, expected):
    folder, _ = conjugate_fit
    candidates = tmp_path / "candidates.yaml"
    candidates.write_text("candidates:\n" + body)
    _refused(run_cli, ("next", folder / "res", candidates, "--target", target), tmp_path, expected)


def _refused(run_cli, args, tmp_path, expected) -> None:
    out = tmp_path / "out"
    code, _, stderr = run_cli(*args, "--out", out)
    assert code == 2, stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("arrhenia: error: "), stderr
    for fragment in expected:
        assert fragment in lines[0], lines[0]
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


RUN = "{name: a, temperature: 60, initial: {A: 1.0}, times: [5, 10, 20]"
FEED = "{start: 1, stop: 10, rate: 0.1, concentration: {A: 2}}"
FLOW = "{name: a, reactor: cstr, temperature: 60, feed: {A: 1}, residence_times: [5]"
NETWORK_CASES = [
    (
        "unknown species",
        RUN.replace("A: 1.0", "Q: 1.0") + "}",
        "Ea[first]",
        ["candidates[0].initial.Q", "not a species"],
    ),
    ("unknown measured", RUN + ", measured: [A, Z]}", "Ea[first]", ["candidates[0].measured", "'Z'"]),
    ("nothing charged", RUN.replace("A: 1.0", "A: 0") + "}", "Ea[first]", ["candidates[0].initial", "charges nothing"]),
    ("negative amount", RUN.replace("A: 1.0", "A: -1") + "}", "Ea[first]", ["candidates[0].initial.A"]),
    ("times fall", RUN.replace("5, 10, 20", "10, 5") + "}", "Ea[first]", ["candidates[0]", "rise"]),
    ("zero time", RUN.replace("5, 10, 20", "0, 5") + "}", "Ea[first]", ["candidates[0].times"]),
    ("never formed", RUN.replace("A: 1.0", "C: 1.0") + ", measured: [A]}", "Ea[first]", ["measured", "stays at zero"]),
    ("hot", RUN.replace("60", "5000") + "}", "Ea[first]", ["candidates[0].temperature", "plausible"]),
    ("no feeds", RUN + ", volume: 1, feeds: []}", "Ea[first]", ["candidates[0].feeds"]),
    ("programme and temperature", RUN + ", programme: [[0, 40], [60, 90]]}", "Ea[first]", ["[0]", "not both"]),
    (
        "programme from 5",
        "{name: a, programme: [[5, 40], [60, 50]], initial: {A: 1.0}, times: [5, 10]}",
        "Ea[first]",
        ["candidates[0]", "start at 0"],
    ),
    (
        "programme too cold",
        "{name: a, programme: [[0, 40], [60, -300]], initial: {A: 1.0}, times: [5, 10]}",
        "Ea[first]",
        ["candidates[0].programme", "absolute zero"],
    ),
    ("feeds, no volume", RUN + f", feeds: [{FEED}]}}", "Ea[first]", ["candidates[0]", "'volume'"]),
    (
        "feed stops first",
        RUN + f", volume: 1, feeds: [{FEED.replace('stop: 10', 'stop: 0.5')}]}}",
        "Ea[first]",
        ["candidates[0].feeds[0]", "stops after it starts"],
    ),
    (
        "unknown fed species",
        RUN + f", volume: 1, feeds: [{FEED.replace('A: 2', 'Q: 2')}]}}",
        "Ea[first]",
        ["candidates[0].feeds[0].concentration.Q", "not a species"],
    ),
    ("negative rate", RUN + f", volume: 1, feeds: [{FEED.replace('0.1', '-0.1')}]}}", "Ea[first]", ["feeds[0].rate"]),
    ("feed in a batch run", RUN + ", feed: {A: 1}}", "Ea[first]", ["candidates[0]", "'feed' is for flow"]),
    ("flow with times", FLOW + ", times: [1]}", "Ea[first]", ["candidates[0]", "'times' is for batch runs"]),
    ("flow, no residence time", FLOW.replace(", residence_times: [5]", "") + "}", "Ea[first]", ["'residence_times'"]),
    ("flow feeds nothing", FLOW.replace("A: 1", "A: 0") + "}", "Ea[first]", ["candidates[0].feed", "nothing"]),
    ("unknown reactor", FLOW.replace("cstr", "plug") + "}", "Ea[first]", ["candidates[0].reactor"]),
    ("rate-constant keys", RUN + ", replicates: 2}", "Ea[first]", ["candidates[0].replicates"]),
    ("noise of another species", RUN + ", measured: [A], noise: {B: 0.1}}", "Ea[first]", ["noise.B"]),
    ("unknown target", RUN + "}", "time_to[first]", ["--target", "not a target"]),
    ("k without temperature", RUN + "}", "k[first]", ["--target", "needs a temperature"]),
    ("fitted order not in study", RUN + "}", "order[first:A]", ["--target", "no fitted order"]),
]


@pytest.mark.parametrize(
    ("body", "target", "expected"), [c[1:] for c in NETWORK_CASES], ids=[c[0] for c in NETWORK_CASES]
)
def test_bad_batch_candidates(fitted, run_cli, tmp_path, body, target, expected):
    _, result = fitted
    candidates = tmp_path / "candidates.yaml"
    candidates.write_text(f"candidates:\n  - {body}\n")
    _refused(run_cli, ("next", result.results_dir, candidates, "--target", target), tmp_path, expected)


def test_no_target_and_missing_file(fitted, run_cli, tmp_path):
    _, result = fitted
    candidates = tmp_path / "candidates.yaml"
    candidates.write_text(f"candidates:\n  - {RUN}}}\n")
    _refused(run_cli, ("next", result.results_dir, candidates), tmp_path, ["--target", "no target"])
    _refused(
        run_cli, ("next", result.results_dir, tmp_path / "nope.yaml", "--target", "Ea[first]"), tmp_path, ["nope.yaml"]
    )


#: A candidate of each new kind, and the same run in the study's own data layouts (the temperatures file; the feeds
#: file with the runs' volumes; the steady-states file).
LAYOUTS = {
    "ramped": (
        "{name: c, programme: [[0, 45], [20, 70], [50, 60]], initial: {A: 1.0}, times: [2, 5, 15, 30, 60]}",
        {
            "runs": "run,temperature,A,B,C\nc,,1.0,0,0\n",
            "temperatures": "run,time,temperature\nc,0,45\nc,20,70\nc,50,60\n",
        },
    ),
    "dosed": (
        "{name: c, temperature: 55, initial: {A: 0.2}, volume: 1.5, times: [2, 5, 15, 30, 60], feeds: [{start: 0, "
        "stop: 30, rate: 0.02, concentration: {A: 2.0}}, {start: 40, stop: 50, rate: 0.01, concentration: {A: 1.0, "
        "C: 0.5}}]}",
        {
            "runs": "run,temperature,A,B,C,volume\nc,55,0.2,0,0,1.5\n",
            "feeds": "run,start,stop,rate,A,C\nc,0,30,0.02,2.0,\nc,40,50,0.01,1.0,0.5\n",
        },
    ),
    "cstr": (
        "{name: c, reactor: cstr, temperature: 60, feed: {A: 1.0, B: 0.1}, residence_times: [2, 5, 20], "
        "measured: [A, B]}",
        {
            "steady_states": "reactor,temperature,residence_time,feed_A,feed_B,A,B\n"
            + "".join(f"cstr,60,{tau},1.0,0.1,0.5,0.5\n" for tau in (2, 5, 20))
        },
    ),
}


@pytest.mark.parametrize("kind", list(LAYOUTS))
def test_ramped_dosed_and_flow_candidates_are_simulated_with_the_fits_physics(fitted, tmp_path, kind):
    # Each candidate must be the run the study's data reader builds from its own layouts, integrated by the fit's
    # solver (model.builder.network_solver) at the same posterior draw: the same numbers, bit for bit.
    folder, result = fitted
    body, tables = LAYOUTS[kind]
    study = load_study(folder / "study.yaml")
    path = tmp_path / "candidates.yaml"
    path.write_text(f"candidates:\n  - {body}\n")
    (run,) = resolve_candidates(load_candidates(path), study, path, ("A", "B", "C"))
    data = dict.fromkeys(tables)
    for name, text in tables.items():
        (tmp_path / f"{name}.csv").write_text(text)
    if "runs" in tables:
        rows = "".join(f"c,{t:g},0.5,0.5,0.5\n" for t in run.times[0])
        (tmp_path / "measurements.csv").write_text("run,time,A,B,C\n" + rows)
        data["measurements"] = None
    (tmp_path / "study.yaml").write_text(
        (folder / "study.yaml")
        .read_text()
        .replace(
            "data: {runs: runs.csv, measurements: measurements.csv}",
            f"data: {{{', '.join(f'{k}: {k}.csv' for k in data)}}}",
        )
    )
    layout_study = load_study(tmp_path / "study.yaml")
    obs = read_observations(layout_study)
    posterior = result.idata.posterior
    temperature_ref = json.loads(posterior.attrs["arrhenia"])["reference_temperature_K"]
    picks = pick_draws(posterior, 4)
    parameters = parameter_draws(study, posterior, temperature_ref, picks)
    values = design.candidate_values(study, parameters, design.stacked(posterior, picks), run, np.random.default_rng(0))
    solver = network_solver(layout_study, obs)
    measured = list(run.measured)
    for d in range(picks.size):
        inputs = parameters.inputs(d, obs.temperature_K, obs.initial)
        plain = solver.solve(inputs, sensitivities=False).concentrations
        assert np.array_equal(values[d], np.concatenate([c[:, measured].ravel() for c in plain])), (kind, d)
        # The likelihood integrates with sensitivities, whose error control takes other steps: equal to the
        # integrator's tolerance (rtol 1e-6).
        sensitive = solver.solve(inputs).concentrations
        assert np.allclose(values[d], np.concatenate([c[:, measured].ravel() for c in sensitive]), rtol=1e-4, atol=1e-9)


def test_a_scenario_answer_as_target_ranks_ramped_dosed_and_flow_candidates(fitted, tmp_path):
    _, result = fitted
    candidates = tmp_path / "candidates.yaml"
    candidates.write_text(
        textwrap.dedent(
            """\
            target: "scenario:batch-60C:time to 90% conversion of A"
            draws: 600
            simulations: 100
            candidates:
              - {name: ramped, programme: [[0, 45], [30, 70]], initial: {A: 1.0}, times: [1, 2, 4, 8, 16, 32, 64]}
              - {name: dosed, temperature: 55, initial: {A: 0.2}, volume: 1.0, times: [5, 10, 20, 30, 45, 60],
                 feeds: [{start: 0, stop: 30, rate: 0.02, concentration: {A: 2.0}}]}
              - {name: cstr, reactor: cstr, temperature: 60, feed: {A: 1.0}, residence_times: [2, 5, 20]}
              - {name: brief, temperature: 45, initial: {A: 1.0}, times: [0.5, 1], measured: [C]}
            """
        )
    )
    ranked = rank_experiments(result.results_dir, candidates, out=tmp_path / "next", quiet=True)
    table = ranked.table
    assert set(table["target"]) == {"scenario:batch-60C:time to 90% conversion of A"} and set(table["unit"]) == {"min"}
    kinds = dict(zip(table["candidate"], table["kind"], strict=True))
    assert kinds == {"ramped": "ramped batch", "dosed": "dosed batch", "cstr": "cstr", "brief": "batch"}
    # The answer per draw is the first-order batch time t(X) = -ln(1 - X)/k1 (Levenspiel, Chemical Reaction
    # Engineering, ch. 3; from memory) at the same draws; the scenario's grid (1 min apart, linear between points)
    # moves its spread by a few per cent.
    posterior = result.idata.posterior
    draws = design.stacked(posterior, pick_draws(posterior, 600))
    ln_k1 = (draws["ln_k_ref"] - draws["Ea"] / R * (1 / 333.15 - 1 / T_REF)).sel(reaction="first").values
    assert table["current_sd"].iloc[0] == pytest.approx(np.std(np.log(10) / np.exp(ln_k1)), rel=0.05)
    # By the law of total variance E[Var(g | y)] <= Var(g), and by Jensen's inequality E[sd] <= sqrt(E[Var]): no
    # candidate is expected to widen the answer beyond Monte Carlo error.
    se = table["expected_sd_reweighted_se"]
    assert np.all(table["expected_sd_reweighted"] <= table["current_sd"] + 4 * se), table
    first, last = table.iloc[0], table.iloc[-1]
    gap = last["expected_sd_reweighted"] - first["expected_sd_reweighted"]
    assert gap > 3 * np.hypot(first["expected_sd_reweighted_se"], last["expected_sd_reweighted_se"]), table
    # Where the weights suffice, the linearised estimate (the solver's sensitivities, temperature slopes and steady
    # states included) describes the same posterior.
    reliable = table[table["effective_weights"] >= design.MIN_EFFECTIVE]
    assert len(reliable) >= 3
    assert np.allclose(reliable["expected_sd_reweighted"], reliable["expected_sd_linearised"], rtol=0.1), table
    assert "would" in ranked.sentence and first["candidate"] in ranked.sentence


SCENARIO_FILE = """\
draws: 100
simulations: 20
scenarios:
  - {name: keep-c, reactor: batch, temperature: 60, initial: {A: 1.0, C: 0.5}, until: 60, key_reactant: C,
     target_conversion: 0.5}
  - {name: dose, reactor: dosed_batch, temperature: 60, initial: {A: 0.5}, volume: 1.0, until: 30,
     feeds: [{start: 0, stop: 10, rate: 0.1, concentration: {A: 1.0}}]}
candidates:
  - {name: a, temperature: 60, initial: {A: 1.0}, times: [5, 10, 20]}
"""
SCENARIO_CASES = [
    (
        "never consumed",
        SCENARIO_FILE,
        "scenario:keep-c:time to 50% conversion of C",
        ["--target", "cannot be computed", "never consumes"],
    ),
    ("no such answer", SCENARIO_FILE, "scenario:keep-c:nope", ["--target", "no answer 'nope'", "c[C]"]),
    ("not decided by the kinetics", SCENARIO_FILE, "scenario:dose:volume", ["--target", "do not decide it"]),
    ("no such scenario", SCENARIO_FILE, "scenario:nope:c[A]", ["--target", "'nope' is not a scenario", "batch-60C"]),
    ("no quantity", SCENARIO_FILE, "scenario:keep-c", ["--target", "scenario:NAME:QUANTITY"]),
    (
        "name of a study scenario",
        SCENARIO_FILE.replace("name: keep-c", "name: batch-60C"),
        "scenario:batch-60C:c[A]",
        ["scenarios[0].name", "also a scenario of the study"],
    ),
    (
        "unknown species",
        SCENARIO_FILE.replace("C: 0.5}", "Q: 0.5}"),
        "scenario:dose:c[A]",
        ["scenarios[0].initial", "'Q'"],
    ),
]


@pytest.mark.parametrize(
    ("text", "target", "expected"), [c[1:] for c in SCENARIO_CASES], ids=[c[0] for c in SCENARIO_CASES]
)
def test_bad_scenario_targets(fitted, run_cli, tmp_path, text, target, expected):
    _, result = fitted
    candidates = tmp_path / "candidates.yaml"
    candidates.write_text(text)
    _refused(run_cli, ("next", result.results_dir, candidates, "--target", target), tmp_path, expected)


TRUE = {"first": (0.12, 60_000.0), "second": (0.04, 75_000.0)}  # k at 330 K (1/min), Ea (J/mol)
CHAIN = """\
study: chain-{name}
units: {{time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}}
data: {{runs: runs.csv, measurements: measurements.csv}}
species: [A, B, C]
reactions:
  - name: first
    equation: A -> B
    k_ref: {{median: 0.1, factor: 10}}
    Ea: {{mean: 60, sd: 20}}
  - name: second
    equation: B -> C
    k_ref: {{median: 0.05, factor: 10}}
    Ea: {{mean: 70, sd: 20}}
reference_temperature: 330 K
noise: {{model: proportional, sigma: {{scale: 0.1}}}}
sampling: {{draws: 300, tune: 300, chains: 2, seed: 9}}
"""
TIMES = np.geomspace(2.0, 120.0, 8)
#: Values below this (mol/L) are not reported (blank cells), as below an assay's detection limit.
LIMIT = 1e-4


def _chain_run(label: str, celsius: float, seed: int) -> tuple[str, list[str]]:
    """One simulated batch run of A -> B -> C from A = 1 mol/L (solve_ivp, 5 % lognormal noise): its rows, values
    below ``LIMIT`` left blank."""
    k1, k2 = (arrhenius_k(k, ea, celsius, T_REF) for k, ea in TRUE.values())
    data = _simulate(
        lambda t, c, k1=k1, k2=k2: [-k1 * c[0], k1 * c[0] - k2 * c[1], k2 * c[1]], 3, [1.0, 0, 0], TIMES, seed, 0.05
    )
    rows = [
        f"{label},{t:.6g}," + ",".join(f"{v:.6g}" if v >= LIMIT else "" for v in row)
        for t, row in zip(TIMES, data, strict=True)
    ]
    return f"{label},{celsius:g},1.0,0,0", rows


def _fit_chain(folder, name: str, runs: list[tuple[str, float, int]]):
    folder.mkdir()
    run_rows, measurement_rows = ["run,temperature,A,B,C"], ["run,time,A,B,C"]
    for label, celsius, seed in runs:
        run, rows = _chain_run(label, celsius, seed)
        run_rows.append(run)
        measurement_rows += rows
    (folder / "runs.csv").write_text("\n".join(run_rows) + "\n")
    (folder / "measurements.csv").write_text("\n".join(measurement_rows) + "\n")
    (folder / "study.yaml").write_text(CHAIN.format(name=name))
    return fit_study(folder / "study.yaml", out=folder / "res", quiet=True)


def _width90(result, reaction: str) -> float:
    draws = result.idata.posterior["Ea"].sel(reaction=reaction).values.ravel()
    return float(np.diff(np.quantile(draws, [0.05, 0.95]))[0])


def test_the_run_ranked_first_narrows_the_interval_more_when_fitted(tmp_path):
    # Simulated network (seeds 31 and 32 for the fitted runs, 33 for the candidate runs): A -> B -> C measured at 50
    # and 60 degC; which of four isothermal runs (40, 55, 70, 85 degC, same sampling) pins Ea[second] best?
    base = [("r50", 50.0, 31), ("r60", 60.0, 32)]
    fitted = _fit_chain(tmp_path / "base", "base", base)
    candidates = tmp_path / "candidates.yaml"
    times = ", ".join(f"{t:.6g}" for t in TIMES)
    candidates.write_text(
        "target: Ea[second]\nchoose: 2\ncandidates:\n"
        + "".join(
            f"  - {{name: t{c:g}, temperature: {c:g}, initial: {{A: 1.0}}, times: [{times}], measured: [A, B, C], "
            f"detection_limit: {LIMIT}}}\n"
            for c in (40, 55, 70, 85)
        )
    )
    ranked = rank_experiments(fitted.results_dir, candidates, out=tmp_path / "next", quiet=True)
    table = ranked.table
    first, last = table["candidate"].iloc[0], table["candidate"].iloc[-1]
    assert ranked.best_set["candidate"].iloc[0] == first
    assert ranked.best_set["expected_sd"].iloc[1] < ranked.best_set["expected_sd"].iloc[0]
    # Where the reweighting has enough effective weights, the two estimates describe the same posterior.
    reliable = table[table["effective_weights"] >= design.MIN_EFFECTIVE]
    assert len(reliable) >= 2
    assert np.allclose(reliable["expected_sd_reweighted"], reliable["expected_sd_linearised"], rtol=0.1)
    widths = {}
    for name in (first, last):
        celsius = float(name[1:])
        refit = _fit_chain(tmp_path / name, name, [*base, (name, celsius, 33)])
        widths[name] = _width90(refit, "second")
    assert widths[first] < widths[last], (table, widths, _width90(fitted, "second"))
