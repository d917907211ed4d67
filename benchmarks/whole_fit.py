"""Benchmark: whole fits, as a user waits for them, against a plain PyMC alternative (issue #18).

Problems (invented; data simulated here with scipy's Radau at rtol 1e-10 and lognormal noise):
- ``network``: the problem of ``benchmarks/network_fit.py`` (its generator and constants, imported): 2 steps,
  4 species, 4 runs, 180 values, seed 12345.
- ``process-12``: five mass-action steps in seven species, A + B -> C, C -> D, C + B -> E, D -> F, A -> G (true
  values in ``PROCESS_STEPS``), 12 runs at six temperatures (310-360 K, two starting compositions each), 15
  sampling times per run up to 80 % conversion of A, A, C, D, E and G measured with 5 % lognormal noise
  (900 values, seed 20260718). ``process-24``: the same design doubled with two other starting compositions
  (1800 values; its first 12 runs are the 12-run data set).
- ``stiff``: a fast binding pre-equilibrium S + Cat <=> SCat (k_ref 1e4 L/(mol min), K_c 50 L/mol at T_ref: both
  directions fast) ahead of a slow step SCat -> P + Cat (0.5 1/min), catalyst at 2 % of the substrate, five runs
  at 300-340 K, S and P measured at 15 times up to 90 % conversion (150 values, seed 20260719).
  ``stiff-held``: the same data with the binding step declared ``fast_equilibrium`` (held at equilibrium: K_ref and
  dH, no k_ref or Ea); Arrhenia only (the plain way has no such step). Its whole fit is set against the network
  problem's (2 steps, 4 species, 180 values: a non-stiff network of its size). ``stiff-dense`` and
  ``stiff-held-dense``: the same two with ``sampling: {mass_matrix: dense}`` (what a fit that needs many gradient
  evaluations per draw advises); Arrhenia only. ``stiff-saturating-dense``: the held problem's twin of its size on
  the same data, the saturating law S -> P that holding the binding gives where the catalyst is scarce
  (``saturating_text``), dense mass matrix; Arrhenia only, set against ``stiff-held-dense``.
All: T_ref stated, priors off the true values (``PROCESS_STEPS``, ``STIFF_STEPS``), proportional noise with
sigma ~ HalfNormal(0.2), 2 chains x 500 tuning + 500 draws, seed 1 (``--quick``: 2 x 100 + 100).

Ways, each a fresh interpreter started by this script:
1. Arrhenia: ``arrhenia fit`` on the study folder (YAML + CSV in a temporary folder); for ``network``, the two
   held ones and the saturating twin twice, the second (warm PyTensor and numba caches) reported, these fits
   before all others: the warm-up fits, then the reported ones one after the other. The launcher adds one thing
   to the command: it logs the start and end of every call of the Op (``NetworkPrediction.perform``: one
   log-density-plus-gradient) per process, which costs microseconds per call. The manifest's ``timings_s``
   are read back and printed.
2. plain: ``benchmarks/plain_pymc.py`` (the same model written directly in PyMC: odeint on the stacked
   forward-sensitivity system of all runs in one Op, ``pm.sample``), its Op logged the same way.

Columns: setup = launch to the first log-density-plus-gradient in a chain process (interpreter, imports,
validation, model, compilation, mode search, process start); sampling = first to last such call in the chain
processes (tuning and draws); after = the rest (posterior predictive, pointwise log-likelihood, outputs; for the
plain way its ``pm.sample`` return); total = launch to exit (plain: to ``pm.sample``'s return). Gradient
evaluations: Op calls in the chain processes (the sum of NUTS's ``n_steps`` over tuning and draws, plus one per
iteration for the plain way: PyMC evaluates the start of every trajectory again, which Arrhenia's log density
remembers, ``model.sampling.RecentPoints``). Cost per gradient (ms/grad): the mean of 50 calls
of the compiled log-density-plus-gradient (``model.logp_dlogp_function``) at 50 posterior draws (the fastest of
five passes over them: ``plain_pymc.seconds_per_gradient``), in a separate
process after the fit (for Arrhenia with the model the study builds,
``open_problem(load_study(path)).build_model(T_ref, None)``); in-run ms: the mean Op call in the chain processes,
as sampling met it (two chains on two cores, and whatever else runs). For ``process`` the two problems' costs are also
measured side by side in one process, their passes alternating (the machine's speed drifts by tens of percent
between minutes), and that ratio is the one set against the target. Min ESS: bulk, over ln k_ref and Ea.
ESS/s: per second of total wall time. For ``stiff`` the cost of one log-density-plus-gradient of both models is
also measured with the binding step's k_ref at 0.1, 1, 10 and 100 times its prior median (the rest at the priors'
centre): how the cost grows as the posterior reaches into stiffer regions.

Targets (issue #18): Arrhenia's ESS/s >= 2x the plain way's on ``network`` with the whole fit <= 10 s; on
``process`` sampling wall <= 1.5x (gradient evaluations x cost per gradient / cores) and the 24-run cost per
gradient <= 2.1x the 12-run one; ``stiff`` done in <= 300 s (stopped at ``--timeout``, default 600 s).

Run: ``python benchmarks/whole_fit.py [--quick] [--only network,process,stiff] [--timeout S] [--keep DIR]
[--arrhenia-only]``; 70 minutes
in full on the 2-core machine (``--quick``: a smoke check). Needs no extra packages.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import network_fit
import numpy as np
from plain_pymc import GAS, CallLog, MassAction

HERE = Path(__file__).resolve().parent
DRAWS = {"full": (500, 500), "quick": (100, 100)}  # (tune, draws) per chain
LONG = 3600.0  # s: the limit of every process but a stiff fit's (``--timeout``)


# ------------------------------------------------------------------------------------------ problems
@dataclass(frozen=True)
class Step:
    """One step: true k at T_ref (study units) and Ea (kJ/mol), its priors (k: median, factor; Ea: mean, sd);
    reversible steps also K_c at T_ref, dH (kJ/mol) and their priors."""

    name: str
    equation: str
    k: float
    ea: float
    k_prior: tuple[float, float]
    ea_prior: tuple[float, float]
    K: float | None = None
    dh: float | None = None
    K_prior: tuple[float, float] | None = None
    dh_prior: tuple[float, float] | None = None


@dataclass(frozen=True)
class Design:
    """An invented study: network, runs (temperature K, starting concentrations mol/L), what is measured."""

    name: str
    species: tuple[str, ...]
    steps: tuple[Step, ...]
    t_ref: float
    runs: tuple[tuple[float, dict[str, float]], ...]
    observed: tuple[str, ...]
    key: str  # sampling times run up to ``conversion`` of this species
    conversion: float
    seed: int
    points: int = 15
    noise: float = 0.05


PROCESS_STEPS = (
    Step("coupling", "A + B -> C", 0.05, 65.0, (0.1, 10.0), (75.0, 25.0)),
    Step("rearrangement", "C -> D", 0.02, 85.0, (0.01, 10.0), (75.0, 25.0)),
    Step("overreaction", "C + B -> E", 0.01, 75.0, (0.02, 10.0), (70.0, 25.0)),
    Step("degradation", "D -> F", 0.01, 90.0, (0.005, 10.0), (80.0, 25.0)),
    Step("hydrolysis", "A -> G", 0.003, 60.0, (0.005, 10.0), (70.0, 25.0)),
)
PROCESS_TEMPERATURES = (310.0, 320.0, 330.0, 340.0, 350.0, 360.0)
PROCESS_START = ({"A": 1.0, "B": 1.5}, {"A": 0.8, "B": 2.0})  # the 12-run design, at every temperature
PROCESS_MORE = ({"A": 1.2, "B": 1.4}, {"A": 0.6, "B": 1.8})  # what the 24-run design adds
STIFF_STEPS = (
    Step("binding", "S + Cat <=> SCat", 1e4, 25.0, (1e4, 10.0), (30.0, 20.0), 50.0, -25.0, (30.0, 10.0), (-20.0, 20.0)),
    Step("turnover", "SCat -> P + Cat", 0.5, 80.0, (0.3, 10.0), (75.0, 25.0)),
)


def _process(runs: int) -> Design:
    starts = PROCESS_START if runs == 12 else PROCESS_START + PROCESS_MORE
    return Design(
        name=f"process-{runs}",
        species=("A", "B", "C", "D", "E", "F", "G"),
        steps=PROCESS_STEPS,
        t_ref=335.0,
        runs=tuple((t, start) for start in starts for t in PROCESS_TEMPERATURES),
        observed=("A", "C", "D", "E", "G"),
        key="A",
        conversion=0.8,
        seed=20260718,
    )


STIFF = Design(
    name="stiff",
    species=("S", "Cat", "SCat", "P"),
    steps=STIFF_STEPS,
    t_ref=320.0,
    runs=tuple((t, {"S": 1.0, "Cat": 0.02}) for t in (300.0, 310.0, 320.0, 330.0, 340.0)),
    observed=("S", "P"),
    key="S",
    conversion=0.9,
    seed=20260719,
)


def _network(design: Design) -> MassAction:
    """The design's network in the plain module's mass-action form (one implementation of the rates)."""
    species = list(design.species)

    def side(text: str) -> np.ndarray:
        row = np.zeros(len(species))
        for name in text.split("+"):
            row[species.index(name.strip())] += 1.0
        return row

    sides = [step.equation.replace("<=>", "->").split("->") for step in design.steps]
    return MassAction(
        np.array([side(left) for left, _ in sides]),
        np.array([side(right) for _, right in sides]),
        np.array([step.K is not None for step in design.steps]),
    )


def _kappa(design: Design, kelvin: float) -> np.ndarray:
    """The true rate constants at ``kelvin``: k of every step, then k / K_c of the reversible ones."""
    shift = 1.0 / kelvin - 1.0 / design.t_ref
    k = np.array([s.k * np.exp(-s.ea * 1e3 / GAS * shift) for s in design.steps])
    back = [k[j] / (s.K * np.exp(-s.dh * 1e3 / GAS * shift)) for j, s in enumerate(design.steps) if s.K is not None]
    return np.concatenate([k, back])


def simulate(design: Design) -> list[tuple[np.ndarray, np.ndarray]]:
    """Per run: sampling times and noisy measured concentrations (times, observed)."""
    from scipy.integrate import solve_ivp

    network = _network(design)
    rng = np.random.default_rng(design.seed)
    key = design.species.index(design.key)
    columns = [design.species.index(name) for name in design.observed]
    out = []
    for kelvin, start in design.runs:
        kappa = _kappa(design, kelvin)[None, :]
        c0 = np.array([start.get(name, 0.0) for name in design.species])

        def rhs(t, c, kappa=kappa):
            return (network.term_rates(network.with_ones(c[None, :]), kappa) @ network.term_stoichiometry)[0]

        def jac(t, c, kappa=kappa):
            return network.jacobian(network.with_ones(c[None, :]), kappa)[0]

        def reached(t, c, c0=c0):
            return c[key] - (1.0 - design.conversion) * c0[key]

        reached.terminal = True
        ends = solve_ivp(rhs, (0.0, 1e7), c0, method="Radau", jac=jac, events=reached, rtol=1e-10, atol=1e-14)
        times = np.linspace(1.0, design.points, design.points) * ends.t_events[0][0] / design.points
        profile = solve_ivp(rhs, (0.0, times[-1]), c0, method="Radau", jac=jac, t_eval=times, rtol=1e-10, atol=1e-14)
        noise = np.exp(design.noise * rng.standard_normal((design.points, len(columns))))
        out.append((times, profile.y.T[:, columns] * noise))
    return out


def study_text(design: Design, held: tuple[str, ...] = (), mass_matrix: str = "diagonal") -> str:
    """The study file (kelvin, kJ/mol, minutes, mol/L); the steps named in ``held`` are declared
    ``fast_equilibrium`` (held at equilibrium: K_ref and dH only); NUTS with ``mass_matrix``."""
    lines = [
        f"study: {design.name}",
        "units: {time: min, temperature: K, concentration: mol/L, energy: kJ/mol}",
        "data: {runs: runs.csv, measurements: measurements.csv}",
        f"species: [{', '.join(design.species)}]",
        "reactions:",
    ]
    for step in design.steps:
        lines += [f"  - name: {step.name}", f"    equation: {step.equation}"]
        if step.name in held:
            lines.append("    fast_equilibrium: true")
        else:
            lines += [
                f"    k_ref: {{median: {step.k_prior[0]:g}, factor: {step.k_prior[1]:g}}}",
                f"    Ea: {{mean: {step.ea_prior[0]:g}, sd: {step.ea_prior[1]:g}}}",
            ]
        if step.K_prior is not None and step.dh_prior is not None:
            lines += [
                f"    K_ref: {{median: {step.K_prior[0]:g}, factor: {step.K_prior[1]:g}}}",
                f"    dH: {{mean: {step.dh_prior[0]:g}, sd: {step.dh_prior[1]:g}}}",
            ]
    lines += [
        f"reference_temperature: {design.t_ref:g} K",
        "noise: {model: proportional, sigma: {scale: 0.2}}",
        f"sampling: {{draws: 500, tune: 500, chains: 2, seed: 1, mass_matrix: {mass_matrix}}}",
    ]
    return "\n".join(lines) + "\n"


def write_design(design: Design, folder: Path, study: str, species: tuple[str, ...] | None = None) -> Path:
    """The design's data as an Arrhenia study folder with the study file ``study``; runs.csv has the starting
    concentrations of ``species`` (default: all of the design's). Returns the study file."""
    folder.mkdir(parents=True, exist_ok=True)
    data = simulate(design)
    species = design.species if species is None else species
    runs = ["run,temperature," + ",".join(species)]
    runs += [
        f"r{i + 1},{t:g}," + ",".join(f"{start.get(s, 0.0):g}" for s in species)
        for i, (t, start) in enumerate(design.runs)
    ]
    measurements = ["run,time," + ",".join(design.observed)]
    for i, (times, values) in enumerate(data):
        measurements += [
            f"r{i + 1},{t:.8g}," + ",".join(f"{v:.8g}" for v in row) for t, row in zip(times, values, strict=True)
        ]
    (folder / "runs.csv").write_text("\n".join(runs) + "\n")
    (folder / "measurements.csv").write_text("\n".join(measurements) + "\n")
    path = folder / "study.yaml"
    path.write_text(study)
    return path


def saturating_text(mass_matrix: str) -> str:
    """``stiff-saturating``: the held study's non-stiff twin of its size. Where the catalyst is scarce, holding the
    binding at equilibrium gives the rate r = k K_c [Cat]0 [S] / (1 + K_c [S]) of the turnover (k) (the pre-
    equilibrium of Atkins and de Paula, "Atkins' Physical Chemistry", 8th ed., sec. 22.7, with the catalyst balance
    [Cat]0 = [Cat] + [SCat]), a saturating law in S whose k_eff = k K_c [Cat]0 takes the catalyst (0.02 mol/L in
    every run): S -> P with k_ref, Ea, K_ref and dH, four kinetic parameters as the held study has, on its 5 runs
    and 150 values (true k_eff 0.5 1/min at T_ref, Ea_eff 55 kJ/mol, K_c 50 L/mol, dH -25 kJ/mol; it counts the
    2 % of S bound to the catalyst as S). Priors: those of the held study's two steps, multiplied (k) and added
    (Ea) as independent lognormals and normals."""
    binding, turnover = STIFF_STEPS
    catalyst = STIFF.runs[0][1]["Cat"]
    factor = float(np.exp(np.hypot(np.log(turnover.k_prior[1]), np.log(binding.K_prior[1]))))
    lines = [
        "study: stiff-saturating",
        "units: {time: min, temperature: K, concentration: mol/L, energy: kJ/mol}",
        "data: {runs: runs.csv, measurements: measurements.csv}",
        "species: [S, P]",
        "reactions:",
        "  - name: turnover",
        "    equation: S -> P",
        "    rate_law: saturating",
        f"    adsorption: {{S: {{K_ref: {{median: {binding.K_prior[0]:g}, factor: {binding.K_prior[1]:g}}}, "
        f"dH: {{mean: {binding.dh_prior[0]:g}, sd: {binding.dh_prior[1]:g}}}}}}}",
        f"    k_ref: {{median: {turnover.k_prior[0] * binding.K_prior[0] * catalyst:g}, factor: {factor:.3g}}}",
        f"    Ea: {{mean: {turnover.ea_prior[0] + binding.dh_prior[0]:g}, "
        f"sd: {np.hypot(turnover.ea_prior[1], binding.dh_prior[1]):.3g}}}",
        f"reference_temperature: {STIFF.t_ref:g} K",
        "noise: {model: proportional, sigma: {scale: 0.2}}",
        f"sampling: {{draws: 500, tune: 500, chains: 2, seed: 1, mass_matrix: {mass_matrix}}}",
    ]
    return "\n".join(lines) + "\n"


def write_problem(name: str, root: Path) -> Path:
    """Write problem ``name`` into ``root/name``; returns its study file."""
    folder = root / name
    if name == "network":
        folder.mkdir(parents=True, exist_ok=True)
        return network_fit.write_study(folder)
    if name.startswith("stiff"):  # -held: the binding step declared fast_equilibrium; -saturating: the twin
        mass_matrix = "dense" if name.endswith("-dense") else "diagonal"
        if "-saturating" in name:  # the same data, S and P alone
            return write_design(STIFF, folder, saturating_text(mass_matrix), ("S", "P"))
        return write_design(STIFF, folder, study_text(STIFF, ("binding",) if "-held" in name else (), mass_matrix))
    design = _process(int(name.split("-")[1]))
    return write_design(design, folder, study_text(design))


PROBLEMS = (
    "network",
    "process-12",
    "process-24",
    "stiff",
    "stiff-held",
    "stiff-dense",
    "stiff-held-dense",
    "stiff-saturating-dense",
)
#: Problems fitted by Arrhenia alone: the plain way has no held step, and its own sampler settings.
ARRHENIA_ONLY = ("stiff-held", "stiff-dense", "stiff-held-dense", "stiff-saturating-dense")
#: Problems whose whole fit is set against a target in seconds or against another whole fit: fitted twice and the
#: second fit reported, so that both sides of a ratio are measured with warm caches.
FITTED_TWICE = ("network", "stiff-held", "stiff-held-dense", "stiff-saturating-dense")


# ------------------------------------------------------------------------------------------- running
def _run(command: list[str], timeout: float) -> tuple[subprocess.CompletedProcess | None, float, float, int]:
    """Run ``command`` in its own process group; returns (completed or None on timeout, launch time, exit
    time, pid). On timeout the whole group (the command and its chain processes) is stopped."""
    launched = time.time()
    process = subprocess.Popen(
        command,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    try:
        out, err = process.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        os.killpg(process.pid, signal.SIGTERM)
        try:
            process.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            os.killpg(process.pid, signal.SIGKILL)
            process.communicate()
        return None, launched, time.time(), process.pid
    return subprocess.CompletedProcess(command, process.returncode, out, err), launched, time.time(), process.pid


def _last_line(done: subprocess.CompletedProcess) -> str:
    """The last line a failed process wrote (its error)."""
    lines = (done.stderr or done.stdout or "").strip().splitlines()
    return lines[-1] if lines else f"exit {done.returncode}"


def _last_json(text: str) -> dict:
    return json.loads(text.strip().splitlines()[-1])


def _chain_calls(calls: Path, parent: int) -> tuple[np.ndarray, int]:
    """Op calls (start, end) of the chain processes, and the number of calls in the parent process."""
    logs = CallLog.read(calls)
    chains = [log for pid, log in logs.items() if pid != parent]
    return (np.concatenate(chains) if chains else np.zeros((0, 2))), len(logs.get(parent, ()))


def _row(launched: float, ended: float, calls: np.ndarray, parent_calls: int) -> dict:
    """The columns every way shares, from the launch and end times and the Op calls of the chains."""
    if not calls.size:
        return {"total_s": ended - launched, "evaluations": 0, "parent_calls": parent_calls}
    first, last = float(calls[:, 0].min()), float(calls[:, 1].max())
    return {
        "setup_s": first - launched,
        "sampling_s": last - first,
        "after_s": ended - last,
        "total_s": ended - launched,
        "evaluations": int(calls.shape[0]),
        "in_op_ms": float(np.mean(calls[:, 1] - calls[:, 0]) * 1e3),
        "in_op_s": float(np.sum(calls[:, 1] - calls[:, 0])),
        "parent_calls": parent_calls,
    }


def run_arrhenia(study: Path, work: Path, tag: str, draws: list[str], timeout: float) -> dict:
    """``arrhenia fit`` in a fresh interpreter, then its posterior measured in another."""
    calls = work / f"calls-{tag}"
    calls.mkdir()
    results = work / f"results-{tag}"
    command = [sys.executable, __file__, "--arrhenia-fit", str(calls), "fit", str(study), "--out", str(results)]
    done, launched, ended, pid = _run([*command, "--quiet", *draws], timeout)
    row = _row(launched, ended, *_chain_calls(calls, pid))
    if done is None:
        return {**row, "finished": False}
    if not (results / "manifest.json").is_file():
        return {**row, "finished": False, "error": _last_line(done)}
    row |= {"finished": True, "exit": done.returncode}
    row["timings"] = json.loads((results / "manifest.json").read_text())["timings_s"]
    measured, *_ = _run([sys.executable, __file__, "--arrhenia-measure", str(results), str(study)], timeout)
    if measured is None or measured.returncode:
        raise RuntimeError(f"measuring {results} failed: {measured.stderr if measured else 'timeout'}")
    return row | _last_json(measured.stdout)


def run_plain(study: Path, work: Path, tag: str, draws: list[str], timeout: float) -> dict:
    """The plain alternative in a fresh interpreter."""
    calls = work / f"calls-{tag}"
    calls.mkdir()
    counts = [draws[1], draws[3]] if draws else []
    launched = time.time()
    command = [sys.executable, str(HERE / "plain_pymc.py"), str(study.parent), repr(launched), str(calls), *counts]
    done, _, ended, pid = _run(command, timeout)
    calls_done, parent_calls = _chain_calls(calls, pid)
    if done is None or done.returncode:
        error = "" if done is None else _last_line(done)
        return {**_row(launched, ended, calls_done, parent_calls), "finished": False, "error": error}
    result = _last_json(done.stdout)
    row = _row(launched, result["returned"], calls_done, parent_calls)
    return {**row, **result, "finished": True, "total_s": result["total_s"]}


# --------------------------------------------------------------------------------------- the children
def arrhenia_fit_child(calls: str, argv: list[str]) -> None:
    """``arrhenia fit`` (the console entry point, which exits) with every Op call logged (start and end, per
    process)."""
    from inference.cli import command_pytensor_cache, console
    from inference.processes import own_pytensor_cache

    own_pytensor_cache(command_pytensor_cache())  # as ``console`` does, before the Op's import brings in PyTensor
    from inference.model.ops import NetworkPrediction

    log = CallLog(Path(calls))
    perform = NetworkPrediction.perform

    def logged(self, node, inputs, outputs) -> None:
        started = time.time()
        perform(self, node, inputs, outputs)
        log.write(started, time.time())

    NetworkPrediction.perform = logged
    console(argv)


def _fitted_model(folder: Path, study_path: str):
    """The model a finished fit in ``folder`` sampled (rebuilt from its study at the fit's T_ref), its posterior
    (InferenceData) and 50 of its draws as raveled free-variable vectors."""
    import arviz as az
    from plain_pymc import unconstrained_points

    from inference import load_study
    from inference.workflows.kinds import open_problem

    kelvin = json.loads((folder / "manifest.json").read_text())["reference_temperature_K"]
    model = open_problem(load_study(Path(study_path))).build_model(kelvin, None)
    idata = az.from_netcdf(str(folder / "posterior.nc"))
    return model, idata, unconstrained_points(model, idata.posterior, 50)


def arrhenia_measure_child(results: str, study_path: str) -> None:
    """Min bulk ESS, n_steps and the cost of one log-density-plus-gradient of a finished fit, as JSON."""
    from plain_pymc import seconds_per_gradient

    folder = Path(results)
    model, idata, points = _fitted_model(folder, study_path)
    diagnostics = json.loads((folder / "diagnostics.json").read_text())
    print(
        json.dumps(
            {
                "ess": network_fit.min_bulk_ess(idata.posterior),
                "n_steps_draws": int(idata.sample_stats["n_steps"].sum()),
                "divergences": int(idata.sample_stats["diverging"].sum()),
                "gradient_ms": seconds_per_gradient(model, points) * 1e3,
                "verdict": diagnostics.get("verdict"),
            }
        )
    )


def side_by_side_child(*folders_and_studies: str) -> None:
    """The cost (ms) of one log-density-plus-gradient of each finished fit (results folder, study file, in pairs),
    measured in one process with their passes alternating (the fastest of ``PASSES`` passes of each, as in
    ``seconds_per_gradient``), so that a machine whose speed drifts between minutes slows each alike; as a JSON
    list."""
    from plain_pymc import PASSES, gradient_function, one_pass

    prepared = []
    for results, study_path in zip(folders_and_studies[::2], folders_and_studies[1::2], strict=True):
        model, _, points = _fitted_model(Path(results), study_path)
        function = gradient_function(model)
        function(points[0])
        prepared.append((function, points))
    fastest = [np.inf] * len(prepared)
    for _ in range(PASSES):
        for i, (function, points) in enumerate(prepared):
            fastest[i] = min(fastest[i], one_pass(function, points))
    print(json.dumps([seconds * 1e3 for seconds in fastest]))


#: The stiff probe: k_ref of the binding step at these multiples of its prior median (z = ln(multiple) / sd).
PROBE_MULTIPLES = (0.1, 1.0, 10.0, 100.0)


def stiff_probe_child(study_path: str) -> None:
    """The cost of one log-density-plus-gradient of both ways' models as the binding step gets faster (every
    other parameter at the priors' centre), as JSON."""
    from plain_pymc import build_model, milliseconds_along, read_study

    from inference import load_study
    from inference.workflows.kinds import open_problem

    sd = np.log(STIFF.steps[0].k_prior[1]) / network_fit.Z95
    z_values = [float(np.log(m) / sd) for m in PROBE_MULTIPLES]
    ours = open_problem(load_study(Path(study_path))).build_model(STIFF.t_ref, None)
    plain = build_model(read_study(Path(study_path)))
    print(
        json.dumps(
            {
                "Arrhenia": milliseconds_along(ours, "z_ln_k_ref", 0, z_values),
                "plain": milliseconds_along(plain, "z_ln_k_ref", 0, z_values),
            }
        )
    )


# ------------------------------------------------------------------------------------------- the table
def _cell(row: dict, key: str, form: str) -> str:
    """``row[key]`` formatted, or a dash as wide."""
    value = row.get(key)
    return format(value, form) if isinstance(value, int | float) else "-".rjust(int(form.split(".")[0].rstrip("d")))


def print_table(rows: list[tuple[str, str, dict]]) -> None:
    width = max(len(name) for name in PROBLEMS) + 2
    header = (
        f"{'problem':<{width}}{'way':<10}{'setup s':>9}{'sampling s':>11}{'after s':>9}{'total s':>9}{'grad evals':>11}"
        f"{'ms/grad':>9}{'in-run ms':>10}{'min ESS':>9}{'ESS/s':>8}  note"
    )
    print(header)
    print("-" * len(header))
    for problem, way, row in rows:
        ess_rate = row["ess"] / row["total_s"] if row.get("finished") and "ess" in row else None
        note = ""
        if not row.get("finished"):
            note = "did not finish" + (f": {row['error']}" if row.get("error") else f" in {row['total_s']:.0f} s")
        elif way == "Arrhenia":
            note = f"verdict {row.get('verdict')}, {row.get('divergences')} divergent"
        else:
            note = f"{row.get('divergences')} divergent"
        print(
            f"{problem:<{width}}{way:<10}{_cell(row, 'setup_s', '9.1f')}{_cell(row, 'sampling_s', '11.1f')}"
            f"{_cell(row, 'after_s', '9.1f')}{_cell(row, 'total_s', '9.1f')}{_cell(row, 'evaluations', '11d')}"
            f"{_cell(row, 'gradient_ms', '9.2f')}{_cell(row, 'in_op_ms', '10.2f')}{_cell(row, 'ess', '9.0f')}"
            f"{format(ess_rate, '8.2f') if ess_rate is not None else '       -'}  {note}"
        )


def _verdict(value: float, target: float, below: bool = True) -> str:
    met = value <= target if below else value >= target
    return f"{'met' if met else 'MISSED'}"


def print_ratios(results: dict[str, dict[str, dict]], cores: int) -> None:
    print("\nratios against the targets of issue #18")
    network = results.get("network", {})
    ours, plain = network.get("Arrhenia"), network.get("plain")
    if ours and plain and ours.get("finished") and plain.get("finished"):
        ratio = (ours["ess"] / ours["total_s"]) / (plain["ess"] / plain["total_s"])
        print(f"  network: Arrhenia ESS/s over plain ESS/s {ratio:.2f} (target >= 2: {_verdict(ratio, 2, False)})")
        print(
            f"  network: Arrhenia whole fit, warm caches {ours['total_s']:.1f} s (target <= 10 s: "
            f"{_verdict(ours['total_s'], 10)}); the first of the two fits {ours.get('first_total_s', np.nan):.1f} s"
        )
    for name in ("process-12", "process-24"):
        for way, row in results.get(name, {}).items():
            if row.get("finished") and row.get("evaluations"):
                ideal = row["evaluations"] * row["gradient_ms"] / 1e3 / cores
                ratio = row["sampling_s"] / ideal
                target = f" (target <= 1.5: {_verdict(ratio, 1.5)})" if way == "Arrhenia" else ""
                print(
                    f"  {name}, {way}: sampling {row['sampling_s']:.1f} s over grad evals x ms/grad / {cores} cores "
                    f"= {ideal:.1f} s: {ratio:.2f}{target}"
                )
    twelve, twenty_four = results.get("process-12", {}), results.get("process-24", {})
    for way in ("Arrhenia", "plain"):
        a, b = twelve.get(way, {}), twenty_four.get(way, {})
        if a.get("finished") and b.get("finished"):
            ratio = b["gradient_ms"] / a["gradient_ms"]
            measured = "each after its fit"
            if "side_by_side_ms" in a and "side_by_side_ms" in b:
                ratio = b["side_by_side_ms"] / a["side_by_side_ms"]
                measured = (
                    f"side by side, {a['side_by_side_ms']:.2f} and {b['side_by_side_ms']:.2f} ms; each after its fit "
                    f"{b['gradient_ms'] / a['gradient_ms']:.2f}"
                )
            target = f" (target <= 2.1: {_verdict(ratio, 2.1)})" if way == "Arrhenia" else ""
            print(
                f"  process, {way}: cost per gradient 24 runs over 12 runs {ratio:.2f}{target} ({measured}); "
                f"in the chains {b['in_op_ms'] / a['in_op_ms']:.2f}; sampling wall "
                f"{b['sampling_s'] / a['sampling_s']:.2f}, total wall {b['total_s'] / a['total_s']:.2f}"
            )
    network_fit_row = network.get("Arrhenia")
    for name in ("stiff-held", "stiff-held-dense"):
        held = results.get(name, {}).get("Arrhenia")
        if held and held.get("finished"):
            against = ""
            if network_fit_row and network_fit_row.get("finished"):
                ratio = held["total_s"] / network_fit_row["total_s"]
                against = f"; over the non-stiff network problem's whole fit {ratio:.2f} (<= 1: {_verdict(ratio, 1)})"
            twin = results.get("stiff-saturating-dense", {}).get("Arrhenia")
            if name == "stiff-held-dense" and twin and twin.get("finished"):
                ratio = held["total_s"] / twin["total_s"]
                against += (
                    f"; over the same data's saturating-law fit {ratio:.2f} (<= 1: {_verdict(ratio, 1)}; sampling "
                    f"{held['sampling_s'] / twin['sampling_s']:.2f}, grad evals "
                    f"{held['evaluations'] / twin['evaluations']:.2f}, ms/grad "
                    f"{held['gradient_ms'] / twin['gradient_ms']:.2f})"
                )
            print(f"  {name}, binding held at equilibrium: whole fit {held['total_s']:.0f} s{against}")
    for name in ("stiff", "stiff-dense"):
        for way, row in results.get(name, {}).items():
            done = row.get("finished")
            said = f"whole fit {row['total_s']:.0f} s" if done else f"did not finish in {row['total_s']:.0f} s"
            target = f" (target <= 300 s: {_verdict(row['total_s'] if done else np.inf, 300)})"
            print(f"  {name}, {way}: {said}{target if way == 'Arrhenia' else ''}")


def print_parts(results: dict[str, dict[str, dict]], cores: int) -> None:
    """Where the time of each Arrhenia fit went: the manifest's timings_s and the Op calls."""
    print("\nArrhenia's manifest timings_s (s) and its Op calls")
    for name, ways in results.items():
        row = ways.get("Arrhenia", {})
        if not row.get("finished"):
            continue
        parts = ", ".join(f"{part} {seconds:.1f}" for part, seconds in row["timings"].items())
        print(f"  {name}: {parts}")
    for name, ways in results.items():
        for way, row in ways.items():
            if row.get("evaluations"):
                busy = row["in_op_s"] / (cores * row["sampling_s"]) if row.get("sampling_s") else float("nan")
                steps = row.get("n_steps") if way == "plain" else row.get("n_steps_draws")
                print(
                    f"  {name}, {way}: {row['evaluations']} Op calls in the chains ({row['in_op_ms']:.2f} ms each "
                    f"there, {busy:.0%} of {cores} cores' sampling wall), {row['parent_calls']} in the main process; "
                    f"n_steps summed {'over tuning and draws' if way == 'plain' else 'over draws'}: {steps}"
                )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--quick", action="store_true", help="2 x 100 + 100 draws: a smoke check")
    parser.add_argument(
        "--only",
        default="",
        help="comma-separated problems of " + ", ".join(PROBLEMS) + " (prefixes: 'stiff' is all five stiff ones)",
    )
    parser.add_argument("--timeout", type=float, default=600.0, help="seconds before a stiff fit is stopped")
    parser.add_argument("--keep", type=Path, help="write the studies and results here and keep them (a new folder)")
    parser.add_argument("--arrhenia-only", action="store_true", help="leave out the plain way (its fits are slow)")
    args = parser.parse_args()
    wanted = [p for p in PROBLEMS if not args.only or any(p.startswith(w.strip()) for w in args.only.split(","))]
    tune, draws = DRAWS["quick" if args.quick else "full"]
    counts = ["--draws", str(draws), "--tune", str(tune)] if args.quick else []
    cores = min(2, os.cpu_count() or 1)
    print(f"{', '.join(wanted)}; 2 chains x {tune} + {draws}; load {os.getloadavg()[0]:.2f} at the start", flush=True)
    results: dict[str, dict[str, dict]] = {}
    probes: dict[str, list[float]] = {}
    with tempfile.TemporaryDirectory(prefix="arrhenia-bench-") as root:
        work = Path(root)
        if args.keep is not None:
            args.keep.mkdir(parents=True)
            work = args.keep
        studies = {name: write_problem(name, work) for name in wanted}
        results.update({name: {} for name in wanted})
        # The problems fitted twice first, all warm-up fits and then all reported ones, so that the whole fits
        # set against each other run minutes apart at most, on a machine whose speed drifts.
        paired = [name for name in wanted if name in FITTED_TWICE]
        firsts = {name: run_arrhenia(studies[name], work, f"{name}-first", counts, LONG) for name in paired}
        for name in paired:
            results[name]["Arrhenia"] = run_arrhenia(studies[name], work, name, counts, LONG)
            results[name]["Arrhenia"]["first_total_s"] = firsts[name]["total_s"]
        for name in wanted:
            study = studies[name]
            timeout = args.timeout if name in ("stiff", "stiff-dense") else LONG
            ways = results[name]
            if name not in paired:
                ways["Arrhenia"] = run_arrhenia(study, work, name, counts, timeout)
            print(f"  {name}: Arrhenia {ways['Arrhenia']['total_s']:.0f} s", flush=True)
            if name in ARRHENIA_ONLY or args.arrhenia_only:
                continue
            ways["plain"] = run_plain(study, work, f"{name}-plain", counts, timeout)
            print(f"  {name}: plain {ways['plain']['total_s']:.0f} s (load {os.getloadavg()[0]:.2f})", flush=True)
            if name == "stiff":
                probe, *_ = _run([sys.executable, __file__, "--stiff-probe", str(study)], LONG)
                probes = _last_json(probe.stdout) if probe is not None and not probe.returncode else {}
        twelve, twenty_four = results.get("process-12", {}), results.get("process-24", {})
        if twelve.get("Arrhenia", {}).get("finished") and twenty_four.get("Arrhenia", {}).get("finished"):
            pairs = [
                str(item)
                for name in ("process-12", "process-24")
                for item in (work / f"results-{name}", work / name / "study.yaml")
            ]
            measured, *_ = _run([sys.executable, __file__, "--side-by-side", *pairs], LONG)
            if measured is not None and not measured.returncode:
                side_by_side = _last_json(measured.stdout)
                twelve["Arrhenia"]["side_by_side_ms"], twenty_four["Arrhenia"]["side_by_side_ms"] = side_by_side
    print()
    print_table([(name, way, row) for name, ways in results.items() for way, row in ways.items()])
    print_ratios(results, cores)
    print_parts(results, cores)
    if "stiff" in results and probes:
        multiples = ", ".join(f"{m * STIFF.steps[0].k_prior[0]:.0e}" for m in PROBE_MULTIPLES)
        print(f"\nstiff: one log-density + gradient (ms) at the priors' centre with k_ref[binding] = {multiples}:")
        for way, values in probes.items():
            print(f"  {way}: " + ", ".join(f"{v:.1f}" for v in values))
    print(f"\nload {os.getloadavg()[0]:.2f} at the end")


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--arrhenia-fit":
        arrhenia_fit_child(sys.argv[2], sys.argv[3:])
    elif len(sys.argv) == 4 and sys.argv[1] == "--arrhenia-measure":
        arrhenia_measure_child(sys.argv[2], sys.argv[3])
    elif len(sys.argv) > 2 and sys.argv[1] == "--side-by-side":
        side_by_side_child(*sys.argv[2:])
    elif len(sys.argv) == 3 and sys.argv[1] == "--stiff-probe":
        stiff_probe_child(sys.argv[2])
    else:
        main()
