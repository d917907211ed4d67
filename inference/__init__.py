"""Arrhenia: Bayesian inference of chemical kinetics (the import package is ``inference``).

The API: ``load_study(path) -> Study``, ``fit_study(study, out=..., ...) -> FitResult``,
``compare_studies([a, b], ...) -> ComparisonResult`` and ``predict(results_dir, scenarios) -> PredictionResult``.
All but ``load_study`` are imported on first use, so validating a study does not pay for importing PyMC.
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

from .config import load_study
from .errors import ExitCode, StudyError

__all__ = [
    "ExitCode",
    "FitResult",
    "StudyError",
    "__version__",
    "compare_studies",
    "fit_study",
    "load_study",
    "predict",
]


def __getattr__(name: str) -> Any:
    if name in {"fit_study", "FitResult", "compare_studies"}:
        from . import pipeline

        return getattr(pipeline, name)
    if name == "predict":
        from . import predictions

        return predictions.predict
    raise AttributeError(f"module 'inference' has no attribute {name!r}")
