"""Arrhenia: Bayesian inference of chemical kinetics (the import package is ``inference``).

The API: ``load_study(path) -> Study`` and ``fit_study(study, out=..., ...) -> FitResult``. ``fit_study`` is
imported on first use, so validating a study does not pay for importing PyMC.
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

from .config import load_study
from .errors import ExitCode, StudyError

__all__ = ["ExitCode", "FitResult", "StudyError", "__version__", "fit_study", "load_study"]


def __getattr__(name: str) -> Any:
    if name in {"fit_study", "FitResult"}:
        from . import pipeline

        return getattr(pipeline, name)
    raise AttributeError(f"module 'inference' has no attribute {name!r}")
