"""Simulation-based calibration of a study's model, at any size (Talts et al. 2018; Modrák et al. 2023).

Draws parameters from the study's priors, simulates data on the study's own design, fits every dataset, and
writes into ``--out``: ``ranks.csv`` (per simulation: the rank of every true value among L posterior draws,
whether it fell inside the central 50 % and 90 % intervals, divergences), ``uniformity.csv`` (chi-square and
Kolmogorov-Smirnov tests of the ranks per quantity), ``coverage.csv`` (interval coverage with binomial standard
errors) and ``figures/ranks.png`` (rank histograms with the 99 % band of uniform ranks).

Run, for example:
    python benchmarks/calibration.py data_demo/rate_constants.yaml --simulations 200 --out sbc-rate
    python benchmarks/calibration.py data_demo/study.yaml --simulations 100 --draws 300 --out sbc-network

Fits run on a local Dask cluster (``--workers``, default one per core). Prints the two tables and the wall time.
``python benchmarks/calibration.py --coverage-table RESULT_DIR...`` prints README's coverage table.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from inference.posterior.calibration import CalibrationSettings
from inference.workflows.calibrate import calibrate, write_calibration


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("study", type=Path)
    parser.add_argument("--simulations", type=int, default=100)
    parser.add_argument("--draws", type=int, default=500, help="draws per chain of every fit")
    parser.add_argument("--tune", type=int, default=500)
    parser.add_argument("--chains", type=int, default=2)
    parser.add_argument("--ranked-draws", type=int, default=99, help="L: posterior draws each truth is ranked among")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    parser.add_argument("--out", type=Path, required=True)
    parser.add_argument("--overwrite", action="store_true")
    args = parser.parse_args()
    settings = CalibrationSettings(args.simulations, args.draws, args.tune, args.chains, args.ranked_draws, args.seed)
    started = time.perf_counter()
    result = calibrate(args.study, settings, workers=args.workers)
    folder = write_calibration(result, args.out, overwrite=args.overwrite)
    print(f"{args.simulations} simulations of {args.study} in {time.perf_counter() - started:.0f} s -> {folder}\n")
    print(markdown_tables(result))
    print(f"\ndivergent transitions over all fits: {int(result.ranks['divergences'].sum())}")


def markdown_tables(result) -> str:
    """The uniformity and coverage tables as Markdown (as pasted into docs/calibration.md)."""
    lines = ["| quantity | bins | chi-square p | KS p |", "| --- | ---: | ---: | ---: |"]
    for row in result.uniformity.itertuples():
        lines.append(f"| `{row.quantity}` | {row.bins} | {row.chi2_p:.3f} | {row.ks_p:.3f} |")
    lines += [
        "",
        "| quantity | level | covered | share | binomial se | z |",
        "| --- | ---: | ---: | ---: | ---: | ---: |",
    ]
    for row in result.coverage.itertuples():
        lines.append(
            f"| `{row.quantity}` | {row.level} % | {row.covered}/{row.simulations} | {row.share:.3f} | "
            f"{row.binomial_se:.3f} | {row.z:+.2f} |"
        )
    return "\n".join(lines)


def coverage_table(folders: list[Path]) -> str:
    """README's coverage table from calibration result folders: per study, the share of 90 % intervals of its
    parameters (not the log-likelihood) that held the truth, pooled over parameters, with the binomial se of
    that many intervals (approximate: one simulation's intervals are not independent), and the lowest and
    highest share of a single parameter; fits with a stuck chain (any divergent transitions) are counted."""
    import pandas as pd

    lines = [
        "| study | simulations | 90 % intervals holding the truth | se | range over parameters | fits that diverged |",
        "| --- | ---: | ---: | ---: | ---: | ---: |",
    ]
    for folder in folders:
        coverage = pd.read_csv(folder / "coverage.csv")
        ranks = pd.read_csv(folder / "ranks.csv")
        rows = coverage[(coverage["level"] == 90) & (coverage["quantity"] != "log_likelihood")]
        covered, total = int(rows["covered"].sum()), int(rows["simulations"].sum())
        share = covered / total
        se = (0.9 * 0.1 / total) ** 0.5
        lines.append(
            f"| {folder.name} | {len(ranks)} | {share:.3f} ({covered}/{total}) | {se:.3f} | "
            f"{rows['share'].min():.2f}-{rows['share'].max():.2f} | {int((ranks['divergences'] > 0).sum())} |"
        )
    return "\n".join(lines)


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--coverage-table":
        print(coverage_table([Path(p) for p in sys.argv[2:]]))
    else:
        main()
