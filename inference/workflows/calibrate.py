"""Simulation-based calibration of a study's model on its own design: simulate from the priors, fit each data set,
rank the truths among the posterior draws (the statistics live in ``posterior.calibration``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ..inputs.config import load_study
from ..posterior.calibration import (
    CALIBRATED,
    LOG_LIKELIHOOD,
    CalibrationResult,
    CalibrationSettings,
    labels,
    record,
    summarise,
)


def _value_point(model, values: dict) -> dict:
    """A point of the model's value variables (transformed where PyMC transforms) from free-RV values."""
    point = {}
    for rv in model.free_RVs:
        value = np.array(values[rv.name], dtype=float)  # a copy: arrays unpickled by Dask may be unaligned
        transform = model.rvs_to_transforms.get(rv)
        if transform is not None:
            value = np.asarray(transform.forward(value, *rv.owner.inputs).eval(), dtype=float)
        point[model.rvs_to_values[rv].name] = value
    return point


def simulate(study_path: str | Path, settings: CalibrationSettings) -> tuple[float, list[dict], np.ndarray]:
    """T_ref, one dict of free-RV values per simulation (the truths) and the simulated data (S, M), drawn from
    the prior predictive of the study's model with ``settings.seed``."""
    import pymc as pm

    from ..model.sampling import quiet_backend_logs
    from ..physics.arrhenius import auto_reference_temperature
    from .kinds import open_problem

    quiet_backend_logs()
    study = load_study(study_path)
    problem = open_problem(study)
    # Each fit resolves its data set's smallest value (``model.builder.network_solver``), which can lie far below
    # the study's own; so the simulation resolves every prediction down to the solver's limit, and the data
    # come from the model the fits use.
    problem = problem.with_measurements(np.full(len(problem.measurement_groups()), np.finfo(float).tiny))
    temperature_ref = study.reference_temperature_K or auto_reference_temperature(problem.temperatures_K)
    model = problem.build_model(temperature_ref)
    with model:
        prior = pm.sample_prior_predictive(draws=settings.simulations, random_seed=settings.seed)
    draws = prior.prior.isel(chain=0)
    truths = [
        {rv.name: draws[rv.name].isel(draw=i).values for rv in model.free_RVs}
        | {name: draws[name].isel(draw=i).values for name in CALIBRATED if name in draws}
        for i in range(settings.simulations)
    ]
    data = prior.prior_predictive["observation"].isel(chain=0).values
    return temperature_ref, truths, data


def rank_one(
    study_path: str, index: int, truth: dict, values: np.ndarray, temperature_ref: float, settings: CalibrationSettings
) -> dict:
    """Fit simulated dataset ``index`` and return the ranks of the truths, interval hits and sampler counts."""
    from ..model.sampling import sample_posterior
    from .kinds import open_problem

    study = load_study(study_path)
    problem = open_problem(study).with_measurements(np.array(values, dtype=float))
    model = problem.build_model(temperature_ref)
    # The study's own sampler settings (target_accept, mass matrix), with the calibration's draws and seed.
    sampling = study.sampling.model_copy(
        update={
            "draws": settings.draws,
            "tune": settings.tune,
            "chains": settings.chains,
            "seed": settings.seed + 1 + index,
            "cores": 1,
        }
    )
    idata, _ = sample_posterior(model, sampling, progress=False, predictive=False)
    posterior = idata.posterior
    names = [n for n in CALIBRATED if n in posterior]
    total = posterior.sizes["chain"] * posterior.sizes["draw"]
    picks = np.linspace(0, total - 1, settings.ranked_draws).round().astype(int)
    row: dict = {"simulation": index, "divergences": int(idata.sample_stats["diverging"].sum())}
    for label, (name, position) in labels(posterior, names).items():
        draws = posterior[name].values.reshape(total, *posterior[name].shape[2:])[(slice(None), *position)]
        true_value = float(np.asarray(truth[name])[position])
        record(row, label, draws, true_value, picks)
    log_likelihood = idata.log_likelihood["observation"].sum(dim="measurement").values.reshape(total)
    observed_logp = model.compile_fn(
        model.logp(vars=[model["observation"]], jacobian=False), inputs=model.value_vars, on_unused_input="ignore"
    )
    record(row, LOG_LIKELIHOOD, log_likelihood, float(observed_logp(_value_point(model, truth))), picks)
    return row


def calibrate(
    study_path: str | Path, settings: CalibrationSettings | None = None, workers: int = 1
) -> CalibrationResult:
    """Run a calibration of the study's model on its design; fits run on a local Dask cluster when
    ``workers`` > 1 (the batch engine's), in this process otherwise."""
    settings = settings or CalibrationSettings()
    study_path = str(Path(study_path).resolve())
    temperature_ref, truths, data = simulate(study_path, settings)
    arguments = [(study_path, i, truths[i], data[i], temperature_ref, settings) for i in range(settings.simulations)]
    if workers > 1:
        from ..physics.solution import compile_kernels
        from .executor import Executor

        compile_kernels()
        with Executor(workers) as executor:
            rows = executor.map(rank_one, arguments, lambda row: None)
    else:
        rows = [rank_one(*args) for args in arguments]
    return summarise(pd.DataFrame(rows), settings.ranked_draws)


def write_calibration(result: CalibrationResult, out: str | Path, overwrite: bool = False) -> Path:
    """ranks.csv, uniformity.csv, coverage.csv and figures/ranks.png, written atomically into ``out``."""
    from ..outputs import plots
    from ..outputs.results import StagedFolder, check_target

    target = Path(out)
    check_target(target, overwrite)
    with StagedFolder(target, overwrite) as folder:
        folder.write_csv("ranks.csv", result.ranks)
        folder.write_csv("uniformity.csv", result.uniformity)
        folder.write_csv("coverage.csv", result.coverage)
        plots.rank_histograms(result, folder.path("figures/ranks.png"))
        folder.write_manifest("simulation-based calibration", {})
    return target
