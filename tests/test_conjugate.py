"""The sampled posterior of the rate-constant model against the exact conjugate answer.

With known noise on ln k and Gaussian priors on ln k_ref and Ea, the model is the Bayesian linear model
y = X beta + e, whose posterior is Gaussian with precision S0^-1 + X^T W X and mean
S_N (S0^-1 m0 + X^T W y) (Bishop, Pattern Recognition and Machine Learning, 2006, sec. 3.3, eqs. 3.50-3.51,
with a per-point precision matrix W). The Ea prior is truncated at zero 8 sd below its mean, which changes
the posterior by less than 1e-14 and is ignored.
"""

from __future__ import annotations

import arviz as az
import numpy as np

from inference import fit_study, load_study
from inference.physics.arrhenius import R


def _mcse_sd(dataset):
    # ArviZ 0.23's numba path of mcse(method="sd") fails on current numpy; its plain path is the same maths.
    az.Numba.disable_numba()
    try:
        return az.mcse(dataset, method="sd")
    finally:
        az.Numba.enable_numba()


def test_posterior_matches_closed_form(make_study, tmp_path):
    rng = np.random.default_rng(11)
    temperature_c = np.repeat([35.0, 50.0, 65.0, 80.0], 2)
    temperature = temperature_c + 273.15
    t_ref = 330.0
    true_ln_k_ref, true_ea = np.log(2e-3), 85_000.0
    rel_sd = np.full(temperature.size, 0.15)
    ln_k = true_ln_k_ref - true_ea / R * (1 / temperature - 1 / t_ref) + rel_sd * rng.standard_normal(temperature.size)
    table = "temperature,k,k_rel_sd\n" + "".join(
        f"{t:g},{np.exp(y):.17g},{s:g}\n" for t, y, s in zip(temperature_c, ln_k, rel_sd, strict=True)
    )
    study_text = f"""\
study: conjugate
units: {{temperature: degC, energy: J/mol, rate_constant: 1/s}}
data: {{rate_constants: k.csv}}
reactions:
  - name: step
    k_ref: {{median: 0.001, factor: 50}}
    Ea: {{mean: 80000, sd: 10000}}
reference_temperature: {t_ref} K
sampling: {{draws: 1500, tune: 700, chains: 2, seed: 5}}
"""
    study = load_study(make_study(study_text, table))
    prior = study.reactions[0].prior

    x = np.column_stack([np.ones_like(temperature), -(1 / temperature - 1 / t_ref) / R])
    weights = np.diag(1 / rel_sd**2)
    prior_precision = np.diag([1 / prior.ln_k_ref_sd**2, 1 / prior.ea_sd**2])
    prior_mean = np.array([prior.ln_k_ref_mean, prior.ea_mean])
    covariance = np.linalg.inv(prior_precision + x.T @ weights @ x)
    mean = covariance @ (prior_precision @ prior_mean + x.T @ weights @ ln_k)

    result = fit_study(study, out=tmp_path / "out", quiet=True)
    posterior = result.idata.posterior
    for index, name in enumerate(["ln_k_ref", "Ea"]):
        draws = posterior[name].sel(reaction="step")
        mcse_mean = float(az.mcse(posterior[[name]], method="mean")[name].sel(reaction="step"))
        mcse_sd = float(_mcse_sd(posterior[[name]])[name].sel(reaction="step"))
        # Four Monte Carlo standard errors: a false alarm in well under 1 run in 10,000 per check.
        assert abs(float(draws.mean()) - mean[index]) < 4 * mcse_mean, name
        assert abs(float(draws.std()) - np.sqrt(covariance[index, index])) < 4 * mcse_sd, name
    sampled_corr = np.corrcoef(posterior["ln_k_ref"].values.ravel(), posterior["Ea"].values.ravel())[0, 1]
    exact_corr = covariance[0, 1] / np.sqrt(covariance[0, 0] * covariance[1, 1])
    # sd of a sample correlation is about (1 - rho^2)/sqrt(ESS) (Fisher 1915); ESS is above 1000 here.
    assert abs(sampled_corr - exact_corr) < 4 * (1 - exact_corr**2) / np.sqrt(1000)
