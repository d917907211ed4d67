"""The bundled demo: an invented scenario, simulated from stated true parameters with a fixed seed.

Scenario (invented for Arrhenia, no real compound): the first-order thermal ring closure of a substrate we
call "Z-17" in an inert solvent, its rate constant measured in triplicate at six temperatures from 40 to 90 degC.
The measured values scatter about the true Arrhenius line with 8 % lognormal error.

``data_demo/generate.py`` calls ``write_demo`` to regenerate the committed copy in ``data_demo/``;
``arrhenia demo`` calls it to write the same files wherever the user asks.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .arrhenius import ln_rate_constant

SEED = 20261201
TRUE_EA_J_PER_MOL = 78_000.0  # 78 kJ/mol
TRUE_T_REF_K = 338.15  # 65 degC
TRUE_K_REF_PER_MIN = 0.012  # k at 65 degC, 1/min
RELATIVE_NOISE = 0.08
TEMPERATURES_DEGC = (40.0, 50.0, 60.0, 70.0, 80.0, 90.0)
REPLICATES = 3

STUDY_FILE = "study.yaml"
RATE_CONSTANTS_FILE = "rate_constants.csv"

STUDY_TEXT = """\
# Demo study of Arrhenia: an invented first-order ring closure of "Z-17", measured at six temperatures.
# Data simulated by inference/demo.py (seed 20261201; true Ea = 78 kJ/mol, k(65 degC) = 0.012 1/min).
study: demo-ring-closure
title: Ring closure of Z-17 (invented demo data)
units:
  temperature: degC
  energy: kJ/mol
  rate_constant: 1/min
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


def simulate_rate_constants(seed: int = SEED) -> list[tuple[float, float]]:
    """(temperature in degC, k in 1/min) for every replicate, from the true parameters and the seed."""
    rng = np.random.default_rng(seed)
    rows = []
    for celsius in TEMPERATURES_DEGC:
        true_ln_k = ln_rate_constant(celsius + 273.15, np.log(TRUE_K_REF_PER_MIN), TRUE_EA_J_PER_MOL, TRUE_T_REF_K)
        for _ in range(REPLICATES):
            rows.append((celsius, float(np.exp(true_ln_k + RELATIVE_NOISE * rng.standard_normal()))))
    return rows


def write_demo(folder: Path) -> Path:
    """Write the demo study file and its data into ``folder``; returns the study file's path."""
    folder.mkdir(parents=True, exist_ok=True)
    lines = ["temperature,k"] + [f"{t:g},{k:.6g}" for t, k in simulate_rate_constants()]
    (folder / RATE_CONSTANTS_FILE).write_text("\n".join(lines) + "\n")
    study = folder / STUDY_FILE
    study.write_text(STUDY_TEXT)
    return study
