"""Exact profiles of a single irreversible elementary reaction, for numpy or PyTensor alike.

Written with ``xp`` (``numpy`` or ``pytensor.tensor``) so the model builder differentiates them exactly and
tests evaluate them with numpy. Forms (Levenspiel, Chemical Reaction Engineering, 3rd ed., 1999, ch. 3):

- ``A -> ...``, first order: c_A = c_A0 exp(-k t);
- ``2 A -> ...``, second order with rate = k c_A^2 and d c_A/dt = -2 k c_A^2: c_A = c_A0 / (1 + 2 k c_A0 t);
- ``A + B -> ...``: with d = c_B0 - c_A0, extent x = c_A0 c_B0 g / (c_B0 g + 1), g = expm1(d k t) / d
  (g -> k t as d -> 0, the equal-concentration case).

Every species then follows from the extent: c_i = c_i0 + nu_i x.
"""

from __future__ import annotations

import numpy as np

from .network import Network

#: Relative difference of c_A0 and c_B0 below which the A + B form uses a tiny nonzero d (exact to rounding).
EQUAL_SHARE = 1e-9


def closed_form_kind(network: Network) -> str | None:
    """'first', 'second_same' (2 A), 'second_pair' (A + B) or None when no closed form applies."""
    if len(network.reactions) != 1 or network.reversible[0] or network.saturating:
        return None
    orders = network.forward_orders[0]
    reactants = -np.minimum(network.stoichiometry[0], 0.0)
    if not np.array_equal(orders, reactants):  # only mass action, where orders equal coefficients
        return None
    used = np.flatnonzero(orders)
    if used.size == 1 and orders[used[0]] == 1.0:
        return "first"
    if used.size == 1 and orders[used[0]] == 2.0:
        return "second_same"
    if used.size == 2 and np.all(orders[used] == 1.0):
        return "second_pair"
    return None


def extent(kind: str, network: Network, initial: np.ndarray, k, time, xp=np):
    """Extent of reaction (concentration units) at ``time``; ``initial`` rows and ``k``, ``time`` broadcast."""
    used = np.flatnonzero(network.forward_orders[0])
    a0 = initial[..., used[0]]
    if kind == "first":
        return a0 * -xp.expm1(-k * time)
    if kind == "second_same":
        return a0 - a0 / (1.0 + 2.0 * k * a0 * time)
    b0 = initial[..., used[1]]
    difference = np.asarray(b0 - a0, dtype=float)
    small = np.abs(difference) < EQUAL_SHARE * np.maximum(np.abs(a0), 1e-300)
    difference = np.where(small, EQUAL_SHARE * np.maximum(np.abs(a0), 1e-300), difference)
    growth = xp.expm1(difference * k * time) / difference
    return a0 * b0 * growth / (b0 * growth + 1.0)


def concentrations(kind: str, network: Network, initial: np.ndarray, k, time, xp=np):
    """Every species' concentration: c_i = c_i0 + nu_i x, stacked on a new last axis."""
    x = extent(kind, network, initial, k, time, xp)
    nu = network.stoichiometry[0]
    return xp.stack([initial[..., i] + nu[i] * x for i in range(nu.size)], axis=-1)
