"""User-facing error types: one clear line naming file, line, key path, problem and fix."""

from __future__ import annotations


class GroundingError(Exception):
    """Base class of every error that the command line reports as one line with exit code 2."""


class CaseError(GroundingError):
    """A problem in an input file, located by file, line and key path.

    Parameters
    ----------
    file : str
        Path of the input file as the user gave it.
    line : int or None
        1-based line number in that file, when known.
    path : str
        Key path inside the file, e.g. ``electrodes.rods[2].length``; empty for the whole file.
    problem : str
        What is wrong and what would be right, as one sentence fragment.
    """

    def __init__(self, file: str, line: int | None, path: str, problem: str):
        self.file = file
        self.line = line
        self.path = path
        self.problem = problem
        where = f"{file}:{line}" if line else f"{file}"
        subject = f"{path} " if path else ""
        super().__init__(f"{where}: {subject}{problem}")


class ModelTooLargeError(GroundingError):
    """The discretised model would not fit in memory."""
