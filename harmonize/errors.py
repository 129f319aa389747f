"""Errors raised by the library, and the reject reason codes for bad cells.

Configuration and file problems are exceptions (the build cannot go on); problems in single
cells are never exceptions: they become rows of the rejects table with a `RejectReason`.
The library never prints or exits; the CLI turns these into one-line messages and exit codes.
"""

from __future__ import annotations

import os
from enum import StrEnum


class HarmonizeError(Exception):
    """Base class. Structured fields name where the problem is; `str()` builds the message."""

    exit_code = 3

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        row: int | None = None,
        column: str | None = None,
        hint: str | None = None,
    ) -> None:
        message, column, hint = (_one_line(t) if t else t for t in (message, column, hint))
        super().__init__(message)
        self.message = message
        self.file = file
        self.row = row
        self.column = column
        self.hint = hint

    def __str__(self) -> str:
        where = []
        if self.file:  # the other parts were made one line in __init__
            where.append(_one_line(str(self.file)))
        if self.row is not None:  # data rows count from 1; row 0 is the header
            where.append(f"row {self.row}" if self.row else "header row")
        if self.column:
            where.append(f"column '{self.column}'")
        text = ": ".join([", ".join(where), self.message]) if where else self.message
        if self.hint:
            text += f" ({self.hint})"
        return text

    def __reduce__(self):  # keep structured fields when pickled (e.g. across Dask workers)
        return (
            _rebuild,
            (type(self), self.message, self.file, self.row, self.column, self.hint),
        )


def _one_line(text: str) -> str:
    """An error is one line, whatever a file name, header or quoted library message holds (a
    quoted header name may hold a line break): breaks are written as the escapes \\n, \\r."""
    return text.replace("\r", "\\r").replace("\n", "\\n")


def _rebuild(cls, message, file, row, column, hint):
    return cls(message, file=file, row=row, column=column, hint=hint)


class ConfigError(HarmonizeError, ValueError):
    """The project file, a mapping or the vocabulary is invalid."""


class SourceNotFoundError(HarmonizeError, FileNotFoundError):
    """A declared file does not exist (or is a folder)."""

    @classmethod
    def at(cls, path: str | os.PathLike, what: str = "file", hint: str | None = None):
        """The error for a path that is not a file: missing, or a folder."""
        message = f"is a folder, not a {what}" if os.path.isdir(path) else f"{what} not found"
        return cls(message, file=str(path), hint=hint)


class UnsafePathError(HarmonizeError, PermissionError):
    """A path leaves the project or package folder, or is a URL."""


class SourceReadError(HarmonizeError, ValueError):
    """A source file cannot be read as declared (not the format, truncated, too large)."""


class VocabularyError(ConfigError):
    """The vocabulary is malformed."""


class BuildError(HarmonizeError, RuntimeError):
    """The build could not finish (output could not be written or validated)."""

    exit_code = 4


class BuildLockedError(BuildError):
    """Another build holds the output lock."""

    exit_code = 5


class RejectReason(StrEnum):
    """Stable reason codes for cells that cannot be used. The values are part of the output format."""

    UNMATCHED_NAME = "unmatched-name"
    NOT_A_NUMBER = "not-a-number"
    NON_FINITE = "non-finite"
    RANGE_VALUE = "range-value"
    MISSING_UNIT = "missing-unit"
    UNKNOWN_UNIT = "unknown-unit"
    AMBIGUOUS_UNIT = "ambiguous-unit"
    DIMENSION_MISMATCH = "dimension-mismatch"
    UNIT_CONFLICT = "unit-conflict"
    LEVEL_NOT_ALLOWED = "level-not-allowed"
    MISSING_TAXON = "missing-taxon"
    ORPHAN_STATISTIC = "orphan-statistic"
    INVALID_STATISTIC = "invalid-statistic"
    UNKNOWN_STATISTIC = "unknown-statistic"
    NAME_REJECTED = "name-rejected"
    CELL_TOO_LARGE = "cell-too-large"
    BAD_TEMPERATURE = "bad-temperature"
    UNKNOWN_CATEGORY = "unknown-category"
    DUPLICATE_STATISTIC = "duplicate-statistic"
