"""Reactor predictions from a saved posterior: scenarios in, bands and scalar answers out, no refit.

For every scenario the posterior draws are pushed through ``reactors``; each answer is reported as quantiles
over draws, so its interval carries the uncertainty of the kinetics. Times, temperatures and concentrations
are in the study's units, volumes in its volume unit, amounts in concentration x volume. Every temperature outside
the fitted runs' range is flagged with how far outside.

A dosed batch is reported on amounts: conversion and yields against what was charged so far (the initial charge
plus the feeds), and the accumulation of each dosed species: the amount c V still in the vessel, and its share of
the amount charged so far.
"""

from __future__ import annotations

import json
import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pydantic
from scipy.interpolate import CubicSpline
from scipy.optimize import minimize_scalar
from scipy.special import lambertw, wrightomega

from ..errors import StudyError
from ..inputs import units
from ..inputs.config import format_validation_error, lists_to_tuples, load_study, read_yaml
from ..inputs.data import read_observations, read_rate_constants
from ..inputs.scenarios import check_scenario, half_life_order
from ..inputs.schema import Scenario, ScenarioFile
from ..inputs.study import Study
from ..outputs import report
from ..outputs.records import PredictionResult
from ..outputs.reporting import CAUTION, FRACTION
from ..outputs.results import StagedFolder, check_target, load_results, sha256_file
from ..physics.arrhenius import R, ln_pre_exponential
from ..physics.conditions import Feed
from ..physics.reactors import (
    batch_profiles,
    cstr_steady_states,
    dosed_batch_profiles,
    fed_amounts,
    programmed_batch_profiles,
)
from ..posterior.draws import ParameterDraws, parameter_draws, pick_draws
from ..posterior.summaries import temperature_label

QUANTILES = (0.05, 0.25, 0.5, 0.75, 0.95)
TABLE_COLUMNS = ["scenario", "time", "quantity", "unit", "median", "q05", "q25", "q75", "q95"]
#: ``extrapolated``: a question's row whose temperature (asked or answered) lies outside the fitted range, or any
#: answer of a reactor scenario with such a temperature.
SUMMARY_COLUMNS = ["scenario", "quantity", "unit", "median", "q05", "q95", "share", "note", "extrapolated"]
#: Residence times searched for a CSTR's target conversion, relative to the scenario's range.
CSTR_SEARCH_POINTS = 48


def _band(values: np.ndarray) -> np.ndarray:
    """Quantiles over draws (axis 0), ignoring failed draws and undefined values (NaN, e.g. a selectivity at
    zero conversion)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanquantile(values, QUANTILES, axis=0)


def load_scenarios(path: Path, study: Study) -> ScenarioFile:
    """Read and validate a scenarios file against the study it will be applied to."""
    content = read_yaml(path)
    if not isinstance(content, dict):
        raise StudyError(str(path), "a scenarios file is a mapping with the key 'scenarios'")
    try:
        file = ScenarioFile.model_validate(lists_to_tuples(content))
    except pydantic.ValidationError as exc:
        raise format_validation_error(str(path), exc, ScenarioFile) from None
    for index, scenario in enumerate(file.scenarios):
        check_scenario(scenario, study, f"{path}: scenarios[{index}]")
    return file


@dataclass(frozen=True)
class _Units:
    """Factors between a scenarios file's units and the study's (value in study units = factor x value)."""

    time: str
    concentration: str
    temperature: str
    time_factor: float
    concentration_factor: float
    #: Units of amounts (concentration x the study's volume unit): the study's and the scenarios file's.
    study_amount: str
    amount: str

    @classmethod
    def of(cls, file: ScenarioFile, study: Study, where: str) -> _Units:
        given = file.units
        time = given.time or study.units.time
        concentration = given.concentration or study.units.concentration
        temperature = given.temperature or study.units.temperature
        units.parse_unit(temperature, "temperature", f"{where}: units.temperature")
        volume = study.units.volume
        return cls(
            time,
            concentration,
            temperature,
            float(units.convert(1.0, time, study.units.time, "time", f"{where}: units.time")),
            float(
                units.convert(
                    1.0, concentration, study.units.concentration, "concentration", f"{where}: units.concentration"
                )
            ),
            units.amount_unit(study.units.concentration, volume),
            units.amount_unit(concentration, volume),
        )

    def temperature_in_study(self, value: float, study: Study, where: str) -> float:
        return float(units.kelvin_to(units.to_kelvin(value, self.temperature, where), study.units.temperature)[0])

    def to_study(self, scenario: Scenario, study: Study, where: str) -> Scenario:
        """The scenario restated in the study's units (the physics works in those)."""
        t, c = self.time_factor, self.concentration_factor

        def temp(value: float | None) -> float | None:
            return None if value is None else self.temperature_in_study(value, study, where)

        update: dict = {
            "initial": {name: c * value for name, value in scenario.initial.items()},
            "temperature": temp(scenario.temperature),
        }
        if scenario.until is not None:
            update["until"] = t * scenario.until
        if scenario.residence_times is not None:
            update["residence_times"] = tuple(t * tau for tau in scenario.residence_times)
        if scenario.programme is not None:
            update["programme"] = tuple((t * time, temp(value)) for time, value in scenario.programme)
        if scenario.feeds is not None:
            update["feeds"] = tuple(
                feed.model_copy(
                    update={
                        "start": t * feed.start,
                        "stop": t * feed.stop,
                        "rate": feed.rate / t,
                        "concentration": {name: c * value for name, value in feed.concentration.items()},
                    }
                )
                for feed in scenario.feeds
            )
        if scenario.spec is not None:
            update["spec"] = scenario.spec.model_copy(update={"by": t * scenario.spec.by})
        target = scenario.temperature_for
        if target is not None:
            update["temperature_for"] = target.model_copy(
                update={
                    "between": (temp(target.between[0]), temp(target.between[1])),
                    "within": None if target.within is None else t * target.within,
                    "half_life": None if target.half_life is None else t * target.half_life,
                }
            )
        return scenario.model_copy(update=update)

    def table_from_study(self, table: pd.DataFrame, study: Study) -> pd.DataFrame:
        """Profiles back in the scenario's units: the time axis, the concentrations and the amounts."""
        table = table.copy()
        table[table.columns[1]] = table[table.columns[1]] / self.time_factor
        concentrations = table["quantity"].str.startswith("c[")
        amounts = table["unit"] == self.study_amount
        for rows, unit in ((concentrations, self.concentration), (amounts, self.amount)):
            for column in ("median", "q05", "q25", "q75", "q95"):
                table.loc[rows, column] = table.loc[rows, column] / self.concentration_factor
            table.loc[rows, "unit"] = unit
        return table

    def scalar_from_study(self, row: dict, study: Study) -> dict:
        """One scalar answer back in the scenario's units, by the unit it carries."""
        row = dict(row)
        columns = ("median", "q05", "q95")
        if row["unit"] == study.units.time:
            row.update({k: row[k] / self.time_factor for k in columns}, unit=self.time)
        elif row["unit"] == study.units.concentration:
            row.update({k: row[k] / self.concentration_factor for k in columns}, unit=self.concentration)
        elif row["unit"] == self.study_amount:
            row.update({k: row[k] / self.concentration_factor for k in columns}, unit=self.amount)
        elif row["unit"] == study.units.temperature:
            for k in columns:
                if np.isfinite(row[k]):
                    kelvin = units.to_kelvin(row[k], study.units.temperature, "scenario")
                    row[k] = float(units.kelvin_to(kelvin, self.temperature)[0])
            row["unit"] = self.temperature
        return row


def _to_kelvin(study: Study, value: float | np.ndarray, where: str) -> np.ndarray:
    return units.to_kelvin(value, study.units.temperature, where)


def _first_crossing(times: np.ndarray, conversion: np.ndarray, target: float, log_odds: bool = False) -> np.ndarray:
    """Per draw, the first time conversion reaches ``target`` (linear between grid points; with ``log_odds``, ln t
    linear in ln(X / (1 - X)) where both points lie strictly between 0 and 1, which is exact for a first-order
    CSTR, X / (1 - X) = k tau, and far closer than linear for other orders on a log-spaced grid); inf if never."""
    out = np.full(conversion.shape[0], np.inf)
    for d, row in enumerate(conversion):
        above = np.flatnonzero(row >= target)
        if above.size == 0 or not np.all(np.isfinite(row)):
            continue
        i = above[0]
        if i == 0:
            out[d] = times[0]
            continue
        x0, x1 = row[i - 1], row[i]
        if log_odds and 0.0 < x0 < x1 < 1.0 and 0.0 < target < 1.0:
            odds0, odds1, wanted = (np.log(x / (1.0 - x)) for x in (x0, x1, target))
            share = (wanted - odds0) / (odds1 - odds0)
            out[d] = np.exp(np.log(times[i - 1]) + share * np.log(times[i] / times[i - 1]))
        else:
            out[d] = times[i - 1] + (target - x0) / (x1 - x0) * (times[i] - times[i - 1])
    return out


def _maximum(times: np.ndarray, values: np.ndarray, kinks: np.ndarray | tuple = ()) -> tuple[np.ndarray, np.ndarray]:
    """Per draw, time and height of the maximum: the grid's highest point refined on a cubic spline through
    the grid (bounded search between the neighbouring grid points). ``kinks``: grid times where the curve's slope
    jumps (a feed starts or stops); the spline then runs over the smooth piece holding the highest point only, and
    a highest point on a kink is taken as it is."""
    t_max, c_max = np.full(values.shape[0], np.nan), np.full(values.shape[0], np.nan)
    kinks = np.asarray(kinks, dtype=float)
    for d, row in enumerate(values):
        if not np.all(np.isfinite(row)):
            continue
        i = int(np.argmax(row))
        t_max[d], c_max[d] = times[i], row[i]
        if np.any(kinks == times[i]):
            continue
        low = max([0, *np.flatnonzero(np.isin(times[:i], kinks))])
        high = min([row.size - 1, *(i + np.flatnonzero(np.isin(times[i:], kinks)))])
        if low < i < high:
            spline = CubicSpline(times[low : high + 1], row[low : high + 1])
            best = minimize_scalar(
                lambda t, spline=spline: -float(spline(t)),
                bounds=(times[i - 1], times[i + 1]),
                method="bounded",
                options={"xatol": 1e-9 * max(times[-1], 1.0)},
            )
            if best.success and -best.fun >= row[i]:
                t_max[d], c_max[d] = float(best.x), -float(best.fun)
    return t_max, c_max


def _scalar(
    scenario: str, quantity: str, unit: str, values: np.ndarray, note: str = "", share: float = math.nan
) -> dict:
    finite = values[~np.isnan(values)]
    q05, median, q95 = np.quantile(finite, [0.05, 0.5, 0.95]) if finite.size else (math.nan,) * 3
    return {
        "scenario": scenario,
        "quantity": quantity,
        "unit": unit,
        "median": median,
        "q05": q05,
        "q95": q95,
        "share": share,
        "note": note,
        "draws": values,  # per draw, in the study's units (for scenario_answers; not a column of summary.csv)
    }


def temperature_for_ln_k(
    wanted: float, ln_k_ref: np.ndarray, ea: np.ndarray, temperature_ref: float, exponent: float | np.ndarray = 0.0
) -> np.ndarray:
    """Per draw, the temperature (K) at which ln k reaches ``wanted`` under the law of ``ln_rate_constant``, on its
    rising branch (k in its own unit, Ea in J/mol, T_ref in K); inf where no temperature reaches it.

    Plain law (n = 0): 1/T = 1/T_ref - (wanted - ln k_ref) R/Ea. With a temperature exponent n, ln k = ln A +
    n ln T - b/T (b = Ea/R, ln A from ``ln_pre_exponential``) and c = wanted - ln A: for n > 0, T = b/(n x) with
    x = W0(e^z), z = ln(b/n) - c/n (Wright's omega; k rises for every T); for n < 0, k peaks at T = b/|n| and the
    rising branch has T = b/(|n| x) with x = -W_-1(-e^s) >= 1, s = ln(b/|n|) + c/|n| <= -1 (Lambert's W, from
    memory; ``tests/test_rate_constant_predictions.py`` checks it against scipy's brentq).
    """
    ln_k_ref, ea = np.asarray(ln_k_ref, dtype=float), np.asarray(ea, dtype=float)
    n = np.broadcast_to(np.asarray(exponent, dtype=float), ln_k_ref.shape)
    b = ea / R
    with np.errstate(all="ignore"):
        inverse = 1.0 / temperature_ref - (wanted - ln_k_ref) / b
        plain = np.where(inverse > 0, 1.0 / inverse, np.inf)
        c = wanted - ln_pre_exponential(ln_k_ref, ea, temperature_ref, n)
        rising = b / (n * wrightomega(np.log(b / n) - c / n))
        m = -n
        s = np.log(b / m) + c / m
        x = -lambertw(-np.exp(np.maximum(s, -700.0)), k=-1).real
        # Where e^s underflows, x - ln x = -s by Newton from its asymptote (x > 700: three steps reach rounding).
        far = -s
        guess = far + np.log(np.maximum(far, 1.0))
        for _ in range(3):
            guess = guess - (guess - np.log(guess) - far) / (1.0 - 1.0 / guess)
        x = np.where(s < -700.0, guess, x)
        peaked = np.where(s <= -1.0, b / (m * x), np.inf)
        found = np.select([n == 0, n > 0], [plain, rising], peaked)
    return np.where(np.isfinite(found) & (found > 0), found, np.inf)


@dataclass(frozen=True)
class _QuestionUnits:
    """The units a question scenario is stated and answered in: the scenarios file's, else the study's, else those k's
    unit implies (a rate-constant study states only that one): ``concentration`` None where none is stated or
    implied (a first-order k)."""

    temperature: str
    time: str
    concentration: str | None

    @classmethod
    def of(cls, file: ScenarioFile, study: Study, where: str) -> _QuestionUnits:
        given, ureg = file.units, units.registry()
        time, concentration = study.units.time, study.units.concentration
        if study.units.rate_constant is not None:  # e.g. L/(mol*min): time min, concentration mol/L
            k_unit = ureg.Quantity(1.0, study.units.rate_constant)
            times = [n for n, _ in k_unit.unit_items() if ureg.Unit(n).dimensionality == {"[time]": 1}]
            time = time or (format(ureg.Unit(times[0]), "~") if len(times) == 1 else "s")
            implied = (1.0 / (k_unit * ureg.Quantity(1.0, time))).to_reduced_units()
            if concentration is None and implied.dimensionality == ureg.get_dimensionality("[substance]/[length]**3"):
                concentration = format(implied.units, "~C")
        out = cls(
            given.temperature or study.units.temperature, given.time or time, given.concentration or concentration
        )
        units.parse_unit(out.temperature, "temperature", f"{where}: units.temperature")
        units.parse_unit(out.time, "time", f"{where}: units.time")
        if out.concentration is not None:
            units.parse_unit(out.concentration, "concentration", f"{where}: units.concentration")
        return out

    def half_life_numerator(self, k_unit: str, order: float, c0: float | None) -> float:
        """a of t1/2 = a / k, with k in ``k_unit`` and t1/2 in ``time``: ln 2 (first order) or 1/c0 (second order,
        c0 in ``concentration``), times the unit factor."""
        ureg = units.registry()
        if order == 1.0:
            return math.log(2.0) * float(ureg.Quantity(1.0, f"1/({k_unit})").to(self.time).magnitude)
        return float(ureg.Quantity(1.0, f"1/(({k_unit})*({self.concentration}))").to(self.time).magnitude) / c0


def _rate_constant_draws(study: Study, posterior, temperature_ref: float, picks: np.ndarray) -> ParameterDraws:
    """The picked draws of a rate-constant study as ``ParameterDraws`` (ln k_ref, Ea and temperature exponents; no
    network blocks), so that questions about k read the same law as reactor predictions."""
    stacked = posterior.stack(sample=("chain", "draw")).isel(sample=picks)
    ln_k_ref = np.moveaxis(stacked["ln_k_ref"].values, -1, 0)
    count, reactions = ln_k_ref.shape
    if "temperature_exponent" in stacked:
        exponent = np.moveaxis(stacked["temperature_exponent"].values, -1, 0)
    else:
        exponent = np.repeat(np.array([[r.temperature_exponent for r in study.reactions]]), count, axis=0)
    empty = np.zeros((count, 0))
    return ParameterDraws(
        ln_k_ref,
        np.moveaxis(stacked["Ea"].values, -1, 0),
        empty,
        empty,
        np.zeros((count, reactions, 0)),
        None,
        temperature_ref,
        exponent=exponent,
    )


class _Predictor:
    """Applies one study's posterior draws to scenarios."""

    def __init__(self, study: Study, draws: ParameterDraws, measured_K: tuple[float, float]) -> None:
        self.study = study
        self.draws = draws
        self.measured = measured_K
        self.notes: list[str] = []
        if study.run_variability is not None:
            self.notes.append(
                "Predictions are for a new run: each draw adds a between-run shift of ln k drawn with the fitted "
                "spread (run_variability), so intervals include run-to-run scatter."
            )
        #: The unit temperatures are quoted in (the scenarios file's).
        self.display_temperature = study.units.temperature
        #: The scenarios with a temperature outside the fitted range.
        self.flagged: set[str] = set()
        #: The profiles of the last scenario ``run``, per draw: quantity -> (unit, values (draws, points)).
        self.series: dict[str, tuple[str, np.ndarray]] = {}

    def flag(self, scenario: str, kelvin: float, what: str) -> bool:
        """Note a temperature (K) outside the fitted runs' range, with how far outside; True when it is."""
        low, high = self.measured
        unit = self.display_temperature
        if kelvin < low or kelvin > high:
            self.flagged.add(scenario)
            edge = low if kelvin < low else high
            side = "below the lowest" if kelvin < low else "above the highest"
            shown = float(units.kelvin_to(kelvin, unit))
            self.notes.append(
                f"EXTRAPOLATED: scenario {scenario}: {what} {shown:g} {unit} is {abs(kelvin - edge):.3g} K "
                f"{side} fitted run temperature ({float(units.kelvin_to(edge, unit)):g} {unit})"
            )
            return True
        return False

    def vector(self, values: dict[str, float]) -> np.ndarray:
        """A mapping species -> value as a vector over the study's species (zero where not named)."""
        return np.array([values.get(name, 0.0) for name in self.study.species])

    def feed(self, scenario: Scenario) -> np.ndarray:
        return self.vector(scenario.initial)

    def feeds(self, scenario: Scenario) -> tuple[Feed, ...]:
        """A dosed batch's feeds in the physics' form."""
        return tuple(Feed(f.start, f.stop, f.rate, self.vector(f.concentration)) for f in scenario.feeds or ())

    def programme_kelvin(self, scenario: Scenario, where: str) -> np.ndarray:
        """The scenario's programme as (time, K) rows, each temperature flagged where it extrapolates."""
        programme = np.array(scenario.programme, dtype=float)
        programme[:, 1] = _to_kelvin(self.study, programme[:, 1], f"{where}.programme")
        for kelvin_point in programme[:, 1]:
            self.flag(scenario.name, kelvin_point, "programme temperature")
        return programme

    def profiles(
        self, scenario: Scenario, kelvin: float | None, where: str
    ) -> tuple[np.ndarray, np.ndarray, str, np.ndarray | None]:
        """(axis values, concentrations (draws, points, species), axis name, liquid volume (points,) of a dosed
        batch or None)."""
        network, feed = self.study.network, self.feed(scenario)
        if scenario.reactor == "cstr":
            taus = np.array(sorted(scenario.residence_times))
            solution = cstr_steady_states(network, self.draws, kelvin, feed, taus)
            shares = {
                "multiple": solution.multiple.mean(),
                "unstable": solution.unstable.mean(),
                "failed": solution.failed.mean(),
            }
            for label, share in shares.items():
                if share > 0:
                    self.notes.append(
                        f"scenario {scenario.name}: {label} steady states in {share:.1%} of draws and "
                        "residence times" + (" (the stable branch is reported)" if label == "multiple" else "")
                    )
            return taus, solution.concentrations, "residence_time", None
        if scenario.reactor == "programmed_batch":
            programme = self.programme_kelvin(scenario, where)
            until = scenario.until or float(programme[-1, 0])
            times = np.linspace(0.0, until, scenario.points)
            return times, programmed_batch_profiles(network, self.draws, programme, feed, times), "time", None
        if scenario.reactor == "dosed_batch":
            history = kelvin if scenario.programme is None else self.programme_kelvin(scenario, where)
            times = np.union1d(np.linspace(0.0, scenario.until, scenario.points), _kinks(scenario))
            concentrations, volume = dosed_batch_profiles(
                network, self.draws, history, feed, scenario.volume, self.feeds(scenario), times
            )
            return times, concentrations, "time", volume
        times = np.linspace(0.0, scenario.until, scenario.points)
        axis = "space_time" if scenario.reactor == "pfr" else "time"
        return times, batch_profiles(network, self.draws, kelvin, feed, times), axis, None

    def conversion_at(self, scenario: Scenario, kelvin: float | np.ndarray, when: float) -> np.ndarray:
        """Conversion of the key reactant per draw at one time (batch, PFR) or residence time (CSTR);
        ``kelvin`` is one temperature or one per draw."""
        feed = self.feed(scenario)
        key = self.study.species.index(scenario.key_reactant)
        if scenario.reactor == "cstr":
            c = cstr_steady_states(
                self.study.network, self.draws, kelvin, feed, np.array([when]), thorough=False
            ).concentrations[:, 0]
        else:
            c = batch_profiles(self.study.network, self.draws, kelvin, feed, np.array([0.0, when]))[:, -1]
        return 1.0 - c[:, key] / feed[key]

    def temperature_for(self, scenario: Scenario, where: str) -> np.ndarray:
        """Per draw, the temperature (K) that meets the scenario's ``temperature_for`` target; NaN if none does
        within the search range."""
        target = scenario.temperature_for
        low, high = _to_kelvin(self.study, np.array(target.between), f"{where}.temperature_for.between")
        lo, hi = np.full(self.draws.size, low), np.full(self.draws.size, high)
        if target.reaction is not None:
            # The same ln k as the profiles (temperature exponent and a new run's shift included), inverted in
            # closed form.
            j = self.study.reaction_names.index(target.reaction)
            k = target.k if target.k is not None else math.log(2.0) / target.half_life
            found = self.temperature_for_k(j, math.log(k))
            return np.where((found >= low) & (found <= high), found, np.nan)
        reached_high = self.conversion_at(scenario, high, target.within) >= target.conversion
        for _ in range(40):  # bisection on T per draw: conversion rises with T when every Ea is positive
            middle = 0.5 * (lo + hi)
            above = self.conversion_at(scenario, middle, target.within) >= target.conversion
            hi = np.where(above, middle, hi)
            lo = np.where(above, lo, middle)
        return np.where(reached_high, 0.5 * (lo + hi), np.nan)

    def temperature_for_k(self, j: int, wanted: float) -> np.ndarray:
        """Per draw, the temperature (K) at which ln k of reaction j (a new run's, as the profiles use) reaches
        ``wanted``; inf where none does."""
        draws = self.draws
        exponent = 0.0 if draws.exponent is None else draws.exponent[:, j]
        ln_k_ref = draws.ln_k(draws.temperature_ref)[:, j]  # a new run's shift included
        return temperature_for_ln_k(wanted, ln_k_ref, draws.ea[:, j], draws.temperature_ref, exponent)

    def answer(self, scenario: Scenario, where: str, stated: _QuestionUnits) -> tuple[pd.DataFrame, list[dict], dict]:
        """A question about one reaction's k, in the units ``stated``: posterior quantiles of k and the half-life at
        each temperature asked (``k_at``), or of the temperature at which a target is met (``temperature_at``),
        each row flagged where its temperature lies outside the fitted range. Returns the table (the temperatures
        asked, or a temperature grid about the answer), the summary rows and the figure's content."""
        study, name, draws = self.study, scenario.name, self.draws
        j = study.reaction_names.index(scenario.reaction)
        k_unit, unit = study.reactions[j].k_unit, stated.temperature
        order = half_life_order(scenario, study, where)
        numerator = None if order is None else stated.half_life_numerator(k_unit, order, scenario.c0)
        series = [(f"k[{scenario.reaction}]", k_unit)]
        if numerator is not None:
            series.append((f"half_life[{scenario.reaction}]", stated.time))

        def values(kelvin: float) -> list[np.ndarray]:
            k = np.exp(draws.ln_k(kelvin)[:, j])
            return [k] if numerator is None else [k, numerator / k]

        low, high = self.measured

        def table(kelvins: np.ndarray) -> pd.DataFrame:
            rows = []
            for kelvin in kelvins:
                for (quantity, value_unit), value in zip(series, values(float(kelvin)), strict=True):
                    band = _band(value)
                    rows.append(
                        {
                            "scenario": name,
                            f"temperature_{unit}": float(units.kelvin_to(kelvin, unit)),
                            "quantity": quantity,
                            "unit": value_unit,
                            "median": band[2],
                            "q05": band[0],
                            "q25": band[1],
                            "q75": band[3],
                            "q95": band[4],
                            "extrapolated": not low <= kelvin <= high,
                        }
                    )
            return pd.DataFrame(rows)

        out: list[dict] = []
        figure: dict = {"unit": unit, "fitted_K": (low, high), "asked_K": [], "answer_K": None, "target": None}
        if scenario.question == "k_at":
            kelvins = units.to_kelvin(np.array(scenario.temperatures), unit, f"{where}.temperatures")
            for kelvin in kelvins:
                flagged = self.flag(name, float(kelvin), "temperature")
                for (quantity, value_unit), value in zip(series, values(float(kelvin)), strict=True):
                    label = f"{quantity[:-1]}, {temperature_label(float(kelvin), unit)}]"
                    out.append(_scalar(name, label, value_unit, value) | {"extrapolated": flagged})
            figure["asked_K"] = [float(kelvin) for kelvin in kelvins]
        else:
            reaction = scenario.reaction
            if scenario.k is not None:
                wanted, key = math.log(scenario.k), "k"
                what = f"temperature for k[{reaction}] = {scenario.k:g} {k_unit}"
            else:
                wanted, key = math.log(numerator / scenario.half_life), "half_life"
                what = f"temperature for a half-life of {scenario.half_life:g} {stated.time} of {reaction}"
            found = self.temperature_for_k(j, wanted)
            reached = np.isfinite(found)
            if not reached.any():
                raise StudyError(
                    f"{where}.{key}",
                    f"no posterior draw reaches {what.removeprefix('temperature for ')} at any temperature: k of "
                    f"'{reaction}' stays below {math.exp(float(np.max(self.highest_ln_k(j)))):.3g} {k_unit} in every "
                    "draw",
                    "ask for a smaller k" + (" (a longer half-life)" if key == "half_life" else ""),
                )
            shown = np.where(reached, units.kelvin_to(np.where(reached, found, 1.0), unit), np.inf)
            median = float(np.median(found))
            if np.isfinite(median):
                flagged = self.flag(name, median, "the temperature found")
            else:
                flagged = True
                self.notes.append(
                    f"EXTRAPOLATED: scenario {name}: most posterior draws reach the target at no temperature"
                )
            note = "share = draws that reach the target at some temperature (the others count as inf)"
            out.append(_scalar(name, what, unit, shown, note, float(reached.mean())) | {"extrapolated": flagged})
            figure["answer_K"] = tuple(float(t) for t in np.quantile(found, [0.05, 0.5, 0.95]))
            figure["target"] = (series[-1][0] if key == "half_life" else series[0][0], scenario.k or scenario.half_life)
        # The figure's temperatures: the fitted range and every temperature asked or answered, with a margin.
        span = [low, high, *figure["asked_K"], *(t for t in figure["answer_K"] or () if np.isfinite(t))]
        margin = 0.05 * (max(span) - min(span))
        grid = np.linspace(max(min(span) - margin, 1.0), max(span) + margin, 61)
        figure["curve"] = table(grid)
        return table(kelvins) if scenario.question == "k_at" else figure["curve"], out, figure

    def highest_ln_k(self, j: int) -> np.ndarray:
        """Per draw, the largest ln k of reaction j at any temperature: ln A as T grows without bound (n = 0), the
        peak at T = Ea/(R |n|) (n < 0), inf (n > 0)."""
        draws = self.draws
        n = np.zeros(draws.size) if draws.exponent is None else draws.exponent[:, j]
        with np.errstate(all="ignore"):
            peak = np.where(n < 0, draws.ea[:, j] / (R * -n), draws.temperature_ref)
            at_peak = draws.ln_k(peak)[:, j]
            ln_a = ln_pre_exponential(draws.ln_k(draws.temperature_ref)[:, j], draws.ea[:, j], draws.temperature_ref)
        return np.select([n < 0, n == 0], [at_peak, ln_a], np.inf)

    def cstr_time_to(self, scenario: Scenario, kelvin: float, target: float) -> np.ndarray:
        """Per draw, the residence time that reaches ``target`` conversion (log-spaced search, interpolated)."""
        taus = np.geomspace(min(scenario.residence_times) / 10, max(scenario.residence_times) * 10, CSTR_SEARCH_POINTS)
        c = cstr_steady_states(
            self.study.network, self.draws, kelvin, self.feed(scenario), taus, thorough=False
        ).concentrations
        key = self.study.species.index(scenario.key_reactant)
        conversion = 1.0 - c[:, :, key] / self.feed(scenario)[key]
        return _first_crossing(taus, np.nan_to_num(conversion, nan=-1.0), target, log_odds=True)

    def run(self, scenario: Scenario, where: str, stated: Scenario, time_unit: str) -> tuple[pd.DataFrame, list[dict]]:
        """Profiles and answers of ``scenario`` (in the study's units); names quote ``stated``, the scenario as
        written, in its own ``time_unit``."""
        study, name = self.study, scenario.name
        conc_unit = study.units.concentration
        kelvin = None
        if scenario.temperature is not None:
            kelvin = float(_to_kelvin(study, scenario.temperature, f"{where}.temperature")[0])
            self.flag(name, kelvin, "temperature")
        axis, profiles, axis_name, volume = self.profiles(scenario, kelvin, where)
        series: dict[str, tuple[str, np.ndarray]] = {
            f"c[{s}]": (conc_unit, profiles[:, :, i]) for i, s in enumerate(study.species)
        }
        # What the vessel holds against what was charged into it so far, per species: concentrations for a
        # constant volume, amounts (c V; the initial charge plus the feeds) for a dosed batch.
        present, charged = profiles, np.broadcast_to(self.feed(scenario), (axis.size, len(study.species)))
        if volume is not None:
            present = profiles * volume[None, :, None]
            charged = charged * scenario.volume + fed_amounts(self.feeds(scenario), axis, len(study.species))
            series.update(self.accumulation_series(scenario, axis, volume, present, charged))
        conversion = None
        if scenario.key_reactant is not None:
            key = study.species.index(scenario.key_reactant)
            consumed = charged[:, key] - present[:, :, key]
            with np.errstate(divide="ignore", invalid="ignore"):
                # Nothing converted before any key reactant is in the vessel (a dosed key reactant at t = 0).
                conversion = np.where(charged[:, key] > 0, consumed / charged[:, key], 0.0)
                series[f"conversion[{scenario.key_reactant}]"] = ("", conversion)
                for product in scenario.products:
                    p = study.species.index(product)
                    formed = present[:, :, p] - charged[:, p]
                    series[f"yield[{product}]"] = ("", np.where(charged[:, key] > 0, formed / charged[:, key], 0.0))
                    series[f"selectivity[{product}]"] = ("", np.where(consumed > 0, formed / consumed, np.nan))
        self.series = series
        rows = []
        for quantity, (unit, values) in series.items():
            band = _band(values)
            for t, column in zip(axis, band.T, strict=True):
                rows.append(
                    {
                        "scenario": name,
                        "time": t,
                        "quantity": quantity,
                        "unit": unit,
                        "median": column[2],
                        "q05": column[0],
                        "q25": column[1],
                        "q75": column[3],
                        "q95": column[4],
                    }
                )
        scalars = self.scalars(scenario, kelvin, axis, profiles, conversion, axis_name, where, stated, time_unit)
        if volume is not None:
            scalars += self.accumulation_scalars(scenario, axis, present, charged)
        table = pd.DataFrame(rows, columns=TABLE_COLUMNS).rename(columns={"time": axis_name})
        return table, scalars

    def dosed_species(self, scenario: Scenario) -> list[str]:
        """The species whose accumulation is reported: ``dosed``, else every species a feed carries."""
        if scenario.dosed is not None:
            return list(scenario.dosed)
        carried = {name for feed in scenario.feeds for name, value in feed.concentration.items() if value > 0}
        return [name for name in self.study.species if name in carried]

    def accumulation_series(
        self, scenario: Scenario, axis: np.ndarray, volume: np.ndarray, present: np.ndarray, charged: np.ndarray
    ) -> dict[str, tuple[str, np.ndarray]]:
        """Profiles of a dosed batch besides the concentrations: the liquid volume, and per dosed species the
        amount fed so far, the amount still in the vessel (c V) and its share of the amount charged so far."""
        study = self.study
        amount = units.amount_unit(study.units.concentration, study.units.volume)
        draws = present.shape[0]
        fed = fed_amounts(self.feeds(scenario), axis, len(study.species))
        out = {"volume": (study.units.volume, np.broadcast_to(volume, (draws, axis.size)))}
        for name in self.dosed_species(scenario):
            i = study.species.index(name)
            out[f"dosed[{name}]"] = (amount, np.broadcast_to(fed[:, i], (draws, axis.size)))
            out[f"accumulation[{name}]"] = (amount, present[:, :, i])
            out[f"accumulation_share[{name}]"] = ("", _share(present[:, :, i], charged[:, i]))
        return out

    def accumulation_scalars(
        self, scenario: Scenario, axis: np.ndarray, present: np.ndarray, charged: np.ndarray
    ) -> list[dict]:
        """Per dosed species: the largest amount in the vessel, when it is reached, and its share then."""
        study, name = self.study, scenario.name
        amount = units.amount_unit(study.units.concentration, study.units.volume)
        out = []
        for species in self.dosed_species(scenario):
            i = study.species.index(species)
            t_max, n_max = _maximum(axis, present[:, :, i], _kinks(scenario))
            share = _share(present[:, :, i], charged[:, i])
            at_max = np.array(
                [np.interp(t, axis, row) if np.isfinite(t) else np.nan for t, row in zip(t_max, share, strict=True)]
            )
            out += [
                _scalar(
                    name, f"maximum accumulation of {species}", amount, n_max, "amount c V of unreacted dosed reagent"
                ),
                _scalar(name, f"time of maximum accumulation of {species}", study.units.time, t_max),
                _scalar(
                    name,
                    f"accumulation share of {species} at its maximum",
                    "",
                    at_max,
                    f"of the {species} charged so far (initial charge plus feeds), the part unreacted",
                ),
            ]
        return out

    def scalars(
        self,
        scenario: Scenario,
        kelvin: float | None,
        axis: np.ndarray,
        profiles: np.ndarray,
        conversion: np.ndarray | None,
        axis_name: str,
        where: str,
        stated: Scenario,
        time_unit: str,
    ) -> list[dict]:
        study, name = self.study, scenario.name
        study_time = study.units.time
        out = []
        if conversion is not None:
            # The plain answer first: how far the key reactant got by the end of each case.
            label = axis_name.replace("_", " ")
            ends = [(i, f"at {label} {float(a):g} {study_time}") for i, a in enumerate(axis)]
            for index, where_at in ends if scenario.reactor == "cstr" else ends[-1:]:
                out.append(_scalar(name, f"conversion of {scenario.key_reactant} {where_at}", "", conversion[:, index]))
        if scenario.target_conversion is not None and conversion is not None:
            target = scenario.target_conversion
            if scenario.reactor == "cstr":
                values = self.cstr_time_to(scenario, kelvin, target)
            else:
                values = _first_crossing(axis, conversion, target)
            reached = float(np.mean(np.isfinite(values)))
            out.append(
                _scalar(
                    name,
                    f"{axis_name} to {target:.0%} conversion of {scenario.key_reactant}",
                    study_time,
                    values,
                    "share = draws that reach it within the scenario's range",
                    reached,
                )
            )
        if scenario.spec is not None and conversion is not None:
            spec = scenario.spec
            if scenario.reactor == "cstr":
                at = self.conversion_at(scenario, kelvin, spec.by)
            else:
                at = np.array(
                    [np.interp(spec.by, axis, row) if np.all(np.isfinite(row)) else np.nan for row in conversion]
                )
            meets = float(np.mean(at[~np.isnan(at)] >= spec.conversion)) if np.any(~np.isnan(at)) else math.nan
            out.append(
                _scalar(
                    name,
                    f"conversion of {scenario.key_reactant} at {stated.spec.by:g} {time_unit}",
                    "",
                    at,
                    f"share = probability of at least {spec.conversion:.0%}",
                    meets,
                )
            )
        if scenario.intermediate is not None and scenario.reactor != "cstr":
            i = study.species.index(scenario.intermediate)
            t_max, c_max = _maximum(axis, profiles[:, :, i], _kinks(scenario))
            out.append(_scalar(name, f"{axis_name} of maximum {scenario.intermediate}", study_time, t_max))
            out.append(
                _scalar(name, f"maximum concentration of {scenario.intermediate}", study.units.concentration, c_max)
            )
        if scenario.temperature_for is not None:
            kelvin_needed = self.temperature_for(scenario, where)
            unit = study.units.temperature
            shown = np.where(
                np.isnan(kelvin_needed), np.nan, units.kelvin_to(np.nan_to_num(kelvin_needed, nan=300.0), unit)
            )
            found = float(np.mean(~np.isnan(kelvin_needed)))
            target = scenario.temperature_for
            what = (
                f"temperature for {target.conversion:.0%} conversion within "
                f"{stated.temperature_for.within:g} {time_unit}"
                if target.conversion is not None
                else f"temperature for k[{target.reaction}] = {target.k:g}"
                if target.k is not None
                else f"temperature for a half-life of {stated.temperature_for.half_life:g} {time_unit} of "
                f"{target.reaction}"
            )
            out.append(_scalar(name, what, unit, shown, "share = draws with a solution in the searched range", found))
            if found > 0:
                self.flag(name, float(np.nanmedian(kelvin_needed)), "the temperature found")
        return out


def _kinks(scenario: Scenario) -> np.ndarray:
    """Times within a dosed batch where a feed starts or stops (the profiles' slopes jump there); empty otherwise."""
    edges = [t for feed in scenario.feeds or () for t in (feed.start, feed.stop)]
    return np.unique([t for t in edges if 0.0 < t < (scenario.until or 0.0)])


def _share(amount: np.ndarray, charged: np.ndarray) -> np.ndarray:
    """``amount`` (draws, times) as a share of ``charged`` (times,); NaN where nothing was charged yet."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(charged > 0, amount / charged, np.nan)


def scenario_answers(
    study: Study, draws: ParameterDraws, measured_K: tuple[float, float], file: ScenarioFile, index: int, where: str
) -> tuple[dict[str, tuple[str, np.ndarray]], list[str]]:
    """Every answer of scenario ``index`` of ``file`` (read from ``where``) per posterior draw, in the study's units:
    quantity -> (unit, values (draws,)). The scalar answers as ``summary.csv`` names them, and each profile
    quantity (``c[S]``, ``conversion[A]``, ``yield[P]``, ...) at the end of the scenario's axis (its last time, or
    its longest residence time). Also the notes (extrapolations, multiple steady states)."""
    predictor = _Predictor(study, draws, measured_K)
    scenario_units = _Units.of(file, study, where)
    predictor.display_temperature = scenario_units.temperature
    scenario, at = file.scenarios[index], f"{where}: scenarios[{index}]"
    _, scalars = predictor.run(scenario_units.to_study(scenario, study, at), at, scenario, scenario_units.time)
    answers = {quantity: (unit, values[:, -1]) for quantity, (unit, values) in predictor.series.items()}
    answers.update({row["quantity"]: (row["unit"], row["draws"]) for row in scalars})
    return answers, predictor.notes


def _measured_range(study: Study, attrs: dict) -> tuple[float, float]:
    if "temperature_range_K" in attrs:
        low, high = attrs["temperature_range_K"]
        return float(low), float(high)
    if study.mode != "network":
        kelvin = read_rate_constants(study).temperature_K
        return float(np.min(kelvin)), float(np.max(kelvin))
    return read_observations(study).kelvin_span()


def predict(
    results_dir: str | Path,
    scenarios: str | Path | ScenarioFile,
    *,
    out: str | Path | None = None,
    overwrite: bool = False,
    quiet: bool = False,
    draws: int | None = None,
    command_line: str | None = None,
) -> PredictionResult:
    """Reactor predictions for every scenario (a file, or scenarios already validated) from the posterior in
    ``results_dir``.

    Written to ``out`` (default ``results_dir/predictions``): one CSV and one figure per scenario,
    ``summary.csv`` of scalar answers, ``cautions.txt`` and ``manifest.json``.
    """
    from ..outputs import plots

    results_dir = Path(results_dir)
    manifest, idata = load_results(results_dir)
    study = load_study(results_dir / "study.yaml")
    if isinstance(scenarios, ScenarioFile):
        file, source = scenarios, {"path": str(results_dir / "study.yaml"), "sha256": None}
    else:
        file = load_scenarios(Path(scenarios), study)
        source = {"path": str(Path(scenarios).resolve()), "sha256": sha256_file(Path(scenarios))}
    target = Path(out) if out is not None else results_dir / "predictions"
    inputs = (results_dir,) if isinstance(scenarios, ScenarioFile) else (results_dir, Path(scenarios))
    check_target(target, overwrite, inputs)
    attrs = json.loads(idata.posterior.attrs["arrhenia"])
    posterior = idata.posterior
    picks = pick_draws(posterior, draws or file.draws)
    temperature_ref = float(attrs["reference_temperature_K"])
    network = study.mode == "network"
    draws_of = parameter_draws if network else _rate_constant_draws
    parameter = draws_of(study, posterior, temperature_ref, picks)
    predictor = _Predictor(study, parameter, _measured_range(study, attrs))
    profiles, summary_rows, k_figures = {}, [], {}
    scenario_units = _Units.of(file, study, source["path"]) if network else None
    question_units = _QuestionUnits.of(file, study, source["path"])
    predictor.display_temperature = question_units.temperature
    for index, scenario in enumerate(file.scenarios):
        where = f"{source['path']}: scenarios[{index}]"
        if scenario.question is not None:
            profiles[scenario.name], scalars, k_figures[scenario.name] = predictor.answer(
                scenario, where, question_units
            )
            summary_rows += scalars
        else:
            table, scalars = predictor.run(
                scenario_units.to_study(scenario, study, where), where, scenario, scenario_units.time
            )
            profiles[scenario.name] = scenario_units.table_from_study(table, study)
            flagged = scenario.name in predictor.flagged
            summary_rows += [
                scenario_units.scalar_from_study(row, study) | {"extrapolated": flagged} for row in scalars
            ]
        if not quiet:
            kind = scenario.question or scenario.reactor
            print(f"predicted scenario {scenario.name} ({kind}, {parameter.size} posterior draws)", flush=True)
    summary = pd.DataFrame(summary_rows, columns=SUMMARY_COLUMNS)
    notes = predictor.notes
    result = PredictionResult(target, profiles, summary, [n for n in notes if n.startswith("EXTRAPOLATED")])
    time_unit = scenario_units.time if scenario_units is not None else question_units.time
    with StagedFolder(target, overwrite, inputs) as folder:
        for name, table in profiles.items():
            folder.write_csv(f"{name}.csv", _readable(table, time_unit))
            if name in k_figures:
                plots.rate_constant_prediction_plot(name, k_figures[name], folder.path(f"{name}.png"))
                continue
            # The figure holds concentrations and fractions; volumes and amounts are in the table and summary.
            shown = table[table["quantity"].str.startswith("c[") | (table["unit"] == "")]
            plots.prediction_plot(name, shown, folder.path(f"{name}.png"), scenario_units.time)
        folder.write_csv("summary.csv", _readable(summary, time_unit))
        folder.write_text("cautions.txt", "\n".join([*notes, CAUTION]) + "\n")
        folder.write_text(
            "report.html",
            report.simple_report(
                folder.stage,
                title=f"Arrhenia {'reactor ' if network else ''}predictions: {study.name}",
                intro=[
                    f"{parameter.size} posterior draws of {results_dir} pushed through {len(profiles)} scenario(s); "
                    "medians with 90 % intervals."
                ],
                tables=[("Answers", summary)],
                figures=[(f"{n}.png", f"Scenario {n}") for n in profiles],
                cautions=[*notes, CAUTION],
            ),
        )
        folder.write_manifest(
            "predictions",
            {
                "results": str(results_dir),
                "results_config_sha256": manifest.get("config_sha256"),
                "results_posterior_sha256": manifest["files"]["posterior.nc"],
                "scenarios": source,
                "draws": int(parameter.size),
                "fitted_temperature_range_K": list(predictor.measured),
                "notes": notes,
            },
            command_line,
        )
    return result


def _readable(table: pd.DataFrame, time_unit: str) -> pd.DataFrame:
    """A table as its CSV holds it: the time axis named with its unit (``time_min``, ``space_time_min``,
    ``residence_time_min``) and the unit of a fraction written out instead of left blank."""
    axes = {axis: f"{axis}_{time_unit}" for axis in ("time", "space_time", "residence_time") if axis in table}
    written = table.rename(columns=axes)
    if "unit" in written:
        written["unit"] = written["unit"].fillna("").replace("", FRACTION)
    return written
