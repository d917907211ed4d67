"""Arrhenia: Bayesian inference of chemical kinetics (the import package is ``inference``).

The API: ``load_study(path) -> Study``, ``fit_study(study, out=..., ...) -> FitResult``,
``compare_studies([a, b], ...) -> ComparisonResult``, ``predict(results_dir, scenarios) -> PredictionResult`` and
``rank_experiments(results_dir, candidates, target=...) -> NextExperimentResult``.
All but ``load_study`` are imported on first use, so validating a study does not pay for importing PyMC.
"""

from __future__ import annotations

from typing import Any

from ._version import __version__
from .errors import ExitCode, StudyError
from .inputs.config import load_study

__all__ = [
    "ExitCode",
    "FitResult",
    "StudyError",
    "__version__",
    "compare_studies",
    "fit_study",
    "load_study",
    "predict",
    "rank_experiments",
]


def __getattr__(name: str) -> Any:
    if name == "fit_study":
        from .workflows.fit import fit_study

        return fit_study
    if name == "FitResult":
        from .outputs.records import FitResult

        return FitResult
    if name == "compare_studies":
        from .workflows.compare import compare_studies

        return compare_studies
    if name == "predict":
        from .workflows.predict import predict

        return predict
    if name == "rank_experiments":
        from .workflows.next_experiment import rank_experiments

        return rank_experiments
    raise AttributeError(f"module 'inference' has no attribute {name!r}")
