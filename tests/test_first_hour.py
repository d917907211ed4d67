"""A researcher's first hour: the version and usage, help texts true to the schema, starting a study with
``arrhenia new``, tables that can be read on their own, and messages that say what to write instead."""

from __future__ import annotations

import argparse
import contextlib
import gc
import io
import json
import logging
import os
import re
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import BASE_STUDY, BASE_TABLE

from inference import __version__, cli
from inference.cli import _parser, main
from inference.inputs.config import load_study
from inference.inputs.data import read_observations
from inference.inputs.schema import ScenarioFile, StudyFile
from inference.posterior.summaries import fit_checks_file, network_fit_checks
from inference.workflows.starter import STARTERS, STUDY_FILE

REPO = Path(__file__).resolve().parents[1]

# --- version, usage, help ------------------------------------------------------------------------------------


def test_version_is_the_package_version(run_cli):
    code, out, _ = run_cli("--version")
    assert code == 0
    assert out.strip() == f"arrhenia {__version__}"


def test_no_command_prints_the_usage_once(run_cli):
    code, out, err = run_cli()
    assert code == 2
    text = out + err
    assert text.count("usage:") == 1, text
    assert "new" in text and "fit" in text  # the commands are listed with it


def test_the_arrhenia_command_is_main_in_a_process_that_defers_full_collections(capsys):
    # pyproject's console script is cli.console: main's exit code, full garbage collections deferred (young
    # ones still run), and what is alive frozen before exit; restored here, since this process goes on.
    import tomllib

    scripts = tomllib.loads((REPO / "pyproject.toml").read_text())["project"]["scripts"]
    assert scripts == {"arrhenia": "inference.cli:console"}
    saved = gc.get_threshold()
    try:
        with pytest.raises(SystemExit) as stop:
            cli.console(["schema"])
        assert stop.value.code == 0
        assert gc.get_threshold() == (saved[0], saved[1], cli.FULL_COLLECTION_AFTER)
        assert gc.get_freeze_count() > 0
    finally:
        gc.unfreeze()
        gc.set_threshold(*saved)
    assert json.loads(capsys.readouterr().out)["title"]  # the schema, printed by main


def test_the_arrhenia_command_keeps_pytensors_c_modules_apart_unless_the_user_chose_a_folder(tmp_path, monkeypatch):
    # A process that has not imported PyTensor: with no folder chosen, PyTensor takes the one given (and so do
    # the processes it starts, through the environment); a folder named in PYTENSOR_FLAGS or in a PyTensor
    # config file, or a PyTensor already imported, is left alone.
    rc = tmp_path / "pytensorrc"
    script = f"""
import json, os
from pathlib import Path
from inference.processes import own_pytensor_cache as own
os.environ["PYTENSOR_FLAGS"] = "floatX=float64,compiledir={tmp_path}/mine"
chosen_by_flags = own(Path("{tmp_path}/a"))
os.environ["PYTENSOR_FLAGS"] = "floatX=float64"
os.environ["PYTENSORRC"] = "{rc}"
Path("{rc}").write_text("[global]\\nbase_compiledir = {tmp_path}/rc\\n")
chosen_by_file = own(Path("{tmp_path}/a"))
Path("{rc}").write_text("[global]\\nfloatX = float64\\n")
taken = own(Path("{tmp_path}/ours"))
import pytensor
print(json.dumps([chosen_by_flags, chosen_by_file, taken, os.environ["PYTENSOR_FLAGS"],
                  str(pytensor.config.base_compiledir), own(Path("{tmp_path}/later"))]))
"""
    env = {k: v for k, v in os.environ.items() if not k.startswith("PYTENSOR")}
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, env=env, check=True)
    by_flags, by_file, taken, flags, base, after_import = json.loads(done.stdout.strip().splitlines()[-1])
    assert (by_flags, by_file, taken, after_import) == (False, False, True, False)
    assert flags == f"floatX=float64,base_compiledir={tmp_path}/ours"
    assert base == f"{tmp_path}/ours"

    chosen = []
    monkeypatch.setattr(cli, "own_pytensor_cache", chosen.append)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    saved = gc.get_threshold()
    try:
        with pytest.raises(SystemExit), contextlib.redirect_stdout(io.StringIO()):
            cli.console(["--version"])
    finally:
        gc.unfreeze()
        gc.set_threshold(*saved)
    assert chosen == [tmp_path / "xdg" / "arrhenia" / "pytensor"]


def _schema_default(root: type, key: str) -> object:
    """The default the JSON Schema (what ``arrhenia schema`` prints) gives a dotted key path of ``root``: read
    independently of the CLI, which takes its defaults from the pydantic fields."""
    schema = root.model_json_schema()
    node = schema
    for part in key.split("."):
        node = node["properties"][part]
        if "$ref" in node:
            node = {**schema["$defs"][node["$ref"].rsplit("/", 1)[1]], **node}
    return node["default"]


def _help_texts() -> list[tuple[str, str]]:
    """(command and option, raw help text) of every option of every command."""
    parser = _parser()
    subparsers = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return [
        (f"{name} {'/'.join(action.option_strings) or action.dest}", action.help or "")
        for name, command in subparsers.choices.items()
        for action in command._actions
    ]


def test_every_documented_default_is_the_schemas():
    # A default the help states is either argparse's own (%(default)s, filled in from the option's real
    # default), or a key of the study or scenarios file with the value the schema gives it; a number written
    # any other way would be free to drift, so there must be none.
    roots = {"study": StudyFile, "scenarios": ScenarioFile}
    tied = 0
    for where, text in _help_texts():
        for stated in re.findall(r"\(default: ([^)]*)\)", text):
            found = re.fullmatch(r"the (study|scenarios) file's ([\w.]+), else (\S+)", stated)
            if found:
                file, key, value = found.groups()
                assert value == str(_schema_default(roots[file], key)), (where, stated)
                tied += 1
            elif "%(default)s" not in stated:
                assert not re.search(r"\d", stated), f"{where}: a number not tied to the schema: {stated}"
    assert tied >= 13  # draws, tune, chains, seed of fit, compare, demo and batch; predict's draws


def test_predict_help_states_the_scenario_files_default_draws(run_cli):
    code, out, _ = run_cli("predict", "--help")
    assert code == 0
    assert f"else {ScenarioFile.model_fields['draws'].default}" in " ".join(out.split())


# --- arrhenia new -----------------------------------------------------------------------------------------------


def _example_rows(template: str) -> list[str]:
    """The example row(s) a data template's comment gives ("Example row: ..." or "Example rows: a and b")."""
    found = re.search(r"Example rows?: (.*)", template)
    assert found, template
    return found.group(1).strip().split(" and ")


@pytest.mark.parametrize("kind", list(STARTERS))
def test_new_study_is_ready_for_check_once_a_row_is_filled_in(run_cli, tmp_path, kind):
    folder = tmp_path / "my study"
    code, out, err = run_cli("new", folder, "--kind", kind)
    assert code == 0, err
    assert f"arrhenia check {folder / STUDY_FILE}" in out
    study = (folder / STUDY_FILE).read_text()
    assert "$" not in study  # every placeholder filled in
    templates = dict(STARTERS[kind].data)
    named = set(re.findall(r"^  \w+: (\S+\.csv)", study, flags=re.MULTILINE))
    assert named == set(templates)  # the study names exactly the templates written beside it
    for name, template in templates.items():
        path = folder / name
        assert path.read_text() == template
        path.write_text(template + "".join(row + "\n" for row in _example_rows(template)))
    code, out, err = run_cli("check", folder / STUDY_FILE)
    assert code == 0, err
    assert "the study is valid" in out
    assert load_study(folder / STUDY_FILE).name == "my-study"


def test_new_never_replaces_a_file(run_cli, tmp_path):
    (tmp_path / "runs.csv").write_text("mine\n")
    code, _, err = run_cli("new", tmp_path, "--kind", "batch")
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "runs.csv" in lines[0] and "already exists" in lines[0], err
    assert (tmp_path / "runs.csv").read_text() == "mine\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["runs.csv"]  # nothing else written either


def test_new_into_a_file_is_refused(run_cli, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    code, _, err = run_cli("new", blocker, "--kind", "flow")
    assert code == 2 and "is a file, not a folder" in err


# --- tables readable alone ----------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def one_chain(tmp_path_factory):
    """A one-chain fit of five rate constants (30 to 70 degC) with k reported at 20 and 50 degC, run through the
    CLI with every warning recorded: (exit code, stdout, stderr, recorded warnings, log records, results folder).
    1000 draws keep the effective sample size above the verdict's fail limit, so only R-hat is in question."""
    folder = tmp_path_factory.mktemp("one-chain")
    (folder / "k.csv").write_text(BASE_TABLE)
    (folder / "study.yaml").write_text(BASE_STUDY + "report: {k_at: [20, 50]}\n")
    records: list[logging.LogRecord] = []

    class Keep(logging.Handler):
        def emit(self, record: logging.LogRecord) -> None:
            records.append(record)

    import arviz

    # ArviZ logs through a Logger of its own (``arviz._log``), outside logging's registry, to the stderr of import
    loggers = (logging.getLogger(), getattr(arviz, "_log", logging.getLogger("arviz")))
    handler = Keep(level=logging.WARNING)
    for logger in loggers:
        logger.addHandler(handler)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            out, err = io.StringIO(), io.StringIO()
            with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
                arguments = ["fit", folder / "study.yaml", "--chains", 1, "--draws", 1000, "--out", folder / "res"]
                code = main([str(a) for a in arguments])
    finally:
        for logger in loggers:
            logger.removeHandler(handler)
    return code, out.getvalue(), err.getvalue(), caught, records, folder / "res"


def test_summary_states_t_ref_and_flags_extrapolated_rates(one_chain):
    *_, results = one_chain
    summary = pd.read_csv(results / "summary.csv").set_index("parameter")
    manifest = json.loads((results / "manifest.json").read_text())
    np.testing.assert_allclose(summary["T_ref_K"], manifest["reference_temperature_K"], rtol=1e-7)  # 8 digits
    # The data span 30 to 70 degC: 20 degC lies outside, 50 degC inside; the other rows carry no flag.
    flags = pd.read_csv(results / "summary.csv", dtype=str, keep_default_na=False).set_index("parameter")
    assert flags["extrapolated"].to_dict() == {
        "k_ref[step]": "",
        "Ea[step]": "",
        "A[step]": "",
        "k[step, 20 degC]": "True",
        "k[step, 50 degC]": "False",
        "sigma": "",
    }


def test_fit_checks_name_their_units(one_chain):
    *_, results = one_chain
    checks = pd.read_csv(results / "fit_checks.csv")
    assert {"temperature_degC", "unit", "observed"} <= set(checks.columns)
    assert "temperature" not in checks.columns
    assert (checks["unit"] == "1/s").all()
    np.testing.assert_allclose(checks["temperature_degC"], [30, 40, 50, 60, 70])


def test_network_fit_checks_name_their_units(fitted):
    _, result = fitted
    checks = pd.read_csv(result.results_dir / "fit_checks.csv")
    assert {"temperature_degC", "time_min", "unit"} <= set(checks.columns)
    assert (checks["unit"] == "mol/L").all()
    assert list(result.fit_checks.columns) == list(checks.columns)  # the API's table is the file's
    assert (pd.read_csv(result.results_dir / "summary.csv")["T_ref_K"] == 330.0).all()


def test_declared_quantities_have_their_own_units():
    # The area % demo: three compositions with scale 100, so every value is in %.
    import arviz as az

    study = load_study(REPO / "data_demo" / "area_study.yaml")
    obs = read_observations(study)
    fake = az.from_dict(posterior_predictive={"observation": np.ones((1, 5, obs.value.size))})
    checks = fit_checks_file(study, network_fit_checks(study, obs, fake))
    assert (checks["unit"] == "%").all()
    assert {"temperature_degC", "time_min", "quantity", "censored"} <= set(checks.columns)


def test_screen_labels_posterior_and_classical_intervals(one_chain):
    _, out, *_ = one_chain
    assert "posterior (median and 90 % interval):" in out
    assert "classical estimates (95 % confidence intervals):" in out


# --- messages -------------------------------------------------------------------------------------------------------


def _one_line(run_cli, *args) -> str:
    code, _, err = run_cli(*args)
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    return lines[0]


def test_a_bare_number_for_a_prior_shows_the_right_form(make_study, run_cli):
    path = make_study(BASE_STUDY.replace("k_ref: {median: 0.001, factor: 100}", "k_ref: 0.02"))
    line = _one_line(run_cli, "check", path)
    assert "reactions[0].k_ref" in line and "k_ref: {median:" in line and "factor:" in line, line
    assert "LogNormalPrior" not in line and "more problem" not in line, line


def test_a_key_in_the_wrong_case_gets_a_suggestion(make_study, run_cli):
    line = _one_line(run_cli, "check", make_study(BASE_STUDY.replace("Ea:", "ea:")))
    assert "reactions[0].ea: unknown key" in line and "did you mean 'Ea'" in line, line
    assert "Ea: required key is missing" not in line, line  # the same slip, not a second problem


def test_the_other_problems_are_shown(make_study, run_cli):
    study = BASE_STUDY.replace("energy: kJ/mol", "energy: kJ/mol, tim: s").replace("draws: 200", "draws: many")
    study = study.replace("Ea: {mean: 80, sd: 30}", "ea: {mean: 80, sd: 30}").replace("factor: 100", "factor: 0.5")
    study = study.replace("chains: 2", "chains: 0")
    line = _one_line(run_cli, "check", make_study(study))
    for fragment in ("units.tim", "did you mean 'time'", "reactions[0].ea", "did you mean 'Ea'", "k_ref.factor"):
        assert fragment in line, line
    assert "(and 1 more problem)" in line, line  # the fifth: sampling.chains


def test_a_semicolon_separated_table_gets_a_separator_hint(make_study, run_cli):
    line = _one_line(run_cli, "check", make_study(table=BASE_TABLE.replace(",", ";")))
    assert "k.csv: line 1" in line and "semicolons" in line and "commas" in line, line


def test_check_against_a_missing_folder_says_it_does_not_exist(make_study, run_cli, tmp_path):
    line = _one_line(run_cli, "check", make_study(), "--against", tmp_path / "nowhere")
    assert "nowhere" in line and "does not exist" in line, line


def test_one_chain_is_told_that_r_hat_needs_two(one_chain):
    code, out, err, caught, records, results = one_chain
    assert code == 3, err  # not trusted: convergence cannot be checked
    diagnostics = json.loads((results / "diagnostics.json").read_text())
    assert diagnostics["verdict"] == "warn" and diagnostics["chains"] == 1
    advice = " ".join(diagnostics["advice"])
    assert "R-hat needs two or more chains" in advice and "--chains 2" in advice
    assert "nan" not in advice.lower() and "chains disagree" not in advice
    assert "R-hat needs two or more chains" in out
    assert "Shape validation" not in err + "".join(r.getMessage() for r in records)
    assert not [w for w in caught if "All-NaN" in str(w.message) or "Shape validation" in str(w.message)]


def test_check_states_t_ref_once_in_kelvin_and_says_when_prior_draws_follow(make_study, run_cli, tmp_path):
    kelvin_study = BASE_STUDY.replace("temperature: degC", "temperature: K")
    kelvin_table = "temperature,k\n" + "".join(f"{t + 273.15:g},{k}\n" for t, k in ((30, 1.2e-4), (50, 1.1e-3)))
    code, out, _ = run_cli("check", make_study(kelvin_study, kelvin_table))
    assert code == 0
    assert re.search(r"T_ref = [\d.]+ K \(auto", out), out  # not "T_ref = 313.15 K = 313.15 K"
    assert "nothing was sampled" in out
    code, out, _ = run_cli("check", make_study(), "--prior-predictive", "--draws", "50", "--out", tmp_path / "prior")
    assert code == 0
    assert "drawing from the priors" in out and "nothing was sampled" not in out
