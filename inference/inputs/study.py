"""The resolved study: what a validated study file means, in internal units, immutable.

Temperatures are kelvin and energies J/mol; rate constants, times and concentrations stay in the units the
study declares (``Study.units``). Nothing here imports PyMC.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from ..physics.network import Network
from ..physics.parameters import SensitivityLayout
from .measured import QuantitySpec
from .rate_laws.law import Site as AdsorptionSite
from .schema import Noise, Sampling, Scenario, Units

Mode = Literal["rate_constants", "network"]


@dataclass(frozen=True)
class ArrheniusPrior:
    """Priors of one reaction's Arrhenius parameters about the reference temperature.

    ln k_ref ~ Normal(ln_k_ref_mean, ln_k_ref_sd), k_ref in the study's rate-constant unit;
    Ea ~ Normal(ea_mean, ea_sd) truncated to Ea > 0, in J/mol.
    """

    ln_k_ref_mean: float
    ln_k_ref_sd: float
    ea_mean: float
    ea_sd: float


@dataclass(frozen=True)
class EquilibriumPrior:
    """Priors of a reversible step's equilibrium constant about T_ref (van 't Hoff).

    ln K_ref ~ Normal(ln_eq_ref_mean, ln_eq_ref_sd), K_c in concentration^(delta n);
    dH ~ Normal(dh_mean, dh_sd), reaction enthalpy in J/mol.
    """

    ln_eq_ref_mean: float
    ln_eq_ref_sd: float
    dh_mean: float
    dh_sd: float


@dataclass(frozen=True)
class FittedOrder:
    """A forward order given a uniform prior on [lower, upper]."""

    species: str
    lower: float
    upper: float


@dataclass(frozen=True)
class ReactionSpec:
    """One reaction of the study; ``k_unit`` is the unit of its k_ref and A.

    ``temperature_exponent`` is n of (T/T_ref)^n (its prior mean when fitted); ``exponent_sd`` its prior sd,
    or None when n is fixed. ``inhibition_exponent`` is the power of a saturating law's denominator (0: none)
    and ``adsorption`` its adsorption constants. ``molecularity`` is the overall forward order when it is a
    fixed number (None for fitted orders). ``held``: the step is held at equilibrium (``fast_equilibrium``); it
    has no rate, and its ``prior`` is ``HELD_PLACEHOLDER``, which no data inform and no output reports.
    """

    name: str
    equation: str | None
    rate_law: str
    prior: ArrheniusPrior
    k_unit: str
    equilibrium: EquilibriumPrior | None = None
    eq_unit: str = ""
    fitted_orders: tuple[FittedOrder, ...] = ()
    temperature_exponent: float = 0.0
    exponent_sd: float | None = None
    inhibition_exponent: float = 0.0
    adsorption: tuple[AdsorptionSite, ...] = ()
    molecularity: float | None = None
    held: bool = False


#: The Arrhenius prior a step held at equilibrium carries in the parameter vector (its k and Ea have no effect
#: on any prediction, so their posterior is this prior; summaries leave them out): ln k ~ N(0, 1), Ea ~ N(50, 10)
#: kJ/mol.
HELD_PLACEHOLDER = ArrheniusPrior(0.0, 1.0, 50_000.0, 10_000.0)


@dataclass(frozen=True)
class RunVariabilitySpec:
    """Between-run scatter of ln k: tau ~ half-normal(scale) for each reaction in ``reactions`` (indices),
    groups from the runs-file column ``by`` (None: each run its own group)."""

    reactions: tuple[int, ...]
    scale: float
    by: str | None
    centred: bool = False


@dataclass(frozen=True)
class TransitionStateSpec:
    """Settings of the Eyring analysis: ``phase`` and the standard concentration in mol/m^3 (SI)."""

    phase: str
    standard_concentration_si: float


@dataclass(frozen=True)
class Study:
    """A validated study. Build it with ``inference.config.load_study``; never mutate it."""

    name: str
    title: str
    path: Path
    mode: Mode
    units: Units
    data_files: tuple[tuple[str, Path], ...]
    reactions: tuple[ReactionSpec, ...]
    reference_temperature_K: float | None
    noise: Noise
    sampling: Sampling
    k_at_K: tuple[float, ...]
    canonical: dict
    species: tuple[str, ...] = ()
    network: Network | None = None
    initial_uncertainty: tuple[tuple[str, float], ...] = ()
    warnings: tuple[str, ...] = ()
    scenarios: tuple[Scenario, ...] = ()
    run_variability: RunVariabilitySpec | None = None
    temperature_sd_K: float | None = None
    transition_state: TransitionStateSpec | None = None
    #: Declared measured quantities (signals, compositions, ...); a species name alone means its concentration.
    quantities: tuple[QuantitySpec, ...] = ()
    #: Whether measured values of batch runs are concentrations or amounts (``data.measured_as``).
    measured_as: Literal["concentration", "amount"] = "concentration"

    def sensitivity_layout(self) -> SensitivityLayout:
        """Which kinetic parameters are free: the fitted orders, the uncertain initial concentrations, and the
        temperature slopes when the study has temperature histories (the columns of the blocks of
        ``physics.parameters.BLOCKS``)."""
        species = self.species
        free_orders = tuple(
            (j, species.index(fitted.species)) for j, r in enumerate(self.reactions) for fitted in r.fitted_orders
        )
        free_initial = tuple(species.index(name) for name, _ in self.initial_uncertainty)
        fitted_exponents = tuple(j for j, r in enumerate(self.reactions) if r.exponent_sd is not None)
        varies = self.has_data("temperatures")
        return SensitivityLayout(self.network, free_orders, free_initial, varies, fitted_exponents)

    @property
    def reaction_names(self) -> tuple[str, ...]:
        return tuple(r.name for r in self.reactions)

    def data_file(self, role: str) -> Path:
        """Absolute path of the data file with this role (``rate_constants``, ``runs``, ``measurements``,
        ``temperatures``, ``feeds``, ``steady_states``)."""
        return dict(self.data_files)[role]

    def has_data(self, role: str) -> bool:
        """Whether the study gives a data file with this role."""
        return role in dict(self.data_files)
