"""Data intake: read a table, assign roles to columns, validate → :class:`Dataset`.

(Contract stub: the dataclasses below are the interface other stages rely on.)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

__all__ = ["Note", "IntakeReport", "Dataset", "read_table", "prepare"]


@dataclass(frozen=True)
class Note:
    """One line of the intake report.

    Attributes
    ----------
    column : str or None
        The column the note is about.
    kind : str
        ``"dropped"`` (the column or rows were set aside), ``"warning"`` or ``"info"``.
    message : str
        A readable sentence that names the column, the count and what was done.
    """

    column: str | None
    kind: str
    message: str


@dataclass(frozen=True)
class IntakeReport:
    """What intake read and decided."""

    source: str | None  # path, or None for a DataFrame
    n_rows_read: int
    n_rows_used: int
    encoding: str | None = None
    delimiter: str | None = None
    decimal: str | None = None
    notes: tuple[Note, ...] = ()


@dataclass(frozen=True, eq=False)
class Dataset:
    """A checked table with the role of each column fixed.

    Attributes
    ----------
    response : str
        Name of the response column.
    y : ndarray of float64, shape (n,)
        The response, finite.
    frame : DataFrame
        The predictor columns kept, in the user's column order: numeric ones as
        float64, categorical ones as ``pandas.Categorical`` whose first category
        is the reference level.  Index is ``RangeIndex(n)``.
    numeric, categorical : tuple of str
        Names of the numeric and categorical predictors (a partition of
        ``frame.columns``).
    forced : tuple of str
        Predictors every model must contain.
    weights : ndarray or None
        Row weights (positive, finite) or None.
    report : IntakeReport
    """

    response: str
    y: np.ndarray
    frame: pd.DataFrame
    numeric: tuple[str, ...]
    categorical: tuple[str, ...]
    forced: tuple[str, ...] = ()
    weights: np.ndarray | None = None
    report: IntakeReport = field(default_factory=lambda: IntakeReport(None, 0, 0))

    @property
    def n(self) -> int:
        """Number of rows used."""
        return int(self.y.shape[0])

    @property
    def predictors(self) -> tuple[str, ...]:
        return tuple(self.frame.columns)


def read_table(source):  # pragma: no cover - replaced by the full implementation
    raise NotImplementedError


def prepare(source, *, response, **options):  # pragma: no cover - replaced by the full implementation
    raise NotImplementedError
