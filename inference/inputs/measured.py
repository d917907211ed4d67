"""Measured quantities: how each measured value relates to the predicted concentrations.

Every declared kind (``schema.MeasuredQuantity``) is one case of a single form, so the model builder knows one
formula only. For measurement m of run r at time t:

    value_m = offset + F * (b + h_m * sum_s a_s c_s(t)) / (e + sum_s d_s c_s(t))

with F a scale (a response factor, a path length, 100 for area %), a_s weights (1, or molar absorptivities),
d_s the denominator's species (a composition's set), b and e constants, and h_m a per-measurement multiplier
(the run's volume for a measured amount; V(t)/(V0 n_0) for a conversion or a yield). F and a_s are known numbers
or lognormal priors. Plain numpy; no PyMC here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import StudyError
from .rate_laws import Z95
from .schema import LogNormalPrior, MeasuredQuantity


@dataclass(frozen=True)
class Factor:
    """A positive factor: known (``ln_sd`` 0) or lognormal with ln-mean ``ln_mean`` and ln-sd ``ln_sd``."""

    label: str
    ln_mean: float
    ln_sd: float = 0.0

    @property
    def fitted(self) -> bool:
        return self.ln_sd > 0

    @classmethod
    def of(cls, label: str, value: float | LogNormalPrior) -> Factor:
        if isinstance(value, LogNormalPrior):
            return cls(label, math.log(value.median), math.log(value.factor) / Z95)
        return cls(label, math.log(value))


@dataclass(frozen=True)
class QuantitySpec:
    """One measured quantity resolved against the study's species (indices): its ``terms`` with numerator
    ``weights`` and ``denominator`` coefficients, the constants b and e, the scale F (one per run with
    ``per_run``), the offset, and for conversion and yield the species whose initial amount divides
    (``reference``)."""

    name: str
    kind: str
    species: int
    terms: tuple[int, ...]
    weights: tuple[Factor, ...]
    denominator: tuple[float, ...]
    scale: Factor
    constant: float = 0.0
    denominator_constant: float = 1.0
    offset: float = 0.0
    per_run: bool = False
    reference: int | None = None

    @property
    def absolute(self) -> bool:
        """Whether the value pins a concentration on an absolute scale (no fitted factor, not a ratio)."""
        known = not self.scale.fitted and not any(w.fitted for w in self.weights)
        return known and self.kind in ("concentration", "signal", "combination", "conversion", "yield")


def resolve_quantities(declared: tuple[MeasuredQuantity, ...], species: tuple[str, ...], where: str):
    """``QuantitySpec`` of every declared quantity; ``StudyError`` naming the key for a species the study does
    not have or a quantity declared twice or named like a species with another meaning."""
    specs = []
    names: set[str] = set()
    for index, item in enumerate(declared):
        key = f"{where}: observations[{index}]"
        if item.quantity in names:
            raise StudyError(f"{key}.quantity", f"'{item.quantity}' is declared twice")
        names.add(item.quantity)

        def position(name: str, part: str, key: str = key) -> int:
            if name not in species:
                raise StudyError(
                    f"{key}.{part}", f"'{name}' is not a species of the study", f"species: {', '.join(species)}"
                )
            return species.index(name)

        one = Factor("1", 0.0)
        if item.kind == "combination":
            terms = tuple(position(name, f"weights.{name}") for name in item.weights)
            weights = tuple(Factor.of(f"{item.quantity}:{name}", value) for name, value in item.weights.items())
            spec = QuantitySpec(
                item.quantity,
                item.kind,
                terms[0],
                terms,
                weights,
                (0.0,) * len(terms),
                Factor("path_length", math.log(item.path_length)),
            )
        elif item.kind == "composition":
            target = position(item.species, "species")
            terms = tuple(position(name, f"among ({name})") for name in item.among)
            zero = Factor("0", -math.inf)
            weights = tuple(one if s == target else zero for s in terms)
            spec = QuantitySpec(
                item.quantity,
                item.kind,
                target,
                terms,
                weights,
                (1.0,) * len(terms),
                Factor("scale", math.log(item.scale)),
                denominator_constant=0.0,
            )
        else:
            target = position(item.species, "species")
            scale = Factor.of(item.quantity, item.response) if item.kind == "signal" else one
            reference = None
            if item.kind == "conversion":
                reference = target
            elif item.kind == "yield":
                reference = position(item.of, "of")
            spec = QuantitySpec(
                item.quantity,
                item.kind,
                target,
                (target,),
                (one,),
                (0.0,),
                scale,
                constant=1.0 if item.kind == "conversion" else 0.0,
                offset=item.offset if item.kind == "signal" else 0.0,
                per_run=item.response_per_run and scale.fitted,
                reference=reference,
            )
            if item.quantity in species and item.quantity != item.species:
                raise StudyError(
                    f"{key}.quantity", f"'{item.quantity}' is a species name; name the measured quantity otherwise"
                )
        specs.append(spec)
    return tuple(specs)


def default_quantity(species: int, name: str) -> QuantitySpec:
    """A value that is the concentration of one species (the meaning of a column named after a species)."""
    one = Factor("1", 0.0)
    return QuantitySpec(name, "concentration", species, (species,), (one,), (0.0,), one)


@dataclass(frozen=True)
class MeasurementDesign:
    """Everything the model needs to turn predicted concentrations into measured values (see the module's
    docstring). Basis points (B,): the (run, time index, species) at which concentrations are predicted.
    Per measurement (M, S terms, padded): ``term_basis`` into the basis, ``term_weight`` into the weight table,
    ``term_denominator`` the d coefficient; ``constant`` b, ``denominator_constant`` e, ``multiplier`` h,
    ``scale_index`` into the scale table, ``offset``. Tables: ``fixed_*`` values first, then the fitted factors
    (``fitted_weights``, ``fitted_scales``, each with its label)."""

    basis_run: np.ndarray
    basis_time: np.ndarray
    basis_species: np.ndarray
    term_basis: np.ndarray
    term_weight: np.ndarray
    term_denominator: np.ndarray
    constant: np.ndarray
    denominator_constant: np.ndarray
    multiplier: np.ndarray
    scale_index: np.ndarray
    offset: np.ndarray
    fixed_weights: np.ndarray
    fitted_weights: tuple[Factor, ...] = field(default_factory=tuple)
    fixed_scales: np.ndarray = field(default_factory=lambda: np.ones(1))
    fitted_scales: tuple[Factor, ...] = field(default_factory=tuple)


class _Table:
    """Known values and fitted factors of one table, each fitted factor once (by label)."""

    def __init__(self) -> None:
        self.fixed: list[float] = []
        self.fitted: list[Factor] = []

    def index(self, factor: Factor, label: str) -> int:
        """A known value's position among the known values, or -1 - a fitted factor's position among those."""
        if not factor.fitted:
            value = 0.0 if factor.ln_mean == -math.inf else math.exp(factor.ln_mean)
            if value not in self.fixed:
                self.fixed.append(value)
            return self.fixed.index(value)
        labels = [f.label for f in self.fitted]
        if label not in labels:
            self.fitted.append(Factor(label, factor.ln_mean, factor.ln_sd))
            labels.append(label)
        return -1 - labels.index(label)


def measurement_design(
    quantities: tuple[QuantitySpec, ...],
    quantity_index: np.ndarray,
    run_index: np.ndarray,
    time_index: np.ndarray,
    run_ids: tuple[str, ...],
    initial: np.ndarray,
    volume: np.ndarray,
    initial_volume: np.ndarray,
    amounts: bool,
) -> MeasurementDesign:
    """The design of measurements m (``quantity_index``, ``run_index``, ``time_index``) given each run's initial
    concentrations (runs, N), the volume at each measurement (M,) and each run's initial volume (runs,);
    ``amounts``: plain concentrations are measured as amounts (c V). ``StudyError`` for a conversion or yield of a
    run that starts without the reference species."""
    basis: dict[tuple[int, int, int], int] = {}
    weights, scales = _Table(), _Table()
    rows = []
    for m, (q, r, t) in enumerate(zip(quantity_index, run_index, time_index, strict=True)):
        spec = quantities[q]
        term_basis = [basis.setdefault((int(r), int(t), s), len(basis)) for s in spec.terms]
        term_weight = [weights.index(w, w.label) for w in spec.weights]
        scale_label = f"{spec.name}@{run_ids[r]}" if spec.per_run else spec.scale.label
        scale_slot = scales.index(spec.scale, scale_label)
        multiplier = volume[m] if (amounts and spec.kind == "concentration") else 1.0
        if spec.reference is not None:
            start = initial[r, spec.reference] * initial_volume[r]
            if start <= 0:
                missing = "the key reactant" if spec.kind == "yield" else "the species"
                raise StudyError(
                    f"observations: '{spec.name}'",
                    f"run '{run_ids[r]}' starts without {missing}",
                    "a conversion or yield is relative to the amount present at time 0",
                )
            multiplier = volume[m] / start * (-1.0 if spec.kind == "conversion" else 1.0)
        rows.append((term_basis, term_weight, list(spec.denominator), spec, scale_slot, multiplier))
    width = max(len(row[0]) for row in rows)
    n = len(rows)
    term_basis = np.zeros((n, width), dtype=np.int64)
    term_weight = np.zeros((n, width), dtype=np.int64)
    term_denominator = np.zeros((n, width))
    zero_slot = weights.index(Factor("0", -math.inf), "0")
    for m, (tb, tw, td, _, _, _) in enumerate(rows):
        term_basis[m, : len(tb)] = tb
        term_weight[m, :] = zero_slot
        term_weight[m, : len(tw)] = tw
        term_denominator[m, : len(td)] = td
    n_fixed_weights, n_fixed_scales = len(weights.fixed), len(scales.fixed)
    # Fitted factors were numbered -1, -2, ...: they follow the known values in each table.
    term_weight = np.where(term_weight < 0, n_fixed_weights - 1 - term_weight, term_weight)
    scale_index = np.array([row[4] for row in rows], dtype=np.int64)
    scale_index = np.where(scale_index < 0, n_fixed_scales - 1 - scale_index, scale_index)
    points = np.array(list(basis), dtype=np.int64).reshape(-1, 3)
    return MeasurementDesign(
        basis_run=points[:, 0],
        basis_time=points[:, 1],
        basis_species=points[:, 2],
        term_basis=term_basis,
        term_weight=term_weight,
        term_denominator=term_denominator,
        constant=np.array([row[3].constant for row in rows]),
        denominator_constant=np.array([row[3].denominator_constant for row in rows]),
        multiplier=np.array([row[5] for row in rows]),
        scale_index=scale_index,
        offset=np.array([row[3].offset for row in rows]),
        fixed_weights=np.array(weights.fixed),
        fitted_weights=tuple(weights.fitted),
        fixed_scales=np.array(scales.fixed),
        fitted_scales=tuple(scales.fitted),
    )


def measured_values(design: MeasurementDesign, basis, weights, scales):
    """The measured values (M,) from the predicted concentrations at the basis points (B,) and the full weight
    and scale tables (known values, then fitted factors); numpy arrays or PyTensor tensors alike."""
    c = basis[design.term_basis]
    numerator = design.constant + design.multiplier * (weights[design.term_weight] * c).sum(axis=1)
    denominator = design.denominator_constant + (design.term_denominator * c).sum(axis=1)
    return design.offset + scales[design.scale_index] * numerator / denominator
