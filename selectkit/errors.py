"""Exceptions raised by selectkit.

Every error selectkit raises on purpose derives from :class:`SelectkitError`, and
each subclass also derives from the matching builtin so that callers may catch
either (``except ValueError`` keeps working).  Messages name the column, the
count and the fix; context travels in attributes, never only in the text.
"""

from __future__ import annotations

__all__ = [
    "SelectkitError",
    "InputError",
    "DataFileError",
    "OptionError",
    "SearchError",
    "TooManyCandidatesError",
    "JobFileError",
    "StoreError",
    "StoreBusyError",
]


class SelectkitError(Exception):
    """Base class of every error selectkit raises on purpose.

    Parameters
    ----------
    message : str
        One readable line: what is wrong, where (column, row count) and the fix.
    column : str, optional
        The column the problem is about, when there is one.
    """

    def __init__(self, message: str, *, column: str | None = None, **context):
        super().__init__(message)
        self.column = column
        self.context = context


class InputError(SelectkitError, ValueError):
    """The data (a table, a column, a value) cannot be used as given."""


class DataFileError(SelectkitError, FileNotFoundError):
    """A data file is missing, empty or unreadable."""


class OptionError(SelectkitError, ValueError):
    """An option has an unknown name or a value outside its range."""


class SearchError(SelectkitError, RuntimeError):
    """A search cannot run on the candidates it was given."""


class TooManyCandidatesError(SearchError, ValueError):
    """More candidates than an exact search can take; screening is the fix."""


class JobFileError(SelectkitError, ValueError):
    """A job file is malformed: unknown key, wrong type, value out of range."""


class StoreError(SelectkitError, RuntimeError):
    """A run store cannot be used (changed data, other spec, damaged file)."""


class StoreBusyError(StoreError):
    """Another process is running the same run store."""
