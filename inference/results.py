"""The only writer of results: a folder built beside its target and renamed into place when complete.

A results folder is therefore either absent, the previous complete one, or the new complete one; an
interrupted or failed run leaves no partial folder and never destroys an earlier one.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from pathlib import Path
from types import TracebackType
from typing import TYPE_CHECKING

import pandas as pd

from .errors import StudyError

if TYPE_CHECKING:
    import arviz as az

#: Float format of every CSV we write: enough digits for any use, and the same bytes for the same numbers.
CSV_FLOAT_FORMAT = "%.8g"


def sha256_file(path: Path) -> str:
    """Hex sha256 of a file's bytes."""
    digest = hashlib.sha256()
    with path.open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def sha256_json(value: object) -> str:
    """Hex sha256 of the canonical JSON of a value (sorted keys, no spaces)."""
    text = json.dumps(value, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def check_target(target: Path, overwrite: bool) -> None:
    """Refuse, before any work, a target that is a file or an existing folder without ``overwrite``."""
    if target.exists() and not target.is_dir():
        raise StudyError(str(target), "the results path is a file, not a folder", "choose another --out")
    if target.exists() and not overwrite:
        raise StudyError(
            str(target), "results folder already exists", "pass --overwrite to replace it, or --out to write elsewhere"
        )
    parent = target.parent
    if parent.exists() and not parent.is_dir():
        raise StudyError(str(parent), "is a file, so the results folder cannot be made inside it")
    if parent.exists() and not os.access(parent, os.W_OK):
        raise StudyError(str(parent), "is not writable", "choose another --out")


class StagedFolder:
    """Context manager: files are written into a hidden folder beside ``target``; on a clean exit the folder
    replaces ``target`` (the old one is removed only after the new one is in place); on any exception,
    including KeyboardInterrupt, the staged folder is deleted and ``target`` is left as it was."""

    def __init__(self, target: Path, overwrite: bool) -> None:
        self.target = target
        self.overwrite = overwrite
        self.stage = target.parent / f".{target.name}.partial-{os.getpid()}"

    def __enter__(self) -> StagedFolder:
        check_target(self.target, self.overwrite)
        self.target.parent.mkdir(parents=True, exist_ok=True)
        if self.stage.exists():
            shutil.rmtree(self.stage)
        self.stage.mkdir()
        return self

    def __exit__(
        self, kind: type[BaseException] | None, error: BaseException | None, trace: TracebackType | None
    ) -> None:
        if kind is not None:
            shutil.rmtree(self.stage, ignore_errors=True)
            return
        check_target(self.target, self.overwrite)
        retired = self.target.parent / f".{self.target.name}.retired-{os.getpid()}"
        if self.target.exists():
            self.target.rename(retired)
        self.stage.rename(self.target)
        shutil.rmtree(retired, ignore_errors=True)

    def path(self, name: str) -> Path:
        """Where a file named ``name`` (may include a sub-folder) goes in the staged folder."""
        path = (self.stage / name).resolve()
        if self.stage.resolve() not in path.parents:
            raise ValueError(f"{name!r} would be written outside the results folder")
        path.parent.mkdir(parents=True, exist_ok=True)
        return path

    def write_csv(self, name: str, table: pd.DataFrame) -> None:
        table.to_csv(self.path(name), index=False, float_format=CSV_FLOAT_FORMAT, lineterminator="\n")

    def write_json(self, name: str, value: object) -> None:
        self.path(name).write_text(json.dumps(value, indent=2, sort_keys=False, default=str) + "\n")

    def write_text(self, name: str, text: str) -> None:
        self.path(name).write_text(text)


def load_results(folder: Path) -> tuple[dict, az.InferenceData]:
    """The manifest and posterior of a saved results folder; ``StudyError`` if it is not one."""
    import arviz as az

    folder = Path(folder)
    manifest_path, posterior_path = folder / "manifest.json", folder / "posterior.nc"
    if not folder.is_dir():
        raise StudyError(str(folder), "results folder not found")
    for path in (manifest_path, posterior_path):
        if not path.is_file():
            raise StudyError(str(folder), f"is not a complete results folder ({path.name} is missing)")
    try:
        manifest = json.loads(manifest_path.read_text())
    except ValueError:
        raise StudyError(str(manifest_path), "is not valid JSON") from None
    try:
        idata = az.from_netcdf(posterior_path)
    except Exception:
        raise StudyError(str(posterior_path), "cannot be read as ArviZ InferenceData") from None
    if "log_likelihood" not in idata.groups():
        raise StudyError(str(posterior_path), "has no log_likelihood group, so it cannot be compared")
    return manifest, idata
