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

import bz2
import codecs
import csv
import difflib
import gzip
import io
import lzma
import os
import re
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

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
    "MISSING_POLICIES",
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

#: Valid values of ``prepare(missing=...)``.
MISSING_POLICIES = ("refuse", "drop")

_DELIMITERS = (",", ";", "\t", "|")
_DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
_PARQUET_SUFFIXES = (".parquet", ".pq")
_COMPRESSED = {".gz": gzip.open, ".bz2": bz2.open, ".xz": lzma.open}
_SAMPLE_BYTES = 1 << 18

_COMMA_DECIMAL = re.compile(r"^[+-]?(\d{1,3}(\.\d{3})+|\d+),\d+([eE][+-]?\d+)?$")
_DOT_GROUPED = re.compile(r"^[+-]?\d{1,3}(\.\d{3})+$")
_DOT_DECIMAL = re.compile(r"^[+-]?(\d+\.\d*|\.\d+)([eE][+-]?\d+)?$")


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


_READ_OPTIONS = ("encoding",)
_PREPARE_OPTIONS = ("response", "predictors", "forced", "exclude", "weights", "missing", "keep_identifiers",
                    "encoding")


def read_table(source, *, encoding: str | None = None, **unknown) -> tuple[pd.DataFrame, IntakeReport]:
    """Read a CSV file, a Parquet file or a DataFrame into a DataFrame.

    CSV files: the delimiter is chosen among comma, semicolon, tab and vertical
    bar as the one giving at least two fields and the most consistent number of
    fields per line in the first 256 KiB; with a delimiter other than a comma,
    the decimal mark is a comma when more number-like fields are written
    ``3,14`` than ``3.14`` (a dot then counts as a thousands separator only if
    every dotted number is grouped in threes, ``1.234,5``).  The text is read
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

    Returns
    -------
    frame : DataFrame
        The table, index ``RangeIndex``.
    report : IntakeReport
        ``source``, ``encoding``, ``delimiter``, ``decimal``, ``n_rows_read``
        (``n_rows_used`` equals it here) and ``notes``.

    Raises
    ------
    DataFileError
        The file does not exist, is empty, has a header but no data rows, or
        cannot be parsed; pyarrow missing for a Parquet file.
    InputError
        Column names repeat; a DataFrame without rows or columns.
    OptionError
        ``encoding`` is not a known codec, or is given for a DataFrame/Parquet file.

    Examples
    --------
    >>> import pandas as pd
    >>> frame, report = read_table(pd.DataFrame({"yield_kg_m2": [41.0, 44.5], "co2_ppm": [800, 950]}))
    >>> frame.shape, report.source, report.n_rows_read
    ((2, 2), None, 2)
    """
    _refuse_unknown(unknown, _READ_OPTIONS, "read_table")
    if isinstance(source, pd.DataFrame):
        if encoding is not None:
            raise OptionError("encoding= applies to CSV files only; the source here is a DataFrame — "
                              "leave encoding out")
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
    compression = suffixes[-1] if suffixes and suffixes[-1] in _COMPRESSED else None
    inner = suffixes[-2] if compression and len(suffixes) > 1 else (suffixes[-1] if suffixes else "")
    if inner in _PARQUET_SUFFIXES and compression is None:
        if encoding is not None:
            raise OptionError(f"encoding= applies to CSV files only; '{path.name}' is a Parquet file, which "
                              f"records its own text encoding — leave encoding out")
        return _read_parquet(path)
    return _read_csv(path, encoding, compression)


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


def _encoding_from_bom(head: bytes) -> str | None:
    if head.startswith(codecs.BOM_UTF8):
        return "utf-8-sig"
    if head.startswith(codecs.BOM_UTF16_LE) or head.startswith(codecs.BOM_UTF16_BE):
        return "utf-16"
    return None


def _records(text: str, delimiter: str):
    reader = csv.reader(io.StringIO(text), delimiter=delimiter, skipinitialspace=True)
    try:
        return [row for row in reader if any(cell.strip() for cell in row)]
    except csv.Error:
        return []


def _sniff_delimiter(text: str) -> str:
    best_key, best = None, ","
    for delimiter in _DELIMITERS:
        rows = _records(text, delimiter)
        if not rows or len(rows[0]) < 2:
            continue
        width = len(rows[0])
        consistent = sum(len(r) == width for r in rows) / len(rows)
        key = (consistent, width)
        if best_key is None or key > best_key:
            best_key, best = key, delimiter
    return best


def _sniff_decimal(rows, delimiter: str):
    """Return (decimal, thousands, note or None) from the data rows of a sample."""
    if delimiter == ",":
        return ".", None, None
    comma = dot = grouped = 0
    for row in rows:
        for cell in row:
            cell = cell.strip()
            if _COMMA_DECIMAL.match(cell):
                comma += 1
            elif _DOT_GROUPED.match(cell):
                grouped += 1
            elif _DOT_DECIMAL.match(cell):
                dot += 1
    if comma > dot:
        thousands = "." if grouped and not dot else None
        note = None
        if dot:
            note = Note(None, "warning",
                        f"the file mixes decimal marks: {comma} numbers are written with a decimal comma and "
                        f"{dot} with a decimal point; it was read with the comma, so columns written with a "
                        f"point may be read as text — make the decimal mark consistent")
        return ",", thousands, note
    note = None
    if comma:
        note = Note(None, "warning",
                    f"the file mixes decimal marks: {dot} numbers are written with a decimal point and {comma} "
                    f"with a decimal comma; it was read with the point, so columns written with a comma may "
                    f"be read as text — make the decimal mark consistent")
    return ".", None, note


def _read_csv(path: Path, encoding: str | None, compression: str | None):
    opener = _COMPRESSED.get(compression, open)
    try:
        with opener(path, "rb") as handle:
            head = handle.read(_SAMPLE_BYTES)
            truncated = bool(handle.read(1))
    except OSError as err:
        raise DataFileError(f"cannot open data file '{path}': {err}", path=str(path)) from err
    empty_message = (f"data file '{path}' is empty: it has no header and no data rows; "
                     f"check that the right file was exported")
    if not head.strip():
        raise DataFileError(empty_message, path=str(path))
    if head.startswith((b"PK\x03\x04", b"\xd0\xcf\x11\xe0")):
        raise DataFileError(f"'{path.name}' looks like a spreadsheet workbook, not a text table; save the sheet as "
                            f"CSV (or Parquet) and read that", path=str(path))
    if head.startswith(b"PAR1"):
        raise DataFileError(f"'{path.name}' looks like a Parquet file; give it the suffix .parquet or .pq",
                            path=str(path))
    notes: list[Note] = []
    if encoding is not None:
        try:
            codecs.lookup(encoding)
        except LookupError as err:
            raise OptionError(f"encoding={encoding!r} is not a text encoding Python knows; use e.g. 'utf-8', "
                              f"'latin-1' or 'cp1252'") from err
        chosen = encoding
    else:
        chosen = _encoding_from_bom(head) or "utf-8"
    raw = head
    if truncated and not chosen.lower().replace("_", "-").startswith("utf-16") and b"\n" in head:
        raw = head[: head.rindex(b"\n") + 1]  # do not cut a character in two
    try:
        sample = raw.decode(chosen)
    except UnicodeDecodeError:
        sample = raw.decode("latin-1" if encoding is None else chosen, errors="replace")
    sample = sample.lstrip("\ufeff")
    if truncated and "\n" in sample:
        sample = sample[: sample.rindex("\n")]
    delimiter = _sniff_delimiter(sample)
    rows = _records(sample, delimiter)
    header = [cell.strip() for cell in rows[0]] if rows else []
    _check_unique_names([name for name in header if name], f"the header of '{path.name}'")
    unnamed = [i + 1 for i, name in enumerate(header) if not name]
    if unnamed:
        notes.append(Note(None, "warning",
                          f"{_plural(len(unnamed), 'column')} of '{path.name}' (number "
                          f"{', '.join(map(str, unnamed[:10]))}) have no name in the header; they were named "
                          f"'Unnamed: <position>' — name them, or exclude them if they are a saved row index"))
    decimal, thousands, decimal_note = _sniff_decimal(rows[1:], delimiter)
    if decimal_note is not None:
        notes.append(decimal_note)

    def parse(text_encoding):
        return pd.read_csv(path, sep=delimiter, decimal=decimal, thousands=thousands, encoding=text_encoding,
                           skipinitialspace=True, low_memory=False)

    try:
        try:
            frame = parse(chosen)
        except UnicodeDecodeError as err:
            if encoding is not None:
                raise DataFileError(
                    f"data file '{path}' is not valid {encoding} ({err.reason} at byte {err.start} of a block); "
                    f"pass the file's real encoding, e.g. encoding='utf-8' or encoding='cp1252'",
                    path=str(path)) from err
            frame = parse("latin-1")
            chosen = "latin-1"
            notes.append(Note(None, "warning",
                              f"'{path.name}' is not valid UTF-8, so it was read as Latin-1 (ISO-8859-1), which "
                              f"accepts any bytes; check that accented names and units (°, µ) look right, and pass "
                              f"encoding=... with the file's real encoding to be sure"))
    except pd.errors.EmptyDataError as err:
        raise DataFileError(empty_message, path=str(path)) from err
    except pd.errors.ParserError as err:
        raise DataFileError(
            f"cannot parse '{path}' as {_DELIMITER_NAMES[delimiter]}-separated text: {err}; check that every "
            f"line has as many fields as the header (quote text fields that contain the delimiter)",
            path=str(path)) from err
    frame.columns = [str(c).strip() for c in frame.columns]
    if len(frame) == 0:
        raise DataFileError(
            f"data file '{path}' has a header ({_plural(frame.shape[1], 'column')}) but no data rows; "
            f"export the table with its rows", path=str(path))
    n = len(frame)
    notes.insert(0, Note(None, "info",
                         f"read {_plural(n, 'data row')} and {_plural(frame.shape[1], 'column')} from '{path.name}' "
                         f"({chosen}, {_DELIMITER_NAMES[delimiter]}-separated, decimal mark '{decimal}')"))
    return frame, IntakeReport(source=str(path), n_rows_read=n, n_rows_used=n, encoding=chosen,
                               delimiter=delimiter, decimal=decimal, notes=tuple(notes))


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


def _classify(series: pd.Series, name: str, notes: list[Note]):
    """('numeric', float array) or ('categorical', object Series); dates and complex numbers raise."""
    dtype = series.dtype
    if _is_date_like(series):
        raise InputError(f"column '{name}' holds dates or time spans (type {dtype}); convert it to a number "
                         f"(e.g. days since the first planting) or pass exclude=['{name}']", column=name)
    if pd.api.types.is_complex_dtype(dtype):
        raise InputError(f"column '{name}' holds complex numbers; pass exclude=['{name}']", column=name)
    if isinstance(dtype, pd.CategoricalDtype) or pd.api.types.is_bool_dtype(dtype):
        return "categorical", series.astype(object)
    if pd.api.types.is_numeric_dtype(dtype):
        return "numeric", series.to_numpy(dtype=np.float64, na_value=np.nan)
    inferred = pd.api.types.infer_dtype(series, skipna=True)
    if inferred in ("integer", "floating", "mixed-integer-float", "decimal"):
        return "numeric", _as_float(series)
    if inferred in ("datetime", "datetime64", "date", "timedelta", "timedelta64", "time", "period"):
        raise InputError(f"column '{name}' holds dates or times; convert it to a number (e.g. days since the "
                         f"first planting) or pass exclude=['{name}']", column=name)
    values = series.astype(object)
    counts = values.value_counts(dropna=True)  # judged on distinct values, weighted by their counts
    if len(counts):
        text = pd.Series(counts.index.map(lambda v: str(v).strip()), dtype=object)
        weight = counts.to_numpy()
        numeric = pd.to_numeric(text, errors="coerce").notna().to_numpy()
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
                              f"file with one decimal mark to use it as a number"))
        elif weight[numeric].sum() >= 0.8 * total:
            odd = int(weight[~numeric].sum())
            example = text[~numeric].iloc[0]
            notes.append(Note(name, "warning",
                              f"column '{name}' is read as text because {_plural(odd, 'value')} of {total} are not "
                              f"numbers (e.g. {example!r}); it is treated as categorical — if those values mean "
                              f"'missing', blank them out"))
    return "categorical", values


def _is_identifier(kind: str, values) -> bool:
    if kind == "numeric":
        present = values[~np.isnan(values)]
        if present.size < IDENTIFIER_MIN_ROWS or not np.all(np.isfinite(present)):
            return False
        return bool(np.all(present == np.round(present)) and np.unique(present).size == present.size)
    present = values[values.notna()]
    if len(present) < IDENTIFIER_MIN_ROWS:
        return False
    if not all(isinstance(v, (str, np.str_)) for v in present):
        return False
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
    z = x - x.mean()
    norm = np.linalg.norm(z)
    return None if norm == 0 else z / norm


class _Span:
    """An orthonormal basis of the centred columns kept so far (Gram–Schmidt, re-orthogonalised)."""

    def __init__(self, n: int, capacity: int):
        self._basis = np.empty((n, max(min(capacity, n), 1)), order="F")
        self.size = 0

    def leftover(self, z: np.ndarray) -> np.ndarray:
        basis = self._basis[:, : self.size]
        for _ in range(2):
            z = z - basis @ (basis.T @ z)
        return z

    def add(self, r: np.ndarray) -> None:
        self._basis[:, self.size] = r / np.linalg.norm(r)
        self.size += 1


def _format_number(value: float) -> str:
    return f"{value:.4g}"


def _describe_combination(name, target, numeric_kept, categorical_kept):
    """A sentence saying of which kept columns ``target`` is an exact linear combination."""
    n = target.shape[0]
    blocks = [np.ones((n, 1))]
    labels = [None]
    for other, x in numeric_kept:
        blocks.append(x[:, None])
        labels.append(other)
    for other, codes, width in categorical_kept:
        dummies = (codes[:, None] == np.arange(1, width + 1)).astype(float)
        blocks.append(dummies)
        labels.extend([("block", other)] * width)
    design = np.column_stack(blocks)
    coef = np.linalg.lstsq(design, target, rcond=None)[0]
    scale = np.std(target)
    involved, terms = [], []
    for label, b, column in zip(labels, coef, design.T):
        size = abs(b) * (np.std(column) if label is not None else 1.0)
        if label is None or size <= 1e-6 * scale:
            continue
        if isinstance(label, tuple):
            if label[1] not in involved:
                involved.append(label[1])
            continue
        involved.append(label)
        terms.append((b, label))
    formula = " ".join(("" if i == 0 and b >= 0 else ("− " if b < 0 else "+ ")) + f"{_format_number(abs(b))}·{lab}"
                       for i, (b, lab) in enumerate(terms))
    blocks_involved = [c for c in involved if c in {cat for cat, _, _ in categorical_kept}]
    if blocks_involved:
        # The intercept is not identified apart from the level effects; leave it out.
        formula = (formula + " + " if formula else "") + "a value for each level of " + _quoted_list(blocks_involved)
    elif abs(coef[0]) > 1e-9 * max(scale, abs(target).max()):
        formula += (" − " if coef[0] < 0 else " + ") + _format_number(abs(coef[0]))
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
                raise InputError(f"forced column '{name}' groups the rows exactly as '{partitions[key]}' does; "
                                 f"force only one of them", column=name)
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

    j = 0
    for name, _, width in cat_kept:
        in_span = 0
        for _ in range(width):
            leftover = span.leftover(r_factor[:, j])
            j += 1
            if np.linalg.norm(leftover) <= COLLINEARITY_TOLERANCE:
                in_span += 1
            else:
                span.add(leftover)
        if in_span:
            notes.append(Note(name, "warning",
                              f"column '{name}' is partly determined by the categorical columns before it: "
                              f"{in_span} of its {width} indicator columns are exact combinations of theirs, so a "
                              f"model holding '{name}' with them is singular"))
    num_kept: list[tuple[str, np.ndarray]] = []
    for name in num_order:
        leftover = span.leftover(r_factor[:, j])
        j += 1
        x = numeric_values[name]
        if np.linalg.norm(leftover) > COLLINEARITY_TOLERANCE:
            span.add(leftover)
            num_kept.append((name, x))
            continue
        twin = next((other for other, kept in num_kept if np.array_equal(kept, x)), None)
        if twin is not None:
            sentence = f"'{name}' is identical to '{twin}'"
        else:
            sentence = _describe_combination(name, x, num_kept, cat_kept)
        if name in forced:
            raise InputError(f"forced column {sentence}; "
                             f"a model cannot hold it with the columns it depends on — force fewer columns or "
                             f"exclude one of them", column=name)
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
                         f"least one — pass missing='drop' to drop those rows, or fill the values in first",
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


def _assign_roles(columns, *, response, weights, given, forced, exclude, keep_identifiers, delimiter):
    """Check that every named column exists and has one role; return the predictor pool in order."""
    _require_column(response, columns, "response")
    if weights is not None:
        _require_column(weights, columns, "weights")
    for role, names in (("predictor", given or ()), ("forced", forced), ("excluded", exclude),
                        ("keep_identifiers", keep_identifiers)):
        for name in names:
            _require_column(name, columns, role)

    for role, names in (("predictors", given or ()), ("forced", forced), ("exclude", exclude)):
        if response in names:
            raise InputError(f"'{response}' is the response and cannot also be listed in {role}=; "
                             f"remove it from {role}", column=response)
    if weights is not None:
        if weights == response:
            raise InputError(f"'{weights}' cannot be both the response and the weights", column=weights)
        for role, names in (("predictors", given or ()), ("forced", forced)):
            if weights in names:
                raise InputError(f"'{weights}' is the weights column and cannot also be listed in {role}=; "
                                 f"weights are not a predictor", column=weights)
    for name in forced:
        if name in exclude:
            raise InputError(f"column '{name}' is both forced and excluded; remove it from one of the two",
                             column=name)
    for name in given or ():
        if name in exclude:
            raise InputError(f"column '{name}' is both listed in predictors= and excluded; remove it from one "
                             f"of the two", column=name)

    if given is None:
        pool = [c for c in columns if c not in (response, weights) and c not in exclude]
    else:
        pool = list(given)
    for name in forced:
        if name not in pool:
            raise InputError(f"forced column '{name}' is not among the predictors; add it to predictors=",
                             column=name)
    for name in keep_identifiers:
        if name not in pool:
            raise InputError(f"keep_identifiers names '{name}', which is not among the predictors; add it to "
                             f"predictors= or remove it from keep_identifiers", column=name)
    if not pool:
        raise InputError(f"the table has no column besides the response '{response}'"
                         f"{' and the weights' if weights else ''} to use as a predictor; check that the file was "
                         f"split into columns (delimiter read: {delimiter!r}) and the roles given")
    return pool


def prepare(source, *, response: str, predictors=None, forced=(), exclude=(), weights: str | None = None,
            missing: str = "refuse", keep_identifiers=(), encoding: str | None = None, **unknown) -> Dataset:
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

    table, read_report = read_table(source, encoding=encoding)
    notes: list[Note] = list(read_report.notes)
    pool = _assign_roles(list(table.columns), response=response, weights=weights, given=given, forced=forced,
                         exclude=exclude, keep_identifiers=keep_identifiers, delimiter=read_report.delimiter)

    n_read = len(table)
    y_all = _numeric_role(table[response], response, "response")
    w_all = None if weights is None else _numeric_role(table[weights], weights, "weights")
    kinds: dict[str, str] = {}
    values: dict[str, object] = {}
    for name in pool:
        kinds[name], values[name] = _classify(table[name], name, notes)

    set_aside: list[str] = []

    def set_aside_column(name):
        set_aside.append(name)
        pool.remove(name)

    # all-missing predictors
    for name in list(pool):
        v = values[name]
        count_missing = int(np.isnan(v).sum()) if kinds[name] == "numeric" else int(v.isna().sum())
        if count_missing == n_read:
            if name in forced:
                raise InputError(f"forced column '{name}' has no values (all {n_read} rows are missing); "
                                 f"fill it in or un-force it", column=name)
            set_aside_column(name)
            notes.append(Note(name, "dropped", f"column '{name}' was dropped: all {n_read} of its values are missing"))

    # identifier-like columns
    identifier_names = []
    for name in list(pool):
        if _is_identifier(kinds[name], values[name]):
            what = "integers" if kinds[name] == "numeric" else "text values"
            if name in keep_identifiers or name in forced:
                notes.append(Note(name, "warning", f"column '{name}' looks like a row identifier (its values are "
                                                   f"all distinct {what}) but is kept as a predictor, as asked"))
                continue
            set_aside_column(name)
            identifier_names.append(name)
            notes.append(Note(name, "dropped",
                              f"column '{name}' looks like a row identifier (its non-missing values are all distinct "
                              f"{what}) and was excluded; to use it as a predictor, list it in keep_identifiers= "
                              "(--keep-id-columns at the command line)"))

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
                    raise InputError(f"forced column '{name}' is constant ({_format_number(x[0])} in all {n} rows "
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
                    raise InputError(f"forced column '{name}' has a single level ({cat.categories[0]!r}) in all "
                                     f"{n} rows used; it cannot be estimated — un-force it", column=name)
                set_aside_column(name)
                notes.append(Note(name, "dropped", f"column '{name}' was dropped: it has a single level "
                                                   f"({cat.categories[0]!r}) in all {n} rows used"))
                continue
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
    for name in _set_aside_collinear(n, pool, kinds, numeric_values, categoricals, forced, notes):
        set_aside_column(name)

    if not pool:
        raise InputError(f"no predictor columns are left ({_plural(len(set_aside), 'column')} set aside: "
                         f"{_quoted_list(set_aside)}); see the notes, or check that the file was split into "
                         f"columns (delimiter read: {read_report.delimiter!r})", set_aside=tuple(set_aside))
    numeric = tuple(c for c in pool if kinds[c] == "numeric")
    categorical = tuple(c for c in pool if kinds[c] == "categorical")
    width = len(numeric) + sum(len(categoricals[c].categories) - 1 for c in categorical)
    if n < width + 2:
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
