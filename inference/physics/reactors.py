"""Ideal isothermal reactors and a temperature-programmed batch, for many parameter draws at once.

Pure numerics, no PyMC. Concentrations and times are in the study's units, temperatures in K.

- Batch (constant volume) and PFR (constant density, space time in place of time) share dc/dt = S^T r(c)
  (Levenspiel, Chemical Reaction Engineering, 3rd ed., 1999, ch. 5).
- CSTR at steady state: 0 = (c_feed - c)/tau + S^T r(c), solved per draw by Newton's method (scipy's
  ``root``) from several starting guesses; a solution must be physical (no negative concentration) and is
  called stable when every eigenvalue of -I/tau + d(S^T r)/dc has a negative real part.
- Programmed batch: T(t) piecewise-linear; the compiled integrators follow it inside each step (the draws' rate
  constants stated at the programme's first temperature, scaled along the way by their temperature slopes).
- Dosed (semi-batch): the same, with feeds; the liquid volume grows with the inflow (``conditions``), and the
  amounts fed so far are ``fed_amounts``.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import root

from .conditions import Feed, RunSetup, build_conditions, dose_piece, isothermal_conditions, run_conditions, volume_at
from .kinetics import run_kernel
from .network import Network
from .parameters import ParameterDraws
from .solution import NetworkSolver, SolverFailure, SolverSettings, network_kernel
from .stepping import evaluate

#: Relative tolerance of runs whose temperature or volume changes, tighter than a plain batch's: steps end at the
#: points of short programmes only (``conditions.KNOT_STOPS_MAX``), and a step across a kink of a longer one (or of
#: a reactor log) loses accuracy.
PROGRAMMED_RTOL = 1e-8


def _rate_terms(network: Network, one: ParameterDraws, kelvin: float) -> Callable[[np.ndarray], tuple]:
    """c -> (dc/dt = S^T r(c), its Jacobian) for a single draw ``one`` at ``kelvin`` (negative c read as zero);
    the kernel and scratch are built once, so a Newton search pays only for the compiled evaluation."""
    n_reactions, n = network.forward_orders.shape
    kernel = run_kernel(network_kernel(network, one.inputs(0, np.array([kelvin]), np.zeros((1, n)))), 0)
    conditions = run_conditions(isothermal_conditions(np.array([kelvin]), n), 0)
    scratch = (np.empty(n_reactions), np.empty(n_reactions), np.empty(n_reactions), np.empty((n_reactions, n)))
    state, hold = np.empty(n), np.empty(n + 2)

    def rates(c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        f, jac = np.empty(n), np.empty((n, n))
        evaluate(np.ascontiguousarray(c, dtype=float), 0.0, 0.0, 0, kernel, conditions, f, jac, *scratch, state, hold)
        return f, jac

    return rates


def _draw_profiles(
    network: Network,
    draws: ParameterDraws,
    kelvin: float | np.ndarray,
    initial: np.ndarray,
    times: np.ndarray,
    setup: RunSetup | None = None,
    settings: SolverSettings | None = None,
) -> np.ndarray:
    """Profiles of every draw, each a run of its own: (draws, times, species); NaN where a draw failed.

    ``kelvin`` (K; one value, or one per draw) is the nominal temperature the draws' constants are stated at;
    ``setup`` how each draw's run is carried out (its nominal must be ``kelvin``; None: isothermal batch).
    """
    n = initial.size
    kelvin = np.broadcast_to(np.asarray(kelvin, dtype=float), (draws.size,))
    settings = SolverSettings() if settings is None else settings
    if not draws.orders_vary:
        # Each draw is a "run" of one solver call: one compiled loop for every draw.
        conditions = None if setup is None else build_conditions([setup] * draws.size, n)
        solver = NetworkSolver(network, [times] * draws.size, conditions=conditions, settings=settings)
        try:
            solution = solver.solve(draws.as_runs(kelvin, initial), sensitivities=False)
            return np.stack(solution.concentrations)
        except SolverFailure:
            pass  # find the failing draws one by one below
    out = np.full((draws.size, times.size, n), np.nan)
    conditions = None if setup is None else build_conditions([setup], n)
    solver = NetworkSolver(network, [times], conditions=conditions, settings=settings)
    for d in range(draws.size):
        try:
            solution = solver.solve(draws.inputs(d, kelvin[d : d + 1], initial[None]), sensitivities=False)
            out[d] = solution.concentrations[0]
        except SolverFailure:
            continue
    return out


def batch_profiles(
    network: Network, draws: ParameterDraws, kelvin: float | np.ndarray, initial: np.ndarray, times: np.ndarray
) -> np.ndarray:
    """Isothermal batch (or PFR) profiles of every draw at ``kelvin`` (K; one value, or one per draw):
    (draws, times, species); NaN where a draw failed."""
    return _draw_profiles(network, draws, kelvin, initial, times)


@dataclass(frozen=True)
class CstrSolution:
    """Steady states of every draw: ``concentrations`` (draws, residence times, species); ``multiple``: draws
    and residence times where distinct physical steady states were found; ``unstable``: where no stable one was
    found (the reported state is then an unstable one); ``failed``: where no physical state was found (NaN)."""

    concentrations: np.ndarray
    multiple: np.ndarray
    unstable: np.ndarray
    failed: np.ndarray


def cstr_steady_states(
    network: Network,
    draws: ParameterDraws,
    kelvin: float | np.ndarray,
    feed: np.ndarray,
    residence_times: np.ndarray,
    *,
    thorough: bool = True,
) -> CstrSolution:
    """Steady states of an isothermal CSTR for every draw and residence time.

    Newton starts from the batch state after tau; with ``thorough`` also from the feed, from the batch state
    after 20 tau and from states spread over what the stoichiometry can reach, which is what finds several
    steady states where they exist (slower; searches over many residence times turn it off).
    """
    n = feed.size
    shape = (draws.size, residence_times.size)
    concentrations = np.full((*shape, n), np.nan)
    multiple, unstable, failed = np.zeros(shape, bool), np.zeros(shape, bool), np.zeros(shape, bool)
    grid = np.unique(np.concatenate([[0.0], residence_times, 20 * residence_times]))
    batch = batch_profiles(network, draws, kelvin, feed, grid)
    at_tau = batch[:, np.searchsorted(grid, residence_times)]
    at_long = batch[:, np.searchsorted(grid, 20 * residence_times)]
    scale = max(float(feed.max()), 1e-300)
    reachable = _reachable_guesses(network, feed) if thorough else []
    kelvin_per_draw = np.broadcast_to(np.asarray(kelvin, dtype=float), (draws.size,))
    for d in range(draws.size):
        try:
            rates = _rate_terms(network, draws.draw(d), float(kelvin_per_draw[d]))
        except SolverFailure:  # a constant overflows: no state for this draw
            failed[d] = True
            continue
        for q, tau in enumerate(residence_times):

            def residual(c: np.ndarray, rates=rates, tau: float = tau) -> tuple[np.ndarray, np.ndarray]:
                f, jac = rates(c)
                return (feed - c) / tau + f, jac - np.eye(n) / tau

            found: list[tuple[np.ndarray, bool]] = []
            guesses = (at_tau[d, q], feed, at_long[d, q], *reachable) if thorough else (at_tau[d, q],)
            for guess in guesses:
                if not np.all(np.isfinite(guess)):
                    continue
                answer = root(residual, guess, jac=True, method="hybr")
                c = answer.x
                value, jac = residual(c)
                # Accepted on its residual (the balance closes to 1e-7 of the feed), whatever the solver reports.
                if not (
                    np.all(np.isfinite(c)) and np.all(c >= -1e-9 * scale) and np.max(np.abs(value)) * tau < 1e-7 * scale
                ):
                    continue
                if any(np.max(np.abs(c - other)) < 1e-6 * scale for other, _ in found):
                    continue
                found.append((np.maximum(c, 0.0), bool(np.all(np.linalg.eigvals(jac).real < 0))))
            if not found:
                failed[d, q] = True
                continue
            stable = [c for c, is_stable in found if is_stable]
            concentrations[d, q] = stable[0] if stable else found[0][0]
            multiple[d, q] = len(found) > 1
            unstable[d, q] = not stable
    return CstrSolution(concentrations, multiple, unstable, failed)


def _reachable_guesses(network: Network, feed: np.ndarray, count: int = 4) -> list[np.ndarray]:
    """Extra Newton starts spread over states the stoichiometry can reach from the feed (c = feed + S^T x, x >= 0,
    clipped at zero), so that steady states a start-up from the feed would not find are still seen."""
    rng = np.random.default_rng(0)
    consumed = -np.minimum(network.stoichiometry, 0.0)
    largest = float(feed.max()) if feed.max() > 0 else 1.0
    limits = np.array(
        [
            min((feed[i] / consumed[j, i] for i in np.flatnonzero(consumed[j])), default=largest) or largest
            for j in range(consumed.shape[0])
        ]
    )
    guesses = []
    for _ in range(count):
        extent = rng.uniform(0.05, 0.95, size=limits.size) * limits
        guesses.append(np.maximum(feed + network.stoichiometry.T @ extent, 0.0))
    return guesses


def programme_temperature(programme: np.ndarray, times: np.ndarray) -> np.ndarray:
    """T(t) in K from (time, K) points joined by straight lines, held at the last value after the last point."""
    return np.interp(times, programme[:, 0], programme[:, 1])


def programmed_batch_profiles(
    network: Network,
    draws: ParameterDraws,
    programme: np.ndarray,
    initial: np.ndarray,
    times: np.ndarray,
    rtol: float = PROGRAMMED_RTOL,
) -> np.ndarray:
    """Batch profiles under a temperature programme ((time, K) points joined by straight lines, held after the
    last): (draws, times, species); NaN where a draw failed."""
    setup = _setup(programme, 1.0, ())
    return _draw_profiles(network, draws, setup.nominal, initial, times, setup, SolverSettings(rtol=rtol))


def dosed_batch_profiles(
    network: Network,
    draws: ParameterDraws,
    history_or_kelvin: float | np.ndarray,
    initial: np.ndarray,
    volume: float,
    feeds: Sequence[Feed],
    times: np.ndarray,
    rtol: float = PROGRAMMED_RTOL,
) -> tuple[np.ndarray, np.ndarray]:
    """A dosed (semi-batch) vessel holding ``volume`` of ``initial`` concentrations at t = 0, fed by ``feeds``,
    at a temperature in K (isothermal) or under a (time, K) programme: concentrations (draws, times, species;
    NaN where a draw failed) and the liquid volume V(t) (times,) in the unit of ``volume``."""
    setup = _setup(history_or_kelvin, volume, tuple(feeds))
    concentrations = _draw_profiles(network, draws, setup.nominal, initial, times, setup, SolverSettings(rtol=rtol))
    compiled = run_conditions(build_conditions([setup], initial.size), 0)
    liquid = np.array([volume_at(compiled, dose_piece(compiled, t), t) for t in np.asarray(times, dtype=float)])
    return concentrations, liquid


def fed_amounts(feeds: Sequence[Feed], times: np.ndarray, n_species: int) -> np.ndarray:
    """Amount of each species fed up to each time (times, species): the integral of rate x concentration, in
    concentration x volume units."""
    times = np.asarray(times, dtype=float)
    total = np.zeros((times.size, n_species))
    for feed in feeds:
        duration = np.clip(times - feed.start, 0.0, feed.stop - feed.start)
        total += np.outer(duration * feed.rate, np.asarray(feed.concentration, dtype=float))
    return total


def _setup(history_or_kelvin: float | np.ndarray, volume: float, feeds: tuple[Feed, ...]) -> RunSetup:
    """A run at one temperature (K) or under a (time, K) programme, its constants stated at the first
    temperature (what ``_draw_profiles`` must be given as the nominal temperature)."""
    history = np.atleast_2d(np.asarray(history_or_kelvin, dtype=float))
    if history.shape == (1, 1):
        return RunSetup.isothermal(float(history[0, 0]), volume=float(volume), feeds=feeds)
    return RunSetup(history, nominal_kelvin=float(history[0, 1]), volume=float(volume), feeds=feeds)
