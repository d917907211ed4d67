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

``data_demo/generate.py`` calls ``write_demo`` to regenerate the committed copy in ``data_demo/``;
``arrhenia demo`` calls it to write the same files wherever the user asks.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from ..errors import StudyError
from ..physics.arrhenius import ln_rate_constant

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
run_variability: {sd: {scale: 0.5}, by: lot}   # ln k varies from lot to lot
reference_temperature: 60                  # degC
noise: {model: proportional, sigma: {scale: 0.2}}
sampling: {draws: 500, tune: 500, chains: 4, seed: 1, target_accept: 0.95}
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
sampling: {draws: 500, tune: 500, chains: 4, seed: 1, target_accept: 0.9}
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
sampling: {draws: 500, tune: 500, chains: 4, seed: 1, target_accept: 0.9}
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


def write_demo(folder: Path, replace: bool = False) -> Path:
    """Write the demo studies (network, its competing candidate, rate constants, catalyst lots) and their data
    into ``folder``; returns the network study's path. A file of the same name with other content (the user's
    own) is never replaced unless ``replace`` (the generator of ``data_demo/``): ``StudyError`` before anything
    is written."""
    runs, measurements = simulate_network()
    catalyst_runs, catalyst_measurements = simulate_catalyst()
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
