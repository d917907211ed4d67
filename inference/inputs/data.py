"""Read and check data files, convert them to internal units, and label every row.

Each table is checked once here: missing, empty or unreadable files, missing and unknown columns, cells that
are blank or not numbers, and values that cannot be right. Errors name the file, the line and the column.
"""

from __future__ import annotations

import csv
import difflib
import functools
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import StudyError
from ..physics.conditions import Conditions, Feed, RunSetup, build_conditions, isothermal_conditions
from ..physics.network import HELD_START_HINT, held_start_blocked
from . import units
from .files import excerpt, read_text, shown_path
from .measured import MeasurementDesign, QuantitySpec, default_quantity, measurement_design
from .study import Study

#: A data file larger than this (decompressed) is refused (a lab data set is kilobytes to megabytes).
MAX_DATA_BYTES = 100_000_000
#: Rows a data table may have; lines are counted while the file is read, so huge files fail at once.
MAX_DATA_ROWS = 200_000
#: Columns that every table may carry and that Arrhenia ignores.
FREE_COLUMNS = frozenset({"comment", "note"})


class _Lines:
    """The lines of a CSV text for ``csv.reader``, skipping blank lines and whole-line ``#`` comments where a
    record starts (never inside a quoted cell that spans lines), and counting the lines handed out."""

    def __init__(self, text: str) -> None:
        self._lines = io.StringIO(text, newline="").readlines()  # breaks at \n, \r\n and \r only, as csv does
        self.consumed = 0
        self.record_start = True
        self.first = 0

    def __iter__(self) -> _Lines:
        return self

    def __next__(self) -> str:
        while self.consumed < len(self._lines):
            line = self._lines[self.consumed]
            self.consumed += 1
            if self.record_start and (not line.strip() or line.lstrip().startswith("#")):
                continue
            if self.record_start:
                self.record_start, self.first = False, self.consumed
            return line
        raise StopIteration


def _records(text: str, where: str) -> list[tuple[int, list[str]]]:
    """(line, cells) of every record of a CSV text, cells stripped; quoted cells may hold commas, ``#`` and line
    breaks."""
    lines = _Lines(text)
    reader = csv.reader(lines, skipinitialspace=True)
    records = []
    while True:
        lines.record_start = True
        try:
            cells = next(reader)
        except StopIteration:
            return records
        except csv.Error as exc:
            limit = csv.field_size_limit()
            problem = f"a cell is longer than {limit} characters" if "field limit" in str(exc) else f"not CSV ({exc})"
            raise StudyError(f"{where}: line {lines.consumed}", problem) from None
        records.append((lines.first, [cell.strip() for cell in cells]))


def _header(cells: list[str], line: int, where: str) -> list[str]:
    """Check the header line's names: none empty, none twice."""
    at = f"{where}: line {line}"
    for position, name in enumerate(cells):
        if name == "":
            if position == len(cells) - 1 and position > 0:
                raise StudyError(at, "the header line ends with a trailing comma (an empty column name)")
            raise StudyError(at, f"column {position + 1} has an empty name")
    first: dict[str, int] = {}
    for position, name in enumerate(cells, start=1):
        if name in first:
            raise StudyError(at, f"column '{excerpt(name)}' appears twice (columns {first[name]} and {position})")
        first[name] = position
    return cells


def read_table(path: Path, required: set[str], optional: set[str] = frozenset()) -> pd.DataFrame:
    """Read a CSV as text, check its columns and the number of cells on every line, and return it with a
    ``line`` column (the line of each row in the file; 1 is the first line)."""
    where = shown_path(path)
    text = read_text(
        path,
        "data file",
        MAX_DATA_BYTES,
        max_rows=MAX_DATA_ROWS,
        decompress=True,
        missing_hint="paths in a study file are relative to the study file",
    )
    records = _records(text, where)
    if not records:
        raise StudyError(where, "is empty", "the first line names the columns")
    header_line, header = records[0]
    columns = _header(header, header_line, where)
    for separator, name in ((";", "semicolons"), ("\t", "tabs")):
        if any(separator in column for column in columns):  # a spreadsheet saved with another list separator
            raise StudyError(
                f"{where}: line {header_line}",
                f"the header '{excerpt(','.join(columns))}' looks separated by {name}, not commas",
                "save the table as CSV with commas between cells and a point as the decimal mark",
            )
    known = required | optional | FREE_COLUMNS
    for column in columns:
        if column not in known:
            close = difflib.get_close_matches(column, sorted(required | optional), n=1, cutoff=0.6)
            hint = f"did you mean '{close[0]}'?" if close else f"known columns: {', '.join(sorted(known))}"
            raise StudyError(f"{where}: line {header_line}", f"unknown column '{excerpt(column)}'", hint)
    missing = sorted(required - set(columns))
    if missing:
        raise StudyError(where, f"missing column '{missing[0]}'", f"the columns are: {', '.join(sorted(required))}")
    rows = records[1:]
    if not rows:
        raise StudyError(where, "has a header but no data rows")
    for line, cells in rows:
        if len(cells) != len(columns):
            if len(cells) == len(columns) + 1 and cells[-1] == "":
                problem = "ends with a trailing comma"
            else:
                problem = f"has {len(cells)} cell{'s' * (len(cells) != 1)} but the header names {len(columns)} columns"
            raise StudyError(f"{where}: line {line}", problem, "every line has one cell per column of the header")
    frame = pd.DataFrame([cells for _, cells in rows], columns=columns, dtype=str)
    frame.insert(0, "line", np.array([line for line, _ in rows], dtype=int))
    return frame


def _position(label: str, names: tuple[str, ...] | list[str], what: str, where: str) -> int:
    """Index of a cell's ``label`` among the study's ``names`` (reactions or species); ``StudyError`` naming the
    cell (``where`` is file and line), with a close match or the list as a hint, when it is none of them."""
    if label in names:
        return list(names).index(label)
    close = difflib.get_close_matches(label, list(names), n=1)
    plural = "reactions" if what == "reaction" else what
    hint = f"did you mean '{close[0]}'?" if close else f"the study's {plural}: {', '.join(names)}"
    raise StudyError(f"{where}, column '{what}'", f"'{excerpt(label)}' is not a {what} of the study", hint)


def numeric_column(
    frame: pd.DataFrame, column: str, where: str, *, positive: bool = False, allow_blank: bool = False
) -> np.ndarray:
    """Parse a text column as floats; blank, non-numeric, infinite and (if asked) non-positive cells are errors."""
    text = frame[column]
    values = pd.to_numeric(text.where(text != "", None), errors="coerce").to_numpy(dtype=float)
    for row, (cell, value) in enumerate(zip(text, values, strict=True)):
        line = frame["line"].iloc[row]
        if cell == "":
            if allow_blank:
                continue
            raise StudyError(f"{where}: line {line}, column '{column}'", "cell is blank")
        if not np.isfinite(value):
            raise StudyError(f"{where}: line {line}, column '{column}'", f"'{excerpt(cell)}' is not a finite number")
        if positive and value <= 0:
            raise StudyError(f"{where}: line {line}, column '{column}'", f"{excerpt(cell)} must be positive")
    return values


def _kelvin_column(frame: pd.DataFrame, column: str, unit: str, where: str, *, allow_blank: bool = False) -> np.ndarray:
    """A temperature column in ``unit`` converted to K (NaN for blank cells where they are allowed); an impossible
    or implausible reading is an error naming its line."""
    raw = numeric_column(frame, column, where, allow_blank=allow_blank)
    given = np.flatnonzero(~np.isnan(raw))
    kelvin = np.full(raw.shape, np.nan)
    try:
        kelvin[given] = units.to_kelvin(raw[given], unit, where)
    except StudyError:
        for row in given:  # the first reading at fault, by its line
            units.to_kelvin(raw[row], unit, f"{where}: line {frame['line'].iloc[row]}, column '{column}'")
        raise
    return kelvin


@dataclass(frozen=True)
class RateConstantData:
    """Measured rate constants, one entry per row of the data file.

    Attributes
    ----------
    temperature_K : temperatures, kelvin.
    k : rate constants, in the study's rate-constant unit.
    reaction_index : index into ``Study.reactions`` of each row.
    ln_k_sd : stated standard deviation of ln k per row (relative error), or None to fit the noise.
    line : line of each row in the data file (1 is the header).
    """

    temperature_K: np.ndarray
    k: np.ndarray
    reaction_index: np.ndarray
    ln_k_sd: np.ndarray | None
    line: np.ndarray
    path: Path

    @property
    def ln_k(self) -> np.ndarray:
        return np.log(self.k)

    def rows_of(self, reaction: int) -> np.ndarray:
        return np.flatnonzero(self.reaction_index == reaction)


def read_rate_constants(study: Study) -> RateConstantData:
    """Read the study's rate-constant table: columns temperature, k, and optionally reaction, k_sd, k_rel_sd."""
    path = study.data_file("rate_constants")
    where = str(path)
    frame = read_table(path, {"temperature", "k"}, {"reaction", "k_sd", "k_rel_sd"})
    temperature = _kelvin_column(frame, "temperature", study.units.temperature, where)
    k = numeric_column(frame, "k", where, positive=True)

    names = study.reaction_names
    if "reaction" in frame.columns:
        index = np.empty(len(frame), dtype=int)
        for row, label in enumerate(frame["reaction"]):
            index[row] = _position(label, names, "reaction", f"{where}: line {frame['line'].iloc[row]}")
    elif len(names) == 1:
        index = np.zeros(len(frame), dtype=int)
    else:
        raise StudyError(
            where,
            "missing column 'reaction'",
            f"the study has {len(names)} reactions, so each row must say which one it measures",
        )

    if "k_sd" in frame.columns and "k_rel_sd" in frame.columns:
        raise StudyError(where, "give either column 'k_sd' or column 'k_rel_sd', not both")
    ln_k_sd = None
    if "k_sd" in frame.columns:
        ln_k_sd = numeric_column(frame, "k_sd", where, positive=True) / k  # delta method: sd(ln k) = sd(k) / k
    elif "k_rel_sd" in frame.columns:
        ln_k_sd = numeric_column(frame, "k_rel_sd", where, positive=True)

    data = RateConstantData(temperature, k, index, ln_k_sd, frame["line"].to_numpy(), path)
    for reaction_index, name in enumerate(names):
        rows = data.rows_of(reaction_index)
        if rows.size == 0:
            raise StudyError(where, f"no rows for reaction '{name}'", "every reaction of the study needs data")
        if np.unique(temperature[rows]).size < 2:
            raise StudyError(
                where,
                f"reaction '{name}' is measured at one temperature only",
                "Ea needs rate constants at two or more temperatures",
            )
    return data


@dataclass(frozen=True)
class Observations:
    """Concentration-time data of batch runs, or outlet concentrations of flow reactors at steady state (each
    row of a ``steady_states`` file is a "run" whose one time is its residence time, its feed the initial
    concentrations).

    Runs (R): ``run_ids``, ``temperature_K`` (kelvin; the nominal T_n of a run with a temperature history: its
    time-weighted mean up to the last measurement), ``initial`` (R, N) in the study's concentration unit,
    ``times[r]`` the sorted distinct sampling times of run r (study time unit), ``setups[r]`` how it was run
    (temperature history, initial volume, feeds, CSTR overflow).
    Measurements (M), one per observed value: ``run_index``, ``time_index`` (into ``times[run]``),
    ``species_index`` (into ``Study.species``), ``value`` (concentration unit, or concentration x volume unit
    for amounts) and ``line`` (file line); ``factor[m]`` the run's volume at that time when the values are
    amounts (None: concentrations).
    ``run_group[r]``: the group of run r for run-to-run variability (the ``run_variability.by`` column, the
    ``group`` column of steady states, or the run itself).
    """

    run_ids: tuple[str, ...]
    temperature_K: np.ndarray
    initial: np.ndarray
    times: tuple[np.ndarray, ...]
    run_index: np.ndarray
    time_index: np.ndarray
    species_index: np.ndarray
    value: np.ndarray
    line: np.ndarray
    runs_path: Path
    measurements_path: Path
    run_group: tuple[str, ...] = ()
    setups: tuple[RunSetup, ...] = ()
    factor: np.ndarray | None = None
    #: Per run, the experiment it belongs to for leave-one-out comparison (default: the run itself).
    experiment: tuple[str, ...] = ()
    #: Steady states of continuous reactors (one "run" per row of a steady_states file; its time is tau).
    steady: bool = False
    #: Where the study declares measured quantities: every quantity (the declared ones, then each species' plain
    #: concentration) and each measurement's, with the design that maps predicted concentrations to them; empty
    #: and None where every value is one species' concentration.
    quantities: tuple[QuantitySpec, ...] = ()
    quantity_index: np.ndarray | None = None
    design: MeasurementDesign | None = None
    #: Censoring: a value at or below ``lower[m]`` (detection limit) or at or above ``upper[m]`` (saturation) is
    #: known only to lie there (its ``value`` is the limit); -inf / inf where no limit applies. None: no limits.
    lower: np.ndarray | None = None
    upper: np.ndarray | None = None
    #: Rows of the measurements file set aside as no measurement: a value 0 at t = 0 where the run's stated initial
    #: concentration of that species is 0, under noise on the log of values (``_set_aside_restated_zeros``).
    restated_zeros: int = 0

    @property
    def censored(self) -> np.ndarray:
        """Per measurement: "below", "above" or "" (exact)."""
        flags = np.full(self.value.size, "", dtype=object)
        if self.lower is not None:
            flags[self.value <= self.lower] = "below"
        if self.upper is not None:
            flags[self.value >= self.upper] = "above"
        return flags

    def measured_names(self, species: tuple[str, ...]) -> np.ndarray:
        """Per measurement, the name of what was measured: its declared quantity, or its species."""
        if self.quantity_index is None:
            return np.array(species)[self.species_index]
        return np.array([q.name for q in self.quantities])[self.quantity_index]

    @property
    def experiments(self) -> tuple[str, ...]:
        return self.experiment or self.run_ids

    def kelvin_span(self) -> tuple[float, float]:
        """The lowest and highest temperature (K) the runs went through while they were measured: their fixed
        temperatures, or their histories from 0 to their last measurement."""
        low, high = float(np.min(self.temperature_K)), float(np.max(self.temperature_K))
        for setup, times in zip(self.setups, self.times, strict=True):
            if setup.ramped:
                history = np.asarray(setup.history, dtype=float)
                inside = history[history[:, 0] <= times[-1], 1]
                end = np.interp(times[-1], history[:, 0], history[:, 1])
                low, high = min(low, float(inside.min()), end), max(high, float(inside.max()), end)
        return low, high

    def measurement_kelvin(self) -> np.ndarray:
        """The temperature (K) at each measurement: the run's history at that time, or its fixed temperature."""
        if not self.setups:
            return self.temperature_K[self.run_index]
        history = [np.asarray(s.history, dtype=float) for s in self.setups]
        return np.array(
            [np.interp(t, history[r][:, 0], history[r][:, 1]) for r, t in zip(self.run_index, self.time, strict=True)]
        )

    @functools.cached_property
    def conditions(self) -> Conditions:
        """How every run was carried out, in the compiled integrators' form (isothermal batch by default)."""
        if not self.setups:
            return isothermal_conditions(self.temperature_K, self.initial.shape[1])
        return build_conditions(self.setups, self.initial.shape[1])

    @property
    def isothermal_batch(self) -> bool:
        """Every run an isothermal batch run at constant volume, measured as concentrations."""
        plain = all(not s.ramped and not s.feeds and not s.overflow for s in self.setups)
        return plain and (self.factor is None or bool(np.all(self.factor == 1.0)))

    @property
    def observed_species(self) -> np.ndarray:
        return np.unique(self.species_index)

    @property
    def group_names(self) -> tuple[str, ...]:
        """Distinct groups in order of first appearance."""
        return tuple(dict.fromkeys(self.run_group or self.run_ids))

    @property
    def group_index(self) -> np.ndarray:
        names = self.group_names
        return np.array([names.index(g) for g in (self.run_group or self.run_ids)], dtype=int)

    @property
    def time(self) -> np.ndarray:
        return np.array([self.times[r][i] for r, i in zip(self.run_index, self.time_index, strict=True)])


def _run_label(frame: pd.DataFrame, where: str) -> list[str]:
    labels = list(frame["run"])
    for row, label in enumerate(labels):
        if label == "":
            raise StudyError(f"{where}: line {frame['line'].iloc[row]}, column 'run'", "cell is blank")
    return labels


def _unique_run_labels(frame: pd.DataFrame, where: str) -> list[str]:
    """The ``run`` column of a table with one row per run: no cell blank, no label twice."""
    labels = _run_label(frame, where)
    seen: dict[str, int] = {}
    for row, label in enumerate(labels):
        if label in seen:
            raise StudyError(
                f"{where}: line {frame['line'].iloc[row]}, column 'run'",
                f"run '{excerpt(label)}' appears twice (first on line {seen[label]})",
            )
        seen[label] = int(frame["line"].iloc[row])
    return labels


def _known_run(label: str, run_ids: tuple[str, ...], runs_path: Path, at: str) -> int:
    """Index of run ``label`` among the runs file's runs; ``StudyError`` at ``at`` (file and line) when it is not
    one of them."""
    if label in run_ids:
        return run_ids.index(label)
    close = difflib.get_close_matches(label, run_ids, n=1)
    hint = f"did you mean '{close[0]}'?" if close else f"the runs file has: {', '.join(run_ids[:8])}"
    raise StudyError(f"{at}, column 'run'", f"run '{excerpt(label)}' is not in {runs_path.name}", hint)


@dataclass(frozen=True)
class Runs:
    """The runs table: labels, temperatures (K; NaN where the run's history is in the temperatures file), initial
    concentrations (runs, species), groups, its path, the line of each run, and the initial liquid volumes
    (units.volume; NaN where blank; None without a ``volume`` column)."""

    labels: tuple[str, ...]
    temperature_K: np.ndarray
    initial: np.ndarray
    groups: tuple[str, ...]
    path: Path
    lines: np.ndarray
    volume: np.ndarray | None = None


def read_runs(study: Study) -> Runs:
    """Runs table: ``run``, ``temperature`` (blank for a run whose history is in the temperatures file), the
    initial concentration of every species (one column each), optionally ``volume`` (initial liquid volume,
    units.volume) and, with ``run_variability.by``, that group column."""
    path = study.data_file("runs")
    where = str(path)
    species = study.species
    by = study.run_variability.by if study.run_variability is not None else None
    if by is not None and by in {"run", "temperature", "volume", *species}:
        raise StudyError(
            f"{study.path}: run_variability.by", f"'{by}' is a column with its own meaning", "name a group column"
        )
    frame = read_table(path, {"run", "temperature", *species} | ({by} if by else set()), {"volume"})
    labels = _unique_run_labels(frame, where)
    temperature = _kelvin_column(
        frame, "temperature", study.units.temperature, where, allow_blank=study.has_data("temperatures")
    )
    initial = np.column_stack([numeric_column(frame, name, where) for name in species])
    bad = np.argwhere(initial < 0)
    if bad.size:
        row, col = bad[0]
        raise StudyError(
            f"{where}: line {frame['line'].iloc[row]}, column '{species[col]}'",
            "an initial concentration cannot be negative",
        )
    volume = None
    if "volume" in frame.columns:
        volume = numeric_column(frame, "volume", where, positive=True, allow_blank=True)
    groups = tuple(labels)
    if by is not None:
        groups = tuple(frame[by])
        for row, group in enumerate(groups):
            if group == "":
                raise StudyError(f"{where}: line {frame['line'].iloc[row]}, column '{by}'", "cell is blank")
    return Runs(tuple(labels), temperature, initial, groups, path, frame["line"].to_numpy(), volume)


def read_observations(study: Study) -> Observations:
    """Read a network study's data in whichever layout it gives: batch runs (``runs`` and ``measurements``, with
    temperature histories and feeds where given) or steady states of flow reactors (``steady_states``)."""
    if study.has_data("steady_states"):
        return _read_steady_states(study)
    return _read_batch(study)


def _read_batch(study: Study) -> Observations:
    """Batch runs: the runs table, the temperatures and feeds files where given, and the measurements (long layout
    ``run, time, species, value`` or wide ``run, time, <species>``); one ``RunSetup`` per run."""
    runs = read_runs(study)
    histories = _read_temperatures(study, runs) if study.has_data("temperatures") else {}
    _check_temperature_sources(study, runs, histories)
    feeds = _read_feeds(study, runs) if study.has_data("feeds") else {}
    for r, total in enumerate(runs.initial.sum(axis=1)):
        if total <= 0 and r not in feeds:
            raise StudyError(f"{runs.path}: line {runs.lines[r]}", "every initial concentration is zero")
    uncertain = tuple(study.species.index(name) for name, _ in study.initial_uncertainty)
    for r, initial in enumerate(runs.initial):
        blocked = held_start_blocked(study.network, initial, uncertain)
        if blocked is not None:
            raise StudyError(
                f"{runs.path}: line {runs.lines[r]}, columns '{blocked[0]}' and '{blocked[1]}'",
                "both are zero, so the step held at equilibrium cannot start at its equilibrium",
                HELD_START_HINT,
            )
    volume = _initial_volumes(study, runs, feeds)
    records, path, long_layout = _read_measurements(study, runs)
    records, restated = _set_aside_restated_zeros(study, records, runs.initial)
    _check_positive_values(study, records, str(path), long_layout)
    measured = _measurement_fields(records, study, runs.labels, runs.path, path)
    setups = []
    for r in range(len(runs.labels)):
        how = {"volume": float(volume[r]), "feeds": tuple(feeds.get(r, ()))}
        if r in histories:  # its nominal temperature: the time-weighted mean up to its last measurement
            setups.append(RunSetup(histories[r][0], horizon=float(measured["times"][r][-1]), **how))
        else:
            setups.append(RunSetup.isothermal(float(runs.temperature_K[r]), **how))
    run_volumes = [s.volume_at(t) for s, t in zip(setups, measured["times"], strict=True)]
    volume_there = np.array(
        [run_volumes[r][i] for r, i in zip(measured["run_index"], measured["time_index"], strict=True)]
    )
    amounts = study.measured_as == "amount"
    factor = volume_there if amounts else None
    if "quantities" in measured:  # declared quantities: the design maps concentrations to every measured scale
        measured["design"] = measurement_design(
            measured["quantities"],
            measured["quantity_index"],
            measured["run_index"],
            measured["time_index"],
            runs.labels,
            runs.initial,
            volume_there,
            np.array([s.volume for s in setups]),
            amounts,
        )
        factor = None
    return Observations(
        run_ids=runs.labels,
        temperature_K=np.array([s.nominal for s in setups], dtype=float),
        initial=runs.initial,
        runs_path=runs.path,
        measurements_path=path,
        run_group=runs.groups,
        setups=tuple(setups),
        factor=factor,
        restated_zeros=restated,
        **measured,
    )


#: A measured value: (run, time, what, value, line, lower, upper); ``what`` indexes the species, then the declared
#: quantities (``_measured_names``); lower/upper are its censoring limits (-inf/inf where the value is exact).
Record = tuple[int, float, int, float, int, float, float]


def _measured_names(study: Study) -> tuple[str, ...]:
    """What a measurement may be of: the study's species, then its declared quantities."""
    return (*study.species, *(q.name for q in study.quantities))


def _measured_column(
    frame: pd.DataFrame, column: str, where: str, *, allow_blank: bool = False
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(values, lower, upper) of a column of measured values. A cell ``<x`` is a value known only to lie below the
    limit x (detection or quantification), ``>x`` one above x (saturation): its value is x and x is its limit.
    Limits must be positive numbers."""
    text = frame[column]
    mark = text.str[:1].where(text.str[:1].isin(["<", ">"]), "")
    stripped = text.where(mark == "", text.str[1:].str.strip())
    for row in np.flatnonzero((mark != "").to_numpy()):
        cell = stripped.iloc[row]
        at = f"{where}: line {frame['line'].iloc[row]}, column '{column}'"
        number = pd.to_numeric(cell, errors="coerce")
        if not np.isfinite(number):
            raise StudyError(at, f"'{excerpt(text.iloc[row])}' is not a number or a limit", "write a limit as <0.002")
        if number <= 0:
            raise StudyError(at, f"the limit in '{excerpt(text.iloc[row])}' must be positive")
    values = numeric_column(frame.assign(**{column: stripped}), column, where, allow_blank=allow_blank)
    lower = np.where((mark == "<").to_numpy(), values, -np.inf)
    upper = np.where((mark == ">").to_numpy(), values, np.inf)
    return values, lower, upper


def _read_measurements(study: Study, runs: Runs) -> tuple[list[Record], Path, bool]:
    """The measurements file's values as records, its path, and whether it has the long layout. Columns (wide)
    or ``species`` cells (long) name a species or a declared quantity; an optional ``limit`` column (long) gives a
    detection limit for its row: a blank value, or one at or below it, is a value below that limit."""
    path = study.data_file("measurements")
    where = str(path)
    species = study.species
    names = _measured_names(study)
    with_header = read_table(path, {"run", "time"}, {"species", "value", "limit", *names})
    columns = set(with_header.columns)
    long_layout = "species" in columns or "value" in columns
    if long_layout:
        for needed in ("species", "value"):
            if needed not in columns:
                raise StudyError(
                    where, f"missing column '{needed}'", "the long layout has columns run, time, species, value"
                )
        extra = sorted(columns & set(names))
        if extra:
            raise StudyError(
                where,
                f"column '{extra[0]}' mixes the wide layout into the long one",
                "use either run, time, species, value or run, time and one column per species or quantity",
            )
    elif "limit" in columns:
        raise StudyError(
            where, "column 'limit' belongs to the long layout", "in the wide layout write a cell as <0.002"
        )
    labels = _run_label(with_header, where)
    time = numeric_column(with_header, "time", where)
    lines = with_header["line"].to_numpy()
    run_of = []
    for row, label in enumerate(labels):
        run_of.append(_known_run(label, runs.labels, runs.path, f"{where}: line {lines[row]}"))
        if time[row] < 0:
            raise StudyError(f"{where}: line {lines[row]}, column 'time'", "time cannot be negative")

    records: list[Record] = []
    if long_layout:
        blank_allowed = "limit" in columns
        values, lower, upper = _measured_column(with_header, "value", where, allow_blank=blank_allowed)
        if blank_allowed:
            limit = numeric_column(with_header, "limit", where, positive=True, allow_blank=True)
            for row in np.flatnonzero(np.isnan(values)):
                if np.isnan(limit[row]):
                    raise StudyError(
                        f"{where}: line {lines[row]}, column 'value'", "cell is blank", "or give a 'limit'"
                    )
            # The limit belongs to the row, not only to the values found below it: a simulation from the model
            # (posterior predictive, calibration) censors that row wherever its draw falls at or below the limit.
            below = np.isnan(values) | (np.isfinite(limit) & (values <= limit))
            values = np.where(below, limit, values)
            lower = np.where(np.isfinite(limit), limit, lower)
        for row, name in enumerate(with_header["species"]):
            what = _position(name, names, "species", f"{where}: line {lines[row]}")
            records.append((run_of[row], time[row], what, values[row], lines[row], lower[row], upper[row]))
    else:
        measured = [name for name in names if name in columns]
        if not measured:
            raise StudyError(where, "no species column", f"add columns named after species: {', '.join(species)}")
        for name in measured:
            values, lower, upper = _measured_column(with_header, name, where, allow_blank=True)
            what = names.index(name)
            for row in np.flatnonzero(with_header[name].to_numpy() != ""):
                records.append((run_of[row], time[row], what, values[row], lines[row], lower[row], upper[row]))
    if not records:
        raise StudyError(where, "has no measured values")
    _check_record_order(records, runs.labels, names, where)
    return records, path, long_layout


def _set_aside_restated_zeros(study: Study, records: list[Record], initial: np.ndarray) -> tuple[list[Record], int]:
    """Under noise on the log of values, the records that restate a zero initial condition (a species' value 0 at
    t = 0 in a run whose stated initial concentration of it is 0, such as a product not charged) are no measurement
    to fit: they are left out. Returns the records kept and how many were set aside."""
    if not study.noise.on_log_scale:
        return records, 0
    n_species = len(study.species)
    kept = [
        record
        for record in records
        if not (record[1] == 0 and record[3] == 0 and record[2] < n_species and initial[record[0], record[2]] == 0)
    ]
    return kept, len(records) - len(kept)


def _check_positive_values(
    study: Study, records: list[Record], where: str, long_layout: bool, steady: bool = False
) -> None:
    """Noise models on the log of values need every measured value positive (zeros that restate a zero initial
    condition are set aside before, by ``_set_aside_restated_zeros``)."""
    if not study.noise.on_log_scale:
        return
    names = _measured_names(study)
    for _, time, index, value, line, _, _ in records:
        if value <= 0:
            column = "value" if long_layout else names[index]
            at = "residence time" if steady else "t ="
            rule = (
                " (a 0 at t = 0 is set aside only where the run's initial concentration of that species is 0)"
                if time == 0 and not steady
                else ""
            )
            raise StudyError(
                f"{where}: line {line}, column '{column}'",
                f"{value:g} at {at} {time:g} {study.units.time} is not positive and cannot be fitted under "
                f"'{study.noise.model}' noise, which works on the log of values{rule}",
                "give a value below a detection limit as '<0.01', leave the cell blank, or use noise.model: absolute",
            )


def _measurement_fields(
    records: list[Record], study: Study, run_ids: tuple[str, ...], runs_path: Path, path: Path
) -> dict[str, object]:
    """The measurement fields of ``Observations`` from records: sorted by run, time and what was measured, with
    each run's distinct times, censoring limits, and each measurement's declared quantity where the study declares
    any. Every run needs a measurement."""
    records = sorted(records, key=lambda r: (r[0], r[1], r[2]))
    run_index = np.array([r[0] for r in records], dtype=int)
    measured_runs = set(run_index.tolist())
    for r, label in enumerate(run_ids):
        if r not in measured_runs:
            raise StudyError(f"{runs_path}", f"run '{excerpt(label)}' has no measurements in {path.name}")
    times = tuple(np.unique([rec[1] for rec in records if rec[0] == r]) for r in range(len(run_ids)))
    what = np.array([r[2] for r in records], dtype=int)
    lower = np.array([r[5] for r in records], dtype=float)
    upper = np.array([r[6] for r in records], dtype=float)
    n_species = len(study.species)
    fields: dict[str, object] = {
        "times": times,
        "run_index": run_index,
        "time_index": np.array([int(np.searchsorted(times[rec[0]], rec[1])) for rec in records], dtype=int),
        "species_index": what,
        "value": np.array([r[3] for r in records], dtype=float),
        "line": np.array([r[4] for r in records], dtype=int),
        "lower": lower if np.isfinite(lower).any() else None,
        "upper": upper if np.isfinite(upper).any() else None,
    }
    if study.quantities:
        declared = study.quantities
        quantities = (*declared, *(default_quantity(i, name) for i, name in enumerate(study.species)))
        quantity_index = np.where(what < n_species, len(declared) + what, what - n_species)
        fields |= {
            "quantities": quantities,
            "quantity_index": quantity_index,
            "species_index": np.array([quantities[q].species for q in quantity_index], dtype=int),
        }
    return fields


def _check_record_order(records: list[Record], run_ids: tuple[str, ...], names: tuple[str, ...], where: str) -> None:
    """Within each run and species (or quantity), times must rise from row to row; a repeated time is a
    duplicate."""
    last: dict[tuple[int, int], float] = {}
    for run, time, index, _, line, _, _ in records:
        key = (run, index)
        if key in last and time <= last[key]:
            problem = "repeats" if time == last[key] else "goes back from"
            raise StudyError(
                f"{where}: line {line}, column 'time'",
                f"time {time:g} {problem} the previous time {last[key]:g} of run '{run_ids[run]}', '{names[index]}'",
                "sort each run's rows by time; remove duplicates",
            )
        last[key] = time


def _read_temperatures(study: Study, runs: Runs) -> dict[int, tuple[np.ndarray, int]]:
    """The temperatures file (long layout ``run, time, temperature``): per run (index into the runs) its (time, K)
    points and the line of its first row. A run's times start at 0 and rise strictly from row to row."""
    path = study.data_file("temperatures")
    where = str(path)
    frame = read_table(path, {"run", "time", "temperature"})
    labels = _run_label(frame, where)
    lines = frame["line"].to_numpy()
    time = numeric_column(frame, "time", where)
    kelvin = _kelvin_column(frame, "temperature", study.units.temperature, where)
    points: dict[int, list[tuple[float, float]]] = {}
    first: dict[int, int] = {}
    for row, label in enumerate(labels):
        at = f"{where}: line {lines[row]}"
        r = _known_run(label, runs.labels, runs.path, at)
        if r not in points:
            if time[row] != 0:
                raise StudyError(
                    f"{at}, column 'time'",
                    f"the temperature history of run '{excerpt(label)}' starts at time {time[row]:g}, not 0",
                    "give each run's temperature at time 0 in its first row",
                )
            points[r], first[r] = [], int(lines[row])
        elif time[row] <= points[r][-1][0]:
            previous = points[r][-1][0]
            problem = "repeats" if time[row] == previous else "goes back from"
            raise StudyError(
                f"{at}, column 'time'",
                f"time {time[row]:g} {problem} the previous time {previous:g} of run '{excerpt(label)}'",
                "the times of each run's temperature history rise from row to row",
            )
        points[r].append((time[row], kelvin[row]))
    return {r: (np.array(p, dtype=float), first[r]) for r, p in points.items()}


def _check_temperature_sources(study: Study, runs: Runs, histories: dict[int, tuple[np.ndarray, int]]) -> None:
    """Each run's temperature comes from one place: a number in the runs file or rows in the temperatures file."""
    if not study.has_data("temperatures"):
        return  # a blank cell was refused while reading the runs file
    name = study.data_file("temperatures").name
    for r, label in enumerate(runs.labels):
        at = f"{runs.path}: line {runs.lines[r]}, column 'temperature'"
        stated = bool(np.isfinite(runs.temperature_K[r]))
        if stated and r in histories:
            raise StudyError(
                at,
                f"run '{excerpt(label)}' has a temperature here and a temperature history in {name} "
                f"(from line {histories[r][1]})",
                "leave this cell blank for a run whose temperatures are in the temperatures file, or remove its rows",
            )
        if not stated and r not in histories:
            raise StudyError(
                at,
                f"cell is blank and {name} has no rows for run '{excerpt(label)}'",
                "give the run's temperature here, or its temperature history in the temperatures file",
            )


def _read_feeds(study: Study, runs: Runs) -> dict[int, list[Feed]]:
    """The feeds file, one dosing interval per row: ``run``, ``start``, ``stop`` (time unit), ``rate``
    (units.volume per time unit) and the feed's concentration of each species it carries (a column each, study
    concentration unit; a blank cell is 0). Per run (index into the runs) its feeds."""
    path = study.data_file("feeds")
    where = str(path)
    species = study.species
    frame = read_table(path, {"run", "start", "stop", "rate"}, set(species))
    carried = [name for name in species if name in frame.columns]
    if not carried:
        raise StudyError(
            where,
            "no species column",
            f"add a column per species in the feeds, named after it ({', '.join(species)}), with its concentration",
        )
    labels = _run_label(frame, where)
    lines = frame["line"].to_numpy()
    start = numeric_column(frame, "start", where)
    stop = numeric_column(frame, "stop", where)
    rate = numeric_column(frame, "rate", where)
    concentration = np.zeros((len(frame), len(species)))
    for name in carried:
        concentration[:, species.index(name)] = np.nan_to_num(numeric_column(frame, name, where, allow_blank=True))
    feeds: dict[int, list[Feed]] = {}
    for row, label in enumerate(labels):
        at = f"{where}: line {lines[row]}"
        r = _known_run(label, runs.labels, runs.path, at)
        if start[row] < 0:
            raise StudyError(f"{at}, column 'start'", "a feed cannot start before time 0")
        if stop[row] <= start[row]:
            raise StudyError(
                f"{at}, column 'stop'",
                f"the feed stops at {stop[row]:g}, not after its start {start[row]:g}",
                "each row is one interval of constant rate from start to stop",
            )
        if rate[row] < 0:
            raise StudyError(f"{at}, column 'rate'", f"{rate[row]:g}: a feed rate cannot be negative")
        for name in carried:
            if concentration[row, species.index(name)] < 0:
                raise StudyError(f"{at}, column '{name}'", "a feed concentration cannot be negative")
        if all(frame[name].iloc[row] == "" for name in carried):
            raise StudyError(
                at,
                "the feed carries no species: every species cell is blank",
                "give the concentration in the feed of each species it carries (write 0 for a feed of solvent)",
            )
        feeds.setdefault(r, []).append(Feed(float(start[row]), float(stop[row]), float(rate[row]), concentration[row]))
    return feeds


def _initial_volumes(study: Study, runs: Runs, feeds: dict[int, list[Feed]]) -> np.ndarray:
    """Each run's initial liquid volume (units.volume): needed for a run with feeds and for measured amounts;
    1 where it is not given and not needed (then only ratios of volumes would enter, and none do)."""

    def why(r: int) -> str:
        if r in feeds:
            return f"run '{excerpt(runs.labels[r])}' has feeds in {study.data_file('feeds').name}"
        return "the measured values are amounts (data.measured_as: amount)"

    needed = [r for r in range(len(runs.labels)) if r in feeds or study.measured_as == "amount"]
    if runs.volume is None:
        if needed:
            raise StudyError(
                str(runs.path),
                "missing column 'volume'",
                f"{why(needed[0])}: give each run's initial liquid volume in {study.units.volume}",
            )
        return np.ones(len(runs.labels))
    for r in needed:
        if np.isnan(runs.volume[r]):
            raise StudyError(
                f"{runs.path}: line {runs.lines[r]}, column 'volume'",
                "cell is blank",
                f"{why(r)}, so its initial liquid volume is needed ({study.units.volume})",
            )
    return np.where(np.isnan(runs.volume), 1.0, runs.volume)


#: The flow reactors a ``steady_states`` row may name.
FLOW_REACTORS = ("cstr", "pfr")
#: Prefix of the columns of feed concentrations in a ``steady_states`` file.
FEED_PREFIX = "feed_"


def _read_steady_states(study: Study) -> Observations:
    """Steady states of flow reactors, one per row: ``reactor`` (cstr or pfr), ``temperature``,
    ``residence_time`` (time unit; the space time of a PFR), ``feed_<species>`` (feed concentrations), outlet
    concentrations in columns named after species (blank: not measured), and optionally ``run`` (a label) and
    ``group`` (leave-one-group-out; run-to-run variability). Each row becomes a run whose one time is its
    residence time and whose initial concentrations are its feed."""
    path = study.data_file("steady_states")
    where = str(path)
    species = study.species
    by = study.run_variability.by if study.run_variability is not None else None
    if by not in (None, "group"):
        raise StudyError(
            f"{study.path}: run_variability.by",
            f"steady-state data are grouped by their column 'group', not '{by}'",
            "write by: group, or leave 'by' out",
        )
    feed_columns = [FEED_PREFIX + name for name in species]
    frame = read_table(
        path,
        {"reactor", "temperature", "residence_time"} | ({"group"} if by else set()),
        {"run", "group", *species, *feed_columns},
    )
    lines = frame["line"].to_numpy()
    fed = [column for column in feed_columns if column in frame.columns]
    if not fed:
        raise StudyError(
            where, "no feed column", f"give the feed concentrations in columns named {FEED_PREFIX}<species>"
        )
    outlets = [name for name in species if name in frame.columns]
    if not outlets:
        raise StudyError(
            where,
            "no outlet column",
            f"add columns named after species with the outlet concentrations: {', '.join(species)}",
        )
    reactors = []
    for row, cell in enumerate(frame["reactor"]):
        if cell.lower() not in FLOW_REACTORS:
            problem = "cell is blank" if cell == "" else f"'{excerpt(cell)}' is not a flow reactor"
            raise StudyError(f"{where}: line {lines[row]}, column 'reactor'", problem, "write cstr or pfr")
        if cell.lower() == "cstr" and study.network is not None and study.network.held >= 0:
            raise StudyError(
                f"{where}: line {lines[row]}, column 'reactor'",
                "a CSTR steady state is not computed for a network with a step held at equilibrium",
                "give that step a rate (k_ref and Ea instead of fast_equilibrium), or leave out the CSTR rows",
            )
        reactors.append(cell.lower())
    kelvin = _kelvin_column(frame, "temperature", study.units.temperature, where)
    tau = numeric_column(frame, "residence_time", where, positive=True)
    feed = np.zeros((len(frame), len(species)))
    for column in fed:
        values = np.nan_to_num(numeric_column(frame, column, where, allow_blank=True))
        if np.any(values < 0):
            row = int(np.flatnonzero(values < 0)[0])
            raise StudyError(
                f"{where}: line {lines[row]}, column '{column}'", "a feed concentration cannot be negative"
            )
        feed[:, species.index(column.removeprefix(FEED_PREFIX))] = values
    for row in np.flatnonzero(feed.sum(axis=1) <= 0):
        raise StudyError(f"{where}: line {lines[row]}", "every feed concentration is zero")
    labels = _unique_run_labels(frame, where) if "run" in frame.columns else [f"row{line}" for line in lines]
    groups = tuple(labels)
    if "group" in frame.columns:
        groups = tuple(frame["group"])
        for row, group in enumerate(groups):
            if group == "":
                raise StudyError(f"{where}: line {lines[row]}, column 'group'", "cell is blank")
    records: list[Record] = []
    for name in outlets:
        values, lower, upper = _measured_column(frame, name, where, allow_blank=True)
        for row in np.flatnonzero(frame[name].to_numpy() != ""):
            records.append(
                (
                    int(row),
                    float(tau[row]),
                    species.index(name),
                    float(values[row]),
                    int(lines[row]),
                    lower[row],
                    upper[row],
                )
            )
    measured_rows = {record[0] for record in records}
    for row in range(len(frame)):
        if row not in measured_rows:
            raise StudyError(
                f"{where}: line {lines[row]}",
                "no outlet concentration is given",
                f"give at least one of {', '.join(outlets)} in each row",
            )
    _check_positive_values(study, records, where, long_layout=False, steady=True)
    setups = []
    for row, reactor in enumerate(reactors):
        if reactor == "pfr":  # isothermal plug flow at constant density: a batch run at time tau
            setups.append(RunSetup.isothermal(float(kelvin[row])))
        else:
            inflow = Feed(0.0, math.inf, 1.0 / float(tau[row]), feed[row])
            setups.append(RunSetup.isothermal(float(kelvin[row]), volume=1.0, feeds=(inflow,), overflow=True))
    return Observations(
        run_ids=tuple(labels),
        temperature_K=kelvin,
        initial=feed,
        runs_path=path,
        measurements_path=path,
        run_group=groups,
        setups=tuple(setups),
        experiment=groups,
        steady=True,
        **_measurement_fields(records, study, tuple(labels), path, path),
    )
