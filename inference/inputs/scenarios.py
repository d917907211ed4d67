"""Checks of reactor scenarios against the study they are applied to (names, amounts, target kinds, dosing)."""

from __future__ import annotations

import numpy as np

from ..errors import StudyError
from ..physics.network import HELD_START_HINT, held_start_blocked
from . import units
from .schema import QUESTIONS, Scenario
from .study import Study

#: The orders whose half-life has a closed form here: first order, t1/2 = ln 2 / k; second order with equal initial
#: concentrations (or one reactant, rate k c^2), t1/2 = 1 / (k c0) (the integrated rate laws, from memory).
HALF_LIFE_ORDERS = (1.0, 2.0)


def check_scenario(scenario: Scenario, study: Study, where: str) -> None:
    """Every species and reaction a scenario names must be the study's, and a dosed batch's volume and feeds make
    sense; raises ``StudyError`` naming the key."""
    if scenario.question is not None:
        _check_reaction(scenario.reaction, study, f"{where}.reaction")
        half_life_order(scenario, study, where)
        return
    if study.mode != "network":
        raise StudyError(
            f"{where}.reactor",
            "reactor scenarios need a reaction network fitted to batch runs",
            f"a rate-constant study answers questions about k: question: {' or '.join(QUESTIONS)}",
        )
    species = study.species
    named = [("initial", name) for name in scenario.initial] + [("products", name) for name in scenario.products]
    if scenario.key_reactant is not None:
        named.append(("key_reactant", scenario.key_reactant))
    if scenario.intermediate is not None:
        named.append(("intermediate", scenario.intermediate))
    for index, feed in enumerate(scenario.feeds or ()):
        named += [(f"feeds[{index}].concentration", name) for name in feed.concentration]
    named += [("dosed", name) for name in scenario.dosed or ()]
    for key, name in named:
        if name not in species:
            raise StudyError(f"{where}.{key}", f"'{name}' is not a species of the study ({', '.join(species)})")
    if scenario.reactor == "dosed_batch":
        _check_dosing(scenario, where)
    initial = np.array([scenario.initial.get(name, 0.0) for name in species], dtype=float)
    blocked = held_start_blocked(study.network, initial) if study.network is not None else None
    if blocked is not None:
        raise StudyError(f"{where}.initial", f"{blocked[0]} and {blocked[1]} both start at zero", HELD_START_HINT)
    if scenario.reactor == "cstr" and study.network is not None and study.network.held >= 0:
        raise StudyError(
            f"{where}.reactor",
            "a CSTR steady state is not computed for a network with a step held at equilibrium",
            "predict batch, dosed_batch or pfr",
        )
    reactant = scenario.key_reactant
    fed = any(feed.concentration.get(reactant, 0.0) > 0 for feed in scenario.feeds or ())
    if reactant is not None and scenario.initial.get(reactant, 0.0) <= 0 and not fed:
        raise StudyError(
            f"{where}.initial",
            f"the key reactant '{reactant}' needs a positive amount"
            + (" (here or in a feed)" if scenario.feeds else ""),
        )
    target = scenario.temperature_for
    if target is not None:
        if target.reaction is not None and target.reaction not in study.reaction_names:
            raise StudyError(f"{where}.temperature_for.reaction", f"'{target.reaction}' is not a reaction of the study")
        if target.conversion is not None and scenario.key_reactant is None:
            raise StudyError(f"{where}.temperature_for", "a conversion target needs 'key_reactant'")
        if target.conversion is not None and scenario.reactor == "programmed_batch":
            raise StudyError(f"{where}.temperature_for", "a programmed batch has no single temperature to find")
        if target.conversion is not None and scenario.reactor == "dosed_batch":
            raise StudyError(
                f"{where}.temperature_for",
                "a conversion target is searched for batch, pfr and cstr scenarios only",
                "give the target as 'k' or 'half_life' of a reaction",
            )
        if target.half_life is not None:
            spec = study.reactions[study.reaction_names.index(target.reaction)]
            order = float(np.sum(study.network.forward_orders[study.reaction_names.index(target.reaction)]))
            if order != 1.0 or spec.fitted_orders:
                raise StudyError(
                    f"{where}.temperature_for.half_life",
                    "a half-life is defined for first-order steps",
                    "give the target as 'k' instead",
                )


def _check_dosing(scenario: Scenario, where: str) -> None:
    """A dosed batch's volume and feeds: positive volume, 0 <= start < stop, a rate >= 0, species in every feed;
    ``dosed`` only names species that some feed carries."""
    if not (np.isfinite(scenario.volume) and scenario.volume > 0):
        raise StudyError(f"{where}.volume", f"the initial liquid volume must be positive (got {scenario.volume:g})")
    for index, feed in enumerate(scenario.feeds):
        at = f"{where}.feeds[{index}]"
        if not (np.isfinite(feed.start) and feed.start >= 0):
            raise StudyError(f"{at}.start", f"a feed starts at time 0 or later (got {feed.start:g})")
        if not feed.stop > feed.start:
            raise StudyError(f"{at}.stop", f"a feed stops after it starts (start {feed.start:g}, stop {feed.stop:g})")
        if not (np.isfinite(feed.rate) and feed.rate >= 0):
            raise StudyError(f"{at}.rate", f"a feed rate is a volume per time, zero or more (got {feed.rate:g})")
        if not feed.concentration:
            raise StudyError(f"{at}.concentration", "name the species in the feed (0 for a solvent-only feed)")
    carried = {name for feed in scenario.feeds for name, value in feed.concentration.items() if value > 0}
    for name in scenario.dosed or ():
        if name not in carried:
            raise StudyError(f"{where}.dosed", f"'{name}' is in none of the feeds")


def _check_reaction(name: str, study: Study, where: str) -> None:
    if name not in study.reaction_names:
        raise StudyError(where, f"'{name}' is not a reaction of the study ({', '.join(study.reaction_names)})")


def half_life_order(scenario: Scenario, study: Study, where: str) -> float | None:
    """The order a question scenario's half-life is computed for: the declared ``order``, else the one k's unit
    implies (rate-constant studies) or the step's (networks: first-order steps, fixed orders, no saturation). None when
    no half-life applies (then only k is reported); a ``StudyError`` naming the key when a half-life is asked for
    (``half_life``, ``order`` or ``c0`` given) but has no closed form here, or ``order`` contradicts k's unit."""
    j = study.reaction_names.index(scenario.reaction)
    spec = study.reactions[j]
    if study.mode == "network":
        plain = not spec.fitted_orders and not spec.inhibition_exponent
        implied = float(np.sum(study.network.forward_orders[j])) if plain else None
        supported: tuple[float, ...] = (1.0,)  # a network step's rate counts its stoichiometry (2A: -dA/dt = 2 r)
    else:
        implied, supported = units.rate_constant_order(spec.k_unit), HALF_LIFE_ORDERS
    declared = scenario.order
    asked = scenario.half_life is not None or declared is not None or scenario.c0 is not None
    if implied is None:
        if asked:
            raise StudyError(
                f"{where}.{'half_life' if scenario.half_life is not None else 'order'}",
                f"'{scenario.reaction}' has fitted orders or a saturating rate law: its half-life has no closed form",
                "ask for 'k' instead",
            )
        return None
    if declared is not None and declared != implied:
        raise StudyError(
            f"{where}.order",
            f"order {declared:g} does not fit '{scenario.reaction}', whose k ({spec.k_unit}) is of order {implied:g}",
        )
    order = declared if declared is not None else implied
    if order not in supported:
        if not asked:
            return None
        raise StudyError(
            f"{where}.{'half_life' if scenario.half_life is not None else 'order'}",
            "a half-life is computed for "
            + (
                "first-order steps of a network"
                if study.mode == "network"
                else "first order (ln 2 / k) and second order with equal initial concentrations (1 / (k c0))"
            )
            + f", not order {order:g}",
            "ask for 'k' instead",
        )
    if order == 2.0 and scenario.c0 is None:
        if not asked:
            return None
        raise StudyError(
            f"{where}.c0",
            "a second-order half-life, 1 / (k c0), needs 'c0': the equal initial concentration of the reactants",
        )
    if order != 2.0 and scenario.c0 is not None:
        raise StudyError(f"{where}.c0", "'c0' is for second-order half-lives")
    return order
