"""Mass action: r = k prod c_i^nu_i, the orders being the equation's coefficients."""

from __future__ import annotations

from .law import RateLaw


class MassAction(RateLaw):
    name = "mass_action"
    description = "r = k prod c_i^nu_i, orders from the equation's coefficients"
