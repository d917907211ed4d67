"""The candidates file of ``arrhenia next``: experiments not yet made, and the quantity they should pin down.

Two kinds of candidate exist today, one per kind of study: for a rate-constant study, a rate constant measured at
a ``temperature`` (``replicates`` times); for a network study, an isothermal batch run at a ``temperature`` from
``initial`` concentrations, sampled at ``times``, with the ``measured`` species. ``noise`` is the sd of the
study's noise model (of ln of the value for proportional and robust noise, in concentration or rate-constant
units for absolute noise); left out, the posterior's noise scale is used. A batch run's ``detection_limit``
(concentration): values predicted below it are left out. Ramped and dosed candidates are not built.

Everything is checked against the study here and restated in its units (K, the study's time and concentration).
"""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any

import numpy as np
import pydantic
from pydantic import Field, PositiveFloat, model_validator

from ..errors import StudyError
from . import units
from .config import format_validation_error, lists_to_tuples, read_yaml
from .schema import Name, ScenarioUnits, Strict
from .study import Study

#: Keys of runs that are not isothermal batch runs (scenarios and data files use them); refused with a reason.
_NOT_BUILT = ("programme", "feeds", "volume", "residence_times", "reactor", "dosed")


class Candidate(Strict):
    """One candidate experiment (see the module's docstring for which keys go with which kind of study)."""

    name: Name
    temperature: float
    initial: dict[str, Annotated[float, Field(ge=0.0)]] | None = None
    times: Annotated[tuple[PositiveFloat, ...], Field(min_length=1, max_length=500)] | None = None
    measured: Annotated[tuple[Name, ...], Field(min_length=1)] | None = None
    reaction: Name | None = None
    replicates: Annotated[int, Field(ge=1, le=100)] = 1
    noise: PositiveFloat | dict[str, PositiveFloat] | None = None
    detection_limit: PositiveFloat | None = None

    @model_validator(mode="before")
    @classmethod
    def _isothermal_only(cls, data: Any) -> Any:
        if isinstance(data, dict):
            for key in _NOT_BUILT:
                if key in data:
                    raise ValueError(
                        f"'{key}': ramped, dosed and flow candidates are not built yet; a candidate is an isothermal "
                        "batch run (temperature, initial, times, measured) or a rate constant at a temperature"
                    )
        return data

    @model_validator(mode="after")
    def _times_rise(self) -> Candidate:
        if self.times is not None and any(b <= a for a, b in itertools.pairwise(self.times)):
            raise ValueError("'times' rise strictly (sampling times of one run, each once)")
        return self


class CandidateFile(Strict):
    """A file of candidate experiments for ``arrhenia next``.

    ``target``: the quantity to pin down (the command line's ``--target`` replaces it); ``draws``: posterior draws
    used; ``simulations``: simulated data sets per candidate; ``seed``: of the simulations; ``choose``: also pick
    the best set of this many candidates, greedily; ``units``: of temperatures, times and concentrations
    (default the study's).
    """

    candidates: Annotated[tuple[Candidate, ...], Field(min_length=1, max_length=200)]
    target: str | None = None
    draws: Annotated[int, Field(ge=100, le=20_000)] = 1000
    simulations: Annotated[int, Field(ge=20, le=5000)] = 200
    seed: Annotated[int, Field(ge=0, le=2**32 - 1)] = 1
    choose: Annotated[int, Field(ge=2, le=20)] | None = None
    units: ScenarioUnits = ScenarioUnits()

    @model_validator(mode="after")
    def _unique(self) -> CandidateFile:
        names = [c.name for c in self.candidates]
        for index, name in enumerate(names):
            if names.index(name) != index:
                raise ValueError(f"candidates[{index}].name: '{name}' is used twice")
        if self.choose is not None and self.choose > len(names):
            raise ValueError(f"choose: {self.choose} is more than the {len(names)} candidates given")
        return self


@dataclass(frozen=True)
class CandidateRun:
    """A candidate in the study's units: ``kelvin``; for a batch run ``initial`` (N,), ``times`` (study time unit)
    and ``measured`` (species indices), ``detection_limit`` (study concentration unit, or None); for a rate constant
    ``reaction`` (index) and ``replicates``. ``noise``: the noise model's sd per measured species (or one value for a
    rate constant), None to use the posterior's.
    ``where``: the candidate's key path in its file."""

    name: str
    kelvin: float
    where: str
    initial: np.ndarray | None = None
    times: np.ndarray | None = None
    measured: tuple[int, ...] = ()
    reaction: int | None = None
    replicates: int = 1
    noise: np.ndarray | None = None
    detection_limit: float | None = None

    @property
    def duration(self) -> float:
        """The last sampling time (study time unit); NaN for a rate constant."""
        return float(self.times[-1]) if self.times is not None else float("nan")


@dataclass(frozen=True)
class Target:
    """The quantity whose uncertainty should shrink: posterior ``variable`` at ``coordinate`` (a reaction, a
    reversible step or a fitted order), shown as ``label`` in ``unit``. ``kind``: ``energy`` (J/mol shown in the
    study's energy unit), ``exp`` (exp of the variable), ``plain``, ``ln_k_at`` / ``k_at`` (ln k or k of the
    reaction at ``kelvin``)."""

    label: str
    variable: str
    dimension: str
    coordinate: str
    kind: str
    unit: str
    kelvin: float | None = None


_TARGET = re.compile(r"^\s*(?P<name>[A-Za-z_]+)\s*\[\s*(?P<inside>[^\]]+?)\s*\]\s*$")
TARGET_FORMS = (
    "Ea[r], k_ref[r], ln_k_ref[r], k[r, T] or ln_k[r, T] (T with its unit), dH[r], K_ref[r], n[r], order[r:s]"
)


def parse_target(text: str, study: Study, where: str, temperature_unit: str | None = None) -> Target:
    """The target named by ``text`` (as ``summary.csv`` names quantities: ``Ea[coupling]``, ``k[coupling, 85
    degC]``); ``temperature_unit`` is that of a temperature written without one (default the study's)."""
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


def resolve_candidates(
    file: CandidateFile, study: Study, path: Path, measured_default: tuple[str, ...]
) -> list[CandidateRun]:
    """Every candidate checked against ``study`` and restated in its units (``CandidateRun``); ``measured_default``
    are the species a batch candidate measures when it names none (those the fit measured)."""
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
    elif given.time is not None or given.concentration is not None:
        key = "time" if given.time is not None else "concentration"
        raise StudyError(f"{path}: units.{key}", "a rate-constant study's candidates have temperatures only")
    runs = []
    for index, candidate in enumerate(file.candidates):
        where = f"{path}: candidates[{index}]"
        kelvin = float(units.to_kelvin(candidate.temperature, temperature_unit, f"{where}.temperature")[0])
        if network:
            runs.append(
                _batch_run(candidate, study, where, kelvin, time_factor, concentration_factor, measured_default)
            )
        else:
            runs.append(_rate_constant_run(candidate, study, where, kelvin))
    return runs


def _batch_run(
    candidate: Candidate,
    study: Study,
    where: str,
    kelvin: float,
    time_factor: float,
    concentration_factor: float,
    measured_default: tuple[str, ...],
) -> CandidateRun:
    if candidate.reaction is not None:
        raise StudyError(
            f"{where}.reaction", "a network study's candidates are batch runs; 'reaction' is for rate constants"
        )
    if "replicates" in candidate.model_fields_set:
        raise StudyError(f"{where}.replicates", "a batch run is sampled at 'times'; 'replicates' is for rate constants")
    for key in ("initial", "times"):
        if getattr(candidate, key) is None:
            raise StudyError(f"{where}", f"required key '{key}' is missing (a batch run: temperature, initial, times)")
    species = study.species
    for name in candidate.initial:
        if name not in species:
            raise StudyError(
                f"{where}.initial.{name}", f"'{name}' is not a species of the study ({', '.join(species)})"
            )
    initial = np.array([candidate.initial.get(name, 0.0) for name in species]) * concentration_factor
    if not np.any(initial > 0):
        raise StudyError(f"{where}.initial", "charges nothing: give a positive initial concentration")
    measured = candidate.measured if candidate.measured is not None else measured_default
    for name in measured:
        if name not in species:
            raise StudyError(f"{where}.measured", f"'{name}' is not a species of the study ({', '.join(species)})")
    if len(set(measured)) != len(measured):
        raise StudyError(f"{where}.measured", "a species is listed twice")
    factor = concentration_factor if study.noise.model == "absolute" else 1.0
    return CandidateRun(
        candidate.name,
        kelvin,
        where,
        initial=initial,
        times=np.array(candidate.times) * time_factor,
        measured=tuple(species.index(name) for name in measured),
        noise=_noise_vector(candidate, tuple(measured), where, factor),
        detection_limit=None if candidate.detection_limit is None else candidate.detection_limit * concentration_factor,
    )


def _rate_constant_run(candidate: Candidate, study: Study, where: str, kelvin: float) -> CandidateRun:
    for key in ("initial", "times", "measured", "detection_limit"):
        if getattr(candidate, key) is not None:
            raise StudyError(
                f"{where}.{key}",
                f"a rate-constant study's candidates are rate constants at a temperature; '{key}' is for batch runs",
            )
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
    )
