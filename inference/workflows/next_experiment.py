"""Which experiment next: candidate experiments ranked by how much they would shrink one target's uncertainty.

The API behind ``arrhenia next``. From a saved posterior (no refit) and a candidates file, every candidate's
measurements are predicted under each posterior draw (rate constants by the Arrhenius form; batch runs, isothermal,
ramped or dosed, and flow reactors at steady state by the compiled network solver under the ``RunSetup`` the
study's data reader would build for them), data sets are simulated from them, and the posterior is reweighted by
each data set; where the weights run out (too few effective draws for some candidate), a linearised (Laplace)
estimate ranks instead (``posterior.design`` states both). The target is a posterior parameter or a reactor
scenario's answer, computed per draw by ``predict.scenario_answers``. Written to a folder of its own:
``ranking.csv``, ``best_set.csv`` (when the file asks for a set), ``expected_sd.png``, ``summary.txt``,
``cautions.txt``, ``report.html`` and ``manifest.json``.
"""

from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import StudyError
from ..inputs import units
from ..inputs.candidates import (
    CandidateFile,
    CandidateRun,
    Target,
    find_scenario,
    load_candidates,
    parse_target,
    resolve_candidates,
    scenario_names,
)
from ..inputs.config import load_study
from ..inputs.data import read_observations, read_rate_constants
from ..inputs.study import Study
from ..outputs import report
from ..outputs.reporting import CAUTION
from ..outputs.results import StagedFolder, check_target, load_results, sha256_file
from ..posterior import design
from ..posterior.draws import parameter_draws, pick_draws
from ..posterior.summaries import temperature_label
from .predict import scenario_answers

TABLE_COLUMNS = [
    "candidate",
    "kind",
    "target",
    "unit",
    "temperature",
    "duration",
    "current_sd",
    "expected_sd",
    "expected_sd_se",
    "reduction",
    "expected_gain_nats",
    "effective_weights",
    "rank",
    "estimate",
    "expected_sd_reweighted",
    "expected_sd_reweighted_se",
    "expected_sd_linearised",
    "expected_gain_linearised_nats",
    "current_width90",
    "expected_width90",
    "effective_weights_min",
    "extrapolated",
    "notes",
]
SET_COLUMNS = ["step", "candidate", "expected_sd", "reduction", "expected_gain_nats", "effective_weights"]
#: A normal distribution's central 90 % interval is this many sds wide.
NORMAL_WIDTH90 = 2 * float(stats.norm.ppf(0.95))
METHOD = {
    "reweighting": (
        "Each candidate's measurements were simulated at {sets} posterior draws; for each simulated data set the "
        "{draws} posterior draws were reweighted by the candidate's likelihood of those data (importance sampling), "
        "and the target's sd taken under the weights; the expected sd is their mean. The expected gain is the mean "
        "Kullback-Leibler divergence of the reweighted draws from the current ones (nats, about all parameters)."
    ),
    "linearised": (
        "Ranked by the linearised (Laplace) estimate: the posterior of the kinetic parameters as a Gaussian (its "
        "covariance from {draws} draws), each candidate's data as linear in them (Fisher information averaged over "
        "{fisher} draws); the expected sd is that of the updated Gaussian, the expected gain (1/2) ln det(I + "
        "Sigma F) in nats. The reweighting estimate is in the table beside it."
    ),
}
ASSUMPTIONS = (
    "The ranking assumes the fitted model is right: a candidate's data are simulated from it, so an experiment that "
    "would reveal a wrong model or rate law is not credited for that. Candidate values are concentrations of the "
    "measured species (amounts where the study measures amounts); declared measured quantities (signals, area %) "
    "and censoring are not simulated."
)


@dataclass(frozen=True)
class NextExperimentResult:
    """Outcome of ``rank_experiments``: the ranking (``TABLE_COLUMNS``), the greedy best set (``SET_COLUMNS``;
    None unless asked for), the plain sentence, the cautions (extrapolations, unreliable estimates, the project's
    caution), and the estimate that ranks (``reweighting``, or ``linearised`` where weights ran out)."""

    results_dir: Path
    table: pd.DataFrame
    best_set: pd.DataFrame | None
    sentence: str
    cautions: list[str]
    estimate: str = "reweighting"


def _check_data(results_dir: Path, manifest: dict, study: Study) -> None:
    """The study's data files must be the bytes the fit recorded (the resolved study names them absolutely)."""
    recorded = manifest["data"]
    for role, path in study.data_files:
        entry = recorded.get(role)
        if not isinstance(entry, dict) or not path.is_file() or sha256_file(path) != entry.get("sha256"):
            raise StudyError(
                str(path),
                f"is not the {role} data the fit in {results_dir} was made from (missing, or changed since)",
                "fit the study again to rank candidates against its data",
            )


def _fit_verdict(results_dir: Path) -> str:
    try:
        return str(json.loads((results_dir / "diagnostics.json").read_text()).get("verdict", "unknown"))
    except (OSError, ValueError, AttributeError):
        return "unknown"


def _outside(kelvin: float, fitted: tuple[float, float], unit: str) -> str:
    """'' inside the fitted range, else how far outside, in words."""
    low, high = fitted
    if low <= kelvin <= high:
        return ""
    edge = low if kelvin < low else high
    side = "below the lowest" if kelvin < low else "above the highest"
    return f"{abs(kelvin - edge):.3g} K {side} fitted temperature ({temperature_label(edge, unit)})"


def _outside_span(span: tuple[float, float], fitted: tuple[float, float], unit: str) -> str:
    """'' when a candidate's temperatures (lowest, highest; K) lie inside the fitted range, else how far outside."""
    parts = [_outside(kelvin, fitted, unit) for kelvin in dict.fromkeys(span)]
    return "; ".join(part for part in parts if part)


def _measurements(
    study: Study,
    run: CandidateRun,
    draws,
    parameters,
    temperature_ref: float,
    stated_sd: dict[int, float],
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[str]]:
    """(values (D, M) on the data scale, noise sd (D, M), which of the candidate's measurements count (its runs x
    times x measured species, flattened), notes) of one candidate under every picked draw."""
    notes = []
    if study.mode == "rate_constants":
        values = design.rate_constant_predictions(study, draws, run, temperature_ref, rng)
        stated = run.noise
        if stated is None and "sigma" not in draws:
            stated = np.array([stated_sd[run.reaction]])
            notes.append(f"noise: the data's median stated sd of ln k, {stated[0]:.3g}")
        name = study.reaction_names[run.reaction]
        sigma = design.sigma_draws(draws, [name], stated, run.where, run.replicates)
        return values, sigma, np.ones(run.replicates, dtype=bool), notes
    flat = design.candidate_values(study, parameters, draws, run, rng)
    names = [study.species[i] for i in run.measured]
    log_scale = study.noise.model != "absolute"
    if log_scale:
        with warnings.catch_warnings():  # draws that failed are all-NaN rows
            warnings.simplefilter("ignore", RuntimeWarning)
            present = np.nanmax(flat.reshape(flat.shape[0], -1, len(names)), axis=1)
        for k, name in enumerate(names):
            if np.all(np.isnan(present[:, k])) or np.nanmedian(present[:, k]) <= design.TINY:
                raise StudyError(
                    f"{run.where}.measured",
                    f"'{name}' stays at zero in this run under the posterior (nothing charged forms it), and "
                    f"{study.noise.model} noise cannot weigh a zero concentration",
                    "measure a species the run makes or charges",
                )
    floor = design.detection_floor(run)
    keep = np.ones(flat.shape[1], dtype=bool)
    if log_scale or run.detection_limit is not None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            keep = np.nanmedian(flat, axis=0) >= floor
        what = "its detection limit" if run.detection_limit is not None else "a millionth of the largest charge"
        if not keep.any():
            key = "times" if run.kind == "batch" else "residence_times"
            raise StudyError(
                f"{run.where}.{key}",
                f"every measured value is predicted below {floor:.3g} ({what}): nothing left to measure",
                "sample later or earlier, or measure a species the run makes",
            )
        if not keep.all():
            notes.append(f"{int((~keep).sum())} of {keep.size} values predicted below {floor:.3g} ({what}) left out")
    failed = int(np.sum(~np.all(np.isfinite(flat), axis=1)))
    if failed:
        notes.append(f"{failed} draws could not be integrated (left out)")
    sigma = design.sigma_draws(draws, names, run.noise, run.where, run.values_per_species)
    return flat[:, keep], sigma[:, keep], keep, notes


def _effect(reduction: float, subject: str) -> str:
    """What a reduction of the sd does to ``subject`` (e.g. "the uncertainty of Ea[coupling]"), in words."""
    if reduction < 0.05:
        return f"barely change {subject}"
    if 0.4 <= reduction <= 0.6:
        return f"about halve {subject}"
    return f"cut {subject} by {reduction:.0%}"


def _what(run: CandidateRun, row: pd.Series, temperature_unit: str, time_unit: str | None) -> str:
    """The candidate in words: a run at T for a duration (ramped, dosed), a flow reactor at T, or a rate constant
    at T (with its replicates)."""
    where = f"{row['temperature']:g} {temperature_unit}"
    if run.kind == "rate_constant":
        return (
            f"set of {run.replicates} rate constants measured at {where}"
            if run.replicates > 1
            else f"rate constant measured at {where}"
        )
    if run.kind != "batch":
        return f"{run.kind.upper()} at {where}"
    low, high = (float(units.kelvin_to(k, temperature_unit)) for k in run.span)
    at = f"ramped between {low:.3g} and {high:.3g} {temperature_unit}" if run.ramped else f"at {where}"
    return f"{'dosed ' if run.dosed else ''}run {at} for {row['duration']:g} {time_unit}"


def _sentence(
    table: pd.DataFrame, target: Target, runs: dict[str, CandidateRun], temperature_unit: str, time_unit
) -> str:
    """One plain sentence: what the best candidate would do to the target's uncertainty, and what the worst would."""
    best, worst = table.iloc[0], table.iloc[-1]
    unit = f" {target.unit}" if target.unit else ""
    text = (
        f"A {_what(runs[best['candidate']], best, temperature_unit, time_unit)} "
        f"(candidate '{best['candidate']}') would {_effect(best['reduction'], f'the uncertainty of {target.label}')} "
        f"(expected sd {best['expected_sd']:.3g}{unit}, now {best['current_sd']:.3g})"
    )
    if len(table) > 1:
        text += (
            f"; a {_what(runs[worst['candidate']], worst, temperature_unit, time_unit)} "
            f"('{worst['candidate']}') would {_effect(worst['reduction'], 'it')}"
        )
    return text + "."


@dataclass
class _Candidate:
    """What one candidate does: reweighting and linearised estimates, and what the best set is built from."""

    run: CandidateRun
    reweighted: design.Reweighting
    linearised: tuple[float, float]
    loglik: np.ndarray
    fisher: np.ndarray
    notes: list[str]


def _fisher(
    study: Study,
    run: CandidateRun,
    linear: design.Linearised,
    parameters,
    values: np.ndarray,
    sigma: np.ndarray,
    keep: np.ndarray,
    temperature_ref: float,
) -> np.ndarray:
    """The candidate's Fisher information in the linearised posterior's standardised parameters, averaged over
    ``design.FISHER_DRAWS`` draws spread over all (``values`` (D, M) on the data scale and ``sigma`` (D, M) of the
    measurements that count, ``keep``)."""
    rows = np.unique(np.linspace(0, values.shape[0] - 1, design.FISHER_DRAWS).astype(int))
    if study.mode == "rate_constants":
        jacobians = [
            design.rate_constant_jacobian(linear.columns, study, run, values[d, 0], temperature_ref, study.noise)
            for d in rows
        ]
        solved = list(rows)
    else:
        jacobians, solved = design.candidate_jacobians(
            study, linear.columns, parameters, run, rows, temperature_ref, study.noise, design.detection_floor(run)
        )
        jacobians = [jacobian[keep] for jacobian in jacobians]
    weights = [design.fisher_weight(sigma[d], study.noise) for d in solved]
    return design.fisher_information(jacobians, weights, linear.scale)


def _scenario_values(
    study: Study,
    target: Target,
    file: CandidateFile,
    path: Path,
    parameters,
    fitted: tuple[float, float],
    where: str,
) -> tuple[np.ndarray, Target, list[str]]:
    """A scenario answer's value in each picked draw (the study's units), the target with its unit, and the
    scenario's notes (extrapolations). ``StudyError`` at ``where`` when the answer does not exist or is not defined
    in every draw."""
    name, quantity = target.coordinate, target.quantity
    if study.mode != "network":
        raise StudyError(where, "a scenario's answer is a target of network studies only", "target k[r, T] instead")
    scenarios, index, source = find_scenario(file, study, path, name)
    if getattr(scenarios.scenarios[index], "reactor", None) is None:
        raise StudyError(where, f"scenario '{name}' runs no reactor", "name a reactor scenario, or target k[r, T]")
    with warnings.catch_warnings():  # quantiles of answers some draws never reach (inf) are the predictor's concern
        warnings.simplefilter("ignore", RuntimeWarning)
        answers, notes = scenario_answers(study, parameters, fitted, scenarios, index, source)
    if quantity not in answers:
        raise StudyError(where, f"scenario '{name}' has no answer '{quantity}'", f"its answers: {'; '.join(answers)}")
    unit, values = answers[quantity]
    values = np.asarray(values, dtype=float)
    undefined = ~np.isfinite(values)
    if undefined.all():
        raise StudyError(
            where,
            f"'{quantity}' of scenario '{name}' cannot be computed: no posterior draw reaches it within the "
            "scenario's range (a conversion of a species the scenario never consumes, say)",
            "choose another answer",
        )
    if undefined.any():
        raise StudyError(
            where,
            f"'{quantity}' of scenario '{name}' is undefined in {undefined.mean():.1%} of the posterior draws (not "
            "reached within the scenario's range, or not integrated), so its sd is not defined",
            "lengthen the scenario's 'until' or 'residence_times', or choose another answer",
        )
    if np.ptp(values) == 0:
        raise StudyError(
            where,
            f"'{quantity}' of scenario '{name}' is the same in every posterior draw: the kinetics do not decide it",
            "choose an answer that depends on the fitted parameters",
        )
    return values, replace(target, unit=unit), notes


def rank_experiments(
    results_dir: str | Path,
    candidates: str | Path,
    *,
    target: str | None = None,
    out: str | Path | None = None,
    overwrite: bool = False,
    quiet: bool = False,
    command_line: str | None = None,
) -> NextExperimentResult:
    """Rank the candidate experiments of ``candidates`` (a YAML file) by the expected posterior sd of ``target``
    (e.g. ``"Ea[coupling]"``; default the file's ``target``) after each, from the posterior in ``results_dir``.

    Written to ``out`` (default ``results_dir/next_experiment``). Raises ``StudyError`` for any mistake in the input
    before anything is written.
    """
    from ..outputs import plots

    results_dir, path = Path(results_dir), Path(candidates)
    manifest, idata = load_results(results_dir)
    study = load_study(results_dir / "study.yaml")
    _check_data(results_dir, manifest, study)
    file: CandidateFile = load_candidates(path)
    text = target if target is not None else file.target
    if text is None:
        raise StudyError("--target", "no target given", f"pass --target, or put 'target:' into {path}")
    temperature_unit = file.units.temperature or study.units.temperature
    target_where = "--target" if target is not None else f"{path}: target"
    chosen = parse_target(text, study, target_where, temperature_unit, scenario_names(file, study))
    destination = Path(out) if out is not None else results_dir / "next_experiment"
    check_target(destination, overwrite, (results_dir, path))

    stated_sd: dict[int, float] = {}
    if study.mode == "rate_constants":
        data = read_rate_constants(study)
        if data.ln_k_sd is not None:
            stated_sd = {j: float(np.median(data.ln_k_sd[data.rows_of(j)])) for j in range(len(study.reactions))}
        measured_default: tuple[str, ...] = ()
    else:
        obs = read_observations(study)
        measured_default = tuple(study.species[i] for i in obs.observed_species)
    runs = resolve_candidates(file, study, path, measured_default)

    attrs = json.loads(idata.posterior.attrs["arrhenia"])
    temperature_ref = float(attrs["reference_temperature_K"])
    fitted = tuple(float(v) for v in attrs["temperature_range_K"])
    picks = pick_draws(idata.posterior, file.draws)
    draws = design.stacked(idata.posterior, picks)
    network = study.mode == "network"
    parameters = parameter_draws(study, idata.posterior, temperature_ref, picks) if network else None
    scenario_notes: list[str] = []
    if chosen.kind == "scenario":
        values, chosen, scenario_notes = _scenario_values(study, chosen, file, path, parameters, fitted, target_where)
    else:
        values = design.target_values(chosen, draws, study, temperature_ref)
    linear = design.Linearised.of(design.parameter_columns(study), draws, values)
    n_draws = picks.size
    sources = np.random.default_rng([file.seed, 0]).choice(
        n_draws, file.simulations, replace=file.simulations > n_draws
    )
    current_sd, current_width = design.current(values)

    found: list[_Candidate] = []
    for index, run in enumerate(runs):
        rng = np.random.default_rng([file.seed, 1, index])
        measured, sigma, keep, notes = _measurements(study, run, draws, parameters, temperature_ref, stated_sd, rng)
        predicted = design.model_scale(measured, study.noise)
        simulated = design.simulate(predicted[sources], sigma[sources], study.noise, rng)
        loglik = design.log_likelihood(simulated, predicted, sigma, study.noise)
        fisher = _fisher(study, run, linear, parameters, measured, sigma, keep, temperature_ref)
        found.append(_Candidate(run, design.reweigh(loglik, values), linear.effect(fisher), loglik, fisher, notes))
        if not quiet:
            print(f"assessed candidate {run.name} ({index + 1} of {len(runs)})", flush=True)

    few = [c.run.name for c in found if not c.reweighted.effective >= design.MIN_EFFECTIVE]
    estimate = "linearised" if few else "reweighting"
    cautions = _cautions(results_dir, study, chosen, fitted, found, few, scenario_notes)
    table = _table(found, file, chosen, estimate, current_sd, current_width, fitted, study, temperature_unit)
    best_set = None
    if file.choose is not None:
        best_set = _best_set(found, file.choose, estimate, linear, values, current_sd)
    time_unit = (file.units.time or study.units.time) if network else None
    sentence = _sentence(table, chosen, {r.name: r for r in runs}, temperature_unit, time_unit)
    method = METHOD[estimate].format(sets=file.simulations, draws=n_draws, fisher=design.FISHER_DRAWS)

    with StagedFolder(destination, overwrite, (results_dir, path)) as folder:
        folder.write_csv("ranking.csv", table)
        if best_set is not None:
            folder.write_csv("best_set.csv", best_set)
        low, high = (float(units.kelvin_to(k, temperature_unit)) for k in fitted)
        plots.next_experiment_plot(
            table,
            folder.path("expected_sd.png"),
            target=chosen.label,
            unit=chosen.unit,
            current_sd=current_sd,
            temperature_unit=temperature_unit,
            time_unit=time_unit,
            fitted_range=(low, high),
        )
        folder.write_text("summary.txt", sentence + "\n")
        folder.write_text("cautions.txt", "\n".join(cautions) + "\n")
        tables = [(f"Candidates ranked by the expected sd of {chosen.label}", table)]
        if best_set is not None:
            tables.append((f"Best set of {file.choose}, chosen one at a time", best_set))
        folder.write_text(
            "report.html",
            report.simple_report(
                folder.stage,
                title=f"Arrhenia: which experiment next for {study.name}",
                intro=[sentence, method],
                tables=tables,
                figures=[
                    (
                        "expected_sd.png",
                        f"Expected posterior sd of {chosen.label} after each candidate against its temperature "
                        "(±2 Monte Carlo se where estimated); dashed: the sd now; shaded: the fitted temperature range",
                    )
                ],
                cautions=cautions,
            ),
        )
        folder.write_manifest(
            "next_experiment",
            {
                "results": str(results_dir),
                "results_posterior_sha256": manifest["files"]["posterior.nc"],
                "candidates": {"path": str(path.resolve()), "sha256": sha256_file(path)},
                "target": chosen.label,
                "estimate": estimate,
                "draws": int(n_draws),
                "simulations": file.simulations,
                "fisher_draws": design.FISHER_DRAWS,
                "seed": file.seed,
                "fitted_temperature_range_K": list(fitted),
                "method": method,
                "cautions": cautions,
            },
            command_line,
        )
    return NextExperimentResult(destination, table, best_set, sentence, cautions, estimate)


def _cautions(
    results_dir: Path,
    study: Study,
    target: Target,
    fitted: tuple[float, float],
    found: list[_Candidate],
    few: list[str],
    scenario_notes: list[str],
) -> list[str]:
    """The fit's verdict when not 'pass', extrapolations (target and candidates), which estimate ranks and why,
    the method's assumptions and the project's caution."""
    cautions = []
    verdict = _fit_verdict(results_dir)
    if verdict != "pass":
        cautions.append(f"The fit's verdict was '{verdict}': its posterior, and so this ranking, may not be trusted.")
    if target.kelvin is not None:
        outside = _outside(target.kelvin, fitted, study.units.temperature)
        if outside:
            cautions.append(f"EXTRAPOLATED: the target {target.label} lies {outside}.")
    cautions += scenario_notes
    for candidate in found:
        run = candidate.run
        outside = _outside_span(run.span, fitted, study.units.temperature)
        if outside:
            cautions.append(
                f"EXTRAPOLATED: candidate {run.name} ({run.description}) runs {outside}; the ranking trusts the "
                "fitted model out there."
            )
    if few:
        latent = study.run_variability is not None or study.initial_uncertainty or study.temperature_sd_K is not None
        cautions.append(
            f"Ranked by the linearised estimate: the reweighting of {', '.join(few)} rests on fewer than "
            f"{design.MIN_EFFECTIVE} effective weights (median over simulated data sets), i.e. such data would narrow "
            "the posterior far beyond its current draws. The linearised estimate treats the posterior as Gaussian and "
            "the data as linear in the parameters; where the posterior is far from Gaussian, read it as rough."
            + (
                " It also ignores a new run's own scatter, temperature error and uncertain initial amounts, so it "
                "is optimistic for this study."
                if latent
                else ""
            )
        )
    return [*cautions, ASSUMPTIONS, CAUTION]


def _table(
    found: list[_Candidate],
    file: CandidateFile,
    target: Target,
    estimate: str,
    current_sd: float,
    current_width: float,
    fitted: tuple[float, float],
    study: Study,
    temperature_unit: str,
) -> pd.DataFrame:
    """The ranking: one row per candidate (``TABLE_COLUMNS``), best first. ``temperature``: as stated, or a
    programme's nominal temperature (time-weighted mean up to the last sampling time); ``duration``: a batch run's
    last sampling time (both in the candidates file's units)."""
    rows = []
    for candidate, stated in zip(found, file.candidates, strict=True):
        weighted, (linear_sd, linear_gain) = candidate.reweighted, candidate.linearised
        run = candidate.run
        by_weights = estimate == "reweighting"
        expected = weighted.expected_sd if by_weights else linear_sd
        outside = _outside_span(run.span, fitted, study.units.temperature)
        notes = ([f"extrapolated: {outside}"] if outside else []) + candidate.notes
        if weighted.effective < design.MIN_EFFECTIVE:
            notes.append(f"reweighting unreliable ({weighted.effective:.0f} effective weights)")
        temperature = stated.temperature
        if temperature is None:
            temperature = float(units.kelvin_to(run.kelvin, temperature_unit))
        rows.append(
            {
                "candidate": stated.name,
                "kind": run.description,
                "target": target.label,
                "unit": target.unit,
                "temperature": temperature,
                "duration": stated.times[-1] if run.kind == "batch" else np.nan,
                "current_sd": current_sd,
                "expected_sd": expected,
                "expected_sd_se": weighted.se if by_weights else np.nan,
                "reduction": 1.0 - expected / current_sd,
                "expected_gain_nats": weighted.gain if by_weights else linear_gain,
                "effective_weights": weighted.effective,
                "estimate": estimate,
                "expected_sd_reweighted": weighted.expected_sd,
                "expected_sd_reweighted_se": weighted.se,
                "expected_sd_linearised": linear_sd,
                "expected_gain_linearised_nats": linear_gain,
                "current_width90": current_width,
                "expected_width90": weighted.expected_width90 if by_weights else NORMAL_WIDTH90 * linear_sd,
                "effective_weights_min": weighted.effective_min,
                "extrapolated": bool(outside),
                "notes": "; ".join(notes),
            }
        )
    table = pd.DataFrame(rows)
    table["rank"] = table["expected_sd"].rank(method="first", na_option="bottom").astype(int)
    return table.sort_values("rank")[TABLE_COLUMNS].reset_index(drop=True)


def _best_set(
    found: list[_Candidate],
    count: int,
    estimate: str,
    linear: design.Linearised,
    values: np.ndarray,
    current_sd: float,
) -> pd.DataFrame:
    """The greedy best set (``SET_COLUMNS``), by the estimate that ranks; the effective weights of the reweighting
    of each growing set are shown either way."""

    def reweighted(chosen: list[int]) -> design.Reweighting:
        return design.reweigh(sum(found[i].loglik for i in chosen), values)

    def linearised(chosen: list[int]) -> tuple[float, float]:
        return linear.effect(sum(found[i].fisher for i in chosen))

    if estimate == "reweighting":
        order = design.greedy(count, len(found), lambda chosen: reweighted(chosen).expected_sd)
    else:
        order = design.greedy(count, len(found), lambda chosen: linearised(chosen)[0])
    rows = []
    for step in range(1, count + 1):
        weighted = reweighted(order[:step])
        sd, gain = (weighted.expected_sd, weighted.gain) if estimate == "reweighting" else linearised(order[:step])
        rows.append(
            {
                "step": step,
                "candidate": found[order[step - 1]].run.name,
                "expected_sd": sd,
                "reduction": 1.0 - sd / current_sd,
                "expected_gain_nats": gain,
                "effective_weights": weighted.effective,
            }
        )
    return pd.DataFrame(rows, columns=SET_COLUMNS)


def next_experiment_report(result: NextExperimentResult) -> str:
    """Terminal text: the ranking, the best set, the sentence and the cautions."""
    shown = result.table[
        [
            "rank",
            "candidate",
            "kind",
            "temperature",
            "current_sd",
            "expected_sd",
            "expected_sd_se",
            "expected_sd_reweighted",
            "expected_sd_linearised",
            "expected_gain_nats",
            "effective_weights",
            "notes",
        ]
    ]
    target = result.table["target"].iloc[0]
    lines = ["", f"candidates ranked by the expected posterior sd of {target} ({result.estimate} estimate):"]
    lines.append(shown.to_string(index=False, float_format="{:.4g}".format))
    if result.best_set is not None:
        lines += [
            "",
            "best set, chosen one at a time:",
            result.best_set.to_string(index=False, float_format="{:.4g}".format),
        ]
    lines += ["", result.sentence, "", *result.cautions, "", f"next experiment: {result.results_dir}"]
    return "\n".join(lines)
