"""Job files: a TOML description of an overnight search, checked before any work starts.

A job file is plain TOML (read with :mod:`tomllib`, or ``tomli`` on Python
3.10); it is parsed, never executed.  Its keys are the settings of
:mod:`selectkit.settings` — the same names as the keywords of
:func:`selectkit.search` and, with dashes, the command-line flags — each in
the section the table gives it, plus ``[data] table``, the data file.  Every
key is checked: an unknown key is refused with the nearest valid key (or the
current spelling of a former one), values must have the right type and range,
and the data file must exist.  For example::

    [data]
    table = "bays.csv"              # resolved relative to the job file
    response = "yield_kg_m2"
    always_include = ["cultivar"]   # every model holds these
    leave_out = ["sensor_id"]
    incomplete_rows = "refuse"      # or "drop"

    [forms]
    forms = ["identity", "log", "sqrt", "reciprocal"]
    shifts = { bay_age_years = 1 }  # log/sqrt/reciprocal of x + c ("auto" picks c)
    interactions = ["light*co2"]    # or true for every pairwise product
    response_form = "log"           # or "sqrt", "boxcox:0.5"; leave out for none

    [search]
    methods = ["exhaustive", "stepwise"]
    [search.exhaustive]             # method_options of one method, handed on as given
    max_size = 6                    # largest model: columns besides the intercept

    [ranking]
    aim = "explain"                 # "explain" ranks by BIC, "predict" by AICc
    keep_within = 4.0               # keep models within this distance of the best
    honest_folds = 5                # outer folds for the honest error of the whole search (0: skip)

    [run]
    workers = 2
    time_budget = "8h"              # seconds, or "8h", "90m", "1h30m", "45s"
    output = "bays-results"         # folder for the run store and the shortlist

``selectkit job new TABLE`` writes a starter file with every key and its help
line.  See ``docs/overnight-jobs.md`` for a walk through.
"""

from __future__ import annotations

import hashlib
import json
import sys
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

from .. import settings as _settings
from ..errors import JobFileError, OptionError, StoreError
from ..settings import JOB, SECTIONS, SETTINGS, suggest

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = ["JobSpec", "load_job", "parse_job", "parse_duration", "RESULT_KEYS", "METHOD_NAMES", "FORM_NAMES"]

METHOD_NAMES = _settings.METHOD_NAMES
FORM_NAMES = _settings.FORM_NAMES

#: Keys of each section: the job-file settings of the table, and ``[data] table``.
_KEYS: dict[str, tuple[str, ...]] = {
    section: (("table",) if section == "data" else ()) + tuple(
        x.name for x in SETTINGS if x.section == section and JOB in x.surfaces)
    for section in SECTIONS
}
_SETTING_NAMES = tuple(x.name for x in SETTINGS if JOB in x.surfaces)

#: Keys whose values change what the search finds; a store refuses to resume
#: when one of them differs.  Where and how long a job runs (workers, backend,
#: scheduler, time budget, output) may change between a run and its resume,
#: and so may the data file's path: its content is checked by SHA-256 instead.
RESULT_KEYS = tuple(f"{x.section}.{x.name}" for x in SETTINGS if JOB in x.surfaces and x.changes_result)


def parse_duration(value, where="time_budget") -> float:
    """Seconds from a number of seconds or a text such as ``"8h"``, ``"90m"``, ``"1h30m"``.

    See :func:`selectkit.settings.parse_duration`; a refusal is a
    :class:`~selectkit.errors.JobFileError` naming ``where``.

    Examples
    --------
    >>> parse_duration("1h30m")
    5400.0
    """
    try:
        return _settings.parse_duration(value)
    except _settings.Refusal as why:
        raise JobFileError(f"{where} {why}") from None


def _unknown_key_message(section: str | None, key: str, valid) -> str:
    where = f"[{section}]" if section else "the top level"
    now = _settings.former(key, JOB)
    if now is not None:
        return f"key {key!r} in {where} was renamed; did you mean {now}?"
    hint = suggest(key, valid)
    if not hint:
        # A key put in the wrong section: say where it belongs.
        homes = [s for s, keys in _KEYS.items() if key in keys]
        if homes:
            hint = f" (it belongs in [{homes[0]}])"
    return f"unknown key {key!r} in {where}{hint}; valid keys there: {', '.join(valid)}"


def _plain(value):
    """A setting's value as JSON holds it (tuples as lists, pairs as "a*b")."""
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, tuple):
        return ["*".join(v) if isinstance(v, tuple) else v for v in value]
    if isinstance(value, Mapping):
        return {k: _plain(v) for k, v in value.items()}
    return value


# --------------------------------------------------------------------------- the spec
@dataclass(frozen=True)
class JobSpec:
    """A checked job: what to search, how, and where to put the results.

    Build it with :func:`load_job` (from a file) or :func:`parse_job` (from
    text).  Paths are absolute.  Every setting of the job file is an attribute
    of the same name (``spec.workers``, ``spec.keep_within`` ...; see
    :mod:`selectkit.settings`).

    Attributes
    ----------
    name : str
        A label for the job (the job file's stem).
    source : Path or None
        The job file, when there is one.
    table : Path
        [data] The data file.
    settings : Mapping[str, object]
        Every job-file setting, checked, by name (``output`` an absolute Path).
    """

    name: str
    source: Path | None
    table: Path
    settings: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}))

    def __getattr__(self, key):
        if key in _SETTING_NAMES:
            return self.settings[key]
        raise AttributeError(key)

    def __hash__(self):
        return hash(json.dumps(self.to_dict(), sort_keys=True, default=str))

    def __eq__(self, other):
        if not isinstance(other, JobSpec):
            return NotImplemented
        return self.to_dict() == other.to_dict()

    def with_settings(self, *, table=None, **changes) -> "JobSpec":
        """A copy with some settings (or the data file's path) changed; the values are taken as checked."""
        unknown = sorted(set(changes) - set(_SETTING_NAMES))
        if unknown:
            raise TypeError(f"not settings of a job: {', '.join(unknown)}")
        return JobSpec(name=self.name, source=self.source, table=self.table if table is None else Path(table),
                       settings=MappingProxyType({**self.settings, **changes}))

    # ------------------------------------------------------------------ views
    def to_dict(self) -> dict:
        """A JSON-ready dict of every setting, by section (paths as text)."""
        out = {section: {} for section in SECTIONS}
        out["data"]["table"] = str(self.table)
        for x in SETTINGS:
            if JOB in x.surfaces:
                out[x.section][x.name] = _plain(self.settings[x.name])
        out["job"] = {"name": self.name, "source": None if self.source is None else str(self.source)}
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "JobSpec":
        """Rebuild a spec written by :meth:`to_dict` (the run store keeps one).

        Raises
        ------
        StoreError
            When ``data`` holds keys of another version's job files.
        """
        values = {}
        for section in SECTIONS:
            for key, value in data.get(section, {}).items():
                if key == "table":
                    continue
                if key not in _KEYS[section]:
                    raise StoreError(f"the run store's job settings hold [{section}] {key!r}, a key of an earlier "
                                     f"selectkit; run the job afresh (selectkit job run JOB.toml --fresh)")
                values[key] = _settings.check_value(key, value, where=JOB) if value is not None else None
        for x in SETTINGS:
            if JOB in x.surfaces and x.name not in values:
                values[x.name] = x.default
        values["output"] = Path(values["output"])
        job = data.get("job", {})
        source = job.get("source")
        return cls(name=job.get("name", "job"), source=None if source is None else Path(source),
                   table=Path(data["data"]["table"]), settings=MappingProxyType(values))

    def result_settings(self) -> dict:
        """The settings that change what the search finds (see :data:`RESULT_KEYS`), by dotted key."""
        full = self.to_dict()
        out = {}
        for dotted in RESULT_KEYS:
            section, key = dotted.split(".")
            out[dotted] = full[section][key]
        return out

    def fingerprint(self) -> str:
        """SHA-256 of :meth:`result_settings` as canonical JSON."""
        text = json.dumps(self.result_settings(), sort_keys=True, separators=(",", ":"), default=str)
        return hashlib.sha256(text.encode("utf-8")).hexdigest()

    def search_options(self) -> dict:
        """Keyword arguments for :func:`selectkit.api.prepare_search` besides ``data``.

        The same names as the job file's keys.  The run settings (workers,
        backend, scheduler, time budget, output) are not among them: the job
        runner uses them itself, and enforces the time budget between work
        units, so that every unit it records ran to its end.

        Examples
        --------
        >>> spec = parse_job('[data]\\ntable = "t.csv"\\nresponse = "y"', base="/tmp",
        ...                  check_table=False)  # doctest: +SKIP
        >>> spec.search_options()["response"]  # doctest: +SKIP
        'y'
        """
        return {x.name: self.settings[x.name] for x in SETTINGS
                if JOB in x.surfaces and (x.section != "run" or x.name == "seed")}


# --------------------------------------------------------------------------- loading
def load_job(path) -> JobSpec:
    """Read and check a job file.

    Parameters
    ----------
    path : str or Path
        The TOML job file.

    Returns
    -------
    JobSpec

    Raises
    ------
    JobFileError
        With one readable line: the file cannot be read or parsed, a key is
        unknown (the nearest valid key is suggested), a value has the wrong
        type or range, or the data file does not exist.
    """
    path = Path(path).expanduser()
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as err:
        raise JobFileError(f"job file {str(path)!r} does not exist; create one with 'selectkit job new TABLE'") from err
    except (OSError, UnicodeDecodeError) as err:
        raise JobFileError(f"job file {str(path)!r} cannot be read: {err}") from err
    return parse_job(text, base=path.resolve().parent, name=path.stem, source=path.resolve())


def parse_job(text: str, *, base=".", name: str = "job", source=None, check_table: bool = True) -> JobSpec:
    """Check the text of a job file; relative paths are taken from ``base``.

    See :func:`load_job`.  ``check_table=False`` skips the check that the
    data file exists (for tests and for editing a job before its data).

    Examples
    --------
    >>> spec = parse_job('[data]\\ntable = "bays.csv"\\nresponse = "yield_kg_m2"', base="/data",
    ...                  check_table=False)
    >>> spec.search_options()["response"], str(spec.table), spec.workers
    ('yield_kg_m2', '/data/bays.csv', 1)
    """
    where = str(source) if source is not None else "job file"
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise JobFileError(f"{where} is not valid TOML: {err}") from err
    base = Path(base).expanduser().resolve()

    for section in raw:
        if section not in _KEYS:
            raise JobFileError(f"unknown section [{section}]{suggest(section, SECTIONS)}; "
                               f"the sections are {', '.join(f'[{s}]' for s in SECTIONS)}")
        if not isinstance(raw[section], dict):
            raise JobFileError(f"{section!r} must be a section written [{section}] (got {type(raw[section]).__name__})")

    given: dict[str, Any] = {}
    method_options: dict[str, Any] = {}
    for section, keys in _KEYS.items():
        table = raw.get(section, {})
        for key, value in table.items():
            if key in keys:
                given[key] = value
            elif section == "search" and isinstance(value, dict):
                method_options[key.lower()] = value  # [search.METHOD]: that method's settings
            else:
                raise JobFileError(_unknown_key_message(section, key, list(keys)))
    for method, table in method_options.items():
        problem = _settings.method_options_problem(method, table, where=JOB)
        if problem is not None:
            key, reason = problem
            raise JobFileError(f"[search.{method}]{' ' + key if key else ''}: {reason}")
    if method_options:
        if "method_options" in given:
            raise JobFileError("[search] method_options and [search.METHOD] tables both give method settings; "
                               "keep one")
        given["method_options"] = method_options
    if "table" not in given:
        raise JobFileError("[data] table is missing; it must be given")
    if "response" not in given:
        raise JobFileError("[data] response is missing; it must be given")
    table_entry = given.pop("table")
    try:
        table_entry = _settings.NAME.check(table_entry)
    except _settings.Refusal as why:
        raise JobFileError(f"[data] table {why}") from None
    with _settings.speaking(JOB):
        try:
            values = _settings.resolve(given, where=JOB, allowed=_SETTING_NAMES)
        except OptionError as err:
            raise JobFileError(str(err)) from None
    if "output" not in given:
        values["output"] = f"{name}-results"
    for method in values["method_options"]:
        if method not in values["methods"] and "auto" not in values["methods"]:
            hint = suggest(method, values["methods"])
            raise JobFileError(
                f"[search.{method}] gives settings for a method not in [search] methods "
                f"({', '.join(values['methods'])}){hint}; add it to methods or remove the section"
            )

    table_path = (base / table_entry).resolve()
    from ..parts import table_exists

    if check_table and not table_exists(table_path):
        raise JobFileError(
            f"[data] table: the data file {str(table_path)!r} does not exist (paths are relative to the job "
            f"file's folder {str(base)!r}); fix the path"
        )
    if values["scheduler"] is not None and values["backend"] != "dask":
        raise JobFileError(f"[run] scheduler is set but backend is {values['backend']!r}; set backend = \"dask\"")
    both = sorted(set(values["always_include"]) & set(values["leave_out"]))
    if both:
        raise JobFileError(f"[data] {', '.join(map(repr, both))} is in both always_include and leave_out; "
                           f"keep it in one")
    if values["response"] in values["leave_out"] or values["response"] in (values["predictors"] or ()):
        raise JobFileError(f"[data] the response {values['response']!r} is also listed as a predictor or left out; "
                           f"remove it from those lists")
    values["output"] = (base / values["output"]).resolve()
    return JobSpec(name=name, source=None if source is None else Path(source), table=table_path,
                   settings=MappingProxyType(values))
