"""Every number on the command line is input: out of range it gives exit 2, one line naming the option, and
nothing written, on every command (no fit runs here).

The limits are the study file's own (inference/schema.py: ``Sampling`` and ``ScenarioFile``), so an option
accepts exactly what the same key in a study or scenario file accepts. Exit status 2 for usage errors is common
practice for command-line tools (argparse and POSIX utilities do the same).
"""

from __future__ import annotations

from pathlib import Path

import pytest

from inference.errors import ExitCode, StudyError
from inference.inputs import options
from inference.inputs.schema import Sampling, ScenarioFile
from inference.workflows import batch

# (command line after "arrhenia" with STUDY for the study file, the option named, its value)
CASES = [
    ("fit STUDY --draws 0", "--draws", "0"),
    ("fit STUDY --draws 9", "--draws", "9"),
    ("fit STUDY --draws 100001", "--draws", "100001"),
    ("fit STUDY --tune -5", "--tune", "-5"),
    ("fit STUDY --chains 0", "--chains", "0"),
    ("fit STUDY --chains 65", "--chains", "65"),
    ("fit STUDY --seed -1", "--seed", "-1"),
    ("fit STUDY --seed 4294967296", "--seed", "4294967296"),
    ("fit STUDY --cores 0", "--cores", "0"),
    ("demo --out demo --chains 0", "--chains", "0"),
    ("demo --out demo --draws 0", "--draws", "0"),
    ("compare STUDY STUDY --draws 0", "--draws", "0"),
    ("compare STUDY STUDY --workers 0", "--workers", "0"),
    ("compare STUDY STUDY --cores 0", "--cores", "0"),
    ("batch STUDY --draws 0", "--draws", "0"),
    ("batch STUDY --tune -1", "--tune", "-1"),
    ("batch STUDY --chains 0", "--chains", "0"),
    ("batch STUDY --seed -1", "--seed", "-1"),
    ("batch STUDY --workers 0", "--workers", "0"),
    ("batch STUDY --workers -2", "--workers", "-2"),
    ("predict results/t-study scenarios.yaml --draws 0", "--draws", "0"),
    ("predict results/t-study scenarios.yaml --draws 20001", "--draws", "20001"),
    ("check STUDY --draws 0", "--draws", "0"),
    ("check STUDY --prior-predictive --draws 0", "--draws", "0"),
]


def _files(folder: Path) -> set[Path]:
    return {path.relative_to(folder) for path in folder.rglob("*")}


@pytest.mark.parametrize(("line", "option", "value"), CASES, ids=[case[0] for case in CASES])
def test_an_option_out_of_range_is_exit_2_one_line_nothing_written(
    tmp_path, monkeypatch, make_study, run_cli, line, option, value
):
    study = make_study()
    monkeypatch.chdir(tmp_path)
    before = _files(tmp_path)
    args = [str(study) if word == "STUDY" else word for word in line.split()]
    code, out, err = run_cli(*args)
    assert code == ExitCode.BAD_INPUT, (out, err)
    assert err.count("\n") == 1 and "Traceback" not in err, err
    assert err.startswith(f"arrhenia: error: {option}: {value} is not an allowed "), err
    assert _files(tmp_path) == before


def test_the_hint_gives_the_schema_limits(run_cli, make_study):
    # Limits as the JSON Schema of the study file states them (inference/schema.py, Sampling and ScenarioFile).
    properties = Sampling.model_json_schema()["properties"]
    code, _, err = run_cli("fit", make_study(), "--draws", "0")
    draws = properties["draws"]
    assert code == ExitCode.BAD_INPUT and f"give {draws['minimum']} to {draws['maximum']}" in err
    code, _, err = run_cli("fit", make_study(), "--cores", "0")
    cores = next(part for part in properties["cores"]["anyOf"] if part.get("type") == "integer")
    assert f"give {cores['minimum']} to {cores['maximum']}" in err
    code, _, err = run_cli("predict", "nowhere", "nothing.yaml", "--draws", "1")
    scenario = ScenarioFile.model_json_schema()["properties"]["draws"]
    assert f"give {scenario['minimum']} to {scenario['maximum']}" in err
    code, _, err = run_cli("batch", make_study(), "--workers", "0")
    assert "give 1 or more" in err


def test_the_limits_themselves_are_accepted():
    # Both ends of every range in schema.Sampling pass; None (not given) is left out.
    low = {"draws": 10, "tune": 0, "chains": 1, "seed": 0, "cores": 1}
    high = {"draws": 100_000, "tune": 100_000, "chains": 64, "seed": 2**32 - 1, "cores": 64}
    assert options.sampling_overrides(low) == low
    assert options.sampling_overrides(high) == high
    assert options.sampling_overrides({"draws": None, "seed": 5}) == {"seed": 5}


def test_a_valid_prior_draw_count_passes(run_cli, make_study):
    code, _, err = run_cli("check", make_study(), "--draws", "10")
    assert code == ExitCode.DONE, err


def test_a_word_for_a_number_is_one_line_too(run_cli, make_study):
    code, _, err = run_cli("fit", make_study(), "--draws", "many")
    assert code == ExitCode.BAD_INPUT
    assert err.count("\n") == 1 and "--draws" in err and "'many'" in err and "arrhenia fit --help" in err


def test_run_batch_refuses_bad_settings_before_starting_anything(tmp_path, make_study):
    study = make_study()
    before = _files(tmp_path)
    with pytest.raises(StudyError, match=r"^chains: 0 is not an allowed number of chains"):
        batch.run_batch([study], root=tmp_path / "batch", chains=0, quiet=True)
    with pytest.raises(StudyError, match=r"^workers: 0 is not an allowed number of workers"):
        batch.run_batch([study], root=tmp_path / "batch", workers=0, quiet=True)
    assert _files(tmp_path) == before
