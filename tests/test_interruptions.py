"""A real signal sent to a running ``arrhenia fit`` exits promptly with 130 or 143, leaves no partial results
folder, and keeps an earlier one (common practice for command-line tools: 128 + signal number). A ``kill -9``
of a fit takes its chain processes with it, and the next fit removes the scratch folder it left."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import still_running

from inference.outputs.results import StagedFolder

REPO = Path(__file__).resolve().parents[1]


def _ignore_sigint() -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _start(folder: Path, env: dict | None = None, ignoring_sigint: bool = False) -> subprocess.Popen:
    for name in ("study.yaml", "runs.csv", "measurements.csv"):
        shutil.copy(REPO / "data_demo" / name, folder / name)
    with StagedFolder(folder / "res", overwrite=False) as earlier:  # results of an earlier run, as Arrhenia writes
        earlier.write_text("summary.csv", "earlier results\n")
        earlier.write_manifest("fit", {})
    command = [
        sys.executable,
        "-m",
        "inference",
        "fit",
        "study.yaml",
        "--out",
        "res",
        "--overwrite",
        "--quiet",
        "--draws",
        "20000",
        "--tune",
        "2000",
    ]
    return subprocess.Popen(
        command,
        cwd=folder,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
        env=env,
        preexec_fn=_ignore_sigint if ignoring_sigint else None,
    )


def _wait_for_sampling(process: subprocess.Popen, settle: float = 2.0, seconds: float = 120.0) -> list[int]:
    """Wait until the sampler's chain processes exist, then ``settle`` seconds (so the signal lands during
    sampling); returns their pids."""
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        chains = _chain_processes(process.pid)
        if chains:
            time.sleep(settle)
            return sorted(set(chains) | set(_chain_processes(process.pid)))
        if process.poll() is not None:
            pytest.fail(f"the fit ended before it could be interrupted: {process.communicate()}")
        time.sleep(0.2)
    pytest.fail("sampling did not start")


def _command_line(pid: int) -> bytes | None:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return None


def _chain_processes(pid: int) -> list[int]:
    """Children of ``pid`` forked from it (same command line): PyMC's chain processes, not a compiler run."""
    children = subprocess.run(["pgrep", "-P", str(pid)], capture_output=True, text=True).stdout.split()
    return [int(child) for child in children if _command_line(int(child)) == _command_line(pid)]


@pytest.mark.parametrize(
    ("how", "code"),
    [
        ("SIGINT to the group", 130),
        ("SIGINT to the group as the chains start", 130),  # while forking: must not be lost in at-fork hooks
        ("SIGTERM to the process", 143),
        # Found: a parent that ignores SIGINT (shells for background jobs, some launchers) passes that on, and the
        # fit went on sampling after Ctrl-C. Arrhenia now listens whatever it inherits.
        ("SIGINT to the group, started by a parent that ignores it", 130),
    ],
)
def test_signal_during_sampling(tmp_path, how, code):
    process = _start(tmp_path, ignoring_sigint="ignores" in how)
    try:
        _wait_for_sampling(process, settle=0.0 if how.endswith("start") else 2.0)
        started = time.monotonic()
        if how.startswith("SIGINT"):
            os.killpg(process.pid, signal.SIGINT)  # what Ctrl-C in a terminal does
        else:
            process.send_signal(signal.SIGTERM)
        _, stderr = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            os.killpg(process.pid, signal.SIGKILL)
    assert process.returncode == code, stderr
    assert time.monotonic() - started < 30
    assert "no results were written" in stderr
    assert "Traceback" not in stderr
    assert (tmp_path / "res" / "summary.csv").read_text() == "earlier results\n"
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the death signal of chain processes is Linux's")
def test_kill_9_takes_the_chain_processes_along_and_the_next_fit_clears_the_scratch(tmp_path, monkeypatch):
    from inference.model import sampling

    scratch_root = tmp_path / "tmp"
    scratch_root.mkdir()
    process = _start(tmp_path, {**os.environ, "TMPDIR": str(scratch_root)})
    chains: list[int] = []
    try:
        chains = _wait_for_sampling(process)
        process.kill()  # kill -9: no handler runs, nothing is cleaned up by the fit itself
        process.wait(timeout=30)
        deadline = time.monotonic() + 10
        while still_running(chains) and time.monotonic() < deadline:
            time.sleep(0.1)
        left = still_running(chains)
    finally:
        for pid in still_running(chains):
            os.kill(pid, signal.SIGKILL)
        if process.poll() is None:
            os.killpg(process.pid, signal.SIGKILL)
    assert left == [], f"chain processes {left} outlived their killed parent"

    (left_behind,) = [p for p in scratch_root.iterdir() if f"-{process.pid}-" in p.name]
    live = scratch_root / left_behind.name.replace(f"-{process.pid}-", f"-{os.getpid()}-")
    live.mkdir()  # the same name with a running process's pid: must be kept
    monkeypatch.setattr(sampling.tempfile, "tempdir", str(scratch_root))
    with sampling.scratch_folder() as scratch:
        assert scratch.is_dir() and scratch.parent == scratch_root
    assert not left_behind.exists()
    assert live.is_dir()
    assert not scratch.exists()
