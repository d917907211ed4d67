"""Network models: data layouts, the log-density and its gradient, and recovery of known parameters.

Data are simulated here with scipy's solve_ivp (Radau, rtol 1e-10), independently of Arrhenia's solver.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from pymc.blocking import DictToArrayBijection, RaveledVars
from scipy.integrate import solve_ivp

from inference import fit_study, load_study
from inference.inputs.data import read_observations
from inference.physics.arrhenius import R, ln_rate_constant
from inference.workflows.kinds import open_problem

T_REF = 330.0


def arrhenius_k(k_ref, ea, celsius, t_ref=T_REF):
    return float(np.exp(ln_rate_constant(celsius + 273.15, np.log(k_ref), ea, t_ref)))


def write_study(folder, body, runs, measurements):
    (folder / "runs.csv").write_text(textwrap.dedent(runs))
    (folder / "measurements.csv").write_text(textwrap.dedent(measurements))
    path = folder / "study.yaml"
    path.write_text(textwrap.dedent(body))
    return path


CONSECUTIVE = """\
study: consecutive
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, B, C]
reactions:
  - name: first
    equation: A -> B
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
  - name: second
    equation: B -> C
    k_ref: {median: 0.05, factor: 10}
    Ea: {mean: 70, sd: 20}
reference_temperature: 330 K
noise: {model: proportional, sigma: {scale: 0.2}, per_species: true}
initial_uncertainty: {A: 0.05}
"""


def test_long_and_wide_layouts_give_the_same_observations(tmp_path):
    runs = "run,temperature,A,B,C\nr1,50,1.0,0,0\nr2,60,0.8,0,0\n"
    wide = "run,time,A,B\nr1,1,0.9,0.1\nr1,2,0.8,\nr2,1.5,0.7,0.1\n"
    long = "run,time,species,value\nr1,1,A,0.9\nr1,1,B,0.1\nr1,2,A,0.8\nr2,1.5,A,0.7\nr2,1.5,B,0.1\n"
    wide_obs = read_observations(load_study(write_study(tmp_path, CONSECUTIVE, runs, wide)))
    long_obs = read_observations(load_study(write_study(tmp_path, CONSECUTIVE, runs, long)))
    for name in ("run_index", "time_index", "species_index", "value"):
        np.testing.assert_array_equal(getattr(wide_obs, name), getattr(long_obs, name))
    assert [t.tolist() for t in wide_obs.times] == [[1.0, 2.0], [1.5]]


def test_a_limit_column_censors_its_row_at_and_below_the_limit(tmp_path):
    # The long layout's limit belongs to its row: a value above it is exact, one at or below it (or blank) is
    # known only to lie below it; every row with a limit keeps it, so a simulation censors there too.
    runs = "run,temperature,A,B,C\nr1,50,1.0,0,0\n"
    long = "run,time,species,value,limit\nr1,1,A,0.9,0.01\nr1,2,A,0.01,0.01\nr1,3,A,0.004,0.01\nr1,4,A,,0.01\n"
    long += "r1,4,B,0.3,\n"
    obs = read_observations(load_study(write_study(tmp_path, CONSECUTIVE, runs, long)))
    np.testing.assert_array_equal(obs.value, [0.9, 0.01, 0.01, 0.01, 0.3])
    np.testing.assert_array_equal(obs.lower, [0.01, 0.01, 0.01, 0.01, -np.inf])
    assert obs.censored.tolist() == ["", "below", "below", "below", ""]


def _gradient_check(model):
    start = model.initial_point()
    names = [v.name for v in model.value_vars]
    mapped = DictToArrayBijection.map({n: start[n] for n in names})
    logp, dlogp = model.compile_logp(), model.compile_dlogp()

    def at(x):
        return DictToArrayBijection.rmap(RaveledVars(x, mapped.point_map_info))

    x = mapped.data + 0.1  # away from the prior centre, where symmetric terms could hide errors
    value = float(logp(at(x)))
    gradient = np.asarray(dlogp(at(x)))
    assert np.isfinite(value) and np.all(np.isfinite(gradient))
    step = 1e-5
    numeric = np.array(
        [(float(logp(at(x + step * e))) - float(logp(at(x - step * e)))) / (2 * step) for e in np.eye(x.size)]
    )
    np.testing.assert_allclose(gradient, numeric, rtol=1e-4, atol=1e-3)


def _consecutive_problem(folder, noise, runs, measurements):
    body = CONSECUTIVE.replace("model: proportional", f"model: {noise}")
    return open_problem(load_study(write_study(folder, body, runs, measurements)))


@pytest.mark.parametrize("noise", ["proportional", "absolute", "robust"])
def test_log_density_gradient_matches_finite_differences(tmp_path, noise):
    runs = "run,temperature,A,B,C\nr1,50,1.0,0,0\nr2,70,0.8,0.05,0\n"
    meas = "run,time,A,B,C\nr1,2,0.85,0.14,0.01\nr1,6,0.6,0.3,0.08\nr2,1,0.6,0.3,0.02\nr2,4,0.3,0.4,0.15\n"
    _gradient_check(_consecutive_problem(tmp_path, noise, runs, meas).build_model(T_REF))


def test_sampling_starts_at_the_priors_centre(tmp_path):
    # The mode search and the start check begin at every prior's centre; PyMC alone would start the bounded
    # standardised Ea one unit above its bound (Ea near zero), not at its mean.
    from inference.model.sampling import prior_centre

    runs = "run,temperature,A,B,C\nr1,50,1.0,0,0\n"
    meas = "run,time,A,B,C\nr1,2,0.85,0.14,0.01\n"
    model = _consecutive_problem(tmp_path, "proportional", runs, meas).build_model(T_REF)
    quantities = model.replace_rvs_by_values([model["Ea"], model["ln_k_ref"]])
    at_start = model.compile_fn(quantities, inputs=model.value_vars, on_unused_input="ignore")(prior_centre(model))
    np.testing.assert_allclose(at_start[0], [60e3, 70e3])  # J/mol: the priors' means (CONSECUTIVE)
    np.testing.assert_allclose(at_start[1], np.log([0.1, 0.05]))  # the log of their medians


def test_the_log_likelihood_and_the_predictive_integrate_each_draw_once(tmp_path, monkeypatch):
    # Two compiled functions that read the predictions alone (as the pointwise log-likelihood and the posterior
    # predictive do, one after the other, at the same draws) share what the Op remembers: one integration per
    # distinct point, and the same values as a fresh one.
    from inference.physics.solution import MeasurementSolver

    runs = "run,temperature,A,B,C\nr1,50,1.0,0,0\nr2,70,0.8,0.05,0\n"
    meas = "run,time,A,B,C\nr1,2,0.85,0.14,0.01\nr1,6,0.6,0.3,0.08\nr2,1,0.6,0.3,0.02\n"
    model = _consecutive_problem(tmp_path, "proportional", runs, meas).build_model(T_REF)
    pointwise = model.logp(vars=[model["observation"]], sum=False)[0]
    first, second = (model.compile_fn(pointwise, inputs=model.value_vars, on_unused_input="ignore") for _ in range(2))
    solves = []
    solve = MeasurementSolver.solve
    monkeypatch.setattr(MeasurementSolver, "solve", lambda self, *a, **k: solves.append(a) or solve(self, *a, **k))
    point = model.initial_point()
    moved = {name: value + 0.05 for name, value in point.items()}
    values = [first(point), second(point), second(moved), first(moved)]
    assert len(solves) == 2
    np.testing.assert_array_equal(values[0], values[1])
    np.testing.assert_array_equal(values[2], values[3])
    fresh = model.compile_fn(pointwise, inputs=model.value_vars, on_unused_input="ignore")
    monkeypatch.undo()
    op = next(node.op for node in fresh.f.maker.fgraph.apply_nodes if hasattr(node.op, "remembered_predictions"))
    op.remembered_predictions.recent.clear()
    np.testing.assert_array_equal(fresh(moved), values[2])


@pytest.mark.parametrize("noise", ["proportional", "absolute", "robust"])
def test_noise_on_the_log_scale_resolves_the_smallest_value(tmp_path, noise):
    # Noise on the log of values compares every value in relative terms, however small, so the solver's relative
    # floor is the smallest measured concentration; absolute noise needs no such floor (the default tolerances).
    from inference.model.builder import network_solver

    runs = "run,temperature,A,B,C\nr1,50,1.0,0,0\n"
    meas = "run,time,A,B,C\nr1,2,0.85,0.14,0.01\nr1,60,2e-9,0.3,0.7\n"
    problem = _consecutive_problem(tmp_path, noise, runs, meas)
    floor = network_solver(problem.study, problem.obs).settings.relative_floor
    assert floor == (0.0 if noise == "absolute" else 2e-9)


def test_closed_form_model_gradient_matches_finite_differences(tmp_path):
    runs = "run,temperature,A,B,C\nr1,50,1.0,1.4,0\nr2,70,0.8,0.8,0\n"
    meas = "run,time,A,C\nr1,2,0.7,0.3\nr1,6,0.45,0.55\nr2,1,0.5,0.3\nr2,4,0.25,0.55\n"
    body = """\
    study: pair
    units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
    data: {runs: runs.csv, measurements: measurements.csv}
    species: [A, B, C]
    reactions:
      - name: join
        equation: A + B -> C
        k_ref: {median: 0.2, factor: 10}
        Ea: {mean: 60, sd: 20}
    """
    problem = open_problem(load_study(write_study(tmp_path, body, runs, meas)))
    assert "closed form (second_pair)" in "\n".join(problem.check_lines())
    _gradient_check(problem.build_model(T_REF))


def assert_recovered(summary, name, truth):
    """Truth within 3 posterior sd of the posterior mean: for a near-Gaussian posterior a miss happens 0.3 % of
    the time (a 90 % interval misses 10 % of the time by design, too often for a test with several checks)."""
    row = summary.loc[name]
    assert abs(row["mean"] - truth) < 3 * row["sd"], (name, truth, row["mean"], row["sd"])


def _simulate(rates, species_count, initial, times, seed, noise=0.03):
    rng = np.random.default_rng(seed)
    solution = solve_ivp(rates, (0.0, float(times[-1])), initial, t_eval=times, method="Radau", rtol=1e-10, atol=1e-13)
    return solution.y.T * np.exp(noise * rng.standard_normal((times.size, species_count)))


def test_fitted_reaction_order_is_recovered(tmp_path):
    # A -> B with rate k c_A^n, true n = 2, Ea = 55 kJ/mol, k(T_ref) = 0.3 (mol/L)^-1/min.
    true_n, true_ea, true_k = 2.0, 55_000.0, 0.3
    runs, meas = ["run,temperature,A,B"], ["run,time,A,B"]
    for index, (celsius, a0) in enumerate([(40, 1.0), (55, 0.8), (70, 1.2)]):
        k = arrhenius_k(true_k, true_ea, celsius)
        times = np.geomspace(0.2, 8.0 / (k * a0), 10)
        data = _simulate(lambda t, c, k=k: [-k * c[0] ** true_n, k * c[0] ** true_n], 2, [a0, 0.0], times, index)
        runs.append(f"r{index},{celsius},{a0},0")
        meas += [f"r{index},{t:.6g},{a:.6g},{b:.6g}" for t, (a, b) in zip(times, data, strict=True)]
    body = """\
    study: order
    units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
    data: {runs: runs.csv, measurements: measurements.csv}
    species: [A, B]
    reactions:
      - name: decay
        equation: A -> B
        rate_law: power_law
        orders: {A: {lower: 0, upper: 3}}
        k_ref: {median: 0.2, factor: 20}
        Ea: {mean: 60, sd: 30}
    reference_temperature: 330 K
    sampling: {draws: 400, tune: 400, chains: 2, seed: 4}
    """
    path = write_study(tmp_path, body, "\n".join(runs) + "\n", "\n".join(meas) + "\n")
    summary = fit_study(path, out=tmp_path / "res", quiet=True).summary.set_index("parameter")
    for name, truth in (("order[decay:A]", true_n), ("Ea[decay]", true_ea / 1000), ("k_ref[decay]", true_k)):
        assert_recovered(summary, name, truth)


def test_reversible_step_recovers_van_t_hoff_parameters(tmp_path):
    # A <=> B; K(T) = K_ref exp(-(dH/R)(1/T - 1/T_ref)) (van 't Hoff); true dH = -20 kJ/mol, K_ref = 2.
    true = {"k_ref": 0.05, "Ea": 70_000.0, "K_ref": 2.0, "dH": -20_000.0}
    runs, meas = ["run,temperature,A,B"], ["run,time,A,B"]
    for index, celsius in enumerate([35, 50, 65, 80]):
        kelvin = celsius + 273.15
        kf = arrhenius_k(true["k_ref"], true["Ea"], celsius)
        big_k = true["K_ref"] * np.exp(-(true["dH"] / R) * (1 / kelvin - 1 / T_REF))
        times = np.geomspace(0.5, 6.0 / (kf * (1 + 1 / big_k)), 10)
        data = _simulate(
            lambda t, c, kf=kf, kk=big_k: [-kf * c[0] + kf / kk * c[1], kf * c[0] - kf / kk * c[1]],
            2,
            [1.0, 0.0],
            times,
            10 + index,
        )
        runs.append(f"r{index},{celsius},1.0,0")
        meas += [f"r{index},{t:.6g},{a:.6g},{b:.6g}" for t, (a, b) in zip(times, data, strict=True)]
    body = """\
    study: equilibrium
    units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
    data: {runs: runs.csv, measurements: measurements.csv}
    species: [A, B]
    reactions:
      - name: iso
        equation: A <=> B
        k_ref: {median: 0.05, factor: 10}
        Ea: {mean: 60, sd: 30}
        K_ref: {median: 1, factor: 10}
        dH: {mean: 0, sd: 40}
    reference_temperature: 330 K
    sampling: {draws: 400, tune: 400, chains: 2, seed: 6}
    """
    path = write_study(tmp_path, body, "\n".join(runs) + "\n", "\n".join(meas) + "\n")
    summary = fit_study(path, out=tmp_path / "res", quiet=True).summary.set_index("parameter")
    checks = {"K_ref[iso]": true["K_ref"], "dH[iso]": true["dH"] / 1000, "Ea[iso]": true["Ea"] / 1000}
    for name, truth in checks.items():
        assert_recovered(summary, name, truth)


def test_functions_without_gradient_integrate_the_concentrations_alone(tmp_path):
    # The log-density without gradient (as in the pointwise log-likelihood and the posterior predictive) needs
    # no Jacobian: the compiled function holds the predictions-alone copy of the Op, the one with gradient the
    # full Op, and both give the same log-density up to the solver's tolerance (the sensitivities take part in
    # its error control, so the steps differ).
    from inference.model.ops import NetworkPrediction

    runs = "run,temperature,A,B,C\nr1,50,1.0,0,0\nr2,70,0.8,0.05,0\n"
    meas = "run,time,A,B,C\nr1,2,0.85,0.14,0.01\nr1,6,0.6,0.3,0.08\nr2,1,0.6,0.3,0.02\nr2,4,0.3,0.4,0.15\n"
    model = _consecutive_problem(tmp_path, "proportional", runs, meas).build_model(T_REF)

    def prediction_ops(function):
        nodes = function.maker.fgraph.toposort()
        return [node.op for node in nodes if isinstance(node.op, NetworkPrediction)]

    logp = model.compile_logp()
    value_and_gradient = model.logp_dlogp_function(ravel_inputs=True)
    assert [op.with_jacobian for op in prediction_ops(logp.f)] == [False]
    assert [op.with_jacobian for op in prediction_ops(value_and_gradient._pytensor_function)] == [True]
    start = model.initial_point()
    value_and_gradient.set_extra_values({})
    full, _ = value_and_gradient(DictToArrayBijection.map({v.name: start[v.name] for v in model.value_vars}).data)
    # Measured: relative difference 2e-7 (solver rtol 1e-6 on this problem's scale); allowed 50 times that.
    np.testing.assert_allclose(float(logp(start)), float(full), rtol=1e-5)
