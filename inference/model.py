"""The model builder: the only module that makes PyMC random variables.

Parameters are sampled standardised (z ~ N(0, 1), mapped affinely to physical values) so NUTS sees a posterior
of about unit scale. Variables in the posterior, with their units:

- ``ln_k_ref[reaction]``: ln of k at T_ref, k in the study's rate-constant unit;
- ``Ea[reaction]``: activation energy, J/mol;
- ``sigma``: noise scale on ln k (absent when the data state their own errors);
- ``observation[measurement]``: the observed ln k (one pointwise log-likelihood per measurement).
"""

from __future__ import annotations

import numpy as np
import pymc as pm

from .arrhenius import ln_rate_constant
from .data import RateConstantData
from .study import Study


def _arrhenius_parameters(study: Study) -> tuple:
    """Standardised priors of ln k_ref and Ea for every reaction; returns the two deterministic vectors."""
    priors = [r.prior for r in study.reactions]
    ln_k_mean = np.array([p.ln_k_ref_mean for p in priors])
    ln_k_sd = np.array([p.ln_k_ref_sd for p in priors])
    ea_mean = np.array([p.ea_mean for p in priors])
    ea_sd = np.array([p.ea_sd for p in priors])
    z_ln_k_ref = pm.Normal("z_ln_k_ref", 0.0, 1.0, dims="reaction")
    # Ea > 0: truncating the standard normal at -mean/sd truncates Ea at zero.
    z_ea = pm.TruncatedNormal("z_Ea", 0.0, 1.0, lower=-ea_mean / ea_sd, dims="reaction")
    ln_k_ref = pm.Deterministic("ln_k_ref", ln_k_mean + ln_k_sd * z_ln_k_ref, dims="reaction")
    ea = pm.Deterministic("Ea", ea_mean + ea_sd * z_ea, dims="reaction")
    return ln_k_ref, ea


def build_rate_constant_model(study: Study, data: RateConstantData, temperature_ref: float) -> pm.Model:
    """ln k_obs ~ Normal(ln k(T), sigma) (or Student-t for ``robust`` noise), all reactions in one model."""
    coords = {"reaction": list(study.reaction_names), "measurement": np.arange(data.k.size)}
    with pm.Model(coords=coords) as model:
        ln_k_ref, ea = _arrhenius_parameters(study)
        idx = data.reaction_index
        predicted = ln_rate_constant(data.temperature_K, ln_k_ref[idx], ea[idx], temperature_ref)
        sigma = data.ln_k_sd if data.ln_k_sd is not None else pm.HalfNormal("sigma", sigma=study.noise.sigma.scale)
        if study.noise.model == "robust":
            pm.StudentT(
                "observation", nu=study.noise.nu, mu=predicted, sigma=sigma, observed=data.ln_k, dims="measurement"
            )
        else:
            pm.Normal("observation", mu=predicted, sigma=sigma, observed=data.ln_k, dims="measurement")
    return model
