"""Benchmark: ranking candidate runs for the demo network with ``arrhenia next`` (target: 20 candidate batch runs in
under 2 minutes on the project's 2-core machine, issue #20), and what ramped, dosed and flow candidates and a
scenario's answer as the target cost beside them.

Problem (fixed by the project): the demo study (``data_demo/study.yaml``: A + B -> C, C -> D, five isothermal runs
at 40-80 degC), fitted with its own sampling settings (4 chains x 500 draws) unless a results folder is given; the
candidates file's defaults (1000 posterior draws, 200 simulated data sets per candidate, Fisher information over
100 draws). Candidates:

- ``isothermal``: 20 batch runs at 30-90 degC (every 3 degC, from A 0.5 and B 0.6 mol/L), lasting 60, 120 or
  240 min, each sampled at 8 times spread geometrically from 2 min and measuring A, C and D;
- ``ramped``: 4 batch runs heated linearly from 40 degC to 60, 70, 80 or 90 degC over their first hour, then held,
  for 120 min (same charge and sampling);
- ``dosed``: 4 semi-batch runs at 50, 60, 70 or 80 degC, 0.5 L of A 0.5 mol/L fed B 2 mol/L at 5 mL/min for the
  first 60 min, sampled as the 120 min runs;
- ``flow``: 2 CSTRs at 60 and 80 degC fed A 0.5 and B 0.6 mol/L, at residence times 10, 30 and 90 min.

Timed (one call of ``rank_experiments`` each, after a first call that compiles or loads numba's cache): the 20
isothermal runs for Ea[coupling] (the issue's target); all 30 candidates for Ea[coupling]; all 30 for a scenario's
answer (time to 95 % conversion of A in a 70 degC batch, per posterior draw through ``workflows.predict``).

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
CHARGE = "initial: {A: 0.5, B: 0.6}"
MEASURED = "measured: [A, C, D]"
SCENARIO = """\
scenarios:
  - {name: plant-70C, reactor: batch, temperature: 70, initial: {A: 1.0, B: 1.2}, until: 600, key_reactant: A,
     target_conversion: 0.95}
"""


def _times(duration: float) -> str:
    return ", ".join(f"{t:.4g}" for t in np.geomspace(2.0, duration, 8))


def isothermal() -> list[str]:
    """The 20 isothermal batch runs."""
    lines = []
    for index, celsius in enumerate(np.arange(30, 90, 3)):
        duration = (60, 120, 240)[index % 3]
        lines.append(
            f"{{name: T{celsius}-{duration}min, temperature: {celsius}, {CHARGE}, times: [{_times(duration)}], "
            f"{MEASURED}}}"
        )
    return lines


def others() -> dict[str, list[str]]:
    """The ramped, dosed and flow candidates, by kind."""
    ramped = [
        f"{{name: ramp-40-{top}, programme: [[0, 40], [60, {top}]], {CHARGE}, times: [{_times(120)}], {MEASURED}}}"
        for top in (60, 70, 80, 90)
    ]
    dosed = [
        f"{{name: dosed-{celsius}, temperature: {celsius}, initial: {{A: 0.5}}, volume: 0.5, feeds: [{{start: 0, "
        f"stop: 60, rate: 0.005, concentration: {{B: 2.0}}}}], times: [{_times(120)}], {MEASURED}}}"
        for celsius in (50, 60, 70, 80)
    ]
    flow = [
        f"{{name: cstr-{celsius}, reactor: cstr, temperature: {celsius}, feed: {{A: 0.5, B: 0.6}}, "
        f"residence_times: [10, 30, 90], {MEASURED}}}"
        for celsius in (60, 80)
    ]
    return {"ramped": ramped, "dosed": dosed, "flow": flow}


def candidates_file(folder: Path, name: str, target: str, lines: list[str], extra: str = "") -> Path:
    """A candidates file of ``lines`` for ``target``, written into ``folder``."""
    path = folder / f"{name}.yaml"
    path.write_text(f'target: "{target}"\n{extra}candidates:\n' + "".join(f"  - {line}\n" for line in lines))
    return path


def _timed(results: Path, candidates: Path, out: Path):
    started = time.perf_counter()
    ranked = rank_experiments(results, candidates, out=out, quiet=True)
    return ranked, time.perf_counter() - started


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
        kinds = others()
        mixed = isothermal() + [line for lines in kinds.values() for line in lines]
        files = {
            "20 isothermal, Ea[coupling]": candidates_file(work, "isothermal", "Ea[coupling]", isothermal()),
            **{
                f"{len(lines)} {kind}, Ea[coupling]": candidates_file(work, kind, "Ea[coupling]", lines)
                for kind, lines in kinds.items()
            },
            "all 30, Ea[coupling]": candidates_file(work, "mixed", "Ea[coupling]", mixed),
            "all 30, scenario answer": candidates_file(
                work, "scenario", "scenario:plant-70C:time to 95% conversion of A", mixed, SCENARIO
            ),
        }
        _, first = _timed(results, files["all 30, Ea[coupling]"], work / "warm-up")
        print(f"first call (numba compile or cache load, 30 candidates): {first:.1f} s")
        timings = {}
        for index, (label, path) in enumerate(files.items()):
            ranked, seconds = _timed(results, path, work / f"next{index}")
            timings[label] = seconds
            print(f"\n{label}: {seconds:.1f} s ({ranked.estimate} estimate)")
            columns = ["rank", "candidate", "kind", "expected_sd", "expected_sd_linearised", "effective_weights"]
            print(ranked.table[columns].head(8).to_string(index=False, float_format="{:.4g}".format))
        seconds = timings["20 isothermal, Ea[coupling]"]
        verdict = "within" if seconds < TARGET_SECONDS else "OVER"
        print(f"\nranking 20 candidate batch runs: {seconds:.1f} s ({verdict} the {TARGET_SECONDS:.0f} s target)")
        for label, seconds in timings.items():
            print(f"  {label:32s} {seconds:6.1f} s")


if __name__ == "__main__":
    main()
