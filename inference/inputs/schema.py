"""The shape of a study file: a strict pydantic schema, frozen once validated.

Nothing here converts units or reads data; ``config`` turns a validated ``StudyFile`` into a ``Study``.
Every model forbids unknown keys, so a misspelt key is an error with a "did you mean" hint.
"""

from __future__ import annotations

import itertools
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, PositiveFloat, model_validator

from .rate_laws import REGISTRY

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
    """Units of every number in the study file and its data files (pint spellings). ``volume`` is the unit of
    liquid volumes and of feed rates (volume per time unit)."""

    temperature: str
    energy: str = "kJ/mol"
    time: str | None = None
    concentration: str | None = None
    rate_constant: str | None = None
    volume: str = "L"


class DataFiles(Strict):
    """Data file paths, relative to the study file, in one of three layouts: ``rate_constants`` (the Arrhenius fit
    of measured rate constants); ``runs`` with ``measurements`` (concentration-time data from batch runs),
    optionally with ``temperatures`` (temperature histories of runs) and ``feeds`` (dosing into runs); or
    ``steady_states`` (outlet concentrations of CSTRs and PFRs). ``measured_as``: whether the measured values of
    batch runs are concentrations or amounts (concentration x volume)."""

    rate_constants: str | None = None
    runs: str | None = None
    measurements: str | None = None
    temperatures: str | None = None
    feeds: str | None = None
    steady_states: str | None = None
    measured_as: Literal["concentration", "amount"] = "concentration"

    @model_validator(mode="after")
    def _one_mode(self) -> DataFiles:
        batch = self.runs is not None or self.measurements is not None
        layouts = [
            name
            for name, given in (
                ("'rate_constants'", self.rate_constants is not None),
                ("'runs' with 'measurements'", batch),
                ("'steady_states'", self.steady_states is not None),
            )
            if given
        ]
        if len(layouts) > 1:
            raise ValueError(f"give either {' or '.join(layouts)}, {'not both' if len(layouts) == 2 else 'one only'}")
        if not layouts:
            raise ValueError("give 'rate_constants', or 'runs' with 'measurements', or 'steady_states'")
        if batch and (self.runs is None or self.measurements is None):
            raise ValueError("'runs' and 'measurements' go together")
        for extra in ("temperatures", "feeds"):
            if getattr(self, extra) is not None and not batch:
                raise ValueError(f"'{extra}' describes batch runs: it goes with 'runs' and 'measurements'")
        if self.measured_as == "amount" and not batch:
            raise ValueError("'measured_as: amount' is for batch runs ('runs' with 'measurements')")
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


class AdsorptionPrior(Strict):
    """An adsorption (binding) constant of a saturating rate law: K at T_ref (1/concentration) and the
    adsorption enthalpy of its van 't Hoff dependence (energy unit; negative for exothermic adsorption)."""

    K_ref: LogNormalPrior
    dH: NormalPrior


class ExponentPrior(Strict):
    """Normal prior of the temperature exponent n in k = k_ref (T/T_ref)^n exp(-(Ea/R)(1/T - 1/T_ref))."""

    mean: Annotated[float, Field(ge=-10.0, le=10.0)]
    sd: Annotated[float, Field(gt=0.0, le=10.0)]


#: The names of the registered rate laws (``rate_laws.REGISTRY``), the values ``rate_law`` may take.
RATE_LAWS = tuple(REGISTRY)


class Reaction(Strict):
    """One reaction: name, equation, rate law and the priors of its parameters.

    ``k_ref`` is k at T_ref in the units its order implies (concentration^(1-order) / time). Reversible
    steps (``<=>``) also take ``K_ref`` (equilibrium constant K_c at T_ref, concentration^(sum of
    stoichiometric coefficients)) and ``dH`` (reaction enthalpy for van 't Hoff, energy unit). ``power_law``
    takes ``orders``: per reactant a fixed number or ``{lower, upper}`` to fit it. ``saturating`` divides the
    rate by (1 + sum_j K_j c_j)^inhibition_exponent with one ``adsorption`` entry per species j;
    ``michaelis_menten`` is its one-substrate case with exponent 1, given by ``K_M`` (concentration) and
    ``K_M_dH``. ``temperature_exponent`` (any law): n of (T/T_ref)^n, a fixed number or ``{mean, sd}``.
    Every law, and which keys it takes, is declared in ``inference.inputs.rate_laws``. ``fast_equilibrium``: a
    reversible step so fast that it stays at equilibrium (quasi-equilibrium); it takes ``K_ref`` and ``dH`` and no
    ``k_ref`` or ``Ea``, which every other reaction requires.
    """

    name: Name
    equation: str | None = None
    rate_law: Literal[RATE_LAWS] = "mass_action"  # type: ignore[valid-type]
    k_ref: LogNormalPrior | None = None
    Ea: PositiveNormalPrior | None = None
    fast_equilibrium: bool = False
    K_ref: LogNormalPrior | None = None
    dH: NormalPrior | None = None
    orders: dict[str, Order] | None = None
    adsorption: dict[str, AdsorptionPrior] | None = None
    inhibition_exponent: Annotated[float, Field(gt=0.0, le=4.0)] | None = None
    K_M: LogNormalPrior | None = None
    K_M_dH: NormalPrior | None = None
    temperature_exponent: Annotated[float, Field(ge=-10.0, le=10.0)] | ExponentPrior | None = None


class Noise(Strict):
    """Measurement noise. ``proportional``: normal on the log of the value (lognormal); ``absolute``: normal
    on the value (``sigma.scale`` in concentration units); ``robust``: Student-t on the log of the value with
    ``nu`` degrees of freedom. ``per_species``: one sigma per observed species instead of one shared."""

    model: Literal["proportional", "absolute", "robust"] = "proportional"
    sigma: HalfNormalPrior = HalfNormalPrior(scale=0.2)
    per_species: bool = False
    nu: Annotated[float, Field(gt=1.0, le=1000.0)] = 4.0

    @property
    def on_log_scale(self) -> bool:
        """Whether the noise acts on the log of the values (so every value must be positive)."""
        return self.model != "absolute"


class Sampling(Strict):
    """NUTS settings. One integer seed drives every random number of a run; the numbers do not depend on
    ``cores`` (chains in parallel, default one per core, or in sequence with 1)."""

    draws: Annotated[int, Field(ge=10, le=100_000)] = 1000
    tune: Annotated[int, Field(ge=0, le=100_000)] = 1000
    chains: Annotated[int, Field(ge=1, le=64)] = 4
    seed: Annotated[int, Field(ge=0, le=2**32 - 1)] = 1
    target_accept: Annotated[float, Field(gt=0.5, lt=1.0)] = 0.9
    cores: Annotated[int, Field(ge=1, le=64)] | None = None
    mass_matrix: Literal["diagonal", "dense"] = "diagonal"


class Report(Strict):
    """Extra derived quantities: rate constants at these temperatures (in the study's temperature unit)."""

    k_at: tuple[float, ...] = ()


class Spec(Strict):
    """A product specification: at least ``conversion`` of the key reactant by time ``by``."""

    conversion: Annotated[float, Field(gt=0.0, lt=1.0)]
    by: PositiveFloat


class TemperatureFor(Strict):
    """The inverse question: the temperature at which a target is met, searched within ``between``.

    Either ``conversion`` of the key reactant ``within`` a time (batch or PFR), or a rate constant ``k`` or
    first-order ``half_life`` of one ``reaction``.
    """

    between: tuple[float, float]
    conversion: Annotated[float, Field(gt=0.0, lt=1.0)] | None = None
    within: PositiveFloat | None = None
    reaction: str | None = None
    k: PositiveFloat | None = None
    half_life: PositiveFloat | None = None

    @model_validator(mode="after")
    def _one_target(self) -> TemperatureFor:
        by_conversion = self.conversion is not None or self.within is not None
        by_rate = self.reaction is not None or self.k is not None or self.half_life is not None
        if by_conversion == by_rate:
            raise ValueError("give either 'conversion' with 'within', or 'reaction' with 'k' or 'half_life'")
        if by_conversion and (self.conversion is None or self.within is None):
            raise ValueError("'conversion' and 'within' go together")
        if by_rate and (self.reaction is None or (self.k is None) == (self.half_life is None)):
            raise ValueError("give 'reaction' with exactly one of 'k' or 'half_life'")
        if not self.between[0] < self.between[1]:
            raise ValueError("'between' is (lowest, highest) temperature")
        return self


class ScenarioFeed(Strict):
    """One dosing interval of a ``dosed_batch``: a constant volumetric ``rate`` (the study's volume unit per time
    unit) from ``start`` to ``stop`` (times) of a feed whose ``concentration`` names each species in it."""

    start: float
    stop: float
    rate: float
    concentration: dict[str, Annotated[float, Field(ge=0.0)]]


#: The reactors a scenario may run (network studies), declared once.
REACTORS = ("batch", "pfr", "cstr", "programmed_batch", "dosed_batch")
#: The questions a scenario may ask of the fitted rate constants alone, declared once (any study; the only scenarios
#: of a rate-constant study): ``k_at``: k, and the half-life where the order allows one, at ``temperatures``;
#: ``temperature_at``: the temperature at which k reaches ``k`` or the half-life reaches ``half_life``.
QUESTIONS = ("k_at", "temperature_at")
#: The keys of a question scenario (besides ``name``); every other key is a reactor scenario's.
QUESTION_KEYS = ("question", "reaction", "temperatures", "k", "half_life", "order", "c0")
Finite = Annotated[float, Field(allow_inf_nan=False)]
PositiveFinite = Annotated[float, Field(gt=0.0, allow_inf_nan=False)]


class Scenario(Strict):
    """One reactor scenario, or one question about rate constants. Times, temperatures and concentrations are in
    the study's units (or the scenarios file's ``units``).

    ``batch``: isothermal, constant volume, from ``initial`` until ``until``. ``pfr``: isothermal plug flow at
    constant density, ``initial`` is the feed, ``until`` the longest space time. ``cstr``: isothermal steady
    state at each of ``residence_times``. ``programmed_batch``: a batch whose temperature follows ``programme``,
    a list of (time, temperature) points joined by straight lines. ``dosed_batch``: a semi-batch vessel holding
    ``volume`` (the study's volume unit) of ``initial`` at t = 0, fed by ``feeds``, at ``temperature`` or under a
    ``programme``, until ``until``; ``dosed`` names the species whose accumulation is reported (default: every
    species the feeds carry).

    A ``question`` (``QUESTIONS``) asks about one ``reaction``'s k alone: ``k_at`` at ``temperatures``,
    ``temperature_at`` for a target ``k`` (the reaction's rate-constant unit) or ``half_life`` (a time). Half-lives
    are for first order (ln 2 / k) and second order with equal initial concentrations ``c0`` (1 / (k c0));
    ``order`` declares which, and defaults to the order k's unit (or the step) implies.
    """

    name: Name
    reactor: Literal[REACTORS] | None = None  # type: ignore[valid-type]
    question: Literal[QUESTIONS] | None = None  # type: ignore[valid-type]
    initial: dict[str, Annotated[float, Field(ge=0.0)]] | None = None
    temperature: float | None = None
    programme: tuple[tuple[float, float], ...] | None = None
    until: PositiveFloat | None = None
    residence_times: tuple[PositiveFloat, ...] | None = None
    volume: float | None = None
    feeds: tuple[ScenarioFeed, ...] | None = None
    dosed: tuple[str, ...] | None = None
    points: Annotated[int, Field(ge=10, le=2000)] = 121
    key_reactant: str | None = None
    products: tuple[str, ...] = ()
    target_conversion: Annotated[float, Field(gt=0.0, lt=1.0)] | None = None
    spec: Spec | None = None
    intermediate: str | None = None
    temperature_for: TemperatureFor | None = None
    reaction: str | None = None
    temperatures: Annotated[tuple[Finite, ...], Field(min_length=1, max_length=1000)] | None = None
    k: PositiveFinite | None = None
    half_life: PositiveFinite | None = None
    order: Annotated[float, Field(ge=0.0, le=10.0)] | None = None
    c0: PositiveFinite | None = None

    @model_validator(mode="after")
    def _reactor_needs(self) -> Scenario:
        if (self.reactor is None) == (self.question is None):
            raise ValueError(
                "give either 'reactor' (" + ", ".join(REACTORS) + ") or 'question' (" + ", ".join(QUESTIONS) + ")"
            )
        if self.question is not None:
            return self._question_needs()
        asked = [key for key in QUESTION_KEYS if getattr(self, key) is not None]
        if asked:
            raise ValueError(f"'{asked[0]}' is for a question scenario (question: {' or '.join(QUESTIONS)})")
        if self.initial is None:
            raise ValueError(f"a {self.reactor} needs 'initial': {{species: concentration}}")
        if self.reactor == "programmed_batch" and self.programme is None:
            raise ValueError("a programmed_batch needs 'programme': two or more [time, temperature] points")
        if self.programme is not None and self.reactor in ("programmed_batch", "dosed_batch"):
            times = [p[0] for p in self.programme]
            if len(times) < 2:
                raise ValueError(f"a {self.reactor} needs 'programme': two or more [time, temperature] points")
            if times[0] != 0 or any(b <= a for a, b in itertools.pairwise(times)):
                raise ValueError("'programme' times start at 0 and rise")
        if self.reactor == "dosed_batch":
            if (self.temperature is None) == (self.programme is None):
                raise ValueError("a dosed_batch needs either 'temperature' or 'programme' (not both)")
            if self.volume is None or not self.feeds:
                raise ValueError("a dosed_batch needs 'volume' (the initial liquid volume) and one or more 'feeds'")
        elif self.volume is not None or self.feeds is not None or self.dosed is not None:
            raise ValueError("'volume', 'feeds' and 'dosed' are for a dosed_batch")
        elif self.reactor != "programmed_batch" and self.temperature is None:
            raise ValueError(f"a {self.reactor} needs 'temperature'")
        if self.reactor == "cstr":
            if not self.residence_times:
                raise ValueError("a cstr needs 'residence_times'")
        elif self.until is None and self.reactor != "programmed_batch":
            raise ValueError(f"a {self.reactor} needs 'until' (the last time or space time)")
        needs_key = self.target_conversion is not None or self.spec is not None or self.products
        if needs_key and self.key_reactant is None:
            raise ValueError("'key_reactant' is needed for conversion, yield, selectivity and specs")
        return self

    def _question_needs(self) -> Scenario:
        # Keys left at their defaults are not given (a results folder's study.yaml writes every key).
        fields = type(self).model_fields
        other = [
            key
            for key, field in fields.items()
            if key not in ("name", *QUESTION_KEYS)
            and getattr(self, key) != field.get_default(call_default_factory=True)
        ]
        if other:
            raise ValueError(f"'{other[0]}' is for reactor scenarios; a question takes {', '.join(QUESTION_KEYS[1:])}")
        if self.reaction is None:
            raise ValueError(f"a {self.question} question needs 'reaction'")
        if self.question == "k_at":
            if self.temperatures is None:
                raise ValueError("a k_at question needs 'temperatures': [first, second, ...]")
            if self.k is not None or self.half_life is not None:
                raise ValueError("'k' and 'half_life' are targets of a temperature_at question")
        else:
            if (self.k is None) == (self.half_life is None):
                raise ValueError("a temperature_at question needs one target: 'k' or 'half_life'")
            if self.temperatures is not None:
                raise ValueError("'temperatures' is for a k_at question")
        return self


class RunVariability(Strict):
    """Run-to-run scatter of ln k beyond measurement error: ln k of each listed reaction in group g is shifted
    by tau * z_g, z_g ~ N(0, 1), tau ~ half-normal(``sd.scale``). ``by`` names a column of the runs file
    (day, catalyst lot); without it every run is its own group. ``reactions`` defaults to all.
    ``parameterisation``: ``non_centred`` (default; best when each group has little data) samples z_g,
    ``centred`` samples the shifts themselves (better when every group has many runs or measurements)."""

    sd: HalfNormalPrior = HalfNormalPrior(scale=0.3)
    by: Annotated[str, Field(pattern=NAME_PATTERN, max_length=64)] | None = None
    reactions: tuple[Name, ...] | None = None
    parameterisation: Literal["non_centred", "centred"] = "non_centred"


class TransitionState(Strict):
    """How Ea and k become Eyring's activation enthalpy and entropy. ``phase``: ``solution`` (dH = Ea - RT) or
    ``gas`` (dH = Ea - m RT for molecularity m); ``standard_concentration`` c° in the study's concentration
    unit (default 1 mol/L)."""

    phase: Literal["solution", "gas"] = "solution"
    standard_concentration: PositiveFloat | None = None


#: A weight or factor: a known positive number, or a lognormal prior to fit it.
Factor = PositiveFloat | LogNormalPrior


class MeasuredQuantity(Strict):
    """What one measured quantity (a column of the wide measurements layout, or a ``species`` cell of the long
    one) is, in terms of the concentrations c_s (study unit) at that time:

    - ``concentration``: c of ``species`` (the default for any species name without a declaration);
    - ``signal``: ``response`` x c of ``species`` + ``offset`` (a peak area, with its response factor known or
      given a lognormal prior; ``response_per_run``: one factor per run instead of one shared);
    - ``composition``: ``scale`` x c of ``species`` / sum of c over ``among`` (area %, ``scale: 100``);
    - ``combination``: ``path_length`` x sum over ``weights`` of a_s c_s (an absorbance: a_s molar absorptivities,
      known or with lognormal priors; a class total or a sum of isomers with weights 1);
    - ``conversion``: 1 - n_s(t)/n_s(0) of ``species`` (amounts, so dosing and volume changes count);
    - ``yield``: n_s(t)/n_k(0), ``species`` formed from key reactant ``of`` (amounts).
    """

    quantity: Name
    kind: Literal["concentration", "signal", "composition", "combination", "conversion", "yield"]
    species: Name | None = None
    response: Factor | None = None
    response_per_run: bool = False
    offset: float = 0.0
    among: tuple[Name, ...] | None = None
    scale: PositiveFloat = 1.0
    weights: dict[str, Factor] | None = None
    path_length: PositiveFloat = 1.0
    of: Name | None = None

    @model_validator(mode="after")
    def _kind_needs(self) -> MeasuredQuantity:
        needs = {
            "concentration": {"species"},
            "signal": {"species", "response"},
            "composition": {"species", "among"},
            "combination": {"weights"},
            "conversion": {"species"},
            "yield": {"species", "of"},
        }[self.kind]
        for key in sorted(needs):
            if getattr(self, key) is None:
                raise ValueError(f"a {self.kind} needs '{key}'")
        takes = (
            needs
            | {"quantity", "kind"}
            | {
                "signal": {"response_per_run", "offset"},
                "composition": {"scale"},
                "combination": {"path_length"},
            }.get(self.kind, set())
        )
        for key in sorted(self.model_fields_set - takes):
            raise ValueError(f"'{key}' does not apply to a {self.kind}")
        if self.kind == "composition" and (len(self.among) < 2 or self.species not in self.among):
            raise ValueError("'among' lists two or more species, 'species' among them (a share of one is always 1)")
        if self.kind == "combination" and not self.weights:
            raise ValueError("'weights' names at least one species")
        return self


class StudyFile(Strict):
    """A whole study file as written by the user."""

    study: Name
    title: str = ""
    units: Units
    data: DataFiles
    species: tuple[Annotated[str, Field(pattern=r"^[A-Za-z][A-Za-z0-9_]*$", max_length=32)], ...] = ()
    reactions: Annotated[tuple[Reaction, ...], Field(min_length=1)]
    initial_uncertainty: dict[str, Annotated[float, Field(gt=0.0, le=2.0)]] = Field(default_factory=dict)
    formulas: dict[str, str] = Field(default_factory=dict)
    reference_temperature: Literal["auto"] | float | str = "auto"
    noise: Noise = Noise()
    sampling: Sampling = Sampling()
    report: Report = Report()
    scenarios: tuple[Scenario, ...] = ()
    run_variability: RunVariability | None = None
    temperature_uncertainty: Annotated[float, Field(gt=0.0, le=50.0)] | None = None
    transition_state: TransitionState | None = None
    observations: tuple[MeasuredQuantity, ...] = ()

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


class ScenarioUnits(Strict):
    """Units of a scenarios file's times, temperatures and concentrations; each defaults to the study's."""

    time: str | None = None
    temperature: str | None = None
    concentration: str | None = None


class ScenarioFile(Strict):
    """A file of reactor scenarios for ``arrhenia predict``."""

    scenarios: Annotated[tuple[Scenario, ...], Field(min_length=1)]
    draws: Annotated[int, Field(ge=10, le=20_000)] = 2000
    units: ScenarioUnits = ScenarioUnits()

    @model_validator(mode="after")
    def _unique(self) -> ScenarioFile:
        names = [s.name for s in self.scenarios]
        for index, name in enumerate(names):
            if names.index(name) != index:
                raise ValueError(f"scenarios[{index}].name: '{name}' is used twice")
        return self
