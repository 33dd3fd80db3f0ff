"""Tests of selectkit.diagnostics against reference implementations.

References: statsmodels (``linear_reset``, ``het_breuschpagan``, ``durbin_watson``,
``variance_inflation_factor``, ``OLSInfluence``), scipy.stats (``shapiro``,
``jarque_bera``), scikit-learn's ``StandardScaler`` for the standardised design,
and the stack-loss data of Brownlee (1965) as shipped by ``statsmodels.datasets``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from sklearn.preprocessing import StandardScaler
from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson

from selectkit.candidates import build_candidates
from selectkit.data import prepare
from selectkit.diagnostics import LEVELS, Check, _normality_level, diagnose
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
    # Its Cook's distance (0.46) is above the 20th percentile of F(2, 58) but below the median.
    assert stats.f.ppf(0.2, 2, 58) < check.statistic < stats.f.ppf(0.5, 2, 58)
    assert check.level == "worth a look" and check.passed is True
    assert check.rows[0] == "18" and "rows, counting from 1: 18 (" in check.verdict  # 0-based 17
    assert "never delete" in check.remedy and check.remedy in diag.remedies
    assert "cooks_distance" in diag.worth_a_look and "cooks_distance" not in diag.failed
    assert diag.n == n


def test_collinear_terms_are_flagged():
    rng = np.random.default_rng(4)
    n = 80
    a = rng.normal(size=n)
    X = np.column_stack([a, a + rng.normal(scale=0.05, size=n), rng.normal(size=n)])
    diag = diagnose(make_candidates(X, a + rng.normal(size=n)), (0, 1, 2))
    vif = diag.check("vif")
    assert vif.statistic > 100 and vif.level == "a problem" and vif.passed is False
    condition = diag.check("condition_number")
    assert 30 < condition.statistic <= 100 and condition.level == "worth a look" and condition.passed is True
    assert set(diag.term_vif.loc[diag.term_vif["flagged"], "term"]) == {"x0", "x1"}
    # Milder collinearity: VIF between 10 and 100 is worth a look, not a problem.
    X = np.column_stack([a, a + rng.normal(scale=0.2, size=n), rng.normal(size=n)])
    mild = diagnose(make_candidates(X, a + rng.normal(size=n)), (0, 1, 2)).check("vif")
    assert 10 < mild.statistic <= 100 and mild.level == "worth a look"


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
    with pytest.raises(SearchError, match="linear combination"):
        diagnose(dup, (0, 1))


# --------------------------------------------------------------------------- verdicts in proportion


def _linear_table(n, seed, errors=None):
    """A well-specified linear model: four normal predictors, y = 1 + Xβ + ε (normal unless given)."""
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 4))
    noise = rng.normal(size=n) if errors is None else errors(rng, n)
    return X, 1 + X @ np.array([1.0, 2.0, -1.0, 0.5]) + noise


@pytest.fixture(scope="module")
def clean_large():
    X, y = _linear_table(20_000, seed=11)
    return diagnose(make_candidates(X, y), (0, 1, 2, 3))


def test_levels_and_passed_agree_on_every_check(clean_large, stackloss):
    for diag in (clean_large, stackloss[2]):
        for check in diag.checks:
            assert check.level in LEVELS
            assert check.passed is {"fine": True, "worth a look": True, "a problem": False,
                                    "not assessed": None}[check.level]
        assert set(diag.failed) == {c.name for c in diag.checks if c.level == "a problem"}
        assert set(diag.table()["level"]) <= set(LEVELS)


def test_check_refuses_a_level_that_contradicts_passed():
    with pytest.raises(OptionError, match="needs passed=False"):
        Check("x", "influence", 1.0, None, True, "v", "r", level="a problem")
    with pytest.raises(OptionError, match="level must be one of"):
        Check("x", "influence", 1.0, None, True, "v", "r", level="FAIL")
    assert Check("x", "influence", 1.0, None, False, "v", "r").level == "a problem"  # derived from passed


def test_clean_data_at_20000_rows_gives_no_problem_for_influence_or_normality(clean_large):
    diag = clean_large
    for name in ("leverage", "cooks_distance", "jarque_bera", "shapiro_wilk"):
        assert diag.check(name).level != "a problem", diag.check(name).verdict
    cooks = diag.check("cooks_distance")
    # About one row in twenty is above 4/n by design (P(χ²₁ > 4) ≈ 0.046): that alone is not a finding.
    above = int(np.sum(diag.cooks_distance > 4 / diag.n))
    assert 700 < above < 1300
    assert cooks.level == "fine" and cooks.rows == () and f"{above} rows above the 4/n" in cooks.verdict
    assert diag.check("leverage").level == "fine"
    assert diag.check("shapiro_wilk").level == "not assessed"


def test_planted_gross_high_leverage_outlier_is_a_problem():
    X, y = _linear_table(500, seed=12)
    X[123, 0], y[123] = 25.0, -40.0  # far out in x0 (25 sd) and far off the plane
    diag = diagnose(make_candidates(X, y), (0, 1, 2, 3))
    cooks, leverage = diag.check("cooks_distance"), diag.check("leverage")
    assert cooks.level == "a problem" and cooks.passed is False
    assert leverage.level == "a problem" and leverage.statistic > 0.5
    assert cooks.rows[0] == "124" and leverage.rows[0] == "124"  # 1-based row of the planted 0-based 123
    assert {"cooks_distance", "leverage"} <= set(diag.failed)
    # The same row on the 20,000-row table, with its 4 % of screened rows, still stands out.
    X, y = _linear_table(20_000, seed=11)
    X[9_000, 1], y[9_000] = 60.0, -300.0
    big = diagnose(make_candidates(X, y), (0, 1, 2, 3)).check("cooks_distance")
    assert big.level == "a problem" and big.rows[0] == "9001"


def test_heavy_tailed_errors_are_a_problem_for_normality():
    X, y = _linear_table(400, seed=13, errors=lambda rng, n: rng.standard_t(2, size=n))
    diag = diagnose(make_candidates(X, y), (0, 1, 2, 3))
    for name in ("shapiro_wilk", "jarque_bera"):
        check = diag.check(name)
        assert check.level == "a problem" and check.passed is False
        assert "excess kurtosis" in check.verdict and "a problem from" in check.verdict


def test_slight_departure_at_large_n_is_fine_and_the_verdict_says_why():
    # t with 20 df: excess kurtosis 6/16 = 0.375, well below 1; Jarque-Bera rejects at 20,000 rows.
    X, y = _linear_table(20_000, seed=14, errors=lambda rng, n: rng.standard_t(20, size=n))
    check = diagnose(make_candidates(X, y), (0, 1, 2, 3)).check("jarque_bera")
    assert check.pvalue < 0.05
    assert check.level == "fine" and check.passed is True and check.remedy is None
    assert "size is small" in check.verdict and "20000 rows even slight departures" in check.verdict


def test_normality_rule_table():
    # The rule of _normality_level, case by case: p-value first, then the size of the departure.
    big_n, few = 5000, 40
    assert _normality_level(0.20, 0.05, big_n, 3.0, 9.0)[0] == "fine"  # not rejected
    assert _normality_level(1e-9, 0.05, big_n, 1.2, 0.0)[0] == "a problem"  # |skewness| > 1
    assert _normality_level(1e-9, 0.05, big_n, 0.0, 2.5)[0] == "a problem"  # excess kurtosis > 2
    assert _normality_level(1e-9, 0.05, big_n, 0.7, 0.0)[0] == "worth a look"
    assert _normality_level(1e-9, 0.05, big_n, 0.0, -1.2)[0] == "worth a look"  # light tails: a look at most
    assert _normality_level(1e-9, 0.05, big_n, 0.1, 0.3)[0] == "fine"  # detected but trivial
    assert _normality_level(0.01, 0.05, few, 0.1, 0.3)[0] == "worth a look"  # few rows: the p-value counts
    assert _normality_level(1e-4, 0.05, few, 0.1, 0.3)[0] == "a problem"


def test_skewed_errors_at_small_n_are_a_problem():
    rng = np.random.default_rng(15)
    n = 30
    x = rng.normal(size=n)
    y = x + rng.exponential(size=n)  # exponential errors: skewness 2
    check = diagnose(make_candidates(x[:, None], y), (0,)).check("shapiro_wilk")
    assert check.pvalue < 0.05 and check.level == "a problem"


def test_slight_bend_and_slight_change_of_spread_at_large_n_are_worth_a_look():
    rng = np.random.default_rng(5)
    n = 20_000
    x = rng.uniform(0, 1, n)
    reset = diagnose(make_candidates(x[:, None], x + 0.03 * x ** 2 + rng.normal(scale=0.1, size=n)),
                     (0,)).check("reset")
    assert reset.pvalue < 0.05 and reset.level == "worth a look" and "below Cohen's small effect" in reset.verdict
    spread = diagnose(make_candidates(x[:, None], x + rng.normal(size=n) * (1 + 0.15 * x)), (0,)).check("breusch_pagan")
    assert spread.pvalue < 0.05 and spread.level == "worth a look"


def test_more_rows_above_4_over_n_than_chance_is_worth_a_look():
    # The spread grows with |x|: rows far out in x fit worse, and more of them pass 4/n than normal errors would put there.
    rng = np.random.default_rng(2)
    n = 5000
    x = rng.normal(size=n)
    y = 1 + x + rng.normal(size=n) * (0.3 + np.abs(x))
    diag = diagnose(make_candidates(x[:, None], y), (0,))
    check = diag.check("cooks_distance")
    assert check.statistic < stats.f.ppf(0.2, 2, n - 2)  # no single row is influential
    assert check.level == "worth a look" and "more than chance explains" in check.verdict


def test_at_most_ten_rows_are_listed_with_the_count_of_the_rest():
    rng = np.random.default_rng(2)
    n = 5000
    x = rng.normal(size=n)
    diag = diagnose(make_candidates(x[:, None], 1 + x + rng.normal(size=n) * (0.3 + np.abs(x))), (0,))
    check = diag.check("cooks_distance")
    above = np.flatnonzero(diag.cooks_distance > 4 / n)
    assert len(check.rows) == 10 and check.rows_not_listed == above.size - 10
    assert f"and {above.size - 10} more." in check.verdict
    largest = above[np.argsort(-diag.cooks_distance[above], kind="stable")][:10]
    assert check.rows == tuple(str(i + 1) for i in largest)  # largest first, named from 1
    assert len(diag.flagged_rows) >= above.size  # the table keeps every screened row


def test_rows_are_named_by_the_identifier_column_when_intake_found_one():
    rng = np.random.default_rng(16)
    n = 60
    frame = pd.DataFrame({"plot_id": [f"bay-{i:03d}" for i in range(n)],
                          "light": rng.normal(10, 2, n), "co2": rng.normal(400, 30, n)})
    frame["yield_kg"] = 2 + 0.5 * frame["light"] + 0.01 * frame["co2"] + rng.normal(0, 0.3, n)
    frame.loc[41, "light"] = 40.0  # far out in light, and off the plane
    frame.loc[41, "yield_kg"] = 0.0
    cands = build_candidates(prepare(frame, response="yield_kg"), forms=("identity",))
    subset = tuple(i for i, t in enumerate(cands.terms) if t.name in ("light", "co2"))
    diag = diagnose(cands, subset)
    assert diag.rows_named == "by plot_id"
    check = diag.check("cooks_distance")
    assert check.rows[0] == "bay-041" and "by plot_id: bay-041 (" in check.verdict
    assert diag.flagged_rows["name"].iloc[0] == "bay-041"


def test_rows_are_named_by_data_row_of_the_file_counting_from_1(tmp_path):
    rng = np.random.default_rng(17)
    n = 40
    light = rng.normal(10, 2, n)
    yield_kg = 2 + 0.5 * light + rng.normal(0, 0.3, n)
    light[30], yield_kg[30] = 40.0, 0.0  # 0-based row 30 of the data: data row 31 of the file
    lines = ["light,yield_kg"] + [f"{a:.6f},{b:.6f}" for a, b in zip(light, yield_kg)]
    lines[1 + 5] = ",1.0"  # data row 6 has no light: dropped, so positions after it shift by one
    path = tmp_path / "bays.csv"
    path.write_text("\n".join(lines) + "\n")
    cands = build_candidates(prepare(path, response="yield_kg", missing="drop"), forms=("identity",))
    diag = diagnose(cands, (next(i for i, t in enumerate(cands.terms) if t.name == "light"),))
    assert diag.rows_named == "data rows of the file, counting from 1"
    check = diag.check("leverage")
    assert check.rows[0] == "31" and "data rows of the file, counting from 1: 31 (" in check.verdict


def test_reports_show_the_level_words(stackloss):
    from selectkit.report import html, text

    _, _, diag = stackloss
    marks = {text._mark(c) for c in diag.checks}
    assert {m.strip() for m in marks} <= {"[fine]", "[worth a look]", "[a problem]", "[not assessed]"}
    assert len({len(m) for m in marks}) == 1  # padded so the verdicts line up
    page = html._checks_table(diag)
    assert '<span class="look">worth a look</span>' in page and "passed" not in page and "failed" not in page


def test_diagnosis_repr_is_a_few_lines_and_table_holds_the_detail(stackloss):
    _, _, diag = stackloss
    text = repr(diag)
    assert len(text.splitlines()) <= 4 and "array(" not in text and len(text) < 600
    assert "ACIDCONC" in text and "21 rows" in text and ".table()" in text
    table = diag.table()
    assert isinstance(table, pd.DataFrame) and list(table["check"]) == [c.name for c in diag.checks]
    for check in diag.checks:  # every check is named in the summary by its level, or counted as fine
        assert check.name in text or check.level == "fine"
    assert f"fine: {sum(c.level == 'fine' for c in diag.checks)}" in text


@pytest.mark.parametrize("weighted", [False, True])
def test_reset_and_breusch_pagan_from_the_basis_equal_statsmodels_on_a_larger_design(weighted):
    # RESET and Breusch-Pagan are computed by projecting on the fitted design's orthonormal basis (no new QR
    # of the augmented design); statsmodels' linear_reset and het_breuschpagan refit from scratch.
    rng = np.random.default_rng(8)
    n = 3000
    X = np.column_stack([rng.uniform(1, 10, n), rng.normal(size=n), rng.exponential(size=n)])
    y = 1 + np.log(X[:, 0]) + 0.5 * X[:, 1] + rng.normal(0, 0.5 + 0.1 * X[:, 0], n)
    w = rng.uniform(0.5, 2.0, n) if weighted else None
    cands = make_candidates(X, y, weights=w) if weighted else make_candidates(X, y)
    diag = diagnose(cands, (0, 1, 2))
    root = np.sqrt(w) if weighted else np.ones(n)
    exog = sm.add_constant(X) * root[:, None]
    ref = sm.OLS(y * root, exog).fit()
    if weighted:  # the weighted fit's RESET: WLS with ŷ², ŷ³ of the response's own scale added, F test
        plain = sm.WLS(y, sm.add_constant(X), weights=w).fit()
        z = (plain.fittedvalues - plain.fittedvalues.mean()) / plain.fittedvalues.std()
        wider = sm.WLS(y, np.column_stack([sm.add_constant(X), z ** 2, z ** 3]), weights=w).fit()
        f_value = float(wider.compare_f_test(plain)[0])
    else:
        f_value = float(np.squeeze(linear_reset(ref, power=3, test_type="fitted", use_f=True).fvalue))
    assert diag.check("reset").statistic == pytest.approx(f_value, rel=1e-7)
    if weighted:  # het_breuschpagan wants a constant column; the whitened design has √w instead
        e2 = np.asarray(ref.resid) ** 2
        lm = n * (1.0 - sm.OLS(e2, exog).fit().ssr / np.sum((e2 - e2.mean()) ** 2))
    else:
        lm, _, _, _ = het_breuschpagan(ref.resid, exog)
    assert diag.check("breusch_pagan").statistic == pytest.approx(lm, rel=1e-7)


def test_a_bend_names_the_term_along_which_the_mean_bends_and_the_forms_not_tried():
    # Invented bays: the yield follows log(light) and co2 straight; with the raw forms only, RESET fails and
    # the pointer must name light (not co2), where the curvature probe's t is largest.
    import pandas as pd

    import selectkit

    rng = np.random.default_rng(11)
    n = 400
    frame = pd.DataFrame({"light": rng.uniform(1, 60, n), "co2": rng.uniform(0, 10, n)})
    frame["yield_kg_m2"] = 2 + 3 * np.log(frame["light"]) + 0.3 * frame["co2"] + rng.normal(0, 0.3, n)
    result = selectkit.search(frame, response="yield_kg_m2", forms=("identity",), shortlist_size=1, seed=0)
    assert set(result.terms(0)) == {"light", "co2"}
    reset = result.checks(0).check("reset")
    assert reset.level == "a problem"
    assert "The bend is largest along light" in reset.remedy and "Forms of light in the search: light." in reset.remedy
    assert "Not offered in this run: log" in reset.remedy
    # with the log form offered the search takes it and the mean no longer bends: no pointer needed
    fixed = selectkit.search(frame, response="yield_kg_m2", forms=("identity", "log"), shortlist_size=1, seed=0)
    assert "log(light)" in fixed.terms(0) and fixed.checks(0).check("reset").level == "fine"


@pytest.mark.parametrize("shift", [0.0, 12.0])
def test_the_outlier_rows_are_those_of_the_statsmodels_bonferroni_test(shift):
    # The mean-shift outlier test compares |tᵢ| with one quantile of t(n − k − 1) instead of n tail areas:
    # the rows named must be exactly those whose Bonferroni p-value of statsmodels' outlier_test is below
    # alpha (statsmodels.regression.linear_model.OLSResults.outlier_test, method="bonf").
    from selectkit.diagnostics import _influence, _outlier_rows

    rng = np.random.default_rng(41)
    n = 300
    X = sm.add_constant(rng.normal(size=(n, 3)))
    y = X @ [1.0, 0.5, -0.3, 0.2] + rng.standard_t(3, n)
    y[[7, 150]] += shift  # two planted far-off responses (none when shift is 0)
    fit = sm.OLS(y, X).fit()
    hat = OLSInfluence(fit).hat_matrix_diag
    studentized, _ = _influence(fit.resid, hat, n, 4, float(fit.ssr))
    for alpha in (0.05, 0.5):
        names, _, rest = _outlier_rows(studentized, n, 4, alpha, lambda i: str(i), "rows")
        expected = np.flatnonzero(np.asarray(fit.outlier_test(method="bonf"))[:, 2] < alpha)  # its columns: t, p, bonf(p)
        assert sorted(int(v) for v in names) == sorted(expected.tolist()) and rest == 0
    if shift:
        assert {"7", "150"} <= set(_outlier_rows(studentized, n, 4, 0.05, lambda i: str(i), "rows")[0])
