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
    """D draws: ln_k_ref and Ea (D, reactions); ln_eq_ref and dh (D, reversible); forward orders (D, R, N);
    initial (D, runs, N) or None when no initial concentration was uncertain."""

    ln_k_ref: np.ndarray
    ea: np.ndarray
    ln_eq_ref: np.ndarray
    dh: np.ndarray
    orders: np.ndarray
    initial: np.ndarray | None
    temperature_ref: float

    @property
    def size(self) -> int:
        return self.ln_k_ref.shape[0]

    def ln_k(self, kelvin: float | np.ndarray) -> np.ndarray:
        """ln k of every reaction at ``kelvin`` (one value, or one per draw): (D, reactions)."""
        return ln_rate_constant(_per_draw(kelvin), self.ln_k_ref, self.ea, self.temperature_ref)

    def ln_eq(self, kelvin: float | np.ndarray) -> np.ndarray:
        """ln K_c of every reversible reaction at ``kelvin`` (van 't Hoff): (D, reversible)."""
        return ln_rate_constant(_per_draw(kelvin), self.ln_eq_ref, self.dh, self.temperature_ref)

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
    return ParameterDraws(values("ln_k_ref"), values("Ea"), ln_eq_ref, dh, orders, initial, temperature_ref)
