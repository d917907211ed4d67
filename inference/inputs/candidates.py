"""The candidates file of ``arrhenia next``: experiments not yet made, and the quantity they should pin down.

For a rate-constant study a candidate is a rate constant measured at a ``temperature`` (``replicates`` times).
For a network study it is a run, in the study's own layouts:

- a batch run from ``initial`` concentrations, sampled at ``times``, at a ``temperature`` or under a ``programme``
  of (time, temperature) points joined by straight lines (the temperatures file); with ``feeds`` (start, stop,
  rate, concentration of each species fed: the feeds file) into an initial liquid ``volume`` it is a dosed run;
- a flow reactor at steady state (``reactor: cstr`` or ``pfr``, the steady-states file): a ``feed`` at a
  ``temperature``, one steady state per residence time of ``residence_times``.

Each measures the ``measured`` species. ``noise`` is the sd of the study's noise model (of ln of the value for
proportional and robust noise, in the measured values' units for absolute noise); left out, the posterior's noise
scale is used. ``detection_limit`` (measured values' units): values predicted below it are left out.

A file may add reactor ``scenarios`` (as in a scenarios file) whose answers a target can name
(``scenario:NAME:QUANTITY``, see ``parse_target``).

Everything is checked against the study here and restated in its units (K, the study's time and concentration):
each candidate becomes the ``RunSetup`` (and sampling times) the study's data reader would build for it.
"""

from __future__ import annotations

import itertools
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Literal

import numpy as np
import pydantic
from pydantic import Field, PositiveFloat, model_validator

from ..errors import StudyError
from ..physics.conditions import Feed, RunSetup
from ..physics.network import HELD_START_HINT, held_start_blocked
from . import units
from .config import format_validation_error, lists_to_tuples, read_yaml
from .scenarios import check_scenario
from .schema import Name, Scenario, ScenarioFile, ScenarioUnits, Strict
from .study import Study

#: The keys of each kind of network candidate (for the messages refusing the others').
_BATCH_KEYS = ("programme", "initial", "times", "volume", "feeds")
_FLOW_KEYS = ("feed", "residence_times")

Concentrations = dict[str, Annotated[float, Field(ge=0.0)]]


class CandidateFeed(Strict):
    """One dosing interval of a candidate run, as a row of the study's feeds file: a constant volumetric ``rate``
    (the study's volume unit per time) from ``start`` to ``stop`` (times) of a feed whose ``concentration`` names
    each species in it."""

    start: Annotated[float, Field(ge=0.0)]
    stop: PositiveFloat
    rate: Annotated[float, Field(ge=0.0)]
    concentration: Annotated[Concentrations, Field(min_length=1)]

    @model_validator(mode="after")
    def _stops_after_start(self) -> CandidateFeed:
        if not self.stop > self.start:
            raise ValueError(f"a feed stops after it starts (start {self.start:g}, stop {self.stop:g})")
        return self


class Candidate(Strict):
    """One candidate experiment (see the module's docstring for which keys go with which kind)."""

    name: Name
    reactor: Literal["batch", "cstr", "pfr"] = "batch"
    temperature: float | None = None
    programme: Annotated[tuple[tuple[float, float], ...], Field(min_length=2, max_length=1000)] | None = None
    initial: Concentrations | None = None
    times: Annotated[tuple[PositiveFloat, ...], Field(min_length=1, max_length=500)] | None = None
    volume: PositiveFloat | None = None
    feeds: Annotated[tuple[CandidateFeed, ...], Field(min_length=1, max_length=100)] | None = None
    feed: Concentrations | None = None
    residence_times: Annotated[tuple[PositiveFloat, ...], Field(min_length=1, max_length=100)] | None = None
    measured: Annotated[tuple[Name, ...], Field(min_length=1)] | None = None
    reaction: Name | None = None
    replicates: Annotated[int, Field(ge=1, le=100)] = 1
    noise: PositiveFloat | dict[str, PositiveFloat] | None = None
    detection_limit: PositiveFloat | None = None

    @model_validator(mode="after")
    def _consistent(self) -> Candidate:
        if (self.temperature is None) == (self.programme is None):
            raise ValueError(
                "give either 'temperature' or 'programme' (a list of [time, temperature] points), not both"
                if self.temperature is not None
                else "required key 'temperature' is missing (or a 'programme' of [time, temperature] points)"
            )
        if self.programme is not None:
            times = [point[0] for point in self.programme]
            if times[0] != 0 or any(b <= a for a, b in itertools.pairwise(times)):
                raise ValueError("'programme' times start at 0 and rise")
        for key in ("times", "residence_times"):
            values = getattr(self, key)
            if values is not None and any(b <= a for a, b in itertools.pairwise(values)):
                raise ValueError(f"'{key}' rise strictly (each once)")
        if self.reactor == "batch":
            for key in _FLOW_KEYS:
                if getattr(self, key) is not None:
                    raise ValueError(f"'{key}' is for flow candidates (reactor: cstr or pfr)")
            if self.feeds is not None and self.volume is None:
                raise ValueError("a dosed run needs 'volume', its initial liquid volume (the study's volume unit)")
        else:
            for key in _BATCH_KEYS:
                if getattr(self, key) is not None:
                    raise ValueError(
                        f"'{key}' is for batch runs; a {self.reactor} candidate has 'temperature', 'feed' and "
                        "'residence_times'"
                    )
            for key in _FLOW_KEYS:
                if getattr(self, key) is None:
                    raise ValueError(f"a {self.reactor} candidate needs '{key}'")
        return self


class CandidateFile(Strict):
    """A file of candidate experiments for ``arrhenia next``.

    ``target``: the quantity to pin down (the command line's ``--target`` replaces it); ``draws``: posterior draws
    used; ``simulations``: simulated data sets per candidate; ``seed``: of the simulations; ``choose``: also pick
    the best set of this many candidates, greedily; ``units``: of temperatures, times and concentrations
    (default the study's), for the candidates and the ``scenarios`` alike; ``scenarios``: reactor scenarios (as in
    a scenarios file) whose answers a target may name, beside the study's own.
    """

    candidates: Annotated[tuple[Candidate, ...], Field(min_length=1, max_length=200)]
    target: str | None = None
    draws: Annotated[int, Field(ge=100, le=20_000)] = 1000
    simulations: Annotated[int, Field(ge=20, le=5000)] = 200
    seed: Annotated[int, Field(ge=0, le=2**32 - 1)] = 1
    choose: Annotated[int, Field(ge=2, le=20)] | None = None
    units: ScenarioUnits = ScenarioUnits()
    scenarios: Annotated[tuple[Scenario, ...], Field(max_length=50)] = ()

    @model_validator(mode="after")
    def _unique(self) -> CandidateFile:
        for key, items in (("candidates", self.candidates), ("scenarios", self.scenarios)):
            names = [item.name for item in items]
            for index, name in enumerate(names):
                if names.index(name) != index:
                    raise ValueError(f"{key}[{index}].name: '{name}' is used twice")
        if self.choose is not None and self.choose > len(self.candidates):
            raise ValueError(f"choose: {self.choose} is more than the {len(self.candidates)} candidates given")
        return self


@dataclass(frozen=True)
class CandidateRun:
    """A candidate in the study's units. ``kelvin``: its temperature (K; a programme's nominal temperature, the
    time-weighted mean up to the last sampling time, as the fit states a ramped run's constants at); ``kind``:
    ``rate_constant``, ``batch`` (isothermal, ramped or dosed), ``cstr`` or ``pfr``.

    A network candidate is one or more runs as the study's data reader builds them: ``setups`` (one
    ``RunSetup`` each) sampled at ``times`` (one array each, study time unit): a batch run is one run, a flow
    candidate one run per residence time (its one time). ``initial`` (N,): a batch run's charge or a flow
    reactor's feed; ``measured`` (species indices); ``detection_limit`` (measured values' units, or None);
    ``scale``: the largest concentration charged or fed; ``span``: the lowest and highest temperature (K) while it
    is sampled. A rate constant has ``reaction`` (index) and ``replicates``. ``noise``: the noise model's sd per
    measured species (or one value for a rate constant), None to use the posterior's. ``where``: the candidate's
    key path in its file."""

    name: str
    kelvin: float
    where: str
    kind: str = "rate_constant"
    initial: np.ndarray | None = None
    setups: tuple[RunSetup, ...] = ()
    times: tuple[np.ndarray, ...] = ()
    measured: tuple[int, ...] = ()
    reaction: int | None = None
    replicates: int = 1
    noise: np.ndarray | None = None
    detection_limit: float | None = None
    scale: float = 1.0
    span: tuple[float, float] | None = None

    @property
    def duration(self) -> float:
        """A batch run's last sampling time (study time unit); NaN for flow candidates and rate constants."""
        return float(self.times[0][-1]) if self.kind == "batch" else float("nan")

    @property
    def ramped(self) -> bool:
        return any(setup.ramped for setup in self.setups)

    @property
    def dosed(self) -> bool:
        return self.kind == "batch" and any(setup.feeds for setup in self.setups)

    @property
    def description(self) -> str:
        """The kind in words: ``rate constant``, ``batch``, ``ramped batch``, ``dosed batch``, ``cstr``, ``pfr``."""
        if self.kind != "batch":
            return self.kind.replace("_", " ")
        return " ".join([*(["ramped"] if self.ramped else []), *(["dosed"] if self.dosed else []), "batch"])

    @property
    def values_per_species(self) -> int:
        """Measured values of each measured species: sampling times summed over the candidate's runs."""
        return int(sum(t.size for t in self.times))


@dataclass(frozen=True)
class Target:
    """The quantity whose uncertainty should shrink: posterior ``variable`` at ``coordinate`` (a reaction, a
    reversible step or a fitted order), shown as ``label`` in ``unit``. ``kind``: ``energy`` (J/mol shown in the
    study's energy unit), ``exp`` (exp of the variable), ``plain``, ``ln_k_at`` / ``k_at`` (ln k or k of the
    reaction at ``kelvin``), or ``scenario``: the answer ``quantity`` of the reactor scenario named ``coordinate``
    (its unit known once the scenario is run)."""

    label: str
    variable: str
    dimension: str
    coordinate: str
    kind: str
    unit: str
    kelvin: float | None = None
    quantity: str | None = None


_TARGET = re.compile(r"^\s*(?P<name>[A-Za-z_]+)\s*\[\s*(?P<inside>[^\]]+?)\s*\]\s*$")
SCENARIO_PREFIX = "scenario:"
TARGET_FORMS = (
    "Ea[r], k_ref[r], ln_k_ref[r], k[r, T] or ln_k[r, T] (T with its unit), dH[r], K_ref[r], n[r], order[r:s], "
    "scenario:NAME:QUANTITY (an answer of a reactor scenario)"
)


def _scenario_target(text: str, where: str, scenarios: tuple[str, ...]) -> Target:
    """``scenario:NAME:QUANTITY``: the answer QUANTITY (as ``arrhenia predict`` names it) of scenario NAME."""
    _, name, quantity = (part.strip() for part in [*text.strip().split(":", 2), "", ""][:3])
    if not name or not quantity:
        raise StudyError(where, f"'{text}' is not a scenario target", "write scenario:NAME:QUANTITY")
    if name not in scenarios:
        raise StudyError(
            where,
            f"'{name}' is not a scenario of the study or the candidates file",
            f"scenarios: {', '.join(scenarios)}" if scenarios else "add one under 'scenarios:' in the candidates file",
        )
    return Target(f"scenario:{name}:{quantity}", "", "", name, "scenario", "", quantity=quantity)


def parse_target(
    text: str,
    study: Study,
    where: str,
    temperature_unit: str | None = None,
    scenarios: tuple[str, ...] = (),
) -> Target:
    """The target named by ``text`` (as ``summary.csv`` names quantities: ``Ea[coupling]``, ``k[coupling, 85
    degC]``; or a scenario's answer, ``scenario:NAME:QUANTITY``, NAME one of ``scenarios``); ``temperature_unit``
    is that of a temperature written without one (default the study's)."""
    if text.strip().startswith(SCENARIO_PREFIX):
        return _scenario_target(text, where, scenarios)
    match = _TARGET.match(text)
    hint = f"targets: {TARGET_FORMS}"
    if match is None:
        raise StudyError(where, f"'{text}' is not a target I can compute", hint)
    name, inside = match["name"], match["inside"]
    reaction, _, rest = (part.strip() for part in inside.partition(","))
    names = study.reaction_names
    energy = study.units.energy
    if name == "order":
        labels = [f"{r.name}:{f.species}" for r in study.reactions for f in r.fitted_orders]
        if inside.replace(" ", "") not in labels:
            raise StudyError(where, f"'{inside}' is no fitted order of the study", f"fitted orders: {labels or 'none'}")
        return Target(
            f"order[{inside.replace(' ', '')}]", "order", "fitted_order", inside.replace(" ", ""), "plain", ""
        )
    if reaction not in names:
        raise StudyError(where, f"'{reaction}' is not a reaction of the study ({', '.join(names)})", hint)
    spec = study.reactions[names.index(reaction)]
    if spec.held and name in ("k", "ln_k", "Ea", "k_ref", "ln_k_ref", "n"):
        raise StudyError(where, f"'{reaction}' is held at equilibrium and has no rate constant", "K_ref and dH are")
    if name in ("k", "ln_k"):
        if not rest:
            raise StudyError(where, f"'{text}' needs a temperature", "write e.g. k[step, 85 degC]")
        value, _, unit = rest.partition(" ")
        unit = unit.strip() or temperature_unit or study.units.temperature
        try:
            number = float(value)
        except ValueError:
            raise StudyError(where, f"'{rest}' is not a temperature", "write e.g. k[step, 85 degC]") from None
        kelvin = float(units.to_kelvin(number, unit, where)[0])
        shown = f"{float(units.kelvin_to(kelvin, study.units.temperature)):g} {study.units.temperature}"
        if name == "k":
            return Target(f"k[{reaction}, {shown}]", "ln_k_ref", "reaction", reaction, "k_at", spec.k_unit, kelvin)
        return Target(f"ln_k[{reaction}, {shown}]", "ln_k_ref", "reaction", reaction, "ln_k_at", "", kelvin)
    if rest:
        raise StudyError(where, f"'{text}': only k[...] and ln_k[...] take a temperature", hint)
    if name == "Ea":
        return Target(f"Ea[{reaction}]", "Ea", "reaction", reaction, "energy", energy)
    if name == "k_ref":
        return Target(f"k_ref[{reaction}]", "ln_k_ref", "reaction", reaction, "exp", spec.k_unit)
    if name == "ln_k_ref":
        return Target(f"ln_k_ref[{reaction}]", "ln_k_ref", "reaction", reaction, "plain", "")
    if name in ("dH", "K_ref"):
        if spec.equilibrium is None:
            raise StudyError(where, f"'{reaction}' is not reversible, so it has no {name}", hint)
        if name == "dH":
            return Target(f"dH[{reaction}]", "dH", "reversible", reaction, "energy", energy)
        return Target(f"K_ref[{reaction}]", "ln_K_ref", "reversible", reaction, "exp", spec.eq_unit)
    if name == "n":
        if spec.exponent_sd is None:
            raise StudyError(where, f"the temperature exponent of '{reaction}' is not fitted", hint)
        return Target(f"n[{reaction}]", "temperature_exponent", "reaction", reaction, "plain", "")
    raise StudyError(where, f"'{text}' is not a target I can compute", hint)


def load_candidates(path: Path) -> CandidateFile:
    """Read and validate a candidates file (its shape only; ``resolve_candidates`` checks it against a study)."""
    content = read_yaml(path)
    if not isinstance(content, dict):
        raise StudyError(str(path), "a candidates file is a mapping with the key 'candidates'")
    try:
        return CandidateFile.model_validate(lists_to_tuples(content))
    except pydantic.ValidationError as exc:
        raise format_validation_error(str(path), exc, CandidateFile) from None


def _noise_vector(candidate: Candidate, names: tuple[str, ...], where: str, factor: float) -> np.ndarray | None:
    """The stated noise per measured name (``factor`` converts absolute noise into the study's units)."""
    if candidate.noise is None:
        return None
    if not isinstance(candidate.noise, dict):
        return np.full(len(names), candidate.noise * factor)
    for name in candidate.noise:
        if name not in names:
            raise StudyError(
                f"{where}.noise.{name}", f"'{name}' is not measured in this candidate ({', '.join(names)})"
            )
    missing = [name for name in names if name not in candidate.noise]
    if missing:
        raise StudyError(f"{where}.noise", f"no noise given for {', '.join(missing)}", "give one for every measured")
    return np.array([candidate.noise[name] * factor for name in names])


@dataclass(frozen=True)
class _Units:
    """A candidates file's temperature unit, and the factors from its time and concentration units to the
    study's (value in study units = factor x value)."""

    temperature: str
    time: float
    concentration: float


def resolve_candidates(
    file: CandidateFile, study: Study, path: Path, measured_default: tuple[str, ...]
) -> list[CandidateRun]:
    """Every candidate checked against ``study`` and restated in its units (``CandidateRun``), and the file's
    scenarios checked; ``measured_default`` are the species a network candidate measures when it names none (those
    the fit measured)."""
    given = file.units
    temperature_unit = given.temperature or study.units.temperature
    units.parse_unit(temperature_unit, "temperature", f"{path}: units.temperature")
    network = study.mode == "network"
    time_factor = concentration_factor = 1.0
    if network:
        time_factor = float(
            units.convert(1.0, given.time or study.units.time, study.units.time, "time", f"{path}: units.time")
        )
        concentration_factor = float(
            units.convert(
                1.0,
                given.concentration or study.units.concentration,
                study.units.concentration,
                "concentration",
                f"{path}: units.concentration",
            )
        )
        _check_scenarios(file, study, path)
    elif given.time is not None or given.concentration is not None:
        key = "time" if given.time is not None else "concentration"
        raise StudyError(f"{path}: units.{key}", "a rate-constant study's candidates have temperatures only")
    elif file.scenarios:
        raise StudyError(f"{path}: scenarios", "reactor scenarios need a reaction network fitted to runs")
    factors = _Units(temperature_unit, time_factor, concentration_factor)
    runs = []
    for index, candidate in enumerate(file.candidates):
        where = f"{path}: candidates[{index}]"
        if network:
            runs.append(_network_run(candidate, study, where, factors, measured_default))
        else:
            runs.append(_rate_constant_run(candidate, study, where, temperature_unit))
    return runs


def _check_scenarios(file: CandidateFile, study: Study, path: Path) -> None:
    """The file's scenarios, as ``arrhenia predict`` checks a scenarios file's; none shares a study scenario's
    name."""
    theirs = {scenario.name for scenario in study.scenarios}
    for index, scenario in enumerate(file.scenarios):
        where = f"{path}: scenarios[{index}]"
        if scenario.name in theirs:
            raise StudyError(f"{where}.name", f"'{scenario.name}' is also a scenario of the study", "rename it")
        check_scenario(scenario, study, where)


def scenario_names(file: CandidateFile, study: Study) -> tuple[str, ...]:
    """The scenarios a target may name: the study's and the candidates file's."""
    return tuple(s.name for s in study.scenarios) + tuple(s.name for s in file.scenarios)


def find_scenario(file: CandidateFile, study: Study, path: Path, name: str) -> tuple[ScenarioFile, int, str]:
    """The scenarios holding scenario ``name`` (the candidates file's, in its units, or the study's, in the
    study's), its index there, and the file they come from."""
    own = [scenario.name for scenario in file.scenarios]
    if name in own:
        return ScenarioFile(scenarios=file.scenarios, units=file.units), own.index(name), str(path)
    theirs = [scenario.name for scenario in study.scenarios]
    return ScenarioFile(scenarios=study.scenarios), theirs.index(name), str(study.path)


def _vector(values: dict[str, float], study: Study, where: str, factor: float) -> np.ndarray:
    """A mapping species -> concentration as a vector over the study's species (0 where not named), times
    ``factor``."""
    for name in values:
        if name not in study.species:
            raise StudyError(f"{where}.{name}", f"'{name}' is not a species of the study ({', '.join(study.species)})")
    return np.array([values.get(name, 0.0) for name in study.species]) * factor


def _network_run(
    candidate: Candidate, study: Study, where: str, factors: _Units, measured_default: tuple[str, ...]
) -> CandidateRun:
    if candidate.reaction is not None:
        raise StudyError(f"{where}.reaction", "a network study's candidates are runs; 'reaction' is for rate constants")
    if "replicates" in candidate.model_fields_set:
        raise StudyError(f"{where}.replicates", "a run is sampled at 'times'; 'replicates' is for rate constants")
    species = study.species
    measured = candidate.measured if candidate.measured is not None else measured_default
    for name in measured:
        if name not in species:
            raise StudyError(f"{where}.measured", f"'{name}' is not a species of the study ({', '.join(species)})")
    if len(set(measured)) != len(measured):
        raise StudyError(f"{where}.measured", "a species is listed twice")
    if candidate.reactor == "batch":
        if study.measured_as == "amount" and candidate.volume is None:
            raise StudyError(
                where,
                "required key 'volume' is missing",
                "the study's measured values are amounts (c x volume): give the run's initial liquid volume in "
                f"{study.units.volume}",
            )
        kind, initial, setups, times, span = _batch(candidate, study, where, factors)
        charged = [initial, *(feed.concentration for feed in setups[0].feeds if feed.rate > 0)]
        scale = max(float(np.max(c)) for c in charged)
        if not scale > 0:
            raise StudyError(
                f"{where}.initial",
                "charges nothing: give a positive initial concentration" + (" or feed" if setups[0].feeds else ""),
            )
        if study.measured_as == "amount":
            scale *= setups[0].volume
    else:
        kind, initial, setups, times, span = _flow(candidate, where, study, factors)
        scale = float(np.max(initial))
    factor = factors.concentration if study.noise.model == "absolute" else 1.0
    limit = candidate.detection_limit
    return CandidateRun(
        candidate.name,
        float(setups[0].nominal),
        where,
        kind=kind,
        initial=initial,
        setups=setups,
        times=times,
        measured=tuple(species.index(name) for name in measured),
        noise=_noise_vector(candidate, tuple(measured), where, factor),
        detection_limit=None if limit is None else limit * factors.concentration,
        scale=scale,
        span=span,
    )


def _batch(
    candidate: Candidate, study: Study, where: str, factors: _Units
) -> tuple[str, np.ndarray, tuple[RunSetup, ...], tuple[np.ndarray, ...], tuple[float, float]]:
    """A batch candidate as the data reader builds a run of the runs file (with its rows of the temperatures and
    feeds files): (kind, initial (N,), (setup,), (times,), span (K))."""
    if candidate.times is None:
        raise StudyError(
            where, "required key 'times' is missing (a batch run: temperature or programme, initial, times)"
        )
    if candidate.initial is None and candidate.feeds is None:
        raise StudyError(
            where, "required key 'initial' is missing (a batch run: temperature or programme, initial, times)"
        )
    t, c = factors.time, factors.concentration
    initial = _vector(candidate.initial or {}, study, f"{where}.initial", c)
    blocked = held_start_blocked(study.network, initial) if study.network is not None else None
    if blocked is not None:
        raise StudyError(f"{where}.initial", f"{blocked[0]} and {blocked[1]} both start at zero", HELD_START_HINT)
    times = np.array(candidate.times) * t
    feeds = tuple(
        Feed(
            f.start * t, f.stop * t, f.rate / t, _vector(f.concentration, study, f"{where}.feeds[{i}].concentration", c)
        )
        for i, f in enumerate(candidate.feeds or ())
    )
    volume = 1.0 if candidate.volume is None else float(candidate.volume)
    if candidate.programme is None:
        kelvin = float(units.to_kelvin(candidate.temperature, factors.temperature, f"{where}.temperature")[0])
        return "batch", initial, (RunSetup.isothermal(kelvin, volume=volume, feeds=feeds),), (times,), (kelvin, kelvin)
    history = np.array(candidate.programme, dtype=float)
    history[:, 0] *= t
    history[:, 1] = units.to_kelvin(history[:, 1], factors.temperature, f"{where}.programme")
    # Its constants are stated at the time-weighted mean temperature up to the last sampling time, as the fit does.
    setup = RunSetup(history, horizon=float(times[-1]), volume=volume, feeds=feeds)
    inside = history[history[:, 0] <= times[-1], 1]
    end = float(np.interp(times[-1], history[:, 0], history[:, 1]))
    span = (min(float(inside.min()), end), max(float(inside.max()), end))
    return "batch", initial, (setup,), (times,), span


def _flow(
    candidate: Candidate, where: str, study: Study, factors: _Units
) -> tuple[str, np.ndarray, tuple[RunSetup, ...], tuple[np.ndarray, ...], tuple[float, float]]:
    """A flow candidate as the data reader builds the rows of a steady-states file, one per residence time: a
    CSTR fed at 1/tau into a unit volume held constant, a PFR a batch run to its space time."""
    feed = _vector(candidate.feed, study, f"{where}.feed", factors.concentration)
    if not np.max(feed) > 0:
        raise StudyError(f"{where}.feed", "feeds nothing: give a positive feed concentration")
    kelvin = float(units.to_kelvin(candidate.temperature, factors.temperature, f"{where}.temperature")[0])
    taus = np.array(candidate.residence_times) * factors.time
    if candidate.reactor == "cstr":
        if study.network is not None and study.network.held >= 0:
            raise StudyError(
                f"{where}.reactor",
                "a CSTR steady state is not computed for a network with a step held at equilibrium",
                "propose batch or pfr runs",
            )
        setups = tuple(
            RunSetup.isothermal(kelvin, volume=1.0, feeds=(Feed(0.0, math.inf, 1.0 / float(tau), feed),), overflow=True)
            for tau in taus
        )
    else:
        setups = tuple(RunSetup.isothermal(kelvin) for _ in taus)
    return candidate.reactor, feed, setups, tuple(np.array([tau]) for tau in taus), (kelvin, kelvin)


def _rate_constant_run(candidate: Candidate, study: Study, where: str, temperature_unit: str) -> CandidateRun:
    for key in ("reactor", *_BATCH_KEYS, *_FLOW_KEYS, "measured", "detection_limit"):
        if key in candidate.model_fields_set:
            raise StudyError(
                f"{where}.{key}",
                f"a rate-constant study's candidates are rate constants at a temperature; '{key}' is for runs",
            )
    kelvin = float(units.to_kelvin(candidate.temperature, temperature_unit, f"{where}.temperature")[0])
    names = study.reaction_names
    if candidate.reaction is None and len(names) > 1:
        raise StudyError(f"{where}", "required key 'reaction' is missing", f"the study has {', '.join(names)}")
    reaction = candidate.reaction or names[0]
    if reaction not in names:
        raise StudyError(f"{where}.reaction", f"'{reaction}' is not a reaction of the study ({', '.join(names)})")
    if isinstance(candidate.noise, dict):
        raise StudyError(
            f"{where}.noise", "a rate constant's noise is one number (the sd of ln k, or of k if absolute)"
        )
    noise = None if candidate.noise is None else np.array([float(candidate.noise)])
    return CandidateRun(
        candidate.name,
        kelvin,
        where,
        reaction=names.index(reaction),
        replicates=candidate.replicates,
        noise=noise,
        span=(kelvin, kelvin),
    )
