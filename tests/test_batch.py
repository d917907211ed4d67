"""Batch fitting on a local Dask cluster: the same folders as ``fit``, failures as rows, re-runs skip; the
cluster listens on loopback only; a dead worker's study runs once more; Ctrl-C stops the workers and writes the
table."""

from __future__ import annotations

import ipaddress
import json
import os
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pandas as pd
import pytest
from conftest import still_running

from inference import fit_study
from inference.cli import main
from inference.errors import ExitCode
from inference.workflows import batch, executor

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


def write(folder, name, seed, data=DATA, draws=400):
    (folder / f"{name}.csv").write_text(data)
    path = folder / f"{name}.yaml"
    path.write_text(textwrap.dedent(STUDY.format(name=name, seed=seed)).replace("draws: 400", f"draws: {draws}"))
    return path


def test_batch_writes_what_fit_writes_reports_failures_and_skips_on_rerun(tmp_path):
    first, second = write(tmp_path, "lot-a", 3), write(tmp_path, "lot-b", 4)
    broken = write(tmp_path, "lot-c", 5, data="temperature,k\n40,-1\n")
    command = "arrhenia batch lot-a.yaml lot-b.yaml lot-c.yaml --workers 2"
    result = batch.run_batch(
        [first, second, broken], root=tmp_path / "batch", workers=2, quiet=True, command_line=command
    )
    table = result.table.set_index("study")
    # Each manifest records the batch's command line, not the Dask worker's.
    assert json.loads((tmp_path / "batch" / "lot-a" / "manifest.json").read_text())["command_line"] == command
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
    import inference.workflows.fit

    def explode(*args, **kwargs):
        raise FloatingPointError("overflow in a solver")

    monkeypatch.setattr(inference.workflows.fit, "fit_study", explode)
    row = batch.fit_one(str(write(tmp_path, "lot-a", 3)), str(tmp_path / "out"), 1, False, {})
    assert row["status"] == "failed" and "FloatingPointError: overflow" in row["message"]
    assert batch.BatchResult(pd.DataFrame([row]), tmp_path, 1).exit_code == ExitCode.FAULT


def test_batch_command_line_and_its_errors(tmp_path, capsys):
    study = write(tmp_path, "lot-a", 3)
    assert main(["batch", str(study), "--workers", "0"]) == ExitCode.BAD_INPUT
    assert "--workers" in capsys.readouterr().err
    # A bad sampler setting would fail every study: refused up front, no table, no cluster.
    assert main(["batch", str(study), "--draws", "0", "--root", str(tmp_path / "r")]) == ExitCode.BAD_INPUT
    err = capsys.readouterr().err
    assert err.startswith("arrhenia: error: --draws: 0 is not") and err.count("\n") == 1
    assert not (tmp_path / "r").exists()
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


def _process_family(pid: int) -> set[int]:
    """``pid`` and all its descendants, from /proc (Linux)."""
    parents = {}
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            parents[int(stat.parent.name)] = int(stat.read_text().rsplit(")", 1)[1].split()[1])
        except (OSError, IndexError, ValueError):
            continue
    family, grew = {pid}, True
    while grew:
        new = {child for child, parent in parents.items() if parent in family} - family
        family |= new
        grew = bool(new)
    return family


def _listening_addresses(pids: set[int]) -> list:
    """Local addresses of the TCP sockets in LISTEN state that these processes hold (/proc/net/tcp{,6})."""
    inodes = set()
    for pid in pids:
        for fd in Path(f"/proc/{pid}/fd").glob("*"):
            try:
                link = os.readlink(fd)
            except OSError:
                continue
            if link.startswith("socket:["):
                inodes.add(link[len("socket:[") : -1])
    found = []
    for table in ("tcp", "tcp6"):
        path = Path("/proc/net") / table
        if not path.exists():
            continue
        for line in path.read_text().splitlines()[1:]:
            fields = line.split()
            if fields[3] != "0A" or fields[9] not in inodes:  # 0A: TCP_LISTEN (Linux include/net/tcp_states.h)
                continue
            raw = bytes.fromhex(fields[1].split(":")[0])  # 32-bit words in host (little-endian) order
            found.append(ipaddress.ip_address(b"".join(raw[i : i + 4][::-1] for i in range(0, len(raw), 4))))
    return found


def _is_loopback(address) -> bool:
    mapped = getattr(address, "ipv4_mapped", None)
    return address.is_loopback or (mapped is not None and mapped.is_loopback)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads listening sockets from /proc (Linux)")
def test_the_local_cluster_listens_on_loopback_only():
    with executor.Executor(1) as pool:
        pool.client.run(os.getpid)  # the worker is up and registered
        addresses = _listening_addresses(_process_family(os.getpid()))
    assert addresses  # the scheduler at least
    assert all(_is_loopback(address) for address in addresses), addresses


def _die_until(marker: str, deaths: int) -> dict:
    """Kill the worker process running this ``deaths`` times (counted by files in ``marker``), then return."""
    done = len(os.listdir(marker))
    if done < deaths:
        Path(marker, str(done)).touch()
        os._exit(1)
    return {"study": "s", "status": "fitted", "verdict": "pass", "wall_s": 0.0, "results": "r", "message": ""}


def test_a_dead_worker_s_task_runs_once_more_then_is_a_failed_row(tmp_path):
    markers = {name: tmp_path / name for name in ("once", "twice", "listed")}
    for folder in markers.values():
        folder.mkdir()
    # One task on a cluster of its own each: a death charges every task on the dead worker, and a worker that is
    # being restarted after one case's death must not count in the next.
    with executor.Executor(1) as pool:
        (once,) = pool.outcomes(_die_until, [(str(markers["once"]), 1)])
    with executor.Executor(1) as pool:
        (twice,) = pool.outcomes(_die_until, [(str(markers["twice"]), 2)])
    with executor.Executor(1) as pool, pytest.raises(RuntimeError, match="died again"):
        pool.map(_die_until, [(str(markers["listed"]), 2)])  # the list API (calibration's) raises instead
    assert once.retried and not once.lost and once.value["status"] == "fitted"
    assert twice.retried and twice.lost and twice.value is None
    assert [len(os.listdir(folder)) for folder in markers.values()] == [1, 2, 2]  # never a third run
    row = batch._outcome_row(once, "s", 1.0)
    assert row["status"] == "fitted" and row["message"].startswith("run a second time after its worker process died")
    row = batch._outcome_row(twice, "s", 1.0)
    assert row["status"] == "failed" and "died again" in row["message"]
    assert batch.BatchResult(pd.DataFrame([row]), tmp_path, 1).exit_code == ExitCode.FAULT


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="finds the batch's processes in /proc (Linux)")
def test_ctrl_c_stops_the_workers_says_what_finished_and_writes_the_table(tmp_path):
    quick = write(tmp_path, "lot-a", 3, draws=200)
    slow = write(tmp_path, "lot-b", 4, draws=50_000)  # still sampling long after lot-a is written
    command = [sys.executable, "-m", "inference", "batch", quick.name, slow.name, "--workers", "2", "--root", "r"]
    process = subprocess.Popen(
        command, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True
    )
    try:
        deadline = time.monotonic() + 300
        while not (tmp_path / "r" / "lot-a" / "manifest.json").exists():
            assert process.poll() is None, process.communicate()
            assert time.monotonic() < deadline, "lot-a was not fitted in time"
            time.sleep(0.3)
        family = _process_family(process.pid)
        os.killpg(process.pid, signal.SIGINT)  # what Ctrl-C in a terminal does
        _, stderr = process.communicate(timeout=120)
    finally:
        if process.poll() is None:
            os.killpg(process.pid, signal.SIGKILL)
    assert process.returncode == ExitCode.INTERRUPTED, stderr
    assert stderr.count("\n") == 1 and "Traceback" not in stderr, stderr
    assert "results written for lot-a" in stderr and "not finished: lot-b" in stderr
    assert "no results were written" not in stderr
    table = pd.read_csv(tmp_path / "r" / "batch_summary.csv").set_index("study")
    assert table.loc["lot-a", "status"] in ("fitted", "not converged")
    assert table.loc["lot-b", "status"] == "interrupted"
    deadline = time.monotonic() + 15  # workers and their chain processes are gone, and stay gone
    while still_running(family) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert still_running(family) == []
    time.sleep(10)
    assert not (tmp_path / "r" / "lot-b").exists()
