"""Benchmark: one network fitted three ways in one run, with a table of costs and ratios.

Problem (fixed by the project): A + B -> C (second order) and C -> D (first order), true Ea 65 and 85 kJ/mol,
T_ref 322 K, four isothermal runs at 300, 315, 330 and 345 K with different initial A and B, 15 sampling times
each spanning 70-90 % conversion of A, A, C and D observed with 5 % lognormal noise (seed 12345);
2 chains x 500 tuning + 500 draws.

Ways:
1. Arrhenia (``fit_study``), run in a fresh interpreter twice; the second run, with warm PyTensor and numba
   caches, is reported ("whole fit" includes the import).
2. The same model with PyMC's ``pm.ode.DifferentialEquation`` (one ODE op per run). It costs seconds per
   draw, so it samples 2 chains x 150 tuning + 150 draws; ESS per second is the fair comparison.
3. emcee (gradient-free ensemble) on the same log-posterior with ``scipy.integrate.odeint`` (LSODA): 16 walkers
   x 3000 steps, the first 1000 discarded; ESS over walkers as if they were chains (an optimistic count for an
   ensemble, whose walkers are not independent).

Run: ``python benchmarks/network_fit.py`` (needs ``pip install -e '.[bench]'`` for emcee). Prints the table
and the ratios against the targets: ESS/s >= 40x pm.ode and >= 5x emcee; one log-density-plus-gradient at most
4x one plain forward solve; the whole Arrhenia fit under 15 s.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

SEED = 12345
T_REF = 322.0
TRUE = {"coupling": (0.05, 65_000.0), "degradation": (0.01, 85_000.0)}  # k at T_ref, Ea (J/mol)
RUNS = ((300.0, 1.0, 1.5, 0.7), (315.0, 0.8, 1.2, 0.8), (330.0, 1.2, 1.4, 0.85), (345.0, 1.0, 1.1, 0.9))
POINTS = 15
NOISE = 0.05
PRIORS = {"coupling": (0.05, 10.0, 70.0, 25.0), "degradation": (0.01, 10.0, 80.0, 25.0)}  # median, factor, Ea
GAS = 8.314462618
Z95 = 1.959963984540054

STUDY = """\
study: benchmark
units: {{time: min, temperature: K, concentration: mol/L, energy: kJ/mol}}
data: {{runs: runs.csv, measurements: measurements.csv}}
species: [A, B, C, D]
reactions:
  - name: coupling
    equation: A + B -> C
    k_ref: {{median: {c[0]}, factor: {c[1]}}}
    Ea: {{mean: {c[2]}, sd: {c[3]}}}
  - name: degradation
    equation: C -> D
    k_ref: {{median: {d[0]}, factor: {d[1]}}}
    Ea: {{mean: {d[2]}, sd: {d[3]}}}
reference_temperature: {t_ref} K
noise: {{model: proportional, sigma: {{scale: 0.2}}}}
sampling: {{draws: 500, tune: 500, chains: 2, seed: 1}}
"""


def rate_constants(kelvin: float) -> tuple[float, float]:
    return tuple(k * np.exp(-ea / GAS * (1 / kelvin - 1 / T_REF)) for k, ea in TRUE.values())


def rhs(y, t, k1, k2):
    r1, r2 = k1 * y[0] * y[1], k2 * y[2]
    return [-r1, -r1, r1 - r2, r2]


def simulate() -> tuple[list[np.ndarray], list[np.ndarray], list[tuple]]:
    """Times and noisy A, C, D observations per run (scipy odeint at tight tolerance)."""
    from scipy.integrate import odeint

    rng = np.random.default_rng(SEED)
    all_times, observed = [], []
    for kelvin, a0, b0, conversion in RUNS:
        k1, _ = rate_constants(kelvin)
        # Time to the target conversion of A by the second-order law alone (C -> D does not consume A).
        a_end = a0 * (1 - conversion)
        t_end = np.log((b0 - (a0 - a_end)) * a0 / (a_end * b0)) / (k1 * (b0 - a0))
        times = np.linspace(t_end / POINTS, t_end, POINTS)
        profile = odeint(
            rhs, [a0, b0, 0.0, 0.0], np.concatenate([[0.0], times]), args=rate_constants(kelvin), rtol=1e-11, atol=1e-14
        )[1:]
        all_times.append(times)
        observed.append(profile[:, [0, 2, 3]] * np.exp(NOISE * rng.standard_normal((POINTS, 3))))
    return all_times, observed, list(RUNS)


def write_study(folder: Path) -> Path:
    times, observed, runs = simulate()
    run_lines = ["run,temperature,A,B,C,D"] + [f"r{i},{r[0]:g},{r[1]:g},{r[2]:g},0,0" for i, r in enumerate(runs)]
    meas = ["run,time,A,C,D"]
    for i, (t, y) in enumerate(zip(times, observed, strict=True)):
        meas += [f"r{i},{tt:.8g},{a:.8g},{c:.8g},{d:.8g}" for tt, (a, c, d) in zip(t, y, strict=True)]
    (folder / "runs.csv").write_text("\n".join(run_lines) + "\n")
    (folder / "measurements.csv").write_text("\n".join(meas) + "\n")
    path = folder / "study.yaml"
    path.write_text(STUDY.format(c=PRIORS["coupling"], d=PRIORS["degradation"], t_ref=T_REF))
    return path


def min_bulk_ess(posterior, names=("ln_k_ref", "Ea")) -> float:
    import arviz as az

    return float(min(az.ess(posterior[list(names)], method="bulk").to_array().min().values, np.inf))


def prior_arrays() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The study's priors for the baselines: mean and sd of ln k_ref, mean and sd of Ea (J/mol)."""
    values = np.array(list(PRIORS.values()))
    return np.log(values[:, 0]), np.log(values[:, 1]) / Z95, values[:, 2] * 1e3, values[:, 3] * 1e3


# ----------------------------------------------------------------------------------------------- Arrhenia
def arrhenia_child(folder: str) -> None:
    """Runs in a fresh interpreter: import, fit, and report timings as JSON on the last line."""
    started = time.perf_counter()
    from inference import fit_study, load_study
    from inference.model.builder import network_solver
    from inference.physics.parameters import KineticInputs
    from inference.workflows.kinds import open_problem

    imported = time.perf_counter()
    study = load_study(Path(folder) / "study.yaml")
    result = fit_study(study, out=Path(folder) / f"results-{time.time_ns()}", quiet=True)
    total = time.perf_counter() - started
    ess = min_bulk_ess(result.idata.posterior)
    timings = json.loads((result.results_dir / "manifest.json").read_text())["timings_s"]

    problem = open_problem(study)
    model = problem.build_model(T_REF)
    function = model.logp_dlogp_function(ravel_inputs=True)
    function.set_extra_values({})
    point = model.initial_point()
    x = np.concatenate([np.ravel(point[v.name]) for v in model.value_vars])
    solver = network_solver(study, problem.obs)
    ln_k = np.log([[*rate_constants(r[0])] for r in RUNS])
    inputs = KineticInputs(
        ln_k, np.zeros((len(RUNS), 0)), np.zeros((len(RUNS), 0)), study.network.forward_orders, problem.obs.initial
    )

    def per_call(fn, repeats=300) -> float:
        fn()
        begin = time.perf_counter()
        for _ in range(repeats):
            fn()
        return (time.perf_counter() - begin) / repeats

    gradient = per_call(lambda: function(x))
    forward = per_call(lambda: solver.solve(inputs, sensitivities=False))
    print(
        json.dumps(
            {
                "import_s": imported - started,
                "setup_s": total - timings["sampled"],
                "sampling_s": timings["sampled"],
                "total_s": total,
                "ess": ess,
                "gradient_ms": gradient * 1e3,
                "forward_ms": forward * 1e3,
                "divergences": result.diagnostics.divergences,
            }
        )
    )


def run_arrhenia(folder: Path) -> dict:
    command = [sys.executable, __file__, "--arrhenia-child", str(folder)]
    for _ in range(2):  # the first run warms the compile caches
        done = subprocess.run(command, capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


# ------------------------------------------------------------------------------------------------ pm.ode
def run_pymc_ode(draws: int = 150, tune: int = 150) -> dict:
    import pymc as pm
    import pytensor.tensor as pt

    times, observed, runs = simulate()
    started = time.perf_counter()
    names = list(PRIORS)
    ln_mean, ln_sd, ea_mean, ea_sd = prior_arrays()

    def func(y, t, p):
        r1, r2 = p[0] * y[0] * y[1], p[1] * y[2]
        return [-r1, -r1, r1 - r2, r2]

    with pm.Model(coords={"reaction": names}):
        z_k = pm.Normal("z_ln_k_ref", 0, 1, dims="reaction")
        z_e = pm.TruncatedNormal("z_Ea", 0, 1, lower=-ea_mean / ea_sd, dims="reaction")
        ln_k_ref = pm.Deterministic("ln_k_ref", ln_mean + ln_sd * z_k, dims="reaction")
        ea = pm.Deterministic("Ea", ea_mean + ea_sd * z_e, dims="reaction")
        sigma = pm.HalfNormal("sigma", 0.2)
        for i, ((kelvin, a0, b0, _), t, y) in enumerate(zip(runs, times, observed, strict=True)):
            ode = pm.ode.DifferentialEquation(func=func, times=t, n_states=4, n_theta=2, t0=0)
            k = pt.exp(ln_k_ref - ea / GAS * (1 / kelvin - 1 / T_REF))
            solution = ode(y0=[a0, b0, 0.0, 0.0], theta=k)
            pm.LogNormal(f"obs_{i}", mu=pt.log(pt.maximum(solution[:, [0, 2, 3]], 1e-300)), sigma=sigma, observed=y)
        setup = time.perf_counter() - started
        begin = time.perf_counter()
        idata = pm.sample(
            draws=draws,
            tune=tune,
            chains=2,
            cores=2,
            random_seed=1,
            progressbar=False,
            compute_convergence_checks=False,
        )
        sampling = time.perf_counter() - begin
    return {
        "setup_s": setup,
        "sampling_s": sampling,
        "total_s": time.perf_counter() - started,
        "ess": min_bulk_ess(idata.posterior),
        "draws": f"2 x {tune} + {draws}",
    }


# ------------------------------------------------------------------------------------------------- emcee
def run_emcee(walkers: int = 16, steps: int = 3000, burn: int = 1000) -> dict:
    import emcee
    import xarray as xr
    from scipy.integrate import odeint
    from scipy.stats import norm, truncnorm

    times, observed, runs = simulate()
    started = time.perf_counter()
    ln_mean, ln_sd, ea_mean, ea_sd = prior_arrays()
    lower = -ea_mean / ea_sd
    log_obs = [np.log(y) for y in observed]

    def log_posterior(theta: np.ndarray) -> float:
        z_k, z_e, log_sigma = theta[:2], theta[2:4], theta[4]
        if np.any(z_e <= lower):
            return -np.inf
        sigma = np.exp(log_sigma)
        total = norm.logpdf(z_k).sum() + truncnorm.logpdf(z_e, lower, np.inf).sum()
        total += norm.logpdf(sigma, scale=0.2) + np.log(2) + log_sigma  # half-normal with the log Jacobian
        ln_k_ref, ea = ln_mean + ln_sd * z_k, ea_mean + ea_sd * z_e
        for (kelvin, a0, b0, _), t, y in zip(runs, times, log_obs, strict=True):
            k = np.exp(ln_k_ref - ea / GAS * (1 / kelvin - 1 / T_REF))
            profile = odeint(rhs, [a0, b0, 0.0, 0.0], np.concatenate([[0.0], t]), args=tuple(k), rtol=1e-6, atol=1e-9)[
                1:
            ]
            predicted = np.log(np.maximum(profile[:, [0, 2, 3]], 1e-300))
            total += norm.logpdf(y, predicted, sigma).sum()
        return float(total) if np.isfinite(total) else -np.inf

    rng = np.random.default_rng(1)
    start = np.column_stack([0.1 * rng.standard_normal((walkers, 4)), np.log(0.1) + 0.1 * rng.standard_normal(walkers)])
    np.random.seed(1)  # emcee draws its proposals from numpy's global generator
    sampler = emcee.EnsembleSampler(walkers, 5, log_posterior)
    setup = time.perf_counter() - started
    begin = time.perf_counter()
    sampler.run_mcmc(start, steps, progress=False)
    sampling = time.perf_counter() - begin
    chain = sampler.get_chain(discard=burn)  # (steps, walkers, 5)
    z_k, z_e = chain[..., :2].transpose(1, 0, 2), chain[..., 2:4].transpose(1, 0, 2)
    posterior = xr.Dataset(
        {
            "ln_k_ref": (("chain", "draw", "reaction"), ln_mean + ln_sd * z_k),
            "Ea": (("chain", "draw", "reaction"), ea_mean + ea_sd * z_e),
        }
    )
    return {
        "setup_s": setup,
        "sampling_s": sampling,
        "total_s": time.perf_counter() - started,
        "ess": min_bulk_ess(posterior),
        "draws": f"{walkers} walkers x {steps} ({burn} burn-in)",
    }


def main() -> None:
    import logging
    import warnings

    warnings.filterwarnings("ignore")  # pm.ode's odeint warns at every extreme draw; the table is what matters
    logging.getLogger("pymc").setLevel(logging.ERROR)
    with tempfile.TemporaryDirectory() as folder:
        write_study(Path(folder))
        ours = run_arrhenia(Path(folder))
    print("running pm.ode.DifferentialEquation (slow) ...", flush=True)
    ode = run_pymc_ode()
    try:
        ensemble = run_emcee()
    except ImportError:
        ensemble = None
        print("emcee is not installed (pip install -e '.[bench]'); that row is left out")
    rows = [("Arrhenia", ours, "2 x 500 + 500"), ("pm.ode", ode, ode["draws"])]
    if ensemble:
        rows.append(("emcee + odeint", ensemble, ensemble["draws"]))
    print(f"\n{'way':<16}{'draws':>34}{'setup s':>9}{'sample s':>10}{'total s':>9}{'min ESS':>9}{'ESS/s':>9}")
    rate = {}
    for name, row, draws in rows:
        rate[name] = row["ess"] / row["total_s"]
        print(
            f"{name:<16}{draws:>34}{row['setup_s']:>9.1f}{row['sampling_s']:>10.1f}{row['total_s']:>9.1f}"
            f"{row['ess']:>9.0f}{rate[name]:>9.2f}"
        )
    print(
        f"\nArrhenia: one log-density + gradient {ours['gradient_ms']:.3f} ms, one forward solve of all runs "
        f"{ours['forward_ms']:.3f} ms: ratio {ours['gradient_ms'] / ours['forward_ms']:.2f} (target <= 4)"
    )
    print(
        f"Arrhenia whole fit in a fresh interpreter (import {ours['import_s']:.1f} s, warm caches): "
        f"{ours['total_s']:.1f} s (target < 15 s); divergences {ours['divergences']}"
    )
    print(f"ESS/s ratio to pm.ode: {rate['Arrhenia'] / rate['pm.ode']:.0f}x (target >= 40)")
    if ensemble:
        print(f"ESS/s ratio to emcee: {rate['Arrhenia'] / rate['emcee + odeint']:.1f}x (target >= 5)")


if __name__ == "__main__":
    if len(sys.argv) == 3 and sys.argv[1] == "--arrhenia-child":
        arrhenia_child(sys.argv[2])
    else:
        main()
