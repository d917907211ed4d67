"""Reaction networks: parse chemical equations, and build stoichiometry and order matrices.

Pure Python and numpy. An equation is ``A + B -> C`` (irreversible), ``2 A <=> D`` (reversible); coefficients
are positive numbers before a species name. Species names start with a letter and may contain letters,
digits and underscores.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

_TERM = re.compile(r"^\s*(?:(\d+(?:\.\d+)?)\s*\*?\s*)?([A-Za-z][A-Za-z0-9_]*)\s*$")
ARROWS = ("<=>", "->")


class EquationError(ValueError):
    """An equation that does not parse; the message says what is wrong (without location)."""


@dataclass(frozen=True)
class Equation:
    """A parsed equation: coefficients of reactants and products, and whether it is reversible."""

    reactants: tuple[tuple[str, float], ...]
    products: tuple[tuple[str, float], ...]
    reversible: bool

    @property
    def species(self) -> tuple[str, ...]:
        seen: dict[str, None] = {}
        for name, _ in self.reactants + self.products:
            seen[name] = None
        return tuple(seen)


def _side(text: str, side: str) -> tuple[tuple[str, float], ...]:
    if not text.strip():
        return ()
    terms: dict[str, float] = {}
    for part in text.split("+"):
        match = _TERM.match(part)
        if match is None:
            raise EquationError(f"cannot read '{part.strip()}' on the {side} side (write e.g. '2 A' or 'B')")
        coefficient = float(match.group(1)) if match.group(1) else 1.0
        if coefficient <= 0:
            raise EquationError(f"coefficient of '{match.group(2)}' must be positive")
        terms[match.group(2)] = terms.get(match.group(2), 0.0) + coefficient
    return tuple(terms.items())


def parse_equation(text: str) -> Equation:
    """Parse ``text``; raises ``EquationError`` for a missing arrow, an unreadable term or no reactants."""
    arrows = [a for a in ARROWS if a in text]
    if not arrows:
        raise EquationError("no arrow: use '->' for an irreversible step or '<=>' for a reversible one")
    arrow = arrows[0]
    if text.count(arrow) != 1 or (arrow == "<=>" and "->" in text.replace("<=>", "")):
        raise EquationError("an equation has exactly one arrow")
    left, right = text.split(arrow)
    reactants, products = _side(left, "left"), _side(right, "right")
    if not reactants:
        raise EquationError("no reactants on the left of the arrow")
    if arrow == "<=>" and not products:
        raise EquationError("a reversible reaction needs products")
    return Equation(reactants, products, arrow == "<=>")


@dataclass(frozen=True)
class Network:
    """Matrices of a network of R reactions in N species (rows: reactions, columns: species).

    stoichiometry[j, i]: net moles of species i made per unit extent of reaction j (negative if consumed);
    forward_orders[j, i]: order of the forward rate in species i (mass action: reactant coefficients);
    reverse_orders[j, i]: order of the reverse rate (mass action: product coefficients);
    reversible[j]: whether reaction j has a reverse rate k_j / K_j;
    inhibition[j]: exponent n of the saturation term (1 + sum_m K_jm c_m)^n dividing reaction j's rate, 0 for
    laws without one; adsorption_sites: the (reaction j, species m) pairs with an adsorption constant K_jm;
    held: the reversible reaction held at equilibrium (quasi-equilibrium: it has no rate, its K_c ties its species
    together at every instant), -1 for none.
    """

    species: tuple[str, ...]
    reactions: tuple[str, ...]
    stoichiometry: np.ndarray
    forward_orders: np.ndarray
    reverse_orders: np.ndarray
    reversible: np.ndarray
    inhibition: np.ndarray | None = None
    adsorption_sites: tuple[tuple[int, int], ...] = ()
    held: int = -1

    def __post_init__(self) -> None:
        if self.inhibition is None:
            inhibition = np.zeros(len(self.reactions))
            inhibition.setflags(write=False)
            object.__setattr__(self, "inhibition", inhibition)

    @property
    def saturating(self) -> bool:
        return bool(self.adsorption_sites)

    @property
    def overall_forward_order(self) -> np.ndarray:
        return self.forward_orders.sum(axis=1)

    @property
    def reaction_count_change(self) -> np.ndarray:
        """Delta n of each reaction (sum of stoichiometric coefficients): the concentration power of K_c."""
        return self.stoichiometry.sum(axis=1)


def build_network(
    species: tuple[str, ...],
    reactions: tuple[str, ...],
    equations: tuple[Equation, ...],
    orders: tuple[dict[str, float], ...] | None = None,
    saturation: tuple[tuple[float, tuple[str, ...]], ...] | None = None,
    held: int = -1,
) -> Network:
    """Matrices from parsed equations; every species named must be in ``species`` (checked by the caller).

    ``orders`` optionally gives each reaction's forward orders by species (power laws); by default they are
    the reactants' stoichiometric coefficients (mass action). ``saturation`` gives, per reaction, the
    inhibition exponent and the species with adsorption constants (exponent 0 and no species: none). ``held`` is
    the index of a reversible reaction held at equilibrium (-1: none).
    """
    index = {name: i for i, name in enumerate(species)}
    shape = (len(equations), len(species))
    stoichiometry, forward, reverse = np.zeros(shape), np.zeros(shape), np.zeros(shape)
    for j, equation in enumerate(equations):
        for name, coefficient in equation.reactants:
            stoichiometry[j, index[name]] -= coefficient
            forward[j, index[name]] = coefficient
        for name, coefficient in equation.products:
            stoichiometry[j, index[name]] += coefficient
            reverse[j, index[name]] = coefficient
    if orders is not None:
        forward[:] = 0.0
        for j, by_species in enumerate(orders):
            for name, order in by_species.items():
                forward[j, index[name]] = order
    reversible = np.array([e.reversible for e in equations], dtype=bool)
    reverse[~reversible] = 0.0
    inhibition = np.zeros(len(equations))
    sites: list[tuple[int, int]] = []
    for j, (exponent, adsorbed) in enumerate(saturation or ()):
        inhibition[j] = exponent
        sites += [(j, index[name]) for name in adsorbed]
    for matrix in (stoichiometry, forward, reverse, reversible, inhibition):
        matrix.setflags(write=False)
    if held >= 0 and not reversible[held]:
        raise EquationError("only a reversible step ('<=>') can be held at equilibrium")
    return Network(species, reactions, stoichiometry, forward, reverse, reversible, inhibition, tuple(sites), held)


#: What to do when a run cannot start at the held reaction's equilibrium (``held_start_blocked``).
HELD_START_HINT = "a step held at equilibrium needs one side of it present at the start (or give it a rate instead)"


def held_start_blocked(network: Network, initial: np.ndarray, present: tuple[int, ...] = ()) -> tuple[str, str] | None:
    """(a reactant, a product) of the held reaction that both start at zero in ``initial`` (N,), ignoring the
    species in ``present`` (their initial concentration is fitted, so positive): no extent of the reaction then
    reaches its equilibrium. None where it can start, or where no reaction is held."""
    if network.held < 0:
        return None
    row = network.stoichiometry[network.held]
    absent = [i for i in range(len(network.species)) if initial[i] <= 0 and i not in present]
    reactants = [i for i in absent if row[i] < 0]
    products = [i for i in absent if row[i] > 0]
    if reactants and products:
        return network.species[reactants[0]], network.species[products[0]]
    return None


_FORMULA_TOKEN = re.compile(r"([A-Z][a-z]?|\(|\)|\d+)")


def element_counts(formula: str) -> dict[str, int]:
    """Atoms per element of a molecular formula such as ``C2H5OH`` or ``(CH3)2CO``; ``EquationError`` if it
    does not read as one. Charges and hydrates are not part of this grammar."""
    tokens = _FORMULA_TOKEN.findall(formula)
    if "".join(tokens) != formula.replace(" ", "") or not tokens:
        raise EquationError(f"'{formula}' is not a molecular formula (write e.g. C2H5OH or (CH3)2CO)")
    stack: list[dict[str, int]] = [{}]
    index = 0
    while index < len(tokens):
        token = tokens[index]
        index += 1
        count = 1
        if index < len(tokens) and tokens[index].isdigit():
            count = int(tokens[index])
            index += 1
        if token == "(":
            if count != 1:
                raise EquationError(f"'{formula}': a count cannot follow '('")
            stack.append({})
        elif token == ")":
            if len(stack) == 1:
                raise EquationError(f"'{formula}': ')' without '('")
            group = stack.pop()
            for element, n in group.items():
                stack[-1][element] = stack[-1].get(element, 0) + n * count
        elif token.isdigit():
            raise EquationError(f"'{formula}': a number must follow an element or ')'")
        else:
            stack[-1][token] = stack[-1].get(token, 0) + count
    if len(stack) != 1:
        raise EquationError(f"'{formula}': '(' without ')'")
    return stack[0]


def imbalance(equation: Equation, formulas: dict[str, str]) -> dict[str, float]:
    """Atoms per element of products minus reactants (empty when the equation balances)."""
    net: dict[str, float] = {}
    for side, sign in ((equation.reactants, -1.0), (equation.products, 1.0)):
        for name, coefficient in side:
            for element, n in element_counts(formulas[name]).items():
                net[element] = net.get(element, 0.0) + sign * coefficient * n
    return {element: value for element, value in net.items() if abs(value) > 1e-9}
