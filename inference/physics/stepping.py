"""What the compiled integrators share: outcome codes, dense LU, the network's right-hand side with its Jacobian,
error norms, and the start of a run. Compiled with numba; plain arrays only.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numba
import numpy as np

from .conditions import temperature_terms, volume_at
from .kinetics import INITIAL, rates_and_jacobian

#: Outcomes of a run's integration; STIFF: the explicit pair stopped because the run is stiff.
FAILED, DONE, STIFF = 0, 1, 2


class Tolerances(NamedTuple):
    """Relative and absolute error tolerances of a run's integration, and its step budget."""

    rtol: float
    atol: float
    max_steps: int


@numba.njit(cache=True)
def lu_factor(a, pivots):
    """In-place LU factorisation with partial pivoting; returns False if the matrix is singular."""
    n = a.shape[0]
    for k in range(n):
        best = k
        for i in range(k + 1, n):
            if abs(a[i, k]) > abs(a[best, k]):
                best = i
        pivots[k] = best
        if a[best, k] == 0.0:
            return False
        if best != k:
            for j in range(n):
                a[k, j], a[best, j] = a[best, j], a[k, j]
        inverse = 1.0 / a[k, k]
        for i in range(k + 1, n):
            a[i, k] *= inverse
            factor = a[i, k]
            if factor != 0.0:
                for j in range(k + 1, n):
                    a[i, j] -= factor * a[k, j]
    return True


@numba.njit(cache=True)
def lu_solve(lu, pivots, b):
    """Solve in place with a factorisation from ``lu_factor``."""
    n = lu.shape[0]
    for k in range(n):
        p = pivots[k]
        if p != k:
            b[k], b[p] = b[p], b[k]
    for i in range(n):
        total = b[i]
        for j in range(i):
            total -= lu[i, j] * b[j]
        b[i] = total
    for i in range(n - 1, -1, -1):
        total = b[i]
        for j in range(i + 1, n):
            total -= lu[i, j] * b[j]
        b[i] = total / lu[i, i]


@numba.njit(cache=True)
def evaluate(y, t, piece, net, cond, f, jac, rate, forward_rate, reverse_rate, dr_dc, c):
    """f = dc/dt and jac = d f / d c at concentrations y (negative values read as zero in the rates) and time t,
    within dosing interval ``piece`` of the run's conditions; returns the temperature terms (x, log_ratio) at t."""
    stoichiometry = net.stoichiometry
    n_reactions, n_species = net.forward.shape
    for i in range(n_species):
        c[i] = max(y[i], 0.0)
    x, log_ratio = temperature_terms(cond, t)
    rates_and_jacobian(c, net, x, log_ratio, rate, forward_rate, reverse_rate, dr_dc)
    for i in range(n_species):
        total = 0.0
        for j in range(n_reactions):
            total += stoichiometry[j, i] * rate[j]
        f[i] = total
        for m in range(n_species):
            total = 0.0
            for j in range(n_reactions):
                total += stoichiometry[j, i] * dr_dc[j, m]
            jac[i, m] = total
    flow = cond.dose_flow[piece]
    inflow = cond.dose_inflow[piece]
    if flow != 0.0:
        volume = volume_at(cond, piece, t)
        for i in range(n_species):
            f[i] += (inflow[i] - flow * y[i]) / volume
            jac[i, i] -= flow / volume
    return x, log_ratio


@numba.njit(cache=True)
def rms(values, scale):
    total = 0.0
    for i in range(values.shape[0]):
        ratio = values[i] / scale[i]
        total += ratio * ratio
    return math.sqrt(total / values.shape[0])


@numba.njit(cache=True)
def initial_sensitivities(params, n):
    """d c(0) / d parameter (P, N): a unit vector for each uncertain initial concentration, zero otherwise."""
    s = np.zeros((params.kind.shape[0], n))
    for p in range(params.kind.shape[0]):
        if params.kind[p] == INITIAL:
            s[p, params.species[p]] = 1.0
    return s


@numba.njit(cache=True)
def record_start(times, y, s, out_c, out_s):
    """Write the state at every requested time t <= 0 (the initial one); returns how many were written."""
    out_index = 0
    while out_index < times.shape[0] and times[out_index] <= 0.0:
        for i in range(y.shape[0]):
            out_c[out_index, i] = y[i]
            for p in range(s.shape[0]):
                out_s[out_index, i, p] = s[p, i]
        out_index += 1
    return out_index
