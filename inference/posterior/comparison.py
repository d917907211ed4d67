"""Model comparison by expected log predictive density: PSIS-LOO, WAIC and leave-one-run-out.

Pointwise: one log-likelihood term per measurement ("which law predicts a held-out point"). Leave-one-run-out:
the terms summed per run (per temperature for rate-constant data), then PSIS-LOO over runs ("which law
predicts a new experiment"). Pareto-k diagnostics use the sample-size-dependent threshold
min(1 - 1/log10(S), 0.7) of Vehtari, Simpson, Gelman, Yao and Gabry, "Pareto smoothed importance sampling",
J. Mach. Learn. Res. 25 (2024). Stacking weights follow Yao, Vehtari, Simpson and Gelman, "Using stacking to
average Bayesian predictive distributions", Bayesian Analysis 13 (2018), as computed by ``arviz.compare``.
"""

from __future__ import annotations

import math
import warnings

import arviz as az
import numpy as np
import pandas as pd
import xarray as xr

COLUMNS = [
    "level",
    "rank",
    "candidate",
    "elpd",
    "se",
    "elpd_diff",
    "dse",
    "p_loo",
    "weight",
    "high_pareto_k",
    "points",
    "elpd_waic",
    "p_waic",
]
#: Differences within this many standard errors are not called a preference (common practice).
SIGNIFICANT_SE = 2.0


def pareto_k_threshold(draws: int) -> float:
    """min(1 - 1/log10(S), 0.7) for S posterior draws (Vehtari et al. 2024)."""
    return min(1.0 - 1.0 / math.log10(draws), 0.7)


def grouped_log_likelihood(idata: az.InferenceData, groups: list[str]) -> az.InferenceData:
    """A copy whose log-likelihood is summed over the measurements of each group (dim ``run``)."""
    pointwise = idata.log_likelihood["observation"]
    labels = list(dict.fromkeys(groups))
    index = xr.DataArray(np.array(groups), dims="measurement")
    summed = pointwise.groupby(index.rename("run")).sum()
    summed = summed.sel(run=labels)
    return az.InferenceData(posterior=idata.posterior, log_likelihood=xr.Dataset({"observation": summed}))


def _level_table(named: dict[str, az.InferenceData], level: str) -> pd.DataFrame:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # ArviZ warns about high Pareto k itself; we count and report them
        ranking = az.compare(named, ic="loo", method="stacking")
        rows = []
        for name, row in ranking.iterrows():
            loo = az.loo(named[name], pointwise=True)
            waic = az.waic(named[name])
            draws = named[name].posterior.sizes["chain"] * named[name].posterior.sizes["draw"]
            k = np.asarray(loo.pareto_k)
            rows.append(
                {
                    "level": level,
                    "rank": int(row["rank"]) + 1,
                    "candidate": name,
                    "elpd": float(row["elpd_loo"]),
                    "se": float(row["se"]),
                    "elpd_diff": float(row["elpd_diff"]),
                    "dse": float(row["dse"]),
                    "p_loo": float(row["p_loo"]),
                    "weight": float(row["weight"]),
                    "high_pareto_k": int(np.sum(k > pareto_k_threshold(draws))),
                    "points": int(k.size),
                    "elpd_waic": float(waic.elpd_waic),
                    "p_waic": float(waic.p_waic),
                }
            )
    return pd.DataFrame(rows, columns=COLUMNS)


def compare(named: dict[str, az.InferenceData], groups: list[str]) -> pd.DataFrame:
    """The comparison table: pointwise rows then leave-one-run-out rows, each ranked best first.

    Columns: level (``pointwise`` or ``leave_one_run_out``), rank, candidate, elpd (PSIS-LOO), se, elpd_diff
    and dse (to the best candidate), p_loo (effective number of parameters), weight (stacking),
    high_pareto_k (points above the threshold), points, elpd_waic, p_waic.
    """
    pointwise = _level_table(named, "pointwise")
    grouped = {name: grouped_log_likelihood(idata, groups) for name, idata in named.items()}
    return pd.concat([pointwise, _level_table(grouped, "leave_one_run_out")], ignore_index=True)


def verdict(table: pd.DataFrame) -> list[str]:
    """Plain sentences, one per level, that do not over-claim when a difference is within 2 standard errors."""
    sentences = []
    for level, label in (("pointwise", "held-out measurements"), ("leave_one_run_out", "held-out runs")):
        rows = table[table["level"] == level].sort_values("rank")
        best, second = rows.iloc[0], rows.iloc[1]
        difference, se = float(second["elpd_diff"]), float(second["dse"])
        ratio = difference / se if se > 0 else math.inf
        if ratio >= SIGNIFICANT_SE:
            text = (
                f"For {label}: {best['candidate']} is preferred over {second['candidate']} by "
                f"Δelpd = {difference:.1f} ± {se:.1f}; the difference is about {ratio:.0f} standard errors "
                f"(stacking weight {best['weight']:.2f})."
            )
        else:
            text = (
                f"For {label}: {best['candidate']} and {second['candidate']} cannot be told apart "
                f"(Δelpd = {difference:.1f} ± {se:.1f}, {ratio:.1f} standard errors); prefer the simpler "
                "mechanism or collect data that separate them."
            )
        unit = "measurements" if level == "pointwise" else "runs"
        flagged = rows[rows["high_pareto_k"] > 0]
        for _, row in flagged.iterrows():
            text += (
                f" The estimate for {row['candidate']} is unreliable at {row['high_pareto_k']} of "
                f"{row['points']} {unit} (Pareto k above the threshold)."
            )
        sentences.append(text)
    return sentences
