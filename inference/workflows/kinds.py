"""The two kinds of study, behind one small interface the pipeline drives.

``RateConstantProblem``: measured rate constants, the Arrhenius fit alone. ``NetworkProblem``: a reaction
network fitted to concentration-time data from batch runs. Each reads and checks its data, builds its model
(importing PyMC only then), and makes its own tables and figures. Nothing here writes files except through
the ``StagedFolder`` it is handed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Protocol

import numpy as np
import pandas as pd
import xarray as xr

from ..inputs import plausibility, units
from ..inputs.data import Observations, RateConstantData, read_observations, read_rate_constants
from ..inputs.rate_laws import REGISTRY
from ..inputs.rate_laws.law import lognormal_text, normal_text
from ..inputs.study import Study
from ..outputs import plots
from ..outputs.drawing import FigureJob
from ..physics import closed_form
from ..physics.parameters import BLOCKS
from ..physics.solution import NetworkSolver, SolverFailure
from ..posterior.diagnostics import KINETIC_VARIABLES
from ..posterior.draws import parameter_draws, pick_draws, prior_centre_draws
from ..posterior.per_temperature import TemperaturePoints, per_temperature_fits
from ..posterior.summaries import classical_table, network_fit_checks, rate_constant_fit_checks

if TYPE_CHECKING:
    import arviz as az
    import pymc as pm

    from ..outputs.results import StagedFolder


#: Posterior draws used for the profile bands of the run figures.
PROFILE_DRAWS = 200
PROFILE_POINTS = 121


class Problem(Protocol):
    """The interface of a kind of study: what the fit, the verdict, the writer and the comparison ask of it.
    ``open(study)`` (a classmethod) reads and checks its data."""

    study: Study

    @property
    def temperatures_K(self) -> np.ndarray: ...

    @property
    def temperature_span_K(self) -> tuple[float, float]: ...

    def summary_line(self) -> str: ...

    def warnings(self) -> list[str]: ...

    def check_lines(self) -> list[str]: ...

    def build_model(self, temperature_ref: float, failure_log: Path | None = None) -> pm.Model: ...

    def measurement_label(self, index: int) -> str: ...

    def failing_run_at_prior_centre(self, temperature_ref: float) -> str | None: ...

    def kinetic_var_names(self, idata: az.InferenceData) -> list[str]: ...

    def fit_checks(self, idata: az.InferenceData) -> pd.DataFrame: ...

    def measurement_groups(self) -> list[str]: ...

    def extra_tables(self) -> dict[str, pd.DataFrame]: ...

    def temperature_points(self, idata: az.InferenceData, temperature_ref: float) -> TemperaturePoints | None: ...

    def figures(
        self,
        folder: StagedFolder,
        idata: az.InferenceData,
        temperature_ref: float,
        fit_checks: pd.DataFrame,
        points: TemperaturePoints | None = None,
    ) -> list[FigureJob]: ...

    def with_measurements(self, values: np.ndarray) -> Problem: ...


#: A reversible step relaxing this many times faster than the first sample of every run counts as fast: its
#: equilibrium is reached within e^-50 of the first measurement (our choice).
FAST_RELAXATION = 50.0


#: Measurements per group above which run effects count as data-rich (each group's ln k pinned; our choice).
DATA_RICH_GROUP = 10


def open_problem(study: Study) -> Problem:
    """Read and check the study's data and return the kind of study that fits it (``KINDS``)."""
    return KINDS[study.mode].open(study)


def _prior_lines(study: Study) -> list[str]:
    energy = study.units.energy
    lines = []
    for spec in study.reactions:
        p = spec.prior
        line = f"    {spec.name}: {spec.equation + ', ' if spec.equation else ''}"
        if spec.held:
            line += "held at equilibrium (fast_equilibrium; quasi-equilibrium, no rate constant)"
        else:
            line += (
                f"{spec.rate_law}; k_ref ~ {lognormal_text(p.ln_k_ref_mean, p.ln_k_ref_sd, spec.k_unit)}; "
                f"Ea ~ {normal_text(p.ea_mean, p.ea_sd, energy)} truncated > 0"
            )
        if spec.equilibrium is not None:
            q = spec.equilibrium
            line += (
                f"; K_ref ~ {lognormal_text(q.ln_eq_ref_mean, q.ln_eq_ref_sd, spec.eq_unit)}; "
                f"dH ~ {normal_text(q.dh_mean, q.dh_sd, energy)}"
            )
        for fitted in spec.fitted_orders:
            line += f"; order in {fitted.species} ~ uniform({fitted.lower:g}, {fitted.upper:g})"
        if spec.exponent_sd is not None:
            line += f"; (T/T_ref)^n with n ~ normal({spec.temperature_exponent:g}, sd {spec.exponent_sd:g})"
        elif spec.temperature_exponent:
            line += f"; (T/T_ref)^n with n = {spec.temperature_exponent:g}"
        line += "".join(f"; {term}" for term in REGISTRY[spec.rate_law].check_terms(spec, study.units))
        lines.append(line)
    if study.run_variability is not None:
        spec = study.run_variability
        lines.append(
            f"    run-to-run spread of ln k ({', '.join(study.reaction_names[j] for j in spec.reactions)}) ~ "
            f"half-normal(scale {spec.scale:g}), groups: {'column ' + spec.by if spec.by else 'each run'}"
        )
    if study.temperature_sd_K is not None:
        lines.append(f"    true temperatures ~ normal(stated, sd {study.temperature_sd_K:.3g} K)")
    return lines


def _temperature_lines(study: Study, measured_K: np.ndarray, span_K: tuple[float, float]) -> list[str]:
    """The temperatures of the data (``measured_K``: one per run or point, nominal for a run with a history;
    ``span_K``: the range the runs went through) and the reference temperature."""
    from ..physics.arrhenius import auto_reference_temperature

    unit = study.units.temperature
    low, high = units.kelvin_to(list(span_K), unit)
    reference = study.reference_temperature_K or auto_reference_temperature(measured_K)
    source = "auto, 1/mean(1/T)" if study.reference_temperature_K is None else "from the study file"
    return [
        f"  temperatures: {low:g} to {high:g} {unit} ({np.unique(measured_K).size} distinct)",
        f"  T_ref = {reference:.2f} K"
        + (f" = {float(units.kelvin_to(reference, unit)):.2f} {unit}" if unit != "K" else "")
        + f" ({source})",
    ]


def _noise_line(study: Study) -> str:
    noise = study.noise
    per = "measured quantity" if study.quantities else "observed species"
    scope = f"one per {per}" if noise.per_species else "shared"
    return f"  noise: {noise.model}, sigma ~ half-normal(scale {noise.sigma.scale:g}), {scope}" + (
        f", nu = {noise.nu:g}" if noise.model == "robust" else ""
    )


def _factor_text(factor) -> str:
    if factor.fitted:
        return lognormal_text(factor.ln_mean, factor.ln_sd, "").replace(" ,", ",")
    return f"{math.exp(factor.ln_mean):.4g}"


def _quantity_lines(study: Study, obs: Observations) -> list[str]:
    """The declared measured quantities with their priors, and how many values are censored."""
    lines = []
    declared = [q for q in obs.quantities if q.kind != "concentration"]
    if declared:
        lines.append("  measured quantities:")
    for q in declared:
        species = study.species[q.species]
        if q.kind == "signal":
            text = f"response x [{species}] + {q.offset:g}, response ~ {_factor_text(q.scale)}"
            text += " per run" if q.per_run else ""
        elif q.kind == "composition":
            among = " + ".join(f"[{study.species[s]}]" for s in q.terms)
            text = f"{math.exp(q.scale.ln_mean):g} x [{species}] / ({among})"
        elif q.kind == "combination":
            weights = ", ".join(
                f"{study.species[s]}: {_factor_text(w)}" for s, w in zip(q.terms, q.weights, strict=True)
            )
            text = f"path {math.exp(q.scale.ln_mean):g} x sum of weight x concentration ({weights})"
        elif q.kind == "conversion":
            text = f"conversion of {species} (amounts)"
        else:
            text = f"yield of {species} on the initial amount of {study.species[q.reference]}"
        lines.append(f"    {q.name}: {q.kind}, {text}")
    flags = obs.censored
    below, above = int((flags == "below").sum()), int((flags == "above").sum())
    if below or above:
        lines.append(
            f"  censored values: {below} below a detection limit, {above} above a saturation limit (each counts "
            "as the probability of lying beyond its limit)"
        )
    return lines


def _experiment_counts(obs: Observations) -> str:
    """How the runs were carried out, counted: e.g. "3 isothermal batch, 2 with a temperature history, 2 dosed"."""
    if not obs.setups:
        return f"{len(obs.run_ids)} isothermal batch"
    if obs.steady:
        cstr = sum(s.overflow for s in obs.setups)
        return f"{cstr} CSTR steady state(s), {len(obs.setups) - cstr} PFR outlet(s) (isothermal, constant density)"
    counts = {
        "isothermal batch": sum(not s.ramped and not s.feeds for s in obs.setups),
        "with a temperature history": sum(s.ramped for s in obs.setups),
        "dosed (semi-batch)": sum(bool(s.feeds) for s in obs.setups),
    }
    text = ", ".join(f"{n} {what}" for what, n in counts.items() if n)
    if obs.factor is not None:
        text += "; values are amounts (concentration x volume)"
    return text


@dataclass(frozen=True)
class RateConstantProblem:
    """Measured rate constants (``temperature, k`` per row): the Arrhenius fit alone."""

    study: Study
    data: RateConstantData

    @classmethod
    def open(cls, study: Study) -> RateConstantProblem:
        return cls(study, read_rate_constants(study))

    @property
    def temperatures_K(self) -> np.ndarray:
        return self.data.temperature_K

    @property
    def temperature_span_K(self) -> tuple[float, float]:
        return float(np.min(self.data.temperature_K)), float(np.max(self.data.temperature_K))

    def summary_line(self) -> str:
        return f"{len(self.study.reactions)} reaction(s), {self.data.k.size} measured rate constants"

    def warnings(self) -> list[str]:
        """Values that are valid but almost surely wrong (units, typos, copies, stated errors)."""
        return plausibility.rate_constant_warnings(self.study, self.data, self.measurement_label)

    def check_lines(self) -> list[str]:
        lines = [f"  data: {self.data.k.size} measured rate constants from {self.data.path}"]
        lines += _temperature_lines(self.study, self.temperatures_K, self.temperature_span_K)
        lines += ["  reactions:", *_prior_lines(self.study)]
        if self.data.ln_k_sd is not None:
            lines.append("  noise: per-point errors stated in the data file (sd of ln k)")
        else:
            lines.append(_noise_line(self.study))
        return lines

    def build_model(self, temperature_ref: float, failure_log: Path | None = None) -> pm.Model:
        from ..model.builder import build_rate_constant_model

        return build_rate_constant_model(self.study, self.data, temperature_ref)

    def measurement_label(self, index: int) -> str:
        return f"{self.data.path}: line {self.data.line[index]}"

    def failing_run_at_prior_centre(self, temperature_ref: float) -> str | None:
        return None  # no integration in a rate-constant model

    def kinetic_var_names(self, idata: az.InferenceData) -> list[str]:
        return [n for n in KINETIC_VARIABLES if n in idata.posterior]

    def fit_checks(self, idata: az.InferenceData) -> pd.DataFrame:
        return rate_constant_fit_checks(self.study, self.data, idata)

    def measurement_groups(self) -> list[str]:
        """Each measurement's experiment for leave-one-run-out: its reaction and temperature."""
        names = self.study.reaction_names
        return [
            f"{names[r]} @ {t:.6g} K" for r, t in zip(self.data.reaction_index, self.data.temperature_K, strict=True)
        ]

    def extra_tables(self) -> dict[str, pd.DataFrame]:
        return {"classical.csv": classical_table(self.study, self.data)}

    def with_measurements(self, values: np.ndarray) -> RateConstantProblem:
        """The same design with other measured rate constants (simulated data, for calibration)."""
        return replace(self, data=replace(self.data, k=np.asarray(values, dtype=float)))

    def temperature_points(self, idata: az.InferenceData, temperature_ref: float) -> TemperaturePoints | None:
        return None  # the measured rate constants are the points

    def figures(
        self,
        folder: StagedFolder,
        idata: az.InferenceData,
        temperature_ref: float,
        fit_checks: pd.DataFrame,
        points: TemperaturePoints | None = None,
    ) -> list[FigureJob]:
        """The figures to draw (``outputs.drawing``): the Arrhenius plot with the measured rate constants."""
        path = folder.path("figures/arrhenius.png")
        return [
            lambda: plots.arrhenius_plot(
                self.study, idata.posterior, temperature_ref, self.temperatures_K, path, data=self.data
            )
        ]


@dataclass(frozen=True)
class NetworkProblem:
    """Isothermal batch runs of a reaction network, measured as concentrations over time."""

    study: Study
    obs: Observations

    @classmethod
    def open(cls, study: Study) -> NetworkProblem:
        return cls(study, read_observations(study))

    @property
    def temperatures_K(self) -> np.ndarray:
        """One per run: its temperature, or the time-weighted mean of its history."""
        return self.obs.temperature_K

    @property
    def temperature_span_K(self) -> tuple[float, float]:
        return self.obs.kelvin_span()

    def summary_line(self) -> str:
        return (
            f"{len(self.study.reactions)} reaction(s) in {len(self.study.species)} species, "
            f"{len(self.obs.run_ids)} runs, {self.obs.value.size} measurements"
        )

    def warnings(self) -> list[str]:
        """Structural identifiability, as far as the network and the data show it, then values that are valid
        but almost surely wrong (units, typos)."""
        study, obs = self.study, self.obs
        notes = []
        if np.unique(obs.measurement_kelvin()).size < 2:
            notes.append("every run is at one temperature: each Ea is set by its prior alone")
        measured = {int(i) for i in obs.observed_species}
        touching = [
            set(np.flatnonzero((study.network.stoichiometry[j] != 0) | (study.network.forward_orders[j] != 0)))
            for j in range(len(study.reactions))
        ]
        reached = set(measured)
        grown = True
        while grown:  # species linked to a measured one through shared reactions
            grown = False
            for species in touching:
                if species & reached and not species <= reached:
                    reached |= species
                    grown = True
        for spec, species in zip(study.reactions, touching, strict=True):
            if not species & reached:
                notes.append(
                    f"reaction '{spec.name}' is linked to no measured species: its k_ref and Ea are set by "
                    "their priors alone"
                )
        notes += self._multiplicity_notes() + self._factor_notes() + self._fast_equilibrium_notes()
        notes += self._parameterisation_notes()
        return notes + plausibility.network_warnings(study, obs, self.measurement_label)

    def _parameterisation_notes(self) -> list[str]:
        """Non-centred run effects where every group holds many measurements: the centred form samples faster."""
        spec = self.study.run_variability
        if spec is None or spec.centred:
            return []
        per_group = np.bincount(self.obs.group_index[self.obs.run_index], minlength=len(self.obs.group_names))
        if per_group.min() < DATA_RICH_GROUP:
            return []
        return [
            f"every group of run_variability holds {per_group.min()} or more measurements: "
            "'parameterisation: centred' samples such data-rich groups much faster (see README, run_variability)"
        ]

    def _fast_equilibrium_notes(self) -> list[str]:
        """Reversible steps that, at the priors' centre, relax far faster than the first sample of every run:
        the data then show their equilibrium constant but hardly their rate. The step's relaxation rate is
        estimated as k_f c^(n_f - 1) + k_r c^(n_r - 1) at the run's largest initial concentration c (orders n)."""
        from ..physics.arrhenius import auto_reference_temperature

        study, obs, network = self.study, self.obs, self.study.network
        reversible = np.flatnonzero(network.reversible)
        if not reversible.size or any(setup.overflow for setup in obs.setups):
            return []
        reference = study.reference_temperature_K or auto_reference_temperature(obs.temperature_K)
        centre = prior_centre_draws(study, reference)
        fastest = np.inf
        for r, times in enumerate(obs.times):
            sampled = times[times > 0]
            if not sampled.size or not np.isfinite(obs.temperature_K[r]):
                return []  # a run sampled at t = 0 only, or with a temperature history: no simple comparison
            scale = float(np.max(obs.initial[r])) or 1.0
            ln_k = centre.ln_k(float(obs.temperature_K[r]))[0]
            ln_eq = centre.ln_eq(float(obs.temperature_K[r]))[0]
            forward = network.forward_orders.sum(axis=1) - 1.0
            reverse = network.reverse_orders.sum(axis=1) - 1.0
            relaxation = [
                math.exp(ln_k[j]) * scale ** forward[j] + math.exp(ln_k[j] - ln_eq[e]) * scale ** reverse[j]
                for e, j in enumerate(reversible)
            ]
            fastest = np.minimum(fastest, np.array(relaxation) * float(sampled[0]))
        return [
            f"reversible step '{study.reactions[j].name}': at the priors' centre it relaxes about {fastest[e]:.0f} "
            "times faster than the first sample of any run, so the data can show its equilibrium constant but "
            "hardly its rate (its k_ref and Ea will follow their priors, and draws of a large k make the profiles "
            "stiff and sampling slow); declare it 'fast_equilibrium: true' (held at equilibrium: K_ref and dH "
            "only), or narrow its k_ref prior to where the step is fast enough"
            for e, j in enumerate(reversible)
            if fastest[e] > FAST_RELAXATION and j != network.held
        ]

    def _factor_notes(self) -> list[str]:
        """Fitted response factors and weights that nothing in the data pins: no calibration point (the quantity
        measured at time 0 of a run with a known initial concentration of its species) and no measurement of
        that species on an absolute scale, or an initial concentration that is itself uncertain."""
        study, obs = self.study, self.obs
        if obs.quantity_index is None:
            return []
        specs = obs.quantities
        uncertain = {study.species.index(name) for name, _ in study.initial_uncertainty}
        measured = {int(q) for q in np.unique(obs.quantity_index)}
        absolute = {specs[q].species for q in measured if specs[q].absolute}
        notes = []
        for q in sorted(measured):
            spec = specs[q]
            fitted = [(spec.scale.label, spec.species)] if spec.scale.fitted else []
            fitted += [(w.label, s) for w, s in zip(spec.weights, spec.terms, strict=True) if w.fitted]
            for label, species in fitted:
                name = study.species[species]
                rows = np.flatnonzero(obs.quantity_index == q)
                calibrated = any(
                    obs.time[m] == 0 and obs.initial[obs.run_index[m], species] > 0 and species not in uncertain
                    for m in rows
                )
                if species in uncertain:
                    notes.append(
                        f"the fitted factor '{label}' is confounded with the uncertain initial concentration of "
                        f"{name}: both scale the measured values alike; fix one of them or add a calibration standard"
                    )
                elif not calibrated and species not in absolute:
                    notes.append(
                        f"the fitted factor '{label}' has no calibration point (a measurement at time 0 of a known "
                        f"concentration of {name}) and {name} is measured on no absolute scale: only its prior and "
                        "the mass balance pin it, and it may trade off against the kinetics"
                    )
        return notes

    def _multiplicity_notes(self) -> list[str]:
        """CSTR rows where the kinetics at the priors' centre allow more than one steady state (the fit uses the
        one a start-up from the feed reaches; ``reactors.cstr_steady_states`` searches for the others)."""
        study, obs = self.study, self.obs
        rows = [r for r, setup in enumerate(obs.setups) if setup.overflow]
        if not rows:
            return []
        from ..physics.arrhenius import auto_reference_temperature
        from ..physics.reactors import cstr_steady_states

        reference = study.reference_temperature_K or auto_reference_temperature(obs.temperature_K)
        centre = prior_centre_draws(study, reference)
        notes = []
        for r in rows:
            states = cstr_steady_states(
                study.network, centre, float(obs.temperature_K[r]), obs.initial[r], obs.times[r][:1]
            )
            if states.multiple[0, 0]:
                notes.append(
                    f"steady state '{obs.run_ids[r]}': at the priors' centre this CSTR has more than one steady "
                    "state; the fit uses the one a start-up from the feed reaches"
                )
        return notes

    def check_lines(self) -> list[str]:
        study, obs = self.study, self.obs
        observed = [study.species[i] for i in obs.observed_species]
        hidden = [s for s in study.species if s not in observed]
        kind = closed_form.closed_form_kind(study.network) if obs.isothermal_batch else None
        source = (
            f"{len(obs.run_ids)} steady states from {obs.measurements_path}"
            if obs.steady
            else f"{len(obs.run_ids)} runs from {obs.runs_path}, {obs.value.size} measurements from "
            f"{obs.measurements_path}"
        )
        lines = [
            f"  species: {', '.join(study.species)} (measured: {', '.join(observed)}"
            + (f"; not measured: {', '.join(hidden)})" if hidden else ")"),
            f"  data: {source}",
            f"  experiments: {_experiment_counts(obs)}",
        ]
        if obs.restated_zeros:
            lines.append(
                f"  set aside: {obs.restated_zeros} value(s) of 0 at t = 0 where the run starts without that species "
                "(they restate the initial condition; not fitted)"
            )
        lines += _temperature_lines(study, self.temperatures_K, self.temperature_span_K)
        lines += ["  reactions:", *_prior_lines(study)]
        if study.initial_uncertainty:
            lines.append(
                "  uncertain initial concentrations: "
                + ", ".join(f"{name} (±{share:.0%} lognormal)" for name, share in study.initial_uncertainty)
            )
        lines += _quantity_lines(study, obs)
        lines.append(_noise_line(study))
        layout = study.sensitivity_layout()
        blocks = [
            f"{block.name} ({block.count(layout)}{' per run' if block.per_run else ''})"
            for block in BLOCKS
            if block.count(layout)
        ]
        lines.append("  kinetic parameters the profiles depend on: " + ", ".join(blocks))
        lines.append(
            "  profiles: "
            + (
                f"closed form ({kind})"
                if kind and not study.initial_uncertainty
                else "compiled ODE integrator (Dormand-Prince; Radau IIA when stiff) with sensitivities"
            )
        )
        return lines

    def build_model(self, temperature_ref: float, failure_log: Path | None = None) -> pm.Model:
        from ..model.builder import build_network_model

        return build_network_model(self.study, self.obs, temperature_ref, failure_log)

    def failing_run_at_prior_centre(self, temperature_ref: float) -> str | None:
        """The first run whose profiles cannot be integrated with every parameter at its prior's centre."""
        study, obs = self.study, self.obs
        centre = prior_centre_draws(study, temperature_ref)
        solver = NetworkSolver(study.network, list(obs.times), conditions=obs.conditions)
        try:
            solver.solve(centre.inputs(0, obs.temperature_K, obs.initial), sensitivities=False)
        except SolverFailure as failure:
            return obs.run_ids[failure.run]
        return None

    def measurement_label(self, index: int) -> str:
        obs = self.obs
        return (
            f"{obs.measurements_path}: line {obs.line[index]} (run {obs.run_ids[obs.run_index[index]]}, "
            f"species {self.study.species[obs.species_index[index]]})"
        )

    def kinetic_var_names(self, idata: az.InferenceData) -> list[str]:
        return [n for n in KINETIC_VARIABLES if n in idata.posterior]

    def fit_checks(self, idata: az.InferenceData) -> pd.DataFrame:
        return network_fit_checks(self.study, self.obs, idata)

    def measurement_groups(self) -> list[str]:
        """Each measurement's run (or, for steady states, its group), for leave-one-run-out."""
        return [self.obs.experiments[r] for r in self.obs.run_index]

    def extra_tables(self) -> dict[str, pd.DataFrame]:
        return {}

    def with_measurements(self, values: np.ndarray) -> NetworkProblem:
        """The same runs and sampling times with other measured values (simulated data, for calibration)."""
        return replace(self, obs=replace(self.obs, value=np.asarray(values, dtype=float)))

    def profiles(
        self, posterior: xr.Dataset, temperature_ref: float, times: list[np.ndarray], n_draws: int = PROFILE_DRAWS
    ) -> list[np.ndarray]:
        """Concentration profiles of every run for ``n_draws`` evenly spread posterior draws:
        a list over runs of arrays (draws, times, species); NaN where the solver failed for a draw."""
        study, obs = self.study, self.obs
        draws = parameter_draws(study, posterior, temperature_ref, pick_draws(posterior, n_draws), obs.initial)
        network = study.network
        kind = closed_form.closed_form_kind(network) if obs.isothermal_batch else None
        exact = kind is not None and draws.initial is None
        solver = None if exact else NetworkSolver(network, times, conditions=obs.conditions)
        out = [np.full((draws.size, t.size, len(study.species)), np.nan) for t in times]
        for d in range(draws.size):
            ln_k = draws.fitted_run_ln_k(d, obs.temperature_K, obs.group_index)
            initial = obs.initial if draws.initial is None else draws.initial[d]
            if solver is None:
                for r, t in enumerate(times):
                    out[r][d] = closed_form.concentrations(kind, network, initial[r], math.exp(ln_k[r, 0]), t)
                continue
            kelvin = obs.temperature_K if draws.run_temperature is None else draws.run_temperature[d]
            try:
                solution = solver.solve(draws.inputs(d, kelvin, initial, ln_k=ln_k), sensitivities=False)
            except SolverFailure:
                continue
            for r in range(len(times)):
                out[r][d] = solution.concentrations[r]
        return out

    def temperature_points(self, idata: az.InferenceData, temperature_ref: float) -> TemperaturePoints | None:
        """Each step's ln k fitted freely at each temperature of the isothermal batch runs (``per_temperature``)."""
        return per_temperature_fits(self.study, self.obs, idata.posterior, temperature_ref)

    def figures(
        self,
        folder: StagedFolder,
        idata: az.InferenceData,
        temperature_ref: float,
        fit_checks: pd.DataFrame,
        points: TemperaturePoints | None = None,
    ) -> list[FigureJob]:
        """The figures to draw (``outputs.drawing``): Arrhenius plot, measured quantities, and each run's profiles
        (worked out here, before the drawing processes fork) or the steady states."""
        study, obs, posterior = self.study, self.obs, idata.posterior
        arrhenius = folder.path("figures/arrhenius.png")
        jobs = [
            lambda: plots.arrhenius_plot(
                study, posterior, temperature_ref, self.temperatures_K, arrhenius, points=points
            )
        ]
        if obs.quantity_index is not None:
            quantities = folder.path("figures/measured_quantities.png")
            jobs.append(lambda: plots.measured_quantities_plot(study, obs, fit_checks, quantities))
        if obs.steady:  # one point per steady state: outlet against residence time, not a profile per row
            steady = folder.path("figures/steady_states.png")
            return [*jobs, lambda: plots.steady_state_plot(study, obs, fit_checks, steady)]
        times = [np.linspace(0.0, float(t.max()), PROFILE_POINTS) for t in obs.times]
        curves = self.profiles(posterior, temperature_ref, times)
        for r, run in enumerate(obs.run_ids):
            path = folder.path(f"figures/run_{''.join(ch if ch.isalnum() or ch in '-_.' else '_' for ch in run)}.png")
            jobs.append(lambda r=r, path=path: plots.run_fit_plot(study, obs, r, times[r], curves[r], fit_checks, path))
        return jobs


#: The kinds of study, by ``Study.mode``. Each reads its own data (``open``) and answers the ``Problem``
#: interface; the sampler, the writer, the verdict and the comparison see nothing else. A new kind of experiment
#: is a new class answering ``Problem`` and one line here.
KINDS: dict[str, type[RateConstantProblem] | type[NetworkProblem]] = {
    "rate_constants": RateConstantProblem,
    "network": NetworkProblem,
}
