"""Posterior summaries, derived quantities, the classical fits beside them, and predictive checks.

Every table returned here is a pandas DataFrame whose columns are documented in README ("The results folder").
Values are in the study's units: energies in ``units.energy``, rate constants and A in ``units.rate_constant``,
temperatures in ``units.temperature``.
"""

from __future__ import annotations

import math

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr

from ..inputs import units
from ..inputs.data import Observations, RateConstantData
from ..inputs.rate_laws import REGISTRY
from ..inputs.study import ReactionSpec, Study
from ..physics.arrhenius import (
    eyring_activation,
    linearised_fit,
    ln_pre_exponential,
    ln_rate_constant,
    two_point_estimate,
)

#: The columns of ``summary.csv``: ``T_ref_K`` is the reference temperature of the fit (K), the same on every row
#: (k_ref, K_ref and every other value "at T_ref" hold there); ``extrapolated`` is true or false on the rows of k at
#: a ``report.k_at`` temperature (outside the temperatures the data span, or not) and blank on the others.
SUMMARY_COLUMNS = [
    "parameter",
    "unit",
    "mean",
    "sd",
    "median",
    "q05",
    "q95",
    "ess_bulk",
    "ess_tail",
    "r_hat",
    "T_ref_K",
    "extrapolated",
]


def temperature_label(kelvin: float, unit: str) -> str:
    """A temperature in the study's unit, for names like ``k[step, 80 degC]``."""
    return f"{float(units.kelvin_to(kelvin, unit)):g} {unit}"


def k_at_label(reaction: str, kelvin: float, unit: str) -> str:
    """The name of the row of k of ``reaction`` at ``kelvin``, e.g. ``k[step, 25 degC]``."""
    return f"k[{reaction}, {temperature_label(kelvin, unit)}]"


def derived_quantities(
    study: Study, posterior: xr.Dataset, temperature_ref: float
) -> dict[str, tuple[str, xr.DataArray]]:
    """Draws of every reported quantity, by name, with its unit.

    Per reaction: k_ref, Ea, A and k at the study's ``report.k_at`` temperatures; per reversible step K_ref
    (K_c at T_ref) and dH; fitted orders; uncertain initial concentrations; the noise scale(s).
    """
    energy = study.units.energy
    quantities: dict[str, tuple[str, xr.DataArray]] = {}
    for j, spec in enumerate(study.reactions):
        name = spec.name
        if spec.equilibrium is not None:
            quantities |= _equilibrium_quantities(spec, posterior, energy)
        if spec.held:  # no rate: its k_ref and Ea are placeholders no data inform
            continue
        ln_k_ref = posterior["ln_k_ref"].sel(reaction=name, drop=True)
        ea = posterior["Ea"].sel(reaction=name, drop=True)
        exponent = (
            posterior["temperature_exponent"].sel(reaction=name, drop=True)
            if "temperature_exponent" in posterior
            else spec.temperature_exponent
        )
        quantities[f"k_ref[{name}]"] = (spec.k_unit, np.exp(ln_k_ref))
        quantities[f"Ea[{name}]"] = (energy, units.joule_per_mol_to(ea, energy))
        a_unit = spec.k_unit  # A of k = A T^n exp(-Ea/RT) is per K^n
        if spec.exponent_sd is not None:
            quantities[f"n[{name}]"] = ("", exponent)
            a_unit = f"{spec.k_unit}/K^n"
        elif spec.temperature_exponent:
            a_unit = f"{spec.k_unit}/K^{spec.temperature_exponent:g}"
        quantities[f"A[{name}]"] = (a_unit, np.exp(ln_pre_exponential(ln_k_ref, ea, temperature_ref, exponent)))
        for kelvin in study.k_at_K:
            quantities[k_at_label(name, kelvin, study.units.temperature)] = (
                spec.k_unit,
                np.exp(ln_rate_constant(kelvin, ln_k_ref, ea, temperature_ref, exponent)),
            )
        for fitted in spec.fitted_orders:
            label = f"{name}:{fitted.species}"
            quantities[f"order[{label}]"] = ("", posterior["order"].sel(fitted_order=label, drop=True))
        quantities |= _law_quantities(study, spec, posterior, ln_k_ref)
        if study.run_variability is not None and j in study.run_variability.reactions:
            spread = posterior["ln_k_spread"].sel(varying_reaction=name, drop=True)
            quantities[f"ln_k_spread[{name}]"] = ("log units", spread)
        if study.transition_state is not None and spec.molecularity is not None:
            quantities |= _activation_quantities(study, spec, ln_k_ref, ea, exponent, temperature_ref)
    if "temperature" in posterior:
        unit = study.units.temperature
        fitted = posterior["temperature"]
        dim = fitted.dims[-1]  # "run" for batch runs, "set_point" for rate constants
        for label in fitted.coords[dim].values:
            kelvin = fitted.sel({dim: label}, drop=True)
            quantities[f"temperature[{label}]"] = (unit, kelvin.copy(data=units.kelvin_to(kelvin.values, unit)))
    if "initial" in posterior:
        for run in posterior["initial"].coords["run"].values:
            for species in posterior["initial"].coords["uncertain_species"].values:
                draws = posterior["initial"].sel(run=run, uncertain_species=species, drop=True)
                quantities[f"initial[{run}, {species}]"] = (study.units.concentration or "", draws)
    for name, dim, unit in (
        ("response", "response_factor", "signal per concentration"),
        ("weight", "weight_factor", "signal per concentration and path length"),
    ):
        if name in posterior:
            for label in posterior[name].coords[dim].values:
                quantities[f"{name}[{label}]"] = (unit, posterior[name].sel({dim: label}, drop=True))
    if "sigma" in posterior:
        unit = study.units.concentration if study.noise.model == "absolute" else "log units"
        sigma = posterior["sigma"]
        per = next((dim for dim in ("observed_species", "observed_quantity") if dim in sigma.dims), None)
        if per is not None:
            if study.noise.model == "absolute" and per == "observed_quantity":
                unit = "measured units"
            for label in sigma.coords[per].values:
                quantities[f"sigma[{label}]"] = (unit or "", sigma.sel({per: label}, drop=True))
        else:
            quantities["sigma"] = (unit or "", sigma)
    return quantities


def _equilibrium_quantities(spec: ReactionSpec, posterior: xr.Dataset, energy: str) -> dict:
    """K_ref (K_c at T_ref) and dH of a reversible step."""
    name = spec.name
    return {
        f"K_ref[{name}]": (spec.eq_unit, np.exp(posterior["ln_K_ref"].sel(reversible=name, drop=True))),
        f"dH[{name}]": (energy, units.joule_per_mol_to(posterior["dH"].sel(reversible=name, drop=True), energy)),
    }


def _law_quantities(study: Study, spec: ReactionSpec, posterior: xr.Dataset, ln_k_ref: xr.DataArray) -> dict:
    """The quantities the reaction's rate law derives (``RateLaw.derived_quantities``) from its draws."""
    sites = {}
    for site in spec.adsorption:
        label = f"{spec.name}:{site.species}"
        sites[site.species] = (
            posterior["ln_K_ads_ref"].sel(adsorption_site=label, drop=True),
            posterior["dH_ads"].sel(adsorption_site=label, drop=True),
        )
    return REGISTRY[spec.rate_law].derived_quantities(spec, ln_k_ref, sites, study.units)


def _activation_quantities(study: Study, spec: ReactionSpec, ln_k_ref, ea, exponent, temperature_ref: float) -> dict:
    """Eyring's dH, dS and dG of activation at T_ref, with k converted to SI units first."""
    setting = study.transition_state
    ln_k_si = ln_k_ref + np.log(units.si_factor(spec.k_unit))
    values = eyring_activation(
        ln_k_si, ea, temperature_ref, spec.molecularity, setting.phase, setting.standard_concentration_si, exponent
    )
    energy = study.units.energy
    return {
        f"dH_activation[{spec.name}]": (energy, units.joule_per_mol_to(values.enthalpy, energy)),
        f"dS_activation[{spec.name}]": ("J/(mol*K)", values.entropy),
        f"dG_activation[{spec.name}]": (energy, units.joule_per_mol_to(values.gibbs, energy)),
    }


def extrapolated_rows(study: Study, measured_K: np.ndarray) -> dict[str, bool]:
    """For every row of k at a ``report.k_at`` temperature, whether that temperature lies outside the measured
    range (``measured_K``: the temperatures the data span, K)."""
    low, high = float(np.min(measured_K)), float(np.max(measured_K))
    return {
        k_at_label(name, kelvin, study.units.temperature): not low <= kelvin <= high
        for name in study.reaction_names
        for kelvin in study.k_at_K
    }


def extrapolation_notes(study: Study, measured_K: np.ndarray) -> list[str]:
    """One sentence for every reported temperature outside the measured range, saying how far outside."""
    low, high = float(np.min(measured_K)), float(np.max(measured_K))
    unit = study.units.temperature
    notes = []
    for kelvin in study.k_at_K:
        if not low <= kelvin <= high:
            edge = low if kelvin < low else high
            side = "below the lowest" if kelvin < low else "above the highest"
            notes.append(
                f"EXTRAPOLATED: k at {temperature_label(kelvin, unit)} is {abs(kelvin - edge):.3g} K {side} "
                f"measured temperature ({temperature_label(edge, unit)})"
            )
    return notes


def summary_table(
    quantities: dict[str, tuple[str, xr.DataArray]], temperature_ref: float, extrapolated: dict[str, bool] | None = None
) -> pd.DataFrame:
    """One row per quantity, the columns ``SUMMARY_COLUMNS``; ``temperature_ref`` is T_ref (K), ``extrapolated``
    flags the rows of k at a temperature (``extrapolated_rows``). R-hat is NaN with one chain (it needs two)."""
    dataset = xr.Dataset({name: draws for name, (_, draws) in quantities.items()})
    ess_bulk = az.ess(dataset, method="bulk")
    ess_tail = az.ess(dataset, method="tail")
    r_hat = az.rhat(dataset) if dataset.sizes.get("chain", 1) > 1 else None
    flags = extrapolated or {}
    rows = []
    for name, (unit, draws) in quantities.items():
        values = draws.values.ravel()
        rows.append(
            {
                "parameter": name,
                "unit": unit,
                "mean": values.mean(),
                "sd": values.std(ddof=1),
                "median": np.median(values),
                "q05": np.quantile(values, 0.05),
                "q95": np.quantile(values, 0.95),
                "ess_bulk": float(ess_bulk[name]),
                "ess_tail": float(ess_tail[name]),
                "r_hat": float(r_hat[name]) if r_hat is not None else np.nan,
                "T_ref_K": temperature_ref,
                "extrapolated": flags.get(name),
            }
        )
    return pd.DataFrame(rows, columns=SUMMARY_COLUMNS)


def correlation_table(study: Study, posterior: xr.Dataset, temperature_ref: float) -> pd.DataFrame:
    """Posterior correlation of ln A with Ea next to that of ln k_ref with Ea, per reaction.

    The first is typically close to 1: that is why Arrhenia samples ln k_ref at T_ref rather than ln A.
    """
    rows = []
    for name in (spec.name for spec in study.reactions if not spec.held):
        ln_k_ref = posterior["ln_k_ref"].sel(reaction=name).values.ravel()
        ea = posterior["Ea"].sel(reaction=name).values.ravel()
        ln_a = ln_pre_exponential(ln_k_ref, ea, temperature_ref)
        rows.append(
            {
                "reaction": name,
                "corr_ln_A_Ea": float(np.corrcoef(ln_a, ea)[0, 1]),
                "corr_ln_k_ref_Ea": float(np.corrcoef(ln_k_ref, ea)[0, 1]),
            }
        )
    return pd.DataFrame(rows)


def classical_table(study: Study, data: RateConstantData) -> pd.DataFrame:
    """The linearised least-squares fit of ln k on 1/T and the two-point estimate, per reaction.

    Columns: reaction, method (``linearised`` or ``two_point``), quantity, unit, value, se, ci95_low, ci95_high.
    """
    energy, k_unit = study.units.energy, study.units.rate_constant or ""

    def to_energy(value: float) -> float:
        return float(units.joule_per_mol_to(value, energy))

    rows = []
    for index, name in enumerate(study.reaction_names):
        rows_of = data.rows_of(index)
        temperature, k = data.temperature_K[rows_of], data.k[rows_of]
        fit = linearised_fit(temperature, k)
        ea_low, ea_high = fit.ea_ci
        a_low, a_high = fit.a_ci
        s_low, s_high = fit.slope_ci
        i_low, i_high = fit.intercept_ci
        rows += [
            (name, "linearised", "slope", "K", fit.slope, fit.se_slope, s_low, s_high),
            (name, "linearised", "intercept", f"ln({k_unit})", fit.intercept, fit.se_intercept, i_low, i_high),
            (
                name,
                "linearised",
                "Ea",
                energy,
                to_energy(fit.ea),
                to_energy(fit.se_ea),
                to_energy(ea_low),
                to_energy(ea_high),
            ),
            (name, "linearised", "A", k_unit, fit.a, np.nan, a_low, a_high),
            (name, "linearised", "r_squared", "", fit.r_squared, np.nan, np.nan, np.nan),
            (name, "linearised", "points", "", float(fit.n), np.nan, np.nan, np.nan),
        ]
        pair = two_point_estimate(temperature, k)
        rows += [
            (name, "two_point", "Ea", energy, to_energy(pair.ea), np.nan, np.nan, np.nan),
            (name, "two_point", "A", k_unit, pair.a, np.nan, np.nan, np.nan),
        ]
    return pd.DataFrame(
        rows, columns=["reaction", "method", "quantity", "unit", "value", "se", "ci95_low", "ci95_high"]
    )


def predictive_intervals(observed: np.ndarray, idata: az.InferenceData) -> pd.DataFrame:
    """Observed value, posterior predictive median and 90 % interval, and whether the value lies inside."""
    predicted = idata.posterior_predictive["observation"].stack(sample=("chain", "draw")).values
    q05, median, q95 = np.quantile(predicted, [0.05, 0.5, 0.95], axis=-1)
    return pd.DataFrame(
        {
            "observed": observed,
            "median": median,
            "q05": q05,
            "q95": q95,
            "inside_90": (observed >= q05) & (observed <= q95),
        }
    )


def rate_constant_fit_checks(study: Study, data: RateConstantData, idata: az.InferenceData) -> pd.DataFrame:
    """Columns: measurement, line, reaction, temperature, unit (of k), observed, median, q05, q95, inside_90."""
    names = np.array(study.reaction_names)
    labels = pd.DataFrame(
        {
            "measurement": np.arange(data.k.size),
            "line": data.line,
            "reaction": names[data.reaction_index],
            "temperature": units.kelvin_to(data.temperature_K, study.units.temperature),
            "unit": study.units.rate_constant or "",
        }
    )
    return pd.concat([labels, predictive_intervals(data.k, idata)], axis=1)


def measured_units(study: Study, obs: Observations) -> np.ndarray:
    """Per measurement, the unit of its value: the concentration unit, concentration x volume for measured amounts,
    "signal" for a signal or a combination (the instrument's own unit), "%" for an area % (a composition with
    scale 100; 1/scale for other scales), "" for a share, a conversion or a yield."""
    concentration = study.units.concentration or ""
    if study.measured_as == "amount":
        concentration = units.amount_unit(concentration, study.units.volume)
    if obs.quantity_index is None:
        return np.full(obs.value.size, concentration, dtype=object)
    shown = []
    for spec in obs.quantities:
        if spec.kind == "composition":  # scale x a share: in 1/scale
            scale = math.exp(spec.scale.ln_mean)
            shown.append("%" if math.isclose(scale, 100.0) else ("" if math.isclose(scale, 1.0) else f"1/{scale:g}"))
        else:
            shown.append(
                {"concentration": concentration, "signal": "signal", "combination": "signal"}.get(spec.kind, "")
            )
    return np.array(shown, dtype=object)[obs.quantity_index]


def network_fit_checks(study: Study, obs: Observations, idata: az.InferenceData) -> pd.DataFrame:
    """Columns: measurement, line, run, temperature (at the time of the measurement), time (for steady states:
    the residence time), species, unit (``measured_units``), observed, median, q05, q95, inside_90; steady states
    add ``reactor``, declared quantities ``quantity``, censored values ``censored``."""
    labels = pd.DataFrame(
        {
            "measurement": np.arange(obs.value.size),
            "line": obs.line,
            "run": np.array(obs.run_ids)[obs.run_index],
            "temperature": units.kelvin_to(obs.measurement_kelvin(), study.units.temperature),
            "time": obs.time,
            "species": np.array(study.species)[obs.species_index],
        }
    )
    if obs.steady:
        kinds = np.array(["cstr" if s.overflow else "pfr" for s in obs.setups])
        labels.insert(3, "reactor", kinds[obs.run_index])
    if obs.quantity_index is not None:  # the value is of a declared quantity, on the scale it was measured
        labels.insert(labels.columns.get_loc("species") + 1, "quantity", obs.measured_names(study.species))
    if obs.lower is not None or obs.upper is not None:
        labels["censored"] = obs.censored
    labels["unit"] = measured_units(study, obs)
    return pd.concat([labels, predictive_intervals(obs.value, idata)], axis=1)


def fit_checks_file(study: Study, checks: pd.DataFrame) -> pd.DataFrame:
    """The fit checks as ``fit_checks.csv`` holds them: the units of temperature and time in their column names
    (``temperature_degC``, ``time_min``); the unit of observed, median, q05 and q95 is the ``unit`` column."""
    names = {"temperature": f"temperature_{study.units.temperature}"}
    if study.units.time:
        names["time"] = f"time_{study.units.time}"
    return checks.rename(columns=names)
