"""Job files: a TOML description of an overnight search, checked before any work starts.

A job file is plain TOML (read with :mod:`tomllib`, or ``tomli`` on Python
3.10); it is parsed, never executed.  Every key is checked: an unknown key is
refused with the nearest valid key suggested, values must have the right type
and range, and the data file must exist.  The layout::

    [data]
    table = "bays.csv"              # resolved relative to the job file
    response = "yield_kg_m2"
    predictors = []                 # empty: every other column
    always_include = ["cultivar"]   # every model holds these
    leave_out = ["sensor_id"]
    row_weights = "area_m2"         # optional column of positive weights
    incomplete_rows = "refuse"      # or "drop"
    keep_id_columns = []            # identifier-like columns to keep as predictors
    time_ordered = false            # rows are in time order

    [forms]
    offer = ["identity", "log", "sqrt", "reciprocal"]
    fractional_polynomials = false
    shifts = { bay_age_years = 1 }  # log/sqrt/reciprocal of x + c ("auto" picks c)
    interactions = ["light*co2"]    # or true for every pairwise product
    response_form = "log"           # or "sqrt", "boxcox:0.5"; leave out for none

    [search]
    methods = ["exhaustive", "stepwise"]
    exact_limit = 40
    [search.exhaustive]             # settings of one method, handed on as given
    max_size = 6                    # largest model: columns besides the intercept

    [ranking]
    aim = "explain"                 # "explain" ranks by BIC, "predict" by AICc
    criterion = "bic"               # or name one: aic, aicc, bic, cp, adj_r2, press, cv_mse
    convention = "sigma-counted"
    shortlist_size = 10
    keep_within = 4.0               # keep models within this distance of the best
    folds = 5
    resamples = 0                   # bootstrap resamples for selection stability
    honest_folds = 5                # outer folds for the honest error of the whole procedure (0: skip)

    [run]
    seed = 0
    workers = 2
    backend = "loky"                # or "dask" with scheduler = "tcp://host:8786"
    time_budget = "8h"              # seconds, or "8h", "90m", "1h30m", "45s"
    output = "bays-results"         # folder for the run store and the shortlist

See ``docs/overnight-jobs.md`` for a walk through.
"""

from __future__ import annotations

import hashlib
import json
import sys
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Callable, Mapping

from ..errors import JobFileError
from ._checks import (
    AIM_NAMES,
    BACKEND_NAMES,
    CONVENTION_NAMES,
    FORM_NAMES,
    METHOD_NAMES,
    _is_address,
    _is_flag,
    _is_forms,
    _is_interactions_or_flag,
    _is_method_list,
    _is_name,
    _is_names,
    _is_response_form,
    _is_shifts,
    _one_of,
    _outer_folds,
    _positive_number,
    _suggest,
    _type_name,
    _whole,
    parse_duration,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = ["JobSpec", "load_job", "parse_job", "parse_duration", "RESULT_KEYS", "METHOD_NAMES", "FORM_NAMES"]


# --------------------------------------------------------------------------- schema
# section -> key -> (checker, default).  A default of _REQUIRED must be given.
_REQUIRED = object()

_SCHEMA: dict[str, dict[str, tuple[Callable, Any]]] = {
    "data": {
        "table": (_is_name, _REQUIRED),
        "response": (_is_name, _REQUIRED),
        "predictors": (_is_names, ()),
        "always_include": (_is_names, ()),
        "leave_out": (_is_names, ()),
        "row_weights": (_is_name, None),
        "incomplete_rows": (_one_of(("refuse", "drop")), "refuse"),
        "keep_id_columns": (_is_names, ()),
        "time_ordered": (_is_flag, False),
        "decimal_mark": (_one_of((".", ",")), None),
    },
    "forms": {
        "offer": (_is_forms, None),
        "fractional_polynomials": (_is_flag, False),
        "shifts": (_is_shifts, ()),
        "interactions": (_is_interactions_or_flag, ()),
        "response_form": (_is_response_form, None),
        "prefer": (_is_names, ()),
        "keep_twins": (_is_flag, False),
        "all_forms": (_is_flag, False),
    },
    "search": {
        "methods": (_is_method_list, ("auto",)),
        "exact_limit": (_whole(low=1), 40),
    },
    "ranking": {
        "criterion": (_is_name, None),
        "aim": (_one_of(AIM_NAMES), "explain"),
        "convention": (_one_of(CONVENTION_NAMES), "sigma-counted"),
        "shortlist_size": (_whole(low=1), 10),
        "keep_within": (_positive_number, None),
        "folds": (_whole(low=2), 5),
        "resamples": (_whole(low=0), 0),
        "honest_folds": (_outer_folds, 0),
    },
    "run": {
        "seed": (_whole(low=0), 0),
        "workers": (_whole(low=1, allow_minus_one=True), 1),
        "backend": (_one_of(BACKEND_NAMES), "loky"),
        "scheduler": (_is_address, None),
        "scheduler_timeout": (_positive_number, 10.0),
        "time_budget": (parse_duration, None),
        "output": (_is_name, None),
    },
}

#: Keys whose values change what the search finds; a store refuses to resume
#: when one of them differs.  Everything in ``[run]`` except ``seed`` may change
#: between a run and its resume (more workers, another backend, a new budget),
#: and so may the data file's path: its content is checked by SHA-256 instead.
RESULT_KEYS = tuple(
    f"{section}.{key}" for section, keys in _SCHEMA.items() for key in keys
    if (section != "run" or key == "seed") and (section, key) != ("data", "table")
) + ("search.settings",)


def _unknown_key_message(section: str | None, key: str, valid) -> str:
    where = f"[{section}]" if section else "the top level"
    hint = _suggest(key, valid)
    if not hint:
        # A key put in the wrong section: say where it belongs.
        homes = [s for s, keys in _SCHEMA.items() if key in keys]
        if homes:
            hint = f" (it belongs in [{homes[0]}])"
    return f"unknown key {key!r} in {where}{hint}; valid keys there: {', '.join(valid)}"


# --------------------------------------------------------------------------- the spec
@dataclass(frozen=True)
class JobSpec:
    """A checked job: what to search, how, and where to put the results.

    Build it with :func:`load_job` (from a file) or :func:`parse_job` (from
    text).  Paths are absolute.  Each attribute is the key of the same name in
    the job file (section in brackets); see the module docstring.

    Attributes
    ----------
    name : str
        A label for the job (the job file's stem).
    source : Path or None
        The job file, when there is one.
    table : Path
        [data] The data file.
    response : str
        [data] The response column.
    predictors, always_include, leave_out, keep_id_columns : tuple of str
        [data] Roles of columns.
    row_weights : str or None
        [data] Column of positive row weights.
    incomplete_rows : str
        [data] ``"refuse"`` rows with missing values (listing them) or ``"drop"`` them.
    time_ordered : bool
        [data] Rows are in time order.
    decimal_mark : str or None
        [data] ``"."`` or ``","`` when the file's numbers leave it in doubt (None: decided from the file).
    offer : tuple of str or None
        [forms] Forms of each numeric predictor (None: the library's default).
    fractional_polynomials : bool
        [forms]
    shifts : tuple of (str, float or "auto")
        [forms] Columns whose log/sqrt/reciprocal may be taken of ``x + c``.
    interactions : bool or tuple of str
        [forms] ``True`` for every pairwise product, or pairs written ``"a*b"``.
    response_form : str or None
        [forms] ``"log"``, ``"sqrt"`` or ``"boxcox:LAMBDA"``.
    prefer : tuple of str
        [forms] Variables to keep when they nearly duplicate another or sit in a nearly collinear group.
    keep_twins : bool
        [forms] Keep near-duplicate variables and collinear groups whole (no variable set aside).
    all_forms : bool
        [forms] Offer every curved form of every predictor, not only of those that show curvature.
    methods : tuple of str
        [search]
    exact_limit : int
        [search] Largest number of terms ``auto`` searches exactly.
    method_settings : Mapping[str, Mapping[str, object]]
        [search.METHOD] sub-tables, handed to the method as given.
    criterion : str or None
        [ranking] None: chosen by ``aim``.
    aim : str
        [ranking] ``"explain"`` (BIC) or ``"predict"`` (AICc).
    convention : str
        [ranking] What k counts in AIC/BIC (see :mod:`selectkit.criteria`).
    shortlist_size : int
    keep_within : float or None
        [ranking] Δ criterion cut-off of the shortlist.
    folds, resamples : int
        [ranking] Cross-validation folds; bootstrap resamples for stability (0: skip).
    honest_folds : int
        [ranking] Outer folds for the honest error of the whole procedure (0: skip).
    seed, workers : int
        [run]
    backend : str
        [run] joblib backend name.
    scheduler : str or None
        [run] Dask scheduler address (backend ``"dask"``).
    scheduler_timeout : float
        [run] Seconds to wait for that scheduler to answer before any work (default 10).
    time_budget : float or None
        [run] Seconds of wall-clock time for one run, counted from when the units begin
        (a resume gets the budget again).
    output : Path
        [run] Folder for the run store and the result files.
    """

    name: str
    source: Path | None
    table: Path
    response: str
    predictors: tuple[str, ...] = ()
    always_include: tuple[str, ...] = ()
    leave_out: tuple[str, ...] = ()
    row_weights: str | None = None
    incomplete_rows: str = "refuse"
    keep_id_columns: tuple[str, ...] = ()
    time_ordered: bool = False
    decimal_mark: str | None = None
    offer: tuple[str, ...] | None = None
    fractional_polynomials: bool = False
    shifts: tuple = ()
    interactions: Any = ()
    response_form: str | None = None
    prefer: tuple[str, ...] = ()
    keep_twins: bool = False
    all_forms: bool = False
    methods: tuple[str, ...] = ("auto",)
    exact_limit: int = 40
    method_settings: Mapping[str, Mapping[str, Any]] = field(default_factory=lambda: MappingProxyType({}))
    criterion: str | None = None
    aim: str = "explain"
    convention: str = "sigma-counted"
    shortlist_size: int = 10
    keep_within: float | None = None
    folds: int = 5
    resamples: int = 0
    honest_folds: int = 0
    seed: int = 0
    workers: int = 1
    backend: str = "loky"
    scheduler: str | None = None
    scheduler_timeout: float = 10.0
    time_budget: float | None = None
    output: Path = Path("selectkit-results")

    def __hash__(self):
        return hash(json.dumps(self.to_dict(), sort_keys=True, default=str))

    def __eq__(self, other):
        if not isinstance(other, JobSpec):
            return NotImplemented
        return self.to_dict() == other.to_dict()

    # ------------------------------------------------------------------ views
    def to_dict(self) -> dict:
        """A JSON-ready dict of every setting, by section (paths as text)."""
        out = {}
        for section, keys in _SCHEMA.items():
            out[section] = {}
            for key in keys:
                value = getattr(self, key)
                if isinstance(value, Path):
                    value = str(value)
                elif key == "shifts":
                    value = {column: shift for column, shift in value}
                elif isinstance(value, tuple):
                    value = list(value)
                out[section][key] = value
        out["search"]["settings"] = {m: dict(s) for m, s in sorted(self.method_settings.items())}
        out["job"] = {"name": self.name, "source": None if self.source is None else str(self.source)}
        return out

    @classmethod
    def from_dict(cls, data: Mapping) -> "JobSpec":
        """Rebuild a spec written by :meth:`to_dict` (the run store keeps one)."""
        values = {}
        for section, keys in _SCHEMA.items():
            for key in keys:
                if key in data.get(section, {}):
                    value = data[section][key]
                    if key == "shifts":
                        value = tuple(sorted(dict(value).items()))
                    elif isinstance(value, list):
                        value = tuple(value)
                    values[key] = value
        values["table"] = Path(values["table"])
        values["output"] = Path(values["output"])
        settings = data.get("search", {}).get("settings", {})
        values["method_settings"] = MappingProxyType({m: MappingProxyType(dict(s)) for m, s in settings.items()})
        job = data.get("job", {})
        source = job.get("source")
        return cls(name=job.get("name", "job"), source=None if source is None else Path(source), **values)

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

        The time budget is not among them: the job runner enforces it between
        work units, so that every unit it records ran to its end.

        Examples
        --------
        >>> spec = parse_job('[data]\\ntable = "t.csv"\\nresponse = "y"', base="/tmp",
        ...                  check_table=False)  # doctest: +SKIP
        >>> spec.search_options()["response"]  # doctest: +SKIP
        'y'
        """
        response_transform = None
        if self.response_form is not None and self.response_form != "identity":
            if self.response_form.startswith("boxcox:"):
                response_transform = ("boxcox", float(self.response_form.split(":", 1)[1]))
            else:
                response_transform = self.response_form
        if isinstance(self.interactions, bool):
            interactions = self.interactions
        else:
            interactions = [tuple(pair.split("*")) for pair in self.interactions] or False
        return {
            "response": self.response,
            "predictors": list(self.predictors) or None,
            "forced": list(self.always_include),
            "exclude": list(self.leave_out),
            "weights": self.row_weights,
            "missing": self.incomplete_rows,
            "keep_identifiers": list(self.keep_id_columns),
            "decimal_mark": self.decimal_mark,
            "forms": None if self.offer is None else list(self.offer),
            "fractional_polynomials": self.fractional_polynomials,
            "shifts": dict(self.shifts),
            "interactions": interactions,
            "response_transform": response_transform,
            "prefer": list(self.prefer),
            "twin_limit": None if self.keep_twins else 0.999,
            "vif_limit": None if self.keep_twins else 1000.0,
            "curvature_test": not self.all_forms,
            "methods": list(self.methods),
            "method_options": {m: dict(s) for m, s in self.method_settings.items()},
            "exact_limit": self.exact_limit,
            "criterion": self.criterion,
            "aim": self.aim,
            "convention": self.convention,
            "shortlist_size": self.shortlist_size,
            "max_delta": self.keep_within,
            "folds": self.folds,
            "stability": self.resamples,
            "honest_folds": self.honest_folds,
            "time_ordered": self.time_ordered,
            "seed": self.seed,
        }


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
        if section not in _SCHEMA:
            raise JobFileError(f"unknown section [{section}]{_suggest(section, _SCHEMA)}; "
                               f"the sections are {', '.join(f'[{s}]' for s in _SCHEMA)}")
        if not isinstance(raw[section], dict):
            raise JobFileError(f"{section!r} must be a section written [{section}] (got {_type_name(raw[section])})")

    values: dict[str, Any] = {}
    method_settings: dict[str, Mapping] = {}
    for section, keys in _SCHEMA.items():
        table = raw.get(section, {})
        for key, value in table.items():
            if key in keys:
                continue
            if section == "search" and isinstance(value, dict):
                method_settings[key.lower()] = value
                continue
            raise JobFileError(_unknown_key_message(section, key, list(keys)))
        for key, (check, default) in keys.items():
            if key in table:
                values[key] = check(table[key], f"[{section}] {key}")
            elif default is _REQUIRED:
                raise JobFileError(f"[{section}] {key} is missing; it must be given")
            else:
                values[key] = default

    for method, settings in method_settings.items():
        if method == "auto":
            raise JobFileError("[search.auto] cannot hold settings: give them to the method auto picks, "
                               "[search.exhaustive] or [search.screen]")
        if method not in METHOD_NAMES:
            raise JobFileError(f"[search.{method}]: unknown search method{_suggest(method, METHOD_NAMES)}; "
                               f"choose from {', '.join(METHOD_NAMES[1:])}")
        if method not in values["methods"] and "auto" not in values["methods"]:
            hint = _suggest(method, values["methods"])
            raise JobFileError(
                f"[search.{method}] gives settings for a method not in [search] methods "
                f"({', '.join(values['methods'])}){hint}; add it to methods or remove the section"
            )
        for key, value in settings.items():
            if key == "time_budget":
                raise JobFileError(f"[search.{method}] time_budget: a job's budget is [run] time_budget (checked "
                                   f"between work units, so that every stored unit is whole); move it there")
            if isinstance(value, dict):
                raise JobFileError(f"[search.{method}] {key} must be a plain value or a list, not a table")

    table_path = (base / values["table"]).resolve()
    if check_table and not table_path.is_file():
        raise JobFileError(
            f"[data] table: the data file {str(table_path)!r} does not exist (paths are relative to the job "
            f"file's folder {str(base)!r}); fix the path"
        )
    values["table"] = table_path
    if values["scheduler"] is not None and values["backend"] != "dask":
        raise JobFileError(f"[run] scheduler is set but backend is {values['backend']!r}; set backend = \"dask\"")
    roles = [("always_include", "leave_out")]
    for a, b in roles:
        both = sorted(set(values[a]) & set(values[b]))
        if both:
            raise JobFileError(f"[data] {', '.join(map(repr, both))} is in both {a} and {b}; keep it in one")
    if values["response"] in values["leave_out"] or values["response"] in values["predictors"]:
        raise JobFileError(f"[data] the response {values['response']!r} is also listed as a predictor or left out; "
                           f"remove it from those lists")
    output = values["output"]
    values["output"] = (base / (output if output is not None else f"{name}-results")).resolve()
    values["method_settings"] = MappingProxyType(
        {m: MappingProxyType(dict(s)) for m, s in sorted(method_settings.items())}
    )
    return JobSpec(name=name, source=None if source is None else Path(source), **values)
