"""Reading a CSV file: encoding, delimiter, decimal mark, thousands grouping and ragged rows.

A private helper of :mod:`selectkit.data`, which is its only user and turns
what :func:`read_csv_file` returns into an intake report.  Nothing here
prints; bad input raises an error from :mod:`selectkit.errors`.

The decimal mark is decided from evidence, never from a majority vote
(a vote lets one stray cell turn every number of a file into one a thousand
times too big).  Every number-like cell of the first 256 KiB is sorted into
one of these kinds:

=====================  ==================  =========================================
kind                   example             what it shows
=====================  ==================  =========================================
decimal point          ``7.44``, ``0.125``  the decimal mark is ``.``
decimal comma          ``2,5``, ``0,125``   the decimal mark is ``,``
dot groups             ``1.234.567``,       ``.`` groups thousands, so the decimal
                       ``1.234,5``          mark is ``,``
comma groups           ``1,234,567``,       ``,`` groups thousands, so the decimal
                       ``1,234.5``          mark is ``.``
three after a dot      ``9.192``            either a decimal point or a dot grouping
three after a comma    ``1,234``            either a decimal comma or a comma grouping
=====================  ==================  =========================================

A column whose dotted cells all have three digits after the dot and whose
whole numbers are all below 1000 (``1.234``, ``980``, ``2.345``) also shows a
dot grouping thousands (likewise for commas).  Columns where fewer than half
of the filled cells are numbers (text columns) give no evidence.

The rules:

1. Evidence for both marks → refuse, quoting one cell of each side.
2. Evidence for one mark → it is the decimal mark.  Cells with three digits
   after the *other* mark are read as grouped thousands only when some cell
   of the file shows that grouping; otherwise → refuse (this is the case of a
   file of ``9.192`` cells and one ``2,5``).
3. Only cells with three digits after a mark: they are read as decimals, with
   a warning; cells of that kind after both marks → refuse.

Every refusal names ``decimal_mark=`` (``--decimal-mark``), which decides:
given the decimal mark, the other mark can only group thousands, and it is
read so wherever it groups digits in threes (``1.234`` but never ``9.19``).
Thousands are never stripped by the parser itself, which would read ``9.19``
as ``919``; grouped columns are converted here, cell by cell, only when every
cell is grouped correctly.  After the whole file is read, a number-like cell
beyond the sample that contradicts the decision is refused too.
"""

from __future__ import annotations

import bz2
import codecs
import csv
import gzip
import io
import lzma
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .settings import spell
from .errors import DataFileError, OptionError

__all__ = ["CsvReading", "read_csv_file", "refuse_binary", "DECIMAL_MARKS", "COMPRESSED", "describe_marks"]

#: Values of ``decimal_mark=``.
DECIMAL_MARKS = (".", ",")

COMPRESSED = {".gz": gzip.open, ".bz2": bz2.open, ".xz": lzma.open}
_DELIMITERS = (",", ";", "\t", "|")
DELIMITER_NAMES = {",": "comma", ";": "semicolon", "\t": "tab", "|": "vertical bar"}
_SAMPLE_BYTES = 1 << 18
_MARK_NAMES = {".": "point", ",": "comma"}
_MARK_WORDS = {".": "a dot", ",": "a comma"}

# pandas' default strings for a missing value (pandas.read_csv, na_values)
_MISSING_TEXT = frozenset(["", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan", "1.#IND",
                           "1.#QNAN", "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a", "nan", "null"])

_S = r"[+-]?"
_E = r"(?:[eE][+-]?\d+)?"
_G1 = r"[1-9]\d{0,2}"  # the first group of a grouped number never starts with 0
#: (kind, pattern), tried in this order; the first match wins.
_CELL_KINDS = (
    ("integer", re.compile(rf"^{_S}\d+$")),
    ("plain", re.compile(rf"^{_S}(?:\d+[eE][+-]?\d+|inf|infinity)$", re.IGNORECASE)),
    ("dot_three", re.compile(rf"^{_S}{_G1}\.\d{{3}}$")),
    ("comma_three", re.compile(rf"^{_S}{_G1},\d{{3}}$")),
    ("dot_groups", re.compile(rf"^{_S}{_G1}(?:\.\d{{3}}){{2,}}$|^{_S}{_G1}(?:\.\d{{3}})+,\d*$")),
    ("comma_groups", re.compile(rf"^{_S}{_G1}(?:,\d{{3}}){{2,}}$|^{_S}{_G1}(?:,\d{{3}})+\.\d*$")),
    ("point", re.compile(rf"^{_S}(?:\d+\.\d*|\.\d+){_E}$")),
    ("comma", re.compile(rf"^{_S}(?:\d+,\d*|,\d+){_E}$")),
)
_SHOWS = {  # what a cell of each kind says about the decimal mark
    "point": (".", "is written with a decimal point"),
    "comma_groups": (".", "groups thousands with commas, so its decimal mark is a point"),
    "comma": (",", "is written with a decimal comma"),
    "dot_groups": (",", "groups thousands with dots, so its decimal mark is a comma"),
}
_THREE = {".": "dot_three", ",": "comma_three"}
_GROUPS = {".": "dot_groups", ",": "comma_groups"}


def _other(mark: str) -> str:
    return "," if mark == "." else "."


@dataclass(frozen=True)
class CsvReading:
    """What :func:`read_csv_file` read and decided.

    Attributes
    ----------
    frame : DataFrame
        The table on a RangeIndex.
    encoding, delimiter, decimal : str
    grouping : str or None
        The thousands separator used (``"."`` or ``","``), None when no number is grouped.
    notes : tuple of (str, str)
        ``(kind, message)`` of each decision, kind ``"info"`` or ``"warning"``.
    """

    frame: pd.DataFrame
    encoding: str
    delimiter: str
    decimal: str
    grouping: str | None
    notes: tuple[tuple[str, str], ...]


# --------------------------------------------------------------------------- records


def _records(text: str, delimiter: str):
    """``[(line, fields)]`` of the non-blank records of ``text``; ``line`` is where the record starts (1-based)."""
    reader = csv.reader(io.StringIO(text), delimiter=delimiter, skipinitialspace=True)
    out, end = [], 0
    try:
        for row in reader:
            start, end = end + 1, reader.line_num
            if any(cell.strip() for cell in row):
                out.append((start, row))
    except csv.Error:
        return []
    return out


def _file_records(path: Path, opener, encoding: str, delimiter: str):
    """Yield ``(line, fields)`` for every record of the file that pandas keeps (header first).

    pandas skips empty and blank lines; a line of empty fields (``;;``) is a row.
    """
    with opener(path, "rt", encoding=encoding, errors="replace", newline="") as handle:
        reader = csv.reader(handle, delimiter=delimiter, skipinitialspace=True)
        end = 0
        for row in reader:
            start, end = end + 1, reader.line_num
            if len(row) <= 1 and not "".join(row).strip():
                continue
            yield start, row


def _sniff_delimiter(text: str) -> str:
    best_key, best = None, ","
    for delimiter in _DELIMITERS:
        rows = _records(text, delimiter)
        if not rows or len(rows[0][1]) < 2:
            continue
        width = len(rows[0][1])
        consistent = sum(len(r) == width for _, r in rows) / len(rows)
        key = (consistent, width)
        if best_key is None or key > best_key:
            best_key, best = key, delimiter
    return best


# --------------------------------------------------------------------------- decimal mark and grouping


def _cell_kind(cell: str) -> str | None:
    for kind, pattern in _CELL_KINDS:
        if pattern.match(cell):
            return kind
    return None


@dataclass
class _Example:
    cell: str
    column: str
    line: int | None  # None when the line is not known (beyond the sample)

    def where(self) -> str:
        at = f", line {self.line}" if self.line is not None else ""
        return f"'{self.cell}' (column '{self.column}'{at})"


class _Evidence:
    """The first cell of each kind in the number-like columns of the sample."""

    def __init__(self, header, records):
        self.first: dict[str, _Example] = {}
        self.signature: dict[str, _Example] = {}  # mark -> a column showing that mark grouping thousands
        columns: list[dict] = [dict(filled=0, numbers=0, kinds={}, small_int=None, big_int=False)
                               for _ in header]
        for line, row in records:
            for j, cell in enumerate(row[: len(header)]):
                cell = cell.strip()
                if cell in _MISSING_TEXT:
                    continue
                column = columns[j]
                column["filled"] += 1
                kind = _cell_kind(cell)
                if kind is None:
                    continue
                column["numbers"] += 1
                if kind == "integer":
                    if len(cell.lstrip("+-")) <= 3:
                        column["small_int"] = column["small_int"] or cell
                    else:
                        column["big_int"] = True
                elif kind not in column["kinds"]:
                    column["kinds"][kind] = _Example(cell, header[j], line)
        for name, column in zip(header, columns):
            if column["numbers"] == 0 or 2 * column["numbers"] < column["filled"]:
                continue  # a text column tells nothing about numbers
            kinds = column["kinds"]
            for kind, example in kinds.items():
                self.first.setdefault(kind, example)
            for mark in DECIMAL_MARKS:
                three = _THREE[mark]
                if (three in kinds and set(kinds) <= {three, _GROUPS[mark]} and column["small_int"]
                        and not column["big_int"]):
                    self.signature.setdefault(mark, kinds[three])

    def side(self, mark: str) -> tuple[_Example, str] | None:
        """A cell showing that ``mark`` is the decimal mark, and what it shows."""
        for kind, (shown, sentence) in _SHOWS.items():
            if shown == mark and kind in self.first:
                return self.first[kind], sentence
        if _other(mark) in self.signature:
            example = self.signature[_other(mark)]
            return example, (f"groups thousands with {_MARK_WORDS[_other(mark)][2:]}s (whole numbers below 1000 "
                             f"are written without one in that column), so its decimal mark is "
                             f"a {_MARK_NAMES[mark]}")
        return None

    def groups_with(self, mark: str) -> bool:
        return _GROUPS[mark] in self.first or mark in self.signature


class _Conflict(Exception):
    """The evidence disagrees; ``args[0]`` is the clause that shows how."""


def _decide_marks(evidence: _Evidence):
    """(decimal, grouping or None, basis sentence, warning or None); raise _Conflict when the evidence disagrees."""
    point, comma = evidence.side("."), evidence.side(",")
    if point and comma:
        raise _Conflict(f"{point[0].where()} {point[1]}, but {comma[0].where()} {comma[1]}")
    decided = "." if point else ("," if comma else None)
    if decided is not None:
        example, sentence = point or comma
        other = _other(decided)
        grouping = other if evidence.groups_with(other) else None
        three = evidence.first.get(_THREE[other])
        if three is not None and grouping is None:
            value = three.cell.replace(other, "")
            raise _Conflict(f"{example.where()} {sentence}, but then {three.where()} would have to be {value}, "
                            f"with {_MARK_WORDS[other]} grouping thousands, which no other cell shows")
        return decided, grouping, f"{example.where()}, which {sentence}", None
    dot, comma_three = evidence.first.get("dot_three"), evidence.first.get("comma_three")
    if dot and comma_three:
        raise _Conflict(f"{dot.where()} and {comma_three.where()} both have three digits after the mark, so "
                        f"either mark could be the decimal mark and the other group thousands")
    if dot or comma_three:
        mark = "." if dot else ","
        example = dot or comma_three
        warning = (f"every number written with {_MARK_WORDS[mark]} has exactly three digits after it (e.g. "
                   f"{example.where()}), so {_MARK_WORDS[mark]} could also be grouping thousands; it was read as "
                   f"the decimal mark — if it groups thousands, give {spell('decimal_mark', _other(mark))}")
        return mark, None, f"{example.where()}, read as a decimal (three digits after the mark)", warning
    return ".", None, None, None


def _conflict_message(path: Path, clause: str) -> str:
    return (f"cannot tell the decimal mark of '{path.name}': {clause}; give "
            f"{spell('decimal_mark', '.')} or {spell('decimal_mark', ',')} to say which — the other mark is then "
            f"read as grouping thousands where it groups digits in threes")


def _grouped_number(decimal: str, grouping: str) -> re.Pattern:
    d, g = re.escape(decimal), re.escape(grouping)
    return re.compile(rf"^{_S}(?:{_G1}(?:{g}\d{{3}})+(?:{d}\d*)?|\d+(?:{d}\d*)?{_E}|{d}\d+{_E})$")


def _convert_grouped(frame: pd.DataFrame, decimal: str, grouping: str) -> list[str]:
    """Convert in place the text columns whose every filled cell is a number grouped with ``grouping``."""
    pattern = _grouped_number(decimal, grouping)
    converted = []
    for name in frame.columns:
        column = frame[name]
        if pd.api.types.is_numeric_dtype(column.dtype) or isinstance(column.dtype, pd.CategoricalDtype):
            continue
        present = column[column.notna()]
        if len(present) == 0:
            continue
        distinct = pd.Series(pd.unique(present.astype(str).str.strip()), dtype=object)
        if not distinct.str.contains(grouping, regex=False).any():
            continue
        if not distinct.map(lambda cell: bool(pattern.match(cell))).all():
            continue
        text = column.astype(object).map(lambda v: v if not isinstance(v, str) else v.strip(), na_action="ignore")
        text = text.map(lambda v: v.replace(grouping, "").replace(decimal, "."), na_action="ignore")
        frame[name] = pd.to_numeric(text, errors="raise").astype(np.float64)
        converted.append(name)
    return converted


def _contradicting_cell(frame: pd.DataFrame, decimal: str, grouping: str | None):
    """(column, row position, cell) of a number-like cell the marks decided cannot read, in a numbers column."""
    readable = _grouped_number(decimal, grouping) if grouping else None
    for name in frame.columns:
        column = frame[name]
        if pd.api.types.is_numeric_dtype(column.dtype) or isinstance(column.dtype, pd.CategoricalDtype):
            continue
        present = column[column.notna()].astype(str).str.strip()
        if len(present) == 0:
            continue
        counts = present.value_counts()
        kinds = counts.index.map(_cell_kind)
        numbers = int(counts[kinds.notna()].sum())
        if 2 * numbers < int(counts.sum()):
            continue  # a text column
        for cell, kind in zip(counts.index, kinds):
            if kind is None or kind in ("integer", "plain"):
                continue
            if readable is not None and readable.match(cell):
                continue
            if kind in ("point", "dot_three") and decimal == ".":
                continue
            if kind in ("comma", "comma_three") and decimal == ",":
                continue
            position = int(np.flatnonzero((column.astype(str).str.strip() == cell).to_numpy())[0])
            return name, position, cell
    return None


def describe_marks(decimal: str, grouping: str | None) -> str:
    """'decimal mark ',' and thousands grouped with '.'' and the like, for the intake note."""
    groups = f"thousands grouped with '{grouping}'" if grouping else "no thousands grouping"
    return f"decimal mark '{decimal}', {groups}"


# --------------------------------------------------------------------------- ragged rows


def _short_rows(path: Path, opener, encoding: str, delimiter: str, width: int):
    """``[(line, fields)]`` of the records with fewer fields than the header's ``width``."""
    records = _file_records(path, opener, encoding, delimiter)
    next(records, None)  # the header
    return [(line, len(row)) for line, row in records if len(row) < width]


def _line_of_row(path: Path, opener, encoding: str, delimiter: str, position: int) -> int | None:
    for index, (line, _) in enumerate(_file_records(path, opener, encoding, delimiter)):
        if index == position + 1:
            return line
    return None


def _refuse_short_rows(path, short, width, delimiter):
    shown = ", ".join(f"line {line} has {fields}" for line, fields in short[:5])
    more = f" and {len(short) - 5} more lines" if len(short) > 5 else ""
    count = "a line has" if len(short) == 1 else f"{len(short)} lines have"
    return DataFileError(
        f"'{path.name}' has ragged rows: {count} fewer fields than the header's {width} ({shown} fields{more}); "
        f"the missing fields would be read as missing values — complete each row (an empty value still needs its "
        f"{DELIMITER_NAMES[delimiter]}, e.g. '{delimiter.join(['1', '', '3'])}') or delete the broken lines",
        path=str(path), lines=tuple(line for line, _ in short), width=width)


# --------------------------------------------------------------------------- reading


def _encoding_from_bom(head: bytes) -> str | None:
    if head.startswith(codecs.BOM_UTF8):
        return "utf-8-sig"
    if head.startswith(codecs.BOM_UTF16_LE) or head.startswith(codecs.BOM_UTF16_BE):
        return "utf-16"
    return None


#: Leading bytes of common binary files (each format's published signature), and what to call them.
_SIGNATURES = (
    (b"\x89PNG\r\n\x1a\n", "a PNG image"), (b"\xff\xd8\xff", "a JPEG image"), (b"GIF8", "a GIF image"),
    (b"%PDF", "a PDF document"), (b"\x1f\x8b", "a gzip-compressed file (name it .csv.gz)"),
    (b"BZh", "a bzip2-compressed file (name it .csv.bz2)"), (b"\xfd7zXZ\x00", "an xz-compressed file (name it .csv.xz)"),
    (b"7z\xbc\xaf\x27\x1c", "a 7-Zip archive"), (b"SQLite format 3\x00", "an SQLite database"),
)
#: Bytes no text table holds: C0 controls other than tab, line feed, vertical tab, form feed, carriage return.
_CONTROL_BYTES = bytes(set(range(32)) - {9, 10, 11, 12, 13})


def refuse_binary(path: Path, head: bytes, encoding: str | None = None) -> None:
    """Raise a one-line :class:`DataFileError` when ``head`` (the file's first bytes) is not text.

    A known binary signature names the format; otherwise a NUL byte, or more
    than 1 % of C0 control characters (other than tab and line ends), marks
    binary data.  UTF-16/32 text (a byte-order mark, or such an ``encoding``)
    holds NUL bytes legitimately and is left to the decoder.
    """
    wide = (encoding or _encoding_from_bom(head) or "").lower().replace("_", "-")
    if wide.startswith(("utf-16", "utf-32")):
        return
    for signature, kind in _SIGNATURES:
        if head.startswith(signature):
            raise DataFileError(f"'{path.name}' looks like {kind}, not a text table; give the CSV or Parquet file "
                                f"of the table", path=str(path))
    sample = head[:65536]
    controls = len(sample) - len(sample.translate(None, _CONTROL_BYTES))
    if b"\x00" in sample or controls > 0.01 * len(sample):
        raise DataFileError(f"'{path.name}' looks like binary data, not a text table ({controls} control bytes in "
                            f"its first {len(sample)}); give the CSV or Parquet file of the table",
                            path=str(path))


def _plural(count: int, word: str) -> str:
    return f"{count} {word}" if count == 1 else f"{count} {word}s"


def read_csv_file(path: Path, encoding: str | None, compression: str | None, decimal_mark: str | None,
                  check_unique_names) -> CsvReading:
    """Read a delimited text file; see the module docstring for how the marks are decided.

    Parameters
    ----------
    path : Path
    encoding : str or None
        Text encoding, or None to detect it (UTF-8 with or without BOM, UTF-16 with BOM, else Latin-1).
    compression : str or None
        ``".gz"``, ``".bz2"``, ``".xz"`` or None.
    decimal_mark : {".", ","} or None
        The decimal mark, or None to decide it from the evidence.
    check_unique_names : callable
        ``check_unique_names(names, where)`` raises when a header name repeats.

    Raises
    ------
    DataFileError
        Unreadable, empty or ragged file; numbers that disagree on the decimal mark.
    OptionError
        Unknown encoding.
    """
    opener = COMPRESSED.get(compression, open)
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
    refuse_binary(path, head, encoding)
    notes: list[tuple[str, str]] = []
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
    header = [cell.strip() for cell in rows[0][1]] if rows else []
    check_unique_names([name for name in header if name], f"the header of '{path.name}'")
    unnamed = [i + 1 for i, name in enumerate(header) if not name]
    if unnamed:
        notes.append(("warning",
                      f"{_plural(len(unnamed), 'column')} of '{path.name}' (number "
                      f"{', '.join(map(str, unnamed[:10]))}) have no name in the header; they were named "
                      f"'Unnamed: <position>' — name them, or exclude them if they are a saved row index"))

    evidence = _Evidence([name or f"Unnamed: {j}" for j, name in enumerate(header)], rows[1:])
    if decimal_mark is not None:
        decimal, grouping, basis = decimal_mark, _other(decimal_mark), "as given"
    else:
        try:
            decimal, grouping, basis, warning = _decide_marks(evidence)
        except _Conflict as conflict:
            raise DataFileError(_conflict_message(path, conflict.args[0]), path=str(path)) from None
        if warning:
            notes.append(("warning", warning))
        basis = f"decided by {basis}" if basis else "no decimals in the first rows"

    def parse(text_encoding):
        # thousands are never stripped by the parser (it would read '9.19' as 919 with thousands='.')
        return pd.read_csv(path, sep=delimiter, decimal=decimal, encoding=text_encoding, skipinitialspace=True,
                           low_memory=False)

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
            notes.append(("warning",
                          f"'{path.name}' is not valid UTF-8, so it was read as Latin-1 (ISO-8859-1), which "
                          f"accepts any bytes; check that accented names and units (°, µ) look right, and pass "
                          f"encoding=... with the file's real encoding to be sure"))
    except pd.errors.EmptyDataError as err:
        raise DataFileError(empty_message, path=str(path)) from err
    except pd.errors.ParserError as err:
        found = re.search(r"Expected (\d+) fields in line (\d+), saw (\d+)", str(err))
        detail = (f"line {found.group(2)} has {found.group(3)} fields but the header has {found.group(1)}"
                  if found else str(err))
        raise DataFileError(
            f"cannot parse '{path}' as {DELIMITER_NAMES[delimiter]}-separated text: {detail}; check that every "
            f"line has as many fields as the header (quote text fields that contain the delimiter)",
            path=str(path)) from err
    frame.columns = [str(c).strip() for c in frame.columns]
    if len(frame) == 0:
        raise DataFileError(
            f"data file '{path}' has a header ({_plural(frame.shape[1], 'column')}) but no data rows; "
            f"export the table with its rows", path=str(path))
    width = frame.shape[1]
    if width > 1 and frame.iloc[:, -1].isna().any():  # a short row leaves the last column empty
        short = _short_rows(path, opener, chosen, delimiter, width)
        if short:
            raise _refuse_short_rows(path, short, width, delimiter)

    converted = _convert_grouped(frame, decimal, grouping) if grouping else []
    if decimal_mark is not None and not converted:
        grouping = None
    if decimal_mark is None:
        contradiction = _contradicting_cell(frame, decimal, grouping)
        if contradiction is not None:
            name, position, cell = contradiction
            line = _line_of_row(path, opener, chosen, delimiter, position)
            chosen_by = basis if basis.startswith("decided by") else f"decided by the first {_SAMPLE_BYTES >> 10} KiB"
            raise DataFileError(_conflict_message(
                path, f"the file was read with {describe_marks(decimal, grouping)} ({chosen_by}), but "
                      f"{_Example(cell, name, line).where()} cannot be read so"), path=str(path))
    notes.insert(0, ("info", f"read {_plural(len(frame), 'data row')} and {_plural(width, 'column')} from "
                             f"'{path.name}' ({chosen}, {DELIMITER_NAMES[delimiter]}-separated, "
                             f"{describe_marks(decimal, grouping)}; {basis})"))
    return CsvReading(frame=frame, encoding=chosen, delimiter=delimiter, decimal=decimal, grouping=grouping,
                      notes=tuple(notes))
