"""Many fits at once on Dask: a local cluster of worker processes, or any running scheduler by address.

Each task is one ``fit_study`` into ``root/<study>/``, so a study's results folder is what ``arrhenia fit``
writes with the same seed (sampling does not depend on how many cores run the chains). Workers run their
chains in sequence when the batch already fills the cores, so the machine is never oversubscribed. Compiled
kernels are built once in this process before workers start; PyTensor's compile cache is one folder shared by
all workers and guarded by PyTensor's own file lock. A study that fails is a row of the batch table, never the
end of the batch. Nothing here imports PyMC; the workers do.
"""

from __future__ import annotations

import logging
import os
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from .config import load_study
from .errors import ExitCode, StudyError
from .results import check_target

#: Columns of ``batch_summary.csv``.
BATCH_COLUMNS = ["study", "status", "verdict", "wall_s", "results", "message"]

#: Status of a study in the batch table, and the exit code it maps to (the worst one of a batch wins).
STATUS_EXIT = {
    "fitted": ExitCode.DONE,
    "up to date": ExitCode.DONE,
    "not converged": ExitCode.UNTRUSTED,
    "bad input": ExitCode.BAD_INPUT,
    "failed": ExitCode.FAULT,
}
_SEVERITY = [ExitCode.DONE, ExitCode.UNTRUSTED, ExitCode.BAD_INPUT, ExitCode.FAULT]


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


def fit_one(study_path: str, out: str, cores: int | None, overwrite: bool, sampling: dict) -> dict:
    """One batch task (runs in a worker): fit the study, and return its row of the batch table."""
    from .pipeline import fit_study

    started = time.perf_counter()
    row = {"study": study_path, "status": "fitted", "verdict": "", "results": out, "message": ""}
    try:
        result = fit_study(study_path, out=out, cores=cores, overwrite=overwrite, quiet=True, **sampling)
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


class Executor:
    """A Dask client on a local cluster (``workers`` processes, one thread each) or on ``scheduler``."""

    def __init__(self, workers: int | None = None, scheduler: str | None = None) -> None:
        import dask
        from distributed import Client, LocalCluster

        self.cluster = None
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
        }
        with dask.config.set(settings):
            self.cluster = LocalCluster(
                n_workers=self.workers,
                threads_per_worker=1,
                processes=True,
                dashboard_address=":0",  # any free port: several batches may run at once
                silence_logs=logging.ERROR,
            )
        self.client = Client(self.cluster)

    def map(self, function: Callable[..., Any], arguments: Iterable[tuple], on_done: Callable[[Any], None]) -> list:
        """Run ``function(*args)`` for every tuple of ``arguments``; results in input order. ``on_done`` sees
        each result as it arrives."""
        from distributed import as_completed

        futures = [self.client.submit(function, *args, pure=False) for args in arguments]
        order = {future.key: index for index, future in enumerate(futures)}
        results: list = [None] * len(futures)
        for future in as_completed(futures):
            value = future.result()
            results[order[future.key]] = value
            on_done(value)
        return results

    def close(self) -> None:
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()

    def __enter__(self) -> Executor:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


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
) -> BatchResult:
    """Fit every study into ``root/<study>/`` on Dask and write ``root/batch_summary.csv``.

    A study whose results folder already matches its study file and data (by the manifest's hashes) is
    skipped unless sampling settings are overridden; a folder that does not match is refitted only with
    ``overwrite``. Studies with bad input, faults or failed convergence are rows of the table.
    """
    from .pipeline import default_results_dir, results_match

    root = Path(root)
    check_target(root, overwrite=True)  # a folder (or nothing yet) in a writable place
    sampling = {
        k: v for k, v in {"draws": draws, "tune": tune, "chains": chains, "seed": seed}.items() if v is not None
    }
    rows: list[dict] = []
    tasks: list[tuple[str, str]] = []
    seen: dict[str, str] = {}

    def report(row: dict) -> None:
        if not quiet:
            verdict = f", verdict {row['verdict']}" if row["verdict"] else ""
            message = f": {row['message']}" if row["message"] else ""
            print(f"  {row['study']}: {row['status']}{verdict} ({row['wall_s']:.1f} s){message}", flush=True)

    for source in sources:
        source = Path(source)
        try:
            study = load_study(source)
            folder = default_results_dir(study, root)
            if study.name in seen:
                raise StudyError(str(source), f"is named '{study.name}' like {seen[study.name]}", "rename one")
            seen[study.name] = str(source)
            if folder.exists() and results_match(folder, study) and not sampling:
                verdict = _saved_verdict(folder)
                rows.append(_row(study.name, "up to date", verdict, 0.0, folder, "matches its study and data"))
                report(rows[-1])
                continue
            check_target(folder, overwrite)
        except StudyError as error:
            rows.append(_row(str(source), "bad input", "", 0.0, "", str(error)))
            report(rows[-1])
            continue
        tasks.append((str(source.resolve()), str(folder.resolve())))

    used_workers = 0
    if tasks:
        warm_compiled_kernels()
        with Executor(min(workers or os.cpu_count() or 1, len(tasks)), scheduler) as executor:
            used_workers = executor.workers
            if not quiet:
                where = f"scheduler {scheduler}" if scheduler else "a local Dask cluster"
                print(f"fitting {len(tasks)} studies on {where} with {used_workers} worker(s)", flush=True)
            cores = cores_per_fit(used_workers, scheduler)
            arguments = [(path, out, cores, overwrite, sampling) for path, out in tasks]
            rows += executor.map(fit_one, arguments, report)
    table = pd.DataFrame(rows, columns=BATCH_COLUMNS)
    summary_path = root / "batch_summary.csv"
    root.mkdir(parents=True, exist_ok=True)
    staged = summary_path.with_name(f".{summary_path.name}.{os.getpid()}")
    table.to_csv(staged, index=False)
    os.replace(staged, summary_path)  # a reader sees the old table or the new one, never half of one
    return BatchResult(table, summary_path, used_workers)


def _saved_verdict(folder: Path) -> str:
    import json

    try:
        return str(json.loads((folder / "diagnostics.json").read_text())["verdict"])
    except (OSError, ValueError, KeyError):
        return ""


def _row(study: str, status: str, verdict: str, wall: float, folder: Path | str, message: str) -> dict:
    values = (study, status, verdict, wall, str(folder), message)
    return dict(zip(BATCH_COLUMNS, values, strict=True))
