"""The studies of the network-scale calibration (issue #21), written as a user would write them.

Simulation-based calibration only needs a study's design (runs, conditions, sampling times, what is measured
and how) and its priors: every data set is simulated from the priors and replaces the measured values. The
values written here are placeholders of the right kind (positive, below a limit where censored); they are
never fitted. The priors are narrower than the demo's (k_ref x/÷ 5, Ea sd 15 kJ/mol instead of x/÷ 20 and
30 kJ/mol): the issue allows physically sensible ranges, and the demo's widest draws make runs that are stiff
or inert for the whole sampling window, which a researcher would not design an experiment around. Simulating
and fitting use the same priors.

Studies (invented designs; T_ref stated in each):
- ``network``: the demo network's design (``data_demo/study.yaml``: A + B -> C, C -> D, four runs, 60 values).
- ``catalyst``: the catalyst-lot demo's model (saturating law, three lots, lot-to-lot sd of ln k, centred) on
  half the demo's design (one run at 50 degC from 0.5 mol/L and one at 70 degC from 2 mol/L per lot), with a
  detection limit of 0.001 mol/L on every value.
- ``reversible``: A <=> B at three temperatures, both directions fitted (k_ref, Ea, K_ref, dH).
- ``ramped``: A -> B, three runs on linear temperature ramps, none isothermal.
- ``dosed``: A + B -> P, B fed during the run into a 500 mL charge, isothermal at three temperatures.
- ``flow``: A -> B -> C at steady state in CSTRs and PFRs, three temperatures and three residence times.
- ``signal``: A -> B measured as peak areas with both response factors fitted, one standard at t = 0.
- ``censored``: A -> B with A falling through its detection limit of 0.05 mol/L (values read ``<0.05``).

Run: ``python benchmarks/calibration_studies.py OUT`` writes OUT/<name>/study.yaml and its CSV files (the copies
in ``configs/calibration/`` were written so), then e.g.
``python benchmarks/calibration.py configs/calibration/network/study.yaml --simulations 100 --out R``.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
UNITS = "units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}\n"
NOISE = "noise: {model: proportional, sigma: {scale: 0.2}}\n"
SAMPLING = "sampling: {draws: 300, tune: 300, chains: 2, seed: 1}\n"


def _step(name: str, equation: str, k: float, ea: float, extra: str = "") -> str:
    priors = f"k_ref: {{median: {k:g}, factor: 5}}, Ea: {{mean: {ea:g}, sd: 15}}"
    return f"  - {{name: {name}, equation: {equation}, {priors}{extra}}}\n"


def _write(folder: Path, yaml: str, files: dict[str, list[str]]) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "study.yaml").write_text(yaml)
    for name, lines in files.items():
        (folder / name).write_text("\n".join(lines) + "\n")


def _demo_copy(folder: Path, study: str, replacements: dict[str, str], files: list[str]) -> None:
    """A demo study with narrower priors, its CSV files copied beside it."""
    folder.mkdir(parents=True, exist_ok=True)
    text = (ROOT / "data_demo" / study).read_text()
    for old, new in replacements.items():
        assert old in text, old
        text = text.replace(old, new)
    (folder / "study.yaml").write_text(text)
    for name in files:
        shutil.copy(ROOT / "data_demo" / name, folder / name)


def network(folder: Path) -> None:
    _demo_copy(
        folder,
        "study.yaml",
        {
            "k_ref: {median: 0.05, factor: 20}": "k_ref: {median: 0.08, factor: 5}",
            "k_ref: {median: 0.005, factor: 20}": "k_ref: {median: 0.004, factor: 5}",
            "Ea: {mean: 70, sd: 30}": "Ea: {mean: 62, sd: 15}",
            "Ea: {mean: 80, sd: 30}": "Ea: {mean: 88, sd: 15}",
        },
        ["runs.csv", "measurements.csv"],
    )


def catalyst(folder: Path) -> None:
    """The catalyst demo's model (saturating law, lot-to-lot sd of ln k, centred) on half its design: three lots,
    each with a run at 50 degC from 0.5 mol/L and one at 70 degC from 2 mol/L, A and P at eight times, every value
    with a detection limit of 0.001 mol/L (the long layout's ``limit`` column): without it, a fast or slow lot
    drawn from the priors yields values down to 1e-15 mol/L, which no assay reports (docs/calibration.md)."""
    runs, rows = ["run,temperature,A,P,lot"], ["run,time,species,value,limit"]
    for lot in "ABC":
        for celsius, a0, last in ((50, 0.5, 130), (70, 2.0, 60)):
            run = f"lot-{lot}-{celsius}C"
            runs.append(f"{run},{celsius},{a0},0,lot-{lot}")
            for t in np.geomspace(last / 20, last, 8):
                a = a0 * np.exp(-t / last)
                rows += [f"{run},{t:.3g},A,{a:.4f},0.001", f"{run},{t:.3g},P,{a0 - a:.4f},0.001"]
    body = "species: [A, P]\nreactions:\n  - name: conversion\n    equation: A -> P\n    rate_law: saturating\n"
    body += "    adsorption:\n      A: {K_ref: {median: 1.5, factor: 3}, dH: {mean: -25, sd: 10}}\n"
    body += "    k_ref: {median: 0.06, factor: 5}\n    Ea: {mean: 70, sd: 15}\n"
    body += "run_variability: {sd: {scale: 0.3}, by: lot, parameterisation: centred}\n"
    yaml = f"study: calibration-catalyst\n{UNITS}data: {{runs: runs.csv, measurements: measurements.csv}}\n"
    yaml += "reference_temperature: 60\n" + body + NOISE + SAMPLING.replace("seed: 1", "seed: 1, target_accept: 0.95")
    _write(folder, yaml, {"runs.csv": runs, "measurements.csv": rows})


def _batch(folder: Path, name: str, body: str, runs: list[str], measurements: list[str]) -> None:
    yaml = f"study: calibration-{name}\n{UNITS}data: {{runs: runs.csv, measurements: measurements.csv}}\n"
    yaml += "reference_temperature: 55\n" + body + SAMPLING
    _write(folder, yaml, {"runs.csv": runs, "measurements.csv": measurements})


def reversible(folder: Path) -> None:
    runs, rows = ["run,temperature,A,B"], ["run,time,A,B"]
    for celsius in (40, 55, 70):
        runs.append(f"r{celsius},{celsius},1.0,0")
        rows += [
            f"r{celsius},{t:g},{0.3 + 0.7 * np.exp(-t / 15):.4f},{0.7 - 0.7 * np.exp(-t / 15):.4f}"
            for t in (2, 5, 10, 20, 35, 60, 90)
        ]
    body = "species: [A, B]\nreactions:\n"
    body += _step("isomerisation", "A <=> B", 0.05, 60, ", K_ref: {median: 2, factor: 5}, dH: {mean: -10, sd: 15}")
    _batch(folder, "reversible", body + NOISE, runs, rows)


def ramped(folder: Path) -> None:
    ramps = {"heat30": ((0, 30), (150, 80)), "heat45": ((0, 45), (100, 70)), "cool65": ((0, 65), (120, 45))}
    runs, temperatures, rows = ["run,temperature,A,B"], ["run,time,temperature"], ["run,time,A,B"]
    for run, ((t0, c0), (t1, c1)) in ramps.items():
        runs.append(f"{run},,1.0,0")
        temperatures += [f"{run},{t0},{c0}", f"{run},{t1},{c1}"]
        rows += [f"{run},{t:g},{np.exp(-t / t1):.4f},{1 - np.exp(-t / t1):.4f}" for t in np.linspace(t1 / 10, t1, 8)]
    yaml = f"study: calibration-ramped\n{UNITS}"
    yaml += "data: {runs: runs.csv, temperatures: temperatures.csv, measurements: measurements.csv}\n"
    yaml += "reference_temperature: 55\nspecies: [A, B]\nreactions:\n" + _step("step", "A -> B", 0.02, 80)
    _write(
        folder, yaml + NOISE + SAMPLING, {"runs.csv": runs, "temperatures.csv": temperatures, "measurements.csv": rows}
    )


def dosed(folder: Path) -> None:
    runs, feeds, rows = ["run,temperature,volume,A,B,P"], ["run,start,stop,rate,B"], ["run,time,A,P"]
    for celsius in (45, 55, 65):
        runs.append(f"d{celsius},{celsius},500,1.0,0,0")
        feeds.append(f"d{celsius},0,40,5,2.5")  # 200 mL of 2.5 mol/L B over 40 min: 1 mol B per mol A
        rows += [
            f"d{celsius},{t:g},{np.exp(-t / 60):.4f},{0.5 * (1 - np.exp(-t / 60)):.4f}"
            for t in (10, 20, 30, 45, 60, 90, 120)
        ]
    yaml = f"study: calibration-dosed\n{UNITS.replace('}', ', volume: mL}')}"
    yaml += "data: {runs: runs.csv, feeds: feeds.csv, measurements: measurements.csv}\n"
    yaml += "reference_temperature: 55\nspecies: [A, B, P]\nreactions:\n" + _step("coupling", "A + B -> P", 0.1, 65)
    _write(folder, yaml + NOISE + SAMPLING, {"runs.csv": runs, "feeds.csv": feeds, "measurements.csv": rows})


def flow(folder: Path) -> None:
    rows = ["run,reactor,temperature,residence_time,feed_A,A,B,C"]
    for reactor in ("cstr", "pfr"):
        for celsius in (50, 60, 70):
            for tau in (3, 10, 30):
                a = np.exp(-tau / 15)
                outlet = f"{a:.4f},{(1 - a) * 0.7:.4f},{(1 - a) * 0.3:.4f}"
                rows.append(f"{reactor}-{celsius}-{tau},{reactor},{celsius},{tau},1.0,{outlet}")
    yaml = f"study: calibration-flow\n{UNITS}data: {{steady_states: outlet.csv}}\nreference_temperature: 60\n"
    yaml += "species: [A, B, C]\nreactions:\n" + _step("first", "A -> B", 0.1, 60) + _step("second", "B -> C", 0.03, 85)
    _write(folder, yaml + NOISE + SAMPLING, {"outlet.csv": rows})


def signal(folder: Path) -> None:
    runs, rows = ["run,temperature,A,B"], ["run,time,area_A,area_B"]
    for index, (celsius, a0) in enumerate([(40, 1.0), (55, 0.8), (70, 1.2)]):
        runs.append(f"r{index},{celsius},{a0},0")
        times = ([0.0] if index == 0 else []) + [1, 3, 6, 10, 15, 25, 40, 60]
        for t in times:
            a = a0 * np.exp(-t / 20)
            rows.append(f"r{index},{t:g},{2e4 * a:.1f}," + (f"{1.5e4 * (a0 - a):.1f}" if t > 0 else ""))
    body = "species: [A, B]\nreactions:\n" + _step("decay", "A -> B", 0.05, 70) + "observations:\n"
    body += "  - {quantity: area_A, kind: signal, species: A, response: {median: 2.0e4, factor: 3}}\n"
    body += "  - {quantity: area_B, kind: signal, species: B, response: {median: 1.5e4, factor: 3}}\n"
    _batch(folder, "signal", body + NOISE, runs, rows)


def censored(folder: Path) -> None:
    runs, rows = ["run,temperature,A,B"], ["run,time,A"]
    for celsius in (45, 55, 65):
        runs.append(f"r{celsius},{celsius},1.0,0")
        for t in np.linspace(5, 120, 16):
            value = np.exp(-t / 30)
            rows.append(f"r{celsius},{t:g}," + ("<0.05" if value < 0.05 else f"{value:.4f}"))
    body = "species: [A, B]\nreactions:\n" + _step("decay", "A -> B", 0.04, 60)
    _batch(folder, "censored", body + "noise: {model: proportional, sigma: {scale: 0.3}}\n", runs, rows)


STUDIES = {f.__name__: f for f in (network, catalyst, reversible, ramped, dosed, flow, signal, censored)}


def main() -> None:
    if len(sys.argv) != 2:
        sys.exit(__doc__)
    out = Path(sys.argv[1])
    for name, write in STUDIES.items():
        write(out / name)
        print(out / name / "study.yaml")


if __name__ == "__main__":
    main()
