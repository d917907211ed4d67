"""Runs as they are carried out (issue #16): temperature histories, dosing (semi-batch) and continuous reactors
(CSTR steady state, PFR), each against a source outside the project named beside the check: closed forms,
textbook design equations and ``scipy.integrate.solve_ivp`` on right-hand sides written out here by hand; and
the Op's Jacobian for every new kind of run against central differences of its predictions."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp

from inference.inputs.data import Observations
from inference.physics import closed_form
from inference.physics.conditions import Feed, RunSetup, build_conditions, run_conditions
from inference.physics.dormand_prince import dopri_run
from inference.physics.kinetics import Sensitivities, run_kernel
from inference.physics.network import build_network, parse_equation
from inference.physics.parameters import BLOCKS, KineticInputs, SensitivityLayout
from inference.physics.radau import radau_run
from inference.physics.solution import NetworkSolver, SolverSettings, network_kernel
from inference.physics.stepping import DONE, Tolerances

R_GAS = 8.314462618  # J/(mol K), CODATA 2018 (exact since the 2019 SI)
#: Tolerances for comparisons with outside references: the solver's global error then stays below ~2e-9.
TIGHT = SolverSettings(rtol=1e-10, atol_share=1e-13)
#: For central differences: the solver's noise (steps chosen anew for each input) is then near 1e-11 of a
#: concentration, far below the differences of the steps in ``STEPS``.
FINE = SolverSettings(rtol=1e-12, atol_share=1e-15)
#: scipy's reference, tighter still.
REFERENCE = {"rtol": 1e-13, "atol": 1e-15}


def network(species, *equations, saturation=None):
    parsed = tuple(parse_equation(e) for e in equations)
    return build_network(tuple(species), tuple(f"r{j}" for j in range(len(parsed))), parsed, None, saturation)


def solver_inputs(
    net, ln_k, initial, ln_eq=None, ln_ads=None, activation=None, eq_enthalpy=None, ads=None, exponent=None
):
    """``KineticInputs`` in solver form (one row per run of ``initial``); blocks left None are zero."""
    n_rev, n_sites, n_r = int(np.sum(net.reversible)), len(net.adsorption_sites), len(net.reactions)
    runs = np.atleast_2d(initial).shape[0]

    def row(values, size):
        return np.zeros((runs, size)) if values is None else np.atleast_2d(np.asarray(values, dtype=float))

    return KineticInputs(
        row(ln_k, n_r),
        row(ln_eq, n_rev),
        row(ln_ads, n_sites),
        net.forward_orders,
        row(initial, len(net.species)),
        row(activation, n_r),
        row(eq_enthalpy, n_rev),
        row(ads, n_sites),
        row(exponent, n_r),
    )


def solve_setup(net, setup, times, inputs, layout=None, settings=TIGHT, sensitivities=False):
    solver = NetworkSolver(
        net,
        [np.asarray(times, dtype=float)],
        layout=layout,
        conditions=build_conditions([setup], len(net.species)),
        settings=settings,
    )
    return solver.solve(inputs, sensitivities=sensitivities)


def integrate_with(method, net, setup, times, inputs, layout=None, settings=TIGHT):
    """One run integrated by ``dopri_run`` or ``radau_run`` directly (no fallback between them): concentrations,
    and with a ``layout`` their sensitivities (times, N, P)."""
    n = len(net.species)
    kernel = run_kernel(network_kernel(net, inputs), 0)
    conditions = run_conditions(build_conditions([setup], n), 0)
    params = NetworkSolver(net, [times], layout=layout).sensitivities
    if layout is None:
        params = Sensitivities(*(column[:0] for column in params))
    tolerances = Tolerances(settings.rtol, settings.atol_share * float(np.max(inputs.initial)), 1_000_000)
    out_c, out_s = np.empty((times.size, n)), np.empty((times.size, n, params.kind.size))
    status = method(
        np.ascontiguousarray(inputs.initial[0]), times, kernel, conditions, params, tolerances, out_c, out_s,
        np.zeros(3, dtype=np.int64),
    )  # fmt: skip
    assert status == DONE
    return (out_c, out_s) if layout is not None else out_c


# ------------------------------------------------------------------------------------- temperature histories
def arrhenius(ln_a, ea, kelvin, n=0.0):
    """k = A T^n exp(-Ea / (R T)), the (extended) Arrhenius form written out (common practice, from memory)."""
    return np.exp(ln_a + n * np.log(kelvin) - ea / (R_GAS * kelvin))


def van_t_hoff(ln_k_ref, dh, kelvin, t_ref):
    """ln K(T) = ln K(T_ref) - (dH/R)(1/T - 1/T_ref): van 't Hoff at constant dH (Atkins, Physical Chemistry,
    ch. "chemical equilibrium"; from memory)."""
    return ln_k_ref - dh / R_GAS * (1.0 / kelvin - 1.0 / t_ref)


HEAT_UP = np.array([[0.0, 300.0], [50.0, 340.0]])  # K: a linear ramp over half the run, then held


@pytest.mark.parametrize("method", [None, dopri_run, radau_run], ids=["solver", "dopri", "radau"])
def test_first_order_step_under_a_ramp_matches_scipy_and_the_exact_integral(method):
    # A -> B with k = A T^n exp(-Ea/RT) while T rises linearly: c_A = c_A0 exp(-integral of k dt), exact for a
    # first-order step whatever k(t) is (the linear ODE's solution, from memory); the integral by scipy's quad.
    # Also scipy's DOP853 on the right-hand side written out here.
    net = network("AB", "A -> B")
    setup = RunSetup(HEAT_UP, horizon=100.0)
    ea, n = 60_000.0, 0.7
    ln_a = math.log(0.004) - n * math.log(300.0) + ea / (R_GAS * 300.0)  # k(300 K) = 0.004

    def k_at(t):
        return arrhenius(ln_a, ea, np.interp(t, HEAT_UP[:, 0], HEAT_UP[:, 1]), n)

    times = np.linspace(0.0, 100.0, 21)
    t_n = setup.nominal
    inputs = solver_inputs(
        net, [math.log(arrhenius(ln_a, ea, t_n, n))], [1.0, 0.0], activation=[ea / R_GAS], exponent=[n]
    )
    layout = SensitivityLayout(net, temperature_varies=True, fitted_exponents=(0,))
    if method is None:
        c = solve_setup(net, setup, times, inputs, layout).concentrations[0]
    else:
        c = integrate_with(method, net, setup, times, inputs)
    reference = solve_ivp(
        lambda t, y: [-k_at(t) * y[0], k_at(t) * y[0]], (0.0, 100.0), [1.0, 0.0], t_eval=times, method="DOP853",
        **REFERENCE,
    )  # fmt: skip
    np.testing.assert_allclose(c, reference.y.T, rtol=1e-8, atol=1e-12)
    integral = np.array([quad(k_at, 0.0, t, points=[50.0], epsabs=1e-15, epsrel=1e-13)[0] for t in times])
    np.testing.assert_allclose(c[:, 0], np.exp(-integral), rtol=1e-8)
    assert c[-1, 0] < 0.05  # the ramp matters: the run goes to high conversion


def test_reversible_step_follows_van_t_hoff_under_a_cooling_programme():
    # A <=> B, r = k(T) (c_A - c_B / K_c(T)), k Arrhenius and K_c van 't Hoff (exothermic, dH < 0), T cooled
    # along a three-point programme then held: scipy's Radau on the rate law written out here; at the end the
    # run sits at equilibrium, c_B / c_A = K_c(T_end) (van 't Hoff, from memory).
    net = network("AB", "A <=> B")
    programme = np.array([[0.0, 360.0], [20.0, 330.0], [40.0, 315.0]])
    setup = RunSetup(programme, horizon=60.0)  # T_n: the mean over the first 60 time units
    t_ref, ln_k_eq_ref, dh, ea = 330.0, math.log(2.0), -40_000.0, 70_000.0
    ln_a = math.log(0.08) + ea / (R_GAS * t_ref)  # k(330 K) = 0.08

    def rhs(t, y):
        kelvin = np.interp(t, programme[:, 0], programme[:, 1])
        rate = arrhenius(ln_a, ea, kelvin) * (y[0] - y[1] / math.exp(van_t_hoff(ln_k_eq_ref, dh, kelvin, t_ref)))
        return [-rate, rate]

    times = np.array([0.0, 5.0, 10.0, 20.0, 30.0, 40.0, 60.0, 100.0, 800.0])
    t_n = setup.nominal
    assert t_n == pytest.approx((20 * 345.0 + 20 * 322.5 + 20 * 315.0) / 60, rel=1e-14)  # mean T over 60, by hand
    inputs = solver_inputs(
        net,
        [math.log(arrhenius(ln_a, ea, t_n))],
        [1.0, 0.2],
        ln_eq=[van_t_hoff(ln_k_eq_ref, dh, t_n, t_ref)],
        activation=[ea / R_GAS],
        eq_enthalpy=[dh / R_GAS],
    )
    layout = SensitivityLayout(net, temperature_varies=True)
    c = solve_setup(net, setup, times, inputs, layout).concentrations[0]
    reference = solve_ivp(rhs, (0.0, 800.0), [1.0, 0.2], t_eval=times, method="Radau", **REFERENCE)
    np.testing.assert_allclose(c, reference.y.T, rtol=1e-8)
    k_end = math.exp(van_t_hoff(ln_k_eq_ref, dh, 315.0, t_ref))
    np.testing.assert_allclose(c[-1, 1] / c[-1, 0], k_end, rtol=1e-7)
    assert abs(k_end - math.exp(van_t_hoff(ln_k_eq_ref, dh, t_n, t_ref))) > 0.5  # K_c moved with T


def test_saturating_law_with_adsorption_enthalpies_under_a_ramp():
    # Hougen-Watson form r = k c_A c_B / (1 + K_A c_A + K_C c_C)^2 with K_A(T), K_C(T) by van 't Hoff (dH_ads)
    # and k Arrhenius, T ramped: scipy's Radau on the rate law written out here (same form as test_rate_laws).
    net = network("ABC", "A + B -> C", saturation=((2.0, ("A", "C")),))
    ramp = np.array([[0.0, 310.0], [15.0, 350.0]])
    setup = RunSetup(ramp, horizon=30.0)
    t_ref, ea = 330.0, 50_000.0
    ln_a = math.log(1.5) + ea / (R_GAS * t_ref)
    ads_ref, dh_ads = np.log([0.8, 4.0]), np.array([-30_000.0, -20_000.0])

    def rhs(t, y):
        kelvin = np.interp(t, ramp[:, 0], ramp[:, 1])
        k_a, k_c = np.exp(van_t_hoff(ads_ref, dh_ads, kelvin, t_ref))
        rate = arrhenius(ln_a, ea, kelvin) * y[0] * y[1] / (1.0 + k_a * y[0] + k_c * y[2]) ** 2
        return [-rate, -rate, rate]

    times = np.array([0.5, 2.0, 5.0, 10.0, 15.0, 22.0, 30.0])
    t_n = setup.nominal
    inputs = solver_inputs(
        net,
        [math.log(arrhenius(ln_a, ea, t_n))],
        [1.0, 0.7, 0.0],
        ln_ads=van_t_hoff(ads_ref, dh_ads, t_n, t_ref),
        activation=[ea / R_GAS],
        ads=dh_ads / R_GAS,
    )
    layout = SensitivityLayout(net, temperature_varies=True)
    c = solve_setup(net, setup, times, inputs, layout).concentrations[0]
    reference = solve_ivp(rhs, (0.0, 30.0), [1.0, 0.7, 0.0], t_eval=times, method="Radau", **REFERENCE)
    np.testing.assert_allclose(c, reference.y.T, rtol=1e-8)
    assert reference.y[2, -1] > 0.3  # the ramp and the saturation both shape the profile


# ------------------------------------------------------------------------------------------------ semi-batch
def semibatch_first_order(k, c_feed, volume0, amount0, pieces, times):
    """Amounts (n_A, n_B) of A -> B in a vessel fed A at constant volumetric rates: on a piece starting at t0
    with rate q, dn_A/dt = q c_F - k n_A gives n_A = q c_F / k + (n_A(t0) - q c_F / k) exp(-k (t - t0)), and
    n_A + n_B grows by q c_F (t - t0); V = V0 + sum of q dt. The semi-batch mole balance with a constant feed
    (Fogler, Elements of Chemical Reaction Engineering, semibatch reactors chapter; from memory), solved by hand.
    ``pieces``: (start, rate) of consecutive constant-rate pieces, the first starting at 0."""
    starts = np.array([p[0] for p in pieces] + [np.inf])
    n_a, total, volume = np.empty(times.size), np.empty(times.size), np.empty(times.size)
    a0, tot0, v0 = amount0, amount0, volume0
    for (t0, q), t1 in zip(pieces, starts[1:], strict=True):
        inside = (times >= t0) & (times <= t1)
        steady = q * c_feed / k
        dt = times[inside] - t0
        n_a[inside] = steady + (a0 - steady) * np.exp(-k * dt)
        total[inside] = tot0 + q * c_feed * dt
        volume[inside] = v0 + q * dt
        if np.isfinite(t1):
            a0 = steady + (a0 - steady) * math.exp(-k * (t1 - t0))
            tot0, v0 = tot0 + q * c_feed * (t1 - t0), v0 + q * (t1 - t0)
    return n_a, total - n_a, volume


def test_constant_feed_into_first_order_consumption_matches_the_closed_form():
    # n_A(0) = 0, feed of A from t = 0: n_A = (q c_F / k)(1 - exp(-k t)), c_A = n_A / (V0 + q t) (closed form
    # above, from Fogler's semibatch balance, from memory); also scipy's DOP853 on the amounts.
    net = network("AB", "A -> B")
    k, q, c_feed, volume0 = 0.05, 0.1, 2.0, 1.0
    setup = RunSetup.isothermal(300.0, volume=volume0, feeds=(Feed(0.0, math.inf, q, np.array([c_feed, 0.0])),))
    times = np.linspace(0.0, 100.0, 21)
    c = solve_setup(net, setup, times, solver_inputs(net, [math.log(k)], [0.0, 0.0])).concentrations[0]
    n_a, n_b, volume = semibatch_first_order(k, c_feed, volume0, 0.0, [(0.0, q)], times)
    np.testing.assert_allclose(n_a, q * c_feed / k * -np.expm1(-k * times), rtol=1e-14)  # the general helper
    np.testing.assert_allclose(c[:, 0], n_a / volume, rtol=1e-8, atol=1e-13)
    np.testing.assert_allclose(c[:, 1], n_b / volume, rtol=1e-8, atol=1e-13)
    reference = solve_ivp(
        lambda t, y: [q * c_feed - k * y[0], k * y[0]], (0.0, 100.0), [0.0, 0.0], t_eval=times, method="DOP853",
        **REFERENCE,
    )  # fmt: skip
    np.testing.assert_allclose(c, reference.y.T / (volume0 + q * times)[:, None], rtol=1e-8, atol=1e-13)


FEED_PROGRAMMES = {
    # A feed that starts and stops between sampling times and on them (the steps must end where the inflow jumps).
    "start-stop": ((Feed(10.0, 40.0, 0.1, np.array([2.0, 0.0])),), [(0.0, 0.0), (10.0, 0.1), (40.0, 0.0)]),
    # A programme of two rates, the second starting where the first stops, then no feed.
    "two-rates": (
        (Feed(0.0, 23.3, 0.15, np.array([2.0, 0.0])), Feed(23.3, 61.7, 0.04, np.array([2.0, 0.0]))),
        [(0.0, 0.15), (23.3, 0.04), (61.7, 0.0)],
    ),
}


@pytest.mark.parametrize("programme", sorted(FEED_PROGRAMMES))
@pytest.mark.parametrize("method", [None, dopri_run, radau_run], ids=["solver", "dopri", "radau"])
def test_feed_programmes_match_the_piecewise_closed_form(programme, method):
    # A in the vessel at t = 0, then the programme's feed of A; each constant-rate piece by the closed form of
    # ``semibatch_first_order`` (Fogler's semibatch balance, from memory), chained at the breaks.
    net = network("AB", "A -> B")
    k, c_feed, volume0, c0 = 0.05, 2.0, 1.0, 0.5
    feeds, pieces = FEED_PROGRAMMES[programme]
    setup = RunSetup.isothermal(300.0, volume=volume0, feeds=feeds)
    breaks = [p[0] for p in pieces[1:]]
    times = np.unique(np.concatenate([np.linspace(0.0, 100.0, 11), breaks, np.add(breaks, 1e-3), [37.1]]))
    inputs = solver_inputs(net, [math.log(k)], [c0, 0.0])
    if method is None:
        c = solve_setup(net, setup, times, inputs).concentrations[0]
    else:
        c = integrate_with(method, net, setup, times, inputs)
    n_a, n_b, volume = semibatch_first_order(k, c_feed, volume0, c0 * volume0, pieces, times)
    np.testing.assert_allclose(c[:, 0], n_a / volume, rtol=1e-8)
    np.testing.assert_allclose(c[:, 1], n_b / volume, rtol=1e-8, atol=1e-13)
    np.testing.assert_allclose(volume[-1], volume0 + sum(f.rate * (f.stop - f.start) for f in feeds), rtol=1e-14)


def test_two_overlapping_feeds_match_scipy_on_amounts():
    # A + B -> C, r = k c_A c_B, with B fed over [0, 30] and A over [10, 50] (two feeds at once in [10, 30]):
    # scipy's DOP853 on the mole balances dn_i/dt = q_i c_F,i + nu_i k n_A n_B / V, dV/dt = sum q (Fogler's
    # semibatch balance, from memory), integrated piece by piece between the jumps of the inflow.
    net = network("ABC", "A + B -> C")
    k, volume0 = 0.3, 2.0
    feed_b, feed_a = Feed(0.0, 30.0, 0.05, np.array([0.0, 3.0, 0.0])), Feed(10.0, 50.0, 0.02, np.array([4.0, 0, 0]))
    setup = RunSetup.isothermal(320.0, volume=volume0, feeds=(feed_b, feed_a))
    times = np.array([0.0, 5.0, 10.0, 12.0, 30.0, 31.0, 45.0, 50.0, 80.0])
    c = solve_setup(net, setup, times, solver_inputs(net, [math.log(k)], [0.3, 0.0, 0.0])).concentrations[0]

    def rhs(t, y, active):
        n, volume = y[:3], y[3]
        rate = k * n[0] * n[1] / volume  # k c_A c_B V
        inflow = sum(f.rate * f.concentration for f in active)
        return [*(inflow + np.array([-1.0, -1.0, 1.0]) * rate), sum(f.rate for f in active)]

    state = np.array([0.3 * volume0, 0.0, 0.0, volume0])
    reference = np.empty((times.size, 4))
    for t0, t1 in [(0.0, 10.0), (10.0, 30.0), (30.0, 50.0), (50.0, 80.0)]:
        active = [f for f in (feed_b, feed_a) if f.start <= t0 < f.stop]
        grid = np.unique(np.concatenate([[t0, t1], times[(times >= t0) & (times <= t1)]]))
        piece = solve_ivp(rhs, (t0, t1), state, t_eval=grid, args=(active,), method="DOP853", **REFERENCE)
        reference[np.searchsorted(times, grid[np.isin(grid, times)])] = piece.y.T[np.isin(grid, times)]
        state = piece.y[:, -1]
    np.testing.assert_allclose(c, reference[:, :3] / reference[:, 3:], rtol=1e-8, atol=1e-13)


def central_differences(run, base, step=1e-3):
    """d run(x) / d x (..., P) by central differences of ``run`` (concentrations) around ``base`` (P,)."""
    return np.stack([(run(base + step * e) - run(base - step * e)) / (2 * step) for e in np.eye(base.size)], axis=-1)


@pytest.mark.parametrize("case", ["dosed-half-order", "half-coefficient-product"])
def test_orders_below_one_at_zero_concentration(case):
    # d(c^a)/dc is infinite at c = 0 for a < 1: a dosed species with a fitted order below one starts at zero,
    # and so does the product of a reversible step with a half coefficient. Profiles against scipy's Radau on
    # the rate laws written out here; sensitivities (finite) against central differences.
    if case == "dosed-half-order":
        net = network("ABC", "A + B -> C")
        layout = SensitivityLayout(net, free_orders=((0, 1),))
        setup = RunSetup.isothermal(300.0, volume=1.0, feeds=(Feed(0.0, 30.0, 0.01, np.array([0.0, 5.0, 0.0])),))
        base = np.array([math.log(0.3), 0.5])  # ln k, order in B

        def inputs(x):
            orders = net.forward_orders.copy()
            orders[0, 1] = x[1]
            return solver_inputs(net, [x[0]], [1.0, 0.0, 0.0])._replace(orders=orders)

        def rhs(t, y):
            flow = 0.01 if t < 30.0 else 0.0
            rate = 0.3 * y[0] * max(y[1], 0.0) ** 0.5
            return [
                -rate - flow * y[0] / (1 + flow * t),
                -rate + flow * (5.0 - y[1]) / (1 + flow * t),
                rate - flow * y[2] / (1 + flow * t),
            ]

        times, initial, breaks = np.array([1.0, 10.0, 30.0, 45.0, 60.0]), [1.0, 0.0, 0.0], [30.0]
    else:
        net = network("ABC", "A <=> B + 0.5 C")
        layout = SensitivityLayout(net)
        setup = RunSetup.isothermal(300.0)
        base = np.log([0.3, 2.0])  # ln k, ln K_c

        def inputs(x):
            return solver_inputs(net, [x[0]], [1.0, 0.0, 0.0], ln_eq=[x[1]])

        def rhs(t, y):
            rate = 0.3 * (y[0] - y[1] * max(y[2], 0.0) ** 0.5 / 2.0)
            return [-rate, rate, 0.5 * rate]

        times, initial, breaks = np.array([0.5, 2.0, 5.0, 10.0]), [1.0, 0.0, 0.0], []
    solver = NetworkSolver(net, [times], layout=layout, conditions=build_conditions([setup], 3), settings=FINE)
    result = solver.solve(inputs(base))
    reference = np.empty((times.size, 3))
    state = np.array(initial)
    for t0, t1 in zip([0.0, *breaks], [*breaks, times[-1]], strict=True):
        inside = (times > t0) & (times <= t1)
        piece = solve_ivp(rhs, (t0, t1), state, t_eval=np.unique([*times[inside], t1]), method="Radau", **REFERENCE)
        reference[inside] = piece.y.T[np.isin(piece.t, times[inside])]
        state = piece.y[:, -1]
    np.testing.assert_allclose(result.concentrations[0], reference, rtol=1e-8, atol=1e-12)
    numeric = central_differences(lambda x: solver.solve(inputs(x), sensitivities=False).concentrations[0], base)
    assert np.all(np.isfinite(result.sensitivities[0]))
    np.testing.assert_allclose(result.sensitivities[0], numeric, rtol=1e-5, atol=1e-8)


@pytest.mark.parametrize("method", [dopri_run, radau_run], ids=["dopri", "radau"])
def test_each_integrators_sensitivities_under_a_programme_and_a_feed(method):
    # Both integrators on their own (the solver picks one per run), with every kind of parameter at once: ln k,
    # ln K_c, ln K_ads, a fitted order, an initial concentration, Ea/R, dH/R, dH_ads/R and a fitted exponent,
    # while T follows a three-point programme and B is fed over [5, 25]: sensitivities against central
    # differences of the same integrator.
    net = network("ABC", "A <=> B", "B -> C", saturation=((0.0, ()), (1.0, ("B",))))
    layout = SensitivityLayout(
        net, free_orders=((1, 1),), free_initial=(0,), temperature_varies=True, fitted_exponents=(1,)
    )
    feed = Feed(5.0, 25.0, 0.02, np.array([0.0, 2.0, 0.0]))
    setup = RunSetup(np.array([[0.0, 293.0], [20.0, 333.0], [40.0, 323.0]]), horizon=60.0, feeds=(feed,))
    times = np.array([5.0, 15.0, 25.0, 45.0, 60.0])
    # ln k (2), ln K_c, ln K_ads, order of B in step 1, c_A0, Ea/R (2), dH/R, dH_ads/R, exponent of step 1
    base = np.array([*np.log([0.08, 0.05, 3.0, 1.5]), 1.1, 1.0, 7000.0, 9000.0, -4000.0, -3000.0, 0.8])
    steps = np.array([1e-3] * 6 + [5.0] * 4 + [2e-2])  # as ``STEPS`` below

    def inputs(x):
        orders = net.forward_orders.copy()
        orders[1, 1] = x[4]
        return solver_inputs(
            net, x[0:2], [x[5], 0.1, 0.0], x[2:3], x[3:4], x[6:8], x[8:9], x[9:10], [0.5, x[10]]
        )._replace(orders=orders)

    _, exact = integrate_with(method, net, setup, times, inputs(base), layout, FINE)
    numeric = np.stack(
        [
            (integrate_with(method, net, setup, times, inputs(base + h * e), settings=FINE)
             - integrate_with(method, net, setup, times, inputs(base - h * e), settings=FINE)) / (2 * h)
            for h, e in zip(steps, np.eye(base.size), strict=True)
        ],
        axis=-1,
    )  # fmt: skip
    scale = np.max(np.abs(numeric), axis=(0, 1))
    assert np.all(scale > 1e-6)  # every parameter moves the profile (the slopes by ~1e-5 per K)
    assert np.all(np.abs(exact - numeric) <= 1e-5 * scale), np.max(np.abs(exact - numeric) / scale, axis=(0, 1))


# ------------------------------------------------------------------------------------------- continuous flow
def cstr_setup(tau, feed, kelvin=300.0):
    """A CSTR row as the steady-state data give it: volume 1, feed rate 1/tau, outflow equal to inflow."""
    return RunSetup.isothermal(
        kelvin, volume=1.0, feeds=(Feed(0.0, math.inf, 1.0 / tau, np.asarray(feed)),), overflow=True
    )


def cstr(net, tau, feed, ln_k, free_initial=()):
    layout = SensitivityLayout(net, free_initial=free_initial)
    result = solve_setup(
        net, cstr_setup(tau, feed), [tau], solver_inputs(net, ln_k, feed), layout, SolverSettings(), True
    )
    return result.concentrations[0][0], result.sensitivities[0][0]


@pytest.mark.parametrize("k_tau", [0.1, 1.0, 7.0])
def test_first_order_cstr_and_its_sensitivities_follow_levenspiel(k_tau):
    # Mixed flow, first order: k tau = (c_A0 - c_A) / c_A, so c_A = c_A0 / (1 + k tau) (Levenspiel, Chemical
    # Reaction Engineering, 3rd ed., 1999, ch. 5; from memory); its derivatives d c_A / d ln k =
    # -c_A0 k tau / (1 + k tau)^2 and d c_A / d c_A0 = 1 / (1 + k tau), by hand.
    net = network("AB", "A -> B")
    k, c0 = 0.2, 1.5
    tau = k_tau / k
    c, s = cstr(net, tau, [c0, 0.0], [math.log(k)], free_initial=(0,))
    np.testing.assert_allclose(c, [c0 / (1 + k_tau), c0 * k_tau / (1 + k_tau)], rtol=1e-12)
    np.testing.assert_allclose(s[:, 0], [-c0 * k_tau / (1 + k_tau) ** 2, c0 * k_tau / (1 + k_tau) ** 2], rtol=1e-10)
    np.testing.assert_allclose(s[:, 1], [1 / (1 + k_tau), k_tau / (1 + k_tau)], rtol=1e-10)


@pytest.mark.parametrize("k_tau_c0", [0.2, 1.0, 25.0])
def test_second_order_cstr_solves_levenspiels_quadratic(k_tau_c0):
    # Mixed flow, 2 A -> products with -r_A = k_L c_A^2: k_L tau c_A^2 + c_A - c_A0 = 0 (Levenspiel, ch. 5; from
    # memory), solved exactly. Here r = k c_A^2 and d c_A/dt = -2 r, so k_L = 2 k. Implicit derivatives by hand:
    # d c_A / d k_L = -tau c_A^2 / (1 + 2 k_L tau c_A), d c_A / d c_A0 = 1 / (1 + 2 k_L tau c_A).
    net = network("AB", "2 A -> B")
    k, c0 = 0.4, 2.0
    k_l = 2 * k
    tau = k_tau_c0 / (k_l * c0)
    exact = (math.sqrt(1.0 + 4.0 * k_l * tau * c0) - 1.0) / (2.0 * k_l * tau)
    np.testing.assert_allclose(k_l * tau * exact**2 + exact - c0, 0.0, atol=1e-14 * c0)
    c, s = cstr(net, tau, [c0, 0.0], [math.log(k)], free_initial=(0,))
    np.testing.assert_allclose(c, [exact, (c0 - exact) / 2], rtol=1e-12)
    slope = 1.0 + 2.0 * k_l * tau * exact
    np.testing.assert_allclose(s[0], [-k_l * tau * exact**2 / slope, 1.0 / slope], rtol=1e-10)


def test_series_reactions_in_a_cstr():
    # A -> B -> C in mixed flow: c_A = c_A0 / (1 + k1 tau), c_B = c_A0 k1 tau / ((1 + k1 tau)(1 + k2 tau))
    # (Levenspiel, ch. 8, irreversible first-order reactions in series in mixed flow; from memory), the
    # ch. 5 balance written for each species; derivatives by hand: d c_B / d ln k1 = c_B / (1 + k1 tau),
    # d c_B / d ln k2 = -c_B k2 tau / (1 + k2 tau).
    net = network("ABC", "A -> B", "B -> C")
    k1, k2, tau, c0 = 0.3, 0.12, 4.0, 1.0
    c, s = cstr(net, tau, [c0, 0.0, 0.0], np.log([k1, k2]))
    a = c0 / (1 + k1 * tau)
    b = c0 * k1 * tau / ((1 + k1 * tau) * (1 + k2 * tau))
    np.testing.assert_allclose(c, [a, b, c0 - a - b], rtol=1e-12)
    np.testing.assert_allclose(s[1], [b / (1 + k1 * tau), -b * k2 * tau / (1 + k2 * tau)], rtol=1e-10)
    np.testing.assert_allclose(s[0], [-a * k1 * tau / (1 + k1 * tau), 0.0], rtol=1e-10, atol=1e-15)


@pytest.mark.parametrize(
    ("equation", "kind", "feed"), [("A -> B", "first", [1.2, 0.0]), ("A + B -> C", "second_pair", [1.0, 1.4, 0.0])]
)
def test_pfr_outlet_is_the_batch_profile_at_equal_time(equation, kind, feed):
    # An isothermal PFR at constant density follows the batch equations with space time tau in place of time
    # (Levenspiel, ch. 5; from memory): each outlet row (one run, one time tau) equals one batch run sampled at
    # every tau, and the closed forms of ``closed_form`` (checked against Levenspiel ch. 3 in test_solution);
    # first order also by the PFR design equation k tau = ln(c_A0 / c_A) (Levenspiel, ch. 5; from memory).
    species = "AB" if kind == "first" else "ABC"
    net = network(species, equation)
    k, taus = 0.35, np.array([0.5, 2.0, 6.0])
    feed = np.array(feed)
    setups = [RunSetup.isothermal(330.0)] * taus.size
    rows = NetworkSolver(
        net, [np.array([tau]) for tau in taus], conditions=build_conditions(setups, feed.size), settings=TIGHT
    )
    inputs = solver_inputs(net, np.full((taus.size, 1), math.log(k)), np.tile(feed, (taus.size, 1)))
    outlets = np.vstack(rows.solve(inputs, sensitivities=False).concentrations)
    batch = solve_setup(net, RunSetup.isothermal(330.0), taus, solver_inputs(net, [math.log(k)], feed))
    np.testing.assert_allclose(outlets, batch.concentrations[0], rtol=1e-8)
    exact = closed_form.concentrations(kind, net, feed, k, taus)
    np.testing.assert_allclose(outlets, exact, rtol=1e-8, atol=1e-13)
    if kind == "first":
        np.testing.assert_allclose(np.log(feed[0] / outlets[:, 0]), k * taus, rtol=1e-8)


# ----------------------------------------------------------------------------- the Op's Jacobian, every kind
def observations(setups, times, initial, measured, factor=None):
    """Hand-made ``Observations``: ``measured`` is (run, time index, species) per measurement."""
    run_index, time_index, species_index = (np.array(column, dtype=np.int64) for column in zip(*measured, strict=True))
    return Observations(
        run_ids=tuple(f"r{r}" for r in range(len(setups))),
        temperature_K=np.array([s.nominal for s in setups]),
        initial=np.asarray(initial, dtype=float),
        times=tuple(np.asarray(t, dtype=float) for t in times),
        run_index=run_index,
        time_index=time_index,
        species_index=species_index,
        value=np.zeros(run_index.size),
        line=np.arange(run_index.size) + 2,
        runs_path=Path("runs.csv"),
        measurements_path=Path("measurements.csv"),
        setups=tuple(setups),
        factor=factor,
    )


#: Central-difference steps per block, each moving ln k, ln K or c by about 1e-3 (truncation error near 1e-7):
#: logarithms and orders; concentrations; the slopes Ea/R, dH/R, dH_ads/R (K; the ramps below have
#: |1/T - 1/T_n| up to 3e-4 1/K); exponents (|ln(T/T_n)| < 0.1).
STEPS = {"ln_k": 1e-3, "ln_eq": 1e-3, "ln_ads": 1e-3, "orders": 1e-3, "initial": 1e-3}
STEPS |= {"activation": 5.0, "eq_enthalpy": 5.0, "ads_enthalpy": 5.0, "exponent": 2e-2}


def op_jacobian_check(net, layout, obs, free, fixed_exponents=None):
    """The Op's Jacobian output against central differences of its prediction output (compiled with
    ``pytensor.function``), and the gradient PyTensor builds from it (what NUTS uses) against the same numbers.
    Returns the prediction and the Jacobian."""
    import pytensor
    import pytensor.tensor as pt

    from inference.model.ops import NetworkPrediction

    solver = NetworkSolver(net, list(obs.times), layout=layout, conditions=obs.conditions, settings=FINE)
    op = NetworkPrediction(solver, obs, net.forward_orders, fixed_exponents=fixed_exponents)
    values = [
        np.zeros(shape) if v is None else np.asarray(v, float).reshape(shape)
        for v, shape in zip(free, op.shapes, strict=True)
    ]
    variables = [
        pt.tensor(dtype="float64", shape=(None,) * v.ndim, name=b.name) for v, b in zip(values, BLOCKS, strict=True)
    ]
    prediction, jacobian = op(*variables)
    weights = np.linspace(0.5, 1.5, obs.value.size)
    gradient = pytensor.grad(pt.sum(weights * prediction), variables, disconnected_inputs="ignore")
    function = pytensor.function(variables, [prediction, jacobian, *gradient], mode="FAST_COMPILE")
    base, exact, *grads = function(*values)
    numeric = []
    for block, value in zip(BLOCKS, values, strict=True):
        for index in np.ndindex(value.shape):
            shifted = []
            for sign in (1.0, -1.0):
                moved = [v.copy() for v in values]
                moved[BLOCKS.index(block)][index] += sign * STEPS[block.name]
                shifted.append(function(*moved)[0])
            numeric.append((shifted[0] - shifted[1]) / (2 * STEPS[block.name]))
    numeric = np.array(numeric).T.reshape(exact.shape)
    assert np.all(np.isfinite(base))
    # Per column: 1e-5 relative, or 1e-6 of the column's largest entry (entries that are nearly zero).
    allowed = 1e-5 * np.abs(numeric) + 1e-6 * np.max(np.abs(exact), axis=0) + 1e-12
    worst = np.unravel_index(np.argmax(np.abs(exact - numeric) / allowed), exact.shape)
    assert np.all(np.abs(exact - numeric) <= allowed), (worst, exact[worst], numeric[worst])
    np.testing.assert_allclose(np.concatenate([g.ravel() for g in grads]), weights @ exact, rtol=1e-12, atol=1e-15)
    return base, exact


def columns(layout, n_runs, name):
    """The Op's Jacobian columns of block ``name`` (its inputs flattened in ``BLOCKS`` order)."""
    start = 0
    for block in BLOCKS:
        size = block.count(layout) * (n_runs if block.per_run else 1)
        if block.name == name:
            return slice(start, start + size)
        start += size
    raise KeyError(name)


def test_op_jacobian_of_ramped_runs_with_every_temperature_slope():
    # A <=> B (Ea, dH), B -> C saturating in B (dH_ads) with a fitted order and a fitted temperature exponent;
    # run 0 follows a three-point programme, run 1 is isothermal; A's initial concentration uncertain.
    net = network("ABC", "A <=> B", "B -> C", saturation=((0.0, ()), (1.0, ("B",))))
    layout = SensitivityLayout(
        net, free_orders=((1, 1),), free_initial=(0,), temperature_varies=True, fitted_exponents=(1,)
    )
    programme = np.array([[0.0, 293.0], [20.0, 333.0], [40.0, 323.0]])
    setups = [RunSetup(programme, horizon=60.0), RunSetup.isothermal(313.0)]
    times = [np.array([5.0, 15.0, 25.0, 45.0, 60.0]), np.array([10.0, 30.0])]
    measured = [(0, t, i) for t in range(5) for i in range(3)] + [(1, t, i) for t in range(2) for i in (0, 2)]
    obs = observations(setups, times, [[1.0, 0.1, 0.0], [0.8, 0.0, 0.0]], measured)
    free = KineticInputs(
        ln_k=np.log([[0.08, 0.05], [0.06, 0.04]]),
        ln_eq=np.log([[3.0], [2.5]]),
        ln_ads=np.log([[1.5], [1.2]]),
        orders=[1.1],
        initial=[[1.0], [0.8]],
        activation=[7000.0, 9000.0],
        eq_enthalpy=[-4000.0],
        ads_enthalpy=[-3000.0],
        exponent=[0.8],
    )
    _, exact = op_jacobian_check(net, layout, obs, free, fixed_exponents=np.array([0.5, 0.0]))
    for name in ("activation", "eq_enthalpy", "ads_enthalpy", "exponent"):
        part = exact[:, columns(layout, 2, name)]
        assert np.max(np.abs(part[:15])) > 1e-6  # the ramped run depends on every slope
        np.testing.assert_array_equal(part[15:], 0.0)  # the isothermal run at its nominal T on none


def dosed_setups():
    """Run 0: B fed over the first half; run 1: B fed from 5 to 15 and again, faster, from 20 to 25; run 2: B fed
    from 10 to 40 while the temperature rises from 300 K to 340 K over the first 25."""
    b = np.array([0.0, 5.0, 0.0, 0.0])
    return [
        RunSetup.isothermal(320.0, volume=1.0, feeds=(Feed(0.0, 30.0, 0.01, b),)),
        RunSetup.isothermal(335.0, volume=0.5, feeds=(Feed(5.0, 15.0, 0.02, b), Feed(20.0, 25.0, 0.04, b))),
        RunSetup(np.array([[0.0, 300.0], [25.0, 340.0]]), horizon=60.0, feeds=(Feed(10.0, 40.0, 0.01, b),)),
    ]


def test_op_jacobian_of_dosed_runs():
    # A + B -> C, C -> D with B dosed (one run also heated); A's initial concentration uncertain, B's order in
    # step 0 fitted (below one, where d r / d c_B is infinite while B is still at zero).
    net = network("ABCD", "A + B -> C", "C -> D")
    layout = SensitivityLayout(net, free_orders=((0, 1),), free_initial=(0,), temperature_varies=True)
    times = [np.array([2.0, 5.0, 10.0, 15.0, 20.0, 30.0, 45.0, 60.0])] * 3
    measured = [(r, t, i) for r in range(3) for t in range(8) for i in (0, 2, 3)]
    initial = [[1.0, 0.0, 0.0, 0.0], [0.6, 0.0, 0.0, 0.0], [0.8, 0.0, 0.0, 0.0]]
    obs = observations(dosed_setups(), times, initial, measured)
    free = KineticInputs(
        np.log([[0.3, 0.02], [0.5, 0.04], [0.4, 0.03]]),
        np.zeros((3, 0)),
        np.zeros((3, 0)),
        [0.7],
        [[1.0], [0.6], [0.8]],
        activation=[8000.0, 10000.0],
    )
    _, exact = op_jacobian_check(net, layout, obs, free)
    assert np.max(np.abs(exact[:, columns(layout, 3, "initial")])) > 0.1
    assert np.max(np.abs(exact[48:, columns(layout, 3, "activation")])) > 1e-6  # the heated run


def test_op_jacobian_and_value_of_a_measured_amount():
    # The semi-batch A -> B fed A, measured as amounts n = c V (``factor`` = V(t) = V0 + q t): with E = exp(-k t)
    # and s = q c_F / k, n_A = s (1 - E) + n_A0 E and n_B = n_A0 + q c_F t - n_A (closed form above; Fogler's
    # semibatch balance, from memory); by hand, d n_A / d ln k = k [-(s / k)(1 - E) + (s - n_A0) t E] and
    # d n_A / d c_A0 = V0 E. The Jacobian also against central differences.
    net = network("AB", "A -> B")
    k, q, c_feed, volume0, c0 = 0.05, 0.1, 2.0, 1.5, 0.3
    setup = RunSetup.isothermal(300.0, volume=volume0, feeds=(Feed(0.0, math.inf, q, np.array([c_feed, 0.0])),))
    times = np.array([3.0, 10.0, 40.0, 90.0])
    layout = SensitivityLayout(net, free_initial=(0,))
    measured = [(0, t, i) for i in range(2) for t in range(4)]
    obs = observations([setup], [times], [[c0, 0.0]], measured, factor=np.tile(volume0 + q * times, 2))
    free = KineticInputs(np.log([[k]]), np.zeros((1, 0)), np.zeros((1, 0)), [], [[c0]])
    prediction, exact = op_jacobian_check(net, layout, obs, free)
    decay, steady, n0 = np.exp(-k * times), q * c_feed / k, c0 * volume0
    n_a = steady * (1 - decay) + n0 * decay
    np.testing.assert_allclose(prediction, np.concatenate([n_a, n0 + q * c_feed * times - n_a]), rtol=1e-10)
    d_ln_k = k * (-(steady / k) * (1 - decay) + (steady - n0) * times * decay)
    np.testing.assert_allclose(exact[:, 0], np.concatenate([d_ln_k, -d_ln_k]), rtol=1e-9)
    np.testing.assert_allclose(exact[:, 1], np.concatenate([volume0 * decay, volume0 * (1 - decay)]), rtol=1e-9)


def test_op_jacobian_of_steady_state_rows_with_an_uncertain_feed():
    # Two CSTR rows and a PFR row (the steady-state data's setups) of A -> B, 2 B -> C; A's feed uncertain.
    net = network("ABC", "A -> B", "2 B -> C")
    layout = SensitivityLayout(net, free_initial=(0,))
    feeds = np.array([[1.0, 0.0, 0.0], [0.7, 0.2, 0.0], [1.2, 0.0, 0.0]])
    taus = [2.0, 8.0, 5.0]
    setups = [cstr_setup(2.0, feeds[0], 320.0), cstr_setup(8.0, feeds[1], 340.0), RunSetup.isothermal(330.0)]
    obs = observations(setups, [np.array([t]) for t in taus], feeds, [(r, 0, i) for r in range(3) for i in range(3)])
    free = KineticInputs(
        np.log([[0.3, 0.2], [0.5, 0.3], [0.4, 0.25]]), np.zeros((3, 0)), np.zeros((3, 0)), [], feeds[:, :1]
    )
    _, exact = op_jacobian_check(net, layout, obs, free)
    # The CSTR's feed enters: d c_A / d c_A0 = 1 / (1 + k1 tau) (Levenspiel, ch. 5, first order; from memory).
    np.testing.assert_allclose(
        exact[[0, 3], columns(layout, 3, "initial")][[0, 1], [0, 1]], [1 / 1.6, 1 / 5.0], rtol=1e-9
    )
