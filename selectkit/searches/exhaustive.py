"""Exact best-subset search by branch and bound: the N best models of every size.

The search enumerates, implicitly, every model that can be built from the
candidate **terms** (a term is one column, or a categorical block whose
columns enter together) under the constraints

* at most one term of each family (``Term.family``: the forms of one variable);
* hierarchy: a model holding a term must hold some term of each family in
  ``Term.requires`` (turn off with ``hierarchy=False``);
* forced terms (``Term.forced`` or ``forced=``) are in every model, forbidden
  terms in none;
* size, the number of columns (k − 1, since a block of L levels adds L − 1
  coefficients), at most ``max_size`` and at most n − 2 (every model keeps a
  residual degree of freedom),

and keeps, for every size, the ``n_best_per_size`` models with the smallest
residual sum of squares.  At fixed size and fixed n every rss-based criterion
(AIC, AICc, BIC, Mallows' Cp, adjusted R²) is a monotone function of rss, so
the best model overall by any of them is among the models kept.

Algorithm
---------
The dropping-columns tree with branch and bound of Gatu & Kontoghiorghes
(2006), over terms: a node is an ordered term list whose first terms are
fixed; one Cholesky factor of the node's columns gives the rss of all its
leading subsets at once; each child drops one free term.  Adding columns never
increases rss, so the rss of a node's full list bounds every model below it
and subtrees whose bound exceeds the current N-th best rss at every size they
can reach are cut.  Free terms are ordered by how much dropping them raises the
rss.  Thresholds start from a cheap beam search (forward selection keeping the
N best models at every step), so that every work unit prunes from its first
node; the answer does not depend on these starting values, only the work does.

Work is split at the top of the tree into units by the in/out decisions on the
most important free terms, two at a time, splitting further only the branch
that holds both (where the good models, hence the work, are); the units
depend only on the problem and the options, never on ``n_jobs``, and results
are merged in plan order, so the answer is identical on one or many workers
and on any backend.

References
----------
Furnival, G. M. and Wilson, R. W. (1974). Regressions by leaps and bounds.
    Technometrics 16(4), 499-511.
Gatu, C. and Kontoghiorghes, E. J. (2006). Branch-and-bound algorithms for
    computing the best-subset regression models. J. Comput. Graph. Statist.
    15(1), 139-156.
Miller, A. J. (2002). Subset Selection in Regression, 2nd ed. Chapman & Hall/CRC.
"""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass, replace
from functools import cached_property
from types import MappingProxyType

import numpy as np

from ..errors import OptionError, SearchError, TooManyCandidatesError
from ..kernels import PIVOT_TOLERANCE
from ..kernels.subsets import branch_and_bound, scaled_cross, subset_rss
from ..moments import Moments, moments_of
from ..parallel import WorkUnit, run_units
from ._found import Found

__all__ = ["ExhaustiveOptions", "plan", "run_unit", "merge", "exhaustive_search", "MAX_TERMS"]

#: Exact search works on 64-bit masks of terms.
MAX_TERMS = 64

#: Nodes per call of the compiled loop between two looks at the clock.
_NODES_PER_SLICE = 2000

#: Free terms decided at each step of the split into work units.
_SPLIT_STEP = 2


@dataclass(frozen=True)
class ExhaustiveOptions:
    """Options of the exhaustive search.

    Attributes
    ----------
    n_best_per_size : int, default 10
        Models kept for every size.
    max_size : int or None
        Largest model size in columns (coefficients besides the intercept).
    forced, forbidden : tuple of str
        Term names every model must hold / no model may hold (in addition to
        terms flagged ``Term.forced``).
    hierarchy : bool, default True
        Honour ``Term.requires``.
    time_budget : float or None
        Seconds; when reached the search returns the best models found so far
        with ``exact=False``.
    split_depth : int, default 16
        The in/out decisions on up to this many leading free terms, two at a
        time, define the work units (about 1.5 units per term; 0 gives one unit).
    """

    n_best_per_size: int = 10
    max_size: int | None = None
    forced: tuple[str, ...] = ()
    forbidden: tuple[str, ...] = ()
    hierarchy: bool = True
    time_budget: float | None = None
    split_depth: int = 16

    def __post_init__(self):
        n_best = self.n_best_per_size
        if isinstance(n_best, bool) or not isinstance(n_best, (int, np.integer)) or n_best < 1:
            raise OptionError(f"n_best_per_size must be a whole number ≥ 1 (got {n_best!r})")
        if self.max_size is not None and (
            isinstance(self.max_size, bool) or not isinstance(self.max_size, (int, np.integer)) or self.max_size < 0
        ):
            raise OptionError(f"max_size must be None or a whole number ≥ 0 of columns (got {self.max_size!r})")
        if self.time_budget is not None and not (
            isinstance(self.time_budget, (int, float, np.floating)) and self.time_budget > 0
        ):
            raise OptionError(f"time_budget must be None or a positive number of seconds (got {self.time_budget!r})")
        if isinstance(self.split_depth, bool) or not isinstance(self.split_depth, (int, np.integer)) \
                or not 0 <= self.split_depth <= 64:
            raise OptionError(f"split_depth must be a whole number from 0 to 64 (got {self.split_depth!r})")
        for name in ("forced", "forbidden"):
            value = getattr(self, name)
            if isinstance(value, str):
                value = (value,)
            object.__setattr__(self, name, tuple(str(v) for v in value))
        both = sorted(set(self.forced) & set(self.forbidden))
        if both:
            raise OptionError(f"terms {both} are both forced and forbidden; choose one")


@dataclass(frozen=True)
class _Problem:
    """The search problem in the compiled loop's terms (internal indices)."""

    A: np.ndarray
    term_index: tuple[int, ...]  # internal → CandidateSet.terms index
    t_cols: np.ndarray
    t_width: np.ndarray
    t_fam: np.ndarray
    t_req: np.ndarray
    t_bit: np.ndarray
    names: tuple[str, ...]
    forced: tuple[int, ...]
    free: tuple[int, ...]  # ordered, most important first
    max_size: int
    dropped: tuple[str, ...]

    @cached_property
    def columns_by_term(self) -> tuple[tuple[int, ...], ...]:
        """Each term's candidate columns as a plain tuple (hot in the Python-level beam search)."""
        return tuple(tuple(int(c) for c in self.t_cols[j, : self.t_width[j]]) for j in range(len(self.t_width)))


def _prepare(candidates, moments: Moments, options: ExhaustiveOptions) -> _Problem:
    terms = tuple(candidates.terms)
    names = [t.name for t in terms]
    known = set(names)
    for label in ("forced", "forbidden"):
        unknown = [n for n in getattr(options, label) if n not in known]
        if unknown:
            shown = ", ".join(sorted(known)[:20]) + (" ..." if len(known) > 20 else "")
            raise OptionError(f"{label} names unknown terms {unknown}; the terms are: {shown}")
    m = moments.m
    for t in terms:
        for c in t.columns:
            if not 0 <= c < m:
                raise SearchError(
                    f"term {t.name!r} refers to column {c} but the moments hold {m} columns; "
                    "compute the moments from the same candidate set"
                )
    if not moments.tss > 0:
        raise SearchError(
            f"the response has no variation over the {moments.n} rows (total sum of squares 0); "
            "there is nothing to explain"
        )
    forced_names = set(options.forced) | {t.name for t in terms if t.forced}
    forbidden = set(options.forbidden)
    diag = np.diag(moments.cross)
    dropped = []
    allowed = []
    for i, t in enumerate(terms):
        if t.name in forbidden:
            continue
        if any(not diag[c] > 0 for c in t.columns):
            if t.name in forced_names:
                raise SearchError(
                    f"forced term {t.name!r} has a constant column over the {moments.n} rows; "
                    "it cannot be fitted — drop it from the forced terms"
                )
            dropped.append(f"{t.name} (constant column)")
            continue
        allowed.append(i)
    forced_families = {}
    for i in allowed:
        t = terms[i]
        if t.name in forced_names:
            if t.family in forced_families:
                raise OptionError(
                    f"forced terms {forced_families[t.family]!r} and {t.name!r} are forms of the same "
                    f"variable {t.family!r}; a model holds at most one form of each variable"
                )
            forced_families[t.family] = t.name
    allowed = [i for i in allowed if terms[i].name in forced_names or terms[i].family not in forced_families]
    if options.hierarchy:
        while True:
            present = {terms[i].family for i in allowed}
            keep = []
            for i in allowed:
                missing = [f for f in terms[i].requires if f not in present]
                if missing:
                    if terms[i].name in forced_names:
                        raise SearchError(
                            f"forced term {terms[i].name!r} requires {missing}, which no allowed term provides"
                        )
                    dropped.append(f"{terms[i].name} (requires {', '.join(missing)}, not available)")
                else:
                    keep.append(i)
            if len(keep) == len(allowed):
                break
            allowed = keep
    if len(allowed) > MAX_TERMS:
        raise TooManyCandidatesError(
            f"exact search takes at most {MAX_TERMS} terms but {len(allowed)} are allowed; "
            "screen them first (method 'screen') or forbid some",
            count=len(allowed),
        )
    families = sorted({terms[i].family for i in allowed})
    fam_index = {f: j for j, f in enumerate(families)}
    rank = {i: r for r, i in enumerate(sorted(allowed, key=lambda i: (terms[i].name, i)))}
    n_terms = len(allowed)
    max_width = max([terms[i].width for i in allowed], default=1)
    t_cols = np.full((max(n_terms, 1), max_width), -1, dtype=np.int64)
    t_width = np.zeros(n_terms, dtype=np.int64)
    t_fam = np.zeros(n_terms, dtype=np.int64)
    t_req = np.zeros(n_terms, dtype=np.uint64)
    t_bit = np.zeros(n_terms, dtype=np.uint64)
    for j, i in enumerate(allowed):
        t = terms[i]
        t_cols[j, : t.width] = t.columns
        t_width[j] = t.width
        t_fam[j] = fam_index[t.family]
        if options.hierarchy:
            req = 0
            for f in t.requires:
                req |= 1 << fam_index[f]
            t_req[j] = np.uint64(req)
        t_bit[j] = np.uint64(1) << np.uint64(rank[i])
    total_cols = int(t_width.sum())
    max_size = total_cols if options.max_size is None else min(int(options.max_size), total_cols)
    # at least one residual degree of freedom: k = size + 1 ≤ n − 1
    max_size = max(min(max_size, int(moments.n) - 2), 0)
    A, _ = scaled_cross(moments.cross)
    forced = tuple(j for j, i in enumerate(allowed) if terms[i].name in forced_names)
    forced_width = int(sum(t_width[j] for j in forced))
    if forced_width > max_size:
        raise OptionError(
            f"the forced terms have {forced_width} columns but models may have at most {max_size} "
            f"(max_size={options.max_size}, and {moments.n} rows leave room for {max(moments.n - 2, 0)}); "
            "raise max_size, force fewer terms or add rows"
        )
    free = [j for j in range(n_terms) if j not in forced]
    problem = _Problem(A, tuple(allowed), t_cols, t_width, t_fam, t_req, t_bit,
                       tuple(terms[i].name for i in allowed), forced, (), max_size, tuple(dropped))
    return replace(problem, free=tuple(_importance_order(problem, free)))


def _columns_of(problem: _Problem, model) -> np.ndarray:
    by_term = problem.columns_by_term
    return np.asarray([c for j in model for c in by_term[j]], dtype=np.int64)


def _importance_order(problem: _Problem, free) -> list[int]:
    """Free terms, most important first: by the rise in rss when each is dropped
    from the model of all allowed terms, or by |correlation| with the response
    when that model is rank-deficient."""
    A = problem.A
    y = A.shape[0] - 1
    everything = list(problem.forced) + list(free)
    cols = _columns_of(problem, everything)
    score = {}
    ok = False
    if cols.size and cols.size < 400:
        G = A[np.ix_(cols, cols)]
        try:
            cond_ok = subset_rss(A, cols, PIVOT_TOLERANCE) >= 0
            if cond_ok:
                Ginv = np.linalg.inv(G)
                beta = Ginv @ A[cols, y]
                pos = 0
                where = {}
                for j in everything:
                    w = int(problem.t_width[j])
                    where[j] = np.arange(pos, pos + w)
                    pos += w
                for j in free:
                    b = beta[where[j]]
                    score[j] = float(b @ np.linalg.solve(Ginv[np.ix_(where[j], where[j])], b))
                ok = all(np.isfinite(v) for v in score.values())
        except np.linalg.LinAlgError:
            ok = False
    if not ok:
        for j in free:
            c = problem.t_cols[j, : problem.t_width[j]]
            score[j] = float(np.max(np.abs(A[c, y]))) if len(c) else 0.0
    return sorted(free, key=lambda j: (-score[j], problem.names[j]))


def _hierarchy_ok(problem: _Problem, model) -> bool:
    fams = 0
    reqs = 0
    for j in model:
        fams |= 1 << int(problem.t_fam[j])
        reqs |= int(problem.t_req[j])
    return reqs & ~fams == 0


#: Free terms above which planning seeds the thresholds by a beam search (measured:
#: at 12–20 terms the beam costs more than it saves; at 32 it saves 3×, at 40 10×).
_BEAM_FROM_TERMS = 20


def _starting_thresholds(problem: _Problem, n_best: int) -> np.ndarray:
    """N-th best rss per size among models met by a beam search of width N, and those models.

    A valid upper bound on the true N-th best rss at each size (the models are
    real, distinct and valid), so pruning with it never removes a model that
    belongs in the answer.
    """
    sizes = problem.max_size + 1
    pool: dict[tuple, tuple[int, float]] = {}
    width = problem.t_width
    base = tuple(sorted(problem.forced))
    base_width = int(sum(width[j] for j in base))
    if base_width > problem.max_size:
        return np.full(sizes, np.inf), ()
    beam = [base]
    seen = {base}
    base_rss = subset_rss(problem.A, _columns_of(problem, base), PIVOT_TOLERANCE)
    if base_rss >= 0 and _hierarchy_ok(problem, base):
        pool[base] = (base_width, base_rss)
    for _ in range(len(problem.free)):
        found = {}
        for model in beam:
            used = {int(problem.t_fam[j]) for j in model}
            w0 = int(sum(width[j] for j in model))
            for j in problem.free:
                if j in model or int(problem.t_fam[j]) in used or w0 + width[j] > problem.max_size:
                    continue
                new = tuple(sorted(model + (j,)))
                if new in seen:
                    continue
                seen.add(new)
                r = subset_rss(problem.A, _columns_of(problem, new), PIVOT_TOLERANCE)
                if r < 0:
                    continue
                found[new] = r
                if _hierarchy_ok(problem, new):
                    pool[new] = (w0 + int(width[j]), r)
        if not found:
            break
        beam = sorted(found, key=lambda mdl: (found[mdl], mdl))[:n_best]
    per_size = [[] for _ in range(sizes)]
    for s, r in pool.values():
        per_size[s].append(r)
    out = np.full(sizes, np.inf)
    for s, values in enumerate(per_size):
        if len(values) >= n_best:
            out[s] = sorted(values)[n_best - 1]
    kept = sorted(((s, r, mdl) for mdl, (s, r) in pool.items()), key=lambda e: (e[0], e[1], e[2]))
    seeds, count = [], {}
    for s, r, mdl in kept:
        if count.get(s, 0) < n_best:
            seeds.append((s, float(r), mdl))
            count[s] = count.get(s, 0) + 1
    return out, tuple(seeds)


def plan(candidates, moments: Moments | None, options: ExhaustiveOptions) -> list[WorkUnit]:
    """Split the search into work units (fixed order, independent of ``n_jobs``).

    Parameters
    ----------
    candidates : CandidateSet
    moments : Moments or None
        Computed from ``candidates`` when None.
    options : ExhaustiveOptions

    Returns
    -------
    list of WorkUnit
        Keys ``"exhaustive/step-LL-PATTERN"``; payloads hold the scaled cross-products
        (m × m), the term tables, starting thresholds and the unit's fixed and
        free terms.
    """
    if not isinstance(options, ExhaustiveOptions):
        raise OptionError(f"options must be ExhaustiveOptions (got {type(options).__name__})")
    if moments is None:
        moments = moments_of(candidates)
    problem = _prepare(candidates, moments, options)
    n_best = int(options.n_best_per_size)
    if len(problem.free) <= _BEAM_FROM_TERMS and options.time_budget is None:
        # Small problems: the bound prunes well enough from infinite thresholds, and the
        # beam would cost more than it saves (it matters from about 26 terms on).
        init_thr, seeds = np.full(problem.max_size + 1, np.inf), ()
    else:
        init_thr, seeds = _starting_thresholds(problem, n_best)
    deadline = None if options.time_budget is None else time.time() + float(options.time_budget)
    free = list(problem.free)
    depth = min(len(free), int(options.split_depth))
    width = problem.t_width
    fam = problem.t_fam

    def unit(key, fixed, rest):
        payload = {
            "problem": problem,
            "n_best": n_best,
            "init_thr": init_thr,
            "fixed": tuple(fixed),
            "free": tuple(rest),
            "deadline": deadline,
            "seeds": seeds,
        }
        return WorkUnit(key=key, payload=payload)

    # In/out decisions on the leading (most important) free terms, two at a time.
    # The three patterns other than "both in" become units; "both in" is split
    # again, because the models holding the most important terms are where the
    # work is.  The units partition the tree and depend only on the problem.
    units = []
    chain, rest, decided, level, ended = list(problem.forced), free, 0, 0, False
    while decided < depth and rest:
        w = min(_SPLIT_STEP, depth - decided, len(rest))
        head, tail = rest[:w], rest[w:]
        for pattern in range((1 << w) - 2, -1, -1):
            included = [head[b] for b in range(w) if pattern >> (w - 1 - b) & 1]
            fams = {int(fam[j]) for j in included}
            if len(fams) != len(included):
                continue
            fixed = chain + included
            if int(sum(width[j] for j in fixed)) > problem.max_size:
                continue
            units.append(unit(f"exhaustive/step-{level:02d}-{pattern:0{w}b}", fixed,
                              [j for j in tail if int(fam[j]) not in fams]))
        fams = {int(fam[j]) for j in head}
        chain = chain + head
        rest = [j for j in tail if int(fam[j]) not in fams]
        decided += w
        level += 1
        if len(fams) != len(head) or int(sum(width[j] for j in chain)) > problem.max_size:
            ended = True
            break
    if not ended:
        units.append(unit(f"exhaustive/step-{level:02d}-rest", chain, rest))
    # the deepest units (most important terms fixed) are usually the longest: start them first
    units.reverse()
    return units


def run_unit(unit: WorkUnit) -> dict:
    """Search one branch of the tree.

    Returns
    -------
    dict
        ``models``: list of (size, scaled rss, internal term tuple);
        ``evaluated``, ``pruned``, ``singular``, ``nodes``; ``complete``.
    """
    p = unit.payload
    problem: _Problem = p["problem"]
    n_best = p["n_best"]
    n_terms = problem.t_width.shape[0]
    sizes = problem.max_size + 1
    init_thr = np.asarray(p["init_thr"], dtype=np.float64).copy()
    thr = init_thr.copy()
    best_rss = np.full((sizes, n_best), np.inf)
    best_mask = np.zeros((sizes, n_best), dtype=np.uint64)
    best_count = np.zeros(sizes, dtype=np.int64)
    capacity = n_terms * (n_terms + 1) // 2 + n_terms + 2
    st_terms = np.zeros((capacity, max(n_terms, 1)), dtype=np.int64)
    st_len = np.zeros(capacity, dtype=np.int64)
    st_k = np.zeros(capacity, dtype=np.int64)
    st_bound = np.zeros(capacity)
    st_root = np.zeros(capacity, dtype=np.bool_)
    root = list(p["fixed"]) + list(p["free"])
    st_terms[0, : len(root)] = root
    st_len[0] = len(root)
    st_k[0] = len(p["fixed"])
    st_root[0] = True
    st_level = np.zeros(capacity, dtype=np.int64)
    # per-depth downdate state of the compiled loop (kept between slices of a time budget)
    total_cols = int(problem.t_width.sum())
    levels = n_terms + 2
    lvl_M = np.zeros((levels, total_cols, total_cols))
    lvl_beta = np.zeros((levels, total_cols))
    lvl_rss = np.zeros(levels)
    lvl_ok = np.zeros(levels, dtype=np.bool_)
    lvl_vif = np.zeros(levels)
    lvl_r = np.zeros(levels, dtype=np.int64)
    lvl_in = np.zeros((levels, max(n_terms, 1)), dtype=np.bool_)
    top = np.zeros(1, dtype=np.int64)
    counts = np.zeros(3, dtype=np.int64)
    pruned = np.zeros(2)
    deadline = p["deadline"]
    complete = False
    while True:
        if deadline is not None and time.time() >= deadline:
            break
        complete = branch_and_bound(
            problem.A, problem.t_cols, problem.t_width, problem.t_fam, problem.t_req, problem.t_bit,
            problem.max_size, n_best, PIVOT_TOLERANCE, init_thr, thr, best_rss, best_mask, best_count,
            st_terms, st_len, st_k, st_bound, st_root, top, counts, pruned,
            _NODES_PER_SLICE if deadline is not None else 1 << 62, p.get("family_tiers", True),
            st_level, lvl_M, lvl_beta, lvl_rss, lvl_ok, lvl_vif, lvl_r, lvl_in,
        )
        if complete:
            break
    bit_to_term = {int(problem.t_bit[j]): j for j in range(n_terms)}
    models = []
    for s in range(sizes):
        for q in range(int(best_count[s])):
            mask = int(best_mask[s, q])
            model = []
            while mask:
                low = mask & -mask
                model.append(bit_to_term[low])
                mask ^= low
            models.append((s, float(best_rss[s, q]), tuple(sorted(model))))
    return {
        "key": unit.key,
        "models": models,
        "evaluated": int(counts[0]),
        "singular": int(counts[1]) + int(pruned[1]),
        "nodes": int(counts[2]),
        "pruned": int(pruned[0]),
        "complete": bool(complete),
        "problem": _summary(problem),
        # models met while planning: the best found so far when the clock stops a branch
        "seeds": () if complete else p.get("seeds", ()),
    }


def _summary(problem: _Problem) -> dict:
    """What merge needs to know about the problem (small; travels with every result)."""
    return {
        "term_index": problem.term_index,
        "forced": problem.forced,
        "free": problem.free,
        "names": problem.names,
        "dropped": problem.dropped,
        "forced_width": int(sum(problem.t_width[j] for j in problem.forced)),
    }


def merge(candidates, moments: Moments | None, options: ExhaustiveOptions, results) -> Found:
    """Merge unit results (in plan order) into one :class:`Found`.

    For every size the ``n_best_per_size`` models of smallest rss are kept,
    ties broken by the sorted tuple of term names.
    """
    if moments is None:
        moments = moments_of(candidates)
    terms = candidates.terms
    results = list(results)
    unfinished = sum(res is None for res in results)  # units a stopped job never ran
    results = [res for res in results if res is not None]
    if unfinished and not results:
        return Found(method="exhaustive", subsets=(), rss=np.zeros(0), k=np.zeros(0, dtype=np.int64),
                     n=int(moments.n), exact=False, stopped_by="stopped before any branch was searched")
    per_size: dict[int, list] = {}
    seen = set()
    for res in results:
        for size, rss, model in res["models"]:
            per_size.setdefault(size, []).append((rss, model))
            seen.add(model)
    if unfinished or not all(res["complete"] for res in results):
        for res in results:
            for size, rss, model in res["seeds"]:
                if model not in seen:
                    seen.add(model)
                    per_size.setdefault(size, []).append((rss, model))
    problem = results[0]["problem"] if results else _summary(_prepare(candidates, moments, options))
    n_best = int(options.n_best_per_size)
    subsets, rss_out, k_out = [], [], []
    for size in sorted(per_size):
        entries = []
        for rss, model in per_size[size]:
            original = tuple(sorted(problem['term_index'][j] for j in model))
            names = tuple(sorted(terms[i].name for i in original))
            entries.append((rss, names, original))
        entries.sort(key=lambda e: (e[0], e[1]))
        for rss, _, original in entries[:n_best]:
            subsets.append(original)
            rss_out.append(rss * moments.tss)
            k_out.append(size + 1)
    forced_width = problem["forced_width"]
    if not any(len(s) > len(problem["forced"]) for s in subsets):
        if not subsets and problem["forced"]:
            raise SearchError(
                f"the forced terms {[problem['names'][j] for j in problem['forced']]} are collinear "
                f"(rank-deficient over the {moments.n} rows); no model can hold them all"
            )
        if problem["free"] or problem["dropped"]:
            raise SearchError(
                f"no model with a candidate term could be fitted over the {moments.n} rows: every candidate "
                f"is constant or a linear combination of {'the forced terms' if forced_width else 'the intercept'}"
                + (f" (set aside: {', '.join(problem['dropped'])})" if problem["dropped"] else "")
                + "; check the candidate columns"
            )
        if not problem["term_index"]:
            raise SearchError("there are no candidate terms to search; add predictors or lift the exclusions")
    complete = unfinished == 0 and all(res["complete"] for res in results)
    if complete:
        stopped_by = "completed"
    elif unfinished:
        stopped_by = f"stopped: {unfinished} of {len(results) + unfinished} branches not searched"
    else:
        stopped_by = (f"time budget of {options.time_budget:g} s reached; "
                      f"{sum(not r['complete'] for r in results)} of {len(results)} branches unfinished")
    details = {
        "options": asdict(options),
        "units": len(results),
        "nodes": sum(r["nodes"] for r in results),
        "set_aside": problem["dropped"],
        "algorithm": "branch and bound on the dropping-columns tree (Gatu & Kontoghiorghes 2006)",
    }
    return Found(
        method="exhaustive",
        subsets=tuple(subsets),
        rss=np.asarray(rss_out, dtype=float),
        k=np.asarray(k_out, dtype=np.int64),
        n=int(moments.n),
        evaluated=sum(r["evaluated"] for r in results),
        pruned=sum(r["pruned"] for r in results),
        singular=sum(r["singular"] for r in results),
        exact=complete,
        stopped_by=stopped_by,
        details=MappingProxyType(details),
    )


def exhaustive_search(
    candidates,
    moments: Moments | None = None,
    *,
    n_best_per_size: int = 10,
    max_size: int | None = None,
    forced=(),
    forbidden=(),
    hierarchy: bool = True,
    time_budget: float | None = None,
    n_jobs: int = 1,
    backend: str = "loky",
    scheduler: str | None = None,
) -> Found:
    """The ``n_best_per_size`` best models of every size, exactly, by branch and bound.

    Parameters
    ----------
    candidates : CandidateSet
        Terms, their columns, families and hierarchy (``Term.requires``).
    moments : Moments, optional
        Moments of ``candidates`` (computed when omitted); the search never
        touches the rows again.
    n_best_per_size : int, default 10
    max_size : int, optional
        Largest size, counted in columns (k − 1).
    forced, forbidden : sequence of str
        Term names.
    hierarchy : bool, default True
    time_budget : float, optional
        Seconds; on expiry the best models found so far come back with
        ``exact=False`` and ``stopped_by`` saying so.
    n_jobs : int, default 1
    backend : str, default "loky"
        See :mod:`selectkit.parallel`.
    scheduler : str, optional
        Dask scheduler address for ``backend="dask"``.

    Returns
    -------
    Found
        ``method="exhaustive"``; for every size the best models by rss (ties by
        term names).  ``k`` counts the intercept.  Because AIC, AICc, BIC, Cp and
        adjusted R² are monotone in rss at fixed k and n, the best model by any
        of them is among those returned.

    Raises
    ------
    TooManyCandidatesError
        More than 64 allowed terms (screen first).
    SearchError
        When no model with a candidate term can be fitted (all constant or collinear).
    OptionError
        On invalid options or unknown term names.

    Notes
    -----
    p-values of a model chosen by a search are optimistic, and a selected
    association is not evidence of cause; the choice rests with the
    practitioner.

    Examples
    --------
    >>> import numpy as np, pandas as pd
    >>> from selectkit.data import prepare
    >>> from selectkit.candidates import build_candidates
    >>> rng = np.random.default_rng(0)
    >>> bays = pd.DataFrame({"light": rng.uniform(5, 40, 80), "co2": rng.uniform(400, 1200, 80),
    ...                      "humidity": rng.uniform(0.2, 1.5, 80)})
    >>> bays["yield_kg_m2"] = 20 + 4 * np.log(bays["light"]) + rng.normal(size=80)
    >>> cands = build_candidates(prepare(bays, response="yield_kg_m2"), forms=("identity", "log"))
    >>> found = exhaustive_search(cands, n_best_per_size=1)
    >>> [cands.terms[i].name for i in found.subsets[1]], found.exact
    (['log(light)'], True)
    """
    options = ExhaustiveOptions(
        n_best_per_size=n_best_per_size, max_size=max_size, forced=tuple(forced), forbidden=tuple(forbidden),
        hierarchy=hierarchy, time_budget=time_budget,
    )
    if moments is None:
        moments = moments_of(candidates)
    units = plan(candidates, moments, options)
    results = run_units(run_unit, units, n_jobs=n_jobs, backend=backend, scheduler=scheduler)
    return merge(candidates, moments, options, results)
