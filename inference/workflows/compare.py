"""Comparison of candidate studies fitted to the same data: the API behind ``arrhenia compare``."""

from __future__ import annotations

import json
from pathlib import Path

import arviz as az
import pandas as pd

from ..errors import StudyError
from ..inputs.config import load_study
from ..outputs import plots, report
from ..outputs.records import ComparisonResult
from ..outputs.reporting import Steps
from ..outputs.results import (
    StagedFolder,
    check_target,
)
from .fit import default_results_dir, fit_study, results_match


def _fit_overrides(sampling: dict) -> dict:
    """The batch's share of the sampling overrides (a batch chooses cores itself)."""
    return {k: v for k, v in sampling.items() if k != "cores" and v is not None}


def _candidate(
    source: Path, root: Path, overwrite: bool, quiet: bool, sampling: dict, steps: Steps
) -> tuple[str, dict, az.InferenceData, Path]:
    """(name, manifest, posterior, folder) of one candidate: a saved results folder, or a study file fitted
    into ``root/<study>`` unless a matching fit is already there."""
    from ..outputs.results import load_results

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
    from ..posterior import comparison

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
        "candidates": {
            name: {"results": str(folder), "config_sha256": m.get("config_sha256"), "diagnostics": verdicts[name]}
            for name, m, _, folder in loaded
        },
        "data": reference_manifest["data"],
        "pareto_k_threshold": comparison.pareto_k_threshold(
            loaded[0][2].posterior.sizes["chain"] * loaded[0][2].posterior.sizes["draw"]
        ),
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
        folder.write_manifest("comparison", manifest, command_line)
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
