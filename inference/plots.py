"""Figures written to ``figures/``: the Arrhenius plot and the pair plot of the kinetic parameters.

Matplotlib with the non-interactive Agg backend, so figures are made on machines without a screen.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np
import xarray as xr

from .arrhenius import linearised_fit, ln_rate_constant
from .data import RateConstantData
from .study import Study


def arrhenius_plot(
    study: Study, data: RateConstantData, posterior: xr.Dataset, temperature_ref: float, path: Path
) -> None:
    """ln k against 1000/T: data, posterior median line with its 90 % band, and the classical OLS line."""
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for index, name in enumerate(study.reaction_names):
        colour = colours[index % len(colours)]
        rows = data.rows_of(index)
        temperature, k = data.temperature_K[rows], data.k[rows]
        span = 1.0 / temperature.min() - 1.0 / temperature.max()
        inverse = np.linspace(1.0 / temperature.max() - 0.05 * span, 1.0 / temperature.min() + 0.05 * span, 80)
        ln_k_ref = posterior["ln_k_ref"].sel(reaction=name).values.reshape(-1, 1)
        ea = posterior["Ea"].sel(reaction=name).values.reshape(-1, 1)
        curves = ln_rate_constant(1.0 / inverse[None, :], ln_k_ref, ea, temperature_ref)
        q05, median, q95 = np.quantile(curves, [0.05, 0.5, 0.95], axis=0)
        ax.fill_between(
            1000 * inverse, q05, q95, color=colour, alpha=0.25, linewidth=0, label=f"{name}: 90 % credible band"
        )
        ax.plot(1000 * inverse, median, color=colour, label=f"{name}: posterior median")
        fit = linearised_fit(temperature, k)
        ax.plot(
            1000 * inverse,
            fit.intercept + fit.slope * inverse,
            color="0.15",
            linestyle="--",
            linewidth=0.9,
            label=f"{name}: least squares on ln k",
        )
        ax.plot(1000 / temperature, np.log(k), "o", color=colour, markersize=4, label=f"{name}: measured")
    ax.set_xlabel("1000 / T  (1/K)")
    ax.set_ylabel(f"ln k  (k in {study.units.rate_constant})")
    ax.set_title(f"Arrhenius plot: {study.name}")
    ax.legend(fontsize=7, frameon=False)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def pair_plot(columns: dict[str, np.ndarray], path: Path, *, max_points: int = 1500, seed: int = 0) -> None:
    """Scatter matrix of posterior draws (histograms on the diagonal), thinned to ``max_points`` draws."""
    names = list(columns)
    values = np.column_stack([columns[n] for n in names])
    if values.shape[0] > max_points:
        keep = np.random.default_rng(seed).choice(values.shape[0], max_points, replace=False)
        values = values[np.sort(keep)]
    n = len(names)
    fig, axes = plt.subplots(n, n, figsize=(2.2 * n + 0.6, 2.2 * n + 0.6), squeeze=False)
    for row in range(n):
        for col in range(n):
            ax = axes[row, col]
            if col > row:
                ax.set_visible(False)
                continue
            if row == col:
                ax.hist(values[:, col], bins=30, color="0.4")
                ax.set_yticks([])
            else:
                ax.plot(values[:, col], values[:, row], ".", markersize=1.5, alpha=0.4, color="C0")
            if row == n - 1:
                ax.set_xlabel(names[col], fontsize=8)
            else:
                ax.set_xticklabels([])
            if col == 0 and row != 0:
                ax.set_ylabel(names[row], fontsize=8)
            ax.tick_params(labelsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
