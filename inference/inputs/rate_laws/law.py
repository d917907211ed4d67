"""The base of every rate law and the helpers the laws share.

Every law has the same numerator, k(T) prod_i c_i^a_i, with orders a_i from the equation (mass action) or
given per reactant (``orders``); saturating laws divide it by (1 + sum_j K_j(T) c_j)^n. A law is a subclass
of ``RateLaw`` that says which study-file keys it takes, how a validated reaction becomes the kernel's terms
(the denominator power n and the adsorption constants K_j), which derived quantities it reports and what
``arrhenia check`` prints for it. Temperature dependence: k(T) = k_ref (T/T_ref)^n_T exp(-(Ea/R)(1/T - 1/T_ref)),
and each K_j follows van 't Hoff, ln K_j(T) = ln K_j,ref - (dH_j/R)(1/T - 1/T_ref).

This module sits below ``schema`` and ``study`` (``schema`` takes its list of law names from the registry), so
it cannot import them: the validated reaction and the resolved one are described by the attributes used.
Nothing here imports PyMC.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, ClassVar, NamedTuple, Protocol

from ...physics.network import Equation
from .. import units

#: z for a central 95 % interval of a normal distribution; a lognormal prior's ``factor`` spans that interval.
Z95 = 1.959963984540054

#: A validated ``schema.Reaction`` (the keys of the study file, in its units).
ValidatedReaction = Any
#: Posterior draws: a numpy array or an xarray DataArray (the laws only do arithmetic on them).
Draws = Any


class Site(NamedTuple):
    """An adsorption constant of a saturating law, van 't Hoff about T_ref (``study.AdsorptionSite`` is this):
    ln K_ref ~ Normal(ln_ref_mean, ln_ref_sd), K in 1/concentration; dH ~ Normal(dh_mean, dh_sd), J/mol."""

    species: str
    ln_ref_mean: float
    ln_ref_sd: float
    dh_mean: float
    dh_sd: float


@dataclass(frozen=True)
class KernelTerms:
    """What a law adds to the mass-action kernel: the power of the denominator (0: none) and its constants."""

    inhibition_exponent: float = 0.0
    sites: tuple[Site, ...] = ()


class ResolvedReaction(Protocol):
    """The parts of a ``study.ReactionSpec`` the laws read."""

    name: str
    equation: str | None
    inhibition_exponent: float
    adsorption: Sequence[Site]


class StudyUnits(Protocol):
    """The parts of ``schema.Units`` the laws read."""

    concentration: str | None
    time: str | None
    energy: str


class RateLaw:
    """A rate law. Subclasses set the class attributes and override the hooks they need.

    ``takes``: the optional study-file keys it uses; ``requires``: those it cannot do without (every law takes
    name, equation, k_ref, Ea, temperature_exponent, and K_ref with dH for ``<=>`` steps). ``network_only``:
    its rate needs concentrations, so it cannot describe measured rate constants.
    """

    name: ClassVar[str]
    description: ClassVar[str]
    takes: ClassVar[frozenset[str]] = frozenset()
    requires: ClassVar[frozenset[str]] = frozenset()
    network_only: ClassVar[bool] = False

    def kernel_terms(
        self, reaction: ValidatedReaction, equation: Equation, species: tuple[str, ...], energy: str, key: str
    ) -> KernelTerms:
        """The denominator of a network reaction; ``energy`` is the study's energy unit, ``key`` names the
        reaction in errors. Raises ``StudyError`` where the equation or keys do not suit the law."""
        return KernelTerms()

    def check_terms(self, spec: ResolvedReaction, study_units: StudyUnits) -> list[str]:
        """The law's own parts of the reaction's line in ``arrhenia check``, in the study file's terms."""
        return []

    def written_enthalpies(self, spec: ResolvedReaction) -> list[tuple[str, float, float]]:
        """(study-file key, prior mean, prior sd) of each enthalpy the law adds, in J/mol, signs as written."""
        return []

    def derived_quantities(
        self,
        spec: ResolvedReaction,
        ln_k_ref: Draws,
        sites: Mapping[str, tuple[Draws, Draws]],
        study_units: StudyUnits,
    ) -> dict[str, tuple[str, Draws]]:
        """Rows of ``summary.csv`` by name, with unit and draws. ``sites`` maps each adsorbing species to the
        draws of its ln K at T_ref (K in 1/concentration) and of its enthalpy (J/mol)."""
        return {}


def van_t_hoff_prior(constant: Any, enthalpy: Any, energy: str, where: str) -> tuple[float, float, float, float]:
    """(mean and sd of ln K at T_ref, mean and sd of its enthalpy in J/mol) from a lognormal prior of a
    constant (``median``, ``factor``) and a normal prior of its enthalpy (``mean``, ``sd``, in ``energy``)."""
    return (
        math.log(constant.median),
        math.log(constant.factor) / Z95,
        float(units.energy_to_joule_per_mol(enthalpy.mean, energy, where)),
        float(units.energy_to_joule_per_mol(enthalpy.sd, energy, where)),
    )


def catalysts(equation: Equation) -> list[str]:
    """Species written on both sides of an equation (an enzyme or catalyst), in the order of the reactants."""
    products = {name for name, _ in equation.products}
    return [name for name, _ in equation.reactants if name in products]


def lognormal_text(ln_mean: float, ln_sd: float, unit: str) -> str:
    """A lognormal prior as the study file gives it: median (in ``unit``) and the factor of its 95 % interval."""
    return f"lognormal(median {math.exp(ln_mean):.4g} {unit}, x/÷ {math.exp(ln_sd * Z95):.3g} at 95 %)"


def normal_text(mean: float, sd: float, energy: str) -> str:
    """A normal prior of an energy given in J/mol, shown in the study's ``energy`` unit."""
    return f"normal({units.joule_per_mol_to(mean, energy):.4g}, sd {units.joule_per_mol_to(sd, energy):.4g} {energy})"
