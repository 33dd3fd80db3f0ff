"""Influence verdicts against reference implementations and a dataset with known outcome.

Sources:
* statsmodels ``OLSInfluence`` — Cook's distances and leverages (hat diagonal).
* scipy ``stats.f.ppf`` — the median and 20th percentile of F(k, n − k) that Cook's
  distance is compared with (Cook & Weisberg 1982; Kutner et al. 2005).
* A Monte Carlo simulation with normal errors (plain numpy, hat matrix formed
  explicitly) — the number of rows above 4/n expected by chance.
* The stack-loss data of Brownlee (1965), as shipped by ``statsmodels.datasets``.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.datasets import stackloss
from statsmodels.stats.outliers_influence import OLSInfluence

from selectkit.diagnostics import _expected_above_cooks, diagnose
from tests.factories import make_candidates


def _planted(n, shift, seed=0):
    """Two normal predictors and normal errors; row 7 moved out in x0 and its response shifted by ``shift``."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 2))
    X[7, 0] = 4.0
    y = 1 + X @ np.array([1.0, -0.5]) + rng.normal(size=n)
    y[7] += shift
    return X, y


def test_cooks_distance_and_leverage_equal_statsmodels_olsinfluence():
    # Reference: statsmodels.stats.outliers_influence.OLSInfluence on the same fit.
    X, y = _planted(120, shift=-6.0)
    diag = diagnose(make_candidates(X, y), (0, 1))
    influence = OLSInfluence(sm.OLS(y, sm.add_constant(X)).fit())
    np.testing.assert_allclose(diag.cooks_distance, influence.cooks_distance[0], rtol=1e-8)
    np.testing.assert_allclose(diag.leverage, influence.hat_matrix_diag, rtol=1e-8)
    assert diag.check("cooks_distance").statistic == pytest.approx(influence.cooks_distance[0].max(), rel=1e-8)
    assert diag.check("leverage").statistic == pytest.approx(influence.hat_matrix_diag.max(), rel=1e-8)


def test_problem_and_look_thresholds_are_percentiles_of_f():
    # Reference: scipy.stats.f.ppf(0.5, k, n - k) (Cook & Weisberg 1982) and f.ppf(0.2, k, n - k)
    # (Kutner et al. 2005) against Cook's distances from statsmodels' OLSInfluence.
    n, k = 60, 3
    median, twentieth = stats.f.ppf(0.5, k, n - k), stats.f.ppf(0.2, k, n - k)
    seen = set()
    for shift in np.linspace(0.0, 8.0, 33):
        X, y = _planted(n, shift=-shift, seed=3)
        check = diagnose(make_candidates(X, y), (0, 1)).check("cooks_distance")
        largest = OLSInfluence(sm.OLS(y, sm.add_constant(X)).fit()).cooks_distance[0].max()
        if largest > median:
            expected = "a problem"
        elif largest > twentieth:
            expected = "worth a look"
        else:
            expected = check.level  # below both: the 4/n count rule decides (tested elsewhere)
            assert expected in ("fine", "worth a look")
        assert check.level == expected, (shift, largest, check.verdict)
        if expected == "a problem":
            printed = float(re.search(r"median of F\(3, 57\), ([0-9.]+)", check.verdict).group(1))
            assert printed == pytest.approx(median, rel=2e-3)
        seen.add(expected)
    assert {"a problem", "worth a look"} <= seen  # the grid crosses both thresholds


def test_expected_count_above_4_over_n_matches_a_simulation():
    # Reference: Monte Carlo with normal errors; Cook's distance from its definition,
    # Dᵢ = eᵢ² hᵢᵢ / (k s² (1 − hᵢᵢ)²), with the hat matrix formed explicitly.
    rng = np.random.default_rng(21)
    n, k, runs = 150, 3, 4000
    design = np.column_stack([np.ones(n), rng.normal(size=n), rng.exponential(size=n)])  # uneven leverages
    hat_matrix = design @ np.linalg.inv(design.T @ design) @ design.T
    h = np.diag(hat_matrix)
    errors = rng.normal(size=(n, runs))
    resid = errors - hat_matrix @ errors
    s2 = np.sum(resid ** 2, axis=0) / (n - k)
    cooks = resid ** 2 * h[:, None] / (k * s2[None, :] * (1 - h[:, None]) ** 2)
    counts = np.sum(cooks > 4 / n, axis=0)
    mean, sd = _expected_above_cooks(h, n, k, 4 / n)
    assert mean == pytest.approx(counts.mean(), abs=4 * counts.std() / np.sqrt(runs))
    # The rows share s², so their counts are slightly negatively correlated: the independent-rows standard
    # deviation is a little too large, which makes the "more than chance" band conservative.
    assert counts.std() <= sd <= 1.3 * counts.std()


@pytest.fixture(scope="module")
def stackloss_checks():
    frame = stackloss.load_pandas().data
    names = ["AIRFLOW", "WATERTEMP", "ACIDCONC"]
    X = frame[names].to_numpy(dtype=float)
    y = frame["STACKLOSS"].to_numpy(dtype=float)
    diag = diagnose(make_candidates(X, y, names=names), (0, 1, 2))
    influence = OLSInfluence(sm.OLS(y, sm.add_constant(X)).fit())
    return diag, influence


def test_stackloss_row_21_is_the_most_influential_and_row_17_the_highest_leverage(stackloss_checks):
    # Brownlee (1965) stack-loss data, 21 rows, full three-predictor fit. Known from the literature (from
    # memory, e.g. the many re-analyses collected by Rousseeuw & Leroy 1987): observation 21 has by far the
    # largest Cook's distance (about 0.69) and observation 17 the largest leverage (about 0.41). 0.69 is
    # below the median of F(4, 17) (0.87), so by Cook & Weisberg's rule row 21 is influential but not
    # "a problem"; it is above the 20th percentile (0.55), so it is "worth a look".
    diag, influence = stackloss_checks
    cooks, leverage = diag.check("cooks_distance"), diag.check("leverage")
    assert influence.cooks_distance[0][20] == pytest.approx(0.69, abs=0.01)  # statsmodels agrees with memory
    assert influence.hat_matrix_diag[16] == pytest.approx(0.41, abs=0.01)
    assert stats.f.ppf(0.2, 4, 17) < cooks.statistic < stats.f.ppf(0.5, 4, 17)
    assert cooks.level == "worth a look" and cooks.rows[0] == "21"
    # Leverage 0.41 is above both 2k/n = 8/21 = 0.381 and Huber's 0.2, below 0.5.
    assert leverage.level == "worth a look" and leverage.rows[0] == "17"
    assert "2k/n = 0.381" in leverage.verdict


def test_rows_far_off_the_fit_are_named_by_the_bonferroni_outlier_test():
    # Reference: statsmodels OLSResults.outlier_test(method="bonf") (externally studentised residuals,
    # Bonferroni-adjusted p-values). Four low-leverage rows 7-9 sd below the plane: normal errors
    # otherwise. No single one moves the fit much (Cook's distance stays fine), but the normality check
    # is a problem and names exactly them, largest first.
    rng = np.random.default_rng(31)
    n = 300
    X = rng.normal(size=(n, 2))
    y = 1 + X @ np.array([1.0, -0.5]) + rng.normal(size=n)
    planted = np.array([11, 80, 150, 222])
    X[planted] = 0.1 * X[planted]  # near the centre: ordinary leverage
    y[planted] = 1 + X[planted] @ np.array([1.0, -0.5]) - np.array([7.0, 8.0, 9.0, 7.5])
    diag = diagnose(make_candidates(X, y), (0, 1))
    table = sm.OLS(y, sm.add_constant(X)).fit().outlier_test(method="bonf")
    expected = np.flatnonzero(table[:, 2] < 0.05)
    assert set(expected) == set(planted)
    order = expected[np.argsort(-np.abs(table[expected, 0]))]
    check = diag.check("jarque_bera")
    assert check.level == "a problem"
    assert check.rows == tuple(str(i + 1) for i in order)
    assert "Bonferroni outlier test" in check.verdict
    assert diag.check("cooks_distance").level == "fine"
    assert f"{abs(table[order[0], 0]):.3g}" in check.verdict  # the largest |t| as statsmodels has it


@pytest.mark.parametrize("n", [60_000, 5_000])
def test_the_expected_count_at_many_rows_matches_the_exact_sum(n):
    # Above 4,096 rows the Beta shares are interpolated between 2049 exact values (the bound's quantiles);
    # the sum must match the exact one (scipy's Beta survival function on every row) to far less than its
    # own standard deviation.
    from selectkit import diagnostics

    rng = np.random.default_rng(5)
    k = 5
    design = np.column_stack([np.ones(n), rng.normal(size=(n, 2)), rng.exponential(size=(n, 2))])
    q, _ = np.linalg.qr(design)
    h = np.sum(q ** 2, axis=1)
    mean, sd = _expected_above_cooks(h, n, k, 4 / n)
    bound = np.clip(4 / n * k * (1 - h) / (h * (n - k)), 0, 1)
    exact = stats.beta.sf(bound, 0.5, (n - k - 1) / 2)
    assert n > diagnostics._EXACT_SHARES
    assert abs(mean - exact.sum()) < 1e-2 * np.sqrt(np.sum(exact * (1 - exact)))  # measured: 0.003 SD
    assert sd == pytest.approx(np.sqrt(np.sum(exact * (1 - exact))), rel=1e-4)
