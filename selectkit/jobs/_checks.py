"""Checkers of job-file values: each takes ``(value, where)`` and returns the cleaned value or raises."""

from __future__ import annotations

import difflib
import math
import re

from ..errors import JobFileError

__all__ = ["parse_duration"]

BACKEND_NAMES = ("loky", "threading", "multiprocessing", "sequential", "dask")
CONVENTION_NAMES = ("sigma-counted", "coefficients-only")
AIM_NAMES = ("explain", "predict")
#: Search methods a job may name (those of :data:`selectkit.api.METHODS`).
METHOD_NAMES = ("auto", "exhaustive", "forward", "backward", "stepwise", "crossval", "screen")
#: Former names of values, refused with the new spelling.
RENAMED = {"both": "stepwise", "selectkit": "sigma-counted", "statsmodels": "coefficients-only"}
FORM_NAMES = ("identity", "log", "sqrt", "reciprocal", "square", "boxcox", "boxtidwell", "yeojohnson")


# --------------------------------------------------------------------------- checkers
# Each checker takes (value, where) and returns the cleaned value or raises JobFileError.

def _type_name(value) -> str:
    return {bool: "true/false", int: "a whole number", float: "a number", str: "text",
            list: "a list", dict: "a table"}.get(type(value), type(value).__name__)


def _is_text(value, where):
    if not isinstance(value, str):
        raise JobFileError(f"{where} must be text in quotes (got {_type_name(value)} {value!r})")
    return value


def _is_name(value, where):
    value = _is_text(value, where).strip()
    if not value:
        raise JobFileError(f"{where} is empty; give a column name")
    return value


def _is_flag(value, where):
    if not isinstance(value, bool):
        raise JobFileError(f"{where} must be true or false (got {_type_name(value)} {value!r})")
    return value


def _is_names(value, where):
    if isinstance(value, str):
        raise JobFileError(f"{where} must be a list of names, e.g. [{value!r}] (got a single text)")
    if not isinstance(value, list):
        raise JobFileError(f"{where} must be a list of names (got {_type_name(value)} {value!r})")
    cleaned = []
    for i, item in enumerate(value):
        cleaned.append(_is_name(item, f"{where}[{i}]"))
    duplicates = sorted({c for c in cleaned if cleaned.count(c) > 1})
    if duplicates:
        raise JobFileError(f"{where} lists {', '.join(map(repr, duplicates))} more than once; keep one")
    return tuple(cleaned)


def _outer_folds(value, where):
    """0 (skip) or at least 2 outer folds."""
    value = _whole(low=0)(value, where)
    if value == 1:
        raise JobFileError(f"{where} must be 0 (skip) or at least 2 outer folds (got 1)")
    return value


def _whole(low=None, allow_minus_one=False):
    def check(value, where):
        if isinstance(value, bool) or not isinstance(value, int):
            raise JobFileError(f"{where} must be a whole number (got {_type_name(value)} {value!r})")
        if allow_minus_one and value == -1:
            return value
        if low is not None and value < low:
            extra = " or -1 for every core" if allow_minus_one else ""
            raise JobFileError(f"{where} must be at least {low}{extra} (got {value})")
        return value

    return check


def _positive_number(value, where):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise JobFileError(f"{where} must be a number (got {_type_name(value)} {value!r})")
    if not math.isfinite(value) or value <= 0:
        raise JobFileError(f"{where} must be a positive number (got {value})")
    return float(value)


def _one_of(choices):
    def check(value, where):
        value = _is_text(value, where)
        if value.lower() not in choices:
            hint = _suggest(value.lower(), choices)
            raise JobFileError(f"{where} = {value!r} is not known{hint}; choose one of {', '.join(choices)}")
        return value.lower()

    return check


def _is_address(value, where):
    value = _is_text(value, where).strip()
    if not re.match(r"^[a-z][a-z0-9+]*://\S+$", value):
        raise JobFileError(f"{where} must be a scheduler address like 'tcp://scheduler.example:8786' (got {value!r})")
    return value


_DURATION_PART = re.compile(r"(\d+(?:\.\d+)?)\s*(d|h|m|s)")


def parse_duration(value, where="time_budget") -> float:
    """Seconds from a number of seconds or a text such as ``"8h"``, ``"90m"``, ``"1h30m"``.

    Units: ``d`` days, ``h`` hours, ``m`` minutes, ``s`` seconds; parts add up
    (``"1h 30m"`` is 5400 s); a plain number, or a text holding only one
    (``"60"``, as the command line passes it), is seconds.  The result must
    be positive.

    Examples
    --------
    >>> parse_duration("1h30m")
    5400.0
    >>> parse_duration(90)
    90.0
    """
    if isinstance(value, str) and re.fullmatch(r"\s*\d+(?:\.\d+)?\s*", value):
        value = float(value)  # plain seconds written as text, as the command line passes them
    if isinstance(value, str):
        text = value.strip().lower().replace(" ", "")
        parts = _DURATION_PART.findall(text)
        if not text or "".join(a + b for a, b in parts) != text:
            raise JobFileError(
                f"{where} = {value!r} is not a duration; write seconds (3600) or text such as "
                f"'8h', '90m', '1h30m', '45s'"
            )
        scale = {"d": 86400.0, "h": 3600.0, "m": 60.0, "s": 1.0}
        seconds = sum(float(a) * scale[b] for a, b in parts)
        if seconds <= 0:
            raise JobFileError(f"{where} must be longer than zero (got {value!r})")
        return seconds
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise JobFileError(f"{where} must be seconds or text such as '8h' (got {_type_name(value)} {value!r})")
    if not math.isfinite(value) or value <= 0:
        raise JobFileError(f"{where} must be a positive number of seconds (got {value}); leave it out for no limit")
    return float(value)


def _is_interactions(value, where):
    names = _is_names(value, where)
    for i, pair in enumerate(names):
        parts = [p.strip() for p in pair.split("*")]
        if len(parts) != 2 or not all(parts):
            raise JobFileError(f"{where}[{i}] = {pair!r} must name two columns joined by '*', e.g. 'light*co2'")
    return tuple("*".join(p.strip() for p in pair.split("*")) for pair in names)


def _is_method_list(value, where):
    names = tuple(n.lower() for n in _is_names(value, where))
    if not names:
        raise JobFileError(f"{where} is empty; name at least one search method, e.g. [\"exhaustive\"]")
    for name in names:
        if name not in METHOD_NAMES:
            raise JobFileError(f"{where}: unknown search method {name!r}{_suggest(name, METHOD_NAMES)}; "
                               f"choose from {', '.join(METHOD_NAMES)}")
    return names


def _is_interactions_or_flag(value, where):
    if isinstance(value, bool):
        return value
    return _is_interactions(value, where)


def _is_shifts(value, where):
    """An inline table ``{column = number or "auto"}`` → sorted tuple of pairs."""
    if not isinstance(value, dict):
        raise JobFileError(f"{where} must be a table such as {{ bay_age_years = 1, irrigation = \"auto\" }} "
                           f"(got {_type_name(value)} {value!r})")
    pairs = []
    for column, shift in value.items():
        if isinstance(shift, str):
            if shift != "auto":
                raise JobFileError(f"{where}.{column} must be a number or \"auto\" (got {shift!r})")
        elif isinstance(shift, bool) or not isinstance(shift, (int, float)) or not math.isfinite(shift):
            raise JobFileError(f"{where}.{column} must be a number or \"auto\" (got {_type_name(shift)} {shift!r})")
        pairs.append((column, shift))
    return tuple(sorted(pairs))


def _is_response_form(value, where):
    """``"log"``, ``"sqrt"`` or ``"boxcox:0.5"``."""
    text = _is_text(value, where).strip().lower()
    if text in ("log", "sqrt", "identity"):
        return text
    if text.startswith("boxcox:"):
        try:
            float(text.split(":", 1)[1])
        except ValueError:
            pass
        else:
            return text
    raise JobFileError(f"{where} = {value!r} is not known; write \"log\", \"sqrt\" or \"boxcox:LAMBDA\" "
                       f"with a number, e.g. \"boxcox:0.5\"")


def _is_forms(value, where):
    names = tuple(n.lower() for n in _is_names(value, where))
    for name in names:
        if name not in FORM_NAMES:
            raise JobFileError(f"{where}: unknown form {name!r}{_suggest(name, FORM_NAMES)}; "
                               f"choose from {', '.join(FORM_NAMES)}")
    return names


def _suggest(word: str, choices) -> str:
    if RENAMED.get(word) in choices:
        return f" (renamed: did you mean {RENAMED[word]!r}?)"
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.5)
    return f" (did you mean {close[0]!r}?)" if close else ""
