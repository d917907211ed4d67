"""A value 0 at t = 0 of a species the run does not start with restates the initial condition: under noise on the log
of values it is set aside (and `check` says how many), so the study fits exactly as without those cells; a zero
anywhere else is refused with the rule and a hint."""

from __future__ import annotations

from dataclasses import fields

import numpy as np
import pytest

from inference import load_study
from inference.inputs.data import read_observations
from inference.workflows.kinds import open_problem

STUDY = """\
study: zeros
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
# Each run's t = 0 row states A as charged and C (not charged) as 0: the two zeros restate the initial condition.
WITH_ZEROS = "run,time,A,C\nr1,0,1.0,0\nr1,1,0.9,0.1\nr1,3,0.7,0.3\nr2,0,0.8,0\nr2,1,0.6,0.2\nr2,2,0.5,0.3\n"
WITHOUT = WITH_ZEROS.replace("1.0,0\n", "1.0,\n").replace("0.8,0\n", "0.8,\n")


def _study(folder, measurements: str, study: str = STUDY):
    folder.mkdir(exist_ok=True)
    (folder / "study.yaml").write_text(study)
    (folder / "runs.csv").write_text(RUNS)
    (folder / "measurements.csv").write_text(measurements)
    return folder / "study.yaml"


@pytest.mark.parametrize("noise", ["proportional", "robust"])
def test_zeros_restating_the_initial_condition_are_set_aside(tmp_path, run_cli, noise):
    study = STUDY + f"noise: {{model: {noise}}}\n"
    with_zeros = load_study(_study(tmp_path / "with", WITH_ZEROS, study))
    without = load_study(_study(tmp_path / "without", WITHOUT, study))
    a, b = read_observations(with_zeros), read_observations(without)
    assert (a.restated_zeros, b.restated_zeros) == (2, 0)
    for field in fields(a):
        if field.name in ("restated_zeros", "runs_path", "measurements_path"):
            continue
        left, right = getattr(a, field.name), getattr(b, field.name)
        if isinstance(left, tuple) and left and isinstance(left[0], np.ndarray):
            assert all(np.array_equal(x, y) for x, y in zip(left, right, strict=True)), field.name
        elif isinstance(left, np.ndarray) or isinstance(right, np.ndarray):
            assert np.array_equal(left, right), field.name
        elif field.name == "setups":  # dataclasses holding arrays
            assert repr(left) == repr(right)
        else:
            assert left == right, field.name
    # The same observations give the same model: equal log densities at the same point.
    densities = []
    for loaded in (with_zeros, without):
        model = open_problem(loaded).build_model(330.0)
        densities.append(float(model.compile_logp()(model.initial_point())))
    assert densities[0] == densities[1]
    code, out, _ = run_cli("check", tmp_path / "with" / "study.yaml")
    assert code == 0
    assert "set aside: 2 value(s) of 0 at t = 0 where the run starts without that species" in out


def test_under_absolute_noise_a_zero_at_t0_is_still_fitted(tmp_path):
    study = load_study(_study(tmp_path, WITH_ZEROS, STUDY + "noise: {model: absolute, sigma: {scale: 0.05}}\n"))
    obs = read_observations(study)
    assert obs.restated_zeros == 0
    assert np.count_nonzero(obs.value == 0) == 2


@pytest.mark.parametrize(
    ("measurements", "where", "fragments"),
    [
        (
            WITH_ZEROS.replace("r1,1,0.9,0.1", "r1,1,0.9,0"),
            "measurements.csv: line 3, column 'C'",
            ["0 at t = 1 min", "'proportional' noise", "'<0.01'", "noise.model: absolute"],
        ),
        (
            # A is charged (1.0 mol/L): a 0 at t = 0 contradicts the initial condition instead of restating it.
            WITH_ZEROS.replace("r1,0,1.0,0", "r1,0,0,0"),
            "measurements.csv: line 2, column 'A'",
            ["0 at t = 0 min", "set aside only where the run's initial concentration of that species is 0"],
        ),
        (
            "run,time,species,value\nr1,0,C,0\nr1,2,C,0\nr1,1,A,0.9\nr2,1,A,0.6\n",
            "measurements.csv: line 3, column 'value'",
            ["0 at t = 2 min", "not positive"],
        ),
    ],
)
def test_a_zero_elsewhere_is_refused_with_the_rule(tmp_path, run_cli, measurements, where, fragments):
    code, _, err = run_cli("check", _study(tmp_path, measurements))
    assert code == 2
    assert len(err.strip().splitlines()) == 1, err
    assert where in err and all(fragment in err for fragment in fragments), err
