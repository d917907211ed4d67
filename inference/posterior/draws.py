"""Posterior draws of a network's parameters as plain arrays, and the constants they imply at a temperature.

Used wherever a saved posterior is pushed through the physics without PyMC: run figures and reactor
predictions. Temperatures in K, energies in J/mol.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from ..inputs.study import Study
from ..physics.parameters import BLOCK, ParameterDraws


def pick_draws(posterior: xr.Dataset, count: int) -> np.ndarray:
    """Indices of ``count`` draws spread evenly over all chains and draws (all of them if fewer)."""
    total = posterior.sizes["chain"] * posterior.sizes["draw"]
    return np.unique(np.linspace(0, total - 1, min(count, total)).astype(int))


def prior_centre_draws(study: Study, temperature_ref: float) -> ParameterDraws:
    """One 'draw' with every parameter at the centre of its prior (no run shift, nominal temperatures)."""
    reactions = study.reactions
    equilibria = [r.equilibrium for r in reactions if r.equilibrium is not None]
    sites = [site for r in reactions for site in r.adsorption]

    def row(values: list[float]) -> np.ndarray:
        return np.array(values, dtype=float)[None, :]

    return ParameterDraws(
        row([r.prior.ln_k_ref_mean for r in reactions]),
        row([r.prior.ea_mean for r in reactions]),
        row([q.ln_eq_ref_mean for q in equilibria]),
        row([q.dh_mean for q in equilibria]),
        np.array(study.network.forward_orders)[None],
        None,
        temperature_ref,
        exponent=row([r.temperature_exponent for r in reactions]),
        ln_ads_ref=row([s.ln_ref_mean for s in sites]) if sites else None,
        dh_ads=row([s.dh_mean for s in sites]) if sites else None,
    )


#: Seed of the standard normals that draw a new run's shift of ln k (fixed, so predictions repeat exactly).
NEW_RUN_SEED = 20261202


def parameter_draws(
    study: Study,
    posterior: xr.Dataset,
    temperature_ref: float,
    picks: np.ndarray,
    initial_runs: np.ndarray | None = None,
) -> ParameterDraws:
    """Arrays of the picked draws; ``initial_runs`` (runs, N) is the stated initial state the uncertain
    initial concentrations replace column by column."""
    stacked = posterior.stack(sample=("chain", "draw")).isel(sample=picks)

    def values(name: str) -> np.ndarray:
        return np.moveaxis(stacked[name].values, -1, 0)

    count = picks.size
    n_reactions = len(study.reactions)
    reversible = [r for r in study.reactions if r.equilibrium is not None]
    ln_eq_ref = values("ln_K_ref") if reversible else np.zeros((count, 0))
    dh = values("dH") if reversible else np.zeros((count, 0))
    layout = study.sensitivity_layout()
    orders = np.repeat(np.array(study.network.forward_orders)[None], count, axis=0)
    for column, (j, i) in enumerate(BLOCK["orders"].sites(layout)):
        orders[:, j, i] = values("order")[:, column]
    initial = None
    if "initial" in stacked and initial_runs is not None:
        initial = np.repeat(np.asarray(initial_runs, dtype=float)[None], count, axis=0)
        uncertain = values("initial")  # (D, runs, uncertain species)
        for column, (_, i) in enumerate(BLOCK["initial"].sites(layout)):
            initial[:, :, i] = uncertain[:, :, column]
    if "temperature_exponent" in stacked:
        exponent = values("temperature_exponent")
    else:
        exponent = np.repeat(np.array([[r.temperature_exponent for r in study.reactions]]), count, axis=0)
    has_sites = "ln_K_ads_ref" in stacked
    new_run_shift = run_effect = None
    if study.run_variability is not None:
        varying = list(study.run_variability.reactions)
        spread = values("ln_k_spread")  # (D, varying)
        new_run_shift = np.zeros((count, n_reactions))
        normals = np.random.default_rng(NEW_RUN_SEED).standard_normal(spread.shape)
        new_run_shift[:, varying] = spread * normals
        fitted = values("run_effect")  # (D, groups, varying)
        run_effect = np.zeros((count, fitted.shape[1], n_reactions))
        run_effect[:, :, varying] = fitted
    return ParameterDraws(
        values("ln_k_ref"),
        values("Ea"),
        ln_eq_ref,
        dh,
        orders,
        initial,
        temperature_ref,
        exponent=exponent,
        ln_ads_ref=values("ln_K_ads_ref") if has_sites else None,
        dh_ads=values("dH_ads") if has_sites else None,
        new_run_shift=new_run_shift,
        run_effect=run_effect,
        run_temperature=values("temperature") if "temperature" in stacked else None,
    )
