"""Checks of reactor scenarios against the study they are applied to (names, amounts, target kinds)."""

from __future__ import annotations

import numpy as np

from ..errors import StudyError
from .schema import Scenario
from .study import Study


def check_scenario(scenario: Scenario, study: Study, where: str) -> None:
    """Every species and reaction a scenario names must be the study's; raises ``StudyError`` naming the key."""
    species = study.species
    named = [("initial", name) for name in scenario.initial] + [("products", name) for name in scenario.products]
    if scenario.key_reactant is not None:
        named.append(("key_reactant", scenario.key_reactant))
    if scenario.intermediate is not None:
        named.append(("intermediate", scenario.intermediate))
    for key, name in named:
        if name not in species:
            raise StudyError(f"{where}.{key}", f"'{name}' is not a species of the study ({', '.join(species)})")
    if scenario.key_reactant is not None and scenario.initial.get(scenario.key_reactant, 0.0) <= 0:
        raise StudyError(f"{where}.initial", f"the key reactant '{scenario.key_reactant}' needs a positive amount")
    target = scenario.temperature_for
    if target is not None:
        if target.reaction is not None and target.reaction not in study.reaction_names:
            raise StudyError(f"{where}.temperature_for.reaction", f"'{target.reaction}' is not a reaction of the study")
        if target.conversion is not None and scenario.key_reactant is None:
            raise StudyError(f"{where}.temperature_for", "a conversion target needs 'key_reactant'")
        if target.conversion is not None and scenario.reactor == "programmed_batch":
            raise StudyError(f"{where}.temperature_for", "a programmed batch has no single temperature to find")
        if target.half_life is not None:
            spec = study.reactions[study.reaction_names.index(target.reaction)]
            order = float(np.sum(study.network.forward_orders[study.reaction_names.index(target.reaction)]))
            if order != 1.0 or spec.fitted_orders:
                raise StudyError(
                    f"{where}.temperature_for.half_life",
                    "a half-life is defined for first-order steps",
                    "give the target as 'k' instead",
                )
