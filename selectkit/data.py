"""Data intake: read a table, assign roles to columns, validate → :class:`Dataset`.

Two public steps:

* :func:`read_table` turns a CSV file, a Parquet file or a pandas DataFrame
  into a DataFrame, sniffing the delimiter, the decimal mark and the text
  encoding of CSV files and saying what it chose.
* :func:`prepare` gives each column a role (response, predictor, forced-in
  predictor, weights, excluded), checks the values once, and returns a frozen
  :class:`Dataset` whose :class:`IntakeReport` lists every decision as a
  :class:`Note`.

Nothing here prints or writes to disk; bad input raises an error from
:mod:`selectkit.errors` that names the column, the count and the fix.
"""

from __future__ import annotations

import difflib
import os
import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from . import _csvsniff
from ._csvsniff import DECIMAL_MARKS
from ._identifiers import distinct_integers, identifier_evidence
from .settings import spell
from .errors import DataFileError, InputError, OptionError

__all__ = [
    "Note",
    "IntakeReport",
    "Dataset",
    "read_table",
    "prepare",
    "check_enough_rows",
    "COLLINEARITY_TOLERANCE",
    "IDENTIFIER_MIN_ROWS",
    "MANY_LEVELS",
    "MANY_LEVELS_ROW_SHARE",
    "MISSING_POLICIES",
    "DECIMAL_MARKS",
]

#: A numeric column counts as an exact linear combination of the columns kept
#: before it when, after centring and scaling it to unit length, the part of it
#: outside their span has length at most this (R² above 1 − 1e-14).  Columns
#: closer than that to a combination cannot be told apart from one by a search
#: that works from cross-products (the condition number is squared there).
COLLINEARITY_TOLERANCE = 1e-7

#: Columns whose non-missing values are all distinct integers or all distinct
#: strings are treated as row identifiers when there are at least this many
#: values (common practice, no published source: below ~20 rows distinct
#: values are too likely by chance).
IDENTIFIER_MIN_ROWS = 20

#: A categorical column of L levels is set aside as a label when L is at least
#: MANY_LEVELS and its L − 1 indicator columns exceed MANY_LEVELS_ROW_SHARE of
#: the rows used (e.g. 500 levels in 1,000 rows): its block would spend most of
#: the degrees of freedom and fit most of its rows nearly exactly (common
#: practice, no published source).  keep_identifiers= keeps it.
MANY_LEVELS = 10
MANY_LEVELS_ROW_SHARE = 0.25

#: Valid values of ``prepare(missing=...)``.
MISSING_POLICIES = ("refuse", "drop")

_PARQUET_SUFFIXES = (".parquet", ".pq")

_COMMA_DECIMAL = re.compile(r"^[+-]?(\d{1,3}(\.\d{3})+|\d+),\d+([eE][+-]?\d+)?$")


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
    """What intake read and decided.

    Attributes
    ----------
    source : str or None
        Path of the file read, or None for a DataFrame.
    n_rows_read, n_rows_used : int
        Data rows in the table, and rows kept after dropping missing values.
    encoding, delimiter, decimal : str or None
        What was used to read a CSV file (None for Parquet and DataFrames).
    grouping : str or None
        The thousands separator of a CSV file (``"."`` or ``","``), None when
        no number in it is grouped (and for Parquet and DataFrames).
    notes : tuple of Note
        Every decision intake made, in the order it made them.
    dropped_rows : tuple of int
        0-based positions (in the table read) of the rows dropped for missing values.
    set_aside : tuple of str
        Columns that were candidates to be predictors but were dropped or
        excluded by intake (constant, all missing, identifier, duplicate,
        collinear); the notes say why.
    """

    source: str | None  # path, or None for a DataFrame
    n_rows_read: int
    n_rows_used: int
    encoding: str | None = None
    delimiter: str | None = None
    decimal: str | None = None
    notes: tuple[Note, ...] = ()
    dropped_rows: tuple[int, ...] = ()
    set_aside: tuple[str, ...] = ()
    grouping: str | None = None


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
    source_rows : ndarray of int or None
        For each row used, its 0-based position in the table read, so that later
        stages can name rows as the user knows them.
    identifiers : DataFrame or None
        Identifier-like columns set aside by intake (e.g. ``bay_id``), on the
        rows used, for labelling rows in reports; None when there are none.
    """

    response: str
    y: np.ndarray
    frame: pd.DataFrame
    numeric: tuple[str, ...]
    categorical: tuple[str, ...]
    forced: tuple[str, ...] = ()
    weights: np.ndarray | None = None
    report: IntakeReport = field(default_factory=lambda: IntakeReport(None, 0, 0))
    source_rows: np.ndarray | None = None
    identifiers: pd.DataFrame | None = None

    @property
    def n(self) -> int:
        """Number of rows used."""
        return int(self.y.shape[0])

    @property
    def predictors(self) -> tuple[str, ...]:
        return tuple(self.frame.columns)


# --------------------------------------------------------------------------- helpers


def _plural(count: int, word: str) -> str:
    return f"{count} {word}" if count == 1 else f"{count} {word}s"


def _quoted_list(names, limit: int = 8) -> str:
    names = list(names)
    shown = ", ".join(f"'{n}'" for n in names[:limit])
    return shown + (f" and {len(names) - limit} more" if len(names) > limit else "")


def check_enough_rows(n_rows: int, n_columns: int, *, what: str) -> None:
    """Raise unless there are more rows than regression coefficients.

    A least-squares fit of ``n_columns`` predictor columns plus an intercept
    has ``n_columns + 1`` coefficients; estimating the error variance needs at
    least one residual degree of freedom, so ``n_rows >= n_columns + 2`` is
    required.  A categorical column of L levels counts L − 1 columns.

    Parameters
    ----------
    n_rows : int
        Number of rows available.
    n_columns : int
        Number of predictor columns of the largest model, not counting the
        intercept.
    what : str
        What the columns are, for the message (e.g. ``"the predictors"`` or
        ``"the candidate forms"``).

    Raises
    ------
    InputError
        When ``n_rows <= n_columns + 1``; the message gives both counts and the fix.

    Examples
    --------
    >>> check_enough_rows(30, 5, what="the predictors")  # fine, returns None
    >>> check_enough_rows(6, 5, what="the predictors")
    Traceback (most recent call last):
    ...
    selectkit.errors.InputError: too few rows for the predictors: 6 rows, but 5 predictor columns plus the intercept need at least 7 rows (one more than the 6 coefficients, to leave a degree of freedom for the error variance); use fewer predictors or more rows
    """
    n_rows, n_columns = int(n_rows), int(n_columns)
    needed = n_columns + 2
    if n_rows < needed:
        raise InputError(
            f"too few rows for {what}: {_plural(n_rows, 'row')}, but "
            f"{_plural(n_columns, 'predictor column')} plus the intercept need at least {needed} rows "
            f"(one more than the {n_columns + 1} coefficients, to leave a degree of freedom for the "
            f"error variance); use fewer predictors or more rows",
            n_rows=n_rows,
            n_columns=n_columns,
            needed=needed,
        )


def _check_unique_names(names, where: str) -> None:
    counts = Counter(names)
    repeated = [(name, c) for name, c in counts.items() if c > 1]
    if repeated:
        listing = ", ".join(f"'{name}' ({c} times)" for name, c in repeated)
        raise InputError(
            f"column names repeat in {where}: {listing}; rename the columns so that each name is unique",
            column=repeated[0][0],
            repeated=tuple(name for name, _ in repeated),
        )


# --------------------------------------------------------------------------- reading


def _refuse_unknown(unknown: dict, valid: tuple[str, ...], function: str) -> None:
    if not unknown:
        return
    parts = []
    for name in unknown:
        close = difflib.get_close_matches(name, valid, n=1)
        parts.append(f"'{name}'" + (f" (did you mean '{close[0]}'?)" if close else ""))
    raise OptionError(f"{function}() has no option {', '.join(parts)}; its options are {_quoted_list(valid, 20)}",
                      unknown=tuple(unknown))


_READ_OPTIONS = ("encoding", "decimal_mark")
_PREPARE_OPTIONS = ("response", "predictors", "forced", "exclude", "weights", "missing", "keep_identifiers",
                    "encoding", "decimal_mark")


def _check_decimal_mark(decimal_mark):
    if decimal_mark is None or decimal_mark in DECIMAL_MARKS:
        return decimal_mark
    words = {"point": ".", "dot": ".", "comma": ","}
    if isinstance(decimal_mark, str) and decimal_mark.strip().lower() in words:
        return words[decimal_mark.strip().lower()]
    raise OptionError(f"{spell('decimal_mark', decimal_mark)} is not a decimal mark; use '.' (a point) or ',' "
                      f"(a comma), or leave it out to decide it from the numbers of the file")


def read_table(source, *, encoding: str | None = None, decimal_mark: str | None = None,
               **unknown) -> tuple[pd.DataFrame, IntakeReport]:
    """Read a CSV file, a Parquet file or a DataFrame into a DataFrame.

    CSV files: the delimiter is chosen among comma, semicolon, tab and vertical
    bar as the one giving at least two fields and the most consistent number of
    fields per line in the first 256 KiB.  The decimal mark and the thousands
    grouping are decided from the evidence of the number-like cells of every
    column there (``7.44`` shows a decimal point, ``2,5`` a decimal comma,
    ``1.234.567`` or ``1.234,5`` a dot grouping thousands; ``9.192`` could be
    either), never by a majority: when the evidence disagrees — e.g. ``2,5``
    beside cells ``9.192`` that would then have to be 9192 with nothing else
    showing a dot grouping — the file is refused with an example cell of each
    kind, and ``decimal_mark=`` decides.  Grouped numbers are converted only
    where every cell of the column groups digits in threes, so ``9.19`` is
    never read as 919.  The intake note says which decimal mark and grouping
    were used and what decided them.  A row with fewer fields than the header
    is refused (naming its line), not read as missing values.  The text is read
    as UTF-8, with or without a byte-order mark (UTF-16 with a byte-order mark
    is also recognised); a file that is not valid UTF-8 is read as Latin-1 and
    a warning note says so.  Column names are stripped of surrounding blanks.

    Parameters
    ----------
    source : str, path-like or pandas.DataFrame
        A ``.csv``/``.txt``/``.tsv`` file (optionally ``.gz``, ``.bz2``,
        ``.xz``), a ``.parquet``/``.pq`` file (needs pyarrow), or a DataFrame,
        which is copied and never modified (its column labels become strings
        and its index a RangeIndex).
    encoding : str, optional
        Text encoding of a CSV file, to override the detection.
    decimal_mark : {".", ","}, optional
        The decimal mark of a CSV file, to override the detection; the other
        mark is then read as grouping thousands where it groups digits in threes.

    Returns
    -------
    frame : DataFrame
        The table, index ``RangeIndex``.
    report : IntakeReport
        ``source``, ``encoding``, ``delimiter``, ``decimal``, ``grouping``, ``n_rows_read``
        (``n_rows_used`` equals it here) and ``notes``.

    Raises
    ------
    DataFileError
        The file does not exist, is empty, has a header but no data rows, has
        a row shorter or longer than the header, writes its numbers with
        decimal marks that disagree, or cannot be parsed; pyarrow missing for
        a Parquet file.
    InputError
        Column names repeat; a DataFrame without rows or columns.
    OptionError
        ``encoding`` is not a known codec, ``decimal_mark`` not ``"."`` or
        ``","``, or either is given for a DataFrame/Parquet file.

    Examples
    --------
    >>> import pandas as pd
    >>> frame, report = read_table(pd.DataFrame({"yield_kg_m2": [41.0, 44.5], "co2_ppm": [800, 950]}))
    >>> frame.shape, report.source, report.n_rows_read
    ((2, 2), None, 2)
    """
    _refuse_unknown(unknown, _READ_OPTIONS, "read_table")
    decimal_mark = _check_decimal_mark(decimal_mark)
    if isinstance(source, pd.DataFrame):
        for option, value in (("encoding", encoding), ("decimal_mark", decimal_mark)):
            if value is not None:
                raise OptionError(f"{option}= applies to CSV files only; the source here is a DataFrame — "
                                  f"leave {option} out")
        return _read_frame(source)
    if not isinstance(source, (str, os.PathLike)):
        raise InputError(
            f"cannot read a table from a {type(source).__name__}; pass the path of a CSV or Parquet file, "
            f"or a pandas DataFrame"
        )
    path = Path(source)
    if not path.exists():
        raise DataFileError(
            f"data file '{path}' does not exist (looked in '{path.resolve().parent}'); check the name and the folder",
            path=str(path),
        )
    if path.is_dir():
        raise DataFileError(f"'{path}' is a folder, not a data file; pass the path of a CSV or Parquet file",
                            path=str(path))
    suffixes = [s.lower() for s in path.suffixes]
    compression = suffixes[-1] if suffixes and suffixes[-1] in _csvsniff.COMPRESSED else None
    inner = suffixes[-2] if compression and len(suffixes) > 1 else (suffixes[-1] if suffixes else "")
    if inner in _PARQUET_SUFFIXES and compression is None:
        if encoding is not None:
            raise OptionError(f"encoding= applies to CSV files only; '{path.name}' is a Parquet file, which "
                              f"records its own text encoding — leave encoding out")
        if decimal_mark is not None:
            raise OptionError(f"{spell('decimal_mark')} applies to CSV files only; '{path.name}' is a Parquet "
                              f"file, which stores numbers, not text — leave it out")
        return _read_parquet(path)
    return _read_csv(path, encoding, compression, decimal_mark)


def _read_frame(source: pd.DataFrame):
    if isinstance(source.columns, pd.MultiIndex):
        raise InputError("the DataFrame has several levels of column labels; flatten them to one level of "
                         "names first (e.g. frame.columns = ['_'.join(map(str, c)) for c in frame.columns])")
    names = [str(c).strip() for c in source.columns]
    _check_unique_names(names, "the DataFrame")
    if len(names) == 0:
        raise InputError("the DataFrame has no columns; pass a table with a response and predictors")
    if len(source) == 0:
        raise InputError(f"the DataFrame has {len(names)} columns but no data rows; pass a table with rows")
    frame = source.copy(deep=True)
    frame.columns = names
    frame = frame.reset_index(drop=True)
    n = len(frame)
    return frame, IntakeReport(source=None, n_rows_read=n, n_rows_used=n)


def _read_parquet(path: Path):
    try:
        import pyarrow.parquet as pq
    except ImportError as err:
        raise DataFileError(
            f"reading the Parquet file '{path.name}' needs the pyarrow package, which is not installed; "
            f"install it with: pip install 'selectkit[parquet]' (or save the table as CSV)",
            path=str(path),
        ) from err
    try:
        names = [str(n).strip() for n in pq.read_schema(path).names]
        _check_unique_names([n for n in names if not n.startswith("__index_level_")], f"'{path.name}'")
        frame = pd.read_parquet(path, engine="pyarrow")
    except (OSError, ValueError) as err:
        if isinstance(err, InputError):
            raise
        raise DataFileError(f"cannot read '{path}' as a Parquet file ({err}); check that the file is complete",
                            path=str(path)) from err
    frame.columns = [str(c).strip() for c in frame.columns]
    frame = frame.reset_index(drop=True)
    if frame.shape[1] == 0:
        raise DataFileError(f"Parquet file '{path}' has no columns", path=str(path))
    if len(frame) == 0:
        raise DataFileError(f"Parquet file '{path}' has {frame.shape[1]} columns but no data rows; "
                            f"it holds nothing to fit", path=str(path))
    n = len(frame)
    return frame, IntakeReport(source=str(path), n_rows_read=n, n_rows_used=n)


def _read_csv(path: Path, encoding: str | None, compression: str | None, decimal_mark: str | None):
    reading = _csvsniff.read_csv_file(path, encoding, compression, decimal_mark, _check_unique_names)
    n = len(reading.frame)
    notes = tuple(Note(None, kind, message) for kind, message in reading.notes)
    return reading.frame, IntakeReport(source=str(path), n_rows_read=n, n_rows_used=n, encoding=reading.encoding,
                                       delimiter=reading.delimiter, decimal=reading.decimal,
                                       grouping=reading.grouping, notes=notes)


# --------------------------------------------------------------------------- roles and checks


def _name_list(value, option: str) -> list[str]:
    if value is None:
        return []
    if isinstance(value, str):
        value = [value]
    try:
        names = list(value)
    except TypeError as err:
        raise OptionError(f"{option}= takes a column name or a list of column names, "
                          f"not a {type(value).__name__}") from err
    for name in names:
        if not isinstance(name, str):
            raise OptionError(f"{option}= takes column names (text); got {name!r} of type {type(name).__name__}")
    return list(dict.fromkeys(names))


def _require_column(name: str, columns, role: str) -> None:
    if name in columns:
        return
    lowered = {c.lower(): c for c in columns}
    close = [lowered[name.lower()]] if name.lower() in lowered else difflib.get_close_matches(name, columns, n=1)
    hint = f"; did you mean '{close[0]}'?" if close else f"; the columns are {_quoted_list(columns)}"
    raise InputError(f"{role} column '{name}' is not in the table ({_plural(len(columns), 'column')}){hint}",
                     column=name)


def _first_non_number(series: pd.Series):
    """(position, value) of the first non-missing value that is not a number, or None."""
    present = series[series.notna()]
    parsed = pd.to_numeric(present.astype(object), errors="coerce")
    bad = present[parsed.isna()]
    if len(bad) == 0:
        return None
    return int(series.index.get_loc(bad.index[0])), bad.iloc[0]


def _is_date_like(series: pd.Series) -> bool:
    dtype = series.dtype
    return (pd.api.types.is_datetime64_any_dtype(dtype) or pd.api.types.is_timedelta64_dtype(dtype)
            or isinstance(dtype, (pd.PeriodDtype, pd.IntervalDtype)))


def _as_float(series: pd.Series) -> np.ndarray:
    return pd.to_numeric(series.astype(object) if series.dtype == object else series,
                         errors="raise").to_numpy(dtype=np.float64, na_value=np.nan)


def _numeric_role(series: pd.Series, name: str, role: str) -> np.ndarray:
    """The response or weights column as float64 (NaN for missing); non-numeric raises."""
    dtype = series.dtype
    if pd.api.types.is_bool_dtype(dtype) or _is_date_like(series) or pd.api.types.is_complex_dtype(dtype):
        raise InputError(f"{role} column '{name}' is not numeric (type {dtype}); the {role} must hold real "
                         f"numbers — convert it or choose another column", column=name)
    if pd.api.types.is_numeric_dtype(dtype):
        return series.to_numpy(dtype=np.float64, na_value=np.nan)
    bad = _first_non_number(series)
    if bad is None:
        return _as_float(series)
    position, value = bad
    count = int(pd.to_numeric(series[series.notna()].astype(object), errors="coerce").isna().sum())
    hint = ""
    if isinstance(value, str) and _COMMA_DECIMAL.match(value.strip()):
        hint = " (it looks like a number with a decimal comma; save the file with one decimal mark)"
    raise InputError(f"{role} column '{name}' is not numeric: {_plural(count, 'value')} are not numbers, the first "
                     f"is {value!r} in data row {position + 1}{hint}; fix or remove those values",
                     column=name, count=count)


def _classify(series: pd.Series, name: str, notes: list[Note], decimal: str | None = None):
    """('numeric', float array) or ('categorical', object Series); dates and complex numbers raise.

    ``decimal`` is the decimal mark a CSV file was read with: with ``","``, a
    text value holding a dot is not a number (it would contradict the file).
    """
    dtype = series.dtype
    if _is_date_like(series):
        raise InputError(f"column '{name}' holds dates or time spans (type {dtype}); convert it to a number "
                         f"(e.g. days since the first planting) or leave it out ({spell('leave_out', [name])})",
                         column=name)
    if pd.api.types.is_complex_dtype(dtype):
        raise InputError(f"column '{name}' holds complex numbers; leave it out ({spell('leave_out', [name])})",
                         column=name)
    if isinstance(dtype, pd.CategoricalDtype) or pd.api.types.is_bool_dtype(dtype):
        return "categorical", series.astype(object)
    if pd.api.types.is_numeric_dtype(dtype):
        return "numeric", series.to_numpy(dtype=np.float64, na_value=np.nan)
    inferred = pd.api.types.infer_dtype(series, skipna=True)
    if inferred in ("integer", "floating", "mixed-integer-float", "decimal"):
        return "numeric", _as_float(series)
    if inferred in ("datetime", "datetime64", "date", "timedelta", "timedelta64", "time", "period"):
        raise InputError(f"column '{name}' holds dates or times; convert it to a number (e.g. days since the "
                         f"first planting) or leave it out ({spell('leave_out', [name])})", column=name)
    values = series.astype(object)
    counts = values.value_counts(dropna=True)  # judged on distinct values, weighted by their counts
    if len(counts):
        text = pd.Series(counts.index.map(lambda v: str(v).strip()), dtype=object)
        weight = counts.to_numpy()
        numeric = pd.to_numeric(text, errors="coerce").notna().to_numpy()
        if decimal == ",":
            numeric = numeric & ~text.str.contains(".", regex=False).to_numpy(dtype=bool)
        comma = text.str.match(_COMMA_DECIMAL.pattern).to_numpy(dtype=bool)
        total = int(weight.sum())
        if numeric.all():
            notes.append(Note(name, "info", f"column '{name}' holds numbers written as text; it is read as numeric"))
            return "numeric", pd.to_numeric(values.map(lambda v: str(v).strip(), na_action="ignore"),
                                            errors="raise").to_numpy(dtype=np.float64, na_value=np.nan)
        if weight[comma].sum() >= 0.8 * total:
            notes.append(Note(name, "warning",
                              f"column '{name}' is read as text, but {int(weight[comma].sum())} of its {total} values "
                              f"look like numbers with a decimal comma; it is treated as categorical — save the "
                              f"file with one decimal mark, or give {spell('decimal_mark', ',')}, to use it as a "
                              f"number"))
        elif weight[numeric].sum() >= 0.8 * total:
            odd = int(weight[~numeric].sum())
            example = text[~numeric].iloc[0]
            notes.append(Note(name, "warning",
                              f"column '{name}' is read as text because {_plural(odd, 'value')} of {total} are not "
                              f"numbers (e.g. {example!r}); it is treated as categorical — if those values mean "
                              f"'missing', blank them out"))
    return "categorical", values


def _is_text_identifier(values: pd.Series) -> bool:
    """All non-missing values distinct strings, at least IDENTIFIER_MIN_ROWS of them."""
    present = values[values.notna()]
    if len(present) < IDENTIFIER_MIN_ROWS:
        return False
    if not all(isinstance(v, (str, np.str_)) for v in present):
        return False
    if 2 * int(pd.to_numeric(present.str.strip(), errors="coerce").notna().sum()) >= len(present):
        return False  # mostly numbers written as text (a column with a stray value), not labels
    return bool(present.nunique() == len(present))


def _categorical(values: pd.Series, name: str, notes: list[Note]) -> pd.Categorical:
    """Categorical with sorted levels, the most frequent one (ties: first in sort order) first."""
    counts = Counter(values.tolist())
    try:
        levels = sorted(counts)
    except TypeError:
        values = values.map(str)
        counts = Counter(values.tolist())
        levels = sorted(counts)
        notes.append(Note(name, "info", f"column '{name}' mixes text and numbers; its values are compared as text"))
    reference = max(levels, key=lambda level: counts[level])
    ordered_levels = [reference] + [level for level in levels if level != reference]
    return pd.Categorical(values.tolist(), categories=ordered_levels, ordered=False)


def _centred_unit(x: np.ndarray) -> np.ndarray | None:
    # Scaled by a power of two first (exact), so that tiny (subnormal) or huge values neither
    # underflow nor overflow in the norm; the unit vector is the same up to round-off.
    top = np.max(np.abs(x)) if x.size else 0.0
    if top > 0 and np.isfinite(top):
        x = np.ldexp(x, -int(np.frexp(top)[1]))
    z = x - x.mean()
    norm = np.linalg.norm(z)
    return None if norm == 0 else z / norm


class _Span:
    """An orthonormal basis of the centred columns kept so far (Gram–Schmidt, re-orthogonalised).

    Beside the basis ``Q`` it keeps the triangular ``T`` with ``Q = C T``, ``C``
    the kept columns in the order added, so that a column found in the span,
    ``v = Q a``, is the combination ``v = C (T a)`` of the kept columns at a
    cost of O(k²) — no least-squares solve per dropped column.
    """

    def __init__(self, rows: int, capacity: int):
        capacity = max(min(capacity, rows), 1)
        self._basis = np.empty((rows, capacity), order="F")
        self._t = np.zeros((capacity, capacity))
        self.size = 0

    def leftover(self, z: np.ndarray):
        """(the part of ``z`` outside the span, its coefficients on the basis)."""
        basis = self._basis[:, : self.size]
        coef = np.zeros(self.size)
        for _ in range(2):
            step = basis.T @ z
            z = z - basis @ step
            coef += step
        return z, coef

    def add(self, r: np.ndarray, coef: np.ndarray) -> None:
        k, norm = self.size, np.linalg.norm(r)
        self._basis[:, k] = r / norm
        self._t[:k, k] = -(self._t[:k, :k] @ coef) / norm
        self._t[k, k] = 1.0 / norm
        self.size += 1

    def combination(self, coef: np.ndarray) -> np.ndarray:
        """Coefficients on the kept columns of the vector ``Q @ coef``."""
        return self._t[: self.size, : self.size] @ coef


def _format_number(value: float) -> str:
    return f"{value:.4g}"


def _describe_combination(name, target, weights, kept):
    """A sentence saying of which kept columns ``target`` is an exact linear combination.

    ``weights[i]`` is the coefficient of the centred unit column of ``kept[i]``
    in that of ``target``; ``kept[i]`` is ``(label, x)`` with ``label`` a
    numeric column's name or ``("block", categorical name)`` and ``x`` the
    column (the level indicator for a block).  With ``z = (x − mean)/‖x − mean‖``,
    ``target = Σ β x + c`` where ``β = w ‖target − mean‖ / ‖x − mean‖``.
    """
    centred_norm = np.linalg.norm(target - target.mean())
    scale = np.std(target)
    involved, terms, intercept = [], [], target.mean()
    for (label, x), w in zip(kept, weights):
        if abs(w) <= 1e-6:
            continue
        beta = w * centred_norm / np.linalg.norm(x - x.mean())
        intercept -= beta * x.mean()
        if isinstance(label, tuple):
            if label[1] not in involved:
                involved.append(label[1])
            continue
        involved.append(label)
        terms.append((beta, label))
    formula = " ".join(("" if i == 0 and b >= 0 else ("− " if b < 0 else "+ ")) + f"{_format_number(abs(b))}·{lab}"
                       for i, (b, lab) in enumerate(terms))
    blocks_involved = [c for c in involved if any(isinstance(lab, tuple) and lab[1] == c for lab, _ in kept)]
    if blocks_involved:
        # The intercept is not identified apart from the level effects; leave it out.
        formula = (formula + " + " if formula else "") + "a value for each level of " + _quoted_list(blocks_involved)
    elif abs(intercept) > 1e-9 * max(scale, abs(target).max()):
        formula += (" − " if intercept < 0 else " + ") + _format_number(abs(intercept))
    return (f"'{name}' is an exact linear combination of {_quoted_list(involved)} "
            f"({name} = {formula}, to 4 significant digits)")


def _partition_key(codes: np.ndarray) -> bytes:
    """The grouping of rows, independent of how the groups are labelled."""
    _, first, inverse = np.unique(codes, return_index=True, return_inverse=True)
    relabel = np.argsort(np.argsort(first))
    return relabel[inverse].astype(np.int64).tobytes()


def _set_aside_collinear(n, order, kinds, numeric_values, categoricals, forced, notes):
    """Columns of ``order`` to drop because they add nothing to the span of the columns kept before them.

    Categorical blocks are placed first (a block cannot be dropped in part):
    a categorical that groups the rows exactly as an earlier one is dropped,
    one partly determined by others is only warned about.  Numeric columns
    follow — forced ones first, then in the given order — and one whose centred,
    unit-length values lie within :data:`COLLINEARITY_TOLERANCE` of the span of
    the intercept and the columns kept before it is dropped (forced: error).

    The centred unit columns ``Z`` are first reduced to the triangular factor
    ``R`` of a Householder QR (``Z = QR`` with Q orthonormal, so the columns of
    R have the same lengths and angles as those of Z, and Householder QR is
    backward stable); the greedy, re-orthogonalised Gram–Schmidt pass in
    column order then runs on R, at a cost independent of n.

    Returns None, without finishing, as soon as the kept columns span every
    centred column of n rows (n − 1 of them): then the predictors are
    certainly too many for the rows, and the caller refuses the table at once
    rather than describe each of the remaining columns as a combination.
    """
    dropped: list[str] = []
    partitions: dict[bytes, str] = {}
    cat_kept = []
    cat_order = [c for c in order if kinds[c] == "categorical"]
    cat_order = [c for c in cat_order if c in forced] + [c for c in cat_order if c not in forced]
    for name in cat_order:
        codes = np.asarray(categoricals[name].codes)
        width = len(categoricals[name].categories) - 1
        key = _partition_key(codes)
        if key in partitions:
            if name in forced:
                raise InputError(f"column '{name}', which every model must hold, groups the rows exactly "
                                 f"as '{partitions[key]}' does; keep only one of them in "
                                 f"{spell('always_include')}", column=name)
            dropped.append(name)
            notes.append(Note(name, "dropped", f"column '{name}' groups the rows exactly as '{partitions[key]}' "
                                               f"does (same {width + 1} groups); '{name}' was dropped"))
            continue
        partitions[key] = name
        cat_kept.append((name, codes, width))
    num_order = [c for c in order if kinds[c] == "numeric"]
    num_order = [c for c in num_order if c in forced] + [c for c in num_order if c not in forced]

    owners = [name for name, _, width in cat_kept for _ in range(width)] + num_order
    if not owners:
        return dropped
    z = np.empty((n, len(owners)), order="F")
    j = 0
    for _, codes, width in cat_kept:
        for level in range(1, width + 1):
            z[:, j] = _centred_unit((codes == level).astype(float))
            j += 1
    for name in num_order:
        z[:, j] = _centred_unit(numeric_values[name])
        j += 1
    r_factor = np.linalg.qr(z, mode="r")
    span = _Span(r_factor.shape[0], len(owners))
    full = max(n - 1, 1)  # the centred columns of n rows span at most n − 1 dimensions
    kept: list[tuple[object, np.ndarray]] = []  # (label, column) of each basis vector, in the order added

    j = 0
    for name, codes, width in cat_kept:
        in_span = 0
        for level in range(1, width + 1):
            leftover, coef = span.leftover(r_factor[:, j])
            j += 1
            if np.linalg.norm(leftover) <= COLLINEARITY_TOLERANCE:
                in_span += 1
            else:
                span.add(leftover, coef)
                kept.append((("block", name), (codes == level).astype(float)))
        if in_span:
            notes.append(Note(name, "warning",
                              f"column '{name}' is partly determined by the categorical columns before it: "
                              f"{in_span} of its {width} indicator columns are exact combinations of theirs, so a "
                              f"model holding '{name}' with them is singular"))
    seen: dict[int, list[str]] = {}
    for name in num_order:
        if span.size >= full and j < len(owners):
            return None
        leftover, coef = span.leftover(r_factor[:, j])
        j += 1
        x = numeric_values[name]
        digest = hash(x.tobytes())
        if np.linalg.norm(leftover) > COLLINEARITY_TOLERANCE:
            span.add(leftover, coef)
            kept.append((name, x))
            seen.setdefault(digest, []).append(name)
            continue
        twin = next((other for other in seen.get(digest, ()) if np.array_equal(numeric_values[other], x)), None)
        if twin is not None:
            sentence = f"'{name}' is identical to '{twin}'"
        else:
            sentence = _describe_combination(name, x, span.combination(coef), kept)
        if name in forced:
            raise InputError(f"column {sentence}; it is in {spell('always_include')}, but a model cannot hold "
                             f"it with the columns it depends on — name fewer columns there or leave one of "
                             f"them out", column=name)
        dropped.append(name)
        notes.append(Note(name, "dropped", f"column {sentence}; it adds nothing to a model holding the columns it "
                                           f"depends on, so '{name}' was dropped and they were kept"))
    return dropped


def _rows_to_keep(missing_masks, n_read: int, missing: str, notes: list[Note]):
    """Apply the missing-value policy to ``[(column, mask of missing rows)]``; return (keep, dropped positions)."""
    counts = [(name, int(mask.sum())) for name, mask in missing_masks if mask.any()]
    keep = np.ones(n_read, dtype=bool)
    for _, mask in missing_masks:
        keep &= ~mask
    dropped_rows = np.flatnonzero(~keep)
    if not counts:
        return keep, dropped_rows
    listing = ", ".join(f"'{name}' ({_plural(c, 'row')})" for name, c in counts)
    if missing == "refuse":
        raise InputError(f"missing values in {listing}; {_plural(dropped_rows.size, 'row')} of {n_read} have at "
                         f"least one — give {spell('incomplete_rows', 'drop')} to drop those rows, or fill the "
                         f"values in first",
                         column=counts[0][0], counts=dict(counts), n_rows=int(dropped_rows.size))
    if not keep.any():
        raise InputError(f"every one of the {n_read} rows has a missing value (in {listing}); no rows are left "
                         f"— exclude the emptiest columns or fill the values in", column=counts[0][0],
                         counts=dict(counts))
    shown = ", ".join(str(i + 1) for i in dropped_rows[:10]) + (", ..." if dropped_rows.size > 10 else "")
    notes.append(Note(None, "dropped",
                      f"dropped {_plural(dropped_rows.size, 'row')} of {n_read} with a missing value in a column "
                      f"in use ({listing}); data rows {shown} (counting from 1)"))
    return keep, dropped_rows


def _nested_kind(series: pd.Series) -> str | None:
    """'lists' or 'records' when the column holds a list or a record (a Parquet list/struct) per row, else None."""
    if series.dtype != object:
        return None
    for value in series:
        if isinstance(value, (list, tuple, set, np.ndarray)):
            return "lists"
        if isinstance(value, dict):
            return "records"
    return None


def _set_aside_nested(table, pool, *, response, weights, named, forced, keep_identifiers, notes):
    """Set aside (with a note) the predictors holding a list or a record per row; refuse them when named.

    A model term needs one number or category per row.  A column of the
    response or weights role, or one the caller named (``predictors=``,
    ``forced=``, ``keep_identifiers=``), is refused; one only swept in with
    every other column is set aside and noted.  Returns the names set aside.
    """
    fix = ("a model needs one number or category per row: unpack it into ordinary columns (one per item "
           "or field) or leave it out")
    for name, role in ((response, "response"), (weights, "weights")):
        kind = name is not None and _nested_kind(table[name])
        if kind:
            raise InputError(f"{role} column '{name}' holds {kind} (several values per row), not one number per "
                             f"row; {fix}", column=name)
    aside = []
    for name in list(pool):
        kind = _nested_kind(table[name])
        if not kind:
            continue
        if named or name in forced or name in keep_identifiers:
            raise InputError(f"column '{name}' holds {kind} (several values per row); {fix}", column=name)
        pool.remove(name)
        aside.append(name)
        notes.append(Note(name, "dropped", f"column '{name}' was set aside: it holds {kind} (several values per "
                                           f"row), and {fix.split(': ', 1)[0]}; unpack it into ordinary columns "
                                           f"to use it"))
    if not pool:
        raise InputError(f"no predictor columns are left: {_quoted_list(aside)} hold lists or records; {fix}",
                         set_aside=tuple(aside))
    return aside


def _assign_roles(columns, *, response, weights, given, forced, exclude, keep_identifiers, delimiter):
    """Check that every named column exists and has one role; return the predictor pool in order."""
    _require_column(response, columns, "response")
    if weights is not None:
        _require_column(weights, columns, "weights")
    for role, names in (("predictor", given or ()), ("always-included", forced), ("left-out", exclude),
                        ("identifier-like", keep_identifiers)):
        for name in names:
            _require_column(name, columns, role)

    for role, names in (("predictors", given or ()), ("always_include", forced), ("leave_out", exclude)):
        if response in names:
            raise InputError(f"'{response}' is the response and cannot also be listed in {spell(role)}; "
                             f"remove it from there", column=response)
    if weights is not None:
        if weights == response:
            raise InputError(f"'{weights}' cannot be both the response and the weights", column=weights)
        for role, names in (("predictors", given or ()), ("always_include", forced)):
            if weights in names:
                raise InputError(f"'{weights}' is the weights column and cannot also be listed in {spell(role)}; "
                                 f"weights are not a predictor", column=weights)
    for name in forced:
        if name in exclude:
            raise InputError(f"column '{name}' is in both {spell('always_include')} and {spell('leave_out')}; "
                             f"remove it from one of the two", column=name)
    for name in given or ():
        if name in exclude:
            raise InputError(f"column '{name}' is in both {spell('predictors')} and {spell('leave_out')}; "
                             f"remove it from one of the two", column=name)

    if given is None:
        pool = [c for c in columns if c not in (response, weights) and c not in exclude]
    else:
        pool = list(given)
    for name in forced:
        if name not in pool:
            raise InputError(f"column '{name}' is in {spell('always_include')} but not among the predictors; "
                             f"add it to {spell('predictors')}", column=name)
    for name in keep_identifiers:
        if name not in pool:
            raise InputError(f"{spell('keep_id_columns')} names '{name}', which is not among the predictors; "
                             f"add it to {spell('predictors')} or remove it from {spell('keep_id_columns')}",
                             column=name)
    if not pool:
        raise InputError(f"the table has no column besides the response '{response}'"
                         f"{' and the weights' if weights else ''} to use as a predictor; check that the file was "
                         f"split into columns (delimiter read: {delimiter!r}) and the roles given")
    return pool


def _keep_hint(name) -> str:
    return f"list it in {spell('keep_id_columns', [name])}"


def _set_aside_identifiers(pool, kinds, values, response, y, keep_identifiers, forced, notes, set_aside_column):
    """Set aside the row identifiers of ``pool`` (see :mod:`selectkit._identifiers`); return their names."""
    identifier_names = []
    for name in list(pool):
        if kinds[name] == "categorical":
            if not _is_text_identifier(values[name]):
                continue
            reasons, relation = "its non-missing values are all distinct text values", ""
        else:
            if not distinct_integers(values[name], IDENTIFIER_MIN_ROWS):
                continue
            others = ((c, values[c]) for c in pool if c != name and kinds[c] == "numeric")
            evidence = identifier_evidence(name, values[name], response=response, y=y, others=others)
            reasons, relation = evidence.reasons(), evidence.relation()
            if not evidence.is_identifier:
                if evidence.step is not None:
                    why = (f"{reasons}, but {relation}, so it is a measurement, not an identifier, and is kept "
                           f"as a predictor")
                else:
                    why = (f"its {evidence.n_values} values are distinct integers, but nothing else marks it as an "
                           f"identifier (no id-like name, and its values do not step evenly like a row number), so "
                           f"it is kept as a predictor")
                notes.append(Note(name, "info", f"column '{name}': {why}; to leave it out, give "
                                                f"{spell('leave_out', [name])}"))
                continue
        if name in keep_identifiers or name in forced:
            notes.append(Note(name, "warning", f"column '{name}' looks like a row identifier ({reasons}) but is "
                                               f"kept as a predictor, as asked"))
            continue
        set_aside_column(name)
        identifier_names.append(name)
        caution = (f"; note that {relation} — if the rows are in time or position order, that order may matter"
                   if relation else "")
        notes.append(Note(name, "dropped", f"column '{name}' looks like a row identifier ({reasons}) and was "
                                           f"excluded{caution}; to use it as a predictor, {_keep_hint(name)}"))
    return identifier_names


def prepare(source, *, response: str, predictors=None, forced=(), exclude=(), weights: str | None = None,
            missing: str = "refuse", keep_identifiers=(), encoding: str | None = None,
            decimal_mark: str | None = None, **unknown) -> Dataset:
    """Give each column a role, check the values, and return a :class:`Dataset`.

    Steps, in order (each decision is a :class:`Note` in ``Dataset.report``):

    1. read the table (:func:`read_table`); check that the named columns exist
       and that no column has two roles;
    2. classify predictors: numbers (int/float dtypes, or text that is all
       numbers) are numeric; text, ``category`` and ``bool`` columns are
       categorical; dates raise;
    3. set aside all-missing predictors, and identifier-like ones — at least
       :data:`IDENTIFIER_MIN_ROWS` non-missing values, all distinct integers or
       all distinct strings — unless listed in ``keep_identifiers`` or ``forced``;
    4. refuse infinite values, non-positive weights; then missing values in the
       columns in use are refused (``missing="refuse"``) or their rows dropped
       (``missing="drop"``);
    5. drop constant predictors (a categorical with one level is constant);
       categoricals get sorted levels with the **most frequent level first as
       the reference** (ties: the first in sort order), and levels with a
       single row are noted (their indicator fits that row exactly);
    6. drop exact duplicates and exact linear combinations of numeric columns
       (see :data:`COLLINEARITY_TOLERANCE`), keeping the first column in order
       (forced ones count as first).  Categorical blocks are checked before the
       numeric columns, since a block cannot be dropped in part: a categorical
       grouping the rows exactly as an earlier one is dropped, a numeric column
       that is a function of a categorical's levels (e.g. a numeric code of
       the cultivar) is dropped, and a categorical partly determined by others
       is only warned about;
    7. check that there are more rows than coefficients (:func:`check_enough_rows`).

    Parameters
    ----------
    source : str, path-like or DataFrame
        What :func:`read_table` accepts.  A DataFrame is never modified.
    response : str
        Name of the numeric response column.
    predictors : list of str, optional
        The predictor columns; by default every column except the response,
        the weights and ``exclude``.  When given, their order is the column
        order used below (otherwise the table's).
    forced : list of str
        Predictors every model must contain; they must be among the predictors.
    exclude : list of str
        Columns to leave out.
    weights : str, optional
        Column of positive, finite row weights (not a predictor).
    missing : {"refuse", "drop"}
        What to do with missing values in the columns in use.
    keep_identifiers : list of str
        Identifier-like columns to keep as predictors anyway.
    encoding : str, optional
        Text encoding of a CSV file (see :func:`read_table`).

    Returns
    -------
    Dataset
        Frozen; ``y`` and ``weights`` are read-only float64 arrays, ``frame``
        holds the kept predictors (float64 or Categorical) on a RangeIndex.

    Raises
    ------
    InputError
        A data problem: a column missing or with two roles, a non-numeric
        response, missing or infinite values, bad weights, a constant response
        or forced column, too few rows.  The message names the column and count.
    OptionError
        An option value outside its range (e.g. ``missing="maybe"``).
    DataFileError
        The file is missing, empty or unreadable.

    Notes
    -----
    p-values of a model chosen by a search from these predictors are
    optimistic, and an association found is not a cause; the decision to use a
    model rests with the practitioner.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> rng = np.random.default_rng(0)
    >>> frame = pd.DataFrame({"light_mol_m2_day": rng.uniform(10, 30, 40),
    ...                       "co2_ppm": rng.uniform(400, 1000, 40),
    ...                       "cultivar": rng.choice(["Ailsa", "Roma"], 40)})
    >>> frame["yield_kg_m2"] = 20 + frame["light_mol_m2_day"] + rng.normal(0, 1, 40)
    >>> data = prepare(frame, response="yield_kg_m2")
    >>> data.numeric, data.categorical, data.n
    (('light_mol_m2_day', 'co2_ppm'), ('cultivar',), 40)
    """
    _refuse_unknown(unknown, _PREPARE_OPTIONS, "prepare")
    if not isinstance(response, str):
        raise OptionError(f"response= takes the name of a column (text), not {response!r}")
    if weights is not None and not isinstance(weights, str):
        raise OptionError(f"weights= takes the name of a column (text) or None, not {weights!r}")
    if missing not in MISSING_POLICIES:
        raise OptionError(f"missing={missing!r} is not an option; choose 'refuse' (stop and list the missing "
                          f"values) or 'drop' (drop the rows with a missing value in a column in use)")
    given = None if predictors is None else _name_list(predictors, "predictors")
    forced = _name_list(forced, "forced")
    exclude = _name_list(exclude, "exclude")
    keep_identifiers = _name_list(keep_identifiers, "keep_identifiers")

    table, read_report = read_table(source, encoding=encoding, decimal_mark=decimal_mark)
    notes: list[Note] = list(read_report.notes)
    pool = _assign_roles(list(table.columns), response=response, weights=weights, given=given, forced=forced,
                         exclude=exclude, keep_identifiers=keep_identifiers, delimiter=read_report.delimiter)

    n_read = len(table)
    nested_aside = _set_aside_nested(table, pool, response=response, weights=weights, named=given is not None,
                                     forced=forced, keep_identifiers=keep_identifiers, notes=notes)
    y_all = _numeric_role(table[response], response, "response")
    w_all = None if weights is None else _numeric_role(table[weights], weights, "weights")
    kinds: dict[str, str] = {}
    values: dict[str, object] = {}
    for name in pool:
        kinds[name], values[name] = _classify(table[name], name, notes, decimal=read_report.decimal)

    set_aside: list[str] = list(nested_aside)

    def set_aside_column(name):
        set_aside.append(name)
        pool.remove(name)

    # all-missing predictors
    for name in list(pool):
        v = values[name]
        count_missing = int(np.isnan(v).sum()) if kinds[name] == "numeric" else int(v.isna().sum())
        if count_missing == n_read:
            if name in forced:
                raise InputError(f"always-included column '{name}' has no values (all {n_read} rows are missing); "
                                 f"fill it in or un-force it", column=name)
            set_aside_column(name)
            notes.append(Note(name, "dropped", f"column '{name}' was dropped: all {n_read} of its values are missing"))

    # identifier-like columns
    identifier_names = _set_aside_identifiers(pool, kinds, values, response, y_all, keep_identifiers, forced, notes,
                                              set_aside_column)

    # infinities
    in_use = [(response, y_all)] + [(c, values[c]) for c in pool if kinds[c] == "numeric"]
    if w_all is not None:
        in_use.append((weights, w_all))
    infinite = [(name, int(np.isinf(x).sum())) for name, x in in_use if np.isinf(x).any()]
    if infinite:
        listing = ", ".join(f"'{name}' ({_plural(c, 'row')})" for name, c in infinite)
        raise InputError(f"infinite values in {listing}; replace them with finite values or blank them out as "
                         f"missing", column=infinite[0][0], counts=dict(infinite))

    # weights
    if w_all is not None:
        bad = int((w_all[~np.isnan(w_all)] <= 0).sum())
        if bad:
            raise InputError(f"weights column '{weights}' has {_plural(bad, 'value')} that are zero or negative; "
                             f"weights must be positive — drop those rows or fix the weights",
                             column=weights, count=bad)

    # missing values
    missing_masks = [(response, np.isnan(y_all))]
    if w_all is not None:
        missing_masks.append((weights, np.isnan(w_all)))
    for name in pool:
        v = values[name]
        missing_masks.append((name, np.isnan(v) if kinds[name] == "numeric" else v.isna().to_numpy()))
    keep, dropped_rows = _rows_to_keep(missing_masks, n_read, missing, notes)
    n = int(keep.sum())

    y = y_all[keep]
    if np.ptp(y) == 0:
        raise InputError(f"response '{response}' is constant ({_format_number(y[0])} in all {n} rows used); there "
                         f"is nothing to explain", column=response)
    w = None if w_all is None else w_all[keep]

    # categoricals and constants
    categoricals: dict[str, pd.Categorical] = {}
    numeric_values: dict[str, np.ndarray] = {}
    for name in list(pool):
        if kinds[name] == "numeric":
            x = values[name][keep]
            if np.ptp(x) == 0:
                if name in forced:
                    raise InputError(f"always-included column '{name}' is constant ({_format_number(x[0])} in all {n} rows "
                                     f"used); it cannot be estimated beside the intercept — un-force it",
                                     column=name)
                set_aside_column(name)
                notes.append(Note(name, "dropped", f"column '{name}' was dropped: it is constant "
                                                   f"({_format_number(x[0])} in all {n} rows used)"))
                continue
            numeric_values[name] = x
        else:
            column = values[name][keep].reset_index(drop=True)
            cat = _categorical(column, name, notes)
            if len(cat.categories) < 2:
                if name in forced:
                    raise InputError(f"always-included column '{name}' has a single level ({cat.categories[0]!r}) in all "
                                     f"{n} rows used; it cannot be estimated — un-force it", column=name)
                set_aside_column(name)
                notes.append(Note(name, "dropped", f"column '{name}' was dropped: it has a single level "
                                                   f"({cat.categories[0]!r}) in all {n} rows used"))
                continue
            n_levels = len(cat.categories)
            if n_levels >= MANY_LEVELS and n_levels - 1 > MANY_LEVELS_ROW_SHARE * n:
                sentence = (f"column '{name}' has {n_levels} levels in {n} rows ({n / n_levels:.1f} rows per level "
                            f"on average); as a predictor it would take {n_levels - 1} indicator columns, more than "
                            f"a quarter of the rows")
                if name not in keep_identifiers and name not in forced:
                    set_aside_column(name)
                    notes.append(Note(name, "dropped", f"{sentence}, so it was set aside as a label; to use it "
                                                       f"anyway, {_keep_hint(name)}, or merge its rare levels first"))
                    continue
                notes.append(Note(name, "warning", f"{sentence}; it is kept as a predictor, as asked"))
            level_counts = pd.Series(cat.codes).value_counts()
            singles = [cat.categories[code] for code in sorted(level_counts[level_counts == 1].index)]
            if singles:
                notes.append(Note(name, "warning",
                                  f"column '{name}' has {_plural(len(singles), 'level')} with a single row "
                                  f"({_quoted_list(map(str, singles), 5)}); the indicator of such a level fits its "
                                  f"row exactly, so that row carries no information about the other terms"))
            notes.append(Note(name, "info", f"column '{name}' is categorical with {len(cat.categories)} levels; "
                                            f"reference level {cat.categories[0]!r} (the most frequent)"))
            categoricals[name] = cat

    # duplicates and exact collinearity.  With too few rows every column beyond the
    # (n − 1)-th lies in the span of the others, so the row count is judged on the
    # columns before this step whenever the columns kept after it are still too many
    # (when they are not, every drop was a genuine exact combination).
    width_before = sum(1 for c in pool if kinds[c] == "numeric") + sum(
        len(categoricals[c].categories) - 1 for c in pool if kinds[c] == "categorical")
    pool_before = list(pool)
    collinear = _set_aside_collinear(n, pool, kinds, numeric_values, categoricals, forced, notes)
    for name in collinear or ():  # None: the columns already span every direction, too many for the rows
        set_aside_column(name)

    if not pool:
        raise InputError(f"no predictor columns are left ({_plural(len(set_aside), 'column')} set aside: "
                         f"{_quoted_list(set_aside)}); see the notes, or check that the file was split into "
                         f"columns (delimiter read: {read_report.delimiter!r})", set_aside=tuple(set_aside))
    numeric = tuple(c for c in pool if kinds[c] == "numeric")
    categorical = tuple(c for c in pool if kinds[c] == "categorical")
    width = len(numeric) + sum(len(categoricals[c].categories) - 1 for c in categorical)
    if collinear is None or n < width + 2:
        width = width_before
    try:
        check_enough_rows(n, width, what=f"the {_plural(len(pool_before), 'predictor')}")
    except InputError as err:
        wide = sorted((c for c in pool_before if kinds[c] == "categorical"),
                      key=lambda c: -len(categoricals[c].categories))
        if not wide:
            raise
        listing = ", ".join(f"'{c}' ({len(categoricals[c].categories)} levels)" for c in wide[:5])
        raise InputError(f"{err} — a categorical column counts one column per level but one: {listing}",
                         column=wide[0], **err.context) from err

    frame = pd.DataFrame({c: (numeric_values[c] if kinds[c] == "numeric" else categoricals[c]) for c in pool},
                         index=pd.RangeIndex(n))
    y = np.array(y, dtype=np.float64)
    y.flags.writeable = False
    if w is not None:
        w = np.array(w, dtype=np.float64)
        w.flags.writeable = False
    source_rows = np.flatnonzero(keep)
    source_rows.flags.writeable = False
    identifiers = None
    if identifier_names:
        identifiers = table.loc[keep, identifier_names].reset_index(drop=True)
    report = IntakeReport(source=read_report.source, n_rows_read=n_read, n_rows_used=n,
                          encoding=read_report.encoding, delimiter=read_report.delimiter,
                          decimal=read_report.decimal, notes=tuple(notes),
                          dropped_rows=tuple(int(i) for i in dropped_rows), set_aside=tuple(set_aside))
    return Dataset(response=response, y=y, frame=frame, numeric=numeric, categorical=categorical,
                   forced=tuple(c for c in pool if c in forced), weights=w, report=report,
                   source_rows=source_rows, identifiers=identifiers)
