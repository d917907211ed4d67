"""What the compiled integrators share: outcome codes, dense LU, the network's right-hand side with its Jacobian
and its parameter derivatives, error norms, and the start of a run. Compiled with numba; plain arrays only.

A reaction held at equilibrium (``Kernel.held``, the quasi-equilibrium approximation: P. Atkins and J. de Paula,
"Atkins' Physical Chemistry", 8th ed., Oxford University Press, 2006, sec. 22.7, "Pre-equilibria"; the section
number is from memory) has its reaction quotient kept at K(T): with s its stoichiometry row and
g(c) = sum_i s_i ln c_i - ln K, the state moves on g = 0. The right-hand side v of the other reactions (and the
dosing) is projected along s, f = v + s xi with xi = (d ln K/dt - w.v) / (w.s), w_i = s_i / c_i, so that
dg/dt = 0 (a projected index-1 system; its drift off g = 0 is of the order of the integration tolerance); the
start, and every step of the explicit pair, is brought onto g = 0 by the extent of that reaction
(``restore_equilibrium``).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numba
import numpy as np
from numba.core import types
from numba.extending import intrinsic

from .conditions import temperature_rate, temperature_terms, volume_at
from .kinetics import EQ_ENTHALPY, INITIAL, LN_EQ, rates_and_jacobian

#: Outcomes of a run's integration; STIFF: the explicit pair stopped because the run is stiff.
FAILED, DONE, STIFF = 0, 1, 2


class Tolerances(NamedTuple):
    """Relative and absolute error tolerances of a run's integration, and its step budget."""

    rtol: float
    atol: float
    max_steps: int


@intrinsic
def borrowed(typingctx, arrays):
    """The tuple ``arrays`` with each array member as a view that holds no reference (numba's meminfo left null),
    for arrays that outlive every use of the view (a function's arguments, within that call): each call between
    compiled functions otherwise increments and decrements the count of every array it passes, atomically
    (``Kernel`` holds 12 arrays, ``RunConditions`` 9), which cost 0.7 of 1.8 us per right-hand side of the demo
    network (measured)."""

    def codegen(context, builder, signature, args):
        members = []
        for index, member in enumerate(arrays.types):
            value = builder.extract_value(args[0], index)
            if isinstance(member, types.Array):
                source = context.make_array(member)(context, builder, value)
                view = context.make_array(member)(context, builder)  # zero-filled: meminfo and parent null
                for field in ("data", "shape", "strides", "itemsize", "nitems"):
                    setattr(view, field, getattr(source, field))
                value = view._getvalue()
            members.append(value)
        return context.make_tuple(builder, arrays, members)

    return arrays(arrays), codegen


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


#: Machine epsilon of float64.
EPSILON = 2.220446049250313e-16
#: Concentrations of a held reaction's species are read as at least this in its projection (w_i = s_i / c_i).
HELD_FLOOR = 1e-30


@numba.njit(cache=True)
def hold_equilibrium(y, t, start, net, cond, f, jac, hold):
    """Project f and jac (the right-hand side without the held reaction, and its Jacobian) so that reaction
    ``net.held`` stays at equilibrium; ``hold`` (N + 2) receives w (N), w.s and dx/dt for ``held_share``."""
    held = net.held
    n = y.shape[0]
    s = net.stoichiometry[held]
    ws = 0.0
    wf = 0.0
    for i in range(n):
        hold[i] = s[i] / max(y[i], HELD_FLOOR) if s[i] != 0.0 else 0.0
        ws += hold[i] * s[i]
        wf += hold[i] * f[i]
    dx_dt = temperature_rate(cond, t, start)
    hold[n] = ws
    hold[n + 1] = dx_dt
    xi = (-net.eq_enthalpy[held] * dx_dt - wf) / ws
    for m in range(n):
        d_wf = 0.0
        for k in range(n):
            d_wf += hold[k] * jac[k, m]
        d_ws = 0.0
        if s[m] != 0.0 and y[m] > HELD_FLOOR:
            d_w = -hold[m] / y[m]  # d w_m / d c_m
            d_wf += f[m] * d_w
            d_ws = s[m] * d_w
        d_xi = (-d_wf - xi * d_ws) / ws
        for i in range(n):
            jac[i, m] += s[i] * d_xi
    for i in range(n):
        f[i] += s[i] * xi


@numba.njit(cache=True)
def held_share(kind, j, theta, net, hold):
    """Where a reaction is held: the parameter source S_j theta (``kinetics.parameter_rate``'s theta) loses
    s * held_share along the held reaction's row s, which keeps it on the equilibrium (``hold`` from
    ``hold_equilibrium``); for the held reaction's dH/R the source is -s * dx/dt / (w.s) (ln K moves with T)."""
    n = hold.shape[0] - 2
    if kind == INITIAL:
        return 0.0
    if j == net.held and kind == EQ_ENTHALPY:
        return hold[n + 1] / hold[n]
    along = 0.0
    for i in range(n):
        along += hold[i] * net.stoichiometry[j, i]
    return theta * along / hold[n]


@numba.njit(cache=True)
def evaluate(y, t, start, piece, net, cond, f, jac, rate, forward_rate, reverse_rate, dr_dc, c, hold):
    """f = dc/dt and jac = d f / d c at concentrations y (negative values read as zero in the rates) and time t,
    in a step from ``start`` within dosing interval ``piece`` of the run's conditions, projected where a reaction
    is held at equilibrium (``hold``: N + 2 of scratch); returns the temperature terms (x, log_ratio) at t."""
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
    if net.held >= 0:
        hold_equilibrium(c, t, start, net, cond, f, jac, hold)
    return x, log_ratio


@numba.njit(cache=True)
def rms(values, scale):
    total = 0.0
    for i in range(values.shape[0]):
        ratio = values[i] / scale[i]
        total += ratio * ratio
    return math.sqrt(total / values.shape[0])


@numba.njit(cache=True, inline="always")
def _held_extent(y0, s, ln_eq):
    """The extent xi with sum_i s_i ln(y0_i + s_i xi) = ln_eq, all concentrations positive (Newton's method
    from xi = 0 where that is inside the bracket, kept inside a shrinking bracket); 0 when no such extent exists
    (a reactant and a product both absent)."""
    low, high = -math.inf, math.inf
    for i in range(y0.shape[0]):
        if s[i] > 0.0:
            low = max(low, -y0[i] / s[i])
        elif s[i] < 0.0:
            high = min(high, y0[i] / -s[i])
    if not low < high:
        return 0.0
    xi = 0.0 if low < 0.0 < high else 0.5 * (low + high)
    for _ in range(200):
        g = -ln_eq
        magnitude = abs(ln_eq)
        slope = 0.0
        for i in range(y0.shape[0]):
            if s[i] != 0.0:
                value = y0[i] + s[i] * xi
                term = s[i] * math.log(value)
                g += term
                magnitude += abs(term)
                slope += s[i] * s[i] / value
        if abs(g) <= 8.0 * EPSILON * magnitude:  # zero to within the rounding of its terms
            return xi
        if g > 0.0:
            high = xi
        else:
            low = xi
        step = g / slope
        proposal = xi - step
        if not (low < proposal < high):
            proposal = 0.5 * (low + high)
        if proposal == xi or abs(proposal - xi) <= 1e-15 * (abs(xi) + abs(high - low)):
            return proposal
        xi = proposal
    return xi


@numba.njit(cache=True, inline="always")
def restore_equilibrium(y, sens, x, net, params):
    """Bring y (N) back onto the held reaction's equilibrium at temperature term x by that reaction's extent,
    and its sensitivities ``sens`` (P N, parameter by parameter) onto the equilibrium's tangent, along the
    reaction's row s: sum_i w_i sens[p N + i] = d ln K / d theta_p with w_i = s_i / c_i (the projection of
    Hairer, Lubich and Wanner, "Geometric Numerical Integration", 2nd ed., Springer, 2006, sec. IV.4, for this one
    constraint)."""
    held = net.held
    n = y.shape[0]
    row = net.stoichiometry[held]
    ln_eq = -math.log(net.inv_eq[held]) - net.eq_enthalpy[held] * x
    xi = _held_extent(y, row, ln_eq)
    ws = 0.0
    for i in range(n):
        y[i] += row[i] * xi
        if row[i] != 0.0:
            ws += row[i] * row[i] / max(y[i], HELD_FLOOR)
    for p in range(params.kind.shape[0]):
        kind = params.kind[p]
        target = 0.0
        if params.reaction[p] == held and kind == LN_EQ:
            target = 1.0
        elif params.reaction[p] == held and kind == EQ_ENTHALPY:
            target = -x
        along = target
        for i in range(n):
            if row[i] != 0.0:
                along -= row[i] / max(y[i], HELD_FLOOR) * sens[p * n + i]
        for i in range(n):
            sens[p * n + i] += row[i] * along / ws


@numba.njit(cache=True, inline="always")
def without_held_drift(error, n, net, hold):
    """Take out of a step's error estimate (blocks of N: the state, then each sensitivity) the part along the
    held reaction's row that only moves the block off the equilibrium (w.e / w.s along s, ``hold`` from
    ``hold_equilibrium``), which ``restore_equilibrium`` removes after the step: the error test then measures
    what the step gets wrong on the equilibrium, as DAE codes leave the algebraic part out of theirs."""
    row = net.stoichiometry[net.held]
    for block in range(error.shape[0] // n):
        offset = block * n
        along = 0.0
        for i in range(n):
            along += hold[i] * error[offset + i]
        along /= hold[n]
        for i in range(n):
            error[offset + i] -= row[i] * along


@numba.njit(cache=True)
def start_state(y0, net, cond, params):
    """The state at t = 0 and d c(0) / d parameter (P N, parameter by parameter, as the integrators carry them):
    a unit vector for each uncertain initial concentration; where a reaction is held, y0 brought to its
    equilibrium, with the sensitivities of that."""
    n = y0.shape[0]
    y = y0.copy()
    s = np.zeros(params.kind.shape[0] * n)
    for p in range(params.kind.shape[0]):
        if params.kind[p] == INITIAL:
            s[p * n + params.species[p]] = 1.0
    if net.held >= 0:
        x, _ = temperature_terms(cond, 0.0)
        restore_equilibrium(y, s, x, net, params)
    return y, s


@numba.njit(cache=True)
def record_start(times, y, s, out_c, out_s):
    """Write the state y (N) and its sensitivities s (P N, as ``start_state``) at every requested time t <= 0
    (the initial one); returns how many were written."""
    n = y.shape[0]
    out_index = 0
    while out_index < times.shape[0] and times[out_index] <= 0.0:
        for i in range(n):
            out_c[out_index, i] = y[i]
            for p in range(out_s.shape[2]):
                out_s[out_index, i, p] = s[p * n + i]
        out_index += 1
    return out_index
