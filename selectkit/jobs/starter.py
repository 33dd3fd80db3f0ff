"""A commented starter job file for a table: its columns listed, the response guessed or left to fill in."""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import DataFileError, JobFileError
from ..settings import JOB, SECTIONS, SETTINGS
from ..settings import suggest as _suggest

__all__ = ["starter_job"]


def starter_job(table_path, *, response=None, job_file=None) -> str:
    """A commented starter job file for a table.

    The columns are read from the table's header (CSV, or Parquet when pyarrow
    is installed); the response is ``response`` when given, else guessed from a
    column name that reads like an outcome (``yield``, ``response``, ``y``...),
    else left empty for the user to fill in.

    Parameters
    ----------
    table_path : str or Path
    response : str, optional
    job_file : str or Path, optional
        Where the text will be written. The table path inside is written
        relative to this file's folder (a job file resolves it from there), or
        absolute when no relative path leads there (another drive). Default:
        a job file in the table's own folder.

    Returns
    -------
    str
        TOML text.

    Raises
    ------
    JobFileError
        When the table cannot be read or ``response`` is not one of its columns.
    """
    table_path = Path(table_path).expanduser()
    columns = _read_columns(table_path)
    table_entry = _path_from(table_path, job_file)
    job_name = f"{table_path.stem}.toml" if job_file is None else Path(job_file).as_posix()
    results = (Path(job_file).parent / f"{table_path.stem}-results" if job_file is not None
               else Path(f"{table_path.stem}-results")).as_posix()
    if response is not None and response not in columns:
        hint = _suggest(response, columns)
        raise JobFileError(f"response {response!r} is not a column of {str(table_path)!r}{hint}; "
                           f"columns: {', '.join(columns)}")
    guessed = response is None
    if response is None:
        response = _guess_response(columns)
    predictors = [c for c in columns if c != response]
    response_line = (f'response = {_toml_text(response)}' + ("   # guessed: check it" if guessed else "")
                     if response else 'response = ""   # fill in: the column to explain')
    columns_text = "\n".join(f"#   {_one_line(c)}" for c in columns)
    head = f"""\
# selectkit job file for {_one_line(table_path.name)} (TOML; see docs/overnight-jobs.md).
# Every key is a setting of the same name as a keyword of selectkit.search() and, with dashes, a flag of
# 'selectkit search'. A key left commented out takes the default shown.
# Run it with:     selectkit job run {_one_line(job_name)}
# Watch it with:   selectkit job status {_one_line(results)}
# Resume it with:  selectkit job resume {_one_line(results)}
# Columns found in the table:
{columns_text}
"""
    lines = [head]
    pair = _example_pair(predictors)
    examples = {"predictors": predictors[:2], "row_weights": "area_m2", "decimal_mark": ",",
                "forms": ["identity", "log", "sqrt"], "shifts": {"bay_age_years": 1.0},
                "interactions": (tuple(pair.split("*", 1)),), "response_form": "log", "criterion": "bic",
                "keep_within": 4.0, "scheduler": "tcp://scheduler.example:8786", "time_budget": 8 * 3600.0}
    for section in SECTIONS:
        lines.append(f"[{section}]")
        if section == "data":
            lines.append(f"table = {_toml_text(table_entry)}")
        for x in SETTINGS:
            if x.section != section or JOB not in x.surfaces:
                continue
            if x.name == "response":
                lines.append(response_line)
            elif x.name == "method_options":
                lines.append("# [search.exhaustive]       # method_options: settings of one method, e.g. "
                             "max_size = 6")
            elif x.name == "output":
                lines.append(f"output = {_toml_text(table_path.stem + '-results')}   # {x.help}")
            else:
                shown = examples.get(x.name, x.default)
                text = _toml_text(shown) if isinstance(shown, str) else x.kind.toml(shown)
                if x.name == "time_budget":
                    text = '"8h"'
                lines.append(f"# {x.name} = {_one_line(text)}   # {x.help}")
        lines.append("")
    return "\n".join(lines).rstrip("\n") + "\n"


def _path_from(table_path: Path, job_file) -> str:
    """The table's path as a job file at ``job_file`` reads it: relative to its folder, else absolute."""
    if job_file is None:
        return table_path.name
    table = table_path.resolve()
    folder = Path(job_file).expanduser().resolve().parent
    try:
        return Path(os.path.relpath(table, folder)).as_posix()
    except ValueError:  # no relative path between them (Windows drives)
        return table.as_posix()


#: TOML's short escapes (TOML 1.0, "Basic strings"); every other control character is written \uXXXX.
_TOML_SHORT = {'"': '\\"', "\\": "\\\\", "\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}


def _is_control(char: str) -> bool:
    """TOML allows neither U+0000-U+001F nor U+007F raw inside a basic string or a comment."""
    return ord(char) < 0x20 or ord(char) == 0x7F


def _toml_text(text: str) -> str:
    """``text`` as a TOML basic string, escaped so that a TOML reader gives back exactly ``text``.

    Quotes and backslashes are escaped, as are ``\\b \\t \\n \\f \\r``; other control
    characters (U+0000-U+001F, U+007F) become ``\\uXXXX`` (TOML 1.0, section
    "String"). A name holding a newline therefore stays one value and never
    becomes a live line of the file.

    Raises
    ------
    JobFileError
        When ``text`` holds bytes that are not valid text (a file name that is not
        UTF-8): TOML can hold only Unicode scalar values.
    """
    text = str(text)
    if any(0xD800 <= ord(char) <= 0xDFFF for char in text):
        raise JobFileError(f"the name {ascii(text)} is not valid UTF-8 text, "
                           "so a job file cannot hold it; rename the file or column")
    parts = [_TOML_SHORT.get(char) or (f"\\u{ord(char):04X}" if _is_control(char) else char) for char in text]
    return '"' + "".join(parts) + '"'


def _one_line(text: str) -> str:
    """``text`` for a TOML comment: control characters (not allowed there) shown as escapes."""
    return "".join(f"\\u{ord(char):04X}" if _is_control(char) or 0xD800 <= ord(char) <= 0xDFFF else char
                   for char in str(text))


def _example_pair(predictors) -> str:
    first = predictors[0] if predictors else "a"
    second = predictors[1] if len(predictors) > 1 else "b"
    return f"{first}*{second}"


def _read_columns(path: Path) -> list[str]:
    if not path.is_file():
        raise JobFileError(f"table {str(path)!r} does not exist; give the path of a CSV or Parquet file")
    try:
        if path.suffix.lower() in (".parquet", ".pq"):
            try:
                import pyarrow.parquet as pq
            except ImportError:
                raise JobFileError(
                    f"reading the Parquet file {path.name!r} needs the pyarrow package, which is not installed; "
                    f"install it with: pip install 'selectkit[parquet]' (or save the table as CSV)"
                ) from None

            return list(pq.read_schema(path).names)
        import pandas as pd

        from .._csvsniff import COMPRESSED, refuse_binary

        if path.suffix.lower() not in COMPRESSED:
            with open(path, "rb") as handle:
                refuse_binary(path, handle.read(65536))

        try:
            return [str(c) for c in pd.read_csv(path, nrows=0, sep=None, engine="python").columns]
        except UnicodeDecodeError:  # not UTF-8: Latin-1 reads any bytes, as the data reader falls back to
            return [str(c) for c in pd.read_csv(path, nrows=0, sep=None, engine="python", encoding="latin-1").columns]
    except (JobFileError, DataFileError):
        raise
    except Exception as err:  # noqa: BLE001 - any reader failure becomes one readable line
        raise JobFileError(f"cannot read the column names of {str(path)!r}: {err}") from err


_OUTCOME_WORDS = ("yield", "response", "outcome", "target", "y")


def _guess_response(columns) -> str | None:
    lowered = {c.lower(): c for c in columns}
    for word in _OUTCOME_WORDS:
        if word in lowered:
            return lowered[word]
    for word in _OUTCOME_WORDS[:-1]:
        for c in columns:
            if word in c.lower():
                return c
    return None
