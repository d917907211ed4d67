"""The records a workflow returns and the terminal text and reports read: plain frozen data, no behaviour.

Each mirrors the content of the folder its workflow writes.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

from ..inputs.study import Study
from ..posterior.diagnostics import Diagnostics

if TYPE_CHECKING:
    import arviz as az


@dataclass(frozen=True)
class PredictionResult:
    """Tables of a prediction run: ``profiles`` by scenario (tidy), ``summary`` of scalar answers, and the
    extrapolation flags."""

    results_dir: Path
    profiles: dict[str, pd.DataFrame]
    summary: pd.DataFrame
    extrapolations: list[str]


@dataclass(frozen=True)
class FitResult:
    """Everything a fit produced; the same content as its results folder. ``tables`` holds the extra tables
    of the study's kind by file name (``classical.csv`` for rate constants)."""

    study: Study
    results_dir: Path
    reference_temperature_K: float
    diagnostics: Diagnostics
    summary: pd.DataFrame
    tables: dict[str, pd.DataFrame]
    correlations: pd.DataFrame
    fit_checks: pd.DataFrame
    extrapolations: list[str]
    idata: az.InferenceData
    predictions: PredictionResult | None = None  # when the study names scenarios


@dataclass(frozen=True)
class ComparisonResult:
    """A comparison of candidate studies on the same data; the content of its results folder."""

    results_dir: Path
    table: pd.DataFrame
    verdict: list[str]
    candidates: dict[str, Path]
    verdicts: dict[str, str]
    notes: list[str]
    trusted: bool


@dataclass(frozen=True)
class PriorPredictiveCheck:
    """Where the prior predictive check was written, how many draws, and the share of measurements inside the
    priors' 90 % predictive interval."""

    results_dir: Path
    draws: int
    inside_90: float
    table: pd.DataFrame
