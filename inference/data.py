"""Read and check data files, convert them to internal units, and label every row.

Each table is checked once here: missing, empty or unreadable files, missing and unknown columns, cells that
are blank or not numbers, and values that cannot be right. Errors name the file, the line and the column.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from . import units
from .errors import StudyError
from .study import Study

#: A data file larger than this is refused before it is read (a lab data set is kilobytes to megabytes).
MAX_DATA_BYTES = 100_000_000
#: Columns that every table may carry and that Arrhenia ignores.
FREE_COLUMNS = frozenset({"comment", "note"})


def read_table(path: Path, required: set[str], optional: set[str] = frozenset()) -> pd.DataFrame:
    """Read a CSV as text, check its columns, and return it with a ``line`` column (1 = the header line)."""
    where = str(path)
    if not path.exists():
        raise StudyError(where, "data file not found", "paths in a study file are relative to the study file")
    if path.is_dir():
        raise StudyError(where, "is a folder, not a data file")
    try:
        size = path.stat().st_size
        if size > MAX_DATA_BYTES:
            raise StudyError(where, f"is {size} bytes, more than the {MAX_DATA_BYTES} bytes a data file may have")
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, skipinitialspace=True, comment="#")
    except PermissionError:
        raise StudyError(where, "cannot be read (permission denied)") from None
    except pd.errors.EmptyDataError:
        raise StudyError(where, "is empty", "the first line names the columns") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise StudyError(where, f"is not a readable CSV table ({str(exc).splitlines()[0]})") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    known = required | optional | FREE_COLUMNS
    for column in frame.columns:
        if column not in known:
            close = difflib.get_close_matches(column, sorted(required | optional), n=1, cutoff=0.6)
            hint = f"did you mean '{close[0]}'?" if close else f"known columns: {', '.join(sorted(known))}"
            raise StudyError(where, f"unknown column '{column}'", hint)
    if len(set(frame.columns)) != len(frame.columns):
        raise StudyError(where, "a column name appears twice")
    missing = sorted(required - set(frame.columns))
    if missing:
        raise StudyError(where, f"missing column '{missing[0]}'", f"the columns are: {', '.join(sorted(required))}")
    if frame.empty:
        raise StudyError(where, "has a header but no data rows")
    frame = frame.map(lambda cell: cell.strip() if isinstance(cell, str) else cell)
    frame.insert(0, "line", np.arange(2, len(frame) + 2))
    return frame


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
            raise StudyError(f"{where}: line {line}, column '{column}'", f"'{cell}' is not a finite number")
        if positive and value <= 0:
            raise StudyError(f"{where}: line {line}, column '{column}'", f"{cell} must be positive")
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
            if label not in names:
                close = difflib.get_close_matches(label, names, n=1)
                hint = f"did you mean '{close[0]}'?" if close else f"the study's reactions: {', '.join(names)}"
                raise StudyError(
                    f"{where}: line {frame['line'].iloc[row]}, column 'reaction'",
                    f"'{label}' is not a reaction of the study",
                    hint,
                )
            index[row] = names.index(label)
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
