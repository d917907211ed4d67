"""The three-stage Radau IIA collocation method (Hairer and Wanner, "Solving Ordinary Differential Equations II",
2nd ed., 1996, sec. IV.5 and IV.8) for stiff runs, with the sensitivities of its discrete solution.

L-stable and stiffly accurate, with simplified Newton iterations on the full 3N stage system, the embedded error
estimate of that reference (its constants as in ``scipy.integrate.Radau``), and steps that land exactly on every
requested output time. After each accepted step the linearised stage equations are solved with the Jacobians at
the stage values, so the gradient is exact for the computed profile.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .conditions import dose_piece, next_stop
from .kinetics import INITIAL, parameter_rate
from .stepping import (
    DONE,
    EPSILON,
    FAILED,
    borrowed,
    evaluate,
    held_share,
    lu_factor,
    lu_solve,
    record_start,
    rms,
    start_state,
)

_S6 = math.sqrt(6.0)
#: Radau IIA(5) nodes and coefficient matrix (Hairer and Wanner, table IV.5.6).
C = np.array([(4.0 - _S6) / 10.0, (4.0 + _S6) / 10.0, 1.0])
A = np.array(
    [
        [(88.0 - 7.0 * _S6) / 360.0, (296.0 - 169.0 * _S6) / 1800.0, (-2.0 + 3.0 * _S6) / 225.0],
        [(296.0 + 169.0 * _S6) / 1800.0, (88.0 + 7.0 * _S6) / 360.0, (-2.0 - 3.0 * _S6) / 225.0],
        [(16.0 - _S6) / 36.0, (16.0 + _S6) / 36.0, 1.0 / 9.0],
    ]
)
#: Real eigenvalue of inv(A) and the error-estimate weights (Hairer and Wanner, sec. IV.8, eq. 8.20).
MU_REAL = 3.0 + 3.0 ** (2.0 / 3.0) - 3.0 ** (1.0 / 3.0)
E = np.array([-13.0 - 7.0 * _S6, -13.0 + 7.0 * _S6, -1.0]) / 3.0

NEWTON_MAX = 7


@numba.njit(cache=True)
def _evaluate_stage(y, z, bi, t, start, piece, net, cond, stage, slots):
    """Rates and Jacobian at stage ``bi`` of a Radau step from ``start`` (the state y + z[bi] at time t), into
    that stage's ``slots`` (f, Jacobian, rates, forward and reverse rates, dr/dc, concentrations, hold); returns
    the temperature terms there."""
    fz, jz, rate, forward_rate, reverse_rate, dr_dc, c, hold = slots
    for i in range(y.shape[0]):
        stage[i] = y[i] + z[bi, i]
    return evaluate(
        stage,
        t,
        start,
        piece,
        net,
        cond,
        fz[bi],
        jz[bi],
        rate[bi],
        forward_rate[bi],
        reverse_rate[bi],
        dr_dc,
        c[bi],
        hold[bi],
    )


@numba.njit(cache=True, inline="always")
def radau_run(y0, times, net, cond, params, tolerances, out_c, out_s, stats):
    """Integrate one run, under its ``conditions.RunConditions``, from t = 0 to every time in ``times``
    (ascending, >= 0); steps also end where the inflow jumps.

    Fills ``out_c`` (times, N) and, if ``kinds`` is not empty, ``out_s`` (times, N, P) with d c / d parameter.
    ``stats`` receives the counts of accepted steps and of rejected steps (error test or Newton failure).
    Returns DONE, or FAILED when the step count or step size runs out or a value stops being finite.
    """
    n_reactions, n = net.forward.shape
    scratch = (
        np.empty(n),
        np.empty((n, n)),
        np.empty((3, n)),
        np.empty((3, n, n)),
        np.empty((3, n_reactions)),
        np.empty((3, n_reactions)),
        np.empty((3, n_reactions)),
        np.empty((n_reactions, n)),
        np.empty((3, n)),
        np.empty((3, n + 2)),
        np.empty((3 * n, 3 * n)),
        np.empty((n, n)),
        np.zeros((3, n)),
        np.empty(3 * n),
        np.empty(n),
        np.empty(n),
        np.empty(n),
        np.empty(3 * n),
        np.empty((3, n)),
        np.zeros(3),
        np.zeros(3),
        np.empty((3, 3)),
    )
    pivots = (np.empty(3 * n, dtype=np.int64), np.empty(n, dtype=np.int64))
    return _radau_steps(y0, times, net, cond, params, tolerances, out_c, out_s, stats, scratch, pivots)


@numba.njit(cache=True)
def _radau_steps(y0, times, net, cond, params, tolerances, out_c, out_s, stats, scratch, pivots):
    """``radau_run`` with its scratch arrays allocated by the caller, so that they outlive this call and may be
    used as views that hold no reference (``stepping.borrowed``)."""
    rtol, atol, max_steps = tolerances.rtol, tolerances.atol, tolerances.max_steps
    stoichiometry, forward = net.stoichiometry, net.forward
    held = net.held
    held_row = max(held, 0)
    kinds, param_reaction, param_species = params.kind, params.reaction, params.species
    n = forward.shape[1]
    n_params = kinds.shape[0]
    (
        f0,
        jac0,
        fz,
        jz,
        rate,
        forward_rate,
        reverse_rate,
        dr_dc,
        c,
        hold,
        newton,
        small,
        z,
        residual,
        stage,
        scale,
        error,
        rhs,
        source,
        temperature_x,
        temperature_l,
        a,
    ) = borrowed(scratch)
    newton_piv, small_piv = borrowed(pivots)
    out_c, out_s = borrowed((out_c, out_s))
    for i in range(3):
        for j in range(3):
            a[i, j] = A[i, j]
    y, s = start_state(y0, net, cond, params)
    slots = (fz, jz, rate, forward_rate, reverse_rate, dr_dc, c, hold)
    newton_tol = max(10.0 * EPSILON / rtol, min(0.03, math.sqrt(rtol)))

    t = 0.0
    out_index = record_start(times, y, s, out_c, out_s)
    if out_index == times.shape[0]:
        return DONE

    piece = dose_piece(cond, t)  # an int64 variable, not the literal 0: one compiled signature of evaluate
    evaluate(y, t, t, piece, net, cond, f0, jac0, rate[0], forward_rate[0], reverse_rate[0], dr_dc, c[0], hold[0])
    for i in range(n):
        scale[i] = atol + rtol * abs(y[i])
    d0 = rms(y, scale)
    d1 = rms(f0, scale)
    h = 1e-6 * times[-1] if (d0 < 1e-5 or d1 < 1e-5) else 0.01 * d0 / d1
    h = min(h, times[-1])
    if not (h > 0.0 and math.isfinite(h)):  # rates that overflow (extreme parameters) leave no usable step
        return FAILED
    steps = 0
    error_old = -1.0
    h_old = -1.0
    while out_index < times.shape[0]:
        steps += 1
        if steps > max_steps:
            return FAILED
        piece = dose_piece(cond, t)
        target = min(times[out_index], next_stop(cond, t))
        landing = False
        h_free = h
        if t + h >= target * (1.0 - 1e-12):
            h = target - t
            landing = True
        if not (h > 1e-14 * max(target, 1.0)):
            return FAILED
        evaluate(y, t, t, piece, net, cond, f0, jac0, rate[0], forward_rate[0], reverse_rate[0], dr_dc, c[0], hold[0])
        # Simplified Newton on Z = h (A x I) F(y + Z), matrix I - h A x J(y).
        for bi in range(3):
            for bj in range(3):
                for i in range(n):
                    for m in range(n):
                        newton[bi * n + i, bj * n + m] = (1.0 if (bi == bj and i == m) else 0.0) - h * a[bi, bj] * jac0[
                            i, m
                        ]
        if not lu_factor(newton, newton_piv):
            h *= 0.5
            continue
        for bi in range(3):
            for i in range(n):
                z[bi, i] = 0.0
        for i in range(n):
            scale[i] = atol + rtol * abs(y[i])
        converged = False
        rate_old = 0.0
        norm_old = -1.0
        iterations = 0
        for iteration in range(NEWTON_MAX):
            iterations = iteration + 1
            finite = True
            for bi in range(3):
                _evaluate_stage(y, z, bi, t + C[bi] * h, t, piece, net, cond, stage, slots)
                for i in range(n):
                    if not math.isfinite(fz[bi, i]):
                        finite = False
            if not finite:
                break
            for bi in range(3):
                for i in range(n):
                    total = -z[bi, i]
                    for bj in range(3):
                        total += h * a[bi, bj] * fz[bj, i]
                    residual[bi * n + i] = total
            lu_solve(newton, newton_piv, residual)
            total = 0.0
            for bi in range(3):
                for i in range(n):
                    z[bi, i] += residual[bi * n + i]
                    ratio = residual[bi * n + i] / scale[i]
                    total += ratio * ratio
            norm = math.sqrt(total / (3 * n))
            if norm_old > 0.0:
                rate_old = norm / norm_old
                if rate_old >= 1.0:
                    break
                if rate_old / (1.0 - rate_old) * norm < newton_tol:
                    converged = True
                    break
            elif norm < 1e-3 * newton_tol:
                converged = True
                break
            norm_old = norm
        if not converged:
            stats[1] += 1
            h *= 0.5
            error_old = -1.0
            continue
        # Error estimate of the reference: (MU_REAL/h I - J)^-1 (f(y) + sum_i E_i Z_i / h).
        for i in range(n):
            for m in range(n):
                small[i, m] = (MU_REAL / h if i == m else 0.0) - jac0[i, m]
        if not lu_factor(small, small_piv):
            h *= 0.5
            continue
        for i in range(n):
            error[i] = f0[i] + (E[0] * z[0, i] + E[1] * z[1, i] + E[2] * z[2, i]) / h
        lu_solve(small, small_piv, error)
        for i in range(n):
            scale[i] = atol + rtol * max(abs(y[i]), abs(y[i] + z[2, i]))
        error_norm = rms(error, scale)
        safety = 0.9 * (2 * NEWTON_MAX + 1) / (2 * NEWTON_MAX + iterations)
        if not math.isfinite(error_norm):
            h *= 0.25
            error_old = -1.0
            continue
        if error_norm > 1.0:
            stats[1] += 1
            h *= max(0.2, safety * error_norm**-0.25)
            error_old = -1.0
            continue

        # Accepted: sensitivities of the discrete step, (I - h (A x I) diag(J_j)) dZ = h (A x I)(J_j s + f_theta_j),
        # with rates and Jacobians at the stage values of the final iterate.
        if n_params > 0:
            for bi in range(3):
                temperature_x[bi], temperature_l[bi] = _evaluate_stage(
                    y, z, bi, t + C[bi] * h, t, piece, net, cond, stage, slots
                )
            for bi in range(3):
                for bj in range(3):
                    for i in range(n):
                        for m in range(n):
                            newton[bi * n + i, bj * n + m] = (1.0 if (bi == bj and i == m) else 0.0) - h * a[
                                bi, bj
                            ] * jz[bj, i, m]
            if not lu_factor(newton, newton_piv):
                return FAILED
            for p in range(n_params):
                kind = kinds[p]
                j = param_reaction[p]
                for bj in range(3):
                    theta = parameter_rate(
                        kind,
                        j,
                        param_species[p],
                        c[bj],
                        net,
                        rate[bj],
                        forward_rate[bj],
                        reverse_rate[bj],
                        temperature_x[bj],
                        temperature_l[bj],
                    )
                    along = held_share(kind, j, theta, net, hold[bj]) if held >= 0 else 0.0
                    for i in range(n):
                        total = 0.0
                        for m in range(n):
                            total += jz[bj, i, m] * s[p * n + m]
                        if kind != INITIAL:
                            total += stoichiometry[j, i] * theta - stoichiometry[held_row, i] * along
                        source[bj, i] = total
                for bi in range(3):
                    for i in range(n):
                        total = 0.0
                        for bj in range(3):
                            total += h * a[bi, bj] * source[bj, i]
                        rhs[bi * n + i] = total
                lu_solve(newton, newton_piv, rhs)
                for i in range(n):
                    s[p * n + i] += rhs[2 * n + i]
        stats[0] += 1
        for i in range(n):
            y[i] += z[2, i]
        t = target if landing else t + h
        for i in range(n):
            if not math.isfinite(y[i]):
                return FAILED
        if landing and t == times[out_index]:
            for i in range(n):
                out_c[out_index, i] = y[i]
                for p in range(n_params):
                    out_s[out_index, i, p] = s[p * n + i]
            out_index += 1
        # Step-size proposal with the predictive (Gustafsson) controller of the reference.
        factor = safety * error_norm**-0.25 if error_norm > 0 else 10.0
        if error_old > 0.0 and h_old > 0.0 and error_norm > 0.0:
            factor = min(factor, safety * (h / h_old) * (error_old / error_norm) ** 0.25 * error_norm**-0.25)
        h_old = h
        error_old = error_norm
        h *= min(10.0, max(0.2, factor))
        if landing:
            h = max(h, h_free)  # a step shortened to land on an output time says nothing about the next one
    return DONE
