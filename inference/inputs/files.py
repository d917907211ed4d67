"""Open and read users' files safely: regular files only, never blocking, never more than a stated bound.

Every reader of a user's file (study and scenario YAML, data CSVs) comes through here, so a FIFO,
a device, a folder, a symbolic-link loop, an impossible path or a decompression bomb is refused with one line
naming the file, before anything is parsed.
"""

from __future__ import annotations

import bz2
import errno
import gzip
import lzma
import os
import stat
import zipfile
import zlib
from contextlib import AbstractContextManager, nullcontext
from pathlib import Path
from typing import BinaryIO

from ..errors import StudyError

#: Echoed user text (a cell, a column name, a key) is cut to this many characters.
EXCERPT_CHARS = 40
#: Bytes read per step; a bound is checked after each step, so at most this much is read past it.
_BLOCK = 1 << 16
#: Compressed data files are read by their suffix (as they were when pandas read them).
_COMPRESSED = {".gz": "gzip", ".bz2": "bzip2", ".xz": "xz", ".zip": "zip"}


def _escaped(text: str) -> str:
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


def excerpt(text: object, limit: int = EXCERPT_CHARS) -> str:
    """User text made fit for a one-line message: control characters escaped, cut to ``limit`` characters with
    an ellipsis (ASCII, so that any terminal encoding can print it)."""
    text = str(text)
    return _escaped(text[: limit - 3]) + "..." if len(text) > limit else _escaped(text)


def shown_path(path: Path | str) -> str:
    """A path as an error message shows it: whole, with control characters (a NUL, a newline) escaped."""
    return _escaped(str(path))


def _kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "is a folder, not a file"
    for test, name in (
        (stat.S_ISFIFO, "a named pipe (FIFO)"),
        (stat.S_ISCHR, "a character device"),
        (stat.S_ISBLK, "a block device"),
        (stat.S_ISSOCK, "a socket"),
    ):
        if test(mode):
            return f"is {name}, not a regular file"
    return "is not a regular file"


def _os_error(error: OSError) -> str:
    """What an operating-system error while finding or opening a user's file means, in a few words."""
    if isinstance(error, FileNotFoundError):
        return "file not found"
    if isinstance(error, PermissionError):
        return "cannot be read (permission denied)"
    if error.errno == errno.ELOOP:
        return "is a symbolic link that loops (or a chain of too many links)"
    if error.errno == errno.ENAMETOOLONG:
        return "the path or a name in it is too long for the file system"
    if error.errno == errno.ENOTDIR:
        return "file not found (a part of the path is a file, not a folder)"
    return f"cannot be read ({error.strerror or error})"


def resolve(path: Path) -> Path:
    """``path`` made absolute with its links followed; ``StudyError`` if it cannot be (NUL, link loop, ...)."""
    try:
        return path.resolve()
    except ValueError:
        raise StudyError(shown_path(path), "the path contains a NUL character") from None
    except RuntimeError:  # pathlib's report of a symbolic-link loop
        raise StudyError(shown_path(path), _os_error(OSError(errno.ELOOP, "loop"))) from None
    except OSError as error:
        raise StudyError(shown_path(path), _os_error(error)) from None


def _open_for_reading(path: Path) -> int:
    """A read-only descriptor; O_NONBLOCK so that a FIFO swapped in after the check cannot block the open."""
    return os.open(path, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_NOCTTY", 0))


def open_regular(path: Path, missing_hint: str | None = None) -> BinaryIO:
    """Open a user's file for binary reading, refusing anything but a regular file before opening it;
    ``missing_hint`` is the hint given when there is no such file."""
    where = shown_path(path)
    try:
        mode = os.stat(path).st_mode
        if not stat.S_ISREG(mode):
            raise StudyError(where, _kind(mode))
        descriptor = _open_for_reading(path)
    except ValueError:  # a NUL character in the path
        raise StudyError(where, "the path contains a NUL character") from None
    except OSError as error:
        hint = missing_hint if isinstance(error, FileNotFoundError) else None
        raise StudyError(where, _os_error(error), hint) from None
    handle = os.fdopen(descriptor, "rb")
    mode = os.fstat(descriptor).st_mode
    if not stat.S_ISREG(mode):  # replaced between the check and the open
        handle.close()
        raise StudyError(where, _kind(mode))
    return handle


def read_bytes(
    path: Path,
    what: str,
    max_bytes: int,
    max_rows: int | None = None,
    decompress: bool = False,
    missing_hint: str | None = None,
) -> bytes:
    """The bytes of a user's regular file, at most ``max_bytes`` of them (decompressed, where ``decompress`` and
    the suffix say so) and at most ``max_rows`` lines after the first (a table's header); reading stops as soon
    as either bound is passed.

    ``what`` names the kind of file in messages ("data file", "YAML file", ...).
    """
    where = shown_path(path)
    compression = _COMPRESSED.get(path.suffix.lower()) if decompress else None
    with open_regular(path, missing_hint) as raw:
        size = os.fstat(raw.fileno()).st_size
        if size > max_bytes:  # compressed or not: a zip's member list is read whole before any bound applies
            raise StudyError(where, f"is {size} bytes, more than the {max_bytes} bytes a {what} may have")
        try:
            with _decompressed(raw, compression, where) as stream:
                blocks, total, lines, after_cr = [], 0, 0, False
                while block := stream.read(_BLOCK):
                    blocks.append(block)
                    total += len(block)
                    # line breaks as csv sees them: \n, \r\n and a lone \r (a \r\n split between blocks too)
                    lines += block.count(b"\n") + block.count(b"\r") - block.count(b"\r\n")
                    lines -= after_cr and block.startswith(b"\n")
                    after_cr = block.endswith(b"\r")
                    if total > max_bytes:
                        unpacked = " once decompressed" if compression else ""
                        raise StudyError(where, f"is more than {max_bytes} bytes{unpacked}, the most a {what} may have")
                    if max_rows is not None and lines > max_rows + 1:
                        raise StudyError(where, f"has more than the {max_rows} rows a {what} may have")
        # RuntimeError and NotImplementedError: an encrypted zip, or one packed by a method zipfile lacks
        except (
            OSError,
            EOFError,
            zlib.error,
            lzma.LZMAError,
            zipfile.BadZipFile,
            RuntimeError,
            NotImplementedError,
        ) as error:
            if isinstance(error, PermissionError):
                raise StudyError(where, "cannot be read (permission denied)") from None
            reason = str(error).splitlines()[0] if str(error) else type(error).__name__
            kind = f"{compression} file" if compression else "file"
            raise StudyError(where, f"is not a readable {kind} ({excerpt(reason, 80)})") from None
    return b"".join(blocks)


def _decompressed(raw: BinaryIO, compression: str | None, where: str) -> AbstractContextManager[BinaryIO]:
    """A context manager yielding the decompressed stream of ``raw`` (read in bounded steps by the caller)."""
    if compression is None:
        return nullcontext(raw)
    if compression == "gzip":
        return gzip.GzipFile(fileobj=raw, mode="rb")
    if compression == "bzip2":
        return bz2.BZ2File(raw, mode="rb")
    if compression == "xz":
        return lzma.LZMAFile(raw, mode="rb")
    archive = zipfile.ZipFile(raw)
    members = [info for info in archive.infolist() if not info.is_dir()]
    if len(members) != 1:
        raise StudyError(where, f"holds {len(members)} files; a zipped data file holds exactly one table")
    return archive.open(members[0])


def read_text(
    path: Path,
    what: str,
    max_bytes: int,
    max_rows: int | None = None,
    decompress: bool = False,
    missing_hint: str | None = None,
) -> str:
    """A user's file as UTF-8 text (a byte-order mark is dropped), read within the bounds of ``read_bytes``."""
    raw = read_bytes(path, what, max_bytes, max_rows, decompress, missing_hint)
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as error:
        line = raw[: error.start].count(b"\n") + 1
        raise StudyError(
            f"{shown_path(path)}: line {line}", f"not UTF-8 text (byte {error.start} of the file)"
        ) from None
