"""Shared helpers: write small studies into a temporary folder and run the CLI in-process."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from inference.processes import cache_folder, own_pytensor_cache

# The tests compile hundreds of models no fit compiles again: they keep them out of the cache users' fits read.
own_pytensor_cache(cache_folder() / "pytensor-tests")

from inference.cli import main  # noqa: E402

BASE_STUDY = """\
study: t-study
units: {temperature: degC, energy: kJ/mol, rate_constant: 1/s}
data: {rate_constants: k.csv}
reactions:
  - name: step
    k_ref: {median: 0.001, factor: 100}
    Ea: {mean: 80, sd: 30}
sampling: {draws: 200, tune: 200, chains: 2, seed: 3}
"""

BASE_TABLE = """\
temperature,k
30,1.2e-4
40,3.9e-4
50,1.1e-3
60,3.0e-3
70,7.9e-3
"""


def pytest_sessionstart(session: pytest.Session) -> None:
    """Once per test run, before pytest-xdist starts its workers: compile the network solver's two entry points
    into numba's on-disk cache, each in a process of its own on its own core (about half a minute on a clean
    clone; nothing to do when the cache holds them). Otherwise every worker, and every fit's chain processes,
    would compile what it first needs at the same time as the others."""
    if hasattr(session.config, "workerinput"):  # a worker: the controller has done it
        return
    code = "from inference.physics.solution import compile_kernels; compile_kernels({})"
    halves = ("implicit=False", "explicit=False")
    processes = [subprocess.Popen([sys.executable, "-c", code.format(half)]) for half in halves]
    for process in processes:
        process.wait()  # a failure only means the tests compile what they need themselves


@pytest.fixture
def make_study(tmp_path: Path):
    """Write a study file (and its table) into tmp_path; returns the study path."""

    def write(study: str = BASE_STUDY, table: str | None = BASE_TABLE, table_name: str = "k.csv") -> Path:
        path = tmp_path / "study.yaml"
        path.write_text(textwrap.dedent(study))
        if table is not None:
            (tmp_path / table_name).write_text(textwrap.dedent(table))
        return path

    return write


@pytest.fixture
def run_cli(capsys):
    """Run ``arrhenia ARGS`` in-process; returns (exit code, stdout, stderr)."""

    def run(*args: str) -> tuple[int, str, str]:
        try:
            code = main([str(a) for a in args])
        except SystemExit as exit_:  # argparse usage errors
            code = int(exit_.code)
        captured = capsys.readouterr()
        return code, captured.out, captured.err

    return run


def still_running(pids) -> list[int]:
    """Those of ``pids`` that still run (Linux /proc); a zombie, dead but not yet reaped, does not count."""
    running = []
    for pid in pids:
        try:
            state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
        except OSError:
            continue
        if state not in ("Z", "X"):
            running.append(pid)
    return running


@pytest.fixture(scope="session")
def fitted(tmp_path_factory):
    """One fit of the chain A -> B -> C (with the scenarios of ``test_predictions.SCENARIOS``), shared by the
    prediction tests of every module for the whole session."""
    import numpy as np
    from test_network_model import _simulate, arrhenius_k
    from test_predictions import SCENARIOS, TRUE

    from inference import fit_study

    folder = tmp_path_factory.mktemp("predict")
    runs, meas = ["run,temperature,A,B,C"], ["run,time,A,B,C"]
    for index, celsius in enumerate([45, 55, 65]):
        k1, k2 = (arrhenius_k(k, ea, celsius) for k, ea in TRUE.values())
        times = np.geomspace(0.5, 4.0 / k2, 12)
        data = _simulate(
            lambda t, c, k1=k1, k2=k2: [-k1 * c[0], k1 * c[0] - k2 * c[1], k2 * c[1]],
            3,
            [1.0, 0.0, 0.0],
            times,
            70 + index,
        )
        runs.append(f"r{index},{celsius},1.0,0,0")
        meas += [f"r{index},{t:.6g}," + ",".join(f"{v:.6g}" for v in row) for t, row in zip(times, data, strict=True)]
    (folder / "runs.csv").write_text("\n".join(runs) + "\n")
    (folder / "measurements.csv").write_text("\n".join(meas) + "\n")
    study = folder / "study.yaml"
    study.write_text(
        """\
study: chain
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, B, C]
reactions:
  - name: first
    equation: A -> B
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
  - name: second
    equation: B -> C
    k_ref: {median: 0.05, factor: 10}
    Ea: {mean: 70, sd: 20}
reference_temperature: 330 K
sampling: {draws: 300, tune: 300, chains: 2, seed: 9}
"""
        + SCENARIOS
    )
    result = fit_study(study, out=folder / "res", quiet=True)
    return folder, result


#: Test files that take minutes (whole demo fits, calibration, recovery fits, refits). They run first: test files
#: are spread over the workers one file at a time, and a slow file started last would leave one core idle.
SLOW_FILES_FIRST = (
    "test_demo.py",
    "test_calibration.py",
    "test_observation_fits.py",
    "test_rate_laws.py",
    "test_next_experiment.py",
    "test_experiment_fits.py",
)


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    rank = {name: index for index, name in enumerate(SLOW_FILES_FIRST)}
    items.sort(key=lambda item: rank.get(item.path.name, len(rank)))  # stable: a file's tests keep their order
