"""Checks of a valid study and its data for values that are allowed but almost surely wrong.

Each check returns plain-English warning sentences that name the file and the key, line or column; nothing
here raises, samples or imports PyMC. Temperatures are kelvin and energies J/mol on the way in (as in
``Study``); the sentences quote them in the study's units. Thresholds are our choice unless a source is named.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy import stats

from ..physics.arrhenius import linearised_fit
from . import units
from .data import Observations, RateConstantData
from .rate_laws import REGISTRY
from .study import Study

#: The lowest or highest of four or more distinct temperatures is flagged when its gap in 1/T to the next one
#: exceeds this multiple of the span in 1/T of all the others (our choice).
GAP_RATIO = 1.0
#: Celsius readings in this range look like kelvin readings of 0 to 130 degC (our choice).
KELVIN_LOOKING_DEGC = (250.0, 400.0)
#: A Celsius reading above this next to others below it may be a kelvin reading (our choice).
HIGH_DEGC = 200.0
#: Molar energies (|prior mean| or prior sd) outside this range, J/mol, are no chemical Ea or dH (our choice:
#: 1 kJ/mol to 1000 kJ/mol).
ENERGY_RANGE_J_PER_MOL = (1.0e3, 1.0e6)
#: One-sided p-value below which a least-squares Ea < 0 counts as clear (our choice).
FALLING_K_P = 1.0e-3
#: Stated relative errors of k (sd of ln k) outside this range are flagged (our choice).
RELATIVE_ERROR_RANGE = (1.0e-6, 1.0)
#: A measured value this many times the run's total initial concentration, or all measured values of initially
#: present species below 1/this of their initial concentration, suggests two concentration units (our choice).
SCALE_RATIO = 30.0


def rate_constant_warnings(study: Study, data: RateConstantData, label: Callable[[int], str]) -> list[str]:
    """Warnings about a rate-constant study; ``label(i)`` names row i of the data file (file and line)."""
    notes = _study_warnings(study, data.temperature_K)
    notes += temperature_warnings(
        data.temperature_K,
        study.units.temperature,
        str(data.path),
        [f"{label(i)}, column 'temperature'" for i in range(data.k.size)],
    )
    notes += _falling_k(study, data)
    notes += _duplicate_rows(data, label)
    notes += _relative_errors(data, label)
    parameters = 2 * len(study.reactions) + sum(r.exponent_sd is not None for r in study.reactions)
    if data.ln_k_sd is None:
        parameters += 1  # sigma
    if study.temperature_sd_K is not None:
        parameters += np.unique(data.temperature_K).size
    if data.k.size <= parameters:
        hint = " or state each point's error (column k_sd or k_rel_sd) so no noise scale is fitted" * (
            data.ln_k_sd is None
        )
        notes.append(
            f"{data.path}: {data.k.size} rate constants for {parameters} parameters: the data cannot pin them "
            f"down and the posterior is mostly the priors; measure more points{hint}"
        )
    return notes


def network_warnings(study: Study, obs: Observations, label: Callable[[int], str]) -> list[str]:
    """Warnings about a network study; ``label(i)`` names measurement i (file, line, run and species)."""
    notes = _study_warnings(study, obs.temperature_K)
    histories = study.data_file("temperatures") if study.has_data("temperatures") else None
    where = [
        f"{histories}: run '{run}' (its time-weighted mean temperature)"
        if histories is not None and obs.setups[r].nominal_kelvin is None
        else f"{obs.runs_path}: run '{run}', column 'temperature'"
        for r, run in enumerate(obs.run_ids)
    ]
    from_histories = histories is not None and all(s.nominal_kelvin is None for s in obs.setups)
    file = str(histories if from_histories else obs.runs_path)
    notes += temperature_warnings(obs.temperature_K, study.units.temperature, file, where)
    if histories is not None and _celsius(study.units.temperature):
        for run, setup in zip(obs.run_ids, obs.setups, strict=True):
            if setup.nominal_kelvin is not None:
                continue  # an isothermal run, its temperature in the runs file
            readings = np.asarray(setup.history, dtype=float)
            stated = np.asarray(units.kelvin_to(readings[:, 1], study.units.temperature), dtype=float)
            shown = [f"{histories}: run '{run}', time {t:g}, column 'temperature'" for t in readings[:, 0]]
            notes += _kelvin_typed(stated, study.units.temperature, shown)[0]
    notes += _concentration_scale(study, obs, label)
    parameters = _network_parameter_count(study, obs)
    if obs.value.size <= parameters:
        notes.append(
            f"{obs.measurements_path}: {obs.value.size} measured values for about {parameters} parameters: the "
            "data cannot pin them down and the posterior is mostly the priors; measure more points or runs"
        )
    return notes


def _study_warnings(study: Study, measured_K: np.ndarray) -> list[str]:
    return energy_warnings(study) + _reference_temperature(study, measured_K)


def _celsius(unit: str) -> bool:
    return abs(float(units.kelvin_to(273.15, unit))) < 1e-9


def temperature_warnings(kelvin: np.ndarray, unit: str, file: str, where: list[str]) -> list[str]:
    """Readings that look like kelvin under a Celsius unit, and single temperatures far from the others in 1/T.

    ``kelvin`` are the readings converted to K, ``file`` their file and ``where[i]`` names reading i (file,
    line or run, column)."""
    kelvin = np.asarray(kelvin, dtype=float)
    stated = np.asarray(units.kelvin_to(kelvin, unit), dtype=float)
    notes: list[str] = []
    flagged = np.zeros(kelvin.size, dtype=bool)  # readings already named
    if _celsius(unit):
        low, high = KELVIN_LOOKING_DEGC
        if np.all((stated >= low) & (stated <= high)):
            notes.append(
                f"{file}: every temperature lies between {low:g} and {high:g} {unit} "
                f"({stated.min():g} to {stated.max():g}), where readings in kelvin of 0 to 130 degC fall; if they "
                "are kelvin, set units.temperature: K"
            )
            flagged[:] = True
        else:
            typed, flagged = _kelvin_typed(stated, unit, where)
            notes += typed
    distinct = np.unique(kelvin)
    if distinct.size >= 4:
        inverse = 1.0 / distinct
        shown = np.asarray(units.kelvin_to(distinct, unit), dtype=float)
        for end, gap, rest in (
            (0, inverse[0] - inverse[1], inverse[1] - inverse[-1]),
            (-1, inverse[-2] - inverse[-1], inverse[0] - inverse[-2]),
        ):
            rows = kelvin == distinct[end]
            if gap > GAP_RATIO * rest and not flagged[rows].any():
                others = shown[1:] if end == 0 else shown[:-1]
                notes.append(
                    f"{where[int(np.flatnonzero(rows)[0])]}: {shown[end]:g} {unit} lies far from the other "
                    f"temperatures ({others[0]:g} to {others[-1]:g} {unit}; its gap in 1/T to the next is "
                    f"{gap / rest:.2g} times the span of all the others): check its unit and digits; a lone far "
                    "point decides Ea almost by itself"
                )
    return notes


def _kelvin_typed(stated: np.ndarray, unit: str, where: list[str]) -> tuple[list[str], np.ndarray]:
    """Celsius readings above ``HIGH_DEGC`` that, read as kelvin, would lie among the cooler readings: typed in K.
    The notes, and which readings they name."""
    notes: list[str] = []
    flagged = np.zeros(stated.size, dtype=bool)
    cool = stated[stated <= HIGH_DEGC]
    if not cool.size:
        return notes, flagged
    margin = max(0.5 * float(np.ptp(cool)), 10.0)
    for value in np.unique(stated[stated > HIGH_DEGC]):
        as_celsius = value - 273.15
        if cool.min() - margin <= as_celsius <= cool.max() + margin:
            rows = stated == value
            i = int(np.flatnonzero(rows)[0])
            notes.append(
                f"{where[i]}: {value:g} {unit} among readings of {cool.min():g} to {cool.max():g} "
                f"{unit}; read as kelvin it would be {as_celsius:.4g} {unit}: was it typed in K?"
            )
            flagged |= rows
    return notes, flagged


def energy_warnings(study: Study) -> list[str]:
    """Priors of Ea, dH and adsorption enthalpies whose size says the numbers are in another energy unit."""
    unit = study.units.energy
    notes = []
    for index, spec in enumerate(study.reactions):
        key = f"{study.path}: reactions[{index}]"
        priors = [] if spec.held else [("Ea", spec.prior.ea_mean, spec.prior.ea_sd)]  # held: a placeholder
        if spec.equilibrium is not None:
            priors.append(("dH", spec.equilibrium.dh_mean, spec.equilibrium.dh_sd))
        priors += REGISTRY[spec.rate_law].written_enthalpies(spec)
        for name, mean, sd in priors:
            size = max(abs(mean), sd)
            stated = [float(units.joule_per_mol_to(value, unit)) for value in (mean, sd)]
            shown = f"prior mean {stated[0]:g}, sd {stated[1]:g} {unit}"
            low, high = ENERGY_RANGE_J_PER_MOL
            if size > high:
                notes.append(
                    f"{key}.{name}: {shown} is above {high / 1e3:g} kJ/mol, beyond any chemical activation "
                    f"energy or enthalpy: are these numbers in J/mol while units.energy says {unit}?"
                )
            elif size < low:
                notes.append(
                    f"{key}.{name}: {shown} is below {low / 1e3:g} kJ/mol, far below chemical activation energies "
                    f"and enthalpies: are these numbers in kJ/mol while units.energy says {unit}?"
                )
    return notes


def _reference_temperature(study: Study, measured_K: np.ndarray) -> list[str]:
    reference = study.reference_temperature_K
    if reference is None:
        return []
    low, high = float(np.min(measured_K)), float(np.max(measured_K))
    if low <= reference <= high:
        return []
    unit = study.units.temperature
    edge = low if reference < low else high
    side = "below the lowest" if reference < low else "above the highest"
    return [
        f"{study.path}: reference_temperature: {float(units.kelvin_to(reference, unit)):g} {unit} is "
        f"{abs(reference - edge):.3g} K {side} measured temperature ({float(units.kelvin_to(edge, unit)):g} {unit}): "
        "ln k_ref and Ea become correlated and sampling slows; 'auto' puts T_ref inside the data"
    ]


def _falling_k(study: Study, data: RateConstantData) -> list[str]:
    """Reactions whose least-squares Ea is negative at clear significance (k falls as T rises)."""
    notes = []
    unit = study.units.energy
    for index, name in enumerate(study.reaction_names):
        rows = data.rows_of(index)
        if rows.size < 3:
            continue
        fit = linearised_fit(data.temperature_K[rows], data.k[rows])
        if not (fit.se_slope > 0 and fit.ea < 0):
            continue
        p = float(stats.t.sf(fit.slope / fit.se_slope, fit.n - 2))  # one-sided: slope > 0 means Ea < 0
        if p < FALLING_K_P:
            notes.append(
                f"{data.path}: reaction '{name}': k falls as the temperature rises (least-squares Ea = "
                f"{float(units.joule_per_mol_to(fit.ea, unit)):.3g} {unit}, one-sided p = {p:.1e}); Ea's prior "
                "allows only Ea > 0, so the fit cannot describe these data: check the temperature and k columns "
                "(swapped or reversed rows, 1/T or a half-life instead of k)"
            )
    return notes


def _duplicate_rows(data: RateConstantData, label: Callable[[int], str]) -> list[str]:
    """Rows equal in every column; each set of copies is named by its lines."""
    errors = data.ln_k_sd if data.ln_k_sd is not None else np.zeros_like(data.k)
    columns = (data.reaction_index, data.temperature_K, data.k, errors)
    seen: dict[tuple, list[int]] = {}
    for row, key in enumerate(zip(*(c.tolist() for c in columns), strict=True)):
        seen.setdefault(key, []).append(row)
    notes = []
    for rows in seen.values():
        if len(rows) > 1:
            others = ", ".join(str(data.line[r]) for r in rows[1:])
            notes.append(
                f"{label(rows[0])}: the same row appears again on line(s) {others}: a copied row counts twice "
                "and narrows every interval; remove the copy unless it is a true replicate"
            )
    return notes


def _relative_errors(data: RateConstantData, label: Callable[[int], str]) -> list[str]:
    """Stated relative errors (sd of ln k, from k_rel_sd or k_sd/k) above 1 or below 1e-6."""
    if data.ln_k_sd is None:
        return []
    low, high = RELATIVE_ERROR_RANGE
    notes = []
    for bad, words in (
        (data.ln_k_sd > high, f"above {high:g} (more than a 100 % error): is it a percentage?"),
        (data.ln_k_sd < low, f"below {low:g}: the fit will treat the point as exact"),
    ):
        rows = np.flatnonzero(bad)
        if rows.size:
            more = f" ({rows.size} rows)" if rows.size > 1 else ""
            notes.append(
                f"{label(int(rows[0]))}: the relative error of k (k_rel_sd, or k_sd/k) is "
                f"{data.ln_k_sd[rows[0]]:g}, {words}{more}"
            )
    return notes


def _concentration_scale(study: Study, obs: Observations, label: Callable[[int], str]) -> list[str]:
    """Measured values far above what the runs' initial (or fed) concentrations allow, or far below all of them.
    Measured amounts are compared as concentrations (divided by the run's volume at the time)."""
    unit = study.units.concentration
    volume = obs.factor
    if obs.design is not None:  # only plain concentrations (or amounts) are on the concentration scale
        plain = np.array([q.kind == "concentration" for q in obs.quantities])[obs.quantity_index]
        volume = obs.design.multiplier if study.measured_as == "amount" else None
    else:
        plain = np.ones(obs.value.size, dtype=bool)
    if not plain.any():
        return []
    magnitude = np.abs(obs.value) if volume is None else np.abs(obs.value) / volume
    total = obs.initial.sum(axis=1)
    for r, setup in enumerate(obs.setups):  # a dosed run may start with little and be fed more
        for feed in setup.feeds:
            total[r] = max(total[r], float(np.sum(feed.concentration)))
    ratio = np.where(plain, magnitude / total[obs.run_index], 0.0)
    worst = int(np.argmax(ratio))
    if ratio[worst] > SCALE_RATIO:
        measured = f"{obs.value[worst]:g} {unit}"
        if volume is not None:
            measured = f"amount {obs.value[worst]:g} ({magnitude[worst]:g} {unit} at the run's volume then)"
        return [
            f"{label(worst)}: measured {measured} is {ratio[worst]:.3g} times the run's total initial or fed "
            f"concentration in {obs.runs_path.name}: are the measurements in another unit (e.g. mmol/L against "
            "mol/L, or mL against L)? Both files are read in the study's units"
        ]
    initial = obs.initial[obs.run_index, obs.species_index]
    present = (initial > 0) & plain
    if present.any() and np.all(magnitude[present] < initial[present] / SCALE_RATIO):
        first = int(np.flatnonzero(present)[0])
        return [
            f"{obs.measurements_path}: every measured value of an initially present species is below 1/"
            f"{SCALE_RATIO:g} of its initial concentration in {obs.runs_path.name} (e.g. {label(first)}: "
            f"{obs.value[first]:g} against {initial[first]:g} {unit}): are the two files in different units?"
        ]
    return []


def _network_parameter_count(study: Study, obs: Observations) -> int:
    """The free parameters of a network model, near enough to compare with the number of measurements."""
    count = 0
    for spec in study.reactions:
        count += 2 + 2 * (spec.equilibrium is not None) + len(spec.fitted_orders) + 2 * len(spec.adsorption)
        count += spec.exponent_sd is not None
    runs = len(obs.run_ids)
    count += runs * len(study.initial_uncertainty)
    if study.run_variability is not None:
        count += len(study.run_variability.reactions) * (1 + len(obs.group_names))
    if study.temperature_sd_K is not None:
        count += runs
    count += obs.observed_species.size if study.noise.per_species else 1
    return count
