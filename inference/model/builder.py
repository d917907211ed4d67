"""The model builder: the only module that makes PyMC random variables.

Parameters are sampled standardised (z ~ N(0, 1), mapped affinely to physical values) so NUTS sees a posterior
of about unit scale. Variables in the posterior, with their units:

- ``ln_k_ref[reaction]``: ln of k at T_ref, k in the reaction's rate-constant unit;
- ``Ea[reaction]``: activation energy, J/mol;
- ``ln_K_ref[reversible]``, ``dH[reversible]``: ln of the equilibrium constant K_c at T_ref, reaction enthalpy
  in J/mol (reversible steps only);
- ``temperature_exponent[reaction]``: n of the extended Arrhenius form (only when some n is fitted);
- ``ln_K_ads_ref[adsorption_site]``, ``dH_ads[adsorption_site]``: ln of a saturating law's adsorption constant
  at T_ref (K in 1/concentration) and its van 't Hoff enthalpy, J/mol;
- ``ln_k_spread[varying_reaction]``, ``run_effect[group, varying_reaction]``: between-run sd of ln k and each
  group's shift of ln k (``run_variability`` only; from ``z_run_effect``, or with ``centred`` from
  ``group_ln_k_ref``, each group's own ln k at T_ref);
- ``temperature[run]`` (``temperature[set_point]`` for rate constants): true temperatures, K
  (``temperature_uncertainty`` only);
- ``order[fitted_order]``: fitted reaction orders (power laws only);
- ``initial[run, uncertain_species]``: initial concentrations given a prior (``initial_uncertainty`` only);
- ``sigma`` or ``sigma[observed_species]``: noise scale (on the log of values for proportional and robust
  noise, in concentration units for absolute noise); absent when the data state their own errors;
- ``observation[measurement]``: the observed values, in data units; one pointwise log-likelihood each.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pymc as pm
import pytensor.tensor as pt

from ..inputs.data import Observations, RateConstantData
from ..inputs.measured import MeasurementDesign, measured_values
from ..inputs.schema import Noise
from ..inputs.study import Study
from ..physics import closed_form
from ..physics.arrhenius import R, ln_rate_constant
from ..physics.parameters import BLOCKS, KineticInputs
from ..physics.solution import NetworkSolver, SolverSettings
from .ops import NetworkPrediction

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


def _temperature_exponents(study: Study):
    """n of (T/T_ref)^n per reaction: fixed numbers, or a vector with the fitted ones sampled standardised."""
    fixed = np.array([r.temperature_exponent for r in study.reactions])
    fitted = [j for j, r in enumerate(study.reactions) if r.exponent_sd is not None]
    if not fitted:
        return fixed if np.any(fixed) else 0.0
    sd = np.array([study.reactions[j].exponent_sd for j in fitted])
    z = pm.Normal("z_temperature_exponent", 0.0, 1.0, dims="fitted_exponent")
    exponents = pt.set_subtensor(pt.as_tensor_variable(fixed)[fitted], fixed[fitted] + sd * z)
    return pm.Deterministic("temperature_exponent", exponents, dims="reaction")


def _true_temperatures(study: Study, nominal_K: np.ndarray, dims: str):
    """Nominal temperatures, or latent true ones N(nominal, sd) when the study states a temperature error."""
    if study.temperature_sd_K is None:
        return nominal_K
    z = pm.Normal("z_temperature", 0.0, 1.0, dims=dims)
    return pm.Deterministic("temperature", nominal_K + study.temperature_sd_K * z, dims=dims)


def _likelihood(noise: Noise, predicted, sigma, observed: np.ndarray, lower=None, upper=None) -> None:
    """The observation node. ``predicted`` is on the data scale; proportional and robust noise act on its log,
    and their densities are of the values themselves, so log-likelihoods compare across noise models. With
    ``lower``/``upper`` (per value; -inf/inf where exact) a censored value contributes the probability of lying
    beyond its limit (the noise model's log CDF), still one pointwise term per value."""
    if noise.model == "absolute":
        dist = pm.Normal.dist(mu=predicted, sigma=sigma)
    else:
        log_predicted = pt.log(pt.maximum(predicted, TINY))
        if noise.model == "proportional":
            dist = pm.LogNormal.dist(mu=log_predicted, sigma=sigma)
        else:

            def log_student_t(nu, mu, scale, size):
                return pt.exp(pm.StudentT.dist(nu=nu, mu=mu, sigma=scale, size=size))

            dist = pm.CustomDist.dist(noise.nu, log_predicted, sigma, dist=log_student_t)
    if lower is None and upper is None:
        model = pm.modelcontext(None)
        model.register_rv(dist, "observation", observed=observed, dims="measurement")
        return
    low = np.full(observed.size, -np.inf) if lower is None else lower
    high = np.full(observed.size, np.inf) if upper is None else upper
    pm.Censored("observation", dist, lower=low, upper=high, observed=observed, dims="measurement")


def build_rate_constant_model(study: Study, data: RateConstantData, temperature_ref: float) -> pm.Model:
    """k_obs lognormal (or log-Student-t for ``robust`` noise) about k(T), all reactions in one model."""
    coords = {"reaction": list(study.reaction_names), "measurement": np.arange(data.k.size)}
    coords |= _exponent_coords(study)
    # One true temperature per set point: replicates at one nominal temperature share the thermostat's error,
    # and a latent temperature per point would let the points fit their own noise away (sigma -> 0).
    set_points, set_point_index = np.unique(data.temperature_K, return_inverse=True)
    if study.temperature_sd_K is not None:
        coords["set_point"] = [f"{t:.6g} K" for t in set_points]
    with pm.Model(coords=coords) as model:
        ln_k_ref, ea = _arrhenius_parameters(study)
        exponents = _temperature_exponents(study)
        idx = data.reaction_index
        temperature = _true_temperatures(study, set_points, "set_point")[set_point_index]
        exponent = exponents[idx] if not isinstance(exponents, float) else 0.0
        predicted = pt.exp(ln_rate_constant(temperature, ln_k_ref[idx], ea[idx], temperature_ref, exponent))
        sigma = data.ln_k_sd if data.ln_k_sd is not None else pm.HalfNormal("sigma", sigma=study.noise.sigma.scale)
        _likelihood(study.noise, predicted, sigma, data.k)
    return model


def network_solver(study: Study, obs: Observations) -> NetworkSolver:
    """The solver for this study's network, runs, their conditions and sampling times (free parameters marked).

    Under noise on the log scale every measured concentration must be predicted to a small share of itself,
    however small it is: the smallest one sets the solver's relative floor (declared quantities are on their own
    scale, not a concentration's, and keep the default tolerances)."""
    settings = SolverSettings()
    if study.noise.on_log_scale and obs.quantity_index is None:
        concentration = obs.value / (obs.factor if obs.factor is not None else 1.0)
        positive = concentration[concentration > 0]
        if positive.size:
            settings = SolverSettings(relative_floor=float(positive.min()))
    return NetworkSolver(
        study.network, list(obs.times), layout=study.sensitivity_layout(), conditions=obs.conditions, settings=settings
    )


def _van_t_hoff_pair(ln_name: str, dh_name: str, dims: str, priors: np.ndarray):
    """ln K at T_ref and its enthalpy, sampled standardised; ``priors`` rows are (ln mean, ln sd, dH mean,
    dH sd) with dH in J/mol."""
    z_ln = pm.Normal(f"z_{ln_name}", 0.0, 1.0, dims=dims)
    z_dh = pm.Normal(f"z_{dh_name}", 0.0, 1.0, dims=dims)
    ln_ref = pm.Deterministic(ln_name, priors[:, 0] + priors[:, 1] * z_ln, dims=dims)
    dh = pm.Deterministic(dh_name, priors[:, 2] + priors[:, 3] * z_dh, dims=dims)
    return ln_ref, dh


def _equilibrium_parameters(study: Study):
    """ln K_c at T_ref and dH of every reversible step (None without any)."""
    equilibria = [r.equilibrium for r in study.reactions if r.equilibrium is not None]
    if not equilibria:
        return None, None
    rows = np.array([(q.ln_eq_ref_mean, q.ln_eq_ref_sd, q.dh_mean, q.dh_sd) for q in equilibria])
    return _van_t_hoff_pair("ln_K_ref", "dH", "reversible", rows)


def _exponent_coords(study: Study) -> dict:
    fitted = [r.name for r in study.reactions if r.exponent_sd is not None]
    return {"fitted_exponent": fitted} if fitted else {}


def _adsorption_parameters(study: Study):
    """ln K_ads at T_ref and dH_ads of every adsorption site (None without sites)."""
    sites = [site for r in study.reactions for site in r.adsorption]
    if not sites:
        return None, None
    rows = np.array([(a.ln_ref_mean, a.ln_ref_sd, a.dh_mean, a.dh_sd) for a in sites])
    return _van_t_hoff_pair("ln_K_ads_ref", "dH_ads", "adsorption_site", rows)


def _run_effects(study: Study, obs: Observations, ln_k):
    """ln k plus each group's shift for the reactions that vary from run to run: tau_j z_gj (non-centred), or
    (centred) each group's own ln k_ref drawn from N(ln k_ref, tau_j), the shift being their difference."""
    spec = study.run_variability
    if spec is None:
        return ln_k
    varying = list(spec.reactions)
    spread = pm.HalfNormal("ln_k_spread", sigma=spec.scale, dims="varying_reaction")
    if spec.centred:
        # Data-rich groups pin each group's ln k_ref; sampled directly, those are near-independent coordinates.
        # Sampling the shifts instead leaves a narrow ridge (ln k_ref up, every shift down) that a diagonal
        # mass matrix follows slowly.
        ln_k_ref = pm.modelcontext(None)["ln_k_ref"][varying]
        group_ln_k_ref = pm.Normal("group_ln_k_ref", ln_k_ref, spread, dims=("group", "varying_reaction"))
        effect = pm.Deterministic("run_effect", group_ln_k_ref - ln_k_ref, dims=("group", "varying_reaction"))
    else:
        z = pm.Normal("z_run_effect", 0.0, 1.0, dims=("group", "varying_reaction"))
        effect = pm.Deterministic("run_effect", spread * z, dims=("group", "varying_reaction"))
    return pt.inc_subtensor(ln_k[:, varying], effect[obs.group_index])


def _temperature_slopes(study: Study, ea, dh, dh_ads, exponents) -> dict:
    """The shared slopes Ea/R, dH/R, dH_ads/R (K) and fitted temperature exponents, where some run's temperature
    changes (``SensitivityLayout.temperature_varies``); empty otherwise."""
    layout = study.sensitivity_layout()
    if not layout.temperature_varies:
        return {name: pt.zeros(0) for name in ("activation", "eq_enthalpy", "ads_enthalpy", "exponent")}
    fitted = list(layout.fitted_exponents)
    return {
        "activation": ea / R,
        "eq_enthalpy": dh / R if dh is not None else pt.zeros(0),
        "ads_enthalpy": dh_ads / R if dh_ads is not None else pt.zeros(0),
        "exponent": exponents[fitted] if fitted else pt.zeros(0),
    }


def network_coords(study: Study, obs: Observations) -> dict:
    """Named coordinates of a network model."""
    coords = {
        "reaction": list(study.reaction_names),
        "run": list(obs.run_ids),
        "measurement": np.arange(obs.value.size),
    }
    if obs.quantity_index is None:
        coords["observed_species"] = [study.species[i] for i in obs.observed_species]
    else:
        coords["observed_quantity"] = [obs.quantities[q].name for q in np.unique(obs.quantity_index)]
    if obs.design is not None:
        if obs.design.fitted_scales:
            coords["response_factor"] = [f.label for f in obs.design.fitted_scales]
        if obs.design.fitted_weights:
            coords["weight_factor"] = [f.label for f in obs.design.fitted_weights]
    layout = study.sensitivity_layout()
    for block in BLOCKS:  # a coordinate for every parameter block the study has
        labels = block.labels(layout)
        if labels:
            coords[block.coordinate] = labels
    if study.run_variability is not None:
        coords["varying_reaction"] = [study.reaction_names[j] for j in study.run_variability.reactions]
        coords["group"] = list(obs.group_names)
    return coords | _exponent_coords(study)


def build_network_model(
    study: Study, obs: Observations, temperature_ref: float, failure_log: Path | None = None
) -> pm.Model:
    """All runs of a network study in one model: Arrhenius (and van 't Hoff) per reaction, profiles from the
    closed form where one is exact, otherwise from the ODE solver with forward sensitivities."""
    network = study.network
    with pm.Model(coords=network_coords(study, obs)) as model:
        temperature = _true_temperatures(study, obs.temperature_K, "run")[:, None]
        ln_k_ref, ea = _arrhenius_parameters(study)
        exponents = _temperature_exponents(study)
        exponent = exponents[None, :] if not isinstance(exponents, float) else 0.0
        ln_k = ln_rate_constant(temperature, ln_k_ref[None, :], ea[None, :], temperature_ref, exponent)
        ln_k = _run_effects(study, obs, ln_k)
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

        ln_ads_ref, dh_ads = _adsorption_parameters(study)
        ln_ads = (
            ln_rate_constant(temperature, ln_ads_ref[None, :], dh_ads[None, :], temperature_ref)
            if ln_ads_ref is not None
            else pt.zeros((len(obs.run_ids), 0))
        )
        slopes = _temperature_slopes(study, ea, dh, dh_ads, exponents)
        # Concentrations are predicted at ``points``: the measurements, or the basis points of declared quantities.
        points = obs if obs.design is None else basis_points(obs)
        kind = closed_form.closed_form_kind(network)
        if kind is not None and not study.initial_uncertainty and obs.isothermal_batch:
            k = pt.exp(ln_k[points.run_index, 0])
            profiles = closed_form.concentrations(kind, network, obs.initial[points.run_index], k, points.time, xp=pt)
            predicted = profiles[pt.arange(points.value.size), points.species_index]
        else:
            fixed_exponents = np.array([r.temperature_exponent for r in study.reactions])
            op = NetworkPrediction(
                network_solver(study, obs), points, network.forward_orders, failure_log, fixed_exponents
            )
            raw, _ = op(
                *KineticInputs(ln_k=ln_k, ln_eq=ln_eq, ln_ads=ln_ads, orders=orders, initial=initial_free, **slopes)
            )
            failed = pt.any(pt.isnan(raw))
            # A failed integration rejects the draw: the log-density is -inf there.
            pm.Potential("solver_guard", pt.switch(failed, -np.inf, 0.0))
            predicted = pt.switch(pt.isnan(raw), 1.0, raw)
        if obs.design is not None:
            predicted = _measured_scale(obs.design, predicted)

        noise = study.noise
        if noise.per_species:
            sigma_all = pm.HalfNormal("sigma", sigma=noise.sigma.scale, dims=_noise_dimension(obs))
            measured = obs.species_index if obs.quantity_index is None else obs.quantity_index
            sigma = sigma_all[np.searchsorted(np.unique(measured), measured)]
        else:
            sigma = pm.HalfNormal("sigma", sigma=noise.sigma.scale)
        _likelihood(noise, predicted, sigma, obs.value, obs.lower, obs.upper)
    return model


def _noise_dimension(obs: Observations) -> str:
    """One noise scale per observed species, or per declared measured quantity when the study declares them."""
    return "observed_species" if obs.quantity_index is None else "observed_quantity"


def basis_points(obs: Observations) -> Observations:
    """The runs of ``obs`` with the design's basis points (run, time, species) in place of the measurements."""
    design = obs.design
    return replace(
        obs,
        run_index=design.basis_run,
        time_index=design.basis_time,
        species_index=design.basis_species,
        value=np.zeros(design.basis_run.size),
        line=np.zeros(design.basis_run.size, dtype=int),
        factor=None,
        design=None,
        quantity_index=None,
        lower=None,
        upper=None,
    )


def _fitted_factors(name: str, dims: str, factors: tuple) -> list:
    """Fitted positive factors, lognormal, sampled standardised: exp(ln mean + ln sd z)."""
    if not factors:
        return []
    ln_mean = np.array([f.ln_mean for f in factors])
    ln_sd = np.array([f.ln_sd for f in factors])
    z = pm.Normal(f"z_{name}", 0.0, 1.0, dims=dims)
    return [pm.Deterministic(name, pt.exp(ln_mean + ln_sd * z), dims=dims)]


def _measured_scale(design: MeasurementDesign, concentrations):
    """Predicted values on the scale each quantity was measured (``inputs.measured``), with fitted response
    factors (``response[response_factor]``) and weights (``weight[weight_factor]``)."""
    scales = pt.concatenate(
        [design.fixed_scales, *_fitted_factors("response", "response_factor", design.fitted_scales)]
    )
    weights = pt.concatenate([design.fixed_weights, *_fitted_factors("weight", "weight_factor", design.fitted_weights)])
    return measured_values(design, concentrations, weights, scales)
