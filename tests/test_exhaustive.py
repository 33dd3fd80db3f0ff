"""Exact best-subset search against a brute-force enumeration refitted with statsmodels."""

import itertools

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from selectkit import criteria
from selectkit.errors import OptionError, SearchError, TooManyCandidatesError
from selectkit.parallel import WorkUnit
from selectkit.searches import exhaustive
from selectkit.searches.exhaustive import ExhaustiveOptions, exhaustive_search
from tests.factories import ar1_design, make_candidates


def build_problem(seed, n, n_plain, family_forms, block_levels, interaction, forced_first, weighted):
    """Random candidates: plain columns, families of 2-3 forms, a dummy block, maybe an interaction."""
    rng = np.random.default_rng(seed)
    columns, names, families, blocks, requires = [], [], [], {}, {}
    for i in range(n_plain):
        columns.append(rng.normal(size=n))
        names.append(f"p{i}")
        families.append(f"p{i}")
    for f, forms in enumerate(family_forms):
        base = rng.uniform(0.5, 4.0, size=n)
        made = [(f"v{f}", base), (f"log(v{f})", np.log(base)), (f"sqrt(v{f})", np.sqrt(base))][:forms]
        for name, col in made:
            columns.append(col)
            names.append(name)
            families.append(f"v{f}")
    if block_levels:
        levels = np.r_[np.arange(block_levels), rng.integers(0, block_levels, n - block_levels)]
        rng.shuffle(levels)
        start = len(columns)
        for level in range(1, block_levels):
            columns.append((levels == level).astype(float))
            names.append(f"cultivar[{level}]")
            families.append("cultivar")
        blocks["cultivar"] = list(range(start, len(columns)))
    if interaction and n_plain >= 2 and len(columns) < 12:
        columns.append(columns[0] * columns[1])
        names.append("p0*p1")
        families.append("p0*p1")
        requires["p0*p1"] = ("p0", "p1")
    X = np.column_stack(columns)
    effects = rng.normal(size=X.shape[1]) * (rng.uniform(size=X.shape[1]) < 0.6)
    y = X @ effects + rng.normal(size=n)
    forced = (names[0],) if forced_first else ()
    weights = rng.uniform(0.3, 3.0, size=n) if weighted else None
    cands = make_candidates(X, y, names=names, families=families, blocks=blocks, requires=requires,
                            forced=forced, weights=weights)
    return cands


def brute_force(cands, n_best, max_size=None, hierarchy=True, forbidden=()):
    """Every admissible subset of terms refitted with statsmodels OLS/WLS (reference library)."""
    terms = cands.terms
    X, y, w = cands.matrix, cands.y, cands.weights
    n = len(y)
    forced = [i for i, t in enumerate(terms) if t.forced]
    free = [i for i, t in enumerate(terms) if not t.forced and t.name not in forbidden]
    per_size = {}
    for r in range(len(free) + 1):
        for extra in itertools.combinations(free, r):
            model = tuple(sorted(forced + list(extra)))
            fams = [terms[i].family for i in model]
            if len(set(fams)) != len(fams):
                continue
            if hierarchy and any(f not in fams for i in model for f in terms[i].requires):
                continue
            cols = [c for i in model for c in terms[i].columns]
            if max_size is not None and len(cols) > max_size:
                continue
            design = np.column_stack([np.ones(n), X[:, cols]]) if cols else np.ones((n, 1))
            if np.linalg.matrix_rank(design) < design.shape[1]:
                continue
            fit = (sm.OLS(y, design) if w is None else sm.WLS(y, design, weights=w)).fit()
            names = tuple(sorted(terms[i].name for i in model))
            per_size.setdefault(len(cols), []).append((fit.ssr, names, model))
    return {s: sorted(v)[:n_best] for s, v in per_size.items()}


def by_size(found):
    out = {}
    for model, rss, k in zip(found.subsets, found.rss, found.k):
        out.setdefault(int(k) - 1, []).append((float(rss), model))
    return out


def assert_matches(found, reference):
    got = by_size(found)
    assert sorted(got) == sorted(reference)
    for size, want in reference.items():
        have = got[size]
        assert len(have) == len(want), size
        np.testing.assert_allclose([r for r, _ in have], [r for r, *_ in want], rtol=1e-9)
        # subsets must agree except where two rss are too close to order reliably
        ref_rss = np.array([r for r, *_ in want])
        for i, ((_, model), (r, _, ref_model)) in enumerate(zip(have, want)):
            near = np.abs(ref_rss - r) <= 1e-9 * max(r, 1e-300)
            if near.sum() == 1:
                assert model == ref_model, (size, i)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 10**6),
    n=st.integers(25, 70),
    n_plain=st.integers(1, 3),
    family_forms=st.lists(st.integers(2, 3), max_size=2),
    block_levels=st.sampled_from([0, 3, 4]),
    interaction=st.booleans(),
    forced_first=st.booleans(),
    weighted=st.booleans(),
    n_best=st.integers(1, 4),
    hierarchy=st.booleans(),
)
def test_equals_brute_force_refit(seed, n, n_plain, family_forms, block_levels, interaction, forced_first,
                                  weighted, n_best, hierarchy):
    cands = build_problem(seed, n, n_plain, family_forms, block_levels, interaction, forced_first, weighted)
    assert cands.matrix.shape[1] <= 12
    found = exhaustive_search(cands, n_best_per_size=n_best, hierarchy=hierarchy)
    assert found.exact and found.stopped_by == "completed" and found.method == "exhaustive"
    assert_matches(found, brute_force(cands, n_best, hierarchy=hierarchy))


def test_max_size_forbidden_and_forced_by_name():
    cands = build_problem(11, 60, 4, [3, 2], 3, True, False, False)
    found = exhaustive_search(cands, n_best_per_size=3, max_size=4, forbidden=["p2"])
    assert max(found.k) == 5
    assert_matches(found, brute_force(cands, 3, max_size=4, forbidden=("p2",)))
    forced = exhaustive_search(cands, n_best_per_size=2, forced=["log(v0)"])
    index = [t.name for t in cands.terms].index("log(v0)")
    assert all(index in s for s in forced.subsets)
    assert not any({"v0", "sqrt(v0)"} & {cands.terms[i].name for i in s} for s in forced.subsets)


def test_best_by_any_rss_criterion_is_among_the_kept_models():
    cands = build_problem(5, 50, 4, [3], 3, False, False, False)
    found = exhaustive_search(cands, n_best_per_size=1)
    every = brute_force(cands, 10**6)
    rss = np.array([r for v in every.values() for r, *_ in v])
    k = np.array([s + 1 for s, v in every.items() for _ in v])
    n = len(cands.y)
    for fn in (criteria.aic, criteria.bic):
        assert fn(found.rss, n, found.k).min() == pytest.approx(fn(rss, n, k).min(), rel=1e-12)


def test_null_model_and_counts():
    X = ar1_design(100, 8, seed=2)
    y = X[:, 1] - X[:, 5] + np.random.default_rng(3).normal(size=100)
    found = exhaustive_search(make_candidates(X, y), n_best_per_size=2)
    assert found.subsets[0] == () and found.k[0] == 1
    assert found.rss[0] == pytest.approx(((y - y.mean()) ** 2).sum())
    assert found.subsets[-1] == tuple(range(8)) and found.k[-1] == 9
    assert found.n == 100 and found.evaluated > 0
    assert found.evaluated + found.pruned + found.singular <= 2**8


def test_same_result_on_one_and_two_workers():
    X = ar1_design(300, 18, seed=4)
    y = X[:, [0, 4, 9, 15]] @ [1.0, -0.7, 0.5, 0.8] + np.random.default_rng(5).normal(size=300)
    cands = make_candidates(X, y, families=[f"f{j // 2}" for j in range(18)])
    one = exhaustive_search(cands, n_best_per_size=5)
    two = exhaustive_search(cands, n_best_per_size=5, n_jobs=2, backend="loky")
    assert one.subsets == two.subsets
    np.testing.assert_array_equal(one.rss, two.rss)
    np.testing.assert_array_equal(one.k, two.k)
    assert (one.evaluated, one.pruned, one.singular) == (two.evaluated, two.pruned, two.singular)


def test_units_do_not_depend_on_workers_and_cover_the_tree():
    cands = build_problem(8, 50, 4, [3, 2], 3, False, True, False)
    options = ExhaustiveOptions(n_best_per_size=2)
    units = exhaustive.plan(cands, None, options)
    assert len(units) >= 4 and all(isinstance(u, WorkUnit) for u in units)
    assert len({u.key for u in units}) == len(units)
    results = [exhaustive.run_unit(u) for u in reversed(units)][::-1]
    found = exhaustive.merge(cands, None, options, results)
    assert_matches(found, brute_force(cands, 2))


def test_more_than_64_terms_asks_for_screening():
    X = np.random.default_rng(0).normal(size=(100, 65))
    with pytest.raises(TooManyCandidatesError, match="65") as info:
        exhaustive_search(make_candidates(X, X[:, 0]))
    assert "screen" in str(info.value)


def test_all_constant_candidates_raise():
    X = np.ones((30, 4)) * [1.0, 2.0, 3.0, 4.0]
    y = np.random.default_rng(1).normal(size=30)
    with pytest.raises(SearchError, match="constant"):
        exhaustive_search(make_candidates(X, y))


def test_candidates_collinear_with_forced_terms_raise():
    rng = np.random.default_rng(2)
    a = rng.normal(size=40)
    X = np.column_stack([a, 2 * a + 1, -a])
    with pytest.raises(SearchError, match="linear combination"):
        exhaustive_search(make_candidates(X, rng.normal(size=40), forced=("x0",)))


def test_constant_response_and_bad_options_raise():
    X = np.random.default_rng(3).normal(size=(20, 3))
    with pytest.raises(SearchError, match="no variation"):
        exhaustive_search(make_candidates(X, np.ones(20)))
    cands = make_candidates(X, X[:, 0] + 1)
    with pytest.raises(OptionError, match="unknown terms"):
        exhaustive_search(cands, forced=["x9"])
    with pytest.raises(OptionError, match="both forced and forbidden"):
        exhaustive_search(cands, forced=["x1"], forbidden=["x1"])
    with pytest.raises(OptionError, match="n_best_per_size"):
        exhaustive_search(cands, n_best_per_size=0)
    with pytest.raises(OptionError, match="time_budget"):
        exhaustive_search(cands, time_budget=-1)


def test_expiring_time_budget_returns_best_so_far():
    # 40 predictors and a response of pure noise: bounds prune little, the
    # full search takes seconds, far beyond the budget.
    X = ar1_design(300, 40, seed=7)
    y = np.random.default_rng(1).normal(size=300)
    found = exhaustive_search(make_candidates(X, y), time_budget=0.2)
    assert not found.exact
    assert "time budget" in found.stopped_by
    assert len(found) > 0 and found.subsets[0] == ()


def test_max_size_below_the_forced_width_raises():
    cands = build_problem(3, 40, 3, [], 4, False, False, False)
    with pytest.raises(OptionError, match="max_size"):
        exhaustive_search(cands, forced=["cultivar"], max_size=2)


def test_more_columns_than_rows():
    # n = 12 rows, 14 columns: models stop at 10 columns (k = 11 ≤ n − 1); rank-deficient ones are skipped.
    rng = np.random.default_rng(0)
    X = rng.normal(size=(12, 14))
    y = X[:, 0] - X[:, 3] + 0.3 * rng.normal(size=12)
    cands = make_candidates(X, y)
    found = exhaustive_search(cands, n_best_per_size=2, max_size=5)
    assert_matches(found, brute_force(cands, 2, max_size=5))
    whole = exhaustive_search(cands, n_best_per_size=1)
    assert max(whole.k) == 11 and whole.exact


def test_same_result_on_threads_and_dask():
    distributed = pytest.importorskip("distributed")
    X = ar1_design(200, 14, seed=8)
    y = X[:, [1, 6, 12]] @ [1.0, -0.5, 0.7] + np.random.default_rng(9).normal(size=200)
    cands = make_candidates(X, y)
    one = exhaustive_search(cands, n_best_per_size=3)
    threads = exhaustive_search(cands, n_best_per_size=3, n_jobs=2, backend="threading")
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=2, dashboard_address=None):
        on_dask = exhaustive_search(cands, n_best_per_size=3, n_jobs=2, backend="dask")
    for other in (threads, on_dask):
        assert other.subsets == one.subsets
        np.testing.assert_array_equal(other.rss, one.rss)
        assert (other.evaluated, other.pruned) == (one.evaluated, one.pruned)


# Hald's cement data (Hald 1952; the classic worked example of best-subset regression in
# Draper & Smith, Applied Regression Analysis, 3rd ed. 1998, ch. 15).  Data and the residual
# sums of squares below are written from memory of that worked example; statsmodels refits
# of the same data reproduce every value to the two printed decimals.
HALD_X = np.array([
    [7, 26, 6, 60], [1, 29, 15, 52], [11, 56, 8, 20], [11, 31, 8, 47], [7, 52, 6, 33], [11, 55, 9, 22],
    [3, 71, 17, 6], [1, 31, 22, 44], [2, 54, 18, 22], [21, 47, 4, 26], [1, 40, 23, 34], [11, 66, 9, 12],
    [10, 68, 8, 12]], dtype=float)
HALD_Y = np.array([78.5, 74.3, 104.3, 87.6, 95.9, 109.2, 102.7, 72.5, 93.1, 115.9, 83.8, 113.3, 109.4])
HALD_PUBLISHED = {  # best subsets per size and their residual sums of squares
    ("x4",): 883.87, ("x2",): 906.34,
    ("x1", "x2"): 57.90, ("x1", "x4"): 74.76,
    ("x1", "x2", "x4"): 47.97, ("x1", "x2", "x3"): 48.11,
    ("x1", "x2", "x3", "x4"): 47.86,
}


def test_hald_cement_best_subsets_match_the_published_example():
    cands = make_candidates(HALD_X, HALD_Y, names=["x1", "x2", "x3", "x4"])
    found = exhaustive_search(cands, n_best_per_size=2)
    names = {s: tuple(cands.terms[i].name for i in s) for s in found.subsets}
    got = {names[s]: r for s, r in zip(found.subsets, found.rss)}
    for model, rss in HALD_PUBLISHED.items():
        assert got[model] == pytest.approx(rss, abs=0.006), model
    # the ranking within each size, as published: x4 before x2; x1x2 before x1x4; x1x2x4 before x1x2x3
    order = [names[s] for s in found.subsets]
    assert order.index(("x4",)) < order.index(("x2",))
    assert order.index(("x1", "x2")) < order.index(("x1", "x4"))
    assert order.index(("x1", "x2", "x4")) < order.index(("x1", "x2", "x3"))
    assert found.rss[0] == pytest.approx(2715.76, abs=0.01)  # total sum of squares


def test_time_budget_across_worker_processes(monkeypatch):
    from selectkit import parallel

    monkeypatch.setattr(parallel, "WORKER_START_SECONDS", 0.0)  # small units would otherwise stay in process
    X = ar1_design(300, 40, seed=7)
    y = np.random.default_rng(1).normal(size=300)
    found = exhaustive_search(make_candidates(X, y), time_budget=0.3, n_jobs=2, backend="loky")
    assert not found.exact and "time budget" in found.stopped_by
    assert found.subsets[0] == ()


def numpy_enumeration(X, y, n_best, max_size):
    """Every subset of at most ``max_size`` columns fitted by numpy least squares (lstsq, with an
    intercept); rank-deficient designs (numpy's matrix_rank) are left out.  The n best rss per size."""
    n, p = X.shape
    per_size = {}
    for size in range(max_size + 1):
        for cols in itertools.combinations(range(p), size):
            design = np.column_stack([np.ones(n), X[:, list(cols)]])
            if np.linalg.matrix_rank(design) < design.shape[1]:
                continue
            beta, *_ = np.linalg.lstsq(design, y, rcond=None)
            rss = float(((y - design @ beta) ** 2).sum())
            per_size.setdefault(size, []).append((rss, tuple(f"x{j}" for j in cols), cols))
    return {s: sorted(v)[:n_best] for s, v in per_size.items()}


@pytest.mark.parametrize("seed, shape, max_size", [
    (0, "clean", 3), (1, "duplicate", 4), (2, "sum of two", 5), (3, "near pair 1e-3", 4),
    (4, "near pair 1e-4", 3), (5, "near sum 1e-2", 5), (6, "noise", 4), (7, "noise", 11),
])
def test_max_size_search_equals_numpy_enumeration(seed, shape, max_size):
    # The branch and bound downdates each node's inverse from its parent's while the
    # variance inflation factors are small and refactors otherwise; near-collinear columns
    # (VIF 1e4 to 1e8) exercise both paths, exact dependencies the singular-pivot rule.
    rng = np.random.default_rng(seed)
    n, p = 60, 12
    X = ar1_design(n, p, seed=seed)
    if shape == "duplicate":
        X[:, 5] = X[:, 2]
    elif shape == "sum of two":
        X[:, 7] = X[:, 1] - 2.0 * X[:, 4]
    elif shape == "near pair 1e-3":
        X[:, 3] = X[:, 0] + 1e-3 * rng.normal(size=n)
    elif shape == "near pair 1e-4":
        X[:, 9] = X[:, 8] + 1e-4 * rng.normal(size=n)
    elif shape == "near sum 1e-2":
        X[:, 6] = X[:, 0] + X[:, 10] + 1e-2 * rng.normal(size=n)
    if shape == "noise":
        y = rng.normal(size=n)  # nothing to find: the bounds prune least here
    else:
        y = X[:, [0, 4, 8]] @ [1.0, -0.6, 0.4] + rng.normal(size=n)
    cands = make_candidates(X, y)
    found = exhaustive_search(cands, n_best_per_size=3, max_size=max_size)
    assert found.exact
    reference = numpy_enumeration(X, y, 3, max_size)
    got = by_size(found)
    assert sorted(got) == sorted(reference)
    for size, want in reference.items():
        np.testing.assert_allclose([r for r, _ in got[size]], [r for r, *_ in want], rtol=1e-9)
    # exact dependencies make twins (two models spanning one space, equal rss up to rounding),
    # so check each reported model's own fit instead of its identity
    n = len(y)
    for model, rss in zip(found.subsets, found.rss):
        design = np.column_stack([np.ones(n), X[:, list(model)]])
        assert np.linalg.matrix_rank(design) == design.shape[1]
        beta, *_ = np.linalg.lstsq(design, y, rcond=None)
        assert rss == pytest.approx(((y - design @ beta) ** 2).sum(), rel=1e-9)


def test_time_budget_slices_resume_the_same_search(monkeypatch):
    # with a time budget the compiled loop runs in slices of nodes and keeps its stack and
    # per-depth downdate state between them; a budget that never expires gives the same answer
    X = ar1_design(200, 34, seed=8)
    y = np.random.default_rng(9).normal(size=200)
    cands = make_candidates(X, y)
    monkeypatch.setattr(exhaustive, "_NODES_PER_SLICE", 37)  # many short slices
    answers = []
    for budget in (None, 3600.0):
        options = ExhaustiveOptions(n_best_per_size=5, max_size=10, split_depth=0, time_budget=budget)
        units = exhaustive.plan(cands, None, options)
        assert len(units) == 1
        results = [exhaustive.run_unit(u) for u in units]
        answers.append(exhaustive.merge(cands, None, options, results))
    one, sliced = answers
    assert one.exact and sliced.exact
    assert sliced.details["nodes"] > 2 * exhaustive._NODES_PER_SLICE  # really ran in several slices
    assert one.subsets == sliced.subsets
    np.testing.assert_allclose(one.rss, sliced.rss, rtol=1e-12)
