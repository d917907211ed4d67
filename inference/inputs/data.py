"""Read and check data files, convert them to internal units, and label every row.

Each table is checked once here: missing, empty or unreadable files, missing and unknown columns, cells that
are blank or not numbers, and values that cannot be right. Errors name the file, the line and the column.
"""

from __future__ import annotations

import csv
import difflib
import functools
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import StudyError
from ..physics.conditions import Conditions, RunSetup, build_conditions, isothermal_conditions
from . import units
from .files import excerpt, read_text, shown_path
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
    known = required | optional | FREE_COLUMNS
    for column in columns:
        if column not in known:
            close = difflib.get_close_matches(column, sorted(required | optional), n=1, cutoff=0.6)
            hint = f"did you mean '{close[0]}'?" if close else f"known columns: {', '.join(sorted(known))}"
            raise StudyError(where, f"unknown column '{excerpt(column)}'", hint)
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
    temperature_raw = numeric_column(frame, "temperature", where)
    for row, value in enumerate(temperature_raw):
        units.to_kelvin(
            value, study.units.temperature, f"{where}: line {frame['line'].iloc[row]}, column 'temperature'"
        )
    temperature = units.to_kelvin(temperature_raw, study.units.temperature, where)
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
    """Concentration-time data of isothermal batch runs.

    Runs (R): ``run_ids``, ``temperature_K`` (kelvin), ``initial`` (R, N) in the study's concentration unit,
    ``times[r]`` the sorted distinct sampling times of run r (study time unit).
    Measurements (M), one per observed value: ``run_index``, ``time_index`` (into ``times[run]``),
    ``species_index`` (into ``Study.species``), ``value`` (concentration unit) and ``line`` (file line).
    ``run_group[r]``: the group of run r for run-to-run variability (the ``run_variability.by`` column, or
    the run itself).
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


@dataclass(frozen=True)
class Runs:
    """The runs table: labels, temperatures (K), initial concentrations (runs, species), groups, its path."""

    labels: tuple[str, ...]
    temperature_K: np.ndarray
    initial: np.ndarray
    groups: tuple[str, ...]
    path: Path


def read_runs(study: Study) -> Runs:
    """Runs table: ``run``, ``temperature``, the initial concentration of every species (one column each) and,
    with ``run_variability.by``, that group column."""
    path = study.data_file("runs")
    where = str(path)
    species = study.species
    by = study.run_variability.by if study.run_variability is not None else None
    if by is not None and by in {"run", "temperature", *species}:
        raise StudyError(
            f"{study.path}: run_variability.by", f"'{by}' is a column with its own meaning", "name a group column"
        )
    frame = read_table(path, {"run", "temperature", *species} | ({by} if by else set()))
    labels = _run_label(frame, where)
    seen: dict[str, int] = {}
    for row, label in enumerate(labels):
        if label in seen:
            raise StudyError(
                f"{where}: line {frame['line'].iloc[row]}, column 'run'",
                f"run '{excerpt(label)}' appears twice (first on line {seen[label]})",
            )
        seen[label] = int(frame["line"].iloc[row])
    raw = numeric_column(frame, "temperature", where)
    for row, value in enumerate(raw):
        units.to_kelvin(
            value, study.units.temperature, f"{where}: line {frame['line'].iloc[row]}, column 'temperature'"
        )
    temperature = units.to_kelvin(raw, study.units.temperature, where)
    initial = np.column_stack([numeric_column(frame, name, where) for name in species])
    bad = np.argwhere(initial < 0)
    if bad.size:
        row, col = bad[0]
        raise StudyError(
            f"{where}: line {frame['line'].iloc[row]}, column '{species[col]}'",
            "an initial concentration cannot be negative",
        )
    if np.any(initial.sum(axis=1) <= 0):
        row = int(np.flatnonzero(initial.sum(axis=1) <= 0)[0])
        raise StudyError(f"{where}: line {frame['line'].iloc[row]}", "every initial concentration is zero")
    groups = tuple(labels)
    if by is not None:
        groups = tuple(frame[by])
        for row, group in enumerate(groups):
            if group == "":
                raise StudyError(f"{where}: line {frame['line'].iloc[row]}, column '{by}'", "cell is blank")
    return Runs(tuple(labels), temperature, initial, groups, path)


def read_observations(study: Study) -> Observations:
    """Read runs and measurements (long layout ``run, time, species, value`` or wide ``run, time, <species>``)."""
    runs = read_runs(study)
    run_ids, temperature, initial, runs_path = runs.labels, runs.temperature_K, runs.initial, runs.path
    path = study.data_file("measurements")
    where = str(path)
    species = study.species
    with_header = read_table(path, {"run", "time"}, {"species", "value", *species})
    columns = set(with_header.columns)
    long_layout = "species" in columns or "value" in columns
    if long_layout:
        for needed in ("species", "value"):
            if needed not in columns:
                raise StudyError(
                    where, f"missing column '{needed}'", "the long layout has columns run, time, species, value"
                )
        extra = sorted(columns & set(species))
        if extra:
            raise StudyError(
                where,
                f"column '{extra[0]}' mixes the wide layout into the long one",
                "use either run, time, species, value or run, time and one column per species",
            )
    labels = _run_label(with_header, where)
    time = numeric_column(with_header, "time", where)
    lines = with_header["line"].to_numpy()
    for row, label in enumerate(labels):
        if label not in run_ids:
            close = difflib.get_close_matches(label, run_ids, n=1)
            hint = f"did you mean '{close[0]}'?" if close else f"the runs file has: {', '.join(run_ids[:8])}"
            raise StudyError(
                f"{where}: line {lines[row]}, column 'run'", f"run '{excerpt(label)}' is not in {runs_path.name}", hint
            )
        if time[row] < 0:
            raise StudyError(f"{where}: line {lines[row]}, column 'time'", "time cannot be negative")

    records: list[tuple[int, float, int, float, int]] = []
    if long_layout:
        values = numeric_column(with_header, "value", where)
        for row, name in enumerate(with_header["species"]):
            column = _position(name, species, "species", f"{where}: line {lines[row]}")
            records.append((run_ids.index(labels[row]), time[row], column, values[row], lines[row]))
    else:
        measured = [name for name in species if name in columns]
        if not measured:
            raise StudyError(where, "no species column", f"add columns named after species: {', '.join(species)}")
        for name in measured:
            values = numeric_column(with_header, name, where, allow_blank=True)
            for row in range(len(with_header)):
                if with_header[name].iloc[row] != "":
                    records.append(
                        (run_ids.index(labels[row]), time[row], species.index(name), values[row], lines[row])
                    )
    if not records:
        raise StudyError(where, "has no measured values")
    _check_record_order(records, run_ids, species, where)
    positive_noise = study.noise.model in ("proportional", "robust")
    for _, _, index, value, line in records:
        if positive_noise and value <= 0:
            column = "value" if long_layout else species[index]
            raise StudyError(
                f"{where}: line {line}, column '{column}'",
                f"{value:g} is not positive, but '{study.noise.model}' noise works on the log of values",
                "use noise.model: absolute, or leave the cell blank",
            )
    records.sort(key=lambda r: (r[0], r[1], r[2]))
    run_index = np.array([r[0] for r in records], dtype=int)
    measured_runs = set(run_index.tolist())
    for r, label in enumerate(run_ids):
        if r not in measured_runs:
            raise StudyError(f"{runs_path}", f"run '{excerpt(label)}' has no measurements in {path.name}")
    times = tuple(np.unique([rec[1] for rec in records if rec[0] == r]) for r in range(len(run_ids)))
    time_index = np.array([int(np.searchsorted(times[rec[0]], rec[1])) for rec in records], dtype=int)
    return Observations(
        run_ids=run_ids,
        temperature_K=temperature,
        initial=initial,
        times=times,
        run_index=run_index,
        time_index=time_index,
        species_index=np.array([r[2] for r in records], dtype=int),
        value=np.array([r[3] for r in records]),
        line=np.array([r[4] for r in records], dtype=int),
        runs_path=runs_path,
        measurements_path=path,
        run_group=runs.groups,
    )


def _check_record_order(records: list, run_ids: tuple[str, ...], species: tuple[str, ...], where: str) -> None:
    """Within each run and species, times must rise from row to row; a repeated time is a duplicate."""
    last: dict[tuple[int, int], float] = {}
    for run, time, index, _, line in records:
        key = (run, index)
        if key in last and time <= last[key]:
            problem = "repeats" if time == last[key] else "goes back from"
            raise StudyError(
                f"{where}: line {line}, column 'time'",
                f"time {time:g} {problem} the previous time {last[key]:g} of run '{run_ids[run]}', "
                f"species '{species[index]}'",
                "sort each run's rows by time; remove duplicates",
            )
        last[key] = time
