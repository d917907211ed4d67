"""The compiled log density NUTS samples with: it remembers the points it met last (``model.memory``), which
changes no draw."""

from __future__ import annotations

import numpy as np
import pymc as pm

from inference.model.memory import RecentPoints
from inference.model.sampling import log_density_function


def test_recent_points_answer_again_without_computing_and_forget_the_oldest():
    calls = []

    def density(x):
        calls.append(x.copy())
        return [np.array(-0.5 * float(x @ x)), -x]

    remembered = RecentPoints(density, size=2)
    a, b, c = np.array([1.0, 2.0]), np.array([3.0, 4.0]), np.array([5.0, 6.0])
    first = remembered(a)
    again = remembered(a.copy())  # the same bytes in another array
    assert len(calls) == 1
    assert float(again[0]) == float(first[0]) == -2.5
    np.testing.assert_array_equal(again[1], [-1.0, -2.0])
    again[1][:] = 0.0  # a copy: the remembered gradient is untouched
    np.testing.assert_array_equal(remembered(a)[1], [-1.0, -2.0])
    remembered(b)
    remembered(c)  # a is the oldest of three, so it is forgotten
    remembered(a)
    assert len(calls) == 4


def test_nuts_draws_are_the_same_and_each_trajectory_start_is_remembered():
    # NUTS evaluates the start of every trajectory, which is a point of the trajectory before: with the points
    # remembered the compiled function runs once per leapfrog step plus once for the very first start, and
    # the draws are bit for bit those of PyMC's own log density (the function is deterministic).
    with pm.Model() as model:
        pm.Normal("x", 0.0, 1.0, shape=3)
        pm.HalfNormal("s", 2.0)

    def draws(remember: bool):
        log_density = log_density_function(model)
        compiled = log_density._pytensor_function.function
        calls = [0]

        def counted(*inputs):
            calls[0] += 1
            return compiled(*inputs)

        log_density._pytensor_function = RecentPoints(counted, 2**11) if remember else counted
        with model:
            step = pm.NUTS(logp_dlogp_func=log_density)
            idata = pm.sample(
                draws=60,
                tune=60,
                chains=1,
                cores=1,
                step=step,
                random_seed=3,
                progressbar=False,
                compute_convergence_checks=False,
                discard_tuned_samples=False,
            )
        steps = int(idata.sample_stats["n_steps"].sum()) + int(idata.warmup_sample_stats["n_steps"].sum())
        return idata.posterior["x"].values, calls[0], steps

    plain, plain_calls, steps = draws(remember=False)
    remembered, remembered_calls, same_steps = draws(remember=True)
    np.testing.assert_array_equal(remembered, plain)
    assert same_steps == steps
    assert plain_calls == steps + 120  # PyMC's own: one more per iteration (60 tuning + 60 draws)
    assert remembered_calls == steps + 1


def test_what_a_first_fit_compiles_while_it_waits_never_integrates_the_network(monkeypatch):
    # On a first fit the network solver compiles in a background process and the first integration waits for it;
    # `compile_ahead` fills that wait with PyMC's later compiles (trace point function, pointwise log-likelihood,
    # posterior predictive), so it must build and compile their graphs without evaluating any of them.
    from pathlib import Path

    from inference import load_study
    from inference.model.sampling import compile_ahead
    from inference.physics.solution import NetworkSolver
    from inference.workflows.kinds import open_problem

    study = load_study(Path(__file__).resolve().parents[1] / "data_demo" / "study.yaml")
    model = open_problem(study).build_model(333.15, None)

    def no_integration(*args, **kwargs):
        raise AssertionError("compile_ahead integrated the network")

    monkeypatch.setattr(NetworkSolver, "integrate", no_integration)
    compile_ahead(model)
