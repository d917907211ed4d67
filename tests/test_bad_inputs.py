"""Every user mistake gives exit 2, one line naming the file and key, row or column, and writes nothing.

Common practice for command-line tools (exit status 2 for usage errors, as argparse and POSIX utilities do).
"""

from __future__ import annotations

import pytest
from conftest import BASE_STUDY, BASE_TABLE


def replace(old: str, new: str, text: str = BASE_STUDY) -> str:
    assert old in text, old
    return text.replace(old, new)


# (id, study text or None for the base, table text or None for the base, expected fragments of the message)
CASES = [
    (
        "yaml-syntax",
        replace("Ea: {mean: 80, sd: 30}", "Ea: {mean: 80, sd: 30"),
        None,
        ["study.yaml: line", "YAML syntax error"],
    ),
    ("tab-indent", replace("  - name: step", "\t- name: step"), None, ["study.yaml: line", "tabs"]),
    (
        "misspelt-top-key",
        replace("reactions:", "reactons:"),
        None,
        ["study.yaml: reactons", "unknown key", "did you mean 'reactions'"],
    ),
    (
        "misspelt-nested-key",
        replace("Ea: {mean", "Eaa: {mean"),
        None,
        ["study.yaml: reactions[0].Eaa", "did you mean 'Ea'"],
    ),
    ("missing-required-key", replace("study: t-study\n", ""), None, ["study.yaml: study", "required key"]),
    ("wrong-type", replace("draws: 200", "draws: many"), None, ["study.yaml: sampling.draws", "integer"]),
    ("quoted-number", replace("mean: 80", "mean: '80'"), None, ["study.yaml: reactions[0].Ea.mean"]),
    ("negative-prior-sd", replace("sd: 30", "sd: -5"), None, ["study.yaml: reactions[0].Ea.sd", "greater than 0"]),
    ("factor-not-above-one", replace("factor: 100", "factor: 0.5"), None, ["reactions[0].k_ref.factor"]),
    (
        "duplicate-reaction",
        replace(
            "sampling:", "  - name: step\n    k_ref: {median: 1, factor: 10}\n    Ea: {mean: 50, sd: 10}\nsampling:"
        ),
        None,
        ["study.yaml", "'step' is used twice"],
    ),
    ("unknown-unit", replace("energy: kJ/mol", "energy: kJ/mool"), None, ["study.yaml: units.energy", "kJ/mool"]),
    (
        "energy-unit-on-temperature",
        replace("temperature: degC", "temperature: kJ/mol"),
        None,
        ["study.yaml: units.temperature", "not a temperature unit"],
    ),
    (
        "missing-rate-constant-unit",
        replace(", rate_constant: 1/s", ""),
        None,
        ["study.yaml: units.rate_constant", "required"],
    ),
    (
        "rate-unit-without-time",
        replace("rate_constant: 1/s", "rate_constant: mol/L"),
        None,
        ["units.rate_constant", "not a rate constant unit"],
    ),
    ("bad-study-name", replace("study: t-study", "study: 'my study/../x'"), None, ["study.yaml: study"]),
    (
        "reference-temperature-garbage",
        BASE_STUDY + "reference_temperature: warm\n",
        None,
        ["study.yaml: reference_temperature", "neither 'auto' nor a temperature"],
    ),
    (
        "reference-temperature-absurd",
        BASE_STUDY + "reference_temperature: 5000\n",
        None,
        ["reference_temperature", "plausible"],
    ),
    ("absolute-noise-on-k", BASE_STUDY + "noise: {model: absolute}\n", None, ["study.yaml: noise.model"]),
    ("unknown-noise-model", BASE_STUDY + "noise: {model: gaussian}\n", None, ["study.yaml: noise.model"]),
    ("no-data-mode", replace("data: {rate_constants: k.csv}", "data: {}"), None, ["study.yaml: data"]),
    ("yaml-alias", BASE_STUDY + "title: &a x\nreport: *a\n", None, ["study.yaml", "aliases"]),
    ("study-not-mapping", "- just\n- a list\n", None, ["study.yaml", "mapping"]),
    ("study-empty", "", None, ["study.yaml", "empty"]),
    ("missing-data-file", replace("k.csv", "kk.csv"), None, ["kk.csv", "not found"]),
    ("empty-data-file", None, "", ["k.csv", "empty"]),
    ("header-only", None, "temperature,k\n", ["k.csv", "no data rows"]),
    ("missing-column", None, "temperature,rate\n30,1\n40,2\n", ["k.csv", "unknown column 'rate'"]),
    ("missing-k-column", None, "temperature\n30\n40\n", ["k.csv", "missing column 'k'"]),
    (
        "misspelt-column",
        None,
        BASE_TABLE.replace("temperature", "tempertaure"),
        ["k.csv", "did you mean 'temperature'"],
    ),
    ("non-numeric-cell", None, BASE_TABLE.replace("3.9e-4", "fast"), ["k.csv: line 3, column 'k'", "'fast'"]),
    ("blank-cell", None, BASE_TABLE.replace("1.1e-3", ""), ["k.csv: line 4, column 'k'", "blank"]),
    ("nan-cell", None, BASE_TABLE.replace("1.1e-3", "nan"), ["k.csv: line 4, column 'k'", "finite"]),
    ("negative-k", None, BASE_TABLE.replace("3.0e-3", "-3.0e-3"), ["k.csv: line 5, column 'k'", "positive"]),
    ("zero-k", None, BASE_TABLE.replace("3.0e-3", "0"), ["k.csv: line 5, column 'k'", "positive"]),
    (
        "impossible-temperature",
        None,
        BASE_TABLE.replace("30,", "-300,"),
        ["k.csv: line 2, column 'temperature'", "absolute zero"],
    ),
    (
        "kelvin-stated-as-celsius",
        replace("temperature: degC", "temperature: K"),
        None,
        ["k.csv: line 2, column 'temperature'", "plausible"],
    ),
    ("one-temperature", None, "temperature,k\n50,1e-3\n50,1.1e-3\n", ["k.csv", "one temperature"]),
    (
        "unknown-reaction-label",
        None,
        "temperature,k,reaction\n30,1e-4,step\n40,3e-4,stpe\n",
        ["k.csv: line 3, column 'reaction'", "did you mean 'step'"],
    ),
    (
        "both-error-columns",
        None,
        "temperature,k,k_sd,k_rel_sd\n30,1e-4,1e-5,0.1\n40,3e-4,1e-5,0.1\n",
        ["k.csv", "not both"],
    ),
]


@pytest.mark.parametrize(("study", "table", "expected"), [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_mistake_gives_one_clear_line_and_exit_2(make_study, run_cli, tmp_path, study, table, expected):
    path = make_study(study if study is not None else BASE_STUDY, table if table is not None else BASE_TABLE)
    out = tmp_path / "results"
    code, _stdout, stderr = run_cli("fit", path, "--out", out)
    assert code == 2, stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    assert lines[0].startswith("arrhenia: error: ")
    for fragment in expected:
        assert fragment in lines[0], lines[0]
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_missing_study_file(run_cli, tmp_path):
    code, _, stderr = run_cli("check", tmp_path / "nope.yaml")
    assert code == 2
    assert "nope.yaml: file not found" in stderr


def test_results_path_that_is_a_file(make_study, run_cli, tmp_path):
    path = make_study()
    blocker = tmp_path / "taken"
    blocker.write_text("not a folder")
    code, _, stderr = run_cli("fit", path, "--out", blocker)
    assert code == 2
    assert "results path is a file" in stderr
    assert blocker.read_text() == "not a folder"


def test_existing_results_are_not_overwritten_without_flag(make_study, run_cli, tmp_path):
    path = make_study()
    out = tmp_path / "results"
    out.mkdir()
    (out / "summary.csv").write_text("earlier results")
    code, _, stderr = run_cli("fit", path, "--out", out)
    assert code == 2
    assert "--overwrite" in stderr
    assert (out / "summary.csv").read_text() == "earlier results"


def test_unreadable_study_file(make_study, run_cli, monkeypatch):
    # CI runs as root, who can read any file, so the refusal of the operating system is simulated.
    path = make_study()

    def refuse(self):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(type(path), "read_bytes", refuse)
    code, _, stderr = run_cli("check", path)
    assert code == 2
    assert "study.yaml: cannot be read (permission denied)" in stderr
