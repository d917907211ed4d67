"""Rates of a reaction network and their derivatives, compiled with numba; nothing here knows of PyMC.

Sensitivity parameters of a run are described by ``kinds``:

- ``LN_K`` (0): ln k_j of reaction j in that run;
- ``LN_EQ`` (1): ln K_j, the equilibrium constant of reversible reaction j in that run;
- ``ORDER`` (2): the forward order of reaction j in species i (shared by all runs);
- ``INITIAL`` (3): the initial concentration of species i in that run (sensitivity starts as a unit vector);
- ``LN_ADS`` (4): ln K_ji, the adsorption constant of species i in the saturation term of reaction j;
- ``ACTIVATION`` (5): Ea_j/R (K), shared by all runs; it moves k_j only where the temperature changes in a run;
- ``EQ_ENTHALPY`` (6): dH_j/R (K) of reversible reaction j (van 't Hoff), likewise;
- ``ADS_ENTHALPY`` (7): dH_ji/R (K) of adsorption constant K_ji, likewise;
- ``EXPONENT`` (8): the temperature exponent n_j of the extended Arrhenius form, likewise.

A run's constants are stated at its nominal temperature T_n; at time t they are k_j exp(-(Ea_j/R) x + n_j l),
K_j exp(-(dH_j/R) x) and K_ji exp(-(dH_ji/R) x), with x = 1/T(t) - 1/T_n and l = ln(T(t)/T_n)
(``conditions.temperature_terms``); x = l = 0 in an isothermal run.

Rates: r_j = [k_j prod_i c_i^a_ji - (k_j / K_j) prod_i c_i^b_ji] / D_j^n_j (second term only for reversible
steps), with D_j = 1 + sum_i K_ji c_i for saturating laws (n_j > 0) and D_j = 1 otherwise;
dc/dt = stoichiometry^T r. Negative concentrations (solver overshoot) are read as zero by the callers.

A reaction held at equilibrium (``Kernel.held``; quasi-equilibrium) has no rate here: r_j = 0, and
``stepping.hold_equilibrium`` keeps its reaction quotient at K_j instead.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numba
import numpy as np

LN_K, LN_EQ, ORDER, INITIAL, LN_ADS, ACTIVATION, EQ_ENTHALPY, ADS_ENTHALPY, EXPONENT = range(9)


class Kernel(NamedTuple):
    """What the compiled kernel needs of a network: the per-run constants k, 1/K (zero for irreversible steps) and
    adsorption constants K_ji (zero where none), and the shared stoichiometry (R, N), forward and reverse orders
    (R, N), reversible flags (R,) and saturation exponents n_j (R,), and the temperature slopes: Ea_j/R (R,),
    temperature exponents n_j (R,), dH_j/R (R,; zero for irreversible steps) and dH_ji/R (R, N) of the
    adsorption constants (all in K but n). For one run ``k``, ``inv_eq`` and the slopes are (R,)
    and ``ads`` and ``ads_enthalpy`` (R, N); for a study (``network_kernel``) they carry a leading run axis (the
    slopes too, so that draws can be runs), and ``run_kernel`` takes one run's view. ``held``: the reaction held at
    equilibrium, -1 for none."""

    k: np.ndarray
    inv_eq: np.ndarray
    stoichiometry: np.ndarray
    forward: np.ndarray
    reverse: np.ndarray
    reversible: np.ndarray
    ads: np.ndarray
    inhibition: np.ndarray
    activation: np.ndarray
    exponent: np.ndarray
    eq_enthalpy: np.ndarray
    ads_enthalpy: np.ndarray
    held: int = -1


class Sensitivities(NamedTuple):
    """The sensitivity parameters of a run, one entry each: ``kind`` (``LN_K`` ...), the ``reaction`` and
    ``species`` it refers to (0 where it refers to none)."""

    kind: np.ndarray
    reaction: np.ndarray
    species: np.ndarray


@numba.njit(cache=True)
def run_kernel(kernel, r):
    """Run r's ``Kernel`` from a study's (views, no copies)."""
    return Kernel(
        kernel.k[r],
        kernel.inv_eq[r],
        kernel.stoichiometry,
        kernel.forward,
        kernel.reverse,
        kernel.reversible,
        kernel.ads[r],
        kernel.inhibition,
        kernel.activation[r],
        kernel.exponent[r],
        kernel.eq_enthalpy[r],
        kernel.ads_enthalpy[r],
        kernel.held,
    )


@numba.njit(cache=True)
def _power(c: float, order: float) -> float:
    if order == 0.0:
        return 1.0
    if order == 1.0:
        return c
    if order == 2.0:
        return c * c
    return c**order


@numba.njit(cache=True)
def adsorption_at(net, j, i, x):
    """K_ji at a point of the run where 1/T - 1/T_n = x."""
    if x == 0.0:
        return net.ads[j, i]
    return net.ads[j, i] * math.exp(-net.ads_enthalpy[j, i] * x)


@numba.njit(cache=True)
def saturation_denominator(net, j, c, x):
    """D_j = 1 + sum_i K_ji c_i."""
    total = 1.0
    for i in range(c.shape[0]):
        if net.ads[j, i] != 0.0:
            total += adsorption_at(net, j, i, x) * c[i]
    return total


@numba.njit(cache=True)
def adsorption_sensitivity(net, j, i, c, rate, x):
    """d r_j / d ln K_ji = -n_j r_j K_ji c_i / D_j."""
    return -net.inhibition[j] * rate[j] * adsorption_at(net, j, i, x) * c[i] / saturation_denominator(net, j, c, x)


@numba.njit(cache=True)
def parameter_rate(kind, j, i, c, net, rate, forward_rate, reverse_rate, x, log_ratio):
    """d r_j / d theta for the sensitivity parameter (``kind``, reaction j, species i), at concentrations c and
    temperature terms (x, log_ratio), from the rates of ``rates_and_jacobian`` there; zero for ``INITIAL``."""
    if kind == LN_K:
        return rate[j]
    if kind == LN_EQ:
        return reverse_rate[j]
    if kind == ORDER:
        return forward_rate[j] * math.log(max(c[i], 1e-300))
    if kind == LN_ADS:
        return adsorption_sensitivity(net, j, i, c, rate, x)
    if kind == ACTIVATION:
        return -x * rate[j]
    if kind == EQ_ENTHALPY:
        return -x * reverse_rate[j]
    if kind == ADS_ENTHALPY:
        return -x * adsorption_sensitivity(net, j, i, c, rate, x)
    if kind == EXPONENT:
        return log_ratio * rate[j]
    return 0.0


@numba.njit(cache=True)
def rates_and_jacobian(c, net, x, log_ratio, rate, forward_rate, reverse_rate, dr_dc):
    """Fill rate[j], forward_rate[j], reverse_rate[j] (both divided by D_j^n_j) and dr_dc[j, m] for one run at
    concentrations c and temperature terms (x, log_ratio) (``conditions.temperature_terms``)."""
    forward, reverse, inhibition = net.forward, net.reverse, net.inhibition
    n_reactions, n_species = forward.shape
    for j in range(n_reactions):
        if j == net.held:
            rate[j] = forward_rate[j] = reverse_rate[j] = 0.0
            dr_dc[j, :] = 0.0
            continue
        k = net.k[j]
        inv_eq = net.inv_eq[j]
        if x != 0.0 or log_ratio != 0.0:
            k *= math.exp(-net.activation[j] * x + net.exponent[j] * log_ratio)
            inv_eq *= math.exp(net.eq_enthalpy[j] * x)
        value = k
        for i in range(n_species):
            value *= _power(c[i], forward[j, i])
        forward_rate[j] = value
        back = 0.0
        if net.reversible[j]:
            back = k * inv_eq
            for i in range(n_species):
                back *= _power(c[i], reverse[j, i])
        reverse_rate[j] = back
        rate[j] = value - back
        for m in range(n_species):
            derivative = 0.0
            # d(c^a)/dc is infinite at c = 0 for 0 < a < 1 (a fitted order of a species not yet dosed, a half
            # coefficient of a product): the term is left out there, since inf times a zero sensitivity is NaN;
            # J s tends to 0 as c leaves zero, so the sensitivities keep their limit.
            if forward[j, m] != 0.0 and (c[m] > 0.0 or forward[j, m] >= 1.0):
                part = k * forward[j, m] * _power(c[m], forward[j, m] - 1.0)
                for i in range(n_species):
                    if i != m:
                        part *= _power(c[i], forward[j, i])
                derivative += part
            if net.reversible[j] and reverse[j, m] != 0.0 and (c[m] > 0.0 or reverse[j, m] >= 1.0):
                part = k * inv_eq * reverse[j, m] * _power(c[m], reverse[j, m] - 1.0)
                for i in range(n_species):
                    if i != m:
                        part *= _power(c[i], reverse[j, i])
                derivative -= part
            dr_dc[j, m] = derivative
        if inhibition[j] != 0.0:
            denominator = saturation_denominator(net, j, c, x)
            scale = denominator ** -inhibition[j]
            for m in range(n_species):
                ads = adsorption_at(net, j, m, x) if net.ads[j, m] != 0.0 else 0.0
                dr_dc[j, m] = scale * (dr_dc[j, m] - inhibition[j] * rate[j] * ads / denominator)
            rate[j] *= scale
            forward_rate[j] *= scale
            reverse_rate[j] *= scale
