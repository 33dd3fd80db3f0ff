"""Pool the models every search found, score them, and keep a shortlist.

:func:`rank` merges :class:`~selectkit.searches.Found` values, removes models
found more than once (one row lists every search that found it), scores every
model with the criteria of :mod:`selectkit.criteria`, orders them, and refits
the shortlisted ones by QR (:func:`refit`).  :func:`stability` repeats a search
on bootstrap resamples of the rows and counts how often each variable and each
form is chosen.

Every criterion is computed by :func:`selectkit.criteria.compute`; nothing here
re-derives a formula.  Ties are broken by the criterion, then the number of
terms, then the term names.
"""

from __future__ import annotations

import dataclasses
import inspect
import math
from dataclasses import dataclass
from typing import Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from . import criteria as _criteria
from ._budget import BudgetSpent
from .errors import InputError, OptionError, SearchError, SelectkitError
from .moments import moments_of
from . import _stages
from .parallel import run_units, spawn_seeds

__all__ = [
    "AIMS",
    "SCORE_COLUMNS",
    "ModelFit",
    "Shortlist",
    "Stability",
    "rank",
    "refit",
    "fit_model",
    "choose_criterion",
    "stability",
]

#: What the user wants the model for; picks the default criterion.
AIMS = ("explain", "predict")

#: Columns that come from :func:`selectkit.searches.crossval.score_subsets`, not from rss.
SCORE_COLUMNS = ("press", "cv_mse", "cv_se", "holdout_mse")

#: Information criteria that have Akaike-type weights.
_WEIGHTED = ("aic", "aicc", "bic")

#: Names other modules may use for the score columns, mapped to ours.
_SCORE_ALIASES = {
    "press": "press",
    "cv_mse": "cv_mse",
    "mean_cv_mse": "cv_mse",
    "cv_mean_mse": "cv_mse",
    "cv": "cv_mse",
    "cv_se": "cv_se",
    "cv_mse_se": "cv_se",
    "se_cv_mse": "cv_se",
    "cv_std_error": "cv_se",
    "holdout_mse": "holdout_mse",
    "held_out_mse": "holdout_mse",
    "heldout_mse": "holdout_mse",
}

#: Akaike's Δ ≤ 2 rule for "comparable support" (common practice; Burnham & Anderson 2002, §2.6).
COMPARABLE_DELTA = 2.0

INTERCEPT_LABEL = "intercept"


# --------------------------------------------------------------------------- values


@dataclass(frozen=True, eq=False)
class ModelFit:
    """A shortlisted model refitted by QR, with its coefficient table and equation.

    Attributes
    ----------
    subset : tuple of int
        Term indices into ``CandidateSet.terms``.
    terms : tuple of str
        Readable term names.
    coefficients : DataFrame
        One row per regression coefficient (the intercept first) with columns
        ``coefficient`` (label), ``term`` (the term it belongs to), ``estimate``,
        ``std_error``, ``ci_low``, ``ci_high`` (95 % t interval) and
        ``p_value_optimistic``.  The p-values and intervals treat the model as if
        it had been fixed before seeing the data; after selection they are too
        small / too narrow (see the cautions of the report).
    equation : str
        The fitted equation, e.g.
        ``yield_kg_m2 = 1.2 + 0.8·log(light) − 2.1·1/plant_density + 0.3·[cultivar = Ruby]``.
    n, k : int
        Rows and coefficients (intercept included).
    sigma : float
        Residual standard error √(rss/(n − k)).
    problem : str or None
        Why the model could not be refitted (its columns are dependent on
        these rows even after scaling); the coefficient table then holds NaN
        and the equation says so.  None for a model that was refitted.
    """

    subset: tuple[int, ...]
    terms: tuple[str, ...]
    coefficients: pd.DataFrame
    equation: str
    n: int
    k: int
    sigma: float
    problem: str | None = None


@dataclass(frozen=True, eq=False)
class Shortlist:
    """The ranked answers and models.

    The first level is the **answer**: a set of variables, whatever their
    forms.  Models that hold the same variables in different forms (x or x²
    over a narrow positive range, say) are one answer; the data often cannot
    tell such forms apart, and a list of models would repeat one answer in
    several spellings.  Answers are ranked by their best model.

    Attributes
    ----------
    table : DataFrame
        One row per shortlisted answer (at most ``size``, its best model within
        ``max_delta``), best first: the row of the answer's best model (columns
        as in ``scored``) with ``answer_weight`` (the summed model weight of
        every pooled model holding exactly these variables),
        ``models_in_answer`` (how many pooled models do), and
        ``form_alternatives`` (for each variable seen in more than one form
        among the answer's models within Δ ≤ 2 of its best, on
        ``weight_criterion``, those forms: ``"night_temp_c or
        night_temp_c^2"``; variables joined by ``"; "``; empty when the best
        forms stand alone).
    models : DataFrame
        The model-level list: the best ``size`` pooled models (within
        ``max_delta``), whatever answer they belong to; columns as in ``scored``.
    scored : DataFrame
        Every pooled model, scored and ordered.  Columns: ``position`` (1 = best),
        ``terms`` (readable names joined by ``" + "``), ``variables`` (the
        families held, in any form, joined by ``", "``), ``n_terms``, ``k``
        (coefficients including the intercept; the criteria add one parameter
        per Box-Tidwell power, which was fitted to the response — see
        :meth:`CandidateSet.powers_from_response`), ``rss``, ``log_likelihood``,
        ``aic``, ``aicc``, ``bic``, ``cp``, ``r2``, ``adj_r2``, ``press``,
        ``cv_mse``, ``cv_se``, ``holdout_mse``, ``delta_from_best`` (on the
        primary criterion, ≥ 0), ``model_weight`` (exp(−Δ/2) normalised over the
        pooled models, on ``weight_criterion``: Akaike weights for AIC/AICc,
        BIC weights — approximate posterior model probabilities — for BIC), ``comparable_support`` (Δ ≤ 2 for an information
        criterion; within one standard error of the best for ``cv_mse``; empty
        otherwise), ``found_by`` (searches that found the model, comma-separated)
        ``term_indices`` (space-separated indices into ``CandidateSet.terms``)
        and ``answer`` (the number of the answer the model belongs to, 1 =
        the best answer).
    subsets : tuple of tuple of int
        The term indices of each shortlisted answer's best model, in table order.
    model_subsets : tuple of tuple of int
        The term indices of the models of ``models``, in its order.
    answer_forms : tuple
        For each shortlisted answer, ``form_alternatives`` as
        ``((variable, (form, form, ...)), ...)``.
    all_subsets : tuple of tuple of int
        Every pooled model's term indices, in ``scored`` order.
    criterion : str
        The primary criterion that ordered the models.
    criterion_reason : str
        Why that criterion was used, in words.
    aim, convention : str
    weight_criterion : str
        The information criterion behind ``model_weight`` and the variable
        support (the primary one when it is AIC, AICc or BIC, else AICc).
    cp_variance_source : str
        Which model gave σ̂² for Mallows' Cp.
    variable_support : DataFrame
        One row per family: ``variable``, ``support`` (summed model weight of
        pooled models holding any form of it), ``models_holding`` and
        ``leading_form`` (its form with the largest summed weight).
    fits : tuple of ModelFit
        The QR refit of each shortlisted answer's best model, in table order.
    n : int
        Rows the models were fitted to.
    notes : tuple of str
        Anything the reader should know (empty score columns and why...).
    """

    table: pd.DataFrame
    scored: pd.DataFrame
    subsets: tuple[tuple[int, ...], ...]
    all_subsets: tuple[tuple[int, ...], ...]
    models: pd.DataFrame
    model_subsets: tuple[tuple[int, ...], ...]
    answer_forms: tuple
    criterion: str
    criterion_reason: str
    aim: str
    convention: str
    weight_criterion: str
    cp_variance_source: str
    variable_support: pd.DataFrame
    fits: tuple[ModelFit, ...]
    n: int
    notes: tuple[str, ...] = ()

    def __len__(self) -> int:
        return len(self.subsets)

    def terms(self, i: int) -> tuple[str, ...]:
        """Readable term names of the best model of shortlisted answer ``i`` (0 = best)."""
        return self.fits[i].terms


@dataclass(frozen=True, eq=False)
class Stability:
    """How often bootstrap resamples of the rows choose each variable and form.

    Attributes
    ----------
    n_boot : int
        Replicates run.
    seed : int
    criterion : str
        Criterion that picked each replicate's best model.
    variable_share : DataFrame
        ``variable`` and ``share_selected``: fraction of successful replicates
        whose best model holds any form of the variable.
    form_share : DataFrame
        ``term``, ``variable`` and ``share_selected`` per candidate term.
    full_data_best : tuple of str
        Terms of the best model on the full data.
    share_same_as_full : float
        Fraction of successful replicates whose best model is exactly that model.
    replicate_models : tuple
        Best subset of each replicate (``None`` when the replicate failed).
    failed : int
        Replicates whose search raised a selectkit error.
    notes : tuple of str
    """

    n_boot: int
    seed: int
    criterion: str
    variable_share: pd.DataFrame
    form_share: pd.DataFrame
    full_data_best: tuple[str, ...]
    share_same_as_full: float
    replicate_models: tuple
    failed: int = 0
    notes: tuple[str, ...] = ()


# --------------------------------------------------------------------------- criterion choice


def choose_criterion(criterion, aim, *, n, k_max):
    """Pick the primary criterion and say why.

    With no explicit ``criterion``:

    * ``aim="explain"`` → BIC.  BIC is consistent: when one of the candidate
      models is the true one, it is chosen with probability → 1 as n grows
      (Schwarz 1978), so it favours the small model that describes the
      process.
    * ``aim="predict"`` → AICc.  AIC estimates expected predictive
      (Kullback-Leibler) loss (Akaike 1974) and is efficient for prediction;
      AICc corrects its small-sample bias (Hurvich & Tsai 1989).  Burnham &
      Anderson (2002, §2.4) advise AICc whenever n/K < 40, K counting every
      estimated parameter of the largest model (coefficients plus σ²); above
      that AIC and AICc agree and AIC is used.

    Parameters
    ----------
    criterion : str or None
        A name from :data:`selectkit.criteria.CRITERIA`, or None.
    aim : {"explain", "predict"}
    n : int
        Rows.
    k_max : int
        Coefficients (intercept included) of the largest model considered.

    Returns
    -------
    name, reason : str

    Raises
    ------
    OptionError
        Unknown criterion or aim, listing the valid ones.
    """
    if aim not in AIMS:
        raise OptionError(f"unknown aim {aim!r}; choose one of {', '.join(AIMS)}")
    if criterion is not None:
        name = _criteria.check_criterion(criterion)
        return name, f"{name.upper()} was chosen by the user."
    if aim == "explain":
        return "bic", (
            "BIC, because the aim is to explain: BIC picks the true model with probability "
            "tending to 1 as n grows when it is among the candidates (Schwarz 1978), so it "
            "favours small models."
        )
    big_k = int(k_max) + 1  # coefficients plus the error variance
    ratio = n / big_k if big_k > 0 else math.inf
    if ratio < 40:
        return "aicc", (
            f"AICc, because the aim is to predict and n/K = {n}/{big_k} = {ratio:.1f} is below 40 "
            "(K: estimated parameters of the largest model, σ² included); AICc corrects AIC's "
            "small-sample bias (Hurvich & Tsai 1989; Burnham & Anderson 2002, §2.4)."
        )
    return "aic", (
        f"AIC, because the aim is to predict and n/K = {n}/{big_k} = {ratio:.1f} is at least 40, "
        "where AICc and AIC agree (Burnham & Anderson 2002, §2.4)."
    )


# --------------------------------------------------------------------------- pooling and scoring


def _term_names(candidates, subset) -> tuple[str, ...]:
    return tuple(candidates.terms[i].name for i in subset)


def _joined(names: Sequence[str]) -> str:
    return " + ".join(names) if names else "(intercept only)"


def _pool(founds, n_terms_total: int):
    """Merge Founds: one entry per distinct subset, keeping the smallest rss."""
    from .searches._found import Found

    if isinstance(founds, Found):
        founds = [founds]
    elif isinstance(founds, Mapping) or not isinstance(founds, Sequence):
        founds = list(founds.values()) if isinstance(founds, Mapping) else list(founds)
    if not founds:
        raise SearchError("no search results to rank; run at least one search method first")
    n = int(founds[0].n)
    pooled: dict[tuple[int, ...], dict] = {}
    for found in founds:
        if int(found.n) != n:
            raise SearchError(
                f"search {found.method!r} was fitted to {found.n} rows but {founds[0].method!r} to {n}; "
                "results fitted to different rows cannot be ranked together"
            )
        for subset, rss, k in zip(found.subsets, found.rss, found.k):
            bad = [i for i in subset if not 0 <= i < n_terms_total]
            if bad:
                raise SearchError(
                    f"search {found.method!r} returned term index {bad[0]} but there are "
                    f"{n_terms_total} candidate terms; the search ran on other candidates"
                )
            entry = pooled.get(subset)
            if entry is None:
                pooled[subset] = {"rss": float(rss), "k": int(k), "found_by": [found.method]}
            else:
                entry["rss"] = min(entry["rss"], float(rss))
                if found.method not in entry["found_by"]:
                    entry["found_by"].append(found.method)
    return n, pooled


def _normalise_scores(scores, subsets) -> tuple[pd.DataFrame, list[str]]:
    """Turn what score_subsets (or the caller) gave into a frame aligned with ``subsets``."""
    notes: list[str] = []
    out = pd.DataFrame({c: np.full(len(subsets), np.nan) for c in SCORE_COLUMNS})
    if scores is None:
        return out, notes
    if isinstance(scores, pd.DataFrame):
        frame = scores
    elif isinstance(scores, Mapping):
        frame = pd.DataFrame({key: np.asarray(value) for key, value in scores.items()
                              if np.ndim(value) == 1})
    else:
        attrs = {a: getattr(scores, a) for a in _SCORE_ALIASES if hasattr(scores, a)}
        if hasattr(scores, "table") and isinstance(scores.table, pd.DataFrame):
            frame = scores.table
        elif attrs:
            frame = pd.DataFrame({key: np.asarray(value) for key, value in attrs.items()})
        else:
            raise InputError(
                f"scores of type {type(scores).__name__} are not understood; pass a DataFrame "
                f"or a mapping with columns among {', '.join(SCORE_COLUMNS)}"
            )
    # Align rows: by a subset column or index when there is one, else by position.
    key_column = next((c for c in ("subset", "subsets") if c in frame.columns), None)
    if key_column is not None:
        keys = [tuple(sorted(int(i) for i in s)) for s in frame[key_column]]
        frame = frame.set_axis(pd.Index(keys, tupleize_cols=False), axis=0)
        frame = frame[~frame.index.duplicated(keep="first")]
        frame = frame.reindex(pd.Index(list(subsets), tupleize_cols=False))
    elif len(frame) and isinstance(frame.index[0], tuple):
        frame = frame.reindex(pd.Index(list(subsets), tupleize_cols=False))
    elif len(frame) != len(subsets):
        raise InputError(
            f"scores have {len(frame)} rows but {len(subsets)} models were pooled; pass one row per "
            "model in the pooled order or a 'subset' column"
        )
    used = []
    for column in frame.columns:
        target = _SCORE_ALIASES.get(str(column).lower())
        if target is not None and target not in used:
            out[target] = np.asarray(frame[column], dtype=float)
            used.append(target)
    if not used:
        notes.append("the scores given had none of the columns " + ", ".join(SCORE_COLUMNS))
    return out, notes


def _compute_scores(candidates, subsets, moments, folds, seed):
    """Call score_subsets when it exists; else leave the score columns empty, with a note."""
    try:
        from .searches.crossval import (
            score_subsets,  # lazy: the search package sits beside us
        )
    except ImportError:
        return None, [
            "PRESS, cross-validation and held-out columns are empty: "
            "selectkit.searches.crossval.score_subsets is not available in this installation."
        ]
    return score_subsets(candidates, list(subsets), folds=folds, seed=seed, moments=moments), []


def _order_key(values: np.ndarray, lower_is_better: bool, n_terms, names):
    """Stable sort order: criterion (missing values last), then n_terms, then term names."""
    v = np.where(np.isfinite(values), values if lower_is_better else -values, np.inf)
    return sorted(range(len(values)), key=lambda i: (v[i], n_terms[i], names[i]))


def _score_table(candidates, moments, n, pooled, *, convention, criterion, aim, score_frame):
    subsets = list(pooled)
    rss = np.array([pooled[s]["rss"] for s in subsets])
    k = np.array([pooled[s]["k"] for s in subsets])
    tss = float(moments.tss)
    log_jacobian = float(candidates.response_transform.log_jacobian)

    # Cp's σ̂²: the pooled model with most coefficients; ties → smaller rss.
    largest = min(range(len(subsets)), key=lambda i: (-k[i], rss[i], _term_names(candidates, subsets[i])))
    k_full = int(k[largest])
    if n - k_full > 0 and rss[largest] > 0:
        sigma2_full = rss[largest] / (n - k_full)
        cp_source = (
            f"σ̂² = rss/(n − k) = {sigma2_full:.6g} of the largest pooled model "
            f"({_joined(_term_names(candidates, subsets[largest]))}; k = {k_full})"
        )
    else:
        sigma2_full = None
        cp_source = (
            f"Cp not computed: the largest pooled model has k = {k_full} coefficients for n = {n} rows "
            "and leaves no residual degrees of freedom"
        )
    # Powers fitted to the response (Box-Tidwell) count as parameters in every criterion.
    k_criteria = k + np.array([candidates.powers_from_response(sub) for sub in subsets], dtype=np.int64)
    values = _criteria.compute(rss, n, k_criteria, tss=tss, sigma2_full=sigma2_full,
                               convention=convention, log_jacobian=log_jacobian)
    names = [_term_names(candidates, s) for s in subsets]
    table = pd.DataFrame({
        "terms": [_joined(t) for t in names],
        # the variables (families) a model holds, whatever their forms: rows that share them differ in form only
        "variables": [", ".join(dict.fromkeys(candidates.terms[j].family for j in sorted(sub))) for sub in subsets],
        "n_terms": [len(s) for s in subsets],
        "k": k.astype(np.int64),
        "rss": rss,
        "log_likelihood": values["log_likelihood"],
        "aic": values["aic"],
        "aicc": values["aicc"],
        "bic": values["bic"],
        "cp": values.get("cp", np.full(len(subsets), np.nan)),
        "r2": values["r2"],
        "adj_r2": values["adj_r2"],
    })
    for column in SCORE_COLUMNS:
        table[column] = np.asarray(score_frame[column], dtype=float)

    name, reason = choose_criterion(criterion, aim, n=n, k_max=k_full)
    primary = table[name].to_numpy(dtype=float)
    if not np.isfinite(primary).any():
        raise OptionError(
            f"criterion {name!r} has no value for any model"
            + ("; it needs cross-validation scores (selectkit.searches.crossval)" if name in SCORE_COLUMNS else "")
            + "; choose another criterion"
        )
    lower = _criteria.LOWER_IS_BETTER[name]
    order = _order_key(primary, lower, table["n_terms"].to_numpy(), names)
    table = table.iloc[order].reset_index(drop=True)
    subsets = [subsets[i] for i in order]
    primary = primary[order]
    best = primary[0]
    delta = primary - best if lower else best - primary
    table.insert(0, "position", np.arange(1, len(table) + 1))
    table["delta_from_best"] = delta

    weight_criterion = name if name in _WEIGHTED else "aicc"
    _, weights = _criteria.akaike_weights(table[weight_criterion].to_numpy(dtype=float))
    table["model_weight"] = weights
    if name in _WEIGHTED:
        comparable = pd.array(np.isfinite(delta) & (delta <= COMPARABLE_DELTA), dtype="boolean")
    elif name == "cv_mse" and np.isfinite(table["cv_se"].iloc[0]):
        # One-standard-error rule (Breiman et al. 1984; Hastie, Tibshirani & Friedman 2009, §7.10).
        comparable = pd.array(np.isfinite(delta) & (delta <= table["cv_se"].iloc[0]), dtype="boolean")
    else:
        comparable = pd.array([pd.NA] * len(table), dtype="boolean")
    table["comparable_support"] = comparable
    table["found_by"] = [", ".join(pooled[s]["found_by"]) for s in subsets]
    table["term_indices"] = [" ".join(str(i) for i in s) for s in subsets]
    return table, subsets, name, reason, weight_criterion, cp_source


def _answers(candidates, table, subsets, weight_criterion):
    """Group the ordered models by the variables they hold; one row per answer, best answer first.

    Returns the scored table with an ``answer`` column and a frame indexed by
    answer number with ``best_row`` (the row of its best model in the table),
    ``answer_weight``, ``models_in_answer``, ``form_alternatives`` (text) and
    ``alternatives`` (the same as ``((variable, (form, ...)), ...)``).
    """
    keys = [frozenset(candidates.terms[j].family for j in sub) for sub in subsets]
    number: dict[frozenset, int] = {}
    for key in keys:
        number.setdefault(key, len(number) + 1)
    table = table.copy()
    table["answer"] = [number[key] for key in keys]
    weights = table["model_weight"].to_numpy(dtype=float)
    ic = table[weight_criterion].to_numpy(dtype=float)
    members: dict[int, list[int]] = {}
    for row, answer in enumerate(table["answer"]):
        members.setdefault(int(answer), []).append(row)
    rows = []
    for answer, rows_of in members.items():
        best = rows_of[0]
        close = [r for r in rows_of if np.isfinite(ic[r]) and ic[r] - ic[best] <= COMPARABLE_DELTA] or [best]
        forms: dict[str, list[str]] = {}
        for j in subsets[best]:
            forms[candidates.terms[j].family] = []
        for r in close:
            for j in subsets[r]:
                names = forms[candidates.terms[j].family]
                if candidates.terms[j].name not in names:
                    names.append(candidates.terms[j].name)
        alternatives = tuple((family, tuple(names)) for family, names in forms.items() if len(names) > 1)
        rows.append({
            "answer": answer,
            "best_row": best,
            "answer_weight": float(np.nansum(weights[rows_of])),
            "models_in_answer": len(rows_of),
            "form_alternatives": "; ".join(" or ".join(names) for _, names in alternatives),
            "alternatives": alternatives,
        })
    return table, pd.DataFrame(rows).set_index("answer")


def _variable_support(candidates, subsets, weights) -> pd.DataFrame:
    """Summed model weight of the pooled models that hold each family."""
    families: list[str] = []
    for term in candidates.terms:
        if term.family not in families:
            families.append(term.family)
    support = dict.fromkeys(families, 0.0)
    holding = dict.fromkeys(families, 0)
    form_weight: dict[int, float] = {}
    for subset, w in zip(subsets, weights):
        for i in subset:
            fam = candidates.terms[i].family
            support[fam] += float(w)
            holding[fam] += 1
            form_weight[i] = form_weight.get(i, 0.0) + float(w)
    leading = {}
    for i, w in sorted(form_weight.items(), key=lambda item: (-item[1], candidates.terms[item[0]].name)):
        leading.setdefault(candidates.terms[i].family, candidates.terms[i].name)
    frame = pd.DataFrame({
        "variable": families,
        "support": [min(support[f], 1.0) for f in families],
        "models_holding": [holding[f] for f in families],
        "leading_form": [leading.get(f, "") for f in families],
    })
    order = sorted(range(len(frame)), key=lambda i: (-frame["support"].iloc[i], families[i]))
    return frame.iloc[order].reset_index(drop=True)


def rank(
    founds,
    candidates,
    moments,
    *,
    criterion=None,
    aim="explain",
    convention="sigma-counted",
    size=10,
    max_delta=None,
    scores=None,
    folds=5,
    seed=0,
) -> Shortlist:
    """Pool, score and order the models of every search; refit the best ones.

    Parameters
    ----------
    founds : sequence of Found (or a mapping name → Found)
        Results of the searches; they must have been fitted to the same rows
        and the same ``candidates``.
    candidates : CandidateSet
    moments : Moments
        Moments of ``candidates`` (for the total sum of squares and the
        cross-validation scores).
    criterion : str, optional
        Primary criterion, a name of :data:`selectkit.criteria.CRITERIA`
        (``aic, aicc, bic, cp, adj_r2, press, cv_mse, holdout_mse``).  By
        default it follows ``aim`` (see :func:`choose_criterion`): BIC to
        explain, AICc (or AIC when n/K ≥ 40) to predict.
    aim : {"explain", "predict"}, default "explain"
    convention : {"sigma-counted", "coefficients-only"}, default "sigma-counted"
        Parameter count of AIC/AICc/BIC (see :mod:`selectkit.criteria`); the
        ranking by AIC or BIC does not depend on it.
    size : int, default 10
        Most models in the shortlist.
    max_delta : float, optional
        Keep only models within this Δ of the best on the primary criterion.
    scores : DataFrame, mapping, False or None
        PRESS / CV / held-out scores per pooled model (columns ``press``,
        ``cv_mse``, ``cv_se``, ``holdout_mse``; rows in pooled order or keyed by
        a ``subset`` column).  ``None`` computes them with
        :func:`selectkit.searches.crossval.score_subsets` when that function
        exists (else the columns stay empty and ``notes`` says so); ``False``
        skips them.
    folds, seed : int
        Passed to ``score_subsets`` when ``scores`` is None.

    Returns
    -------
    Shortlist

    Notes
    -----
    Conventions (all computed by :func:`selectkit.criteria.compute`):
    ℓ = −n/2 (log(2π·rss/n) + 1) plus the response transform's log-Jacobian
    (Box & Cox 1964); AIC = −2ℓ + 2p, BIC = −2ℓ + log(n)·p, AICc = AIC +
    2p(p+1)/(n−p−1), with p = k + 1 (σ² counted) under the default convention
    and p = k under ``"coefficients-only"``.  Cp = rss/σ̂² − n + 2k (Mallows 1973),
    σ̂² from the pooled model with the most coefficients (``cp_variance_source``
    names it).  Δᵢ = criterionᵢ − best and the weights
    wᵢ = exp(−Δᵢ/2)/Σⱼ exp(−Δⱼ/2) (Burnham & Anderson 2002, §2.9); for BIC these
    are BIC weights, approximate posterior model probabilities under equal
    prior probabilities.  Weights are relative to the pooled list only: a
    search that kept few models gives support that leans on those models.

    References
    ----------
    Burnham, K. P. and Anderson, D. R. (2002). Model Selection and Multimodel
    Inference, 2nd ed. Springer.

    Examples
    --------
    >>> import numpy as np
    >>> from selectkit.moments import compute_moments
    >>> from selectkit.searches import Found
    >>> from tests.factories import make_candidates
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(50, 2)); y = 1 + 2 * X[:, 0] + rng.normal(size=50)
    >>> cands = make_candidates(X, y, names=["light", "noise"])
    >>> def rss(cols):
    ...     design = np.column_stack([np.ones(50)] + [X[:, c] for c in cols])
    ...     return float(np.sum((y - design @ np.linalg.lstsq(design, y, rcond=None)[0]) ** 2))
    >>> subsets = [(), (0,), (1,), (0, 1)]
    >>> found = Found("listed", subsets, [rss(s) for s in subsets], [1 + len(s) for s in subsets], 50)
    >>> short = rank([found], cands, compute_moments(X, y), scores=False)
    >>> short.terms(0), short.criterion
    (('light',), 'bic')
    """
    if isinstance(size, bool) or not isinstance(size, (int, np.integer)) or size < 1:
        raise OptionError(f"size must be a whole number of models ≥ 1 (got {size!r})")
    if max_delta is not None and not (isinstance(max_delta, (int, float, np.floating)) and max_delta >= 0):
        raise OptionError(f"max_delta must be a number ≥ 0 or None (got {max_delta!r})")
    n, pooled = _pool(founds, len(candidates.terms))
    if int(moments.n) != n:
        raise SearchError(f"the moments cover {moments.n} rows but the searches were fitted to {n}")
    subsets = list(pooled)
    notes: list[str] = []
    if scores is None:
        scores, extra = _compute_scores(candidates, subsets, moments, folds, seed)
        notes.extend(extra)
    elif scores is False:
        scores = None
        notes.append("PRESS, cross-validation and held-out columns were not requested.")
    score_frame, extra = _normalise_scores(scores, subsets)
    notes.extend(extra)

    table, ordered, name, reason, weight_criterion, cp_source = _score_table(
        candidates, moments, n, pooled, convention=convention, criterion=criterion, aim=aim,
        score_frame=score_frame,
    )
    if weight_criterion != name:
        notes.append(f"Model weights and variable support use {weight_criterion.upper()}, "
                     f"since {name} has no likelihood weights.")
    table, answers = _answers(candidates, table, ordered, weight_criterion)
    within = np.ones(len(table), dtype=bool)
    if max_delta is not None:
        within = table["delta_from_best"].to_numpy(dtype=float) <= max_delta
    keep = within & (np.arange(len(table)) < size)
    models_table = table[keep].reset_index(drop=True)
    model_subsets = tuple(ordered[i] for i in np.flatnonzero(keep))
    best_rows = [int(r) for r in answers["best_row"] if within[int(r)]][:size]
    shortlist_table = table.iloc[best_rows].reset_index(drop=True)
    for column in ("answer_weight", "models_in_answer", "form_alternatives"):
        shortlist_table[column] = answers.loc[shortlist_table["answer"], column].to_numpy()
    short_subsets = tuple(ordered[r] for r in best_rows)
    answer_forms = tuple(answers.loc[int(a), "alternatives"] for a in shortlist_table["answer"])
    support = _variable_support(candidates, ordered, table["model_weight"].to_numpy())
    fits = tuple(fit_model(candidates, s, moments=moments) for s in short_subsets)
    return Shortlist(
        table=shortlist_table,
        scored=table,
        subsets=short_subsets,
        all_subsets=tuple(ordered),
        models=models_table,
        model_subsets=model_subsets,
        answer_forms=answer_forms,
        criterion=name,
        criterion_reason=reason,
        aim=aim,
        convention=convention,
        weight_criterion=weight_criterion,
        cp_variance_source=cp_source,
        variable_support=support,
        fits=fits,
        n=n,
        notes=tuple(notes),
    )


# --------------------------------------------------------------------------- refit


def _coefficient_labels(candidates, subset):
    """(term name, column index, label, display-in-equation) for each coefficient."""
    out = []
    for i in subset:
        term = candidates.terms[i]
        if term.kind == "block":
            for j in term.columns:
                column = str(candidates.column_names[j])
                level = column
                if column.startswith(term.name) and len(column) > len(term.name):
                    level = column[len(term.name):].strip(" []=_:.()") or column
                display = f"[{term.name} = {level}]"
                out.append((term.name, j, display, display))
        elif len(term.columns) == 1:
            out.append((term.name, term.columns[0], term.name, term.name))
        else:
            for j in term.columns:
                column = str(candidates.column_names[j])
                out.append((term.name, j, column, column))
    return out


def _design(candidates, subset):
    labels = _coefficient_labels(candidates, subset)
    n = candidates.matrix.shape[0]
    columns = {INTERCEPT_LABEL: np.ones(n)}
    for _, j, label, _ in labels:
        columns[label] = np.asarray(candidates.matrix[:, j], dtype=float)
    return pd.DataFrame(columns), labels


#: A design column counts as dependent on the columns before it when, centred (its projection on
#: the first column removed) and scaled to unit length, the part of it outside their span is at
#: most this long — the tolerance of the data intake (:data:`selectkit.data.COLLINEARITY_TOLERANCE`).
RANK_TOLERANCE = 1e-7


@dataclass(frozen=True, eq=False)
class _LeastSquares:
    """A least-squares fit computed on the column-scaled design, reported in the original units.

    Attributes
    ----------
    coef : ndarray, shape (k,)
        Coefficients of the original columns (min-norm ones on the scaled
        columns when the design is rank-deficient).
    fitted, residuals, hat : ndarray, shape (n,)
        Fitted values, residuals (y − fitted) and the diagonal of the hat matrix.
    rank : int
        Columns whose pivot is above :data:`RANK_TOLERANCE`.
    dependent : int
        Position of the first column within the tolerance of the span of the
        columns before it (−1 when none is).
    cov_root : ndarray, shape (k, k), or None
        ``B`` with (DᵀD)⁻¹ = B Bᵀ in the original units (full rank only).
    basis : ndarray, shape (n, k), or None
        Orthonormal basis Q of the columns, nested like them (full rank only).
    condition : float
        Condition number of the scaled design (columns centred and of unit length).
    """

    coef: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    hat: np.ndarray
    rank: int
    dependent: int
    cov_root: np.ndarray | None
    basis: np.ndarray | None
    condition: float


def _binary_exponents(values):
    """Per column, the exponent e with max|x|·2⁻ᵉ in [0.5, 1) (0 for an all-zero column)."""
    top = np.max(np.abs(values), axis=0) if values.shape[0] else np.zeros(values.shape[1:])
    return np.where(top > 0, np.frexp(top)[1], 0).astype(np.int64)


def _least_squares(design, y, *, tolerance=RANK_TOLERANCE) -> _LeastSquares:
    """Least squares of ``y`` on ``design`` computed on the column-scaled design.

    Each column (and ``y``) is first scaled by a power of two (exact in binary
    floating point), so that no square or product overflows or underflows;
    the first column (the intercept, √w under row weights) is then projected
    out of the others and of ``y`` (two passes of Gram–Schmidt — with a column
    of ones this centres them), and the other columns are scaled to unit
    length.  Householder QR of that design E = D·M (M upper triangular) gives
    the rank test — column j is dependent when its pivot |Rⱼⱼ|, the length of
    its unit column outside the span of the columns before it, is at most
    ``tolerance`` — and the fit: γ = R⁻¹Qᵀỹ, β = Mγ, (DᵀD)⁻¹ = (MR⁻¹)(MR⁻¹)ᵀ.
    None of these steps changes the column space, so fitted values, residuals
    and the hat matrix are those of the raw design, exact up to round-off,
    while the raw design's condition number (often 10¹⁰ and more with offsets
    or mixed units) never enters.

    Parameters
    ----------
    design : ndarray, shape (n, k)
        The first column must not be all zero (it is the intercept in selectkit).
    y : ndarray, shape (n,)
    tolerance : float, default RANK_TOLERANCE

    Returns
    -------
    _LeastSquares

    References
    ----------
    Golub, G. H. and Van Loan, C. F. (2013). Matrix Computations, 4th ed.,
    §5.3 (QR least squares) and §5.5 (rank deficiency); Belsley, Kuh & Welsch
    (1980) on scaling columns before judging their conditioning.
    """
    from scipy.linalg import solve_triangular

    D = np.asarray(design, dtype=float)
    yv = np.asarray(y, dtype=float).reshape(-1)
    n, k = D.shape
    if k == 0:
        return _LeastSquares(np.zeros(0), np.zeros(n), yv.copy(), np.zeros(n), 0, -1,
                             np.zeros((0, 0)), np.zeros((n, 0)), float("nan"))
    column_exp = _binary_exponents(D)
    y_exp = int(_binary_exponents(yv[:, None])[0])
    Ds = np.ldexp(D, -column_exp)
    ys = np.ldexp(yv, -y_exp)
    first = Ds[:, 0]
    first_ss = float(first @ first)
    M = np.zeros((k, k))
    E = np.zeros_like(Ds)
    y_left = ys.copy()
    y_on_first = 0.0
    if first_ss > 0:
        first_norm = np.sqrt(first_ss)
        E[:, 0] = first / first_norm
        M[0, 0] = 1.0 / first_norm
        rest = Ds[:, 1:].copy()
        on_first = np.zeros(k - 1)
        for _ in range(2):  # the second pass removes what round-off left of the first column
            c = (first @ rest) / first_ss
            rest -= np.outer(first, c)
            on_first += c
            cy = float(first @ y_left) / first_ss
            y_left -= cy * first
            y_on_first += cy
        lengths = np.sqrt(np.sum(rest * rest, axis=0))
        safe = np.where(lengths > 0, lengths, 1.0)
        E[:, 1:] = rest / safe
        M[0, 1:] = -on_first / safe
        M[np.arange(1, k), np.arange(1, k)] = 1.0 / safe
    else:
        first_norm = 0.0
        lengths = np.sqrt(np.sum(Ds[:, 1:] ** 2, axis=0))
        safe = np.where(lengths > 0, lengths, 1.0)
        E[:, 1:] = Ds[:, 1:] / safe
        M[np.arange(1, k), np.arange(1, k)] = 1.0 / safe
    q, r = np.linalg.qr(E)
    pivots = np.abs(np.diag(r))
    below = np.flatnonzero(~(pivots > tolerance))
    dependent = int(below[0]) if below.size else -1
    rank = int(np.sum(pivots > tolerance))
    singular_values = np.linalg.svd(r, compute_uv=False)
    condition = (float(singular_values[0] / singular_values[-1]) if singular_values[-1] > 0
                 else float("inf"))

    if dependent < 0:
        effects = q.T @ y_left
        gamma = solve_triangular(r, effects)
        left = y_left - q @ effects
        again = q.T @ left  # one step of refinement
        left -= q @ again
        gamma += solve_triangular(r, again)
        gamma[0] += y_on_first * first_norm
        hat = np.sum(q * q, axis=1)
        r_inverse = solve_triangular(r, np.eye(k))
        cov_root = np.ldexp(M @ r_inverse, -column_exp[:, None])
        basis = q
    else:
        u, s, vt = np.linalg.svd(E, full_matrices=False)
        keep = s > tolerance * s[0] if s.size and s[0] > 0 else np.zeros(s.shape, dtype=bool)
        u_kept = u[:, keep]
        effects = u_kept.T @ y_left
        gamma = vt[keep].T @ (effects / s[keep])
        left = y_left - u_kept @ effects
        if first_ss > 0:
            gamma[0] += y_on_first * first_norm
        hat = np.sum(u_kept * u_kept, axis=1)
        cov_root = None
        basis = None
    coef = np.ldexp(M @ gamma, y_exp - column_exp)
    residuals = np.ldexp(left, y_exp)
    return _LeastSquares(coef=coef, fitted=yv - residuals, residuals=residuals, hat=hat, rank=rank,
                         dependent=dependent, cov_root=cov_root, basis=basis, condition=condition)


def refit(candidates, subset):
    """QR refit of one model with statsmodels (OLS, or WLS with the row weights).

    Parameters
    ----------
    candidates : CandidateSet
    subset : sequence of int
        Term indices into ``candidates.terms``; the intercept is always added.

    Returns
    -------
    statsmodels.regression.linear_model.RegressionResultsWrapper
        The results of a QR fit, as ``fit(method="qr")`` would return them;
        exog columns are named ``intercept`` and the coefficient labels (a
        term's readable name, ``[block = level]`` for a categorical level).

    Raises
    ------
    SearchError
        When a column is, after centring and scaling, within
        :data:`RANK_TOLERANCE` of the span of the intercept and the columns
        before it.

    Notes
    -----
    The factorisation runs on the column-scaled design (see
    :func:`_least_squares`): each column is centred and scaled to unit length
    before the QR, and the coefficients and their covariance are transformed
    back to the original units.  The raw design's condition number — often
    10¹⁰ or more when the columns have offsets or differ in units — then
    costs no digits beyond those the data themselves carry.

    Examples
    --------
    >>> import numpy as np
    >>> from tests.factories import make_candidates
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(30, 2)); y = 1 + 2 * X[:, 0] + rng.normal(size=30)
    >>> results = refit(make_candidates(X, y), (0,))
    >>> list(results.params.index)
    ['intercept', 'x0']
    """
    import statsmodels.api as sm
    from statsmodels.regression.linear_model import OLSResults, RegressionResults, RegressionResultsWrapper

    subset = tuple(sorted(int(i) for i in subset))
    exog, _ = _design(candidates, subset)
    y = pd.Series(np.asarray(candidates.y, dtype=float), name=candidates.response)
    if candidates.weights is None:
        model = sm.OLS(y, exog)
    else:
        model = sm.WLS(y, exog, weights=np.asarray(candidates.weights, dtype=float))
    wexog = np.asarray(model.wexog, dtype=float)
    fit = _least_squares(wexog, np.asarray(model.wendog, dtype=float))
    k = wexog.shape[1]
    if fit.dependent >= 0:
        names = list(exog.columns)
        before = ", ".join(repr(c) for c in names[:fit.dependent]) or "nothing"
        raise SearchError(
            f"coefficient column {names[fit.dependent]!r} of the model ({', '.join(names[1:])}) is a linear "
            f"combination of {before} on these {wexog.shape[0]} rows even after centring and scaling the "
            f"columns (the part of it outside their span is at most {RANK_TOLERANCE:g} of its length); "
            "drop it or one of the terms it depends on",
            columns=tuple(names), singular_column=names[fit.dependent],
        )
    # What fit(method="qr") leaves on the model, computed from the scaled factorisation instead of
    # inv(RᵀR) of the raw design (which fails or loses every digit when the raw columns differ in
    # scale by 10¹⁰ or carry large offsets).
    normalized_cov = fit.cov_root @ fit.cov_root.T
    model.normalized_cov_params = normalized_cov
    model.wexog_singular_values = np.linalg.svd(wexog, compute_uv=False)
    model.rank = k
    model.pinv_wexog = fit.cov_root @ fit.basis.T
    model.effects = fit.basis.T @ np.asarray(model.wendog, dtype=float)
    if model._df_model is None:
        model._df_model = float(k - model.k_constant)
    if model._df_resid is None:
        model.df_resid = model.nobs - k
    kind = OLSResults if isinstance(model, sm.OLS) else RegressionResults
    return RegressionResultsWrapper(kind(model, fit.coef, normalized_cov_params=normalized_cov))


def _number(value: float) -> str:
    text = f"{abs(value):.4g}"
    return text


def _equation(lhs, params, labels) -> str:
    parts = [f"{lhs} = {'−' if params.iloc[0] < 0 else ''}{_number(params.iloc[0])}"]
    for (_, _, label, display), value in zip(labels, params.iloc[1:]):
        sign = "−" if value < 0 else "+"
        parts.append(f" {sign} {_number(value)}·{display}")
    return "".join(parts)


@dataclass(frozen=True, eq=False)
class MomentFit:
    """A least-squares fit solved from the moments alone (no pass over the rows).

    Attributes
    ----------
    coef : ndarray, shape (k,)
        Intercept first, then the model's columns in order.
    cov_unscaled : ndarray, shape (k, k)
        (XᵀWX)⁻¹, so that σ̂²·``cov_unscaled`` is the coefficients' covariance.
    rss : float
        Σ wᵢ eᵢ², the (weighted) residual sum of squares.
    n, k : int
        Rows and coefficients (intercept included).
    smallest_pivot : float
        The smallest diagonal entry of the Cholesky factor of the columns'
        correlation matrix: the length of the part of a centred, unit-length
        column outside the span of those before it (1 for orthogonal columns).
        Its inverse square bounds the condition number of the solved system
        from below, and so the digits the moments route may lose.
    """

    coef: np.ndarray
    cov_unscaled: np.ndarray
    rss: float
    n: int
    k: int
    smallest_pivot: float = 1.0

    @property
    def df_resid(self) -> int:
        return self.n - self.k

    @property
    def scale(self) -> float:
        """σ̂² = rss / (n − k)."""
        return self.rss / self.df_resid if self.df_resid > 0 else float("nan")


#: Below this smallest Cholesky pivot of the correlation matrix (its condition number then exceeds
#: 10⁶, so a solution from the moments may lose more than 10 of its 16 digits) a shortlisted model is
#: refitted by QR of its rows instead, whose error grows with the square root of that condition number
#: (Golub & Van Loan 2013, §5.3).  Our own threshold, chosen for 10⁻⁸ agreement with a QR fit.
MOMENT_PIVOT_FLOOR = 1e-3


def moment_fit(moments, columns, *, tolerance=RANK_TOLERANCE) -> MomentFit:
    """Solve the least-squares fit of ``y ~ 1 + X[:, columns]`` from the centred cross-products.

    Parameters
    ----------
    moments : selectkit.moments.Moments
        Weighted means and centred cross-products of the candidate columns
        and the response (last).
    columns : sequence of int
        Columns of the candidate matrix, in the model's order.
    tolerance : float, default :data:`RANK_TOLERANCE`
        A column is dependent when, centred and scaled to unit length, the
        part of it outside the span of the intercept and the columns before it
        is at most this long (the criterion of :func:`_least_squares`).

    Returns
    -------
    MomentFit

    Raises
    ------
    ValueError
        ``("dependent", j)``: column position ``j`` (0 = the intercept) fails
        the rank test; the caller words the error.

    Notes
    -----
    With C the centred cross-products of the model's columns, c those with
    the response, S = diag(C)^½ and R = S⁻¹CS⁻¹ (their correlation matrix),
    the Cholesky factor R = LLᵀ gives z = L⁻¹S⁻¹c, the slopes b = S⁻¹L⁻ᵀz,
    rss = Σw(y − ȳ)² − zᵀz and the intercept ȳ − x̄ᵀb.  The inverse moment
    matrix is (XᵀWX)⁻¹ with blocks C⁻¹ = S⁻¹L⁻ᵀL⁻¹S⁻¹ (slopes),
    −C⁻¹x̄ and 1/W + x̄ᵀC⁻¹x̄ (intercept; W = Σw).  Centring and unit scaling
    make the factorised matrix as well conditioned as the columns' own
    correlations allow: offsets and units cost no digits (Golub & Van Loan
    2013, §5.3 on normal equations; the diagonal of L equals that of the R
    factor of the QR of the centred, unit-length columns, so the rank test
    is the one :func:`_least_squares` makes).  Checked against statsmodels'
    QR fit on NIST Longley and on ill-conditioned random designs.
    """
    from scipy.linalg import solve_triangular

    cols = np.asarray(list(columns), dtype=np.int64)
    m = moments.m
    p = cols.size
    n = int(moments.n)
    C = np.asarray(moments.cross[np.ix_(cols, cols)], dtype=float)
    c = np.asarray(moments.cross[cols, m], dtype=float)
    scale = np.sqrt(np.maximum(np.diag(C), 0.0))
    for j in range(p):
        if not scale[j] > 0:
            raise ValueError("dependent", j + 1)
    Rm = C / np.outer(scale, scale)
    L = np.zeros((p, p))
    for j in range(p):  # Cholesky with the rank test on each pivot (k is small: a loop costs nothing)
        d = Rm[j, j] - L[j, :j] @ L[j, :j]
        if not d > tolerance ** 2:
            raise ValueError("dependent", j + 1)
        L[j, j] = np.sqrt(d)
        if j + 1 < p:
            L[j + 1:, j] = (Rm[j + 1:, j] - L[j + 1:, :j] @ L[j, :j]) / L[j, j]
    z = solve_triangular(L, c / scale, lower=True) if p else np.empty(0)
    slopes = solve_triangular(L.T, z, lower=False) / scale if p else np.empty(0)
    rss = max(float(moments.tss - z @ z), 0.0)
    means = np.asarray(moments.mean[cols], dtype=float)
    intercept = float(moments.mean[m] - means @ slopes)
    Linv = solve_triangular(L, np.eye(p), lower=True) if p else np.empty((0, 0))
    c_inv = (Linv.T @ Linv) / np.outer(scale, scale)
    cov = np.empty((p + 1, p + 1))
    cov[1:, 1:] = c_inv
    cross_term = -c_inv @ means
    cov[0, 1:] = cov[1:, 0] = cross_term
    cov[0, 0] = 1.0 / float(moments.weight_sum) + means @ c_inv @ means
    return MomentFit(coef=np.concatenate([[intercept], slopes]), cov_unscaled=cov, rss=rss, n=n, k=p + 1,
                     smallest_pivot=float(np.min(np.diag(L))) if p else 1.0)


def fit_model(candidates, subset, *, level=0.95, moments=None) -> ModelFit:
    """Refit ``subset`` and build its coefficient table and equation.

    With ``moments`` (those the searches ran on) the fit is solved from them
    (:func:`moment_fit`: no pass over the rows, whatever n); without, by QR
    of the column-scaled design (:func:`refit`).  The two agree to rounding;
    :meth:`selectkit.api.Result.model` still gives the statsmodels results.

    Parameters
    ----------
    candidates : CandidateSet
    subset : sequence of int
    level : float, default 0.95
        Confidence level of the t intervals.

    Returns
    -------
    ModelFit
        When the model cannot be refitted (:func:`refit` raises
        :class:`SearchError`), its ``problem`` holds the reason, its
        coefficients are NaN and its equation says it was not refitted: one
        such model never stops the others from being reported.
    """
    subset = tuple(sorted(int(i) for i in subset))
    _, labels = _design(candidates, subset)
    transform = candidates.response_transform
    lhs = transform.name if transform.transform != "identity" else candidates.response
    try:
        results = _moment_results(candidates, subset, labels, moments) if moments is not None else None
        if results is None or results.smallest_pivot < MOMENT_PIVOT_FLOOR:
            results = refit(candidates, subset)  # nearly dependent columns: one QR pass over the rows
    except SearchError as err:
        k = len(labels) + 1
        nothing = np.full(k, np.nan)
        coefficients = pd.DataFrame({
            "coefficient": [INTERCEPT_LABEL] + [label for _, _, label, _ in labels],
            "term": [INTERCEPT_LABEL] + [term for term, _, _, _ in labels],
            "estimate": nothing, "std_error": nothing, "ci_low": nothing, "ci_high": nothing,
            "p_value_optimistic": nothing,
        })
        names = _term_names(candidates, subset)
        return ModelFit(
            subset=subset,
            terms=names,
            coefficients=coefficients,
            equation=f"{lhs} ~ {_joined(names)} (not refitted: {err})",
            n=int(candidates.matrix.shape[0]),
            k=k,
            sigma=float("nan"),
            problem=str(err),
        )
    if isinstance(results, MomentFit):
        return _table_from_moments(candidates, subset, labels, results, lhs, level)
    ci = np.asarray(results.conf_int(alpha=1.0 - level))
    coefficients = pd.DataFrame({
        "coefficient": [INTERCEPT_LABEL] + [label for _, _, label, _ in labels],
        "term": [INTERCEPT_LABEL] + [term for term, _, _, _ in labels],
        "estimate": np.asarray(results.params, dtype=float),
        "std_error": np.asarray(results.bse, dtype=float),
        "ci_low": ci[:, 0],
        "ci_high": ci[:, 1],
        "p_value_optimistic": np.asarray(results.pvalues, dtype=float),
    })
    n = int(results.nobs)
    k = int(len(results.params))
    return ModelFit(
        subset=subset,
        terms=_term_names(candidates, subset),
        coefficients=coefficients,
        equation=_equation(lhs, results.params, labels),
        n=n,
        k=k,
        sigma=float(np.sqrt(results.scale)),
    )


def _moment_results(candidates, subset, labels, moments) -> MomentFit:
    """:func:`moment_fit` of a model, its rank failure worded as :func:`refit` words it."""
    try:
        return moment_fit(moments, [j for _, j, _, _ in labels])
    except ValueError as err:
        if not (err.args and err.args[0] == "dependent"):
            raise
        names = [INTERCEPT_LABEL] + [label for _, _, label, _ in labels]
        j = err.args[1]
        before = ", ".join(repr(c) for c in names[:j]) or "nothing"
        raise SearchError(
            f"coefficient column {names[j]!r} of the model ({', '.join(names[1:])}) is a linear "
            f"combination of {before} on these {moments.n} rows even after centring and scaling the "
            f"columns (the part of it outside their span is at most {RANK_TOLERANCE:g} of its length); "
            "drop it or one of the terms it depends on",
            columns=tuple(names), singular_column=names[j],
        ) from None


def _table_from_moments(candidates, subset, labels, fit: MomentFit, lhs, level) -> ModelFit:
    """The coefficient table of a :class:`MomentFit`: t intervals and p-values on n − k df."""
    from scipy import stats

    se = np.sqrt(np.maximum(np.diag(fit.cov_unscaled) * fit.scale, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = fit.coef / se
    q = float(stats.t.ppf(0.5 + level / 2.0, fit.df_resid))
    coefficients = pd.DataFrame({
        "coefficient": [INTERCEPT_LABEL] + [label for _, _, label, _ in labels],
        "term": [INTERCEPT_LABEL] + [term for term, _, _, _ in labels],
        "estimate": fit.coef,
        "std_error": se,
        "ci_low": fit.coef - q * se,
        "ci_high": fit.coef + q * se,
        "p_value_optimistic": 2.0 * stats.t.sf(np.abs(t), fit.df_resid),
    })
    params = pd.Series(fit.coef, index=list(coefficients["coefficient"]))
    return ModelFit(
        subset=subset,
        terms=_term_names(candidates, subset),
        coefficients=coefficients,
        equation=_equation(lhs, params, labels),
        n=fit.n,
        k=fit.k,
        sigma=float(np.sqrt(fit.scale)),
    )


# --------------------------------------------------------------------------- stability


def _best_of(found, criterion, *, convention, tss, log_jacobian, names, candidates=None):
    """Index of the best model of one Found by an rss-based criterion (ties: n_terms, names)."""
    k = found.k
    if candidates is not None:
        k = k + np.array([candidates.powers_from_response(sub) for sub in found.subsets], dtype=np.int64)
    values = _criteria.compute(found.rss, found.n, k, tss=tss, convention=convention,
                               log_jacobian=log_jacobian,
                               sigma2_full=_sigma2_largest(found) if criterion == "cp" else None)
    primary = values[criterion]
    order = _order_key(primary, _criteria.LOWER_IS_BETTER[criterion],
                       [len(s) for s in found.subsets], names)
    return order[0]


def _sigma2_largest(found):
    i = int(np.argmax(found.k))
    dof = found.n - int(found.k[i])
    return float(found.rss[i]) / dof if dof > 0 and found.rss[i] > 0 else np.nan


def _resample(candidates, rows):
    return dataclasses.replace(
        candidates,
        matrix=np.ascontiguousarray(candidates.matrix[rows]),
        y=np.asarray(candidates.y)[rows],
        weights=None if candidates.weights is None else np.asarray(candidates.weights)[rows],
    )


def _call_runner(runner, candidates, moments):
    try:
        parameters = inspect.signature(runner).parameters
    except (TypeError, ValueError):
        parameters = {}
    if "moments" in parameters:
        return runner(candidates, moments=moments)
    return runner(candidates)


#: Marks a replicate the time budget cut (left out of the shares, counted in the notes).
_CUT = "cut by the time budget"


def _replicate(payload):
    """One bootstrap replicate (module level so that it pickles)."""
    candidates, runner, seed_sequence, criterion, convention = payload
    rng = np.random.default_rng(seed_sequence)
    n = candidates.matrix.shape[0]
    rows = rng.integers(0, n, size=n)
    sample = _resample(candidates, rows)
    moments = moments_of(sample)
    try:
        found = _call_runner(runner, sample, moments)
    except BudgetSpent:
        return _CUT, None  # the run's time budget ran out: this replicate is left out, and said so
    except (SelectkitError, np.linalg.LinAlgError) as err:
        # A resample can make a model singular (a rare level drawn zero times): the replicate
        # is counted as failed and reported, never silently dropped.
        return None, f"{type(err).__name__}: {err}"
    if len(found) == 0:
        return None, "the search kept no model"
    names = [_term_names(candidates, s) for s in found.subsets]
    # Every model of one Found shares the response transform, so its log-Jacobian is a
    # constant that cannot change which model is best: 0 is used.
    best = _best_of(found, criterion, convention=convention, tss=moments.tss, log_jacobian=0.0, names=names,
                    candidates=candidates)
    return found.subsets[best], None


def stability(
    candidates,
    runner: Callable,
    *,
    n_boot=50,
    seed=0,
    n_jobs=1,
    backend="loky",
    criterion="bic",
    convention="sigma-counted",
    deadline=None,
) -> Stability:
    """Bootstrap stability of the selection: how often each variable and form is chosen.

    Each of ``n_boot`` replicates draws n rows with replacement (a
    ``numpy.random.Generator`` seeded by child ``b`` of
    ``SeedSequence(seed).spawn(n_boot)``), rebuilds the moments on those rows,
    runs ``runner`` on the resampled candidate set and keeps the best model by
    ``criterion``.  The share of replicates whose best model holds a variable
    estimates how firmly the data select it, in the spirit of stability
    selection (Meinshausen & Bühlmann 2010); model-selection bootstraps of
    this kind go back to Sauerbrei & Schumacher (1992).

    Parameters
    ----------
    candidates : CandidateSet
    runner : callable
        ``runner(candidates) -> Found`` (or ``runner(candidates, moments=...)``
        when it has a ``moments`` parameter: it then receives the resampled
        moments).  Must be picklable (a module-level function or a
        ``functools.partial`` of one) when ``n_jobs != 1``.
    n_boot : int, default 50
    seed : int, default 0
    n_jobs : int, default 1
    backend : str, default "loky"
        See :func:`selectkit.parallel.run_units`; results are identical for any
        ``n_jobs`` and backend.
    criterion : str, default "bic"
        Picks each replicate's best model: ``aic``, ``aicc``, ``bic``, ``cp`` or
        ``adj_r2``.  The cross-validated criteria (``press``, ``cv_mse``,
        ``holdout_mse``) are replaced by AICc, with a note.
    convention : str, default "sigma-counted"
    deadline : selectkit._budget.Deadline, optional
        The run's time budget.  No replicate starts once it has run out, and a
        replicate it cuts (``runner`` raises ``BudgetSpent``) is left out; the
        shares rest on the replicates that finished, ``n_boot`` counts them
        and ``notes`` say how many of those asked for ran.  Without a deadline
        every replicate runs.

    Returns
    -------
    Stability or None
        None only with a ``deadline`` that ran out before the search on all
        rows or the first replicate finished.

    Notes
    -----
    Forms whose transform has a fitted parameter (Box-Cox λ) keep the value
    fitted on the full data; the bootstrap does not refit it, so it slightly
    understates the uncertainty of such forms.

    References
    ----------
    Meinshausen, N. and Bühlmann, P. (2010). Stability selection. J. R. Statist.
    Soc. B 72(4), 417-473.
    Sauerbrei, W. and Schumacher, M. (1992). A bootstrap resampling procedure
    for model building. Statistics in Medicine 11, 2093-2109.
    """
    criterion = _criteria.check_criterion(criterion)
    notes = []
    if criterion in SCORE_COLUMNS:
        # Cross-validating inside every replicate would multiply the cost by the folds;
        # the replicates are ranked by AICc instead, and the result says so.
        notes.append(f"Replicates were ranked by AICc: {criterion} would need cross-validation "
                     "inside every replicate.")
        criterion = "aicc"
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 1:
        raise OptionError(f"n_boot must be a whole number of replicates ≥ 1 (got {n_boot!r})")
    moments = moments_of(candidates)
    asked = int(n_boot)
    try:
        full = _call_runner(runner, candidates, moments)
    except BudgetSpent:
        return None  # the repeat on the full data did not finish: no replicate can be compared with it
    if len(full) == 0:
        raise SearchError("the search kept no model on the full data; stability cannot be assessed")
    names = [_term_names(candidates, s) for s in full.subsets]
    full_best = full.subsets[_best_of(full, criterion, convention=convention, tss=moments.tss,
                                      log_jacobian=0.0, names=names, candidates=candidates)]
    units = [(candidates, runner, child, criterion, convention) for child in spawn_seeds(seed, n_boot)]
    arrived = [0]

    def heard(index, result):
        arrived[0] += 1
        _stages.step("bootstrap resamples", arrived[0], len(units))

    _stages.step("bootstrap resamples", 0, len(units))
    results = run_units(_replicate, units, n_jobs=n_jobs, backend=backend, should_stop=deadline, on_result=heard)
    finished = [r for r in results if r[0] is not _CUT]
    if deadline is not None and len(finished) < asked:
        notes.append(f"The {deadline.describe()} ran out during the bootstrap: {len(finished)} of {asked} "
                     f"resamples finished; the shares rest on those {len(finished)}.")
        if not finished:
            return None
        results, n_boot = finished, len(finished)
    chosen = [subset for subset, _ in results]
    messages = sorted({message for _, message in results if message})
    ok = [s for s in chosen if s is not None]
    failed = len(chosen) - len(ok)
    count = max(len(ok), 1)
    term_counts = np.zeros(len(candidates.terms))
    for s in ok:
        for i in s:
            term_counts[i] += 1
    families: list[str] = []
    for term in candidates.terms:
        if term.family not in families:
            families.append(term.family)
    family_counts = dict.fromkeys(families, 0)
    for s in ok:
        for fam in {candidates.terms[i].family for i in s}:
            family_counts[fam] += 1
    variable_share = pd.DataFrame({
        "variable": families,
        "share_selected": [family_counts[f] / count for f in families],
    })
    variable_share = variable_share.iloc[
        sorted(range(len(families)), key=lambda i: (-variable_share["share_selected"].iloc[i], families[i]))
    ].reset_index(drop=True)
    form_share = pd.DataFrame({
        "term": [t.name for t in candidates.terms],
        "variable": [t.family for t in candidates.terms],
        "share_selected": term_counts / count,
    })
    if failed:
        notes.append(f"{failed} of {n_boot} replicates failed and were left out: " + "; ".join(messages[:3]))
    return Stability(
        n_boot=int(n_boot),
        seed=int(seed) if isinstance(seed, (int, np.integer)) else seed,
        criterion=criterion,
        variable_share=variable_share,
        form_share=form_share,
        full_data_best=_term_names(candidates, full_best),
        share_same_as_full=sum(s == full_best for s in ok) / count if ok else float("nan"),
        replicate_models=tuple(chosen),
        failed=failed,
        notes=tuple(notes),
    )
