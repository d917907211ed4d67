"""Catalysed step: r = k c_cat prod c_i^nu_i, mass action with one catalyst written once on both sides.

The catalyst (``A + Cat -> P + Cat``) is neither made nor used up and enters the rate at order 1, so with a
constant catalyst concentration the step is first order in A with k_obs = k c_cat. The law is mass action on
that equation; what it adds is the check that the catalyst is there, once, and the line saying so.
"""

from __future__ import annotations

from ...errors import StudyError
from ...physics.network import Equation, parse_equation
from .law import KernelTerms, RateLaw, ResolvedReaction, StudyUnits, ValidatedReaction, catalysts


def catalyst(equation: Equation, text: str, key: str) -> str:
    """The one species written with coefficient 1 on both sides of ``equation``; ``StudyError`` otherwise."""
    found = catalysts(equation)
    coefficients = {*(c for n, c in equation.reactants if n in found), *(c for n, c in equation.products if n in found)}
    if len(found) != 1 or coefficients != {1.0}:
        raise StudyError(
            f"{key}.equation",
            f"catalysed needs one catalyst written once on each side, '{text}' has "
            + (f"{len(found)} species on both sides" if len(found) != 1 else f"'{found[0]}' with a coefficient"),
            "write e.g. 'A + Cat -> P + Cat', or use rate_law: mass_action",
        )
    return found[0]


class Catalysed(RateLaw):
    name = "catalysed"
    description = "r = k c_cat prod c_i^nu_i: mass action with one catalyst written once on both sides (order 1)"
    network_only = True

    def kernel_terms(
        self, reaction: ValidatedReaction, equation: Equation, species: tuple[str, ...], energy: str, key: str
    ) -> KernelTerms:
        catalyst(equation, reaction.equation, key)
        return KernelTerms()

    def check_terms(self, spec: ResolvedReaction, study_units: StudyUnits) -> list[str]:
        text = spec.equation or ""
        return [f"catalyst {catalyst(parse_equation(text), text, spec.name)} at order 1"]
