"""The steps of a fit, in order: the Python API behind ``arrhenia fit`` (and usable from a notebook).

>>> from inference import load_study, fit_study
>>> result = fit_study(load_study("configs/example_rate_constants.yaml"), out="results/example")
>>> result.summary          # pandas DataFrame, see README for the columns
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import yaml

from .._version import __version__
from ..errors import StudyError
from ..inputs.config import load_study
from ..inputs.schema import Sampling
from ..inputs.study import Study
from ..model.sampling import compile_ahead, log_density_function, non_finite_start, sample_posterior, scratch_folder
from ..outputs import plots, report
from ..outputs.drawing import drawn_meanwhile
from ..outputs.records import FitResult
from ..outputs.reporting import CAUTION, Steps, compile_notice, process_age_s
from ..outputs.results import (
    StagedFolder,
    binding_differences,
    read_manifest,
    reserve,
    sha256_file,
    sha256_json,
)
from ..physics.arrhenius import auto_reference_temperature
from ..physics.solution import background_compile_running
from ..posterior.diagnostics import assess
from ..posterior.per_temperature import POINTS_FILE, TemperaturePoints
from ..posterior.summaries import (
    correlation_table,
    derived_quantities,
    extrapolated_rows,
    extrapolation_notes,
    fit_checks_file,
    summary_table,
)
from .kinds import Problem, open_problem

if TYPE_CHECKING:
    from pymc.model.core import ValueGradFunction


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


#: The process's age is the command's start-up (interpreter and imports) only at its first fit; a command that
#: fits several studies (demo, compare) records it once.
_command_start_recorded = False


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
    global _command_start_recorded
    steps = Steps(quiet)
    if command_line is not None and not _command_start_recorded and (age := process_age_s()) is not None:
        steps.timings["start of the command (interpreter and imports)"] = age
    _command_start_recorded = True
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

    if notice := compile_notice(study):
        steps.say(notice)
    with scratch_folder() as scratch:
        failure_log = scratch / "solver-failures"
        model = problem.build_model(temperature_ref, failure_log)
        log_density = _check_start(model, problem, temperature_ref)
        steps.done("built model")
        idata, failures = sample_posterior(
            model,
            sampling,
            progress=not quiet,
            failure_log=failure_log,
            timings=steps.timings,
            log_density=log_density,
        )
    steps.done("sampled", f"{sampling.chains} chains x {sampling.draws} draws after {sampling.tune} tuning")
    if note := slow_sampling_note(idata, sampling):
        steps.say(f"note: {note}")

    fit_checks = problem.fit_checks(idata)
    diagnostics = assess(
        idata, problem.kinetic_var_names(idata), solver_failures=failures, problem=problem, fit_checks=fit_checks
    )
    quantities = derived_quantities(study, idata.posterior, temperature_ref)
    points = problem.temperature_points(idata, temperature_ref)  # beside the Arrhenius line, in its figure
    span = np.array(problem.temperature_span_K)
    result = FitResult(
        study=study,
        results_dir=target,
        reference_temperature_K=temperature_ref,
        diagnostics=diagnostics,
        summary=summary_table(quantities, temperature_ref, extrapolated_rows(study, span)),
        tables={**problem.extra_tables(), **({POINTS_FILE: points.table} if points and len(points.table) else {})},
        correlations=correlation_table(study, idata.posterior, temperature_ref),
        fit_checks=fit_checks_file(study, fit_checks),
        extrapolations=extrapolation_notes(study, span),
        idata=idata,
    )
    steps.done("summarised", f"verdict {diagnostics.verdict}")
    _write(result, problem, fit_checks, sampling.model_dump(), quantities, overwrite, steps, command_line, points)
    steps.done("wrote results", str(target))
    if study.scenarios:
        from ..inputs.schema import ScenarioFile
        from .predict import predict

        predicted = predict(
            target, ScenarioFile(scenarios=study.scenarios), overwrite=True, quiet=quiet, command_line=command_line
        )
        result = replace(result, predictions=predicted)
        steps.done("predicted scenarios", str(predicted.results_dir))
    return result


#: Mean NUTS gradient evaluations per draw from which a fit with the diagonal mass matrix is told about the
#: dense one (a well-scaled posterior takes about 3 to 7; our measurements: the demo network 6, the stiff
#: benchmark 29, which a dense mass matrix brought to 7).
MANY_STEPS_PER_DRAW = 15


def slow_sampling_note(idata, sampling: Sampling) -> str | None:
    """A note when NUTS needed many gradient evaluations per draw with the diagonal mass matrix, else None."""
    steps = float(idata.sample_stats["n_steps"].mean()) if "n_steps" in idata.sample_stats else 0.0
    if sampling.mass_matrix != "diagonal" or steps < MANY_STEPS_PER_DRAW:
        return None
    return (
        f"NUTS took {steps:.0f} gradient evaluations per draw (a well-scaled posterior takes about 3 to 7): "
        "parameters that correlate strongly (correlations.csv) make the diagonal mass matrix take short steps. "
        "'sampling: {mass_matrix: dense}' follows such correlations and often samples several times faster; "
        "where the correlation bends along the posterior it may not."
    )


def _check_start(model, problem: Problem, temperature_ref: float) -> ValueGradFunction:
    """A log-density that is not finite where sampling starts is the study's fault: say which term. Returns the
    compiled log density (``model.sampling.log_density_function``) for the sampler."""
    log_density = log_density_function(model)
    if background_compile_running():  # the first evaluation below waits for it: compile what comes later
        compile_ahead(model)
    terms, measurements = non_finite_start(model, log_density)
    if not terms:
        return log_density
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
    fit_checks: pd.DataFrame,
    sampling: dict,
    quantities: dict,
    overwrite: bool,
    steps: Steps,
    command_line: str | None,
    points: TemperaturePoints | None = None,
) -> None:
    """Write the results folder; ``fit_checks`` are the checks with plain column names, as the figures read them."""
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
        "temperature_range_K": list(problem.temperature_span_K),
    }
    for group in idata.groups():
        idata[group].attrs["arrhenia"] = json.dumps(attrs, sort_keys=True)
    coverage = float(result.fit_checks["inside_90"].mean())
    manifest = {
        "study": study.name,
        "seed": sampling["seed"],
        "sampling": sampling,
        "reference_temperature_K": result.reference_temperature_K,
        "study_file": {"path": str(study.path), "sha256": sha256_file(study.path)},
        "config_sha256": sha256_json(study.canonical),
        "data": {role: {"path": str(path), "sha256": sha256_file(path)} for role, path in study.data_files},
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
        pair, priors = folder.path("figures/pair.png"), folder.path("figures/prior_posterior.png")
        figures = [  # the two largest first: the drawing processes take every other job
            lambda: plots.pair_plot(_pair_columns(quantities), pair, seed=sampling["seed"]),
            lambda: plots.prior_posterior_plot(
                study, idata.posterior, priors, temperature_ref=result.reference_temperature_K
            ),
            *problem.figures(folder, idata, result.reference_temperature_K, fit_checks, points),
        ]
        with (
            steps.measure("draw figures (posterior.nc written meanwhile)"),
            drawn_meanwhile(figures),
            steps.measure("write posterior.nc"),
        ):
            idata.to_netcdf(str(folder.path("posterior.nc")))
        folder.write_text("study.yaml", resolved_study_yaml(study, result.reference_temperature_K, sampling))
        order = ["arrhenius.png", "pair.png", "prior_posterior.png"]
        names = sorted(
            (p.name for p in folder.path("figures").iterdir()),
            key=lambda n: (order.index(n) if n in order else len(order), n),
        )
        with steps.measure("write report.html"):
            html = report.fit_report(
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
                arrhenius_notes=points.sentences() if points is not None else None,
            )
            folder.write_text("report.html", html)
        folder.write_manifest("fit", manifest, command_line)


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
    if not folder.exists():
        return [f"{folder} does not exist (no results there)"]
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
