"""The bundled demo: invented scenarios, simulated from stated true parameters with fixed seeds.

Network scenario (invented for Arrhenia; no real compounds): an amine B couples with a chloro compound A to
the product C (A + B -> C, second order), and C slowly degrades to D (C -> D, first order). Five isothermal
batch runs from 40 to 80 degC with different initial A and B; A, C and D are sampled by HPLC with 4 %
lognormal error, B is not measured. Profiles are integrated with ``scipy.integrate.solve_ivp`` (Radau,
rtol 1e-10), independently of Arrhenia's own solver.

Rate-constant scenario (invented): the first-order ring closure of a substrate "Z-17", k measured in
triplicate at six temperatures from 40 to 90 degC with 8 % lognormal scatter.

Catalyst scenario (invented): a reactant A converts to P on a supported catalyst, r = k c_A / (1 + K_A c_A)
(Langmuir-Hinshelwood with A adsorbed), three catalyst lots whose activity differs (ln k shifted per lot by
tau z, tau = 0.25), runs at 50 and 70 degC from 0.5 and 2.0 mol/L; A and P sampled with 3 % lognormal error.

Dosed scenario (invented): a substrate A is charged (800 mL), a reagent B (4 mol/L) is dosed over 30-60 min
while the jacket heats the batch from about 20 degC to a set point of 50 to 70 degC; A + B -> P (second order)
and the product slowly goes on to an impurity, P -> I (first order, higher Ea). Five runs, each with its reactor
temperature log (every 10 min) and pump programme; A, P and I sampled every 20-30 min by HPLC with 4 % lognormal
error, I left blank below the reporting limit, B not measured. Profiles come from Arrhenia's compiled solver
(``NetworkSolver`` under each run's ``RunSetup`` and ``Feed``, rtol 1e-10); ``tests/test_demo.py`` checks them
against ``scipy.integrate.solve_ivp``.

``data_demo/generate.py`` calls ``write_demo`` to regenerate the committed copy in ``data_demo/``;
``arrhenia demo`` calls it to write the same files wherever the user asks.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from ..errors import StudyError
from ..physics.arrhenius import ln_rate_constant
from ..physics.conditions import Feed, RunSetup, build_conditions
from ..physics.network import build_network, parse_equation
from ..physics.parameters import ParameterDraws
from ..physics.solution import NetworkSolver, SolverSettings

NETWORK_SEED = 20261202
T_REF_K = 333.15  # 60 degC, where the true k values below are stated
TRUE_NETWORK = {  # reaction: (k at 60 degC, Ea in J/mol)
    "coupling": (0.080, 62_000.0),  # L/(mol min)
    "degradation": (0.0040, 88_000.0),  # 1/min
}
NETWORK_NOISE = 0.04
RUNS = (  # run id, degC, A0, B0 (mol/L)
    ("R40", 40.0, 0.50, 0.75),
    ("R50", 50.0, 0.50, 0.60),
    ("R60", 60.0, 0.40, 0.80),
    ("R70", 70.0, 0.60, 0.70),
    ("R80", 80.0, 0.50, 0.65),
)
SAMPLES_PER_RUN = 12

RATE_SEED = 20261201
TRUE_EA_J_PER_MOL = 78_000.0  # ring closure: 78 kJ/mol
TRUE_T_REF_K = 338.15  # 65 degC
TRUE_K_REF_PER_MIN = 0.012  # k at 65 degC, 1/min
RELATIVE_NOISE = 0.08
TEMPERATURES_DEGC = (40.0, 50.0, 60.0, 70.0, 80.0, 90.0)
REPLICATES = 3

CATALYST_SEED = 20261203
TRUE_CATALYST = {"k_ref": 0.06, "Ea": 70_000.0, "K_ref": 1.5, "dH_ads": -25_000.0, "tau": 0.25}  # at 60 degC
CATALYST_LOTS = ("lot-A", "lot-B", "lot-C")
CATALYST_CONDITIONS = ((50.0, 0.5), (50.0, 2.0), (70.0, 0.5), (70.0, 2.0))  # degC, A0 in mol/L
CATALYST_NOISE = 0.03

DOSED_SEED = 20261211
TRUE_DOSED = {  # reaction: (equation, k at 60 degC, Ea in J/mol)
    "coupling": ("A + B -> P", 0.12, 65_000.0),  # L/(mol min)
    "overreaction": ("P -> I", 0.0006, 105_000.0),  # 1/min
}
DOSED_SPECIES = ("A", "B", "P", "I")
DOSED_NOISE = 0.04
DOSED_CHARGE_ML = 800.0  # liquid volume charged with A
DOSED_FEED_B = 4.0  # mol/L of B in the dosed solution
HEATUP_MINUTES = 12.0  # time constant of the batch temperature's approach to the set point
LOG_INTERVAL = 10.0  # min between lines of the reactor's temperature log
REPORTING_LIMIT = 0.002  # mol/L: HPLC results of I below it are left blank
DOSED_RUNS = (  # run id, set point degC, batch degC at t = 0, A0 mol/L, pump programme, sampling interval, samples
    # pump programme: (start, stop, mL/min) rows of the B solution; about 1.15 equivalents of B in each run
    ("S50", 50.0, 20.4, 1.00, ((0.0, 60.0, 3.8),), 30.0, 7),
    ("S55", 55.0, 21.1, 0.90, ((0.0, 45.0, 4.6),), 30.0, 6),
    ("S60", 60.0, 19.6, 1.00, ((0.0, 15.0, 6.0), (15.0, 45.0, 4.6)), 25.0, 6),
    ("S65", 65.0, 20.8, 1.10, ((10.0, 70.0, 4.2),), 20.0, 7),
    ("S70", 70.0, 22.0, 0.95, ((0.0, 40.0, 5.5),), 20.0, 6),
)

AREA_SEED = 20261213
TRUE_AREA = {  # reaction: (equation, k at 60 degC in 1/min, Ea in J/mol)
    "isomerisation": ("A -> P", 0.02, 75_000.0),
    "degradation": ("P -> I", 0.0015, 95_000.0),
}
AREA_RUNS = (("T50", 50.0), ("T60", 60.0), ("T70", 70.0), ("T80", 80.0))  # run id, degC
AREA_NOISE = 0.03  # relative error of an area %
AREA_LIMIT = 0.05  # area %: smaller peaks are reported as "<0.05"
AREA_SAMPLES = 10

STUDY_FILE = "study.yaml"
RUNS_FILE = "runs.csv"
MEASUREMENTS_FILE = "measurements.csv"
ALTERNATIVE_STUDY_FILE = "study_first_order.yaml"
SCENARIOS_FILE = "scenarios.yaml"
RATE_STUDY_FILE = "rate_constants.yaml"
RATE_CONSTANTS_FILE = "rate_constants.csv"
CATALYST_STUDY_FILE = "catalyst_study.yaml"
CATALYST_RUNS_FILE = "catalyst_runs.csv"
CATALYST_MEASUREMENTS_FILE = "catalyst_measurements.csv"
DOSED_STUDY_FILE = "dosed_study.yaml"
DOSED_RUNS_FILE = "dosed_runs.csv"
DOSED_TEMPERATURES_FILE = "dosed_temperatures.csv"
DOSED_FEEDS_FILE = "dosed_feeds.csv"
DOSED_MEASUREMENTS_FILE = "dosed_measurements.csv"
AREA_STUDY_FILE = "area_study.yaml"
AREA_RUNS_FILE = "area_runs.csv"
AREA_MEASUREMENTS_FILE = "area_measurements.csv"
#: The studies ``arrhenia demo`` fits, in order; the first is compared with ``ALTERNATIVE_STUDY_FILE`` and its
#: posterior runs ``SCENARIOS_FILE``.
FITTED_STUDY_FILES = (STUDY_FILE, DOSED_STUDY_FILE, AREA_STUDY_FILE)

CATALYST_STUDY_TEXT = """\
# Demo study of Arrhenia: an invented catalytic conversion A -> P, saturating in A, on three catalyst lots.
# Data simulated by inference/demo.py (seed 20261203). True values at 60 degC: k = 0.06 1/min, Ea = 70 kJ/mol,
# K_A = 1.5 L/mol with adsorption enthalpy -25 kJ/mol, lot-to-lot sd of ln k 0.25.
study: demo-catalyst-lots
title: Saturating conversion of A on three catalyst lots (invented demo data)
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data:
  runs: catalyst_runs.csv                  # run, temperature, initial A and P, catalyst lot
  measurements: catalyst_measurements.csv  # wide layout: run, time, A, P
species: [A, P]
reactions:
  - name: conversion
    equation: A -> P
    rate_law: saturating                   # r = k c_A / (1 + K_A c_A)
    adsorption:
      A: {K_ref: {median: 1.0, factor: 10}, dH: {mean: -20, sd: 20}}   # L/mol at T_ref; kJ/mol
    k_ref: {median: 0.05, factor: 10}      # 1/min at T_ref
    Ea: {mean: 70, sd: 30}                 # kJ/mol
run_variability: {sd: {scale: 0.5}, by: lot, parameterisation: centred}   # ln k varies from lot to lot
reference_temperature: 60                  # degC
noise: {model: proportional, sigma: {scale: 0.2}}
sampling: {draws: 500, tune: 500, chains: 4, seed: 1, target_accept: 0.95}
"""

DOSED_STUDY_TEXT = """\
# Demo study of Arrhenia: an invented semi-batch coupling A + B -> P, B dosed during the heat-up, with the
# consecutive impurity P -> I. Data simulated by inference/workflows/demo.py (seed 20261211). True values at 60 degC:
#   coupling k = 0.12 L/(mol min), Ea = 65 kJ/mol;  overreaction k = 0.0006 1/min, Ea = 105 kJ/mol.
study: demo-dosed-heatup
title: Coupling with B dosed during the heat-up, and the impurity it leads to (invented demo data)
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol, volume: mL}
data:
  runs: dosed_runs.csv                  # run, temperature (blank: see the log), volume charged, initial A, B, P, I
  temperatures: dosed_temperatures.csv  # reactor temperature log: run, time, temperature
  feeds: dosed_feeds.csv                # pump programme of the B solution: run, start, stop, rate (mL/min), B
  measurements: dosed_measurements.csv  # HPLC, wide layout: run, time, A, P, I (I blank below 0.002 mol/L)
species: [A, B, P, I]
reactions:
  - name: coupling
    equation: A + B -> P
    rate_law: mass_action
    k_ref: {median: 0.1, factor: 20}      # L/(mol min) at T_ref
    Ea: {mean: 70, sd: 30}                # kJ/mol
  - name: overreaction
    equation: P -> I
    rate_law: mass_action
    k_ref: {median: 0.001, factor: 20}    # 1/min at T_ref
    Ea: {mean: 90, sd: 30}
reference_temperature: 60                 # degC
noise: {model: proportional, sigma: {scale: 0.2}}
sampling: {draws: 500, tune: 300, chains: 4, seed: 1, target_accept: 0.9}
"""

AREA_STUDY_TEXT = """\
# Demo study of Arrhenia: an invented isomerisation A -> P with the consecutive degradation P -> I, followed by
# HPLC as area % (the three peaks' shares; equal response factors), I reported as "<0.05" below its limit.
# Data simulated by inference/workflows/demo.py (seed 20261213). True values at 60 degC:
#   isomerisation k = 0.02 1/min, Ea = 75 kJ/mol;  degradation k = 0.0015 1/min, Ea = 95 kJ/mol.
study: demo-area-percent
title: Isomerisation and degradation followed by HPLC area % with a reporting limit (invented demo data)
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data:
  runs: area_runs.csv                  # run, temperature, initial A, P, I
  measurements: area_measurements.csv  # wide: run, time, area_A, area_P, area_I (area %; "<0.05" below the limit)
species: [A, P, I]
reactions:
  - name: isomerisation
    equation: A -> P
    k_ref: {median: 0.01, factor: 20}     # 1/min at T_ref
    Ea: {mean: 70, sd: 30}                # kJ/mol
  - name: degradation
    equation: P -> I
    k_ref: {median: 0.001, factor: 20}
    Ea: {mean: 90, sd: 30}
observations:                           # each peak's share of the three, in %
  - {quantity: area_A, kind: composition, species: A, among: [A, P, I], scale: 100}
  - {quantity: area_P, kind: composition, species: P, among: [A, P, I], scale: 100}
  - {quantity: area_I, kind: composition, species: I, among: [A, P, I], scale: 100}
reference_temperature: 60               # degC
noise: {model: proportional, sigma: {scale: 0.2}}
sampling: {draws: 500, tune: 300, chains: 4, seed: 1, target_accept: 0.9}
"""

STUDY_TEXT = """\
# Demo study of Arrhenia: an invented coupling A + B -> C with consecutive degradation C -> D.
# Data simulated by inference/demo.py (seed 20261202). True values at 60 degC:
#   coupling    k = 0.080 L/(mol min), Ea = 62 kJ/mol;  degradation k = 0.0040 1/min, Ea = 88 kJ/mol.
study: demo-coupling
title: Coupling of A and B with degradation of the product (invented demo data)
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data:
  runs: runs.csv                  # run, temperature, initial A, B, C, D
  measurements: measurements.csv  # wide layout: run, time, A, C, D (B is not measured)
species: [A, B, C, D]
reactions:
  - name: coupling
    equation: A + B -> C
    rate_law: mass_action
    k_ref: {median: 0.05, factor: 20}     # L/(mol min) at T_ref
    Ea: {mean: 70, sd: 30}                # kJ/mol
  - name: degradation
    equation: C -> D
    rate_law: mass_action
    k_ref: {median: 0.005, factor: 20}    # 1/min at T_ref
    Ea: {mean: 80, sd: 30}
reference_temperature: auto
noise: {model: proportional, sigma: {scale: 0.2}}
sampling: {draws: 500, tune: 300, chains: 4, seed: 1, target_accept: 0.9}
report:
  k_at: [25, 60]                          # degC; 25 degC lies outside the data and is flagged
"""

ALTERNATIVE_STUDY_TEXT = """\
# A competing candidate for the demo data: the coupling as first order in A and zero order in B (as if B were
# in large excess). The data were made with the second-order law of study.yaml; arrhenia demo compares both.
study: demo-coupling-first-order
title: Coupling taken as pseudo-first order in A (candidate for comparison)
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data:
  runs: runs.csv
  measurements: measurements.csv
species: [A, B, C, D]
reactions:
  - name: coupling
    equation: A + B -> C
    rate_law: power_law
    orders: {A: 1, B: 0}
    k_ref: {median: 0.04, factor: 20}     # 1/min at T_ref
    Ea: {mean: 70, sd: 30}
  - name: degradation
    equation: C -> D
    rate_law: mass_action
    k_ref: {median: 0.005, factor: 20}
    Ea: {mean: 80, sd: 30}
reference_temperature: auto
noise: {model: proportional, sigma: {scale: 0.2}}
sampling: {draws: 500, tune: 300, chains: 4, seed: 1, target_accept: 0.9}
"""

SCENARIOS_TEXT = """\
# Reactor scenarios for the demo posterior: arrhenia predict RESULTS scenarios.yaml
# Units are the study's: min, degC, mol/L. 85 degC lies above the fitted runs (40-80 degC) and is flagged.
draws: 400
scenarios:
  - name: batch-85C
    reactor: batch
    temperature: 85
    initial: {A: 1.0, B: 1.2}
    until: 120
    key_reactant: A
    products: [C, D]
    target_conversion: 0.95
    spec: {conversion: 0.9, by: 30}
    intermediate: C
    temperature_for: {conversion: 0.95, within: 60, between: [40, 120]}
  - name: pfr-70C
    reactor: pfr
    temperature: 70
    initial: {A: 1.0, B: 1.2}
    until: 120
    key_reactant: A
    products: [C]
    intermediate: C
  - name: cstr-70C
    reactor: cstr
    temperature: 70
    initial: {A: 1.0, B: 1.2}
    residence_times: [10, 30, 60, 120]
    key_reactant: A
    products: [C]
    target_conversion: 0.8
  - name: ramp-40-to-75C
    reactor: programmed_batch
    programme: [[0, 40], [60, 75], [180, 75]]
    initial: {A: 1.0, B: 1.2}
    key_reactant: A
    products: [C]
    intermediate: C
"""

RATE_STUDY_TEXT = """\
# Rate-constant example of Arrhenia: an invented first-order ring closure of "Z-17".
# Data simulated by inference/demo.py (seed 20261201; true Ea = 78 kJ/mol, k(65 degC) = 0.012 1/min).
study: demo-ring-closure
title: Ring closure of Z-17 (invented demo data)
units: {temperature: degC, energy: kJ/mol, rate_constant: 1/min}
data:
  rate_constants: rate_constants.csv
reactions:
  - name: closure
    k_ref: {median: 0.01, factor: 100}   # k at T_ref, 1/min: 95 % prior mass within x/100
    Ea: {mean: 80, sd: 40}               # kJ/mol, truncated to positive values
reference_temperature: auto              # 1 / mean(1/T) over the data
noise: {model: proportional, sigma: {scale: 0.3}}
sampling: {draws: 1000, tune: 1000, chains: 4, seed: 1, target_accept: 0.9}
report:
  k_at: [25, 65]                         # degC: k at room temperature and at 65 degC
"""


def simulate_rate_constants(seed: int = RATE_SEED) -> list[tuple[float, float]]:
    """(temperature in degC, k in 1/min) for every replicate, from the true parameters and the seed."""
    rng = np.random.default_rng(seed)
    rows = []
    for celsius in TEMPERATURES_DEGC:
        true_ln_k = ln_rate_constant(celsius + 273.15, np.log(TRUE_K_REF_PER_MIN), TRUE_EA_J_PER_MOL, TRUE_T_REF_K)
        for _ in range(REPLICATES):
            rows.append((celsius, float(np.exp(true_ln_k + RELATIVE_NOISE * rng.standard_normal()))))
    return rows


def true_rate_constants(celsius: float) -> tuple[float, float]:
    """(k_coupling, k_degradation) of the demo at a temperature in degC, from the true parameters."""
    kelvin = celsius + 273.15
    return tuple(float(np.exp(ln_rate_constant(kelvin, np.log(k), ea, T_REF_K))) for k, ea in TRUE_NETWORK.values())


def _profile(k1: float, k2: float, a0: float, b0: float, times: np.ndarray) -> np.ndarray:
    def rates(t, c):
        r1, r2 = k1 * c[0] * c[1], k2 * c[2]
        return [-r1, -r1, r1 - r2, r2]

    solution = solve_ivp(
        rates, (0.0, float(times[-1])), [a0, b0, 0.0, 0.0], t_eval=times, method="Radau", rtol=1e-10, atol=1e-13
    )
    return solution.y.T


def simulate_network(seed: int = NETWORK_SEED) -> tuple[list[str], list[str]]:
    """Lines of runs.csv and measurements.csv (wide layout; B not measured)."""
    rng = np.random.default_rng(seed)
    runs = ["run,temperature,A,B,C,D"]
    measurements = ["run,time,A,C,D"]
    for run, celsius, a0, b0 in RUNS:
        runs.append(f"{run},{celsius:g},{a0:g},{b0:g},0,0")
        k1, k2 = true_rate_constants(celsius)
        # Sample until about 90 % of A is gone (second order with B in excess), spaced to see the start.
        t90 = np.log((b0 - 0.1 * a0) / (0.1 * b0)) / (k1 * (b0 - a0))
        times = np.round(t90 * np.geomspace(0.03, 1.3, SAMPLES_PER_RUN), 2)
        profile = _profile(k1, k2, a0, b0, times)
        for t, (a, _, c, d) in zip(times, profile, strict=True):
            noisy = np.array([a, c, d]) * np.exp(NETWORK_NOISE * rng.standard_normal(3))
            measurements.append(f"{run},{t:g}," + ",".join(f"{v:.5g}" for v in noisy))
    return runs, measurements


def simulate_catalyst(seed: int = CATALYST_SEED) -> tuple[list[str], list[str]]:
    """Lines of catalyst_runs.csv and catalyst_measurements.csv, from the true values and the seed."""
    rng = np.random.default_rng(seed)
    true = TRUE_CATALYST
    shifts = true["tau"] * rng.standard_normal(len(CATALYST_LOTS))
    runs = ["run,temperature,A,P,lot"]
    measurements = ["run,time,A,P"]
    for lot, shift in zip(CATALYST_LOTS, shifts, strict=True):
        for celsius, a0 in CATALYST_CONDITIONS:
            kelvin = celsius + 273.15
            k = float(np.exp(ln_rate_constant(kelvin, np.log(true["k_ref"]), true["Ea"], T_REF_K) + shift))
            big_k = float(np.exp(ln_rate_constant(kelvin, np.log(true["K_ref"]), true["dH_ads"], T_REF_K)))
            run = f"{lot}-{celsius:g}C-{a0:g}M"
            runs.append(f"{run},{celsius:g},{a0:g},0,{lot}")
            # Sampled until 80 % of A is gone, from the integrated law t = (ln(c0/c) + K (c0 - c)) / k.
            horizon = (np.log(5.0) + big_k * 0.8 * a0) / k
            times = np.round(horizon * np.geomspace(0.05, 1.0, 8), 2)
            solution = solve_ivp(
                lambda t, c, k=k, big_k=big_k: [-k * c[0] / (1 + big_k * c[0]), k * c[0] / (1 + big_k * c[0])],
                (0.0, float(times[-1])),
                [a0, 0.0],
                t_eval=times,
                method="Radau",
                rtol=1e-10,
                atol=1e-13,
            )
            for t, (a, p) in zip(times, solution.y.T, strict=True):
                noisy = np.array([a, p]) * np.exp(CATALYST_NOISE * rng.standard_normal(2))
                measurements.append(f"{run},{t:g}," + ",".join(f"{v:.5g}" for v in noisy))
    return runs, measurements


def dosed_setups() -> tuple[list[str], list[str], list[str], list[RunSetup], list[np.ndarray]]:
    """Lines of dosed_runs.csv, dosed_temperatures.csv and dosed_feeds.csv, with each run's ``RunSetup`` (what
    those lines say, temperatures in K) and its sampling times (min)."""
    runs = ["run,temperature,volume,A,B,P,I"]
    log = ["run,time,temperature"]
    feeds = ["run,start,stop,rate,B"]
    setups, times = [], []
    for run, set_point, start, a0, programme, interval, samples in DOSED_RUNS:
        runs.append(f"{run},,{DOSED_CHARGE_ML:g},{a0:g},0,0,0")
        sampled = interval * np.arange(1, samples + 1)
        clock = np.arange(0.0, sampled[-1] + LOG_INTERVAL / 2, LOG_INTERVAL)
        celsius = np.round(set_point - (set_point - start) * np.exp(-clock / HEATUP_MINUTES), 1)
        log += [f"{run},{t:g},{c:.1f}" for t, c in zip(clock, celsius, strict=True)]
        feeds += [f"{run},{t0:g},{t1:g},{rate:g},{DOSED_FEED_B:g}" for t0, t1, rate in programme]
        dose = np.array([0.0, DOSED_FEED_B, 0.0, 0.0])
        setups.append(
            RunSetup(
                np.column_stack([clock, celsius + 273.15]),
                horizon=float(sampled[-1]),
                volume=DOSED_CHARGE_ML,
                feeds=tuple(Feed(t0, t1, rate, dose) for t0, t1, rate in programme),
            )
        )
        times.append(sampled)
    return runs, log, feeds, setups, times


def dosed_profiles(setups: list[RunSetup], times: list[np.ndarray], initial: np.ndarray) -> list[np.ndarray]:
    """True concentrations (times, A B P I) of each run of the dosed demo, from Arrhenia's compiled solver."""
    network = build_network(
        DOSED_SPECIES, tuple(TRUE_DOSED), tuple(parse_equation(e) for e, _, _ in TRUE_DOSED.values())
    )
    truth = ParameterDraws(
        ln_k_ref=np.log([[k for _, k, _ in TRUE_DOSED.values()]]),
        ea=np.array([[ea for _, _, ea in TRUE_DOSED.values()]]),
        ln_eq_ref=np.zeros((1, 0)),
        dh=np.zeros((1, 0)),
        orders=network.forward_orders[None],
        initial=None,
        temperature_ref=T_REF_K,
    )
    conditions = build_conditions(setups, len(DOSED_SPECIES))
    tight = SolverSettings(rtol=1e-10, atol_share=1e-13)
    solver = NetworkSolver(network, times, conditions=conditions, settings=tight)
    inputs = truth.inputs(0, conditions.nominal_kelvin, initial)
    return solver.solve(inputs, sensitivities=False).concentrations


def simulate_dosed(seed: int = DOSED_SEED) -> tuple[list[str], list[str], list[str], list[str]]:
    """Lines of dosed_runs.csv, dosed_temperatures.csv, dosed_feeds.csv and dosed_measurements.csv (wide layout;
    B not measured, I blank below ``REPORTING_LIMIT``)."""
    rng = np.random.default_rng(seed)
    runs, log, feeds, setups, times = dosed_setups()
    initial = np.array([[a0, 0.0, 0.0, 0.0] for _, _, _, a0, *_ in DOSED_RUNS])
    measurements = ["run,time,A,P,I"]
    for (run, *_), sampled, profile in zip(DOSED_RUNS, times, dosed_profiles(setups, times, initial), strict=True):
        for t, (a, _, p, i) in zip(sampled, profile, strict=True):
            noisy = np.array([a, p, i]) * np.exp(DOSED_NOISE * rng.standard_normal(3))
            # Blank where the true I is below the limit: a cut on the noisy value would keep only the high draws
            # near the limit and bias the rest upwards (values below a limit need a censored likelihood).
            cells = [f"{v:.5g}" for v in noisy[:2]] + [f"{noisy[2]:.5g}" if i >= REPORTING_LIMIT else ""]
            measurements.append(f"{run},{t:g}," + ",".join(cells))
    return runs, log, feeds, measurements


def simulate_area_percent(seed: int = AREA_SEED) -> tuple[list[str], list[str]]:
    """Lines of area_runs.csv and area_measurements.csv: A -> P -> I (first order; the closed form of Levenspiel,
    Chemical Reaction Engineering, ch. 8, from memory) sampled as area %: each peak's area with relative noise,
    then normalised to 100; a share of I below ``AREA_LIMIT`` (decided on the true value) is reported as
    "<limit"."""
    rng = np.random.default_rng(seed)
    (_, k1_60, ea1), (_, k2_60, ea2) = TRUE_AREA.values()
    runs, rows = ["run,temperature,A,P,I"], ["run,time,area_A,area_P,area_I"]
    for run, celsius in AREA_RUNS:
        kelvin = celsius + 273.15
        k1, k2 = (
            float(np.exp(ln_rate_constant(kelvin, np.log(k), e, T_REF_K))) for k, e in ((k1_60, ea1), (k2_60, ea2))
        )
        times = np.round(np.geomspace(0.05, 3.0, AREA_SAMPLES) / k1, 1)
        a = np.exp(-k1 * times)
        p = k1 / (k2 - k1) * (np.exp(-k1 * times) - np.exp(-k2 * times))
        shares = 100.0 * np.column_stack([a, p, 1.0 - a - p])
        runs.append(f"{run},{celsius:g},1.0,0,0")
        for t, true in zip(times, shares, strict=True):
            areas = true * np.exp(AREA_NOISE * rng.standard_normal(3))  # each peak's area, then normalised
            noisy = 100.0 * areas / areas.sum()
            cells = [
                f"<{AREA_LIMIT:g}" if value < AREA_LIMIT else f"{reading:.4g}"
                for value, reading in zip(true, noisy, strict=True)
            ]
            rows.append(f"{run},{t:g}," + ",".join(cells))
    return runs, rows


def write_demo(folder: Path, replace: bool = False) -> Path:
    """Write the demo studies (network, its competing candidate, rate constants, catalyst lots, dosing) and their data
    into ``folder``; returns the network study's path. A file of the same name with other content (the user's
    own) is never replaced unless ``replace`` (the generator of ``data_demo/``): ``StudyError`` before anything
    is written."""
    runs, measurements = simulate_network()
    catalyst_runs, catalyst_measurements = simulate_catalyst()
    dosed_runs, dosed_log, dosed_feeds, dosed_measurements = simulate_dosed()
    area_runs, area_measurements = simulate_area_percent()
    texts = {
        RUNS_FILE: "\n".join(runs) + "\n",
        MEASUREMENTS_FILE: "\n".join(measurements) + "\n",
        STUDY_FILE: STUDY_TEXT,
        ALTERNATIVE_STUDY_FILE: ALTERNATIVE_STUDY_TEXT,
        SCENARIOS_FILE: SCENARIOS_TEXT,
        RATE_CONSTANTS_FILE: "\n".join(["temperature,k"] + [f"{t:g},{k:.6g}" for t, k in simulate_rate_constants()])
        + "\n",
        RATE_STUDY_FILE: RATE_STUDY_TEXT,
        CATALYST_RUNS_FILE: "\n".join(catalyst_runs) + "\n",
        CATALYST_MEASUREMENTS_FILE: "\n".join(catalyst_measurements) + "\n",
        CATALYST_STUDY_FILE: CATALYST_STUDY_TEXT,
        DOSED_RUNS_FILE: "\n".join(dosed_runs) + "\n",
        DOSED_TEMPERATURES_FILE: "\n".join(dosed_log) + "\n",
        DOSED_FEEDS_FILE: "\n".join(dosed_feeds) + "\n",
        DOSED_MEASUREMENTS_FILE: "\n".join(dosed_measurements) + "\n",
        DOSED_STUDY_FILE: DOSED_STUDY_TEXT,
        AREA_RUNS_FILE: "\n".join(area_runs) + "\n",
        AREA_MEASUREMENTS_FILE: "\n".join(area_measurements) + "\n",
        AREA_STUDY_FILE: AREA_STUDY_TEXT,
    }
    for name, text in texts.items():
        path = folder / name
        if replace:
            continue
        if path.is_symlink() or (path.exists() and (not path.is_file() or path.read_bytes() != text.encode())):
            raise StudyError(
                str(path), "exists and is not the demo's file, so it is not replaced", "choose another --out"
            )
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in texts.items():
        (folder / name).write_text(text)
    return folder / STUDY_FILE
