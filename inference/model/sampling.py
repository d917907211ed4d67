"""NUTS on the CPU with one integer seed, returning InferenceData with log-likelihood and predictions."""

from __future__ import annotations

import ctypes
import logging
import multiprocessing.context
import os
import re
import shutil
import signal
import sys
import tempfile
import time
import warnings
import weakref
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import arviz as az
import numpy as np
import pymc as pm
from pymc.blocking import DictToArrayBijection, RaveledVars
from pymc.model.core import ValueGradFunction
from pymc.step_methods.hmc.quadpotential import QuadPotential, QuadPotentialDiagAdapt, QuadPotentialFullAdapt
from scipy.optimize import minimize

from ..inputs.schema import Sampling
from ..processes import HOST as _HOST
from ..processes import heap_frozen_for_fork, pid_alive
from .memory import RecentPoints

#: Weight, in draws, of the Laplace variances in the first window of mass-matrix adaptation.
LAPLACE_WEIGHT = 10

_PR_SET_PDEATHSIG = 1  # from <linux/prctl.h>


def _die_with_parent(creator: int) -> None:
    """In a new chain process: ask Linux to SIGKILL it when its parent dies, so a ``kill -9`` of a fit leaves
    no chain running on (each holds hundreds of MB). A no-op where prctl is missing."""
    try:
        prctl = ctypes.CDLL(None, use_errno=True).prctl
    except (OSError, AttributeError):
        return
    if prctl(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0) != 0:
        return
    if os.getppid() != creator:  # the parent died before the request took effect
        os._exit(1)


class _ChainProcess(multiprocessing.context.ForkProcess):
    """A forked chain process that dies with the process that forked it (Linux).

    The death signal follows the *thread* that forked the child; PyMC forks from the thread that calls
    ``pm.sample`` and waits in it until the chains end, so that thread outlives them.
    """

    def __init__(self, *args: object, **kwargs: object) -> None:
        super().__init__(*args, **kwargs)
        self._creator = os.getpid()
        self._mask: set = set()

    def start(self) -> None:
        # Ctrl-C during the fork would land in at-fork hooks, where Python prints and drops it: the child dies, the
        # parent samples on unaware and then fails on the child's closed pipe. So it waits until the fork is done.
        self._mask = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})
        try:
            with heap_frozen_for_fork():
                super().start()
        finally:
            signal.pthread_sigmask(signal.SIG_SETMASK, self._mask)

    def run(self) -> None:
        _die_with_parent(self._creator)
        try:
            signal.pthread_sigmask(signal.SIG_SETMASK, self._mask)
            super().run()
        except KeyboardInterrupt:  # the Ctrl-C held back during the fork: the parent has it too and ends the fit
            return


class _ChainContext(multiprocessing.context.ForkContext):
    Process = _ChainProcess


def chain_context() -> multiprocessing.context.BaseContext | None:
    """The multiprocessing context for PyMC's chain processes: the usual fork context whose processes die
    with their parent on Linux; None (PyMC's own choice) elsewhere or where fork is not the default."""
    if not sys.platform.startswith("linux") or multiprocessing.get_start_method(allow_none=False) != "fork":
        return None
    return _ChainContext()


_SCRATCH = re.compile(r"^arrhenia-(?P<host>[A-Za-z0-9]*)-(?P<pid>\d+)-")


@contextmanager
def scratch_folder() -> Iterator[Path]:
    """A temporary folder for one fit, ``arrhenia-<host>-<pid>-*`` in the temp folder, removed at its end.

    Folders that fits killed outright (``kill -9``) left behind are removed first: those of this host whose
    process no longer runs. The host is in the name because processes of other machines or containers that
    share the temp folder have pids that mean nothing here; their folders are never touched.
    """
    root = Path(tempfile.gettempdir())
    try:
        entries = list(root.iterdir())
    except OSError:
        entries = []
    for entry in entries:
        match = _SCRATCH.match(entry.name)
        if match and match["host"] == _HOST and not pid_alive(int(match["pid"])):
            try:
                if entry.is_dir() and not entry.is_symlink() and entry.stat().st_uid == os.getuid():
                    shutil.rmtree(entry, ignore_errors=True)
            except OSError:
                continue
    with tempfile.TemporaryDirectory(prefix=f"arrhenia-{_HOST}-{os.getpid()}-") as folder:
        yield Path(folder)


def quiet_backend_logs() -> None:
    """Silence PyMC's and PyTensor's chatter; Arrhenia reports its own steps.

    pip-installed PyTensor finds no optimised BLAS here and says so; at the size of these models the
    fallback is fast enough, so the message is dropped rather than repeated to every user.
    """
    for name in ("pymc", "pytensor", "pymc.sampling", "pymc.stats.convergence"):
        logging.getLogger(name).setLevel(logging.ERROR)
    warnings.filterwarnings("ignore", message=".*BLAS.*")
    warnings.filterwarnings("ignore", category=FutureWarning, module="arviz")
    warnings.filterwarnings("ignore", category=UserWarning, module="pymc")
    # The only Potential is the solver guard, which rejects failed integrations; it has no predictive role.
    warnings.filterwarnings("ignore", message="The effect of Potentials")


def chains_in_parallel(chains: int, cores: int | None = None) -> int:
    """Chains run as parallel processes: ``cores`` if given, else at most one per core present."""
    return max(1, min(chains, cores or os.cpu_count() or 1))


_CENTRES: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def prior_centre(model: pm.Model) -> dict:
    """The initial point with every standardised z at 0 (the prior's centre; just inside a bound at 0).

    PyMC starts a bounded variable at 0 on its transformed scale, which for z_Ea (bounded below) is one unit
    above the bound, far from the centre of a prior whose mean is many sd above zero. (An ``initval`` on z_Ea would
    say the same, but PyMC cannot then rebuild the model for the pointwise log-likelihood.) Worked out once per
    model: the start check, the mode search and the sampler all begin here.
    """
    if model not in _CENTRES:
        point = model.initial_point()
        if "z_Ea" in model.named_vars:
            rv = model["z_Ea"]
            # Constant graphs: evaluated without a C compile (each would cost about 0.3 s).
            lower = np.asarray(rv.owner.inputs[-2].eval(mode="FAST_COMPILE"), dtype=float)
            centre = np.maximum(0.0, lower + 1e-3)
            transform = model.rvs_to_transforms[rv]
            forward = transform.forward(centre, *rv.owner.inputs)
            point[model.rvs_to_values[rv].name] = np.asarray(forward.eval(mode="FAST_COMPILE"), dtype=float)
        _CENTRES[model] = point
    return {name: np.copy(value) for name, value in _CENTRES[model].items()}


#: Fresh BFGS searches after one that stopped without converging (our choice).
RESTARTS = 5

#: Scales held at their priors' centre in a first mode search, keyed by the variable whose presence makes them
#: a funnel's: with centred group effects (``group_ln_k_ref``) the joint density grows without bound as their
#: spread goes to zero with every group alike, a spike of negligible mass that BFGS finds instead of the bulk
#: wherever the data do not pull the groups apart (docs/calibration.md, fix 5).
HELD_IN_MODE_SEARCH = {"group_ln_k_ref": "ln_k_spread"}
#: Variance given to a held scale in the initial mass matrix and the starts' spread (log scale; a half-normal
#: prior's log has a sd of about 1).
HELD_VARIANCE = 1.0
#: A held scale that falls this far (log units: a factor of 1000) below its prior's centre once freed has slid
#: into the spike (our choice; a posterior that far into a half-normal's tail has negligible mass).
SPIKE_DEPTH = np.log(1e3)


def _held_mask(model: pm.Model, mapped: RaveledVars) -> np.ndarray:
    """True for the elements of the raveled value vector that the mode search holds (``HELD_IN_MODE_SEARCH``)."""
    scales = [scale for marker, scale in HELD_IN_MODE_SEARCH.items() if marker in model.named_vars]
    held = {model.rvs_to_values[model[scale]].name for scale in scales}
    mask = []
    for name, _, size, _ in mapped.point_map_info:
        mask.extend([name in held] * size)
    return np.array(mask, dtype=bool)


#: Points the log density NUTS samples with remembers (``memory.RecentPoints``): more than the longest trajectory,
#: 2^10 leapfrog steps at PyMC's default maximum tree depth.
RECENT_POINTS = 2**11


def log_density_function(model: pm.Model, start: dict | None = None) -> ValueGradFunction:
    """The model's log density with its gradient, a function of the free variables raveled in PyMC's order
    (``model.continuous_value_vars``), compiled once per fit: the start check, the mode search and NUTS share it.
    It remembers the points it met last (``RecentPoints``; PyMC's leapfrog integrator calls the compiled function
    it holds directly)."""
    quiet_backend_logs()  # the first C compile of a fit is here, and PyTensor's BLAS notice with it
    log_density = model.logp_dlogp_function(ravel_inputs=True, initial_point=start or prior_centre(model))
    log_density.trust_input = True  # as NUTS sets it: inputs are float64 vectors of the right size
    log_density.set_extra_values({})
    log_density._pytensor_function = RecentPoints(log_density._pytensor_function, RECENT_POINTS)
    return log_density


def compile_ahead(model: pm.Model) -> None:
    """Compile the functions PyMC builds after the log density, from the graphs it builds them from: the traces'
    point function (``pm.sample``), the pointwise log-likelihood (``pm.compute_log_likelihood``) and the posterior
    predictive (``pm.sample_posterior_predictive``). PyTensor caches C code per operation, so PyMC's own compiles
    then find theirs (about 7 s of C code on a fresh installation, measured on the demo network). Worth it only
    where the process would wait anyway: a first fit, whose network solver compiles in a background process."""
    import pytensor
    from pymc.model.transform.conditioning import remove_value_transforms
    from pymc.pytensorf import compile as compile_function
    from pymc.sampling.forward import compile_forward_sampling_function

    quiet_backend_logs()
    compile_function(
        inputs=[pytensor.In(v, borrow=True) for v in model.value_vars],
        outputs=[pytensor.Out(v, borrow=True) for v in model.unobserved_value_vars],
        on_unused_input="ignore",
    )
    untransformed = remove_value_transforms(model)
    observed = list(untransformed.observed_RVs)
    untransformed.compile_fn(
        inputs=untransformed.value_vars, outs=untransformed.logp(vars=observed, sum=False), on_unused_input="ignore"
    )
    compile_forward_sampling_function(
        outputs=list(model.observed_RVs),
        vars_in_trace=[*model.free_RVs, *model.deterministics],
        basic_rvs=model.basic_RVs,
        givens_dict=None,
        allow_input_downcast=True,
        accept_inplace=True,
    )


def _raveled(model: pm.Model, point: dict) -> RaveledVars:
    return DictToArrayBijection.map({v.name: point[v.name] for v in model.continuous_value_vars})


def laplace_start(
    model: pm.Model, settings: Sampling, log_density: ValueGradFunction | None = None
) -> tuple[list[dict], QuadPotential, ValueGradFunction] | None:
    """Starting points and an initial mass matrix from the posterior mode and its curvature.

    Priors are standardised, but posteriors are often hundreds of times narrower than priors; NUTS would spend
    most of its tuning shrinking its step to that scale. So the mode is found with BFGS (exact gradients) and
    its inverse-Hessian approximation seeds the mass matrix (dense, or its diagonal); each chain starts from
    the mode moved by one approximate posterior sd in a random direction (seeded), so chains still start apart.
    Scales in ``HELD_IN_MODE_SEARCH`` are first held at their priors' centre (a conditional mode), then freed;
    the free mode is kept unless a scale slid into the spike of a funnel (``SPIKE_DEPTH``).
    Also returns the compiled log density (``log_density``, or ``log_density_function``'s), which NUTS then
    uses as it is. Returns None when the optimiser fails, and PyMC's default initialisation is used instead.
    """
    start = prior_centre(model)
    mapped = _raveled(model, start)
    held = _held_mask(model, mapped)
    value_and_gradient = log_density or log_density_function(model, start)

    def point(x: np.ndarray) -> dict:
        return DictToArrayBijection.rmap(RaveledVars(x, mapped.point_map_info))

    def logp(x: np.ndarray) -> float:
        return float(value_and_gradient(np.ascontiguousarray(x, dtype=float))[0])

    def search(x0: np.ndarray, free: np.ndarray):
        """BFGS over the ``free`` elements from ``x0`` (the rest held); the mode as a full vector, and the result."""

        def objective(y: np.ndarray) -> tuple[float, np.ndarray]:
            x = x0.copy()
            x[free] = y
            value, gradient = value_and_gradient(x)
            if not np.isfinite(value):
                return 1e300, np.zeros_like(y)
            return -float(value), -np.asarray(gradient, dtype=float)[free]

        def bfgs(y0: np.ndarray):
            with np.errstate(all="ignore"):
                return minimize(objective, y0, jac=True, method="BFGS", options={"maxiter": 400, "gtol": 1e-6})

        found = bfgs(x0[free])
        for _ in range(RESTARTS):
            # BFGS stops early when its line search meets draws the integrator cannot solve (the first steps
            # from the priors' centre can be long: data far from the predictions there). A fresh search from
            # where it stopped (its Hessian estimate reset) usually goes on; stop when one no longer improves.
            if found.success or not np.isfinite(found.fun):
                break
            again = bfgs(found.x)
            if not again.fun < found.fun - 1e-6 * abs(found.fun):
                break
            found = again
        x = x0.copy()
        x[free] = found.x
        return x, found

    def usable(x: np.ndarray, found) -> bool:
        return bool(np.all(np.isfinite(x)) and found.fun < 1e300)

    free = ~held
    mode, found = search(mapped.data, free)
    if held.any() and usable(mode, found):
        # Then everything free, from there: where the data pull the groups apart the centred model has a proper
        # mode; where they do not, the search slides into the spike and the conditional mode is kept.
        unheld, found_unheld = search(mode, np.ones_like(held))
        if usable(unheld, found_unheld) and np.all(unheld[held] > mode[held] - SPIKE_DEPTH):
            mode, found, free = unheld, found_unheld, np.ones_like(held)
    if not usable(mode, found):
        return None
    covariance = np.diag(np.full(mode.size, HELD_VARIANCE))
    covariance[np.ix_(free, free)] = _clipped_covariance(np.atleast_2d(found.hess_inv))
    variance = np.diag(covariance)
    rng = np.random.default_rng(settings.seed)
    starts = []
    # A draw from the Laplace approximation lies about d/2 below the mode's log density (chi-square with d
    # degrees of freedom, halved); a start much further down means the curvature estimate is poor there, and a
    # chain started so far out can settle in another basin. Such starts are pulled towards the mode.
    lowest = -found.fun - mode.size - 2.0
    for _ in range(settings.chains):
        for shrink in (1.0, 0.3, 0.1, 0.0):
            x = mode + shrink * np.sqrt(variance) * rng.standard_normal(mode.size)
            value = logp(x)
            if np.isfinite(value) and value >= lowest:
                break
        starts.append(point(x))
    potential: QuadPotential
    if settings.mass_matrix == "dense":
        potential = QuadPotentialFullAdapt(mode.size, mode, covariance, LAPLACE_WEIGHT)
    else:
        potential = QuadPotentialDiagAdapt(mode.size, mode, variance, LAPLACE_WEIGHT)
    return starts, potential, value_and_gradient


def _clipped_covariance(inverse_hessian: np.ndarray) -> np.ndarray:
    """BFGS's inverse-Hessian approximation made a usable covariance: symmetric, eigenvalues in [1e-10, 10]
    (the standardised priors have unit scale, so a posterior variance above 10 is an artefact of the search)."""
    symmetric = 0.5 * (inverse_hessian + inverse_hessian.T)
    values, vectors = np.linalg.eigh(symmetric)
    return (vectors * np.clip(values, 1e-10, 10.0)) @ vectors.T


def non_finite_start(model: pm.Model, log_density: ValueGradFunction | None = None) -> tuple[list[str], np.ndarray]:
    """At the initial point (every prior at its centre): the names of terms whose log-density is not finite,
    and the indices of measurements whose log-likelihood is not finite. Where the whole log density
    (``log_density``, or one compiled here) is finite there are none, and nothing else is compiled."""
    quiet_backend_logs()
    start = prior_centre(model)
    log_density = log_density or log_density_function(model, start)
    with np.errstate(all="ignore"):
        if np.isfinite(log_density(_raveled(model, start).data)[0]):
            return [], np.array([], dtype=int)
        terms = model.point_logps(start)
        bad = [name for name, value in terms.items() if not np.isfinite(value)]
        if not bad and not np.isfinite(float(model.compile_logp()(start))):
            # point_logps leaves out Potentials; the only one is the guard against failed integrations.
            bad = ["solver_guard"]
        observation_logp = model.logp(vars=[model["observation"]], sum=False)[0]
        pointwise_logp = model.compile_fn(observation_logp, inputs=model.value_vars, on_unused_input="ignore")
        pointwise = np.asarray(pointwise_logp(start))
    return bad, np.flatnonzero(~np.isfinite(np.atleast_1d(pointwise)))


def sample_posterior(
    model: pm.Model,
    settings: Sampling,
    *,
    progress: bool,
    failure_log: Path | None = None,
    predictive: bool = True,
    timings: dict[str, float] | None = None,
    log_density: ValueGradFunction | None = None,
) -> tuple[az.InferenceData, int]:
    """Run NUTS and add the pointwise log-likelihood and (unless ``predictive`` is False) the posterior
    predictive of the observations.

    Chains get seeds derived by PyMC from ``settings.seed``; the predictive draws use ``seed + 1``, so one
    integer fixes every number. Returns the InferenceData and the number of failed integrations during
    sampling (counted from ``failure_log``, to which every process appends a line per failure).
    ``log_density``: the model's ``log_density_function`` where the caller compiled it already.
    """
    quiet_backend_logs()
    clock = _Clock(timings if timings is not None else {})
    with model:
        laplace = laplace_start(model, settings, log_density)
        clock.lap("mode search" if log_density is not None else "mode search (compiles log-density and gradient)")
        if failure_log is not None:
            failure_log.write_text("")  # failures while finding the mode are part of the search, not of sampling
        init = "jitter+adapt_full" if settings.mass_matrix == "dense" else "jitter+adapt_diag"
        extra: dict = {"target_accept": settings.target_accept, "init": init}
        if laplace is not None:
            starts, potential, value_and_gradient = laplace
            step = pm.NUTS(
                potential=potential, target_accept=settings.target_accept, logp_dlogp_func=value_and_gradient
            )
            extra = {"initvals": starts, "step": step}
            clock.lap("compile NUTS step")
        try:
            idata = pm.sample(
                draws=settings.draws,
                tune=settings.tune,
                chains=settings.chains,
                cores=chains_in_parallel(settings.chains, settings.cores),
                random_seed=settings.seed,
                progressbar=progress,
                compute_convergence_checks=False,
                idata_kwargs={"log_likelihood": True},
                mp_ctx=chain_context(),
                callback=clock.on_draw,
                **extra,
            )
        except ValueError as error:
            # PyMC answers Ctrl-C before the first kept draw with this (draws are at least 10, so nothing else can).
            if "Not enough samples to build a trace" in str(error):
                raise KeyboardInterrupt("sampling was interrupted") from None
            raise
        got = idata.posterior.sizes
        if got.get("chain", 0) < settings.chains or got.get("draw", 0) < settings.draws:
            # PyMC answers Ctrl-C by returning the draws made so far; a partial posterior is never a result.
            raise KeyboardInterrupt("sampling was interrupted")
        clock.sampled()
        failures = len(failure_log.read_text().splitlines()) if failure_log is not None else 0
        if predictive:
            pm.sample_posterior_predictive(
                idata, extend_inferencedata=True, random_seed=settings.seed + 1, progressbar=False
            )
            clock.lap("posterior predictive")
    return idata, failures


class _Clock:
    """Splits the wall time of sampling into parts (s), written into ``timings``: PyMC's per-draw callback
    marks the first draw of any chain, which separates starting the chains' processes (and compiling there,
    when no step was built beforehand) from the draws themselves."""

    def __init__(self, timings: dict[str, float]) -> None:
        self.timings = timings
        self.last = time.perf_counter()
        self.first_draw: float | None = None

    def lap(self, part: str) -> None:
        now = time.perf_counter()
        self.timings[part] = round(now - self.last, 3)
        self.last = now

    def on_draw(self, trace: object, draw: object) -> None:
        if self.first_draw is None:
            self.first_draw = time.perf_counter()

    def sampled(self) -> None:
        if self.first_draw is not None:
            self.timings["start chains to first draw"] = round(self.first_draw - self.last, 3)
            self.last = self.first_draw
        self.lap("NUTS tuning and draws")
