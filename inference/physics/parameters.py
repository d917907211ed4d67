"""Draws of a network's kinetic parameters as plain arrays, and the constants they imply at a temperature.

Temperatures in K, energies in J/mol; ln k in the units each reaction's k is stated in. Built from a posterior by
``posterior.draws``; read by the reactors, the run figures and predictions.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .arrhenius import ln_rate_constant


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
