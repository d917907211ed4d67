"""Reactor design equations against Levenspiel's closed forms and scipy, and point posteriors collapsing."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from inference.physics.network import build_network, parse_equation
from inference.physics.reactors import (
    batch_profiles,
    cstr_steady_states,
    programme_temperature,
    programmed_batch_profiles,
)
from inference.posterior.draws import ParameterDraws

T_REF = 350.0


def point_draws(network, k: list[float], ea: list[float], count: int = 3) -> ParameterDraws:
    """A posterior shrunk to one point, repeated ``count`` times."""
    n_reactions = len(k)
    return (
        ParameterDraws(
            ln_k_ref=np.tile(np.log(k), (count, 1)),
            ea=np.tile(ea, (count, 1)),
            ln_eq_ref=np.zeros((count, 0)),
            dh=np.zeros((count, 0)),
            orders=np.repeat(np.array(network.forward_orders)[None], count, axis=0),
            initial=None,
            temperature_ref=T_REF,
        )
        if n_reactions
        else None
    )


FIRST = build_network(("A", "B"), ("r",), (parse_equation("A -> B"),))
SECOND = build_network(("A", "B"), ("r",), (parse_equation("2 A -> B"),))


def test_first_order_cstr_and_pfr():
    # k tau = 1: X_CSTR = k tau / (1 + k tau) = 0.5 and X_PFR = 1 - exp(-k tau) (Levenspiel, Chemical Reaction
    # Engineering, 3rd ed., ch. 5, eqs. 5.14 and 5.17; from memory).
    draws = point_draws(FIRST, [0.2], [50_000.0])
    feed = np.array([2.0, 0.0])
    cstr = cstr_steady_states(FIRST, draws, T_REF, feed, np.array([5.0]))
    np.testing.assert_allclose(1 - cstr.concentrations[:, 0, 0] / 2.0, 0.5, rtol=1e-10)
    pfr = batch_profiles(FIRST, draws, T_REF, feed, np.array([0.0, 5.0]))
    np.testing.assert_allclose(1 - pfr[:, -1, 0] / 2.0, 1 - np.exp(-1.0), rtol=1e-6)
    assert not cstr.multiple.any() and not cstr.unstable.any() and not cstr.failed.any()


def test_first_order_cstr_with_a_temperature_per_draw_and_a_draw_that_overflows():
    # X = k tau / (1 + k tau) for each draw at its own temperature (the same closed form); a draw whose rate
    # constant overflows has no steady state and is marked failed, the others are unaffected.
    draws = point_draws(FIRST, [0.2], [50_000.0])
    kelvin = np.array([330.0, 350.0, 370.0])
    feed = np.array([2.0, 0.0])
    cstr = cstr_steady_states(FIRST, draws, kelvin, feed, np.array([5.0]))
    k = np.exp(draws.ln_k(kelvin)[:, 0])
    np.testing.assert_allclose(1 - cstr.concentrations[:, 0, 0] / 2.0, k * 5.0 / (1 + k * 5.0), rtol=1e-9)
    wild = replace(draws, ln_k_ref=np.array([[np.log(0.2)], [800.0], [np.log(0.2)]]))
    cstr = cstr_steady_states(FIRST, wild, T_REF, feed, np.array([5.0]))
    assert cstr.failed[:, 0].tolist() == [False, True, False]
    np.testing.assert_allclose(1 - cstr.concentrations[[0, 2], 0, 0] / 2.0, 0.5, rtol=1e-10)


def test_second_order_cstr_and_pfr_at_damkoehler_one():
    # rate = k c_A^2 with Da = k tau c_A0 = 1: X_CSTR = 0.381966 (root of X = Da (1 - X)^2) and X_PFR = 0.5
    # (Levenspiel, ch. 5, eqs. 5.15 and 5.18). For 2 A -> B, d c_A/dt = -2 k c_A^2, so k here is half the
    # k of those equations.
    draws = point_draws(SECOND, [0.25], [60_000.0])  # 2 k = 0.5 (mol/L)^-1/min
    feed = np.array([1.0, 0.0])
    tau = 2.0  # Da = 0.5 * 2 * 1 = 1
    cstr = cstr_steady_states(SECOND, draws, T_REF, feed, np.array([tau]))
    assert 1 - cstr.concentrations[0, 0, 0] == pytest.approx(0.381966, abs=1e-6)
    pfr = batch_profiles(SECOND, draws, T_REF, feed, np.array([0.0, tau]))
    assert 1 - pfr[0, -1, 0] == pytest.approx(0.5, rel=1e-6)


def test_batch_profiles_match_solve_ivp_and_collapse_for_a_point_posterior():
    net = build_network(("A", "B", "C"), ("r1", "r2"), (parse_equation("A -> B"), parse_equation("B -> C")))
    draws = point_draws(net, [0.3, 0.1], [60_000.0, 80_000.0], count=5)
    kelvin = 365.0
    times = np.linspace(0.0, 30.0, 31)
    profiles = batch_profiles(net, draws, kelvin, np.array([1.0, 0.0, 0.0]), times)
    k1, k2 = np.exp(draws.ln_k(kelvin)[0])
    reference = solve_ivp(
        lambda t, c: [-k1 * c[0], k1 * c[0] - k2 * c[1], k2 * c[1]],
        (0, 30),
        [1, 0, 0],
        t_eval=times,
        rtol=1e-11,
        atol=1e-14,
        method="Radau",
    ).y.T
    np.testing.assert_allclose(profiles[0], reference, rtol=1e-5, atol=1e-9)
    np.testing.assert_array_equal(profiles.min(axis=0), profiles.max(axis=0))  # bands of zero width


def test_programmed_batch_matches_solve_ivp_with_the_same_ramp():
    programme = np.array([[0.0, 330.0], [10.0, 370.0], [30.0, 370.0]])
    draws = point_draws(FIRST, [0.05], [70_000.0], count=1)
    times = np.linspace(0.0, 30.0, 16)
    profile = programmed_batch_profiles(FIRST, draws, programme, np.array([1.0, 0.0]), times)[0]

    def rate(t, c):
        kelvin = programme_temperature(programme, np.array([t]))[0]
        k = float(np.exp(draws.ln_k(kelvin)[0, 0]))
        return [-k * c[0], k * c[0]]

    reference = solve_ivp(
        rate, (0, 30), [1.0, 0.0], t_eval=times, rtol=1e-11, atol=1e-14, method="Radau", max_step=0.5
    ).y.T
    np.testing.assert_allclose(profile, reference, rtol=1e-5, atol=1e-8)


def test_cstr_with_autocatalysis_reports_multiple_steady_states():
    # A + B -> 2 B in a CSTR fed with A and a little B: a washout state (no conversion) and a reacting state
    # both satisfy the balances for k tau c_A0 > 1 (common practice: the classic autocatalytic CSTR).
    net = build_network(("A", "B"), ("r",), (parse_equation("A + B -> 2 B"),))
    draws = point_draws(net, [1.0], [50_000.0], count=1)
    feed = np.array([1.0, 0.0])
    result = cstr_steady_states(net, draws, T_REF, feed, np.array([4.0]))
    assert result.multiple[0, 0]
    assert result.concentrations[0, 0, 1] == pytest.approx(0.75, rel=1e-6)  # reacting branch: c_A = 1/(k tau)
