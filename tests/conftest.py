"""Shared helpers: write small studies into a temporary folder and run the CLI in-process."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from inference.cli import main

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
