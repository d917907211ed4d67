"""``arrhenia new``: a commented study file and empty data templates for one layout of data, ready to fill in.

One declaration per kind of study (``STARTERS``): its study file and the header of every data file it names,
each with comments that say what goes where, true to README ("The study file", "Data files", "What was
measured"). The sampling and noise defaults written into the study file are read from the schema.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from string import Template

from ..errors import StudyError
from ..inputs.schema import NAME_PATTERN, StudyFile

#: The study file every starter writes.
STUDY_FILE = "study.yaml"

_HEADER = """\
# An Arrhenia study: $description.
# Written by `arrhenia new --kind $kind`. What to do:
# 1. Fill in the data file(s) beside this one: one row per line under the header, commas between cells.
# 2. Replace the species, reactions and priors below with your chemistry and what you know of it.
# 3. In this folder run `arrhenia check study.yaml` (validates everything, samples nothing), then
#    `arrhenia fit study.yaml`.
# Every key is explained in README.md ("The study file"); `arrhenia schema` prints them all for YAML editors.
study: $name  # letters, digits, _ . - ; results go to results/<study>/
title: ""  # free text, shown in reports
"""

_TAIL = """\
reference_temperature: auto  # auto (1/mean(1/T) of the data), a number in units.temperature, or '340 K'
noise:
  model: proportional  # $noise_models
  sigma: {scale: $sigma_scale}  # half-normal prior of the noise scale ($sigma_unit)
sampling: {draws: $draws, tune: $tune, chains: $chains, seed: $seed}  # NUTS; the command line may override each
report:
  k_at: []  # temperatures (units.temperature) at which to report every k, e.g. [25, 80]
"""


def _priors(k_median: str, k_unit: str) -> str:
    """The two priors every reaction needs, with what they mean."""
    return f"""\
    # k_ref: lognormal prior of k at T_ref ({k_unit}); 95 % of it within median/factor .. median*factor
    k_ref: {{median: {k_median}, factor: 100}}
    Ea: {{mean: 80, sd: 40}}  # normal prior of the activation energy (units.energy), truncated to Ea > 0
"""


_NETWORK = """\
species: [A, B, P]  # every species of the network; their initial concentrations go in the data
reactions:
  - name: coupling  # letters, digits, _ . -
    equation: A + B -> P  # '->' irreversible; '<=>' reversible (which also needs K_ref and dH)
    rate_law: mass_action  # mass_action, power_law, saturating, michaelis_menten or catalysed
""" + _priors("0.05", "here L/(mol*min): concentration^(1-order)/time")

_OBSERVATIONS = """\
# What a measured column is when it is not a species' concentration (README, "What was measured"), e.g.
# observations:
#   - {quantity: area_P, kind: signal, species: P, response: {median: 2.0e4, factor: 3}}  # an HPLC peak area
#   - {quantity: pct_P, kind: composition, species: P, among: [A, P], scale: 100}  # area %
"""

_UNITS = """\
units:
  temperature: degC  # K, degC, degF or degR: the unit of every temperature here and in the data
  energy: kJ/mol  # kJ/mol, kcal/mol or J/mol: the unit of Ea, its prior and the outputs
"""

_COMMENTS = "# Lines starting with # are comments; a comment or note column is ignored."


def _measurements(run: str) -> str:
    """The measurements template (wide layout), its example row in run ``run``."""
    return f"""\
# Measurements of the runs, wide layout: run, time (units.time), then one column per measured species (or declared
# quantity, see observations in the study file) with its value (units.concentration); a blank cell: not measured.
# Times are >= 0 and rise within each run. With proportional or robust noise every value must be positive: write a
# value below a detection limit as <0.002, and leave blank a species known to be absent (0 at time 0). Any subset
# of species may be measured. The long layout (run, time, species, value, and optionally limit) is read as well.
{_COMMENTS} Example row: {run},30,0.62,0.35
run,time,A,P
"""


@dataclass(frozen=True)
class Starter:
    """One kind of study ``arrhenia new`` can start: what it is, its study file (a ``string.Template``) and the
    text of every data file it names (headers and comments, no rows)."""

    kind: str
    description: str
    study: str
    data: tuple[tuple[str, str], ...]


RATE_CONSTANTS = Starter(
    "rate-constants",
    "measured rate constants at several temperatures (the Arrhenius fit alone)",
    _HEADER
    + _UNITS
    + """\
  rate_constant: 1/min  # the unit of the k column, e.g. 1/s, 1/min, L/(mol*s)
data:
  rate_constants: rate_constants.csv  # temperature, k; paths are relative to this file
reactions:
  - name: step  # with several reactions, the data's reaction column names them
"""
    + _priors("0.001", "units.rate_constant")
    + _TAIL,
    (
        (
            "rate_constants.csv",
            f"""\
# Measured rate constants, one per line: temperature (units.temperature) and k (units.rate_constant); each
# reaction needs rate constants at two or more temperatures. Optional columns: reaction (needed when the study has
# several reactions), and either k_sd (the sd of k, in its unit) or k_rel_sd (its relative error) to use stated
# errors instead of fitting the noise.
{_COMMENTS} Example rows: 40,0.00127 and 60,0.0072
temperature,k
""",
        ),
    ),
)

BATCH = Starter(
    "batch",
    "concentrations over time in isothermal batch runs of a reaction network",
    _HEADER
    + _UNITS
    + """\
  time: min  # the unit of the time column
  concentration: mol/L  # the unit of initial and measured concentrations
data:
  runs: runs.csv  # run, temperature, the initial concentration of every species
  measurements: measurements.csv  # run, time, one column per measured species
"""
    + _NETWORK
    + _OBSERVATIONS
    + _TAIL,
    (
        (
            "runs.csv",
            f"""\
# One row per batch run: run (an id), temperature (units.temperature), and one column per species of the study
# with its initial concentration (units.concentration; zero allowed, blank not). Optional: volume (units.volume),
# the initial liquid volume.
{_COMMENTS} Example row: R1,60,1.0,1.2,0
run,temperature,A,B,P
""",
        ),
        ("measurements.csv", _measurements("R1")),
    ),
)

DOSED = Starter(
    "dosed",
    "batch runs of a reaction network with temperature histories and dosing (semi-batch)",
    _HEADER
    + _UNITS
    + """\
  time: min  # the unit of every time: measurements, temperature histories and feeds
  concentration: mol/L  # the unit of initial, fed and measured concentrations
  volume: mL  # the unit of the volume column and of feed rates (volume per units.time)
data:
  runs: runs.csv  # run, temperature (blank: its history is in temperatures.csv), volume, initial concentrations
  temperatures: temperatures.csv  # temperature histories: run, time, temperature
  feeds: feeds.csv  # dosing intervals: run, start, stop, rate, fed concentrations
  measurements: measurements.csv  # run, time, one column per measured species
  measured_as: concentration  # or amount: every measured value is concentration x volume
"""
    + _NETWORK
    + _OBSERVATIONS
    + _TAIL,
    (
        (
            "runs.csv",
            f"""\
# One row per run: run (an id), temperature (units.temperature; blank for a run whose temperature history is in
# temperatures.csv), volume (the liquid volume charged, units.volume; needed for a fed run), and one column per
# species of the study with its initial concentration (units.concentration; zero allowed, blank not). A fed run
# may start with none of the fed reagent in the vessel.
{_COMMENTS} Example row: D1,,800,1.0,0,0
run,temperature,volume,A,B,P
""",
        ),
        (
            "temperatures.csv",
            f"""\
# Temperature histories (a programme or a reactor log) of the runs whose temperature cell is blank in runs.csv:
# run, time (units.time), temperature (units.temperature). Each run's first time is 0 and its times rise; the
# points are joined by straight lines and the last value is held.
{_COMMENTS} Example rows: D1,0,20 and D1,30,60
run,time,temperature
""",
        ),
        (
            "feeds.csv",
            f"""\
# Dosing intervals, one per row: run, start, stop (units.time; 0 <= start < stop), rate (units.volume per
# units.time, constant from start to stop), then one column per fed species with its concentration in the feed
# (units.concentration; a blank cell is 0). Consecutive rows make a programme of rates; overlapping rows are two
# feeds at once.
{_COMMENTS} Example row: D1,0,60,3.8,4
run,start,stop,rate,B
""",
        ),
        ("measurements.csv", _measurements("D1")),
    ),
)

FLOW = Starter(
    "flow",
    "outlet concentrations of CSTRs and PFRs at steady state",
    _HEADER
    + _UNITS
    + """\
  time: min  # the unit of the residence_time column
  concentration: mol/L  # the unit of feed and outlet concentrations
data:
  steady_states: steady_states.csv  # one row per steady state
"""
    + _NETWORK
    + _TAIL,
    (
        (
            "steady_states.csv",
            f"""\
# One row per steady state: run (a unique label), reactor (cstr or pfr), temperature (units.temperature),
# residence_time (units.time, > 0; the space time of a PFR), feed_<species> (feed concentrations,
# units.concentration; a missing column or a blank cell is 0), the outlet concentration of each measured species
# in a column named after it (blank: not measured; at least one value per row), and group (what leave-one-out
# comparison leaves out together). A PFR is isothermal at constant density; a CSTR's outlet is the steady state a
# start-up from the feed reaches.
{_COMMENTS} Example row: c1,cstr,50,2,1.0,1.2,0.6,0.4,day1
run,reactor,temperature,residence_time,feed_A,feed_B,A,P,group
""",
        ),
    ),
)

#: The kinds ``arrhenia new --kind`` offers, by name.
STARTERS: dict[str, Starter] = {starter.kind: starter for starter in (RATE_CONSTANTS, BATCH, DOSED, FLOW)}


def study_name(folder: Path) -> str:
    """A study name (``schema.NAME_PATTERN``) made from the folder's name."""
    name = re.sub(r"[^A-Za-z0-9_.\-]+", "-", Path(folder).resolve().name).strip("-.")[:64]
    if not name:
        return "my-study"
    return name if re.match(NAME_PATTERN, name) else f"study-{name}"[:64]


def starter_files(folder: Path, kind: str) -> dict[str, str]:
    """The files ``write_starter`` writes for ``kind``, by name, with their text."""
    starter = STARTERS[kind]
    sampling, noise = StudyFile.model_fields["sampling"].default, StudyFile.model_fields["noise"].default
    network = kind != RATE_CONSTANTS.kind
    study = Template(starter.study).substitute(
        description=starter.description,
        kind=kind,
        name=study_name(folder),
        draws=sampling.draws,
        tune=sampling.tune,
        chains=sampling.chains,
        seed=sampling.seed,
        sigma_scale=f"{noise.sigma.scale:g}",
        noise_models="proportional (lognormal), absolute (normal) or robust (Student-t on the log)"
        if network
        else "proportional (normal on ln k) or robust (Student-t on ln k)",
        sigma_unit="log units; concentration units for absolute" if network else "sd of ln k",
    )
    return {STUDY_FILE: study, **dict(starter.data)}


def write_starter(folder: str | Path, kind: str) -> list[Path]:
    """Write the study file and data templates of ``kind`` into ``folder`` (made if absent) and return their paths.
    Nothing is ever replaced: a file of the same name already there is a ``StudyError`` before anything is
    written."""
    folder = Path(folder)
    if kind not in STARTERS:
        raise StudyError("--kind", f"'{kind}' is not a kind of study", f"choose one of {', '.join(STARTERS)}")
    if folder.exists() and not folder.is_dir():
        raise StudyError(str(folder), "is a file, not a folder", "name a new folder or an existing one")
    files = starter_files(folder, kind)
    for name in files:
        path = folder / name
        if path.exists() or path.is_symlink():
            raise StudyError(
                str(path), "already exists; arrhenia new never replaces a file", "choose another folder or move it"
            )
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, text in files.items():
        with open(folder / name, "x", encoding="utf-8") as handle:  # "x": never over a file made meanwhile
            handle.write(text)
        written.append(folder / name)
    return written
