"""Compiled integrators for batch-run profiles with parameter sensitivities, run inside numba.

``integrate_run`` first tries the explicit Dormand-Prince 5(4) pair (Dormand and Prince, J. Comput. Appl. Math.
6 (1980) 19; coefficients as in ``scipy.integrate.RK45``) on the concentrations and their forward sensitivity
equations together, which is cheapest for the non-stiff profiles of most draws. When that needs more than
``EXPLICIT_BUDGET`` steps (the mark of a stiff draw) it integrates the run again with ``radau_run``.

``radau_run``: the three-stage Radau IIA collocation method (Hairer and Wanner, "Solving Ordinary Differential
Equations II", 2nd ed., 1996, sec. IV.5 and IV.8), L-stable and stiffly accurate, with simplified Newton
iterations on the full 3N stage system, the embedded error estimate of that reference (its constants as in
``scipy.integrate.Radau``), and steps that land exactly on every requested output time.

Sensitivities are those of the discrete solution: after each accepted step the linearised stage equations
are solved with the Jacobians at the stage values, so the gradient is exact for the computed profile
(what NUTS needs) rather than an approximation of the exact one. One call integrates one run.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from .kinetics import INITIAL, LN_ADS, LN_EQ, LN_K, ORDER, _rates_and_jacobian, adsorption_sensitivity, run_kernel

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
FAILED, DONE = 0, 1


@numba.njit(cache=True)
def _lu_factor(a, pivots):
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
def _lu_solve(lu, pivots, b):
    """Solve in place with a factorisation from ``_lu_factor``."""
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
def _evaluate(y, net, f, jac, rate, forward_rate, reverse_rate, dr_dc, c):
    """f = dc/dt and jac = d f / d c at concentrations y (negative values read as zero)."""
    stoichiometry = net.stoichiometry
    n_reactions, n_species = net.forward.shape
    for i in range(n_species):
        c[i] = max(y[i], 0.0)
    _rates_and_jacobian(
        c,
        net.k,
        net.inv_eq,
        net.forward,
        net.reverse,
        net.reversible,
        net.ads,
        net.inhibition,
        rate,
        forward_rate,
        reverse_rate,
        dr_dc,
    )
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


@numba.njit(cache=True)
def _evaluate_stage(y, z, bi, net, stage, fz, jz, rate, forward_rate, reverse_rate, dr_dc, c):
    """Rates and Jacobian at stage ``bi`` of a Radau step (the state y + z[bi]), into that stage's slots."""
    for i in range(y.shape[0]):
        stage[i] = y[i] + z[bi, i]
    _evaluate(stage, net, fz[bi], jz[bi], rate[bi], forward_rate[bi], reverse_rate[bi], dr_dc, c[bi])


@numba.njit(cache=True)
def _rms(values, scale):
    total = 0.0
    for i in range(values.shape[0]):
        ratio = values[i] / scale[i]
        total += ratio * ratio
    return math.sqrt(total / values.shape[0])


@numba.njit(cache=True)
def radau_run(
    y0,
    times,
    net,
    params,
    rtol,
    atol,
    max_steps,
    out_c,
    out_s,
    stats,
):
    """Integrate one run from t = 0 to every time in ``times`` (ascending, >= 0).

    Fills ``out_c`` (times, N) and, if ``kinds`` is not empty, ``out_s`` (times, N, P) with d c / d parameter.
    ``stats`` receives the counts of accepted steps and of rejected steps (error test or Newton failure).
    Returns DONE, or FAILED when the step count or step size runs out or a value stops being finite.
    """
    stoichiometry, forward = net.stoichiometry, net.forward
    kinds, param_reaction, param_species = params.kind, params.reaction, params.species
    n_reactions, n = forward.shape
    n_params = kinds.shape[0]
    a = np.empty((3, 3))
    for i in range(3):
        for j in range(3):
            a[i, j] = A[i, j]
    y = y0.copy()
    s = np.zeros((n_params, n))
    for p in range(n_params):
        if kinds[p] == INITIAL:
            s[p, param_species[p]] = 1.0
    f0 = np.empty(n)
    jac0 = np.empty((n, n))
    fz = np.empty((3, n))
    jz = np.empty((3, n, n))
    rate = np.empty((3, n_reactions))
    forward_rate = np.empty((3, n_reactions))
    reverse_rate = np.empty((3, n_reactions))
    dr_dc = np.empty((n_reactions, n))
    c = np.empty((3, n))
    newton_tol = max(10.0 * 2.220446049250313e-16 / rtol, min(0.03, math.sqrt(rtol)))
    newton = np.empty((3 * n, 3 * n))
    newton_piv = np.empty(3 * n, dtype=np.int64)
    small = np.empty((n, n))
    small_piv = np.empty(n, dtype=np.int64)
    z = np.zeros((3, n))
    residual = np.empty(3 * n)
    stage = np.empty(n)
    scale = np.empty(n)
    error = np.empty(n)
    rhs = np.empty(3 * n)
    source = np.empty((3, n))

    t = 0.0
    out_index = 0
    while out_index < times.shape[0] and times[out_index] <= 0.0:
        for i in range(n):
            out_c[out_index, i] = y[i]
            for p in range(n_params):
                out_s[out_index, i, p] = s[p, i]
        out_index += 1
    if out_index == times.shape[0]:
        return DONE

    _evaluate(
        y,
        net,
        f0,
        jac0,
        rate[0],
        forward_rate[0],
        reverse_rate[0],
        dr_dc,
        c[0],
    )
    for i in range(n):
        scale[i] = atol + rtol * abs(y[i])
    d0 = _rms(y, scale)
    d1 = _rms(f0, scale)
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
        target = times[out_index]
        landing = False
        h_free = h
        if t + h >= target * (1.0 - 1e-12):
            h = target - t
            landing = True
        if not (h > 1e-14 * max(target, 1.0)):
            return FAILED
        _evaluate(
            y,
            net,
            f0,
            jac0,
            rate[0],
            forward_rate[0],
            reverse_rate[0],
            dr_dc,
            c[0],
        )
        # Simplified Newton on Z = h (A x I) F(y + Z), matrix I - h A x J(y).
        for bi in range(3):
            for bj in range(3):
                for i in range(n):
                    for m in range(n):
                        newton[bi * n + i, bj * n + m] = (1.0 if (bi == bj and i == m) else 0.0) - h * a[bi, bj] * jac0[
                            i, m
                        ]
        if not _lu_factor(newton, newton_piv):
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
                _evaluate_stage(y, z, bi, net, stage, fz, jz, rate, forward_rate, reverse_rate, dr_dc, c)
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
            _lu_solve(newton, newton_piv, residual)
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
        if not _lu_factor(small, small_piv):
            h *= 0.5
            continue
        for i in range(n):
            error[i] = f0[i] + (E[0] * z[0, i] + E[1] * z[1, i] + E[2] * z[2, i]) / h
        _lu_solve(small, small_piv, error)
        for i in range(n):
            scale[i] = atol + rtol * max(abs(y[i]), abs(y[i] + z[2, i]))
        error_norm = _rms(error, scale)
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
                _evaluate_stage(y, z, bi, net, stage, fz, jz, rate, forward_rate, reverse_rate, dr_dc, c)
            for bi in range(3):
                for bj in range(3):
                    for i in range(n):
                        for m in range(n):
                            newton[bi * n + i, bj * n + m] = (1.0 if (bi == bj and i == m) else 0.0) - h * a[
                                bi, bj
                            ] * jz[bj, i, m]
            if not _lu_factor(newton, newton_piv):
                return FAILED
            for p in range(n_params):
                kind = kinds[p]
                j = param_reaction[p]
                for bj in range(3):
                    if kind == LN_K:
                        theta = rate[bj, j]
                    elif kind == LN_EQ:
                        theta = reverse_rate[bj, j]
                    elif kind == ORDER:
                        theta = forward_rate[bj, j] * math.log(max(c[bj, param_species[p]], 1e-300))
                    elif kind == LN_ADS:
                        theta = adsorption_sensitivity(j, param_species[p], c[bj], net.ads, net.inhibition, rate[bj])
                    else:
                        theta = 0.0
                    for i in range(n):
                        total = 0.0
                        for m in range(n):
                            total += jz[bj, i, m] * s[p, m]
                        if kind != INITIAL:
                            total += stoichiometry[j, i] * theta
                        source[bj, i] = total
                for bi in range(3):
                    for i in range(n):
                        total = 0.0
                        for bj in range(3):
                            total += h * a[bi, bj] * source[bj, i]
                        rhs[bi * n + i] = total
                _lu_solve(newton, newton_piv, rhs)
                for i in range(n):
                    s[p, i] += rhs[2 * n + i]
        stats[0] += 1
        for i in range(n):
            y[i] += z[2, i]
        t = target if landing else t + h
        for i in range(n):
            if not math.isfinite(y[i]):
                return FAILED
        if landing:
            for i in range(n):
                out_c[out_index, i] = y[i]
                for p in range(n_params):
                    out_s[out_index, i, p] = s[p, i]
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
#: Steps of the explicit pair before a run counts as stiff and goes to the implicit method.
EXPLICIT_BUDGET = 1500


@numba.njit(cache=True)
def _augmented_rhs(
    u,
    n,
    net,
    params,
    out,
    jac,
    rate,
    forward_rate,
    reverse_rate,
    dr_dc,
    c,
):
    """d/dt of [c, s_1, ..., s_P]: f(c) and J(c) s_p + d f / d theta_p."""
    stoichiometry = net.stoichiometry
    kinds, param_reaction, param_species = params.kind, params.reaction, params.species
    _evaluate(
        u[:n],
        net,
        out[:n],
        jac,
        rate,
        forward_rate,
        reverse_rate,
        dr_dc,
        c,
    )
    for p in range(kinds.shape[0]):
        offset = n * (1 + p)
        kind = kinds[p]
        j = param_reaction[p]
        if kind == LN_K:
            theta = rate[j]
        elif kind == LN_EQ:
            theta = reverse_rate[j]
        elif kind == ORDER:
            theta = forward_rate[j] * math.log(max(c[param_species[p]], 1e-300))
        elif kind == LN_ADS:
            theta = adsorption_sensitivity(j, param_species[p], c, net.ads, net.inhibition, rate)
        else:
            theta = 0.0
        for i in range(n):
            total = 0.0
            for m in range(n):
                total += jac[i, m] * u[offset + m]
            if kind != INITIAL:
                total += stoichiometry[j, i] * theta
            out[offset + i] = total


@numba.njit(cache=True)
def dopri_run(
    y0,
    times,
    net,
    params,
    rtol,
    atol,
    max_steps,
    out_c,
    out_s,
    stats,
):
    """Like ``radau_run`` with the explicit Dormand-Prince pair; FAILED once ``max_steps`` are used."""
    forward = net.forward
    kinds, param_species = params.kind, params.species
    n_reactions, n = forward.shape
    n_params = kinds.shape[0]
    size = n * (1 + n_params)
    u = np.zeros(size)
    u[:n] = y0
    for p in range(n_params):
        if kinds[p] == INITIAL:
            u[n * (1 + p) + param_species[p]] = 1.0
    stages = np.empty((7, size))
    trial = np.empty(size)
    new = np.empty(size)
    jac = np.empty((n, n))
    rate = np.empty(n_reactions)
    forward_rate = np.empty(n_reactions)
    reverse_rate = np.empty(n_reactions)
    dr_dc = np.empty((n_reactions, n))
    c = np.empty(n)
    out_index = 0
    while out_index < times.shape[0] and times[out_index] <= 0.0:
        for i in range(n):
            out_c[out_index, i] = u[i]
            for p in range(n_params):
                out_s[out_index, i, p] = u[n * (1 + p) + i]
        out_index += 1
    if out_index == times.shape[0]:
        return DONE
    _augmented_rhs(
        u,
        n,
        net,
        params,
        stages[0],
        jac,
        rate,
        forward_rate,
        reverse_rate,
        dr_dc,
        c,
    )
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
    _augmented_rhs(
        trial,
        n,
        net,
        params,
        stages[1],
        jac,
        rate,
        forward_rate,
        reverse_rate,
        dr_dc,
        c,
    )
    d2 = 0.0
    for i in range(size):
        scale = atol + rtol * abs(u[i])
        d2 += ((stages[1, i] - stages[0, i]) / scale) ** 2
    d2 = math.sqrt(d2 / size) / h
    h1 = max(1e-6 * h, h * 1e-3) if max(d1, d2) <= 1e-15 else (0.01 / max(d1, d2)) ** 0.2
    h = min(100.0 * h, h1, times[-1])
    if not (h > 0.0 and math.isfinite(h)):
        return FAILED

    t = 0.0
    t_end = times[-1]
    steps = 0
    while out_index < times.shape[0]:
        steps += 1
        if steps > max_steps:
            return FAILED
        if t + h >= t_end * (1.0 - 1e-12):
            h = t_end - t
        if not (h > 1e-14 * max(t_end, 1.0)):
            return FAILED
        for st in range(1, 6):
            for i in range(size):
                total = 0.0
                for q in range(st):
                    total += DP_A[st, q] * stages[q, i]
                trial[i] = u[i] + h * total
            _augmented_rhs(
                trial,
                n,
                net,
                params,
                stages[st],
                jac,
                rate,
                forward_rate,
                reverse_rate,
                dr_dc,
                c,
            )
        for i in range(size):
            total = 0.0
            for q in range(6):
                total += DP_B[q] * stages[q, i]
            new[i] = u[i] + h * total
        _augmented_rhs(
            new,
            n,
            net,
            params,
            stages[6],
            jac,
            rate,
            forward_rate,
            reverse_rate,
            dr_dc,
            c,
        )
        error = 0.0
        finite = True
        for i in range(size):
            total = 0.0
            for q in range(7):
                total += DP_E[q] * stages[q, i]
            scale = atol + rtol * max(abs(u[i]), abs(new[i]))
            error += (h * total / scale) ** 2
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
        t_new = t_end if t + h >= t_end * (1.0 - 1e-12) else t + h
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
        h *= 10.0 if error == 0.0 else min(10.0, 0.9 * error**-0.2)
    return DONE


@numba.njit(cache=True)
def integrate_run(
    y0,
    times,
    net,
    params,
    rtol,
    atol,
    max_steps,
    out_c,
    out_s,
    stats,
):
    """Dormand-Prince first; if the run proves stiff (or the explicit pair fails), Radau IIA."""

    status = dopri_run(
        y0,
        times,
        net,
        params,
        rtol,
        atol,
        min(EXPLICIT_BUDGET, max_steps),
        out_c,
        out_s,
        stats,
    )
    if status == DONE:
        return DONE
    stats[2] += 1
    return radau_run(
        y0,
        times,
        net,
        params,
        rtol,
        atol,
        max_steps,
        out_c,
        out_s,
        stats,
    )


@numba.njit(cache=True)
def predict_measurements(
    initial,
    all_times,
    time_offsets,
    kernel,
    params,
    rtol,
    atol,
    max_steps,
    run_index,
    time_index,
    species_index,
    columns,
    prediction,
    jacobian,
    stats,
):
    """Integrate every run and gather the predictions (M,) and their Jacobian (M, inputs) at the measurements.

    Run r's times are ``all_times[time_offsets[r]:time_offsets[r + 1]]``; measurement m reads run
    ``run_index[m]`` at its time ``time_index[m]`` and species ``species_index[m]``; ``columns[r, p]`` is the
    input column of run r's sensitivity parameter p. Returns the index of the first failing run, or -1.
    """
    n_runs, n = initial.shape
    n_params = params.kind.shape[0]
    jacobian[:, :] = 0.0
    for r in range(n_runs):
        times = all_times[time_offsets[r] : time_offsets[r + 1]]
        out_c = np.empty((times.shape[0], n))
        out_s = np.empty((times.shape[0], n, n_params))
        status = integrate_run(
            initial[r].copy(),
            times,
            run_kernel(kernel, r),
            params,
            rtol,
            atol,
            max_steps,
            out_c,
            out_s,
            stats,
        )
        if status != DONE:
            return r
        for m in range(run_index.shape[0]):
            if run_index[m] != r:
                continue
            t = time_index[m]
            i = species_index[m]
            prediction[m] = out_c[t, i]
            for p in range(n_params):
                jacobian[m, columns[r, p]] += out_s[t, i, p]
    return -1
