"""Plain-text reports for the terminal: the resolved study (``check``) and the outcome of a fit."""

from __future__ import annotations

import math
import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Protocol

from ..inputs.study import Study

if TYPE_CHECKING:
    from .records import ComparisonResult, FitResult, PredictionResult


class StudyKind(Protocol):
    """What ``check_report`` needs of a kind of study."""

    def check_lines(self) -> list[str]: ...

    def warnings(self) -> list[str]: ...


CAUTION = (
    "Caution: kinetics fitted over a narrow temperature range are not a basis for thermal-safety decisions. "
    "Extrapolating beyond the measured temperatures widens every uncertainty; an exothermic scale-up needs "
    "calorimetry and a process-safety review under local codes and licensed practice."
)


def check_report(study: Study, problem: StudyKind, *, sampling_next: bool = False) -> str:
    """What the study means once validated: species, reactions, priors in their units, T_ref, counts of data;
    ``problem`` is the study's kind opened on its data; ``sampling_next``: prior draws follow (not "nothing was
    sampled")."""
    lines = [f"study {study.name}" + (f": {study.title}" if study.title else "")]
    lines += problem.check_lines()
    s = study.sampling
    lines.append(
        f"  sampling: {s.chains} chains x {s.draws} draws ({s.tune} tuning), seed {s.seed}, "
        f"target_accept {s.target_accept:g}"
    )
    lines += [f"  warning: {note}" for note in (*study.warnings, *problem.warnings())]
    lines.append(f"  the study is valid; {'drawing from the priors' if sampling_next else 'nothing was sampled'}")
    return "\n".join(lines)


def fit_report(result: FitResult) -> str:
    """The verdict, the posterior summary next to the classical fit, and where the files are."""
    d = result.diagnostics
    lines = [
        "",
        f"diagnostics: {d.verdict.upper()}  ("
        + (f"max R-hat {d.r_hat_max:.3f}" if math.isfinite(d.r_hat_max) else "R-hat needs two or more chains")
        + f", min ESS bulk {d.ess_bulk_min:.0f} / "
        f"tail {d.ess_tail_min:.0f}, {d.divergences} divergences, "
        f"{result.fit_checks['inside_90'].mean():.0%} of measurements inside their 90 % predictive interval)",
    ]
    lines += [f"  - {advice}" for advice in d.advice]
    if d.misfit:
        lines.append(
            f"  misfit: {len(d.misfit)} sign(s) that the model does not describe the data "
            f"({', '.join(f['check'] for f in d.misfit)}); their numbers are under 'misfit' in diagnostics.json, "
            "every measurement's check in fit_checks.csv"
        )
    if d.verdict == "pass":
        lines.append("  the sampler shows no sign of trouble and the model describes the data")
    table = result.summary[["parameter", "unit", "median", "q05", "q95", "r_hat"]]
    lines += ["", "posterior (median and 90 % interval):", table.to_string(index=False, float_format="{:.4g}".format)]
    if "classical.csv" in result.tables:
        classical = result.tables["classical.csv"]
        classical = classical[classical["quantity"].isin(["Ea", "A"])]
        lines += [
            "",
            "classical estimates (95 % confidence intervals):",
            classical.drop(columns=["se"]).to_string(index=False, float_format="{:.4g}".format),
        ]
    lines += [
        "",
        "posterior correlations (why T_ref matters):",
        result.correlations.to_string(index=False, float_format="{:.3f}".format),
    ]
    lines += ["", *result.extrapolations, CAUTION, "", f"results: {result.results_dir}"]
    return "\n".join(lines)


def comparison_report(result: ComparisonResult) -> str:
    """The verdict sentences and the comparison table, and any candidate whose sampler was not trusted."""
    table = result.table[["level", "rank", "candidate", "elpd", "se", "elpd_diff", "dse", "weight", "high_pareto_k"]]
    lines = [
        "",
        "comparison (PSIS-LOO; weights by stacking):",
        table.to_string(index=False, float_format="{:.2f}".format),
        "",
    ]
    lines += result.verdict
    lines += [f"warning: {note}" for note in result.notes]
    lines += ["", f"comparison: {result.results_dir}"]
    return "\n".join(lines)


#: The unit shown for conversions, yields, selectivities and shares (blank in the tables the code reads).
FRACTION = "fraction"


def prediction_report(result: PredictionResult) -> str:
    """The scalar answers with their 90 % intervals, every extrapolation flag, and the cautions."""
    columns = ["scenario", "quantity", "unit", "median", "q05", "q95", "share", "extrapolated"]
    table = result.summary[[c for c in columns if c in result.summary]]
    if "share" in table and table["share"].isna().all():
        table = table.drop(columns="share")
    table = table.assign(unit=table["unit"].fillna("").replace("", FRACTION))
    lines = [
        "",
        "predictions (posterior median and 90 % interval, q05 to q95, over posterior draws):",
        table.to_string(index=False, float_format="{:.4g}".format, na_rep=""),
        "",
    ]
    lines += result.extrapolations
    lines += [CAUTION, "", f"predictions: {result.results_dir}"]
    return "\n".join(lines)


#: Whether this process said already that the network solver is being compiled (``compile_notice``).
_compile_notice_given = False


def compile_notice(study: Study) -> str | None:
    """Once per process: the line saying that this fit compiles the network solver (numba, about a minute); None
    when the study has no network, numba's cache holds the solver already, or the line was given."""
    global _compile_notice_given
    from ..physics.integrator import solver_compiled_on_disk

    if _compile_notice_given or study.network is None or solver_compiled_on_disk() is not False:
        return None
    _compile_notice_given = True
    return (
        "first fit in this installation: compiling the network solver (numba), about half a minute; later fits reuse it"
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

    @contextmanager
    def measure(self, part: str) -> Iterator[None]:
        """Record the wall time (s) of a part of a step under ``part``, without a line on screen."""
        started = time.perf_counter()
        try:
            yield
        finally:
            self.timings[part] = round(time.perf_counter() - started, 3)


def process_age_s() -> float | None:
    """Seconds since this process started (interpreter start and imports, when called first thing in a
    command); None where the operating system does not say (it is read from Linux's /proc)."""
    try:
        start_ticks = int(Path("/proc/self/stat").read_text().rsplit(")", 1)[1].split()[19])
        uptime = float(Path("/proc/uptime").read_text().split()[0])
        return round(uptime - start_ticks / os.sysconf("SC_CLK_TCK"), 3)
    except (OSError, ValueError, IndexError, AttributeError):
        return None
