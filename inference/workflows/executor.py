"""The executor of many independent tasks (fits of a batch, of a comparison, of a calibration) on Dask: a local
cluster of worker processes on loopback, or any running scheduler by address. A task whose worker process dies
is run once more; ``stop`` ends everything at once. Nothing here imports PyMC; the tasks do.
"""

from __future__ import annotations

import logging
import os
import signal
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from typing import Any

from ..errors import StudyError


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
