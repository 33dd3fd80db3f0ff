"""Moments: the one chunked pass, its merge and removal, solve and held-out error.

Independent computations used: numpy's two-pass centred cross-products
(``np.cov``), statsmodels OLS/WLS (reference library) and an explicit
refit-and-predict.
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st

from selectkit.errors import DataFileError, InputError, SearchError
from selectkit.moments import (
    Moments,
    compute_moments,
    heldout_sse,
    moments_from_chunks,
    moments_from_file,
    solve,
)


def _data(n=200, p=5, seed=0, offset=0.0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)) + offset
    y = X @ np.linspace(1, -1, p) + rng.normal(size=n)
    return X, y


def _numpy_cross(X, y, w=None):
    Z = np.column_stack([X, y])
    if w is None:
        D = Z - Z.mean(axis=0)
        return Z.mean(axis=0), D.T @ D
    # numpy's weighted covariance with bias=True divides by Σw; undo that.
    return np.average(Z, axis=0, weights=w), np.cov(Z.T, aweights=w, bias=True) * w.sum()


def test_equals_numpy_two_pass():
    X, y = _data()
    mom = compute_moments(X, y)
    mean, cross = _numpy_cross(X, y)
    assert mom.n == 200 and mom.weight_sum == 200
    np.testing.assert_allclose(mom.mean, mean, rtol=1e-13, atol=1e-13)
    np.testing.assert_allclose(mom.cross, cross, rtol=1e-12, atol=1e-10)
    assert mom.m == 5
    assert mom.tss == pytest.approx(((y - y.mean()) ** 2).sum(), rel=1e-13)
    np.testing.assert_allclose(mom.scales, np.sqrt(np.diag(cross)), rtol=1e-13)


def test_chunked_equals_one_shot_and_survives_large_offsets():
    # Columns with mean 1e8 and unit spread: the uncentred sums would lose
    # every digit of the spread; per-chunk centring with pairwise merging keeps them.
    X, y = _data(n=1000, offset=1e8, seed=3)
    mean, cross = _numpy_cross(X, y)
    scale = np.abs(cross).max()
    for chunk in (1, 7, 128, 999, 10**6):
        many = compute_moments(X, y, chunk_rows=chunk)
        assert np.abs(many.cross - cross).max() / scale < 1e-8
        np.testing.assert_allclose(many.mean, mean, rtol=1e-14, atol=1e-9)
    # the textbook one-pass formula Σxxᵀ − n x̄x̄ᵀ loses everything here
    Z = np.column_stack([X, y])
    naive = Z.T @ Z - 1000 * np.outer(Z.mean(axis=0), Z.mean(axis=0))
    assert np.abs(naive - cross).max() / scale > 1e-2


def test_weighted_matches_numpy_weighted():
    X, y = _data(seed=4)
    w = np.random.default_rng(5).uniform(0.1, 3.0, size=200)
    mom = compute_moments(X, y, w, chunk_rows=33)
    mean, cross = _numpy_cross(X, y, w)
    np.testing.assert_allclose(mom.mean, mean, rtol=1e-12)
    np.testing.assert_allclose(mom.cross, cross, rtol=1e-11, atol=1e-9)
    assert mom.weight_sum == pytest.approx(w.sum())
    assert mom.n == 200


@settings(max_examples=25, deadline=None)
@given(st.integers(2, 60), st.integers(2, 60), st.integers(1, 4), st.integers(0, 10**6), st.booleans())
def test_merge_and_remove_are_exact(n_a, n_b, p, seed, weighted):
    rng = np.random.default_rng(seed)
    Xa, Xb = rng.normal(size=(n_a, p)) * 3 + 5, rng.normal(size=(n_b, p)) - 2
    ya, yb = rng.normal(size=n_a), rng.normal(size=n_b) + 4
    wa = rng.uniform(0.5, 2, n_a) if weighted else None
    wb = rng.uniform(0.5, 2, n_b) if weighted else None
    a, b = compute_moments(Xa, ya, wa), compute_moments(Xb, yb, wb)
    both = compute_moments(np.vstack([Xa, Xb]), np.r_[ya, yb], None if not weighted else np.r_[wa, wb])
    merged = a + b
    assert merged.n == n_a + n_b
    np.testing.assert_allclose(merged.mean, both.mean, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(merged.cross, both.cross, rtol=1e-10, atol=1e-9)
    back = merged - b  # (A + B) − B == A
    assert back.n == n_a
    np.testing.assert_allclose(back.weight_sum, a.weight_sum, rtol=1e-12)
    np.testing.assert_allclose(back.mean, a.mean, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(back.cross, a.cross, rtol=1e-8, atol=1e-8)


def test_fold_by_subtraction_equals_training_rows():
    X, y = _data(n=120, seed=7)
    whole = compute_moments(X, y)
    fold = np.arange(120) % 5 == 2
    train = whole - compute_moments(X[fold], y[fold])
    direct = compute_moments(X[~fold], y[~fold])
    np.testing.assert_allclose(train.cross, direct.cross, rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(train.mean, direct.mean, rtol=1e-12, atol=1e-12)


def test_moments_from_chunks_accepts_pairs_and_triples():
    X, y = _data(n=90, seed=8)
    w = np.ones(90)
    mom = moments_from_chunks([(X[:40], y[:40]), (X[40:], y[40:], w[40:])])
    np.testing.assert_allclose(mom.cross, compute_moments(X, y).cross, rtol=1e-12, atol=1e-10)


def test_solve_equals_statsmodels_ols_and_wls():
    X, y = _data(n=150, seed=9)
    cols = [0, 2, 4]
    fit = solve(compute_moments(X, y), cols)
    ref = sm.OLS(y, sm.add_constant(X[:, cols])).fit()  # reference library
    np.testing.assert_allclose(np.r_[fit.intercept, fit.coef], ref.params, rtol=1e-10, atol=1e-12)
    assert fit.rss == pytest.approx(ref.ssr, rel=1e-10)
    w = np.random.default_rng(10).uniform(0.2, 4.0, 150)
    fit_w = solve(compute_moments(X, y, w), cols)
    ref_w = sm.WLS(y, sm.add_constant(X[:, cols]), weights=w).fit()
    np.testing.assert_allclose(np.r_[fit_w.intercept, fit_w.coef], ref_w.params, rtol=1e-10, atol=1e-12)
    assert fit_w.rss == pytest.approx(ref_w.ssr, rel=1e-10)
    # without an intercept: uncentred products
    fit0 = solve(compute_moments(X, y), cols, intercept=False)
    ref0 = sm.OLS(y, X[:, cols]).fit()
    np.testing.assert_allclose(fit0.coef, ref0.params, rtol=1e-10)
    assert fit0.intercept == 0.0
    assert fit0.rss == pytest.approx(ref0.ssr, rel=1e-10)
    # the empty model: intercept only
    empty = solve(compute_moments(X, y), [])
    assert empty.intercept == pytest.approx(y.mean()) and empty.rss == pytest.approx(((y - y.mean()) ** 2).sum())


def test_solve_refuses_rank_deficient_columns():
    X, y = _data(n=50, seed=11)
    X = np.column_stack([X, X[:, 0] + 2 * X[:, 1]])
    with pytest.raises(SearchError, match="linear combination"):
        solve(compute_moments(X, y), [0, 1, 5])
    with pytest.raises(RuntimeError):  # also the builtin
        solve(compute_moments(X, y), [0, 1, 5])
    const = np.column_stack([X, np.full(50, 3.0)])
    with pytest.raises(SearchError):
        solve(compute_moments(const, y), [6])
    with pytest.raises(InputError, match="out of range"):
        solve(compute_moments(X, y), [17])


def test_heldout_sse_equals_refit_and_predict():
    X, y = _data(n=160, seed=12)
    test_rows = np.arange(160) % 4 == 0
    whole = compute_moments(X, y)
    test = compute_moments(X[test_rows], y[test_rows])
    cols = [1, 3]
    got = heldout_sse(whole - test, test, cols)
    ref = sm.OLS(y[~test_rows], sm.add_constant(X[~test_rows][:, cols])).fit()
    pred = ref.predict(sm.add_constant(X[test_rows][:, cols]))
    assert got == pytest.approx(((y[test_rows] - pred) ** 2).sum(), rel=1e-10)
    # weighted: Σ w e² on the test rows of the WLS fit on the training rows
    w = np.random.default_rng(13).uniform(0.5, 2.0, 160)
    wt = compute_moments(X[test_rows], y[test_rows], w[test_rows])
    tr = compute_moments(X, y, w) - wt
    ref_w = sm.WLS(y[~test_rows], sm.add_constant(X[~test_rows][:, cols]), weights=w[~test_rows]).fit()
    e = y[test_rows] - ref_w.predict(sm.add_constant(X[test_rows][:, cols]))
    assert heldout_sse(tr, wt, cols) == pytest.approx((w[test_rows] * e**2).sum(), rel=1e-9)
    # no columns: the training mean predicts
    assert heldout_sse(whole - test, test, []) == pytest.approx(
        ((y[test_rows] - y[~test_rows].mean()) ** 2).sum(), rel=1e-10)


def _frame_to_xy(frame):
    X = frame[["a", "b", "c"]].to_numpy(dtype=float)
    return np.column_stack([X, np.log(X[:, 0])]), frame["yield_kg_m2"].to_numpy(dtype=float)


@pytest.mark.parametrize("kind", ["csv", "parquet"])
def test_moments_from_file_equals_in_memory(tmp_path, kind):
    rng = np.random.default_rng(14)
    frame = pd.DataFrame({"a": rng.uniform(1, 5, 500), "b": rng.normal(size=500), "c": rng.normal(size=500)})
    frame["yield_kg_m2"] = 40 + 3 * np.log(frame["a"]) + frame["b"] + rng.normal(size=500)
    path = tmp_path / f"bays.{kind}"
    if kind == "csv":
        frame.to_csv(path, index=False, float_format="%.17g")
    else:
        frame.to_parquet(path)
    got = moments_from_file(path, transform=_frame_to_xy, chunk_rows=64)
    X, y = _frame_to_xy(frame)
    want = compute_moments(X, y)
    assert got.n == 500
    np.testing.assert_allclose(got.cross, want.cross, rtol=1e-11, atol=1e-9)
    np.testing.assert_allclose(got.mean, want.mean, rtol=1e-13)


def test_bad_input_is_named(tmp_path):
    X, y = _data(n=30)
    X[4, 2] = np.nan
    with pytest.raises(InputError, match="candidate column 2 has 1 missing"):
        compute_moments(X, y)
    with pytest.raises(InputError, match="30 rows but the response has 29"):
        compute_moments(X, y[:-1])
    with pytest.raises(InputError, match="weights"):
        compute_moments(_data(n=30)[0], y, -np.ones(30))
    with pytest.raises(InputError, match="chunk_rows"):
        compute_moments(_data(n=30)[0], y, chunk_rows=0)
    whole = compute_moments(*_data(n=30))
    with pytest.raises(InputError, match="nothing would be left"):
        whole - whole
    with pytest.raises(InputError, match="same candidate set"):
        whole + compute_moments(np.ones((3, 1)) * [[1], [2], [3]], np.arange(3.0))
    with pytest.raises(DataFileError, match="does not exist"):
        moments_from_file(tmp_path / "missing.csv", transform=_frame_to_xy)
    with pytest.raises(InputError, match="transform"):
        moments_from_file(tmp_path / "missing.csv")
    (tmp_path / "bays.xlsx").write_text("x")
    with pytest.raises(DataFileError, match="csv or .parquet"):
        moments_from_file(tmp_path / "bays.xlsx", transform=_frame_to_xy)
    assert isinstance(whole, Moments)


@pytest.mark.parametrize("response_transform", [None, "log"])
def test_moments_from_file_through_a_candidate_set(tmp_path, response_transform):
    # The whole intake → candidates path, then the file pass re-applies the stored forms chunk by chunk.
    from selectkit.candidates import build_candidates
    from selectkit.data import prepare

    rng = np.random.default_rng(15)
    n = 300
    frame = pd.DataFrame({
        "light": rng.uniform(5, 40, n),
        "co2": rng.uniform(400, 1200, n),
        "cultivar": rng.choice(["Alpha", "Brava", "Corre"], n),
    })
    frame["yield_kg_m2"] = 20 + 4 * np.log(frame["light"]) + 0.002 * frame["co2"] + rng.normal(size=n)
    path = tmp_path / "bays.parquet"
    frame.to_parquet(path)
    cands = build_candidates(prepare(frame, response="yield_kg_m2"), forms=("identity", "log", "sqrt"),
                             response_transform=response_transform)
    got = moments_from_file(path, cands, chunk_rows=70)
    want = compute_moments(cands.matrix, cands.y)
    assert got.n == n and got.m == cands.matrix.shape[1]
    np.testing.assert_allclose(got.cross, want.cross, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(got.mean, want.mean, rtol=1e-12, atol=1e-12)


def test_moments_from_file_with_a_weights_column(tmp_path):
    from selectkit.candidates import build_candidates
    from selectkit.data import prepare

    rng = np.random.default_rng(16)
    frame = pd.DataFrame({"light": rng.uniform(5, 40, 200), "density": rng.uniform(2, 4, 200),
                          "bay_area_m2": rng.uniform(50, 120, 200)})
    frame["yield_kg_m2"] = 30 + np.log(frame["light"]) - 2 / frame["density"] + rng.normal(size=200)
    path = tmp_path / "bays.csv"
    frame.to_csv(path, index=False, float_format="%.17g")
    cands = build_candidates(prepare(frame, response="yield_kg_m2", weights="bay_area_m2"),
                             forms=("identity", "reciprocal"))
    got = moments_from_file(path, cands, chunk_rows=45, weights_column="bay_area_m2")
    want = compute_moments(cands.matrix, cands.y, frame["bay_area_m2"].to_numpy())
    assert got.weight_sum == pytest.approx(frame["bay_area_m2"].sum())
    np.testing.assert_allclose(got.cross, want.cross, rtol=1e-9, atol=1e-9)
    with pytest.raises(InputError, match="no column 'area'"):
        moments_from_file(path, cands, weights_column="area")
