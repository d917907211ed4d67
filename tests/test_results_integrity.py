"""Nothing lost: --overwrite replaces only results folders Arrhenia wrote, the swap is recoverable, stale
staging folders of dead processes are cleaned up, one process writes a folder at a time, and the manifest binds
the posterior and resolved study it was written with (predict, compare and check --against verify it).

Each test carries the case that found the defect (issue "Nothing lost"). Exit code 2 for a user's mistake is
common practice for command-line tools.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from conftest import BASE_STUDY, BASE_TABLE

from inference import fit_study
from inference.errors import StudyError
from inference.outputs import results as results_module
from inference.outputs.results import StagedFolder, clean_stale, reserve

SMALL = BASE_STUDY.replace("draws: 200, tune: 200", "draws: 150, tune: 150")


def _dead_pid() -> int:
    """The pid of a process that has ended (and, on any sane system, not yet been reused)."""
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def _tree(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def fitted(tmp_path_factory) -> tuple[Path, Path, Path]:
    """(study folder, results of seed 3, results of seed 4) of one small rate-constant study."""
    folder = tmp_path_factory.mktemp("integrity")
    (folder / "study.yaml").write_text(SMALL)
    (folder / "k.csv").write_text(BASE_TABLE)
    fit_study(folder / "study.yaml", out=folder / "seed3", quiet=True)
    fit_study(folder / "study.yaml", out=folder / "seed4", seed=4, quiet=True)
    return folder, folder / "seed3", folder / "seed4"


@pytest.fixture
def project(tmp_path: Path) -> Path:
    """A user's project folder: a study, its data and lab notes."""
    (tmp_path / "study.yaml").write_text(SMALL)
    (tmp_path / "k.csv").write_text(BASE_TABLE)
    (tmp_path / "notes.txt").write_text("lab notes, not a copy anywhere else\n")
    return tmp_path


def _assert_refused(code: int, err: str, *fragments: str) -> None:
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1, err
    for fragment in fragments:
        assert fragment in err, err


def test_overwrite_refuses_the_study_folder_itself(project, run_cli):
    # Found: `fit STUDY --out <the project folder> --overwrite` deleted the study, its CSV and a notes file.
    before = _tree(project)
    code, _, err = run_cli("fit", project / "study.yaml", "--out", project, "--overwrite", "--quiet")
    _assert_refused(code, err, "current folder" if Path.cwd() == project else "contains")
    assert _tree(project) == before


def test_overwrite_refuses_the_current_folder(project, run_cli, monkeypatch):
    # Found: `--out . --overwrite` gave an OSError traceback and left a `..partial-PID` folder.
    monkeypatch.chdir(project)
    before = _tree(project)
    code, _, err = run_cli("fit", "study.yaml", "--out", ".", "--overwrite", "--quiet")
    _assert_refused(code, err, "current folder")
    assert _tree(project) == before
    assert not [p for p in project.parent.iterdir() if ".partial-" in p.name]


def test_overwrite_refuses_a_folder_arrhenia_did_not_write(project, run_cli, tmp_path_factory):
    other = tmp_path_factory.mktemp("users-folder")
    (other / "thesis.tex").write_text("months of work\n")
    code, _, err = run_cli("fit", project / "study.yaml", "--out", other, "--overwrite", "--quiet")
    _assert_refused(code, err, "not a results folder Arrhenia wrote")
    assert (other / "thesis.tex").read_text() == "months of work\n"


def test_overwrite_refuses_a_results_folder_holding_the_users_files(fitted, project, run_cli, tmp_path):
    _, seed3, _ = fitted
    results = tmp_path / "results-with-notes"
    shutil.copytree(seed3, results)
    (results / "my_notes.txt").write_text("written by hand\n")
    code, _, err = run_cli("fit", project / "study.yaml", "--out", results, "--overwrite", "--quiet")
    _assert_refused(code, err, "my_notes.txt", "did not write")
    assert (results / "my_notes.txt").exists()


def test_overwrite_replaces_its_own_results_and_leaves_nothing_hidden(fitted, project, run_cli, tmp_path):
    _, seed3, _ = fitted
    results = tmp_path / "res"
    shutil.copytree(seed3, results)
    code, _, err = run_cli("fit", project / "study.yaml", "--out", results, "--overwrite", "--quiet", "--seed", "9")
    assert code in (0, 3), err
    manifest = json.loads((results / "manifest.json").read_text())
    assert manifest["seed"] == 9
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_demo_never_replaces_a_users_study_file(tmp_path, run_cli):
    (tmp_path / "study.yaml").write_text("my own study\n")
    code, _, err = run_cli("demo", "--out", tmp_path, "--overwrite", "--quiet")
    _assert_refused(code, err, "study.yaml", "not the demo's file")
    assert (tmp_path / "study.yaml").read_text() == "my own study\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study.yaml"]


def test_manifest_lists_and_hashes_every_file(fitted):
    _, seed3, _ = fitted
    manifest = json.loads((seed3 / "manifest.json").read_text())
    written = {p.relative_to(seed3).as_posix() for p in seed3.rglob("*") if p.is_file()} - {"manifest.json"}
    assert set(manifest["files"]) == written
    assert manifest["files"]["posterior.nc"] == results_module.sha256_file(seed3 / "posterior.nc")


def test_a_replaced_posterior_is_refused_everywhere(fitted, run_cli, tmp_path):
    # Found: another study's posterior.nc put in a results folder gave exit 0 and wrong predictions;
    # `check --against` said the folder matched; `compare` with it ended in a traceback.
    folder, seed3, seed4 = fitted
    swapped = tmp_path / "swapped"
    shutil.copytree(seed3, swapped)
    shutil.copy(seed4 / "posterior.nc", swapped / "posterior.nc")

    code, out, _ = run_cli("check", folder / "study.yaml", "--against", swapped)
    assert code == 3
    assert "does NOT match" in out and "posterior.nc" in out

    code, _, err = run_cli("compare", seed3, swapped, "--out", tmp_path / "cmp", "--quiet")
    _assert_refused(code, err, "posterior.nc", "sha256")
    assert not (tmp_path / "cmp").exists()

    scenarios = tmp_path / "scenarios.yaml"
    scenarios.write_text("scenarios: []\n")
    code, _, err = run_cli("predict", swapped, scenarios, "--out", tmp_path / "pred", "--quiet")
    _assert_refused(code, err, "posterior.nc")
    assert not (tmp_path / "pred").exists()

    code, out, _ = run_cli("check", folder / "study.yaml", "--against", seed3)
    assert code == 0 and "matches" in out


def test_malformed_manifest_is_one_line_not_a_traceback(fitted, run_cli, tmp_path):
    # Found: a manifest with "data": 5 under `check --against` gave a traceback.
    folder, seed3, _ = fitted
    broken = tmp_path / "broken"
    shutil.copytree(seed3, broken)
    manifest = json.loads((broken / "manifest.json").read_text())
    (broken / "manifest.json").write_text(json.dumps({**manifest, "data": 5}))
    code, out, err = run_cli("check", folder / "study.yaml", "--against", broken)
    assert code == 3 and not err
    assert "not a fit manifest Arrhenia wrote" in out


def test_check_against_a_missing_folder_says_so(fitted, run_cli, tmp_path):
    folder, _, _ = fitted
    code, _, err = run_cli("check", folder / "study.yaml", "--against", tmp_path / "nonexistent")
    # A folder that is not there is a mistake in the command (exit 2, one line), not an outdated fit (exit 3).
    assert code == 2 and "does not exist" in err and len(err.strip().splitlines()) == 1, err


def test_a_second_writer_is_refused_at_once(project, run_cli):
    # Found: two fits into the same --out at once: the loser fitted for minutes, then left a hidden folder.
    target = project / "results" / "t-study"
    with reserve(target, overwrite=False):
        child = subprocess.run(
            [sys.executable, "-m", "inference", "fit", str(project / "study.yaml"), "--out", str(target), "--quiet"],
            capture_output=True,
            text=True,
            timeout=120,
        )
    _assert_refused(child.returncode, child.stderr, "another Arrhenia process", str(os.getpid()))
    assert not target.exists()
    assert not [p.name for p in target.parent.iterdir()]  # lock file removed on release


def test_stale_staging_folders_of_dead_processes_are_removed_and_live_ones_kept(tmp_path):
    # Found: `kill -9` during writing left `.NAME.partial-PID` for ever.
    dead, live = _dead_pid(), os.getppid()
    (tmp_path / f".res.partial-{dead}").mkdir()
    (tmp_path / f".res.partial-{dead}" / "summary.csv").write_text("half\n")
    (tmp_path / f".res.partial-{live}").mkdir()
    (tmp_path / f".res.partial-{dead}@otherhost").mkdir()  # another machine sharing the folder: not ours to judge
    (tmp_path / ".other.lock").write_text(f"{dead}\n")  # a killed process's lock file, held by nobody
    with StagedFolder(tmp_path / "res", overwrite=False) as folder:
        folder.write_manifest("test", {})
    names = sorted(p.name for p in tmp_path.iterdir())
    assert names == sorted([f".res.partial-{dead}@otherhost", f".res.partial-{live}", "res"])


def test_a_crash_between_the_two_renames_is_recovered(tmp_path):
    # Found: killed between the two renames of a replacement, the old results survived only as a hidden
    # `.NAME.retired-PID` folder. The next write into the parent puts them back under their name.
    dead = _dead_pid()
    retired = tmp_path / f".res.retired-{dead}"
    retired.mkdir()
    (retired / "manifest.json").write_text(json.dumps({"arrhenia_version": "old"}))
    (tmp_path / f".res.partial-{dead}").mkdir()
    done = clean_stale(tmp_path)
    assert (tmp_path / "res" / "manifest.json").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]
    assert any("restored" in line for line in done)


@pytest.mark.parametrize("atomic_exchange", [True, False], ids=["renameat2-exchange", "two-renames"])
def test_replacement_swaps_old_for_new_either_way(tmp_path, monkeypatch, atomic_exchange):
    if not atomic_exchange:
        monkeypatch.setattr(results_module, "_exchange", lambda first, second: False)
    for version in ("old", "new"):
        with StagedFolder(tmp_path / "res", overwrite=True) as folder:
            folder.write_text("which.txt", version)
            folder.write_manifest("test", {"which": version})
    assert (tmp_path / "res" / "which.txt").read_text() == "new"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]


def test_a_failure_while_staging_keeps_the_old_results(tmp_path):
    with StagedFolder(tmp_path / "res", overwrite=False) as folder:
        folder.write_text("which.txt", "old")
        folder.write_manifest("test", {})
    with pytest.raises(KeyboardInterrupt), StagedFolder(tmp_path / "res", overwrite=True) as folder:
        folder.write_text("which.txt", "new")
        raise KeyboardInterrupt
    assert (tmp_path / "res" / "which.txt").read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]


def test_a_symlinked_target_is_refused(tmp_path):
    (tmp_path / "real").mkdir()
    (tmp_path / "link").symlink_to(tmp_path / "real")
    with pytest.raises(StudyError, match="symbolic link"):
        reserve(tmp_path / "link", overwrite=True).__enter__()
