"""Figures drawn in forked processes while the fitting process goes on writing (the posterior's NetCDF file).

A fit's figures take about as long as the rest of its writing; drawing them in processes of their own, one per
core, while this process writes the rest, keeps them from adding to the fit's wall time. Each figure is a job
that writes its own file; nothing comes back from the processes.
"""

from __future__ import annotations

import multiprocessing
import os
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager

from ..processes import heap_frozen_for_fork

#: One figure: draws it and writes its file.
FigureJob = Callable[[], None]

_jobs: Sequence[FigureJob] = ()


def _draw_share(first: int, step: int) -> None:
    """In a forked process: jobs first, first + step, ... of the ones the parent set before it forked."""
    for index in range(first, len(_jobs), step):
        _jobs[index]()


def _can_fork() -> bool:
    """Fork is the start method (it is on Linux) and this process may have children (a daemonic process, as some
    job runners start, may not)."""
    return multiprocessing.get_start_method() == "fork" and not multiprocessing.current_process().daemon


@contextmanager
def drawn_meanwhile(jobs: Sequence[FigureJob]) -> Iterator[None]:
    """Draw ``jobs`` in forked processes (one per core, each a fixed share) while the block runs; at its end wait
    for them. A share whose process failed is drawn here then, so every figure is written. On one core, where
    fork is not available, or for a single job, the jobs are drawn here at the end of the block.

    Each process draws its share and exits: nothing is queued and nothing is terminated. (A
    ``multiprocessing.Pool`` hung in the test suite, in two fits at once: its work done, the parent waited for a
    worker that waited for the task queue's lock, whose other worker was gone.)
    """
    global _jobs
    workers = min(os.cpu_count() or 1, len(jobs))
    if workers < 2 or not _can_fork():
        yield
        for job in jobs:
            job()
        return
    _jobs = jobs
    context = multiprocessing.get_context("fork")
    processes = [context.Process(target=_draw_share, args=(w, workers)) for w in range(workers)]
    started = []
    try:
        with heap_frozen_for_fork():
            for process in processes:
                process.start()
                started.append(process)
    except OSError:
        pass  # no more processes (memory, limits): the shares not started are drawn here
    finally:
        _jobs = ()  # the children have their copy
    try:
        yield
    finally:
        for process in started:
            process.join()
    for w, process in enumerate(processes):
        if process.exitcode != 0:  # failed, or never started (None)
            for index in range(w, len(jobs), workers):
                jobs[index]()
