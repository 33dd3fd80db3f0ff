"""The shortlist as CSV and as a versioned JSON document, written atomically.

The JSON layout is described by ``schema.json`` beside this module (JSON
Schema draft 2020-12, ``schema_version`` in :data:`SCHEMA_VERSION`).  :func:`validate_document`
checks a document against it without needing the ``jsonschema`` package: it
implements the keywords the schema uses (``type``, ``const``, ``enum``,
``required``, ``properties``, ``additionalProperties``, ``items``,
``minItems``, ``minimum``, ``anyOf`` and local ``$ref``).  The tests check that
it agrees with ``jsonschema``.
"""

from __future__ import annotations

import json
import math
import re
from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd

from .._io import atomic_write_text
from ..errors import InputError
from .text import CAUTIONS

__all__ = [
    "SCHEMA_VERSION",
    "CSV_COLUMNS",
    "shortlist_frame",
    "csv_text",
    "shortlist_csv",
    "write_csv",
    "MODEL_CSV_COLUMNS",
    "models_csv",
    "write_models_csv",
    "shortlist_document",
    "write_json",
    "load_schema",
    "validate_document",
    "check_document",
]

SCHEMA_VERSION = "3.0"  # 3.0: ranking.parameter_count (was convention), the one name of the setting

#: Columns of the model-level CSV (``models.csv``), in order.
MODEL_CSV_COLUMNS = (
    "position", "answer", "terms", "variables", "n_terms", "k", "delta_from_best", "model_weight",
    "comparable_support", "rss", "log_likelihood", "aic", "aicc", "bic", "cp", "r2", "adj_r2",
    "press", "cv_mse", "cv_se", "holdout_mse", "found_by", "term_indices",
)
#: Columns of the CSV shortlist of answers (``shortlist.csv``), in order: the answer, then its best model.
CSV_COLUMNS = (
    "answer", "variables", "answer_weight", "models_in_answer", "form_alternatives",
) + tuple(c for c in MODEL_CSV_COLUMNS if c not in ("answer", "variables"))

_SCORE_KEYS = ("rss", "log_likelihood", "aic", "aicc", "bic", "cp", "r2", "adj_r2",
               "press", "cv_mse", "cv_se", "holdout_mse")


def _clean(value):
    """A JSON-safe copy: numpy scalars → Python, NaN/inf → None, tuples → lists."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_clean(v) for v in value.tolist()]
    if value is None or value is pd.NA:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        return value if math.isfinite(value) else None
    if isinstance(value, str):
        return value
    try:
        import os

        if isinstance(value, os.PathLike):
            return os.fspath(value)
    except TypeError:  # pragma: no cover
        pass
    return str(value)


# --------------------------------------------------------------------------- CSV

#: First characters that make a spreadsheet read a text cell as a formula (or start one).
_FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
#: A plain decimal number written as text (such as a level ``-1``): a spreadsheet reads it as a number.
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def _neutral_text(value):
    """``value`` with a leading apostrophe when it is text a spreadsheet would run as a formula."""
    if isinstance(value, str) and value.startswith(_FORMULA_STARTS) and not _PLAIN_NUMBER.fullmatch(value):
        return "'" + value
    return value


def _is_textual(dtype) -> bool:
    """Whether a column of this dtype may hold text (object, string or categorical columns)."""
    return isinstance(dtype, pd.CategoricalDtype) or pd.api.types.is_object_dtype(dtype) \
        or pd.api.types.is_string_dtype(dtype)


def _spreadsheet_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` whose text cells and column names cannot start a spreadsheet formula.

    Column names and levels come from the user's table, so a cell such as
    ``=HYPERLINK(...)`` or ``@SUM(...)`` would be evaluated when the CSV is
    opened in a spreadsheet (formula or "CSV" injection). Every text cell and
    column name that begins with ``=``, ``+``, ``-``, ``@``, a tab or a carriage
    return gets a leading apostrophe, which spreadsheets show as text. Numeric
    columns and number cells are left as they are (a negative number stays a
    number), and so is text that is a plain decimal number such as ``-1.5``.

    This is common practice (the OWASP guidance on CSV injection, cited from
    memory), not a published standard. The JSON output is never altered.
    """
    safe = frame.copy()
    safe.columns = [_neutral_text(c) for c in safe.columns]
    for i in range(safe.shape[1]):
        column = safe.iloc[:, i]
        if not _is_textual(column.dtype):  # numbers, booleans, dates: never text a spreadsheet could run
            continue
        safe.isetitem(i, column.astype(object).map(_neutral_text))
    return safe


def _holds_carriage_return(frame: pd.DataFrame) -> bool:
    names = any(isinstance(c, str) and "\r" in c for c in frame.columns)
    return names or any(isinstance(v, str) and "\r" in v
                        for i in range(frame.shape[1]) if _is_textual(frame.iloc[:, i].dtype)
                        for v in frame.iloc[:, i])


def csv_text(frame: pd.DataFrame) -> str:
    """Any output table as CSV text, safe to open in a spreadsheet (see :func:`_spreadsheet_safe`).

    UTF-8, comma-separated, ``\\n`` line ends, numbers to 10 significant digits,
    empty cells for missing values, no index column. Every CSV selectkit
    writes goes through here. When a name holds a carriage return, the lines
    end in ``\\r\\n`` instead (RFC 4180's line end): Python's CSV writer quotes
    only cells holding a character of the line end, and an unquoted carriage
    return would split a row for every reader.
    """
    safe = _spreadsheet_safe(frame)
    line_end = "\r\n" if _holds_carriage_return(safe) else "\n"
    return safe.to_csv(index=False, lineterminator=line_end, float_format="%.10g")


def shortlist_frame(shortlist) -> pd.DataFrame:
    """The shortlist of answers with the CSV columns, in order (one row per answer, its best model's scores)."""
    table = shortlist.table
    return table[[c for c in CSV_COLUMNS if c in table.columns]].copy()


def models_frame(shortlist) -> pd.DataFrame:
    """The model-level list with the columns of ``models.csv``, in order."""
    table = shortlist.models
    return table[[c for c in MODEL_CSV_COLUMNS if c in table.columns]].copy()


def models_csv(shortlist) -> str:
    """The model-level list as CSV text (as :func:`shortlist_csv`)."""
    return csv_text(models_frame(shortlist))


def write_models_csv(path, shortlist) -> Path:
    """Write the model-level CSV atomically; return the path."""
    return atomic_write_text(path, models_csv(shortlist))


def shortlist_csv(shortlist) -> str:
    """The shortlist as CSV text (UTF-8, comma-separated, empty cells for missing values, formula-safe)."""
    return csv_text(shortlist_frame(shortlist))


def write_csv(path, shortlist) -> Path:
    """Write the shortlist CSV atomically; return the path."""
    return atomic_write_text(path, shortlist_csv(shortlist))


# --------------------------------------------------------------------------- JSON


def _search_entry(found) -> dict:
    return {
        "method": str(found.method),
        "models_kept": len(found),
        "evaluated": int(found.evaluated),
        "pruned": int(found.pruned),
        "singular": int(found.singular),
        "exact": bool(found.exact),
        "stopped_by": str(found.stopped_by),
    }


def _model_entry(row, fit, diagnosis) -> dict:
    entry = {
        "position": int(row["position"]),
        "answer": int(row["answer"]),
        "terms": list(fit.terms) if fit is not None else [t for t in str(row["terms"]).split(" + ")],
        "term_indices": [int(i) for i in str(row["term_indices"]).split()],
        "variables": [v for v in str(row["variables"]).split(", ") if v],
        "n_terms": int(row["n_terms"]),
        "k": int(row["k"]),
        "scores": {key: _clean(row[key]) for key in _SCORE_KEYS},
        "delta_from_best": _clean(row["delta_from_best"]),
        "model_weight": _clean(row["model_weight"]),
        "comparable_support": _clean(row["comparable_support"]),
        "found_by": [s.strip() for s in str(row["found_by"]).split(",") if s.strip()],
    }
    if fit is not None:
        entry["equation"] = fit.equation
        entry["residual_std_error"] = _clean(fit.sigma)
        entry["coefficients"] = [
            {key: _clean(value) for key, value in record.items()}
            for record in fit.coefficients.to_dict(orient="records")
        ]
    if diagnosis is not None:
        entry["checks"] = [
            {"name": c.name, "aspect": c.aspect, "statistic": _clean(c.statistic), "pvalue": _clean(c.pvalue),
             "level": c.level, "passed": c.passed, "verdict": c.verdict, "reference": c.reference,
             "remedy": c.remedy, "rows": [str(r) for r in c.rows], "rows_not_listed": int(c.rows_not_listed)}
            for c in diagnosis.checks
        ]
        entry["flagged_rows"] = [int(r) for r in diagnosis.flagged_rows["row"]]
    return entry


def _stability_entry(stability) -> dict | None:
    if stability is None:
        return None
    return {
        "replicates": int(stability.n_boot),
        "seed": _clean(stability.seed),
        "criterion": stability.criterion,
        "failed": int(stability.failed),
        "share_same_as_full": _clean(stability.share_same_as_full),
        "full_data_best": list(stability.full_data_best),
        "variables": [{"variable": str(r["variable"]), "share_selected": _clean(r["share_selected"])}
                      for r in stability.variable_share.to_dict(orient="records")],
        "forms": [{"term": str(r["term"]), "variable": str(r["variable"]),
                   "share_selected": _clean(r["share_selected"])}
                  for r in stability.form_share.to_dict(orient="records")],
        "notes": list(stability.notes),
    }


def shortlist_document(*, shortlist, candidates=None, settings=None, founds=(), diagnoses=(),
                       stability=None, honest=None, split=None, scales=None) -> dict:
    """The shortlist as a JSON-ready dict following ``schema.json`` (:data:`SCHEMA_VERSION`).

    Parameters
    ----------
    shortlist : selectkit.rank.Shortlist
    candidates : CandidateSet, optional
        For the response's name and scale.
    settings : dict, optional
        The job's settings; copied as given (made JSON-safe).
    founds : sequence of Found
    diagnoses : sequence of Diagnosis
        Aligned with the shortlisted models (may be shorter).
    stability : Stability, optional
    honest : NestedResult, optional
    split : SplitInference, optional
        Written as ``split_inference``.
    scales : dict, optional
        The response's Box-Cox profiles the report offers; not part of the
        document (``Result.response_boxcox(i)`` gives them).

    Returns
    -------
    dict
        Missing numbers (NaN, infinite) are ``null``.
    """
    from .. import __version__

    settings = dict(settings or {})
    if candidates is not None:
        transform = candidates.response_transform
        response = {"name": str(candidates.response),
                    "scale": str(transform.name if transform.transform != "identity" else candidates.response),
                    "transform": str(transform.transform)}
    else:
        name = str(settings.get("response", "response"))
        response = {"name": name, "scale": name, "transform": "identity"}
    diagnoses = list(diagnoses or ())
    answers = []
    for i, (_, row) in enumerate(shortlist.table.iterrows()):
        fit = shortlist.fits[i] if i < len(shortlist.fits) else None
        diagnosis = diagnoses[i] if i < len(diagnoses) else None
        answers.append({
            "answer": int(row["answer"]),
            "variables": [v for v in str(row["variables"]).split(", ") if v],
            "answer_weight": _clean(row["answer_weight"]),
            "models_in_answer": int(row["models_in_answer"]),
            "form_alternatives": [{"variable": variable, "forms": list(forms)}
                                  for variable, forms in shortlist.answer_forms[i]],
            "best_model": _model_entry(row, fit, diagnosis),
        })
    models = [_model_entry(row, None, None) for _, row in shortlist.models.iterrows()]
    return {
        "schema_version": SCHEMA_VERSION,
        "producer": {"name": "selectkit", "version": __version__},
        "response": response,
        "rows": int(shortlist.n),
        "settings": _clean(settings),
        "ranking": {
            "criterion": shortlist.criterion,
            "reason": shortlist.criterion_reason,
            "aim": shortlist.aim,
            "parameter_count": shortlist.convention,
            "weight_criterion": shortlist.weight_criterion,
            "cp_variance_source": shortlist.cp_variance_source,
            "models_pooled": int(len(shortlist.scored)),
        },
        "searches": [_search_entry(f) for f in founds],
        "answers": answers,
        "models": models,
        "variable_support": [
            {"variable": str(r["variable"]), "support": _clean(r["support"]),
             "models_holding": int(r["models_holding"]), "leading_form": str(r["leading_form"])}
            for r in shortlist.variable_support.to_dict(orient="records")
        ],
        "stability": _stability_entry(stability),
        "honest_error": None if honest is None else {
            "error": _clean(honest.error), "standard_error": _clean(honest.standard_error),
            "naive_error": _clean(honest.naive_error), "optimism": _clean(honest.optimism),
            "procedure": str(honest.procedure), "outer_folds": int(len(honest.folds)),
        },
        "split_inference": None if split is None else {
            "fraction": float(split.fraction), "seed": int(split.seed), "time_ordered": bool(split.time_ordered),
            "n_select": int(split.n_select), "n_estimate": int(split.n_estimate),
            "terms": [str(t) for t in split.terms], "criterion": str(split.criterion),
            "same_as_all_rows": bool(split.same_as_all_rows),
            "coefficients": [{key: _clean(value) for key, value in row.items()}
                             for row in split.coefficients.drop(columns=["term"]).to_dict(orient="records")],
            "notes": [str(n) for n in split.notes],
        },
        "notes": list(shortlist.notes),
        "cautions": [{"title": title, "text": text} for title, text in CAUTIONS],
    }


def write_json(path, document) -> Path:
    """Write a JSON document atomically (UTF-8, indented, no NaN); return the path."""
    text = json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False)
    return atomic_write_text(path, text + "\n")


# --------------------------------------------------------------------------- validation


def load_schema() -> dict:
    """The shortlist JSON Schema shipped with selectkit."""
    return json.loads(resources.files("selectkit.report").joinpath("schema.json").read_text(encoding="utf-8"))


_TYPES = {
    "object": lambda v: isinstance(v, dict),
    "array": lambda v: isinstance(v, list),
    "string": lambda v: isinstance(v, str),
    "boolean": lambda v: isinstance(v, bool),
    "null": lambda v: v is None,
    "integer": lambda v: isinstance(v, int) and not isinstance(v, bool)
    or isinstance(v, float) and v.is_integer(),
    "number": lambda v: isinstance(v, (int, float)) and not isinstance(v, bool),
}


def _resolve(root, ref):
    if not ref.startswith("#/"):
        raise InputError(f"schema reference {ref!r} is not local; only '#/...' references are supported")
    node = root
    for part in ref[2:].split("/"):
        node = node[part.replace("~1", "/").replace("~0", "~")]
    return node


def _validate(value, schema, root, path, errors):
    if schema is True or schema == {}:
        return
    if schema is False:
        errors.append(f"{path}: no value is allowed here")
        return
    if "$ref" in schema:
        _validate(value, _resolve(root, schema["$ref"]), root, path, errors)
    if "type" in schema:
        types = schema["type"] if isinstance(schema["type"], list) else [schema["type"]]
        if not any(_TYPES[t](value) for t in types):
            errors.append(f"{path}: expected {' or '.join(types)}, got {type(value).__name__}")
            return
    if "const" in schema and value != schema["const"]:
        errors.append(f"{path}: must be {schema['const']!r}, got {value!r}")
    if "enum" in schema and value not in schema["enum"]:
        errors.append(f"{path}: {value!r} is not one of {schema['enum']}")
    if "minimum" in schema and isinstance(value, (int, float)) and not isinstance(value, bool) \
            and value < schema["minimum"]:
        errors.append(f"{path}: {value} is below the minimum {schema['minimum']}")
    if "anyOf" in schema:
        if not any(not _collect(value, option, root, path) for option in schema["anyOf"]):
            errors.append(f"{path}: matches none of the allowed shapes")
    if isinstance(value, dict):
        for key in schema.get("required", ()):
            if key not in value:
                errors.append(f"{path}: missing required key {key!r}")
        properties = schema.get("properties", {})
        for key, item in value.items():
            if key in properties:
                _validate(item, properties[key], root, f"{path}/{key}", errors)
            elif schema.get("additionalProperties", True) is False:
                errors.append(f"{path}: unexpected key {key!r}")
            elif isinstance(schema.get("additionalProperties"), dict):
                _validate(item, schema["additionalProperties"], root, f"{path}/{key}", errors)
    if isinstance(value, list):
        if "minItems" in schema and len(value) < schema["minItems"]:
            errors.append(f"{path}: needs at least {schema['minItems']} item(s), got {len(value)}")
        if "items" in schema:
            items = schema["items"]
            if isinstance(items, dict) and items.keys() == {"type"}:  # a list of plain values: one loop, no paths
                types = items["type"] if isinstance(items["type"], list) else [items["type"]]
                tests = [_TYPES[t] for t in types]
                for i, item in enumerate(value):
                    if not any(test(item) for test in tests):
                        errors.append(f"{path}/{i}: expected {' or '.join(types)}, got {type(item).__name__}")
                return
            for i, item in enumerate(value):
                _validate(item, items, root, f"{path}/{i}", errors)


def _collect(value, schema, root, path):
    errors: list[str] = []
    _validate(value, schema, root, path, errors)
    return errors


def validate_document(document, schema=None) -> list[str]:
    """Problems of ``document`` against the shortlist schema (an empty list when it is valid).

    Parameters
    ----------
    document : dict
        A parsed JSON document.
    schema : dict, optional
        Defaults to :func:`load_schema`.

    Returns
    -------
    list of str
        One readable line per problem, each starting with the JSON path.
    """
    schema = load_schema() if schema is None else schema
    return _collect(document, schema, schema, "")


def check_document(document, schema=None) -> None:
    """Raise :class:`~selectkit.errors.InputError` listing the problems when ``document`` is invalid."""
    problems = validate_document(document, schema)
    if problems:
        shown = "; ".join(problems[:5])
        more = f" (and {len(problems) - 5} more)" if len(problems) > 5 else ""
        raise InputError(f"the shortlist document does not follow schema {SCHEMA_VERSION}: {shown}{more}")
