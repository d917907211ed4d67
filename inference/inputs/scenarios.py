"""Checks of reactor scenarios against the study they are applied to (names, amounts, target kinds, dosing)."""

from __future__ import annotations

import numpy as np

from ..errors import StudyError
from .schema import Scenario
from .study import Study


def check_scenario(scenario: Scenario, study: Study, where: str) -> None:
    """Every species and reaction a scenario names must be the study's, and a dosed batch's volume and feeds make
    sense; raises ``StudyError`` naming the key."""
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
