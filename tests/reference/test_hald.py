"""Hald cement data: stepwise and best-subset results published in regression texts.

Data: Woods, Steinour & Starke (1932), heat evolved by cement, as tabulated in
Draper & Smith, *Applied Regression Analysis* (Wiley), Appendix 15A / Chapter 15.
The 13 rows below were TYPED FROM MEMORY of that table; the typing is verified
by the published fits (full-model coefficients 62.4054, 1.5511, 0.5102, 0.1019,
−0.1441; R² of {x1, x2} 0.9787; R² of {x4} 0.6745 — Draper & Smith, Ch. 15,
values also quoted from memory).
"""

import numpy as np
import pytest
import statsmodels.api as sm

from selectkit.moments import compute_moments
from selectkit.searches.stepwise import stepwise_search
from tests.factories import make_candidates

# Typed from memory of Draper & Smith's table of the Hald data.
X1 = [7, 1, 11, 11, 7, 11, 3, 1, 2, 21, 1, 11, 10]
X2 = [26, 29, 56, 31, 52, 55, 71, 31, 54, 47, 40, 66, 68]
X3 = [6, 15, 8, 8, 6, 9, 17, 22, 18, 4, 23, 9, 8]
X4 = [60, 52, 20, 47, 33, 22, 6, 44, 22, 26, 34, 12, 12]
Y = [78.5, 74.3, 104.3, 87.6, 95.9, 109.2, 102.7, 72.5, 93.1, 115.9, 83.8, 113.3, 109.4]
NAMES = ["x1", "x2", "x3", "x4"]


@pytest.fixture(scope="module")
def hald():
    X = np.column_stack([X1, X2, X3, X4]).astype(float)
    y = np.asarray(Y, dtype=float)
    return X, y, make_candidates(X, y, names=NAMES)


def test_typing_verified_by_published_full_fit(hald):
    X, y, _ = hald
    fit = sm.OLS(y, sm.add_constant(X)).fit()
    # Draper & Smith, Ch. 15 (from memory): 62.4054 + 1.5511 x1 + 0.5102 x2 + 0.1019 x3 - 0.1441 x4
    np.testing.assert_allclose(fit.params, [62.4054, 1.5511, 0.5102, 0.1019, -0.1441], atol=6e-4)


def _r2(found, subset, y):
    i = found.subsets.index(subset)
    tss = float(((y - y.mean()) ** 2).sum())
    return 1.0 - found.rss[i] / tss


def test_forward_by_partial_f_enters_x4_first(hald):
    X, y, cand = hald
    found = stepwise_search(cand, method="forward", criterion="f_test", alpha_enter=0.10, alpha_remove=0.10)
    path = found.details["path"]
    assert path[1]["move"] == "add" and path[1]["term"] == "x4"
    # R² of x4 alone: 0.675 (Draper & Smith, from memory)
    assert _r2(found, (3,), y) == pytest.approx(0.6745, abs=5e-4)
    # F of x4 on (1, 11) df, 22.80 (Draper & Smith, from memory); statsmodels is the independent check
    ref = sm.OLS(y, sm.add_constant(X[:, [3]])).fit()
    assert path[1]["f_statistic"] == pytest.approx(ref.fvalue, rel=1e-9)
    assert path[1]["f_statistic"] == pytest.approx(22.80, abs=0.01)


def test_stepwise_alpha_010_ends_with_x1_x2(hald):
    X, y, cand = hald
    found = stepwise_search(cand, method="stepwise", criterion="f_test", alpha_enter=0.10, alpha_remove=0.10)
    path = found.details["path"]
    # Published sequence (Draper & Smith, Ch. 15): x4 in, x1 in, x2 in, x4 out.
    moves = [(s["move"], s["term"]) for s in path[1:]]
    assert moves == [("add", "x4"), ("add", "x1"), ("add", "x2"), ("drop", "x4")]
    assert found.details["final"] == ((0, 1),)
    assert _r2(found, (0, 1), y) == pytest.approx(0.9787, abs=5e-4)
    # The removal p-value of x4 from {x1, x2, x4} equals statsmodels' t-test p-value (t² = F).
    ref = sm.OLS(y, sm.add_constant(X[:, [0, 1, 3]])).fit()
    assert path[4]["p_value"] == pytest.approx(ref.pvalues[3], rel=1e-7)
    assert path[4]["p_value"] > 0.10


def test_best_two_and_best_one_by_enumeration(hald):
    # Brute force with statsmodels over all 1- and 2-variable models.
    X, y, cand = hald
    import itertools

    best = {}
    for size in (1, 2):
        fits = {c: sm.OLS(y, sm.add_constant(X[:, list(c)])).fit().rsquared for c in itertools.combinations(range(4), size)}
        best[size] = max(fits, key=fits.get), max(fits.values())
    assert best[1][0] == (3,) and best[1][1] == pytest.approx(0.675, abs=1e-3)  # published 0.675
    assert best[2][0] == (0, 1) and best[2][1] == pytest.approx(0.979, abs=1e-3)  # published 0.979
    # The sweep-based path visits both models with the same rss as statsmodels.
    found = stepwise_search(cand, method="stepwise", criterion="f_test", alpha_enter=0.10, alpha_remove=0.10)
    tss = compute_moments(X, y).tss
    for subset, r2 in ((best[1][0], best[1][1]), (best[2][0], best[2][1])):
        assert 1 - found.rss[found.subsets.index(subset)] / tss == pytest.approx(r2, rel=1e-10)


def test_backward_aic_from_full_matches_statsmodels_aic(hald):
    X, y, cand = hald
    found = stepwise_search(cand, method="backward", start="full", criterion="aic", convention="coefficients-only")
    for step in found.details["path"]:
        cols = [NAMES.index(t) for t in step["terms_after"]]
        ref = sm.OLS(y, sm.add_constant(X[:, cols]) if cols else np.ones((13, 1))).fit()
        assert step["criterion_after"] == pytest.approx(ref.aic, rel=1e-9)


def test_exact_search_agrees_with_published_best_subsets(hald):
    exhaustive = pytest.importorskip("selectkit.searches.exhaustive")
    X, y, cand = hald
    found = exhaustive.exhaustive_search(cand, n_best_per_size=1)
    tss = float(((y - y.mean()) ** 2).sum())
    best = {int(k): (s, 1 - r / tss) for s, r, k in zip(found.subsets, found.rss, found.k)}
    assert best[2][0] == (3,) and best[2][1] == pytest.approx(0.675, abs=1e-3)  # Draper & Smith: x4, 0.675
    assert best[3][0] == (0, 1) and best[3][1] == pytest.approx(0.979, abs=1e-3)  # Draper & Smith: x1, x2, 0.979
    # 13 folds of one row are leave-one-out: a fixed model's CV error equals PRESS/13 (Allen 1974)
    from selectkit.searches.crossval import cv_select, score_subsets

    table = score_subsets(cand, found.subsets, folds=13)
    np.testing.assert_allclose(table["cv_mse"], table["press"] / 13, rtol=1e-9)
    found_cv = cv_select(cand, method="exhaustive", folds=13)
    # the choice is one of the good models the text singles out ({x1,x2}, {x1,x4}, {x1,x2,x4}, {x1,x2,x3};
    # from memory of Draper & Smith's discussion)
    assert found_cv.details["chosen"] in {(0, 1), (0, 3), (0, 1, 3), (0, 1, 2)}
