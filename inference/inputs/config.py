"""Read a study file, validate it once against ``schema``, and resolve it into an immutable ``Study``."""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Iterable
from pathlib import Path
from typing import Any, NamedTuple, get_args

import pydantic
import yaml

from ..errors import StudyError
from ..physics.network import Equation, EquationError, Network, build_network, element_counts, imbalance, parse_equation
from . import schema, units
from .files import excerpt, read_text, resolve, shown_path
from .measured import resolve_quantities
from .rate_laws import LAW_KEYS, REGISTRY, Z95, missing_keys, undeclared_keys, van_t_hoff_prior
from .scenarios import check_scenario
from .schema import ExponentPrior, OrderPrior, Reaction, StudyFile
from .study import (
    HELD_PLACEHOLDER,
    ArrheniusPrior,
    EquilibriumPrior,
    FittedOrder,
    ReactionSpec,
    RunVariabilitySpec,
    Study,
    TransitionStateSpec,
)

#: A study file is a few kilobytes; anything much larger is not one.
MAX_STUDY_BYTES = 1_000_000

#: YAML nested deeper than this is refused while it is composed (a study file needs about 5 levels), long
#: before Python's recursion limit could be reached.
MAX_YAML_DEPTH = 50


class _Refusal(yaml.YAMLError):
    """YAML that parses but that we refuse: a repeated or non-text key, too deep a nesting, a non-finite number."""

    def __init__(self, problem: str, mark: Any, hint: str | None = None) -> None:
        super().__init__(problem)
        self.problem, self.problem_mark, self.hint = problem, mark, hint


class _NoAliasLoader(yaml.SafeLoader):
    """``yaml.SafeLoader`` that refuses anchors and aliases (study files never need them, and refusing them makes
    "billion laughs" inputs fail at once instead of exhausting memory), repeated keys (PyYAML keeps the last one
    silently), keys that are not text, nesting deeper than ``MAX_YAML_DEPTH`` and numbers that are not finite."""

    def __init__(self, stream: str) -> None:
        super().__init__(stream)
        self._depth = 0

    def compose_node(self, parent: Any, index: Any) -> Any:
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            raise yaml.constructor.ConstructorError(
                None, None, "anchors and aliases (&name, *name) are not allowed in a study file", event.start_mark
            )
        self._depth += 1
        try:
            if self._depth > MAX_YAML_DEPTH:
                raise _Refusal(f"nested more than {MAX_YAML_DEPTH} levels deep", self.peek_event().start_mark)
            return super().compose_node(parent, index)
        finally:
            self._depth -= 1

    def construct_mapping(self, node: yaml.MappingNode, deep: bool = False) -> dict:
        first_line: dict[str, int] = {}
        for key_node, _ in node.value:
            if key_node.tag == "tag:yaml.org,2002:merge":
                continue
            if not isinstance(key_node, yaml.ScalarNode):
                raise _Refusal("a key is a list or a mapping", key_node.start_mark, "keys are names")
            key = self.construct_object(key_node)
            if not isinstance(key, str):
                read_as = "empty (null)" if key is None else f"{type(key).__name__} {key!r}"
                raise _Refusal(
                    f"key '{excerpt(key_node.value)}' is read as {read_as}, not as a name",
                    key_node.start_mark,
                    "put the key in quotes",
                )
            line = key_node.start_mark.line + 1
            if key in first_line:
                first = "earlier on the same line" if first_line[key] == line else f"first on line {first_line[key]}"
                raise _Refusal(f"key '{excerpt(key)}' appears twice ({first})", key_node.start_mark)
            first_line[key] = line
        return super().construct_mapping(node, deep)


def _finite_float(loader: _NoAliasLoader, node: yaml.ScalarNode) -> float:
    """A float that is finite (YAML reads .inf, .nan and 1e999 as numbers that no prior or setting can use)."""
    value = loader.construct_yaml_float(node)
    if not math.isfinite(value):
        raise _Refusal(f"'{excerpt(node.value)}' is not a finite number", node.start_mark)
    return value


def _float_sized_int(loader: _NoAliasLoader, node: yaml.ScalarNode) -> int:
    """An integer that a float can hold (every number here ends up as one)."""
    try:
        value = loader.construct_yaml_int(node)
        float(value)
    except (ValueError, OverflowError):
        raise _Refusal(f"'{excerpt(node.value)}' is too large a number", node.start_mark) from None
    return value


_NoAliasLoader.add_constructor("tag:yaml.org,2002:float", _finite_float)
_NoAliasLoader.add_constructor("tag:yaml.org,2002:int", _float_sized_int)

# PyYAML follows YAML 1.1, which reads 1e6 and 2.5e-3 without a dot or an exponent sign as strings; YAML 1.2
# (and every user) reads them as numbers. This resolver adds the 1.2 float forms to our loader only.
_NoAliasLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?(?:[0-9][0-9_]*)(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"),
)


def read_yaml(path: Path) -> Any:
    """Read a YAML file (study or scenarios) safely, turning every reading problem into a one-line ``StudyError``."""
    where = shown_path(path)
    text = read_text(path, "YAML file", MAX_STUDY_BYTES)
    if not text.strip():
        raise StudyError(where, "is empty")
    try:
        return yaml.load(text, Loader=_NoAliasLoader)
    except _Refusal as exc:
        raise StudyError(f"{where}: line {exc.problem_mark.line + 1}", exc.problem, exc.hint) from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f"line {mark.line + 1}" if mark is not None else "YAML"
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        hint = None
        if "\t" in text and ("tab" in str(exc).lower() or "found character" in str(exc)):
            hint = "YAML indentation must use spaces, not tabs"
        raise StudyError(f"{where}: {line}", f"YAML syntax error: {excerpt(problem, 120)}", hint) from None


def lists_to_tuples(value: Any) -> Any:
    if isinstance(value, list | tuple):
        return tuple(lists_to_tuples(v) for v in value)
    if isinstance(value, dict):
        return {k: lists_to_tuples(v) for k, v in value.items()}
    return value


def _key_path(loc: tuple) -> str:
    text = ""
    for part in loc:
        if isinstance(part, int):
            text += f"[{part}]"
        else:
            text += f".{excerpt(part)}" if text else excerpt(part)
    return text or "(top level)"


def _model_at(loc: tuple, root: type[pydantic.BaseModel]) -> type[pydantic.BaseModel] | None:
    """The schema model that holds the last key of ``loc``, for "did you mean" hints."""
    model: type[pydantic.BaseModel] = root
    for part in loc[:-1]:
        if isinstance(part, int):
            continue
        field = model.model_fields.get(str(part))
        if field is None:
            return None
        found = _find_model(field.annotation)
        if found is None:
            return None
        model = found
    return model


def _find_model(annotation: Any) -> type[pydantic.BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, pydantic.BaseModel):
        return annotation
    for arg in get_args(annotation):
        found = _find_model(arg)
        if found is not None:
            return found
    return None


def _is_union_tag(part: object) -> bool:
    """Pydantic names the member of a union in an error's location ('float', 'OrderPrior', ...); not a key."""
    if not isinstance(part, str):
        return False
    models = {cls.__name__ for cls in pydantic.BaseModel.__subclasses__()} | {
        cls.__name__ for base in pydantic.BaseModel.__subclasses__() for cls in base.__subclasses__()
    }
    return part in models or part in {"float", "str", "int", "bool"} or "-" in part or "[" in part


def closest(name: str, choices: Iterable[str], cutoff: float = 0.6) -> str | None:
    """The choice ``name`` most likely means, case aside (``ea`` means ``Ea``), or None when none is close."""
    by_lower = {choice.lower(): choice for choice in sorted(choices, reverse=True)}  # ties: the first in order
    if name.lower() in by_lower:
        return by_lower[name.lower()]
    close = difflib.get_close_matches(name.lower(), list(by_lower), n=1, cutoff=cutoff)
    return by_lower[close[0]] if close else None


#: How many problems besides the first one line of a validation error shows.
SHOWN_PROBLEMS = 3

#: The right form of the values most often given as a bare number, with numbers that fit most studies.
_EXAMPLES = {
    "LogNormalPrior": "{median: 0.01, factor: 10}",
    "PositiveNormalPrior": "{mean: 80, sd: 30}",
    "NormalPrior": "{mean: -20, sd: 20}",
    "HalfNormalPrior": "{scale: 0.2}",
    "OrderPrior": "{lower: 0, upper: 3}",
    "ExponentPrior": "{mean: 0, sd: 1}",
    "AdsorptionPrior": "{K_ref: {median: 1, factor: 10}, dH: {mean: -20, sd: 20}}",
}


def _schema_model(name: str) -> type[pydantic.BaseModel] | None:
    found = getattr(schema, name, None)
    return found if isinstance(found, type) and issubclass(found, pydantic.BaseModel) else None


def _example(model: type[pydantic.BaseModel]) -> str:
    """The right form of a value of ``model``: a worked example, or its required keys."""
    if model.__name__ in _EXAMPLES:
        return _EXAMPLES[model.__name__]
    required = [name for name, field in model.model_fields.items() if field.is_required()]
    return "{" + ", ".join(f"{name}: ..." for name in required or model.model_fields) + "}"


class _Problem(NamedTuple):
    """One problem pydantic found: where (key path), what is wrong, a hint, and the key a misspelt one means."""

    loc: tuple
    text: str
    hint: str | None = None
    meant: str | None = None


def _describe(error: dict, root: type[pydantic.BaseModel]) -> _Problem:
    raw, kind = tuple(error["loc"]), error["type"]
    if kind == "extra_forbidden":  # the unknown key is the user's own text, whatever it looks like
        loc = tuple(part for part in raw[:-1] if not _is_union_tag(part)) + raw[-1:]
    else:
        loc = tuple(part for part in raw if not _is_union_tag(part))
    given = error.get("input")
    shown = "" if isinstance(given, dict | tuple) else f" (got {excerpt(repr(given))})"
    if kind == "extra_forbidden":
        model = _model_at(loc, root)
        allowed = sorted(model.model_fields) if model else []
        close = closest(str(loc[-1]), allowed)
        hint = f"did you mean '{close}'?" if close else (f"known keys: {', '.join(allowed)}" if allowed else None)
        return _Problem(loc, "unknown key", hint, close)
    if kind == "missing":
        return _Problem(loc, "required key is missing")
    if kind == "value_error":
        return _Problem(loc, str(error["msg"]).removeprefix("Value error, "))
    model = _schema_model(str((error.get("ctx") or {}).get("class_name", ""))) if kind == "model_type" else None
    if model is not None:
        key = f"{loc[-1]}: " if loc and isinstance(loc[-1], str) else ""
        meaning = " ".join((model.__doc__ or "").strip().split("\n\n")[0].split()).rstrip(".")  # its first paragraph
        return _Problem(loc, f"is not a mapping{shown}; write it as {key}{_example(model)}", meaning or None)
    if kind in ("tuple_type", "list_type"):
        return _Problem(loc, f"is not a list{shown}; write it as [first, second, ...]")
    return _Problem(loc, f"{error['msg']}{shown}")


def format_validation_error(
    where: str, error: pydantic.ValidationError, root: type[pydantic.BaseModel] = StudyFile
) -> StudyError:
    """One line for what pydantic found: the first problem (key path, what is wrong, a hint where one helps), then
    up to ``SHOWN_PROBLEMS`` others, each with its key path."""
    # A misspelt key is also reported as a missing one, so the unknown key comes first; then errors a
    # validator wrote (they explain themselves), then the rest.
    rank = {"extra_forbidden": 0, "value_error": 1}
    described = [
        _describe(e, root) for e in sorted(error.errors(include_url=False), key=lambda e: rank.get(e["type"], 2))
    ]
    meant = {(*found.loc[:-1], found.meant) for found in described if found.meant}
    problems: list[_Problem] = []
    for found in described:
        if found.text == "required key is missing" and found.loc in meant:
            continue  # the same misspelling, seen from the key the user meant
        if any(len(other.loc) > len(found.loc) and other.loc[: len(found.loc)] == found.loc for other in described):
            continue  # a consequence of a problem inside it (a list left too short by a bad item)
        if all(found[:3] != other[:3] for other in problems):  # each member of a union may report the same
            problems.append(found)
    first, others = problems[0], problems[1:]
    problem = first.text + (f" (hint: {first.hint})" if first.hint else "")
    if others:
        problem += "; also " + "; ".join(
            f"{_key_path(other.loc)}: {other.text}" + (f" (did you mean '{other.meant}'?)" if other.meant else "")
            for other in others[:SHOWN_PROBLEMS]
        )
    if len(others) > SHOWN_PROBLEMS:
        count = len(others) - SHOWN_PROBLEMS
        problem += f" (and {count} more problem{'s' if count > 1 else ''})"
    return StudyError(f"{where}: {_key_path(first.loc)}", problem)


def _parse_reference_temperature(value: float | str, unit: str, where: str) -> float | None:
    if value == "auto":
        return None
    if isinstance(value, float):
        return float(units.to_kelvin(value, unit, where)[0])
    parts = value.split(maxsplit=1)
    try:
        number = float(parts[0])
    except ValueError:
        raise StudyError(
            where, f"'{value}' is neither 'auto' nor a temperature", "write e.g. auto, 55, or '328.15 K'"
        ) from None
    return float(units.to_kelvin(number, parts[1] if len(parts) > 1 else unit, where)[0])


#: The keys of ``data`` that name files (``measured_as`` does not), in the order ``Study.data_files`` lists them.
DATA_ROLES = ("rate_constants", "runs", "measurements", "temperatures", "feeds", "steady_states")


def _resolve_paths(file: StudyFile, base: Path, where: str) -> tuple[tuple[str, Path], ...]:
    resolved = []
    for role in DATA_ROLES:
        name = getattr(file.data, role)
        if name is None:
            continue
        path = Path(name)
        resolved.append((role, resolve(path if path.is_absolute() else base / path)))
    return tuple(resolved)


def _order_unit(concentration: str, time: str, order: float) -> str:
    """Unit of a rate constant of overall ``order``: concentration^(1 - order) / time."""
    power = 1.0 - order
    if power == 0:
        return f"1/{time}"
    return f"({concentration})^{power:g}/{time}" if power != 1 else f"{concentration}/{time}"


def _concentration_power(concentration: str, power: float) -> str:
    return "" if power == 0 else (concentration if power == 1 else f"({concentration})^{power:g}")


def _arrhenius_prior(reaction: Reaction, energy_unit: str, key: str) -> ArrheniusPrior:
    return ArrheniusPrior(
        ln_k_ref_mean=math.log(reaction.k_ref.median),
        ln_k_ref_sd=math.log(reaction.k_ref.factor) / Z95,
        ea_mean=float(units.energy_to_joule_per_mol(reaction.Ea.mean, energy_unit, f"{key}.Ea")),
        ea_sd=float(units.energy_to_joule_per_mol(reaction.Ea.sd, energy_unit, f"{key}.Ea")),
    )


def _temperature_exponent(reaction: Reaction) -> tuple[float, float | None]:
    """n of (T/T_ref)^n and its prior sd (None when n is fixed; 0 when no exponent is given)."""
    given = reaction.temperature_exponent
    if isinstance(given, ExponentPrior):
        return given.mean, given.sd
    return (0.0 if given is None else float(given)), None


def _given_keys(reaction: Reaction) -> set[str]:
    return {name for name in type(reaction).model_fields if getattr(reaction, name) is not None}


def _check_law_keys(reaction: Reaction, key: str) -> None:
    """The law must take every key given and get every key it requires (``rate_laws.REGISTRY``)."""
    law = REGISTRY[reaction.rate_law]
    given = _given_keys(reaction)
    for extra in undeclared_keys(law, given):
        users = [name for name, other in REGISTRY.items() if extra in other.takes]
        raise StudyError(
            f"{key}.{extra}", f"is not a parameter of rate_law {law.name}", f"it belongs to {' or '.join(users)}"
        )
    for absent in missing_keys(law, given):
        raise StudyError(f"{key}.{absent}", "required key is missing", f"rate_law {law.name} needs it")


def _reaction_spec(reaction: Reaction, energy: str, key: str, k_unit: str, **parts: object) -> ReactionSpec:
    """The resolved reaction common to both kinds of study: its Arrhenius prior and temperature exponent, with the
    ``parts`` of ``ReactionSpec`` only its kind knows (equilibrium, fitted orders, saturation, molecularity)."""
    exponent, exponent_sd = _temperature_exponent(reaction)
    if reaction.fast_equilibrium:
        prior = HELD_PLACEHOLDER
    else:
        for absent in ("k_ref", "Ea"):
            if getattr(reaction, absent) is None:
                raise StudyError(f"{key}.{absent}", "required key is missing")
        prior = _arrhenius_prior(reaction, energy, key)
    return ReactionSpec(
        reaction.name,
        reaction.equation,
        reaction.rate_law,
        prior,
        k_unit,
        temperature_exponent=exponent,
        exponent_sd=exponent_sd,
        **parts,
    )


def _resolve_rate_constant_reactions(file: StudyFile, where: str) -> tuple[ReactionSpec, ...]:
    if file.species or file.initial_uncertainty or file.formulas:
        key = "species" if file.species else ("initial_uncertainty" if file.initial_uncertainty else "formulas")
        raise StudyError(f"{where}: {key}", "is for concentration data (data.runs), not for rate constants")
    for extra in ("run_variability",):
        if getattr(file, extra) is not None:
            raise StudyError(f"{where}: {extra}", "is for batch runs (data.runs), not for rate constants")
    specs = []
    order = units.rate_constant_order(file.units.rate_constant or "1/s")
    for index, reaction in enumerate(file.reactions):
        key = f"{where}: reactions[{index}]"
        for extra in ("K_ref", "dH", "fast_equilibrium", *sorted(_given_keys(reaction) & LAW_KEYS)):
            if getattr(reaction, extra) not in (None, False):
                raise StudyError(f"{key}.{extra}", "is for reaction networks fitted to concentration data")
        if REGISTRY[reaction.rate_law].network_only:
            raise StudyError(
                f"{key}.rate_law", f"{reaction.rate_law} is for reaction networks fitted to concentration data"
            )
        specs.append(
            _reaction_spec(reaction, file.units.energy, key, file.units.rate_constant or "", molecularity=order)
        )
    return tuple(specs)


def _parse_network_equation(reaction: Reaction, species: tuple[str, ...], key: str) -> Equation:
    if reaction.equation is None:
        raise StudyError(f"{key}.equation", "required key is missing", "write e.g. 'A + B -> C'")
    try:
        equation = parse_equation(reaction.equation)
    except EquationError as exc:
        raise StudyError(f"{key}.equation", f"'{reaction.equation}': {exc}") from None
    for name in equation.species:
        if name not in species:
            close = closest(name, species)
            hint = f"did you mean '{close}'?" if close else "add it to the study's species list"
            raise StudyError(f"{key}.equation", f"'{name}' is not in species ({', '.join(species)})", hint)
    return equation


def _check_held(reaction: Reaction, equation: Equation, key: str, held_before: int) -> None:
    """A step held at equilibrium is reversible, has no rate constant and no rate law of its own, and is the
    only one of its study."""
    if not equation.reversible:
        raise StudyError(
            f"{key}.fast_equilibrium",
            "only a reversible step ('<=>') can be held at equilibrium",
            "write it with '<=>'",
        )
    for extra in ("k_ref", "Ea", "temperature_exponent"):
        if getattr(reaction, extra) is not None:
            raise StudyError(
                f"{key}.{extra}",
                "a step held at equilibrium (fast_equilibrium) has no rate constant",
                "remove it: K_ref and dH describe the step",
            )
    if reaction.rate_law != "mass_action":
        raise StudyError(
            f"{key}.rate_law",
            "a step held at equilibrium has no rate law",
            "remove rate_law: its K_ref ties the species' activities (mass action) at every instant",
        )
    if held_before >= 0:
        raise StudyError(
            f"{key}.fast_equilibrium",
            f"reactions[{held_before}] is already held at equilibrium; one such step per study is supported",
            "give the other steps rates (a large k_ref) or combine the equilibria into one step",
        )


def _resolve_network(file: StudyFile, where: str) -> tuple[tuple[ReactionSpec, ...], Network, tuple[str, ...]]:
    species = file.species
    if not species:
        raise StudyError(f"{where}: species", "required key is missing", "list every species, e.g. [A, B, C]")
    conc, time, energy = file.units.concentration, file.units.time, file.units.energy
    specs, equations, order_maps, notes, saturation = [], [], [], [], []
    held = -1
    for index, reaction in enumerate(file.reactions):
        key = f"{where}: reactions[{index}]"
        equation = _parse_network_equation(reaction, species, key)
        equations.append(equation)
        if reaction.fast_equilibrium:
            _check_held(reaction, equation, key, held)
            held = index
        reactant_orders = dict(equation.reactants)
        fitted_orders = []
        _check_law_keys(reaction, key)
        terms = REGISTRY[reaction.rate_law].kernel_terms(reaction, equation, species, energy, key)
        inhibition, sites = terms.inhibition_exponent, tuple(terms.sites)
        for name, order in (reaction.orders or {}).items():
            if name not in reactant_orders:
                raise StudyError(f"{key}.orders.{name}", f"'{name}' is not a reactant of '{reaction.equation}'")
            if isinstance(order, OrderPrior):
                fitted_orders.append(FittedOrder(name, order.lower, order.upper))
                reactant_orders[name] = 0.5 * (order.lower + order.upper)
            else:
                reactant_orders[name] = float(order)
        if equation.reversible != (reaction.K_ref is not None) or equation.reversible != (reaction.dH is not None):
            missing = "K_ref" if reaction.K_ref is None else "dH"
            if equation.reversible:
                raise StudyError(
                    f"{key}.{missing}",
                    "required key is missing",
                    "a reversible step needs K_ref (equilibrium constant at T_ref) and dH",
                )
            raise StudyError(
                f"{key}.{'dH' if reaction.dH is not None else 'K_ref'}", "is only for reversible steps ('<=>')"
            )
        equilibrium, eq_unit = None, ""
        if reaction.K_ref is not None and reaction.dH is not None:
            equilibrium = EquilibriumPrior(*van_t_hoff_prior(reaction.K_ref, reaction.dH, energy, f"{key}.dH"))
            delta_n = sum(c for _, c in equation.products) - sum(c for _, c in equation.reactants)
            eq_unit = _concentration_power(conc, delta_n)
        order_maps.append(reactant_orders)
        saturation.append((inhibition, tuple(site.species for site in sites)))
        overall = sum(reactant_orders.values())
        k_unit = _order_unit(conc, time, overall) if not fitted_orders else f"({conc})^(1-n)/{time}"
        specs.append(
            _reaction_spec(
                reaction,
                energy,
                key,
                k_unit,
                equilibrium=equilibrium,
                eq_unit=eq_unit,
                fitted_orders=tuple(fitted_orders),
                inhibition_exponent=inhibition,
                adsorption=sites,
                molecularity=None if fitted_orders or sites or reaction.fast_equilibrium else overall,
                held=reaction.fast_equilibrium,
            )
        )
    network = build_network(
        species, tuple(r.name for r in file.reactions), tuple(equations), tuple(order_maps), tuple(saturation), held
    )
    for name in species:
        if (
            not network.stoichiometry[:, species.index(name)].any()
            and not network.forward_orders[:, species.index(name)].any()
        ):
            notes.append(f"species '{name}' takes part in no reaction")
    for name, formula in file.formulas.items():
        if name not in species:
            raise StudyError(f"{where}: formulas.{name}", f"'{name}' is not a species of the study")
        try:
            element_counts(formula)
        except EquationError as exc:
            raise StudyError(f"{where}: formulas.{name}", str(exc)) from None
    for index, equation in enumerate(equations):
        if all(name in file.formulas for name in equation.species):
            off = imbalance(equation, file.formulas)
            if off:
                shown = ", ".join(f"{element} {value:+g}" for element, value in sorted(off.items()))
                raise StudyError(
                    f"{where}: reactions[{index}].equation",
                    f"'{file.reactions[index].equation}' does not balance (products minus reactants: {shown})",
                    "check the coefficients",
                )
    for name in file.initial_uncertainty:
        if name not in species:
            raise StudyError(f"{where}: initial_uncertainty.{name}", f"'{name}' is not a species of the study")
    return tuple(specs), network, tuple(notes)


def _check_units(file: StudyFile, where: str) -> None:
    given = file.units
    units.parse_unit(given.temperature, "temperature", f"{where}: units.temperature")
    units.parse_unit(given.energy, "energy", f"{where}: units.energy")
    for kind in ("time", "concentration", "rate_constant", "volume"):
        text = getattr(given, kind)
        if text is not None:
            units.parse_unit(text, kind, f"{where}: units.{kind}")
    if file.data.rate_constants is not None and given.rate_constant is None:
        raise StudyError(
            f"{where}: units.rate_constant",
            "required key is missing",
            "rate-constant data need the unit of k, e.g. 1/s or L/(mol*s)",
        )
    if file.data.runs is not None or file.data.steady_states is not None:
        for kind in ("time", "concentration"):
            if getattr(given, kind) is None:
                raise StudyError(
                    f"{where}: units.{kind}",
                    "required key is missing",
                    f"concentration-time data need units.{kind}, e.g. {units.EXAMPLES[kind]}",
                )


def _run_variability(file: StudyFile, where: str) -> RunVariabilitySpec | None:
    given = file.run_variability
    if given is None:
        return None
    names = [r.name for r in file.reactions]
    rated = tuple(r.name for r in file.reactions if not r.fast_equilibrium)
    chosen = given.reactions if given.reactions is not None else rated
    for position, name in enumerate(chosen):
        if name in names and name not in rated:
            raise StudyError(
                f"{where}: run_variability.reactions[{position}]",
                f"'{name}' is held at equilibrium and has no rate constant to vary",
            )
    for position, name in enumerate(chosen):
        if name not in names:
            close = closest(name, names)
            hint = f"did you mean '{close}'?" if close else f"reactions are: {', '.join(names)}"
            raise StudyError(f"{where}: run_variability.reactions[{position}]", f"no reaction is named '{name}'", hint)
    if len(set(chosen)) != len(chosen) or not chosen:
        raise StudyError(f"{where}: run_variability.reactions", "list each reaction once, at least one")
    return RunVariabilitySpec(
        tuple(names.index(name) for name in chosen), given.sd.scale, given.by, given.parameterisation == "centred"
    )


def _transition_state(file: StudyFile, reactions: tuple[ReactionSpec, ...], where: str) -> TransitionStateSpec | None:
    given = file.transition_state
    if given is None:
        return None
    key = f"{where}: transition_state.standard_concentration"
    if given.standard_concentration is None:
        standard = 1000.0  # 1 mol/L in mol/m^3
    elif file.units.concentration is None:
        raise StudyError(key, "needs units.concentration to say its unit", "add e.g. concentration: mol/L")
    else:
        standard = given.standard_concentration * units.si_factor(file.units.concentration)
    if all(r.molecularity is None for r in reactions):
        raise StudyError(
            f"{where}: transition_state",
            "no reaction has a fixed molecularity",
            "the Eyring analysis needs mass-action steps or fixed orders (not fitted orders or saturating laws)",
        )
    return TransitionStateSpec(given.phase, standard)


def load_study(path: str | Path) -> Study:
    """Read, validate and resolve a study file. Raises ``StudyError`` with a one-line message on any mistake."""
    path = Path(path)
    where = str(path)
    content = read_yaml(path)
    if not isinstance(content, dict):
        raise StudyError(where, "a study file is a mapping of keys (study:, units:, data:, reactions:, ...)")
    try:
        file = StudyFile.model_validate(lists_to_tuples(content))
    except pydantic.ValidationError as exc:
        raise format_validation_error(where, exc) from None
    _check_units(file, where)
    if file.data.rate_constants is not None and file.noise.model == "absolute":
        raise StudyError(
            f"{where}: noise.model",
            "'absolute' noise is for concentration data",
            "rate constants are fitted on ln k: use 'proportional' or 'robust'",
        )
    reference = _parse_reference_temperature(
        file.reference_temperature, file.units.temperature, f"{where}: reference_temperature"
    )
    network, notes = None, ()
    if file.data.rate_constants is not None:
        reactions = _resolve_rate_constant_reactions(file, where)
    else:
        reactions, network, notes = _resolve_network(file, where)
    k_at = (
        tuple(float(t) for t in units.to_kelvin(file.report.k_at, file.units.temperature, f"{where}: report.k_at"))
        if file.report.k_at
        else ()
    )
    if file.temperature_uncertainty is not None and file.data.temperatures is not None:
        raise StudyError(
            f"{where}: temperature_uncertainty",
            "is for isothermal runs, not with a temperatures file (data.temperatures)",
            "a latent temperature per run cannot stand for a temperature history; remove one of the two",
        )
    if file.observations and file.data.runs is None:
        raise StudyError(
            f"{where}: observations",
            "measured quantities are declared for batch runs (data.runs with data.measurements)",
            "rate constants and steady-state outlets are read as they are",
        )
    temperature_sd = (
        file.temperature_uncertainty * units.kelvin_per_degree(file.units.temperature)
        if file.temperature_uncertainty is not None
        else None
    )
    study = Study(
        name=file.study,
        title=file.title,
        path=path.resolve(),
        mode="rate_constants" if file.data.rate_constants is not None else "network",
        units=file.units,
        data_files=_resolve_paths(file, path.resolve().parent, where),
        reactions=reactions,
        reference_temperature_K=reference,
        noise=file.noise,
        sampling=file.sampling,
        k_at_K=k_at,
        canonical=file.model_dump(mode="json"),
        species=file.species,
        network=network,
        initial_uncertainty=tuple(file.initial_uncertainty.items()),
        warnings=notes,
        scenarios=file.scenarios,
        run_variability=_run_variability(file, where),
        temperature_sd_K=temperature_sd,
        transition_state=_transition_state(file, reactions, where),
        measured_as=file.data.measured_as,
        quantities=resolve_quantities(file.observations, file.species, where) if file.observations else (),
    )
    for index, scenario in enumerate(file.scenarios):
        check_scenario(scenario, study, f"{where}: scenarios[{index}]")
    return study
