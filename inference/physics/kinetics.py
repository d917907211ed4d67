"""Rates of a reaction network and their derivatives, compiled with numba; nothing here knows of PyMC.

Sensitivity parameters of a run are described by ``kinds``:

- ``LN_K`` (0): ln k_j of reaction j in that run;
- ``LN_EQ`` (1): ln K_j, the equilibrium constant of reversible reaction j in that run;
- ``ORDER`` (2): the forward order of reaction j in species i (shared by all runs);
- ``INITIAL`` (3): the initial concentration of species i in that run (sensitivity starts as a unit vector);
- ``LN_ADS`` (4): ln K_ji, the adsorption constant of species i in the saturation term of reaction j.

Rates: r_j = [k_j prod_i c_i^a_ji - (k_j / K_j) prod_i c_i^b_ji] / D_j^n_j (second term only for reversible
steps), with D_j = 1 + sum_i K_ji c_i for saturating laws (n_j > 0) and D_j = 1 otherwise;
dc/dt = stoichiometry^T r. Negative concentrations (solver overshoot) are read as zero by the callers.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

LN_K, LN_EQ, ORDER, INITIAL, LN_ADS = 0, 1, 2, 3, 4


class Kernel(NamedTuple):
    """What the compiled kernel needs of a network: the per-run constants k, 1/K (zero for irreversible steps) and
    adsorption constants K_ji (zero where none), and the shared stoichiometry (R, N), forward and reverse orders
    (R, N), reversible flags (R,) and saturation exponents n_j (R,). For one run ``k`` and ``inv_eq`` are (R,) and
    ``ads`` (R, N); for a study (``network_kernel``) they carry a leading run axis, and ``run_kernel`` takes one
    run's view."""

    k: np.ndarray
    inv_eq: np.ndarray
    stoichiometry: np.ndarray
    forward: np.ndarray
    reverse: np.ndarray
    reversible: np.ndarray
    ads: np.ndarray
    inhibition: np.ndarray


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
def saturation_denominator(j, c, ads):
    """D_j = 1 + sum_i K_ji c_i."""
    total = 1.0
    for i in range(c.shape[0]):
        total += ads[j, i] * c[i]
    return total


@numba.njit(cache=True)
def adsorption_sensitivity(j, i, c, ads, inhibition, rate):
    """d r_j / d ln K_ji = -n_j r_j K_ji c_i / D_j."""
    return -inhibition[j] * rate[j] * ads[j, i] * c[i] / saturation_denominator(j, c, ads)


@numba.njit(cache=True)
def _rates_and_jacobian(
    c, k, inv_eq, forward, reverse, reversible, ads, inhibition, rate, forward_rate, reverse_rate, dr_dc
):
    """Fill rate[j], forward_rate[j], reverse_rate[j] (both divided by D_j^n_j) and dr_dc[j, m] for one run at
    concentrations c; ``ads`` (R, N) holds the adsorption constants K_ji, ``inhibition`` (R,) the n_j."""
    n_reactions, n_species = forward.shape
    for j in range(n_reactions):
        value = k[j]
        for i in range(n_species):
            value *= _power(c[i], forward[j, i])
        forward_rate[j] = value
        back = 0.0
        if reversible[j]:
            back = k[j] * inv_eq[j]
            for i in range(n_species):
                back *= _power(c[i], reverse[j, i])
        reverse_rate[j] = back
        rate[j] = value - back
        for m in range(n_species):
            derivative = 0.0
            if forward[j, m] != 0.0:
                part = k[j] * forward[j, m] * _power(c[m], forward[j, m] - 1.0)
                for i in range(n_species):
                    if i != m:
                        part *= _power(c[i], forward[j, i])
                derivative += part
            if reversible[j] and reverse[j, m] != 0.0:
                part = k[j] * inv_eq[j] * reverse[j, m] * _power(c[m], reverse[j, m] - 1.0)
                for i in range(n_species):
                    if i != m:
                        part *= _power(c[i], reverse[j, i])
                derivative -= part
            dr_dc[j, m] = derivative
        if inhibition[j] != 0.0:
            denominator = saturation_denominator(j, c, ads)
            scale = denominator ** -inhibition[j]
            for m in range(n_species):
                dr_dc[j, m] = scale * (dr_dc[j, m] - inhibition[j] * rate[j] * ads[j, m] / denominator)
            rate[j] *= scale
            forward_rate[j] *= scale
            reverse_rate[j] *= scale
