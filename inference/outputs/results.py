"""The only writer of results: a folder built beside its target and swapped into place when complete.

A results folder is therefore either absent, the previous complete one, or the new complete one. The rules:

- ``--overwrite`` replaces only a folder Arrhenia wrote (one with an Arrhenia ``manifest.json`` listing its
  files); never the current folder, a folder holding the study or its data, or a folder with files of the user's.
- One process writes a target at a time: a lock file ``.<name>.lock`` beside it (``fcntl.flock``, released by the
  kernel when the process dies, even by ``kill -9``) is held from the first check to the final swap.
- The swap is atomic where the file system allows (Linux ``renameat2(RENAME_EXCHANGE)``); elsewhere the old
  folder is renamed to ``.<name>.retired-<pid>@<host>`` and the new one into place. A crash between those two
  renames leaves the old results under the retired name; the next write into that parent renames them back.
- Hidden ``.<name>.partial-<pid>@<host>`` and ``.<name>.retired-<pid>@<host>`` folders of processes of this
  host that no longer run are removed by the next write into that parent (with lock files nobody holds); those
  of live processes, and of other hosts sharing the folder, are never touched.
"""

from __future__ import annotations

import ctypes
import datetime as _dt
import errno
import fcntl
import hashlib
import json
import os
import platform
import re
import shutil
import sys
from collections.abc import Iterable, Iterator
from contextlib import contextmanager, suppress
from importlib import metadata
from pathlib import Path
from types import TracebackType
from typing import TYPE_CHECKING

import pandas as pd

from .._version import __version__
from ..errors import StudyError
from ..inputs.files import read_bytes
from ..processes import HOST, pid_alive

if TYPE_CHECKING:
    import arviz as az

#: Float format of every CSV we write: enough digits for any use, and the same bytes for the same numbers.
CSV_FLOAT_FORMAT = "%.8g"
MANIFEST = "manifest.json"
#: A manifest is a few kilobytes; a larger file named so is not one of ours.
MAX_MANIFEST_BYTES = 10_000_000
#: Files of a fit that ``predict``, ``compare`` and reuse read, and whose hashes they verify.
BOUND_FILES = ("posterior.nc", "study.yaml")

_HIDDEN = re.compile(r"^\.(?P<name>.+)\.(?P<kind>partial|retired)-(?P<pid>\d+)(?:@(?P<host>.+))?$")
_LOCK = re.compile(r"^\.(?P<name>.+)\.lock$")
_HELD: dict[Path, int] = {}  # targets this process holds the lock of -> open lock file descriptor


#: Packages whose versions every manifest records.
PACKAGES = (
    "arrhenia",
    "pymc",
    "pytensor",
    "arviz",
    "numpy",
    "scipy",
    "pandas",
    "xarray",
    "pydantic",
    "pint",
    "matplotlib",
)


def package_versions() -> dict[str, str]:
    """Python's and each of ``PACKAGES``' installed version."""
    found = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            found[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            found[name] = "not installed"
    return found


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


def read_manifest(folder: Path) -> dict | None:
    """The manifest of a folder Arrhenia wrote, or None when there is no readable Arrhenia manifest."""
    path = Path(folder) / MANIFEST
    try:
        manifest = json.loads(read_bytes(path, "manifest", MAX_MANIFEST_BYTES))
    except (StudyError, OSError, ValueError):
        return None
    if not isinstance(manifest, dict) or "arrhenia_version" not in manifest:
        return None
    return manifest


def _recorded_files(manifest: dict) -> dict[str, str] | None:
    files = manifest.get("files")
    if not isinstance(files, dict) or not all(isinstance(v, str) for v in files.values()):
        return None
    return files


def foreign_entries(folder: Path, manifest: dict) -> list[str]:
    """Entries of ``folder`` that its manifest does not list, other than results folders Arrhenia wrote
    inside it (predictions below a fit). Manifests written before file lists existed list nothing: then only
    the manifest vouches for the folder."""
    files = _recorded_files(manifest)
    if files is None:
        return []
    listed_tops = {name.split("/")[0] for name in files} | {MANIFEST}
    foreign = []
    for entry in sorted(Path(folder).iterdir()):
        if entry.name in listed_tops:
            continue
        if entry.is_dir() and not entry.is_symlink() and read_manifest(entry) is not None:
            continue
        foreign.append(entry.name)
    return foreign


def _is_within(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def _resolved(path: Path) -> Path:
    try:
        return Path(path).resolve()
    except (OSError, RuntimeError, ValueError):
        return Path(os.path.abspath(path))


def check_writable_parent(folder: Path) -> None:
    """Refuse a folder that exists as a file or cannot be written in (for folders we write *into*)."""
    if folder.exists() and not folder.is_dir():
        raise StudyError(str(folder), "is a file, so the results folder cannot be made inside it")
    if folder.exists() and not os.access(folder, os.W_OK | os.X_OK):
        raise StudyError(str(folder), "is not writable", "choose another --out")


def check_target(target: Path, overwrite: bool, keep: Iterable[Path] = ()) -> None:
    """Refuse, before any work, a target Arrhenia may not write or replace.

    ``keep`` names the inputs of the command (study, data, scenarios, a results folder being read): a target
    that is or contains one of them is refused even with ``overwrite``.
    """
    target = Path(target)
    where = str(target)
    here, resolved = _resolved(Path.cwd()), _resolved(target)
    if _is_within(here, resolved):
        raise StudyError(where, "is the current folder or contains it", "give --out a folder of its own")
    for path in keep:
        if _is_within(_resolved(path), resolved):
            raise StudyError(where, f"contains {path}, an input of this command", "give --out a folder of its own")
    if target.is_symlink():
        raise StudyError(where, "is a symbolic link", "give --out a real folder path")
    if target.exists() and not target.is_dir():
        raise StudyError(where, "the results path is a file, not a folder", "choose another --out")
    if target.exists():
        if not overwrite:
            raise StudyError(
                where, "results folder already exists", "pass --overwrite to replace it, or --out to write elsewhere"
            )
        manifest = read_manifest(target)
        if manifest is None:
            raise StudyError(
                where,
                "exists and is not a results folder Arrhenia wrote (no Arrhenia manifest.json), so it is not replaced",
                "choose another --out",
            )
        foreign = foreign_entries(target, manifest)
        if foreign:
            shown = ", ".join(foreign[:3]) + (" ..." if len(foreign) > 3 else "")
            raise StudyError(
                where, f"holds files Arrhenia did not write ({shown}), so it is not replaced", "move them first"
            )
        for folder, _, _names in os.walk(target):
            if not os.access(folder, os.W_OK | os.X_OK):
                raise StudyError(folder, "is not writable, so the old results cannot be replaced")
    check_writable_parent(target.parent)


def clean_stale(parent: Path) -> list[str]:
    """Remove staging and retired folders of dead processes in ``parent``; a retired folder whose results
    folder is missing (a crash between the two renames of a swap) is renamed back. Returns what was done."""
    done: list[str] = []
    try:
        entries = sorted(Path(parent).iterdir())
    except OSError:
        return done
    for entry in entries:
        lock = _LOCK.match(entry.name)
        if lock and entry.is_file():  # left by a killed process; removed only when nobody holds it
            with _lock(entry.parent / lock["name"], wait=False):
                pass
            continue
        match = _HIDDEN.match(entry.name)
        if not match or not entry.is_dir() or match["host"] not in (None, HOST) or pid_alive(int(match["pid"])):
            continue
        original = entry.parent / match["name"]
        if match["kind"] == "retired" and not original.exists():
            with _lock(original, wait=False) as held:
                if held and not original.exists():
                    entry.rename(original)
                    done.append(f"restored {original} from an interrupted replacement")
                    continue
        shutil.rmtree(entry, ignore_errors=True)
        done.append(f"removed {entry.name}, left by a process that no longer runs")
    return done


def _lock_path(target: Path) -> Path:
    return target.parent / f".{target.name}.lock"


@contextmanager
def _lock(target: Path, wait: bool = False) -> Iterator[bool]:
    """Hold the lock of ``target`` (re-entrant in one process); yields whether it is held."""
    key = _resolved(target)
    if key in _HELD:
        yield True
        return
    path = _lock_path(target)
    while True:
        descriptor = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(descriptor, fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
        except BlockingIOError:
            os.close(descriptor)
            yield False
            return
        try:  # the file may have been unlinked by its last holder between our open and flock: start again
            if os.fstat(descriptor).st_ino == os.stat(path).st_ino:
                break
        except FileNotFoundError:
            pass
        os.close(descriptor)
    _HELD[key] = descriptor
    try:
        os.ftruncate(descriptor, 0)
        os.write(descriptor, f"{os.getpid()}\n".encode())
        yield True
    finally:
        del _HELD[key]
        with suppress(FileNotFoundError):
            path.unlink()
        os.close(descriptor)


@contextmanager
def reserve(target: Path, overwrite: bool, keep: Iterable[Path] = ()) -> Iterator[None]:
    """Check ``target`` and hold it for this process until the block ends: a second Arrhenia process that
    wants the same folder is refused at once instead of after its work."""
    target = Path(target)
    keep = tuple(keep)
    check_target(target, overwrite, keep)
    parent = target.parent
    parent.mkdir(parents=True, exist_ok=True)
    with _lock(target) as held:
        if not held:
            owner = _lock_path(target).read_text().strip() if _lock_path(target).exists() else "?"
            raise StudyError(
                str(target),
                f"another Arrhenia process (pid {owner or '?'}) is writing this results folder now",
                "wait for it to finish, or choose another --out",
            )
        clean_stale(parent)
        check_target(target, overwrite, keep)
        yield


_RENAME_EXCHANGE = 2
_AT_FDCWD = -100


def _exchange(first: Path, second: Path) -> bool:
    """Swap two paths atomically (Linux renameat2); False where the system or file system cannot."""
    try:
        renameat2 = ctypes.CDLL(None, use_errno=True).renameat2
    except (AttributeError, OSError):
        return False
    renameat2.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    if renameat2(_AT_FDCWD, os.fsencode(first), _AT_FDCWD, os.fsencode(second), _RENAME_EXCHANGE) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP, errno.EOPNOTSUPP):
        return False
    raise OSError(code, os.strerror(code), str(second))


class StagedFolder:
    """Context manager: files are written into a hidden folder beside ``target``; on a clean exit the folder
    replaces ``target`` (see the module's rules); on any exception, including KeyboardInterrupt, the staged
    folder is deleted and ``target`` is left as it was. Finish with ``write_manifest``, which lists and hashes
    every file written."""

    def __init__(self, target: Path, overwrite: bool, keep: Iterable[Path] = ()) -> None:
        self.target = Path(target)
        self.overwrite = overwrite
        self.keep = tuple(keep)
        self.stage = self.target.parent / f".{self.target.name}.partial-{os.getpid()}@{HOST}"
        self._reservation = reserve(self.target, overwrite, self.keep)

    def __enter__(self) -> StagedFolder:
        self._reservation.__enter__()
        try:
            if self.stage.exists():
                shutil.rmtree(self.stage)
            self.stage.mkdir()
        except BaseException:
            self._reservation.__exit__(None, None, None)
            raise
        return self

    def __exit__(
        self, kind: type[BaseException] | None, error: BaseException | None, trace: TracebackType | None
    ) -> None:
        try:
            if kind is not None:
                shutil.rmtree(self.stage, ignore_errors=True)
                return
            try:
                check_target(self.target, self.overwrite, self.keep)
                self._swap()
            except BaseException:
                shutil.rmtree(self.stage, ignore_errors=True)
                raise
        finally:
            self._reservation.__exit__(None, None, None)

    def _swap(self) -> None:
        target, stage = self.target, self.stage
        try:
            if not target.exists():
                stage.rename(target)
                return
            if _exchange(stage, target):  # stage now holds the old results
                shutil.rmtree(stage, ignore_errors=True)
                return
            retired = target.parent / f".{target.name}.retired-{os.getpid()}@{HOST}"
            target.rename(retired)
            stage.rename(target)
            shutil.rmtree(retired, ignore_errors=True)
        except OSError as error:
            raise StudyError(str(target), f"the new results could not be moved into place ({error.strerror})") from None

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

    def write_manifest(self, kind: str, fields: dict, command_line: str | None = None) -> None:
        """Write ``manifest.json`` last: what wrote the folder (``kind``: fit, comparison, predictions, ...), when,
        by which command and package versions, the workflow's ``fields``, and under ``files`` the sha256 of every
        file staged so far. The one manifest builder of every results folder."""
        files = {
            path.relative_to(self.stage).as_posix(): sha256_file(path)
            for path in sorted(self.stage.rglob("*"))
            if path.is_file() and path.name != MANIFEST
        }
        header = {
            "arrhenia_version": __version__,
            "kind": kind,
            "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
            "command_line": command_line or " ".join(sys.argv),
        }
        self.write_json(MANIFEST, {**header, **fields, "versions": package_versions(), "files": files})


def write_table(path: Path, table: pd.DataFrame) -> None:
    """Replace one table file atomically (a reader sees the old table or the new one, never half of one); for
    tables that live beside results folders rather than in one (``batch_summary.csv``)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    staged = path.with_name(f".{path.name}.{os.getpid()}@{HOST}")
    try:
        table.to_csv(staged, index=False, float_format=CSV_FLOAT_FORMAT, lineterminator="\n")
        os.replace(staged, path)
    finally:
        with suppress(FileNotFoundError):
            staged.unlink()


def binding_differences(folder: Path, manifest: dict, names: Iterable[str] = BOUND_FILES) -> list[str]:
    """Files of a results folder whose bytes differ from the hashes its manifest recorded (empty: they match)."""
    files = _recorded_files(manifest)
    if files is None:
        return [f"{Path(folder) / MANIFEST} records no file hashes (written by an older Arrhenia; fit again)"]
    differences = []
    for name in names:
        path = Path(folder) / name
        if name not in files:
            differences.append(f"{path} is not recorded in the manifest")
        elif not path.is_file():
            differences.append(f"{path} is missing")
        elif sha256_file(path) != files[name]:
            differences.append(f"{path} is not the file this fit wrote (its sha256 differs from the manifest's)")
    return differences


def load_results(folder: Path) -> tuple[dict, az.InferenceData]:
    """The manifest and posterior of a saved results folder; ``StudyError`` if it is not one, or if its
    posterior or resolved study are not the files the fit wrote."""
    import arviz as az

    folder = Path(folder)
    manifest_path, posterior_path = folder / MANIFEST, folder / "posterior.nc"
    if not folder.is_dir():
        raise StudyError(str(folder), "results folder not found")
    for path in (manifest_path, posterior_path):
        if not path.is_file():
            raise StudyError(str(folder), f"is not a complete results folder ({path.name} is missing)")
    manifest = read_manifest(folder)
    if manifest is None or not isinstance(manifest.get("data"), dict):
        raise StudyError(str(manifest_path), "is not a fit manifest Arrhenia wrote")
    differences = binding_differences(folder, manifest)
    if differences:
        raise StudyError(differences[0], "refused", "fit the study again to get results whose files belong together")
    try:
        idata = az.from_netcdf(posterior_path)
    except Exception:
        raise StudyError(str(posterior_path), "cannot be read as ArviZ InferenceData") from None
    if "log_likelihood" not in idata.groups():
        raise StudyError(str(posterior_path), "has no log_likelihood group, so it cannot be compared")
    return manifest, idata
