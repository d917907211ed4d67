"""The registry of rate laws: what each law computes and which study-file keys (priors) it takes.

Every law has the same numerator, k(T) prod_i c_i^a_i, with orders a_i from the equation (mass action) or
given per reactant (``orders``); saturating laws divide it by (1 + sum_j K_j(T) c_j)^n (Langmuir-Hinshelwood
and Hougen-Watson forms; Michaelis-Menten is the one-substrate case with n = 1 and K = 1/K_M).
Temperature dependence: k(T) = k_ref (T/T_ref)^n_T exp(-(Ea/R)(1/T - 1/T_ref)), and each K_j follows
van 't Hoff, ln K_j(T) = ln K_j,ref - (dH_j/R)(1/T - 1/T_ref). Nothing here imports PyMC.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class RateLaw:
    """One law of the registry: ``takes`` the optional keys it uses, ``requires`` those it cannot do without.
    Every law takes name, equation, k_ref, Ea, temperature_exponent, and K_ref with dH for ``<=>`` steps."""

    name: str
    description: str
    takes: frozenset[str] = frozenset()
    requires: frozenset[str] = frozenset()
    saturating: bool = False


REGISTRY: dict[str, RateLaw] = {
    law.name: law
    for law in (
        RateLaw("mass_action", "r = k prod c_i^nu_i, orders from the equation's coefficients"),
        RateLaw(
            "power_law",
            "r = k prod c_i^a_i with orders given or fitted per reactant",
            takes=frozenset({"orders"}),
        ),
        RateLaw(
            "saturating",
            "r = k prod c_i^a_i / (1 + sum_j K_j c_j)^n, K_j by van 't Hoff (Langmuir-Hinshelwood, Hougen-Watson)",
            takes=frozenset({"orders", "adsorption", "inhibition_exponent"}),
            requires=frozenset({"adsorption"}),
            saturating=True,
        ),
        RateLaw(
            "michaelis_menten",
            "r = k prod c_i^nu_i / (1 + c_S/K_M): the saturating law with one substrate S and n = 1",
            takes=frozenset({"K_M", "K_M_dH"}),
            requires=frozenset({"K_M", "K_M_dH"}),
            saturating=True,
        ),
    )
}

#: Optional keys some law declares; giving one to a law that does not take it is an error.
LAW_KEYS = frozenset().union(*(law.takes for law in REGISTRY.values()))


def undeclared_keys(law: RateLaw, given: set[str]) -> list[str]:
    """Keys given in a reaction that its law does not take, in a stable order."""
    return sorted(key for key in given & LAW_KEYS if key not in law.takes)


def missing_keys(law: RateLaw, given: set[str]) -> list[str]:
    return sorted(law.requires - given)
