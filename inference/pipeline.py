"""The steps of a fit, in order: the Python API behind ``arrhenia fit`` (and usable from a notebook).

>>> from inference import load_study, fit_study
>>> result = fit_study(load_study("configs/example_rate_constants.yaml"), out="results/example")
>>> result.summary          # pandas DataFrame, see README for the columns
"""

from __future__ import annotations

import datetime as _dt
import json
import platform
import sys
import time
from dataclasses import dataclass, replace
from importlib import metadata
from pathlib import Path

import arviz as az
import numpy as np
import pandas as pd
import yaml

from . import __version__, plots, report
from .arrhenius import auto_reference_temperature
from .config import load_study
from .diagnostics import Diagnostics, assess
from .errors import StudyError
from .problems import Problem, open_problem
from .reporting import CAUTION
from .results import StagedFolder, binding_differences, check_target, read_manifest, reserve, sha256_file, sha256_json
from .sampling import sample_posterior, scratch_folder
from .schema import Sampling
from .study import Study
from .summaries import correlation_table, derived_quantities, extrapolation_notes, summary_table

PACKAGES = (
    "arrhenia",
    "pymc",
    "pytensor",
    "arviz",
    "numpy",
    "scipy",
    "pandas",
    "xarray",
    "pydantic",
    "pint",
    "matplotlib",
)


class Steps:
    """Prints one line per pipeline step with its wall time, unless quiet."""

    def __init__(self, quiet: bool) -> None:
        self.quiet = quiet
        self.started = time.perf_counter()
        self.last = self.started
        self.timings: dict[str, float] = {}

    def done(self, step: str, detail: str = "") -> None:
        now = time.perf_counter()
        self.timings[step] = round(now - self.last, 3)
        self.last = now
        if not self.quiet:
            print(f"[{now - self.started:7.1f} s] {step}{': ' + detail if detail else ''}", flush=True)

    def say(self, text: str) -> None:
        if not self.quiet:
            print(text, flush=True)


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
    predictions: object = None  # a predictions.PredictionResult when the study names scenarios


def default_results_dir(study: Study, root: Path = Path("results")) -> Path:
    """``results/<study>/`` below the current folder (or below ``root``)."""
    return Path(root) / study.name


def resolved_study_yaml(study: Study, temperature_ref: float, sampling: dict) -> str:
    """The study as run: defaults filled in, data paths absolute, T_ref and sampling settings fixed."""
    resolved = json.loads(json.dumps(study.canonical))
    resolved["data"] = {role: str(path) for role, path in study.data_files}
    resolved["reference_temperature"] = f"{temperature_ref!r} K"
    resolved["sampling"] = sampling
    header = f"# Resolved by arrhenia {__version__} from {study.path}\n"
    return header + yaml.safe_dump(resolved, sort_keys=False, allow_unicode=True)


def _versions() -> dict[str, str]:
    found = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            found[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            found[name] = "not installed"
    return found


def fit_study(
    study: Study | str | Path,
    *,
    out: str | Path | None = None,
    draws: int | None = None,
    tune: int | None = None,
    chains: int | None = None,
    seed: int | None = None,
    cores: int | None = None,
    overwrite: bool = False,
    quiet: bool = False,
    command_line: str | None = None,
) -> FitResult:
    """Fit a study end to end and write its results folder atomically.

    Arguments left as None take the study file's ``sampling`` values. Raises ``StudyError`` for any mistake
    in the input before anything is sampled or written.
    """
    steps = Steps(quiet)
    if not isinstance(study, Study):
        study = load_study(study)
    overrides = {
        k: v
        for k, v in {"draws": draws, "tune": tune, "chains": chains, "seed": seed, "cores": cores}.items()
        if v is not None
    }
    sampling = study.sampling.model_validate({**study.sampling.model_dump(), **overrides})
    target = Path(out) if out is not None else default_results_dir(study)
    with reserve(target, overwrite, study_inputs(study)):
        return _fit(study, target, sampling, overwrite, quiet, command_line, steps)


def study_inputs(study: Study) -> tuple[Path, ...]:
    """The files a study reads: no results folder may be or contain one of them."""
    return (study.path, *(path for _, path in study.data_files))


def _fit(
    study: Study, target: Path, sampling: Sampling, overwrite: bool, quiet: bool, command_line: str | None, steps: Steps
) -> FitResult:
    problem = open_problem(study)
    temperature_ref = study.reference_temperature_K or auto_reference_temperature(problem.temperatures_K)
    steps.done("validated study and data", f"{problem.summary_line()}, T_ref = {temperature_ref:.2f} K")
    notes = [*study.warnings, *problem.warnings()]
    for note in notes:
        steps.say(f"warning: {note}")

    with scratch_folder() as scratch:
        failure_log = scratch / "solver-failures"
        model = problem.build_model(temperature_ref, failure_log)
        _check_start(model, problem, temperature_ref)
        steps.done("built model")
        idata, failures = sample_posterior(model, sampling, progress=not quiet, failure_log=failure_log)
    steps.done("sampled", f"{sampling.chains} chains x {sampling.draws} draws after {sampling.tune} tuning")

    diagnostics = assess(idata, problem.kinetic_var_names(idata), solver_failures=failures, problem=problem)
    quantities = derived_quantities(study, idata.posterior, temperature_ref)
    result = FitResult(
        study=study,
        results_dir=target,
        reference_temperature_K=temperature_ref,
        diagnostics=diagnostics,
        summary=summary_table(quantities),
        tables=problem.extra_tables(),
        correlations=correlation_table(study, idata.posterior, temperature_ref),
        fit_checks=problem.fit_checks(idata),
        extrapolations=extrapolation_notes(study, problem.temperatures_K),
        idata=idata,
    )
    steps.done("summarised", f"verdict {diagnostics.verdict}")
    _write(result, problem, sampling.model_dump(), quantities, overwrite, steps, command_line)
    steps.done("wrote results", str(target))
    if study.scenarios:
        from .predictions import predict
        from .schema import ScenarioFile

        predicted = predict(
            target, ScenarioFile(scenarios=study.scenarios), overwrite=True, quiet=quiet, command_line=command_line
        )
        result = replace(result, predictions=predicted)
        steps.done("predicted scenarios", str(predicted.results_dir))
    return result


def _check_start(model, problem: Problem, temperature_ref: float) -> None:
    """A log-density that is not finite where sampling starts is the study's fault: say which term."""
    from .sampling import non_finite_start

    terms, measurements = non_finite_start(model)
    if not terms:
        return
    where = str(problem.study.path)
    if "solver_guard" in terms:
        run = problem.failing_run_at_prior_centre(temperature_ref)
        which = f" (first in run '{run}')" if run else ""
        raise StudyError(
            where,
            f"the profiles cannot be integrated at the priors' centre{which}",
            "check the k_ref priors against units.time and units.concentration",
        )
    if measurements.size:
        raise StudyError(
            problem.measurement_label(int(measurements[0])),
            "this measurement is impossible under the model at the priors' centre",
            "check the k_ref priors against units.time and units.concentration, this value and the noise model",
        )
    raise StudyError(where, f"the prior of {terms[0]} gives no finite density at its centre")


def _pair_columns(quantities: dict) -> dict[str, np.ndarray]:
    """ln k_ref and Ea of every reaction (the parameters the sampler sees, up to an affine map), and dH."""
    columns = {}
    for name, (unit, draws) in quantities.items():
        if name.startswith("k_ref["):
            columns[f"ln {name} ({unit})"] = np.log(draws.values.ravel())
        elif name.startswith(("Ea[", "dH[", "order[")):
            columns[f"{name} ({unit})" if unit else name] = draws.values.ravel()
    return columns


def _write(
    result: FitResult,
    problem: Problem,
    sampling: dict,
    quantities: dict,
    overwrite: bool,
    steps: Steps,
    command_line: str | None,
) -> None:
    study, idata = result.study, result.idata
    attrs = {
        "arrhenia_version": __version__,
        "study": study.name,
        "reference_temperature_K": result.reference_temperature_K,
        "units": study.units.model_dump(),
        "posterior_units": {
            "ln_k_ref": {s.name: f"ln({s.k_unit})" for s in study.reactions},
            "Ea": "J/mol",
            "dH": "J/mol",
        },
        "seed": sampling["seed"],
        "measurement_groups": problem.measurement_groups(),
        "temperature_range_K": [float(np.min(problem.temperatures_K)), float(np.max(problem.temperatures_K))],
    }
    for group in idata.groups():
        idata[group].attrs["arrhenia"] = json.dumps(attrs, sort_keys=True)
    coverage = float(result.fit_checks["inside_90"].mean())
    manifest = {
        "arrhenia_version": __version__,
        "study": study.name,
        "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "command_line": command_line or " ".join(sys.argv),
        "seed": sampling["seed"],
        "sampling": sampling,
        "reference_temperature_K": result.reference_temperature_K,
        "study_file": {"path": str(study.path), "sha256": sha256_file(study.path)},
        "config_sha256": sha256_json(study.canonical),
        "data": {role: {"path": str(path), "sha256": sha256_file(path)} for role, path in study.data_files},
        "versions": _versions(),
        "timings_s": steps.timings,
        "predictive_coverage_90": coverage,
        "extrapolations": result.extrapolations,
        "warnings": [*study.warnings, *problem.warnings()],
    }
    with StagedFolder(result.results_dir, overwrite, study_inputs(study)) as folder:
        folder.write_csv("summary.csv", result.summary)
        for name, table in result.tables.items():
            folder.write_csv(name, table)
        folder.write_csv("correlations.csv", result.correlations)
        folder.write_csv("fit_checks.csv", result.fit_checks)
        folder.write_json("diagnostics.json", {**result.diagnostics.to_dict(), "predictive_coverage_90": coverage})
        idata.to_netcdf(str(folder.path("posterior.nc")))
        problem.figures(folder, idata, result.reference_temperature_K, result.fit_checks)
        plots.pair_plot(_pair_columns(quantities), folder.path("figures/pair.png"), seed=sampling["seed"])
        plots.prior_posterior_plot(study, idata.posterior, folder.path("figures/prior_posterior.png"))
        folder.write_text("study.yaml", resolved_study_yaml(study, result.reference_temperature_K, sampling))
        order = ["arrhenius.png", "pair.png", "prior_posterior.png"]
        names = sorted(
            (p.name for p in folder.path("figures").iterdir()),
            key=lambda n: (order.index(n) if n in order else len(order), n),
        )
        folder.write_text(
            "report.html",
            report.fit_report(
                folder.stage,
                title=f"Arrhenia fit: {study.name}" + (f" ({study.title})" if study.title else ""),
                study_lines=problem.check_lines(),
                diagnostics={**result.diagnostics.to_dict(), "predictive_coverage_90": coverage},
                summary=result.summary,
                tables=result.tables,
                correlations=result.correlations,
                extrapolations=result.extrapolations,
                caution=CAUTION,
                figures=[(f"figures/{n}", plots.caption(n)) for n in names],
            ),
        )
        folder.write_manifest(manifest)


def provenance(study: Study) -> dict:
    """What a results folder must record to count as made from this study and its data."""
    return {
        "config_sha256": sha256_json(study.canonical),
        "data": {role: sha256_file(path) for role, path in study.data_files},
    }


def provenance_differences(folder: Path, study: Study) -> list[str]:
    """What differs between the results in ``folder`` and this study with its data now (empty: they match).

    The folder's own files are checked too: a posterior or resolved study that is not the one the fit wrote
    (by the sha256 its manifest recorded) is a difference.
    """
    folder = Path(folder)
    if not folder.is_dir():
        return [f"{folder} is not a folder (no results there)"]
    manifest_path = folder / "manifest.json"
    if not (manifest_path.is_file() and (folder / "posterior.nc").is_file()):
        return [f"{folder} is not a complete results folder (manifest.json or posterior.nc is missing)"]
    manifest = read_manifest(folder)
    try:
        recorded = {
            "config_sha256": str(manifest["config_sha256"]),
            "data": {str(role): str(entry["sha256"]) for role, entry in manifest["data"].items()},
        }
    except (KeyError, TypeError, AttributeError):
        return [f"{manifest_path} is not a fit manifest Arrhenia wrote"]
    differences = binding_differences(folder, manifest)
    now = provenance(study)
    if recorded["config_sha256"] != now["config_sha256"]:
        differences.append("the validated study differs (priors, reactions, units or sampling settings)")
    for role in sorted(set(recorded["data"]) | set(now["data"])):
        if recorded["data"].get(role) != now["data"].get(role):
            differences.append(f"the {role} data file differs ({dict(study.data_files).get(role, 'not in the study')})")
    return differences


def results_match(folder: Path, study: Study) -> bool:
    """Whether ``folder`` holds complete results of exactly this study and data (by the manifest's hashes)."""
    return not provenance_differences(folder, study)


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


def _fit_overrides(sampling: dict) -> dict:
    """The batch's share of the sampling overrides (a batch chooses cores itself)."""
    return {k: v for k, v in sampling.items() if k != "cores" and v is not None}


def _candidate(
    source: Path, root: Path, overwrite: bool, quiet: bool, sampling: dict, steps: Steps
) -> tuple[str, dict, az.InferenceData, Path]:
    """(name, manifest, posterior, folder) of one candidate: a saved results folder, or a study file fitted
    into ``root/<study>`` unless a matching fit is already there."""
    from .results import load_results

    if source.is_dir():
        manifest, idata = load_results(source)
        return str(manifest.get("study", source.name)), manifest, idata, source
    study = load_study(source)
    folder = default_results_dir(study, root)
    if results_match(folder, study) and not any(v is not None for v in sampling.values()):
        steps.say(f"reusing the fit of {study.name} in {folder} (same study and data)")
    else:
        if folder.exists() and not overwrite:
            raise StudyError(
                str(folder),
                f"holds results that do not match {source}",
                "pass --overwrite to refit, or remove the folder",
            )
        steps.say(f"fitting candidate {study.name}")
        fit_study(study, out=folder, overwrite=overwrite, quiet=quiet, **sampling)
    manifest, idata = load_results(folder)
    return study.name, manifest, idata, folder


def compare_studies(
    sources: list[str | Path],
    *,
    out: str | Path | None = None,
    root: str | Path = "results",
    overwrite: bool = False,
    quiet: bool = False,
    draws: int | None = None,
    tune: int | None = None,
    chains: int | None = None,
    seed: int | None = None,
    cores: int | None = None,
    workers: int | None = None,
    command_line: str | None = None,
) -> ComparisonResult:
    """Compare two or more candidate studies (files or saved results folders) that share the same data.

    Study files are fitted into ``root/<study>/`` (a matching earlier fit there is reused), side by side on a
    local Dask cluster with ``workers`` > 1; the comparison is written to ``out`` (default
    ``root/comparison``). Raises ``StudyError`` when candidates' data differ.
    """
    from . import comparison

    steps = Steps(quiet)
    if len(sources) < 2:
        raise StudyError("compare", "needs two or more candidates")
    sampling = {"draws": draws, "tune": tune, "chains": chains, "seed": seed, "cores": cores}
    target = Path(out) if out is not None else Path(root) / "comparison"
    inputs = tuple(Path(s) for s in sources)
    check_target(target, overwrite, inputs)
    if workers is not None and workers > 1:
        from .batch import run_batch

        files = [Path(s) for s in sources if not Path(s).is_dir()]
        steps.say(f"fitting {len(files)} candidate(s) on a local Dask cluster of {workers} workers")
        batch = run_batch(
            files,
            root=root,
            workers=workers,
            overwrite=overwrite,
            quiet=quiet,
            command_line=command_line,
            **_fit_overrides(sampling),
        )
        failed = batch.table[~batch.table["status"].isin(["fitted", "up to date", "not converged"])]
        if not failed.empty:
            row = failed.iloc[0]
            raise StudyError(str(row["study"]), f"could not be fitted: {row['message']}")
        sampling = dict.fromkeys(sampling)  # the fits just made are the ones asked for: reuse them
    loaded = [_candidate(Path(s), Path(root), overwrite, quiet, sampling, steps) for s in sources]
    names = [name for name, *_ in loaded]
    if len(set(names)) != len(names):
        twice = next(n for n in names if names.count(n) > 1)
        raise StudyError(
            str(sources[names.index(twice)]),
            f"two candidates are both named '{twice}'",
            "give each candidate study its own 'study:' name",
        )
    reference_name, reference_manifest = names[0], loaded[0][1]
    reference_data = {role: entry["sha256"] for role, entry in reference_manifest["data"].items()}
    for name, manifest, _, folder in loaded[1:]:
        data = {role: entry["sha256"] for role, entry in manifest["data"].items()}
        if data != reference_data:
            raise StudyError(
                str(folder),
                f"candidate '{name}' was fitted to other data than '{reference_name}'",
                "candidates must share the same data files, byte for byte",
            )
    groups = json.loads(loaded[0][2].posterior.attrs["arrhenia"])["measurement_groups"]
    named = {name: idata for name, _, idata, _ in loaded}
    steps.done("loaded candidates", ", ".join(names))
    table = comparison.compare(named, groups)
    sentences = comparison.verdict(table)
    steps.done("compared", f"{len(names)} candidates")
    verdicts, notes, trusted = _candidate_verdicts(loaded, table)
    result = ComparisonResult(target, table, sentences, {n: f for n, _, _, f in loaded}, verdicts, notes, trusted)
    manifest = {
        "arrhenia_version": __version__,
        "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "command_line": command_line or " ".join(sys.argv),
        "candidates": {
            name: {"results": str(folder), "config_sha256": m.get("config_sha256"), "diagnostics": verdicts[name]}
            for name, m, _, folder in loaded
        },
        "data": reference_manifest["data"],
        "pareto_k_threshold": comparison.pareto_k_threshold(
            loaded[0][2].posterior.sizes["chain"] * loaded[0][2].posterior.sizes["draw"]
        ),
        "versions": _versions(),
    }
    with StagedFolder(target, overwrite, inputs) as folder:
        folder.write_csv("comparison.csv", table)
        folder.write_text("verdict.txt", "\n".join(sentences) + "\n")
        plots.comparison_plot(table, folder.path("figures/comparison.png"))
        folder.write_text(
            "report.html",
            report.simple_report(
                folder.stage,
                title="Arrhenia comparison: " + ", ".join(names),
                intro=sentences + notes,
                tables=[("Comparison (PSIS-LOO; stacking weights)", table)],
                figures=[("figures/comparison.png", plots.caption("comparison.png"))],
                cautions=[],
            ),
        )
        folder.write_manifest(manifest)
    steps.done("wrote comparison", str(target))
    return result


def _candidate_verdicts(loaded: list, table: pd.DataFrame) -> tuple[dict[str, str], list[str], bool]:
    """Each candidate's verdict, a sentence for each that is not 'pass', and whether the comparison is to be
    trusted: every sampler converged and the preferred candidate describes the data. A losing candidate that
    misfits is what a comparison is for, not a reason to distrust it."""
    verdicts, notes, sampler_ok = {}, [], True
    for name, _, _, folder in loaded:
        try:
            saved = json.loads((folder / "diagnostics.json").read_text())
        except (OSError, ValueError):
            saved = {}
        verdicts[name] = str(saved.get("verdict", "unknown"))
        sampler = str(saved.get("sampler_verdict", verdicts[name]))
        if sampler != "pass":
            sampler_ok = False
            notes.append(
                f"The sampler of {name} ended '{sampler}': its numbers, and this comparison, are not to be trusted."
            )
        elif verdicts[name] != "pass":
            notes.append(f"{name} does not describe the data well (misfit; see its diagnostics.json).")
    pointwise = table[table["level"] == "pointwise"].sort_values("rank")
    best = str(pointwise["candidate"].iloc[0]) if not pointwise.empty else None
    best_fits = best is None or verdicts.get(best) == "pass"
    if sampler_ok and not best_fits:
        notes.append(f"The preferred candidate {best} misfits too: none of the candidates describes the data.")
    return verdicts, notes, sampler_ok and best_fits


@dataclass(frozen=True)
class PriorPredictiveCheck:
    """Where the prior predictive check was written, how many draws, and the share of measurements inside the
    priors' 90 % predictive interval."""

    results_dir: Path
    draws: int
    inside_90: float
    table: pd.DataFrame


def prior_predictive_check(
    study: Study, *, out: str | Path | None = None, draws: int = 300, overwrite: bool = False
) -> PriorPredictiveCheck:
    """Draw parameters from the priors alone, predict every measurement, and compare with the data.

    Writes ``prior_predictive.csv`` (the fit_checks columns, from prior draws) and
    ``figures/prior_predictive.png`` to ``out`` (default ``results/<study>-prior-predictive``).
    """
    import pymc as pm

    from .sampling import quiet_backend_logs

    quiet_backend_logs()
    target = Path(out) if out is not None else Path("results") / f"{study.name}-prior-predictive"
    check_target(target, overwrite, study_inputs(study))
    problem = open_problem(study)
    temperature_ref = study.reference_temperature_K or auto_reference_temperature(problem.temperatures_K)
    model = problem.build_model(temperature_ref)
    with model, np.errstate(all="ignore"):
        prior = pm.sample_prior_predictive(draws=draws, random_seed=study.sampling.seed)
    # fit_checks reads the predictive group; the prior draws stand in for the posterior ones here.
    stand_in = az.InferenceData(posterior_predictive=prior.prior_predictive)
    table = problem.fit_checks(stand_in)
    inside = float(table["inside_90"].mean())
    with StagedFolder(target, overwrite, study_inputs(study)) as folder:
        folder.write_csv("prior_predictive.csv", table)
        plots.predictive_check_plot(
            table,
            folder.path("figures/prior_predictive.png"),
            f"{study.name}: data against the priors' 90 % predictive intervals",
        )
        folder.write_manifest(
            {
                "arrhenia_version": __version__,
                "kind": "prior predictive check",
                "study": study.name,
                "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
                "config_sha256": sha256_json(study.canonical),
                "draws": draws,
                "seed": study.sampling.seed,
            }
        )
    return PriorPredictiveCheck(target, draws, inside, table)
