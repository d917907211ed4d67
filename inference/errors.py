"""Errors that reach the user, and the exit codes they map to."""

from __future__ import annotations

from enum import IntEnum


class ExitCode(IntEnum):
    """Process exit codes of the ``arrhenia`` command (stable, documented in README)."""

    DONE = 0
    FAULT = 1
    BAD_INPUT = 2
    UNTRUSTED = 3
    INTERRUPTED = 130
    TERMINATED = 143


class StudyError(Exception):
    """A mistake in the user's input: a study file, a data file or a command-line argument.

    The message is one line that names the file and the key, row or column, and may end with a hint.
    It is printed as it is, with no traceback, and the command exits with ``ExitCode.BAD_INPUT``.
    """

    def __init__(self, where: str, problem: str, hint: str | None = None) -> None:
        self.where = where
        self.problem = problem
        self.hint = hint
        text = f"{where}: {problem}" if where else problem
        if hint:
            text += f" (hint: {hint})"
        super().__init__(" ".join(text.split()))
