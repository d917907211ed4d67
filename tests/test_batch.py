"""Batch fitting on a local Dask cluster: the same folders as ``fit``, failures as rows, re-runs skip."""

from __future__ import annotations

import shutil
import textwrap

import pandas as pd
import pytest

from inference import batch, fit_study
from inference.cli import main
from inference.errors import ExitCode

STUDY = """\
study: {name}
units: {{temperature: degC, energy: kJ/mol, rate_constant: 1/min}}
data: {{rate_constants: {name}.csv}}
reactions:
  - name: closure
    k_ref: {{median: 0.01, factor: 100}}
    Ea: {{mean: 80, sd: 40}}
sampling: {{draws: 400, tune: 300, chains: 2, seed: {seed}}}
"""

# Invented rate constants (k = 0.012 exp(-(78 kJ/mol / R)(1/T - 1/338.15 K)) 1/min, rounded by hand).
DATA = "temperature,k\n40,0.00132\n50,0.00300\n60,0.00770\n70,0.0180\n80,0.0400\n"


def write(folder, name, seed, data=DATA):
    (folder / f"{name}.csv").write_text(data)
    path = folder / f"{name}.yaml"
    path.write_text(textwrap.dedent(STUDY.format(name=name, seed=seed)))
    return path


def test_batch_writes_what_fit_writes_reports_failures_and_skips_on_rerun(tmp_path):
    first, second = write(tmp_path, "lot-a", 3), write(tmp_path, "lot-b", 4)
    broken = write(tmp_path, "lot-c", 5, data="temperature,k\n40,-1\n")
    result = batch.run_batch([first, second, broken], root=tmp_path / "batch", workers=2, quiet=True)
    table = result.table.set_index("study")
    assert result.workers == 2
    assert table.loc["lot-a", "status"] == "fitted" and table.loc["lot-b", "status"] == "fitted"
    bad = table.loc[str(broken)]
    assert bad["status"] == "bad input" and "lot-c.csv" in bad["message"]
    assert result.exit_code == ExitCode.BAD_INPUT
    assert pd.read_csv(tmp_path / "batch" / "batch_summary.csv").shape == (3, len(batch.BATCH_COLUMNS))

    # The same study fitted alone, with its chains in parallel: byte-identical tables (same seed).
    alone = fit_study(first, out=tmp_path / "alone", quiet=True)
    for name in ("summary.csv", "fit_checks.csv", "classical.csv"):
        assert (tmp_path / "batch" / "lot-a" / name).read_bytes() == (alone.results_dir / name).read_bytes(), name

    again = batch.run_batch([first, second], root=tmp_path / "batch", workers=2, quiet=True)
    assert list(again.table["status"]) == ["up to date", "up to date"]
    assert again.workers == 0  # nothing to fit, no cluster started


def test_a_fault_in_one_study_is_a_row_not_a_crash(tmp_path, monkeypatch):
    import inference.pipeline

    def explode(*args, **kwargs):
        raise FloatingPointError("overflow in a solver")

    monkeypatch.setattr(inference.pipeline, "fit_study", explode)
    row = batch.fit_one(str(write(tmp_path, "lot-a", 3)), str(tmp_path / "out"), 1, False, {})
    assert row["status"] == "failed" and "FloatingPointError: overflow" in row["message"]
    assert batch.BatchResult(pd.DataFrame([row]), tmp_path, 1).exit_code == ExitCode.FAULT


def test_batch_command_line_and_its_errors(tmp_path, capsys):
    study = write(tmp_path, "lot-a", 3)
    assert main(["batch", str(study), "--workers", "0"]) == ExitCode.BAD_INPUT
    assert "--workers" in capsys.readouterr().err
    code = main(["batch", str(tmp_path / "missing.yaml"), "--root", str(tmp_path / "r"), "--quiet"])
    assert code == ExitCode.BAD_INPUT
    table = pd.read_csv(tmp_path / "r" / "batch_summary.csv")
    assert table.loc[0, "status"] == "bad input"


@pytest.mark.parametrize(("workers", "scheduler", "expected"), [(2, None, 1), (1, None, 2), (1, "tcp://x:8786", 1)])
def test_chains_run_in_sequence_when_the_batch_fills_the_cores(monkeypatch, workers, scheduler, expected):
    monkeypatch.setattr(batch.os, "cpu_count", lambda: 2)
    assert batch.cores_per_fit(workers, scheduler) == expected


def test_an_unreachable_scheduler_is_a_one_line_error(tmp_path, capsys):
    study = write(tmp_path, "lot-a", 3)
    shutil.rmtree(tmp_path / "r", ignore_errors=True)
    code = main(["batch", str(study), "--root", str(tmp_path / "r"), "--scheduler", "tcp://127.0.0.1:9", "--quiet"])
    assert code == ExitCode.BAD_INPUT
    assert "cannot reach the Dask scheduler" in capsys.readouterr().err


def test_compare_fits_its_candidates_as_a_batch(tmp_path):
    from inference import compare_studies

    first = write(tmp_path, "lot-a", 3)
    (tmp_path / "wide.yaml").write_text(
        first.read_text().replace("study: lot-a", "study: lot-a-wide").replace("sd: 40", "sd: 80")
    )
    result = compare_studies([first, tmp_path / "wide.yaml"], root=tmp_path / "r", workers=2, quiet=True)
    assert set(result.table["candidate"]) == {"lot-a", "lot-a-wide"}
    assert (tmp_path / "r" / "batch_summary.csv").exists()
