"""Every run of a study integrated with sensitivities, in two compiled entry points. ``explicit_measurements``
integrates each run with the explicit Dormand-Prince pair (``dormand_prince``); a run whose stiffness test fires (a
few steps into a stiff draw), that fails or that needs more than ``EXPLICIT_BUDGET`` steps is left to
``implicit_measurements``, which integrates it again with Radau IIA (``radau``). A run with ``overflow`` (a CSTR)
has its start-up transient integrated by the explicit pair and is left to the implicit entry point too, which
solves for its steady state (``steady_state``). Both gather predictions and their Jacobian at the measurements (or
whole profiles) of the runs they finish.

Two entry points rather than one, because numba compiles everything an entry point links: a study whose draws
never turn stiff and that has no CSTR compiles the explicit half alone on a fresh install, and the implicit half
is compiled when first needed (``implicit_compiled_on_disk`` says whether that is still to come).

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
from .stepping import DONE, Tolerances, borrowed

#: Steps of the explicit pair after which a run goes to the implicit method even if the stiffness test never fired.
EXPLICIT_BUDGET = 1500

#: What ``explicit_measurements`` leaves to ``implicit_measurements``, per run: nothing (the run is done), the
#: whole run (or a CSTR's start-up) to integrate with Radau IIA, or a CSTR's steady state from its start-up's end.
SETTLED, TO_IMPLICIT, TO_STEADY_STATE = 0, 1, 2


@numba.njit(cache=True, inline="always")
def _gather(r, first, out_c, out_s, gather, profile_c, profile_s):
    """Run r's part of the predictions (M,), their Jacobian (M, inputs) and, where ``profile_c`` has rows, of the
    whole profiles (rows from ``first``); ``gather`` as in ``explicit_measurements``."""
    n = out_c.shape[1]
    n_params = out_s.shape[2]
    if profile_c.shape[0] > 0:
        for k in range(out_c.shape[0]):
            for i in range(n):
                profile_c[first + k, i] = out_c[k, i]
                for p in range(n_params):
                    profile_s[first + k, i, p] = out_s[k, i, p]
    for m in range(gather.run_index.shape[0]):
        if gather.run_index[m] != r:
            continue
        t = gather.time_index[m]
        i = gather.species_index[m]
        gather.prediction[m] = gather.factor[m] * out_c[t, i]
        for p in range(n_params):
            gather.jacobian[m, gather.columns[r, p]] += gather.factor[m] * out_s[t, i, p]


@numba.njit(cache=True, inline="always")
def _startup_horizon(cond):
    """The start-up of an overflow run: ``STARTUP_RESIDENCE_TIMES`` residence times, as a times array."""
    return np.array([STARTUP_RESIDENCE_TIMES * cond.dose_volume[0] / cond.dose_flow[0]])


@numba.njit(cache=True)
def explicit_measurements(
    initial,
    all_times,
    time_offsets,
    kernel,
    conditions,
    params,
    tolerances,
    gather,
    profile_c,
    profile_s,
    stats,
    pending,
    starts,
):
    """Integrate every run with the explicit pair and gather the predictions (M,) and their Jacobian (M, inputs) at
    the measurements; where ``profile_c`` (all times, N) and ``profile_s`` (all times, N, P) have rows, also every
    run's whole profile there. Marks in ``pending`` (runs,) what is left to ``implicit_measurements`` (a CSTR's
    start-up end in ``starts`` (runs, N)) and returns how many runs that is.

    Run r's times are ``all_times[time_offsets[r]:time_offsets[r + 1]]``; ``gather`` (``solution.Gather``) says
    where the predictions are read: measurement m reads run ``run_index[m]`` at its time ``time_index[m]`` and
    species ``species_index[m]``; ``columns[r, p]`` is the input column of run r's sensitivity parameter p;
    ``factor[m]`` multiplies the concentration (the volume there, for a measured amount; else 1); ``prediction``
    and ``jacobian`` are filled. ``stats[3]`` holds the run being integrated.
    """
    n_runs, n = initial.shape
    # The arguments live until this call returns, so everything below may use views that hold no reference.
    kernel, conditions, params, gather = borrowed(kernel), borrowed(conditions), borrowed(params), borrowed(gather)
    explicit = Tolerances(tolerances.rtol, tolerances.atol, min(EXPLICIT_BUDGET, tolerances.max_steps))
    gather.jacobian[:, :] = 0.0
    none = Sensitivities(params.kind[:0], params.reaction[:0], params.species[:0])
    left = 0
    for r in range(n_runs):
        stats[3] = r
        net, cond = run_kernel(kernel, r), run_conditions(conditions, r)
        first = time_offsets[r]
        times = all_times[first : time_offsets[r + 1]]
        run_params = params
        if cond.overflow:  # its start-up transient, without sensitivities
            times, run_params = _startup_horizon(cond), none
        out_c = np.empty((times.shape[0], n))
        out_s = np.empty((times.shape[0], n, run_params.kind.shape[0]))
        # One call site: the explicit pair is compiled into this entry point once.
        status = dopri_run(initial[r].copy(), times, net, cond, run_params, explicit, out_c, out_s, stats)
        if cond.overflow:
            for i in range(n):  # a loop: an array assignment would compile numpy's shape-error path (2 s)
                starts[r, i] = out_c[0, i]
            pending[r] = TO_STEADY_STATE if status == DONE else TO_IMPLICIT
        elif status != DONE:
            stats[2] += 1
            pending[r] = TO_IMPLICIT
        else:
            pending[r] = SETTLED
            _gather(r, first, out_c, out_s, gather, profile_c, profile_s)
            continue
        left += 1
    return left


@numba.njit(cache=True)
def implicit_measurements(
    initial,
    all_times,
    time_offsets,
    kernel,
    conditions,
    params,
    tolerances,
    gather,
    profile_c,
    profile_s,
    stats,
    pending,
    starts,
):
    """Finish the runs ``explicit_measurements`` left in ``pending`` (same arguments, its ``pending`` and
    ``starts``): Radau IIA for a stiff run; for an overflow run its steady state (its start-up with Radau IIA
    first where the explicit pair could not do it). Returns the index of the first failing run, or -1."""
    n = initial.shape[1]
    n_params = params.kind.shape[0]
    kernel, conditions, params, gather = borrowed(kernel), borrowed(conditions), borrowed(params), borrowed(gather)
    for r in range(initial.shape[0]):
        if pending[r] == SETTLED:
            continue
        stats[3] = r
        net, cond = run_kernel(kernel, r), run_conditions(conditions, r)
        first = time_offsets[r]
        times = all_times[first : time_offsets[r + 1]]
        out_c = np.empty((times.shape[0], n))
        out_s = np.empty((times.shape[0], n, n_params))
        if cond.overflow:
            if pending[r] == TO_IMPLICIT:
                none = Sensitivities(params.kind[:0], params.reaction[:0], params.species[:0])
                start = np.empty((1, n))
                stats[2] += 1
                if (
                    radau_run(
                        initial[r].copy(),
                        _startup_horizon(cond),
                        net,
                        cond,
                        none,
                        tolerances,
                        start,
                        np.empty((1, n, 0)),
                        stats,
                    )
                    != DONE
                ):
                    return r
                for i in range(n):
                    starts[r, i] = start[0, i]
            status = steady_state_run(initial[r], starts[r], times, net, cond, params, tolerances, out_c, out_s, stats)
        else:
            status = radau_run(initial[r].copy(), times, net, cond, params, tolerances, out_c, out_s, stats)
        if status != DONE:
            return r
        _gather(r, first, out_c, out_s, gather, profile_c, profile_s)
    return -1


def _compiled_on_disk(entry) -> bool | None:
    try:
        return bool(os.path.exists(entry._cache._cache_file._index_path))
    except AttributeError:  # numba's cache layout is not public; say nothing rather than guess
        return None


def solver_compiled_on_disk() -> bool | None:
    """Whether numba's on-disk cache already holds the explicit entry point (what every network study uses): False
    means the first use in this installation compiles it (about half a minute on a 2-core machine); None where
    numba does not say."""
    return _compiled_on_disk(explicit_measurements)


def implicit_compiled_on_disk() -> bool | None:
    """Like ``solver_compiled_on_disk`` for the implicit entry point (stiff runs, CSTR steady states)."""
    return _compiled_on_disk(implicit_measurements)
