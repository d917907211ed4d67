"""Figures that explain themselves, and the rate constants fitted at each temperature of a network study.

The figures are checked as objects (labels with units, legends, every text inside the saved image), the
per-temperature fit against closed forms of first-order decay and against numpy's weighted polynomial fit.
"""

from __future__ import annotations

import math
import textwrap

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
import pytest
import xarray as xr
from matplotlib.container import ErrorbarContainer
from scipy import stats
from scipy.integrate import solve_ivp

from inference.inputs.config import load_study
from inference.inputs.data import read_observations, read_rate_constants
from inference.outputs import plots
from inference.physics.arrhenius import R, ln_rate_constant
from inference.posterior.per_temperature import (
    COLUMNS,
    POINTS_FILE,
    chi_square,
    per_temperature_fits,
    quadratic_term,
)
from inference.workflows.kinds import open_problem

DECAY = """\
study: decay
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol}
data: {runs: runs.csv, measurements: measurements.csv}
species: [A, B]
reactions:
  - name: decay
    equation: A -> B
    k_ref: {median: 0.1, factor: 10}
    Ea: {mean: 60, sd: 20}
noise: {model: NOISE, sigma: {scale: 0.2}}
reference_temperature: 330 K
"""
SIGMA = {"proportional": 0.05, "absolute": 0.01}
T_REF = 330.0


def _decay_study(folder, noise: str, runs: list[tuple[str, float, float, np.ndarray, float]]):
    """A -> B, only A measured, noise-free: c_A = c0 exp(-k t) (first-order decay, exact). ``runs``: (name,
    temperature in degC, c0, times in min, k in 1/min)."""
    run_rows, rows = ["run,temperature,A,B"], ["run,time,A"]
    for name, celsius, c0, times, k in runs:
        run_rows.append(f"{name},{celsius},{c0},0")
        rows += [f"{name},{t:.12g},{c0 * math.exp(-k * t):.12g}" for t in times]
    (folder / "runs.csv").write_text("\n".join(run_rows) + "\n")
    (folder / "measurements.csv").write_text("\n".join(rows) + "\n")
    (folder / "study.yaml").write_text(DECAY.replace("NOISE", noise))
    study = load_study(folder / "study.yaml")
    return study, read_observations(study)


def _posterior(ln_k_ref: float, ea: float, sigma: float) -> xr.Dataset:
    """A posterior of 2 chains x 3 draws about (ln k_ref, Ea) with the noise scale fixed at ``sigma``."""
    spread = np.array([[-0.02, 0.0, 0.02], [-0.01, 0.0, 0.01]])
    return xr.Dataset(
        {
            "ln_k_ref": (("chain", "draw", "reaction"), (ln_k_ref + spread)[..., None]),
            "Ea": (("chain", "draw", "reaction"), (ea * (1 + spread))[..., None]),
            "sigma": (("chain", "draw"), np.full((2, 3), sigma)),
        },
        coords={"reaction": ["decay"]},
    )


@pytest.mark.parametrize("noise", ["proportional", "absolute"])
def test_per_temperature_ln_k_and_its_sd_match_first_order_closed_forms(tmp_path, noise):
    k, sigma = 0.07, SIGMA[noise]
    times = np.linspace(2.0, 40.0, 12)
    runs = [("r1", 50.0, 1.0, times, k), ("r2", 50.0, 0.5, times, k)]
    study, obs = _decay_study(tmp_path, noise, runs)
    # The posterior line is 0.3 off in ln k at 50 degC: the fit has to move from where it starts.
    posterior = _posterior(math.log(k) + 0.3, 60_000.0, sigma)
    points = per_temperature_fits(study, obs, posterior, T_REF)
    row = points.table.iloc[0]
    assert len(points.table) == 1 and row["n_runs"] == 2 and row["temperature_K"] == pytest.approx(323.15)
    # Noise-free data: the maximum-likelihood ln k is the true one (to the integrator's tolerance, rtol 1e-6).
    assert row["ln_k"] == pytest.approx(math.log(k), abs=1e-5)
    # Laplace sd against linear least squares with known sigma (closed forms, from memory):
    #   proportional: ln c = ln c0 - k t, d(ln c)/d(ln k) = -k t, so sd(ln k) = sigma / (k sqrt(sum t^2))
    #     (the slope of a regression through the origin, sd(k) = sigma / sqrt(sum t^2), divided by k);
    #   absolute: d c / d(ln k) = -k t c0 exp(-k t), so sd(ln k) = sigma / sqrt(sum (k t c0 exp(-k t))^2)
    #     (Gauss-Newton, exact for the linearised model).
    all_t = np.concatenate([times, times])
    c0 = np.repeat([1.0, 0.5], times.size)
    if noise == "proportional":
        expected = sigma / (k * math.sqrt(float(np.sum(all_t**2))))
    else:
        expected = sigma / math.sqrt(float(np.sum((k * all_t * c0 * np.exp(-k * all_t)) ** 2)))
    assert row["sd"] == pytest.approx(expected, rel=1e-4)
    assert list(points.table.columns) == list(COLUMNS) and row["k_unit"] == "1/min"


def _ladder(tmp_path, shape):
    """Noise-free first-order decay at 40 to 80 degC with ln k = -2.5 - 8 x + shape(i, x), x = 1000/T - 3 (T in K,
    i the temperature's index), and a run at 30 degC sampled so early (k t below 1e-4) that it cannot determine k."""
    runs = []
    for i, celsius in enumerate((40.0, 50.0, 60.0, 70.0, 80.0)):
        x = 1000.0 / (celsius + 273.15) - 3.0
        k = math.exp(-2.5 - 8.0 * x + shape(i, x))
        runs.append((f"t{celsius:g}", celsius, 1.0, np.linspace(0.3, 3.0, 10) / k, k))
    k30 = math.exp(-2.5 - 8.0 * (1000.0 / 303.15 - 3.0))
    runs.append(("early", 30.0, 1.0, np.linspace(1e-5, 1e-4, 5) / k30, k30))
    study, obs = _decay_study(tmp_path, "proportional", runs)
    # The posterior's straight line ln k = 21.5 - 8000 K / T, as ln k_ref - Ea/R (1/T - 1/T_ref).
    return per_temperature_fits(study, obs, _posterior(21.5 - 8000.0 / T_REF, 8000.0 * R, 0.05), T_REF)


def test_points_that_bend_are_reported_and_a_point_without_information_is_dropped(tmp_path):
    bent = _ladder(tmp_path, lambda i, x: 40.0 * x * x)  # 1.3 in ln k off the chord at the middle; sds near 0.01
    assert len(bent.table) == 5 and [c.step for c in bent.curvature] == ["decay"]
    assert bent.curvature[0].verdict == "bent" and bent.curvature[0].p < 1e-6
    text = " ".join(bent.sentences())
    assert "'decay' bend away from a straight Arrhenius line" in text
    assert bent.missing == (("decay", pytest.approx(303.15)),)
    assert "No point for step 'decay' at 303.15 K" in text and "do not determine it" in text

    straight = _ladder(tmp_path, lambda i, x: 0.0)
    assert straight.curvature[0].verdict == "straight" and straight.curvature[0].p > 0.5  # z is rounding
    assert "lie on a straight Arrhenius line within their error" in " ".join(straight.sentences())

    zigzag = _ladder(tmp_path, lambda i, x: 0.2 * (-1) ** i)  # off the line, but no bend explains it
    assert zigzag.curvature[0].verdict == "scattered"
    assert "a bend does not account for it" in " ".join(zigzag.sentences())


def test_bent_points_and_the_missing_one_are_drawn_with_the_footnote_clear_of_the_legend(tmp_path, captured):
    points = _ladder(tmp_path, lambda i, x: 40.0 * x * x)
    study = load_study(tmp_path / "study.yaml")
    posterior = _posterior(21.5 - 8000.0 / T_REF, 8000.0 * R, 0.05)
    kelvin = read_observations(study).temperature_K
    plots.arrhenius_plot(study, posterior, T_REF, kelvin, tmp_path / "arrhenius.png", points=points)
    (figure,) = captured
    _inside(figure)
    renderer = figure.canvas.get_renderer()
    (footnote,) = [t for t in figure.texts if "no point where those runs do not determine k" in t.get_text()]
    assert "decay at 30 °C" in footnote.get_text()
    (legend,) = figure.legends
    assert not footnote.get_window_extent(renderer).overlaps(legend.get_window_extent(renderer))
    below = figure.axes[1]
    assert below.get_ylabel() == "ln k minus the\nposterior median line"
    # Underneath, the points less the posterior's line ln k = -2.5 - 8 x: the bend itself, 40 x^2.
    (bars,) = [c for c in below.containers if isinstance(c, ErrorbarContainer)]
    x = 1000.0 / (np.array([40.0, 50.0, 60.0, 70.0, 80.0]) + 273.15) - 3.0
    np.testing.assert_allclose(np.sort(bars.lines[0].get_ydata()), np.sort(40.0 * x * x), atol=1e-4)


def test_curvature_tests_match_numpy_weighted_polyfit():
    # numpy.polyfit with w = 1/sd and cov="unscaled" gives (X^T W X)^-1 without rescaling by the residuals: the
    # known-error covariance; with full=True its residual is the sum of squared weighted residuals (numpy
    # documentation). Neither z nor the chi-square depends on an affine change of x: numpy works on 1/T directly.
    rng = np.random.default_rng(4)
    kelvin = np.array([300.0, 315.0, 330.0, 345.0, 360.0, 375.0])
    sd = rng.uniform(0.02, 0.1, kelvin.size)
    ln_k = 20.0 - 9000.0 / kelvin + rng.normal(0.0, sd)
    coefficients, covariance = np.polyfit(1.0 / kelvin, ln_k, 2, w=1.0 / sd, cov="unscaled")
    z, p = quadratic_term(kelvin, ln_k, sd)
    assert z == pytest.approx(coefficients[0] / math.sqrt(covariance[0, 0]), rel=1e-6)
    assert p == pytest.approx(2 * (1 - 0.5 * (1 + math.erf(abs(z) / math.sqrt(2)))), rel=1e-6)
    for degree in (1, 2):
        residual = np.polyfit(1.0 / kelvin, ln_k, degree, w=1.0 / sd, full=True)[1][0]
        chi2, p_chi2 = chi_square(kelvin, ln_k, sd, degree)
        assert chi2 == pytest.approx(residual, rel=1e-6)
        assert p_chi2 == pytest.approx(stats.chi2.sf(residual, kelvin.size - degree - 1), rel=1e-6)


# --- the figures, as objects ---------------------------------------------------------------------------------


@pytest.fixture
def captured(monkeypatch):
    """The figures the plot functions make (``plt.close`` recorded instead), closed after the test."""
    close = plt.close
    figures: list = []
    monkeypatch.setattr(plots.plt, "close", figures.append)
    yield figures
    for figure in figures:
        close(figure)


def _inside(figure) -> None:
    """Every axes (labels, ticks, titles, child axes), legend and figure text lies inside the saved image."""
    figure.canvas.draw()
    renderer = figure.canvas.get_renderer()
    frame = figure.bbox
    boxes = [(a.get_tightbbox(renderer), f"axes '{a.get_title()}'") for a in figure.axes if a.get_visible()]
    boxes += [(legend.get_window_extent(renderer), "legend") for legend in figure.legends]
    boxes += [(text.get_window_extent(renderer), text.get_text()) for text in figure.texts if text.get_text()]
    for box, what in boxes:
        assert box.x0 >= frame.x0 - 1 and box.x1 <= frame.x1 + 1, f"{what} is cut at the side"
        assert box.y0 >= frame.y0 - 1 and box.y1 <= frame.y1 + 1, f"{what} is cut at the top or bottom"


def _legend_texts(figure) -> list[str]:
    legends = list(figure.legends) + [a.get_legend() for a in figure.axes if a.get_legend() is not None]
    assert legends, "no legend"
    return [t.get_text() for legend in legends for t in legend.get_texts()]


def test_network_fit_writes_its_points_and_the_report_says_whether_they_bend(fitted):
    result = fitted[1]
    table = pd.read_csv(result.results_dir / POINTS_FILE)
    assert list(table.columns) == list(COLUMNS)
    assert sorted(set(table["step"])) == ["first", "second"] and len(table) == 6
    from test_predictions import TRUE

    for _, row in table.iterrows():  # the chain A -> B -> C simulated with 3 % noise: truth within 4 sd
        k_ref, ea = TRUE[row["step"]]
        truth = ln_rate_constant(row["temperature_K"], math.log(k_ref), ea, T_REF)
        assert abs(row["ln_k"] - truth) < 4 * row["sd"], row
    text = (result.results_dir / "report.html").read_text()
    assert "<h2>Rate constants at each temperature</h2>" in text and "Arrhenius line" in text


def test_network_figures_label_units_show_points_and_keep_every_text_inside(fitted, captured, tmp_path):
    folder, result = fitted
    problem = open_problem(load_study(folder / "study.yaml"))
    reference = result.reference_temperature_K
    points = problem.temperature_points(result.idata, reference)
    posterior = result.idata.posterior
    plots.arrhenius_plot(
        problem.study, posterior, reference, problem.temperatures_K, tmp_path / "arrhenius.png", points=points
    )
    plots.prior_posterior_plot(problem.study, posterior, tmp_path / "prior_posterior.png", temperature_ref=reference)
    checks = pd.read_csv(result.results_dir / "fit_checks.csv")
    plots.predictive_check_plot(checks, tmp_path / "predictive.png", "chain: data against 90 % intervals")
    arrhenius, prior_posterior, predictive = captured
    for figure in captured:
        _inside(figure)

    main = arrhenius.axes[0]
    labels = [a.get_xlabel() for a in arrhenius.axes] + [c.get_xlabel() for c in main.child_axes]
    assert "1 / T  (10⁻³ K⁻¹)" in labels and "T (°C)" in labels  # 1/T in 10^-3 K^-1, not "1000/T (1/K)"
    assert main.get_ylabel() == "ln(k / (1/min))"
    assert sum("fitted at each temperature" in t for t in _legend_texts(arrhenius)) == 2
    bars = [c for c in main.containers if isinstance(c, ErrorbarContainer)]
    assert len(bars) == 2 and all(c.has_yerr for c in bars)

    panels = [a for a in prior_posterior.axes if a.get_ylabel()]
    assert {a.get_ylabel() for a in panels} == {"probability density"}
    assert {a.get_xlabel() for a in panels} == {f"ln(k_ref / (1/min)) at T_ref = {reference:.1f} K", "Ea (kJ/mol)"}
    assert "prior" in _legend_texts(prior_posterior)

    assert {a.get_xlabel() for a in predictive.axes if a.get_visible()} == {"time (min)"}
    assert predictive.axes[0].get_ylabel() == "concentration (mol/L)"
    assert {"A", "B", "C"} <= set(_legend_texts(predictive))
    assert [a.get_title() for a in predictive.axes][:3] == [f"run r{i} ({c} °C)" for i, c in enumerate((45, 55, 65))]


def test_comparison_legend_stays_off_the_points_and_labels_are_whole(captured, tmp_path):
    table = pd.DataFrame(
        {
            "level": ["pointwise"] * 2 + ["leave_one_run_out"] * 2,
            "rank": [1, 2, 1, 2],
            "candidate": ["two steps", "one step"] * 2,
            "elpd": [120.3, 95.1, 110.0, 90.2],
            "se": [8.1, 9.2, 10.3, 11.0],
            "elpd_diff": [0.0, 25.2, 0.0, 19.8],
            "dse": [0.0, 6.1, 0.0, 7.3],
        }
    )
    plots.comparison_plot(table, tmp_path / "comparison.png")
    (figure,) = captured
    _inside(figure)
    renderer = figure.canvas.get_renderer()
    (legend,) = figure.legends
    for axes in figure.axes:
        assert not legend.get_window_extent(renderer).overlaps(axes.bbox)
    assert all("PSIS-LOO" in a.get_xlabel() for a in figure.axes)


def test_rate_constant_arrhenius_figure_draws_the_stated_errors(make_study, captured, tmp_path):
    table = "temperature,k,k_rel_sd\n30,1.2e-4,0.05\n40,3.9e-4,0.1\n50,1.1e-3,0.05\n60,3.0e-3,0.2\n70,7.9e-3,0.05\n"
    study = load_study(make_study(table=textwrap.dedent(table)))
    data = read_rate_constants(study)
    problem = open_problem(study)
    spread = np.linspace(-0.01, 0.01, 6).reshape(2, 3)
    posterior = xr.Dataset(
        {
            "ln_k_ref": (("chain", "draw", "reaction"), (-6.9 + spread)[..., None]),
            "Ea": (("chain", "draw", "reaction"), (85_000.0 * (1 + spread))[..., None]),
        },
        coords={"reaction": ["step"]},
    )
    plots.arrhenius_plot(study, posterior, 323.15, problem.temperatures_K, tmp_path / "k.png", data=data)
    (figure,) = captured
    _inside(figure)
    main = figure.axes[0]
    (bars,) = [c for c in main.containers if isinstance(c, ErrorbarContainer)]
    segments = bars.lines[2][0].get_segments()
    half_lengths = np.array([abs(s[1][1] - s[0][1]) / 2 for s in segments])
    np.testing.assert_allclose(half_lengths, 1.645 * data.ln_k_sd)  # 90 % of a normal on ln k
    assert main.get_ylabel() == "ln(k / (1/s))"
    assert any("stated error" in t for t in _legend_texts(figure))


FED = """\
study: fed
units: {time: min, temperature: degC, concentration: mol/L, energy: kJ/mol, volume: mL}
data: {runs: runs.csv, feeds: feeds.csv, measurements: measurements.csv}
species: [A, B, P]
reactions:
  - name: coupling
    equation: A + B -> P
    k_ref: {median: 0.1, factor: 20}
    Ea: {mean: 70, sd: 30}
reference_temperature: 330 K
"""


def test_per_temperature_ln_k_of_an_isothermal_dosed_run_matches_solve_ivp(tmp_path):
    # A + B -> P at 60 degC, B dosed at 5 mL/min (4 mol/L) for 30 min into 800 mL of A. Fed-batch balances written
    # here independently (from memory): dV/dt = F, dc_i/dt = nu_i k c_A c_B + F/V (c_feed,i - c_i), solved by
    # scipy's Radau (rtol 1e-10) in two pieces around the end of the feed.
    k, volume, rate, stop = 0.05, 800.0, 5.0, 30.0
    feed = np.array([0.0, 4.0, 0.0])

    def balances(t, y, flow):
        c, v = y[:3], y[3]
        r = k * c[0] * c[1]
        return [*(np.array([-r, -r, r]) + flow / v * (feed - c)), flow]

    times = np.array([5.0, 10.0, 20.0, 30.0, 45.0, 60.0, 90.0])
    settings = {"method": "Radau", "rtol": 1e-10, "atol": 1e-13, "dense_output": True}
    first = solve_ivp(balances, (0, stop), [1.0, 0, 0, volume], args=(rate,), **settings)
    later = solve_ivp(balances, (stop, 90.0), first.y[:, -1], args=(0.0,), **settings)
    c = np.vstack([first.sol(times[times <= stop])[:3].T, later.sol(times[times > stop])[:3].T])
    (tmp_path / "runs.csv").write_text(f"run,temperature,volume,A,B,P\nr1,60,{volume},1,0,0\n")
    (tmp_path / "feeds.csv").write_text(f"run,start,stop,rate,B\nr1,0,{stop},{rate},4\n")
    rows = [f"r1,{t:g},{a:.12g},{p:.12g}" for t, (a, _, p) in zip(times, c, strict=True)]
    (tmp_path / "measurements.csv").write_text("run,time,A,P\n" + "\n".join(rows) + "\n")
    (tmp_path / "study.yaml").write_text(FED)
    study = load_study(tmp_path / "study.yaml")
    obs = read_observations(study)
    points = per_temperature_fits(study, obs, _posterior(math.log(k) + 0.4, 60_000.0, 0.05), T_REF)
    assert points.table["ln_k"].iloc[0] == pytest.approx(math.log(k), abs=1e-4)


@pytest.mark.parametrize("count", [1, 2, 6])
def test_figures_are_each_drawn_once_while_the_block_runs(tmp_path, count):
    # With one job it is drawn here after the block; with more, forked processes draw them while the block runs:
    # either way every job is drawn exactly once (each writes its own file; nothing comes back).
    from inference.outputs.drawing import drawn_meanwhile

    jobs = [lambda i=i: (tmp_path / f"{i}.txt").open("a").write("drawn\n") for i in range(count)]
    with drawn_meanwhile(jobs):
        (tmp_path / "block.txt").write_text("ran\n")
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([*(f"{i}.txt" for i in range(count)), "block.txt"])
    assert all((tmp_path / f"{i}.txt").read_text() == "drawn\n" for i in range(count))


def test_a_forked_share_that_fails_is_drawn_here(tmp_path):
    # A forked process that dies on one figure (here: job 3 raises outside this process) leaves its share to
    # this process, so every figure is still written.
    import os

    from inference.outputs.drawing import drawn_meanwhile

    parent = os.getpid()

    def draw(index: int) -> None:
        if index == 3 and os.getpid() != parent:
            raise RuntimeError("a figure that fails in a forked process")
        (tmp_path / f"{index}.txt").write_text(f"drawn by {'parent' if os.getpid() == parent else 'child'}\n")

    with drawn_meanwhile([lambda i=i: draw(i) for i in range(6)]):
        pass
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(f"{i}.txt" for i in range(6))
    assert (tmp_path / "3.txt").read_text() == "drawn by parent\n"
