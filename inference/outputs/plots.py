"""Figures written to ``figures/``: the Arrhenius plot, fits of every run, and the pair plot of the kinetic
parameters.

Matplotlib with the non-interactive Agg backend, so figures are made on machines without a screen.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np
import xarray as xr

from ..inputs import units
from ..inputs.data import Observations, RateConstantData
from ..inputs.study import Study
from ..physics.arrhenius import linearised_fit, ln_rate_constant


def arrhenius_plot(
    study: Study,
    posterior: xr.Dataset,
    temperature_ref: float,
    measured_K: np.ndarray,
    path: Path,
    data: RateConstantData | None = None,
) -> None:
    """ln k against 1000/T per reaction: posterior median line with its 90 % band over the measured range
    (plus 5 % each side); with rate-constant data also the measured points and the classical OLS line."""
    fig, ax = plt.subplots(figsize=(6.4, 4.6))
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    low, high = float(np.min(measured_K)), float(np.max(measured_K))
    span = 1.0 / low - 1.0 / high
    inverse = np.linspace(1.0 / high - 0.05 * span, 1.0 / low + 0.05 * span, 80)
    for index, spec in enumerate(study.reactions):
        name, colour = spec.name, colours[index % len(colours)]
        ln_k_ref = posterior["ln_k_ref"].sel(reaction=name).values.reshape(-1, 1)
        ea = posterior["Ea"].sel(reaction=name).values.reshape(-1, 1)
        curves = ln_rate_constant(1.0 / inverse[None, :], ln_k_ref, ea, temperature_ref)
        q05, median, q95 = np.quantile(curves, [0.05, 0.5, 0.95], axis=0)
        ax.fill_between(
            1000 * inverse, q05, q95, color=colour, alpha=0.25, linewidth=0, label=f"{name}: 90 % credible band"
        )
        ax.plot(1000 * inverse, median, color=colour, label=f"{name}: posterior median ({spec.k_unit})")
        if data is not None:
            rows = data.rows_of(index)
            temperature, k = data.temperature_K[rows], data.k[rows]
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
    if data is None:
        for kelvin in np.unique(measured_K):
            ax.axvline(1000 / kelvin, color="0.8", linewidth=0.8, zorder=0)
    ax.set_xlabel("1000 / T  (1/K)" + ("" if data is not None else "; grey lines: run temperatures"))
    ax.set_ylabel("ln k")
    ax.set_title(f"Arrhenius plot: {study.name}")
    ax.legend(fontsize=7, frameon=False)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def run_fit_plot(
    study: Study, obs: Observations, run: int, times: np.ndarray, curves: np.ndarray, checks, path: Path
) -> None:
    """One run: observed points with their 90 % predictive intervals, and every species' posterior median
    profile with its 90 % credible band (``curves`` is draws x times x species); unobserved species dashed.
    A run with a temperature history or feeds gets a panel underneath with its temperature trace (and the dosing
    intervals shaded)."""
    setup = obs.setups[run] if obs.setups else None
    underneath = setup is not None and (setup.ramped or bool(setup.feeds))
    if underneath:
        fig, (ax, trace) = plt.subplots(2, 1, figsize=(6.4, 5.4), sharex=True, gridspec_kw={"height_ratios": [3, 1]})
        _temperature_trace(trace, study, setup, times)
    else:
        fig, ax = plt.subplots(figsize=(6.4, 4.2))
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    plain = _concentration_rows(study, obs)
    flags = obs.censored  # once per figure, not once per species
    volume = obs.factor if obs.factor is not None else np.ones(obs.value.size)
    if obs.design is not None and study.measured_as == "amount":
        volume = obs.design.multiplier
    observed = set(obs.species_index[(obs.run_index == run) & plain].tolist())
    q05, median, q95 = np.nanquantile(curves, [0.05, 0.5, 0.95], axis=0)
    for i, species in enumerate(study.species):
        colour = colours[i % len(colours)]
        style = "-" if i in observed else "--"
        ax.fill_between(times, q05[:, i], q95[:, i], color=colour, alpha=0.2, linewidth=0)
        ax.plot(times, median[:, i], style, color=colour, label=species + ("" if i in observed else " (not measured)"))
        rows = (obs.run_index == run) & (obs.species_index == i) & plain
        for side, marker in (("below", "v"), ("above", "^")):
            limit = rows & (flags == side)
            ax.plot(
                checks["time"][limit],
                (checks["observed"] / volume)[limit],
                marker,
                markerfacecolor="none",
                color=colour,
                markersize=6,
            )
        rows &= flags == ""
        if rows.any():
            table = checks[rows].copy()
            for column in ("observed", "q05", "q95"):  # measured amounts are drawn as concentrations
                table[column] = table[column] / volume[rows]
            ax.errorbar(
                table["time"],
                table["observed"],
                yerr=[
                    np.clip(table["observed"] - table["q05"], 0, None),
                    np.clip(table["q95"] - table["observed"], 0, None),
                ],
                fmt="o",
                color=colour,
                markersize=4,
                elinewidth=0.6,
                capsize=0,
                alpha=0.9,
            )
    kelvin = obs.temperature_K[run]
    unit = study.units.temperature
    shown = f"{float(units.kelvin_to(kelvin, unit)):.4g} {unit}"
    kind = "dosed, " if setup is not None and setup.feeds else ""
    if setup is not None and setup.ramped:
        ax.set_title(f"run {obs.run_ids[run]} ({kind}temperature history, time-weighted mean {shown})")
    else:
        ax.set_title(f"run {obs.run_ids[run]} ({kind}at {shown})")
    if not underneath:
        ax.set_xlabel(f"time ({study.units.time})")
    ax.set_ylabel(f"concentration ({study.units.concentration})")
    ax.legend(fontsize=7, frameon=False)
    _footnote(
        ax,
        "bands: 90 % credible; bars: 90 % predictive; open triangles: beyond a detection limit"
        + ("; amounts drawn as concentrations (÷ volume)" if study.measured_as == "amount" else ""),
    )
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _footnote(ax, text: str) -> None:
    """A small grey note in the lower right corner of ``ax`` saying what the marks mean."""
    ax.text(0.99, 0.01, text, transform=ax.transAxes, ha="right", va="bottom", fontsize=6, color="0.4")


def _concentration_rows(study: Study, obs: Observations) -> np.ndarray:
    """Measurements that are plain concentrations (drawn over the profiles; the others have figures of their
    own)."""
    if obs.quantity_index is None:
        return np.ones(obs.value.size, dtype=bool)
    kinds = np.array([q.kind for q in obs.quantities])
    return kinds[obs.quantity_index] == "concentration"


def measured_quantities_plot(study: Study, obs: Observations, checks, path: Path) -> None:
    """Declared measured quantities (signals, compositions, combinations, conversions, yields) on the scale they
    were measured: per quantity, each run's values over time with the posterior predictive median and 90 %
    interval; censored values drawn at their limit as open triangles (pointing to the side they lie on)."""
    names = [
        n
        for n in dict.fromkeys(checks["quantity"])
        if any(q.name == n and q.kind != "concentration" for q in obs.quantities)
    ]
    if not names:
        return
    fig, axes = plt.subplots(len(names), 1, figsize=(6.4, 3.0 * len(names)), squeeze=False)
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    censored = checks["censored"] if "censored" in checks.columns else None
    for ax, name in zip(axes[:, 0], names, strict=True):
        for r, run in enumerate(obs.run_ids):
            rows = checks[(checks["quantity"] == name) & (checks["run"] == run)].sort_values("time")
            if rows.empty:
                continue
            colour = colours[r % len(colours)]
            ax.fill_between(rows["time"], rows["q05"], rows["q95"], color=colour, alpha=0.15, linewidth=0)
            ax.plot(rows["time"], rows["median"], "-", color=colour, linewidth=0.8)
            exact = rows if censored is None else rows[rows["censored"] == ""]
            ax.plot(exact["time"], exact["observed"], "o", color=colour, markersize=4, label=f"run {run}")
            if censored is not None:
                for side, marker in (("below", "v"), ("above", "^")):
                    limit = rows[rows["censored"] == side]
                    ax.plot(
                        limit["time"], limit["observed"], marker, markerfacecolor="none", color=colour, markersize=6
                    )
        ax.set_title(f"{name} (as measured)")
        ax.set_xlabel(f"time ({study.units.time})")
        ax.set_ylabel(name)
        ax.legend(fontsize=6, frameon=False, ncol=2)
    _footnote(axes[-1, 0], "lines: predictive median; bands: 90 % predictive; open triangles: censored at the limit")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _temperature_trace(ax, study: Study, setup, times: np.ndarray) -> None:
    """The run's temperature over ``times`` in the study's unit, with its dosing intervals shaded."""
    unit = study.units.temperature
    history = np.asarray(setup.history, dtype=float)
    kelvin = np.interp(times, history[:, 0], history[:, 1])
    ax.plot(times, units.kelvin_to(kelvin, unit), color="0.2", linewidth=1.2)
    for feed in setup.feeds:
        ax.axvspan(feed.start, min(feed.stop, float(times[-1])), color="tab:orange", alpha=0.15, linewidth=0)
    if setup.feeds:
        ax.text(0.01, 0.95, "shaded: dosing", transform=ax.transAxes, va="top", fontsize=6, color="0.4")
    ax.set_ylabel(f"T ({unit})")
    ax.set_xlabel(f"time ({study.units.time})")


def steady_state_plot(study: Study, obs: Observations, checks, path: Path) -> None:
    """Steady states of continuous reactors: each measured outlet concentration against its residence time, one
    panel per reactor kind, colour by species and marker by temperature, with the 90 % predictive interval."""
    kinds = [k for k in ("cstr", "pfr") if (checks["reactor"] == k).any()]
    fig, axes = plt.subplots(1, len(kinds), figsize=(6.0 * len(kinds), 4.2), squeeze=False)
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    markers = "osD^v<>ph*"
    temperatures = sorted(checks["temperature"].unique())
    unit = study.units.temperature
    for ax, kind in zip(axes[0], kinds, strict=True):
        table = checks[checks["reactor"] == kind]
        for i, species in enumerate(study.species):
            for t_index, temperature in enumerate(temperatures):
                rows = table[(table["species"] == species) & (table["temperature"] == temperature)]
                if rows.empty:
                    continue
                colour = colours[i % len(colours)]
                order = np.argsort(rows["time"].to_numpy())
                x = rows["time"].to_numpy()[order]
                ax.fill_between(
                    x,
                    rows["q05"].to_numpy()[order],
                    rows["q95"].to_numpy()[order],
                    color=colour,
                    alpha=0.12,
                    linewidth=0,
                )
                ax.plot(x, rows["median"].to_numpy()[order], "-", color=colour, linewidth=0.8)
                ax.plot(
                    x,
                    rows["observed"].to_numpy()[order],
                    markers[t_index % len(markers)],
                    color=colour,
                    markersize=4,
                    label=f"{species}, {temperature:.4g} {unit}",
                )
        ax.set_title(f"{kind.upper()} steady states")
        ax.set_xlabel(f"{'residence' if kind == 'cstr' else 'space'} time ({study.units.time})")
        ax.set_ylabel(f"outlet concentration ({study.units.concentration})")
        ax.legend(fontsize=6, frameon=False, ncol=2)
        _footnote(ax, "lines: posterior median at each measured state; bands: 90 % predictive")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
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


def comparison_plot(table, path: Path) -> None:
    """elpd of each candidate with its standard error, pointwise and leave-one-run-out side by side."""
    levels = [("pointwise", "held-out measurements"), ("leave_one_run_out", "held-out runs")]
    fig, axes = plt.subplots(1, 2, figsize=(9.0, 0.9 + 0.55 * table["candidate"].nunique()), squeeze=False)
    for ax, (level, label) in zip(axes[0], levels, strict=True):
        rows = table[table["level"] == level].sort_values("rank", ascending=False)
        y = np.arange(len(rows))
        ax.errorbar(rows["elpd"], y, xerr=rows["se"], fmt="o", color="C0", capsize=3, label="elpd ± se")
        ax.errorbar(
            rows["elpd"].max() - rows["elpd_diff"],
            y + 0.15,
            xerr=rows["dse"],
            fmt="^",
            color="0.4",
            capsize=3,
            markersize=4,
            label="difference to best ± se",
        )
        ax.set_yticks(y, rows["candidate"])
        ax.set_xlabel("expected log predictive density (PSIS-LOO)")
        ax.set_title(label, fontsize=10)
    axes[0, 0].legend(fontsize=7, frameon=False, loc="lower left")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def prediction_plot(name: str, table, path: Path, time_unit: str) -> None:
    """Concentrations, and conversion/yield where present, against time with 50 % and 90 % bands."""
    axis = table.columns[1]
    concentration = table[table["quantity"].str.startswith("c[")]
    fractions = table[~table["quantity"].str.startswith("c[")]
    panels = 2 if len(fractions) else 1
    fig, axes = plt.subplots(1, panels, figsize=(5.6 * panels, 4.0), squeeze=False)
    for ax, part, label in zip(axes[0], (concentration, fractions), ("concentration", "fraction"), strict=False):
        for index, (quantity, rows) in enumerate(part.groupby("quantity", sort=False)):
            colour = f"C{index % 10}"
            ax.fill_between(rows[axis], rows["q05"], rows["q95"], color=colour, alpha=0.15, linewidth=0)
            ax.fill_between(rows[axis], rows["q25"], rows["q75"], color=colour, alpha=0.3, linewidth=0)
            ax.plot(rows[axis], rows["median"], color=colour, marker="o" if len(rows) < 8 else None, label=quantity)
        unit = part["unit"].iloc[0] if len(part) else ""
        ax.set_xlabel(f"{axis.replace('_', ' ')} ({time_unit})")
        ax.set_ylabel(f"{label} ({unit})" if unit else label)
        ax.legend(fontsize=7, frameon=False)
    fig.suptitle(f"scenario {name}: median, 50 % and 90 % bands", fontsize=10)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def predictive_check_plot(table, path: Path, title: str) -> None:
    """Every measurement against its predictive median and 90 % interval (log scale when all are positive)."""
    fig, ax = plt.subplots(figsize=(7.0, 4.0))
    x = np.arange(len(table))
    inside = table["inside_90"].to_numpy(dtype=bool)
    ax.vlines(x, table["q05"], table["q95"], color="0.6", linewidth=1.2, label="90 % predictive interval")
    ax.plot(x, table["median"], "_", color="0.3", markersize=6, label="predictive median")
    ax.plot(x[inside], table["observed"][inside], "o", color="C0", markersize=3, label="measured, inside")
    ax.plot(x[~inside], table["observed"][~inside], "o", color="C3", markersize=4, label="measured, outside")
    if (table[["q05", "observed"]].to_numpy() > 0).all():
        ax.set_yscale("log")
    ax.set_xlabel("measurement (in file order by run and time)")
    ax.set_ylabel("value")
    ax.set_title(title, fontsize=9)
    ax.legend(fontsize=7, frameon=False)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def prior_posterior_plot(study: Study, posterior: xr.Dataset, path: Path) -> None:
    """For every reaction, the prior density of ln k_ref and of Ea (in the study's energy unit) over the
    posterior histogram: how much the data taught beyond the priors."""
    from scipy import stats

    from ..inputs.units import joule_per_mol_to

    energy = study.units.energy
    rows = len(study.reactions)
    fig, axes = plt.subplots(rows, 2, figsize=(8.0, 2.4 * rows + 0.4), squeeze=False)
    for row, spec in enumerate(study.reactions):
        prior = spec.prior
        ln_k = posterior["ln_k_ref"].sel(reaction=spec.name).values.ravel()
        ea = joule_per_mol_to(posterior["Ea"].sel(reaction=spec.name).values.ravel(), energy)
        mean, sd = joule_per_mol_to(prior.ea_mean, energy), joule_per_mol_to(prior.ea_sd, energy)
        panels = (
            (axes[row, 0], ln_k, stats.norm(prior.ln_k_ref_mean, prior.ln_k_ref_sd), f"ln k_ref[{spec.name}]"),
            (axes[row, 1], ea, stats.truncnorm(-mean / sd, np.inf, loc=mean, scale=sd), f"Ea[{spec.name}] ({energy})"),
        )
        for ax, draws, density, label in panels:
            low, high = density.ppf(0.001), density.ppf(0.999)
            low, high = min(low, draws.min()), max(high, draws.max())
            grid = np.linspace(low, high, 400)
            ax.hist(draws, bins=40, density=True, color="C0", alpha=0.6, label="posterior")
            ax.plot(grid, density.pdf(grid), color="0.3", label="prior")
            ax.set_yscale("log")
            ax.set_ylim(bottom=max(1e-4 * density.pdf(grid).max(), 1e-12))
            ax.set_xlabel(label, fontsize=8)
            ax.tick_params(labelsize=7)
        axes[row, 0].legend(fontsize=7, frameon=False)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def rank_histograms(result, path: Path) -> None:
    """Rank histograms of a calibration, one panel per quantity, with the band that holds 99 % of bin counts
    when ranks are uniform (binomial; the display of Talts et al. 2018)."""
    from scipy import stats

    from ..posterior.calibration import rank_bins

    quantities = result.quantities
    columns = min(4, len(quantities))
    rows = -(-len(quantities) // columns)
    figure, axes = plt.subplots(rows, columns, figsize=(3.2 * columns, 2.6 * rows), squeeze=False)
    count = len(result.ranks)
    bins = rank_bins(count, result.ranked_draws)
    low, high = stats.binom.ppf([0.005, 0.995], count, 1.0 / bins)
    edges = np.linspace(0, result.ranked_draws + 1, bins + 1)
    for axis, quantity in zip(axes.ravel(), quantities, strict=False):
        axis.axhspan(low, high, color="0.85", zorder=0)
        axis.axhline(count / bins, color="0.5", lw=0.8)
        axis.hist(result.ranks[f"rank:{quantity}"], bins=edges, color="#4477aa", edgecolor="white")
        axis.set_title(quantity, fontsize=8)
        axis.set_xlabel("rank of the true value", fontsize=7)
        axis.tick_params(labelsize=7)
    for axis in axes.ravel()[len(quantities) :]:
        axis.set_visible(False)
    figure.suptitle(f"simulation-based calibration: {count} simulations, L = {result.ranked_draws}", fontsize=9)
    figure.tight_layout()
    figure.savefig(path, dpi=110)
    plt.close(figure)


def caption(name: str) -> str:
    """The caption of a figure file we write."""
    if name == "arrhenius.png":
        return "Arrhenius plot: posterior median and 90 % credible band of ln k per reaction"
    if name == "pair.png":
        return "Pair plot of the kinetic parameters (posterior draws)"
    if name == "prior_posterior.png":
        return "Prior densities over posterior histograms (log density scale)"
    if name.startswith("run_"):
        return (
            f"Run {name[4:-4]}: measurements with 90 % predictive intervals and posterior median profiles with "
            "90 % credible bands (a run with a temperature history or feeds: its temperature trace underneath, "
            "dosing shaded)"
        )
    if name == "measured_quantities.png":
        return (
            "Declared measured quantities on the scale they were measured (signals, area %, absorbances, "
            "conversions, yields), with the posterior predictive median and 90 % interval; open triangles: values "
            "known only to lie beyond a detection or saturation limit"
        )
    if name == "steady_states.png":
        return (
            "Steady states of continuous reactors: measured outlet concentrations against residence (CSTR) or "
            "space (PFR) time, with the posterior median and 90 % predictive interval at each measured state"
        )
    if name == "comparison.png":
        return "Expected log predictive density of each candidate, with its standard error"
    return name


def next_experiment_plot(
    table,
    path: Path,
    *,
    target: str,
    unit: str,
    current_sd: float,
    temperature_unit: str,
    time_unit: str | None,
    fitted_range: tuple[float, float],
) -> None:
    """Expected posterior sd of the target after each candidate against the candidate's temperature (``table``
    from ``arrhenia next``: temperature, duration, expected_sd, expected_sd_se, extrapolated, candidate), with
    ±2 Monte Carlo standard errors, the current sd and the fitted temperature range (shaded); colour shows the
    duration where candidates differ in it; open marks lie outside the fitted range. Every candidate is named when
    there are few, else the best three by ``rank`` (their numbers beside them, their names in the title)."""
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    ax.axvspan(*fitted_range, color="0.92", zorder=0, label="fitted temperature range")
    ax.axhline(current_sd, color="0.35", linestyle="--", linewidth=1.0, label="sd now")
    durations = table["duration"].to_numpy(dtype=float)
    varied = np.isfinite(durations).all() and np.unique(durations).size > 1
    colours = (
        plt.cm.viridis((durations - durations.min()) / np.ptp(durations)) if varied else np.array(["C0"] * len(table))
    )
    x, y, se = (table[c].to_numpy(dtype=float) for c in ("temperature", "expected_sd", "expected_sd_se"))
    named = len(table) <= 8
    for i, (name, outside, rank) in enumerate(
        zip(table["candidate"], table["extrapolated"], table["rank"], strict=True)
    ):
        ax.errorbar(x[i], y[i], yerr=2 * se[i], fmt="none", ecolor=colours[i], elinewidth=0.9, capsize=2)
        ax.plot(
            x[i],
            y[i],
            "o",
            markersize=6,
            markeredgecolor=colours[i],
            markerfacecolor="white" if outside else colours[i],
        )
        if named or rank <= 3:
            label = f"{rank}: {name}" if named else str(rank)
            ax.annotate(label, (x[i], y[i]), xytext=(5, -9), textcoords="offset points", fontsize=7)
    if varied:
        mappable = plt.cm.ScalarMappable(cmap="viridis", norm=plt.Normalize(durations.min(), durations.max()))
        fig.colorbar(mappable, ax=ax, label=f"duration ({time_unit})")
    ax.set_xlabel(f"candidate temperature ({temperature_unit})")
    ax.set_ylabel(f"expected posterior sd of {target}" + (f" ({unit})" if unit else ""))
    ax.set_ylim(bottom=0)
    ax.margins(x=0.12)
    title = f"Which experiment next: {target}"
    if not named:
        best = table.sort_values("rank").head(3)
        title += "\nbest: " + ", ".join(f"{r}: {n}" for r, n in zip(best["rank"], best["candidate"], strict=True))
    ax.set_title(title, fontsize=9)
    ax.legend(fontsize=7, frameon=False, loc="lower left")
    _footnote(ax, "bars: ±2 Monte Carlo se; open marks: outside the fitted range")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
