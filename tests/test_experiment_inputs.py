"""Experiments as they are run (issue #16): temperature histories, feeds, measured amounts and steady states of
flow reactors, read from small files into ``Observations``; every bad input exits 2 with one line naming the file
and the key, line or column.

The expected numbers are worked by hand here: the time-weighted mean of straight lines is the trapezoid rule,
exact for piecewise-linear T(t) (from memory); the liquid volume of a dosed batch is V0 plus the integral of the
volumetric inflow (a volume balance, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from inference import load_study
from inference.inputs.data import read_observations

STUDY = """\
study: exp
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv, temperatures: temperatures.csv, feeds: feeds.csv}
species: [A, B, C]
reactions:
  - name: step
    equation: A + B -> C
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
"""
RUNS = "run,temperature,volume,A,B,C\nr1,,2.0,1.0,0,0\nr2,60,1.5,0.8,1.0,0\n"
MEASUREMENTS = "run,time,A,C\nr1,5,0.9,0.1\nr1,15,0.7,0.3\nr1,90,0.5,0.4\nr2,1,0.6,0.2\nr2,30,0.5,0.3\n"
TEMPERATURES = "run,time,temperature\nr1,0,20\nr1,30,80\nr1,60,80\n"
FEEDS = "run,start,stop,rate,B\nr1,0,10,0.1,5\nr1,10,20,0.05,5\n"

FLOW_STUDY = """\
study: flow
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {steady_states: outlet.csv}
species: [A, B, C]
reactions:
  - name: step
    equation: A + B -> C
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
"""
OUTLET = "run,reactor,temperature,residence_time,feed_A,feed_B,A,C,group\nc1,cstr,50,2,1.0,1.2,0.6,0.4,day1\n" + (
    "p1,PFR,60,4,1.0,,0.3,,day2\n"
)


def write(folder, study=STUDY, **files: str | None):
    """Write the study file and its data files (``runs=...``; None leaves a file out) into ``folder``."""
    defaults = {"runs": RUNS, "measurements": MEASUREMENTS, "temperatures": TEMPERATURES, "feeds": FEEDS}
    if "steady_states" in study:
        defaults = {"outlet": OUTLET}
    for name, text in {**defaults, **files}.items():
        if text is not None:
            (folder / f"{name}.csv").write_text(text)
    path = folder / "study.yaml"
    path.write_text(study)
    return path


def test_temperature_history_gives_the_time_weighted_nominal_temperature(tmp_path):
    study = load_study(write(tmp_path))
    obs = read_observations(study)
    # r1: 20 -> 80 degC over 0-30 min, then 80 degC held to its last measurement at 90 min:
    # (30 * (20 + 80) / 2 + 60 * 80) / 90 = 70 degC.
    assert obs.temperature_K == pytest.approx([70.0 + 273.15, 60.0 + 273.15], abs=1e-9)
    assert obs.setups[0].nominal_kelvin is None and obs.setups[1].nominal_kelvin == pytest.approx(333.15)
    conditions = obs.conditions
    assert conditions.knot_offsets.tolist() == [0, 3, 4]
    assert conditions.knot_time.tolist() == [0.0, 30.0, 60.0, 0.0]
    assert conditions.knot_kelvin == pytest.approx([293.15, 353.15, 353.15, 333.15])
    assert conditions.ramped.tolist() == [True, False]
    assert conditions.nominal_kelvin == pytest.approx(obs.temperature_K)
    assert study.sensitivity_layout().temperature_varies
    assert study.mode == "network"
    assert not obs.isothermal_batch


def test_feeds_become_dosing_intervals_and_amounts_get_the_volume_as_factor(tmp_path):
    study_text = STUDY.replace("feeds: feeds.csv}", "feeds: feeds.csv, measured_as: amount}")
    # r2 has two overlapping feeds: their rates add up while both run.
    feeds = FEEDS + "r2,0,10,0.2,2\nr2,5,10,0.1,4\n"
    obs = read_observations(load_study(write(tmp_path, study_text, feeds=feeds)))
    c = obs.conditions
    r1 = slice(c.dose_offsets[0], c.dose_offsets[1])
    assert c.dose_time[r1].tolist() == [0.0, 10.0, 20.0]
    assert c.dose_flow[r1] == pytest.approx([0.1, 0.05, 0.0])
    assert c.dose_inflow[r1][:, 1] == pytest.approx([0.5, 0.25, 0.0])  # rate x feed concentration of B
    assert c.dose_volume[r1] == pytest.approx([2.0, 3.0, 3.5])  # 2 + 0.1 * 10, then + 0.05 * 10
    r2 = slice(c.dose_offsets[1], c.dose_offsets[2])
    assert c.dose_time[r2].tolist() == [0.0, 5.0, 10.0]
    assert c.dose_flow[r2] == pytest.approx([0.2, 0.3, 0.0])
    assert c.dose_inflow[r2][:, 1] == pytest.approx([0.4, 0.8, 0.0])
    # V(t) at each measurement: r1 at 5, 15, 90 min; r2 at 1 and 30 min (two values per time, wide layout).
    volume = {
        (0, 5.0): 2.0 + 0.1 * 5,
        (0, 15.0): 3.0 + 0.05 * 5,
        (0, 90.0): 3.5,
        (1, 1.0): 1.5 + 0.2 * 1,
        (1, 30.0): 1.5 + 0.2 * 5 + 0.3 * 5,
    }
    expected = [volume[(int(r), float(t))] for r, t in zip(obs.run_index, obs.time, strict=True)]
    assert obs.factor == pytest.approx(expected)
    assert obs.factor.size == obs.value.size == 10
    assert [len(s.feeds) for s in obs.setups] == [2, 2]
    assert obs.setups[0].volume == 2.0


def test_concentrations_need_no_factor_and_a_volume_only_where_fed(tmp_path):
    runs = "run,temperature,volume,A,B,C\nr1,,2.0,1.0,0,0\nr2,60,,0.8,1.0,0\n"
    obs = read_observations(load_study(write(tmp_path, runs=runs)))
    assert obs.factor is None
    assert [s.volume for s in obs.setups] == [2.0, 1.0]


def test_a_fed_run_may_start_without_reactants(tmp_path):
    runs = "run,temperature,volume,A,B,C\nr1,,2.0,0,0,0\nr2,60,1.5,0.8,1.0,0\n"
    feeds = "run,start,stop,rate,A,B\nr1,0,20,0.1,1,\n"
    obs = read_observations(load_study(write(tmp_path, runs=runs, feeds=feeds)))
    assert obs.setups[0].feeds[0].concentration.tolist() == [1.0, 0.0, 0.0]


def test_plain_runs_still_read_as_isothermal_batch(tmp_path):
    study = STUDY.replace(", temperatures: temperatures.csv, feeds: feeds.csv", "")
    runs = "run,temperature,A,B,C\nr1,50,1.0,1.2,0\nr2,60,0.8,1.0,0\n"
    obs = read_observations(load_study(write(tmp_path, study, runs=runs, temperatures=None, feeds=None)))
    assert obs.isothermal_batch and obs.factor is None
    assert obs.temperature_K == pytest.approx([323.15, 333.15])
    assert obs.conditions.nominal_kelvin == pytest.approx([323.15, 333.15])


def test_steady_state_rows_become_runs(tmp_path):
    study = load_study(write(tmp_path, FLOW_STUDY))
    obs = read_observations(study)
    assert study.mode == "network" and obs.steady
    assert obs.run_ids == ("c1", "p1")
    assert [t.tolist() for t in obs.times] == [[2.0], [4.0]]
    assert obs.initial.tolist() == [[1.0, 1.2, 0.0], [1.0, 0.0, 0.0]]
    assert obs.temperature_K == pytest.approx([323.15, 333.15])
    assert obs.run_group == obs.experiment == ("day1", "day2")
    assert obs.run_index.tolist() == [0, 0, 1] and obs.time_index.tolist() == [0, 0, 0]
    assert obs.species_index.tolist() == [0, 2, 0] and obs.value.tolist() == [0.6, 0.4, 0.3]
    assert obs.line.tolist() == [2, 2, 3]
    cstr, pfr = obs.setups
    assert cstr.overflow and len(cstr.feeds) == 1
    feed = cstr.feeds[0]
    assert (feed.start, feed.stop, feed.rate) == (0.0, math.inf, 0.5)  # Q/V = 1/tau with V = 1
    assert feed.concentration.tolist() == [1.0, 1.2, 0.0]
    assert not pfr.overflow and not pfr.feeds and not pfr.ramped
    c = obs.conditions
    assert c.overflow.tolist() == [True, False]
    assert c.dose_flow.tolist() == [0.5, 0.0] and c.dose_volume.tolist() == [1.0, 1.0]


def test_steady_states_without_labels_or_groups(tmp_path):
    outlet = "reactor,temperature,residence_time,feed_A,A\ncstr,50,2,1.0,0.6\ncstr,50,3,1.0,0.5\n"
    obs = read_observations(load_study(write(tmp_path, FLOW_STUDY, outlet=outlet)))
    assert obs.run_ids == ("row2", "row3")
    assert obs.run_group == ("row2", "row3")


@pytest.mark.parametrize("layout", ["histories and feeds", "amounts", "steady states"])
def test_check_accepts_each_layout(run_cli, tmp_path, layout):
    if layout == "steady states":
        path = write(tmp_path, FLOW_STUDY)
    elif layout == "amounts":
        path = write(tmp_path, STUDY.replace("feeds: feeds.csv}", "feeds: feeds.csv, measured_as: amount}"))
    else:
        path = write(tmp_path)
    code, out, err = run_cli("check", path)
    assert code == 0, err
    assert "the study is valid" in out


def test_kelvin_readings_in_a_celsius_history_are_warned_about(run_cli, tmp_path):
    # Part of r1's log typed in K while the study says degC: 353.15 "degC" read as kelvin is 80 degC, among the
    # log's other readings (plausibility's check, our threshold).
    temperatures = "run,time,temperature\nr1,0,20\nr1,20,60\nr1,40,353.15\nr1,60,353.15\n"
    code, out, err = run_cli("check", write(tmp_path, temperatures=temperatures))
    assert code == 0, err
    assert "temperatures.csv: run 'r1', time 40, column 'temperature': 353.15 degC" in out
    assert "was it typed in K?" in out


def test_a_whole_history_in_kelvin_is_warned_about(run_cli, tmp_path):
    runs = RUNS + "r3,50,1.0,1.0,1.0,0\n"
    measurements = MEASUREMENTS + "r3,10,0.5,0.4\n"
    temperatures = "run,time,temperature\nr1,0,293.15\nr1,30,333.15\nr1,60,333.15\n"
    code, out, err = run_cli("check", write(tmp_path, runs=runs, measurements=measurements, temperatures=temperatures))
    assert code == 0, err
    assert "temperatures.csv: run 'r1' (its time-weighted mean temperature)" in out
    assert "was it typed in K?" in out


def _case(study_edit: tuple[str, str] | None = None, **files: str):
    study = STUDY if study_edit is None else STUDY.replace(*study_edit)
    assert study_edit is None or study_edit[0] in STUDY, study_edit
    return study, files


def _flow_case(study_edit: tuple[str, str] | None = None, outlet: str = OUTLET):
    study = FLOW_STUDY if study_edit is None else FLOW_STUDY.replace(*study_edit)
    assert study_edit is None or study_edit[0] in FLOW_STUDY, study_edit
    return study, {"outlet": outlet}


NO_FILES = ", temperatures: temperatures.csv, feeds: feeds.csv"

# (id, (study text, files), fragments of the one line)
CASES = [
    # temperature histories
    (
        "history-not-starting-at-0",
        _case(temperatures="run,time,temperature\nr1,5,20\nr1,30,80\n"),
        ["temperatures.csv: line 2, column 'time'", "starts at time 5, not 0"],
    ),
    (
        "history-going-back-in-time",
        _case(temperatures="run,time,temperature\nr1,0,20\nr1,30,80\nr1,20,80\n"),
        ["temperatures.csv: line 4, column 'time'", "goes back from the previous time 30"],
    ),
    (
        "history-repeating-a-time",
        _case(temperatures="run,time,temperature\nr1,0,20\nr1,30,80\nr1,30,70\n"),
        ["temperatures.csv: line 4, column 'time'", "repeats"],
    ),
    (
        "history-blank-temperature",
        _case(temperatures="run,time,temperature\nr1,0,20\nr1,30,\n"),
        ["temperatures.csv: line 3, column 'temperature'", "blank"],
    ),
    (
        "history-non-numeric-temperature",
        _case(temperatures="run,time,temperature\nr1,0,20\nr1,30,hot\n"),
        ["temperatures.csv: line 3, column 'temperature'", "'hot' is not a finite number"],
    ),
    (
        "history-blank-time",
        _case(temperatures="run,time,temperature\nr1,0,20\nr1,,80\n"),
        ["temperatures.csv: line 3, column 'time'", "blank"],
    ),
    (
        "history-of-unknown-run",
        _case(temperatures=TEMPERATURES + "r9,0,20\n"),
        ["temperatures.csv: line 5, column 'run'", "'r9' is not in runs.csv"],
    ),
    (
        "history-in-celsius-under-kelvin",
        _case(("temperature: degC", "temperature: K"), runs=RUNS.replace("r2,60,", "r2,333,")),
        ["temperatures.csv: line 2, column 'temperature'", "plausible"],
    ),
    (
        "temperature-and-history",
        _case(runs=RUNS.replace("r1,,", "r1,50,")),
        ["runs.csv: line 2, column 'temperature'", "and a temperature history in temperatures.csv (from line 2)"],
    ),
    (
        "blank-temperature-without-history",
        _case(runs=RUNS.replace("r2,60,", "r2,,")),
        ["runs.csv: line 3, column 'temperature'", "temperatures.csv has no rows for run 'r2'"],
    ),
    (
        "blank-temperature-without-temperatures-file",
        _case((", temperatures: temperatures.csv", "")),
        ["runs.csv: line 2, column 'temperature'", "blank"],
    ),
    (
        "temperature-uncertainty-with-histories",
        _case(("species:", "temperature_uncertainty: 1.0\nspecies:")),
        ["study.yaml: temperature_uncertainty", "isothermal runs"],
    ),
    # feeds
    (
        "feed-of-unknown-species",
        _case(feeds="run,start,stop,rate,Q\nr1,0,10,0.1,5\n"),
        ["feeds.csv: line 1", "unknown column 'Q'"],
    ),
    (
        "feed-of-misspelt-species",
        _case(feeds="run,start,stop,rate,BB\nr1,0,10,0.1,5\n"),
        ["feeds.csv: line 1", "unknown column 'BB'", "did you mean 'B'"],
    ),
    (
        "feed-of-unknown-run",
        _case(feeds=FEEDS + "r7,0,10,0.1,5\n"),
        ["feeds.csv: line 4, column 'run'", "'r7' is not in runs.csv"],
    ),
    (
        "feed-negative-rate",
        _case(feeds=FEEDS.replace("0.05", "-0.05")),
        ["feeds.csv: line 3, column 'rate'", "negative"],
    ),
    ("feed-blank-rate", _case(feeds=FEEDS.replace("0.05", "")), ["feeds.csv: line 3, column 'rate'", "blank"]),
    ("feed-non-numeric-rate", _case(feeds=FEEDS.replace("0.05", "fast")), ["feeds.csv: line 3, column 'rate'"]),
    (
        "feed-without-rate-column",
        _case(feeds="run,start,stop,B\nr1,0,10,5\n"),
        ["feeds.csv", "missing column 'rate'"],
    ),
    (
        "feed-stopping-before-it-starts",
        _case(feeds="run,start,stop,rate,B\nr1,10,5,0.1,5\n"),
        ["feeds.csv: line 2, column 'stop'", "not after its start 10"],
    ),
    (
        "feed-before-time-0",
        _case(feeds="run,start,stop,rate,B\nr1,-1,5,0.1,5\n"),
        ["feeds.csv: line 2, column 'start'", "before time 0"],
    ),
    (
        "feed-without-species-columns",
        _case(feeds="run,start,stop,rate\nr1,0,10,0.1\n"),
        ["feeds.csv", "no species column"],
    ),
    (
        "feed-with-every-species-blank",
        _case(feeds="run,start,stop,rate,A,B\nr1,0,10,0.1,,\n"),
        ["feeds.csv: line 2", "carries no species"],
    ),
    (
        "feed-negative-concentration",
        _case(feeds=FEEDS.replace(",0.1,5", ",0.1,-5")),
        ["feeds.csv: line 2, column 'B'", "negative"],
    ),
    (
        "fed-run-without-volume-column",
        _case(runs="run,temperature,A,B,C\nr1,,1.0,0,0\nr2,60,0.8,1.0,0\n"),
        ["runs.csv", "missing column 'volume'", "run 'r1' has feeds in feeds.csv"],
    ),
    (
        "fed-run-with-blank-volume",
        _case(runs=RUNS.replace("r1,,2.0,", "r1,,,")),
        ["runs.csv: line 2, column 'volume'", "blank", "run 'r1' has feeds"],
    ),
    ("zero-volume", _case(runs=RUNS.replace("r1,,2.0,", "r1,,0,")), ["runs.csv: line 2, column 'volume'", "positive"]),
    (
        "negative-volume",
        _case(runs=RUNS.replace("r2,60,1.5,", "r2,60,-1.5,")),
        ["runs.csv: line 3, column 'volume'", "positive"],
    ),
    (
        "amounts-without-volume",
        _case(
            (NO_FILES + "}", ", measured_as: amount}"),
            runs="run,temperature,A,B,C\nr1,50,1.0,1,0\nr2,60,0.8,1.0,0\n",
        ),
        ["runs.csv", "missing column 'volume'", "amounts"],
    ),
    (
        "amounts-with-a-blank-volume",
        _case((NO_FILES + "}", ", measured_as: amount}"), runs="run,temperature,volume,A,B,C\nr1,50,,1,1,0\n"),
        ["runs.csv: line 2, column 'volume'", "blank", "amounts"],
    ),
    (
        "unknown-measured-as",
        _case(("feeds: feeds.csv}", "feeds: feeds.csv, measured_as: mass}")),
        ["study.yaml: data.measured_as"],
    ),
    ("volume-unit-not-a-volume", _case(("energy: kJ/mol}", "energy: kJ/mol, volume: kg}")), ["units.volume", "kg"]),
    ("volume-unit-unknown", _case(("energy: kJ/mol}", "energy: kJ/mol, volume: litre_x}")), ["units.volume"]),
    # steady states
    (
        "flow-row-without-residence-time",
        _flow_case(outlet=OUTLET.replace("cstr,50,2,", "cstr,50,,")),
        ["outlet.csv: line 2, column 'residence_time'", "blank"],
    ),
    (
        "flow-without-residence-time-column",
        _flow_case(outlet="reactor,temperature,feed_A,A\ncstr,50,1,0.5\n"),
        ["outlet.csv", "missing column 'residence_time'"],
    ),
    (
        "flow-zero-residence-time",
        _flow_case(outlet=OUTLET.replace("PFR,60,4,", "PFR,60,0,")),
        ["outlet.csv: line 3, column 'residence_time'", "positive"],
    ),
    (
        "flow-unknown-reactor",
        _flow_case(outlet=OUTLET.replace("cstr", "batch")),
        ["outlet.csv: line 2, column 'reactor'", "'batch' is not a flow reactor"],
    ),
    (
        "flow-without-feed-column",
        _flow_case(outlet="reactor,temperature,residence_time,A\ncstr,50,2,0.5\n"),
        ["outlet.csv", "no feed column"],
    ),
    (
        "flow-feed-of-unknown-species",
        _flow_case(outlet="reactor,temperature,residence_time,feed_Q,A\ncstr,50,2,1,0.5\n"),
        ["outlet.csv: line 1", "unknown column 'feed_Q'"],
    ),
    (
        "flow-zero-feed",
        _flow_case(outlet=OUTLET.replace("p1,PFR,60,4,1.0,", "p1,PFR,60,4,0,")),
        ["outlet.csv: line 3", "every feed concentration is zero"],
    ),
    (
        "flow-row-without-outlet-value",
        _flow_case(outlet=OUTLET.replace(",0.3,,day2", ",,,day2")),
        ["outlet.csv: line 3", "no outlet concentration"],
    ),
    (
        "flow-without-outlet-column",
        _flow_case(outlet="reactor,temperature,residence_time,feed_A\ncstr,50,2,1\n"),
        ["outlet.csv", "no outlet column"],
    ),
    (
        "flow-duplicate-label",
        _flow_case(outlet=OUTLET.replace("p1,", "c1,")),
        ["outlet.csv: line 3, column 'run'", "appears twice"],
    ),
    ("flow-blank-group", _flow_case(outlet=OUTLET.replace(",day2", ",")), ["outlet.csv: line 3, column 'group'"]),
    (
        "flow-blank-temperature",
        _flow_case(outlet=OUTLET.replace("cstr,50,", "cstr,,")),
        ["outlet.csv: line 2, column 'temperature'", "blank"],
    ),
    (
        "flow-zero-outlet-under-proportional-noise",
        _flow_case(outlet=OUTLET.replace("0.6,0.4", "0.6,0")),
        ["outlet.csv: line 2, column 'C'", "not positive"],
    ),
    (
        "flow-grouped-by-another-column",
        _flow_case(("    Ea: {mean: 60, sd: 20}\n", "    Ea: {mean: 60, sd: 20}\nrun_variability: {by: lot}\n")),
        ["study.yaml: run_variability.by", "column 'group'"],
    ),
    # the layouts themselves
    (
        "flow-with-runs",
        _flow_case(("{steady_states: outlet.csv}", "{steady_states: outlet.csv, runs: r.csv, measurements: m.csv}")),
        ["study.yaml: data", "not both"],
    ),
    (
        "flow-with-temperatures",
        _flow_case(("{steady_states: outlet.csv}", "{steady_states: outlet.csv, temperatures: t.csv}")),
        ["study.yaml: data", "'temperatures'", "goes with 'runs'"],
    ),
    (
        "flow-measured-as-amount",
        _flow_case(("{steady_states: outlet.csv}", "{steady_states: outlet.csv, measured_as: amount}")),
        ["study.yaml: data", "batch runs"],
    ),
    (
        "feeds-with-rate-constants",
        _case(
            ("runs: runs.csv, measurements: measurements.csv, temperatures: temperatures.csv", "rate_constants: k.csv")
        ),
        ["study.yaml: data", "'feeds'", "goes with 'runs'"],
    ),
    ("flow-without-time-unit", _flow_case(("time: min, ", "")), ["study.yaml: units.time", "required"]),
]


@pytest.mark.parametrize(("case", "expected"), [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_gives_one_clear_line_and_exit_2(run_cli, tmp_path, case, expected):
    study, files = case
    code, _, stderr = run_cli("check", write(tmp_path, study, **files))
    assert code == 2, stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    assert lines[0].startswith("arrhenia: error: ")
    for fragment in expected:
        assert fragment in lines[0], lines[0]


def test_measurement_times_of_a_history_run_set_its_horizon(tmp_path):
    # The same log with a last measurement at 30 min: the mean over [0, 30] is the ramp's, (20 + 80) / 2.
    measurements = "run,time,A\nr1,10,0.9\nr1,30,0.7\nr2,1,0.6\n"
    obs = read_observations(load_study(write(tmp_path, measurements=measurements)))
    assert obs.temperature_K[0] == pytest.approx(50.0 + 273.15, abs=1e-9)
    assert obs.setups[0].horizon == 30.0
    assert np.asarray(obs.setups[0].history).shape == (3, 2)
