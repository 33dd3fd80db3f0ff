"""Reference checks on the executions data bundled with statsmodels (statsmodels.datasets.cpunish:
17 US states, 1997; response EXECUTIONS, six predictors).

Its raw design is badly scaled (INCOME² is about 1e9 beside 1/VC100k96 at about 1e-3: condition
number ~1e12) although its centred, unit-length columns are well conditioned (~5).  The whole
search must complete, and the refit of every shortlisted model must agree with statsmodels OLS
on the same columns.
"""

import numpy as np
import pytest
import statsmodels.api as sm

import selectkit

cpunish = pytest.importorskip("statsmodels.datasets.cpunish")


@pytest.fixture(scope="module")
def data():
    return cpunish.load_pandas().data  # source: statsmodels.datasets.cpunish


@pytest.fixture(scope="module")
def result(data):
    # Every form offered (no curvature gate): the top models then hold forms such as INCOME^2 beside
    # reciprocals, whose raw columns differ in scale by about 1e12, which is what this file is about.
    return selectkit.search(data, response="EXECUTIONS", seed=0, curvature_test=False)


def _columns(result, i):
    cands = result.candidates
    cols = [c for j in result.ranking.subsets[i] for c in cands.terms[j].columns]
    return cands.matrix[:, cols]


def test_the_search_completes_and_writes_its_outputs(result, tmp_path):
    paths = result.write(tmp_path / "out")
    assert all(p.exists() for p in paths.values())
    assert "Checks of the best model" in result.summary()
    assert all(fit.problem is None for fit in result.ranking.fits)
    assert all(d is not None for d in result.diagnoses())


def test_refit_coefficients_match_statsmodels_ols_on_the_same_columns(result, data):
    y = data["EXECUTIONS"].to_numpy(dtype=float)
    for i in range(min(3, len(result.ranking.subsets))):
        x = _columns(result, i)
        table = result.ranking.fits[i].coefficients
        # statsmodels OLS on the same raw columns (its default pinv fit, through the SVD)
        raw = sm.OLS(y, sm.add_constant(x, has_constant="add")).fit()
        np.testing.assert_allclose(table["estimate"].to_numpy(), raw.params, rtol=1e-6)
        np.testing.assert_allclose(table["std_error"].to_numpy(), raw.bse, rtol=1e-6)
        # statsmodels OLS on the standardised columns, transformed back: β = γ/s, β₀ = γ₀ − Σ γ x̄/s
        mean, scale = x.mean(axis=0), x.std(axis=0)
        standard = sm.OLS(y, sm.add_constant((x - mean) / scale)).fit()
        slopes = standard.params[1:] / scale
        intercept = standard.params[0] - mean @ slopes
        np.testing.assert_allclose(table["estimate"].to_numpy(), np.r_[intercept, slopes], rtol=1e-9)
        np.testing.assert_allclose(result.ranking.fits[i].sigma, np.sqrt(standard.scale), rtol=1e-9)


def test_condition_numbers_raw_and_standardised(result):
    # The rank and conditioning tests run on the standardised design: its condition number is
    # small even though the raw design's is about 1e12 (both computed here with numpy's SVD).
    x = _columns(result, 0)
    raw = np.column_stack([np.ones(len(x)), x])
    s_raw = np.linalg.svd(raw, compute_uv=False)
    z = (x - x.mean(axis=0)) / np.linalg.norm(x - x.mean(axis=0), axis=0)
    s_std = np.linalg.svd(z, compute_uv=False)
    assert s_raw[0] / s_raw[-1] > 1e9
    assert result.checks(0).condition_number == pytest.approx(s_std[0] / s_std[-1], rel=1e-9)
    assert result.checks(0).condition_number < 30
