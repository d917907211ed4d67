"""Benchmark: what a run's conditions cost per log-density-plus-gradient evaluation.

Problem (fixed by the project): two networks, each with one run of 120 min sampled at 15 even times:
- demo-sized: A + B -> C, C -> D (4 species; A, C and D observed);
- process-sized: A + B -> C, C -> D, C + B -> E, D <=> F, E -> G (5 steps, 7 species; A, C, D, E and G
  observed; the reversible step brings its equilibrium constant and, where the temperature changes, dH/R).
Each run is carried out three ways:
1. isothermal batch at the nominal temperature of way 2 (the time-weighted mean, 55.0 C);
2. the same run with a heat-up: 20 C -> 60 C over the first quarter (linear), then held; the rate constants
   (Ea 60-90 kJ/mol) and the equilibrium constant follow T(t), and the Jacobian gains the temperature slopes
   (Ea/R of every step, dH/R);
3. dosed (semi-batch) at the nominal temperature: no B in the vessel at the start, B fed at a constant rate over
   the first half (the same amount of B as the batch runs start with, 10 % more volume).
Same rate constants at the nominal temperature in all three; the solver's default tolerances (rtol 1e-6).
A fourth row breaks the ramped run's cost down: the same heat-up with the slopes held fixed (no slope columns in
the Jacobian), so what the extra columns cost and what the changing temperature costs show apart.

What is timed: ``MeasurementSolver.solve`` as the Op calls it (predictions at every measurement and their
Jacobian by forward sensitivities), i.e. the cost of one log-density with its gradient beyond the cheap PyTensor
graph around it; the median of ``REPEATS`` calls after ``WARM_UP`` calls (numba compiled and cached first).

Run: ``python benchmarks/experiment_cost.py``. Prints the table and the ratios against the targets of issue
#16: a ramped run at most 1.5x the isothermal one, a dosed run at most 2x.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from inference.inputs.data import Observations
from inference.model.ops import NetworkPrediction
from inference.physics.arrhenius import R
from inference.physics.conditions import Feed, RunSetup
from inference.physics.network import build_network, parse_equation
from inference.physics.parameters import KineticInputs, SensitivityLayout
from inference.physics.solution import NetworkSolver

LENGTH = 120.0  # min
TIMES = np.linspace(LENGTH / 15, LENGTH, 15)
HEAT_UP = np.array([[0.0, 293.15], [LENGTH / 4, 333.15]])  # K: 20 C -> 60 C over the first quarter, then held
NOMINAL_K = RunSetup(HEAT_UP, horizon=LENGTH).nominal
WARM_UP, REPEATS = 20, 400

#: name: (equations, species, observed, k at the nominal temperature (1/min or L/(mol min)), Ea (kJ/mol),
#: ln K_c and dH (kJ/mol) of the reversible steps, initial concentrations (mol/L))
NETWORKS = {
    "demo (2 steps, 4 species)": (
        ("A + B -> C", "C -> D"),
        ("A", "B", "C", "D"),
        ("A", "C", "D"),
        (0.04, 0.012),
        (65.0, 85.0),
        (),
        {"A": 1.0, "B": 1.2},
    ),
    "process (5 steps, 7 species)": (
        ("A + B -> C", "C -> D", "C + B -> E", "D <=> F", "E -> G"),
        ("A", "B", "C", "D", "E", "F", "G"),
        ("A", "C", "D", "E", "G"),
        (0.04, 0.012, 0.01, 0.02, 0.008),
        (65.0, 85.0, 75.0, 60.0, 90.0),
        ((math.log(1.5), -30.0),),
        {"A": 1.0, "B": 1.3},
    ),
}


def setups(species: tuple[str, ...], initial: dict[str, float]) -> dict[str, tuple[RunSetup, np.ndarray]]:
    """The three ways of carrying out the run: (setup, initial concentrations)."""
    batch = np.array([initial.get(name, 0.0) for name in species])
    dosed_start = batch.copy()
    b = species.index("B")
    dosed_start[b] = 0.0
    rate = 0.1 / (LENGTH / 2)  # 10 % of the initial volume over the first half
    feed = np.zeros(len(species))
    feed[b] = batch[b] * 1.0 / (rate * LENGTH / 2)  # as much B as the batch runs start with
    return {
        "isothermal": (RunSetup.isothermal(NOMINAL_K), batch),
        "ramped": (RunSetup(HEAT_UP, horizon=LENGTH), batch),
        "dosed": (RunSetup.isothermal(NOMINAL_K, volume=1.0, feeds=(Feed(0.0, LENGTH / 2, rate, feed),)), dosed_start),
    }


def measurement_solver(name: str, way: str, slopes_free: bool = True):
    """The Op's ``MeasurementSolver`` for one run carried out ``way``, and its solver-form inputs; with
    ``slopes_free`` False a ramped run has no temperature-slope columns (a breakdown of its cost only)."""
    equations, species, observed, k, ea, reversible, initial = NETWORKS[name]
    net = build_network(species, tuple(f"r{j}" for j in range(len(equations))), tuple(map(parse_equation, equations)))
    setup, start = setups(species, initial)[way]
    measured = [(t, species.index(s)) for t in range(TIMES.size) for s in observed]
    obs = Observations(
        run_ids=(way,),
        temperature_K=np.array([setup.nominal]),
        initial=start[None, :],
        times=(TIMES,),
        run_index=np.zeros(len(measured), dtype=np.int64),
        time_index=np.array([t for t, _ in measured]),
        species_index=np.array([i for _, i in measured]),
        value=np.zeros(len(measured)),
        line=np.arange(len(measured)) + 2,
        runs_path=Path("runs.csv"),
        measurements_path=Path("measurements.csv"),
        setups=(setup,),
    )
    layout = SensitivityLayout(net, temperature_varies=setup.ramped and slopes_free)
    solver = NetworkSolver(net, [TIMES], layout=layout, conditions=obs.conditions)
    op = NetworkPrediction(solver, obs, net.forward_orders)
    free = KineticInputs(
        np.log(k)[None, :],
        np.array([ln_k for ln_k, _ in reversible]).reshape(1, len(reversible)),
        np.zeros((1, 0)),
        np.zeros(0),
        np.zeros((1, 0)),
        np.array(ea) * 1e3 / R,
        np.array([dh * 1e3 / R for _, dh in reversible]),
        np.zeros(0),
        np.zeros(0),
    )
    inputs = layout.expand(free, net.forward_orders, obs.initial)
    if setup.ramped and not slopes_free:  # the slopes still move k and K_c along the ramp, as fixed values
        inputs = inputs._replace(activation=free.activation[None, :], eq_enthalpy=free.eq_enthalpy[None, :])
    return op.measurements, inputs


#: The rows: (way, slopes free, label).
CASES = (
    ("isothermal", True, "isothermal"),
    ("ramped", True, "ramped"),
    ("dosed", True, "dosed"),
    ("ramped", False, "  ramped, slopes fixed"),
)


def main() -> None:
    print(f"one run of {LENGTH:g} min, {TIMES.size} sampling times; nominal temperature {NOMINAL_K - 273.15:.1f} C")
    print(
        f"median of {REPEATS} calls of MeasurementSolver.solve after {WARM_UP}, the cases taking turns (numba "
        "compiled first)\n"
    )
    runs = {(name, label): measurement_solver(name, way, free) for name in NETWORKS for way, free, label in CASES}
    for measurements, inputs in runs.values():
        for _ in range(WARM_UP):
            measurements.solve(inputs)
    samples = {key: np.empty(REPEATS) for key in runs}
    for i in range(REPEATS):  # in turns, so that other load on the machine falls on every case alike
        for key, (measurements, inputs) in runs.items():
            begin = time.perf_counter()
            measurements.solve(inputs)
            samples[key][i] = time.perf_counter() - begin
    header = f"{'network':<30}{'run':<24}{'columns':>8}{'steps':>7}{'rejected':>9}{'median ms':>11}{'ratio':>7}"
    print(header)
    ratio: dict[tuple[str, str], float] = {}
    for (name, label), (measurements, inputs) in runs.items():
        _, jacobian = measurements.solve(inputs)
        accepted, rejected, _ = measurements.solver.stats
        ms = float(np.median(samples[(name, label)])) * 1e3
        share = ratio[(name, label)] = ms / (float(np.median(samples[(name, "isothermal")])) * 1e3)
        print(f"{name:<30}{label:<24}{jacobian.shape[1]:>8}{accepted:>7}{rejected:>9}{ms:>11.3f}{share:>7.2f}")
    print()
    for name in NETWORKS:
        ramped, dosed = ratio[(name, "ramped")], ratio[(name, "dosed")]
        print(
            f"{name}: ramped / isothermal {ramped:.2f} (target <= 1.5: {'met' if ramped <= 1.5 else 'MISSED'}), "
            f"dosed / isothermal {dosed:.2f} (target <= 2: {'met' if dosed <= 2.0 else 'MISSED'})"
        )


if __name__ == "__main__":
    main()
