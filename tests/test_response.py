"""Tests of the response Box-Cox (selectkit.response) against statsmodels, scipy and simulation."""

import numpy as np
import pytest
import scipy.stats
import statsmodels.api as sm

from selectkit import criteria, transforms
from selectkit.errors import InputError, OptionError
from selectkit.response import INTERPRETABLE_LAMBDAS, boxcox_response, profile_log_likelihood, response_log_jacobian


def _design(seed, n=150, p=3):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0.0, 1.0, (n, p))
    return rng, X, X @ np.linspace(1.0, -0.5, p)


def test_log_scale_truth_gives_interval_with_zero_not_one():
    rng, X, mu = _design(1)
    y = np.exp(1.0 + mu + rng.normal(0.0, 0.1, mu.size))
    result = boxcox_response(y, X)
    low, high = result.interval
    assert low <= 0.0 <= high
    assert not (low <= 1.0 <= high)
    assert result.suggested == 0.0
    assert "log" in result.verdict
    assert "optimistic" in result.caution


def test_square_scale_truth_gives_interval_with_one_half():
    rng, X, mu = _design(2)
    root = 3.0 + mu + rng.normal(0.0, 0.1, mu.size)
    assert root.min() > 0  # kept positive, so y = root² is a monotone transform of the linear model
    result = boxcox_response(root**2, X)
    low, high = result.interval
    assert low <= 0.5 <= high
    assert result.suggested == 0.5


def test_no_interpretable_power_inside_a_narrow_interval():
    rng, X, mu = _design(3, n=400)
    z = 2.0 + 2.0 * mu + rng.normal(0.0, 0.02, mu.size)  # z = y^0.25 exactly linear
    result = boxcox_response(z**4, X)
    low, high = result.interval
    assert low <= 0.25 <= high
    assert not any(low <= v <= high for v in INTERPRETABLE_LAMBDAS)
    assert result.suggested is None
    assert "no simple power" in result.verdict


@pytest.mark.parametrize("lam", [-1.0, -0.3, 0.0, 0.5, 1.0, 1.7])
def test_profile_equals_statsmodels_ols_plus_jacobian(lam):
    # Reference library: statsmodels OLS log-likelihood of the transformed response, plus the
    # Box & Cox (1964) Jacobian term (λ − 1) Σ log y.
    rng, X, mu = _design(4, n=90)
    y = np.exp(0.5 + mu + rng.normal(0.0, 0.2, mu.size))
    z = scipy.stats.boxcox(y, lmbda=lam)
    fit = sm.OLS(z, sm.add_constant(X)).fit()
    expected = fit.llf + (lam - 1.0) * np.log(y).sum()
    assert profile_log_likelihood(y, X, lam) == pytest.approx(expected, rel=1e-10)


def test_weighted_profile_equals_statsmodels_wls_plus_jacobian():
    # Reference library: statsmodels WLS llf (which includes ½ Σ log w) plus the Jacobian.
    rng, X, mu = _design(5, n=80)
    w = rng.uniform(0.5, 2.0, mu.size)
    y = np.exp(0.5 + mu + rng.normal(0.0, 0.2, mu.size) / np.sqrt(w))
    for lam in (-0.5, 0.0, 0.8):
        fit = sm.WLS(scipy.stats.boxcox(y, lmbda=lam), sm.add_constant(X), weights=w).fit()
        expected = fit.llf + (lam - 1.0) * np.log(y).sum()
        assert profile_log_likelihood(y, X, lam, weights=w) == pytest.approx(expected, rel=1e-10)


def test_intercept_only_reduces_to_the_univariate_box_cox_mle():
    # Reference library: with no predictors the profile likelihood is scipy's boxcox_llf plus the constant
    # −n/2·(log 2π + 1), and λ̂ equals scipy.stats.boxcox_normmax(y, method='mle').
    y = np.random.default_rng(6).gamma(3.0, 2.0, 120)
    X = np.empty((120, 0))
    result = boxcox_response(y, X)
    assert result.lambda_hat == pytest.approx(scipy.stats.boxcox_normmax(y, method="mle"), abs=1e-6)
    constant = -len(y) / 2 * (np.log(2 * np.pi) + 1)
    for lam in (-1.0, 0.0, 0.4):
        assert profile_log_likelihood(y, X, lam) == pytest.approx(scipy.stats.boxcox_llf(lam, y) + constant, rel=1e-10)


def test_interval_ends_sit_on_the_chi_square_cut():
    # χ²₁ 0.95 quantile = 3.841459 (standard statistical tables).
    assert scipy.stats.chi2.ppf(0.95, 1) == pytest.approx(3.841459, abs=1e-6)
    rng, X, mu = _design(7)
    y = np.exp(1.0 + mu + rng.normal(0.0, 0.15, mu.size))
    result = boxcox_response(y, X)
    cut = result.log_likelihood - 3.841459 / 2
    for end, is_open in zip(result.interval, result.interval_open):
        assert not is_open
        assert profile_log_likelihood(y, X, end) == pytest.approx(cut, abs=1e-6)
    # λ̂ maximises the profile: no grid point beats it.
    assert result.log_likelihood >= result.profile.max() - 1e-9
    assert result.grid[0] == -2.0 and result.grid[-1] == 2.0


def test_open_interval_is_flagged_at_the_bound():
    rng, X, mu = _design(8, n=25)
    y = np.exp(1.0 + mu + rng.normal(0.0, 0.3, mu.size))
    result = boxcox_response(y, X, bounds=(-0.2, 0.2))
    assert result.interval_open == (True, True)
    assert result.interval == (-0.2, 0.2)
    assert "below" in result.verdict and "above" in result.verdict


def test_log_jacobian_makes_criteria_comparable_across_scales():
    # ℓ of the log-response model with the log Jacobian equals ℓ of the Box-Cox model at λ = 0.
    rng, X, mu = _design(9, n=60)
    y = np.exp(mu + rng.normal(0.0, 0.2, mu.size))
    fit = sm.OLS(np.log(y), sm.add_constant(X)).fit()
    ll_log = criteria.log_likelihood(fit.ssr, len(y), response_log_jacobian(y, "log"))
    assert ll_log == pytest.approx(profile_log_likelihood(y, X, 0.0), rel=1e-12)
    assert response_log_jacobian is transforms.response_log_jacobian


def test_bad_input_gives_clear_errors():
    X = np.ones((5, 1)) * np.arange(5)[:, None]
    with pytest.raises(InputError, match="2 of 5 values ≤ 0"):
        boxcox_response(np.array([1.0, 0.0, -1.0, 2.0, 3.0]), X)
    with pytest.raises(InputError, match="rows"):
        boxcox_response(np.array([1.0, 2.0]), np.ones((3, 1)))
    with pytest.raises(OptionError, match="bounds"):
        boxcox_response(np.arange(1.0, 6.0), X, bounds=(2, -2))
    with pytest.raises(InputError, match="weights"):
        boxcox_response(np.arange(1.0, 6.0), X, weights=[1, 1, 1, 1, -1])


def test_shipped_dataset_profile_maximum_matches_a_statsmodels_search():
    # Dataset shipped with statsmodels (Scottish devolution vote, 32 councils); independent computation:
    # a bounded 1-d search of the statsmodels OLS llf of the transformed response plus the Jacobian.
    from scipy import optimize

    data = sm.datasets.scotland.load_pandas()
    y = data.endog.to_numpy(float)
    X = data.exog.to_numpy(float)
    design = sm.add_constant(X)

    def negative_profile(lam):
        return -(sm.OLS(scipy.stats.boxcox(y, lmbda=lam), design).fit().llf + (lam - 1.0) * np.log(y).sum())

    reference = optimize.minimize_scalar(negative_profile, bounds=(-2, 2), method="bounded",
                                         options={"xatol": 1e-9})
    result = boxcox_response(y, X)
    assert result.lambda_hat == pytest.approx(reference.x, abs=1e-5)
    assert result.log_likelihood == pytest.approx(-reference.fun, rel=1e-9)


def test_repr_is_short_and_table_holds_the_profile():
    rng, X, mu = _design(1)
    y = np.exp(1.0 + mu + rng.normal(0.0, 0.1, mu.size))
    result = boxcox_response(y, X)
    text = repr(result)
    assert len(text.splitlines()) <= 4 and "array(" not in text and len(text) < 600
    assert "suggested λ = 0 (log)" in text and "150 rows" in text
    table = result.table()
    assert list(table.columns) == ["lambda", "log_likelihood", "in_interval"] and len(table) == len(result.grid)
    np.testing.assert_array_equal(table["log_likelihood"], result.profile)
    inside = table.loc[table["in_interval"], "lambda"]
    assert inside.min() >= result.interval[0] and inside.max() <= result.interval[1]
