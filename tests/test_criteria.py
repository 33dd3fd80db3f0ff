"""Criteria from (rss, n, k) against statsmodels (reference library) and their defining properties."""

import itertools

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.datasets import longley
from statsmodels.tools import eval_measures

from selectkit import criteria
from selectkit.errors import OptionError


def _fits():
    """Every subset fit of the NIST Longley data (shipped with statsmodels) and of a random problem."""
    data = longley.load_pandas()
    out = []
    for X, y in [(data.exog.to_numpy(float), data.endog.to_numpy(float)), _random()]:
        p = X.shape[1]
        for size in range(p + 1):
            for cols in itertools.combinations(range(p), size):
                res = sm.OLS(y, sm.add_constant(X[:, list(cols)]) if cols else np.ones((len(y), 1))).fit()
                out.append((res, len(y), size + 1, ((y - y.mean()) ** 2).sum()))
    return out


def _random():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(40, 4))
    return X, X[:, 0] - X[:, 2] + rng.normal(size=40)


FITS = _fits()


def test_log_likelihood_equals_statsmodels():
    for res, n, k, _ in FITS:
        assert criteria.log_likelihood(res.ssr, n) == pytest.approx(res.llf, rel=1e-12)


def test_aic_bic_statsmodels_convention_equal_statsmodels():
    for res, n, k, _ in FITS:
        assert criteria.aic(res.ssr, n, k, convention="coefficients-only") == pytest.approx(res.aic, rel=1e-12)
        assert criteria.bic(res.ssr, n, k, convention="coefficients-only") == pytest.approx(res.bic, rel=1e-12)
        # AICc against statsmodels' eval_measures.aicc with k parameters
        want = eval_measures.aicc(res.llf, n, k)
        assert criteria.aicc(res.ssr, n, k, convention="coefficients-only") == pytest.approx(want, rel=1e-12)


def test_default_convention_counts_the_variance():
    for res, n, k, _ in FITS:
        assert criteria.aic(res.ssr, n, k) - res.aic == pytest.approx(2.0, abs=1e-8)
        assert criteria.bic(res.ssr, n, k) - res.bic == pytest.approx(np.log(n), abs=1e-8)


def test_rankings_do_not_depend_on_the_convention():
    n = FITS[0][1]
    longley_fits = [f for f in FITS if f[1] == n]
    rss = np.array([f[0].ssr for f in longley_fits])
    k = np.array([f[2] for f in longley_fits])
    for fn in (criteria.aic, criteria.bic):
        a = np.argsort(fn(rss, n, k), kind="stable")
        b = np.argsort(fn(rss, n, k, convention="coefficients-only"), kind="stable")
        np.testing.assert_array_equal(a, b)


def test_mallows_cp_of_the_largest_model_is_k():
    # Mallows (1973): with σ̂² from the largest model, that model has Cp = k exactly.
    data = longley.load_pandas()
    X, y = data.exog.to_numpy(float), data.endog.to_numpy(float)
    full = sm.OLS(y, sm.add_constant(X)).fit()
    n, k_full = len(y), 7
    sigma2 = full.ssr / (n - k_full)
    assert criteria.mallows_cp(full.ssr, n, k_full, sigma2) == pytest.approx(k_full, abs=1e-10)
    sub = sm.OLS(y, sm.add_constant(X[:, [1, 5]])).fit()
    assert criteria.mallows_cp(sub.ssr, n, 3, sigma2) == pytest.approx(sub.ssr / sigma2 - n + 6, rel=1e-12)


def test_adjusted_r2_equals_statsmodels():
    for res, n, k, tss in FITS:
        if k == 1:
            continue
        assert criteria.adjusted_r_squared(res.ssr, n, k, tss) == pytest.approx(res.rsquared_adj, rel=1e-10)
        assert criteria.r_squared(res.ssr, tss) == pytest.approx(res.rsquared, rel=1e-10)


def test_compute_bundles_every_criterion():
    res, n, k, tss = FITS[10]
    out = criteria.compute([res.ssr], n, [k], tss=tss, sigma2_full=1.0)
    assert set(out) == {"log_likelihood", "aic", "aicc", "bic", "r2", "adj_r2", "cp"}
    assert out["aic"][0] == pytest.approx(criteria.aic(res.ssr, n, k))


def test_akaike_weights_sum_to_one():
    aic = np.array([f[0].aic for f in FITS[:64]])
    delta, weights = criteria.akaike_weights(aic)
    assert weights.sum() == pytest.approx(1.0, abs=1e-12)
    assert delta.min() == 0.0 and weights.argmax() == aic.argmin()
    # Burnham & Anderson (2002, §2.9): w ∝ exp(−Δ/2)
    i, j = np.argsort(aic)[:2]
    assert weights[i] / weights[j] == pytest.approx(np.exp(-(aic[i] - aic[j]) / 2), rel=1e-10)
    _, w_inf = criteria.akaike_weights([1.0, np.inf, 3.0])
    assert w_inf[1] == 0.0 and w_inf.sum() == pytest.approx(1.0)


def test_unknown_names_raise_listing_choices():
    with pytest.raises(OptionError, match="choose one of"):
        criteria.aic(1.0, 10, 2, convention="textbook")
    with pytest.raises(OptionError, match="aicc"):
        criteria.check_criterion("AIK")
    assert criteria.check_criterion("BIC") == "bic"


@pytest.mark.parametrize("old, new", [("selectkit", "sigma-counted"), ("statsmodels", "coefficients-only")])
def test_former_convention_names_are_refused_naming_the_new_one(old, new):
    with pytest.raises(OptionError, match=f"did you mean '{new}'"):
        criteria.aic(1.0, 10, 2, convention=old)
    assert criteria.check_convention(new) == new
