"""One run, or every run of a study, integrated with sensitivities: ``integrate_run`` tries the explicit
Dormand-Prince pair (``dormand_prince``) first; when that needs more than ``EXPLICIT_BUDGET`` steps (the mark of a
stiff draw) it integrates the run again with Radau IIA (``radau``). ``predict_measurements`` does every run and
gathers predictions and their Jacobian at the measurements in one compiled call.

Sensitivities are those of the discrete solution, so the gradient is exact for the computed profile (what NUTS
needs) rather than an approximation of the exact one.
"""

from __future__ import annotations

import numba
import numpy as np

from .dormand_prince import dopri_run
from .kinetics import run_kernel
from .radau import radau_run
from .stepping import DONE, Tolerances

#: Steps of the explicit pair before a run counts as stiff and goes to the implicit method.
EXPLICIT_BUDGET = 1500


@numba.njit(cache=True)
def integrate_run(y0, times, net, params, tolerances, out_c, out_s, stats):
    """Dormand-Prince first; if the run proves stiff (or the explicit pair fails), Radau IIA."""

    explicit = Tolerances(tolerances.rtol, tolerances.atol, min(EXPLICIT_BUDGET, tolerances.max_steps))
    status = dopri_run(y0, times, net, params, explicit, out_c, out_s, stats)
    if status == DONE:
        return DONE
    stats[2] += 1
    return radau_run(y0, times, net, params, tolerances, out_c, out_s, stats)


@numba.njit(cache=True)
def predict_measurements(
    initial,
    all_times,
    time_offsets,
    kernel,
    params,
    tolerances,
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
        status = integrate_run(initial[r].copy(), times, run_kernel(kernel, r), params, tolerances, out_c, out_s, stats)
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
