"""Rates of a reaction network and their derivatives, compiled with numba; nothing here knows of PyMC.

Sensitivity parameters of a run are described by ``kinds``:

- ``LN_K`` (0): ln k_j of reaction j in that run;
- ``LN_EQ`` (1): ln K_j, the equilibrium constant of reversible reaction j in that run;
- ``ORDER`` (2): the forward order of reaction j in species i (shared by all runs);
- ``INITIAL`` (3): the initial concentration of species i in that run (sensitivity starts as a unit vector).

Rates: r_j = k_j prod_i c_i^a_ji - (k_j / K_j) prod_i c_i^b_ji (second term only for reversible steps);
dc/dt = stoichiometry^T r. Negative concentrations (solver overshoot) are read as zero by the callers.
"""

from __future__ import annotations

import numba

LN_K, LN_EQ, ORDER, INITIAL = 0, 1, 2, 3


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
def _rates_and_jacobian(c, k, inv_eq, forward, reverse, reversible, rate, forward_rate, reverse_rate, dr_dc):
    """Fill rate[j], forward_rate[j], reverse_rate[j] and dr_dc[j, m] for one run at concentrations c."""
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
