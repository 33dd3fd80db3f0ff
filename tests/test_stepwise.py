"""Stepwise search: sweep kernels against numpy, paths against a statsmodels refit loop."""


import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats

from selectkit import criteria
from selectkit.errors import OptionError, SearchError
from selectkit.kernels import PIVOT_TOLERANCE
from selectkit.kernels.steps import apply_move, evaluate_moves, scale_cross
from selectkit.moments import compute_moments
from selectkit.searches.stepwise import StepwiseOptions, merge, plan, run_unit, stepwise_search
from tests.factories import make_candidates


def _ols_rss(X, y, cols):
    A = np.column_stack([np.ones(len(y))] + [X[:, c] for c in cols])
    beta, *_ = np.linalg.lstsq(A, y, rcond=None)
    r = y - A @ beta
    return float(r @ r)


# --------------------------------------------------------------------- kernels
def test_sweep_kernel_agrees_with_least_squares():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(40, 7))
    y = X @ rng.normal(size=7) + rng.normal(size=40)
    S, scale = scale_cross(compute_moments(X, y).cross)
    inside = np.zeros(8, dtype=bool)
    assert apply_move(S, inside, np.array([0, 3, 5]), PIVOT_TOLERANCE)
    moves = np.array([[1, -1], [3, -1], [3, 6], [2, 4], [0, 1]])
    rss, bad = evaluate_moves(S, inside, moves, PIVOT_TOLERANCE)
    expected = [[0, 1, 3, 5], [0, 5], [0, 5, 6], [0, 2, 3, 4, 5], [1, 3, 5]]
    assert not bad.any()
    np.testing.assert_allclose(rss / scale[-1] ** 2, [_ols_rss(X, y, c) for c in expected], rtol=1e-10)
    # sweeping out again returns the original matrix (reverse sweep)
    assert apply_move(S, inside, np.array([5, 3, 0]), PIVOT_TOLERANCE)
    np.testing.assert_allclose(S, scale_cross(compute_moments(X, y).cross)[0], atol=1e-12)
    # coefficients of the swept model equal numpy's
    assert apply_move(S, inside, np.array([2, 4]), PIVOT_TOLERANCE)
    beta = np.linalg.lstsq(np.column_stack([np.ones(40), X[:, [2, 4]]]), y, rcond=None)[0][1:]
    np.testing.assert_allclose(S[[2, 4], -1] * scale[[2, 4]] / scale[-1], beta, rtol=1e-10)


def test_rank_deficient_moves_are_flagged_and_skipped():
    rng = np.random.default_rng(2)
    X = rng.normal(size=(30, 3))
    X = np.column_stack([X, X[:, 0] + 2 * X[:, 1]])  # x3 = x0 + 2 x1
    y = X[:, 0] + rng.normal(size=30)
    S, _ = scale_cross(compute_moments(X, y).cross)
    inside = np.zeros(5, dtype=bool)
    apply_move(S, inside, np.array([0, 1]), PIVOT_TOLERANCE)
    _, bad = evaluate_moves(S, inside, np.array([[3], [2]]), PIVOT_TOLERANCE)
    assert bad.tolist() == [True, False]
    found = stepwise_search(make_candidates(X, y), method="forward", start=("x0", "x1"))
    assert found.singular >= 1
    assert all(3 not in s for s in found.subsets)


# --------------------------------------------------- brute-force reference loop
def reference_stepwise(X, y, cand, method, criterion, alpha_enter=0.15, alpha_remove=0.15, start=(), swaps=True,
                       max_steps=50):
    """A plain reimplementation with statsmodels refits for every candidate model."""
    terms = cand.terms
    n = len(y)

    def fit(model):
        cols = [c for i in model for c in terms[i].columns]
        A = sm.add_constant(X[:, cols], has_constant="add") if cols else np.ones((n, 1))
        res = sm.OLS(y, A).fit()
        return res.ssr, 1 + len(cols)

    def crit(model):
        rss, k = fit(model)
        return float({"aic": criteria.aic, "bic": criteria.bic, "aicc": criteria.aicc}[criterion](rss, n, k))

    model = tuple(sorted(start))
    path = [model]
    for _ in range(max_steps):
        fams = {terms[i].family: i for i in model}
        moves = []
        if method in ("backward", "stepwise"):
            moves += [("drop", tuple(j for j in model if j != i)) for i in model]
        if method in ("forward", "stepwise"):
            moves += [("add", tuple(sorted(model + (i,)))) for i in range(len(terms))
                      if i not in model and terms[i].family not in fams]
        if swaps:
            moves += [("swap", tuple(sorted([j for j in model if j != fams[terms[i].family]] + [i])))
                      for i in range(len(terms)) if i not in model and terms[i].family in fams]
        if not moves:
            break
        names = lambda m: tuple(sorted(terms[i].name for i in m))  # noqa: E731
        choice = None
        if criterion == "f_test":
            rss0, k0 = fit(model)
            drops, adds, sw = [], [], []
            for kind, m in moves:
                rss1, k1 = fit(m)
                if kind == "drop":
                    f = (rss1 - rss0) / (k0 - k1) / (rss0 / (n - k0))
                    drops.append((-stats.f.sf(f, k0 - k1, n - k0), k1, names(m), m))
                elif kind == "add":
                    f = (rss0 - rss1) / (k1 - k0) / (rss1 / (n - k1))
                    adds.append((stats.f.sf(f, k1 - k0, n - k1), k1, names(m), m))
                else:
                    sw.append((rss1 / (n - k1), k1, names(m), m))
            if drops and -min(drops)[0] > alpha_remove:
                choice = min(drops)[3]
            elif adds and min(adds)[0] < alpha_enter:
                choice = min(adds)[3]
            elif sw and min(sw)[0] < rss0 / (n - k0) * (1 - 1e-12):
                choice = min(sw)[3]
        else:
            current = crit(model)
            best = min((crit(m), fit(m)[1], names(m), m) for _, m in moves)
            if best[0] < current - 1e-9:
                choice = best[3]
        if choice is None or choice in path:
            break
        model = choice
        path.append(model)
    return path


@st.composite
def problems(draw):
    n = draw(st.integers(18, 50))
    m = draw(st.integers(2, 6))
    seed = draw(st.integers(0, 10_000))
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, m))
    # some columns are other forms of a variable: a monotone transform of column 0
    n_forms = draw(st.integers(0, min(2, m - 1)))
    families = [f"v{j}" for j in range(m)]
    for j in range(1, 1 + n_forms):
        X[:, j] = np.exp(X[:, 0] / (j + 1)) + 0.1 * rng.normal(size=n)
        families[j] = "v0"
    blocks = None
    if draw(st.booleans()):  # a 3-level categorical as a block of two dummy columns, entering whole
        level = rng.integers(0, 3, size=n)
        X = np.column_stack([X, level == 1, level == 2]).astype(float)
        families += ["group", "group"]
        blocks = {"group": [m, m + 1]}
    beta = rng.normal(size=X.shape[1]) * rng.integers(0, 2, size=X.shape[1])
    y = X @ beta + rng.normal(size=n)
    method = draw(st.sampled_from(["forward", "backward", "stepwise"]))
    criterion = draw(st.sampled_from(["aic", "bic", "aicc", "f_test"]))
    return X, y, families, blocks, method, criterion


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(problems())
def test_path_equals_statsmodels_refit_loop(problem):
    X, y, families, blocks, method, criterion = problem
    cand = make_candidates(X, y, families=families, blocks=blocks)
    start = "empty" if method == "forward" else "full"
    found = stepwise_search(cand, method=method, criterion=criterion, start=start,
                            alpha_enter=0.1, alpha_remove=0.2)
    start_model = found.subsets[0]
    if start == "full":  # first form of each family
        firsts = {}
        for i, t in enumerate(cand.terms):
            firsts.setdefault(t.family, i)
        assert start_model == tuple(sorted(firsts.values()))
    ref = reference_stepwise(X, y, cand, method, criterion, 0.1, 0.2, start=start_model)
    names = [t.name for t in cand.terms]
    path = [tuple(sorted(names.index(nm) for nm in s["terms_after"])) for s in found.details["path"]]
    assert path == ref
    assert found.details["final"][0] == ref[-1]
    for subset, rss in zip(found.subsets, found.rss):
        assert rss == pytest.approx(_ols_rss(X, y, [c for i in subset for c in cand.terms[i].columns]), rel=1e-8)


# ------------------------------------------------------- structure of the moves
def _blocky():
    rng = np.random.default_rng(5)
    n = 120
    x = rng.uniform(1, 5, size=n)
    level = rng.integers(0, 3, size=n)
    d1, d2 = (level == 1).astype(float), (level == 2).astype(float)
    z = rng.normal(size=n)
    noise = rng.normal(size=n)
    X = np.column_stack([x, np.log(x), d1, d2, z, x * z, noise])
    y = 3 * np.log(x) + 2 * d1 - 1.5 * d2 + 0.8 * z + 0.7 * x * z + 0.3 * rng.normal(size=n)
    cand = make_candidates(
        X, y, names=["x", "log(x)", "d1", "d2", "z", "x*z", "noise"],
        families=["x", "x", "cultivar", "cultivar", "z", "x*z", "noise"],
        blocks={"cultivar": [2, 3]}, requires={"x*z": ("x", "z")},
    )
    return X, y, cand


def test_blocks_enter_whole_with_block_df_and_hierarchy_is_respected():
    X, y, cand = _blocky()
    names = [t.name for t in cand.terms]
    found = stepwise_search(cand, method="forward", criterion="f_test", alpha_enter=0.05, alpha_remove=0.05)
    for subset, k in zip(found.subsets, found.k):
        assert k == 1 + sum(cand.terms[i].width for i in subset)
        chosen = {names[i] for i in subset}
        if "x*z" in chosen:  # hierarchy: its main-effect families are present
            assert {"z"} <= chosen and ({"x"} & chosen or {"log(x)"} & chosen)
        assert not {"x", "log(x)"} <= chosen  # one form per family
    block_step = next(s for s in found.details["path"] if s["term"] == "cultivar")
    # F for the block on 2 numerator df, against a statsmodels F-test of the nested models
    before = [names.index(t) for t in block_step["terms_after"] if t != "cultivar"]
    cols_before = [c for i in before for c in cand.terms[i].columns]
    small = sm.OLS(y, sm.add_constant(X[:, cols_before])).fit()
    large = sm.OLS(y, sm.add_constant(X[:, cols_before + [2, 3]])).fit()
    f, p, df = large.compare_f_test(small)
    assert df == 2
    assert block_step["f_statistic"] == pytest.approx(f, rel=1e-8)
    assert block_step["p_value"] == pytest.approx(p, rel=1e-6)
    assert found.details["final"][0] == tuple(sorted(names.index(t) for t in ("log(x)", "cultivar", "z", "x*z")))


def test_family_swap_replaces_form():
    X, y, cand = _blocky()
    names = [t.name for t in cand.terms]
    found = stepwise_search(cand, method="stepwise", start=("x", "cultivar", "z"))
    moves = [(s["move"], s["term"], s["replaced"]) for s in found.details["path"]]
    assert ("swap", "log(x)", "x") in moves
    assert names.index("log(x)") in found.details["final"][0]
    no_swap = stepwise_search(cand, method="stepwise", start=("x", "cultivar", "z"), swaps=False)
    assert all(s["move"] != "swap" for s in no_swap.details["path"])


def test_forced_term_never_removed_and_forbidden_never_enters():
    X, y, cand = _blocky()
    names = [t.name for t in cand.terms]
    found = stepwise_search(cand, method="stepwise", start="full", forced=("noise",), forbidden=("x*z",))
    assert all(names.index("noise") in s for s in found.subsets)
    assert all(names.index("x*z") not in s for s in found.subsets)
    back = stepwise_search(cand, method="backward", start="full", hierarchy=True)
    # z can only leave after x*z has left
    for s in back.subsets:
        if names.index("x*z") in s:
            assert names.index("z") in s


def test_several_starts_pool_and_are_deterministic_across_workers():
    X, y, cand = _blocky()
    one = stepwise_search(cand, starts=["empty", "full", ("noise",)], n_jobs=1)
    two = stepwise_search(cand, starts=["empty", "full", ("noise",)], n_jobs=2)
    assert one.subsets == two.subsets
    np.testing.assert_array_equal(one.rss, two.rss)
    assert len(one.details["runs"]) == 3
    assert len(set(one.subsets)) == len(one.subsets)
    assert one.method == "stepwise" and not one.exact


def test_plan_run_merge_contract_matches_convenience():
    X, y, cand = _blocky()
    moments = compute_moments(cand.matrix, cand.y)
    opts = StepwiseOptions(method="forward", criterion="bic")
    units = plan(cand, moments, opts)
    found = merge(cand, moments, opts, [run_unit(u) for u in units])
    direct = stepwise_search(cand, moments, method="forward", criterion="bic")
    assert found.subsets == direct.subsets
    assert units[0].key == "stepwise/start-000"


def test_cycle_is_detected(monkeypatch):
    # With alpha_enter <= alpha_remove the F-test rarely cycles on real data, so the guard is tested with a
    # chooser that always toggles term x0: empty -> {x0} -> back to empty, which must be refused.
    from selectkit.searches import stepwise as module

    def toggle_x0(problem, moves, *args):
        return next(r for r, m in enumerate(moves) if m[1] == 0), (np.nan, np.nan)

    monkeypatch.setattr(module, "_choose_by_f", toggle_x0)
    rng = np.random.default_rng(0)
    X = rng.normal(size=(30, 3))
    found = stepwise_search(make_candidates(X, rng.normal(size=30)), criterion="f_test")
    assert found.stopped_by.startswith("cycle detected: drop x0")
    assert found.subsets == ((), (0,))


def test_max_steps_and_bad_options():
    X, y, cand = _blocky()
    found = stepwise_search(cand, max_steps=1)
    assert found.stopped_by == "max steps (1) reached" and len(found.subsets) == 2
    with pytest.raises(OptionError, match="alpha_enter"):
        stepwise_search(cand, criterion="f_test", alpha_enter=0.2, alpha_remove=0.1)
    with pytest.raises(OptionError, match="forward, backward, stepwise"):
        stepwise_search(cand, method="sideways")
    # former spellings: the value "both" and the setting "direction" are refused naming the new one
    with pytest.raises(OptionError, match="did you mean 'stepwise'"):
        stepwise_search(cand, method="both")
    with pytest.raises(OptionError, match="did you mean method='stepwise'"):
        stepwise_search(cand, direction="both")
    with pytest.raises(OptionError, match="did you mean method='forward'"):
        stepwise_search(cand, direction="forward")
    with pytest.raises(OptionError, match="aic, aicc, bic, f_test"):
        stepwise_search(cand, criterion="r2")
    with pytest.raises(OptionError, match="no candidate term is named"):
        stepwise_search(cand, start=("nope",))
    with pytest.raises(OptionError, match="unknown start"):
        stepwise_search(cand, start="half")
    with pytest.raises(OptionError, match="requires"):
        stepwise_search(cand, start=("x*z",))
    with pytest.raises(ValueError):  # OptionError is also a ValueError
        stepwise_search(cand, forced=("x",), forbidden=("x",))


def test_rank_deficient_start():
    rng = np.random.default_rng(3)
    X = rng.normal(size=(20, 2))
    X = np.column_stack([X, X[:, 0] * 2])
    y = rng.normal(size=20)
    with pytest.raises(SearchError, match="rank-deficient"):
        stepwise_search(make_candidates(X, y), start=("x0", "x2"))
    # from "full" the duplicated column is left out, and the start says so
    found = stepwise_search(make_candidates(X, y), start="full", method="backward")
    assert found.subsets[0] == (0, 1)
    assert "left out as rank-deficient: x2" in found.details["path"][0]["term"]


def test_weighted_path_matches_statsmodels_wls():
    # Reference: statsmodels WLS refits; the moments carry the weights.
    rng = np.random.default_rng(21)
    X = rng.normal(size=(60, 4))
    w = rng.uniform(0.2, 3.0, size=60)
    y = X[:, 0] - 0.5 * X[:, 2] + rng.normal(size=60) / np.sqrt(w)
    found = stepwise_search(make_candidates(X, y, weights=w), method="stepwise", criterion="bic")
    for subset, rss, k in zip(found.subsets, found.rss, found.k):
        A = sm.add_constant(X[:, list(subset)]) if subset else np.ones((60, 1))
        assert rss == pytest.approx(sm.WLS(y, A, weights=w).fit().ssr, rel=1e-9)
        assert k == 1 + len(subset)
    assert found.details["final"][0] == (0, 2)


def test_same_result_on_threading_backend():
    X, y, cand = _blocky()
    a = stepwise_search(cand, starts=["empty", "full"], n_jobs=1)
    b = stepwise_search(cand, starts=["empty", "full"], n_jobs=2, backend="threading")
    assert a.subsets == b.subsets and np.array_equal(a.rss, b.rss)
    assert [s["term"] for s in a.details["path"]] == [s["term"] for s in b.details["path"]]


def test_time_budget_stops_the_path():
    X, y, cand = _blocky()
    found = stepwise_search(cand, time_budget=1e-9)
    assert found.stopped_by.startswith("time budget") and found.subsets == ((),)
    with pytest.raises(OptionError, match="time_budget"):
        stepwise_search(cand, time_budget=-1)
