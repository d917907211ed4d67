"""Unit conversions at the boundary, against exact definitions."""

import numpy as np
import pytest

from inference.errors import StudyError
from inference.inputs import units


def test_temperature_scales_to_kelvin_exactly():
    # Exact by definition (SI Brochure, 9th ed., 2019): T/K = t/degC + 273.15; degF = 5/9 K offset from
    # 459.67 degF at absolute zero; degR = 5/9 K.
    assert units.to_kelvin([0.0, 25.0, 100.0], "degC", "t") == pytest.approx([273.15, 298.15, 373.15], abs=1e-12)
    assert units.to_kelvin([32.0, 212.0], "degF", "t") == pytest.approx([273.15, 373.15], abs=1e-12)
    assert units.to_kelvin([491.67, 540.0], "degR", "t") == pytest.approx([273.15, 300.0], abs=1e-12)
    assert units.to_kelvin([300.0], "K", "t") == pytest.approx([300.0])


def test_molar_energies_convert_exactly():
    # The thermochemical calorie is exactly 4.184 J (NIST SP 811, appendix B.8).
    assert units.energy_to_joule_per_mol(1.0, "kcal/mol", "e") == pytest.approx(4184.0, rel=1e-15)
    assert units.energy_to_joule_per_mol(1.0, "kJ/mol", "e") == pytest.approx(1000.0, rel=1e-15)
    assert units.energy_to_joule_per_mol(2500.0, "J/mol", "e") == pytest.approx(2500.0, rel=1e-15)
    assert units.joule_per_mol_to(4184.0, "kcal/mol") == pytest.approx(1.0, rel=1e-15)
    assert units.joule_per_mol_to(np.array([1000.0]), "kJ/mol") == pytest.approx([1.0])


@pytest.mark.parametrize(
    ("text", "kind"),
    [("kJ/mol", "temperature"), ("degC", "energy"), ("mol/L", "time"), ("s", "rate_constant"), ("furlong", "time")],
)
def test_wrong_or_unknown_units_are_refused(text, kind):
    with pytest.raises(StudyError, match=r"units\.x"):
        units.parse_unit(text, kind, "units.x")


@pytest.mark.parametrize("text", ["1/s", "1/min", "L/(mol*s)", "m^3/(mol*s)", "L^2/(mol^2*h)"])
def test_rate_constant_units_of_any_order_are_accepted(text):
    units.parse_unit(text, "rate_constant", "units.rate_constant")


def test_impossible_and_implausible_temperatures():
    with pytest.raises(StudyError, match="absolute zero"):
        units.to_kelvin([-300.0], "degC", "t")
    with pytest.raises(StudyError, match=r"plausible.*degC"):
        units.to_kelvin([25.0], "K", "t")  # "25" meant as degC but stated as K
