"""Power law: r = k prod c_i^a_i with orders given per reactant, fixed or fitted (``orders``)."""

from __future__ import annotations

from .law import RateLaw


class PowerLaw(RateLaw):
    name = "power_law"
    description = "r = k prod c_i^a_i with orders given or fitted per reactant"
    takes = frozenset({"orders"})
