"""Candidate terms: every allowed form of every predictor, grouped in families.

:func:`build_candidates` applies the catalogue of :mod:`selectkit.transforms`
to a checked :class:`~selectkit.data.Dataset` and returns a
:class:`CandidateSet`: the candidate matrix, the terms a search adds and drops,
the family of each (a model holds at most one form of a variable), the
hierarchy of interactions, and the forms that were not produced with the reason
why.  Every column is float64 and finite.

Examples
--------
>>> import numpy as np, pandas as pd
>>> from selectkit.data import Dataset
>>> rng = np.random.default_rng(0)
>>> frame = pd.DataFrame({"light": rng.uniform(5, 30, 40), "age": rng.integers(0, 5, 40).astype(float)})
>>> ds = Dataset(response="yield_kg_m2", y=10 + np.log(frame["light"].to_numpy()), frame=frame,
...              numeric=("light", "age"), categorical=())
>>> cands = build_candidates(ds, forms=("identity", "log", "sqrt"))
>>> [t.name for t in cands.terms]
['light', 'log(light)', 'sqrt(light)', 'age', 'sqrt(age)']
>>> cands.refused[0].reason.split(";")[0]
'6 of 40 values are zero'
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import transforms as tf
from ._vetting import _raw_columns, _set_aside_twins, _straight_families
from .settings import spell
from .errors import InputError, OptionError

__all__ = ["Term", "Refusal", "ResponseTransform", "CandidateSet", "build_candidates", "DEFAULT_FORMS"]

#: Forms built by default (Yeo-Johnson stands in for Box-Cox on a predictor with values ≤ 0).
#: Significance level of the test of power 1 below which a Box-Tidwell form is built.
_BOX_TIDWELL_LEVEL = 0.05

#: Largest leverage one row may take in the fit of a form alone; above it the form is ruled by that
#: row and is not built.  0.5 is the level at which Huber (1981, Robust Statistics, §7.9) calls a
#: point's leverage dangerous; for a form with a pole it is the row nearest zero.
_FORM_LEVERAGE_LIMIT = 0.5
#: A data-chosen power (Box-Cox λ̂, Yeo-Johnson λ̂, Box-Tidwell α̂) within this distance of the power of a
#: named form built in the same family is dropped as that form's twin (common practice: Box & Cox 1964
#: recommend a convenient value near λ̂; 0.1 is our choice of "near").
_TWIN_POWER_DISTANCE = 0.1

DEFAULT_FORMS = ("identity", "log", "sqrt", "reciprocal", "square", "boxcox", "boxtidwell")
#: Fractional-polynomial powers with a named form of their own.
_NAMED_POWERS = {1.0: "identity", 0.0: "log", 0.5: "sqrt", -1.0: "reciprocal", 2.0: "square"}
_POWER_OF_FORM = {form: power for power, form in _NAMED_POWERS.items()}


@dataclass(frozen=True)
class Term:
    """One candidate term: what a search adds to or drops from a model.

    Attributes
    ----------
    name : str
        Readable name in plain notation: ``x``, ``log(x)``, ``sqrt(x)``, ``1/x``,
        ``x^2``, ``x^-0.5``, ``boxcox(x, 0.37)``, ``log(x + 1)``, ``x*z``; a
        categorical block is named after its column (``cultivar``).
    family : str
        The source variable; a model holds at most one term of each family.
        For a categorical block its column; for an interaction ``x*z``.
    kind : str
        ``"numeric"``, ``"block"`` (dummy columns of a categorical) or ``"interaction"``.
    transform : str
        ``identity, log, sqrt, reciprocal, square, power, boxcox, boxtidwell,
        yeojohnson, dummies, product``.
    source : tuple of str
        Source column(s).
    params : tuple of (str, float) pairs
        Parameters of the transform (``lambda``, ``power``, ``shift``...).
    columns : tuple of int
        Indices of this term's columns in ``CandidateSet.matrix`` (several for a block).
    requires : tuple of str
        Families that must also be in any model holding this term (hierarchy).
    forced : bool
        Whether every model must hold this term's family.
    levels : tuple
        For a block: the levels whose dummy columns the term holds, in column order.
    reference : object
        For a block: the reference level (no column of its own).
    """

    name: str
    family: str
    kind: str
    transform: str
    source: tuple[str, ...]
    params: tuple[tuple[str, float], ...]
    columns: tuple[int, ...]
    requires: tuple[str, ...] = ()
    forced: bool = False
    levels: tuple = ()
    reference: object = None

    @property
    def width(self) -> int:
        """Number of columns (regression coefficients) the term adds."""
        return len(self.columns)

    def expression(self) -> str:
        """The term as an expression of the original variables (for an equation)."""
        if self.kind == "block":
            return " + ".join(f"[{self.family} = {level}]" for level in self.levels)
        return tf.term_expression(self.transform, self.source, self.params)


@dataclass(frozen=True)
class Refusal:
    """A form that was not produced, and why (domain, near-duplicate...).

    Attributes
    ----------
    family : str
    form : str
        The kind of form (``log``, ``boxcox``...).
    reason : str
        A sentence naming the count and the fix.
    name : str
        The readable name the term would have had, when known.
    """

    family: str
    form: str
    reason: str
    name: str = ""


@dataclass(frozen=True)
class ResponseTransform:
    """The transform applied to the response and its log-Jacobian Σ log|dz/dy|."""

    name: str  # readable, e.g. "log(yield)" or "boxcox(yield, 0.5)"
    transform: str  # "identity", "log", "boxcox", ...
    params: tuple[tuple[str, float], ...]
    log_jacobian: float


@dataclass(frozen=True, eq=False)
class CandidateSet:
    """The candidate matrix, its terms and their provenance.

    Attributes
    ----------
    matrix : ndarray, shape (n, m)
        Every candidate column, float64, finite.
    column_names : tuple of str, length m
    terms : tuple of Term
        The search's units; term ``i``'s columns are ``terms[i].columns``.
    y : ndarray, shape (n,)
        The response on the scale the search uses (after any response transform).
    response : str
    weights : ndarray or None
    response_transform : ResponseTransform
    refused : tuple of Refusal
    notes : tuple of str
    dataset : Dataset
        The intake result the candidates were built from.
    y_original : ndarray or None
        The response on its original scale (to apply another response transform).
    parts : selectkit.parts.PartsInfo or None
        For a table read in parts: the rows here are the checks' sample, and
        this holds the fold moments and how to reread the parts.
    """

    matrix: np.ndarray
    column_names: tuple[str, ...]
    terms: tuple[Term, ...]
    y: np.ndarray
    response: str
    weights: np.ndarray | None
    response_transform: ResponseTransform
    refused: tuple[Refusal, ...] = ()
    notes: tuple[str, ...] = ()
    dataset: object = None
    y_original: np.ndarray | None = None
    parts: object = None

    # ------------------------------------------------------------ structure

    @property
    def families(self) -> tuple[str, ...]:
        """Family names in the order of their first term."""
        return tuple(dict.fromkeys(t.family for t in self.terms))

    @property
    def family_index(self) -> np.ndarray:
        """For each term, the index of its family in :attr:`families` (int array)."""
        position = {f: i for i, f in enumerate(self.families)}
        return np.array([position[t.family] for t in self.terms], dtype=np.int64)

    @property
    def names(self) -> tuple[str, ...]:
        """Readable names of the terms, in order."""
        return tuple(t.name for t in self.terms)

    def powers_from_response(self, subset) -> int:
        """Parameters of a model's forms that were estimated from the response.

        A Box-Tidwell power is fitted to y, so a model holding ``x^α̂`` has
        spent one more degree of freedom than its coefficients show; the
        ranker adds these to k in every criterion, as fractional-polynomial
        selection counts each estimated power (Royston & Altman 1994).
        Box-Cox and Yeo-Johnson powers of a predictor come from the
        predictor's own distribution and cost nothing here.
        """
        return sum(1 for j in subset if self.terms[j].transform == "boxtidwell")

    def term_index(self, name: str) -> int:
        """Index of the term with this readable name.

        Raises
        ------
        OptionError
            When no term has that name (the message lists the names).
        """
        for i, t in enumerate(self.terms):
            if t.name == name:
                return i
        shown = ", ".join(repr(t.name) for t in self.terms[:30])
        more = f" and {len(self.terms) - 30} more" if len(self.terms) > 30 else ""
        raise OptionError(f"no candidate term is named {name!r}; the terms are {shown}{more}")

    # ------------------------------------------------------------ new data

    def transform(self, frame) -> np.ndarray:
        """Re-apply every stored form, with its stored parameters, to new data.

        Box-Cox λ, Box-Tidwell powers, shifts and categorical levels are those
        estimated when the candidates were built; nothing is re-estimated.
        Applied to the data the candidates were built from it reproduces
        :attr:`matrix` exactly.

        Parameters
        ----------
        frame : pandas.DataFrame
            Must hold every source column.

        Returns
        -------
        ndarray, shape (len(frame), m)

        Raises
        ------
        InputError
            A source column is missing, holds missing or non-numeric values, a
            categorical value is a level not seen when the candidates were built,
            or a value lies outside a form's domain (log of a zero...).
        """
        return self._transform(frame, range(len(self.terms)))

    def _transform(self, frame, which) -> np.ndarray:
        """:meth:`transform` of the terms ``which`` only (the other columns are zeros)."""
        if not isinstance(frame, pd.DataFrame):
            raise InputError(f"transform needs a pandas DataFrame, got {type(frame).__name__}")
        terms = [self.terms[i] for i in which]
        needed = list(dict.fromkeys(s for t in terms for s in t.source))
        missing = [c for c in needed if c not in frame.columns]
        if missing:
            raise InputError(
                f"the new data lack {len(missing)} column(s) the candidates use: "
                + ", ".join(repr(c) for c in missing) + "; add them to the table",
                column=missing[0],
            )
        n = len(frame)
        out = (np.empty if len(terms) == len(self.terms) else np.zeros)((n, len(self.column_names)), dtype=np.float64)
        numeric_cache: dict[str, np.ndarray] = {}
        for term in terms:
            if term.kind == "block":
                out[:, list(term.columns)] = _dummies_for_new_data(frame[term.family], term)
                continue
            values = [_numeric_for_new_data(frame, c, numeric_cache) for c in term.source]
            column = _term_values(term, values, new_data=True)
            out[:, list(term.columns)] = column.reshape(n, len(term.columns))
        return out

    # ------------------------------------------------------------ response

    def with_response(self, response_transform) -> "CandidateSet":
        """A copy whose response is transformed anew from the original scale.

        Parameters
        ----------
        response_transform : None, "identity", "log", "sqrt" or ("boxcox", λ)

        Notes
        -----
        The predictor forms are kept as they are; Box-Tidwell powers estimated
        against the former response scale are not re-estimated (build the
        candidates again for that).
        """
        y0 = self.y_original
        if y0 is None and self.dataset is not None:
            y0 = getattr(self.dataset, "y", None)
        if y0 is None:
            raise InputError("these candidates do not keep the original response; build them from a Dataset")
        y, rt = _transform_response(np.asarray(y0, dtype=float), self.response, response_transform)
        return dataclasses.replace(self, y=y, response_transform=rt, y_original=y0)

    # ------------------------------------------------------------ report

    def describe(self) -> pd.DataFrame:
        """The candidate report: one row per term, then one per refused form.

        Columns: ``term`` (readable name), ``family``, ``form``, ``parameters``
        (e.g. ``lambda=0.3712, shift=1``), ``columns`` (coefficients the term
        adds), ``requires`` (families it needs), ``forced``, ``status``
        (``"kept"`` or ``"refused"``) and ``reason`` (why refused; empty when kept).
        """
        rows = []
        for t in self.terms:
            rows.append({
                "term": t.name,
                "family": t.family,
                "form": t.transform,
                "parameters": ", ".join(f"{k}={_parameter_text(v)}" for k, v in t.params),
                "columns": t.width,
                "requires": ", ".join(t.requires),
                "forced": bool(t.forced),
                "status": "kept",
                "reason": "",
            })
        for r in self.refused:
            rows.append({
                "term": r.name,
                "family": r.family,
                "form": r.form,
                "parameters": "",
                "columns": 0,
                "requires": "",
                "forced": False,
                "status": "refused",
                "reason": r.reason,
            })
        columns = ["term", "family", "form", "parameters", "columns", "requires", "forced", "status", "reason"]
        return pd.DataFrame(rows, columns=columns)


# =================================================================== helpers


def _numeric_for_new_data(frame, column, cache):
    if column in cache:
        return cache[column]
    series = frame[column]
    try:
        values = pd.to_numeric(series, errors="raise").to_numpy(dtype=np.float64, na_value=np.nan)
    except (ValueError, TypeError) as err:
        raise InputError(
            f"column {column!r} of the new data holds values that are not numbers; "
            "fix them or convert the column to numbers",
            column=column,
        ) from err
    bad = int(np.count_nonzero(~np.isfinite(values)))
    if bad:
        raise InputError(
            f"column {column!r} of the new data has {bad} of {len(values)} values missing or infinite; "
            "fill or drop those rows first",
            column=column,
        )
    cache[column] = values
    return values


def _dummies_for_new_data(series, term):
    values = series.astype(object).to_numpy()
    known = {term.reference, *term.levels}
    missing = pd.isna(values)
    if missing.any():
        raise InputError(
            f"column {term.family!r} of the new data has {int(missing.sum())} of {len(values)} values missing; "
            "fill or drop those rows first",
            column=term.family,
        )
    unseen = [v for v in dict.fromkeys(values.tolist()) if v not in known]
    if unseen:
        raise InputError(
            f"column {term.family!r} of the new data holds level(s) "
            + ", ".join(repr(v) for v in unseen)
            + " not seen when the candidates were built (known: "
            + ", ".join(repr(v) for v in [term.reference, *term.levels])
            + "); drop those rows or rebuild the candidates with them",
            column=term.family,
        )
    return np.column_stack([(values == level).astype(np.float64) for level in term.levels]) if term.levels else (
        np.empty((len(values), 0))
    )


def _parameter_text(value) -> str:
    """A term parameter as the candidate table shows it: a number, or a spline's knots in brackets."""
    if isinstance(value, (tuple, list)):
        return "[" + " ".join(tf.format_number(v) for v in value) + "]"
    return tf.format_number(value)


def _term_values(term, values, *, new_data=False):
    """The column(s) of a term from its source values (the one code path): one, or a spline's block."""
    if term.transform == "product":
        with np.errstate(over="ignore", invalid="ignore"):
            column = values[0] * values[1]
    else:
        if new_data:
            problem = tf.domain_problem(term.transform, values[0], term.params, column=term.source[0])
            if problem:
                raise InputError(
                    f"column {term.source[0]!r} of the new data: {problem} (term {term.name})",
                    column=term.source[0],
                )
        column = tf.apply(term.transform, values[0], term.params)
    if new_data:
        bad = int(np.count_nonzero(~np.isfinite(column)))
        if bad:
            raise InputError(
                f"term {term.name} gives {bad} non-finite values on the new data (overflow); "
                f"check column {term.source[0]!r}",
                column=term.source[0],
            )
    return column


def _parse_response_transform(option):
    """(transform, lam) from None, a name, a (name, λ) pair or a ResponseTransform."""
    if option is None:
        return "identity", None
    if isinstance(option, ResponseTransform):
        return option.transform, dict(option.params).get("lambda")
    if isinstance(option, str):
        key = option.lower()
        if key == "boxcox":
            raise OptionError(
                "response_transform='boxcox' needs a λ: pass ('boxcox', 0.5), or estimate one with "
                "selectkit.response.boxcox_response(y, X)"
            )
        if key not in tf.RESPONSE_TRANSFORMS:
            raise OptionError(
                f"unknown response_transform {option!r}; choose one of None, 'identity', 'log', 'sqrt' "
                "or ('boxcox', λ)"
            )
        return key, None
    if isinstance(option, (tuple, list)) and len(option) == 2 and str(option[0]).lower() == "boxcox":
        try:
            lam = float(option[1])
        except (TypeError, ValueError) as err:
            raise OptionError(f"the Box-Cox λ of response_transform must be a number, got {option[1]!r}") from err
        if not np.isfinite(lam):
            raise OptionError(f"the Box-Cox λ of response_transform must be finite, got {lam}")
        return "boxcox", lam
    raise OptionError(
        f"unknown response_transform {option!r}; choose one of None, 'identity', 'log', 'sqrt' or ('boxcox', λ)"
    )


def _transform_response(y, response, option):
    transform, lam = _parse_response_transform(option)
    if transform != "identity":
        bad = int(np.count_nonzero(y <= 0))
        if bad:
            raise InputError(
                f"response {response!r} has {bad} of {len(y)} values ≤ 0 (smallest {tf.format_number(y.min())}); "
                f"the {transform} transform of the response needs positive values — keep the response "
                "untransformed (response_transform=None) or use a positive response",
                column=response,
            )
    z = tf.transform_response(y, transform, lam)
    params = (("lambda", float(lam)),) if transform == "boxcox" else ()
    if transform == "identity":
        name = response
    elif transform == "boxcox":
        name = f"boxcox({response}, {tf.format_number(lam)})"
    else:
        name = f"{transform}({response})"
    jac = float(tf.response_log_jacobian(y, transform, lam))
    return z, ResponseTransform(name=name, transform=transform, params=params, log_jacobian=jac)


def _check_forms(forms):
    if isinstance(forms, str):
        forms = (forms,)
    forms = tuple(forms)
    unknown = [f for f in forms if f not in tf.FORMS]
    if unknown:
        raise OptionError(
            f"unknown form(s) {', '.join(repr(f) for f in unknown)}; choose among {', '.join(tf.FORMS)}"
        )
    return forms


def _family_plan(forms, fractional_polynomials):
    """Ordered list of (form, power) pairs built for each numeric family; identity first."""
    plan = []
    if "identity" in forms or fractional_polynomials:
        plan.append(("identity", None))
    named = [f for f in forms if f != "identity"]
    if fractional_polynomials:
        for q in tf.FRACTIONAL_POWERS:
            name = _NAMED_POWERS.get(q)
            if name is not None and name not in named and name != "identity":
                named.append(name)
    for f in dict.fromkeys(named):
        plan.append((f, None))
    if fractional_polynomials:
        for q in tf.FRACTIONAL_POWERS:
            if q not in _NAMED_POWERS:
                plan.append(("power", q))
    return plan


def _auto_shift(x):
    """The smallest c ≥ 0 making every x + c ≥ 1: c = max(0, 1 − min x)."""
    return max(0.0, 1.0 - float(np.min(x)))


def _resolve_shifts(shifts, dataset):
    if shifts is None:
        return {}
    if not isinstance(shifts, dict):
        raise OptionError(f"shifts must be a dict {{column: number or 'auto'}}, got {type(shifts).__name__}")
    out = {}
    for col, value in shifts.items():
        if col not in dataset.numeric:
            raise OptionError(
                f"shifts names {col!r}, which is not a numeric predictor; numeric predictors are "
                + ", ".join(repr(c) for c in dataset.numeric)
            )
        x = dataset.frame[col].to_numpy(dtype=np.float64)
        if isinstance(value, str):
            if value != "auto":
                raise OptionError(f"the shift of {col!r} must be a number or 'auto', got {value!r}")
            out[col] = (_auto_shift(x), True)
        else:
            try:
                c = float(value)
            except (TypeError, ValueError) as err:
                raise OptionError(f"the shift of {col!r} must be a number or 'auto', got {value!r}") from err
            if not np.isfinite(c):
                raise OptionError(f"the shift of {col!r} must be finite, got {value!r}")
            out[col] = (c, False)
    return out


def _check_interactions(interactions, dataset):
    numeric = list(dataset.numeric)
    if interactions is None or interactions is False:
        return []
    if interactions is True:
        pairs = []
        for i, a in enumerate(numeric):
            for b in numeric[i + 1:]:
                pairs.append(tuple(sorted((a, b))))  # sorted names: independent of column order
        return pairs
    pairs = []
    for pair in interactions:
        if isinstance(pair, str) or len(pair) != 2:
            raise OptionError(f"each interaction is a pair of column names (a, b); got {pair!r}")
        a, b = pair
        for c in (a, b):
            if c not in numeric:
                raise OptionError(
                    f"interaction {a!r}*{b!r}: {c!r} is not a numeric predictor; numeric predictors are "
                    + ", ".join(repr(v) for v in numeric)
                )
        if a == b:
            raise OptionError(f"interaction {a!r}*{b!r} pairs a column with itself; the square form covers x^2")
        if (a, b) not in pairs and (b, a) not in pairs:
            pairs.append((a, b))
    return pairs


def _check_rows(n_rows, n_columns):
    try:
        from .data import check_enough_rows
    except ImportError:  # pragma: no cover - data.py provides it
        check_enough_rows = None
    what = "the widest candidate model (one form per family)"
    if check_enough_rows is not None:
        check_enough_rows(n_rows, n_columns, what=what)
        return
    if n_rows < n_columns + 2:  # pragma: no cover
        raise InputError(
            f"{n_rows} rows but {n_columns} candidate columns (+1 intercept) in {what}; "
            "need more rows or fewer forms"
        )


class _Builder:
    """Accumulates columns, terms, refusals and notes in order."""

    def __init__(self, n):
        self.n = n
        self.columns: list[np.ndarray] = []
        self.column_names: list[str] = []
        self.terms: list[Term] = []
        self.refused: list[Refusal] = []
        self.notes: list[str] = []
        self.names: set[str] = set()

    def add(self, *, name, family, kind, transform, source, params, values, requires=(), forced=False,
            levels=(), reference=None, column_names=None):
        start = len(self.columns)
        values = np.asarray(values, dtype=np.float64)
        if values.ndim == 1:
            values = values[:, None]
        for j in range(values.shape[1]):
            self.columns.append(np.ascontiguousarray(values[:, j]))
        self.column_names.extend(column_names or [name])
        term = Term(name=name, family=family, kind=kind, transform=transform, source=tuple(source),
                    params=tuple(params), columns=tuple(range(start, len(self.columns))),
                    requires=tuple(requires), forced=bool(forced), levels=tuple(levels), reference=reference)
        self.terms.append(term)
        self.names.add(name)
        return term

    def refuse(self, family, form, reason, name=""):
        self.refused.append(Refusal(family=family, form=form, reason=reason, name=name))

    def drop_families(self, families):
        """Remove every term of these families, renumbering the columns of the rest."""
        terms, columns, names = [], [], []
        for term in self.terms:
            if term.family in families:
                self.names.discard(term.name)
                continue
            start = len(columns)
            columns.extend(self.columns[c] for c in term.columns)
            names.extend(self.column_names[c] for c in term.columns)
            terms.append(dataclasses.replace(term, columns=tuple(range(start, len(columns)))))
        self.terms, self.columns, self.column_names = terms, columns, names


def _check_column(values, name):
    """Why a computed column cannot be a candidate (non-finite, constant), or None."""
    n = values.shape[0]
    bad = int(np.count_nonzero(~np.isfinite(values)))
    if bad:
        return f"{bad} of {n} values of {name} are not finite (overflow or underflow)"
    if n == 0 or np.ptp(values) == 0:
        return f"{name} is constant on these data"
    spread = float(np.max(np.abs(values - values.mean())))
    if not 1e-150 < spread < 1e150:
        return (f"{name} spreads {spread:.3g} about its mean, beyond what sums of squares can hold in double "
                "precision; rescale the column or leave the form out")
    return None


def _correlation(a, b):
    """Pearson correlation of two finite, non-constant columns (scaled first: no overflow)."""
    a = a - a.mean()
    b = b - b.mean()
    a = a / np.max(np.abs(a))
    b = b / np.max(np.abs(b))
    denom = np.sqrt(a @ a) * np.sqrt(b @ b)
    return float(a @ b / denom) if denom > 0 else 0.0


def _numeric_family(builder, col, x, y, weights, plan, shift_info, forced, near_duplicate, yeojohnson_asked,
                    covariates=None, straight=None):
    """Build every form of one numeric predictor.

    ``covariates`` are held linear in Box-Tidwell; ``straight``, when given, is
    why the curvature gate offers the raw form only: every other form that is
    defined on the data is refused with it (one undefined there keeps its
    domain reason).
    """
    c, auto = shift_info if shift_info is not None else (0.0, False)
    if x.shape[0] == 0 or np.ptp(x) == 0:
        builder.refuse(col, "every form", f"{col} is constant on these data; no form of it can enter a model",
                       name=col)
        return
    if shift_info is not None:
        how = "auto: the smallest shift making every value at least 1" if auto else "as asked"
        builder.notes.append(f"{col}: forms needing positive values use {col} + {tf.format_number(c)} ({how})")
    shift_params = (("shift", c),) if c != 0 else ()
    kept: list[tuple[str, np.ndarray]] = []
    named_kept: list[tuple[str, str]] = []  # (name, form) of the named forms built, for twins of data-chosen powers
    for form, q in plan:
        if form == "identity":
            transform, params = "identity", ()
        elif form == "square":
            transform, params = "square", ()
        elif form == "power":
            transform, params = "power", (("power", q),) + shift_params
        elif form in ("log", "sqrt", "reciprocal"):
            transform, params = form, shift_params
        elif form == "boxcox":
            if np.min(x + c) > 0:
                transform = "boxcox"
            elif yeojohnson_asked:
                builder.notes.append(
                    f"{col}: Box-Cox not built ({_count_nonpositive(x + c, c)}); the Yeo-Johnson form covers it"
                )
                continue
            else:
                transform = "yeojohnson"
                builder.notes.append(
                    f"{col}: Yeo-Johnson used in place of Box-Cox ({_count_nonpositive(x + c, c)})"
                )
            params = None
        elif form == "yeojohnson":
            transform, params = "yeojohnson", None
        elif form == "boxtidwell":
            transform, params = "boxtidwell", None
        elif form in tf.SPLINE_FORMS:
            transform = "spline"
            knots = tf.spline_knots(x, tf.SPLINE_FORMS[form])
            label = f"spline({col}, {tf.SPLINE_FORMS[form]} knots)"
            if knots is None:
                builder.refuse(col, form, f"{col} has too few distinct values for {tf.SPLINE_FORMS[form]} distinct "
                                          "knots at the usual quantiles; no spline built", name=label)
                continue
            if x.shape[0] < 10 * tf.SPLINE_FORMS[form]:
                builder.refuse(col, form, f"{x.shape[0]} rows are too few for a {tf.SPLINE_FORMS[form]}-knot "
                                          f"spline (common practice asks about 10 rows per knot)", name=label)
                continue
            params = (("knots", knots),)
        else:  # pragma: no cover - forms are checked before
            raise OptionError(f"unknown form {form!r}")

        probe = params if params is not None else shift_params
        problem = tf.domain_problem(transform, x, probe, column=col)
        if problem:
            label = _would_be_name(transform, col, q, shift_params)
            builder.refuse(col, form, _with_fix(problem, col, x, c, transform, q), name=label)
            continue
        # A spline is not gated: the gate's probe (x·log x or x²) sees a bend of one sign, not an S or a
        # levelling off, and every one of the spline's k − 1 columns is charged by the criteria anyway.
        if straight is not None and transform not in ("identity", "spline"):
            label = (f"{transform}({col})" if transform in ("boxcox", "yeojohnson")
                     else tf.term_name("spline", col, params) if transform == "spline"
                     else _would_be_name(transform, col, q, shift_params))
            builder.refuse(col, form, straight, name=label)
            continue

        if transform == "boxcox":
            lam = tf.boxcox_lambda(x + c)
            if not np.isfinite(lam) or abs(lam) >= 5.0 - 1e-6:
                builder.refuse(col, form, f"the Box-Cox λ̂ of {col} lies at the edge of the search range ±5 "
                                          "(extreme); no Box-Cox form built", name=f"boxcox({col})")
                continue
            twin = _twin_of_named(lam, named_kept)
            if twin is not None:
                builder.refuse(col, form, f"the Box-Cox λ̂ of {col} is {lam:.3g}, within {_TWIN_POWER_DISTANCE} "
                                          f"of {_POWER_OF_FORM[twin[1]]:g}, the power of {twin[0]}: a twin of "
                                          "that simpler form, which is kept", name=f"boxcox({col})")
                continue
            params = (("lambda", lam),) + shift_params
        elif transform == "yeojohnson":
            lam = tf.yeojohnson_lambda(x)
            if not np.isfinite(lam) or abs(lam) >= 5.0 - 1e-6:
                builder.refuse(col, form, f"the Yeo-Johnson λ̂ of {col} lies at the edge of the search range "
                                          "±5 (extreme); no Yeo-Johnson form built", name=f"yeojohnson({col})")
                continue
            # Yeo-Johnson at λ = 1 is the identity; at other named powers it differs from the named form.
            twin = _twin_of_named(lam, [(n_, f_) for n_, f_ in named_kept if f_ == "identity"])
            if twin is not None:
                builder.refuse(col, form, f"the Yeo-Johnson λ̂ of {col} is {lam:.3g}, within "
                                          f"{_TWIN_POWER_DISTANCE} of 1: a twin of {twin[0]}, which is kept",
                               name=f"yeojohnson({col})")
                continue
            params = (("lambda", lam),)
        elif transform == "boxtidwell":
            result = tf.box_tidwell(x + c, y, weights=weights, covariates=covariates)
            if result.power is None:
                builder.refuse(col, form, f"no Box-Tidwell power for {col}: {result.reason}",
                               name=f"{col}^α (Box-Tidwell)")
                continue
            twin = _twin_of_named(result.power, named_kept)
            if twin is not None or round(result.power, 2) == 0:
                simpler = (f"{_POWER_OF_FORM[twin[1]]:g}, the power of {twin[0]}" if twin is not None
                           else "0, the power of the log form")
                builder.refuse(col, "boxtidwell", f"the Box-Tidwell power of {col} is {result.power:.3g}, within "
                                                  f"{_TWIN_POWER_DISTANCE} of {simpler}: a twin of that simpler "
                                                  "form", name=f"{col}^α (Box-Tidwell)")
                continue
            if not result.pvalue < _BOX_TIDWELL_LEVEL:
                # No evidence of curvature: the power is noise fitted to y, and a form chosen from the
                # response would look better than its one coefficient suggests. The raw form covers it.
                builder.refuse(col, "boxtidwell",
                               f"the Box-Tidwell power of {col} ({result.power:.2g}) is not distinguishable from "
                               f"1 (test of power 1: p = {result.pvalue:.2g} ≥ {_BOX_TIDWELL_LEVEL}); the raw "
                               "form covers it", name=f"{col}^α (Box-Tidwell)")
                continue
            params = (("power", result.power),) + shift_params
            held = "" if covariates is None else ", the other predictors held linear"
            builder.notes.append(
                f"{col}: Box-Tidwell power {result.power:.4g}{held}; test of power 1 (x·log x added): "
                f"t = {result.statistic:.3g}, p = {result.pvalue:.3g}"
            )

        name = tf.term_name(transform, col, params)
        values = tf.apply(transform, x, params)
        if transform == "spline":  # one block of k − 1 columns, entering and leaving the models as one term
            builder.add(name=name, family=col, kind="numeric", transform=transform, source=(col,),
                        params=params, values=values, forced=forced,
                        column_names=[f"{name} [linear]"] + [f"{name} [bend {j}]" for j in
                                                             range(1, values.shape[1])])
            continue
        problem = _check_column(values, name)
        if problem is None and name in builder.names:
            problem = f"{name} is already a candidate under the same name"
        if problem is None and near_duplicate is not None:
            for other_name, other in kept:
                r = _correlation(values, other)
                if abs(r) > near_duplicate:
                    problem = (f"{name} is a near-duplicate of {other_name} (|r| = {abs(r):.6f} > "
                               f"near_duplicate = {near_duplicate:g}); kept {other_name}")
                    break
        if problem is None:
            problem = _ruled_by_one_row(name, transform, params, values, x, col)
        if problem:
            builder.refuse(col, transform, problem, name=name)
            continue
        builder.add(name=name, family=col, kind="numeric", transform=transform, source=(col,), params=params,
                    values=values, forced=forced)
        kept.append((name, values))
        if form in _POWER_OF_FORM and (form != "square" or not shift_params):  # x^2 takes no shift
            named_kept.append((name, form))
    if not kept:
        raw_reason = [r.reason for r in builder.refused if r.family == col and r.form == "identity"]
        builder.refuse(col, "every form", f"no form of {col} could be built"
                       + (f" (its raw form: {raw_reason[0]})" if raw_reason else ""), name=col)


def _largest_leverage(values):
    """(largest hᵢᵢ, its row) of the fit of one column with an intercept.

    hᵢᵢ = 1/n + (zᵢ − z̄)²/Σ(zⱼ − z̄)² (Hoaglin & Welsch 1978), scaled first so
    that a huge column does not overflow.
    """
    z = values - values.mean()
    scale = np.max(np.abs(z))
    if not scale > 0:
        return 0.0, 0
    z = z / scale
    ss = float(z @ z)
    row = int(np.argmax(np.abs(z)))
    return 1.0 / values.shape[0] + float(z[row] ** 2) / ss, row


def _ruled_by_one_row(name, transform, params, values, x, col):
    """Why a transformed column is ruled by a single row, or None (see ``_FORM_LEVERAGE_LIMIT``)."""
    if transform == "identity":
        return None
    leverage, row = _largest_leverage(values)
    if leverage <= _FORM_LEVERAGE_LIMIT:
        return None
    why = "its pole at zero" if tf.has_pole(transform, params) else "its curvature"
    return (f"{name} puts a leverage of {leverage:.2f} on one row (data row {row + 1}, {col} = "
            f"{tf.format_number(float(x[row]), 4)}) in a fit of it alone, above {_FORM_LEVERAGE_LIMIT} "
            f"(Huber 1981): {why} stretches that row away from the others; the form is not built")


def _twin_of_named(power, kept_forms):
    """The named form built in this family whose power lies within ``_TWIN_POWER_DISTANCE``, or None."""
    best = None
    for name, form in kept_forms:
        q = _POWER_OF_FORM.get(form)
        if q is not None and abs(power - q) <= _TWIN_POWER_DISTANCE:
            if best is None or abs(power - q) < abs(power - _POWER_OF_FORM[best[1]]):
                best = (name, form)
    return best


def _count_nonpositive(v, c):
    n = v.shape[0]
    bad = int(np.count_nonzero(v <= 0))
    after = f" after the shift {tf.format_number(c)}" if c else ""
    return f"{bad} of {n} values are ≤ 0{after}"


def _would_be_name(transform, col, q, shift_params):
    if transform == "boxcox":
        return f"boxcox({col})"
    if transform == "boxtidwell":
        return f"{col}^α (Box-Tidwell)"
    if transform == "power":
        return tf.term_name("power", col, (("power", q),) + shift_params)
    return tf.term_name(transform, col, shift_params)


def _as_number(text):
    try:
        return float(text)
    except ValueError:
        return text


def _with_fix(problem, col, x, c, transform, q):
    suggestion = tf.format_number(_auto_shift(x))
    if transform == "power":
        target = tf.term_name("power", col, (("power", q), ("shift", _auto_shift(x))))
    elif transform == "boxtidwell":
        target = f"a Box-Tidwell power of {col} + {suggestion}"
    else:
        target = tf.term_name(transform, col, (("shift", _auto_shift(x)),))
    how = f"give a shift ({spell('shifts', {col: _as_number(suggestion)})}) to use {target}, or leave the form out"
    if c:
        return f"{problem} — the shift {tf.format_number(c)} is too small; {how}"
    return f"{problem} — {how}"


def _categorical_family(builder, col, series, forced):
    cat = pd.Categorical(series)
    codes = cat.codes
    categories = list(cat.categories)
    counts = np.bincount(codes[codes >= 0], minlength=len(categories))
    observed = [lev for lev, k in zip(categories, counts) if k > 0]
    unused = [lev for lev, k in zip(categories, counts) if k == 0]
    if unused:
        builder.notes.append(
            f"{col}: level(s) {', '.join(repr(v) for v in unused)} do not occur in the data; no column for them"
        )
    if len(observed) < 2:
        only = repr(observed[0]) if observed else "none"
        builder.refuse(col, "dummies", f"{col} has a single level present ({only}); a block needs two", name=col)
        return
    reference = observed[0]
    if categories and reference != categories[0]:
        builder.notes.append(f"{col}: reference level {categories[0]!r} does not occur; {reference!r} used instead")
    levels = observed[1:]
    values = np.column_stack([(codes == categories.index(lev)).astype(np.float64) for lev in levels])
    builder.add(name=col, family=col, kind="block", transform="dummies", source=(col,), params=(),
                values=values, forced=forced, levels=levels, reference=reference,
                column_names=[f"{col}[{lev}]" for lev in levels])


def build_candidates(
    dataset,
    *,
    forms=DEFAULT_FORMS,
    fractional_polynomials=False,
    shifts=None,
    interactions=False,
    near_duplicate=0.9999,
    twin_limit=0.999,
    vif_limit=1000.0,
    prefer=(),
    response_transform=None,
    box_tidwell_adjust=False,
    curvature_test=True,
    rows_represented=None,
) -> CandidateSet:
    """Build every candidate form of every predictor of a dataset.

    Each numeric predictor becomes a **family** of forms (a model holds at most
    one of them); each categorical predictor one **block** term whose columns
    are the dummies (0/1) of its non-reference levels, named ``col[level]``;
    each interaction a term ``a*b`` (raw product) that requires the families
    ``a`` and ``b`` (hierarchy).

    Parameters
    ----------
    dataset : Dataset
        From :func:`selectkit.data.prepare`.
    forms : sequence of str
        Among ``identity, log, sqrt, reciprocal, square, boxcox, yeojohnson,
        boxtidwell``.  Identity, when asked, always comes first in its family.
        ``boxcox`` gives Box-Cox with λ̂ by maximum likelihood of the predictor's
        own distribution (:func:`selectkit.transforms.boxcox_lambda`) when every
        value (after any shift) is positive, and Yeo-Johnson otherwise.
        ``boxtidwell`` gives x^α̂ with α̂ the power that best linearises the
        response on x (:func:`selectkit.transforms.box_tidwell`); it is refused
        when the iteration fails, when |α̂| > 3, and when the test of power 1
        (the t-test of x·log x added to the fit, Box & Tidwell 1962) gives
        p ≥ 0.05: without evidence of curvature the power is fitted noise, and
        a form chosen from the response would look better than its one
        coefficient suggests (the 0.05 level is common practice).
    fractional_polynomials : bool, default False
        Add the eight powers {−2, −1, −0.5, 0, 0.5, 1, 2, 3} of Royston & Altman
        (1994); powers with a name of their own appear under it (x^0 is log(x),
        x^0.5 sqrt(x), x^-1 1/x, x^1 x, x^2 x^2).  Since a model holds one form
        per family, these are first-degree fractional polynomials; pairs of
        powers (degree two) are not built.
    shifts : dict, optional
        ``{column: c}`` or ``{column: "auto"}``: forms that need positive (or
        non-negative, non-zero) values — log, sqrt, reciprocal, negative and
        fractional powers, Box-Cox, Box-Tidwell — use x + c, and c appears in the
        term's ``params`` and name (``log(x + 1)``).  ``"auto"`` is the smallest
        c ≥ 0 that makes every value at least 1, c = max(0, 1 − min x).  No
        shift is ever applied unless asked.
    interactions : bool or sequence of (a, b), default False
        ``True`` for every pair of numeric predictors (named with the two
        columns in alphabetical order), or a list of pairs.
    near_duplicate : float or None, default 0.9999
        A form whose (unweighted Pearson) correlation with an earlier kept form
        of the same family exceeds this in absolute value is dropped and
        reported, naming both; None keeps all.  Threshold: common practice, no
        single source.
    twin_limit : float or None, default 0.999
        Two numeric variables whose raw values have a Spearman correlation of
        at least 0.99 and whose best-matching pair of forms has a Pearson
        |r| of at least this are near-duplicates (the same quantity in other
        units, a sensor and its copy): one is kept — a forced one, then one
        named in ``prefer``, then the one with more usable forms, then the
        name that sorts first (so the choice never depends on the order of
        the columns) — and the other is
        set aside before the search, with its reason in :attr:`CandidateSet.refused`
        and one note naming both.  None keeps both.  Common practice, no
        single source.
    vif_limit : float or None, default 1000
        Then, while the largest variance inflation factor VIFⱼ = (R⁻¹)ⱼⱼ of the
        raw numeric columns (R their correlation matrix; Marquardt 1970) is at
        least this, the variable with that VIF is set aside (never a forced
        one, a preferred one only last), naming the group it is nearly a linear
        combination of (the eigenvector of R's smallest eigenvalue, Belsley,
        Kuh & Welsch 1980).  None skips the screen.  A VIF in the thousands
        means the data cannot tell the group's members apart; 1000 is our
        choice (10 is the usual level for a look, common practice).
    prefer : sequence of str
        Numeric predictors to keep when they are near-duplicates of another,
        or members of a nearly collinear group.
    response_transform : None, "identity", "log", "sqrt" or ("boxcox", λ)
        Transform of the response; its log-Jacobian (Σ log|dz/dy|, for Box-Cox
        (λ − 1) Σ log y) is stored so criteria stay comparable across response
        scales (Box & Cox 1964).
    box_tidwell_adjust : bool, default False
        False (the default) estimates the power that best linearises the
        response on x alone.  True estimates each power with the other
        predictors (raw numeric columns and categorical dummies) held linear
        in the fit, as Box and Tidwell (1962) do with the other regressors;
        it can find a shape that x alone hides, but its powers are noisier
        and, being estimated from the response, they make a data-chosen form
        look better than its one coefficient suggests: use it knowingly.
        Falls back to x alone (with a note) when there are too few rows for
        the other predictors.
    curvature_test : bool, default True
        Offer the curved forms of a positive numeric predictor only when it
        shows curvature with the other predictors in the fit: the Box-Tidwell
        test of power 1 with t² > log n (see :func:`selectkit._vetting._straight_families`).  A
        predictor without that evidence gets its raw form only, with a
        refusal naming t for each curved form.  Applies when the identity
        form is asked; False offers every form of every predictor.
    rows_represented : int, optional
        When ``dataset`` is a sample of a larger table (a table read in
        parts), that table's row count N.  The curvature test's t grows as the
        square root of the rows for a fixed bend, so the sample's t (on n rows)
        is scaled to the table's, t·√(N/n), and compared with log N: a bend
        the search on all N rows would see is not ruled out because the sample
        is small.

    Returns
    -------
    CandidateSet

    Raises
    ------
    OptionError
        Unknown form names (listing the valid ones) or malformed options.
    InputError
        A non-positive response for a log/sqrt/Box-Cox response transform; a
        forced predictor with no usable form; too few rows for the widest
        model (one form per family plus the intercept).

    References
    ----------
    Box & Cox (1964); Box & Tidwell (1962); Royston & Altman (1994); Yeo & Johnson (2000).
    See :mod:`selectkit.transforms`.
    """
    forms = _check_forms(forms)
    if near_duplicate is not None:
        near_duplicate = float(near_duplicate)
        if not 0.0 < near_duplicate <= 1.0:
            raise OptionError(f"near_duplicate must lie in (0, 1] or be None, got {near_duplicate}")
    if twin_limit is not None:
        twin_limit = float(twin_limit)
        if not 0.0 < twin_limit <= 1.0:
            raise OptionError(f"twin_limit must lie in (0, 1] or be None, got {twin_limit}")
    if vif_limit is not None:
        vif_limit = float(vif_limit)
        if not vif_limit > 1.0:
            raise OptionError(f"vif_limit must be a number above 1 or None, got {vif_limit}")
    prefer = (prefer,) if isinstance(prefer, str) else tuple(prefer or ())
    unknown = [c for c in prefer if c not in dataset.numeric]
    if unknown:
        raise OptionError(f"prefer names {', '.join(repr(c) for c in unknown)}, not a numeric predictor; numeric "
                          "predictors are " + ", ".join(repr(c) for c in dataset.numeric))
    if not isinstance(fractional_polynomials, (bool, np.bool_)):
        raise OptionError(f"fractional_polynomials must be True or False, got {fractional_polynomials!r}")
    shift_map = _resolve_shifts(shifts, dataset)
    pairs = _check_interactions(interactions, dataset)
    y_original = np.asarray(dataset.y, dtype=np.float64)
    y, rt = _transform_response(y_original, dataset.response, response_transform)
    weights = None if dataset.weights is None else np.asarray(dataset.weights, dtype=np.float64)

    plan = _family_plan(forms, bool(fractional_polynomials))
    forced = set(dataset.forced)
    builder = _Builder(dataset.n)
    numeric, categorical = set(dataset.numeric), set(dataset.categorical)
    if dataset.n > tf.PARAMETER_SAMPLE_ROWS and any(form in ("boxcox", "boxtidwell", "yeojohnson")
                                                    for form, _ in plan):
        builder.notes.append(f"data-chosen powers (Box-Cox, Yeo-Johnson, Box-Tidwell) estimated on a seeded sample "
                             f"of {tf.PARAMETER_SAMPLE_ROWS:,} of the {dataset.n:,} rows (the same rows on every "
                             f"run); the searches and every fit use all rows")
    straight = {}
    if curvature_test and ("identity", None) in plan and len(plan) > 1:
        straight = _straight_families(dataset, y, weights, shift_map, builder.notes,
                                      represented=rows_represented)
    others = None
    if box_tidwell_adjust and any(form == "boxtidwell" for form, _ in plan):
        others = _raw_columns(dataset)
        if dataset.n < sum(v.shape[1] for v in others.values()) + 3:
            builder.notes.append("Box-Tidwell powers fitted on each predictor alone: too few rows to hold the "
                                 "other predictors linear")
            others = None
    for col in dataset.frame.columns:
        if col in numeric:
            x = dataset.frame[col].to_numpy(dtype=np.float64)
            covariates = None
            if others is not None:
                # sorted by name, so that the fit does not depend on the order of the columns
                rest = [others[name] for name in sorted(others) if name != col]
                covariates = np.column_stack(rest) if rest else None
            _numeric_family(builder, col, x, y, weights, plan, shift_map.get(col), col in forced,
                            near_duplicate, "yeojohnson" in forms, covariates, straight=straight.get(col))
        elif col in categorical:
            _categorical_family(builder, col, dataset.frame[col], col in forced)
    _set_aside_twins(builder, dataset, twin_limit=twin_limit, vif_limit=vif_limit, prefer=prefer, forced=forced)

    present = {t.family for t in builder.terms}
    for col in sorted(forced):
        if col not in present:
            raise InputError(
                f"predictor {col!r} must be in every model but none of its forms could be built "
                f"({'; '.join(r.reason for r in builder.refused if r.family == col) or 'no form asked'}); "
                "add the identity form or stop forcing it",
                column=col,
            )
    for a, b in pairs:
        name = tf.term_name("product", (a, b))
        absent = [c for c in (a, b) if c not in present]
        if absent:
            builder.refuse(name, "product", f"{name} needs a form of {', '.join(absent)}, and none was built",
                           name=name)
            continue
        xa = dataset.frame[a].to_numpy(dtype=np.float64)
        xb = dataset.frame[b].to_numpy(dtype=np.float64)
        with np.errstate(over="ignore", invalid="ignore"):
            values = xa * xb
        problem = _check_column(values, name)
        if problem is None and name in builder.names:
            problem = f"{name} is already a candidate under the same name (a column of that name?)"
        if problem:
            builder.refuse(name, "product", problem, name=name)
            continue
        builder.add(name=name, family=name, kind="interaction", transform="product", source=(a, b), params=(),
                    values=values, requires=(a, b))

    widest = {}
    for t in builder.terms:
        widest[t.family] = max(widest.get(t.family, 0), t.width)
    _check_rows(dataset.n, sum(widest.values()))

    n = dataset.n
    matrix = np.column_stack(builder.columns) if builder.columns else np.empty((n, 0))
    matrix = np.ascontiguousarray(matrix, dtype=np.float64)
    return CandidateSet(
        matrix=matrix,
        column_names=tuple(builder.column_names),
        terms=tuple(builder.terms),
        y=y,
        response=dataset.response,
        weights=weights,
        response_transform=rt,
        refused=tuple(builder.refused),
        notes=tuple(builder.notes),
        dataset=dataset,
        y_original=y_original,
    )
