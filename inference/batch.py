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

import logging
import os
import signal
import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from .config import load_study
from .errors import ExitCode, StudyError
from .results import check_target, check_writable_parent
from .schema import Sampling

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
_COUNTS = {
    "draws": "number of draws",
    "tune": "number of tuning steps",
    "chains": "number of chains",
    "seed": "seed",
    "cores": "number of cores",
}


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


def schema_limits(model: type, field: str) -> tuple[int | None, int | None]:
    """The inclusive bounds a schema model sets on one of its integer fields (None where it sets none)."""
    found = model.model_json_schema()["properties"][field]
    for part in (found, *found.get("anyOf", ())):  # an optional field keeps its bounds inside "anyOf"
        if part.get("type") == "integer":
            return part.get("minimum"), part.get("maximum")
    return None, None


def check_count(where: str, value: int, what: str, low: int | None, high: int | None) -> None:
    """``StudyError`` naming ``where`` when ``value`` lies outside [low, high] (None: no bound)."""
    if (low is not None and value < low) or (high is not None and value > high):
        if low is None:
            allowed = f"give {high} or less"
        elif high is None:
            allowed = f"give {low} or more"
        else:
            allowed = f"give {low} to {high}"
        raise StudyError(where, f"{value} is not an allowed {what}", allowed)


def sampling_overrides(options: dict[str, int | None], prefix: str = "") -> dict[str, int]:
    """The sampling options that are set, each checked against its limits in ``schema.Sampling``; the first
    out of range is a ``StudyError`` naming ``prefix + name`` (``--draws`` on the command line)."""
    for name, value in options.items():
        if value is not None:
            check_count(prefix + name, value, _COUNTS[name], *schema_limits(Sampling, name))
    return {name: value for name, value in options.items() if value is not None}


def fit_one(
    study_path: str, out: str, cores: int | None, overwrite: bool, sampling: dict, command_line: str | None = None
) -> dict:
    """One batch task (runs in a worker): fit the study, and return its row of the batch table. The manifest
    records ``command_line`` (the batch's), not the worker's."""
    from .pipeline import fit_study

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


def warm_compiled_kernels() -> None:
    """Compile (or load from numba's cache) the integrator once here, so workers do not all compile at once."""
    import numpy as np

    from .network import build_network, parse_equation
    from .solution import NetworkSolver

    network = build_network(("A", "B"), ("warm",), (parse_equation("A -> B"),))
    solver = NetworkSolver(network, [np.array([1.0])])
    solver.solve(np.zeros((1, 1)), np.zeros((1, 0)), network.forward_orders, np.array([[1.0, 0.0]]))


@dataclass(frozen=True)
class Outcome:
    """How one task of ``Executor.outcomes`` ended: its position in the arguments, the function's value (None
    when the task was lost), whether it ran a second time after its worker died, and why it was lost (empty
    when it was not)."""

    index: int
    value: Any
    retried: bool = False
    lost: str = ""


class Executor:
    """A Dask client on a local cluster (``workers`` processes, one thread each, on loopback) or on
    ``scheduler``. A task whose worker process dies is run once more; ``stop`` ends everything at once."""

    def __init__(self, workers: int | None = None, scheduler: str | None = None) -> None:
        import dask
        from distributed import Client, LocalCluster

        self.cluster = None
        self._futures: list = []
        if scheduler is not None:
            try:
                self.client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError) as error:
                raise StudyError(f"--scheduler {scheduler}", f"cannot reach the Dask scheduler ({error})") from None
            self.workers = max(1, len(self.client.scheduler_info().get("workers", {})))
            return
        self.workers = workers or os.cpu_count() or 1
        settings = {
            # Non-daemonic workers may start processes of their own: chains run in parallel when cores allow.
            "distributed.worker.daemon": False,
            # The worker's statistical profiler takes the GIL every few ms from the sampler's Python loop.
            "distributed.worker.profile.enabled": False,
            # A task whose worker dies comes back to us at once (KilledWorker), so the one retry of ``outcomes`` is
            # the only one and its row can say so.
            "distributed.scheduler.allowed-failures": 0,
        }
        with dask.config.set(settings):
            self.cluster = LocalCluster(
                n_workers=self.workers,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",  # nothing of the local cluster is reachable from other machines
                dashboard_address="127.0.0.1:0",  # any free port: several batches may run at once
                silence_logs=logging.ERROR,
                preload=[__name__],  # dask_setup below, in every worker process
            )
        self.client = Client(self.cluster)

    def map(
        self, function: Callable[..., Any], arguments: list[tuple], on_done: Callable[[Any], None] | None = None
    ) -> list:
        """Run ``function(*args)`` for every tuple of ``arguments``; their values in input order (``on_done`` sees
        each as it arrives). A task lost after its one retry (see ``outcomes``) raises ``RuntimeError``."""
        values: list = [None] * len(arguments)
        for outcome in self.outcomes(function, arguments):
            if outcome.lost:
                raise RuntimeError(f"task {outcome.index} of {len(arguments)}: {outcome.lost}")
            values[outcome.index] = outcome.value
            if on_done is not None:
                on_done(outcome.value)
        return values

    def outcomes(self, function: Callable[..., Any], arguments: list[tuple]) -> Iterator[Outcome]:
        """Run ``function(*args)`` for every tuple of ``arguments``; yields an ``Outcome`` per task as it ends.

        A task whose worker process died (Dask's ``KilledWorker``) is submitted once more; a second death, or any
        other error of Dask's, makes it lost. Errors raised by ``function`` itself are lost tasks too.
        """
        from distributed import KilledWorker, as_completed

        index_of: dict = {}
        retried: set[int] = set()

        def submit(index: int) -> Any:
            future = self.client.submit(function, *arguments[index], pure=False)
            index_of[future.key] = index
            self._futures.append(future)
            return future

        pending = as_completed([submit(index) for index in range(len(arguments))])
        for future in pending:
            index = index_of[future.key]
            try:
                outcome = Outcome(index, future.result(), index in retried)
            except KilledWorker:
                if index not in retried:
                    retried.add(index)
                    pending.add(submit(index))
                    continue
                outcome = Outcome(index, None, True, "it died again (out of memory, or killed); not run a third time")
            except Exception as error:  # a lost task is a row of the table, never the end of the batch
                lost = f"Dask could not run it: {type(error).__name__}: {error}".splitlines()[0]
                outcome = Outcome(index, None, index in retried, lost)
            yield outcome

    def stop(self) -> None:
        """Cancel every task and kill the local workers at once, so that no fit writes anything more (their chain
        processes die with them). On a scheduler, tasks that are already running may still finish."""
        if self._futures:
            with suppress(Exception):  # the scheduler may be gone already; local workers are killed below regardless
                self.client.cancel(self._futures, force=True)
        if self.cluster is None:
            return
        for nanny in list(self.cluster.workers.values()):
            nanny.close_gracefully()  # the nanny must not start a new worker when its worker dies
            pid = getattr(nanny, "pid", None)
            if pid:
                with suppress(ProcessLookupError):
                    os.kill(pid, signal.SIGKILL)

    def close(self) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()

    def __enter__(self) -> Executor:
        return self

    def __exit__(self, kind: type[BaseException] | None, *exc: object) -> None:
        if kind is not None:
            with deferred_interrupts():
                self.stop()
                self.close()
            return
        self.close()


def dask_setup(worker: object) -> None:
    """Dask's preload hook, run in every local worker process as it starts.

    Ctrl-C in a terminal reaches the whole process group; the client stops the batch and kills its workers
    itself, so a worker ignores SIGINT instead of printing a traceback while its running fit goes on.
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)


@contextmanager
def deferred_interrupts() -> Iterator[None]:
    """Ignore Ctrl-C and SIGTERM for the block (in the main thread), so a second Ctrl-C cannot cut short the
    stopping of workers or the writing of the table."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = {number: signal.signal(number, signal.SIG_IGN) for number in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)


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
    from .pipeline import default_results_dir, results_match

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
            warm_compiled_kernels()
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
    root.mkdir(parents=True, exist_ok=True)
    staged = summary_path.with_name(f".{summary_path.name}.{os.getpid()}")
    table.to_csv(staged, index=False)
    os.replace(staged, summary_path)
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
