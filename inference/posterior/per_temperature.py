"""Rate constants fitted freely at each temperature of a network study, to set beside the Arrhenius line.

Runs are grouped by temperature (isothermal runs within ``LEVEL_TOLERANCE_K`` of each other; runs with a
temperature history and steady states are left out). At each level ln k of every step is fitted by maximum
likelihood to that level's runs alone, everything else held at its posterior median: the noise scales, response
factors and weights, uncertain initial concentrations, fitted orders, equilibrium and adsorption constants (at the
level's temperature) and the run-to-run shifts of ln k (so a point is the typical ln k at that temperature, as the
posterior line is). Values known only to lie beyond a detection limit are left out of these fits.

The sd of a point is the Laplace approximation: the inverse of the Fisher information J^T W J at the optimum, with
J the derivatives of the model-scale predictions in ln k from the solver's forward sensitivities (exact, no finite
differences) and W the noise model's Fisher weights (``design.fisher_weight``). A step the level's data do not
determine (no sensitivity, sd above ``MAX_SD``, or the optimum at the edge of the search box) has no point there.

Whether the points bend away from a straight line: per step with at least three points, weighted least squares of
ln k on x = 1/T with the points' sds as known errors. A quadratic term in x, over its standard error, is standard
normal when ln k is straight in 1/T (the z test of an added term in weighted linear regression with known errors);
the chi-square of the points about the straight line, with n - 2 degrees of freedom, says whether they lie on it
within their error at all, and the one about the quadratic (n - 3) whether a bend accounts for what the line misses
(the chi-square goodness-of-fit test). Both are common practice (e.g. Draper and Smith, Applied Regression Analysis;
Bevington and Robinson, Data Reduction and Error Analysis for the Physical Sciences; from memory). A step is reported
as bent when the quadratic term is significant and the quadratic fits; as lying off the line beyond its error when
the line misfits and a bend does not account for it. Temperatures in K, ln k in the unit each step's k is stated in.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr
from scipy import optimize, stats

from ..inputs.data import Observations
from ..inputs.measured import measured_values
from ..inputs.study import Study
from ..physics.arrhenius import ln_rate_constant
from ..physics.conditions import build_conditions
from ..physics.parameters import ParameterDraws
from ..physics.solution import NetworkSolver, SolverFailure
from .design import TINY, fisher_weight
from .draws import parameter_draws

#: Runs whose nominal temperatures differ by less than this (K) form one level.
LEVEL_TOLERANCE_K = 0.05
#: A point whose Laplace sd of ln k exceeds this is dropped (a factor e at one sd: it says nothing beside the band).
MAX_SD = 1.0
#: The search box: ln k within this of the posterior-median line at the level's temperature.
SEARCH_HALF_WIDTH = 6.0
#: Significance level of the curvature test (per step).
CURVATURE_ALPHA = 0.05
#: The table of the points in a results folder, and its columns.
POINTS_FILE = "arrhenius_points.csv"
COLUMNS = ("step", "temperature_K", "ln_k", "sd", "n_runs", "k_unit")


@dataclass(frozen=True)
class Curvature:
    """How one step's points lie in 1/T (weighted least squares, their sds as known errors): ``z`` and two-sided
    ``p`` of a quadratic term; ``chi2_line`` of the points about the straight line (``points`` - 2 degrees of
    freedom) and its ``p_line``; ``p_quadratic`` of the chi-square about the quadratic (``points`` - 3 degrees of
    freedom; None with three points, which a quadratic fits exactly)."""

    step: str
    z: float
    p: float
    chi2_line: float
    p_line: float
    p_quadratic: float | None
    points: int

    @property
    def verdict(self) -> str:
        """``bent`` (the quadratic term is significant and accounts for the misfit of the line), ``scattered``
        (the points lie off the line beyond their error and a bend does not account for it) or ``straight``."""
        if self.p < CURVATURE_ALPHA and (self.p_quadratic is None or self.p_quadratic >= CURVATURE_ALPHA):
            return "bent"
        if self.p_line < CURVATURE_ALPHA or self.p < CURVATURE_ALPHA:
            return "scattered"
        return "straight"


@dataclass(frozen=True)
class TemperaturePoints:
    """Per-temperature ln k of every step (``table``: the columns of ``COLUMNS``), why points are missing
    (``dropped``, one sentence each; ``missing``: (step, K) of each), the curvature test of each step with three or
    more points, the steps with fewer (``untested``) and the runs left out (``left_out``: a sentence, or empty)."""

    table: pd.DataFrame
    dropped: tuple[str, ...]
    curvature: tuple[Curvature, ...]
    untested: tuple[str, ...]
    missing: tuple[tuple[str, float], ...] = ()
    left_out: str = ""

    def sentences(self) -> list[str]:
        """Plain sentences for the report: whether the points bend away from the line, then the footnotes."""
        if self.table.empty:
            return list(self.dropped) + ([self.left_out] if self.left_out else [])
        lines = []
        for c in self.curvature:
            if c.verdict == "bent":
                lines.append(
                    f"The per-temperature rate constants of step '{c.step}' bend away from a straight Arrhenius line "
                    f"beyond their error (quadratic term in 1/T: z = {c.z:.2f}, p {_p_text(c.p)}, {c.points} "
                    "temperatures): a change of mechanism or rate-limiting step with temperature, or a missing "
                    "temperature dependence, is possible."
                )
            elif c.verdict == "scattered":
                lines.append(
                    f"The per-temperature rate constants of step '{c.step}' lie off a straight Arrhenius line beyond "
                    f"their error and a bend does not account for it (chi-square about the weighted line "
                    f"{c.chi2_line:.3g} on {c.points - 2} degrees of freedom, p {_p_text(c.p_line)}): look for misfit "
                    "in the run figures; the noise scale and other quantities held at their posterior medians may "
                    "not suit every temperature."
                )
        straight = [c for c in self.curvature if c.verdict == "straight"]
        if straight:
            names = ", ".join(f"'{c.step}'" for c in straight)
            lines.append(
                f"The per-temperature rate constants of {names} lie on a straight Arrhenius line within their error "
                f"(quadratic term in 1/T: smallest p = {min(c.p for c in straight):.2g}; chi-square about the "
                f"weighted line: smallest p = {min(c.p_line for c in straight):.2g})."
            )
        if self.untested:
            lines.append(
                "Fewer than three temperatures with a point for "
                + ", ".join(f"'{s}'" for s in self.untested)
                + ": no curvature test."
            )
        lines.append(
            "How the points were made: ln k of each step fitted by maximum likelihood to each temperature's runs "
            "alone, everything else at its posterior median; bars from the inverse Fisher information (Laplace). "
            "Tests: weighted least squares of the points on 1/T with their sds as known errors, the z test of an "
            "added quadratic term and the chi-square of the points about the straight line (common practice), "
            f"reported at p < {CURVATURE_ALPHA:g}."
        )
        return lines + list(self.dropped) + ([self.left_out] if self.left_out else [])


def _p_text(p: float) -> str:
    """'= 0.012', or '< 1e-12' where a p-value is below what its computation resolves."""
    return "< 1e-12" if p < 1e-12 else f"= {p:.2g}"


def temperature_levels(obs: Observations) -> tuple[list[tuple[float, np.ndarray]], int]:
    """The isothermal batch runs grouped by nominal temperature: [(mean K, run indices)], and how many runs were
    left out (temperature histories, steady states)."""
    if obs.steady:
        return [], len(obs.run_ids)
    plain = [not obs.setups or not (obs.setups[r].ramped or obs.setups[r].overflow) for r in range(len(obs.run_ids))]
    runs = [r for r, keep in enumerate(plain) if keep]
    runs.sort(key=lambda r: obs.temperature_K[r])
    levels: list[list[int]] = []
    for r in runs:
        if levels and obs.temperature_K[r] - obs.temperature_K[levels[-1][0]] < LEVEL_TOLERANCE_K:
            levels[-1].append(r)
        else:
            levels.append([r])
    grouped = [(float(np.mean(obs.temperature_K[g])), np.array(g, dtype=int)) for g in levels]
    return grouped, len(obs.run_ids) - len(runs)


def _median_draw(study: Study, posterior: xr.Dataset, temperature_ref: float, obs: Observations):
    """Every posterior variable at its median, as a posterior of one draw, and its ``ParameterDraws``."""
    centre = posterior.median(dim=("chain", "draw")).expand_dims(chain=[0], draw=[0])
    return centre, parameter_draws(study, centre, temperature_ref, np.array([0]), obs.initial)


def _sigma(centre: xr.Dataset, obs: Observations) -> np.ndarray:
    """Each measurement's noise scale (M,) at the posterior median (shared, or per observed species or quantity,
    in the order of the posterior's coordinate: sorted indices, as the model builds it)."""
    sigma = np.asarray(centre["sigma"].values, dtype=float).reshape(-1)
    if sigma.size == 1:
        return np.full(obs.value.size, float(sigma[0]))
    measured = obs.species_index if obs.quantity_index is None else obs.quantity_index
    return sigma[np.searchsorted(np.unique(measured), measured)]


def _tables(centre: xr.Dataset, obs: Observations) -> tuple[np.ndarray, np.ndarray]:
    """The design's weight and scale tables, fitted factors at their posterior medians."""
    design = obs.design
    weights = [design.fixed_weights]
    scales = [design.fixed_scales]
    if design.fitted_weights:
        weights.append(np.asarray(centre["weight"].values, dtype=float).reshape(-1))
    if design.fitted_scales:
        scales.append(np.asarray(centre["response"].values, dtype=float).reshape(-1))
    return np.concatenate(weights), np.concatenate(scales)


@dataclass(frozen=True)
class _Level:
    """One temperature level's least-squares problem: predictions on the noise model's scale and their
    derivatives in the free ln k."""

    obs: Observations
    draws: ParameterDraws
    runs: np.ndarray
    rows: np.ndarray  # measurements of these runs that enter the fit
    shift: np.ndarray  # (runs, R): the posterior-median run-to-run shifts of ln k
    tables: tuple[np.ndarray, np.ndarray] | None
    solver: NetworkSolver

    def predict(self, ln_k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(values (rows,), derivatives (rows, R)) on the data scale; ``SolverFailure`` passes through."""
        obs, runs = self.obs, self.runs
        initial = obs.initial[runs] if self.draws.initial is None else self.draws.initial[0][runs]
        inputs = self.draws.inputs(0, obs.temperature_K[runs], initial, ln_k=ln_k[None, :] + self.shift)
        solution = self.solver.solve(inputs)
        n_reactions = ln_k.size
        where = {int(r): i for i, r in enumerate(runs)}
        if self.tables is None:
            position = np.array([where[int(r)] for r in obs.run_index[self.rows]])
            t, s = obs.time_index[self.rows], obs.species_index[self.rows]
            value = np.array([solution.concentrations[p][i, j] for p, i, j in zip(position, t, s, strict=True)])
            slope = np.array(
                [solution.sensitivities[p][i, j, :n_reactions] for p, i, j in zip(position, t, s, strict=True)]
            ).reshape(-1, n_reactions)
            factor = np.ones(self.rows.size) if obs.factor is None else obs.factor[self.rows]
            return value * factor, slope * factor[:, None]
        # Declared quantities: concentrations at the design's basis points, through the design's formula; its
        # derivatives by complex steps (the formula is rational, so they are exact to rounding).
        design = obs.design
        basis = np.ones(design.basis_run.size)
        basis_slope = np.zeros((design.basis_run.size, n_reactions))
        for b in np.flatnonzero(np.isin(design.basis_run, runs)):
            p, i, j = where[int(design.basis_run[b])], design.basis_time[b], design.basis_species[b]
            basis[b] = solution.concentrations[p][i, j]
            basis_slope[b] = solution.sensitivities[p][i, j, :n_reactions]
        weights, scales = self.tables
        step = 1e-30
        with np.errstate(all="ignore"):  # rows of other runs see the placeholder concentrations
            value = measured_values(design, basis, weights, scales)[self.rows]
            slope = np.column_stack(
                [
                    measured_values(design, basis + 1j * step * basis_slope[:, p], weights, scales)[self.rows].imag
                    / step
                    for p in range(n_reactions)
                ]
            )
        return value, slope


def _model_scale(value: np.ndarray, slope: np.ndarray, log: bool) -> tuple[np.ndarray, np.ndarray]:
    if not log:
        return value, slope
    floored = np.maximum(value, TINY)
    return np.log(floored), slope / floored[:, None]


def _student_loss(nu: float):
    """``least_squares`` loss whose half-sum is the Student-t negative log density of standardised residuals:
    rho(z) = (nu + 1) ln(1 + z / nu), z the squared residual; returns rho and its first two derivatives."""

    def loss(z: np.ndarray) -> np.ndarray:
        return np.vstack([(nu + 1) * np.log1p(z / nu), (nu + 1) / (nu + z), -(nu + 1) / (nu + z) ** 2])

    return loss


def _fit_level(level: _Level, start: np.ndarray, observed: np.ndarray, sigma: np.ndarray, study: Study):
    """Maximum-likelihood ln k (R,) at one level from ``start``, the Fisher information there, and which steps
    carry information; raises ``SolverFailure`` when the start itself cannot be integrated."""
    noise = study.noise
    log = noise.model != "absolute"
    slope = _model_scale(*level.predict(start), log)[1]
    informed = np.flatnonzero(np.any(slope != 0.0, axis=0))
    cache: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}

    def evaluate(free: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        key = free.tobytes()
        if key not in cache:
            ln_k = start.copy()
            ln_k[informed] = free
            try:
                v, s = _model_scale(*level.predict(ln_k), log)
                cache[key] = ((observed - v) / sigma, -s[:, informed] / sigma[:, None])
            except SolverFailure:  # a huge residual steers the trust region back
                cache[key] = (np.full(observed.size, 1e6), np.zeros((observed.size, informed.size)))
        return cache[key]

    ln_k = start.copy()
    if informed.size:
        found = optimize.least_squares(
            lambda x: evaluate(x)[0],
            start[informed],
            jac=lambda x: evaluate(x)[1],
            bounds=(start[informed] - SEARCH_HALF_WIDTH, start[informed] + SEARCH_HALF_WIDTH),
            loss=_student_loss(noise.nu) if noise.model == "robust" else "linear",
            method="trf",
            x_scale=1.0,
            xtol=1e-12,
            ftol=1e-12,
            gtol=1e-12,
        )
        ln_k[informed] = found.x
    slope = _model_scale(*level.predict(ln_k), log)[1]
    weight = fisher_weight(sigma, noise)
    fisher = slope.T @ (weight[:, None] * slope)
    return ln_k, fisher, informed


def _laplace_sd(fisher: np.ndarray, informed: np.ndarray) -> np.ndarray:
    """sd of each step's ln k from the inverse Fisher information of the informed steps (inf where singular)."""
    sd = np.full(fisher.shape[0], np.inf)
    if informed.size == 0:
        return sd
    block = fisher[np.ix_(informed, informed)]
    try:
        covariance = np.linalg.inv(block)
    except np.linalg.LinAlgError:
        return sd
    with np.errstate(invalid="ignore"):
        sd[informed] = np.where(np.diag(covariance) > 0, np.sqrt(np.diag(covariance)), np.inf)
    return sd


def per_temperature_fits(
    study: Study, obs: Observations, posterior: xr.Dataset, temperature_ref: float
) -> TemperaturePoints | None:
    """ln k of every step fitted freely at each temperature level (see the module's docstring); without isothermal
    batch runs an empty table and a sentence saying why."""
    levels, left_out = temperature_levels(obs)
    if not levels:
        why = "steady states" if obs.steady else "runs with a temperature history"
        note = f"No rate constants fitted at single temperatures: the data are {why} only."
        return TemperaturePoints(pd.DataFrame(columns=list(COLUMNS)), (), (), (), (), note)
    centre, draws = _median_draw(study, posterior, temperature_ref, obs)
    sigma_all = _sigma(centre, obs)
    tables = _tables(centre, obs) if obs.design is not None else None
    log = study.noise.model != "absolute"
    exact = obs.censored == ""
    valid = exact & (obs.value > 0 if log else np.isfinite(obs.value))
    names = study.reaction_names
    rated = [spec.name for spec in study.reactions if not spec.held]
    records, dropped, missing = [], [], []
    for kelvin, runs in levels:
        rows = np.flatnonzero(np.isin(obs.run_index, runs) & valid)
        shift = np.zeros((runs.size, len(names)))
        if draws.run_effect is not None:
            shift = draws.run_effect[0][obs.group_index[runs]]
        setups = [obs.setups[r] for r in runs] if obs.setups else None
        solver = NetworkSolver(
            study.network,
            [obs.times[r] for r in runs],
            conditions=build_conditions(setups, len(study.species)) if setups else None,
        )
        level = _Level(obs, draws, runs, rows, shift, tables, solver)
        # Start on the posterior-median line at this temperature (each step's own median curve).
        curve = ln_rate_constant(
            kelvin,
            np.asarray(posterior["ln_k_ref"].values, dtype=float),
            np.asarray(posterior["Ea"].values, dtype=float),
            temperature_ref,
            _exponent(posterior),
        )
        start = np.median(curve.reshape(-1, len(names)), axis=0)
        at = f"{kelvin:.2f} K"
        if rows.size == 0:
            dropped.append(f"No point at {at}: its runs have no exact measured values.")
            missing += [(name, kelvin) for name in rated]
            continue
        observed = obs.value[rows] if not log else np.log(obs.value[rows])
        try:
            ln_k, fisher, informed = _fit_level(level, start, observed, sigma_all[rows], study)
        except SolverFailure:
            dropped.append(f"No point at {at}: its runs cannot be integrated at the posterior median.")
            missing += [(name, kelvin) for name in rated]
            continue
        sd = _laplace_sd(fisher, informed)
        for j, name in enumerate(names):
            if study.reactions[j].held:  # held at equilibrium: no rate constant
                continue
            at_edge = abs(ln_k[j] - start[j]) > SEARCH_HALF_WIDTH - 1e-6
            if not np.isfinite(sd[j]) or sd[j] > MAX_SD or at_edge:
                why = "no information" if not np.isfinite(sd[j]) else f"sd of ln k {sd[j]:.2g}"
                if at_edge and np.isfinite(sd[j]):
                    why = "the fit ran to the edge of its search range"
                dropped.append(f"No point for step '{name}' at {at}: its runs there do not determine it ({why}).")
                missing.append((name, kelvin))
                continue
            records.append((name, kelvin, float(ln_k[j]), float(sd[j]), int(runs.size), study.reactions[j].k_unit))
    table = pd.DataFrame.from_records(records, columns=list(COLUMNS))
    curvature, untested = [], []
    for name in rated:
        rows = table[table["step"] == name]
        if len(rows) < 3:
            untested.append(name)
            continue
        kelvin, ln_k, sd = (rows[c].to_numpy(dtype=float) for c in ("temperature_K", "ln_k", "sd"))
        z, p = quadratic_term(kelvin, ln_k, sd)
        chi2_line, p_line = chi_square(kelvin, ln_k, sd, 1)
        p_quadratic = chi_square(kelvin, ln_k, sd, 2)[1] if len(rows) > 3 else None
        curvature.append(Curvature(name, z, p, chi2_line, p_line, p_quadratic, len(rows)))
    notes = []
    if left_out:
        notes.append(
            f"{left_out} run{'s' if left_out > 1 else ''} with a temperature history or at steady state "
            "left out of the per-temperature points."
        )
    beyond = int(np.sum(~exact & np.isin(obs.run_index, np.concatenate([runs for _, runs in levels]))))
    if beyond:
        notes.append(
            f"{beyond} value{'s' if beyond > 1 else ''} beyond a detection limit left out of the per-temperature fits."
        )
    note = " ".join(notes)
    return TemperaturePoints(table, tuple(dropped), tuple(curvature), tuple(untested), tuple(missing), note)


def _exponent(posterior: xr.Dataset) -> np.ndarray | float:
    if "temperature_exponent" in posterior:
        return np.asarray(posterior["temperature_exponent"].values, dtype=float)
    return 0.0


def _weighted_fit(kelvin: np.ndarray, ln_k: np.ndarray, sd: np.ndarray, degree: int):
    """Weighted least squares of ln k on a polynomial of ``degree`` in x = 1/T with known errors ``sd``:
    (coefficients, their covariance (X^T W X)^-1, chi-square of the residuals)."""
    x = 1000.0 / np.asarray(kelvin, dtype=float)  # 10^-3 K^-1, centred: keeps X^T W X well conditioned
    x = x - x.mean()
    design = np.column_stack([x**power for power in range(degree + 1)])
    weight = 1.0 / np.asarray(sd, dtype=float) ** 2
    covariance = np.linalg.inv(design.T @ (weight[:, None] * design))
    beta = covariance @ design.T @ (weight * np.asarray(ln_k, dtype=float))
    residual = np.asarray(ln_k, dtype=float) - design @ beta
    return beta, covariance, float(np.sum(weight * residual**2))


def quadratic_term(kelvin: np.ndarray, ln_k: np.ndarray, sd: np.ndarray) -> tuple[float, float]:
    """(z, two-sided p) of the quadratic coefficient of ln k in 1/T: normal with variance (X^T W X)^-1 when the
    errors are as stated and ln k is at most quadratic in 1/T."""
    beta, covariance, _ = _weighted_fit(kelvin, ln_k, sd, 2)
    z = float(beta[2] / math.sqrt(covariance[2, 2]))
    return z, float(2 * stats.norm.sf(abs(z)))


def chi_square(kelvin: np.ndarray, ln_k: np.ndarray, sd: np.ndarray, degree: int) -> tuple[float, float]:
    """(chi-square, p) of the points about their weighted polynomial of ``degree`` in 1/T, with n - degree - 1
    degrees of freedom."""
    chi2 = _weighted_fit(kelvin, ln_k, sd, degree)[2]
    return chi2, float(stats.chi2.sf(chi2, len(ln_k) - degree - 1))
