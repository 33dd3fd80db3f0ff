"""Cross-validation from moments, against explicit refits and scikit-learn's leave-one-out."""

import itertools

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import LeaveOneOut, cross_val_predict

from selectkit.errors import InputError, OptionError, TooManyCandidatesError
from selectkit.searches import crossval as cv
from selectkit.searches.crossval import (
    blocked_folds, cv_select, group_folds, holdout_split, make_folds, nested_cv_error, press, score_subsets,
    shuffled_folds,
)
from selectkit.searches.stepwise import stepwise_search
from tests.factories import make_candidates


@pytest.fixture(scope="module")
def problem():
    rng = np.random.default_rng(7)
    n = 45
    X = rng.normal(size=(n, 5))
    level = rng.integers(0, 3, size=n)
    X = np.column_stack([X, (level == 1).astype(float), (level == 2).astype(float)])
    y = 1.0 + 2.0 * X[:, 0] - X[:, 2] + 0.8 * X[:, 5] + rng.normal(size=n)
    cand = make_candidates(X, y, blocks={"cultivar": [5, 6]})
    return X, y, cand


def _cols(cand, subset):
    return [c for i in subset for c in cand.terms[i].columns]


def test_press_equals_sklearn_leave_one_out(problem):
    # Reference library: sklearn LeaveOneOut + LinearRegression refits, one per row.
    X, y, cand = problem
    for subset in [(), (0,), (0, 2), (0, 2, 5), (0, 1, 2, 3, 4, 5)]:
        cols = _cols(cand, subset)
        if cols:
            pred = cross_val_predict(LinearRegression(), X[:, cols], y, cv=LeaveOneOut())
        else:
            pred = np.array([np.delete(y, i).mean() for i in range(len(y))])
        assert press(cand, subset) == pytest.approx(float(((y - pred) ** 2).sum()), rel=1e-9)


def test_weighted_press_equals_weighted_leave_one_out(problem):
    X, y, _ = problem
    w = np.random.default_rng(1).uniform(0.5, 2.0, size=len(y))
    cand = make_candidates(X, y, weights=w)
    cols = [0, 2]
    errors = []
    for i in range(len(y)):
        keep = np.arange(len(y)) != i
        fit = LinearRegression().fit(X[keep][:, cols], y[keep], sample_weight=w[keep])
        errors.append(w[i] * (y[i] - fit.predict(X[i:i + 1, cols])[0]) ** 2)
    assert press(cand, (0, 2)) == pytest.approx(sum(errors), rel=1e-9)


def test_fold_errors_equal_explicit_refits(problem):
    X, y, cand = problem
    subsets = [(), (0,), (0, 2, 5), (1, 3)]
    folds = shuffled_folds(5, repeats=2)
    table = score_subsets(cand, subsets, folds=folds, seed=3)
    fold_list = make_folds(folds, len(y), 3)
    for row, subset in zip(table.itertuples(), subsets):
        cols = _cols(cand, subset)
        mses, reps = [], []
        for fold in fold_list:
            train = np.setdiff1d(np.arange(len(y)), fold.test_rows)
            if cols:
                pred = LinearRegression().fit(X[train][:, cols], y[train]).predict(X[fold.test_rows][:, cols])
            else:
                pred = np.full(fold.test_rows.size, y[train].mean())
            mses.append(np.mean((y[fold.test_rows] - pred) ** 2))
            reps.append(fold.repeat)
        mses, reps = np.array(mses), np.array(reps)
        assert row.cv_mse == pytest.approx(mses.mean(), rel=1e-9)
        se = np.mean([mses[reps == r].std(ddof=1) / np.sqrt(5) for r in (0, 1)])
        assert row.cv_se == pytest.approx(se, rel=1e-9)
        assert row.n_folds == 10
        assert row.press == pytest.approx(press(cand, subset))
        assert row.k == 1 + len(cols)
    assert table["holdout_mse"].isna().all()


def test_holdout_error_equals_refit(problem):
    X, y, cand = problem
    mask = np.zeros(len(y), dtype=bool)
    mask[::4] = True
    table = score_subsets(cand, [(0, 2)], folds=3, holdout=mask)
    fit = LinearRegression().fit(X[~mask][:, [0, 2]], y[~mask])
    expected = np.mean((y[mask] - fit.predict(X[mask][:, [0, 2]])) ** 2)
    assert table["holdout_mse"].iloc[0] == pytest.approx(expected, rel=1e-9)
    by_index = score_subsets(cand, [(0, 2)], folds=3, holdout=np.flatnonzero(mask))
    assert by_index["holdout_mse"].iloc[0] == pytest.approx(expected, rel=1e-12)


def test_fold_schemes():
    n = 23
    a = make_folds(shuffled_folds(4, repeats=3), n, seed=5)
    b = make_folds(shuffled_folds(4, repeats=3), n, seed=5)
    assert len(a) == 12 and all(np.array_equal(f.test_rows, g.test_rows) for f, g in zip(a, b))
    for r in range(3):
        rows = np.concatenate([f.test_rows for f in a if f.repeat == r])
        assert np.array_equal(np.sort(rows), np.arange(n))  # a partition of the rows
    assert not np.array_equal(a[0].test_rows, a[4].test_rows)  # repeats differ
    blocks = make_folds(blocked_folds(4), n)
    assert [f.test_rows.tolist() for f in blocks][0] == list(range(6))
    assert all(np.all(np.diff(f.test_rows) == 1) for f in blocks)
    hold = make_folds(holdout_split(0.3), n, seed=1)
    assert len(hold) == 1 and hold[0].test_rows.size == 7
    labels = ["a", "b", "a", "c"] * 5 + ["b", "c", "c"]
    groups = make_folds(group_folds(labels), n)
    assert len(groups) == 3
    for f in groups:
        assert len({labels[i] for i in f.test_rows}) == 1
    assert make_folds(5, n, seed=0)[0].test_rows.tolist() == make_folds(shuffled_folds(5), n, seed=0)[0].test_rows.tolist()


def test_fold_scheme_errors():
    with pytest.raises(OptionError, match="at least 2"):
        shuffled_folds(1)
    with pytest.raises(OptionError, match="FoldScheme"):
        make_folds("ten", 10)
    with pytest.raises(InputError, match="at least 12 rows"):
        make_folds(12, 10)
    with pytest.raises(InputError, match="one per row"):
        make_folds(group_folds(["a", "b"]), 10)
    with pytest.raises(InputError, match="at least 2 groups"):
        make_folds(group_folds(["a"] * 10), 10)
    with pytest.raises(OptionError, match="exhaustive, stepwise"):
        cv.CrossvalOptions(method="lasso")


def test_cv_select_stepwise_uses_training_moments_only(problem):
    X, y, cand = problem
    found = cv_select(cand, method="stepwise", folds=5, seed=2)
    assert found.method == "crossval"
    table = found.details["table"]
    fold_list = make_folds(5, len(y), 2)
    # Each fold's models come from a search on the training rows alone (explicit data, no subtraction).
    for fold, models in zip(fold_list, found.details["fold_models"]):
        train = np.setdiff1d(np.arange(len(y)), fold.test_rows)
        direct = stepwise_search(make_candidates(X[train], y[train], blocks={"cultivar": [5, 6]}),
                                 method="forward", criterion="f_test", alpha_enter=0.9999, alpha_remove=0.9999,
                                 swaps=False)
        path = {int(k): s for s, k in zip(direct.subsets, direct.k)}
        assert models == path
    # the CV table equals explicit refits of those models
    for row in table.itertuples():
        errs = []
        for fold, models in zip(fold_list, found.details["fold_models"]):
            train = np.setdiff1d(np.arange(len(y)), fold.test_rows)
            cols = _cols(cand, models[row.k])
            if cols:
                pred = LinearRegression().fit(X[train][:, cols], y[train]).predict(X[fold.test_rows][:, cols])
            else:
                pred = np.full(fold.test_rows.size, y[train].mean())
            errs.append(np.mean((y[fold.test_rows] - pred) ** 2))
        assert row.cv_mse == pytest.approx(np.mean(errs), rel=1e-9)
    best = table.loc[table["cv_mse"].idxmin()]
    assert found.details["chosen_k"] == best["k"]
    assert set(found.details["chosen"]) >= {0, 2}  # the strong true terms


def test_one_standard_error_rule():
    table = pd.DataFrame({"k": [1, 2, 3, 4], "cv_mse": [2.0, 1.05, 1.0, 1.02], "cv_se": [0.1, 0.1, 0.08, 0.1]})
    assert cv._choose_k(table, False) == 3
    assert cv._choose_k(table, True) == 2  # smallest k with cv_mse <= 1.0 + 0.08


def test_cv_select_with_exhaustive_matches_enumeration(problem):
    pytest.importorskip("selectkit.searches.exhaustive")
    X, y, cand = problem
    found = cv_select(cand, method="exhaustive", folds=4, seed=1)
    fold_list = make_folds(4, len(y), 1)
    n_terms = len(cand.terms)
    for row in found.details["table"].itertuples():
        errs = []
        for fold in fold_list:
            train = np.setdiff1d(np.arange(len(y)), fold.test_rows)
            best = None
            for size in range(n_terms + 1):  # brute force: best training rss among models with k coefficients
                for subset in itertools.combinations(range(n_terms), size):
                    cols = _cols(cand, subset)
                    if 1 + len(cols) != row.k:
                        continue
                    A = np.column_stack([np.ones(train.size), X[train][:, cols]])
                    beta = np.linalg.lstsq(A, y[train], rcond=None)[0]
                    rss = float(((y[train] - A @ beta) ** 2).sum())
                    if best is None or rss < best[0]:
                        best = (rss, beta, cols)
            A = np.column_stack([np.ones(fold.test_rows.size), X[fold.test_rows][:, best[2]]])
            errs.append(np.mean((y[fold.test_rows] - A @ best[1]) ** 2))
        assert row.cv_mse == pytest.approx(np.mean(errs), rel=1e-8)


def test_too_many_terms_for_exact_inner_search(problem):
    _, _, cand = problem
    with pytest.raises(TooManyCandidatesError, match="screen"):
        cv_select(cand, method="exhaustive", exact_limit=3)


def test_nested_cv_removes_the_selection_bias():
    # Pure noise, 10 noise predictors, n = 60 (seeded).  An honest estimate of the procedure's error cannot
    # fall below the noise variance on average; the naive CV error of the selected model does.
    nested, naive, variance = [], [], []
    for s in range(5):
        rng = np.random.default_rng(100 + s)
        X, y = rng.normal(size=(60, 10)), rng.normal(size=60)
        result = nested_cv_error(make_candidates(X, y), method="stepwise", outer_folds=5, inner_folds=5, seed=s)
        nested.append(result.error)
        naive.append(result.naive_error)
        variance.append(y.var(ddof=1))
        assert result.optimism == pytest.approx(result.error - result.naive_error)
        assert len(result.folds) == 5
    ratio_nested = np.mean(nested) / np.mean(variance)
    ratio_naive = np.mean(naive) / np.mean(variance)
    assert 0.95 < ratio_nested < 1.4  # close to var(y) from above: no optimism
    assert ratio_naive < ratio_nested - 0.05  # the naive figure is lower: the selection bias


def test_nested_cv_same_for_any_n_jobs(problem):
    X, y, cand = problem
    one = nested_cv_error(cand, method="stepwise", outer_folds=3, inner_folds=3, seed=4, n_jobs=1)
    two = nested_cv_error(cand, method="stepwise", outer_folds=3, inner_folds=3, seed=4, n_jobs=2, backend="threading")
    pd.testing.assert_frame_equal(one.folds, two.folds)
    assert one.error == two.error
    sel1 = cv_select(cand, method="stepwise", folds=shuffled_folds(3, repeats=2), seed=4, n_jobs=1)
    sel2 = cv_select(cand, method="stepwise", folds=shuffled_folds(3, repeats=2), seed=4, n_jobs=2, backend="threading")
    pd.testing.assert_frame_equal(sel1.details["table"], sel2.details["table"])


def test_nested_unit_repeats_selection_on_training_rows_only(problem):
    # Each outer fold's choice equals cv_select run on that fold's training rows alone (explicit data), and its
    # error equals an explicit refit scored on the outer rows, which the selection never saw.
    from selectkit.parallel import spawn_seeds

    X, y, cand = problem
    result = nested_cv_error(cand, method="exhaustive", outer_folds=3, inner_folds=4, seed=8)
    outer = make_folds(3, len(y), 8)
    children = spawn_seeds(8, 3)
    for fold, child, row in zip(outer, children, result.folds.itertuples()):
        train = np.setdiff1d(np.arange(len(y)), fold.test_rows)
        inner = cv_select(make_candidates(X[train], y[train], blocks={"cultivar": [5, 6]}), method="exhaustive",
                          folds=4, seed=int(child.generate_state(1)[0]))
        assert row.terms == (", ".join(inner.details["chosen_terms"]) or "(intercept only)")
        cols = _cols(cand, inner.details["chosen"])
        if cols:
            pred = LinearRegression().fit(X[train][:, cols], y[train]).predict(X[fold.test_rows][:, cols])
        else:
            pred = np.full(fold.test_rows.size, y[train].mean())
        assert row.test_mse == pytest.approx(np.mean((y[fold.test_rows] - pred) ** 2), rel=1e-9)
    assert result.error == pytest.approx(result.folds["test_mse"].mean())
    assert "exhaustive search" in result.procedure


def test_holdout_scheme_fills_holdout_column(problem):
    X, y, cand = problem
    table = score_subsets(cand, [(0,), (0, 2)], folds=holdout_split(0.3), seed=2)
    rows = make_folds(holdout_split(0.3), len(y), 2)[0].test_rows
    train = np.setdiff1d(np.arange(len(y)), rows)
    fit = LinearRegression().fit(X[train][:, [0, 2]], y[train])
    expected = np.mean((y[rows] - fit.predict(X[rows][:, [0, 2]])) ** 2)
    assert table["holdout_mse"].iloc[1] == pytest.approx(expected, rel=1e-9)
    assert np.isnan(table["cv_se"]).all()  # one fold: no spread to measure


def test_blocked_and_group_schemes_in_selection(problem):
    X, y, cand = problem
    blocked = cv_select(cand, method="stepwise", folds=blocked_folds(3))
    assert blocked.details["folds"] == "3 contiguous blocks in row order"
    assert set(blocked.details["table"]["n_folds"]) == {3}
    # blocked folds: the k=2 error equals explicit refits of each fold's chosen model on the other blocks
    row = blocked.details["table"].set_index("k").loc[2]
    errs = []
    for part, models in zip(np.array_split(np.arange(len(y)), 3), blocked.details["fold_models"]):
        train = np.setdiff1d(np.arange(len(y)), part)
        cols = _cols(cand, models[2])
        pred = LinearRegression().fit(X[train][:, cols], y[train]).predict(X[part][:, cols])
        errs.append(np.mean((y[part] - pred) ** 2))
    assert row["cv_mse"] == pytest.approx(np.mean(errs), rel=1e-9)
    labels = np.repeat(["bay A", "bay B", "bay C", "bay D", "bay E"], 9)
    grouped = cv_select(cand, method="stepwise", folds=group_folds(labels))
    assert set(grouped.details["table"]["n_folds"]) == {5}
    assert "5 groups" in grouped.details["folds"]
