"""Many fits at once on Dask: a local cluster of worker processes, or any running scheduler by address.

Each task is one ``fit_study`` into ``root/<study>/``, so a study's results folder is what ``arrhenia fit``
writes with the same seed (sampling does not depend on how many cores run the chains). Workers run their
chains in sequence when the batch already fills the cores, so the machine is never oversubscribed. Compiled
kernels are built once in this process before workers start; PyTensor's compile cache is one folder shared by
all workers and guarded by PyTensor's own file lock. A study that fails is a row of the batch table, never the
end of the batch: a study whose worker process died is run once more, then reported as failed. Ctrl-C (or
SIGTERM) cancels the tasks, kills the local workers at once (their chain processes die with them) and writes
the table of what is known. The local cluster listens on loopback only. Nothing here imports PyMC; the workers
do.
"""

from __future__ import annotations

import os
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import ExitCode, StudyError
from ..inputs.config import load_study
from ..inputs.options import check_count, sampling_overrides
from ..outputs.results import check_target, check_writable_parent, write_table
from ..physics.solution import compile_kernels
from .executor import Executor, Outcome, deferred_interrupts

#: Columns of ``batch_summary.csv``.
BATCH_COLUMNS = ["study", "status", "verdict", "wall_s", "results", "message"]

#: Status of a study in the batch table, and the exit code it maps to (the worst one of a batch wins).
STATUS_EXIT = {
    "fitted": ExitCode.DONE,
    "up to date": ExitCode.DONE,
    "not converged": ExitCode.UNTRUSTED,
    "bad input": ExitCode.BAD_INPUT,
    "failed": ExitCode.FAULT,
    "interrupted": ExitCode.INTERRUPTED,
}
_SEVERITY = [ExitCode.DONE, ExitCode.UNTRUSTED, ExitCode.BAD_INPUT, ExitCode.FAULT, ExitCode.INTERRUPTED]

#: What each sampling option counts, as error messages name it.


@dataclass(frozen=True)
class BatchResult:
    """The batch table (``BATCH_COLUMNS``), where it was written, and the exit code of the batch."""

    table: pd.DataFrame
    summary_path: Path
    workers: int

    @property
    def exit_code(self) -> ExitCode:
        """The worst of the studies' codes; a fit whose verdict is not ``pass`` counts as untrusted, as in
        ``arrhenia fit``."""
        codes = [
            ExitCode.UNTRUSTED if STATUS_EXIT[status] == ExitCode.DONE and verdict != "pass" else STATUS_EXIT[status]
            for status, verdict in zip(self.table["status"], self.table["verdict"], strict=True)
        ]
        return max(codes, key=_SEVERITY.index, default=ExitCode.DONE)


def fit_one(
    study_path: str, out: str, cores: int | None, overwrite: bool, sampling: dict, command_line: str | None = None
) -> dict:
    """One batch task (runs in a worker): fit the study, and return its row of the batch table. The manifest
    records ``command_line`` (the batch's), not the worker's."""
    from .fit import fit_study

    started = time.perf_counter()
    row = {"study": study_path, "status": "fitted", "verdict": "", "results": out, "message": ""}
    try:
        result = fit_study(
            study_path, out=out, cores=cores, overwrite=overwrite, quiet=True, command_line=command_line, **sampling
        )
        row["study"] = result.study.name
        row["verdict"] = result.diagnostics.verdict
        if result.diagnostics.verdict == "fail":
            row["status"] = "not converged"
            row["message"] = " ".join(result.diagnostics.advice[:1])
    except StudyError as error:
        row.update(status="bad input", message=str(error))
    except Exception as error:  # a fault in one study must not end the batch; the table says what happened
        row.update(status="failed", message=f"{type(error).__name__}: {error}".splitlines()[0])
    row["wall_s"] = round(time.perf_counter() - started, 2)
    return row


def cores_per_fit(workers: int, scheduler: str | None) -> int:
    """Cores each fit may use for its chains: 1 (chains in sequence) when the workers already fill the machine
    or run elsewhere; otherwise the cores left per worker."""
    if scheduler is not None:
        return 1
    return max(1, (os.cpu_count() or 1) // max(1, workers))


def run_batch(
    sources: list[str | Path],
    *,
    root: str | Path = "results",
    workers: int | None = None,
    scheduler: str | None = None,
    overwrite: bool = False,
    quiet: bool = False,
    draws: int | None = None,
    tune: int | None = None,
    chains: int | None = None,
    seed: int | None = None,
    command_line: str | None = None,
) -> BatchResult:
    """Fit every study into ``root/<study>/`` on Dask and write ``root/batch_summary.csv``.

    A study whose results folder already matches its study file and data (by the manifest's hashes) is
    skipped unless sampling settings are overridden; a folder that does not match is refitted only with
    ``overwrite``. Studies with bad input, faults or failed convergence are rows of the table. Sampling
    settings out of the schema's range are refused before anything starts (``StudyError``). Each manifest
    records ``command_line`` (default: this process's). When interrupted (Ctrl-C, SIGTERM), the table of what
    is known is written, a note on the exception says which studies finished, and the exception goes on.
    """
    from .fit import default_results_dir, results_match

    sampling = sampling_overrides({"draws": draws, "tune": tune, "chains": chains, "seed": seed})
    if workers is not None:
        check_count("workers", workers, "number of workers", 1, None)
    root = Path(root)
    check_writable_parent(root)  # a folder (or nothing yet) in a writable place
    command_line = command_line or " ".join(sys.argv)
    rows: dict[int, dict] = {}  # by position in ``sources``: the table keeps the order given
    tasks: list[tuple[int, str, str, str]] = []  # (position, study name, study file, results folder)
    seen: dict[str, str] = {}

    def report(row: dict) -> None:
        if not quiet:
            verdict = f", verdict {row['verdict']}" if row["verdict"] else ""
            message = f": {row['message']}" if row["message"] else ""
            print(f"  {row['study']}: {row['status']}{verdict} ({row['wall_s']:.1f} s){message}", flush=True)

    for position, source in enumerate(map(Path, sources)):
        try:
            study = load_study(source)
            folder = default_results_dir(study, root)
            if study.name in seen:
                raise StudyError(str(source), f"is named '{study.name}' like {seen[study.name]}", "rename one")
            seen[study.name] = str(source)
            if folder.exists() and results_match(folder, study) and not sampling:
                verdict = _saved_verdict(folder)
                rows[position] = _row(study.name, "up to date", verdict, 0.0, folder, "matches its study and data")
                report(rows[position])
                continue
            check_target(folder, overwrite)
        except StudyError as error:
            rows[position] = _row(str(source), "bad input", "", 0.0, "", str(error))
            report(rows[position])
            continue
        tasks.append((position, study.name, str(source.resolve()), str(folder.resolve())))

    used_workers = 0
    started, clock = time.time(), time.perf_counter()
    try:
        if tasks:
            compile_kernels()
            with Executor(min(workers or os.cpu_count() or 1, len(tasks)), scheduler) as executor:
                used_workers = executor.workers
                if not quiet:
                    where = f"scheduler {scheduler}" if scheduler else "a local Dask cluster"
                    print(f"fitting {len(tasks)} studies on {where} with {used_workers} worker(s)", flush=True)
                cores = cores_per_fit(used_workers, scheduler)
                arguments = [(path, out, cores, overwrite, sampling, command_line) for _, _, path, out in tasks]
                for outcome in executor.outcomes(fit_one, arguments):
                    position, name, _, _ = tasks[outcome.index]
                    rows[position] = _outcome_row(outcome, name, time.perf_counter() - clock)
                    report(rows[position])
    except BaseException as stop:
        if isinstance(stop, StudyError):  # the scheduler cannot be reached: nothing was run, nothing is written
            raise
        with deferred_interrupts():  # the executor has stopped its workers; nothing more will be written
            interrupted = not isinstance(stop, Exception)
            for position, name, _, out in tasks:
                if position not in rows:
                    rows[position] = _unfinished_row(name, out, started, time.perf_counter() - clock, interrupted)
            _, summary_path = _write_table(rows, root)
        stop.add_note(_interruption_note(rows, tasks, summary_path, local=scheduler is None))
        raise
    table, summary_path = _write_table(rows, root)
    return BatchResult(table, summary_path, used_workers)


def _write_table(rows: dict[int, dict], root: Path) -> tuple[pd.DataFrame, Path]:
    """The batch table in the order of the studies given, written atomically to ``root/batch_summary.csv`` (a
    reader sees the old table or the new one, never half of one)."""
    table = pd.DataFrame([rows[position] for position in sorted(rows)], columns=BATCH_COLUMNS)
    summary_path = root / "batch_summary.csv"
    write_table(summary_path, table)
    return table, summary_path


def _outcome_row(outcome: Outcome, name: str, wall: float) -> dict:
    """The table row of a task that ended: its own row, or a failed one when its worker was lost."""
    row = _row(name, "failed", "", round(wall, 2), "", outcome.lost) if outcome.lost else dict(outcome.value)
    if outcome.retried:
        row["message"] = "; ".join(filter(None, ["run a second time after its worker process died", row["message"]]))
    return row


def _unfinished_row(name: str, out: str, started: float, wall: float, interrupted: bool) -> dict:
    """The row of a task the batch did not hear back from: fitted after all if a complete results folder
    appeared after the batch started (it finished as the batch stopped), else interrupted (or failed)."""
    folder = Path(out)
    try:
        finished = (folder / "posterior.nc").is_file() and (folder / "manifest.json").stat().st_mtime >= started
    except OSError:
        finished = False
    if finished:
        return _row(name, "fitted", _saved_verdict(folder), round(wall, 2), folder, "finished as the batch stopped")
    if interrupted:
        return _row(name, "interrupted", "", round(wall, 2), "", "the batch was interrupted; no results folder")
    return _row(name, "failed", "", round(wall, 2), "", "the batch stopped on a fault of Arrhenia before this ended")


def _interruption_note(rows: dict[int, dict], tasks: list[tuple], summary_path: Path, local: bool) -> str:
    """One line for the user: which studies of this batch were fitted, which were not, and where the table is."""
    fitted = [rows[p]["study"] for p, *_ in tasks if rows[p]["status"] in ("fitted", "not converged")]
    unfinished = [rows[p]["study"] for p, *_ in tasks if rows[p]["status"] not in ("fitted", "not converged")]
    parts = [f"results written for {', '.join(fitted)}" if fitted else "no results were written"]
    if unfinished:
        parts.append(f"not finished: {', '.join(unfinished)}")
        if not local:
            parts.append("fits already running on the scheduler's workers may still finish")
    return "; ".join([*parts, f"table in {summary_path}"])


def _saved_verdict(folder: Path) -> str:
    import json

    try:
        return str(json.loads((folder / "diagnostics.json").read_text())["verdict"])
    except (OSError, ValueError, KeyError):
        return ""


def _row(study: str, status: str, verdict: str, wall: float, folder: Path | str, message: str) -> dict:
    values = (study, status, verdict, wall, str(folder), message)
    return dict(zip(BATCH_COLUMNS, values, strict=True))
