"""Stepwise search (forward, backward, both) on the moments with the sweep operator.

Each step changes the model by one *move* and keeps the cross-product matrix
swept on the model's columns (:mod:`selectkit.kernels.steps`), so a step costs
``O(m²)`` and never refits from scratch or touches the ``n × m`` data.

Moves
-----
``add``
    a term whose family is not yet in the model (a categorical block enters
    whole; a term whose ``requires`` families are missing cannot enter while
    ``hierarchy`` is on).
``drop``
    a term of the model, unless it is forced, or (with ``hierarchy``) another
    term of the model requires its family.
``swap``
    replace a term by another form of the same family (``x`` for ``log(x)``);
    the family stays in the model.  Swaps are offered in every direction when
    ``swaps=True``.  A forced term is neither dropped nor swapped out.

``method="forward"`` (forward selection) offers adds (and swaps),
``"backward"`` (backward elimination) drops (and swaps), ``"stepwise"`` all
three: steps both ways.

Rules for choosing a move
-------------------------
Information criterion (``criterion`` = ``"aic"``, ``"aicc"`` or ``"bic"``, from
:mod:`selectkit.criteria`, ``k`` counting the intercept and, by default, σ² as
well): every admissible move is scored and the one giving the lowest criterion
is made when it lowers the current value; ties are broken by the number of
coefficients, then by the sorted term names of the resulting model.

Partial F-test (``criterion="f_test"``; Efroymson 1960, as set out in Draper &
Smith 1998, §15.2): first the term of the model with the largest removal
p-value is dropped if that p-value exceeds ``alpha_remove``; otherwise the term
with the smallest entry p-value enters if it is below ``alpha_enter``;
otherwise the swap with the lowest residual mean square is made if it lowers
the current one.  For a move changing the model by ``q`` coefficients::

    F = ((rss_small − rss_large) / q) / (rss_large / (n − k_large))

on ``(q, n − k_large)`` degrees of freedom; a block's ``q`` is its number of
dummy columns.  ``alpha_enter ≤ alpha_remove`` is required so that a term that
just entered is not at once removed.

The search stops when no move improves, when a move would return to a model
already on the path (a cycle, possible under the F-test), or after
``max_steps``.  Every model on the path is returned, with the path itself in
``Found.details``.

Caution: p-values and standard errors of a model chosen by stepwise search are
optimistic (the same data chose and fitted it), and the selected terms show
association, not cause.  Whether a model is fit for use rests with the
practitioner and local professional standards.

References
----------
Efroymson, M. A. (1960). Multiple regression analysis. In Ralston & Wilf (eds),
    Mathematical Methods for Digital Computers, Wiley, 191-203.
Draper, N. R. and Smith, H. (1998). Applied Regression Analysis, 3rd ed. Wiley.
Goodnight, J. H. (1979). A tutorial on the SWEEP operator. Amer. Statist. 33(3), 149-158.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, Sequence

import numpy as np
from scipy import special

from .. import criteria
from ..errors import OptionError, SearchError
from ..kernels import PIVOT_TOLERANCE
from ..kernels.steps import apply_move, evaluate_moves, scale_cross
from ..moments import moments_of
from ..parallel import WorkUnit, run_units
from ._found import Found

__all__ = ["StepwiseOptions", "STEP_METHODS", "RENAMED_STEP_METHODS", "STEP_CRITERIA", "plan", "run_unit", "merge", "stepwise_search"]

#: Which steps a search tries: adds only, drops only, or both ways ("stepwise").
STEP_METHODS = ("forward", "backward", "stepwise")
#: Former spellings, refused with the new one.
RENAMED_STEP_METHODS = {"both": "stepwise"}
STEP_CRITERIA = ("aic", "aicc", "bic", "f_test")
START_NAMES = ("empty", "full")
_CRITERION_FUNCTIONS = {"aic": criteria.aic, "aicc": criteria.aicc, "bic": criteria.bic}
#: A criterion must fall by more than this to count as an improvement (guards
#: against moves between numerically identical models).
_IMPROVEMENT = 1e-9


@dataclass(frozen=True)
class StepwiseOptions:
    """Options of a stepwise search.

    Attributes
    ----------
    method : {"forward", "backward", "stepwise"}
        Adds only (forward selection), drops only (backward elimination), or
        both ways (stepwise); swaps are offered by all three.
    criterion : {"aic", "aicc", "bic", "f_test"}
    alpha_enter, alpha_remove : float
        Significance levels of the partial F-test (``criterion="f_test"`` only);
        ``0 < alpha_enter ≤ alpha_remove < 1``.
    starts : tuple
        Starting models, each ``"empty"`` (forced terms only), ``"full"`` (every
        family in its **first form in candidate order**, every block, and the
        forced terms; a term whose columns are combinations of those already
        in is left out and named in the path's start record) or a tuple of
        term names.  Each start is one work unit;
        the models found from all starts are pooled.
    swaps : bool
        Offer family swaps (one form of a variable for another).
    forced, forbidden : tuple of str
        Term names always in (added to those marked ``Term.forced``) / never in.
    hierarchy : bool
        Respect ``Term.requires``.
    max_steps : int or None
        Upper limit on moves per start; ``None`` means ``4 × terms + 10``.
    convention : {"sigma-counted", "coefficients-only"}
        Parameter count of the criterion (see :mod:`selectkit.criteria`).
    time_budget : float or None
        Seconds per start; when reached the path stops where it is (and says
        so).  A path cut by the clock may differ between runs.
    """

    method: str = "stepwise"
    criterion: str = "aic"
    alpha_enter: float = 0.15
    alpha_remove: float = 0.15
    starts: tuple = ("empty",)
    swaps: bool = True
    forced: tuple[str, ...] = ()
    forbidden: tuple[str, ...] = ()
    hierarchy: bool = True
    max_steps: int | None = None
    convention: str = "sigma-counted"
    time_budget: float | None = None

    def __post_init__(self):
        if self.method in RENAMED_STEP_METHODS:
            raise OptionError(f"stepwise method {self.method!r} was renamed; "
                              f"did you mean {RENAMED_STEP_METHODS[self.method]!r}?")
        if self.method not in STEP_METHODS:
            raise OptionError(f"unknown stepwise method {self.method!r}; choose one of {', '.join(STEP_METHODS)}")
        crit = str(self.criterion).lower()
        if crit not in STEP_CRITERIA:
            raise OptionError(f"unknown stepwise criterion {self.criterion!r}; choose one of {', '.join(STEP_CRITERIA)}")
        object.__setattr__(self, "criterion", crit)
        for name in ("alpha_enter", "alpha_remove"):
            value = getattr(self, name)
            if not (isinstance(value, (int, float)) and 0.0 < float(value) < 1.0):
                raise OptionError(f"{name} must be a probability strictly between 0 and 1 (got {value!r})")
        if self.alpha_enter > self.alpha_remove:
            raise OptionError(
                f"alpha_enter ({self.alpha_enter}) must not exceed alpha_remove ({self.alpha_remove}); "
                "otherwise a term could enter and be removed at once; raise alpha_remove or lower alpha_enter"
            )
        if self.max_steps is not None and (not isinstance(self.max_steps, (int, np.integer)) or self.max_steps < 1):
            raise OptionError(f"max_steps must be a positive whole number or None (got {self.max_steps!r})")
        if self.time_budget is not None and not (
            isinstance(self.time_budget, (int, float, np.floating)) and not isinstance(self.time_budget, bool)
            and self.time_budget > 0
        ):
            raise OptionError(f"time_budget must be None or a positive number of seconds (got {self.time_budget!r})")
        criteria.check_convention(self.convention)
        starts = self.starts
        if isinstance(starts, str):
            starts = (starts,)
        normal = []
        for s in starts:
            if isinstance(s, str):
                if s not in START_NAMES:
                    raise OptionError(
                        f"unknown start {s!r}; use 'empty', 'full' or a tuple of term names"
                    )
                normal.append(s)
            else:
                normal.append(tuple(str(t) for t in s))
        if not normal:
            raise OptionError("starts is empty; give at least one start ('empty', 'full' or term names)")
        object.__setattr__(self, "starts", tuple(normal))
        object.__setattr__(self, "forced", tuple(self.forced))
        object.__setattr__(self, "forbidden", tuple(self.forbidden))


@dataclass(frozen=True)
class _Problem:
    """Everything a start needs, without the n × m data (picklable, small)."""

    scaled: np.ndarray
    scale: np.ndarray
    n: int
    names: tuple[str, ...]
    families: tuple[str, ...]
    columns: tuple[tuple[int, ...], ...]
    requires: tuple[tuple[str, ...], ...]
    forced: tuple[int, ...]
    forbidden: frozenset
    options: StepwiseOptions
    start: tuple[int, ...]
    start_label: str


def _term_index(candidates, names, what):
    lookup = {t.name: i for i, t in enumerate(candidates.terms)}
    out = []
    for name in names:
        if name not in lookup:
            shown = ", ".join(list(lookup)[:12]) + (" ..." if len(lookup) > 12 else "")
            raise OptionError(f"{what}: no candidate term is named {name!r}; terms are: {shown}")
        out.append(lookup[name])
    return out


def _forced_indices(candidates, options):
    forced = [i for i, t in enumerate(candidates.terms) if t.forced]
    forced += _term_index(candidates, options.forced, "forced")
    chosen, families = [], set()
    for i in sorted(set(forced)):
        fam = candidates.terms[i].family
        if fam in families:
            continue  # first forced form of a family wins
        families.add(fam)
        chosen.append(i)
    return tuple(chosen)


def _start_indices(candidates, options, start, forced, forbidden):
    terms = candidates.terms
    chosen = list(forced)
    families = {terms[i].family for i in chosen}
    if start == "empty":
        pass
    elif start == "full":
        for i, t in enumerate(terms):
            if i in forbidden or t.family in families:
                continue
            families.add(t.family)
            chosen.append(i)
        if options.hierarchy:  # drop terms whose required families are absent (forbidden ones)
            changed = True
            while changed:
                changed = False
                fams = {terms[i].family for i in chosen}
                for i in list(chosen):
                    if i not in forced and any(r not in fams for r in terms[i].requires):
                        chosen.remove(i)
                        changed = True
    else:
        for i in _term_index(candidates, start, "start"):
            if i in forbidden:
                raise OptionError(f"start: term {terms[i].name!r} is also forbidden; remove it from one of the two")
            if i in chosen:
                continue
            if terms[i].family in families:
                raise OptionError(
                    f"start: family {terms[i].family!r} appears twice; a model holds one form of each variable"
                )
            families.add(terms[i].family)
            chosen.append(i)
        if options.hierarchy:
            fams = {terms[i].family for i in chosen}
            for i in chosen:
                missing = [r for r in terms[i].requires if r not in fams]
                if missing:
                    raise OptionError(
                        f"start: term {terms[i].name!r} requires {', '.join(missing)} in the model; "
                        "add them to the start or pass hierarchy=False"
                    )
    return tuple(sorted(chosen))


def plan(candidates, moments, options: StepwiseOptions) -> list[WorkUnit]:
    """One work unit per start (in the order of ``options.starts``)."""
    if moments is None:
        moments = moments_of(candidates)
    if not candidates.terms:
        raise SearchError("stepwise search needs at least one candidate term; none were given")
    scaled, scale = scale_cross(moments.cross)
    forced = _forced_indices(candidates, options)
    forbidden = frozenset(_term_index(candidates, options.forbidden, "forbidden"))
    clash = [candidates.terms[i].name for i in forced if i in forbidden]
    if clash:
        raise OptionError(f"terms {', '.join(clash)} are both forced and forbidden; remove them from one list")
    units = []
    for number, start in enumerate(options.starts):
        chosen = _start_indices(candidates, options, start, forced, forbidden)
        label = start if isinstance(start, str) else "terms: " + ", ".join(start)
        problem = _Problem(
            scaled=scaled, scale=scale, n=int(moments.n),
            names=tuple(t.name for t in candidates.terms),
            families=tuple(t.family for t in candidates.terms),
            columns=tuple(tuple(int(c) for c in t.columns) for t in candidates.terms),
            requires=tuple(tuple(t.requires) for t in candidates.terms),
            forced=forced, forbidden=forbidden, options=options, start=chosen, start_label=label,
        )
        units.append(WorkUnit(key=f"stepwise/start-{number:03d}", payload=problem))
    return units


def _after(model, move):
    """The sorted model a move leads to."""
    kind, term, replaced = move
    if kind == "add":
        return tuple(sorted(model + (term,)))
    if kind == "drop":
        return tuple(j for j in model if j != term)
    return tuple(sorted([j for j in model if j != replaced] + [term]))


def _k_of(problem, model):
    return 1 + sum(len(problem.columns[i]) for i in model)


def _admissible_moves(problem, model):
    """List of (kind, term, replaced) in a fixed order; see :func:`_after` for the resulting model."""
    opts = problem.options
    in_model = set(model)
    fams_in = {problem.families[i]: i for i in model}
    moves = []
    allow_add = opts.method in ("forward", "stepwise")
    allow_drop = opts.method in ("backward", "stepwise")

    def requires_ok(term, families):
        return not opts.hierarchy or all(r in families for r in problem.requires[term])

    if allow_drop:
        required_by: dict[str, int] = {}
        for j in model:
            for r in problem.requires[j]:
                required_by[r] = required_by.get(r, 0) + 1
        for i in model:
            if i in problem.forced:
                continue
            fam = problem.families[i]
            if opts.hierarchy and required_by.get(fam, 0) > 0:
                continue
            moves.append(("drop", i, None))
    if allow_add:
        families = set(fams_in)
        for i in range(len(problem.names)):
            if i in in_model or i in problem.forbidden or problem.families[i] in fams_in:
                continue
            if not requires_ok(i, families):
                continue
            moves.append(("add", i, None))
    if opts.swaps:
        families = set(fams_in)
        for i in range(len(problem.names)):
            fam = problem.families[i]
            if i in in_model or i in problem.forbidden or fam not in fams_in:
                continue
            old = fams_in[fam]
            if old in problem.forced or not requires_ok(i, families):
                continue
            moves.append(("swap", i, old))
    return moves


def _columns_of_move(problem, kind, term, replaced):
    if kind == "add":
        return list(problem.columns[term])
    if kind == "drop":
        return list(problem.columns[term])
    return list(problem.columns[replaced]) + list(problem.columns[term])


def _criterion(problem, rss, k):
    fn = _CRITERION_FUNCTIONS[problem.options.criterion]
    return np.asarray(fn(np.asarray(rss, float), problem.n, np.asarray(k, float),
                         convention=problem.options.convention), dtype=float)


def _f_tests(rss_small, rss_large, q, n, k_large):
    """Vectorised partial F statistics and upper-tail p-values (NaN where undefined)."""
    rss_small, rss_large = np.asarray(rss_small, float), np.asarray(rss_large, float)
    q, df = np.asarray(q, float), n - np.asarray(k_large, float)
    valid = (q > 0) & (df > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.maximum(rss_small - rss_large, 0.0) / np.where(q > 0, q, 1.0) / (rss_large / np.where(df > 0, df, 1.0))
    f = np.where(rss_large <= 0, np.inf, f)
    p = np.where(np.isinf(f), 0.0, special.fdtrc(np.where(valid, q, 1.0), np.where(valid, df, 1.0),
                                                   np.where(np.isfinite(f), f, 0.0)))  # = scipy.stats.f.sf
    return np.where(valid, f, np.nan), np.where(valid, p, np.nan)


def _enter_start(problem, S, inside):
    """Sweep the starting model in, forced terms first.

    From ``"full"`` a term whose columns are (numerically) combinations of
    those already in is left out and named; from ``"empty"`` (forced terms)
    or a list of names a rank-deficient start is an error.
    """
    order = [i for i in problem.start if i in problem.forced] + [i for i in problem.start if i not in problem.forced]
    model, left_out = [], []
    for i in order:
        cols = np.asarray(problem.columns[i], dtype=np.int64)
        if apply_move(S, inside, cols, PIVOT_TOLERANCE):
            model.append(i)
        elif problem.start_label == "full" and i not in problem.forced:
            left_out.append(problem.names[i])
        else:
            raise SearchError(
                f"the starting model ({problem.start_label}) is rank-deficient: the columns of "
                f"{problem.names[i]!r} are linear combinations of the other terms' columns; start from 'empty' "
                "or leave out the duplicated forms"
            )
    if problem.options.hierarchy and left_out:  # drop terms that required a family left out
        changed = True
        while changed:
            changed = False
            families = {problem.families[j] for j in model}
            for j in list(model):
                if j not in problem.forced and any(r not in families for r in problem.requires[j]):
                    apply_move(S, inside, np.asarray(problem.columns[j], dtype=np.int64), PIVOT_TOLERANCE)
                    model.remove(j)
                    left_out.append(problem.names[j])
                    changed = True
    return tuple(sorted(model)), left_out


def run_unit(unit: WorkUnit) -> dict:
    """Run the stepwise path from one start.

    Returns
    -------
    dict
        ``start`` (label), ``path`` (list of step records), ``visited`` (list
        of ``(subset, rss, k)`` in path order), ``final`` (subset),
        ``stopped_by``, ``evaluated`` and ``singular`` counts.
    """
    problem: _Problem = unit.payload
    opts = problem.options
    S = problem.scaled.copy()
    inside = np.zeros(S.shape[0], dtype=np.bool_)
    y_scale2 = problem.scale[-1] ** 2
    model, left_out = _enter_start(problem, S, inside)
    rss = float(max(S[-1, -1], 0.0) / y_scale2)
    k = _k_of(problem, model)
    use_f = opts.criterion == "f_test"
    crit = np.nan if use_f else float(_criterion(problem, rss, k))
    name_of = problem.names
    path = [{
        "step": 0, "move": "start",
        "term": problem.start_label + (f" (left out as rank-deficient: {', '.join(left_out)})" if left_out else ""),
        "replaced": None,
        "terms_after": tuple(name_of[i] for i in model), "rss_before": np.nan, "rss_after": rss,
        "k_before": np.nan, "k_after": k, "criterion": opts.criterion,
        "criterion_before": np.nan, "criterion_after": crit, "f_statistic": np.nan, "p_value": np.nan,
    }]
    visited = [(model, rss, k)]
    seen = {model}
    evaluated = 0
    singular = 0
    max_steps = opts.max_steps if opts.max_steps is not None else 4 * len(problem.names) + 10
    stopped_by = None
    started = time.perf_counter()
    for step in range(1, max_steps + 1):
        if opts.time_budget is not None and time.perf_counter() - started > opts.time_budget:
            stopped_by = f"time budget of {opts.time_budget:g} s reached"
            break
        moves = _admissible_moves(problem, model)
        if not moves:
            stopped_by = "no admissible move remains"
            break
        col_lists = [_columns_of_move(problem, kind, t, r) for kind, t, r in moves]
        width = max(len(c) for c in col_lists)
        table = np.full((len(moves), width), -1, dtype=np.int64)
        for r, cols in enumerate(col_lists):
            table[r, : len(cols)] = cols
        new_rss, bad = evaluate_moves(S, inside, table, PIVOT_TOLERANCE)
        new_rss = new_rss / y_scale2
        evaluated += len(moves)
        singular += int(bad.sum())
        width = [len(c) for c in problem.columns]
        new_k = np.array([k + width[t] if kind == "add" else k - width[t] if kind == "drop"
                          else k - width[r] + width[t] for kind, t, r in moves])
        choice = None
        info = (np.nan, np.nan)
        if use_f:
            choice, info = _choose_by_f(problem, moves, new_rss, bad, new_k, rss, k, model)
        else:
            values = _criterion(problem, np.where(bad, 1.0, new_rss), new_k)
            values = np.where(bad | (problem.n - new_k <= 0), np.inf, values)
            finite = np.flatnonzero(np.isfinite(values))
            if finite.size:
                lowest = values[finite].min()
                # ties on the criterion (exact equality) are broken by k, then the sorted term names
                tied = [r for r in finite if values[r] == lowest]
                best = min((int(new_k[r]), tuple(sorted(name_of[i] for i in _after(model, moves[r]))), r)
                           for r in tied)
                if lowest < crit - _IMPROVEMENT:
                    choice = best[2]
        if choice is None:
            stopped_by = "no move improves the criterion" if not use_f else \
                "no term passes the entry or removal test and no swap lowers the residual mean square"
            break
        kind, term, replaced = moves[choice]
        new_model = _after(model, moves[choice])
        if new_model in seen:
            stopped_by = (f"cycle detected: {kind} {name_of[term]} would return to a model already on the path "
                          f"({', '.join(name_of[i] for i in new_model) or 'intercept only'})")
            break
        ok = apply_move(S, inside, table[choice, : len(col_lists[choice])].copy(), PIVOT_TOLERANCE)
        if not ok:  # pragma: no cover - evaluate_moves already excluded singular moves
            raise SearchError("internal: a move judged regular became singular")
        rss_before, k_before, crit_before = rss, k, crit
        model = new_model
        rss = float(max(S[-1, -1], 0.0) / y_scale2)
        k = int(new_k[choice])
        crit = np.nan if use_f else float(_criterion(problem, rss, k))
        path.append({
            "step": step, "move": kind, "term": name_of[term],
            "replaced": None if replaced is None else name_of[replaced],
            "terms_after": tuple(name_of[i] for i in model), "rss_before": rss_before, "rss_after": rss,
            "k_before": k_before, "k_after": k, "criterion": opts.criterion,
            "criterion_before": crit_before, "criterion_after": crit,
            "f_statistic": info[0], "p_value": info[1],
        })
        visited.append((model, rss, k))
        seen.add(model)
    if stopped_by is None:
        stopped_by = f"max steps ({max_steps}) reached"
    return {"start": problem.start_label, "path": path, "visited": visited, "final": model,
            "stopped_by": stopped_by, "evaluated": evaluated, "singular": singular}


def _choose_by_f(problem, moves, new_rss, bad, new_k, rss, k, model):
    """Efroymson's order: removal test, then entry test, then the best swap."""
    opts = problem.options
    n = problem.n
    names = problem.names

    def key_names(r):
        return tuple(sorted(names[i] for i in _after(model, moves[r])))

    def best_of(entries):
        """Lowest (value, k), ties broken by the sorted term names (computed for tied entries only)."""
        low = min((e[0], e[1]) for e in entries)
        tied = [e for e in entries if (e[0], e[1]) == low]
        return min(tied, key=lambda e: key_names(e[2]))

    kinds = np.array([m[0] for m in moves])
    good = ~np.asarray(bad)
    drop_rows = np.flatnonzero((kinds == "drop") & good)
    add_rows = np.flatnonzero((kinds == "add") & good)
    swap_rows = np.flatnonzero((kinds == "swap") & good)
    f_drop, p_drop = _f_tests(new_rss[drop_rows], rss, k - new_k[drop_rows], n, np.full(drop_rows.size, k))
    f_add, p_add = _f_tests(np.full(add_rows.size, rss), new_rss[add_rows], new_k[add_rows] - k, n, new_k[add_rows])
    drops = [(-p_drop[j], int(new_k[r]), r, f_drop[j], p_drop[j])
             for j, r in enumerate(drop_rows) if np.isfinite(p_drop[j])]
    adds = [(p_add[j], int(new_k[r]), r, f_add[j], p_add[j])
            for j, r in enumerate(add_rows) if np.isfinite(p_add[j])]
    swaps = [(new_rss[r] / (n - new_k[r]), int(new_k[r]), r, np.nan, np.nan)
             for r in swap_rows if n - new_k[r] > 0]
    if drops:
        best = best_of(drops)
        if best[4] > opts.alpha_remove:
            return best[2], (best[3], best[4])
    if adds:
        best = best_of(adds)
        if best[4] < opts.alpha_enter:
            return best[2], (best[3], best[4])
    if swaps and n - k > 0:
        best = best_of(swaps)
        current = rss / (n - k)
        if best[0] < current * (1.0 - 1e-12):
            return best[2], (np.nan, np.nan)
    return None, (np.nan, np.nan)


def merge(candidates, moments, options: StepwiseOptions, results: Sequence[dict]) -> Found:
    """Pool the models visited from every start (first occurrence kept) into a :class:`Found`.

    ``details`` holds ``path`` (the first start's path), ``runs`` (per start:
    ``start``, ``path``, ``final``, ``final_terms``, ``stopped_by``),
    ``final`` (the final subset of each start), ``criterion`` and ``method``.
    """
    n = int(moments.n) if moments is not None else int(np.asarray(candidates.y).shape[0])
    missing = sum(r is None for r in results)
    results = [r for r in results if r is not None]  # units that did not finish (a stopped job)
    if not results:
        return Found(method=options.method, subsets=(), rss=np.zeros(0), k=np.zeros(0, dtype=np.int64), n=n,
                     exact=False, stopped_by="stopped before any start finished",
                     details=MappingProxyType({"path": (), "runs": (), "final": (), "criterion": options.criterion,
                                               "method": options.method}))
    subsets, rss, ks, index = [], [], [], {}
    for res in results:
        for model, r, k in res["visited"]:
            if model in index:
                continue
            index[model] = len(subsets)
            subsets.append(model)
            rss.append(r)
            ks.append(k)
    names = [t.name for t in candidates.terms]
    runs = tuple(MappingProxyType({
        "start": res["start"], "path": tuple(MappingProxyType(s) for s in res["path"]),
        "final": tuple(res["final"]), "final_terms": tuple(names[i] for i in res["final"]),
        "stopped_by": res["stopped_by"],
    }) for res in results)
    reasons = [f"{r['start']}: {r['stopped_by']}" for r in results]
    details = MappingProxyType({
        "path": runs[0]["path"], "runs": runs, "final": tuple(r["final"] for r in runs),
        "criterion": options.criterion, "method": options.method,
        "alpha_enter": options.alpha_enter, "alpha_remove": options.alpha_remove,
    })
    return Found(
        method=options.method, subsets=tuple(subsets), rss=np.array(rss, dtype=float),
        k=np.array(ks, dtype=np.int64), n=n,
        evaluated=sum(r["evaluated"] for r in results), singular=sum(r["singular"] for r in results),
        exact=False,
        stopped_by=("; ".join(reasons) if len(reasons) > 1 else results[0]["stopped_by"])
        + (f"; {missing} start(s) did not finish" if missing else ""),
        details=details,
    )


def _refuse_retired(retired: dict, where: str) -> None:
    """Refuse keywords that are no longer settings, naming what replaced them."""
    if "direction" in retired:
        old = retired["direction"]
        new = RENAMED_STEP_METHODS.get(old, old if old in STEP_METHODS else "stepwise")
        raise OptionError(f"{where} has no setting 'direction' any more; did you mean method={new!r}? "
                          f"(methods: {', '.join(STEP_METHODS)})")
    if retired:
        raise TypeError(f"{where}() got unexpected keyword argument(s) {', '.join(map(repr, retired))}")


def stepwise_search(
    candidates,
    moments=None,
    *,
    method: str = "stepwise",
    criterion: str = "aic",
    alpha_enter: float = 0.15,
    alpha_remove: float = 0.15,
    start: Any = "empty",
    starts: Sequence | None = None,
    swaps: bool = True,
    forced: Sequence[str] = (),
    forbidden: Sequence[str] = (),
    hierarchy: bool = True,
    max_steps: int | None = None,
    convention: str = "sigma-counted",
    time_budget: float | None = None,
    n_jobs: int = 1,
    backend: str = "loky",
    scheduler: str | None = None,
    **retired,
) -> Found:
    """Stepwise selection on the moments with one-column (or one-block) sweeps.

    Parameters
    ----------
    candidates : CandidateSet
    moments : Moments, optional
        Computed from ``candidates`` when omitted (one pass over the data).
    method : {"forward", "backward", "stepwise"}, default "stepwise"
        Forward selection (adds), backward elimination (drops) or stepwise
        (steps both ways).
    criterion : {"aic", "aicc", "bic", "f_test"}
        AIC/AICc/BIC as defined in :mod:`selectkit.criteria` (``k`` counts the
        intercept; σ² is counted too under the default convention), or the
        partial F-test with ``alpha_enter``/``alpha_remove``.
    alpha_enter, alpha_remove : float, default 0.15
        F-test significance levels; ``alpha_enter ≤ alpha_remove``.
    start : "empty", "full" or sequence of term names
        The starting model.  ``"full"`` takes, for each family, its first form
        in candidate order (plus every block and forced term).
    starts : sequence, optional
        Several starts (each like ``start``), run as separate work units; the
        models visited from all of them are pooled.  Overrides ``start``.
    swaps : bool, default True
        Let a step replace one form of a variable by another of its family.
    forced, forbidden : sequence of str
        Term names always in / never in.
    hierarchy : bool, default True
        Respect ``Term.requires``.
    max_steps : int, optional
        Default ``4 × number of terms + 10`` per start.
    convention : {"sigma-counted", "coefficients-only"}
    time_budget : float, optional
        Seconds per start.
    n_jobs, backend, scheduler
        Passed to :func:`selectkit.parallel.run_units` (one unit per start).

    Returns
    -------
    Found
        ``method`` is the one asked for; every model on the path(s) with its rss
        and k; ``details["path"]`` lists each step (move, term, criterion
        before/after, F and p for the F-test) and ``stopped_by`` says why it
        ended.

    Examples
    --------
    >>> import numpy as np
    >>> from tests.factories import make_candidates
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(80, 4)); y = 2 * X[:, 1] + rng.normal(size=80)
    >>> found = stepwise_search(make_candidates(X, y), method="forward")
    >>> found.details["path"][1]["term"]
    'x1'
    """
    _refuse_retired(retired, "stepwise_search")
    options = StepwiseOptions(
        method=method, criterion=criterion, alpha_enter=alpha_enter, alpha_remove=alpha_remove,
        starts=tuple(starts) if starts is not None else (start if isinstance(start, str) else tuple(start),),
        swaps=swaps, forced=tuple(forced), forbidden=tuple(forbidden), hierarchy=hierarchy,
        max_steps=max_steps, convention=convention, time_budget=time_budget,
    )
    if moments is None:
        moments = moments_of(candidates)
    units = plan(candidates, moments, options)
    results = run_units(run_unit, units, n_jobs=n_jobs, backend=backend, scheduler=scheduler)
    return merge(candidates, moments, options, results)
