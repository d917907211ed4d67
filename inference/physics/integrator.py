"""One run, or every run of a study, integrated with sensitivities: ``integrate_run`` tries the explicit
Dormand-Prince pair (``dormand_prince``) first; when its stiffness test fires (a few steps into a stiff draw), or
it fails or needs more than ``EXPLICIT_BUDGET`` steps, it integrates the run again with Radau IIA (``radau``).
A run with ``overflow`` (a CSTR) goes to its steady state instead (``steady_state``). ``predict_measurements``
does every run and gathers predictions and their Jacobian at the measurements (or whole profiles) in one compiled
call, the integrator's one entry point.

Sensitivities are those of the discrete solution, so the gradient is exact for the computed profile (what NUTS
needs) rather than an approximation of the exact one.
"""

from __future__ import annotations

import os

import numba
import numpy as np

from .conditions import run_conditions
from .dormand_prince import dopri_run
from .kinetics import Sensitivities, run_kernel
from .radau import radau_run
from .steady_state import STARTUP_RESIDENCE_TIMES, steady_state_run
from .stepping import DONE, FAILED, Tolerances, borrowed

#: Steps of the explicit pair after which a run goes to the implicit method even if the stiffness test never fired.
EXPLICIT_BUDGET = 1500


# The two wrappers below are inlined into their caller (numba IR): as functions of their own, each would be
# compiled with the whole solver linked into it again (about 10 s of a first compile, measured).
@numba.njit(cache=True, inline="always")
def _transient(y0, times, net, cond, params, tolerances, out_c, out_s, stats):
    """Dormand-Prince first; if the run proves stiff (or the explicit pair fails), Radau IIA."""
    explicit = Tolerances(tolerances.rtol, tolerances.atol, min(EXPLICIT_BUDGET, tolerances.max_steps))
    status = dopri_run(y0, times, net, cond, params, explicit, out_c, out_s, stats)
    if status == DONE:
        return DONE
    stats[2] += 1
    return radau_run(y0, times, net, cond, params, tolerances, out_c, out_s, stats)


@numba.njit(cache=True, inline="always")
def integrate_run(y0, times, net, cond, params, tolerances, out_c, out_s, stats):
    """Run ``y0`` under its conditions ``cond`` to every time of ``times``, with the sensitivities ``params``;
    an overflow run (a CSTR started full of its feed ``y0``) reports its steady state at every time."""
    if not cond.overflow:
        return _transient(y0, times, net, cond, params, tolerances, out_c, out_s, stats)
    n = y0.shape[0]
    horizon = np.array([STARTUP_RESIDENCE_TIMES * cond.dose_volume[0] / cond.dose_flow[0]])
    none = Sensitivities(params.kind[:0], params.reaction[:0], params.species[:0])
    start = np.empty((1, n))
    if _transient(y0, horizon, net, cond, none, tolerances, start, np.empty((1, n, 0)), stats) != DONE:
        return FAILED
    return steady_state_run(y0, start[0], times, net, cond, params, tolerances, out_c, out_s, stats)


@numba.njit(cache=True)
def predict_measurements(
    initial,
    all_times,
    time_offsets,
    kernel,
    conditions,
    params,
    tolerances,
    run_index,
    time_index,
    species_index,
    columns,
    factor,
    prediction,
    jacobian,
    profile_c,
    profile_s,
    stats,
):
    """Integrate every run and gather the predictions (M,) and their Jacobian (M, inputs) at the measurements;
    where ``profile_c`` (all times, N) and ``profile_s`` (all times, N, P) have rows, also every run's whole
    profile there (the one compiled entry point of the integrator: each would cost a first compile of its own).

    Run r's times are ``all_times[time_offsets[r]:time_offsets[r + 1]]``; measurement m reads run
    ``run_index[m]`` at its time ``time_index[m]`` and species ``species_index[m]``; ``columns[r, p]`` is the
    input column of run r's sensitivity parameter p; ``factor[m]`` multiplies the concentration (the volume
    there, for a measured amount; else 1). ``stats[3]`` holds the run being integrated (the failing one after
    an error). Returns the index of the first failing run, or -1.
    """
    n_runs, n = initial.shape
    n_params = params.kind.shape[0]
    # The arguments live until this call returns, so everything below may use views that hold no reference.
    kernel, conditions, params = borrowed(kernel), borrowed(conditions), borrowed(params)
    jacobian[:, :] = 0.0
    for r in range(n_runs):
        stats[3] = r
        first = time_offsets[r]
        times = all_times[first : time_offsets[r + 1]]
        out_c = np.empty((times.shape[0], n))
        out_s = np.empty((times.shape[0], n, n_params))
        net, cond = run_kernel(kernel, r), run_conditions(conditions, r)
        status = integrate_run(initial[r].copy(), times, net, cond, params, tolerances, out_c, out_s, stats)
        if status != DONE:
            return r
        if profile_c.shape[0] > 0:
            for k in range(times.shape[0]):
                for i in range(n):
                    profile_c[first + k, i] = out_c[k, i]
                    for p in range(n_params):
                        profile_s[first + k, i, p] = out_s[k, i, p]
        for m in range(run_index.shape[0]):
            if run_index[m] != r:
                continue
            t = time_index[m]
            i = species_index[m]
            prediction[m] = factor[m] * out_c[t, i]
            for p in range(n_params):
                jacobian[m, columns[r, p]] += factor[m] * out_s[t, i, p]
    return -1


def solver_compiled_on_disk() -> bool | None:
    """Whether numba's on-disk cache already holds the solver's entry point: False means the first use in this
    installation compiles it (about a minute on a 2-core machine); None where numba does not say."""
    try:
        return bool(os.path.exists(predict_measurements._cache._cache_file._index_path))
    except AttributeError:  # numba's cache layout is not public; say nothing rather than guess
        return None
