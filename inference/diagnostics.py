"""The sampler's verdict: can this posterior be trusted?

Thresholds follow Vehtari, Gelman, Simpson, Carpenter and Bürkner (2021), "Rank-normalization, folding, and
localization: an improved R-hat for assessing convergence of MCMC", Bayesian Analysis 16(2): R-hat <= 1.01
and bulk and tail ESS >= 400 (100 per chain for 4 chains); BFMI >= 0.3 follows Betancourt (2016),
"Diagnosing suboptimal cotangent disintegrations in Hamiltonian Monte Carlo"; zero divergences and no
tree-depth hits are common practice.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import arviz as az
import numpy as np

THRESHOLDS = {
    "r_hat_max": 1.01,
    "ess_bulk_min": 400,
    "ess_tail_min": 400,
    "divergences_max": 0,
    "tree_depth_hits_max": 0,
    "bfmi_min": 0.3,
}
#: Beyond these the posterior is not merely doubtful but wrong to use (common practice).
FAIL_LIMITS = {"r_hat_max": 1.05, "ess_min": 100, "divergent_share_max": 0.01}


@dataclass(frozen=True)
class Diagnostics:
    """Convergence summary of a run; ``verdict`` is ``pass``, ``warn`` or ``fail``."""

    verdict: str
    r_hat_max: float
    ess_bulk_min: float
    ess_tail_min: float
    divergences: int
    tree_depth_hits: int
    bfmi_min: float
    draws: int
    chains: int
    solver_failures: int = 0
    advice: list[str] = field(default_factory=list)
    thresholds: dict = field(default_factory=lambda: dict(THRESHOLDS))

    def to_dict(self) -> dict:
        return asdict(self)


def assess(
    idata: az.InferenceData, var_names: list[str], max_tree_depth: int = 10, solver_failures: int = 0
) -> Diagnostics:
    """Compute R-hat, ESS, divergences, tree-depth hits and BFMI over ``var_names`` and give a verdict.

    ``solver_failures`` (integrations that failed during sampling, each a rejected proposal) is reported and,
    when it is more than 1 % of the draws, advised on."""
    posterior = idata.posterior[var_names]
    r_hat = float(np.nanmax(az.rhat(posterior).to_array().values))
    ess_bulk = float(np.nanmin(az.ess(posterior, method="bulk").to_array().values))
    ess_tail = float(np.nanmin(az.ess(posterior, method="tail").to_array().values))
    stats = idata.sample_stats
    divergences = int(stats["diverging"].values.sum())
    depth = stats["tree_depth"].values if "tree_depth" in stats else np.zeros(1)
    tree_depth_hits = int((depth >= max_tree_depth).sum())
    bfmi = float(np.min(az.bfmi(idata))) if stats.sizes.get("draw", 0) > 1 else float("nan")
    chains, draws = posterior.sizes["chain"], posterior.sizes["draw"]

    advice: list[str] = []
    if not r_hat <= THRESHOLDS["r_hat_max"]:
        advice.append(
            f"R-hat is {r_hat:.3f} (> {THRESHOLDS['r_hat_max']}): chains disagree; run more tuning "
            "and draws, or check the priors for several separated modes."
        )
    if not min(ess_bulk, ess_tail) >= THRESHOLDS["ess_bulk_min"]:
        advice.append(f"effective sample size is {min(ess_bulk, ess_tail):.0f} (< 400): increase --draws.")
    if divergences > 0:
        advice.append(
            f"{divergences} divergent transitions: raise sampling.target_accept (e.g. 0.95 or 0.99) "
            "or tighten priors that allow implausible values."
        )
    if tree_depth_hits > 0:
        advice.append(
            f"{tree_depth_hits} draws hit the maximum tree depth: the posterior is badly scaled or "
            "strongly correlated; check the reference temperature and the priors."
        )
    if not bfmi >= THRESHOLDS["bfmi_min"]:
        advice.append(
            f"BFMI is {bfmi:.2f} (< 0.3): the sampler explores the energy poorly; "
            "consider tighter priors on the noise scale."
        )

    if solver_failures > 0.01 * chains * draws:
        advice.append(
            f"{solver_failures} integrations failed during sampling (those proposals were rejected): "
            "the priors reach parameter values where the profiles cannot be computed; tighten them."
        )
    failing = (
        not r_hat <= FAIL_LIMITS["r_hat_max"]
        or not min(ess_bulk, ess_tail) >= FAIL_LIMITS["ess_min"]
        or divergences > FAIL_LIMITS["divergent_share_max"] * chains * draws
    )
    verdict = "fail" if failing else ("warn" if advice else "pass")
    return Diagnostics(
        verdict, r_hat, ess_bulk, ess_tail, divergences, tree_depth_hits, bfmi, draws, chains, solver_failures, advice
    )
