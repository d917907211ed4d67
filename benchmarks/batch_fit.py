"""Benchmark: eight small studies fitted one after another and as a batch on a 2-worker local Dask cluster.

Problem (fixed by the project): eight invented catalyst screens, each A -> B -> C (first order both, so the
compiled ODE integrator is used), true Ea 60 + 2 i and 75 kJ/mol and k(330 K) 0.05 and 0.02 1/min for study i;
three runs at 320, 335 and 350 K, A and B measured at 10 times, 4 % lognormal noise (seed 2026 + i); every
fit 2 chains x 500 tuning + 500 draws, seed 1.

Ways, in one run and one order (numba and PyTensor caches are warmed by a throw-away fit first):
1. serial, chains in parallel: ``fit_study`` per study, chains on both cores (what a user does by hand);
2. serial, chains in sequence: ``fit_study(cores=1)`` per study (the per-study work a batch worker does);
3. batch: ``run_batch(workers=2)``: two worker processes, chains in sequence inside each.

Run: ``python benchmarks/batch_fit.py``. Prints wall times and the speed-ups of the batch over both serial
ways. On a 2-core machine the ceiling is 2x over way 2 (two fits at a time instead of one); a batch pays a
fixed few seconds to start its workers and import PyMC in each, so small batches of short fits stay below it.
Way 1 already samples on both cores, so the batch gains less over it (only the fits' serial parts overlap).
"""

from __future__ import annotations

import math
import os
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from inference import fit_study
from inference.physics.arrhenius import ln_rate_constant
from inference.workflows.batch import run_batch

STUDIES = 8
RUNS_K = (320.0, 335.0, 350.0)
TIMES = np.geomspace(0.5, 60.0, 10)

STUDY = """\
study: screen-{index}
units: {{time: min, temperature: K, concentration: mol/L, energy: kJ/mol}}
data: {{runs: screen-{index}-runs.csv, measurements: screen-{index}-measurements.csv}}
species: [A, B, C]
reactions:
  - name: first
    equation: A -> B
    k_ref: {{median: 0.05, factor: 10}}
    Ea: {{mean: 65, sd: 25}}
  - name: second
    equation: B -> C
    k_ref: {{median: 0.02, factor: 10}}
    Ea: {{mean: 70, sd: 25}}
reference_temperature: 330 K
noise: {{model: proportional, sigma: {{scale: 0.2}}}}
sampling: {{draws: 500, tune: 500, chains: 2, seed: 1}}
"""


def consecutive(k1: float, k2: float, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A -> B -> C from A0 = 1: exact profiles of A and B (k1 != k2; Levenspiel, ch. 3)."""
    a = np.exp(-k1 * t)
    b = k1 / (k2 - k1) * (np.exp(-k1 * t) - np.exp(-k2 * t))
    return a, b


def write_studies(folder: Path) -> list[Path]:
    paths = []
    for index in range(STUDIES):
        rng = np.random.default_rng(2026 + index)
        runs, meas = ["run,temperature,A,B,C"], ["run,time,A,B"]
        for r, kelvin in enumerate(RUNS_K):
            k1 = math.exp(ln_rate_constant(kelvin, math.log(0.05), (60.0 + 2 * index) * 1000, 330.0))
            k2 = math.exp(ln_rate_constant(kelvin, math.log(0.02), 75_000.0, 330.0))
            a, b = consecutive(k1, k2, TIMES)
            noisy = np.column_stack([a, b]) * np.exp(0.04 * rng.standard_normal((TIMES.size, 2)))
            runs.append(f"r{r},{kelvin:g},1.0,0,0")
            meas += [f"r{r},{t:.6g},{x:.6g},{y:.6g}" for t, (x, y) in zip(TIMES, noisy, strict=True)]
        (folder / f"screen-{index}-runs.csv").write_text("\n".join(runs) + "\n")
        (folder / f"screen-{index}-measurements.csv").write_text("\n".join(meas) + "\n")
        path = folder / f"screen-{index}.yaml"
        path.write_text(textwrap.dedent(STUDY.format(index=index)))
        paths.append(path)
    return paths


def timed(label: str, work) -> float:
    started = time.perf_counter()
    work()
    elapsed = time.perf_counter() - started
    print(f"{label:<38} {elapsed:8.1f} s", flush=True)
    return elapsed


def main() -> None:
    print(f"machine: {os.cpu_count()} cores; {STUDIES} network studies, 2 chains x 500 + 500 each")
    with tempfile.TemporaryDirectory() as scratch:
        folder = Path(scratch)
        paths = write_studies(folder)
        fit_study(paths[0], out=folder / "warm", quiet=True)  # compile and cache once, outside the timings
        parallel_chains = timed(
            "serial, chains in parallel",
            lambda: [fit_study(p, out=folder / "a" / p.stem, quiet=True) for p in paths],
        )
        sequential_chains = timed(
            "serial, chains in sequence",
            lambda: [fit_study(p, out=folder / "b" / p.stem, cores=1, quiet=True) for p in paths],
        )
        batch = timed(
            "batch, 2-worker local Dask cluster", lambda: run_batch(paths, root=folder / "c", workers=2, quiet=True)
        )
        identical = all(
            (folder / "a" / p.stem / "summary.csv").read_bytes()
            == (folder / "c" / f"screen-{i}" / "summary.csv").read_bytes()
            for i, p in enumerate(paths)
        )
    print(f"speed-up of the batch over serial with chains in sequence: {sequential_chains / batch:.2f}x (ceiling 2x)")
    print(f"speed-up of the batch over serial with chains in parallel: {parallel_chains / batch:.2f}x")
    print(f"every batch summary.csv byte-identical to its serial fit: {identical}")


if __name__ == "__main__":
    main()
