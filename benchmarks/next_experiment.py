"""Benchmark: ranking 20 candidate batch runs for the demo network with ``arrhenia next`` (target: under 2 minutes
on the project's 2-core machine, issue #20).

Problem (fixed by the project): the demo study (``data_demo/study.yaml``: A + B -> C, C -> D, five isothermal runs
at 40-80 degC), fitted with its own sampling settings (4 chains x 500 draws) unless a results folder is given; 20
candidate runs at 30-90 degC (every 3 degC, from A 0.5 and B 0.6 mol/L), lasting 60, 120 or 240 min, each sampled
at 8 times spread geometrically from 2 min and measuring A, C and D; target Ea[coupling]; the candidates file's
defaults (1000 posterior draws, 200 simulated data sets per candidate, Fisher information over 100 draws).

What is timed: one call of ``rank_experiments`` in this process (reading and checking the results, predicting every
candidate under every draw with the compiled solver, reweighting, the linearised estimate, writing the folder),
after a first call that compiles or loads numba's cache; the first call's time is printed too.

Run: ``python benchmarks/next_experiment.py [RESULTS_DIR]``.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from inference import fit_study, rank_experiments

DEMO = Path(__file__).resolve().parents[1] / "data_demo"
TARGET_SECONDS = 120.0


def candidates_file(folder: Path) -> Path:
    """The 20 candidates of the benchmark, written into ``folder``."""
    lines = ["target: Ea[coupling]", "candidates:"]
    for index, celsius in enumerate(np.arange(30, 90, 3)):
        duration = (60, 120, 240)[index % 3]
        times = ", ".join(f"{t:.4g}" for t in np.geomspace(2.0, duration, 8))
        lines.append(
            f"  - {{name: T{celsius}-{duration}min, temperature: {celsius}, initial: {{A: 0.5, B: 0.6}}, "
            f"times: [{times}], measured: [A, C, D]}}"
        )
    path = folder / "candidates.yaml"
    path.write_text("\n".join(lines) + "\n")
    return path


def main() -> None:
    with tempfile.TemporaryDirectory() as scratch:
        work = Path(scratch)
        if len(sys.argv) > 1:
            results = Path(sys.argv[1])
        else:
            shutil.copytree(DEMO, work / "demo")
            started = time.perf_counter()
            results = fit_study(work / "demo" / "study.yaml", out=work / "fit", quiet=True).results_dir
            print(f"fitted the demo study in {time.perf_counter() - started:.1f} s")
        candidates = candidates_file(work)
        timings = []
        for attempt in range(2):
            started = time.perf_counter()
            ranked = rank_experiments(results, candidates, out=work / f"next{attempt}", quiet=True)
            timings.append(time.perf_counter() - started)
        print(ranked.table[["rank", "candidate", "expected_sd", "expected_sd_linearised", "effective_weights"]])
        print(f"estimate: {ranked.estimate}")
        print(f"first call (numba compile or cache load): {timings[0]:.1f} s")
        verdict = "within" if timings[1] < TARGET_SECONDS else "OVER"
        print(f"ranking 20 candidate batch runs: {timings[1]:.1f} s ({verdict} the {TARGET_SECONDS:.0f} s target)")


if __name__ == "__main__":
    main()
