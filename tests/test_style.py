"""The code base stays ruff-clean (the project's style rule), checked with the ruff of the test extra."""

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def test_ruff_is_clean():
    ruff = shutil.which("ruff", path=str(Path(sys.executable).parent)) or shutil.which("ruff")
    if ruff is None:
        pytest.fail("ruff is not installed; install the test extra: pip install -e '.[test]'")
    run = subprocess.run(
        [ruff, "check", "--quiet", "inference", "tests", "data_demo", "benchmarks"],
        cwd=REPO,
        capture_output=True,
        text=True,
    )
    assert run.returncode == 0, run.stdout + run.stderr
