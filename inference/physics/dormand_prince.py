"""The explicit Dormand-Prince 5(4) pair (Dormand and Prince, J. Comput. Appl. Math. 6 (1980) 19; coefficients
as in ``scipy.integrate.RK45``) on the concentrations and their forward sensitivity equations together, with
the quartic continuous extension for output times: the cheapest method for the non-stiff profiles of most draws.

The step size follows the error estimate (h 0.9 err^-1/5) and, after an accepted step, no further than Gustafsson's
predictive rule allows (Hairer and Wanner, "Solving Ordinary Differential Equations II", 2nd ed., sec. IV.8, as in
their RADAU5), which extrapolates a trend in the error from the last two accepted steps: along a run whose error
grows from step to step (a held equilibrium's runs, about twofold per step) the first rule alone has every other
step rejected. Where a reaction is held at equilibrium, the error test leaves out the drift off that equilibrium
and each accepted step is brought back onto it (``stepping.without_held_drift``, ``stepping.restore_equilibrium``).
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .conditions import dose_piece, next_stop, temperature_terms
from .kinetics import INITIAL, parameter_rate
from .stepping import (
    DONE,
    FAILED,
    STIFF,
    borrowed,
    evaluate,
    held_share,
    record_start,
    restore_equilibrium,
    start_state,
    without_held_drift,
)

#: Dormand-Prince 5(4): nodes, stage coefficients, 5th-order weights, and 5th minus 4th order weights
#: (the last weight belongs to f at the new point).
DP_C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0])
DP_A = np.array(
    [
        [0.0, 0.0, 0.0, 0.0, 0.0],
        [1 / 5, 0.0, 0.0, 0.0, 0.0],
        [3 / 40, 9 / 40, 0.0, 0.0, 0.0],
        [44 / 45, -56 / 15, 32 / 9, 0.0, 0.0],
        [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729, 0.0],
        [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656],
    ]
)
DP_B = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84])
DP_E = np.array([-71 / 57600, 0.0, 71 / 16695, -71 / 1920, 17253 / 339200, -22 / 525, 1 / 40])
#: Stiffness test of the pair (Hairer and Wanner, "Solving Ordinary Differential Equations II", sec. IV.2):
#: h |lambda| estimated from the last two stages, which share their time point, against the pair's stability
#: boundary on the negative real axis (about 3.3); the run counts as stiff after ``STIFF_STEPS`` such accepted
#: steps without ``NONSTIFF_RESET`` clear ones between them (the thresholds of the authors' DOPRI5 code).
STIFF_BOUNDARY = 3.25
STIFF_STEPS = 15
NONSTIFF_RESET = 6
#: Coefficients of the quartic continuous extension (Shampine, Math. Comp. 46 (1986) 135; as in scipy's RK45):
#: u(t + x h) = u + h sum_q K_q (P[q, 0] x + P[q, 1] x^2 + P[q, 2] x^3 + P[q, 3] x^4).
DP_P = np.array(
    [
        [1.0, -8048581381 / 2820520608, 8663915743 / 2820520608, -12715105075 / 11282082432],
        [0.0, 0.0, 0.0, 0.0],
        [0.0, 131558114200 / 32700410799, -68118460800 / 10900136933, 87487479700 / 32700410799],
        [0.0, -1754552775 / 470086768, 14199869525 / 1410260304, -10690763975 / 1880347072],
        [0.0, 127303824393 / 49829197408, -318862633887 / 49829197408, 701980252875 / 199316789632],
        [0.0, -282668133 / 205662961, 2019193451 / 616988883, -1453857185 / 822651844],
        [0.0, 40617522 / 29380423, -110615467 / 29380423, 69997945 / 29380423],
    ]
)


@numba.njit(cache=True)
def _augmented_rhs(u, t, start, piece, n, net, cond, params, out, work):
    """d/dt of [c, s_1, ..., s_P] at time t of a step from ``start``: f(c) and J(c) s_p + d f / d theta_p."""
    jac, rate, forward_rate, reverse_rate, dr_dc, c, hold = work
    stoichiometry = net.stoichiometry
    held = net.held
    held_row = max(held, 0)
    kinds, param_reaction, param_species = params.kind, params.reaction, params.species
    x, log_ratio = evaluate(
        u[:n], t, start, piece, net, cond, out[:n], jac, rate, forward_rate, reverse_rate, dr_dc, c, hold
    )
    for p in range(kinds.shape[0]):
        offset = n * (1 + p)
        kind = kinds[p]
        j = param_reaction[p]
        theta = parameter_rate(kind, j, param_species[p], c, net, rate, forward_rate, reverse_rate, x, log_ratio)
        along = held_share(kind, j, theta, net, hold) if held >= 0 else 0.0
        for i in range(n):
            total = 0.0
            for m in range(n):
                total += jac[i, m] * u[offset + m]
            if kind != INITIAL:
                total += stoichiometry[j, i] * theta - stoichiometry[held_row, i] * along
            out[offset + i] = total


@numba.njit(cache=True, inline="always")
def dopri_run(y0, times, net, cond, params, tolerances, out_c, out_s, stats):
    """Like ``radau_run`` with the explicit Dormand-Prince pair; FAILED once ``max_steps`` are used, STIFF as soon
    as the stiffness test says the step size is held by stability rather than accuracy. Steps end where the
    inflow jumps and at the points of a short temperature programme (``conditions.next_stop``), so no step
    straddles a discontinuity."""
    n_reactions, n = net.forward.shape
    size = n * (1 + params.kind.shape[0])
    scratch = (
        np.zeros(size),
        np.empty((7, size)),
        np.empty(size),
        np.empty(size),
        np.empty(size),
        np.empty((n, n)),
        np.empty(n_reactions),
        np.empty(n_reactions),
        np.empty(n_reactions),
        np.empty((n_reactions, n)),
        np.empty(n),
        np.empty(n + 2),
    )
    return _dopri_steps(y0, times, net, cond, params, tolerances, out_c, out_s, stats, scratch)


@numba.njit(cache=True)
def _dopri_steps(y0, times, net, cond, params, tolerances, out_c, out_s, stats, scratch):
    """``dopri_run`` with its scratch arrays allocated by the caller, so that they outlive this call and may be
    used as views that hold no reference (``stepping.borrowed``)."""
    rtol, atol, max_steps = tolerances.rtol, tolerances.atol, tolerances.max_steps
    n = net.forward.shape[1]
    n_params = params.kind.shape[0]
    size = n * (1 + n_params)
    u, stages, trial, new, estimate, jac, rate, forward_rate, reverse_rate, dr_dc, c, hold = borrowed(scratch)
    out_c, out_s = borrowed((out_c, out_s))
    work = (jac, rate, forward_rate, reverse_rate, dr_dc, c, hold)
    start, start_s = start_state(y0, net, cond, params)
    for i in range(n):
        u[i] = start[i]
    for i in range(n * n_params):
        u[n + i] = start_s[i]
    out_index = record_start(times, u[:n], u[n:], out_c, out_s)
    if out_index == times.shape[0]:
        return DONE
    t = 0.0
    piece = dose_piece(cond, t)  # an int64 variable, not the literal 0: one compiled signature of the callees
    _augmented_rhs(u, t, t, piece, n, net, cond, params, stages[0], work)
    # Initial step (Hairer, Norsett and Wanner, "Solving Ordinary Differential Equations I", sec. II.4).
    d0 = 0.0
    d1 = 0.0
    for i in range(size):
        scale = atol + rtol * abs(u[i])
        d0 += (u[i] / scale) ** 2
        d1 += (stages[0, i] / scale) ** 2
    d0 = math.sqrt(d0 / size)
    d1 = math.sqrt(d1 / size)
    h = 1e-6 * times[-1] if (d0 < 1e-5 or d1 < 1e-5) else 0.01 * d0 / d1
    h = min(h, times[-1])
    if not (h > 0.0 and math.isfinite(h)):  # rates that overflow (extreme parameters) leave no usable step
        return FAILED
    for i in range(size):
        trial[i] = u[i] + h * stages[0, i]
    _augmented_rhs(trial, h, t, piece, n, net, cond, params, stages[1], work)
    d2 = 0.0
    for i in range(size):
        scale = atol + rtol * abs(u[i])
        d2 += ((stages[1, i] - stages[0, i]) / scale) ** 2
    d2 = math.sqrt(d2 / size) / h
    h1 = max(1e-6 * h, h * 1e-3) if max(d1, d2) <= 1e-15 else (0.01 / max(d1, d2)) ** 0.2
    h = min(100.0 * h, h1, times[-1])
    if not (h > 0.0 and math.isfinite(h)):
        return FAILED

    t_end = times[-1]
    stop = next_stop(cond, t)
    steps = 0
    stiff_steps = 0
    clear_steps = 0
    h_accepted = -1.0  # the last accepted step and its error (-1: none to predict from)
    error_accepted = -1.0
    while out_index < times.shape[0]:
        steps += 1
        if steps > max_steps:
            return FAILED
        end = min(t_end, stop)
        landing = t + h >= end * (1.0 - 1e-12)
        if landing:
            h = end - t
        if not (h > 1e-14 * max(t_end, 1.0)):
            return FAILED
        for st in range(1, 6):
            for i in range(size):
                total = 0.0
                for q in range(st):
                    total += DP_A[st, q] * stages[q, i]
                trial[i] = u[i] + h * total
            _augmented_rhs(trial, t + DP_C[st] * h, t, piece, n, net, cond, params, stages[st], work)
        for i in range(size):
            total = 0.0
            for q in range(6):
                total += DP_B[q] * stages[q, i]
            new[i] = u[i] + h * total
        _augmented_rhs(new, t + h, t, piece, n, net, cond, params, stages[6], work)
        for i in range(size):
            total = 0.0
            for q in range(7):
                total += DP_E[q] * stages[q, i]
            estimate[i] = h * total
        if net.held >= 0:  # hold: w at the new point, from its evaluation just above
            without_held_drift(estimate, n, net, hold)
        error = 0.0
        finite = True
        for i in range(size):
            scale = atol + rtol * max(abs(u[i]), abs(new[i]))
            error += (estimate[i] / scale) ** 2
            if not math.isfinite(new[i]):
                finite = False
        error = math.sqrt(error / size)
        if not finite or not math.isfinite(error):
            h *= 0.2
            stats[1] += 1
            continue
        if error > 1.0:
            h *= max(0.2, 0.9 * error**-0.2)
            stats[1] += 1
            continue
        stats[0] += 1
        # trial holds the stage-6 point, which shares the time t + h with the new point (stage 7).
        numerator = 0.0
        denominator = 0.0
        for i in range(n):
            numerator += (stages[6, i] - stages[5, i]) ** 2
            denominator += (new[i] - trial[i]) ** 2
        if denominator > 0.0 and h * math.sqrt(numerator / denominator) > STIFF_BOUNDARY:
            clear_steps = 0
            stiff_steps += 1
            if stiff_steps == STIFF_STEPS:
                return STIFF
        else:
            clear_steps += 1
            if clear_steps == NONSTIFF_RESET:
                stiff_steps = 0
        t_new = end if t + h >= end * (1.0 - 1e-12) else t + h
        while out_index < times.shape[0] and times[out_index] <= t_new:
            x = (times[out_index] - t) / h
            powers = (x, x * x, x * x * x, x * x * x * x)
            for i in range(size):
                total = 0.0
                for q in range(7):
                    weight = DP_P[q, 0] * powers[0] + DP_P[q, 1] * powers[1] + DP_P[q, 2] * powers[2]
                    weight += DP_P[q, 3] * powers[3]
                    total += stages[q, i] * weight
                trial[i] = u[i] + h * total
            for i in range(n):
                out_c[out_index, i] = trial[i]
                for p in range(n_params):
                    out_s[out_index, i, p] = trial[n * (1 + p) + i]
            out_index += 1
        for i in range(size):
            u[i] = new[i]
            stages[0, i] = stages[6, i]
        t = t_new
        if net.held >= 0:  # f at the step's end is kept: the move back is within the tolerance
            restore_equilibrium(u[:n], u[n:], temperature_terms(cond, t)[0], net, params)
        if t >= stop:  # the inflow (or dT/dt) jumps here: the next step starts from the new derivative
            piece = dose_piece(cond, t)
            stop = next_stop(cond, t)
            _augmented_rhs(u, t, t, piece, n, net, cond, params, stages[0], work)
        factor = 10.0 if error == 0.0 else min(10.0, 0.9 * error**-0.2)
        if h_accepted > 0.0 and error > 0.0:
            factor = min(factor, max(0.2, 0.9 * (h / h_accepted) * (error_accepted / error) ** 0.2 * error**-0.2))
        h_accepted, error_accepted = (-1.0, -1.0) if landing else (h, max(1e-2, error))
        h *= factor
    return DONE
