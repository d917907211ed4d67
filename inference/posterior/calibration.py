"""Simulation-based calibration: is a 90 % interval from Arrhenia a 90 % interval?

Following Talts, Betancourt, Simpson, Vehtari and Gelman, "Validating Bayesian inference algorithms with
simulation-based calibration" (arXiv:1804.06788, 2018): parameters are drawn from the study's priors, data are
simulated from the model at those parameters on the study's own design (temperatures, runs, times, initial
concentrations), each dataset is fitted, and the rank of each true value among L posterior draws is recorded.
If the fitted posteriors are right, every rank is uniform on 0..L. Besides the parameters, the log-likelihood of
the data is ranked (true parameters against posterior draws), a data-dependent test quantity that Modrák,
Moon, Kim, Bürkner, Huurre, Faltejsková, Gelman and Vehtari ("Simulation-based calibration checking for Bayesian
computation: the choice of test quantities shapes sensitivity", Bayesian Analysis, 2023) show catches failures
that parameter ranks miss.

Uniformity is tested twice per quantity: a chi-square test of binned ranks, and a Kolmogorov-Smirnov test of
ranks jittered to (rank + U)/(L + 1), which are exactly uniform on (0, 1) under calibration. Coverage of the
central 50 % and 90 % intervals is reported with its binomial standard error.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .diagnostics import KINETIC_VARIABLES

#: Posterior variables whose scalar components are calibrated (per-run initial values and temperatures are
#: left out: many, and each is pinned by one run).
CALIBRATED = tuple(n for n in KINETIC_VARIABLES if n not in ("initial", "temperature"))
LOG_LIKELIHOOD = "log_likelihood"


@dataclass(frozen=True)
class CalibrationSettings:
    """Size of a calibration run: ``simulations`` datasets, each fitted with NUTS (``chains`` x ``draws`` after
    ``tune``), the truth ranked among ``ranked_draws`` (L) posterior draws spread evenly over all of them."""

    simulations: int = 100
    draws: int = 500
    tune: int = 500
    chains: int = 2
    ranked_draws: int = 99
    seed: int = 1


def labels(dataset, names: list[str]) -> dict[str, tuple[str, tuple]]:
    """Scalar components of ``names`` in an xarray Dataset with (chain, draw, ...) dims: label -> (name, index)."""
    out = {}
    for name in names:
        variable = dataset[name]
        extra = [d for d in variable.dims if d not in ("chain", "draw")]
        if not extra:
            out[name] = (name, ())
            continue
        for index in np.ndindex(*[variable.sizes[d] for d in extra]):
            coords = [str(variable.coords[d].values[i]) for d, i in zip(extra, index, strict=True)]
            out[f"{name}[{', '.join(coords)}]"] = (name, index)
    return out


def record(row: dict, label: str, draws: np.ndarray, truth: float, picks: np.ndarray) -> None:
    row[f"rank:{label}"] = int(np.sum(draws[picks] < truth))
    for level in (50, 90):
        low, high = np.quantile(draws, [(100 - level) / 200, (100 + level) / 200])
        row[f"in{level}:{label}"] = bool(low <= truth <= high)


@dataclass(frozen=True)
class CalibrationResult:
    """Per simulation: ``ranks`` (simulation, divergences, rank:<q>, in50:<q>, in90:<q>); per quantity:
    ``uniformity`` (chi-square and KS tests) and ``coverage`` (50 % and 90 % with binomial se)."""

    ranks: pd.DataFrame
    uniformity: pd.DataFrame
    coverage: pd.DataFrame
    ranked_draws: int

    @property
    def quantities(self) -> list[str]:
        return [c.removeprefix("rank:") for c in self.ranks.columns if c.startswith("rank:")]


def rank_bins(simulations: int, ranked_draws: int) -> int:
    """Bins of the chi-square test: a divisor of L + 1, at most 20, with five or more expected ranks per bin."""
    divisors = [b for b in range(2, min(20, ranked_draws + 1) + 1) if (ranked_draws + 1) % b == 0]
    fitting = [b for b in divisors if simulations / b >= 5]
    return max(fitting) if fitting else min(divisors)


def uniformity_tests(ranks: np.ndarray, ranked_draws: int, seed: int = 0) -> dict:
    """Chi-square (binned) and Kolmogorov-Smirnov (jittered) tests of ranks on 0..L against uniform."""
    ranks = np.asarray(ranks, dtype=int)
    bins = rank_bins(ranks.size, ranked_draws)
    counts = np.bincount(ranks * bins // (ranked_draws + 1), minlength=bins)
    chi2 = stats.chisquare(counts)
    jittered = (ranks + np.random.default_rng(seed).uniform(size=ranks.size)) / (ranked_draws + 1)
    ks = stats.kstest(jittered, "uniform")
    return {
        "bins": bins,
        "chi2": float(chi2.statistic),
        "chi2_p": float(chi2.pvalue),
        "ks": float(ks.statistic),
        "ks_p": float(ks.pvalue),
    }


def summarise(ranks: pd.DataFrame, ranked_draws: int) -> CalibrationResult:
    """Uniformity and coverage tables from the per-simulation ranks."""
    quantities = [c.removeprefix("rank:") for c in ranks.columns if c.startswith("rank:")]
    uniformity = pd.DataFrame(
        [
            {"quantity": q, **uniformity_tests(ranks[f"rank:{q}"], ranked_draws, seed=i)}
            for i, q in enumerate(quantities)
        ]
    )
    rows = []
    count = len(ranks)
    for q in quantities:
        for level in (50, 90):
            share = float(ranks[f"in{level}:{q}"].mean())
            expected = level / 100
            se = float(np.sqrt(expected * (1 - expected) / count))
            rows.append(
                {
                    "quantity": q,
                    "level": level,
                    "simulations": count,
                    "covered": int(ranks[f"in{level}:{q}"].sum()),
                    "share": share,
                    "expected": expected,
                    "binomial_se": se,
                    "z": (share - expected) / se,
                }
            )
    return CalibrationResult(ranks, uniformity, pd.DataFrame(rows), ranked_draws)
