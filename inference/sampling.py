"""NUTS on the CPU with one integer seed, returning InferenceData with log-likelihood and predictions."""

from __future__ import annotations

import logging
import os
import warnings

import arviz as az
import pymc as pm

from .schema import Sampling


def quiet_backend_logs() -> None:
    """Silence PyMC's and PyTensor's chatter; Arrhenia reports its own steps.

    pip-installed PyTensor finds no optimised BLAS here and says so; at the size of these models the
    fallback is fast enough, so the message is dropped rather than repeated to every user.
    """
    for name in ("pymc", "pytensor", "pymc.sampling", "pymc.stats.convergence"):
        logging.getLogger(name).setLevel(logging.ERROR)
    warnings.filterwarnings("ignore", message=".*BLAS.*")
    warnings.filterwarnings("ignore", category=FutureWarning, module="arviz")
    warnings.filterwarnings("ignore", category=UserWarning, module="pymc")


def chains_in_parallel(chains: int) -> int:
    """Chains run as parallel processes, at most one per core present."""
    return max(1, min(chains, os.cpu_count() or 1))


def sample_posterior(model: pm.Model, settings: Sampling, *, progress: bool) -> az.InferenceData:
    """Run NUTS and add the pointwise log-likelihood and the posterior predictive of the observations.

    Chains get seeds derived by PyMC from ``settings.seed``; the predictive draws use ``seed + 1``, so one
    integer fixes every number.
    """
    quiet_backend_logs()
    with model:
        idata = pm.sample(
            draws=settings.draws,
            tune=settings.tune,
            chains=settings.chains,
            cores=chains_in_parallel(settings.chains),
            random_seed=settings.seed,
            target_accept=settings.target_accept,
            progressbar=progress,
            compute_convergence_checks=False,
            idata_kwargs={"log_likelihood": True},
        )
        pm.sample_posterior_predictive(
            idata, extend_inferencedata=True, random_seed=settings.seed + 1, progressbar=False
        )
    return idata
