"""The plain alternative of ``benchmarks/whole_fit.py``: a study's network written directly in PyMC.

What a PyMC user who knows forward sensitivities would write in an afternoon, without Arrhenia: the study's
mass-action network (reversible steps through K_c, k_reverse = k_forward / K_c), its runs and measurements read
from the same study folder (``study.yaml`` in kelvin and kJ/mol, wide ``runs.csv`` and ``measurements.csv``), and

- one PyTensor Op for all runs: perform stacks every run's concentrations and their sensitivities to ln k and
  ln K_c (the forward-sensitivity system dS/dt = J S + N dr/dp) into one ODE system and integrates it with one
  call of scipy's ``odeint`` (LSODA: Adams while non-stiff, BDF when stiff) at the union of all sampling times;
  the Newton matrix of the BDF phase is the block-diagonal approximation (the network Jacobian J repeated per
  sensitivity column, the usual approximation of a simultaneous corrector), passed as a band of width
  2 x species - 1; its grad applies the stored sensitivities;
- the priors of the study (standardised: z ~ N(0, 1), Ea's truncated at zero), ln k(T) and ln K_c(T) about
  T_ref, a half-normal noise scale and a lognormal likelihood;
- ``pm.sample`` (NUTS, PyMC's default initialisation and diagonal mass-matrix adaptation) with the study's
  draws, tuning, chains, seed and target acceptance.

Run as ``python benchmarks/plain_pymc.py FOLDER LAUNCHED CALLS [DRAWS TUNE]`` by ``whole_fit.py`` (LAUNCHED:
the parent's ``time.time()`` when it started this process; CALLS: a folder for the ``CallLog`` of the Op); prints
one JSON line with its timings, gradient evaluations, min bulk ESS and the cost of one log-density-plus-gradient.

The measuring helpers (``CallLog``, ``unconstrained_points``, ``seconds_per_gradient``, ``milliseconds_along``)
serve both ways.
"""

from __future__ import annotations

import csv
import json
import os
import struct
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

GAS = 8.314462618  # J/(mol K)
Z95 = 1.959963984540054  # the 97.5 % point of the standard normal: a lognormal prior's "factor" is exp(Z95 sd)
TINY = 1e-300  # floor of a prediction before its log


# ------------------------------------------------------------------------------------------- the study
@dataclass(frozen=True)
class PlainStudy:
    """A mass-action network study in arrays. Energies J/mol, temperatures K; times, concentrations and rate
    constants in the study's units."""

    species: list[str]
    reactions: list[str]
    reactants: np.ndarray  # (R, S) stoichiometric coefficients of the reactants (the forward orders)
    products: np.ndarray  # (R, S) of the products (the reverse orders)
    reversible: np.ndarray  # (R,) bool
    ln_k_prior: np.ndarray  # (R, 2) mean and sd of ln k_ref
    ea_prior: np.ndarray  # (R, 2) mean and sd of Ea (J/mol)
    ln_eq_prior: np.ndarray  # (V, 2) mean and sd of ln K_c at T_ref, reversible steps in order
    dh_prior: np.ndarray  # (V, 2) mean and sd of dH (J/mol)
    t_ref: float
    temperature: np.ndarray  # (runs,) K
    initial: np.ndarray  # (runs, S)
    times: list[np.ndarray]  # sampling times of each run
    run_index: np.ndarray  # (M,) per measured value
    time_index: np.ndarray  # (M,) into times[run]
    species_index: np.ndarray  # (M,)
    value: np.ndarray  # (M,)
    sigma_scale: float
    sampling: dict


def _side(text: str, species: list[str]) -> np.ndarray:
    """Stoichiometric coefficients of one side of an equation ("2 A + B")."""
    row = np.zeros(len(species))
    for term in text.split("+"):
        parts = term.split()
        count, name = (float(parts[0]), parts[1]) if len(parts) == 2 else (1.0, parts[0])
        row[species.index(name)] += count
    return row


def _kelvin(text: str | float) -> float:
    value = str(text).split()
    if len(value) == 2 and value[1] != "K":
        raise ValueError("the plain alternative reads temperatures in K only")
    return float(value[0])


def read_study(path: Path) -> PlainStudy:
    """The study folder's network, priors and data (kelvin, kJ/mol, proportional noise, wide tables only)."""
    import yaml

    spec = yaml.safe_load(path.read_text())
    if spec["units"]["temperature"] != "K" or spec["units"]["energy"] != "kJ/mol":
        raise ValueError("the plain alternative reads studies in K and kJ/mol only")
    if spec.get("noise", {}).get("model", "proportional") != "proportional":
        raise ValueError("the plain alternative has lognormal noise only")
    species = list(spec["species"])
    reactants, products, reversible, ln_k, ea, ln_eq, dh = [], [], [], [], [], [], []
    for reaction in spec["reactions"]:
        if reaction.get("rate_law", "mass_action") != "mass_action":
            raise ValueError("the plain alternative has mass action only")
        both = "<=>" in reaction["equation"]
        left, right = reaction["equation"].split("<=>" if both else "->")
        reactants.append(_side(left, species))
        products.append(_side(right, species))
        reversible.append(both)
        ln_k.append((np.log(reaction["k_ref"]["median"]), np.log(reaction["k_ref"]["factor"]) / Z95))
        ea.append((reaction["Ea"]["mean"] * 1e3, reaction["Ea"]["sd"] * 1e3))
        if both:
            ln_eq.append((np.log(reaction["K_ref"]["median"]), np.log(reaction["K_ref"]["factor"]) / Z95))
            dh.append((reaction["dH"]["mean"] * 1e3, reaction["dH"]["sd"] * 1e3))
    folder = path.parent
    with (folder / spec["data"]["runs"]).open() as handle:
        runs = list(csv.DictReader(handle))
    with (folder / spec["data"]["measurements"]).open() as handle:
        rows = list(csv.DictReader(handle))
    run_ids = [row["run"] for row in runs]
    measured = [name for name in rows[0] if name in species]
    times = [np.array(sorted({float(r["time"]) for r in rows if r["run"] == run})) for run in run_ids]
    run_index, time_index, species_index, value = [], [], [], []
    for row in rows:
        r = run_ids.index(row["run"])
        t = int(np.searchsorted(times[r], float(row["time"])))
        for name in measured:
            if row[name] not in ("", None):
                run_index.append(r)
                time_index.append(t)
                species_index.append(species.index(name))
                value.append(float(row[name]))
    return PlainStudy(
        species=species,
        reactions=[r["name"] for r in spec["reactions"]],
        reactants=np.array(reactants),
        products=np.array(products),
        reversible=np.array(reversible),
        ln_k_prior=np.array(ln_k),
        ea_prior=np.array(ea),
        ln_eq_prior=np.array(ln_eq).reshape(-1, 2),
        dh_prior=np.array(dh).reshape(-1, 2),
        t_ref=_kelvin(spec["reference_temperature"]),
        temperature=np.array([_kelvin(row["temperature"]) for row in runs]),
        initial=np.array([[float(row.get(name) or 0.0) for name in species] for row in runs]),
        times=times,
        run_index=np.array(run_index),
        time_index=np.array(time_index),
        species_index=np.array(species_index),
        value=np.array(value),
        sigma_scale=float(spec.get("noise", {}).get("sigma", {}).get("scale", 0.2)),
        sampling=dict(spec.get("sampling", {})),
    )


# -------------------------------------------------------------------------------------------- kinetics
def _factor_indices(orders: np.ndarray, width: int, one: int) -> np.ndarray:
    """Each row's concentration factors as column indices, repeated by order, padded with ``one`` (the index
    of a column of ones): prod_q c1[:, index[row, q]] = prod_s c_s^orders[row, s] for integer orders."""
    index = np.full((orders.shape[0], width), one)
    for row, counts in enumerate(orders):
        factors = np.repeat(np.arange(orders.shape[1]), counts.astype(int))
        index[row, : factors.size] = factors
    return index


class MassAction:
    """A mass-action network as rate terms, for many runs at once (leading axis: run). Term t is the forward
    rate of step t (t < R) or the reverse rate of the t - R-th reversible step: rate_t = kappa_t prod c^orders_t,
    entering dc/dt with sign +/-1 times the step's stoichiometry."""

    def __init__(self, reactants: np.ndarray, products: np.ndarray, reversible: np.ndarray) -> None:
        if np.any(reactants % 1) or np.any(products % 1):
            raise ValueError("the plain alternative takes integer stoichiometric coefficients only")
        self.n_reactions, self.n_species = reactants.shape
        self.stoichiometry = products - reactants  # (R, S)
        self.reversible = np.flatnonzero(reversible)
        orders = np.concatenate([reactants, products[self.reversible]])  # (T, S)
        step = np.concatenate([np.arange(self.n_reactions), self.reversible])
        sign = np.concatenate([np.ones(self.n_reactions), -np.ones(self.reversible.size)])
        self.term_stoichiometry = sign[:, None] * self.stoichiometry[step]  # (T, S)
        width = max(1, int(orders.sum(axis=1).max()))
        self.factors = _factor_indices(orders, width, self.n_species)
        # d rate_t / dc_m = kappa_t a_tm prod c^(orders_t - e_m): one entry per (term, species) with a_tm > 0.
        self.pair_term, self.pair_species = np.nonzero(orders)
        reduced = orders[self.pair_term].copy()
        reduced[np.arange(self.pair_term.size), self.pair_species] -= 1.0
        self.pair_order = orders[self.pair_term, self.pair_species]
        self.pair_factors = _factor_indices(reduced, max(1, width - 1), self.n_species)
        # J[s, m] = sum over pairs of term_stoichiometry[t, s] * value_p where m = m_p: one matrix product.
        self.pair_to_jacobian = np.zeros((self.pair_term.size, self.n_species, self.n_species))
        for p, (t, m) in enumerate(zip(self.pair_term, self.pair_species, strict=True)):
            self.pair_to_jacobian[p, :, m] = self.term_stoichiometry[t]
        self.pair_to_jacobian = self.pair_to_jacobian.reshape(self.pair_term.size, -1)

    @staticmethod
    def _products(c1: np.ndarray, factors: np.ndarray) -> np.ndarray:
        out = c1[:, factors[:, 0]]
        for q in range(1, factors.shape[1]):
            out = out * c1[:, factors[:, q]]
        return out

    def with_ones(self, c: np.ndarray) -> np.ndarray:
        """c with a column of ones appended (in a buffer kept for the next call)."""
        if getattr(self, "_c1", np.empty(0)).shape != (c.shape[0], self.n_species + 1):
            self._c1 = np.ones((c.shape[0], self.n_species + 1))
        self._c1[:, : self.n_species] = c
        return self._c1

    def term_rates(self, c1: np.ndarray, kappa: np.ndarray) -> np.ndarray:
        """rate_t (runs, T) from concentrations with a column of ones (runs, S + 1) and kappa (runs, T)."""
        return kappa * self._products(c1, self.factors)

    def jacobian(self, c1: np.ndarray, kappa: np.ndarray) -> np.ndarray:
        """d(dc/dt)/dc (runs, S, S)."""
        values = kappa[:, self.pair_term] * self.pair_order * self._products(c1, self.pair_factors)
        return (values @ self.pair_to_jacobian).reshape(-1, self.n_species, self.n_species)


class SensitivitySystem:
    """All runs' concentrations and sensitivities to p = (ln k of every step, ln K_c of the reversible ones),
    stacked into one ODE system: y[run, column, species] with column 0 the concentrations, column 1 + p the
    sensitivities to p."""

    def __init__(self, study: PlainStudy, rtol: float = 1e-6, atol_share: float = 1e-9) -> None:
        self.network = MassAction(study.reactants, study.products, study.reversible)
        self.runs, self.n_species = study.initial.shape
        self.n_reactions = len(study.reactions)
        reversible = self.network.reversible
        self.n_params = self.n_reactions + reversible.size
        # d rate_t / d ln k_j = rate_t for both terms of step j (k_reverse = k / K_c), and
        # d rate_t / d ln K_c = -rate_t for the reverse term: source of column p = sum_t rate_t g_tp N_t.
        terms = self.n_reactions + reversible.size
        weight = np.zeros((terms, self.n_params))
        weight[np.arange(self.n_reactions), np.arange(self.n_reactions)] = 1.0
        weight[self.n_reactions + np.arange(reversible.size), reversible] = 1.0
        weight[self.n_reactions + np.arange(reversible.size), self.n_reactions + np.arange(reversible.size)] = -1.0
        self.term_to_source = (weight[:, :, None] * self.network.term_stoichiometry[:, None, :]).reshape(terms, -1)
        self.initial = np.zeros((self.runs, 1 + self.n_params, self.n_species))
        self.initial[:, 0] = study.initial
        self.grid = np.unique(np.concatenate([[0.0], *study.times]))
        self.grid_index = np.array(
            [
                np.searchsorted(self.grid, study.times[r][t])
                for r, t in zip(study.run_index, study.time_index, strict=True)
            ]
        )
        self.run_index, self.species_index = study.run_index, study.species_index
        self.rtol, self.atol = rtol, atol_share * float(study.initial.max())
        self.band = self.n_species - 1
        i, j = np.meshgrid(np.arange(self.n_species), np.arange(self.n_species), indexing="ij")
        self._band_rows, self._band_i, self._band_j = i - j + self.band, i, j

    def _constants(self, theta: np.ndarray) -> np.ndarray:
        """kappa (runs, T): k of every step, then k / K_c of the reversible ones."""
        k = np.exp(theta[:, : self.n_reactions])
        return np.concatenate([k, k[:, self.network.reversible] / np.exp(theta[:, self.n_reactions :])], axis=1)

    def rhs(self, y: np.ndarray, t: float, kappa: np.ndarray) -> np.ndarray:
        state = y.reshape(self.runs, 1 + self.n_params, self.n_species)
        network = self.network
        c1 = network.with_ones(state[:, 0])
        rates = network.term_rates(c1, kappa)
        out = np.empty_like(state)
        out[:, 0] = rates @ network.term_stoichiometry
        out[:, 1:] = np.matmul(state[:, 1:], network.jacobian(c1, kappa).transpose(0, 2, 1))
        out[:, 1:] += (rates @ self.term_to_source).reshape(self.runs, self.n_params, self.n_species)
        return out.ravel()

    def banded_jacobian(self, y: np.ndarray, t: float, kappa: np.ndarray) -> np.ndarray:
        """The block-diagonal Newton matrix in LSODA's band storage: band[i - j + mu, j] = J_full[i, j]."""
        network = self.network
        c1 = network.with_ones(y.reshape(self.runs, 1 + self.n_params, self.n_species)[:, 0])
        blocks = np.repeat(network.jacobian(c1, kappa), 1 + self.n_params, axis=0)  # (blocks, S, S)
        band = np.zeros((2 * self.band + 1, blocks.shape[0], self.n_species))
        band[self._band_rows, :, self._band_j] = np.moveaxis(blocks[:, self._band_i, self._band_j], 0, -1)
        return band.reshape(2 * self.band + 1, -1)

    def solve(self, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Predicted concentration at every measurement (M,) and its derivative to its own run's p (M, P);
        NaN predictions where the integration fails."""
        from scipy.integrate import odeint

        kappa = self._constants(theta)
        if not np.all(np.isfinite(kappa)):
            return self._failed()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            y, info = odeint(
                self.rhs,
                self.initial.ravel(),
                self.grid,
                args=(kappa,),
                Dfun=self.banded_jacobian,
                ml=self.band,
                mu=self.band,
                rtol=self.rtol,
                atol=self.atol,
                mxstep=20_000,
                full_output=True,
            )
        if info["message"] != "Integration successful." or not np.all(np.isfinite(y)):
            return self._failed()
        state = y.reshape(self.grid.size, self.runs, 1 + self.n_params, self.n_species)
        at = state[self.grid_index, self.run_index]  # (M, 1 + P, S)
        rows = np.arange(self.grid_index.size)
        return at[rows, 0, self.species_index], at[rows, 1:, self.species_index]

    def _failed(self) -> tuple[np.ndarray, np.ndarray]:
        return np.full(self.grid_index.size, np.nan), np.zeros((self.grid_index.size, self.n_params))


# ----------------------------------------------------------------------------------------------- PyMC
def build_model(study: PlainStudy, log: CallLog | None = None):
    """The PyMC model of the study (see the module docstring)."""
    import pymc as pm
    import pytensor.tensor as pt
    from pytensor.graph.basic import Apply
    from pytensor.graph.op import Op

    system = SensitivitySystem(study)
    # Sums each measurement's weighted sensitivities into its run's row of the gradient.
    to_runs = np.zeros((system.runs, study.value.size))
    to_runs[study.run_index, np.arange(study.value.size)] = 1.0

    class AllRuns(Op):
        """theta (runs, P) -> predictions (M,), d(prediction)/d(own run's theta) (M, P)."""

        def make_node(self, theta) -> Apply:
            return Apply(self, [pt.as_tensor_variable(theta)], [pt.dvector(), pt.dmatrix()])

        def perform(self, node, inputs, outputs) -> None:
            started = time.time()
            outputs[0][0], outputs[1][0] = system.solve(inputs[0])
            if log is not None:
                log.write(started, time.time())

        def grad(self, inputs, output_grads):
            _, sensitivity = self(inputs[0])
            return [pt.dot(to_runs, output_grads[0][:, None] * sensitivity)]

        def __eq__(self, other: object) -> bool:
            return self is other

        def __hash__(self) -> int:
            return id(self)

    inverse = (1.0 / study.temperature - 1.0 / study.t_ref)[:, None]
    coords = {
        "reaction": study.reactions,
        "reversible": [n for n, r in zip(study.reactions, study.reversible, strict=True) if r],
    }
    with pm.Model(coords=coords) as model:
        z_k = pm.Normal("z_ln_k_ref", 0.0, 1.0, dims="reaction")
        z_ea = pm.TruncatedNormal("z_Ea", 0.0, 1.0, lower=-study.ea_prior[:, 0] / study.ea_prior[:, 1], dims="reaction")
        ln_k_ref = pm.Deterministic("ln_k_ref", study.ln_k_prior[:, 0] + study.ln_k_prior[:, 1] * z_k, dims="reaction")
        ea = pm.Deterministic("Ea", study.ea_prior[:, 0] + study.ea_prior[:, 1] * z_ea, dims="reaction")
        theta = ln_k_ref[None, :] - ea[None, :] / GAS * inverse
        if study.reversible.any():
            z_eq = pm.Normal("z_ln_K_ref", 0.0, 1.0, dims="reversible")
            z_dh = pm.Normal("z_dH", 0.0, 1.0, dims="reversible")
            ln_eq_ref = pm.Deterministic(
                "ln_K_ref", study.ln_eq_prior[:, 0] + study.ln_eq_prior[:, 1] * z_eq, dims="reversible"
            )
            dh = pm.Deterministic("dH", study.dh_prior[:, 0] + study.dh_prior[:, 1] * z_dh, dims="reversible")
            theta = pt.concatenate([theta, ln_eq_ref[None, :] - dh[None, :] / GAS * inverse], axis=1)
        predicted, _ = AllRuns()(theta)
        failed = pt.any(pt.isnan(predicted))
        pm.Potential("solver_failed", pt.switch(failed, -np.inf, 0.0))
        predicted = pt.switch(pt.isnan(predicted), 1.0, predicted)
        sigma = pm.HalfNormal("sigma", sigma=study.sigma_scale)
        pm.LogNormal("y", mu=pt.log(pt.maximum(predicted, TINY)), sigma=sigma, observed=study.value)
    return model


# -------------------------------------------------------------------------------- shared measurements
class CallLog:
    """Start and end (``time.time()``, s) of every call, appended by any process to its own file in ``folder``;
    a few microseconds per call."""

    def __init__(self, folder: Path) -> None:
        self.folder = Path(folder)
        self._pid = -1
        self._fd = -1

    def write(self, started: float, ended: float) -> None:
        if os.getpid() != self._pid:  # opened once per process: chain processes are forked from the parent
            self._pid = os.getpid()
            self._fd = os.open(self.folder / f"calls-{self._pid}", os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
        os.write(self._fd, struct.pack("dd", started, ended))

    @staticmethod
    def read(folder: Path) -> dict[int, np.ndarray]:
        """pid: (calls, 2) start and end times."""
        return {
            int(path.name.split("-")[1]): np.frombuffer(path.read_bytes(), dtype=float).reshape(-1, 2)
            for path in Path(folder).glob("calls-*")
        }


def unconstrained_points(model, posterior, count: int) -> list[np.ndarray]:
    """``count`` posterior draws (evenly spread over chains and draws) as the raveled, transformed vectors
    ``model.logp_dlogp_function(ravel_inputs=True)`` takes."""
    import pytensor.tensor as pt

    columns = []
    for value in model.value_vars:
        variable = model.values_to_rvs[value]
        draws = posterior[variable.name].values
        draws = draws.reshape(-1, *draws.shape[2:])
        picked = draws[np.linspace(0, draws.shape[0] - 1, count).astype(int)]
        transform = model.rvs_to_transforms.get(variable)
        if transform is not None:
            picked = transform.forward(pt.as_tensor_variable(picked), *variable.owner.inputs).eval()
        columns.append(np.asarray(picked, dtype=float).reshape(count, -1))
    return list(np.concatenate(columns, axis=1))


#: Passes over the points in ``seconds_per_gradient``; the fastest is kept.
PASSES = 5


def seconds_per_gradient(model, points: list[np.ndarray]) -> float:
    """Wall time (s) of one compiled log-density-plus-gradient call: the mean over one call at each point, in the
    fastest of ``PASSES`` passes (after one warm-up call). Other work on a shared machine only ever adds time, so
    the fastest pass is the least disturbed (common practice, as Python's ``timeit`` advises)."""
    function = gradient_function(model)
    function(points[0])
    return min(one_pass(function, points) for _ in range(PASSES))


def gradient_function(model):
    """The model's compiled log-density-plus-gradient, a function of the raveled free variables."""
    function = model.logp_dlogp_function(ravel_inputs=True)
    function.set_extra_values({})
    return function


def one_pass(function, points: list[np.ndarray]) -> float:
    """Mean wall time (s) of one call of ``function`` at each of ``points``."""
    started = time.perf_counter()
    for point in points:
        function(point)
    return (time.perf_counter() - started) / len(points)


def milliseconds_along(model, name: str, index: int, z_values: list[float], repeats: int = 10) -> list[float]:
    """Mean wall time (ms) of one compiled log-density-plus-gradient call with the standard-normal variable
    ``name``[index] at each of ``z_values`` and every other value at the model's initial point (the priors'
    centre)."""
    function = model.logp_dlogp_function(ravel_inputs=True)
    function.set_extra_values({})
    out = []
    for z in z_values:
        point = model.initial_point()
        point[name] = np.array(point[name], dtype=float)
        point[name][index] = z
        x = np.concatenate([np.ravel(point[v.name]) for v in model.value_vars])
        function(x)
        started = time.perf_counter()
        for _ in range(repeats):
            function(x)
        out.append((time.perf_counter() - started) / repeats * 1e3)
    return out


# ------------------------------------------------------------------------------------------ the child
def child(folder: Path, launched: float, draws: int | None, tune: int | None, calls: Path) -> dict:
    """Build, compile and sample in this fresh interpreter; the parent launched it at ``launched``."""
    import logging

    import pymc as pm

    imported = time.time()
    logging.getLogger("pymc").setLevel(logging.ERROR)
    study = read_study(folder / "study.yaml")
    settings = {"draws": 1000, "tune": 1000, "chains": 4, "seed": 1, "target_accept": 0.9, **study.sampling}
    settings.update({key: value for key, value in {"draws": draws, "tune": tune}.items() if value is not None})
    model = build_model(study, CallLog(calls))
    built = time.time()
    draws_seen: list[float] = []

    def on_draw(trace, draw) -> None:
        if not draws_seen:
            draws_seen.append(time.time())

    with model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        idata = pm.sample(
            draws=settings["draws"],
            tune=settings["tune"],
            chains=settings["chains"],
            cores=min(settings["chains"], os.cpu_count() or 1),
            random_seed=settings["seed"],
            target_accept=settings["target_accept"],
            progressbar=False,
            discard_tuned_samples=False,
            callback=on_draw,
        )
    returned = time.time()

    from network_fit import min_bulk_ess

    steps = int(idata.sample_stats["n_steps"].sum()) + int(idata.warmup_sample_stats["n_steps"].sum())
    points = unconstrained_points(model, idata.posterior, 50)
    return {
        "launched": launched,
        "import_s": imported - launched,
        "build_s": built - imported,
        "first_draw": draws_seen[0] if draws_seen else None,
        "returned": returned,
        "total_s": returned - launched,
        "ess": min_bulk_ess(idata.posterior),
        "n_steps": steps,
        "n_steps_draws": int(idata.sample_stats["n_steps"].sum()),
        "divergences": int(idata.sample_stats["diverging"].sum()),
        "gradient_ms": seconds_per_gradient(model, points) * 1e3,
        "settings": settings,
    }


if __name__ == "__main__":
    # FOLDER LAUNCHED CALLS [DRAWS TUNE]
    counts = (int(sys.argv[4]), int(sys.argv[5])) if len(sys.argv) == 6 else (None, None)
    print(json.dumps(child(Path(sys.argv[1]), float(sys.argv[2]), *counts, Path(sys.argv[3]))))
