"""Which experiment next: what a candidate experiment would do to the posterior, before it is made.

Method (preposterior analysis by importance reweighting). After the data y of a new experiment the posterior is
p(theta | D, y) ∝ p(theta | D) p(y | theta), so the current posterior draws theta_d, weighted by
w_d ∝ p(y | theta_d), represent it (self-normalised importance sampling with the current posterior as the proposal).
Data sets y_s are simulated from the candidate's likelihood at S posterior draws (so they follow the current
predictive distribution); for each, the target's weighted sd; their mean is the expected posterior sd of the target
after the experiment (Chaloner and Verdinelli, "Bayesian experimental design: a review", Statistical Science 10,
1995, from memory). The expected information gain about the parameters (nats) is the mean Kullback-Leibler
divergence of the reweighted draws from the current ones, mean_s sum_d w_sd log(D w_sd), the same quantity the
nested Monte Carlo estimator of Ryan (J. Comput. Graph. Stat. 12, 2003; from memory) estimates (``nested_gain``);
it cannot exceed log D. Kish's effective number of weights, 1 / sum_d w_sd^2, says how many draws carry each
reweighted posterior: few, and the estimate is unreliable (the new posterior is much narrower than the current one,
or lies in its tail); the linearised (Laplace) estimate further down then stands in.

Everything is plain arrays: ``(S, D)`` log-likelihood matrices (simulated data set s under draw d), targets
``(D,)`` in display units. Latent quantities of a new run (its temperature error, its share of run-to-run scatter,
its uncertain initial concentrations) are drawn once per posterior draw, which keeps the reweighting exact on the
augmented space at the cost of fewer effective weights.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace

import numpy as np
import xarray as xr
from scipy.special import gammaln, logsumexp

from ..errors import StudyError
from ..inputs import units
from ..inputs.candidates import CandidateRun, Target
from ..inputs.schema import Noise
from ..inputs.study import Study
from ..physics.arrhenius import R, ln_rate_constant
from ..physics.conditions import RunSetup, build_conditions
from ..physics.parameters import BLOCKS, ParameterDraws, SensitivityLayout
from ..physics.solution import NetworkSolver, SolverFailure

#: Predictions are floored here before their log is taken (as the model does: a zero has no log).
TINY = 1e-300
#: Below this many effective weights (median over simulated data sets) an estimate is flagged unreliable: the sd
#: of one reweighted posterior then has a relative Monte Carlo error above about 1/sqrt(2 x 50) = 10 % (the
#: normal-theory standard error of a sample sd; from memory).
MIN_EFFECTIVE = 50
#: Under log-scale noise and without a stated detection limit, a candidate's measurement counts only where its
#: typical prediction reaches this share of the largest initial concentration: below, no instrument sees it, and the
#: integrator's absolute tolerance (1e-9 of it) makes its log meaningless (spurious information that would collapse
#: the weights).
DETECTABLE = 1e-6
#: Elements of one block of the (S, D, M) residual array (memory bound of ``log_likelihood``).
_BLOCK = 2_000_000


@dataclass(frozen=True)
class Reweighting:
    """What simulated data sets of one candidate (or set of candidates) do to the target, averaged over sets.

    ``expected_sd`` and its Monte Carlo standard error ``se``; ``expected_width90``: the mean 90 % interval width;
    ``gain``: expected information gain (nats) and its standard error ``gain_se``; ``effective`` and
    ``effective_min``: the median and smallest effective number of weights over data sets; ``sets``: data sets used
    (those whose source draw solved)."""

    expected_sd: float
    se: float
    expected_width90: float
    gain: float
    gain_se: float
    effective: float
    effective_min: float
    sets: int


def stacked(posterior: xr.Dataset, picks: np.ndarray) -> xr.Dataset:
    """The picked draws of every variable along one ``sample`` axis (the order ``parameter_draws`` uses)."""
    return posterior.stack(sample=("chain", "draw")).isel(sample=picks)


def _column(draws: xr.Dataset, name: str, dimension: str, label: str) -> np.ndarray:
    return np.asarray(draws[name].sel({dimension: label}).values, dtype=float)


def target_values(target: Target, draws: xr.Dataset, study: Study, temperature_ref: float) -> np.ndarray:
    """The target in each picked draw (D,), in its display unit (``Target.unit``)."""
    value = _column(draws, target.variable, target.dimension, target.coordinate)
    if target.kind == "energy":
        return np.asarray(units.joule_per_mol_to(value, study.units.energy), dtype=float)
    if target.kind == "exp":
        return np.exp(value)
    if target.kind in ("k_at", "ln_k_at"):
        ln_k = ln_rate_constant(
            target.kelvin,
            value,
            _column(draws, "Ea", "reaction", target.coordinate),
            temperature_ref,
            _exponent(draws, study, target.coordinate),
        )
        return np.exp(ln_k) if target.kind == "k_at" else ln_k
    return value


def _exponent(draws: xr.Dataset, study: Study, reaction: str) -> np.ndarray | float:
    if "temperature_exponent" in draws:
        return _column(draws, "temperature_exponent", "reaction", reaction)
    return study.reactions[study.reaction_names.index(reaction)].temperature_exponent


def model_scale(values: np.ndarray, noise: Noise) -> np.ndarray:
    """Values on the scale the noise model acts on: their log for proportional and robust noise."""
    if noise.model == "absolute":
        return np.asarray(values, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.log(np.maximum(values, TINY))


def _log_density(observed: np.ndarray, predicted: np.ndarray, sigma: np.ndarray, noise: Noise) -> np.ndarray:
    """Log density of ``observed`` on the model scale (the log transform's Jacobian depends on the data only and
    cancels from every weight)."""
    z = (observed - predicted) / sigma
    if noise.model == "robust":
        nu = noise.nu
        return (
            gammaln((nu + 1) / 2)
            - gammaln(nu / 2)
            - 0.5 * math.log(nu * math.pi)
            - np.log(sigma)
            - (nu + 1) / 2 * np.log1p(z * z / nu)
        )
    return -0.5 * z * z - np.log(sigma) - 0.5 * math.log(2 * math.pi)


def log_likelihood(observed: np.ndarray, predicted: np.ndarray, sigma: np.ndarray, noise: Noise) -> np.ndarray:
    """(S, D): log p(data set s | draw d), ``observed`` (S, M), ``predicted`` and ``sigma`` (D, M), all on the model
    scale; -inf for draws whose prediction failed (NaN), NaN for data sets simulated from such a draw."""
    n_sets, n_draws, n_values = observed.shape[0], predicted.shape[0], observed.shape[1]
    out = np.empty((n_sets, n_draws))
    block = max(1, _BLOCK // max(1, n_draws * n_values))
    for start in range(0, n_sets, block):
        rows = slice(start, start + block)
        terms = _log_density(observed[rows, None, :], predicted[None], sigma[None], noise)
        out[rows] = terms.sum(axis=2)
    failed = ~np.all(np.isfinite(predicted), axis=1)
    out[:, failed] = -np.inf
    out[~np.all(np.isfinite(observed), axis=1)] = np.nan
    return out


def simulate(predicted: np.ndarray, sigma: np.ndarray, noise: Noise, rng: np.random.Generator) -> np.ndarray:
    """Data sets on the model scale: ``predicted`` (S, M) plus noise of the study's model with sd ``sigma``."""
    if noise.model == "robust":
        errors = rng.standard_t(noise.nu, size=predicted.shape)
    else:
        errors = rng.standard_normal(predicted.shape)
    return predicted + sigma * errors


def reweigh(loglik: np.ndarray, target: np.ndarray) -> Reweighting:
    """The expected posterior of ``target`` (D,) after the data sets of ``loglik`` (S, D).

    The standard error combines the spread over data sets with the error of the base draws, taken from the
    influence of each draw on the mean reweighted sd (delta method for self-normalised weights; draws treated as
    independent)."""
    rows = np.all(~np.isnan(loglik), axis=1) & np.any(np.isfinite(loglik), axis=1)
    loglik, g = loglik[rows], np.asarray(target, dtype=float)
    n_sets, n_draws = loglik.shape
    if n_sets == 0:
        nan = float("nan")
        return Reweighting(nan, nan, nan, nan, nan, 0.0, 0.0, 0)
    weights = np.exp(loglik - loglik.max(axis=1, keepdims=True))
    weights /= weights.sum(axis=1, keepdims=True)
    mean = weights @ g
    deviation = (g[None, :] - mean[:, None]) ** 2
    variance = np.sum(weights * deviation, axis=1)
    sd = np.sqrt(variance)
    with np.errstate(divide="ignore", invalid="ignore"):
        influence = n_draws * weights * (deviation - variance[:, None]) / (2 * sd[:, None])
        log_ratio = np.where(weights > 0, np.log(n_draws * weights), 0.0)  # log of new over current density
    kl = np.sum(weights * log_ratio, axis=1)
    # Influence of draw d on KL_s = E_w[log r] - log E[exp l]: D w_d (log r_d - KL_s - 1) + 1.
    gain_influence = (n_draws * weights * (log_ratio - kl[:, None] - 1) + 1).mean(axis=0)
    se = _standard_error(np.nan_to_num(influence).mean(axis=0), sd)
    gain_se = _standard_error(gain_influence, kl)
    effective = 1.0 / np.sum(weights**2, axis=1)
    order = np.argsort(g)
    cumulative = np.cumsum(weights[:, order], axis=1)
    low = g[order][np.minimum((cumulative < 0.05).sum(axis=1), n_draws - 1)]
    high = g[order][np.minimum((cumulative < 0.95).sum(axis=1), n_draws - 1)]
    return Reweighting(
        float(sd.mean()),
        se,
        float(np.mean(high - low)),
        float(kl.mean()),
        gain_se,
        float(np.median(effective)),
        float(effective.min()),
        int(n_sets),
    )


def _standard_error(influence: np.ndarray, per_set: np.ndarray) -> float:
    """Standard error of the mean over data sets of ``per_set``: the base draws' share from their mean influence
    (D,), plus the spread over data sets."""
    n_draws, n_sets = influence.size, per_set.size
    spread = per_set.var(ddof=1) / n_sets if n_sets > 1 else 0.0
    return math.sqrt(float(np.sum(influence**2)) / n_draws**2 + spread)


def current(target: np.ndarray) -> tuple[float, float]:
    """The target's sd and 90 % interval width now (the same estimators as ``reweigh`` with equal weights)."""
    g = np.sort(np.asarray(target, dtype=float))
    n = g.size
    cumulative = np.arange(1, n + 1) / n
    low = g[min(int((cumulative < 0.05).sum()), n - 1)]
    high = g[min(int((cumulative < 0.95).sum()), n - 1)]
    return float(np.std(g)), float(high - low)


def nested_gain(loglik: np.ndarray, sources: np.ndarray) -> float:
    """The nested Monte Carlo estimate of the expected information gain (nats): mean over data sets s of
    log p(y_s | theta_{source s}) - log mean_d p(y_s | theta_d), the draws themselves serving as the inner sample."""
    rows = np.all(~np.isnan(loglik), axis=1)
    inner = logsumexp(loglik[rows], axis=1) - math.log(loglik.shape[1])
    return float(np.mean(loglik[rows, sources[rows]] - inner))


def greedy(count: int, size: int, expected_sd: Callable[[list[int]], float]) -> list[int]:
    """The best set of ``count`` of ``size`` candidates chosen one at a time: each step adds the candidate that most
    lowers ``expected_sd`` of the set chosen so far (for reweighting, the sets' log-likelihoods add: their data sets
    share the source draws and their noise is independent; linearised, their Fisher informations add)."""
    chosen: list[int] = []
    for _ in range(count):
        rest = [i for i in range(size) if i not in chosen]
        scores = np.array([expected_sd([*chosen, i]) for i in rest])
        chosen.append(rest[int(np.argmin(np.where(np.isnan(scores), np.inf, scores)))])
    return chosen


def sigma_draws(
    draws: xr.Dataset, names: list[str], stated: np.ndarray | None, where: str, repeat: int = 1
) -> np.ndarray:
    """The noise model's sd (D, len(names) x repeat): ``stated`` (one per name), else the posterior's ``sigma``
    (shared, or the one of each measured name)."""
    n_draws = draws.sizes["sample"]
    if stated is not None:
        return np.tile(np.broadcast_to(stated, (n_draws, len(names))), (1, repeat))
    if "sigma" not in draws:
        raise StudyError(f"{where}.noise", "the fit states its data's errors, so a candidate must state 'noise'")
    sigma = draws["sigma"]
    per = [dim for dim in sigma.dims if dim != "sample"]
    if not per:
        columns = np.repeat(np.asarray(sigma.values, dtype=float)[:, None], len(names), axis=1)
    else:
        known = [str(label) for label in sigma.coords[per[0]].values]
        missing = [name for name in names if name not in known]
        if missing:
            raise StudyError(
                f"{where}.noise",
                f"the fit has no noise scale for {', '.join(missing)} (it measured {', '.join(known)})",
                "state 'noise' for this candidate",
            )
        columns = np.stack([np.asarray(sigma.sel({per[0]: name}).values, dtype=float) for name in names], axis=1)
    return np.tile(columns, (1, repeat))


def rate_constant_predictions(
    study: Study, draws: xr.Dataset, run: CandidateRun, temperature_ref: float, rng: np.random.Generator
) -> np.ndarray:
    """The candidate's rate constants (D, replicates) under each draw, in the study's rate-constant unit. With a
    stated temperature error the candidate's true temperature is drawn once per draw (replicates share it)."""
    reaction = study.reaction_names[run.reaction]
    n_draws = draws.sizes["sample"]
    kelvin = np.full(n_draws, run.kelvin)
    if study.temperature_sd_K is not None:
        kelvin = kelvin + study.temperature_sd_K * rng.standard_normal(n_draws)
    ln_k = ln_rate_constant(
        kelvin,
        _column(draws, "ln_k_ref", "reaction", reaction),
        _column(draws, "Ea", "reaction", reaction),
        temperature_ref,
        _exponent(draws, study, reaction),
    )
    return np.repeat(np.exp(ln_k)[:, None], run.replicates, axis=1)


def new_run_draws(
    study: Study, parameters: ParameterDraws, draws: xr.Dataset, run: CandidateRun, rng: np.random.Generator
) -> tuple[ParameterDraws, np.ndarray, np.ndarray]:
    """The latent quantities of a new run, one per draw: its shift of ln k (``run_variability``), the error of its
    temperature (K; a stated temperature error, which shifts a whole programme) and its initial concentrations
    (``initial_uncertainty``; a flow reactor's start-up state, as the fit has it). A candidate's runs share them.
    Returns the draws with that shift, the temperature offsets (D,) and the initial concentrations (D, N)."""
    n_draws = parameters.size
    if study.run_variability is not None:
        varying = list(study.run_variability.reactions)
        spread = np.moveaxis(np.asarray(draws["ln_k_spread"].values, dtype=float), -1, 0)  # (D, varying)
        shift = np.zeros((n_draws, len(study.reactions)))
        shift[:, varying] = spread * rng.standard_normal(spread.shape)
        parameters = replace(parameters, new_run_shift=shift)
    offset = np.zeros(n_draws)
    if study.temperature_sd_K is not None:
        offset = study.temperature_sd_K * rng.standard_normal(n_draws)
    initial = np.repeat(run.initial[None], n_draws, axis=0)
    for name, share in study.initial_uncertainty:
        i = study.species.index(name)
        initial[:, i] *= np.exp(share * rng.standard_normal(n_draws))
    return parameters, offset, initial


def _shifted(setup: RunSetup, offset: float) -> RunSetup:
    """``setup`` with its whole temperature history ``offset`` K away."""
    if offset == 0.0:
        return setup
    history = np.array(setup.history, dtype=float)
    history[:, 1] += offset
    nominal = None if setup.nominal_kelvin is None else setup.nominal_kelvin + offset
    return replace(setup, history=history, nominal_kelvin=nominal)


def run_concentrations(
    study: Study, parameters: ParameterDraws, setups: Sequence[RunSetup], initial: np.ndarray, times: np.ndarray
) -> np.ndarray:
    """Concentrations (D, times, N) of one run under each draw: draw d carried out as ``setups[d]`` from
    ``initial[d]``, its constants stated at the setup's nominal temperature (as the fit states a run's), each draw
    one run of the compiled solver; NaN for draws whose integration fails."""
    n_draws, n_species = initial.shape
    out = np.full((n_draws, times.size, n_species), np.nan)
    nominal = np.array([setup.nominal for setup in setups], dtype=float)

    def solve(rows: slice, inputs) -> list[np.ndarray]:
        chosen = list(setups[rows])
        conditions = build_conditions(chosen, n_species)
        solver = NetworkSolver(study.network, [times] * len(chosen), conditions=conditions)
        return solver.solve(inputs, sensitivities=False).concentrations

    if parameters.orders_vary:  # each draw its own orders: one solve per draw
        for d in range(n_draws):
            try:
                out[d] = solve(slice(d, d + 1), parameters.inputs(d, nominal[d : d + 1], initial[d : d + 1]))[0]
            except SolverFailure:
                continue
        return out
    inputs = parameters.as_runs(nominal, initial[0])._replace(initial=initial)
    start = 0
    while start < n_draws:  # a failed draw ends one solve: the draws before it are solved again, those after next
        try:
            solution = solve(slice(start, None), _rows(inputs, slice(start, None)))
        except SolverFailure as failure:
            if failure.run > 0:
                done = solve(slice(start, start + failure.run), _rows(inputs, slice(start, start + failure.run)))
                out[start : start + failure.run] = np.stack(done)
            start += failure.run + 1
            continue
        out[start:] = np.stack(solution)
        break
    return out


def _rows(inputs, rows: slice):
    """The runs ``rows`` of solver inputs with one row per run (the orders are shared)."""
    return inputs._replace(
        **{
            name: value[rows]
            for name, value in inputs._asdict().items()
            if name != "orders" and isinstance(value, np.ndarray)
        }
    )


def _measured_factor(study: Study, run: CandidateRun, setup: RunSetup, times: np.ndarray) -> np.ndarray:
    """What multiplies a concentration into a measured value at ``times``: the liquid volume where the study
    measures amounts of a batch run (as ``inputs.data`` has it), else 1."""
    if study.measured_as == "amount" and run.kind == "batch":
        return setup.volume_at(times)
    return np.ones(times.size)


def candidate_values(
    study: Study, parameters: ParameterDraws, draws: xr.Dataset, run: CandidateRun, rng: np.random.Generator
) -> np.ndarray:
    """A network candidate's measured values under each draw (D, M): its ``measured`` species at each time of
    each of its runs, flattened run by run, time by time; concentrations, or amounts c V where the study measures
    amounts. A new run's latent quantities are drawn per draw (``new_run_draws``). A draw that fails in any run is
    a NaN row."""
    shifted, offset, initial = new_run_draws(study, parameters, draws, run, rng)
    measured = list(run.measured)
    parts = []
    for setup, times in zip(run.setups, run.times, strict=True):
        setups = [_shifted(setup, float(delta)) for delta in offset]
        profiles = run_concentrations(study, shifted, setups, initial, times)[:, :, measured]
        profiles = profiles * _measured_factor(study, run, setup, times)[None, :, None]
        parts.append(profiles.reshape(profiles.shape[0], -1))
    values = np.concatenate(parts, axis=1)
    values[~np.all(np.isfinite(values), axis=1)] = np.nan
    return values


# The linearised (Laplace) estimate: the posterior as a Gaussian in the kinetic parameters, the candidate's data
# as linear in them about each draw (Fisher information averaged over draws), so the updated covariance is
# (Sigma^-1 + F)^-1 and the gain (1/2) ln det(I + Sigma F), exact for a linear Gaussian model (Long, Scavino,
# Tempone and Wang, Comput. Methods Appl. Mech. Eng. 259, 2013; from memory). It needs no importance weights, so
# it holds where the reweighting runs out of effective draws; it ignores a new run's own latent quantities.

#: Draws over which a candidate's Fisher information is averaged.
FISHER_DRAWS = 100

#: How a column's sensitivity follows from the solver's: d/d ln k_ref is d/d ln k; d/dEa is d/d ln k times
#: -(1/T - 1/T_ref)/R; d/dn is d/d ln k times ln(T/T_ref) (``physics.arrhenius.ln_rate_constant``).
_LEVEL, _ENERGY, _EXPONENT = "level", "energy", "exponent"


@dataclass(frozen=True)
class ParameterColumn:
    """One kinetic parameter of the linearised posterior: posterior ``variable`` at ``label`` of ``dimension``,
    the solver's sensitivity column ``source`` it derives from, and how (``_LEVEL``, ``_ENERGY``, ``_EXPONENT``)."""

    variable: str
    dimension: str
    label: str
    source: int
    kind: str


def parameter_columns(study: Study) -> list[ParameterColumn]:
    """The kinetic parameters a candidate's predictions depend on, in the solver's block order (ln k, ln K_c,
    ln K_ads, fitted orders): Arrhenius and van 't Hoff pairs, fitted temperature exponents and orders."""
    names = study.reaction_names
    columns = []
    for j, spec in enumerate(study.reactions):
        columns += [
            ParameterColumn("ln_k_ref", "reaction", spec.name, j, _LEVEL),
            ParameterColumn("Ea", "reaction", spec.name, j, _ENERGY),
        ]
        if spec.exponent_sd is not None:
            columns.append(ParameterColumn("temperature_exponent", "reaction", spec.name, j, _EXPONENT))
    if study.mode != "network":
        return columns
    offset = len(names)
    reversible = [r.name for r in study.reactions if r.equilibrium is not None]
    for q, name in enumerate(reversible):
        columns += [
            ParameterColumn("ln_K_ref", "reversible", name, offset + q, _LEVEL),
            ParameterColumn("dH", "reversible", name, offset + q, _ENERGY),
        ]
    offset += len(reversible)
    sites = [f"{r.name}:{site.species}" for r in study.reactions for site in r.adsorption]
    for s, label in enumerate(sites):
        columns += [
            ParameterColumn("ln_K_ads_ref", "adsorption_site", label, offset + s, _LEVEL),
            ParameterColumn("dH_ads", "adsorption_site", label, offset + s, _ENERGY),
        ]
    offset += len(sites)
    fitted = [f"{r.name}:{f.species}" for r in study.reactions for f in r.fitted_orders]
    columns += [ParameterColumn("order", "fitted_order", label, offset + o, _LEVEL) for o, label in enumerate(fitted)]
    return columns


@dataclass(frozen=True)
class Linearised:
    """The posterior as a Gaussian in standardised parameters z = (theta - centre) / scale: ``covariance`` of z,
    the target's best linear predictor ``coefficients`` in z, and the ``residual`` variance of the target that is
    not linear in them (kept as it is: the linearised estimate does not shrink it)."""

    columns: list[ParameterColumn]
    centre: np.ndarray
    scale: np.ndarray
    covariance: np.ndarray
    coefficients: np.ndarray
    residual: float

    @classmethod
    def of(cls, columns: list[ParameterColumn], draws: xr.Dataset, target: np.ndarray) -> Linearised:
        values = np.column_stack([_column(draws, c.variable, c.dimension, c.label) for c in columns])
        centre, scale = values.mean(axis=0), values.std(axis=0)
        scale = np.where(scale > 0, scale, 1.0)
        z = (values - centre) / scale
        covariance = np.atleast_2d(np.cov(z, rowvar=False))
        g = np.asarray(target, dtype=float)
        coefficients = np.linalg.lstsq(covariance, (z - z.mean(axis=0)).T @ (g - g.mean()) / (g.size - 1), rcond=None)[
            0
        ]
        residual = max(0.0, float(np.var(g, ddof=1) - coefficients @ covariance @ coefficients))
        return cls(columns, centre, scale, covariance, coefficients, residual)

    def effect(self, fisher: np.ndarray) -> tuple[float, float]:
        """(expected sd of the target, expected gain in nats) after data of Fisher information ``fisher`` (in z)."""
        size = self.covariance.shape[0]
        updated = np.linalg.solve(np.eye(size) + self.covariance @ fisher, self.covariance)
        sd = math.sqrt(max(0.0, float(self.coefficients @ updated @ self.coefficients)) + self.residual)
        gain = 0.5 * np.linalg.slogdet(np.eye(size) + self.covariance @ fisher)[1]
        return sd, float(gain)


def fisher_weight(sigma: np.ndarray, noise: Noise) -> np.ndarray:
    """Fisher information of a location per measurement: 1/sigma^2, times (nu + 1)/(nu + 3) for Student-t noise
    (Lange, Little and Taylor, JASA 84, 1989; from memory)."""
    weight = 1.0 / np.asarray(sigma, dtype=float) ** 2
    return weight * (noise.nu + 1) / (noise.nu + 3) if noise.model == "robust" else weight


def _multipliers(columns: list[ParameterColumn], kelvin: float, temperature_ref: float) -> np.ndarray:
    slope = -(1 / kelvin - 1 / temperature_ref) / R
    factors = {_LEVEL: 1.0, _ENERGY: slope, _EXPONENT: math.log(kelvin / temperature_ref)}
    return np.array([factors[c.kind] for c in columns])


def fisher_information(jacobians: list[np.ndarray], weights: list[np.ndarray], scale: np.ndarray) -> np.ndarray:
    """Mean over draws of J^T W J in standardised parameters: ``jacobians`` (M, P) of the model-scale predictions in
    theta, ``weights`` (M,) their Fisher weights."""
    total = np.zeros((scale.size, scale.size))
    for jacobian, weight in zip(jacobians, weights, strict=True):
        scaled = jacobian * scale[None, :]
        total += scaled.T @ (weight[:, None] * scaled)
    return total / max(1, len(jacobians))


def rate_constant_jacobian(
    columns: list[ParameterColumn],
    study: Study,
    run: CandidateRun,
    k: np.ndarray,
    temperature_ref: float,
    noise: Noise,
) -> np.ndarray:
    """(replicates, P): derivatives of the candidate's model-scale values (ln k, or k for absolute noise) in the
    parameters, for one draw with rate constant ``k``."""
    reaction = study.reaction_names[run.reaction]
    row = _multipliers(columns, run.kelvin, temperature_ref) * np.array([c.label == reaction for c in columns])
    if noise.model == "absolute":
        row = row * k
    return np.repeat(row[None], run.replicates, axis=0)


def detection_floor(run: CandidateRun) -> float:
    """The value below which a network candidate's predicted values are left out: its detection limit, else
    ``DETECTABLE`` times the largest concentration (or amount) it charges or feeds."""
    return run.detection_limit if run.detection_limit is not None else DETECTABLE * run.scale


#: The temperature-slope block beside each block of constants (``physics.parameters.BLOCKS``): where a run's
#: temperature changes, Ea, dH and dH_ads move its constants through these columns as well.
_SLOPES = {"ln_k": "activation", "ln_eq": "eq_enthalpy", "ln_ads": "ads_enthalpy"}
_LEVEL_BLOCK = {"Ea": "ln_k", "dH": "ln_eq", "dH_ads": "ln_ads"}


def _chain(
    columns: list[ParameterColumn], layout: SensitivityLayout, kelvin: float, temperature_ref: float
) -> np.ndarray:
    """(solver sensitivities, P): the derivatives of the solver's inputs in the parameters for a run whose constants
    are stated at ``kelvin``: ln k_n = ln k_ref - (Ea/R)(1/T_n - 1/T_ref) + n ln(T_n/T_ref), so d/dEa is d/d ln k
    times -(1/T_n - 1/T_ref)/R plus, where the temperature changes, d/d(Ea/R) over R (likewise dH, dH_ads and the
    exponent n, whose slope column is d/dn at fixed k_n)."""
    offsets, start = {}, 0
    for block in BLOCKS:
        offsets[block.name] = start
        start += block.count(layout)
    chain = np.zeros((start, len(columns)))
    multipliers = _multipliers(columns, kelvin, temperature_ref)
    for p, column in enumerate(columns):
        chain[column.source, p] = multipliers[p]
        if not layout.temperature_varies:
            continue
        if column.kind == _ENERGY:
            level = _LEVEL_BLOCK[column.variable]
            chain[offsets[_SLOPES[level]] + column.source - offsets[level], p] = 1.0 / R
        elif column.kind == _EXPONENT:
            chain[offsets["exponent"] + layout.fitted_exponents.index(column.source), p] = 1.0
    return chain


def candidate_jacobians(
    study: Study,
    columns: list[ParameterColumn],
    parameters: ParameterDraws,
    run: CandidateRun,
    rows: np.ndarray,
    temperature_ref: float,
    noise: Noise,
    floor: float,
) -> tuple[list[np.ndarray], list[int]]:
    """Derivatives (M, P) of a network candidate's model-scale values (as ``candidate_values`` orders them) in
    the parameters, one per draw in ``rows`` that solves every run of the candidate, at its nominal conditions; and
    those draws. Under log-scale noise a value below ``floor`` gets no derivative (its log is the integrator's
    noise)."""
    base = study.sensitivity_layout()
    layout = SensitivityLayout(study.network, base.free_orders, (), run.ramped, base.fitted_exponents)
    n_species = len(study.species)
    solvers = [
        NetworkSolver(study.network, [times], layout=layout, conditions=build_conditions([setup], n_species))
        for setup, times in zip(run.setups, run.times, strict=True)
    ]
    chain = _chain(columns, layout, run.kelvin, temperature_ref)
    measured = list(run.measured)
    jacobians, solved = [], []
    for d in rows:
        blocks = []
        try:
            for solver, setup, times in zip(solvers, run.setups, run.times, strict=True):
                solution = solver.solve(parameters.inputs(int(d), np.array([setup.nominal]), run.initial[None]))
                factor = _measured_factor(study, run, setup, times)[:, None]
                values = solution.concentrations[0][:, measured] * factor  # (T, K)
                sensitivity = (solution.sensitivities[0][:, measured] @ chain) * factor[:, :, None]  # (T, K, P)
                if noise.model != "absolute":
                    sensitivity = np.where(
                        values[:, :, None] >= floor, sensitivity / np.maximum(values, floor)[:, :, None], 0.0
                    )
                blocks.append(sensitivity.reshape(-1, len(columns)))
        except SolverFailure:
            continue
        jacobians.append(np.concatenate(blocks))
        solved.append(int(d))
    return jacobians, solved
