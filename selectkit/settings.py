"""Every user setting, defined once: name, kind, default, range and one line of help.

The three ways in read this one table:

* the notebook face, :func:`selectkit.search` (its signature and the
  Parameters of its docstring are made from :data:`SETTINGS`);
* the command line, ``selectkit search`` (each setting is the flag of the same
  name with dashes for underscores: ``keep_within`` is ``--keep-within``);
* the job file (each setting is the key of the same name in its section:
  ``[ranking] keep_within = 4``).

A value is checked by the same rule on every surface, and a refusal or a hint
names the setting as the user wrote it there: ``keep_within=-1`` in Python,
``--keep-within -1`` at the command line, ``[ranking] keep_within = -1`` in a
job file (:func:`spell` and :func:`speaking`).  A former spelling (``forced``,
``--top``, ``offer`` ...) is refused with "did you mean" and the current one.

Only the standard library is imported here, so that reading the table costs
nothing at start-up.
"""

from __future__ import annotations

import contextlib
import difflib
import inspect
import math
import re
from contextvars import ContextVar
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Mapping

__all__ = [
    "Setting",
    "SETTINGS",
    "BY_NAME",
    "SECTIONS",
    "Refusal",
    "resolve",
    "check_value",
    "spell",
    "speaking",
    "surface",
    "former",
    "suggest",
    "parse_duration",
    "signature",
    "parameters_doc",
]

PYTHON, CLI, JOB = "python", "cli", "job"
ALL = frozenset((PYTHON, CLI, JOB))
#: Sections of a job file, in the order a job file lists them.
SECTIONS = ("data", "forms", "search", "ranking", "run")

METHOD_NAMES = ("auto", "exhaustive", "forward", "backward", "stepwise", "crossval", "screen")
FORM_NAMES = ("identity", "log", "sqrt", "reciprocal", "square", "boxcox", "yeojohnson", "boxtidwell", "spline3",
              "spline4", "spline5")
AIM_NAMES = ("explain", "predict")
PARAMETER_COUNTS = ("sigma-counted", "coefficients-only")
BACKEND_NAMES = ("loky", "threading", "multiprocessing", "sequential", "dask")
#: Former values, refused with the value that replaced them.
RENAMED_VALUES = {"both": "stepwise", "selectkit": "sigma-counted", "statsmodels": "coefficients-only"}


class Refusal(ValueError):
    """A value a setting does not take; the text says what it must be (the caller adds where)."""


# --------------------------------------------------------------------------- the surface in use
_SURFACE: ContextVar[str] = ContextVar("selectkit_surface", default=PYTHON)


def surface() -> str:
    """The surface messages speak to now: ``"python"``, ``"cli"`` or ``"job"``."""
    return _SURFACE.get()


@contextlib.contextmanager
def speaking(where: str) -> Iterator[None]:
    """Within the block, hints name settings as ``where`` spells them (see :func:`spell`)."""
    token = _SURFACE.set(where)
    try:
        yield
    finally:
        _SURFACE.reset(token)


# --------------------------------------------------------------------------- kinds of value
def _type_name(value) -> str:
    return {bool: "true/false", int: "a whole number", float: "a number", str: "text",
            list: "a list", tuple: "a list", dict: "a table"}.get(type(value), type(value).__name__)


def _is_number(value) -> bool:
    if isinstance(value, bool):
        return False
    if isinstance(value, (int, float)):
        return True
    return type(value).__module__ == "numpy" and getattr(value, "ndim", 1) == 0 and value.dtype.kind in "iuf"


def _is_whole(value) -> bool:
    if isinstance(value, bool):
        return False
    if isinstance(value, int):
        return True
    return type(value).__module__ == "numpy" and getattr(value, "ndim", 1) == 0 and value.dtype.kind in "iu"


@dataclass(frozen=True)
class Kind:
    """How one kind of value is checked, read from command-line text and written back on each surface.

    Attributes
    ----------
    check : callable
        ``check(value) -> value`` in its plain form, or raises :class:`Refusal`.
    parse : callable
        ``parse(text) -> value`` for the command line (then checked).
    cli : callable
        ``cli(value) -> str``: the value as written after its flag.
    toml : callable
        ``toml(value) -> str``: the value as written in a job file.
    hint : str
        Annotation shown in :func:`selectkit.search`'s signature.
    """

    check: Callable[[Any], Any]
    parse: Callable[[str], Any]
    cli: Callable[[Any], str]
    toml: Callable[[Any], str]
    hint: str


def _quote(text) -> str:
    return '"' + str(text).replace("\\", "\\\\").replace('"', '\\"') + '"'


def _toml_plain(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_plain(v) for v in value) + "]"
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{k} = {_toml_plain(v)}" for k, v in value.items()) + " }"
    return _quote(value)


def _split(text: str) -> list[str]:
    return [part.strip() for part in str(text).split(",") if part.strip()]


def _names_check(value):
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, (list, tuple)):
        try:
            value = list(value)
        except TypeError:
            raise Refusal(f"must be a list of column names (got {_type_name(value)} {value!r})") from None
    names = []
    for item in value:
        if not isinstance(item, str):
            raise Refusal(f"must list column names as text (got {_type_name(item)} {item!r})")
        if not item.strip():
            raise Refusal("lists an empty name; give column names")
        names.append(item.strip())
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise Refusal(f"lists {', '.join(map(repr, twice))} more than once; keep one")
    return tuple(names)


NAMES = Kind(_names_check, _split, lambda v: ",".join(v), lambda v: _toml_plain(list(v)), "Sequence[str]")


def _optional(kind: Kind, *, none_word: str = "") -> Kind:
    """``kind`` or None (the default that means "not set")."""
    def check(value):
        return None if value is None or (none_word and value == none_word) else kind.check(value)

    def parse(text):
        return None if none_word and text.strip().lower() == none_word else kind.parse(text)

    return Kind(check, parse, lambda v: none_word if v is None else kind.cli(v),
                lambda v: _quote(none_word) if v is None else kind.toml(v), f"{kind.hint} | None")


def _name_check(value):
    if not isinstance(value, str):
        raise Refusal(f"must be a column name in quotes (got {_type_name(value)} {value!r})")
    if not value.strip():
        raise Refusal("is empty; give a column name")
    return value.strip()


NAME = Kind(_name_check, str, str, _quote, "str")


def _flag_check(value):
    if isinstance(value, bool) or (type(value).__module__ == "numpy" and type(value).__name__ == "bool_"):
        return bool(value)
    raise Refusal(f"must be true or false (got {_type_name(value)} {value!r})")


FLAG = Kind(_flag_check, lambda t: t, lambda v: "", lambda v: "true" if v else "false", "bool")


def _whole(low: int, *, also: int | None = None, meaning: str = "") -> Kind:
    def check(value):
        if not _is_whole(value):
            raise Refusal(f"must be a whole number (got {_type_name(value)} {value!r})")
        value = int(value)
        if value < low and value != also:
            raise Refusal(f"must be {meaning or f'at least {low}'} (got {value})")
        return value

    def parse(text):
        try:
            return int(text)
        except ValueError:
            raise Refusal(f"must be a whole number (got {text!r})") from None

    return Kind(check, parse, str, str, "int")


def _number(low: float, *, strictly: bool, high: float | None = None, meaning: str = "") -> Kind:
    def check(value):
        if not _is_number(value):
            raise Refusal(f"must be a number (got {_type_name(value)} {value!r})")
        value = float(value)
        if not math.isfinite(value) or value < low or (strictly and value == low) or \
                (high is not None and value > high):
            raise Refusal(f"must be {meaning} (got {value:g})")
        return value

    def parse(text):
        try:
            return float(text)
        except ValueError:
            raise Refusal(f"must be a number (got {text!r})") from None

    return Kind(check, parse, lambda v: f"{v:g}", lambda v: f"{v:g}" if v != int(v) else f"{v:.1f}", "float")


def _choice(options: tuple, *, aliases: Mapping[str, str] | None = None) -> Kind:
    aliases = dict(aliases or {})

    def check(value):
        if not isinstance(value, str):
            raise Refusal(f"must be one of {', '.join(options)} (got {_type_name(value)} {value!r})")
        key = aliases.get(value.strip().lower(), value.strip().lower())
        if key not in options:
            raise Refusal(f"= {value!r} is not known{suggest(key, options)}; choose one of {', '.join(options)}")
        return key

    return Kind(check, str, str, _quote, "str")


def _listed_choices(options: tuple, what: str, *, empty: str) -> Kind:
    def check(value):
        names = tuple(n.lower() for n in _names_check(value))
        if not names and empty:
            raise Refusal(f"is empty; {empty}")
        for name in names:
            if name not in options:
                raise Refusal(f"names an unknown {what} {name!r}{suggest(name, options)}; "
                              f"choose from {', '.join(options)}")
        return names

    return Kind(check, _split, lambda v: ",".join(v), lambda v: _toml_plain(list(v)), "Sequence[str]")


def _shifts_check(value):
    if value is None:
        return {}
    if not isinstance(value, Mapping):
        raise Refusal(f"must map columns to a number or \"auto\", e.g. {{bay_age_years: 1}} "
                      f"(got {_type_name(value)} {value!r})")
    out = {}
    for column, shift in value.items():
        if not isinstance(column, str) or not column.strip():
            raise Refusal(f"must be keyed by column names (got {column!r})")
        if isinstance(shift, str):
            if shift.strip().lower() != "auto":
                raise Refusal(f"gives {column!r} {shift!r}; a shift is a number or \"auto\"")
            shift = "auto"
        elif not _is_number(shift) or not math.isfinite(float(shift)):
            raise Refusal(f"gives {column!r} {shift!r}; a shift is a finite number or \"auto\"")
        else:
            shift = float(shift)
        out[column.strip()] = shift
    return dict(sorted(out.items()))


def _shifts_parse(text):
    out = {}
    for item in _split(text):
        if "=" not in item:
            raise Refusal(f"item {item!r} must be written COL=C, e.g. bay_age_years=1 or bay_age_years=auto")
        column, value = (part.strip() for part in item.split("=", 1))
        if value.lower() != "auto":
            try:
                value = float(value)
            except ValueError:
                raise Refusal(f"item {item!r}: C must be a number or 'auto'") from None
        out[column] = value
    return out


def _shift_text(shift) -> str:
    return shift if isinstance(shift, str) else f"{shift:g}"


SHIFTS = Kind(_shifts_check, _shifts_parse, lambda v: ",".join(f"{k}={_shift_text(s)}" for k, s in v.items()),
              lambda v: "{ " + ", ".join(f"{k} = " + (_quote(s) if s == "auto" else _shift_text(s))
                                         for k, s in v.items()) + " }" if v else "{}", "Mapping[str, float | str]")


def _pairs_check(value):
    if isinstance(value, bool) or (type(value).__module__ == "numpy" and type(value).__name__ == "bool_"):
        return bool(value)
    if value is None:
        return False
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, (list, tuple)):
        raise Refusal(f"must be true (every pairwise product), false, or pairs such as [\"light*co2\"] "
                      f"(got {_type_name(value)} {value!r})")
    pairs = []
    for item in value:
        parts = [p.strip() for p in item.split("*")] if isinstance(item, str) else list(item) \
            if isinstance(item, (list, tuple)) else []
        if len(parts) != 2 or not all(isinstance(p, str) and p.strip() for p in parts):
            raise Refusal(f"item {item!r} must name two columns, written 'a*b' or as a pair ('a', 'b')")
        pairs.append((parts[0].strip(), parts[1].strip()))
    return tuple(pairs) if pairs else False


def _pairs_parse(text):
    word = text.strip().lower()
    if word in ("all", "none"):
        return word == "all"
    return _split(text)


INTERACTIONS = Kind(_pairs_check, _pairs_parse,
                    lambda v: ("all" if v else "none") if isinstance(v, bool) else ",".join("*".join(p) for p in v),
                    lambda v: _toml_plain(v) if isinstance(v, bool) else _toml_plain(["*".join(p) for p in v]),
                    "bool | Sequence[tuple[str, str]]")


def _response_form_check(value):
    if value is None:
        return None
    if type(value).__name__ == "ResponseTransform":  # a fitted transform from selectkit.response
        return value
    if isinstance(value, (tuple, list)) and len(value) == 2 and str(value[0]).lower() == "boxcox":
        value = f"boxcox:{value[1]}"
    if not isinstance(value, str):
        raise Refusal(f"must be \"log\", \"sqrt\" or \"boxcox:LAMBDA\" (got {_type_name(value)} {value!r})")
    text = value.strip().lower()
    if text in ("identity", "log", "sqrt"):
        return text
    if text.startswith("boxcox:"):
        try:
            lam = float(text.split(":", 1)[1])
        except ValueError:
            lam = float("nan")
        if math.isfinite(lam):
            return f"boxcox:{lam:g}"
    if text == "boxcox":
        raise Refusal("= 'boxcox' needs a λ: write boxcox:0.5 (or estimate one with "
                      "selectkit.response.boxcox_response)")
    raise Refusal(f"= {value!r} is not known; write \"log\", \"sqrt\" or \"boxcox:LAMBDA\" with a number, "
                  f"e.g. \"boxcox:0.5\"")


RESPONSE_FORM = Kind(_response_form_check, str, str, _quote, "str")


def _criterion_check(value):
    if value is None:
        return None
    from .criteria import CRITERIA

    if not isinstance(value, str) or value.strip().lower() not in CRITERIA:
        key = str(value).strip().lower()
        raise Refusal(f"= {value!r} is not known{suggest(key, CRITERIA)}; choose one of {', '.join(CRITERIA)}")
    return value.strip().lower()


CRITERION = Kind(_criterion_check, str, str, _quote, "str | None")


def _method_options_check(value):
    if value is None:
        return {}
    if not isinstance(value, Mapping):
        raise Refusal(f"must map a method name to its settings, e.g. {{'exhaustive': {{'max_size': 6}}}} "
                      f"(got {_type_name(value)})")
    out = {}
    for method, options in value.items():
        method = str(method).lower()
        problem = method_options_problem(method, options)
        if problem is not None:
            key, reason = problem
            raise Refusal(f"for {method!r}{' ' + key if key else ''}: {reason}")
        out[method] = dict(options)
    return out


def method_options_problem(method: str, options, *, where: str | None = None):
    """What is wrong with the settings ``options`` of search ``method``: None, or ``(key or None, reason)``.

    The one rule for ``method_options`` in Python, at the command line and in a
    job file's ``[search.METHOD]`` tables.
    """
    if method == "auto":
        return None, "cannot hold settings: give them to the method auto picks, exhaustive or screen"
    if method not in METHOD_NAMES:
        return None, (f"unknown search method{suggest(method, METHOD_NAMES)}; "
                      f"choose from {', '.join(METHOD_NAMES[1:])}")
    if not isinstance(options, Mapping):
        return None, f"give a table of its settings, e.g. max_size = 6 (got {options!r})"
    for key, item in options.items():
        if key == "time_budget":
            return key, (f"the run has one time budget, {spell('time_budget', where=where)} (checked between "
                         f"work units, so that every stored unit is whole); move it there")
        if isinstance(item, Mapping):
            return key, "must be a plain value or a list, not a table"
    return None


def _method_options_parse(text):
    out: dict = {}
    for item in _split(text):
        match = re.fullmatch(r"([a-z]+)\.([A-Za-z_]\w*)=(.+)", item)
        if not match:
            raise Refusal(f"item {item!r} must be written METHOD.KEY=VALUE, e.g. exhaustive.max_size=6")
        method, key, raw = match.groups()
        out.setdefault(method, {})[key] = _literal(raw)
    return out


def _literal(text: str):
    low = text.strip().lower()
    if low in ("true", "false"):
        return low == "true"
    for convert in (int, float):
        try:
            return convert(text)
        except ValueError:
            pass
    return text.strip()


def _method_options_text(value) -> str:
    return ",".join(f"{m}.{k}={_toml_plain(v).strip(chr(34))}" for m, opts in value.items() for k, v in opts.items())


METHOD_OPTIONS = Kind(_method_options_check, _method_options_parse, _method_options_text,
                      lambda v: "(one [search.METHOD] table per method)", "Mapping[str, Mapping[str, Any]]")

_DURATION_PART = re.compile(r"(\d+(?:\.\d+)?)\s*(d|h|m|s)")


def parse_duration(value) -> float:
    """Seconds from a number of seconds or a text such as ``"8h"``, ``"90m"``, ``"1h30m"``.

    Units: ``d`` days, ``h`` hours, ``m`` minutes, ``s`` seconds; parts add up
    (``"1h 30m"`` is 5400 s); a plain number, or a text holding only one
    (``"60"``), is seconds.  The result must be positive.

    Raises
    ------
    Refusal
        Saying what a duration looks like.

    Examples
    --------
    >>> parse_duration("1h30m")
    5400.0
    >>> parse_duration(90)
    90.0
    """
    if isinstance(value, str) and re.fullmatch(r"\s*\d+(?:\.\d+)?\s*", value):
        value = float(value)
    if isinstance(value, str):
        text = value.strip().lower().replace(" ", "")
        parts = _DURATION_PART.findall(text)
        if not text or "".join(a + b for a, b in parts) != text:
            raise Refusal(f"= {value!r} is not a duration; write seconds (3600) or text such as "
                          f"'8h', '90m', '1h30m', '45s'")
        scale = {"d": 86400.0, "h": 3600.0, "m": 60.0, "s": 1.0}
        seconds = sum(float(a) * scale[b] for a, b in parts)
        if seconds <= 0:
            raise Refusal(f"must be longer than zero (got {value!r})")
        return seconds
    if not _is_number(value):
        raise Refusal(f"must be seconds or text such as '8h' (got {_type_name(value)} {value!r})")
    if not math.isfinite(float(value)) or float(value) <= 0:
        raise Refusal(f"must be a positive number of seconds (got {value}); leave it out for no limit")
    return float(value)


def _duration_check(value):
    if value is None:
        return None
    if type(value).__name__ == "Deadline":  # a budget already running (selectkit._budget)
        return value
    return parse_duration(value)


DURATION = Kind(_duration_check, str, lambda v: f"{v:g}", lambda v: f"{v:g}", "float | str | None")


def _address_check(value):
    if value is None:
        return None
    if not isinstance(value, str) or not re.match(r"^[a-z][a-z0-9+]*://\S+$", value.strip()):
        raise Refusal(f"must be a scheduler address like 'tcp://scheduler.example:8786' (got {value!r})")
    return value.strip()


ADDRESS = Kind(_address_check, str, str, _quote, "str | None")


def _folds_check(value):
    if type(value).__name__ == "FoldScheme":  # selectkit.searches.crossval.FoldScheme, Python only
        return value
    return _FOLD_COUNT.check(value)


_FOLD_COUNT = _whole(2, meaning="at least 2 folds (cross-validation needs two)")
FOLDS = Kind(_folds_check, _FOLD_COUNT.parse, str, str, "int")


def _path_check(value):
    import os

    if isinstance(value, os.PathLike):
        value = os.fspath(value)
    if not isinstance(value, str) or not value.strip():
        raise Refusal(f"must be a folder path (got {_type_name(value)} {value!r})")
    return value


PATH = Kind(_path_check, str, str, _quote, "str")


# --------------------------------------------------------------------------- the table
@dataclass(frozen=True)
class Setting:
    """One user setting.

    Attributes
    ----------
    name : str
        The one name: keyword of :func:`selectkit.search`, key of a job file,
        and, with dashes for underscores, the command-line flag.
    section : str
        The job-file section that holds it (one of :data:`SECTIONS`).
    kind : Kind
        How its value is checked and written.
    default : object
        Its value when not given (``REQUIRED``: it must be given).
    help : str
        One line, shown by ``--help``, in the docstring and in a starter job file.
    surfaces : frozenset of str
        Where it can be set (``python``, ``cli``, ``job``).
    changes_result : bool
        Whether a different value may change the shortlist (a job store refuses
        to resume when one of them changed).
    recorded : bool
        Whether the value is recorded with a result (report, JSON, saved
        file).  Off for where a run ran (workers, backend, scheduler), so that
        the same search on 1 or N workers writes the same files.
    metavar : str
        The placeholder in ``--help``.
    short : str or None
        A one-letter flag beside the long one.
    """

    name: str
    section: str
    kind: Kind
    default: Any
    help: str
    surfaces: frozenset = ALL
    changes_result: bool = True
    metavar: str = "VALUE"
    recorded: bool = True
    short: str | None = None

    @property
    def flag(self) -> str:
        return "--" + self.name.replace("_", "-")

    @property
    def required(self) -> bool:
        return self.default is REQUIRED


class _Required:
    def __repr__(self):
        return "<required>"


REQUIRED = _Required()

_POSITIVE = _number(0.0, strictly=True, meaning="a positive number")
_S = Setting
SETTINGS: tuple[Setting, ...] = (
    # [data]: which columns play which part
    _S("response", "data", NAME, REQUIRED, "name of the response column", metavar="COL", short="-r"),
    _S("predictors", "data", _optional(NAMES), None,
       "columns to consider as predictors (default, or empty: every other column)", metavar="COL,COL"),
    _S("always_include", "data", NAMES, (), "columns every model holds", metavar="COL,COL"),
    _S("leave_out", "data", NAMES, (), "columns never used", metavar="COL,COL"),
    _S("row_weights", "data", _optional(NAME), None, "column of positive row weights (weighted least squares)",
       metavar="COL"),
    _S("incomplete_rows", "data", _choice(("refuse", "drop")), "refuse",
       "rows with a missing value in a column in use: refuse (and list them) or drop", metavar="refuse|drop"),
    _S("keep_id_columns", "data", NAMES, (), "identifier-like columns to keep as predictors", metavar="COL,COL"),
    _S("decimal_mark", "data", _optional(_choice((".", ","), aliases={"point": ".", "comma": ","})), None,
       "decimal mark of a CSV file: '.' or ',' (default: decided from its numbers)", metavar=".|,"),
    _S("read_in_parts", "data", _choice(("auto", "yes", "no")), "auto",
       "read the table part by part, never whole: auto does so for folders, globs, Dask DataFrames and tables "
       "of a million rows or more", metavar="auto|yes|no"),
    _S("check_sample_rows", "data", _whole(1000, meaning="at least 1000 rows"), 50_000,
       "rows of the seeded sample that a table read in parts is checked and drawn on", metavar="N"),
    _S("time_ordered", "data", FLAG, False,
       "rows are in time order: folds are blocks and independence is checked by lag"),
    # [forms]: the candidate forms
    _S("forms", "forms", _optional(_listed_choices(FORM_NAMES, "form", empty="")), None,
       "forms offered for each numeric predictor (default: identity, log, sqrt, reciprocal, square, boxcox, "
       "boxtidwell; spline3, spline4, spline5 add restricted cubic splines of 3-5 knots)",
       metavar="FORM,FORM"),
    _S("fractional_polynomials", "forms", FLAG, False,
       "also offer the fractional-polynomial powers -2, -1, -0.5, 0.5, 2, 3 (Royston & Altman 1994)"),
    _S("shifts", "forms", SHIFTS, {}, "take log/sqrt/reciprocal of x + C for these columns (C a number or auto)",
       metavar="COL=C,COL=C"),
    _S("interactions", "forms", INTERACTIONS, False,
       "pairwise products: all, none, or pairs written a*b", metavar="all|A*B,C*D"),
    _S("response_form", "forms", _optional(RESPONSE_FORM), None,
       "form of the response: log, sqrt or boxcox:LAMBDA (default: as it is)", metavar="FORM"),
    _S("prefer", "forms", NAMES, (),
       "variables to keep when they nearly duplicate another or sit in a nearly collinear group",
       metavar="COL,COL"),
    _S("twin_limit", "forms", _optional(_number(0.0, strictly=True, high=1.0, meaning="a correlation in (0, 1]"),
                                        none_word="off"), 0.999,
       "correlation at which two variables count as twins and one is set aside (off: keep both)",
       metavar="R|off"),
    _S("vif_limit", "forms", _optional(_number(1.0, strictly=True, meaning="a number above 1"), none_word="off"),
       1000.0, "VIF at which a variable of a nearly collinear group is set aside (off: keep all)",
       metavar="VIF|off"),
    _S("curvature_test", "forms", FLAG, True,
       "offer curved forms only for predictors that show curvature with the others in the fit"),
    # [search]
    _S("methods", "search", _listed_choices(METHOD_NAMES, "search method",
                                            empty="name at least one search method, e.g. exhaustive"),
       ("auto",), "searches to run and pool: " + ", ".join(METHOD_NAMES), metavar="METHOD,METHOD"),
    _S("method_options", "search", METHOD_OPTIONS, {},
       "settings of one search method, e.g. exhaustive.max_size=6", metavar="METHOD.KEY=VALUE,..."),
    _S("exact_limit", "search", _whole(1), 40, "largest number of candidate terms that auto searches exactly",
       metavar="N"),
    # [ranking]
    _S("criterion", "ranking", CRITERION, None,
       "criterion that ranks the models: aic, aicc, bic, cp, adj_r2, press, cv_mse (default: from aim)",
       metavar="NAME"),
    _S("aim", "ranking", _choice(AIM_NAMES), "explain", "explain ranks by BIC, predict by AICc",
       metavar="explain|predict"),
    _S("parameter_count", "ranking", _choice(PARAMETER_COUNTS), "sigma-counted",
       "what k counts in AIC and BIC: the coefficients and σ² (sigma-counted) or the coefficients only",
       metavar="sigma-counted|coefficients-only"),
    _S("shortlist_size", "ranking", _whole(1, meaning="at least 1"), 10, "answers in the shortlist", metavar="N"),
    _S("keep_within", "ranking", _optional(_number(0.0, strictly=False, meaning="a distance of 0 or more")), None,
       "keep only models within this distance of the best by the criterion", metavar="D"),
    _S("folds", "ranking", FOLDS, 5, "folds for the cross-validated error", metavar="K"),
    _S("resamples", "ranking", _whole(0, meaning="0 (skip) or a positive number of resamples"), 0,
       "bootstrap resamples for the stability of the selection (0: skip)", metavar="B"),
    _S("split_fraction", "ranking", _number(0.0, strictly=False, high=0.9,
                                            meaning="0 (skip) or a share of the rows below 0.9, e.g. 0.5"), 0.0,
       "honest p-values by sample splitting: choose the model on this share of the rows, estimate it on the "
       "rest (0: skip)", metavar="SHARE"),
    _S("honest_folds", "ranking", _whole(2, also=0, meaning="0 (skip) or at least 2 outer folds"), 0,
       "outer folds for the honest error of the whole search (0: skip)", metavar="K"),
    # [run]
    _S("seed", "run", _whole(0, meaning="0 or more (seeds of numpy's SeedSequence are non-negative)"), 0,
       "seed of every random draw (folds, bootstrap)", metavar="N"),
    _S("workers", "run", _whole(1, also=-1, meaning="a positive number of worker processes, or -1 for every core"),
       1, "worker processes (-1: every core); the result does not depend on it", changes_result=False, recorded=False,
       metavar="N"),
    _S("backend", "run", _choice(BACKEND_NAMES), "loky",
       "joblib backend: " + ", ".join(BACKEND_NAMES), changes_result=False, recorded=False, metavar="NAME"),
    _S("scheduler", "run", ADDRESS, None, "Dask scheduler address, with backend dask", changes_result=False,
       recorded=False,
       metavar="ADDRESS"),
    _S("scheduler_timeout", "run", _POSITIVE, 10.0,
       "seconds to wait for the Dask scheduler to answer before any work", changes_result=False, recorded=False,
       metavar="SECONDS"),
    _S("time_budget", "run", DURATION, None,
       "wall-clock budget of the whole run: seconds, or text such as 8h, 90m (default: no limit)",
       changes_result=False, metavar="DURATION"),
    _S("detailed_answers", "run", _whole(0, meaning="0 or more answers"), 3,
       "answers whose report section draws the figures of the checks; the others get their tables only",
       changes_result=False, metavar="N"),
    _S("output", "run", PATH, "selectkit-output", "folder for the shortlist, the report and a job's run store",
       surfaces=frozenset((CLI, JOB)), changes_result=False, metavar="FOLDER", short="-o"),
)
BY_NAME: dict[str, Setting] = {s.name: s for s in SETTINGS}

# --------------------------------------------------------------------------- former spellings
#: Former spellings on each surface → what replaced them (a name, or words for the command line).
FORMER: dict[str, dict[str, str]] = {
    PYTHON: {"forced": "always_include", "exclude": "leave_out", "weights": "row_weights",
             "missing": "incomplete_rows", "keep_identifiers": "keep_id_columns",
             "response_transform": "response_form", "max_delta": "keep_within", "stability": "resamples",
             "n_jobs": "workers", "convention": "parameter_count", "direction": "methods"},
    CLI: {"--only": "--predictors", "--keep-in": "--always-include", "--row-weight": "--row-weights",
          "--drop-incomplete-rows": "--incomplete-rows drop", "--keep-id-column": "--keep-id-columns",
          "--fractional-powers": "--fractional-polynomials", "--shift": "--shifts",
          "--all-forms": "--no-curvature-test", "--keep-twins": "--twin-limit off --vif-limit off",
          "--pairwise-products": "--interactions all", "-m": "--methods", "--method": "--methods",
          "--rank-by": "--criterion", "--count-parameters": "--parameter-count",
          "--statsmodels-convention": "--parameter-count coefficients-only", "--top": "--shortlist-size",
          "--within-delta": "--keep-within", "--honest-error": "--honest-folds",
          "--rows-in-time-order": "--time-ordered", "--out": "--output"},
    JOB: {"offer": "forms", "convention": "parameter_count", "keep_twins": "twin_limit = \"off\" and "
          "vif_limit = \"off\"", "all_forms": "curvature_test = false", "max_delta": "keep_within",
          "stability": "resamples", "n_jobs": "workers", "forced": "always_include", "exclude": "leave_out"},
}


def former(name: str, where: str) -> str | None:
    """What replaced the former spelling ``name`` on surface ``where`` (None: not a former spelling)."""
    return FORMER[where].get(name)


def suggest(word: str, choices) -> str:
    """`` (did you mean 'x'?)`` for the nearest of ``choices``, a renamed value first; else ``""``."""
    if RENAMED_VALUES.get(word) in choices:
        return f" (renamed: did you mean {RENAMED_VALUES[word]!r}?)"
    close = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.5)
    return f" (did you mean {close[0]!r}?)" if close else ""


# --------------------------------------------------------------------------- spelling on each surface
def spell(name: str, value: Any = ..., *, where: str | None = None) -> str:
    """The setting ``name`` (set to ``value``, when given) as the user writes it on the surface in use.

    >>> spell("incomplete_rows", "drop", where="python")
    "incomplete_rows='drop'"
    >>> spell("incomplete_rows", "drop", where="cli")
    '--incomplete-rows drop'
    >>> spell("incomplete_rows", "drop", where="job")
    '[data] incomplete_rows = "drop"'
    """
    where = where or surface()
    setting = BY_NAME[name]
    if where == CLI:
        if value is ...:
            return setting.flag
        if setting.kind is FLAG:
            return setting.flag if value else "--no-" + setting.flag[2:]
        return f"{setting.flag} {setting.kind.cli(value)}"
    if where == JOB:
        if value is ...:
            return f"[{setting.section}] {name}"
        return f"[{setting.section}] {name} = {setting.kind.toml(value)}"
    if value is ...:
        return f"{name}="
    return f"{name}={_tidy(value)!r}"


def _tidy(value):
    """``value`` as a person types it in Python: lists for tuples, 1 for 1.0."""
    if isinstance(value, float) and value.is_integer():
        return int(value)
    if isinstance(value, (list, tuple)):
        return [_tidy(v) for v in value]
    if isinstance(value, Mapping):
        return {k: _tidy(v) for k, v in value.items()}
    return value


def check_value(name: str, value: Any, *, where: str | None = None) -> Any:
    """``value`` checked for the setting ``name``; a refusal names it as the surface writes it.

    Raises
    ------
    selectkit.errors.OptionError
        (a :class:`selectkit.errors.JobFileError` on the job surface).
    """
    from .errors import JobFileError, OptionError

    where = where or surface()
    setting = BY_NAME[name]
    try:
        return setting.kind.check(value)
    except Refusal as why:
        reason = str(why)
        if where == JOB:
            raise JobFileError(f"[{setting.section}] {name} {reason}") from None
        label = setting.flag if where == CLI else name
        raise OptionError(f"{label} {reason}") from None


def resolve(given: Mapping[str, Any], *, where: str | None = None, allowed=None) -> dict[str, Any]:
    """Every setting of ``where``'s surface: the ``given`` ones checked, the rest at their defaults.

    Parameters
    ----------
    given : mapping
        Settings by name.
    where : str, optional
        The surface (default: the one in use, see :func:`speaking`).
    allowed : iterable of str, optional
        The names accepted (default: every setting of the surface).

    Raises
    ------
    selectkit.errors.OptionError
        An unknown or former name (with "did you mean"), a required setting
        missing, or a value out of range.
    """
    from .errors import OptionError

    where = where or surface()
    names = [s.name for s in SETTINGS if where in s.surfaces] if allowed is None else list(allowed)
    for key in given:
        if key not in names:
            raise OptionError(unknown_message(key, names, where=where))
    out = {}
    for name in names:
        setting = BY_NAME[name]
        if name in given:
            out[name] = check_value(name, given[name], where=where)
        elif setting.required:
            raise OptionError(f"{spell(name, where=where).rstrip('=')} is missing; it must be given")
        else:
            out[name] = _fresh(setting.default)
    return out


def _fresh(default):
    return dict(default) if isinstance(default, dict) else default


def unknown_message(key: str, names, *, where: str) -> str:
    """"unknown setting 'x'" with the current spelling of a former name, or the nearest name."""
    label = {PYTHON: "keyword", CLI: "option", JOB: "key"}[where]
    now = former(key, where)
    if now is not None:
        if where == PYTHON and now in BY_NAME:
            return f"{key}= was renamed; did you mean {now}=?"
        return f"{label} {key!r} was renamed; did you mean {now}?"
    hint = suggest(key, names)
    return f"unknown {label} {key!r}{hint}; the settings are listed by help(selectkit.search)" if where == PYTHON \
        else f"unknown {label} {key!r}{hint}"


# --------------------------------------------------------------------------- the notebook face
def signature(*, extra_first=(), extra_last=()) -> inspect.Signature:
    """The keyword-only signature of every Python setting, in table order, with its default."""
    params = list(extra_first)
    for s in SETTINGS:
        if PYTHON not in s.surfaces:
            continue
        default = inspect.Parameter.empty if s.required else s.default
        params.append(inspect.Parameter(s.name, inspect.Parameter.KEYWORD_ONLY, default=default,
                                        annotation=s.kind.hint))
    params.extend(extra_last)
    return inspect.Signature(params)


def parameters_doc(indent: str = "    ") -> str:
    """The numpy-style Parameters entries of every Python setting, grouped as a job file groups them."""
    lines = []
    for s in SETTINGS:
        if PYTHON not in s.surfaces:
            continue
        default = "required" if s.required else f"default {s.default!r}"
        lines.append(f"{indent}{s.name} : {s.kind.hint}, {default}")
        lines.append(f"{indent}    {s.help[0].upper()}{s.help[1:]}.  [{s.section}] in a job file; "
                     f"{s.flag} at the command line.")
    return "\n".join(lines)
