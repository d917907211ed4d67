"""The shape of a study file: a strict pydantic schema, frozen once validated.

Nothing here converts units or reads data; ``config`` turns a validated ``StudyFile`` into a ``Study``.
Every model forbids unknown keys, so a misspelt key is an error with a "did you mean" hint.
"""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, PositiveFloat, model_validator

NAME_PATTERN = r"^[A-Za-z][A-Za-z0-9_.\-]*$"
Name = Annotated[str, Field(pattern=NAME_PATTERN, max_length=64)]


class Strict(BaseModel):
    """Base of every schema model: unknown keys are rejected, values are immutable, no type coercion
    from strings to numbers (a quoted "60" for an energy is a mistake worth reporting)."""

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)


class LogNormalPrior(Strict):
    """Lognormal prior for a positive quantity: 95 % of its mass lies in [median/factor, median*factor]."""

    median: PositiveFloat
    factor: Annotated[float, Field(gt=1.0, le=1e12)]


class PositiveNormalPrior(Strict):
    """Normal prior truncated to positive values, in the study's energy unit."""

    mean: Annotated[float, Field(ge=0.0)]
    sd: PositiveFloat


class HalfNormalPrior(Strict):
    """Half-normal prior for a scale parameter."""

    scale: PositiveFloat


class Units(Strict):
    """Units of every number in the study file and its data files (pint spellings)."""

    temperature: str
    energy: str = "kJ/mol"
    time: str | None = None
    concentration: str | None = None
    rate_constant: str | None = None


class DataFiles(Strict):
    """Data file paths, relative to the study file. Either ``rate_constants`` (the Arrhenius fit of measured
    rate constants) or ``runs`` with ``measurements`` (concentration-time data from batch runs)."""

    rate_constants: str | None = None
    runs: str | None = None
    measurements: str | None = None

    @model_validator(mode="after")
    def _one_mode(self) -> DataFiles:
        network = self.runs is not None or self.measurements is not None
        if self.rate_constants is not None and network:
            raise ValueError("give either 'rate_constants' or 'runs' with 'measurements', not both")
        if self.rate_constants is None and not network:
            raise ValueError("give 'rate_constants', or 'runs' with 'measurements'")
        if network and (self.runs is None or self.measurements is None):
            raise ValueError("'runs' and 'measurements' go together")
        return self


class NormalPrior(Strict):
    """Normal prior for a quantity of either sign (a reaction enthalpy), in the study's energy unit."""

    mean: float
    sd: PositiveFloat


class OrderPrior(Strict):
    """Uniform prior of a fitted reaction order between ``lower`` and ``upper``."""

    lower: Annotated[float, Field(ge=0.0, le=10.0)] = 0.0
    upper: Annotated[float, Field(gt=0.0, le=10.0)] = 3.0

    @model_validator(mode="after")
    def _ordered(self) -> OrderPrior:
        if not self.lower < self.upper:
            raise ValueError("'lower' must be below 'upper'")
        return self


Order = Annotated[float, Field(ge=0.0, le=10.0)] | OrderPrior


class Reaction(Strict):
    """One reaction: name, equation, rate law and the priors of its parameters.

    ``k_ref`` is k at T_ref in the units its order implies (concentration^(1-order) / time). Reversible
    steps (``<=>``) also take ``K_ref`` (equilibrium constant K_c at T_ref, concentration^(sum of
    stoichiometric coefficients)) and ``dH`` (reaction enthalpy for van 't Hoff, energy unit). ``power_law``
    takes ``orders``: per reactant a fixed number or ``{lower, upper}`` to fit it.
    """

    name: Name
    equation: str | None = None
    rate_law: Literal["mass_action", "power_law"] = "mass_action"
    k_ref: LogNormalPrior
    Ea: PositiveNormalPrior
    K_ref: LogNormalPrior | None = None
    dH: NormalPrior | None = None
    orders: dict[str, Order] | None = None


class Noise(Strict):
    """Measurement noise. ``proportional``: normal on the log of the value (lognormal); ``absolute``: normal
    on the value (``sigma.scale`` in concentration units); ``robust``: Student-t on the log of the value with
    ``nu`` degrees of freedom. ``per_species``: one sigma per observed species instead of one shared."""

    model: Literal["proportional", "absolute", "robust"] = "proportional"
    sigma: HalfNormalPrior = HalfNormalPrior(scale=0.2)
    per_species: bool = False
    nu: Annotated[float, Field(gt=1.0, le=1000.0)] = 4.0


class Sampling(Strict):
    """NUTS settings. One integer seed drives every random number of a run."""

    draws: Annotated[int, Field(ge=10, le=100_000)] = 1000
    tune: Annotated[int, Field(ge=0, le=100_000)] = 1000
    chains: Annotated[int, Field(ge=1, le=64)] = 4
    seed: Annotated[int, Field(ge=0, le=2**32 - 1)] = 1
    target_accept: Annotated[float, Field(gt=0.5, lt=1.0)] = 0.9


class Report(Strict):
    """Extra derived quantities: rate constants at these temperatures (in the study's temperature unit)."""

    k_at: tuple[float, ...] = ()


class StudyFile(Strict):
    """A whole study file as written by the user."""

    study: Name
    title: str = ""
    units: Units
    data: DataFiles
    species: tuple[Annotated[str, Field(pattern=r"^[A-Za-z][A-Za-z0-9_]*$", max_length=32)], ...] = ()
    reactions: Annotated[tuple[Reaction, ...], Field(min_length=1)]
    initial_uncertainty: dict[str, Annotated[float, Field(gt=0.0, le=2.0)]] = Field(default_factory=dict)
    reference_temperature: Literal["auto"] | float | str = "auto"
    noise: Noise = Noise()
    sampling: Sampling = Sampling()
    report: Report = Report()

    @model_validator(mode="after")
    def _unique_names(self) -> StudyFile:
        seen: set[str] = set()
        for index, reaction in enumerate(self.reactions):
            if reaction.name in seen:
                raise ValueError(f"reactions[{index}].name: '{reaction.name}' is used twice")
            seen.add(reaction.name)
        if len(set(self.species)) != len(self.species):
            twice = next(name for name in self.species if self.species.count(name) > 1)
            raise ValueError(f"species: '{twice}' is listed twice")
        return self
