"""Unit handling at the boundary: parse unit strings with pint and convert to the internal units.

Inside Arrhenia temperatures are kelvin and energies J/mol. Time and concentration stay in the units the
study declares, so rate constants are reported in the units the user reads and the ODEs stay well scaled.
"""

from __future__ import annotations

import math
from functools import cache

import numpy as np
import pint

from ..errors import StudyError

#: Plausible range of temperatures for reaction kinetics, kelvin. Outside it, the stated unit is most likely
#: wrong ("25" meant as degC but stated as K); the bounds are common practice, not a physical law.
PLAUSIBLE_KELVIN = (150.0, 3000.0)

_DIMENSIONS = {
    "temperature": "[temperature]",
    "time": "[time]",
    "concentration": "[substance] / [length] ** 3",
    "energy": "[mass] * [length] ** 2 / [time] ** 2 / [substance]",
    "volume": "[length] ** 3",
}

EXAMPLES = {
    "temperature": "K, degC, degF or degR",
    "time": "s, min or h",
    "concentration": "mol/L, mmol/L or mol/m^3",
    "energy": "kJ/mol, kcal/mol or J/mol",
    "rate_constant": "1/s, 1/min or L/(mol*s)",
    "volume": "L, mL or m^3",
}


@cache
def registry() -> pint.UnitRegistry:
    """The one pint registry of the process (non-multiplicative temperatures handled by offset units)."""
    ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    return ureg


def parse_unit(text: str, kind: str, where: str) -> pint.Unit:
    """Parse ``text`` as a unit of ``kind`` (temperature, time, concentration, energy, volume or rate_constant).

    Raises ``StudyError`` naming ``where`` if the text is not a unit or has the wrong dimension.
    """
    ureg = registry()
    try:
        unit = ureg.Unit(text.strip())
    except Exception:
        raise StudyError(where, f"'{text}' is not a unit I know", f"use e.g. {EXAMPLES[kind]}") from None
    if kind == "rate_constant":
        # k of any reaction order: concentration^(1-n) / time, so it must at least carry 1/time.
        dims = dict(unit.dimensionality)
        ok = dims.get("[time]", 0) == -1 and set(dims) <= {"[time]", "[substance]", "[length]"}
    else:
        ok = unit.dimensionality == ureg.get_dimensionality(_DIMENSIONS[kind])
    if not ok:
        raise StudyError(
            where,
            f"'{text}' is not a {kind.replace('_', ' ')} unit (its dimension is {unit.dimensionality})",
            f"use e.g. {EXAMPLES[kind]}",
        )
    return unit


def to_kelvin(values: np.ndarray | float, unit: str, where: str) -> np.ndarray:
    """Convert temperatures stated in ``unit`` to kelvin, rejecting impossible and implausible values."""
    parsed = parse_unit(unit, "temperature", where)
    ureg = registry()
    kelvin = np.atleast_1d(ureg.Quantity(np.asarray(values, dtype=float), parsed).to(ureg.kelvin).magnitude)
    check_kelvin(kelvin, unit, where)
    return kelvin


def check_kelvin(kelvin: np.ndarray, unit: str, where: str) -> None:
    """Reject temperatures at or below absolute zero, and those outside ``PLAUSIBLE_KELVIN``."""
    low, high = PLAUSIBLE_KELVIN
    if np.any(~np.isfinite(kelvin)):
        raise StudyError(where, "a temperature is missing or not a number")
    if np.any(kelvin <= 0.0):
        raise StudyError(
            where,
            f"temperature {kelvin.min():.4g} K is at or below absolute zero",
            f"check the temperature unit (stated: {unit})",
        )
    if np.any(kelvin < low) or np.any(kelvin > high):
        bad = kelvin[(kelvin < low) | (kelvin > high)][0]
        raise StudyError(
            where,
            f"temperature {bad:.4g} K (from unit {unit}) is outside the plausible range {low:g}-{high:g} K",
            "is the temperature unit right? values like 25 or 80 are usually degC, not K",
        )


def convert(value: np.ndarray | float, unit: str, target: str, kind: str, where: str) -> np.ndarray | float:
    """Convert a multiplicative quantity (time, concentration, energy, rate constant) to ``target``."""
    ureg = registry()
    source = parse_unit(unit, kind, where)
    try:
        return ureg.Quantity(value, source).to(target).magnitude
    except pint.DimensionalityError:
        raise StudyError(where, f"cannot convert {unit} to {target}") from None


def energy_to_joule_per_mol(value: np.ndarray | float, unit: str, where: str) -> np.ndarray | float:
    """Convert a molar energy (kJ/mol, kcal/mol, J/mol, ...) to J/mol."""
    return convert(value, unit, "J/mol", "energy", where)


def joule_per_mol_to(value, unit: str):
    """Convert a molar energy in J/mol (number, array or DataArray) to ``unit`` (already validated)."""
    ureg = registry()
    return value * ureg.Quantity(1.0, "J/mol").to(unit).magnitude


def kelvin_to(values: np.ndarray | float, unit: str) -> np.ndarray:
    """Convert kelvin to a (validated) temperature unit, for reporting in the study's units."""
    ureg = registry()
    return np.asarray(ureg.Quantity(np.asarray(values, dtype=float), ureg.kelvin).to(unit).magnitude)


def kelvin_per_degree(unit: str) -> float:
    """Size of one degree of ``unit`` in kelvin (1 for K and degC, 5/9 for degF and degR): for differences."""
    ureg = registry()
    return float(ureg.Quantity(1.0, ureg.Unit(unit)).to(ureg.kelvin).magnitude - ureg.Quantity(0.0, unit).to("K").m)


def si_factor(unit: str) -> float:
    """The number that turns a value in ``unit`` into SI base units (a rate constant into (mol/m^3)^(1-m)/s)."""
    return float(registry().Quantity(1.0, unit).to_base_units().magnitude)


def rate_constant_order(unit: str) -> float:
    """The overall reaction order m implied by a rate-constant unit, concentration^(1-m)/time."""
    dims = dict(registry().Unit(unit).dimensionality)
    return 1.0 - float(dims.get("[substance]", 0))


def amount_unit(concentration: str, volume: str) -> str:
    """The unit of concentration x volume: reduced where that is exact (mol/L x L = mol), else the product."""
    ureg = registry()
    reduced = (ureg.Quantity(1.0, concentration) * ureg.Quantity(1.0, volume)).to_reduced_units()
    if len(list(reduced.unit_items())) == 1 and math.isclose(reduced.magnitude, 1.0, rel_tol=1e-12):
        return f"{reduced.units:~}"
    return f"{concentration}*{volume}"
