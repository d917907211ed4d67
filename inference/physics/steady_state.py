"""The steady state of a continuous stirred tank (a run whose conditions have ``overflow``) with the exact
derivatives of that state, compiled with numba.

The tank starts full of its feed and runs for ``STARTUP_RESIDENCE_TIMES`` residence times (the start-up
transient, integrated without sensitivities by ``integrator.explicit_measurements``, or by Radau IIA in
``implicit_measurements`` where it is stiff), which puts it next to the steady state a real start-up reaches;
Newton's method then solves g(c) = S^T r(c) + (c_feed - c)/tau = 0 to round-off. The derivatives follow from the
implicit-function theorem: dg/dc s_p = -dg/dtheta_p, one LU for all parameters (d g / d c_feed_i = e_i / tau for an
uncertain feed concentration). Where several steady states exist this is
the one reached from the feed; ``reactors.cstr_steady_states`` searches for the others in predictions.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .kinetics import INITIAL, parameter_rate
from .stepping import DONE, FAILED, evaluate, lu_factor, lu_solve

#: Residence times of start-up transient integrated before Newton's method takes over.
STARTUP_RESIDENCE_TIMES = 10.0
#: Newton iterations allowed, and the step (relative to the largest feed concentration) that counts as converged.
NEWTON_ITERATIONS = 50
NEWTON_TOLERANCE = 1e-13


@numba.njit(cache=True)
def _residual(y, feed, horizon, piece, net, cond, f, jac, work):
    """g(y) and dg/dc at y; the inflow is taken from ``feed`` (the run's feed, which may be a fitted value)."""
    rate, forward_rate, reverse_rate, dr_dc, c, hold = work
    x, log_ratio = evaluate(
        y, horizon, horizon, piece, net, cond, f, jac, rate, forward_rate, reverse_rate, dr_dc, c, hold
    )
    flow, volume = cond.dose_flow[piece], cond.dose_volume[piece]
    for i in range(y.shape[0]):
        f[i] += (flow * feed[i] - cond.dose_inflow[piece, i]) / volume
    return x, log_ratio


@numba.njit(cache=True)
def steady_state_run(feed, start, times, net, cond, params, tolerances, out_c, out_s, stats):
    """Write the steady state (and its sensitivities) at every requested time of an overflow run whose feed is
    ``feed``, Newton's method starting from ``start`` (the state at the end of the start-up). Returns DONE or
    FAILED."""
    n_reactions, n = net.forward.shape
    n_params = params.kind.shape[0]
    piece = cond.dose_time.shape[0] - 1
    horizon = times[-1]
    y = start.copy()
    f = np.empty(n)
    jac = np.empty((n, n))
    pivots = np.empty(n, dtype=np.int64)
    work = (
        np.empty(n_reactions),
        np.empty(n_reactions),
        np.empty(n_reactions),
        np.empty((n_reactions, n)),
        np.empty(n),
        np.empty(n + 2),
    )
    if net.held >= 0:  # a reaction held at equilibrium is not part of the steady-state equations (refused upstream)
        return FAILED
    scale = max(np.max(feed), 1e-300)
    converged = False
    for _ in range(NEWTON_ITERATIONS):
        _residual(y, feed, horizon, piece, net, cond, f, jac, work)
        if not lu_factor(jac, pivots):
            return FAILED
        for i in range(n):
            f[i] = -f[i]
        lu_solve(jac, pivots, f)
        largest = 0.0
        for i in range(n):
            y[i] += f[i]
            largest = max(largest, abs(f[i]))
        stats[0] += 1
        if not math.isfinite(largest):
            return FAILED
        if largest <= NEWTON_TOLERANCE * scale + tolerances.atol * 1e-3:
            converged = True
            break
    if not converged:
        return FAILED
    for i in range(n):
        if y[i] < -max(tolerances.atol, 1e-9 * scale):  # not a physical steady state
            return FAILED
    rate, forward_rate, reverse_rate = work[0], work[1], work[2]
    c = work[4]
    x, log_ratio = _residual(y, feed, horizon, piece, net, cond, f, jac, work)
    sensitivities = np.zeros((n_params, n))
    if n_params > 0:
        if not lu_factor(jac, pivots):
            return FAILED
        flow, volume = cond.dose_flow[piece], cond.dose_volume[piece]
        for p in range(n_params):
            kind = params.kind[p]
            j = params.reaction[p]
            column = sensitivities[p]
            if kind == INITIAL:
                column[params.species[p]] = -flow / volume
            else:
                theta = parameter_rate(
                    kind, j, params.species[p], c, net, rate, forward_rate, reverse_rate, x, log_ratio
                )
                for i in range(n):
                    column[i] = -net.stoichiometry[j, i] * theta
            lu_solve(jac, pivots, column)
    for out in range(times.shape[0]):
        for i in range(n):
            out_c[out, i] = y[i]
            for p in range(n_params):
                out_s[out, i, p] = sensitivities[p, i]
    return DONE
