"""Screening: cut a large set of terms down to what an exact search can take.

:func:`screen_candidates` ranks the terms by when they enter a lasso or
elastic-net path (scikit-learn ``lasso_path``/``enet_path`` on standardised
columns; a categorical block enters when any of its columns does) or a forward
stepwise path, then keeps them **family by family**: first the earliest form of
each family in entry order, then other forms of the kept families while room
remains, so that the exact search can still choose between ``x`` and
``log(x)``.  Forced terms are always kept (their columns are partialled out of
the response and the other columns before the path is computed); a term whose
``requires`` families cannot be kept is set aside.  Every term set aside comes
with the reason.

:func:`screen_then_search` is the default pipeline for a large table:
screen → exact best-subset search on the survivors (indices mapped back to the
full candidate set) → a bidirectional stepwise polish over *all* terms, started
from the exact search's winner.  Each returned :class:`Found` says in
``details["stage"]`` what ran.

Caution: screening is a heuristic; a term set aside can matter in a model with
other terms.  Selected-model p-values are optimistic, association is not
causation, and the decision rests with the practitioner.

References
----------
Tibshirani, R. (1996). Regression shrinkage and selection via the lasso.
    J. R. Statist. Soc. B 58(1), 267-288.
Zou, H. and Hastie, T. (2005). Regularization and variable selection via the
    elastic net. J. R. Statist. Soc. B 67(2), 301-320.
Fan, J. and Lv, J. (2008). Sure independence screening for ultrahigh
    dimensional feature space. J. R. Statist. Soc. B 70(5), 849-911.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from types import MappingProxyType
from typing import Sequence

import numpy as np
import pandas as pd

from .. import criteria
from ..candidates import CandidateSet
from ..errors import OptionError
from ..moments import Moments, moments_of
from ..parallel import WorkUnit, run_units
from ._found import Found

__all__ = ["SCREEN_METHODS", "ScreenResult", "ScreenOptions", "screen_candidates", "settle", "plan", "run_unit",
           "merge", "screen_then_search"]

SCREEN_METHODS = ("lasso", "enet", "forward")
#: The exact search works on 64-bit masks of terms.
EXACT_LIMIT = 64


@dataclass(frozen=True)
class ScreenResult:
    """Which terms screening kept and why the others were set aside.

    Attributes
    ----------
    kept : tuple of int
        Term indices (into the full ``CandidateSet.terms``), sorted.
    set_aside : tuple of (int, str)
        Term index and the reason, in term order.
    method : str
        ``"lasso"``, ``"enet"``, ``"forward"`` or ``"none"`` (nothing to screen).
    limit : int
    entry : tuple of float
        Per term, the step of the path at which it entered (``inf``: never).
    cut_short : str
        Empty when the path ran to its end; else what the time budget cut
        (``"the lasso path was cut by the time budget of 30 s after 12 of 100
        penalties"``): the ranking then rests on the part of the path computed.
    """

    kept: tuple[int, ...]
    set_aside: tuple[tuple[int, str], ...]
    method: str
    limit: int
    entry: tuple[float, ...] = ()
    cut_short: str = ""

    def table(self, candidates) -> pd.DataFrame:
        """One row per term: ``term, family, kept, entry_step, reason``."""
        reasons = dict(self.set_aside)
        return pd.DataFrame({
            "term": [t.name for t in candidates.terms],
            "family": [t.family for t in candidates.terms],
            "kept": [i in set(self.kept) for i in range(len(candidates.terms))],
            "entry_step": list(self.entry) if self.entry else [np.nan] * len(candidates.terms),
            "reason": [reasons.get(i, "") for i in range(len(candidates.terms))],
        })


def _check_limit(limit):
    if isinstance(limit, bool) or not isinstance(limit, (int, np.integer)) or not 1 <= limit <= EXACT_LIMIT:
        raise OptionError(f"limit must be a whole number of terms from 1 to {EXACT_LIMIT} (got {limit!r})")
    return int(limit)


def _names_to_indices(candidates, names, what):
    lookup = {t.name: i for i, t in enumerate(candidates.terms)}
    missing = [n for n in names if n not in lookup]
    if missing:
        raise OptionError(f"{what}: no candidate term is named {missing[0]!r}")
    return {lookup[n] for n in names}


def _standardised(candidates, forced_cols):
    """Centred, unit-norm columns and centred response, with forced columns partialled out."""
    X = np.asarray(candidates.matrix, dtype=float)
    y = np.asarray(candidates.y, dtype=float)
    w = candidates.weights
    if w is None:
        Xc, yc = X - X.mean(axis=0), y - y.mean()
    else:
        root = np.sqrt(w / w.sum() * len(w))
        Xc = (X - np.average(X, axis=0, weights=w)) * root[:, None]
        yc = (y - np.average(y, weights=w)) * root
    if forced_cols:
        F = Xc[:, forced_cols]
        Xc = Xc - F @ np.linalg.lstsq(F, Xc, rcond=None)[0]
        yc = yc - F @ np.linalg.lstsq(F, yc, rcond=None)[0]
    norms = np.sqrt((Xc ** 2).sum(axis=0))
    original = np.sqrt(((X - X.mean(axis=0)) ** 2).sum(axis=0))
    usable = (original > 0) & (norms > 1e-8 * original)  # constant, or a combination of the forced columns
    Z = np.where(usable, Xc / np.where(usable, norms, 1.0), 0.0)
    return Z, yc, usable


def _path_entry(candidates, free, forced, method, l1_ratio, n_alphas, deadline=None):
    """Entry step of each free term along the lasso/elastic-net path (inf when it never enters).

    Returns ``(entry, steps computed, steps planned)``.  With a ``deadline``
    the path is computed a few penalties at a time, each part starting from
    the coefficients of the last (the warm start the one-call path uses too),
    and stops at the first part that ends after the deadline (the first part,
    the largest penalties, always runs).
    """
    from sklearn.linear_model import enet_path, lasso_path

    terms = candidates.terms
    forced_cols = [c for i in forced for c in terms[i].columns]
    Z, yc, usable = _standardised(candidates, forced_cols)
    cols = sorted({c for i in free for c in terms[i].columns if usable[c]})
    entry = np.full(len(terms), np.inf)
    if not cols or not np.any(yc):
        return entry, 0, 0
    # The penalty grid is built here (as scikit-learn does by default) so that every scikit-learn version
    # gets the same explicit grid: from the smallest penalty that zeroes every coefficient down to 1/1000 of it.
    ratio = 1.0 if method == "lasso" else float(l1_ratio)
    alpha_max = np.abs(Z[:, cols].T @ yc).max() / (Z.shape[0] * ratio)
    alphas = alpha_max * np.logspace(0.0, -3.0, int(n_alphas))
    # Only the order of entry is used, which a not fully converged step at the smallest penalties does
    # not change in practice; scikit-learn's convergence warnings are therefore silenced here.
    import warnings

    from sklearn.exceptions import ConvergenceWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        if deadline is None:
            if method == "lasso":
                _, coefs, _ = lasso_path(Z[:, cols], yc, alphas=alphas, max_iter=5000)
            else:
                _, coefs, _ = enet_path(Z[:, cols], yc, l1_ratio=ratio, alphas=alphas, max_iter=5000)
        else:
            coefs = _path_in_parts(Z[:, cols], yc, alphas, ratio, deadline)
    nonzero = np.abs(coefs) > 0
    first = np.where(nonzero.any(axis=1), nonzero.argmax(axis=1), np.inf)
    by_column = dict(zip(cols, first))
    for i in free:
        steps = [by_column.get(c, np.inf) for c in terms[i].columns]
        entry[i] = min(steps)  # a block enters when any of its columns does
    return entry, coefs.shape[1], len(alphas)


#: Penalties of the path computed between two looks at the clock.
_PENALTIES_PER_PART = 5


def _path_in_parts(Z, yc, alphas, ratio, deadline):
    """The coordinate-descent path over ``alphas``, a few penalties at a time, until ``deadline``.

    The Gram matrix (when it pays, n > p, as scikit-learn's ``"auto"`` decides)
    and ``Z'y`` are computed once; each part starts from the last coefficients,
    which is the warm start of the one-call path.  Returns the coefficients of
    the penalties computed (columns), possibly fewer than ``alphas``.
    """
    from sklearn.linear_model import enet_path

    n, p = Z.shape
    gram = Z.T @ Z if n > p else False
    xy = Z.T @ yc
    parts, coef = [], None
    for start in range(0, len(alphas), _PENALTIES_PER_PART):
        if start and deadline.expired():  # the first part always runs: it ranks the earliest entries
            break
        _, part, _ = enet_path(Z, yc, l1_ratio=ratio, alphas=alphas[start:start + _PENALTIES_PER_PART],
                               precompute=gram, Xy=xy, coef_init=coef, max_iter=5000, check_input=False)
        coef = np.ascontiguousarray(part[:, -1])
        parts.append(part)
    return np.concatenate(parts, axis=1) if parts else np.zeros((p, 0))


def _forward_entry(candidates, moments, free, forced, forbidden, hierarchy, limit, deadline=None):
    from .stepwise import stepwise_search

    terms = candidates.terms
    found = stepwise_search(
        candidates, moments, method="forward", criterion="f_test", alpha_enter=0.9999, alpha_remove=0.9999,
        swaps=False, forced=tuple(terms[i].name for i in forced), forbidden=tuple(terms[i].name for i in forbidden),
        hierarchy=hierarchy, max_steps=limit, time_budget=None if deadline is None else deadline.search_budget(),
    )
    entry = np.full(len(terms), np.inf)
    lookup = {t.name: i for i, t in enumerate(terms)}
    for step in found.details["path"][1:]:
        entry[lookup[step["term"]]] = step["step"]
    steps = len(found.details["path"]) - 1
    cut = deadline is not None and "time budget" in str(found.stopped_by)
    return entry, steps, (max(limit, steps + 1) if cut else steps)


def screen_candidates(candidates, *, limit: int = EXACT_LIMIT, method: str = "lasso", l1_ratio: float = 0.5,
                      forced: Sequence[str] = (), forbidden: Sequence[str] = (), hierarchy: bool = True,
                      n_alphas: int = 100, moments=None, deadline=None) -> ScreenResult:
    """Keep at most ``limit`` terms, ranked by a lasso/elastic-net or forward path, family-aware.

    Parameters
    ----------
    candidates : CandidateSet
    limit : int, default 64
        Most terms kept (forced terms count).
    method : {"lasso", "enet", "forward"}
        ``"lasso"``/``"enet"``: scikit-learn's coordinate-descent path over
        ``n_alphas`` penalties from the smallest that zeroes every coefficient
        down to 1/1000 of it, on centred unit-norm columns; a term's rank is
        the first penalty at which one of its columns is non-zero.
        ``"forward"``: the order of entry along a forward stepwise path by
        partial F (entry level 0.9999, i.e. the path runs until ``limit``).
    l1_ratio : float, default 0.5
        Elastic-net mixing (``method="enet"``).
    forced, forbidden : sequence of str
        Term names always kept / always set aside (besides ``Term.forced``).
    hierarchy : bool, default True
        Keep a term only with a form of every family it ``requires``.
    moments : Moments, optional
        Used by ``method="forward"``.
    deadline : selectkit._budget.Deadline, optional
        The run's time budget.  The path is then computed in parts and stops
        at the first part that ends after the deadline; terms are ranked by the
        part computed and ``ScreenResult.cut_short`` says what was cut.  Without
        a deadline the path runs to its end, unchanged.

    Returns
    -------
    ScreenResult
    """
    limit = _check_limit(limit)
    if method not in SCREEN_METHODS:
        raise OptionError(f"unknown screening method {method!r}; choose one of {', '.join(SCREEN_METHODS)}")
    if method == "enet" and not 0.0 < float(l1_ratio) <= 1.0:
        raise OptionError(f"l1_ratio must lie in (0, 1] (got {l1_ratio!r})")
    terms = candidates.terms
    forced_set = {i for i, t in enumerate(terms) if t.forced} | _names_to_indices(candidates, forced, "forced")
    forbidden_set = _names_to_indices(candidates, forbidden, "forbidden")
    if forced_set & forbidden_set:
        raise OptionError("a term is both forced and forbidden; remove it from one list")
    if len(forced_set) > limit:
        raise OptionError(f"{len(forced_set)} forced terms exceed the limit of {limit}; raise the limit")
    free = [i for i in range(len(terms)) if i not in forced_set and i not in forbidden_set]
    if method == "forward":
        if moments is None:
            moments = moments_of(candidates)
        entry, steps, planned = _forward_entry(candidates, moments, free, forced_set, forbidden_set, hierarchy,
                                               limit, deadline)
        path_name = "the forward stepwise path"
    else:
        entry, steps, planned = _path_entry(candidates, free, sorted(forced_set), method, l1_ratio, n_alphas,
                                            deadline)
        path_name = f"the {'lasso' if method == 'lasso' else 'elastic-net'} path"
    cut_short = ""
    if steps < planned:
        what = "steps" if method == "forward" else "penalties"
        cut_short = (f"{path_name} was cut by the {deadline.describe()} after {steps} of {planned} {what}; "
                     f"terms are ranked by the part computed")
        path_name = f"{path_name} (cut by the time budget)"
    for i in forced_set:
        entry[i] = -1.0
    kept, reasons = _keep_by_family(candidates, entry, forced_set, forbidden_set, limit, hierarchy, path_name, steps)
    return ScreenResult(kept=tuple(sorted(kept)), set_aside=tuple(sorted(reasons.items())), method=method,
                        limit=limit, entry=tuple(float(e) for e in entry), cut_short=cut_short)


def _keep_by_family(candidates, entry, forced, forbidden, limit, hierarchy, path_name, steps):
    """Walk families in order of their first entry; keep as many of each family's forms as fit.

    Within a family the earliest-entering form comes first, then the other
    forms (entered ones by entry step, then the rest in candidate order), so
    the exact search can still choose the form.  With ``hierarchy`` a term is
    kept only after a form of every family it requires.
    """
    terms = candidates.terms
    kept = list(sorted(forced))
    kept_families = {terms[i].family for i in kept}
    reasons = {i: "forbidden by the user" for i in forbidden}
    allowed = [i for i in range(len(terms)) if i not in forced and i not in forbidden]
    members: dict[str, list[int]] = {}
    for i in sorted(allowed, key=lambda i: (entry[i], i)):
        members.setdefault(terms[i].family, []).append(i)
    family_order = sorted(members, key=lambda f: (entry[members[f][0]], members[f][0]))

    def place(i):
        if len(kept) >= limit:
            return False
        kept.append(i)
        kept_families.add(terms[i].family)
        return True

    pending = []  # terms waiting for the families they require
    for fam in family_order:
        first = members[fam][0]
        for i in members[fam]:
            if hierarchy and any(r not in kept_families for r in terms[i].requires):
                pending.append(i)
                continue
            if not place(i):
                if fam in kept_families:
                    holder = ", ".join(terms[j].name for j in kept if terms[j].family == fam)
                    reasons[i] = (f"another form of family {fam!r} (kept: {holder}); no room left under the "
                                  f"limit of {limit}")
                elif not np.isfinite(entry[first]):
                    reasons[i] = f"never entered {path_name} ({steps} steps)"
                else:
                    reasons[i] = (f"entered {path_name} at step {int(entry[first]) + 1} of {steps}, after the "
                                  f"limit of {limit} terms was filled")
        # a waiting term may now have every family it requires
        for i in list(pending):
            if all(r in kept_families for r in terms[i].requires):
                pending.remove(i)
                if not place(i):
                    reasons[i] = f"its required families were kept but no room was left under the limit of {limit}"
    for i in pending:
        missing = [r for r in terms[i].requires if r not in kept_families]
        reasons[i] = f"requires family {missing[0]!r}, which was set aside"
    return kept, reasons


# ----------------------------------------------------------------------- the pipeline
@dataclass(frozen=True)
class ScreenOptions:
    """Options of the screen → exact search → stepwise polish pipeline.

    Attributes
    ----------
    method : {"lasso", "enet", "forward"}
        Screening path.
    limit : int, default 64
        Most terms passed to the exact search.
    l1_ratio : float
    criterion : {"aic", "aicc", "bic", "f_test"}
        Criterion of the stepwise polish; the exact search's winner (its
        start) is the model with the lowest value of this criterion (AIC when
        ``"f_test"``), ties by k then term names.
    n_best_per_size, max_size, time_budget
        Passed to the exact search.
    forced, forbidden, hierarchy
        Passed to every stage.
    polish : bool, default True
    deadline : selectkit._budget.Deadline or None
        The run's one time budget, checked by the screening path, the exact
        search and the polish (set by :mod:`selectkit.api`, not by users).
    screening : ScreenResult or None
        The screening, once done by :func:`settle`; plan and merge then use it
        instead of screening again.
    """

    method: str = "lasso"
    limit: int = EXACT_LIMIT
    l1_ratio: float = 0.5
    criterion: str = "aic"
    n_best_per_size: int = 10
    max_size: int | None = None
    forced: tuple = ()
    forbidden: tuple = ()
    hierarchy: bool = True
    time_budget: float | None = None
    polish: bool = True
    deadline: object = None
    screening: object = None

    def __post_init__(self):
        from .._budget import Deadline

        if self.deadline is not None and not isinstance(self.deadline, Deadline):
            raise OptionError("deadline is set by selectkit from the run's time_budget; give time_budget instead")
        if self.screening is not None and not isinstance(self.screening, ScreenResult):
            raise OptionError("screening is set by selectkit once it has screened; it cannot be given")
        if self.method not in SCREEN_METHODS:
            raise OptionError(f"unknown screening method {self.method!r}; choose one of {', '.join(SCREEN_METHODS)}")
        _check_limit(self.limit)
        if self.criterion not in ("aic", "aicc", "bic", "f_test"):
            raise OptionError(f"unknown polish criterion {self.criterion!r}; choose one of aic, aicc, bic, f_test")
        object.__setattr__(self, "forced", tuple(self.forced))
        object.__setattr__(self, "forbidden", tuple(self.forbidden))


def _sub_problem(candidates, moments, kept):
    """CandidateSet and Moments restricted to the kept terms (columns renumbered)."""
    terms = candidates.terms
    old_cols = [c for i in kept for c in terms[i].columns]
    new_of = {c: j for j, c in enumerate(old_cols)}
    sub_terms = tuple(replace(terms[i], columns=tuple(new_of[c] for c in terms[i].columns)) for i in kept)
    sub = CandidateSet(
        matrix=candidates.matrix[:, old_cols], column_names=tuple(candidates.column_names[c] for c in old_cols),
        terms=sub_terms, y=candidates.y, response=candidates.response, weights=candidates.weights,
        response_transform=candidates.response_transform, refused=candidates.refused, notes=candidates.notes,
        dataset=candidates.dataset,
    )
    idx = old_cols + [moments.m]
    sub_moments = Moments(n=moments.n, weight_sum=moments.weight_sum, mean=moments.mean[idx].copy(),
                          cross=moments.cross[np.ix_(idx, idx)].copy())
    return sub, sub_moments


def _exact_stage(candidates, moments, options: ScreenOptions):
    """The screening (deterministic, so plan and merge agree) and the exact search it leaves:
    ``(screening, sub_candidates, sub_moments, exact_options)``."""
    from . import exhaustive

    if moments is None:
        moments = moments_of(candidates)
    screening = options.screening if options.screening is not None else _screen_for(candidates, moments, options)
    sub, sub_moments = _sub_problem(candidates, moments, screening.kept)
    time_budget = options.time_budget if options.deadline is None else options.deadline.search_budget()
    exact_options = exhaustive.ExhaustiveOptions(
        n_best_per_size=options.n_best_per_size, max_size=options.max_size,
        forced=tuple(n for n in options.forced if n in {t.name for t in sub.terms}),
        hierarchy=options.hierarchy, time_budget=time_budget,
    )
    return screening, sub, sub_moments, exact_options


def settle(candidates, moments, options: ScreenOptions) -> ScreenOptions:
    """Screen once and return options that hold the screening, for :func:`plan` and :func:`merge`.

    Screening is deterministic without a time budget; with one, where the
    clock cuts the path decides what is kept, so it must be done once and
    shared by the plan and the merge of the same run.
    """
    if options.screening is not None:
        return options
    if moments is None:
        moments = moments_of(candidates)
    return replace(options, screening=_screen_for(candidates, moments, options))


def plan(candidates, moments, options: ScreenOptions) -> list[WorkUnit]:
    """Screen (here, deterministic), then the exact search's units on the survivors."""
    from . import exhaustive

    _, sub, sub_moments, exact_options = _exact_stage(candidates, moments, options)
    units = exhaustive.plan(sub, sub_moments, exact_options)
    return [WorkUnit(f"screen/exact/{u.key}", ("exact", u)) for u in units]


def _screen_for(candidates, moments, options):
    if len(candidates.terms) <= options.limit:
        forbidden = _names_to_indices(candidates, options.forbidden, "forbidden")
        kept = tuple(i for i in range(len(candidates.terms)) if i not in forbidden)
        return ScreenResult(kept=kept, set_aside=tuple((i, "forbidden by the user") for i in sorted(forbidden)),
                            method="none", limit=options.limit)
    return screen_candidates(candidates, limit=options.limit, method=options.method, l1_ratio=options.l1_ratio,
                             forced=options.forced, forbidden=options.forbidden, hierarchy=options.hierarchy,
                             moments=moments, deadline=options.deadline)


def run_unit(unit: WorkUnit):
    """Run one unit of the exact search on the screened terms."""
    from . import exhaustive

    _, inner = unit.payload
    return exhaustive.run_unit(inner)


def _winner(found: Found, names, criterion: str):
    key = criterion if criterion in ("aic", "aicc", "bic") else "aic"
    values = {"aic": criteria.aic, "aicc": criteria.aicc, "bic": criteria.bic}[key](found.rss, found.n, found.k)
    values = np.atleast_1d(values)
    order = sorted(range(len(found.subsets)),
                   key=lambda i: (values[i] if np.isfinite(values[i]) else np.inf, int(found.k[i]),
                                  tuple(sorted(names[j] for j in found.subsets[i]))))
    return found.subsets[order[0]]


def merge(candidates, moments, options: ScreenOptions, results) -> list[Found]:
    """Exact search on the survivors (indices mapped back), then the stepwise polish over all terms."""
    from . import exhaustive
    from .stepwise import stepwise_search

    if moments is None:
        moments = moments_of(candidates)
    screening, sub, sub_moments, exact_options = _exact_stage(candidates, moments, options)
    local = exhaustive.merge(sub, sub_moments, exact_options, results)
    kept = screening.kept
    screened = screening.method != "none"
    stage = (f"exact search on the {len(kept)} of {len(candidates.terms)} terms kept by {screening.method} screening"
             if screened else f"exact search on all {len(kept)} allowed terms (no screening needed)")
    exact_found = Found(
        method=local.method, subsets=tuple(tuple(kept[i] for i in s) for s in local.subsets), rss=local.rss,
        k=local.k, n=local.n, evaluated=local.evaluated, pruned=local.pruned, singular=local.singular,
        exact=local.exact and not screened,
        stopped_by=local.stopped_by + ("; exact only over the screened terms" if screened else "")
        + (f"; {screening.cut_short}" if screening.cut_short else ""),
        details=MappingProxyType(dict(local.details, stage=stage, screening=screening)),
    )
    out = [exact_found]
    if options.polish and len(exact_found):
        names = [t.name for t in candidates.terms]
        start = _winner(exact_found, names, options.criterion)
        polished = stepwise_search(
            candidates, moments, method="stepwise", criterion=options.criterion,
            start=tuple(names[i] for i in start), forced=options.forced, forbidden=options.forbidden,
            hierarchy=options.hierarchy,
            time_budget=None if options.deadline is None else options.deadline.search_budget(),
        )
        out.append(replace(polished, details=MappingProxyType(dict(
            polished.details, stage="stepwise polish (both directions, all terms) from the exact search's winner: "
            + (", ".join(names[i] for i in start) or "intercept only")))))
    return out


def screen_then_search(candidates, *, limit: int = EXACT_LIMIT, method: str = "lasso", l1_ratio: float = 0.5,
                       criterion: str = "aic", n_best_per_size: int = 10, max_size=None, forced=(), forbidden=(),
                       hierarchy: bool = True, time_budget=None, polish: bool = True, moments=None, n_jobs: int = 1,
                       backend: str = "loky", scheduler=None) -> list[Found]:
    """The default pipeline for a large table: screen → exact search → stepwise polish.

    Parameters
    ----------
    candidates : CandidateSet
    limit : int, default 64
        Terms handed to the exact search; when there are no more terms than
        this, screening is skipped (and the result says so).
    method, l1_ratio
        Screening path, see :func:`screen_candidates`.
    criterion : {"aic", "aicc", "bic", "f_test"}
        Of the polish (and for picking its start).
    n_best_per_size, max_size, time_budget
        Of the exact search.
    forced, forbidden, hierarchy
        Every stage.
    polish : bool, default True
    n_jobs, backend, scheduler
        For the exact search's work units.

    Returns
    -------
    list of Found
        ``[exact search over the kept terms (indices into the full candidate
        set; details["screening"] is the ScreenResult), stepwise polish]``;
        ``details["stage"]`` of each says what ran.
    """
    from .._budget import Deadline

    deadline = Deadline.start(time_budget) if time_budget is not None else None
    options = ScreenOptions(method=method, limit=limit, l1_ratio=l1_ratio, criterion=criterion,
                            n_best_per_size=n_best_per_size, max_size=max_size, forced=tuple(forced),
                            forbidden=tuple(forbidden), hierarchy=hierarchy, time_budget=time_budget, polish=polish,
                            deadline=deadline)
    if moments is None:
        moments = moments_of(candidates)
    options = settle(candidates, moments, options)
    units = plan(candidates, moments, options)
    results = run_units(run_unit, units, n_jobs=n_jobs, backend=backend, scheduler=scheduler,
                        should_stop=deadline)
    return merge(candidates, moments, options, results + [None] * (len(units) - len(results)))
