"""Tests of selectkit.transforms against reference libraries and brute force."""

import math

import numpy as np
import pytest
import scipy.special
import scipy.stats
import statsmodels.api as sm
from scipy import optimize

from selectkit import transforms as tf
from selectkit.errors import OptionError


def _positive_samples():
    rng = np.random.default_rng(20240601)
    samples = {
        "lognormal": rng.lognormal(2.0, 0.7, 200),
        "gamma": rng.gamma(2.0, 3.0, 150),
        "uniform": rng.uniform(1.0, 1000.0, 80),
        "wide_lognormal": rng.lognormal(0.0, 2.0, 300),
        "left_skewed": 35.0 - rng.gamma(2.0, 3.0, 120),  # λ̂ ≈ 3.7
    }
    # Real data shipped with statsmodels: the Longley data (also NIST StRD's Longley set).
    longley = sm.datasets.longley.load_pandas().data
    samples["longley_GNP"] = longley["GNP"].to_numpy(float)
    samples["longley_UNEMP"] = longley["UNEMP"].to_numpy(float)
    # Real data shipped with statsmodels: the Scottish vote data (positive rates and counts).
    scotland = sm.datasets.scotland.load_pandas().data
    samples["scotland_COUTAX"] = scotland["COUTAX"].to_numpy(float)
    return samples


POSITIVE = _positive_samples()


# ----------------------------------------------------------------- Box-Cox


@pytest.mark.parametrize("key", sorted(POSITIVE))
def test_boxcox_lambda_equals_scipy_mle(key):
    # Reference library: scipy.stats.boxcox_normmax(x, method='mle').
    x = POSITIVE[key]
    expected = scipy.stats.boxcox_normmax(x, method="mle")
    assert tf.boxcox_lambda(x) == pytest.approx(expected, abs=1e-6)


def test_boxcox_lambda_stops_at_the_range_when_the_maximum_lies_beyond():
    # scipy finds λ̂ ≈ 11 here; selectkit searches [−5, 5] and reports the edge (candidates refuse it).
    x = 100.0 - np.random.default_rng(20240601).gamma(2.0, 3.0, 120)
    assert scipy.stats.boxcox_normmax(x, method="mle") > 5
    assert tf.boxcox_lambda(x) == pytest.approx(5.0, abs=1e-6)


@pytest.mark.parametrize("key", sorted(POSITIVE))
@pytest.mark.parametrize("lam", [-3.0, -1.0, -0.2, 0.0, 1e-4, 0.37, 1.0, 2.5, 4.0])
def test_boxcox_llf_equals_scipy(key, lam):
    # Reference library: scipy.stats.boxcox_llf(lmb, data).
    x = POSITIVE[key]
    expected = scipy.stats.boxcox_llf(lam, x)
    assert tf.boxcox_llf(x, lam) == pytest.approx(expected, rel=1e-9, abs=1e-8)


def test_boxcox_llf_is_continuous_at_zero():
    # (scipy.stats.boxcox_llf itself loses digits for 0 < |λ| < 1e-8, so the check is against λ = 0.)
    x = POSITIVE["gamma"]
    for lam in (1e-12, -1e-9, 1e-7):
        assert tf.boxcox_llf(x, lam) == pytest.approx(tf.boxcox_llf(x, 0.0), abs=1e-5)


@pytest.mark.parametrize("lam", [-2.0, -0.5, 0.0, 1e-12, 0.37, 1.0, 3.0])
def test_boxcox_transform_equals_scipy_special(lam):
    # Reference library: scipy.special.boxcox, and the textbook formula (x^λ − 1)/λ.
    x = POSITIVE["gamma"]
    np.testing.assert_allclose(tf.boxcox(x, lam), scipy.special.boxcox(x, lam), rtol=1e-12, atol=1e-12)
    if lam not in (0.0, 1e-12):
        np.testing.assert_allclose(tf.boxcox(x, lam), (x**lam - 1.0) / lam, rtol=1e-10)
    np.testing.assert_allclose(tf.boxcox(x - 1.0, lam, shift=1.0), tf.boxcox(x, lam), rtol=1e-12)


# ------------------------------------------------------------ Yeo-Johnson


def _real_samples():
    rng = np.random.default_rng(77)
    return {
        "normal": rng.normal(0.0, 1.0, 200),
        "shifted_gamma": rng.gamma(2.0, 3.0, 150) - 3.0,
        "skewed_negative": -rng.lognormal(0.5, 0.6, 120),
        "positive": rng.lognormal(1.0, 0.5, 100),
        # Real data shipped with scikit-learn: the diabetes predictors are centred (both signs).
        "diabetes_bmi": __import__("sklearn.datasets", fromlist=["load_diabetes"]).load_diabetes().data[:, 2] * 50,
    }


REAL = _real_samples()


@pytest.mark.parametrize("key", sorted(REAL))
def test_yeojohnson_lambda_equals_scipy(key):
    # Reference library: the λ returned by scipy.stats.yeojohnson(x).
    x = REAL[key]
    _, expected = scipy.stats.yeojohnson(x)
    assert tf.yeojohnson_lambda(x) == pytest.approx(expected, abs=1e-6)


@pytest.mark.parametrize("key", sorted(REAL))
@pytest.mark.parametrize("lam", [-1.5, 0.0, 0.5, 1.0, 2.0, 2.7])
def test_yeojohnson_transform_and_llf_equal_scipy(key, lam):
    # Reference library: scipy.stats.yeojohnson(x, lmbda) and scipy.stats.yeojohnson_llf.
    x = REAL[key]
    np.testing.assert_allclose(tf.yeojohnson(x, lam), scipy.stats.yeojohnson(x, lmbda=lam), rtol=1e-10, atol=1e-12)
    assert tf.yeojohnson_llf(x, lam) == pytest.approx(scipy.stats.yeojohnson_llf(lam, x), rel=1e-9, abs=1e-8)


def test_yeojohnson_is_identity_at_one_and_matches_definition():
    # Yeo & Johnson (2000), eq. (2.1): ψ(x, 1) = x; for x ≥ 0, ψ(x, 0) = log(x + 1).
    x = np.array([-3.0, -0.5, 0.0, 0.5, 4.0])
    np.testing.assert_allclose(tf.yeojohnson(x, 1.0), x, atol=1e-15)
    np.testing.assert_allclose(tf.yeojohnson(x[x >= 0], 0.0), np.log1p(x[x >= 0]))
    np.testing.assert_allclose(tf.yeojohnson(x[x < 0], 2.0), -np.log1p(-x[x < 0]))


# ------------------------------------------------------------ simple forms


def test_simple_forms_against_numpy_formulas():
    x = np.array([0.5, 1.0, 2.0, 9.0])
    np.testing.assert_array_equal(tf.identity(x), x)
    np.testing.assert_allclose(tf.log(x), np.log(x))
    np.testing.assert_allclose(tf.log(x, 1.5), np.log(x + 1.5))
    np.testing.assert_allclose(tf.sqrt(x), np.sqrt(x))
    np.testing.assert_allclose(tf.reciprocal(x), 1 / x)
    np.testing.assert_allclose(tf.square(x), x**2)


@pytest.mark.parametrize("p", tf.FRACTIONAL_POWERS)
def test_fractional_polynomial_powers(p):
    # Royston & Altman (1994): x^p, with p = 0 read as log x.
    x = np.array([0.25, 1.0, 2.0, 7.5])
    expected = np.log(x) if p == 0 else x**p
    np.testing.assert_allclose(tf.power(x, p), expected, rtol=1e-14)
    np.testing.assert_allclose(tf.apply("power", x - 1.0, {"power": p, "shift": 1.0}), expected, rtol=1e-14)


def test_apply_rejects_unknown_transform():
    with pytest.raises(OptionError, match="identity"):
        tf.apply("cuberoot", [1.0], ())


# ---------------------------------------------------------------- domains


def test_domain_problems_name_the_count():
    x = np.array([0.0, 0.0, 0.0] + [1.0] * 117)
    assert tf.domain_problem("log", x, column="co2") == "3 of 120 values are zero; log is undefined there"
    assert "3 of 120 values are zero" in tf.domain_problem("reciprocal", x)
    assert tf.domain_problem("sqrt", x) is None  # sqrt(0) is defined
    assert tf.domain_problem("log", x, {"shift": 1.0}) is None
    neg = np.array([-2.0, -1.0, 3.0, 4.0])
    msg = tf.domain_problem("sqrt", neg, column="temp")
    assert msg.startswith("2 of 4 values are negative (smallest temp = -2)")
    assert "sqrt is undefined" in msg
    # 1/x is defined for negatives, but a variable of both signs has the pole inside the data
    assert "crosses zero (min -2, max 4)" in tf.domain_problem("reciprocal", neg)
    assert tf.domain_problem("reciprocal", -np.abs(neg) - 1) is None  # one sign, away from zero
    assert tf.domain_problem("log", neg, {"shift": 1.0}).startswith("1 of 4 values is zero; 1 of 4 values is negative")
    assert "after the shift 1" in tf.domain_problem("log", neg, {"shift": 1.0})
    assert tf.domain_problem("power", neg, {"power": 3.0}) is None
    assert tf.domain_problem("power", neg, {"power": -0.5}) is not None
    assert "pole inside the data" in tf.domain_problem("power", neg, {"power": -2.0})
    assert tf.domain_problem("power", neg + 3, {"power": -2.0}) is None
    assert tf.domain_problem("yeojohnson", neg, {"lambda": 0.3}) is None
    assert tf.domain_problem("identity", neg) is None


# ------------------------------------------------------------------ names


def test_readable_names():
    assert tf.term_name("identity", "x") == "x"
    assert tf.term_name("log", "x") == "log(x)"
    assert tf.term_name("sqrt", "x") == "sqrt(x)"
    assert tf.term_name("reciprocal", "x") == "1/x"
    assert tf.term_name("square", "x") == "x^2"
    assert tf.term_name("power", "x", {"power": -0.5}) == "x^-0.5"
    assert tf.term_name("power", "x", {"power": 3.0}) == "x^3"
    assert tf.term_name("power", "x", {"power": 0.0}) == "log(x)"
    assert tf.term_name("power", "x", {"power": 0.5}) == "sqrt(x)"
    assert tf.term_name("boxcox", "x", {"lambda": 0.3712}) == "boxcox(x, 0.37)"
    assert tf.term_name("yeojohnson", "x", {"lambda": 0.8}) == "yeojohnson(x, 0.8)"
    assert tf.term_name("log", "x", {"shift": 1.5}) == "log(x + 1.5)"
    assert tf.term_name("log", "x", {"shift": -2.0}) == "log(x - 2)"
    assert tf.term_name("reciprocal", "x", {"shift": 1.0}) == "1/(x + 1)"
    assert tf.term_name("power", "x", {"power": -2.0, "shift": 1.0}) == "(x + 1)^-2"
    assert tf.term_name("boxtidwell", "x", {"power": 0.4871}) == "x^0.49"
    assert tf.term_name("product", ("x", "z")) == "x*z"


def _evaluate(expression, values):
    """Evaluate a plain-notation expression with numpy (independent of apply())."""
    code = expression.replace("^", "**")
    return eval(code, {"log": np.log, "sqrt": np.sqrt, "yeojohnson": scipy.stats.yeojohnson}, dict(values))


@pytest.mark.parametrize(
    "transform, params",
    [
        ("identity", {}),
        ("log", {}),
        ("log", {"shift": 1.5}),
        ("sqrt", {"shift": 2.0}),
        ("reciprocal", {}),
        ("reciprocal", {"shift": 1.0}),
        ("square", {}),
        ("power", {"power": -0.5}),
        ("power", {"power": 3.0, "shift": 0.5}),
        ("boxcox", {"lambda": 0.3712}),
        ("boxcox", {"lambda": -1.25, "shift": 1.0}),
        ("boxcox", {"lambda": 0.0}),
        ("boxtidwell", {"power": 0.4871}),
    ],
)
def test_expression_evaluates_to_the_form(transform, params):
    x = np.array([0.5, 1.0, 2.5, 10.0])
    expression = tf.term_expression(transform, "x", params, digits=15)
    np.testing.assert_allclose(_evaluate(expression, {"x": x}), tf.apply(transform, x, params), rtol=1e-12)


def test_format_number():
    assert tf.format_number(2.0) == "2"
    assert tf.format_number(-0.5) == "-0.5"
    assert tf.format_number(0.3712, 2) == "0.37"
    assert tf.format_number(0.8, 2) == "0.8"
    assert tf.format_number(-0.001, 2) == "0"
    assert tf.format_number(1.2345678) == "1.23457"


# ------------------------------------------------------------ Box-Tidwell


def _rss_of_power(x, y, alpha):
    """Brute force: rss of y on [1, x^α] (log x at α = 0) by ordinary least squares."""
    g = np.log(x) if alpha == 0 else x**alpha
    A = np.column_stack([np.ones_like(x), g])
    _, rss, *_ = np.linalg.lstsq(A, y, rcond=None)
    return float(rss[0])


@pytest.mark.parametrize("true_power", [0.5, -1.0, 2.0, -0.5])
def test_box_tidwell_recovers_known_power(true_power):
    rng = np.random.default_rng(5)
    x = rng.uniform(1.0, 10.0, 200)
    y = 2.0 + 3.0 * x**true_power + rng.normal(0.0, 0.01, x.size)
    result = tf.box_tidwell(x, y)
    assert result.converged and result.reason is None
    assert result.power == pytest.approx(true_power, abs=0.02)
    # Independent check: the least-squares power found by a bounded 1-d search of rss(α).
    brute = optimize.minimize_scalar(lambda a: _rss_of_power(x, y, a), bounds=(-3, 3), method="bounded",
                                     options={"xatol": 1e-10})
    assert result.power == pytest.approx(brute.x, abs=1e-5)


def test_box_tidwell_recovers_log_and_is_scale_invariant():
    rng = np.random.default_rng(9)
    x = rng.uniform(0.5, 20.0, 150)
    y = 1.0 + 2.0 * np.log(x) + rng.normal(0.0, 0.01, x.size)
    a = tf.box_tidwell(x, y).power
    assert abs(a) < 0.02
    assert tf.box_tidwell(1000.0 * x, y).power == pytest.approx(a, abs=1e-6)


def test_box_tidwell_weighted_matches_weighted_brute_force():
    rng = np.random.default_rng(11)
    x = rng.uniform(1.0, 8.0, 120)
    w = rng.uniform(0.2, 3.0, 120)
    y = 1.0 + 2.0 * x**0.7 + rng.normal(0.0, 0.2, x.size) / np.sqrt(w)

    def wrss(alpha):
        g = x**alpha
        A = np.column_stack([np.ones_like(x), g]) * np.sqrt(w)[:, None]
        _, rss, *_ = np.linalg.lstsq(A, y * np.sqrt(w), rcond=None)
        return float(rss[0])

    brute = optimize.minimize_scalar(wrss, bounds=(-3, 3), method="bounded", options={"xatol": 1e-10})
    assert tf.box_tidwell(x, y, weights=w).power == pytest.approx(brute.x, abs=1e-5)


def test_box_tidwell_test_statistic_equals_statsmodels():
    # Reference library: statsmodels OLS t-value of the constructed variable x·log x (Box & Tidwell 1962).
    rng = np.random.default_rng(12)
    x = rng.uniform(1.0, 10.0, 80)
    y = 1.0 + np.sqrt(x) + rng.normal(0.0, 0.2, x.size)
    fit = sm.OLS(y, np.column_stack([np.ones_like(x), x, x * np.log(x)])).fit()
    result = tf.box_tidwell(x, y)
    assert result.statistic == pytest.approx(fit.tvalues[2], rel=1e-8)
    assert result.pvalue == pytest.approx(fit.pvalues[2], rel=1e-6)


def test_box_tidwell_refuses_noise_and_extreme_powers():
    rng = np.random.default_rng(3)
    x = rng.uniform(1.0, 10.0, 100)
    noise = tf.box_tidwell(x, rng.normal(size=100))
    extreme = tf.box_tidwell(x, 2.0 + x**5)
    flat = tf.box_tidwell(x, np.ones(100))
    for result in (noise, extreme, flat):
        assert result.power is None and not result.converged
        assert isinstance(result.reason, str) and result.reason
    assert "extreme" in extreme.reason or "converge" in extreme.reason
    assert "association" in flat.reason


# ------------------------------------------------------------ response side


@pytest.mark.parametrize("transform, lam", [("log", None), ("sqrt", None), ("boxcox", 0.37), ("boxcox", -1.0),
                                            ("identity", None)])
def test_response_log_jacobian_equals_numerical_derivative(transform, lam):
    # Independent: Σ log|dz/dy| by central differences of the transform itself.
    y = np.random.default_rng(1).uniform(0.5, 5.0, 40)
    h = 1e-6
    dz = (tf.transform_response(y + h, transform, lam) - tf.transform_response(y - h, transform, lam)) / (2 * h)
    assert tf.response_log_jacobian(y, transform, lam) == pytest.approx(float(np.sum(np.log(np.abs(dz)))), abs=1e-6)


def test_response_transform_options_are_checked():
    with pytest.raises(OptionError, match="identity, log, sqrt, boxcox"):
        tf.response_log_jacobian([1.0], "cube")
    with pytest.raises(OptionError, match="λ"):
        tf.transform_response([1.0], "boxcox")
    assert math.isclose(tf.response_log_jacobian([2.0, 3.0], "boxcox", 0.0), tf.response_log_jacobian([2.0, 3.0], "log"))


def test_box_tidwell_with_covariates_matches_brute_force():
    # Other regressors held linear (Box & Tidwell 1962); independent check: bounded 1-d search of the rss
    # of y on [1, x^α, Z] by numpy least squares.
    rng = np.random.default_rng(21)
    n = 150
    x = rng.uniform(1.0, 10.0, n)
    Z = np.column_stack([rng.normal(0, 3, n), rng.uniform(0, 1, n) + 0.3 * x])
    y = 1.0 + 5.0 / x + Z @ [2.0, -1.0] + rng.normal(0.0, 0.05, n)

    def rss(alpha):
        A = np.column_stack([np.ones(n), x**alpha, Z])
        return float(np.linalg.lstsq(A, y, rcond=None)[1][0])

    brute = optimize.minimize_scalar(rss, bounds=(-3, 3), method="bounded", options={"xatol": 1e-10})
    result = tf.box_tidwell(x, y, covariates=Z)
    assert result.converged
    assert result.power == pytest.approx(brute.x, abs=1e-5)
    assert result.power == pytest.approx(-1.0, abs=0.05)
    # the test of power 1 with covariates equals the statsmodels t-value of x·log x in the full model
    fit = sm.OLS(y, np.column_stack([np.ones(n), x, x * np.log(x), Z])).fit()
    assert result.statistic == pytest.approx(fit.tvalues[2], rel=1e-8)
    # weights and covariates together: the weighted rss
    w = rng.uniform(0.5, 2.0, n)

    def wrss(alpha):
        A = np.column_stack([np.ones(n), x**alpha, Z]) * np.sqrt(w)[:, None]
        return float(np.linalg.lstsq(A, y * np.sqrt(w), rcond=None)[1][0])

    wbrute = optimize.minimize_scalar(wrss, bounds=(-3, 3), method="bounded", options={"xatol": 1e-10})
    assert tf.box_tidwell(x, y, weights=w, covariates=Z).power == pytest.approx(wbrute.x, abs=1e-5)
