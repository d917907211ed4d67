"""The model builder: the only module that makes PyMC random variables.

Parameters are sampled standardised (z ~ N(0, 1), mapped affinely to physical values) so NUTS sees a posterior
of about unit scale. Variables in the posterior, with their units:

- ``ln_k_ref[reaction]``: ln of k at T_ref, k in the reaction's rate-constant unit;
- ``Ea[reaction]``: activation energy, J/mol;
- ``ln_K_ref[reversible]``, ``dH[reversible]``: ln of the equilibrium constant K_c at T_ref, reaction enthalpy
  in J/mol (reversible steps only);
- ``order[fitted_order]``: fitted reaction orders (power laws only);
- ``initial[run, uncertain_species]``: initial concentrations given a prior (``initial_uncertainty`` only);
- ``sigma`` or ``sigma[observed_species]``: noise scale (on the log of values for proportional and robust
  noise, in concentration units for absolute noise); absent when the data state their own errors;
- ``observation[measurement]``: the observed values, in data units; one pointwise log-likelihood each.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from . import closed_form
from .arrhenius import ln_rate_constant
from .data import Observations, RateConstantData
from .ops import NetworkPrediction
from .schema import Noise
from .solution import NetworkSolver
from .study import Study

#: Predictions are floored here before their log is taken (a concentration of exactly zero has no log).
TINY = 1e-300


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


def _likelihood(noise: Noise, predicted, sigma, observed: np.ndarray) -> None:
    """The observation node. ``predicted`` is on the data scale; proportional and robust noise act on its log,
    and their densities are of the values themselves, so log-likelihoods compare across noise models."""
    if noise.model == "absolute":
        pm.Normal("observation", mu=predicted, sigma=sigma, observed=observed, dims="measurement")
        return
    log_predicted = pt.log(pt.maximum(predicted, TINY))
    if noise.model == "proportional":
        pm.LogNormal("observation", mu=log_predicted, sigma=sigma, observed=observed, dims="measurement")
        return

    def log_student_t(nu, mu, scale, size):
        return pt.exp(pm.StudentT.dist(nu=nu, mu=mu, sigma=scale, size=size))

    pm.CustomDist(
        "observation", noise.nu, log_predicted, sigma, dist=log_student_t, observed=observed, dims="measurement"
    )


def build_rate_constant_model(study: Study, data: RateConstantData, temperature_ref: float) -> pm.Model:
    """k_obs lognormal (or log-Student-t for ``robust`` noise) about k(T), all reactions in one model."""
    coords = {"reaction": list(study.reaction_names), "measurement": np.arange(data.k.size)}
    with pm.Model(coords=coords) as model:
        ln_k_ref, ea = _arrhenius_parameters(study)
        idx = data.reaction_index
        predicted = pt.exp(ln_rate_constant(data.temperature_K, ln_k_ref[idx], ea[idx], temperature_ref))
        sigma = data.ln_k_sd if data.ln_k_sd is not None else pm.HalfNormal("sigma", sigma=study.noise.sigma.scale)
        _likelihood(study.noise, predicted, sigma, data.k)
    return model


def network_solver(study: Study, obs: Observations) -> NetworkSolver:
    """The solver for this study's network, runs and sampling times (free orders and initial values marked)."""
    species = study.species
    free_orders = tuple((j, species.index(f.species)) for j, r in enumerate(study.reactions) for f in r.fitted_orders)
    free_initial = tuple(species.index(name) for name, _ in study.initial_uncertainty)
    return NetworkSolver(study.network, list(obs.times), free_orders=free_orders, free_initial=free_initial)


def _equilibrium_parameters(study: Study):
    reversible = [r for r in study.reactions if r.equilibrium is not None]
    if not reversible:
        return None, None
    priors = [r.equilibrium for r in reversible]
    z_ln_eq = pm.Normal("z_ln_K_ref", 0.0, 1.0, dims="reversible")
    z_dh = pm.Normal("z_dH", 0.0, 1.0, dims="reversible")
    ln_eq_ref = pm.Deterministic(
        "ln_K_ref",
        np.array([p.ln_eq_ref_mean for p in priors]) + np.array([p.ln_eq_ref_sd for p in priors]) * z_ln_eq,
        dims="reversible",
    )
    dh = pm.Deterministic(
        "dH", np.array([p.dh_mean for p in priors]) + np.array([p.dh_sd for p in priors]) * z_dh, dims="reversible"
    )
    return ln_eq_ref, dh


def network_coords(study: Study, obs: Observations) -> dict:
    """Named coordinates of a network model."""
    coords = {
        "reaction": list(study.reaction_names),
        "run": list(obs.run_ids),
        "measurement": np.arange(obs.value.size),
        "observed_species": [study.species[i] for i in obs.observed_species],
    }
    reversible = [r.name for r in study.reactions if r.equilibrium is not None]
    if reversible:
        coords["reversible"] = reversible
    fitted = [f"{r.name}:{f.species}" for r in study.reactions for f in r.fitted_orders]
    if fitted:
        coords["fitted_order"] = fitted
    if study.initial_uncertainty:
        coords["uncertain_species"] = [name for name, _ in study.initial_uncertainty]
    return coords


def build_network_model(
    study: Study, obs: Observations, temperature_ref: float, failure_log: Path | None = None
) -> pm.Model:
    """All runs of a network study in one model: Arrhenius (and van 't Hoff) per reaction, profiles from the
    closed form where one is exact, otherwise from the ODE solver with forward sensitivities."""
    network = study.network
    temperature = obs.temperature_K[:, None]
    with pm.Model(coords=network_coords(study, obs)) as model:
        ln_k_ref, ea = _arrhenius_parameters(study)
        ln_k = ln_rate_constant(temperature, ln_k_ref[None, :], ea[None, :], temperature_ref)
        ln_eq_ref, dh = _equilibrium_parameters(study)
        ln_eq = (
            ln_rate_constant(temperature, ln_eq_ref[None, :], dh[None, :], temperature_ref)
            if ln_eq_ref is not None
            else pt.zeros((len(obs.run_ids), 0))
        )
        fitted = [f for r in study.reactions for f in r.fitted_orders]
        orders = (
            pm.Uniform(
                "order",
                lower=np.array([f.lower for f in fitted]),
                upper=np.array([f.upper for f in fitted]),
                dims="fitted_order",
            )
            if fitted
            else pt.zeros(0)
        )
        if study.initial_uncertainty:
            columns = [study.species.index(name) for name, _ in study.initial_uncertainty]
            spread = np.array([share for _, share in study.initial_uncertainty])
            z_initial = pm.Normal("z_initial", 0.0, 1.0, dims=("run", "uncertain_species"))
            initial_free = pm.Deterministic(
                "initial", obs.initial[:, columns] * pt.exp(spread * z_initial), dims=("run", "uncertain_species")
            )
        else:
            initial_free = pt.zeros((len(obs.run_ids), 0))

        kind = closed_form.closed_form_kind(network)
        if kind is not None and not study.initial_uncertainty:
            k = pt.exp(ln_k[obs.run_index, 0])
            profiles = closed_form.concentrations(kind, network, obs.initial[obs.run_index], k, obs.time, xp=pt)
            predicted = profiles[pt.arange(obs.value.size), obs.species_index]
        else:
            op = NetworkPrediction(network_solver(study, obs), obs, network.forward_orders, failure_log)
            raw, _ = op(ln_k, ln_eq, orders, initial_free)
            failed = pt.any(pt.isnan(raw))
            # A failed integration rejects the draw: the log-density is -inf there.
            pm.Potential("solver_guard", pt.switch(failed, -np.inf, 0.0))
            predicted = pt.switch(pt.isnan(raw), 1.0, raw)

        noise = study.noise
        if noise.per_species:
            sigma_all = pm.HalfNormal("sigma", sigma=noise.sigma.scale, dims="observed_species")
            position = np.searchsorted(obs.observed_species, obs.species_index)
            sigma = sigma_all[position]
        else:
            sigma = pm.HalfNormal("sigma", sigma=noise.sigma.scale)
        _likelihood(noise, predicted, sigma, obs.value)
    return model
