"""Screening (lasso / elastic net / forward) and the screen → exact → polish pipeline."""

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.linear_model import lars_path

from selectkit import criteria
from selectkit.errors import OptionError
from selectkit.moments import compute_moments
from selectkit.searches import screen
from selectkit.searches.screen import ScreenOptions, screen_candidates, screen_then_search
from tests.factories import make_candidates

pytest.importorskip("selectkit.searches.exhaustive")


@pytest.fixture(scope="module")
def wide():
    """80 columns, 120 rows: x0 and log-like form x1 share a family; a 3-level block; an interaction."""
    rng = np.random.default_rng(3)
    n, p = 120, 80
    X = rng.normal(size=(n, p))
    X[:, 1] = np.exp(X[:, 0] / 2)                      # another form of x0
    level = rng.integers(0, 3, size=n)
    X[:, 10] = (level == 1)
    X[:, 11] = (level == 2)
    X[:, 12] = X[:, 5] * X[:, 7]                       # x5*x7
    y = 2 * X[:, 0] + 1.5 * X[:, 5] - 1.2 * X[:, 7] + 1.0 * X[:, 10] + rng.normal(size=n)
    names = [f"x{j}" for j in range(p)]
    names[12] = "x5*x7"
    families = list(names)
    families[1] = "x0"
    cand = make_candidates(X, y, names=names, families=families, blocks={"cultivar": [10, 11]},
                           requires={"x5*x7": ("x5", "x7")}, forced=("x40",))
    return X, y, cand


def _index(cand, name):
    return [t.name for t in cand.terms].index(name)


@pytest.mark.parametrize("method", ["lasso", "enet", "forward"])
def test_keeps_forced_and_true_signal_with_reasons(wide, method):
    X, y, cand = wide
    result = screen_candidates(cand, limit=15, method=method, forbidden=("x60",))
    kept = {cand.terms[i].name for i in result.kept}
    assert len(result.kept) <= 15
    assert "x40" in kept  # forced
    assert {"x0", "x5", "x7", "cultivar"} <= kept  # the strong true terms (a block enters whole)
    reasons = dict(result.set_aside)
    assert set(reasons) | set(result.kept) == set(range(len(cand.terms)))
    assert not set(reasons) & set(result.kept)
    assert all(reasons[i] for i in reasons)
    assert reasons[_index(cand, "x60")] == "forbidden by the user"
    if "x5*x7" in kept:  # hierarchy: its main-effect families are kept too
        assert {"x5", "x7"} <= kept
    table = result.table(cand)
    assert table["kept"].sum() == len(result.kept) and (table.loc[~table["kept"], "reason"] != "").all()


def test_family_forms_kept_together_while_room(wide):
    X, y, cand = wide
    i0, i1 = _index(cand, "x0"), _index(cand, "x1")
    tight = screen_candidates(cand, limit=2, method="lasso")  # forced x40 + one form of the strongest family
    assert set(tight.kept) == {i0, _index(cand, "x40")}
    assert "another form of family 'x0' (kept: x0)" in dict(tight.set_aside)[i1]
    roomy = screen_candidates(cand, limit=6, method="lasso")
    assert {i0, i1} <= set(roomy.kept)  # the exact search can still choose the form


def test_lasso_entry_order_matches_lars(wide):
    # Reference: scikit-learn's LARS-lasso path gives the exact order in which variables enter.
    rng = np.random.default_rng(9)
    X = rng.normal(size=(100, 12))
    y = X @ np.array([3, -2, 1.5, 1, 0.8, 0, 0, 0, 0, 0, 0, 0.5]) + rng.normal(size=100)
    cand = make_candidates(X, y)
    Z = (X - X.mean(0)) / np.sqrt(((X - X.mean(0)) ** 2).sum(0))
    _, _, coefs = lars_path(Z, y - y.mean(), method="lasso")
    first = [int(np.argmax(np.abs(coefs[j]) > 0)) if np.any(coefs[j]) else 10 ** 6 for j in range(12)]
    lars_order = sorted(range(12), key=lambda j: first[j])
    result = screen_candidates(cand, limit=5, method="lasso", n_alphas=2000)
    assert set(result.kept) == set(lars_order[:5])


def test_pipeline_maps_indices_back_and_says_what_ran(wide):
    X, y, cand = wide
    founds = screen_then_search(cand, limit=14, n_best_per_size=2, criterion="bic")
    exact, polish = founds
    screening = exact.details["screening"]
    assert "kept by lasso screening" in exact.details["stage"] and not exact.exact
    assert "stepwise polish" in polish.details["stage"]
    for subset, rss in list(zip(exact.subsets, exact.rss))[::5]:
        assert set(subset) <= set(screening.kept)
        cols = [c for i in subset for c in cand.terms[i].columns]
        assert rss == pytest.approx(sm.OLS(y, sm.add_constant(X[:, cols])).fit().ssr, rel=1e-8)
        assert _index(cand, "x40") in subset
    # the polish starts at the exact winner by BIC and can only improve it
    bic_exact = criteria.bic(exact.rss, exact.n, exact.k).min()
    final = polish.details["final"][0]
    i = polish.subsets.index(final)
    assert criteria.bic(polish.rss[i], polish.n, polish.k[i]) <= bic_exact + 1e-9
    assert {_index(cand, t) for t in ("x0", "x5", "x7", "cultivar")} <= set(final)


def test_no_screening_when_few_terms():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(50, 6))
    y = X[:, 0] + rng.normal(size=50)
    founds = screen_then_search(make_candidates(X, y), limit=10)
    assert founds[0].details["screening"].method == "none"
    assert "no screening needed" in founds[0].details["stage"] and founds[0].exact


def test_contract_matches_convenience(wide):
    X, y, cand = wide
    moments = compute_moments(cand.matrix, cand.y)
    options = ScreenOptions(limit=12, n_best_per_size=1, criterion="aic")
    units = screen.plan(cand, moments, options)
    assert all(u.key.startswith("screen/exact/") for u in units)
    founds = screen.merge(cand, moments, options, [screen.run_unit(u) for u in units])
    direct = screen_then_search(cand, limit=12, n_best_per_size=1, criterion="aic", n_jobs=2, backend="threading")
    assert [f.subsets for f in founds] == [f.subsets for f in direct]


def test_bad_options(wide):
    _, _, cand = wide
    with pytest.raises(OptionError, match="from 1 to 64"):
        screen_candidates(cand, limit=65)
    with pytest.raises(OptionError, match="lasso, enet, forward"):
        screen_candidates(cand, method="ridge")
    with pytest.raises(OptionError, match="exceed the limit"):
        screen_candidates(cand, limit=1, forced=("x2",))
    with pytest.raises(OptionError, match="no candidate term"):
        screen_candidates(cand, forbidden=("nope",))
    with pytest.raises(OptionError, match="polish criterion"):
        ScreenOptions(criterion="r2")
