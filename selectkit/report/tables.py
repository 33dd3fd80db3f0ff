"""The shortlist as CSV and as a versioned JSON document, written atomically.

The JSON layout is described by ``schema.json`` beside this module (JSON
Schema draft 2020-12, ``schema_version`` 1.0).  :func:`validate_document`
checks a document against it without needing the ``jsonschema`` package: it
implements the keywords the schema uses (``type``, ``const``, ``enum``,
``required``, ``properties``, ``additionalProperties``, ``items``,
``minItems``, ``minimum``, ``anyOf`` and local ``$ref``).  The tests check that
it agrees with ``jsonschema``.
"""

from __future__ import annotations

import json
import math
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
    "shortlist_csv",
    "write_csv",
    "shortlist_document",
    "write_json",
    "load_schema",
    "validate_document",
    "check_document",
]

SCHEMA_VERSION = "1.0"

#: Columns of the CSV shortlist, in order.
CSV_COLUMNS = (
    "position", "terms", "n_terms", "k", "delta_from_best", "model_weight", "comparable_support",
    "rss", "log_likelihood", "aic", "aicc", "bic", "cp", "r2", "adj_r2",
    "press", "cv_mse", "cv_se", "holdout_mse", "found_by", "term_indices",
)

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


def shortlist_frame(shortlist) -> pd.DataFrame:
    """The shortlist's table with the CSV columns, in order."""
    table = shortlist.table
    return table[[c for c in CSV_COLUMNS if c in table.columns]].copy()


def shortlist_csv(shortlist) -> str:
    """The shortlist as CSV text (UTF-8, comma-separated, empty cells for missing values)."""
    return shortlist_frame(shortlist).to_csv(index=False, lineterminator="\n", float_format="%.10g")


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
             "passed": c.passed, "verdict": c.verdict, "reference": c.reference, "remedy": c.remedy}
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
                       stability=None, honest=None) -> dict:
    """The shortlist as a JSON-ready dict following ``schema.json`` (version 1.0).

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
    models = []
    for i, (_, row) in enumerate(shortlist.table.iterrows()):
        fit = shortlist.fits[i] if i < len(shortlist.fits) else None
        diagnosis = diagnoses[i] if i < len(diagnoses) else None
        models.append(_model_entry(row, fit, diagnosis))
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
            "convention": shortlist.convention,
            "weight_criterion": shortlist.weight_criterion,
            "cp_variance_source": shortlist.cp_variance_source,
            "models_pooled": int(len(shortlist.scored)),
        },
        "searches": [_search_entry(f) for f in founds],
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
            for i, item in enumerate(value):
                _validate(item, schema["items"], root, f"{path}/{i}", errors)


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
