"""Tests of selectkit.diagnostics against reference implementations.

References: statsmodels (``linear_reset``, ``het_breuschpagan``, ``durbin_watson``,
``variance_inflation_factor``, ``OLSInfluence``), scipy.stats (``shapiro``,
``jarque_bera``), scikit-learn's ``StandardScaler`` for the standardised design,
and the stack-loss data of Brownlee (1965) as shipped by ``statsmodels.datasets``.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from sklearn.preprocessing import StandardScaler
from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson

from selectkit.diagnostics import diagnose
from selectkit.errors import OptionError, SearchError
from tests.factories import make_candidates


@pytest.fixture(scope="module")
def stackloss():
    # Brownlee (1965) stack-loss data, 21 rows, as shipped by statsmodels.
    data = sm.datasets.stackloss.load_pandas()
    X = data.exog.to_numpy(dtype=float)
    y = data.endog.to_numpy(dtype=float)
    cands = make_candidates(X, y, names=[str(c) for c in data.exog.columns])
    reference = sm.OLS(y, sm.add_constant(X)).fit()
    return cands, reference, diagnose(cands, (0, 1, 2), time_ordered=True)


def test_reset_equals_statsmodels(stackloss):
    _, ref, diag = stackloss
    expected = linear_reset(ref, power=3, test_type="fitted", use_f=True)
    check = diag.check("reset")
    assert check.statistic == pytest.approx(float(np.squeeze(expected.fvalue)), rel=1e-8)
    assert check.pvalue == pytest.approx(float(expected.pvalue), rel=1e-8)
    assert check.aspect == "linearity"


def test_breusch_pagan_equals_statsmodels(stackloss):
    _, ref, diag = stackloss
    lm, lm_p, _, _ = het_breuschpagan(ref.resid, ref.model.exog)
    check = diag.check("breusch_pagan")
    assert check.statistic == pytest.approx(lm, rel=1e-8)
    assert check.pvalue == pytest.approx(lm_p, rel=1e-8)


def test_normality_tests_equal_scipy(stackloss):
    _, ref, diag = stackloss
    w, p = stats.shapiro(ref.resid)
    assert diag.check("shapiro_wilk").statistic == pytest.approx(w, rel=1e-6)
    assert diag.check("shapiro_wilk").pvalue == pytest.approx(p, rel=1e-5)
    jb = stats.jarque_bera(ref.resid)
    assert diag.check("jarque_bera").statistic == pytest.approx(jb.statistic, rel=1e-8)
    assert diag.check("jarque_bera").pvalue == pytest.approx(jb.pvalue, rel=1e-8)


def test_durbin_watson_equals_statsmodels(stackloss):
    _, ref, diag = stackloss
    assert diag.check("durbin_watson").statistic == pytest.approx(durbin_watson(ref.resid), rel=1e-10)
    assert diag.check("durbin_watson").passed is not None


def test_vif_and_condition_number_equal_references(stackloss):
    _, ref, diag = stackloss
    exog = ref.model.exog
    expected = [variance_inflation_factor(exog, i) for i in range(1, exog.shape[1])]
    np.testing.assert_allclose(diag.vif["vif"], expected, rtol=1e-8)
    # Single-column terms: the generalised VIF equals the VIF.
    np.testing.assert_allclose(diag.term_vif["gvif"], expected, rtol=1e-8)
    standard = StandardScaler().fit_transform(exog[:, 1:])
    assert diag.condition_number == pytest.approx(np.linalg.cond(standard), rel=1e-8)


def test_influence_equals_statsmodels(stackloss):
    _, ref, diag = stackloss
    influence = OLSInfluence(ref)
    np.testing.assert_allclose(diag.cooks_distance, influence.cooks_distance[0], rtol=1e-8)
    np.testing.assert_allclose(diag.leverage, influence.hat_matrix_diag, rtol=1e-8)
    np.testing.assert_allclose(diag.studentized, influence.resid_studentized_internal, rtol=1e-8)
    n, k = 21, 4
    flagged = set(np.flatnonzero(influence.cooks_distance[0] > 4 / n)) | set(
        np.flatnonzero(influence.hat_matrix_diag > 2 * k / n))
    assert set(diag.flagged_rows["row"]) == flagged
    assert len(diag.residuals) == n  # nothing is deleted


def test_missing_log_term_fails_linearity_and_the_right_model_passes():
    rng = np.random.default_rng(0)
    n = 150
    x = np.exp(rng.uniform(np.log(1.0), np.log(100.0), size=n))  # two decades
    y = 3 + 2 * np.log(x) + rng.normal(scale=0.3, size=n)
    cands = make_candidates(np.column_stack([x, np.log(x)]), y, names=["x", "log(x)"], families=["x", "x"])
    wrong = diagnose(cands, (0,))
    right = diagnose(cands, (1,))
    assert wrong.check("reset").passed is False
    assert "transformed form" in wrong.check("reset").remedy
    assert wrong.check("reset").verdict.startswith("RESET F = ")
    assert right.check("reset").passed is True
    assert "reset" in wrong.failed and any("transformed form" in r for r in wrong.remedies)


def test_growing_spread_fails_breusch_pagan_and_suggests_a_response_transform():
    rng = np.random.default_rng(1)
    n = 200
    x = rng.uniform(1, 10, size=n)
    y = 5 * x + rng.normal(size=n) * x  # spread grows with x (and with the fitted value)
    diag = diagnose(make_candidates(x[:, None], y), (0,))
    check = diag.check("breusch_pagan")
    assert check.passed is False
    assert "response transform" in check.remedy


def test_independence_is_not_judged_without_declared_order(stackloss):
    cands, _, _ = stackloss
    diag = diagnose(cands, (0, 1))
    check = diag.check("durbin_watson")
    assert check.passed is None and check.statistic is None
    assert "row order was not declared to mean time or sequence" in check.verdict


def test_shapiro_is_not_run_above_5000_rows():
    rng = np.random.default_rng(2)
    n = 5200
    x = rng.normal(size=(n, 1))
    diag = diagnose(make_candidates(x, x[:, 0] + rng.normal(size=n)), (0,))
    check = diag.check("shapiro_wilk")
    assert check.passed is None and "5000" in check.verdict
    assert diag.check("jarque_bera").passed is not None


def test_outlier_is_flagged_and_kept():
    rng = np.random.default_rng(3)
    n = 60
    x = rng.normal(size=n)
    y = 1 + x + rng.normal(scale=0.2, size=n)
    y[17] += 5.0
    diag = diagnose(make_candidates(x[:, None], y), (0,))
    assert 17 in set(diag.flagged_rows["row"])
    check = diag.check("cooks_distance")
    assert check.passed is False and "17" in check.verdict
    assert "never delete" in check.remedy
    assert diag.n == n


def test_collinear_terms_are_flagged():
    rng = np.random.default_rng(4)
    n = 80
    a = rng.normal(size=n)
    X = np.column_stack([a, a + rng.normal(scale=0.05, size=n), rng.normal(size=n)])
    diag = diagnose(make_candidates(X, a + rng.normal(size=n)), (0, 1, 2))
    assert diag.check("vif").passed is False
    assert diag.check("condition_number").passed is False
    assert set(diag.term_vif.loc[diag.term_vif["flagged"], "term"]) == {"x0", "x1"}


def test_block_gvif_does_not_depend_on_the_reference_level():
    # Fox & Monette (1992): GVIF is invariant to the coding of a block, unlike the VIFs of its columns.
    rng = np.random.default_rng(5)
    n = 90
    level = rng.integers(0, 3, size=n)
    x = rng.normal(size=n) + 0.8 * level
    dummies = np.column_stack([(level == j).astype(float) for j in range(3)])
    y = x + level + rng.normal(size=n)
    gvif = []
    for reference in (0, 2):
        cols = [j for j in range(3) if j != reference]
        X = np.column_stack([x, dummies[:, cols]])
        cands = make_candidates(X, y, names=["x", "cultivar[a]", "cultivar[b]"], blocks={"cultivar": [1, 2]})
        diag = diagnose(cands, (0, 1))
        gvif.append(diag.term_vif.set_index("term")["gvif"])
    assert gvif[0]["cultivar"] == pytest.approx(gvif[1]["cultivar"], rel=1e-8)
    assert gvif[0]["x"] == pytest.approx(gvif[1]["x"], rel=1e-8)


def test_weighted_model_is_checked_on_the_whitened_scale():
    rng = np.random.default_rng(6)
    n = 50
    X = rng.normal(size=(n, 2))
    w = rng.uniform(0.5, 3, size=n)
    y = 1 + X[:, 0] + rng.normal(size=n) / np.sqrt(w)
    diag = diagnose(make_candidates(X, y, weights=w), (0, 1))
    root = np.sqrt(w)
    ref = sm.OLS(y * root, sm.add_constant(X) * root[:, None]).fit()
    np.testing.assert_allclose(diag.residuals, ref.resid, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(diag.cooks_distance, OLSInfluence(ref).cooks_distance[0], rtol=1e-8)


def test_intercept_only_and_bad_input():
    rng = np.random.default_rng(7)
    X = rng.normal(size=(30, 2))
    cands = make_candidates(X, rng.normal(size=30))
    diag = diagnose(cands, ())
    assert diag.check("reset").passed is None
    assert diag.check("breusch_pagan").passed is None
    assert diag.table().shape[0] == len(diag.checks)
    with pytest.raises(OptionError, match="reset"):
        diag.check("white")
    with pytest.raises(OptionError, match="alpha"):
        diagnose(cands, (0,), alpha=5)
    dup = make_candidates(np.column_stack([X[:, 0], X[:, 0]]), rng.normal(size=30))
    with pytest.raises(SearchError, match="linearly dependent"):
        diagnose(dup, (0, 1))
