"""The prior predictive check behind ``arrhenia check --prior-predictive``: the priors alone against the data."""

from __future__ import annotations

from pathlib import Path

import arviz as az
import numpy as np

from ..inputs.study import Study
from ..outputs import plots
from ..outputs.records import PriorPredictiveCheck
from ..outputs.results import (
    StagedFolder,
    check_target,
    sha256_json,
)
from ..physics.arrhenius import auto_reference_temperature
from ..posterior.summaries import fit_checks_file
from .fit import study_inputs
from .kinds import open_problem


def prior_predictive_check(
    study: Study, *, out: str | Path | None = None, draws: int = 300, overwrite: bool = False
) -> PriorPredictiveCheck:
    """Draw parameters from the priors alone, predict every measurement, and compare with the data.

    Writes ``prior_predictive.csv`` (the fit_checks columns, from prior draws) and
    ``figures/prior_predictive.png`` to ``out`` (default ``results/<study>-prior-predictive``).
    """
    import pymc as pm

    from ..model.sampling import quiet_backend_logs

    quiet_backend_logs()
    target = Path(out) if out is not None else Path("results") / f"{study.name}-prior-predictive"
    check_target(target, overwrite, study_inputs(study))
    problem = open_problem(study)
    temperature_ref = study.reference_temperature_K or auto_reference_temperature(problem.temperatures_K)
    model = problem.build_model(temperature_ref)
    with model, np.errstate(all="ignore"):
        prior = pm.sample_prior_predictive(draws=draws, random_seed=study.sampling.seed)
    # fit_checks reads the predictive group; the prior draws stand in for the posterior ones here.
    stand_in = az.InferenceData(posterior_predictive=prior.prior_predictive)
    table = fit_checks_file(study, problem.fit_checks(stand_in))  # the columns of fit_checks.csv
    inside = float(table["inside_90"].mean())
    with StagedFolder(target, overwrite, study_inputs(study)) as folder:
        folder.write_csv("prior_predictive.csv", table)
        plots.predictive_check_plot(
            table,
            folder.path("figures/prior_predictive.png"),
            f"{study.name}: data against the priors' 90 % predictive intervals",
        )
        folder.write_manifest(
            "prior predictive check",
            {
                "study": study.name,
                "config_sha256": sha256_json(study.canonical),
                "draws": draws,
                "seed": study.sampling.seed,
            },
        )
    return PriorPredictiveCheck(target, draws, inside, table)
