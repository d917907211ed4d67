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
        "held-step-in-a-rate-constant-study",
        replace("    k_ref:", "    fast_equilibrium: true\n    k_ref:"),
        None,
        ["reactions[0].fast_equilibrium", "is for reaction networks"],
    ),
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

    def refuse(path):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr("inference.inputs.files._open_for_reading", refuse)
    code, _, stderr = run_cli("check", path)
    assert code == 2
    assert "study.yaml: cannot be read (permission denied)" in stderr


NETWORK_STUDY = """\
study: net
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, B, C]
reactions:
  - name: step
    equation: A + B -> C
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
"""
RUNS = "run,temperature,A,B,C\nr1,50,1.0,1.2,0\nr2,60,0.8,1.0,0\n"
MEASUREMENTS = "run,time,A,C\nr1,1,0.9,0.1\nr1,3,0.7,0.3\nr2,1,0.6,0.2\nr2,2,0.5,0.3\n"


def net_replace(old: str, new: str) -> str:
    return replace(old, new, NETWORK_STUDY)


HELD_STUDY = net_replace(
    "    equation: A + B -> C\n    k_ref: {median: 0.1, factor: 10}\n    Ea: {mean: 60, sd: 20}\n",
    "    equation: A + B <=> C\n    fast_equilibrium: true\n    K_ref: {median: 1, factor: 10}\n"
    "    dH: {mean: 0, sd: 10}\n  - name: slow\n    equation: C -> D\n    k_ref: {median: 0.1, factor: 10}\n"
    "    Ea: {mean: 60, sd: 20}\n",
).replace("[A, B, C]", "[A, B, C, D]")
HELD_RUNS = "run,temperature,A,B,C,D\nr1,50,1.0,1.2,0,0\nr2,60,0.8,1.0,0,0\n"


def held_replace(old: str, new: str) -> str:
    return replace(old, new, HELD_STUDY)


# (id, study, runs, measurements, expected fragments)
NETWORK_CASES = [
    (
        "held-irreversible",
        held_replace("A + B <=> C", "A + B -> C"),
        HELD_RUNS,
        MEASUREMENTS,
        ["reactions[0].fast_equilibrium", "only a reversible step"],
    ),
    (
        "held-with-k_ref",
        held_replace(
            "    fast_equilibrium: true\n", "    fast_equilibrium: true\n    k_ref: {median: 1, factor: 10}\n"
        ),
        HELD_RUNS,
        MEASUREMENTS,
        ["reactions[0].k_ref", "has no rate constant"],
    ),
    (
        "held-with-a-rate-law",
        held_replace("    fast_equilibrium: true\n", "    fast_equilibrium: true\n    rate_law: power_law\n"),
        HELD_RUNS,
        MEASUREMENTS,
        ["reactions[0].rate_law", "no rate law"],
    ),
    (
        "two-held-steps",
        held_replace(
            "C -> D\n    k_ref: {median: 0.1, factor: 10}\n    Ea: {mean: 60, sd: 20}\n",
            "C <=> D\n    fast_equilibrium: true\n    K_ref: {median: 1, factor: 10}\n    dH: {mean: 0, sd: 10}\n",
        ),
        HELD_RUNS,
        MEASUREMENTS,
        ["reactions[1].fast_equilibrium", "already held"],
    ),
    (
        "rated-step-without-k_ref",
        held_replace("    k_ref: {median: 0.1, factor: 10}\n", ""),
        HELD_RUNS,
        MEASUREMENTS,
        ["reactions[1].k_ref", "required key is missing"],
    ),
    (
        "held-step-cannot-start",
        HELD_STUDY,
        "run,temperature,A,B,C,D\nr1,50,1.0,0,0,0\nr2,60,0.8,1.0,0,0\n",
        MEASUREMENTS,
        ["runs.csv: line 2, columns 'B' and 'C'", "cannot start at its equilibrium"],
    ),
    (
        "unknown-species",
        net_replace("A + B -> C", "A + D -> C"),
        RUNS,
        MEASUREMENTS,
        ["study.yaml: reactions[0].equation", "'D' is not in species"],
    ),
    ("misspelt-species", net_replace("A + B -> C", "A + BB -> C"), RUNS, MEASUREMENTS, ["did you mean 'B'"]),
    ("no-reactants", net_replace("A + B -> C", "-> C"), RUNS, MEASUREMENTS, ["no reactants"]),
    ("no-arrow", net_replace("A + B -> C", "A + B = C"), RUNS, MEASUREMENTS, ["reactions[0].equation", "no arrow"]),
    (
        "missing-equation",
        net_replace("    equation: A + B -> C\n", ""),
        RUNS,
        MEASUREMENTS,
        ["reactions[0].equation", "required"],
    ),
    (
        "reversible-without-K",
        net_replace("A + B -> C", "A + B <=> C"),
        RUNS,
        MEASUREMENTS,
        ["reactions[0].K_ref", "reversible"],
    ),
    (
        "K-on-irreversible",
        NETWORK_STUDY + "    K_ref: {median: 1, factor: 10}\n    dH: {mean: 0, sd: 10}\n",
        RUNS,
        MEASUREMENTS,
        ["reactions[0]", "only for reversible"],
    ),
    (
        "orders-on-mass-action",
        NETWORK_STUDY + "    orders: {A: 1}\n",
        RUNS,
        MEASUREMENTS,
        ["reactions[0].orders", "power_law"],
    ),
    (
        "order-of-non-reactant",
        NETWORK_STUDY + "    rate_law: power_law\n    orders: {C: 1}\n",
        RUNS,
        MEASUREMENTS,
        ["reactions[0].orders.C", "not a reactant"],
    ),
    (
        "order-bounds-reversed",
        NETWORK_STUDY + "    rate_law: power_law\n    orders: {A: {lower: 2, upper: 1}}\n",
        RUNS,
        MEASUREMENTS,
        ["'lower' must be below 'upper'"],
    ),
    (
        "unknown-rate-law",
        net_replace("equation: A + B -> C", "equation: A + B -> C\n    rate_law: magic"),
        RUNS,
        MEASUREMENTS,
        ["reactions[0].rate_law"],
    ),
    ("species-twice", net_replace("[A, B, C]", "[A, B, C, A]"), RUNS, MEASUREMENTS, ["'A' is listed twice"]),
    ("missing-time-unit", net_replace("time: min, ", ""), RUNS, MEASUREMENTS, ["units.time", "required"]),
    (
        "uncertain-unknown-species",
        NETWORK_STUDY + "initial_uncertainty: {Z: 0.1}\n",
        RUNS,
        MEASUREMENTS,
        ["initial_uncertainty.Z"],
    ),
    ("duplicate-run", NETWORK_STUDY, RUNS + "r1,70,1,1,0\n", MEASUREMENTS, ["runs.csv: line 4", "appears twice"]),
    (
        "missing-initial-column",
        NETWORK_STUDY,
        "run,temperature,A,B\nr1,50,1,1\n",
        MEASUREMENTS,
        ["runs.csv", "missing column 'C'"],
    ),
    (
        "negative-initial",
        NETWORK_STUDY,
        RUNS.replace("1.2", "-1.2"),
        MEASUREMENTS,
        ["runs.csv: line 2, column 'B'", "negative"],
    ),
    (
        "unknown-run",
        NETWORK_STUDY,
        RUNS,
        MEASUREMENTS + "r9,1,0.5,0.5\n",
        ["measurements.csv: line 6, column 'run'", "'r9'"],
    ),
    (
        "unknown-species-long",
        NETWORK_STUDY,
        RUNS,
        "run,time,species,value\nr1,1,A,0.9\nr1,1,Q,0.1\n",
        ["measurements.csv: line 3, column 'species'", "'Q'"],
    ),
    (
        "negative-time",
        NETWORK_STUDY,
        RUNS,
        MEASUREMENTS.replace("r1,3,", "r1,-3,"),
        ["measurements.csv: line 3, column 'time'", "negative"],
    ),
    (
        "times-out-of-order",
        NETWORK_STUDY,
        RUNS,
        "run,time,A\nr1,3,0.7\nr1,1,0.9\nr2,1,0.6\n",
        ["measurements.csv: line 3, column 'time'", "goes back"],
    ),
    ("duplicate-time", NETWORK_STUDY, RUNS, "run,time,A\nr1,1,0.7\nr1,1,0.9\nr2,1,0.6\n", ["repeats"]),
    (
        "zero-with-proportional-noise",
        NETWORK_STUDY,
        RUNS,
        MEASUREMENTS.replace("0.9,0.1", "0.9,0"),
        ["measurements.csv: line 2, column 'C'", "not positive", "absolute"],
    ),
    ("mixed-layouts", NETWORK_STUDY, RUNS, "run,time,species,value,A\nr1,1,A,0.9,1\n", ["mixes the wide layout"]),
    ("run-without-measurements", NETWORK_STUDY, RUNS + "r3,70,1,1,0\n", MEASUREMENTS, ["run 'r3' has no measurements"]),
    (
        "start-not-finite",
        net_replace("median: 0.1, factor: 10", "median: 1.0e+300, factor: 10"),
        RUNS,
        MEASUREMENTS,
        ["at the priors' centre", "k_ref"],
    ),
    (
        "unbalanced-equation",
        NETWORK_STUDY + "formulas: {A: C2H4O2, B: CH4O, C: C3H6O2}\n",
        RUNS,
        MEASUREMENTS,
        ["reactions[0].equation", "does not balance (products minus reactants: H -2, O -1)"],
    ),
    (
        "bad-formula",
        NETWORK_STUDY + "formulas: {A: C2h4}\n",
        RUNS,
        MEASUREMENTS,
        ["formulas.A", "not a molecular formula"],
    ),
    (
        "start-not-integrable",
        net_replace("A + B -> C", "A -> C")
        + "  - name: fast\n    equation: B + C -> A\n    k_ref: {median: 1.5e+308, factor: 10}\n"
        "    Ea: {mean: 200, sd: 20}\n",
        RUNS,
        MEASUREMENTS,
        ["cannot be integrated at the priors' centre (first in run 'r"],
    ),
]


@pytest.mark.parametrize(
    ("study", "runs", "measurements", "expected"), [c[1:] for c in NETWORK_CASES], ids=[c[0] for c in NETWORK_CASES]
)
def test_network_mistake_gives_one_clear_line(run_cli, tmp_path, study, runs, measurements, expected):
    (tmp_path / "runs.csv").write_text(runs)
    (tmp_path / "measurements.csv").write_text(measurements)
    path = tmp_path / "study.yaml"
    path.write_text(study)
    out = tmp_path / "results"
    code, _, stderr = run_cli("fit", path, "--out", out)
    assert code == 2, stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    for fragment in expected:
        assert fragment in lines[0], lines[0]
    assert not out.exists()


def test_species_in_no_reaction_is_a_warning(run_cli, tmp_path):
    (tmp_path / "runs.csv").write_text("run,temperature,A,B,C,S\nr1,50,1.0,1.2,0,5\nr2,60,0.8,1.0,0,5\n")
    (tmp_path / "measurements.csv").write_text(MEASUREMENTS)
    path = tmp_path / "study.yaml"
    path.write_text(NETWORK_STUDY.replace("[A, B, C]", "[A, B, C, S]"))
    code, out, _ = run_cli("check", path)
    assert code == 0
    assert "warning: species 'S' takes part in no reaction" in out


def test_unidentifiable_reactions_are_warned_about(run_cli, tmp_path):
    # C -> D with neither C nor D measured, and nothing linking it to A or B (common practice: such a rate
    # constant is set by its prior alone).
    (tmp_path / "runs.csv").write_text("run,temperature,A,B,C,D,E\nr1,50,1.0,1.2,0,1,0\nr2,50,0.8,1.0,0,1,0\n")
    (tmp_path / "measurements.csv").write_text(MEASUREMENTS.replace(",C", ",A").replace("run,time,A,A", "run,time,A,B"))
    path = tmp_path / "study.yaml"
    path.write_text(
        NETWORK_STUDY.replace("[A, B, C]", "[A, B, C, D, E]")
        + """\
  - name: side
    equation: D -> E
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
"""
    )
    code, out, _ = run_cli("check", path)
    assert code == 0, out
    assert "warning: reaction 'side' is linked to no measured species" in out
    assert "warning: every run is at one temperature" in out


def test_huge_tables_fail_fast(run_cli, tmp_path):
    path = tmp_path / "study.yaml"
    path.write_text(BASE_STUDY)
    (tmp_path / "k.csv").write_text("temperature,k\n" + "50,1e-3\n" * 250_000)
    code, _, stderr = run_cli("check", path)
    assert code == 2
    assert "more than the 200000 rows" in stderr


def test_exponent_numbers_read_as_numbers_as_in_yaml_1_2(tmp_path):
    # YAML 1.2 core schema (yaml.org/spec/1.2.2, sec. 10.3.2): 1e6 and 1.0e6 are floats; PyYAML's 1.1 rules
    # would read them as strings, which the strict schema would then refuse.
    from inference.inputs.config import read_yaml

    path = tmp_path / "numbers.yaml"
    path.write_text("a: 1.0e6\nb: 1e-3\nc: '1e6'\nd: 60\n")
    assert read_yaml(path) == {"a": 1.0e6, "b": 1.0e-3, "c": "1e6", "d": 60}
