"""The verdict: can this posterior be trusted, and does the model describe the data?

Sampler thresholds follow Vehtari, Gelman, Simpson, Carpenter and Bürkner (2021), "Rank-normalization, folding,
and localization: an improved R-hat for assessing convergence of MCMC", Bayesian Analysis 16(2): R-hat <= 1.01
and bulk and tail ESS >= 400 (100 per chain for 4 chains); BFMI >= 0.3 follows Betancourt (2016),
"Diagnosing suboptimal cotangent disintegrations in Hamiltonian Monte Carlo"; zero divergences and no
tree-depth hits are common practice.

Misfit (``misfit_findings``) is judged from the per-measurement predictive checks and the posterior: 90 %
predictive coverage against the exact binomial tail, a Spearman trend of the standardised residuals in
temperature or time, the classical lack-of-fit F test where rate constants are replicated, and posteriors
piled against a prior's bound. The p-value thresholds are our choice, strict so that a model that fits is
seldom flagged.
"""

from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass, field
from typing import Protocol

import arviz as az
import numpy as np
import pandas as pd
from scipy import stats

from ..inputs import units
from ..inputs.study import Study
from ..physics.parameters import BLOCK_VARIABLES

#: Posterior variables the convergence verdict looks at, in this order (those present in a model): the
#: variables of the kinetic parameter blocks, then run-to-run spreads, latent run temperatures, fitted response
#: factors and weights of measured quantities, and the noise.
KINETIC_VARIABLES = (*BLOCK_VARIABLES, "ln_k_spread", "temperature", "response", "weight", "sigma")


class Problem(Protocol):
    """What the misfit checks need of a kind of study: its study, the per-measurement predictive checks and a
    label (file and line) for each measurement."""

    study: Study

    def fit_checks(self, idata: az.InferenceData) -> pd.DataFrame: ...

    def measurement_label(self, index: int) -> str: ...


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
#: Misfit tests; every number is our choice, strict so that a model that fits is seldom flagged.
MISFIT_THRESHOLDS = {
    # P(X <= measurements inside | n, 0.9), the exact binomial tail (scipy.stats.binom): few points cannot trigger it
    "coverage_tail_p": 1e-3,
    # Spearman's rank correlation of residuals with temperature or time, shared out over the tests (Bonferroni)
    "trend_p": 1e-3,
    "trend_min_points": 10,
    # the classical lack-of-fit F test (replicate means against the curve, pure error within replicates)
    "lack_of_fit_p": 1e-3,
    # a posterior is piled against a bound when its 5 % quantile lies within this share of its median's
    # distance from the bound, and its median lies beyond the prior's 10 % quantile towards that bound
    "bound_tail_share": 0.2,
    "bound_prior_quantile": 0.1,
}
#: How many of the worst-predicted measurements a misfit names.
WORST_POINTS = 3
#: A central 90 % normal interval spans this many sd on either side of its centre.
Z90 = float(stats.norm.ppf(0.95))
#: Columns of the fit checks that are not labels of a measurement's conditions.
FIT_CHECK_VALUES = ("measurement", "line", "observed", "median", "q05", "q95", "inside_90")
LIKELY_CAUSES = (
    "a value in the wrong unit (temperature, energy or concentration), a mistyped row, a rate law or mechanism "
    "that does not describe the chemistry, or a noise model (or stated errors) too tight for the scatter"
)


@dataclass(frozen=True)
class Diagnostics:
    """Convergence summary of a run and signs of misfit; ``verdict`` is ``pass``, ``warn`` or ``fail`` (at least
    ``warn`` when ``misfit`` lists anything)."""

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
    misfit: list[dict] = field(default_factory=list)
    #: The verdict on the sampler alone, before misfit is counted (for comparisons, whose losing candidates may
    #: misfit by design).
    sampler_verdict: str = ""

    def to_dict(self) -> dict:
        return asdict(self)


def assess(
    idata: az.InferenceData,
    var_names: list[str],
    max_tree_depth: int = 10,
    solver_failures: int = 0,
    problem: Problem | None = None,
    fit_checks: pd.DataFrame | None = None,
) -> Diagnostics:
    """Compute R-hat, ESS, divergences, tree-depth hits and BFMI over ``var_names`` and give a verdict.

    ``solver_failures`` (integrations that failed during sampling, each a rejected proposal) is reported and,
    when it is more than 1 % of the draws, advised on. With the ``problem`` the posterior came from, the fit
    is also judged against its data (``misfit_findings``, on ``fit_checks`` when the caller has them already);
    any misfit makes the verdict at least ``warn``, and a step held at equilibrium has its placeholder k_ref and
    Ea left out of R-hat and ESS."""
    held = tuple(spec.name for spec in problem.study.reactions if spec.held) if problem is not None else ()
    posterior = idata.posterior[var_names]
    if held and "reaction" in posterior.dims:  # a held step's k_ref and Ea are inert placeholders, not results
        posterior = posterior.drop_sel(reaction=list(held))
    chains, draws = posterior.sizes["chain"], posterior.sizes["draw"]
    # R-hat compares chains: with one there is nothing to compare (NaN, and no call that would warn about it)
    r_hat = float(np.nanmax(az.rhat(posterior).to_array().values)) if chains > 1 else float("nan")
    ess_bulk = float(np.nanmin(az.ess(posterior, method="bulk").to_array().values))
    ess_tail = float(np.nanmin(az.ess(posterior, method="tail").to_array().values))
    stats = idata.sample_stats
    divergences = int(stats["diverging"].values.sum())
    depth = stats["tree_depth"].values if "tree_depth" in stats else np.zeros(1)
    tree_depth_hits = int((depth >= max_tree_depth).sum())
    bfmi = float(np.min(az.bfmi(idata))) if stats.sizes.get("draw", 0) > 1 else float("nan")

    advice: list[str] = []
    if chains < 2:
        advice.append(
            "R-hat needs two or more chains and this fit ran one, so whether the sampler converged cannot be "
            "checked: run with --chains 2 or more (sampling.chains)."
        )
    elif not r_hat <= THRESHOLDS["r_hat_max"]:
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

    advice += confounded_factors(idata.posterior)
    advice += unpinned_fast_steps(idata.posterior, held)
    if solver_failures > 0.01 * chains * draws:
        advice.append(
            f"{solver_failures} integrations failed during sampling (those proposals were rejected): "
            "the priors reach parameter values where the profiles cannot be computed; tighten them."
        )
    failing = (
        (chains > 1 and not r_hat <= FAIL_LIMITS["r_hat_max"])
        or not min(ess_bulk, ess_tail) >= FAIL_LIMITS["ess_min"]
        or divergences > FAIL_LIMITS["divergent_share_max"] * chains * draws
    )
    sampler_verdict = "fail" if failing else ("warn" if advice else "pass")
    misfit = misfit_findings(problem, idata, fit_checks) if problem is not None else []
    if misfit:
        advice += [finding["message"] for finding in misfit]
        worst = next((f["worst_points"] for f in misfit if f.get("worst_points")), [])
        advice.append(
            "the model does not describe the data; likely causes: "
            + LIKELY_CAUSES
            + (f". Worst-predicted measurements: {'; '.join(worst)}" if worst else "")
        )
    verdict = "fail" if failing else ("warn" if advice else "pass")
    return Diagnostics(
        verdict,
        r_hat,
        ess_bulk,
        ess_tail,
        divergences,
        tree_depth_hits,
        bfmi,
        draws,
        chains,
        solver_failures,
        advice,
        misfit=misfit,
        sampler_verdict=sampler_verdict,
    )


#: |posterior correlation| of a fitted factor's log with another parameter above which the two are called
#: confounded (our choice: the data then pin little more than their product).
CONFOUNDED_CORRELATION = 0.95


def _scalar_draws(posterior, names: tuple[str, ...], logged: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Each scalar element of the named variables as a flat vector of draws, named ``name[label, ...]``; the
    variables in ``logged`` on the log scale."""
    columns: dict[str, np.ndarray] = {}
    for name in names:
        if name not in posterior:
            continue
        values = posterior[name].stack(sample=("chain", "draw")).transpose(..., "sample")
        coords = [values.coords[d].values for d in values.dims[:-1]]
        for index in np.ndindex(*values.shape[:-1]):
            label = ", ".join(str(c[i]) for c, i in zip(coords, index, strict=True))
            row = values.values[index]
            columns[f"{name}[{label}]" if label else name] = np.log(row) if name in logged else row
    return columns


#: A reversible step's rate counts as unpinned when the posterior sd of its ln k_ref is at least this share of
#: the prior's while that of its ln K_ref is at most ``PINNED_SHARE`` of the prior's (our choice).
UNPINNED_SHARE, PINNED_SHARE = 0.7, 0.5


def unpinned_fast_steps(posterior, held: tuple[str, ...] = ()) -> list[str]:
    """Advice naming each reversible step whose equilibrium constant the data pin but whose rate they do not:
    the step equilibrates faster than the runs were sampled. The standardised variables (z_ln_k_ref,
    z_ln_K_ref; N(0, 1) priors) give the posterior-to-prior sd ratios directly. Steps already ``held`` at
    equilibrium have no rate and are not named."""
    if "z_ln_K_ref" not in posterior or "z_ln_k_ref" not in posterior:
        return []
    advice = []
    for step in posterior["z_ln_K_ref"].coords["reversible"].values:
        if step in held:
            continue
        rate = float(posterior["z_ln_k_ref"].sel(reaction=step).std())
        equilibrium = float(posterior["z_ln_K_ref"].sel(reversible=step).std())
        if rate >= UNPINNED_SHARE and equilibrium <= PINNED_SHARE:
            advice.append(
                f"the data pin the equilibrium constant of '{step}' (posterior sd of ln K_ref {equilibrium:.2f} of "
                f"its prior's) but not its rate (posterior sd of ln k_ref {rate:.2f} of its prior's): the step "
                "equilibrates faster than the runs were sampled, so its k_ref and Ea are the priors'. Report K, "
                "not k; declare the step 'fast_equilibrium: true' (held at equilibrium: K_ref and dH only, no "
                "stiff profiles), or narrow its k_ref prior to where the step is fast enough."
            )
    return advice


def confounded_factors(posterior) -> list[str]:
    """Advice naming each fitted response factor or weight whose log is almost perfectly correlated, over the
    posterior draws, with a kinetic parameter, an initial concentration or another factor."""
    factors = ("response", "weight")
    columns = _scalar_draws(posterior, (*BLOCK_VARIABLES, *factors), factors)
    names = [n for n in columns if np.std(columns[n]) > 0]
    advice = []
    for position, first in enumerate(names):
        if not first.startswith(tuple(f"{f}[" for f in factors)):
            continue
        for other in names:
            if other == first or (other.startswith(tuple(f"{f}[" for f in factors)) and names.index(other) < position):
                continue  # each pair of factors once
            r = float(np.corrcoef(columns[first], columns[other])[0, 1])
            if abs(r) > CONFOUNDED_CORRELATION:
                advice.append(
                    f"{first} and {other} are confounded (posterior correlation {r:.2f}): the data pin little "
                    "more than their combination; add a calibration standard (a known amount measured the same "
                    "way), measure that species on an absolute scale, or fix the factor."
                )
    return advice


def standardised_residuals(fit_checks: pd.DataFrame, log_scale: bool) -> np.ndarray:
    """(observed - predictive median) / predictive sd per measurement, the sd read off the 90 % predictive
    interval as if it were normal; on the log of the values when ``log_scale`` (proportional and robust
    noise). NaN where the interval has no width."""
    values = fit_checks[["observed", "median", "q05", "q95"]].to_numpy(dtype=float)
    with np.errstate(all="ignore"):
        if log_scale:
            values = np.log(values)
        observed, median, low, high = values.T
        z = (observed - median) / ((high - low) / (2.0 * Z90))
    return np.where(np.isfinite(z), z, np.nan)


def misfit_findings(problem: Problem, idata: az.InferenceData, fit_checks: pd.DataFrame | None = None) -> list[dict]:
    """Signs that the model does not describe the data, one dict per finding: ``check``, ``message`` (plain
    words), the ``statistic`` and ``p_value`` it rests on, the ``threshold`` used and, for findings about the
    data points, the ``worst_points`` (file and line of the worst-predicted measurements)."""
    fit_checks = problem.fit_checks(idata) if fit_checks is None else fit_checks
    z = standardised_residuals(fit_checks, log_scale=problem.study.noise.model != "absolute")
    # A censored value says only on which side of its limit it lies: no residual, no interval to be inside.
    exact = (fit_checks["censored"] == "").to_numpy() if "censored" in fit_checks.columns else np.ones(z.size, bool)
    z = np.where(exact, z, np.nan)
    findings = [
        *_coverage(fit_checks["inside_90"].to_numpy(dtype=bool)[exact]),
        *_trends(fit_checks, z),
        *_lack_of_fit(fit_checks[exact].reset_index(drop=True), z[exact], _location_parameters(idata.posterior)),
    ]
    if findings:
        worst = _worst_points(problem, idata, fit_checks, z)
        findings = [{**finding, "worst_points": worst} for finding in findings]
    return findings + _piled_against_bounds(problem, idata.posterior)


def _coverage(inside: np.ndarray) -> list[dict]:
    n, count = inside.size, int(inside.sum())
    threshold = MISFIT_THRESHOLDS["coverage_tail_p"]
    p = float(stats.binom.cdf(count, n, 0.9))
    if n == 0 or p >= threshold:
        return []
    return [
        {
            "check": "predictive_coverage_90",
            "message": f"only {count} of {n} measurements ({count / n:.0%}) lie inside their 90 % predictive "
            f"interval; a model that fits leaves so few inside with probability {p:.1g} (exact binomial tail)",
            "statistic": count / n,
            "p_value": p,
            "threshold": threshold,
        }
    ]


def _trends(fit_checks: pd.DataFrame, z: np.ndarray) -> list[dict]:
    """Spearman tests of the residuals against temperature and time, per reaction or per species."""
    by = next((c for c in ("reaction", "quantity", "species") if c in fit_checks.columns), None)
    groups = fit_checks.groupby(by, sort=False).indices if by else {"": np.arange(len(fit_checks))}
    tests = []
    for name, rows in groups.items():
        rows = rows[np.isfinite(z[rows])]
        for column in ("temperature", "time"):
            if column not in fit_checks.columns:
                continue
            x = fit_checks[column].to_numpy(dtype=float)[rows]
            if rows.size < MISFIT_THRESHOLDS["trend_min_points"] or np.unique(x).size < 3:
                continue
            rho, p = stats.spearmanr(x, z[rows])
            tests.append((name, column, float(rho), float(p), rows.size))
    threshold = MISFIT_THRESHOLDS["trend_p"] / max(len(tests), 1)
    findings = []
    for name, column, rho, p, n in tests:
        if p < threshold:
            which = f" of {by} '{name}'" if by else ""
            findings.append(
                {
                    "check": f"residual_trend_{column}",
                    "message": f"the residuals{which} {'rise' if rho > 0 else 'fall'} with {column} (Spearman "
                    f"rho = {rho:.2f} over {n} points, p = {p:.1g} < {threshold:.1g}): the model misses how the "
                    f"data change with {column}",
                    "statistic": rho,
                    "p_value": p,
                    "threshold": threshold,
                }
            )
    return findings


def _location_parameters(posterior) -> int:
    """Free parameters that move the predictions: the standardised ones (z_*, the non-centred run effects among
    them), fitted orders and the groups' own ln k_ref (centred run effects)."""
    names = [n for n in posterior.data_vars if str(n).startswith("z_") or n in ("order", "group_ln_k_ref")]
    return int(sum(posterior[n].isel(chain=0, draw=0).size for n in names))


def _lack_of_fit(fit_checks: pd.DataFrame, z: np.ndarray, parameters: int) -> list[dict]:
    """The lack-of-fit F test on the residuals, where measurements are replicated (same reaction and
    temperature): the replicate means' distance from the fitted curve against the scatter within replicates.
    Draper and Smith, Applied Regression Analysis, 3rd ed. 1998, sec. 2.1 (from memory)."""
    labels = [c for c in fit_checks.columns if c not in FIT_CHECK_VALUES]
    keep = np.isfinite(z)
    frame = fit_checks.loc[keep, labels].assign(z=z[keep])
    grouped = frame.groupby(labels, sort=False)["z"]
    df_lack, df_pure = grouped.ngroups - parameters, len(frame) - grouped.ngroups
    if df_lack < 1 or df_pure < 2:
        return []
    means = grouped.transform("mean").to_numpy()
    pure = float(np.sum((frame["z"].to_numpy() - means) ** 2))
    if pure <= 0:
        return []
    f = (float(np.sum(means**2)) / df_lack) / (pure / df_pure)
    p = float(stats.f.sf(f, df_lack, df_pure))
    threshold = MISFIT_THRESHOLDS["lack_of_fit_p"]
    if p >= threshold:
        return []
    return [
        {
            "check": "lack_of_fit",
            "message": f"the means of replicated measurements stray from the fitted curve far more than the "
            f"replicates scatter about them (lack-of-fit F = {f:.3g} on {df_lack} and {df_pure} degrees of "
            f"freedom, p = {p:.1g} < {threshold:g}): the curve misses some conditions",
            "statistic": f,
            "p_value": p,
            "threshold": threshold,
        }
    ]


def _worst_points(problem: Problem, idata: az.InferenceData, fit_checks: pd.DataFrame, z: np.ndarray) -> list[str]:
    """The measurements predicted worst when each is left out (lowest PSIS-LOO log predictive density), or
    with the largest residuals when there is no log-likelihood."""
    if "log_likelihood" in idata.groups():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # high Pareto k is expected at a badly fitted point
            order = np.argsort(az.loo(idata, pointwise=True).loo_i.values)
    else:
        order = np.argsort(-np.nan_to_num(np.abs(z), nan=0.0))
    observed, median, low, high = fit_checks[["observed", "median", "q05", "q95"]].to_numpy(dtype=float).T
    return [
        f"{problem.measurement_label(int(i))}: observed {observed[i]:.4g}, predicted {median[i]:.4g} "
        f"(90 % {low[i]:.4g} to {high[i]:.4g})"
        for i in order[:WORST_POINTS]
    ]


def _piled(draws: np.ndarray, bound: float, side: int, prior_quantile: float) -> bool:
    """Whether draws are piled against ``bound`` (side +1: a lower bound, -1: an upper one)."""
    distance = side * (np.asarray(draws, dtype=float).ravel() - bound)
    median, tail = float(np.median(distance)), float(np.quantile(distance, 0.05))
    return tail < MISFIT_THRESHOLDS["bound_tail_share"] * median and median < side * (prior_quantile - bound)


def _piled_against_bounds(problem: Problem, posterior) -> list[dict]:
    """Ea against 0 (its prior is truncated there) and fitted orders against the ends of their uniform priors."""
    study = problem.study
    share, q = MISFIT_THRESHOLDS["bound_tail_share"], MISFIT_THRESHOLDS["bound_prior_quantile"]
    threshold = {"bound_tail_share": share, "bound_prior_quantile": q}
    energy = study.units.energy
    findings = []
    for spec in study.reactions:
        if "Ea" in posterior and not spec.held:
            mean, sd = spec.prior.ea_mean, spec.prior.ea_sd
            draws = posterior["Ea"].sel(reaction=spec.name).values
            prior_q = float(stats.truncnorm(-mean / sd, np.inf, loc=mean, scale=sd).ppf(q))
            if _piled(draws, 0.0, 1, prior_q):
                median = float(units.joule_per_mol_to(np.median(draws), energy))
                low = float(units.joule_per_mol_to(np.quantile(draws, 0.05), energy))
                findings.append(
                    {
                        "check": "bound_Ea",
                        "message": f"the posterior of Ea of '{spec.name}' is piled against 0, where its prior is "
                        f"cut off (median {median:.3g} {energy}, 5 % quantile {low:.3g}): the data want k to fall, "
                        "or barely change, as the temperature rises, which no Ea > 0 gives",
                        "statistic": median,
                        "p_value": None,
                        "threshold": threshold,
                    }
                )
        if "order" not in posterior:
            continue
        for fitted in spec.fitted_orders:
            draws = posterior["order"].sel(fitted_order=f"{spec.name}:{fitted.species}").values
            width = fitted.upper - fitted.lower
            for bound, side, end in ((fitted.lower, 1, "lower"), (fitted.upper, -1, "upper")):
                if _piled(draws, bound, side, bound + side * q * width):
                    findings.append(
                        {
                            "check": "bound_order",
                            "message": f"the posterior of the order of '{spec.name}' in {fitted.species} is piled "
                            f"against {bound:g}, the {end} end of its prior (median {float(np.median(draws)):.3g}): "
                            f"the data want an order outside [{fitted.lower:g}, {fitted.upper:g}]",
                            "statistic": float(np.median(draws)),
                            "p_value": None,
                            "threshold": threshold,
                        }
                    )
    return findings
