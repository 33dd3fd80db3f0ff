"""Cross-validated scores and selection, computed from moments.

Fold schemes
------------
:func:`shuffled_folds` (K-fold on a seeded permutation, optionally repeated),
:func:`blocked_folds` (K contiguous blocks in row order, for time-ordered
data), :func:`holdout_split` (one held-out part) and :func:`group_folds` (one
fold per group label: leave-one-group-out).  Wherever ``folds`` is accepted an
integer ``K`` means ``shuffled_folds(K)``.

A fold never costs a pass over all the data: its own rows give ``Moments(fold)``
and the training moments are ``Moments(all) − Moments(fold)``; the fold's
squared prediction error comes from :func:`selectkit.moments.heldout_sse`.

Conventions
-----------
* Fold error: ``MSE_f = SSE_f / W_f`` (``W_f`` the fold's weight sum, its row
  count without weights).
* ``cv_mse`` is the mean of the fold MSEs; ``cv_se`` is their standard
  deviation divided by √K within each repetition, averaged over repetitions
  (Hastie, Tibshirani & Friedman 2009, §7.10; averaging over repeats rather than
  dividing by √(K·R) is common practice, no source, and avoids pretending the
  repeats are independent).
* PRESS = Σ wᵢ (eᵢ/(1 − hᵢᵢ))², the exact leave-one-out error (Allen 1974),
  from one QR factorisation of each model on the data.

Caution: the cross-validated error of the model a search picked is an
optimistic estimate of its error on new data, because the same folds chose it;
:func:`nested_cv_error` measures the whole procedure honestly (Varma & Simon
2006; Cawley & Talbot 2010).

References
----------
Allen, D. M. (1974). The relationship between variable selection and data
    augmentation and a method for prediction. Technometrics 16(1), 125-127.
Breiman, L., Friedman, J., Olshen, R. and Stone, C. (1984). Classification and
    Regression Trees. Wadsworth. (the one-standard-error rule)
Hastie, T., Tibshirani, R. and Friedman, J. (2009). The Elements of Statistical
    Learning, 2nd ed., §7.10. Springer.
Varma, S. and Simon, R. (2006). Bias in error estimation when using
    cross-validation for model selection. BMC Bioinformatics 7, 91.
Cawley, G. C. and Talbot, N. L. C. (2010). On over-fitting in model selection
    and subsequent selection bias in performance evaluation. JMLR 11, 2079-2107.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, Sequence

import numpy as np
import pandas as pd

from .. import _kept, _stages
from ..errors import InputError, OptionError, SearchError, TooManyCandidatesError
from ..moments import compute_moments, heldout_sse, moments_of
from ..parallel import WorkUnit, run_units, spawn_seeds
from ._found import Found

__all__ = [
    "FoldScheme", "Fold", "shuffled_folds", "blocked_folds", "holdout_split", "group_folds", "make_folds",
    "press", "score_subsets", "CrossvalOptions", "plan", "run_unit", "merge", "cv_select",
    "NestedResult", "nested_cv_error", "procedure_cv_error", "INNER_METHODS",
]

FOLD_KINDS = ("shuffled", "blocked", "holdout", "groups")
INNER_METHODS = ("exhaustive", "stepwise")
#: Entry and removal level of the forward path used when ``method="stepwise"``:
#: close to 1 so the path runs (almost) to the full model, one model per size.
_PATH_ALPHA = 0.9999


# --------------------------------------------------------------------------- folds
@dataclass(frozen=True)
class FoldScheme:
    """How rows are split into folds; build it with the helper functions.

    Attributes
    ----------
    kind : {"shuffled", "blocked", "holdout", "groups"}
    k : int
        Number of folds (shuffled, blocked).
    repeats : int
        Repetitions of a shuffled K-fold, each with its own permutation.
    fraction : float
        Share of rows held out (holdout).
    labels : tuple or None
        One group label per row (groups).
    """

    kind: str = "shuffled"
    k: int = 5
    repeats: int = 1
    fraction: float = 0.25
    labels: tuple | None = None

    def __post_init__(self):
        if self.kind not in FOLD_KINDS:
            raise OptionError(f"unknown fold scheme {self.kind!r}; choose one of {', '.join(FOLD_KINDS)}")
        if self.kind in ("shuffled", "blocked") and (isinstance(self.k, bool) or not isinstance(self.k, (int, np.integer))
                                                   or self.k < 2):
            raise OptionError(f"the number of folds must be a whole number of at least 2 (got {self.k!r})")
        if isinstance(self.repeats, bool) or not isinstance(self.repeats, (int, np.integer)) or self.repeats < 1:
            raise OptionError(f"repeats must be a positive whole number (got {self.repeats!r})")
        if not 0.0 < float(self.fraction) < 1.0:
            raise OptionError(f"the held-out fraction must lie strictly between 0 and 1 (got {self.fraction!r})")
        if self.kind == "groups" and self.labels is None:
            raise OptionError("group folds need one group label per row; build them with group_folds(labels)")

    def describe(self) -> str:
        """A short readable description, e.g. ``"5-fold, shuffled, 10 repeats"``."""
        if self.kind == "shuffled":
            return f"{self.k}-fold, shuffled" + (f", {self.repeats} repeats" if self.repeats > 1 else "")
        if self.kind == "blocked":
            return f"{self.k} contiguous blocks in row order"
        if self.kind == "holdout":
            return f"one held-out part of {self.fraction:.0%} of the rows"
        return f"one fold per group ({len(set(self.labels))} groups)"


@dataclass(frozen=True)
class Fold:
    """One fold: which repetition it belongs to and its (sorted) test rows."""

    repeat: int
    index: int
    test_rows: np.ndarray


def shuffled_folds(k: int = 5, repeats: int = 1) -> FoldScheme:
    """K-fold on a permutation drawn from the seed; ``repeats`` independent permutations."""
    return FoldScheme(kind="shuffled", k=k, repeats=repeats)


def blocked_folds(k: int = 5) -> FoldScheme:
    """K contiguous blocks in row order (time-ordered data: no shuffling)."""
    return FoldScheme(kind="blocked", k=k)


def holdout_split(fraction: float = 0.25) -> FoldScheme:
    """One random held-out part of ``fraction`` of the rows (at least one row)."""
    return FoldScheme(kind="holdout", fraction=float(fraction))


def group_folds(labels) -> FoldScheme:
    """One fold per distinct label (all rows of a group are held out together)."""
    labels = tuple(pd.Series(list(labels)).astype(str).tolist())
    return FoldScheme(kind="groups", labels=labels)


def _as_scheme(folds) -> FoldScheme:
    if isinstance(folds, FoldScheme):
        return folds
    if isinstance(folds, (int, np.integer)) and not isinstance(folds, bool):
        return shuffled_folds(int(folds))
    raise OptionError(
        f"folds must be a whole number K (K-fold) or a FoldScheme from shuffled_folds, blocked_folds, "
        f"holdout_split or group_folds (got {folds!r})"
    )


def make_folds(folds, n: int, seed=0) -> list[Fold]:
    """The folds of ``n`` rows under a scheme, drawn from ``seed``.

    Repetition ``r`` of a shuffled scheme (and the holdout draw) uses child
    ``r`` of ``SeedSequence(seed).spawn(repeats)``, so the folds depend only on
    the seed.
    """
    scheme = _as_scheme(folds)
    if scheme.kind in ("shuffled", "blocked") and scheme.k > n:
        raise InputError(f"{scheme.k} folds need at least {scheme.k} rows; the data have {n}; use fewer folds")
    out = []
    if scheme.kind == "shuffled":
        for r, child in enumerate(spawn_seeds(seed, scheme.repeats)):
            perm = np.random.default_rng(child).permutation(n)
            for i, part in enumerate(np.array_split(perm, scheme.k)):
                out.append(Fold(r, i, np.sort(part)))
    elif scheme.kind == "blocked":
        for i, part in enumerate(np.array_split(np.arange(n), scheme.k)):
            out.append(Fold(0, i, part))
    elif scheme.kind == "holdout":
        size = max(1, int(round(scheme.fraction * n)))
        if size >= n:
            raise InputError(f"a held-out part of {size} rows leaves no training rows out of {n}; lower the fraction")
        perm = np.random.default_rng(spawn_seeds(seed, 1)[0]).permutation(n)
        out.append(Fold(0, 0, np.sort(perm[:size])))
    else:
        labels = np.asarray(scheme.labels, dtype=object)
        if labels.shape[0] != n:
            raise InputError(f"group labels have {labels.shape[0]} entries but the data have {n} rows; give one per row")
        groups = sorted(set(labels.tolist()))
        if len(groups) < 2:
            raise InputError(f"group folds need at least 2 groups; the labels hold {len(groups)}")
        for i, g in enumerate(groups):
            out.append(Fold(0, i, np.flatnonzero(labels == g)))
    return out


# ------------------------------------------------------------------------ helpers
def _columns(candidates, subset):
    return [c for i in subset for c in candidates.terms[i].columns]


def _terms_only(candidates):
    """A copy of ``candidates`` without the rows (for work units that only need terms and moments)."""
    from dataclasses import fields, replace

    changes = {}
    for f in fields(candidates):
        value = getattr(candidates, f.name)
        if f.name == "matrix":
            changes[f.name] = np.empty((0, value.shape[1]))
        elif f.name == "y":
            changes[f.name] = np.empty(0)
        elif f.name == "dataset" or isinstance(value, np.ndarray):
            changes[f.name] = None
    return replace(candidates, **changes)


def _rows_moments(candidates, rows):
    w = None if candidates.weights is None else candidates.weights[rows]
    return compute_moments(candidates.matrix[rows], candidates.y[rows], w)


def _fold_moments(candidates, moments, folds):
    """(train, test) moments of each fold: test from its rows, train by subtraction."""
    pairs = []
    for fold in folds:
        test = _rows_moments(candidates, fold.test_rows)
        pairs.append((moments - test, test))
    return pairs


def folds_and_moments(candidates, moments, folds, seed):
    """The folds of a scheme and their (train, test) moments.

    For a table read in parts (``candidates.parts``) the test moments were
    formed in the moments pass (the fold of a row from a seeded hash of its
    position); otherwise from the rows held here.
    """
    parts = getattr(candidates, "parts", None)
    if parts is not None:
        return parts.fold_pairs(moments, folds, seed)
    fold_list = make_folds(folds, int(candidates.y.shape[0]), seed)
    return fold_list, _fold_moments(candidates, moments, fold_list)


def _se_by_repeat(errors: np.ndarray, repeats: np.ndarray) -> float:
    per = []
    for r in np.unique(repeats):
        e = errors[repeats == r]
        if e.shape[0] > 1:
            per.append(np.std(e, ddof=1) / np.sqrt(e.shape[0]))
    return float(np.mean(per)) if per else float("nan")


def press(candidates, subset) -> float:
    """PRESS = Σ wᵢ (eᵢ/(1 − hᵢᵢ))² of one model (Allen 1974), by one QR factorisation.

    ``hᵢᵢ`` is the diagonal of the (weighted) hat matrix of ``[1, X_subset]``;
    the value equals the leave-one-out squared prediction error.  Infinite
    when some ``hᵢᵢ = 1`` (a row fitted exactly by itself); NaN when the model
    is rank-deficient.
    """
    cols = _columns(candidates, subset)
    n = candidates.y.shape[0]
    A = np.column_stack([np.ones(n), candidates.matrix[:, cols]]) if cols else np.ones((n, 1))
    y = candidates.y
    if candidates.weights is not None:
        root = np.sqrt(candidates.weights)
        A, y = A * root[:, None], y * root
    Q, R = np.linalg.qr(A)
    diag = np.abs(np.diag(R))
    if diag.min() <= 1e-10 * max(diag.max(), 1e-300) * np.sqrt(n):
        return float("nan")
    resid = y - Q @ (Q.T @ y)
    h = np.einsum("ij,ij->i", Q, Q)
    with np.errstate(divide="ignore"):
        loo = resid / (1.0 - h)
    loo = np.where(h >= 1.0 - 1e-12, np.inf, loo)
    return float(loo @ loo)


def press_of(candidates, moments, subsets) -> dict:
    """PRESS of each model of ``subsets`` (``subset → value``): one QR per model over the rows held here
    (:func:`press`), or, for a table read in parts, one pass over its parts for all of them
    (:meth:`selectkit.parts.PartsInfo.press`)."""
    subsets = list(dict.fromkeys(tuple(s) for s in subsets))
    parts = getattr(candidates, "parts", None)
    if parts is not None:
        return parts.press(moments, {s: _columns(candidates, s) for s in subsets}) if subsets else {}
    return {s: press(candidates, s) for s in subsets}


def score_subsets(candidates, subsets, *, folds=5, seed=0, moments=None, holdout=None,
                  press_for=None) -> pd.DataFrame:
    """PRESS, K-fold CV error and held-out error of given models.

    Parameters
    ----------
    candidates : CandidateSet
    subsets : sequence of sequence of int
        Models as term indices into ``candidates.terms`` (intercept implicit).
    folds : int or FoldScheme, default 5
        Cross-validation scheme (an int K means shuffled K-fold).  Every model
        is scored on the same folds.
    seed : int, default 0
        Seed of the fold draw.
    moments : Moments, optional
        Of all rows; computed when omitted.
    holdout : float, array of bool or array of int, optional
        A part of the rows to hold out: a fraction (drawn from ``seed``), a
        boolean mask or row indices.  ``holdout_mse`` is the error on it of the
        model fitted on the other rows.  PRESS and CV use all rows.  When
        ``folds`` is itself a :func:`holdout_split`, its one fold fills
        ``holdout_mse`` too.
    press_for : collection of subsets, optional
        Compute PRESS only for these models (the others get NaN).  PRESS needs
        the rows (one QR per model), unlike the CV errors, which come from
        moments; the ranker asks for it only where it is shown.

    Returns
    -------
    pandas.DataFrame
        One row per subset, in the given order, with columns ``subset``
        (sorted tuple), ``k`` (coefficients including the intercept),
        ``rss``, ``press``, ``cv_mse`` (mean fold MSE), ``cv_se`` (its
        standard error, see the module notes), ``n_folds`` and
        ``holdout_mse`` (NaN when no held-out part).  A rank-deficient model
        (on all rows or on some training fold) gets NaN scores.

    Examples
    --------
    >>> import numpy as np
    >>> from tests.factories import make_candidates
    >>> rng = np.random.default_rng(0); X = rng.normal(size=(40, 3)); y = X[:, 0] + rng.normal(size=40)
    >>> table = score_subsets(make_candidates(X, y), [(0,), (0, 1)], folds=5)
    >>> list(table.columns)
    ['subset', 'k', 'rss', 'press', 'cv_mse', 'cv_se', 'n_folds', 'holdout_mse']
    """
    if moments is None:
        moments = moments_of(candidates)
    n = int(candidates.y.shape[0])
    subsets = [tuple(sorted(int(i) for i in s)) for s in subsets]
    if press_for is not None:
        press_for = {tuple(sorted(int(i) for i in s)) for s in press_for}
    n_terms = len(candidates.terms)
    for s in subsets:
        bad = [i for i in s if not 0 <= i < n_terms]
        if bad:
            raise InputError(f"subset {s} names term index {bad[0]}; the candidates hold {n_terms} terms (0..{n_terms - 1})")
    fold_list, pairs = folds_and_moments(candidates, moments, folds, seed)
    repeats = np.array([f.repeat for f in fold_list])
    hold_pair = None
    parts = getattr(candidates, "parts", None)
    if holdout is not None and parts is not None:
        raise OptionError("a held-out part needs the rows in memory; a table read in parts has its CV errors")
    if holdout is not None:
        rows = _holdout_rows(holdout, n, seed)
        test = _rows_moments(candidates, rows)
        hold_pair = (moments - test, test)
    from ..moments import solve

    records = []
    for s in subsets:
        cols = _columns(candidates, s)
        try:
            rss = solve(moments, cols).rss
        except SearchError:
            rss = float("nan")
        errors = []
        for train, test in pairs:
            try:
                errors.append(heldout_sse(train, test, cols) / test.weight_sum)
            except SearchError:
                errors.append(np.nan)
        errors = np.asarray(errors)
        bad = not np.all(np.isfinite(errors))
        hold = float("nan")
        if hold_pair is not None:
            try:
                hold = heldout_sse(hold_pair[0], hold_pair[1], cols) / hold_pair[1].weight_sum
            except SearchError:
                pass
        records.append({
            "subset": s, "k": 1 + len(cols), "rss": rss, "press": float("nan"),
            "cv_mse": float("nan") if bad else float(errors.mean()),
            "cv_se": float("nan") if bad else _se_by_repeat(errors, repeats),
            "n_folds": len(fold_list), "holdout_mse": hold,
        })
    columns = ["subset", "k", "rss", "press", "cv_mse", "cv_se", "n_folds", "holdout_mse"]
    table = pd.DataFrame.from_records(records, columns=columns)
    wanted = [r["subset"] for r in records if np.isfinite(r["rss"]) and (press_for is None or r["subset"] in press_for)]
    found = press_of(candidates, moments, wanted)
    table["press"] = [found.get(s, float("nan")) for s in table["subset"]]
    if holdout is None and _as_scheme(folds).kind == "holdout":
        table["holdout_mse"] = table["cv_mse"]  # the one fold is the held-out part
    return table


def _holdout_rows(holdout, n, seed):
    if isinstance(holdout, (float, np.floating)):
        return make_folds(holdout_split(float(holdout)), n, seed)[0].test_rows
    arr = np.asarray(holdout)
    if arr.dtype == bool:
        if arr.shape != (n,):
            raise InputError(f"the held-out mask has {arr.shape[0]} entries; the data have {n} rows")
        rows = np.flatnonzero(arr)
    else:
        rows = np.unique(arr.astype(np.int64))
        if rows.size and (rows[0] < 0 or rows[-1] >= n):
            raise InputError(f"held-out row indices must lie in 0..{n - 1}")
    if rows.size == 0 or rows.size >= n:
        raise InputError(f"the held-out part has {rows.size} of {n} rows; it must hold some rows but not all")
    return rows



# ------------------------------------------------------------------ selection by CV
@dataclass(frozen=True)
class CrossvalOptions:
    """Options of :func:`cv_select` (and of the inner selection of :func:`nested_cv_error`).

    Attributes
    ----------
    method : {"exhaustive", "stepwise"}
        Inner search run on every training fold and on all rows.
        ``"exhaustive"`` keeps the best model of each size (exact search);
        ``"stepwise"`` follows one forward path by partial F run almost to the
        full model (entry level 0.9999), one model per size.
    folds : int or FoldScheme, default 5
    one_standard_error : bool, default False
        Choose the smallest model whose CV error is within one standard error
        of the minimum (Breiman et al. 1984; Hastie et al. 2009, §7.10).
    seed : int, default 0
    exact_limit : int, default 64
        Largest number of terms the exhaustive inner search takes.
    max_size : int or None
        Largest model considered (columns for the exhaustive search, steps for the path).
    forced, forbidden : tuple of str
    hierarchy : bool
    time_budget : float or None
        Seconds for each inner exhaustive search.
    """

    method: str = "exhaustive"
    folds: Any = 5
    one_standard_error: bool = False
    seed: int = 0
    exact_limit: int = 64
    max_size: int | None = None
    forced: tuple = ()
    forbidden: tuple = ()
    hierarchy: bool = True
    time_budget: float | None = None

    def __post_init__(self):
        if self.method not in INNER_METHODS:
            raise OptionError(f"unknown inner search {self.method!r} for cross-validation; "
                              f"choose one of {', '.join(INNER_METHODS)}")
        object.__setattr__(self, "folds", _as_scheme(self.folds))
        object.__setattr__(self, "forced", tuple(self.forced))
        object.__setattr__(self, "forbidden", tuple(self.forbidden))


def _check_size(candidates, options: CrossvalOptions) -> None:
    if options.method == "exhaustive" and len(candidates.terms) > options.exact_limit:
        raise TooManyCandidatesError(
            f"{len(candidates.terms)} candidate terms exceed the exact-search limit of {options.exact_limit} "
            "for cross-validated exhaustive search; screen them first (selectkit.searches.screen), raise the "
            "limit, or use method='stepwise'"
        )


def _inner_search(candidates, moments, options: CrossvalOptions) -> Found:
    _check_size(candidates, options)
    if options.method == "exhaustive":
        from . import exhaustive

        # The fold is already a work unit: run the exact search as one unit (split_depth=0), through the
        # method contract of selectkit.searches.exhaustive.
        inner = exhaustive.ExhaustiveOptions(n_best_per_size=1, max_size=options.max_size, forced=options.forced,
                                             forbidden=options.forbidden, hierarchy=options.hierarchy,
                                             time_budget=options.time_budget, split_depth=0)
        units = exhaustive.plan(candidates, moments, inner)
        return exhaustive.merge(candidates, moments, inner, [exhaustive.run_unit(u) for u in units])
    from .stepwise import stepwise_search

    return stepwise_search(candidates, moments, method="forward", criterion="f_test",
                           alpha_enter=_PATH_ALPHA, alpha_remove=_PATH_ALPHA, swaps=False,
                           forced=options.forced, forbidden=options.forbidden, hierarchy=options.hierarchy,
                           max_steps=options.max_size)


def _best_by_k(found: Found, names) -> dict:
    """k → (subset, rss) with the lowest rss (ties: term names)."""
    best = {}
    for subset, rss, k in zip(found.subsets, found.rss, found.k):
        if not np.isfinite(rss):
            continue
        key = (float(rss), tuple(sorted(names[i] for i in subset)))
        if int(k) not in best or key < best[int(k)][2]:
            best[int(k)] = (subset, float(rss), key)
    return {k: (v[0], v[1]) for k, v in sorted(best.items())}


def _fold_errors(candidates, train, test, options) -> dict:
    """Inner search on a training fold; held-out MSE of its best model of each size."""
    found = _inner_search(candidates, train, options)
    names = [t.name for t in candidates.terms]
    out = {}
    for k, (subset, _) in _best_by_k(found, names).items():
        try:
            out[k] = (subset, heldout_sse(train, test, _columns(candidates, subset)) / test.weight_sum)
        except SearchError:
            continue
    return out


def plan(candidates, moments, options: CrossvalOptions) -> list[WorkUnit]:
    """Units: the search on all rows (``crossval/all-rows``), then one per fold."""
    _check_size(candidates, options)
    if moments is None:
        moments = moments_of(candidates)
    fold_list, pairs = folds_and_moments(candidates, moments, options.folds, options.seed)
    light = _terms_only(candidates)
    units = [WorkUnit("crossval/all-rows", ("all", light, moments, None, options))]
    for fold, (train, test) in zip(fold_list, pairs):
        units.append(WorkUnit(f"crossval/fold-r{fold.repeat:02d}-{fold.index:03d}",
                              ("fold", light, train, test, options, fold.repeat)))
    return units


def run_unit(unit: WorkUnit):
    """Run one unit: the all-rows search (returns a Found) or a fold (returns its errors by size)."""
    kind, candidates, first, second, options, *rest = unit.payload
    if kind == "all":
        return _inner_search(candidates, first, options)
    return {"repeat": rest[0], "errors": _fold_errors(candidates, first, second, options)}


def _cv_table(fold_results, sizes):
    repeats = np.array([r["repeat"] for r in fold_results])
    rows = []
    for k in sizes:
        errs = np.array([r["errors"][k][1] if k in r["errors"] else np.nan for r in fold_results])
        if not np.all(np.isfinite(errs)):
            continue  # a size some fold could not fit (rank-deficient or not reached) is left out
        rows.append({"k": k, "cv_mse": float(errs.mean()), "cv_se": _se_by_repeat(errs, repeats),
                     "n_folds": len(errs)})
    return pd.DataFrame.from_records(rows, columns=["k", "cv_mse", "cv_se", "n_folds"])


def _choose_k(table: pd.DataFrame, one_standard_error: bool) -> int:
    best = int(np.argmin(table["cv_mse"].to_numpy()))  # first minimum: the smaller model on ties
    if not one_standard_error:
        return int(table["k"].iloc[best])
    se = table["cv_se"].iloc[best]
    limit = table["cv_mse"].iloc[best] + (se if np.isfinite(se) else 0.0)
    return int(table["k"][table["cv_mse"] <= limit].min())


def merge(candidates, moments, options: CrossvalOptions, results: Sequence) -> Found:
    """Mean CV error by model size, the chosen size, and the best all-rows model of each size.

    ``details``: ``table`` (DataFrame ``k, cv_mse, cv_se, n_folds, subset,
    terms``), ``chosen`` (subset), ``chosen_terms``, ``chosen_k``, ``rule``,
    ``inner_method``, ``folds`` (description) and ``fold_models`` (per fold,
    k → subset chosen on its training rows).
    """
    n = int(candidates.y.shape[0]) if moments is None else int(moments.n)
    names = [t.name for t in candidates.terms]
    all_found = results[0] if results else None
    folds_done = [r for r in results[1:] if r is not None]
    if all_found is None or not folds_done:
        return Found(method="crossval", subsets=(), rss=np.zeros(0), k=np.zeros(0, dtype=np.int64), n=n,
                     stopped_by="stopped before the searches finished",
                     details=MappingProxyType({"table": pd.DataFrame(columns=["k", "cv_mse", "cv_se", "n_folds"])}))
    best = _best_by_k(all_found, names)
    table = _cv_table(folds_done, sorted(best))
    if table.empty:
        raise SearchError("no model size could be fitted on every training fold; use fewer folds or fewer terms")
    table["subset"] = [best[k][0] for k in table["k"]]
    table["terms"] = [", ".join(names[i] for i in s) or "(intercept only)" for s in table["subset"]]
    chosen_k = _choose_k(table, options.one_standard_error)
    chosen = best[chosen_k][0]
    missing = len(results) - 1 - len(folds_done)
    ks = sorted(best)
    return Found(
        method="crossval", subsets=tuple(best[k][0] for k in ks), rss=np.array([best[k][1] for k in ks]),
        k=np.array(ks, dtype=np.int64), n=n,
        evaluated=int(all_found.evaluated), pruned=int(all_found.pruned), singular=int(all_found.singular),
        exact=False,
        stopped_by="completed" if not missing else f"{missing} fold(s) did not finish; CV error from the rest",
        details=MappingProxyType({
            "table": table, "chosen": chosen, "chosen_terms": tuple(names[i] for i in chosen),
            "chosen_k": chosen_k,
            "rule": "one standard error" if options.one_standard_error else "minimum CV error",
            "inner_method": options.method, "folds": options.folds.describe(),
            "fold_models": tuple({k: v[0] for k, v in r["errors"].items()} for r in folds_done),
        }),
    )


def cv_select(candidates, *, method: str = "exhaustive", folds=5, one_standard_error: bool = False, seed=0,
              moments=None, max_size=None, forced=(), forbidden=(), hierarchy=True, exact_limit=64,
              time_budget=None, n_jobs=1, backend="loky", scheduler=None) -> Found:
    """Choose the model size by cross-validated error, the inner search rerun on every training fold.

    For each fold the inner search (exact best subset of each size, or a
    forward path) runs on the training moments ``Moments(all) − Moments(fold)``
    and the held-out MSE of its best model of each size ``k`` is recorded.
    The size with the lowest mean CV error is chosen — or, with
    ``one_standard_error=True``, the smallest size whose mean error is within
    one standard error of that minimum (Breiman et al. 1984; ESL §7.10) — and
    the model returned for it is the best of that size on all rows.

    Parameters
    ----------
    candidates : CandidateSet
    method : {"exhaustive", "stepwise"}
    folds : int or FoldScheme
    one_standard_error : bool
    seed : int
        Seed of the fold draw.
    moments : Moments, optional
    max_size, forced, forbidden, hierarchy, exact_limit, time_budget
        Passed to the inner search (see :class:`CrossvalOptions`).
    n_jobs, backend, scheduler
        Folds run as work units through :func:`selectkit.parallel.run_units`;
        the result does not depend on them.

    Returns
    -------
    Found
        ``method="crossval"``: the best all-rows model of each size (rss, k);
        ``details["table"]`` the CV error by size, ``details["chosen"]`` the pick.

    Notes
    -----
    The minimum CV error is an optimistic estimate of the chosen model's
    error; use :func:`nested_cv_error` for an honest one.
    """
    options = CrossvalOptions(method=method, folds=folds, one_standard_error=one_standard_error, seed=seed,
                              exact_limit=exact_limit, max_size=max_size, forced=tuple(forced),
                              forbidden=tuple(forbidden), hierarchy=hierarchy, time_budget=time_budget)
    if moments is None:
        moments = moments_of(candidates)
    units = plan(candidates, moments, options)
    results = run_units(run_unit, units, n_jobs=n_jobs, backend=backend, scheduler=scheduler)
    return merge(candidates, moments, options, results)


# ---------------------------------------------------------------------- nested CV
@dataclass(frozen=True)
class NestedResult:
    """Honest error of a selection procedure, from nested cross-validation.

    Attributes
    ----------
    error : float
        Mean over outer folds of the held-out MSE of the model the *whole
        procedure* chose on the outer training rows.
    standard_error : float
        Standard error of ``error`` (module conventions).
    naive_error : float
        The minimum CV error of the same procedure run once on all rows: the
        usual, optimistic figure reported for the selected model.
    optimism : float
        ``error − naive_error``.
    folds : pandas.DataFrame
        Per outer fold: ``repeat, fold, n_test, k, terms, test_mse, inner_cv_mse``.
    procedure : str
        What was repeated inside each outer fold.
    caution : str
    notes : tuple of str
        What cut the estimate short, when something did (the run's time
        budget: how many outer folds finished; the estimate rests on those).
    """

    error: float
    standard_error: float
    naive_error: float
    optimism: float
    folds: pd.DataFrame
    procedure: str
    caution: str = ("The error of a selected model, measured on the data that selected it, is optimistic; "
                    "this nested estimate repeats the whole selection inside each outer training part.")
    notes: tuple = ()


def _outer_split(candidates, moments, test_rows):
    """An outer fold: the training rows' candidates, their moments (by subtraction) and the test moments."""
    from dataclasses import replace

    train_rows = np.setdiff1d(np.arange(candidates.y.shape[0]), test_rows)
    test = _rows_moments(candidates, test_rows)
    sub = replace(candidates, matrix=candidates.matrix[train_rows], y=candidates.y[train_rows],
                  weights=None if candidates.weights is None else candidates.weights[train_rows])
    return sub, moments - test, test


def _nested_unit(payload):
    from dataclasses import replace

    candidates, moments, test_rows, inner_seed, options, repeat, index = payload
    sub, train, test = _outer_split(candidates, moments, test_rows)
    inner = replace(options, seed=inner_seed)
    units = plan(sub, train, inner)
    found = merge(sub, train, inner, [run_unit(u) for u in units])
    chosen = found.details["chosen"]
    table = found.details["table"]
    mse = heldout_sse(train, test, _columns(candidates, chosen)) / test.weight_sum
    return {"repeat": repeat, "fold": index, "n_test": int(test_rows.shape[0]), "k": int(found.details["chosen_k"]),
            "terms": ", ".join(found.details["chosen_terms"]) or "(intercept only)", "test_mse": float(mse),
            "inner_cv_mse": float(table["cv_mse"].min())}


def nested_cv_error(candidates, *, method: str = "exhaustive", outer_folds=5, inner_folds=5,
                    one_standard_error: bool = False, seed=0, moments=None, max_size=None, forced=(),
                    forbidden=(), hierarchy=True, exact_limit=64, time_budget=None, n_jobs=1, backend="loky",
                    scheduler=None) -> NestedResult:
    """Honest prediction error of the whole selection procedure (nested cross-validation).

    The outer folds split the rows; inside each outer training part the entire
    procedure of :func:`cv_select` (inner folds, inner search on every inner
    training fold, choice of size, best model of that size) is rerun, and the
    chosen model's error is measured on the outer fold it never saw (Varma &
    Simon 2006; Cawley & Talbot 2010).  The result estimates the error of the
    *procedure*, not of one winning model.

    Parameters
    ----------
    candidates : CandidateSet
    method : {"exhaustive", "stepwise"}
    outer_folds, inner_folds : int or FoldScheme
    one_standard_error : bool
    seed : int
        Outer folds are drawn from ``seed``; outer unit ``i`` draws its inner
        folds from child ``i`` of ``SeedSequence(seed).spawn(units)``.
    n_jobs, backend, scheduler
        Outer folds run as work units; the result is the same for any value.

    Returns
    -------
    NestedResult
    """
    options = CrossvalOptions(method=method, folds=inner_folds, one_standard_error=one_standard_error, seed=seed,
                              exact_limit=exact_limit, max_size=max_size, forced=tuple(forced),
                              forbidden=tuple(forbidden), hierarchy=hierarchy, time_budget=time_budget)
    if moments is None:
        moments = moments_of(candidates)
    n = int(candidates.y.shape[0])
    outer = make_folds(outer_folds, n, seed)
    children = spawn_seeds(seed, len(outer))
    payloads = [(candidates, moments, fold.test_rows, int(child.generate_state(1)[0]), options, fold.repeat,
                 fold.index) for fold, child in zip(outer, children)]
    rows = run_units(_nested_unit, payloads, n_jobs=n_jobs, backend=backend, scheduler=scheduler)
    table = pd.DataFrame.from_records(rows, columns=["repeat", "fold", "n_test", "k", "terms", "test_mse",
                                                     "inner_cv_mse"])
    errors = table["test_mse"].to_numpy()
    error = float(errors.mean())
    se = _se_by_repeat(errors, table["repeat"].to_numpy())
    naive = cv_select(candidates, method=method, folds=inner_folds, one_standard_error=one_standard_error,
                      seed=seed, moments=moments, max_size=max_size, forced=forced, forbidden=forbidden,
                      hierarchy=hierarchy, exact_limit=exact_limit, time_budget=time_budget)
    naive_table = naive.details["table"]
    naive_error = float(naive_table.loc[naive_table["k"] == naive.details["chosen_k"], "cv_mse"].iloc[0])
    procedure = (f"{options.method} search, model size chosen by "
                 f"{'the one-standard-error rule' if one_standard_error else 'minimum CV error'} "
                 f"over {options.folds.describe()} inside each of {_as_scheme(outer_folds).describe()} outer folds")
    return NestedResult(error=error, standard_error=se, naive_error=naive_error, optimism=error - naive_error,
                        folds=table, procedure=procedure)


def _procedure_unit(payload):
    """One outer fold of :func:`procedure_cv_error` (module level so that it pickles)."""
    from .. import criteria as _criteria
    from .._budget import BudgetSpent

    candidates, moments, runner, test_rows, criterion, convention, repeat, index = payload
    sub, train, test = _outer_split(candidates, moments, test_rows)
    try:
        found = runner(sub)
    except BudgetSpent:
        return None  # the run's time budget cut this fold's searches: left out, and said so
    if len(found) == 0:
        raise SearchError(f"outer fold {index + 1}: the searches kept no model on its {sub.y.shape[0]} training rows")
    # Every model of one Found shares the response transform: its log-Jacobian cannot change which is best.
    k = found.k + np.array([candidates.powers_from_response(sub) for sub in found.subsets], dtype=np.int64)
    values = _criteria.compute(found.rss, found.n, k, tss=train.tss, convention=convention)[criterion]
    sign = 1.0 if _criteria.LOWER_IS_BETTER[criterion] else -1.0
    names = [tuple(sorted(candidates.terms[j].name for j in s)) for s in found.subsets]
    best = min(range(len(found.subsets)),
               key=lambda i: (sign * values[i] if np.isfinite(values[i]) else np.inf, len(found.subsets[i]), names[i]))
    chosen = found.subsets[best]
    mse = heldout_sse(train, test, _columns(candidates, chosen)) / test.weight_sum
    return {"repeat": repeat, "fold": index, "n_test": int(test_rows.shape[0]), "k": int(found.k[best]),
            "terms": " + ".join(candidates.terms[j].name for j in chosen) or "(intercept only)",
            "test_mse": float(mse)}


def procedure_cv_error(candidates, runner, *, criterion="bic", convention="sigma-counted", folds=5, seed=0,
                       moments=None, naive_error=float("nan"), procedure="the searches and ranking",
                       n_jobs=1, backend="loky", scheduler=None, deadline=None) -> NestedResult | None:
    """Honest prediction error of a whole search-and-rank procedure by outer cross-validation.

    For each outer fold the *entire* procedure — ``runner`` (every search,
    pooled) and the choice of the best model by ``criterion`` — is repeated on
    the training rows alone, and the chosen model's squared prediction error is
    measured on the fold's rows, which took no part in the choice (Varma &
    Simon 2006; Cawley & Talbot 2010).  The mean is an estimate of the error of
    the procedure, free of the selection bias that makes the error of the
    winning model, measured on the data that chose it, optimistic.

    Parameters
    ----------
    candidates : CandidateSet
    runner : callable
        ``runner(candidate_set) -> Found`` (picklable), the pooled searches.
    criterion : str
        An rss-based criterion of :mod:`selectkit.criteria` (aic, aicc, bic, cp, adj_r2).
    folds : int or FoldScheme, default 5
        The outer folds.
    naive_error : float, optional
        The optimistic figure to compare with (e.g. the K-fold CV error of the
        model chosen on all rows).
    procedure : str
        Words for what was repeated, for the report.
    deadline : selectkit._budget.Deadline, optional
        The run's time budget: no outer fold starts once it has run out, and a
        fold whose searches it cut (``runner`` raises ``BudgetSpent``) is left
        out.  The estimate then rests on the folds that finished and ``notes``
        says how many; None when none finished.

    Returns
    -------
    NestedResult or None
        ``error`` (mean held-out MSE over outer folds), its standard error,
        ``naive_error``, ``optimism`` = error − naive_error, and the per-fold table.
    """
    from .. import criteria as _criteria

    criterion = _criteria.check_criterion(criterion)
    if criterion in ("press", "cv_mse", "holdout_mse"):
        raise OptionError(f"the honest error repeats the choice by an rss-based criterion; {criterion!r} is not one "
                          "(use aic, aicc, bic, cp or adj_r2)")
    if moments is None:
        moments = moments_of(candidates)
    outer = make_folds(folds, int(candidates.y.shape[0]), seed)
    payloads = [(candidates, moments, runner, fold.test_rows, criterion, convention, fold.repeat, fold.index)
                for fold in outer]
    # Each outer fold is a piece a job keeps as it finishes (selectkit._kept): a job killed during the
    # honest error resumes with the folds it had finished.
    keeper = _kept.current()
    names = [f"honest-fold/{fold.repeat:02d}-{fold.index:03d}" for fold in outer]
    rows: list = [None] * len(outer)
    todo = list(range(len(outer)))
    if keeper is not None:
        base = _kept.basis(moments.mean, moments.cross, criterion, convention, repr(_as_scheme(folds)), seed,
                           [t.name for t in candidates.terms])
        for i in list(todo):
            kept = keeper.get(names[i], base)
            if kept is not None:
                rows[i] = kept
                todo.remove(i)

    finished = [len(outer) - len(todo)]

    def arrived(j, row):
        if keeper is not None and row is not None:
            keeper.put(names[todo[j]], base, row)
        finished[0] += 1
        _stages.step("outer folds of the honest error", finished[0], len(outer))

    _stages.step("outer folds of the honest error", finished[0], len(outer))
    done = run_units(_procedure_unit, [payloads[i] for i in todo], n_jobs=n_jobs, backend=backend,
                     scheduler=scheduler, should_stop=deadline, on_result=arrived)
    for i, row in zip(todo, done):
        rows[i] = row
    rows = [row for row in rows if row is not None]
    notes = ()
    if len(rows) < len(outer):
        if not rows:
            return None
        notes = (f"The {deadline.describe()} ran out during the honest error: {len(rows)} of {len(outer)} outer "
                 f"folds finished; the estimate rests on those {len(rows)}.",)
    table = pd.DataFrame.from_records(rows, columns=["repeat", "fold", "n_test", "k", "terms", "test_mse"])
    errors = table["test_mse"].to_numpy()
    error = float(errors.mean())
    return NestedResult(error=error, standard_error=_se_by_repeat(errors, table["repeat"].to_numpy()),
                        naive_error=float(naive_error), optimism=error - float(naive_error), folds=table,
                        procedure=(f"{procedure}, best model by {criterion.upper()}, repeated inside each of "
                                   f"{_as_scheme(folds).describe()} outer folds"
                                   + (f" ({len(rows)} of them finished within the time budget)" if notes else "")),
                        notes=notes)
