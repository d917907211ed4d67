"""Ideal isothermal reactors and a temperature-programmed batch, for many parameter draws at once.

Pure numerics, no PyMC. Concentrations and times are in the study's units, temperatures in K.

- Batch (constant volume) and PFR (constant density, space time in place of time) share dc/dt = S^T r(c)
  (Levenspiel, Chemical Reaction Engineering, 3rd ed., 1999, ch. 5).
- CSTR at steady state: 0 = (c_feed - c)/tau + S^T r(c), solved per draw by Newton's method (scipy's
  ``root``) from several starting guesses; a solution must be physical (no negative concentration) and is
  called stable when every eigenvalue of -I/tau + d(S^T r)/dc has a negative real part.
- Programmed batch: T(t) piecewise-linear; integrated with ``scipy.integrate.solve_ivp`` (LSODA) piece by
  piece, since k changes along the way.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import root

from .conditions import isothermal_conditions, run_conditions
from .kinetics import run_kernel
from .network import Network
from .parameters import ParameterDraws
from .solution import NetworkSolver, SolverFailure, network_kernel
from .stepping import evaluate


def _rate_terms(network: Network, one: ParameterDraws, kelvin: float, c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """dc/dt = S^T r(c) and its Jacobian for a single draw ``one`` at ``kelvin`` (negative c read as zero)."""
    kernel = network_kernel(network, one.inputs(0, np.array([kelvin]), np.asarray(c, dtype=float)[None]))
    n_reactions, n = network.forward_orders.shape
    f, jac = np.empty(n), np.empty((n, n))
    scratch = (np.empty(n_reactions), np.empty(n_reactions), np.empty(n_reactions), np.empty((n_reactions, n)))
    conditions = run_conditions(isothermal_conditions(np.array([kelvin]), n), 0)
    evaluate(
        np.ascontiguousarray(c, dtype=float), 0.0, 0, run_kernel(kernel, 0), conditions, f, jac, *scratch, np.empty(n)
    )
    return f, jac


def batch_profiles(
    network: Network, draws: ParameterDraws, kelvin: float, initial: np.ndarray, times: np.ndarray
) -> np.ndarray:
    """Isothermal batch (or PFR) profiles of every draw: (draws, times, species); NaN where a draw failed."""
    n = initial.size
    out = np.full((draws.size, times.size, n), np.nan)
    if not draws.orders_vary:
        # Each draw is a "run" of one solver call: one compiled loop for every draw.
        solver = NetworkSolver(network, [times] * draws.size)
        try:
            solution = solver.solve(draws.as_runs(kelvin, initial), sensitivities=False)
            return np.stack(solution.concentrations)
        except SolverFailure:
            pass  # find the failing draws one by one below
    solver = NetworkSolver(network, [times])
    for d in range(draws.size):
        try:
            solution = solver.solve(draws.inputs(d, np.array([kelvin]), initial[None]), sensitivities=False)
            out[d] = solution.concentrations[0]
        except SolverFailure:
            continue
    return out


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
    for d in range(draws.size):
        one = draws.draw(d)
        for q, tau in enumerate(residence_times):

            def residual(c: np.ndarray, one: ParameterDraws = one, tau: float = tau) -> tuple[np.ndarray, np.ndarray]:
                f, jac = _rate_terms(network, one, kelvin, c)
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
    rtol: float = 1e-7,
) -> np.ndarray:
    """Batch profiles under a piecewise-linear temperature programme: (draws, times, species)."""
    n = initial.size
    out = np.full((draws.size, times.size, n), np.nan)
    edges = np.unique(np.concatenate([programme[:, 0], [times[-1]]]))
    edges = edges[edges <= times[-1]]
    if edges[0] > 0.0:
        edges = np.concatenate([[0.0], edges])
    for d in range(draws.size):
        one = draws.draw(d)

        def rhs(t: float, c: np.ndarray, one: ParameterDraws = one) -> np.ndarray:
            kelvin = float(programme_temperature(programme, np.array([t]))[0])
            return _rate_terms(network, one, kelvin, c)[0]

        def jacobian(t: float, c: np.ndarray, one: ParameterDraws = one) -> np.ndarray:
            kelvin = float(programme_temperature(programme, np.array([t]))[0])
            return _rate_terms(network, one, kelvin, c)[1]

        state = initial.astype(float)
        for start, stop in itertools.pairwise(edges):
            inside = times[(times > start) & (times <= stop)]
            evaluations = np.unique(np.concatenate([inside, [stop]]))
            piece = solve_ivp(
                rhs,
                (start, stop),
                state,
                method="LSODA",
                jac=jacobian,
                t_eval=evaluations,
                rtol=rtol,
                atol=1e-12 * max(float(initial.max()), 1e-300),
            )
            if not piece.success:
                out[d] = np.nan
                break
            positions = np.searchsorted(evaluations, inside)
            out[d, np.searchsorted(times, inside)] = piece.y.T[positions]
            state = piece.y[:, -1]
        else:
            out[d, times == 0.0] = initial
    return out
