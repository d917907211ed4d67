"""Dosed (semi-batch) and temperature-programmed predictions: the physics against a closed form and scipy, the
accumulation of dosed reagent in the outputs against the profiles, ``arrhenia predict`` end to end, bad scenarios."""

from __future__ import annotations

import contextlib
import io
import itertools
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from scipy.integrate import solve_ivp
from test_reactors import FIRST, point_draws

from inference.cli import main
from inference.physics.conditions import Feed
from inference.physics.network import build_network, parse_equation
from inference.physics.reactors import dosed_batch_profiles, fed_amounts, programmed_batch_profiles
from inference.posterior.draws import ParameterDraws, parameter_draws, pick_draws
from inference.workflows.predict import _maximum

CHAIN = build_network(("A", "B", "C"), ("r1", "r2"), (parse_equation("A -> B"), parse_equation("B -> C")))


def spread_draws(network, k: list[float], ea: list[float], count: int = 4) -> ParameterDraws:
    """Draws whose rate constants differ (factors 0.7 ... 1.3), so that each draw must use its own."""
    draws = point_draws(network, k, ea, count)
    factors = np.linspace(0.7, 1.3, count)[:, None]
    return replace(draws, ln_k_ref=draws.ln_k_ref + np.log(factors))


def test_dosed_first_order_consumption_matches_the_closed_form():
    # A fed at a constant rate q (concentration c_F) into a vessel holding no A, consumed by A -> B (first order):
    # d n_A/dt = q c_F - k n_A, so n_A = (q c_F / k)(1 - exp(-k t)) while the feed runs and decays as
    # exp(-k (t - t_stop)) after it; V = V0 + q t (the standard semibatch mole balance: Fogler, Elements of
    # Chemical Reaction Engineering, semibatch reactors; from memory).
    draws = spread_draws(FIRST, [0.05], [70_000.0])
    q, c_feed, v0, stop, kelvin = 0.02, 2.0, 1.5, 50.0, 345.0
    times = np.linspace(0.0, 120.0, 25)
    feeds = [Feed(0.0, stop, q, np.array([c_feed, 0.0]))]
    c, volume = dosed_batch_profiles(FIRST, draws, kelvin, np.zeros(2), v0, feeds, times)
    np.testing.assert_allclose(volume, v0 + q * np.minimum(times, stop), rtol=1e-14)
    k = np.exp(draws.ln_k(kelvin)[:, 0])[:, None]
    dosing = q * c_feed / k * (1.0 - np.exp(-k * np.minimum(times, stop)))
    exact = np.where(times <= stop, dosing, dosing * np.exp(-k * np.maximum(times - stop, 0.0)))
    amount = c * volume[None, :, None]
    np.testing.assert_allclose(amount[:, :, 0], exact, rtol=2e-6, atol=1e-12)
    # Everything fed is A or B (stoichiometry), and fed_amounts is q c_F min(t, t_stop).
    fed = fed_amounts(feeds, times, 2)
    np.testing.assert_allclose(fed[:, 0], q * c_feed * np.minimum(times, stop), rtol=1e-14)
    np.testing.assert_allclose(amount.sum(axis=2), np.broadcast_to(fed[:, 0], amount.shape[:2]), rtol=1e-8)


def test_programmed_batch_matches_solve_ivp():
    # The compiled path under a ramp up, a hold and a ramp down against scipy's solve_ivp (DOP853, tight
    # tolerances) with k evaluated from the same Arrhenius law at T(t) at every right-hand-side call.
    draws = spread_draws(CHAIN, [0.05, 0.02], [70_000.0, 90_000.0], count=3)
    programme = np.array([[0.0, 320.0], [15.0, 365.0], [40.0, 365.0], [60.0, 335.0]])
    times = np.linspace(0.0, 80.0, 41)
    profiles = programmed_batch_profiles(CHAIN, draws, programme, np.array([1.0, 0.0, 0.0]), times)
    for d in range(draws.size):

        def rhs(t, c, d=d):
            k1, k2 = np.exp(draws.ln_k(np.interp(t, programme[:, 0], programme[:, 1]))[d])
            return [-k1 * c[0], k1 * c[0] - k2 * c[1], k2 * c[1]]

        reference = solve_ivp(
            rhs, (0.0, 80.0), [1.0, 0.0, 0.0], t_eval=times, method="DOP853", rtol=1e-12, atol=1e-15, max_step=0.25
        ).y.T
        # atol: 1e-7 of the initial concentration (the solver's own absolute tolerance is 1e-9 of it).
        np.testing.assert_allclose(profiles[d], reference, rtol=1e-6, atol=1e-7)


def test_dosed_batch_under_a_programme_matches_solve_ivp():
    # The semibatch balance dc/dt = S^T r(c, T(t)) + (F - Q c)/V with V = V0 + integral of Q (Fogler, semibatch
    # reactors; from memory), two overlapping feeds, integrated by scipy's solve_ivp piece by piece between the
    # times the inflow jumps.
    draws = spread_draws(CHAIN, [0.05, 0.02], [70_000.0, 90_000.0], count=2)
    programme = np.array([[0.0, 330.0], [30.0, 360.0]])
    feeds = [Feed(0.0, 40.0, 0.01, np.array([2.0, 0.0, 0.0])), Feed(20.0, 60.0, 0.005, np.array([1.0, 0.5, 0.0]))]
    initial, v0 = np.array([0.3, 0.0, 0.0]), 0.8
    times = np.linspace(0.0, 90.0, 31)
    c, volume = dosed_batch_profiles(CHAIN, draws, programme, initial, v0, feeds, times)
    edges = [0.0, 20.0, 40.0, 60.0, 90.0]
    for d in range(draws.size):

        def rhs(t, y, piece, d=d):
            k1, k2 = np.exp(draws.ln_k(np.interp(t, programme[:, 0], programme[:, 1]))[d])
            flows = [f for f in feeds if f.start <= piece < f.stop]
            q = sum(f.rate for f in flows)
            inflow = sum((f.rate * f.concentration for f in flows), np.zeros(3))
            v = v0 + sum(f.rate * np.clip(t - f.start, 0.0, f.stop - f.start) for f in feeds)
            return np.array([-k1 * y[0], k1 * y[0] - k2 * y[1], k2 * y[1]]) + (inflow - q * y) / v

        state, reference = initial, np.empty((times.size, 3))
        for start, stop in itertools.pairwise(edges):
            inside = (times >= start) & (times <= stop)
            piece = solve_ivp(
                rhs,
                (start, stop),
                state,
                t_eval=times[inside],
                args=(start,),
                method="DOP853",
                rtol=1e-12,
                atol=1e-15,
                dense_output=True,
            )
            reference[inside] = piece.y.T
            state = piece.sol(stop)
        np.testing.assert_allclose(c[d], reference, rtol=1e-6, atol=1e-8)
    v_expected = v0 + sum(f.rate * np.clip(times - f.start, 0.0, f.stop - f.start) for f in feeds)
    np.testing.assert_allclose(volume, v_expected, rtol=1e-14)


DOSED = """\
draws: 200
scenarios:
  - name: dosing-A
    reactor: dosed_batch
    initial: {A: 0.05}
    volume: 1.0
    feeds:
      - {start: 0, stop: 50, rate: 0.01, concentration: {A: 2.0}}
    temperature: 60
    until: 150
    points: 61
    key_reactant: A
    products: [C]
    spec: {conversion: 0.5, by: 100}
  - name: dosing-hot
    reactor: dosed_batch
    initial: {B: 0.0}
    volume: 0.5
    feeds:
      - {start: 5, stop: 45, rate: 0.02, concentration: {A: 1.0}}
    programme: [[0, 55], [30, 80]]
    until: 90
    key_reactant: A
    products: [B]
"""


@pytest.fixture(scope="module")
def dosed_predictions(fitted, tmp_path_factory):  # ``fitted``: the session fit of tests/conftest.py
    """``arrhenia predict`` of the DOSED scenarios on the fitted chain, once: (fit result, out folder, exit code,
    what it printed)."""
    _, result = fitted
    folder = tmp_path_factory.mktemp("dosed")
    (folder / "dosed.yaml").write_text(DOSED)
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        code = main(["predict", str(result.results_dir), str(folder / "dosed.yaml"), "--out", str(folder / "out")])
    return result, folder / "out", code, printed.getvalue()


def test_predict_reports_dosed_batches_with_their_cautions(dosed_predictions):
    _, out, code, stdout = dosed_predictions
    assert code == 0, stdout
    names = {p.name for p in out.iterdir()}
    assert {"dosing-A.csv", "dosing-A.png", "dosing-hot.csv", "dosing-hot.png", "summary.csv"} <= names
    assert {"cautions.txt", "report.html", "manifest.json"} <= names
    cautions = (out / "cautions.txt").read_text()
    assert "process-safety review" in cautions and "process-safety review" in stdout
    # 80 degC is 15 K above the hottest fitted run (65 degC): flagged as the other scenarios' temperatures are.
    assert "EXTRAPOLATED: scenario dosing-hot: programme temperature 80 degC is 15 K above" in cautions
    assert "dosing-A" not in cautions
    for name in ("dosing-A", "dosing-hot"):
        table = pd.read_csv(out / f"{name}.csv")
        assert {"volume", "dosed[A]", "accumulation[A]", "accumulation_share[A]", "conversion[A]"} <= set(
            table["quantity"]
        )
        assert set(table.loc[table["quantity"] == "accumulation[A]", "unit"]) == {"mol"}
        assert set(table.loc[table["quantity"] == "volume", "unit"]) == {"L"}
        share = table.loc[table["quantity"] == "accumulation_share[A]", ["q05", "median", "q95"]].to_numpy()
        assert np.isfinite(share).sum() > 0.9 * share.size
        finite = share[np.isfinite(share)]
        assert finite.min() >= 0.0 and finite.max() <= 1.0 + 1e-9
    summary = pd.read_csv(out / "summary.csv").set_index(["scenario", "quantity"])
    for quantity, unit in (
        ("maximum accumulation of A", "mol"),
        ("time of maximum accumulation of A", "min"),
        ("accumulation share of A at its maximum", "fraction"),
        ("conversion of A at 100 min", "fraction"),
    ):
        row = summary.loc[("dosing-A", quantity)]
        assert row["unit"] == unit, quantity
        assert row["q05"] <= row["median"] <= row["q95"], quantity


def test_accumulation_equals_c_times_v_of_the_profiles(dosed_predictions):
    # The bands in the outputs are those of c_A(t) V(t) from the physics on the same posterior draws, and the
    # maximum in the summary is that of c V on a fine grid (V deterministic, so quantiles of c V are V times those
    # of c: quantiles commute with a positive factor).
    result, out, code, _ = dosed_predictions
    assert code == 0
    table = pd.read_csv(out / "dosing-A.csv")
    rows = {q: part.set_index("time_min") for q, part in table.groupby("quantity")}
    columns = ["q05", "q25", "median", "q75", "q95"]
    volume = rows["volume"]["median"]
    # The CSV holds 8 significant digits: products of rounded values agree to a few parts in 1e8.
    np.testing.assert_allclose(rows["accumulation[A]"][columns], rows["c[A]"][columns].mul(volume, axis=0), rtol=5e-7)
    charged = 0.05 * 1.0 + rows["dosed[A]"]["median"]
    np.testing.assert_allclose(
        rows["accumulation_share[A]"][columns], rows["accumulation[A]"][columns].div(charged, axis=0), rtol=5e-7
    )

    posterior = result.idata.posterior
    draws = parameter_draws(result.study, posterior, 330.0, pick_draws(posterior, 200))
    feeds = [Feed(0.0, 50.0, 0.01, np.array([2.0, 0.0, 0.0]))]
    times = rows["c[A]"].index.to_numpy()
    c, v = dosed_batch_profiles(result.study.network, draws, 333.15, np.array([0.05, 0.0, 0.0]), 1.0, feeds, times)
    amount = c[:, :, 0] * v
    np.testing.assert_allclose(rows["accumulation[A]"]["median"], np.median(amount, axis=0), rtol=1e-6)
    np.testing.assert_allclose(rows["volume"]["median"], v, rtol=1e-14)

    fine = np.union1d(np.linspace(0.0, 150.0, 3001), [50.0])
    c_fine, v_fine = dosed_batch_profiles(
        result.study.network, draws, 333.15, np.array([0.05, 0.0, 0.0]), 1.0, feeds, fine
    )
    peaks = (c_fine[:, :, 0] * v_fine).max(axis=1)
    summary = pd.read_csv(out / "summary.csv").set_index(["scenario", "quantity"])
    row = summary.loc[("dosing-A", "maximum accumulation of A")]
    assert row["median"] == pytest.approx(np.median(peaks), rel=1e-5)
    assert row["q95"] == pytest.approx(np.quantile(peaks, 0.95), rel=1e-5)
    when = summary.loc[("dosing-A", "time of maximum accumulation of A")]
    assert when["median"] == pytest.approx(np.median(fine[(c_fine[:, :, 0] * v_fine).argmax(axis=1)]), abs=0.1)


def test_maximum_on_a_kink_is_taken_as_it_is():
    # A tent peaking at a feed's stop: a spline through the kink would overshoot; the grid point on the kink is
    # the maximum (exact for this piecewise-linear curve).
    times = np.linspace(0.0, 10.0, 11)
    values = np.minimum(times, 10.0 - times)[None, :] + np.array([[0.0], [0.5]])
    t_max, v_max = _maximum(times, values, kinks=np.array([5.0]))
    np.testing.assert_array_equal(t_max, [5.0, 5.0])
    np.testing.assert_array_equal(v_max, [5.0, 5.5])


BAD = {
    "unknown feed species": (
        DOSED.replace("concentration: {A: 2.0}", "concentration: {Z: 2.0}"),
        "scenarios[0].feeds[0].concentration",
    ),
    "unknown dosed species": (DOSED.replace("    products: [C]\n", "    products: [C]\n    dosed: [Q]\n"), "dosed"),
    "dosed species not fed": (DOSED.replace("    products: [C]\n", "    products: [C]\n    dosed: [B]\n"), "dosed"),
    "stop before start": (DOSED.replace("start: 0, stop: 50", "start: 50, stop: 50"), "scenarios[0].feeds[0].stop"),
    "negative rate": (DOSED.replace("rate: 0.01", "rate: -0.01"), "scenarios[0].feeds[0].rate"),
    "negative start": (DOSED.replace("start: 0, stop: 50", "start: -5, stop: 50"), "scenarios[0].feeds[0].start"),
    "zero volume": (DOSED.replace("volume: 1.0", "volume: 0.0"), "scenarios[0].volume"),
    "negative volume": (DOSED.replace("volume: 0.5", "volume: -0.5"), "scenarios[1].volume"),
    "no feeds": (
        DOSED.replace(
            "    feeds:\n      - {start: 0, stop: 50, rate: 0.01, concentration: {A: 2.0}}\n", "    feeds: []\n"
        ),
        "one or more 'feeds'",
    ),
    "temperature and programme": (
        DOSED.replace("    temperature: 60\n", "    temperature: 60\n    programme: [[0, 50], [10, 60]]\n"),
        "not both",
    ),
    "feeds on a batch": (
        DOSED.replace("reactor: dosed_batch\n    initial: {A: 0.05}", "reactor: batch\n    initial: {A: 0.05}"),
        "are for a dosed_batch",
    ),
}


@pytest.mark.parametrize(("text", "fragment"), list(BAD.values()), ids=list(BAD))
def test_bad_dosed_scenarios_give_exit_2(fitted, run_cli, tmp_path, text, fragment):
    _, result = fitted
    scenarios = tmp_path / "bad.yaml"
    scenarios.write_text(text)
    out = tmp_path / "bad-out"
    code, _, stderr = run_cli("predict", result.results_dir, scenarios, "--out", out)
    assert code == 2, stderr
    assert len(stderr.strip().splitlines()) == 1, stderr
    assert fragment in stderr, stderr
    assert str(scenarios) in stderr
    assert not out.exists()
