"""The registry of rate laws: one module per law, one line per law below.

The base class ``RateLaw`` and the helpers the laws share are in ``law`` (a module of its own, so that the law
modules and this one do not import each other). A law that fits the kernel (a numerator k prod c_i^a_i over
an optional (1 + sum_j K_j c_j)^n) is one new module and one line here; ``schema.RATE_LAWS`` is the registry's
names. Nothing here imports PyMC.
"""

from __future__ import annotations

from .catalysed import Catalysed
from .law import Z95, KernelTerms, RateLaw, Site, catalysts, van_t_hoff_prior
from .mass_action import MassAction
from .michaelis_menten import MichaelisMenten
from .power_law import PowerLaw
from .saturating import Saturating

REGISTRY: dict[str, RateLaw] = {
    law.name: law
    for law in (
        MassAction(),
        PowerLaw(),
        Saturating(),
        MichaelisMenten(),
        Catalysed(),
    )
}

#: Optional keys some law declares; giving one to a law that does not take it is an error.
LAW_KEYS = frozenset().union(*(law.takes for law in REGISTRY.values()))


def undeclared_keys(law: RateLaw, given: set[str]) -> list[str]:
    """Keys given in a reaction that its law does not take, in a stable order."""
    return sorted(key for key in given & LAW_KEYS if key not in law.takes)


def missing_keys(law: RateLaw, given: set[str]) -> list[str]:
    """Keys the law requires that the reaction does not give, in a stable order."""
    return sorted(law.requires - given)


__all__ = [
    "LAW_KEYS",
    "REGISTRY",
    "Z95",
    "KernelTerms",
    "RateLaw",
    "Site",
    "catalysts",
    "missing_keys",
    "undeclared_keys",
    "van_t_hoff_prior",
]
