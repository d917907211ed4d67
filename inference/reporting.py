"""Plain-text reports for the terminal: the resolved study (``check``) and the outcome of a fit."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

from . import units
from .arrhenius import auto_reference_temperature
from .data import read_rate_constants
from .study import Study

if TYPE_CHECKING:
    from .pipeline import FitResult

CAUTION = (
    "Caution: kinetics fitted over a narrow temperature range are not a basis for thermal-safety decisions. "
    "Extrapolating beyond the measured temperatures widens every uncertainty; an exothermic scale-up needs "
    "calorimetry and a process-safety review under local codes and licensed practice."
)


def _energy(value_j_per_mol: float, unit: str) -> str:
    return f"{float(units.joule_per_mol_to(value_j_per_mol, unit)):.4g} {unit}"


def check_report(study: Study) -> str:
    """What the study means once validated: reactions, priors in their units, T_ref, counts of data."""
    data = read_rate_constants(study)
    temperature_ref = study.reference_temperature_K or auto_reference_temperature(data.temperature_K)
    t_unit, k_unit, e_unit = study.units.temperature, study.units.rate_constant, study.units.energy
    low, high = units.kelvin_to([data.temperature_K.min(), data.temperature_K.max()], t_unit)
    source = "auto, 1/mean(1/T)" if study.reference_temperature_K is None else "from the study file"
    lines = [
        f"study {study.name}" + (f": {study.title}" if study.title else ""),
        f"  data: {data.k.size} measured rate constants from {data.path}",
        f"  temperatures: {low:g} to {high:g} {t_unit} ({np.unique(data.temperature_K).size} distinct)",
        f"  T_ref = {temperature_ref:.2f} K = {float(units.kelvin_to(temperature_ref, t_unit)):.2f} {t_unit}"
        f" ({source})",
        "  reactions:",
    ]
    for index, reaction in enumerate(study.reactions):
        prior = reaction.prior
        median = math.exp(prior.ln_k_ref_mean)
        factor = math.exp(prior.ln_k_ref_sd * 1.959963984540054)
        lines.append(
            f"    {reaction.name}: {data.rows_of(index).size} points; prior k_ref ~ lognormal(median {median:.4g} "
            f"{k_unit}, x/÷ {factor:.3g} at 95 %); Ea ~ normal({_energy(prior.ea_mean, e_unit)}, "
            f"sd {_energy(prior.ea_sd, e_unit)}) truncated > 0"
        )
    noise = study.noise
    if data.ln_k_sd is not None:
        lines.append("  noise: per-point errors stated in the data file (sd of ln k)")
    else:
        lines.append(
            f"  noise: {noise.model} on ln k, sigma ~ half-normal(scale {noise.sigma.scale:g})"
            + (f", nu = {noise.nu:g}" if noise.model == "robust" else "")
        )
    s = study.sampling
    lines.append(
        f"  sampling: {s.chains} chains x {s.draws} draws ({s.tune} tuning), seed {s.seed}, "
        f"target_accept {s.target_accept:g}"
    )
    lines.append("  the study is valid; nothing was sampled")
    return "\n".join(lines)


def fit_report(result: FitResult) -> str:
    """The verdict, the posterior summary next to the classical fit, and where the files are."""
    d = result.diagnostics
    lines = [
        "",
        f"diagnostics: {d.verdict.upper()}  (max R-hat {d.r_hat_max:.3f}, min ESS bulk {d.ess_bulk_min:.0f} / "
        f"tail {d.ess_tail_min:.0f}, {d.divergences} divergences)",
    ]
    lines += [f"  - {advice}" for advice in d.advice]
    if d.verdict == "pass":
        lines.append("  the sampler shows no sign of trouble")
    table = result.summary[["parameter", "unit", "median", "q05", "q95", "r_hat"]]
    lines += ["", "posterior (median and 90 % interval):", table.to_string(index=False, float_format="{:.4g}".format)]
    classical = result.classical[result.classical["quantity"].isin(["Ea", "A"])]
    lines += [
        "",
        "classical estimates (95 % confidence intervals):",
        classical.drop(columns=["se"]).to_string(index=False, float_format="{:.4g}".format),
    ]
    lines += [
        "",
        "posterior correlations (why T_ref matters):",
        result.correlations.to_string(index=False, float_format="{:.3f}".format),
    ]
    lines += ["", *result.extrapolations, CAUTION, "", f"results: {result.results_dir}"]
    return "\n".join(lines)
