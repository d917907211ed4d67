"""Rates of a reaction network and their derivatives, compiled with numba; nothing here knows of PyMC.

The state of a solve stacks every run: for run r, N concentrations followed by N sensitivities for each of
P parameters (block r occupies ``N * (1 + P)`` entries). Parameters are described by ``kinds``:

- ``LN_K`` (0): ln k_j of reaction j in that run;
- ``LN_EQ`` (1): ln K_j, the equilibrium constant of reversible reaction j in that run;
- ``ORDER`` (2): the forward order of reaction j in species i (shared by all runs);
- ``INITIAL`` (3): the initial concentration of species i in that run (sensitivity starts as a unit vector).

Rates: r_j = k_j prod_i c_i^a_ji - (k_j / K_j) prod_i c_i^b_ji (second term only for reversible steps);
dc/dt = stoichiometry^T r. Negative concentrations (solver overshoot) are read as zero.
"""

from __future__ import annotations

import numba
import numpy as np

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


@numba.njit(cache=True)
def network_rhs(
    y, k_runs, inv_eq_runs, stoichiometry, forward, reverse, reversible, kinds, param_reaction, param_species
):
    """Time derivative of the stacked state (concentrations and sensitivities of every run)."""
    n_reactions, n_species = forward.shape
    n_params = kinds.shape[0]
    n_runs = k_runs.shape[0]
    block = n_species * (1 + n_params)
    out = np.empty_like(y)
    c = np.empty(n_species)
    rate = np.empty(n_reactions)
    forward_rate = np.empty(n_reactions)
    reverse_rate = np.empty(n_reactions)
    dr_dc = np.empty((n_reactions, n_species))
    jac = np.empty((n_species, n_species))
    for r in range(n_runs):
        base = r * block
        for i in range(n_species):
            c[i] = max(y[base + i], 0.0)
        _rates_and_jacobian(
            c, k_runs[r], inv_eq_runs[r], forward, reverse, reversible, rate, forward_rate, reverse_rate, dr_dc
        )
        for i in range(n_species):
            total = 0.0
            for j in range(n_reactions):
                total += stoichiometry[j, i] * rate[j]
            out[base + i] = total
        if n_params == 0:
            continue
        for i in range(n_species):
            for m in range(n_species):
                total = 0.0
                for j in range(n_reactions):
                    total += stoichiometry[j, i] * dr_dc[j, m]
                jac[i, m] = total
        for p in range(n_params):
            offset = base + n_species * (1 + p)
            j = param_reaction[p]
            kind = kinds[p]
            if kind == LN_K:
                source = rate[j]
            elif kind == LN_EQ:
                source = reverse_rate[j]
            elif kind == ORDER:
                source = forward_rate[j] * np.log(max(c[param_species[p]], 1e-300))
            else:
                source = 0.0
            for i in range(n_species):
                total = 0.0
                for m in range(n_species):
                    total += jac[i, m] * y[offset + m]
                if kind != INITIAL:
                    total += stoichiometry[j, i] * source
                out[offset + i] = total
    return out


@numba.njit(cache=True)
def network_banded_jacobian(y, k_runs, inv_eq_runs, stoichiometry, forward, reverse, reversible, n_params):
    """Banded Jacobian of the stacked state, block-diagonal in N x N blocks (LAPACK band layout, ml = mu = N-1).

    The sensitivity blocks get the same matrix as the concentrations: the true coupling of sensitivities to
    concentrations is left out. It only serves the corrector's Newton iteration, which converges with it
    (errors are controlled on the residuals), and it keeps every factorisation at N x N blocks.
    """
    n_reactions, n_species = forward.shape
    n_runs = k_runs.shape[0]
    block = n_species * (1 + n_params)
    band = np.zeros((2 * n_species - 1, y.shape[0]))
    c = np.empty(n_species)
    rate = np.empty(n_reactions)
    forward_rate = np.empty(n_reactions)
    reverse_rate = np.empty(n_reactions)
    dr_dc = np.empty((n_reactions, n_species))
    mu = n_species - 1
    for r in range(n_runs):
        base = r * block
        for i in range(n_species):
            c[i] = max(y[base + i], 0.0)
        _rates_and_jacobian(
            c, k_runs[r], inv_eq_runs[r], forward, reverse, reversible, rate, forward_rate, reverse_rate, dr_dc
        )
        for i in range(n_species):
            for m in range(n_species):
                total = 0.0
                for j in range(n_reactions):
                    total += stoichiometry[j, i] * dr_dc[j, m]
                for p in range(1 + n_params):
                    offset = base + n_species * p
                    band[i - m + mu, offset + m] = total
    return band
