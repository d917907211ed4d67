"""Figures written to ``figures/``: the Arrhenius plot, fits of every run, and the pair plot of the kinetic
parameters.

Matplotlib with the non-interactive Agg backend, so figures are made on machines without a screen.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import numpy as np
import xarray as xr

from ..inputs import units
from ..inputs.data import Observations, RateConstantData
from ..inputs.study import Study
from ..physics.arrhenius import linearised_fit, ln_rate_constant

if TYPE_CHECKING:
    from ..posterior.per_temperature import TemperaturePoints


def arrhenius_plot(
    study: Study,
    posterior: xr.Dataset,
    temperature_ref: float,
    measured_K: np.ndarray,
    path: Path,
    data: RateConstantData | None = None,
    points: TemperaturePoints | None = None,
) -> None:
    """ln k against 1/T per reaction: posterior median line with its 90 % band over the measured range (plus 5 %
    each side); with rate-constant data also the measured points (90 % bars where the data state k errors) and the
    classical OLS line; with ``points`` each step's rate constants fitted freely at each temperature (90 % bars).
    The top axis shows the temperature in the study's unit (°C when that is K). Where there are points, a panel
    underneath shows them less the posterior median line, so that a bend is seen at the scale of their errors."""
    shown = points.table if points is not None else None
    marked = data is not None or (shown is not None and not shown.empty)
    if marked:
        fig, (ax, below) = plt.subplots(2, 1, figsize=(7.2, 7.0), sharex=True, gridspec_kw={"height_ratios": [3, 1.5]})
    else:
        fig, ax = plt.subplots(figsize=(7.2, 5.2))
        below = None
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    low, high = float(np.min(measured_K)), float(np.max(measured_K))
    span = 1.0 / low - 1.0 / high
    inverse = np.linspace(1.0 / high - 0.05 * span, 1.0 / low + 0.05 * span, 80)
    handles, labels = [], []
    for index, spec in enumerate(study.reactions):
        if spec.held:  # held at equilibrium: no rate constant to plot
            continue
        name, colour = spec.name, colours[index % len(colours)]
        q05, median, q95 = _arrhenius_band(posterior, spec, 1.0 / inverse, temperature_ref)
        band = ax.fill_between(1000 * inverse, q05, q95, color=colour, alpha=0.25, linewidth=0)
        (line,) = ax.plot(1000 * inverse, median, color=colour)
        handles.append((band, line))
        labels.append(f"{name}: posterior median, 90 % band (k in {spec.k_unit})")
        if below is not None:
            below.fill_between(1000 * inverse, q05 - median, q95 - median, color=colour, alpha=0.25, linewidth=0)
        marks = []
        if data is not None:
            rows = data.rows_of(index)
            temperature, k = data.temperature_K[rows], data.k[rows]
            fit = linearised_fit(temperature, k)
            (dashed,) = ax.plot(
                1000 * inverse, fit.intercept + fit.slope * inverse, color="0.15", linestyle="--", linewidth=0.9
            )
            handles.append(dashed)
            labels.append(f"{name}: least squares on ln k")
            error = None if data.ln_k_sd is None else 1.645 * data.ln_k_sd[rows]
            marks.append((temperature, np.log(k), error, {"fmt": "o", "markersize": 4}))
            labels.append(f"{name}: measured" + (" (bars: 90 %, stated error)" if error is not None else ""))
        if shown is not None:
            rows = shown[shown["step"] == name]
            if len(rows):
                style = {"fmt": "D", "markersize": 5, "markeredgecolor": "black", "markeredgewidth": 0.6, "capsize": 2}
                marks.append((rows["temperature_K"].to_numpy(), rows["ln_k"].to_numpy(), 1.645 * rows["sd"], style))
                labels.append(f"{name}: k fitted at each temperature alone (bars: 90 %)")
        for kelvin, ln_k, error, style in marks:
            handles.append(ax.errorbar(1000 / kelvin, ln_k, yerr=error, color=colour, elinewidth=0.9, **style))
            line_at = _arrhenius_band(posterior, spec, kelvin, temperature_ref)[1]
            dodge = (index - (len(study.reactions) - 1) / 2) * 0.006 * 1000 * span  # steps side by side
            below.errorbar(1000 / kelvin + dodge, ln_k - line_at, yerr=error, color=colour, elinewidth=0.9, **style)
    notes = []
    if not marked:
        for kelvin in np.unique(measured_K):
            ax.axvline(1000 / kelvin, color="0.8", linewidth=0.8, zorder=0)
        notes.append("grey lines: run temperatures")
    if points is not None and points.missing:
        gaps = [f"{step} at {_temperature_text(kelvin, study.units.temperature)}" for step, kelvin in points.missing]
        shown = ", ".join(gaps) if len(gaps) <= 4 else f"{len(gaps)} step-temperature pairs (listed in report.html)"
        notes.append("no point where those runs do not determine k: " + shown)
    (below if below is not None else ax).set_xlabel("1 / T  (10⁻³ K⁻¹)")
    units_of_k = {spec.k_unit for spec in study.reactions}
    ax.set_ylabel(f"ln(k / ({units_of_k.pop()}))" if len(units_of_k) == 1 else "ln(k / unit of its step)")
    if below is not None:
        below.axhline(0.0, color="0.3", linewidth=0.8)
        below.set_ylabel("ln k minus the\nposterior median line", fontsize=8)
    _temperature_axis(ax, study.units.temperature)
    ax.set_title(f"Arrhenius plot: {study.name}", fontsize=10)
    note_height = 0.18 / fig.get_figheight() if notes else 0.0  # the footnote's strip, under the legend
    fig.legend(
        handles,
        labels,
        fontsize=7,
        frameon=False,
        loc="lower center",
        bbox_to_anchor=(0.5, note_height),
        ncol=2 if len(labels) > 3 else 1,
    )
    if notes:
        fig.text(0.01, 0.005, "; ".join(notes), fontsize=6, color="0.4", ha="left", va="bottom", wrap=True)
    legend_rows = -(-len(labels) // (2 if len(labels) > 3 else 1))
    fig.tight_layout(rect=(0, (0.2 + 0.16 * legend_rows) / fig.get_figheight() + note_height, 1, 1))
    fig.savefig(path, dpi=120)
    plt.close(fig)


def _arrhenius_band(posterior: xr.Dataset, spec, kelvin: np.ndarray, temperature_ref: float) -> np.ndarray:
    """The 5 %, 50 % and 95 % posterior quantiles of ln k of reaction ``spec`` at ``kelvin`` (3, temperatures),
    with its temperature exponent (fitted, or as stated)."""
    name = spec.name
    ln_k_ref = posterior["ln_k_ref"].sel(reaction=name).values.reshape(-1, 1)
    ea = posterior["Ea"].sel(reaction=name).values.reshape(-1, 1)
    exponent = spec.temperature_exponent
    if "temperature_exponent" in posterior:
        exponent = posterior["temperature_exponent"].sel(reaction=name).values.reshape(-1, 1)
    curves = ln_rate_constant(np.asarray(kelvin, dtype=float)[None, :], ln_k_ref, ea, temperature_ref, exponent)
    return np.quantile(curves, [0.05, 0.5, 0.95], axis=0)


#: How temperature units read on an axis.
_TEMPERATURE_SYMBOLS = {"degC": "°C", "degF": "°F", "degR": "°R", "K": "K", "kelvin": "K"}


def _temperature_text(kelvin: float, unit: str) -> str:
    """A temperature in ``unit`` (kelvin in, °C shown when ``unit`` is K) for labels."""
    unit = "degC" if _TEMPERATURE_SYMBOLS.get(unit, unit) == "K" else unit
    return f"{float(units.kelvin_to(kelvin, unit)):.4g} {_TEMPERATURE_SYMBOLS.get(unit, unit)}"


def _temperature_axis(ax, unit: str) -> None:
    """A secondary top axis of ``ax`` (whose x is 1000 / T in K) in the temperature unit ``unit`` (°C for K)."""
    unit = "degC" if _TEMPERATURE_SYMBOLS.get(unit, unit) == "K" else unit
    offset = float(units.kelvin_to(0.0, unit))
    degree = float(units.kelvin_to(1.0, unit)) - offset  # the unit is affine in K

    def to_unit(x):
        with np.errstate(divide="ignore", invalid="ignore"):
            return offset + degree * 1000.0 / np.asarray(x, dtype=float)

    def to_inverse(t):
        with np.errstate(divide="ignore", invalid="ignore"):
            return 1000.0 * degree / (np.asarray(t, dtype=float) - offset)

    top = ax.secondary_xaxis("top", functions=(to_unit, to_inverse))
    top.set_xlabel(f"T ({_TEMPERATURE_SYMBOLS.get(unit, unit)})", fontsize=9)
    top.tick_params(labelsize=8)


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
    quantile = np.nanquantile if np.isnan(curves).any() else np.quantile  # failed draws are NaN; the rest is fast
    q05, median, q95 = quantile(curves, [0.05, 0.5, 0.95], axis=0)
    # Limits are set once at the end: autoscaling after every artist costs more than drawing the figure.
    ax.set_autoscale_on(False)
    drawn = [q05, q95]
    for i, species in enumerate(study.species):
        colour = colours[i % len(colours)]
        style = "-" if i in observed else "--"
        ax.fill_between(times, q05[:, i], q95[:, i], color=colour, alpha=0.2, linewidth=0)
        ax.plot(times, median[:, i], style, color=colour, label=species + ("" if i in observed else " (not measured)"))
        rows = (obs.run_index == run) & (obs.species_index == i) & plain
        for side, marker in (("below", "v"), ("above", "^")):
            limit = rows & (flags == side)
            if not limit.any():
                continue
            drawn.append((checks["observed"] / volume)[limit].to_numpy())
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
                drawn.append(table[column].to_numpy())
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
    values = np.concatenate([np.ravel(v) for v in drawn])
    values = values[np.isfinite(values)]
    low, high = (min(0.0, values.min()), values.max()) if values.size else (0.0, 1.0)
    pad = 0.05 * (high - low) or 1.0
    ax.set_ylim(low - (pad if low < 0 else 0.0), high + pad)
    ax.set_xlim(times[0] - 0.02 * times[-1], times[-1] * 1.02)
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
    """A small grey note saying what the marks mean: under the x-axis label of ``ax`` where it has one (clear of
    the data; ``tight_layout`` makes room for it), else in the lower right corner inside ``ax``."""
    if ax.get_xlabel():
        ax.annotate(
            text, xy=(1.0, 0.0), xycoords="axes fraction", xytext=(0, -30), textcoords="offset points",
            ha="right", va="top", fontsize=6, color="0.4",
        )  # fmt: skip
    else:
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
    fig, axes = plt.subplots(1, 2, figsize=(9.0, 1.8 + 0.55 * table["candidate"].nunique()), squeeze=False)
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
        ax.set_ylim(-0.6, len(rows) - 0.4)
        ax.set_xlabel("expected log predictive density\n(PSIS-LOO; higher is better)", fontsize=9)
        ax.set_title(label, fontsize=10)
    # Below the panels, never over the points; "tight" keeps every label inside the saved image.
    handles, labels = axes[0, 0].get_legend_handles_labels()
    fig.legend(handles, labels, fontsize=7, frameon=False, loc="lower center", ncol=2)
    fig.tight_layout(rect=(0, 0.4 / fig.get_figheight(), 1, 1))
    fig.savefig(path, dpi=110, bbox_inches="tight")
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


#: Above this many runs the predictive check draws all runs in one panel.
_MAX_RUN_PANELS = 16


def predictive_check_plot(table, path: Path, title: str) -> None:
    """Every measurement with its predictive median and 90 % interval (``table``: the columns of fit_checks.csv):
    batch runs against time, one panel per run, one colour per measured species or quantity; steady states against
    residence time and rate constants against temperature, in one panel. Log scale when all values are positive."""
    time_column = next((c for c in table.columns if c == "time" or c.startswith("time_")), None)
    temperature_column = next(c for c in table.columns if c == "temperature" or c.startswith("temperature_"))
    if time_column is None:  # rate constants
        x_column, names, x_label = temperature_column, "reaction", _column_label(temperature_column)
    else:
        names = "quantity" if "quantity" in table.columns else "species"
        x_label = _column_label(time_column)
        if "reactor" in table.columns:
            x_label = x_label.replace("time", "residence (CSTR) or space (PFR) time")
        x_column = time_column
    by_run = time_column is not None and "reactor" not in table.columns and table["run"].nunique() <= _MAX_RUN_PANELS
    groups = list(table.groupby("run", sort=False)) if by_run else [(None, table)]
    columns = min(3, len(groups))
    rows = -(-len(groups) // columns)
    fig, axes = plt.subplots(
        rows, columns, figsize=(max(6.4, 3.9 * columns + 0.4), 2.7 * rows + 1.0), squeeze=False, sharey=True
    )
    measured = list(dict.fromkeys(table[names]))
    colour = {name: f"C{i % 10}" for i, name in enumerate(measured)}
    shown_units = {name: str(table.loc[table[names] == name, "unit"].iloc[0]) for name in measured}
    positive = bool((table[["q05", "observed"]].to_numpy(dtype=float) > 0).all())
    for ax, (run, rows_of) in zip(axes.ravel(), groups, strict=False):
        x_all = rows_of[x_column].to_numpy(dtype=float)
        width = 0.012 * (np.ptp(x_all) if np.ptp(x_all) > 0 else 1.0)
        for i, name in enumerate(measured):
            part = rows_of[rows_of[names] == name]
            if part.empty:
                continue
            x = part[x_column].to_numpy(dtype=float) + (i - (len(measured) - 1) / 2) * width
            inside = part["inside_90"].to_numpy(dtype=bool)
            ax.vlines(x, part["q05"], part["q95"], color=colour[name], linewidth=1.4, alpha=0.45)
            ax.plot(x, part["median"], "_", color=colour[name], markersize=7)
            ax.plot(x, part["observed"], "o", color=colour[name], markersize=3.5)
            ax.plot(x[~inside], part["observed"].to_numpy()[~inside], "o", mfc="none", mec="black", markersize=8)
        if positive:
            ax.set_yscale("log")
            # Prior intervals may reach far below the data: the axis follows the data, and longer bars run off it.
            values = table[["observed", "median"]].to_numpy(dtype=float)
            low, high = float(values.min()), float(values.max())
            ax.set_ylim(low / 30, max(high * 3, min(float(table["q95"].max()) * 1.5, high * 30)))
        if run is not None:
            temperatures = rows_of[temperature_column].to_numpy(dtype=float)
            where = (
                f"{temperatures[0]:.4g} {_unit_of(temperature_column)}"
                if np.ptp(temperatures) == 0
                else "temperature history"
            )
            ax.set_title(f"run {run} ({where})", fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in axes.ravel()[len(groups) :]:
        ax.set_visible(False)
    for ax in axes.ravel()[: len(groups)]:
        ax.set_xlabel(x_label, fontsize=8)
    distinct = set(shown_units.values())
    if names == "reaction":
        value = "k"
    elif names == "species":
        value = "concentration"
    else:
        value = "measured value"
    y_label = f"{value} ({distinct.pop() or 'dimensionless'})" if len(distinct) == 1 else f"{value} (unit in legend)"
    for r in range(rows):
        axes[r, 0].set_ylabel(y_label, fontsize=8)
    from matplotlib.lines import Line2D

    several = len(distinct) > 1
    handles = [
        Line2D([], [], color=colour[n], marker="o", linestyle="", label=n + (f" ({shown_units[n]})" if several else ""))
        for n in measured
    ]
    handles += [
        Line2D([], [], color="0.5", linewidth=1.4, label="90 % predictive interval (marks: median)"),
        Line2D([], [], marker="o", mfc="none", mec="black", linestyle="", markersize=8, label="outside its interval"),
    ]
    legend_columns = min(len(handles), max(2, int(fig.get_figwidth() // 1.25)))
    fig.legend(handles=handles, loc="lower center", ncol=legend_columns, fontsize=7, frameon=False)
    fig.suptitle(title, fontsize=9)
    legend_rows = -(-len(handles) // legend_columns)
    fig.tight_layout(rect=(0, (0.25 + 0.18 * legend_rows) / fig.get_figheight(), 1, 1))
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _unit_of(column: str) -> str:
    """The unit in a column name of fit_checks.csv (``temperature_degC`` -> °C), or an empty string."""
    unit = column.split("_", 1)[1] if "_" in column else ""
    return _TEMPERATURE_SYMBOLS.get(unit, unit)


def _column_label(column: str) -> str:
    """An axis label from a column name of fit_checks.csv: ``time_min`` -> ``time (min)``."""
    name = column.split("_", 1)[0]
    unit = _unit_of(column)
    return f"{name} ({unit})" if unit else name


def prior_posterior_plot(study: Study, posterior: xr.Dataset, path: Path, temperature_ref: float | None = None) -> None:
    """For every reaction, the prior density of ln k_ref and of Ea (in the study's energy unit) with the posterior:
    how much the data taught beyond the priors. Where the posterior is much narrower than the prior, its 90 %
    interval and median are marked on the prior's scale and an inset zooms on its histogram."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from scipy import stats

    from ..inputs.units import joule_per_mol_to

    energy = study.units.energy
    rated = [spec for spec in study.reactions if not spec.held]  # a step held at equilibrium has no k_ref or Ea
    rows = len(rated)
    fig, axes = plt.subplots(rows, 2, figsize=(8.4, 2.7 * rows + 0.7), squeeze=False)
    at = f" at T_ref = {temperature_ref:.1f} K" if temperature_ref is not None else ""
    for row, spec in enumerate(rated):
        prior = spec.prior
        ln_k = posterior["ln_k_ref"].sel(reaction=spec.name).values.ravel()
        ea = joule_per_mol_to(posterior["Ea"].sel(reaction=spec.name).values.ravel(), energy)
        mean, sd = joule_per_mol_to(prior.ea_mean, energy), joule_per_mol_to(prior.ea_sd, energy)
        panels = (
            (
                axes[row, 0],
                ln_k,
                stats.norm(prior.ln_k_ref_mean, prior.ln_k_ref_sd),
                f"ln(k_ref / ({spec.k_unit})){at}",
            ),
            (axes[row, 1], ea, stats.truncnorm(-mean / sd, np.inf, loc=mean, scale=sd), f"Ea ({energy})"),
        )
        for ax, draws, density, label in panels:
            _prior_and_posterior(ax, draws, density)
            ax.set_title(spec.name, fontsize=9)
            ax.set_xlabel(label, fontsize=8)
            ax.set_ylabel("probability density", fontsize=8)
            ax.tick_params(labelsize=7)
    handles = [
        Line2D([], [], color="0.3", label="prior"),
        Patch(color="C0", alpha=0.6, label="posterior (histogram)"),
        Patch(color="C0", alpha=0.3, label="posterior 90 % interval"),
        Line2D([], [], color="C0", label="posterior median"),
    ]
    fig.legend(handles=handles, loc="lower center", ncol=4, fontsize=7, frameon=False)
    fig.tight_layout(rect=(0, 0.45 / (2.7 * rows + 0.7), 1, 1))
    fig.savefig(path, dpi=110)
    plt.close(fig)


#: The posterior is drawn in an inset when its 90 % interval is narrower than this share of the prior's.
_ZOOM_BELOW = 0.2


def _prior_and_posterior(ax, draws: np.ndarray, density) -> None:
    """The prior density (a frozen scipy distribution) as a line over its 0.1 to 99.9 % range, the posterior
    ``draws`` as a histogram on the same axis, or, when much narrower, as its 90 % interval and median there and
    a histogram in an inset (placed on the side away from the posterior)."""
    q05, q50, q95 = np.quantile(draws, [0.05, 0.5, 0.95])
    low, high = min(density.ppf(0.001), draws.min()), max(density.ppf(0.999), draws.max())
    grid = np.linspace(low, high, 400)
    peak = float(density.pdf(grid).max())
    ax.plot(grid, density.pdf(grid), color="0.3")
    ax.set_xlim(low, high)
    if q95 - q05 >= _ZOOM_BELOW * (density.ppf(0.95) - density.ppf(0.05)):
        ax.hist(draws, bins=40, density=True, color="C0", alpha=0.6)
        ax.axvline(q50, color="C0", linewidth=1.0)
        return
    ax.axvspan(q05, q95, color="C0", alpha=0.3, linewidth=0)
    ax.axvline(q50, color="C0", linewidth=1.0)
    ax.set_ylim(0, 2.3 * peak)  # the upper half is the inset's
    left = q50 > (low + high) / 2
    inset = ax.inset_axes([0.04 if left else 0.58, 0.55, 0.38, 0.33])
    lo, hi = np.quantile(draws, [0.001, 0.999])
    pad = 0.3 * (hi - lo) if hi > lo else 1.0
    inset.hist(draws, bins=40, range=(lo - pad, hi + pad), density=True, color="C0", alpha=0.6)
    inset.axvline(q50, color="C0", linewidth=1.0)
    zoom = np.linspace(lo - pad, hi + pad, 100)
    inset.plot(zoom, density.pdf(zoom), color="0.3")
    inset.set_xlim(lo - pad, hi + pad)
    inset.set_yticks([])
    inset.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(3))
    inset.tick_params(labelsize=6)
    inset.set_title("posterior, zoomed", fontsize=6, color="0.3", pad=2)


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
        return (
            "Arrhenius plot: posterior median and 90 % credible band of ln k per reaction against 1/T (top axis: "
            "temperature); measured rate constants, or for batch runs each step's k fitted at each temperature alone, "
            "with 90 % bars; underneath, the same points less the posterior median line"
        )
    if name == "pair.png":
        return "Pair plot of the kinetic parameters (posterior draws)"
    if name == "prior_posterior.png":
        return (
            "Prior density (line) and posterior (histogram; where much narrower than the prior, its 90 % interval "
            "and median on the prior's scale and a zoomed histogram inset) of ln k_ref and Ea of every reaction"
        )
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
        return (
            "Expected log predictive density of each candidate (higher is better), with its standard error, and "
            "its difference to the best candidate with the standard error of that difference"
        )
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


def rate_constant_prediction_plot(name: str, figure: dict, path: Path) -> None:
    """A question about k (``arrhenia predict``): k, and the half-life where there is one, against temperature:
    posterior median with 50 % and 90 % bands on a log scale, the fitted temperature range shaded, the temperatures
    asked marked, or the target with the temperature found (median, dotted; 90 % interval, hatched).

    ``figure``: ``curve`` (a table with ``temperature_<unit>``, ``quantity``, ``unit``, ``median``, ``q05``, ``q25``,
    ``q75``, ``q95``), ``unit`` (of temperature), ``fitted_K``, ``asked_K``, ``answer_K`` (5 %, 50 %, 95 %; inf
    where not reached) and ``target`` ((quantity, value) or None); temperatures in K."""
    curve, unit = figure["curve"], figure["unit"]
    axis = f"temperature_{unit}"
    quantities = list(dict.fromkeys(curve["quantity"]))
    fig, axes = plt.subplots(1, len(quantities), figsize=(5.6 * len(quantities), 4.2), squeeze=False)

    def shown(kelvin: float) -> float:
        return float(units.kelvin_to(kelvin, unit))

    low, high = (shown(t) for t in figure["fitted_K"])
    for index, (ax, quantity) in enumerate(zip(axes[0], quantities, strict=True)):
        rows = curve[curve["quantity"] == quantity]
        colour = f"C{index}"
        ax.axvspan(low, high, color="0.9", zorder=0, label="fitted temperature range")
        ax.fill_between(rows[axis], rows["q05"], rows["q95"], color=colour, alpha=0.15, linewidth=0, label="90 % band")
        ax.fill_between(rows[axis], rows["q25"], rows["q75"], color=colour, alpha=0.3, linewidth=0, label="50 % band")
        ax.plot(rows[axis], rows["median"], color=colour, label="posterior median")
        for number, kelvin in enumerate(figure["asked_K"]):
            ax.axvline(shown(kelvin), color="0.3", linestyle=":", linewidth=1, label="asked" if number == 0 else None)
        if figure["answer_K"] is not None:
            q05, median, q95 = figure["answer_K"]
            finite = [t for t in (q05, q95) if np.isfinite(t)]
            if np.isfinite(median):
                ax.axvline(shown(median), color="black", linestyle=":", linewidth=1.2, label="temperature found")
            if len(finite) == 2:
                ax.axvspan(
                    shown(q05), shown(q95), fill=False, hatch="//", edgecolor="0.5", linewidth=0, label="its 90 %"
                )
        if figure["target"] is not None and figure["target"][0] == quantity:
            ax.axhline(figure["target"][1], color="C3", linewidth=1, label="target")
        ax.set_yscale("log")
        ax.set_xlabel(f"temperature ({unit})")
        ax.set_ylabel(f"{quantity} ({rows['unit'].iloc[0]})")
        ax.legend(fontsize=7, frameon=False)
    fig.suptitle(f"scenario {name}: median, 50 % and 90 % bands over posterior draws", fontsize=10)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
