"""A real signal sent to a running ``arrhenia fit`` exits promptly with 130 or 143, leaves no partial results
folder, and keeps an earlier one (common practice for command-line tools: 128 + signal number)."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def _start(folder: Path) -> subprocess.Popen:
    for name in ("study.yaml", "runs.csv", "measurements.csv"):
        shutil.copy(REPO / "data_demo" / name, folder / name)
    earlier = folder / "res"
    earlier.mkdir()
    (earlier / "summary.csv").write_text("earlier results\n")
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
        command, cwd=folder, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True
    )


def _wait_for_sampling(process: subprocess.Popen, seconds: float = 120.0) -> None:
    """Wait until the sampler's worker processes exist (so the signal lands during sampling)."""
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        children = subprocess.run(["pgrep", "-P", str(process.pid)], capture_output=True, text=True).stdout.split()
        if children:
            time.sleep(2.0)
            return
        if process.poll() is not None:
            pytest.fail(f"the fit ended before it could be interrupted: {process.communicate()}")
        time.sleep(0.2)
    pytest.fail("sampling did not start")


@pytest.mark.parametrize(("how", "code"), [("SIGINT to the group", 130), ("SIGTERM to the process", 143)])
def test_signal_during_sampling(tmp_path, how, code):
    process = _start(tmp_path)
    try:
        _wait_for_sampling(process)
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
