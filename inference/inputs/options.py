"""Command-line and API numbers (draws, chains, workers, ...) checked as input, against the schema's own limits."""

from __future__ import annotations

from ..errors import StudyError
from .schema import Sampling

_COUNTS = {
    "draws": "number of draws",
    "tune": "number of tuning steps",
    "chains": "number of chains",
    "seed": "seed",
    "cores": "number of cores",
}


def schema_limits(model: type, field: str) -> tuple[int | None, int | None]:
    """The inclusive bounds a schema model sets on one of its integer fields (None where it sets none)."""
    found = model.model_json_schema()["properties"][field]
    for part in (found, *found.get("anyOf", ())):  # an optional field keeps its bounds inside "anyOf"
        if part.get("type") == "integer":
            return part.get("minimum"), part.get("maximum")
    return None, None


def check_count(where: str, value: int, what: str, low: int | None, high: int | None) -> None:
    """``StudyError`` naming ``where`` when ``value`` lies outside [low, high] (None: no bound)."""
    if (low is not None and value < low) or (high is not None and value > high):
        if low is None:
            allowed = f"give {high} or less"
        elif high is None:
            allowed = f"give {low} or more"
        else:
            allowed = f"give {low} to {high}"
        raise StudyError(where, f"{value} is not an allowed {what}", allowed)


def sampling_overrides(options: dict[str, int | None], prefix: str = "") -> dict[str, int]:
    """The sampling options that are set, each checked against its limits in ``schema.Sampling``; the first
    out of range is a ``StudyError`` naming ``prefix + name`` (``--draws`` on the command line)."""
    for name, value in options.items():
        if value is not None:
            check_count(prefix + name, value, _COUNTS[name], *schema_limits(Sampling, name))
    return {name: value for name, value in options.items() if value is not None}
