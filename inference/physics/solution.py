"""Concentration profiles of runs with exact parameter sensitivities.

``NetworkSolver`` integrates every run of a study with the compiled integrators of ``integrator`` (each run
with its own step sizes, under its own ``conditions``: temperature history, dosing, or a CSTR's steady state),
returning the concentrations and their sensitivities to the blocks of ``parameters.BLOCKS``. No PyMC here.
"""

from __future__ import annotations

import functools
import multiprocessing
import signal
import sys
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from . import integrator
from .conditions import Conditions, isothermal_conditions
from .kinetics import ACTIVATION, ADS_ENTHALPY, EXPONENT, LN_ADS, LN_K, ORDER, Kernel, Sensitivities
from .network import Network
from .parameters import BLOCKS, KineticInputs, SensitivityLayout
from .stepping import Tolerances

#: Sensitivity kinds that act through a reaction's rate alone: for a reaction held at equilibrium (no rate) they
#: are inert (their sensitivities stay zero) and are not integrated.
RATE_ONLY_KINDS = (LN_K, ORDER, LN_ADS, ACTIVATION, ADS_ENTHALPY, EXPONENT)


class SolverFailure(RuntimeError):
    """The integrator could not reach the requested times (too stiff, or a blow-up at extreme parameters);
    ``run`` is the index of the run that failed, where known."""

    def __init__(self, message: str, run: int = 0) -> None:
        super().__init__(message)
        self.run = run


#: Resolve ``SolverSettings.relative_floor`` to this share of itself (0.1 %: well inside any plausible noise).
FLOOR_RESOLUTION = 1e-3
#: The absolute tolerance is never set below this share of the largest initial concentration (near round-off:
#: at 1e-18 the demo network's integration fails).
ATOL_SHARE_LIMIT = 1e-14


@dataclass(frozen=True)
class SolverSettings:
    """Tolerances of the integration: relative, and absolute as a share of the largest initial concentration.

    ``relative_floor`` (concentration unit; 0: none) is the smallest concentration that must be accurate in
    relative terms: a measured value under noise on the log scale. Below the absolute tolerance a prediction is
    only as good as that tolerance, so the log-likelihood turns rough and its gradient no longer matches it
    (NUTS then shrinks its step a hundredfold); the absolute tolerance is lowered to ``FLOOR_RESOLUTION`` of the
    floor where that is tighter.
    """

    rtol: float = 1e-6
    atol_share: float = 1e-9
    max_steps: int = 20_000
    relative_floor: float = 0.0


@dataclass(frozen=True)
class Solution:
    """Profiles at the requested times: ``concentrations[r]`` is (times of run r, N);
    ``sensitivities[r]`` is (times, N, P) with parameters in ``NetworkSolver.parameter_names`` order."""

    concentrations: list[np.ndarray]
    sensitivities: list[np.ndarray] | None


def rate_arrays(
    network: Network, ln_k: np.ndarray, ln_eq: np.ndarray, ln_ads: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """k (runs, reactions), 1/K (runs, reactions; zero for irreversible steps) and the adsorption constants
    (runs, reactions, species; zero where none) from ln_ads (runs, sites); SolverFailure on overflow."""
    with np.errstate(over="ignore"):
        k_runs = np.exp(np.atleast_2d(np.asarray(ln_k, dtype=float)))
        finite = bool(np.isfinite(k_runs).all())
        inv_eq = np.zeros_like(k_runs)
        reversible = np.flatnonzero(network.reversible)
        if reversible.size:
            inv_eq[:, reversible] = np.exp(-np.atleast_2d(np.asarray(ln_eq, dtype=float)))
            finite = finite and bool(np.isfinite(inv_eq).all())
        ads = np.zeros((k_runs.shape[0], len(network.reactions), len(network.species)))
        if network.adsorption_sites:
            values = np.exp(np.atleast_2d(np.asarray(ln_ads, dtype=float)))
            for s, (j, i) in enumerate(network.adsorption_sites):
                ads[:, j, i] = values[:, s]
            finite = finite and bool(np.isfinite(ads).all())
    if not finite:
        raise SolverFailure("a rate, equilibrium or adsorption constant overflows")
    return k_runs, inv_eq, ads


def _slope_arrays(network: Network, inputs: KineticInputs, n_runs: int) -> tuple[np.ndarray, ...]:
    """Ea/R and exponents (runs, R), dH/R (runs, R; zero for irreversible steps) and dH_ads/R (runs, R, N)."""
    n_reactions, n_species = network.forward_orders.shape
    if inputs.activation is None:
        return _no_slopes(n_runs, n_reactions, n_species)
    activation = np.zeros((n_runs, n_reactions))
    exponent = np.zeros((n_runs, n_reactions))
    eq_enthalpy = np.zeros((n_runs, n_reactions))
    ads_enthalpy = np.zeros((n_runs, n_reactions, n_species))
    activation[:] = inputs.activation
    exponent[:] = inputs.exponent
    eq_enthalpy[:, np.flatnonzero(network.reversible)] = inputs.eq_enthalpy
    for s, (j, i) in enumerate(network.adsorption_sites):
        ads_enthalpy[:, j, i] = np.asarray(inputs.ads_enthalpy)[..., s]
    return activation, exponent, eq_enthalpy, ads_enthalpy


@functools.lru_cache(maxsize=32)
def _no_slopes(n_runs: int, n_reactions: int, n_species: int) -> tuple[np.ndarray, ...]:
    """``_slope_arrays`` where no run's temperature changes: zeros, allocated once per shape and shared (the
    compiled kernel never writes its inputs; writable, so that every study calls the one compiled signature)."""
    return (
        np.zeros((n_runs, n_reactions)),
        np.zeros((n_runs, n_reactions)),
        np.zeros((n_runs, n_reactions)),
        np.zeros((n_runs, n_reactions, n_species)),
    )


def network_kernel(network: Network, inputs: KineticInputs) -> Kernel:
    """The compiled kernel's inputs for every run of ``inputs`` (solver form: full orders); the one place they
    are assembled. ``SolverFailure`` when a constant overflows."""
    k, inv_eq, ads = rate_arrays(network, inputs.ln_k, inputs.ln_eq, inputs.ln_ads)
    return Kernel(
        k,
        inv_eq,
        network.stoichiometry,
        np.array(inputs.orders, dtype=float),  # a fresh writable array: one compiled signature for every caller
        network.reverse_orders,
        network.reversible,
        ads,
        network.inhibition,
        *_slope_arrays(network, inputs, k.shape[0]),
        network.held,
    )


class Gather(NamedTuple):
    """Where the integrator's entry points read the predictions, and what they fill: measurement m is run
    ``run_index[m]`` at its time ``time_index[m]``, species ``species_index[m]``, times ``factor[m]``;
    ``columns[r, p]`` is the Jacobian column of run r's sensitivity parameter p; ``prediction`` (M,) and
    ``jacobian`` (M, inputs) are filled."""

    run_index: np.ndarray
    time_index: np.ndarray
    species_index: np.ndarray
    columns: np.ndarray
    factor: np.ndarray
    prediction: np.ndarray
    jacobian: np.ndarray


class NetworkSolver:
    """Solves one network for a fixed set of runs and sampling times.

    Its sensitivity parameters are the columns of ``parameters.BLOCKS``, block by block: ln k of every reaction;
    ln K of every reversible reaction; ln K of every adsorption site of a saturating law; each free forward order;
    each species whose initial concentration is uncertain; the temperature slopes where a run's temperature
    changes. ``conditions`` say how each run was carried out (default: isothermal batch runs).
    """

    def __init__(
        self,
        network: Network,
        times: list[np.ndarray],
        *,
        layout: SensitivityLayout | None = None,
        conditions: Conditions | None = None,
        settings: SolverSettings = SolverSettings(),
    ) -> None:
        self.network = network
        self.settings = settings
        self.layout = SensitivityLayout(network) if layout is None else layout
        self.conditions = conditions
        columns = [(block.kernel_kind, j, i) for block in BLOCKS for j, i in block.sites(self.layout)]
        table = np.array(columns, dtype=np.int64).reshape(-1, 3)
        self.sensitivities = Sensitivities(*(np.ascontiguousarray(table[:, c]) for c in range(3)))
        #: Positions of the parameters the kernel integrates: all but those of a reaction held at equilibrium
        #: that only its rate depends on (it has none), whose sensitivities are zero at every time.
        inert = (table[:, 1] == network.held) & np.isin(table[:, 0], RATE_ONLY_KINDS)
        self.active = np.flatnonzero(~inert)
        self.integrated = Sensitivities(*(np.ascontiguousarray(values[self.active]) for values in self.sensitivities))
        #: What the concentrations alone integrate with: no sensitivity parameters.
        self.no_sensitivities = Sensitivities(*(values[:0].copy() for values in self.sensitivities))
        self.times = [np.asarray(t, dtype=float) for t in times]
        self.all_times = np.concatenate(self.times)
        self.time_offsets = np.concatenate([[0], np.cumsum([t.size for t in self.times])]).astype(np.int64)
        #: Accepted and rejected steps of the last ``solve``, runs that went to the implicit method, and the run
        #: integrated last (the failing one after an error).
        self.stats = np.zeros(4, dtype=np.int64)

    @property
    def n_params(self) -> int:
        return int(self.sensitivities.kind.size)

    @property
    def parameter_names(self) -> list[str]:
        return [name for block in BLOCKS for name in block.labels(self.layout, block.label)]

    def conditions_for(self, n_runs: int) -> Conditions:
        """The runs' conditions: as given, or isothermal batch runs (their nominal temperature is irrelevant)."""
        if self.conditions is None or self.conditions.nominal_kelvin.size != n_runs:
            self.conditions = isothermal_conditions(np.full(n_runs, 300.0), len(self.network.species))
        return self.conditions

    def tolerances(self, initial: np.ndarray) -> Tolerances:
        """The settings' tolerances, the absolute one scaled by the largest initial concentration and kept
        below the relative floor's resolution."""
        settings = self.settings
        peak = float(initial.max())
        scale = peak if peak > 0 else 1.0
        atol = settings.atol_share * scale
        if settings.relative_floor > 0:
            atol = max(min(atol, FLOOR_RESOLUTION * settings.relative_floor), ATOL_SHARE_LIMIT * scale)
        return Tolerances(settings.rtol, atol, settings.max_steps)

    def solve(self, inputs: KineticInputs, *, sensitivities: bool = True) -> Solution:
        """Integrate all runs of ``inputs`` (solver form: full orders and initial concentrations) to every one of
        their times. Raises ``SolverFailure``."""
        n_runs, n_species = np.shape(inputs.initial)
        params = self.integrated if sensitivities else self.no_sensitivities
        n_params = params.kind.size
        profile_c = np.empty((self.all_times.size, n_species))
        profile_s = np.empty((self.all_times.size, n_species, n_params))
        self.integrate(inputs, params, self._no_measurements(n_runs, n_params), profile_c, profile_s)
        if sensitivities and n_params < self.n_params:  # the inert ones are zero
            integrated, profile_s = profile_s, np.zeros((self.all_times.size, n_species, self.n_params))
            profile_s[:, :, self.active] = integrated
        bounds = self.time_offsets
        concentrations = [profile_c[bounds[r] : bounds[r + 1]] for r in range(n_runs)]
        for r, values in enumerate(concentrations):
            if not np.all(np.isfinite(values)):
                raise SolverFailure(f"the integration of run {r} did not reach t = {self.times[r][-1]:g}", r)
        sens = [profile_s[bounds[r] : bounds[r + 1]] for r in range(n_runs)] if sensitivities else None
        return Solution(concentrations, sens)

    def _no_measurements(self, n_runs: int, n_params: int) -> Gather:
        """What ``integrate`` gathers when only the profiles are wanted: nothing."""
        empty = np.empty(0, dtype=np.int64)
        columns = np.zeros((n_runs, n_params), dtype=np.int64)
        return Gather(empty, empty, empty, columns, np.empty(0), np.empty(0), np.empty((0, 0)))

    def _arguments(
        self,
        inputs: KineticInputs,
        params: Sensitivities,
        gather: Gather,
        profile_c: np.ndarray | None,
        profile_s: np.ndarray | None,
    ) -> tuple:
        """The arguments of both compiled entry points (``integrator``) for ``integrate``'s arguments."""
        initial = np.ascontiguousarray(inputs.initial, dtype=float)
        n_runs, n_species = initial.shape
        if profile_c is None:
            profile_c, profile_s = np.empty((0, n_species)), np.empty((0, n_species, params.kind.size))
        return (
            initial,
            self.all_times,
            self.time_offsets,
            network_kernel(self.network, inputs),
            self.conditions_for(n_runs),
            params,
            self.tolerances(initial),
            gather,
            profile_c,
            profile_s,
            self.stats,
            np.zeros(n_runs, dtype=np.int64),
            np.empty((n_runs, n_species)),
        )

    def integrate(
        self,
        inputs: KineticInputs,
        params: Sensitivities,
        gather: Gather,
        profile_c: np.ndarray | None = None,
        profile_s: np.ndarray | None = None,
    ) -> None:
        """Integrate every run of ``inputs`` (solver form) with the sensitivities ``params``, filling ``gather``'s
        prediction and Jacobian and, where given, the profiles (all times, N) and (all times, N, P): the explicit
        entry point for every run, the implicit one for the runs it leaves (``integrator``). Raises
        ``SolverFailure`` naming the failing run."""
        finish_background_compile()
        self.stats[:] = 0
        arguments = self._arguments(inputs, params, gather, profile_c, profile_s)
        try:
            failed = -1
            if integrator.explicit_measurements(*arguments) > 0:
                _say_implicit_compile()
                failed = integrator.implicit_measurements(*arguments)
        except ArithmeticError as error:  # numba raises Python's errors (x / 0) where extreme parameters lead
            run = int(self.stats[3])
            raise SolverFailure(f"the integration of run {run} failed ({type(error).__name__})", run) from None
        if failed >= 0:
            raise SolverFailure(f"the integration of run {failed} did not reach t = {self.times[failed][-1]:g}", failed)


class MeasurementSolver:
    """Predictions at a fixed set of measurements and their Jacobian, computed in one compiled call.

    ``columns[r, p]`` maps sensitivity parameter p of run r to a column of the Jacobian (see ``ops``);
    ``factor`` (M,) multiplies each prediction (a run's volume at that time for a measured amount; default 1).
    """

    def __init__(
        self,
        solver: NetworkSolver,
        run_index: np.ndarray,
        time_index: np.ndarray,
        species_index: np.ndarray,
        columns: np.ndarray,
        n_inputs: int,
        factor: np.ndarray | None = None,
    ) -> None:
        self.solver = solver
        # Contiguous arrays throughout, so that every study calls the one compiled signature.
        self.run_index = np.ascontiguousarray(run_index, dtype=np.int64)
        self.time_index = np.ascontiguousarray(time_index, dtype=np.int64)
        self.species_index = np.ascontiguousarray(species_index, dtype=np.int64)
        self.columns = np.ascontiguousarray(columns, dtype=np.int64)
        self.n_inputs = n_inputs
        self.factor = np.ones(self.run_index.size) if factor is None else np.ascontiguousarray(factor, dtype=float)
        self.active_columns = np.ascontiguousarray(self.columns[:, solver.active])
        #: The Jacobian columns of the predictions alone: none.
        self.no_columns = np.zeros((self.columns.shape[0], 0), dtype=np.int64)

    def solve(self, inputs: KineticInputs, with_jacobian: bool = True) -> tuple[np.ndarray, np.ndarray]:
        """(prediction (M,), jacobian (M, inputs)) for ``inputs`` in solver form; raises ``SolverFailure``.
        ``with_jacobian=False`` integrates the concentrations alone (1 + P times less work for P sensitivity
        parameters) and returns an empty (M, 0) Jacobian."""
        sensitivities, columns = self.solver.integrated, self.active_columns
        if not with_jacobian:
            sensitivities, columns = self.solver.no_sensitivities, self.no_columns
        prediction = np.empty(self.run_index.size)
        jacobian = np.empty((self.run_index.size, self.n_inputs if with_jacobian else 0))
        gather = Gather(self.run_index, self.time_index, self.species_index, columns, self.factor, prediction, jacobian)
        self.solver.integrate(inputs, sensitivities, gather)
        return prediction, jacobian


def compile_kernels(implicit: bool = True, explicit: bool = True) -> None:
    """Compile (or load from numba's on-disk cache) the integrator's entry points (``integrator``): the explicit one
    through both callers, profiles (``NetworkSolver.solve``) and predictions with their Jacobian
    (``MeasurementSolver.solve``), and, with ``implicit``, the implicit one (both callers pass it the same types)."""
    from .network import build_network, parse_equation

    network = build_network(("A", "B"), ("warm",), (parse_equation("A -> B"),))
    solver = NetworkSolver(network, [np.array([1.0])])
    inputs = KineticInputs(
        np.zeros((1, 1)), np.zeros((1, 0)), np.zeros((1, 0)), network.forward_orders, np.ones((1, 2))
    )
    if explicit:
        solver.solve(inputs)
        index = np.zeros(1, dtype=np.int64)
        columns = np.zeros((1, solver.n_params), dtype=np.int64)
        MeasurementSolver(solver, index, index, index, columns, max(solver.n_params, 1)).solve(inputs)
    if implicit:  # with no run left to it, the call only compiles it
        params = solver.integrated
        gather = solver._no_measurements(1, params.kind.size)
        integrator.implicit_measurements(*solver._arguments(inputs, params, gather, None, None))


_implicit_notice_given = False


def _say_implicit_compile() -> None:
    """Once per process, on stderr: that a first stiff run (or CSTR) compiles the implicit solver now."""
    global _implicit_notice_given
    if _implicit_notice_given:
        return
    _implicit_notice_given = True
    if integrator.implicit_compiled_on_disk() is not False:
        return
    print(
        "first stiff run (or CSTR) in this installation: compiling the implicit solver (numba), about half a "
        "minute; later fits reuse it",
        file=sys.stderr,
        flush=True,
    )


_background: multiprocessing.Process | None = None


def compile_in_background(implicit: bool = False) -> bool:
    """Start ``compile_kernels(implicit)`` in a forked process (Linux), so that a first fit compiles numba's kernels
    on one core while it imports PyMC and compiles the model's C code; the first solve in this process waits for it
    (``finish_background_compile``) and then loads the kernels from the cache. Call it before threads start
    (the CLI does, before importing PyMC). Returns whether a process was started."""
    global _background
    if _background is not None or not sys.platform.startswith("linux"):
        return False
    context = multiprocessing.get_context("fork")
    _background = context.Process(target=_compile_quietly, args=(implicit,), daemon=True)
    _background.start()
    return True


def _compile_quietly(implicit: bool) -> None:
    """``compile_kernels`` in the background process: Ctrl-C is the parent's to answer (it ends this daemon
    process on exit), and a failure only means the parent compiles for itself."""
    global _background
    _background = None  # the parent's handle, inherited by the fork: not this process's to wait for
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        compile_kernels(implicit)
    except Exception:  # nothing to report: the parent compiles what is missing
        sys.exit(1)


def background_compile_running() -> bool:
    """Whether the compiling process of ``compile_in_background`` is still at work."""
    return _background is not None and _background.is_alive()


def finish_background_compile() -> None:
    """Wait for the compiling process of ``compile_in_background``, if one runs (at once otherwise). Where it
    failed, the caller compiles the kernels itself, as without it."""
    global _background
    if _background is not None:
        _background.join()
        _background = None
