"""The kinetic parameter vector of a network, declared once, and draws of it as plain arrays.

``BLOCKS`` declares each block of the vector the compiled kernel differentiates against (ln k, ln K_c, ln K of
adsorption sites, fitted orders, uncertain initial concentrations, and, where a run's temperature changes, the
temperature slopes Ea/R, dH/R, dH_ads/R and fitted temperature exponents): its name, whether it has one row per run,
the posterior coordinate of its columns, the sampled variables it is made of, and its kernel slot. The solver's
sensitivity parameters and their names, the PyTensor Op's inputs, shapes and Jacobian columns, and the verdict's
variable list all iterate over it; ``KineticInputs`` carries the values block by block, by name.

``ParameterDraws`` holds posterior (or prior) draws and turns them into ``KineticInputs`` at a temperature.
Temperatures in K, energies in J/mol; ln k in the units each reaction's k is stated in.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, fields
from typing import NamedTuple

import numpy as np

from .arrhenius import R, ln_rate_constant
from .kinetics import ACTIVATION, ADS_ENTHALPY, EQ_ENTHALPY, EXPONENT, INITIAL, LN_ADS, LN_EQ, LN_K, ORDER
from .network import Network


class KineticInputs(NamedTuple):
    """Values of every block, for a set of runs: ``ln_k`` (runs, reactions), ``ln_eq`` (runs, reversible
    reactions), ``ln_ads`` (runs, adsorption sites), each at the run's nominal temperature; ``orders`` and
    ``initial``; the temperature slopes ``activation`` (Ea/R, K), ``eq_enthalpy`` (dH/R of the reversible
    reactions, K), ``ads_enthalpy`` (dH_ads/R of the adsorption sites, K) and ``exponent`` (temperature exponents).

    For the solver ``orders`` is the full forward-order matrix (reactions, species), ``initial`` the full
    (runs, species) concentrations and the slopes have a run axis (runs, reactions | reversible | sites); for the
    Op's free inputs they are the fitted orders (F,), the uncertain initial concentrations (runs, G), and the
    slopes shared by all runs, present only where some run's temperature changes (the fitted exponents alone)
    (``SensitivityLayout.expand`` turns the one into the other). Slopes left None mean isothermal runs."""

    ln_k: np.ndarray
    ln_eq: np.ndarray
    ln_ads: np.ndarray
    orders: np.ndarray
    initial: np.ndarray
    activation: np.ndarray | None = None
    eq_enthalpy: np.ndarray | None = None
    ads_enthalpy: np.ndarray | None = None
    exponent: np.ndarray | None = None


@dataclass(frozen=True)
class SensitivityLayout:
    """Which parameters of a network are free: fitted forward orders ``(reaction, species)``, species whose
    initial concentration is uncertain, whether the temperature changes within some run (then the temperature
    slopes are free too), and the reactions whose temperature exponent is fitted."""

    network: Network
    free_orders: tuple[tuple[int, int], ...] = ()
    free_initial: tuple[int, ...] = ()
    temperature_varies: bool = False
    fitted_exponents: tuple[int, ...] = ()

    def expand(
        self,
        free: KineticInputs,
        fixed_orders: np.ndarray,
        nominal_initial: np.ndarray,
        fixed_exponents: np.ndarray | None = None,
    ) -> KineticInputs:
        """Solver inputs from the Op's free inputs: fitted orders written into ``fixed_orders`` (R, N), uncertain
        initial concentrations into ``nominal_initial`` (runs, N), fitted exponents into ``fixed_exponents``
        (R,; zeros when None), the shared slopes repeated for every run (read-only views; left None where no run's
        temperature changes, as they then act nowhere)."""
        orders = fixed_orders
        if self.free_orders:
            orders = np.array(fixed_orders, dtype=float)
            for value, (j, i) in zip(free.orders, self.free_orders, strict=True):
                orders[j, i] = value
        initial = nominal_initial
        if self.free_initial:
            initial = np.array(nominal_initial, dtype=float)
            for g, i in enumerate(self.free_initial):
                initial[:, i] = free.initial[:, g]
        if not self.temperature_varies:  # the slopes act only where a run's temperature changes: none does
            return free._replace(
                orders=orders, initial=initial, activation=None, eq_enthalpy=None, ads_enthalpy=None, exponent=None
            )
        n_runs, n_reactions = initial.shape[0], len(self.network.reactions)
        exponent = np.zeros(n_reactions) if fixed_exponents is None else np.array(fixed_exponents, dtype=float)
        exponent[list(self.fitted_exponents)] = free.exponent
        slopes = (free.activation, free.eq_enthalpy, free.ads_enthalpy, exponent)
        activation, eq_enthalpy, ads_enthalpy, exponent = (
            np.broadcast_to(np.asarray(v, dtype=float), (n_runs, np.size(v))) for v in slopes
        )
        return free._replace(
            orders=orders,
            initial=initial,
            activation=activation,
            eq_enthalpy=eq_enthalpy,
            ads_enthalpy=ads_enthalpy,
            exponent=exponent,
        )


@dataclass(frozen=True)
class ParameterBlock:
    """One block of the kinetic parameter vector (see the module's docstring)."""

    name: str  #: the field of ``KineticInputs`` that holds it
    kernel_kind: int  #: its sensitivity kind in the compiled kernel (``kinetics.LN_K`` ...)
    per_run: bool  #: one row per run (else one value shared by every run)
    coordinate: str  #: the posterior coordinate of its columns
    posterior_variables: tuple[str, ...]  #: the sampled (or deterministic) variables it is made of
    label: str  #: name of one column, formatted with ``reaction`` and ``species``
    coordinate_label: str  #: its label on the posterior coordinate, formatted the same way
    sites: Callable[[SensitivityLayout], tuple[tuple[int, int], ...]]  #: (reaction, species) of each column

    def count(self, layout: SensitivityLayout) -> int:
        return len(self.sites(layout))

    def labels(self, layout: SensitivityLayout, template: str | None = None) -> list[str]:
        """Each column's ``coordinate_label`` (or ``template``) with the network's reaction and species names."""
        net = layout.network
        text = self.coordinate_label if template is None else template
        return [text.format(reaction=net.reactions[j], species=net.species[i]) for j, i in self.sites(layout)]


def _reversible_sites(layout: SensitivityLayout) -> tuple[tuple[int, int], ...]:
    return tuple((int(j), 0) for j in np.flatnonzero(layout.network.reversible))


BLOCKS: tuple[ParameterBlock, ...] = (
    ParameterBlock(
        "ln_k",
        LN_K,
        True,
        "reaction",
        ("ln_k_ref", "Ea", "temperature_exponent"),
        "ln_k[{reaction}]",
        "{reaction}",
        lambda layout: tuple((j, 0) for j in range(len(layout.network.reactions))),
    ),
    ParameterBlock(
        "ln_eq",
        LN_EQ,
        True,
        "reversible",
        ("ln_K_ref", "dH"),
        "ln_K[{reaction}]",
        "{reaction}",
        _reversible_sites,
    ),
    ParameterBlock(
        "ln_ads",
        LN_ADS,
        True,
        "adsorption_site",
        ("ln_K_ads_ref", "dH_ads"),
        "ln_K_ads[{reaction}, {species}]",
        "{reaction}:{species}",
        lambda layout: tuple(layout.network.adsorption_sites),
    ),
    ParameterBlock(
        "orders",
        ORDER,
        False,
        "fitted_order",
        ("order",),
        "order[{reaction}, {species}]",
        "{reaction}:{species}",
        lambda layout: layout.free_orders,
    ),
    ParameterBlock(
        "initial",
        INITIAL,
        True,
        "uncertain_species",
        ("initial",),
        "c0[{species}]",
        "{species}",
        lambda layout: tuple((0, i) for i in layout.free_initial),
    ),
    ParameterBlock(
        "activation",
        ACTIVATION,
        False,
        "reaction",
        (),
        "Ea/R[{reaction}]",
        "{reaction}",
        lambda layout: tuple((j, 0) for j in range(len(layout.network.reactions))) if layout.temperature_varies else (),
    ),
    ParameterBlock(
        "eq_enthalpy",
        EQ_ENTHALPY,
        False,
        "reversible",
        (),
        "dH/R[{reaction}]",
        "{reaction}",
        lambda layout: _reversible_sites(layout) if layout.temperature_varies else (),
    ),
    ParameterBlock(
        "ads_enthalpy",
        ADS_ENTHALPY,
        False,
        "adsorption_site",
        (),
        "dH_ads/R[{reaction}, {species}]",
        "{reaction}:{species}",
        lambda layout: tuple(layout.network.adsorption_sites) if layout.temperature_varies else (),
    ),
    ParameterBlock(
        "exponent",
        EXPONENT,
        False,
        "fitted_exponent",
        (),
        "n[{reaction}]",
        "{reaction}",
        lambda layout: tuple((j, 0) for j in layout.fitted_exponents) if layout.temperature_varies else (),
    ),
)
if tuple(block.name for block in BLOCKS) != KineticInputs._fields:  # one order for the kernel, the Op and draws
    raise ImportError("parameters.BLOCKS and KineticInputs must list the same blocks in the same order")

#: The blocks by name.
BLOCK: dict[str, ParameterBlock] = {block.name: block for block in BLOCKS}
#: Posterior variables of the kinetic parameter blocks, in block order.
BLOCK_VARIABLES: tuple[str, ...] = tuple(name for block in BLOCKS for name in block.posterior_variables)


@dataclass(frozen=True)
class ParameterDraws:
    """D draws: ln_k_ref, Ea and temperature exponents (D, reactions); ln_eq_ref and dh (D, reversible);
    ln_ads_ref and dh_ads (D, adsorption sites); forward orders (D, R, N); initial (D, runs, N) or None when
    no initial concentration was uncertain.

    With run-to-run variability, ``run_effect`` (D, groups, R) holds the fitted groups' shifts of ln k and
    ``new_run_shift`` (D, R) one draw of a new run's shift (spread times a standard normal), which
    ``ln_k`` adds: a prediction is for a run not yet made. ``run_temperature`` (D, runs) is the fitted
    true temperatures when the study states a temperature error.
    """

    ln_k_ref: np.ndarray
    ea: np.ndarray
    ln_eq_ref: np.ndarray
    dh: np.ndarray
    orders: np.ndarray
    initial: np.ndarray | None
    temperature_ref: float
    exponent: np.ndarray | None = None
    ln_ads_ref: np.ndarray | None = None
    dh_ads: np.ndarray | None = None
    new_run_shift: np.ndarray | None = None
    run_effect: np.ndarray | None = None
    run_temperature: np.ndarray | None = None

    @property
    def size(self) -> int:
        return self.ln_k_ref.shape[0]

    def _ln_k_plain(self, kelvin: float | np.ndarray) -> np.ndarray:
        exponent = 0.0 if self.exponent is None else self.exponent
        return ln_rate_constant(_per_draw(kelvin), self.ln_k_ref, self.ea, self.temperature_ref, exponent)

    def ln_k(self, kelvin: float | np.ndarray) -> np.ndarray:
        """ln k of every reaction of a new run at ``kelvin`` (one value, or one per draw): (D, reactions)."""
        value = self._ln_k_plain(kelvin)
        return value if self.new_run_shift is None else value + self.new_run_shift

    def fitted_run_ln_k(self, d: int, nominal_K: np.ndarray, group_index: np.ndarray) -> np.ndarray:
        """ln k (runs, reactions) of the fitted runs in draw d, with their true temperatures and group shifts."""
        kelvin = nominal_K if self.run_temperature is None else self.run_temperature[d]
        exponent = 0.0 if self.exponent is None else self.exponent[d][None, :]
        value = ln_rate_constant(
            kelvin[:, None], self.ln_k_ref[d][None, :], self.ea[d][None, :], self.temperature_ref, exponent
        )
        return value if self.run_effect is None else value + self.run_effect[d][group_index]

    def ln_eq(self, kelvin: float | np.ndarray) -> np.ndarray:
        """ln K_c of every reversible reaction at ``kelvin`` (van 't Hoff): (D, reversible)."""
        return ln_rate_constant(_per_draw(kelvin), self.ln_eq_ref, self.dh, self.temperature_ref)

    def ln_ads(self, kelvin: float | np.ndarray) -> np.ndarray | None:
        """ln K of every adsorption site at ``kelvin`` (van 't Hoff): (D, sites), None without sites."""
        if self.ln_ads_ref is None:
            return None
        return ln_rate_constant(_per_draw(kelvin), self.ln_ads_ref, self.dh_ads, self.temperature_ref)

    def draw(self, d: int) -> ParameterDraws:
        """Draw d alone, as a set of one."""
        values = {}
        for field in fields(self):
            value = getattr(self, field.name)
            values[field.name] = value[d : d + 1] if isinstance(value, np.ndarray) else value
        return ParameterDraws(**values)

    def inputs(self, d: int, kelvin: np.ndarray, initial: np.ndarray, ln_k: np.ndarray | None = None) -> KineticInputs:
        """Solver inputs of draw d for runs at (nominal) temperatures ``kelvin`` (runs,) starting from ``initial``
        (runs, N); ``ln_k`` (runs, R) replaces the new-run ln k (e.g. the fitted runs' own, with their shifts)."""
        kelvin = np.asarray(kelvin, dtype=float)
        one = self.draw(d)
        ln_k = one.ln_k(kelvin) if ln_k is None else ln_k
        slopes = one._slopes(kelvin.size)
        return KineticInputs(
            ln_k, one.ln_eq(kelvin), _sites(one.ln_ads(kelvin), kelvin.size), self.orders[d], initial, *slopes
        )

    def as_runs(self, kelvin: float, initial: np.ndarray) -> KineticInputs:
        """Solver inputs with every draw as a run of its own at (nominal) ``kelvin``, all from ``initial`` (N,);
        the draws' orders must not vary (``orders_vary``)."""
        return KineticInputs(
            self.ln_k(kelvin),
            self.ln_eq(kelvin),
            _sites(self.ln_ads(kelvin), self.size),
            self.orders[0],
            np.repeat(np.asarray(initial, dtype=float)[None], self.size, axis=0),
            *self._slopes(None),
        )

    def _slopes(self, runs: int | None) -> tuple[np.ndarray, ...]:
        """Ea/R, dH/R, dH_ads/R (K) and temperature exponents: one row per draw (``runs`` None), or draw 0's row
        repeated for ``runs`` runs."""
        exponent = np.zeros_like(self.ea) if self.exponent is None else np.broadcast_to(self.exponent, self.ea.shape)
        dh_ads = np.zeros((self.size, 0)) if self.dh_ads is None else self.dh_ads
        rows = (self.ea / R, self.dh / R, dh_ads / R, exponent)
        if runs is None:
            return tuple(np.asarray(row, dtype=float) for row in rows)
        return tuple(np.repeat(np.asarray(row[:1], dtype=float), runs, axis=0) for row in rows)

    @property
    def orders_vary(self) -> bool:
        return bool(np.any(self.orders != self.orders[:1]))


def _sites(ln_ads: np.ndarray | None, rows: int) -> np.ndarray:
    return np.zeros((rows, 0)) if ln_ads is None else ln_ads


def _per_draw(kelvin: float | np.ndarray) -> float | np.ndarray:
    kelvin = np.asarray(kelvin, dtype=float)
    return kelvin[:, None] if kelvin.ndim == 1 else kelvin
