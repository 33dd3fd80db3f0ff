"""Tests of selectkit.rank: pooling, scoring, ordering, refits and bootstrap stability.

Reference computations are independent of selectkit: numpy ``lstsq`` over every
subset (brute force), statsmodels ``OLS(...).fit().aic/.bic/.rsquared_adj``, and the
NIST StRD certified values of the Longley data (shipped as
``statsmodels.datasets.longley``).
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from selectkit.candidates import ResponseTransform
from selectkit.errors import OptionError, SearchError
from selectkit.moments import compute_moments
from selectkit.rank import choose_criterion, fit_model, rank, refit, stability
from selectkit.searches import Found
from tests.factories import make_candidates


# --------------------------------------------------------------------------- helpers


def _rss(X, y, cols, weights=None):
    design = np.column_stack([np.ones(len(y))] + [X[:, c] for c in cols])
    if weights is not None:
        root = np.sqrt(weights)
        design, y = design * root[:, None], y * root
    beta = np.linalg.lstsq(design, y, rcond=None)[0]
    resid = y - design @ beta
    return float(resid @ resid)


def brute_force(candidates, method="brute", max_terms=None):
    """Every subset of the candidate terms, fitted with numpy lstsq (the reference search)."""
    m = len(candidates.terms)
    top = m if max_terms is None else max_terms
    subsets, rss, k = [], [], []
    for size in range(0, top + 1):
        for subset in itertools.combinations(range(m), size):
            families = [candidates.terms[i].family for i in subset]
            if len(set(families)) < len(families):
                continue
            cols = [c for i in subset for c in candidates.terms[i].columns]
            subsets.append(subset)
            rss.append(_rss(candidates.matrix, candidates.y, cols, candidates.weights))
            k.append(1 + len(cols))
    return Found(method=method, subsets=tuple(subsets), rss=np.array(rss), k=np.array(k),
                 n=len(candidates.y), evaluated=len(subsets), exact=True)


def brute_force_runner(candidates):
    """Picklable runner for the stability tests."""
    return brute_force(candidates)


@pytest.fixture(scope="module")
def simple():
    rng = np.random.default_rng(11)
    n = 60
    X = rng.normal(size=(n, 4))
    y = 1.0 + 2.0 * X[:, 0] - 1.0 * X[:, 2] + rng.normal(scale=1.0, size=n)
    cands = make_candidates(X, y, names=["light", "co2", "density", "noise"])
    return cands, compute_moments(cands.matrix, cands.y)


# --------------------------------------------------------------------------- scoring


def test_weights_sum_to_one_and_best_delta_is_zero(simple):
    cands, moments = simple
    short = rank([brute_force(cands)], cands, moments, scores=False)
    scored = short.scored
    assert scored["model_weight"].sum() == pytest.approx(1.0)
    assert scored["delta_from_best"].iloc[0] == 0.0
    assert (scored["delta_from_best"] >= 0).all()
    assert short.criterion == "bic"
    # The true model (light + density) wins with these 60 rows.
    assert short.terms(0) == ("light", "density")
    assert len(short.table) == 10 and len(short.scored) == 16


def test_ranking_by_aic_is_the_same_under_both_conventions(simple):
    cands, moments = simple
    found = brute_force(cands)
    a = rank([found], cands, moments, criterion="aic", convention="sigma-counted", scores=False)
    b = rank([found], cands, moments, criterion="aic", convention="coefficients-only", scores=False)
    assert a.all_subsets == b.all_subsets
    np.testing.assert_allclose(a.scored["model_weight"], b.scored["model_weight"])
    # The two conventions differ by exactly 2 per model (σ² counted or not).
    np.testing.assert_allclose(a.scored["aic"] - b.scored["aic"], 2.0)


def test_criteria_equal_statsmodels_on_longley():
    # Longley (1967) data as shipped by statsmodels; NIST StRD certified values
    # (quoted from memory of the NIST Longley page): R² = 0.995479004577296,
    # residual standard deviation = 304.854073561965.
    data = sm.datasets.longley.load_pandas()
    X = data.exog.to_numpy(dtype=float)
    y = data.endog.to_numpy(dtype=float)
    names = [str(c) for c in data.exog.columns]
    cands = make_candidates(X, y, names=names)
    moments = compute_moments(cands.matrix, cands.y)
    subsets = [(), (0,), (1, 3), (0, 2, 4), (0, 1, 2, 3, 4, 5)]
    found = Found(method="listed", subsets=subsets,
                  rss=[_rss(X, y, s) for s in subsets], k=[1 + len(s) for s in subsets], n=len(y))
    short = rank([found], cands, moments, criterion="aic", convention="coefficients-only",
                 size=len(subsets), scores=False)
    table = short.scored.set_index("term_indices")
    for s in subsets:
        design = sm.add_constant(X[:, list(s)], has_constant="add") if s else np.ones((len(y), 1))
        ref = sm.OLS(y, design).fit()
        row = table.loc[" ".join(map(str, s))]
        assert row["aic"] == pytest.approx(ref.aic, rel=1e-10)
        assert row["bic"] == pytest.approx(ref.bic, rel=1e-10)
        assert row["log_likelihood"] == pytest.approx(ref.llf, rel=1e-10)
        assert row["r2"] == pytest.approx(ref.rsquared, abs=1e-9)
        if s:
            assert row["adj_r2"] == pytest.approx(ref.rsquared_adj, abs=1e-9)
    full = table.loc["0 1 2 3 4 5"]
    assert full["r2"] == pytest.approx(0.995479004577296, abs=1e-9)
    # Mallows' Cp equals k for the model that supplied σ̂² (Mallows 1973).
    assert full["cp"] == pytest.approx(7.0)
    assert "k = 7" in short.cp_variance_source
    fit = fit_model(cands, (0, 1, 2, 3, 4, 5))
    assert fit.sigma == pytest.approx(304.854073561965, rel=1e-9)


def test_aicc_and_cp_match_independent_formulas(simple):
    cands, moments = simple
    found = brute_force(cands)
    short = rank([found], cands, moments, criterion="aicc", scores=False)
    n = len(cands.y)
    rss_full = _rss(cands.matrix, cands.y, [0, 1, 2, 3])
    s2 = rss_full / (n - 5)
    for _, row in short.scored.iterrows():
        k = row["k"]
        p = k + 1
        loglik = -n / 2 * (np.log(2 * np.pi * row["rss"] / n) + 1)
        assert row["aicc"] == pytest.approx(-2 * loglik + 2 * p + 2 * p * (p + 1) / (n - p - 1))
        assert row["cp"] == pytest.approx(row["rss"] / s2 - n + 2 * k)


def test_log_jacobian_puts_log_response_on_the_original_scale():
    # Box & Cox (1964): the likelihood of log(y) models on the y scale adds Σ log|dz/dy| = −Σ log y.
    rng = np.random.default_rng(5)
    n = 80
    X = rng.uniform(1, 10, size=(n, 2))
    y = np.exp(0.5 + 0.2 * X[:, 0] + rng.normal(scale=0.1, size=n))
    z = np.log(y)
    base = make_candidates(X, z)
    transform = ResponseTransform(name="log(y)", transform="log", params=(), log_jacobian=float(-np.log(y).sum()))
    import dataclasses

    cands = dataclasses.replace(base, response_transform=transform)
    moments = compute_moments(cands.matrix, cands.y)
    short = rank([brute_force(cands)], cands, moments, criterion="aic", convention="coefficients-only", scores=False)
    row = short.scored.set_index("term_indices").loc["0"]
    ref = sm.OLS(z, sm.add_constant(X[:, [0]])).fit()
    assert row["aic"] == pytest.approx(ref.aic + 2 * np.log(y).sum(), rel=1e-10)
    assert short.fits[0].equation.startswith("log(y) = ")


def test_duplicates_are_merged_and_every_search_is_listed(simple):
    cands, moments = simple
    full = brute_force(cands, method="exhaustive")
    picked = [(0, 2), (0,), (0, 1, 2)]
    partial = Found(method="stepwise", subsets=picked,
                    rss=[_rss(cands.matrix, cands.y, s) for s in picked], k=[3, 2, 4], n=len(cands.y))
    short = rank([full, partial], cands, moments, scores=False, size=20)
    assert len(short.scored) == 16
    by_terms = short.scored.set_index("terms")["found_by"]
    assert by_terms["light + density"] == "exhaustive, stepwise"
    assert by_terms["co2"] == "exhaustive"


def test_ties_break_by_number_of_terms_then_names():
    rng = np.random.default_rng(2)
    n = 40
    x = rng.normal(size=n)
    X = np.column_stack([x, x, rng.normal(size=n)])  # "zeta" and "alpha" are the same column
    y = 2 * x + rng.normal(size=n)
    cands = make_candidates(X, y, names=["zeta", "alpha", "other"])
    moments = compute_moments(cands.matrix, cands.y)
    subsets = [(0,), (1,)]
    found = Found(method="listed", subsets=subsets, rss=[_rss(X, y, s) for s in subsets], k=[2, 2], n=n)
    short = rank([found], cands, moments, scores=False)
    assert short.terms(0) == ("alpha",)
    assert short.scored["delta_from_best"].iloc[1] == pytest.approx(0.0, abs=1e-9)


def test_size_and_max_delta_cut_the_shortlist(simple):
    cands, moments = simple
    short = rank([brute_force(cands)], cands, moments, size=5, max_delta=2.0, scores=False)
    assert len(short.table) <= 5
    assert (short.table["delta_from_best"] <= 2.0).all()
    assert short.table["comparable_support"].all()
    assert len(short.fits) == len(short.table) == len(short.subsets)


def test_variable_support_is_summed_weight(simple):
    cands, moments = simple
    short = rank([brute_force(cands)], cands, moments, criterion="aic", scores=False)
    weights = short.scored["model_weight"].to_numpy()
    support = short.variable_support.set_index("variable")["support"]
    for j, name in enumerate(["light", "co2", "density", "noise"]):
        expected = sum(w for s, w in zip(short.all_subsets, weights) if j in s)
        assert support[name] == pytest.approx(expected)
    assert support["light"] > 0.99


def test_default_criterion_follows_the_aim():
    assert choose_criterion(None, "explain", n=100, k_max=5)[0] == "bic"
    assert choose_criterion(None, "predict", n=100, k_max=5)[0] == "aicc"  # 100/6 < 40
    assert choose_criterion(None, "predict", n=1000, k_max=5)[0] == "aic"  # 1000/6 ≥ 40
    assert choose_criterion("Cp", "explain", n=10, k_max=2)[0] == "cp"
    with pytest.raises(OptionError, match="explain, predict"):
        choose_criterion(None, "describe", n=10, k_max=2)
    with pytest.raises(OptionError, match="aicc"):
        choose_criterion("aik", "explain", n=10, k_max=2)


def test_bad_options_and_mismatched_results_raise(simple):
    cands, moments = simple
    found = brute_force(cands)
    with pytest.raises(OptionError, match="size"):
        rank([found], cands, moments, size=0, scores=False)
    with pytest.raises(SearchError, match="no search results"):
        rank([], cands, moments, scores=False)
    other = Found(method="other", subsets=[(0,)], rss=[1.0], k=[2], n=10)
    with pytest.raises(SearchError, match="different rows"):
        rank([found, other], cands, moments, scores=False)
    with pytest.raises(OptionError, match="no value"):
        rank([found], cands, moments, criterion="press", scores=False)


def test_press_scores_given_by_the_caller_order_the_models(simple):
    cands, moments = simple
    found = brute_force(cands, max_terms=2)
    press = [_loo_press(cands, s) for s in found.subsets]
    frame = pd.DataFrame({"subset": list(found.subsets), "press": press})
    short = rank([found], cands, moments, criterion="press", scores=frame)
    assert short.scored["press"].is_monotonic_increasing
    assert short.subsets[0] == found.subsets[int(np.argmin(press))]
    assert short.weight_criterion == "aicc"


def _loo_press(cands, subset):
    """Leave-one-out sum of squared prediction errors by refitting n times (Allen 1974)."""
    n = len(cands.y)
    design = np.column_stack([np.ones(n)] + [cands.matrix[:, c] for c in subset])
    errors = []
    for i in range(n):
        keep = np.arange(n) != i
        beta = np.linalg.lstsq(design[keep], cands.y[keep], rcond=None)[0]
        errors.append(cands.y[i] - design[i] @ beta)
    return float(np.sum(np.square(errors)))


def test_scores_computed_by_the_ranker_sit_on_the_right_rows(simple):
    cands, moments = simple
    short = rank([brute_force(cands, max_terms=2)], cands, moments)
    try:
        from selectkit.searches.crossval import score_subsets  # noqa: F401
    except ImportError:
        assert short.scored["press"].isna().all()
        assert any("score_subsets" in note for note in short.notes)
        return
    for subset, press in zip(short.all_subsets, short.scored["press"]):
        assert press == pytest.approx(_loo_press(cands, subset), rel=1e-8)
    assert short.scored["cv_mse"].notna().all()


# --------------------------------------------------------------------------- refits


def test_refit_matches_lstsq_and_writes_the_equation():
    rng = np.random.default_rng(3)
    n = 50
    light = rng.uniform(5, 40, size=n)
    density = rng.uniform(2, 4, size=n)
    ruby = (rng.uniform(size=n) < 0.5).astype(float)
    y = 1.2 + 0.8 * np.log(light) - 2.1 / density + 0.3 * ruby + rng.normal(scale=0.05, size=n)
    X = np.column_stack([np.log(light), 1 / density, ruby])
    cands = make_candidates(X, y, names=["log(light)", "1/plant_density", "cultivar[Ruby]"],
                            families=["light", "plant_density", "cultivar"], blocks={"cultivar": [2]})
    fit = fit_model(cands, (0, 1, 2))
    beta = np.linalg.lstsq(np.column_stack([np.ones(n), X]), y, rcond=None)[0]
    np.testing.assert_allclose(fit.coefficients["estimate"], beta, rtol=1e-8)
    assert list(fit.coefficients["coefficient"]) == [
        "intercept", "log(light)", "1/plant_density", "[cultivar = Ruby]"]
    assert fit.equation.startswith("y = 1.")
    assert "+ 0.8" in fit.equation and "·log(light)" in fit.equation
    assert "− 2.1" in fit.equation and "·1/plant_density" in fit.equation
    assert "·[cultivar = Ruby]" in fit.equation
    results = refit(cands, (0, 1, 2))
    ref = sm.OLS(y, sm.add_constant(X)).fit()
    np.testing.assert_allclose(fit.coefficients["std_error"], ref.bse, rtol=1e-8)
    np.testing.assert_allclose(fit.coefficients[["ci_low", "ci_high"]], ref.conf_int(), rtol=1e-8)
    np.testing.assert_allclose(results.params, ref.params, rtol=1e-8)


def test_weighted_refit_is_wls():
    rng = np.random.default_rng(4)
    n = 40
    X = rng.normal(size=(n, 2))
    w = rng.uniform(0.5, 2.0, size=n)
    y = 1 + X[:, 0] + rng.normal(size=n) / np.sqrt(w)
    cands = make_candidates(X, y, weights=w)
    ref = sm.WLS(y, sm.add_constant(X[:, [0]]), weights=w).fit()
    np.testing.assert_allclose(refit(cands, (0,)).params, ref.params, rtol=1e-10)
    moments = compute_moments(cands.matrix, cands.y, w)
    short = rank([brute_force(cands)], cands, moments, criterion="adj_r2", scores=False)
    row = short.scored.set_index("term_indices").loc["0"]
    assert row["adj_r2"] == pytest.approx(ref.rsquared_adj, abs=1e-10)


# --------------------------------------------------------------------------- stability


@pytest.fixture(scope="module")
def strong():
    rng = np.random.default_rng(21)
    n = 50
    X = rng.normal(size=(n, 4))
    y = 3.0 * X[:, 1] + rng.normal(size=n)
    return make_candidates(X, y, names=["a", "strong", "b", "c"])


def test_stability_is_the_same_for_one_and_two_workers(strong):
    one = stability(strong, brute_force_runner, n_boot=12, seed=7, n_jobs=1)
    two = stability(strong, brute_force_runner, n_boot=12, seed=7, n_jobs=2)
    assert one.replicate_models == two.replicate_models
    pd.testing.assert_frame_equal(one.variable_share, two.variable_share)
    again = stability(strong, brute_force_runner, n_boot=12, seed=8, n_jobs=1)
    assert again.replicate_models != one.replicate_models  # the seed matters


def test_strong_effect_is_selected_in_every_replicate(strong):
    result = stability(strong, brute_force_runner, n_boot=20, seed=0)
    share = result.variable_share.set_index("variable")["share_selected"]
    assert share["strong"] == 1.0
    assert result.full_data_best[:1] == ("strong",) or "strong" in result.full_data_best
    assert 0.0 <= result.share_same_as_full <= 1.0
    assert result.failed == 0
    # Cross-check the share with the recorded replicate models.
    assert share["a"] == pytest.approx(np.mean([0 in s for s in result.replicate_models]))


def test_stability_ranks_replicates_by_aicc_when_asked_for_a_cross_validated_criterion(strong):
    result = stability(strong, brute_force_runner, n_boot=3, criterion="cv_mse")
    assert result.criterion == "aicc"
    assert any("AICc" in note for note in result.notes)
    with pytest.raises(OptionError, match="bic"):
        stability(strong, brute_force_runner, n_boot=3, criterion="bicc")


# --------------------------------------------------------------------------- determinism


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=10, deadline=None)
@given(order_seed=st.integers(0, 10_000), split=st.integers(1, 15))
def test_ranking_does_not_depend_on_the_order_or_split_of_search_results(simple, order_seed, split):
    cands, moments = simple
    full = brute_force(cands)
    reference = rank([full], cands, moments, criterion="aicc", scores=False)
    order = np.random.default_rng(order_seed).permutation(len(full))
    first, second = order[:split], order[split:]

    def part(name, rows):
        return Found(method=name, subsets=[full.subsets[i] for i in rows], rss=full.rss[rows], k=full.k[rows],
                     n=full.n)

    founds = [part("a", first)] + ([part("b", second)] if len(second) else [])
    shuffled = rank(founds, cands, moments, criterion="aicc", scores=False)
    assert shuffled.all_subsets == reference.all_subsets
    np.testing.assert_allclose(shuffled.scored["model_weight"], reference.scored["model_weight"])
    pd.testing.assert_frame_equal(shuffled.variable_support, reference.variable_support)


def test_predict_aim_and_one_standard_error_rule(simple):
    cands, moments = simple
    found = brute_force(cands, max_terms=2)
    short = rank([found], cands, moments, aim="predict", scores=False)
    assert short.criterion == "aicc" and "n/K = 60/" in short.criterion_reason
    rng = np.random.default_rng(0)
    cv = rng.uniform(1.0, 2.0, size=len(found))
    se = np.full(len(found), 0.2)
    scores = pd.DataFrame({"subset": list(found.subsets), "cv_mse": cv, "cv_se": se})
    by_cv = rank([found], cands, moments, criterion="cv_mse", scores=scores)
    expected = cv - cv.min() <= 0.2  # within one standard error of the best (Breiman et al. 1984)
    got = by_cv.scored.set_index("term_indices")["comparable_support"]
    for s, flag in zip(found.subsets, expected):
        assert bool(got[" ".join(map(str, s))]) == bool(flag)


def test_intercept_only_fit_and_negative_intercept():
    rng = np.random.default_rng(8)
    y = -5.0 + rng.normal(scale=0.1, size=20)
    cands = make_candidates(rng.normal(size=(20, 1)), y)
    fit = fit_model(cands, ())
    assert fit.terms == () and fit.k == 1
    assert fit.equation == f"y = −{abs(y.mean()):.4g}"
    assert fit.coefficients["estimate"].iloc[0] == pytest.approx(y.mean())


def flaky_runner(candidates, threshold):
    """Fails on resamples whose mean response is above the full data's, like a search meeting singular rows."""
    if candidates.y.mean() > threshold:
        raise SearchError("every model is rank-deficient on these rows")
    return brute_force(candidates)


def test_failed_replicates_are_counted_and_reported(strong):
    import functools

    runner = functools.partial(flaky_runner, threshold=float(strong.y.mean()))
    result = stability(strong, runner, n_boot=10, seed=3)
    assert 0 < result.failed < 10
    assert sum(m is None for m in result.replicate_models) == result.failed
    assert "rank-deficient" in result.notes[0]
    ok = [m for m in result.replicate_models if m is not None]
    share = result.variable_share.set_index("variable")["share_selected"]
    assert share["strong"] == pytest.approx(np.mean([1 in m for m in ok]))


def test_mallows_cp_of_hald_cement_data_matches_published_values():
    # Hald cement data (Woods, Steinour & Starke 1932) as typed in tests/reference/test_hald.py.
    # Mallows' Cp of every subset, σ̂² from the full model, as tabulated in Draper & Smith,
    # Applied Regression Analysis, Ch. 15 (values quoted from memory, 2 decimals).
    from tests.reference.test_hald import X1, X2, X3, X4, Y

    X = np.column_stack([X1, X2, X3, X4]).astype(float)
    y = np.asarray(Y, dtype=float)
    cands = make_candidates(X, y, names=["x1", "x2", "x3", "x4"])
    short = rank([brute_force(cands)], cands, compute_moments(X, y), criterion="cp", size=16, scores=False)
    cp = short.scored.set_index("terms")["cp"]
    published = {"x1 + x2": 2.68, "x1 + x2 + x4": 3.02, "x1 + x2 + x3": 3.04, "x1 + x3 + x4": 3.50,
                 "x1 + x2 + x3 + x4": 5.00, "x1 + x4": 5.50, "x2 + x3 + x4": 7.34, "x3 + x4": 22.37,
                 "x2 + x3": 62.44, "x4": 138.73, "x1": 202.55, "x3": 315.15}
    for terms, value in published.items():
        assert cp[terms] == pytest.approx(value, abs=0.006)
    assert short.terms(0) == ("x1", "x2")  # the smallest Cp


def test_box_tidwell_power_counts_as_a_parameter_in_the_criteria():
    # A power fitted to the response spends a degree of freedom (Royston & Altman 1994 count estimated
    # fractional-polynomial powers the same way): AIC of a model holding x^α̂ is that of k + 1 parameters.
    import dataclasses

    import statsmodels.api as sm

    from selectkit import rank as rank_module
    from selectkit.moments import compute_moments
    from selectkit.searches import Found
    from tests.factories import make_candidates

    rng = np.random.default_rng(3)
    x = rng.uniform(1, 10, 80)
    y = 1 + 4 / x + rng.normal(0, 0.3, 80)
    cands = make_candidates(np.column_stack([x, x ** -0.9]), y, names=["x", "x^-0.9"], families=["x", "x"])
    powered = dataclasses.replace(cands.terms[1], transform="boxtidwell", params=(("power", -0.9),))
    cands = dataclasses.replace(cands, terms=(cands.terms[0], powered))
    moments = compute_moments(cands.matrix, cands.y)
    fits = [sm.OLS(y, sm.add_constant(col)).fit() for col in (x, x ** -0.9)]
    found = Found(method="test", subsets=((0,), (1,)), rss=[f.ssr for f in fits], k=[2, 2], n=80)
    table = rank_module.rank(found, cands, moments, criterion="aic", convention="coefficients-only", scores=False).scored
    by_terms = table.set_index("terms")
    # reference: statsmodels' AIC (k coefficients), plus 2 for the estimated power
    assert np.isclose(by_terms.loc["x", "aic"], fits[0].aic)
    assert np.isclose(by_terms.loc["x^-0.9", "aic"], fits[1].aic + 2.0)
    assert int(by_terms.loc["x^-0.9", "k"]) == 2
