"""Restricted cubic spline forms (Stone & Koo 1985): the basis, its knots, one block in the search.

External checks: the column span against patsy's natural cubic regression splines (``cr``) with the same
knots; BIC of a spline model against statsmodels' OLS on the same columns.
"""

import numpy as np
import pandas as pd
import patsy
import pytest
import statsmodels.api as sm

import selectkit
from selectkit import transforms as tf


def _span_gap(a, b):
    q, _ = np.linalg.qr(a)
    return float(np.abs(b - q @ (q.T @ b)).max() / np.abs(b).max())


@pytest.mark.parametrize("count", [3, 4, 5])
def test_the_basis_spans_patsy_natural_cubic_splines_with_the_same_knots(count):
    x = np.random.default_rng(count).uniform(0, 10, 300)
    knots = tf.spline_knots(x, count)
    ours = np.column_stack([np.ones_like(x), tf.restricted_cubic_spline(x, knots)])
    theirs = np.asarray(patsy.dmatrix("cr(x, knots=inner, lower_bound=lo, upper_bound=hi) - 1",
                                      {"x": x, "inner": np.array(knots[1:-1]), "lo": knots[0], "hi": knots[-1]}))
    assert ours.shape == theirs.shape == (300, count)
    assert _span_gap(ours, theirs) < 1e-10 and _span_gap(theirs, ours) < 1e-10


def test_knots_at_the_usual_quantiles_and_linear_beyond_the_outer_ones():
    x = np.linspace(0, 100, 1001)
    knots = tf.spline_knots(x, 4)
    np.testing.assert_allclose(knots, np.quantile(x, (0.05, 0.35, 0.65, 0.95)))
    beyond = np.linspace(knots[-1] + 1, knots[-1] + 50, 20)
    basis = tf.restricted_cubic_spline(beyond, knots)
    assert np.abs(np.diff(basis, n=2, axis=0)).max() < 1e-9  # straight lines past the last knot
    assert tf.spline_knots(np.repeat([1.0, 2.0], 50), 4) is None  # two values cannot hold four knots


def _s_shaped(n=400, seed=0):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"dose": rng.uniform(0, 10, n), "co2": rng.normal(size=n), "noise": rng.normal(size=n)})
    frame["yield_kg_m2"] = 2 + 3 * np.tanh(frame["dose"] - 5) + 0.5 * frame["co2"] + rng.normal(0, 0.3, n)
    return frame


def test_an_s_shaped_effect_is_found_as_a_spline_and_counted_by_its_columns():
    frame = _s_shaped()
    forms = ["identity", "log", "sqrt", "square", "boxcox", "spline4"]
    result = selectkit.search(frame, response="yield_kg_m2", forms=forms, parameter_count="coefficients-only",
                              seed=0)
    assert set(result.terms(0)) == {"spline(dose, 4 knots)", "co2"}  # the generating variables, noise left out
    design = result.candidates.transform(frame)
    subset = [j for j, t in enumerate(result.candidates.terms) if t.name in result.terms(0)]
    cols = [c for j in subset for c in result.candidates.terms[j].columns]
    assert len(cols) == 4  # 3 spline columns + co2
    ref = sm.OLS(frame["yield_kg_m2"].to_numpy(), sm.add_constant(design[:, cols])).fit()
    assert result.shortlist.loc[0, "bic"] == pytest.approx(ref.bic, rel=1e-9)  # k counts all 5 coefficients
    without = selectkit.search(frame, response="yield_kg_m2", forms=forms[:-1], seed=0)
    assert without.shortlist.loc[0, "bic"] > result.shortlist.loc[0, "bic"] + 10  # no single power fits an S


def test_a_spline_is_one_block_drawn_in_the_form_panels(tmp_path):
    from selectkit.report import plots

    frame = _s_shaped(n=300, seed=1)
    result = selectkit.search(frame, response="yield_kg_m2", forms=["identity", "spline4"], seed=0,
                              shortlist_size=1)
    assert "spline(dose, 4 knots)" in result.terms(0)
    components, skipped = plots.term_components(result.checks(0), result.candidates)
    spline = [c for c in components if c.term == "spline(dose, 4 knots)"][0]
    assert spline.on_source_scale and "spline(dose, 4 knots)" not in skipped
    page = result.write(tmp_path)["report_html"].read_text(encoding="utf-8")
    assert "spline(dose, 4 knots) [bend 1]" in page  # the block's columns in the coefficient table


def test_a_spline_model_saves_loads_and_predicts_new_rows(tmp_path):
    from selectkit.estimator import SubsetRegressor

    frame = _s_shaped(n=300, seed=2)
    result = selectkit.search(frame, response="yield_kg_m2", forms=["identity", "spline4"], seed=0)
    back = selectkit.load(result.save(tmp_path / "r.skres"))
    assert back.terms(0) == result.terms(0)
    X, y = frame.drop(columns="yield_kg_m2"), frame["yield_kg_m2"]
    model = SubsetRegressor(methods=("exhaustive",), forms=("identity", "spline4")).fit(X, y)
    fitted = sm.OLS(y.to_numpy(), sm.add_constant(model.transform(X))).fit()  # an independent refit
    np.testing.assert_allclose(model.predict(X.head(5)), fitted.fittedvalues[:5], rtol=1e-9)


def test_the_band_of_a_fitted_part_is_its_standard_error_from_statsmodels():
    from selectkit.report import plots

    frame = _s_shaped(n=300, seed=1)
    result = selectkit.search(frame, response="yield_kg_m2", forms=["identity", "spline4"], seed=0,
                              shortlist_size=1)
    components, _ = plots.term_components(result.checks(0), result.candidates)
    design = result.candidates.transform(frame)
    subset = [j for j, t in enumerate(result.candidates.terms) if t.name in result.terms(0)]
    cols = [c for j in subset for c in result.candidates.terms[j].columns]
    ref = sm.OLS(frame["yield_kg_m2"].to_numpy(), sm.add_constant(design[:, cols])).fit()
    cov = np.asarray(ref.cov_params())
    start = 1
    for j in subset:
        width = len(result.candidates.terms[j].columns)
        block = slice(start, start + width)
        own = design[:, cols][:, block.start - 1:block.stop - 1]
        expected = np.sqrt(np.einsum("ij,jk,ik->i", own, cov[block, block], own))
        part = [c for c in components if c.term == result.candidates.terms[j].name][0]
        np.testing.assert_allclose(part.band, expected, rtol=1e-8)
        start += width
