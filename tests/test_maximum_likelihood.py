"""With flat-enough priors the posterior mode is the maximum-likelihood estimate: Arrhenia's models against
``scipy.optimize.least_squares`` on the same likelihood (for the network, with scipy's own ODE solver)."""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pandas as pd
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares, minimize

from inference.inputs.config import load_study
from inference.physics.arrhenius import ln_rate_constant
from inference.workflows.kinds import open_problem

N2O5 = {25.0: 3.46e-5, 35.0: 1.35e-4, 45.0: 4.98e-4, 55.0: 1.50e-3, 65.0: 4.87e-3}  # see test_arrhenius


def posterior_mode(model, hessian: bool = True) -> dict:
    """The mode of the log posterior density (no Jacobian terms: the mode of the density itself), by a trust-region
    Newton method with PyTensor's exact gradient and its Hessian (or, where the model has no second derivatives,
    central differences of the exact gradient); returned as physical ln_k_ref and Ea."""
    from pymc.blocking import DictToArrayBijection, RaveledVars

    from inference.model.sampling import prior_centre

    start = prior_centre(model)  # PyMC's own initial point puts a bounded Ea one standardised unit off
    names = [v.name for v in model.value_vars]
    mapped = DictToArrayBijection.map({n: start[n] for n in names})
    logp = model.compile_logp(jacobian=False)
    dlogp = model.compile_dlogp(jacobian=False)

    def point(x):
        return DictToArrayBijection.rmap(RaveledVars(x, mapped.point_map_info))

    def objective(x):
        return -float(logp(point(x))), -np.asarray(dlogp(point(x)))

    if hessian:
        d2logp = model.compile_d2logp(jacobian=False, negate_output=False)

        def curvature(x):
            return -np.asarray(d2logp(point(x)))  # the Hessian of -log p

    else:  # the ODE Op has exact first derivatives only: central differences of the exact gradient

        def curvature(x, step=1e-6):
            columns = [(objective(x + step * e)[1] - objective(x - step * e)[1]) / (2 * step) for e in np.eye(x.size)]
            matrix = np.array(columns)
            return (matrix + matrix.T) / 2

    # A trust region bounds the first steps, which matters where flat priors make a unit step enormous.
    found = minimize(
        objective,
        mapped.data,
        jac=True,
        hess=curvature,
        method="trust-exact",
        options={"gtol": 1e-10, "maxiter": 2000},
    )
    # trust-exact may stop on rounding ("bad approximation") once at the optimum; the gradient says whether it is.
    assert np.max(np.abs(found.jac)) < 1e-4, found
    # The deterministics as functions of the value variables (not of the random variables, which would draw).
    outputs = model.replace_rvs_by_values([model["ln_k_ref"], model["Ea"]])
    values = model.compile_fn(outputs, inputs=model.value_vars, on_unused_input="ignore")
    ln_k_ref, ea = values(point(found.x))
    return {"ln_k_ref": np.asarray(ln_k_ref), "Ea": np.asarray(ea)}


def gauss_newton_sd(fit) -> np.ndarray:
    """Approximate posterior sd from the least-squares Jacobian: sqrt(diag((J^T J)^-1) * s^2)."""
    jac = fit.jac
    dof = max(1, fit.fun.size - jac.shape[1])
    s2 = float(np.sum(fit.fun**2) / dof)
    return np.sqrt(np.diag(np.linalg.inv(jac.T @ jac)) * s2)


def test_rate_constant_mode_matches_weighted_least_squares(tmp_path):
    # N2O5 rate constants with a stated 5 % error each: the likelihood is normal on ln k with sd 0.05, so the
    # maximum-likelihood (ln k_ref, Ea) minimises sum(((ln k - ln k(T)) / 0.05)^2) (common practice).
    rows = "".join(f"{t},{k},0.05\n" for t, k in N2O5.items())
    (tmp_path / "k.csv").write_text("temperature,k,k_rel_sd\n" + rows)
    (tmp_path / "s.yaml").write_text(
        textwrap.dedent(
            """\
            study: n2o5
            units: {temperature: degC, energy: kJ/mol, rate_constant: 1/s}
            data: {rate_constants: k.csv}
            reactions:
              - name: decomposition
                k_ref: {median: 1.0e-3, factor: 1.0e6}
                Ea: {mean: 100, sd: 10000}
            reference_temperature: 318.15 K
            """
        )
    )
    t_ref = 318.15
    model = open_problem(load_study(tmp_path / "s.yaml")).build_model(t_ref)
    mode = posterior_mode(model)
    kelvin = np.array(list(N2O5)) + 273.15
    ln_k = np.log(list(N2O5.values()))
    fit = least_squares(
        lambda p: (ln_k - ln_rate_constant(kelvin, p[0], p[1] * 1000, t_ref)) / 0.05, x0=[-7.0, 90.0], xtol=1e-14
    )
    sd = gauss_newton_sd(fit)
    # Within 1 % of a posterior sd: far below any uncertainty a user sees, far above optimiser tolerances.
    assert abs(float(mode["ln_k_ref"][0]) - fit.x[0]) < 0.01 * sd[0]
    assert abs(float(mode["Ea"][0]) / 1000 - fit.x[1]) < 0.01 * sd[1]


def test_network_mode_matches_least_squares_with_scipy_lsoda(tmp_path):
    # The demo network (A + B -> C, C -> D) on its bundled data, priors widened until flat. With one shared
    # sigma on log values, the most likely kinetic parameters minimise the sum of squared log residuals
    # whatever sigma is; scipy's LSODA (rtol 1e-10) integrates the same rate law independently of Arrhenia's.
    source = load_study("data_demo/study.yaml")
    body = source.path.read_text()
    body = body.replace("factor: 20}", "factor: 1.0e4}").replace("sd: 30}", "sd: 3000}")
    body = body.replace("runs: runs.csv", f"runs: {source.data_file('runs')}")
    body = body.replace("measurements: measurements.csv", f"measurements: {source.data_file('measurements')}")
    (tmp_path / "flat.yaml").write_text(body)
    problem = open_problem(load_study(tmp_path / "flat.yaml"))
    obs = problem.obs
    t_ref = float(1.0 / np.mean(1.0 / obs.temperature_K))
    mode = posterior_mode(problem.build_model(t_ref), hessian=False)

    species = list(problem.study.species)
    runs = pd.read_csv(source.data_file("runs")).set_index("run")

    def residuals(p):
        out = []
        for r, run in enumerate(obs.run_ids):
            kelvin = obs.temperature_K[r]
            k1 = math.exp(ln_rate_constant(kelvin, p[0], p[1] * 1000, t_ref))
            k2 = math.exp(ln_rate_constant(kelvin, p[2], p[3] * 1000, t_ref))

            def rates(t, c, k1=k1, k2=k2):
                r1, r2 = k1 * c[0] * c[1], k2 * c[2]
                return [-r1, -r1, r1 - r2, r2]

            times = obs.times[r]
            c0 = runs.loc[run, species].to_numpy(dtype=float)
            sol = solve_ivp(rates, (0, times[-1]), c0, t_eval=times, method="LSODA", rtol=1e-10, atol=1e-14)
            rows = obs.run_index == r
            predicted = sol.y[obs.species_index[rows], obs.time_index[rows]]
            out.append(np.log(obs.value[rows]) - np.log(predicted))
        return np.concatenate(out)

    ours = [mode["ln_k_ref"][0], mode["Ea"][0] / 1000, mode["ln_k_ref"][1], mode["Ea"][1] / 1000]
    # Started well away from our mode (many posterior sd), so agreement is not inherited from the start.
    start = np.array(ours) + np.array([0.3, 8.0, -0.3, -8.0])
    fit = least_squares(residuals, x0=start, xtol=1e-12, ftol=1e-12, x_scale=[0.1, 1.0, 0.1, 1.0])
    sd = gauss_newton_sd(fit)
    # Within 5 % of a posterior sd: the two solvers differ by their tolerances (Arrhenia's rtol is 1e-6).
    for value, reference, scale in zip(ours, fit.x, sd, strict=True):
        assert abs(value - reference) < 0.05 * scale, (value, reference, scale)
