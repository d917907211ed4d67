"""Posterior draws of a network's parameters as plain arrays, and the constants they imply at a temperature.

Used wherever a saved posterior is pushed through the physics without PyMC: run figures and reactor
predictions. Temperatures in K, energies in J/mol.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from .arrhenius import ln_rate_constant
from .study import Study


@dataclass(frozen=True)
class ParameterDraws:
    """D draws: ln_k_ref, Ea and temperature exponents (D, reactions); ln_eq_ref and dh (D, reversible);
    ln_ads_ref and dh_ads (D, adsorption sites); forward orders (D, R, N); initial (D, runs, N) or None when
    no initial concentration was uncertain.

    With run-to-run variability, ``run_effect`` (D, groups, R) holds the fitted groups' shifts of ln k and
    ``new_run_shift`` (D, R) one draw of a new run's shift (spread times a standard normal), which
    ``ln_k`` adds: a prediction is for a run not yet made. ``run_temperature`` (D, runs) is the fitted
    true temperatures when the study states a temperature error.
    """

    ln_k_ref: np.ndarray
    ea: np.ndarray
    ln_eq_ref: np.ndarray
    dh: np.ndarray
    orders: np.ndarray
    initial: np.ndarray | None
    temperature_ref: float
    exponent: np.ndarray | None = None
    ln_ads_ref: np.ndarray | None = None
    dh_ads: np.ndarray | None = None
    new_run_shift: np.ndarray | None = None
    run_effect: np.ndarray | None = None
    run_temperature: np.ndarray | None = None

    @property
    def size(self) -> int:
        return self.ln_k_ref.shape[0]

    def _ln_k_plain(self, kelvin: float | np.ndarray) -> np.ndarray:
        exponent = 0.0 if self.exponent is None else self.exponent
        return ln_rate_constant(_per_draw(kelvin), self.ln_k_ref, self.ea, self.temperature_ref, exponent)

    def ln_k(self, kelvin: float | np.ndarray) -> np.ndarray:
        """ln k of every reaction of a new run at ``kelvin`` (one value, or one per draw): (D, reactions)."""
        value = self._ln_k_plain(kelvin)
        return value if self.new_run_shift is None else value + self.new_run_shift

    def fitted_run_ln_k(self, d: int, nominal_K: np.ndarray, group_index: np.ndarray) -> np.ndarray:
        """ln k (runs, reactions) of the fitted runs in draw d, with their true temperatures and group shifts."""
        kelvin = nominal_K if self.run_temperature is None else self.run_temperature[d]
        exponent = 0.0 if self.exponent is None else self.exponent[d][None, :]
        value = ln_rate_constant(
            kelvin[:, None], self.ln_k_ref[d][None, :], self.ea[d][None, :], self.temperature_ref, exponent
        )
        return value if self.run_effect is None else value + self.run_effect[d][group_index]

    def ln_eq(self, kelvin: float | np.ndarray) -> np.ndarray:
        """ln K_c of every reversible reaction at ``kelvin`` (van 't Hoff): (D, reversible)."""
        return ln_rate_constant(_per_draw(kelvin), self.ln_eq_ref, self.dh, self.temperature_ref)

    def ln_ads(self, kelvin: float | np.ndarray) -> np.ndarray | None:
        """ln K of every adsorption site at ``kelvin`` (van 't Hoff): (D, sites), None without sites."""
        if self.ln_ads_ref is None:
            return None
        return ln_rate_constant(_per_draw(kelvin), self.ln_ads_ref, self.dh_ads, self.temperature_ref)

    def draw(self, d: int) -> ParameterDraws:
        """Draw d alone, as a set of one."""

        def one(values: np.ndarray | None) -> np.ndarray | None:
            return None if values is None else values[d : d + 1]

        return ParameterDraws(
            *(one(v) for v in (self.ln_k_ref, self.ea, self.ln_eq_ref, self.dh, self.orders, self.initial)),
            self.temperature_ref,
            *(
                one(v)
                for v in (
                    self.exponent,
                    self.ln_ads_ref,
                    self.dh_ads,
                    self.new_run_shift,
                    self.run_effect,
                    self.run_temperature,
                )
            ),
        )

    @property
    def orders_vary(self) -> bool:
        return bool(np.any(self.orders != self.orders[:1]))


def _per_draw(kelvin: float | np.ndarray) -> float | np.ndarray:
    kelvin = np.asarray(kelvin, dtype=float)
    return kelvin[:, None] if kelvin.ndim == 1 else kelvin


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
    orders = np.repeat(np.array(study.network.forward_orders)[None], count, axis=0)
    column = 0
    for j, spec in enumerate(study.reactions):
        for fitted in spec.fitted_orders:
            orders[:, j, study.species.index(fitted.species)] = values("order")[:, column]
            column += 1
    initial = None
    if "initial" in stacked and initial_runs is not None:
        initial = np.repeat(np.asarray(initial_runs, dtype=float)[None], count, axis=0)
        uncertain = values("initial")  # (D, runs, uncertain species)
        for g, (name, _) in enumerate(study.initial_uncertainty):
            initial[:, :, study.species.index(name)] = uncertain[:, :, g]
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
