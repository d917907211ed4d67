"""Model comparison: exact leave-one-out, ranking of rate laws, and refusing candidates with other data."""

from __future__ import annotations

import json

import arviz as az
import numpy as np
import pytest
from scipy import stats
from test_network_model import T_REF, _simulate, arrhenius_k

from inference import StudyError, fit_study, load_study
from inference.physics.arrhenius import R
from inference.posterior.comparison import pareto_k_threshold
from inference.workflows.compare import compare_studies


def test_pareto_k_threshold():
    # min(1 - 1/log10(S), 0.7) (Vehtari et al., J. Mach. Learn. Res. 25, 2024, sec. 3)
    assert pareto_k_threshold(100) == pytest.approx(0.5)
    assert pareto_k_threshold(1000) == pytest.approx(2 / 3)
    assert pareto_k_threshold(10**6) == pytest.approx(0.7)


def test_psis_loo_matches_exact_leave_one_out_of_the_conjugate_model(tmp_path):
    # Known noise and Gaussian priors: leaving point i out, the posterior of (ln k_ref, Ea) is Gaussian with
    # precision S0^-1 + X^T W X (rows other than i), and the predictive of ln k_i is normal with mean x_i m and
    # variance sigma_i^2 + x_i S x_i^T (Bishop, Pattern Recognition and Machine Learning, 2006, eqs. 3.50-3.51
    # and 3.58). The log-likelihood Arrhenia stores is the density of k itself, so -ln k_i is added.
    rng = np.random.default_rng(21)
    celsius = np.repeat([30.0, 45.0, 60.0, 75.0, 90.0], 4)
    kelvin = celsius + 273.15
    sd = np.full(kelvin.size, 0.2)
    x = np.column_stack([np.ones_like(kelvin), -(1 / kelvin - 1 / T_REF) / R])
    ln_k = x @ np.array([np.log(1e-3), 70_000.0]) + sd * rng.standard_normal(kelvin.size)
    (tmp_path / "k.csv").write_text(
        "temperature,k,k_rel_sd\n"
        + "".join(f"{t:g},{np.exp(y):.17g},{s:g}\n" for t, y, s in zip(celsius, ln_k, sd, strict=True))
    )
    study_path = tmp_path / "study.yaml"
    study_path.write_text(f"""\
study: conjugate-loo
units: {{temperature: degC, energy: J/mol, rate_constant: 1/s}}
data: {{rate_constants: k.csv}}
reactions:
  - name: step
    k_ref: {{median: 0.001, factor: 30}}
    Ea: {{mean: 70000, sd: 8000}}
reference_temperature: {T_REF} K
sampling: {{draws: 2000, tune: 700, chains: 2, seed: 8}}
""")
    study = load_study(study_path)
    prior = study.reactions[0].prior
    prior_precision = np.diag([1 / prior.ln_k_ref_sd**2, 1 / prior.ea_sd**2])
    prior_mean = np.array([prior.ln_k_ref_mean, prior.ea_mean])
    exact = []
    for i in range(kelvin.size):
        keep = np.arange(kelvin.size) != i
        w = np.diag(1 / sd[keep] ** 2)
        covariance = np.linalg.inv(prior_precision + x[keep].T @ w @ x[keep])
        mean = covariance @ (prior_precision @ prior_mean + x[keep].T @ w @ ln_k[keep])
        scale = np.sqrt(sd[i] ** 2 + x[i] @ covariance @ x[i])
        exact.append(stats.norm.logpdf(ln_k[i], x[i] @ mean, scale) - ln_k[i])
    result = fit_study(study, out=tmp_path / "res", quiet=True)
    loo = az.loo(result.idata, pointwise=True)
    assert abs(float(loo.elpd_loo) - sum(exact)) < float(loo.se)
    # Pointwise, with every Pareto k below 0.5 each PSIS term is close to its exact value; 0.1 is a loose bound
    # (the terms' Monte Carlo errors here are a few hundredths) that still catches a wrong likelihood.
    assert np.all(np.asarray(loo.pareto_k) < 0.5)
    np.testing.assert_allclose(np.asarray(loo.loo_i), exact, atol=0.1)


def _second_order_data(tmp_path, excess: float, seed: int):
    runs, meas = ["run,temperature,A,B,C"], ["run,time,A,C"]
    for index, celsius in enumerate([40, 55, 70]):
        k = arrhenius_k(0.2, 60_000.0, celsius)
        a0, b0 = 1.0, excess
        times = np.geomspace(0.1, 3.0 / (k * b0), 12)
        data = _simulate(
            lambda t, c, k=k: [-k * c[0] * c[1], -k * c[0] * c[1], k * c[0] * c[1]],
            3,
            [a0, b0, 0.0],
            times,
            seed + index,
        )
        runs.append(f"r{index},{celsius},{a0},{b0},0")
        meas += [f"r{index},{t:.6g},{a:.6g},{c:.6g}" for t, (a, _, c) in zip(times, data, strict=True)]
    (tmp_path / "runs.csv").write_text("\n".join(runs) + "\n")
    (tmp_path / "measurements.csv").write_text("\n".join(meas) + "\n")
    header = f"""\
units: {{time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}}
data: {{runs: runs.csv, measurements: measurements.csv}}
species: [A, B, C]
reference_temperature: {T_REF} K
sampling: {{draws: 400, tune: 400, chains: 2, seed: 2}}
"""
    second = tmp_path / "second.yaml"
    second.write_text(
        "study: second-order\n"
        + header
        + """\
reactions:
  - name: join
    equation: A + B -> C
    k_ref: {median: 0.2, factor: 20}
    Ea: {mean: 60, sd: 30}
"""
    )
    first = tmp_path / "first.yaml"
    first.write_text(
        "study: first-order\n"
        + header
        + f"""\
reactions:
  - name: join
    equation: A + B -> C
    rate_law: power_law
    orders: {{A: 1, B: 0}}
    k_ref: {{median: {0.2 * excess}, factor: 20}}
    Ea: {{mean: 60, sd: 30}}
"""
    )
    return second, first


def test_second_order_data_prefer_the_second_order_law(tmp_path):
    second, first = _second_order_data(tmp_path, excess=1.5, seed=30)
    result = compare_studies([first, second], root=tmp_path / "fits", quiet=True)
    for level in ("pointwise", "leave_one_run_out"):
        best = result.table[(result.table["level"] == level) & (result.table["rank"] == 1)].iloc[0]
        assert best["candidate"] == "second-order", level
        assert best["weight"] > 0.9, level
    assert "second-order is preferred over first-order" in result.verdict[0]
    written = (result.results_dir / "comparison.csv").read_text().splitlines()
    assert written[0].startswith("level,rank,candidate,elpd,se,elpd_diff,dse,p_loo,weight,high_pareto_k")
    assert len(written) == 5  # header, two candidates at two levels
    assert (result.results_dir / "figures" / "comparison.png").is_file()
    # A second comparison reuses both fits (their manifests match the studies and data).
    again = compare_studies([first, second], root=tmp_path / "fits", out=tmp_path / "again", quiet=True)
    assert again.table["elpd"].tolist() == result.table["elpd"].tolist()


def test_equivalent_laws_are_not_told_apart(tmp_path):
    # B in 50-fold excess: the second-order law is pseudo-first order in A (common practice), so the two
    # candidates predict alike and the verdict must not claim a preference.
    second, first = _second_order_data(tmp_path, excess=50.0, seed=40)
    result = compare_studies([first, second], root=tmp_path / "fits", quiet=True)
    assert all("cannot be told apart" in sentence for sentence in result.verdict)


def test_candidates_with_other_data_are_refused(tmp_path):
    second, first = _second_order_data(tmp_path, excess=1.5, seed=50)
    other = tmp_path / "other"
    other.mkdir()
    for name in ("runs.csv", "measurements.csv"):
        (other / name).write_text((tmp_path / name).read_text())
    lines = (other / "measurements.csv").read_text().splitlines()
    lines[1] = lines[1].rsplit(",", 1)[0] + ",0.001"
    (other / "measurements.csv").write_text("\n".join(lines) + "\n")
    (other / "first.yaml").write_text(first.read_text())
    with pytest.raises(StudyError, match="other data"):
        compare_studies([second, other / "first.yaml"], root=tmp_path / "fits", quiet=True, draws=100, tune=100)
    assert not (tmp_path / "fits" / "comparison").exists()
    manifest = json.loads((tmp_path / "fits" / "second-order" / "manifest.json").read_text())
    assert manifest["study"] == "second-order"
