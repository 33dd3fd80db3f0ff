"""Compiled subset kernels against a pure-numpy reference implementation."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from selectkit.kernels import PIVOT_TOLERANCE
from selectkit.kernels.subsets import (
    add_column,
    all_subsets_rss,
    drop_column,
    factor_columns,
    scaled_cross,
    subset_rss,
)
from selectkit.moments import compute_moments


def _problem(n=80, p=7, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    X[:, 1] += 0.8 * X[:, 0]
    y = X[:, :3] @ [1.0, -2.0, 0.5] + rng.normal(size=n)
    A, _ = scaled_cross(compute_moments(X, y).cross)
    return X, y, A


def reference_rss(X, y, cols):
    """Pure numpy: least squares by QR (lstsq) on centred data; rss as a fraction of tss."""
    yc = y - y.mean()
    if not cols:
        return 1.0
    Xc = X[:, cols] - X[:, cols].mean(axis=0)
    beta, *_ = np.linalg.lstsq(Xc, yc, rcond=None)
    return float(((yc - Xc @ beta) ** 2).sum() / (yc @ yc))


def reference_singular(X, cols, tol=PIVOT_TOLERANCE):
    """Pure numpy: a column is dependent when R² on the earlier ones exceeds 1 − tol."""
    for i, j in enumerate(cols):
        x = X[:, j] - X[:, j].mean()
        ss = x @ x
        if ss == 0:
            return True
        if i == 0:
            continue
        prev = X[:, cols[:i]] - X[:, cols[:i]].mean(axis=0)
        b, *_ = np.linalg.lstsq(prev, x, rcond=None)
        if ((x - prev @ b) ** 2).sum() <= tol * ss:
            return True
    return False


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 10**6), st.lists(st.integers(0, 6), unique=True, max_size=7))
def test_subset_rss_equals_numpy_lstsq(seed, cols):
    X, y, A = _problem(seed=seed)
    got = subset_rss(A, np.asarray(cols, dtype=np.int64), PIVOT_TOLERANCE)
    assert got == pytest.approx(reference_rss(X, y, cols), rel=1e-10, abs=1e-14)


def test_factor_matches_numpy_cholesky():
    X, y, A = _problem(seed=3)
    cols = np.array([4, 0, 2, 6], dtype=np.int64)
    L, skipped = factor_columns(A, cols, PIVOT_TOLERANCE)
    assert not skipped.any()
    idx = list(cols) + [A.shape[0] - 1]
    ref = np.linalg.cholesky(A[np.ix_(idx, idx)])
    np.testing.assert_allclose(L[:4, :4], ref[:4, :4], rtol=1e-12, atol=1e-13)
    np.testing.assert_allclose(L[4, :4], ref[4, :4], rtol=1e-12, atol=1e-13)
    assert L[4, 4] == pytest.approx(ref[4, 4] ** 2, rel=1e-10)  # the corner holds rss, not its root


def test_rank_deficiency_is_detected_not_scored():
    X, y, _ = _problem(seed=4)
    X = np.column_stack([X, X[:, 0] - 3 * X[:, 2], np.full(len(y), 2.5), X[:, 3] + 1e-9 * X[:, 4]])
    A, _ = scaled_cross(compute_moments(X, y).cross)
    for cols in ([0, 2, 7], [7, 0, 2], [8], [1, 8], [3, 9], [0, 1, 2], [4, 5]):
        got = subset_rss(A, np.asarray(cols, dtype=np.int64), PIVOT_TOLERANCE)
        if reference_singular(X, cols):
            assert got == -1.0, cols
        else:
            assert got == pytest.approx(reference_rss(X, y, cols), rel=1e-8), cols
    assert reference_singular(X, [0, 2, 7]) and reference_singular(X, [8]) and reference_singular(X, [3, 9])


def test_add_column_borders_the_factor():
    X, y, A = _problem(seed=5)
    size = A.shape[0]
    L = np.zeros((size + 1, size + 1))
    cols = np.zeros(size, dtype=np.int64)
    L[0, 0] = 1.0  # intercept-only model: rss fraction 1, response row 0
    order = [3, 0, 5, 1]
    for i, j in enumerate(order):
        rss = add_column(A, L, cols, i, j, PIVOT_TOLERANCE)
        assert rss == pytest.approx(reference_rss(X, y, order[: i + 1]), rel=1e-11)
        fresh, _ = factor_columns(A, np.asarray(order[: i + 1], dtype=np.int64), PIVOT_TOLERANCE)
        np.testing.assert_allclose(L[: i + 2, : i + 2], fresh, rtol=1e-11, atol=1e-13)
    # a dependent column is refused and the factor left as it was
    Xd = np.column_stack([X, X[:, 3] + X[:, 0]])
    Ad, _ = scaled_cross(compute_moments(Xd, y).cross)
    Ld = np.zeros((size + 2, size + 2))
    cd = np.zeros(size + 1, dtype=np.int64)
    Ld[0, 0] = 1.0
    add_column(Ad, Ld, cd, 0, 3, PIVOT_TOLERANCE)
    add_column(Ad, Ld, cd, 1, 0, PIVOT_TOLERANCE)
    before = Ld.copy()
    assert add_column(Ad, Ld, cd, 2, Ad.shape[0] - 2, PIVOT_TOLERANCE) == -1.0
    np.testing.assert_array_equal(Ld, before)


@pytest.mark.parametrize("position", [0, 1, 2, 3])
def test_drop_column_equals_refactoring_without_it(position):
    X, y, A = _problem(seed=6)
    order = [2, 6, 0, 4]
    L, _ = factor_columns(A, np.asarray(order, dtype=np.int64), PIVOT_TOLERANCE)
    work = np.zeros((6, 6))
    work[:5, :5] = L
    cols = np.asarray(order + [0], dtype=np.int64)
    rss = drop_column(work, cols, 4, position)
    rest = [c for i, c in enumerate(order) if i != position]
    assert list(cols[:3]) == rest
    assert rss == pytest.approx(reference_rss(X, y, rest), rel=1e-11)
    fresh, _ = factor_columns(A, np.asarray(rest, dtype=np.int64), PIVOT_TOLERANCE)
    # a Cholesky factor with a positive diagonal is unique
    np.testing.assert_allclose(work[:4, :4], fresh, rtol=1e-10, atol=1e-12)


def test_scaled_cross_has_unit_diagonal_and_zero_for_constants():
    X, y, _ = _problem(seed=7)
    X = np.column_stack([X, np.ones(len(y))])
    A, scales = scaled_cross(compute_moments(X, y).cross)
    assert scales[7] == 0.0
    np.testing.assert_allclose(np.diag(A), [1.0] * 7 + [0.0, 1.0])
    np.testing.assert_allclose(A[:7, :7], np.corrcoef(X[:, :7].T), rtol=1e-12, atol=1e-14)
    assert subset_rss(A, np.array([7], dtype=np.int64), PIVOT_TOLERANCE) == -1.0


def test_all_subsets_rss_equals_numpy_for_every_subset():
    X, y, A = _problem(n=60, p=7, seed=8)
    out = all_subsets_rss(A, np.arange(7, dtype=np.int64), PIVOT_TOLERANCE)
    assert out.shape == (128,)
    for mask in range(128):
        cols = [j for j in range(7) if mask >> j & 1]
        assert out[mask] == pytest.approx(reference_rss(X, y, cols), rel=1e-10, abs=1e-14), cols
    # a subset of the columns, in another order: bit i stands for cols[i]
    pick = np.array([5, 1, 3], dtype=np.int64)
    part = all_subsets_rss(A, pick, PIVOT_TOLERANCE)
    assert part[0b101] == pytest.approx(reference_rss(X, y, [5, 3]), rel=1e-10)


def test_all_subsets_rss_refuses_a_singular_set():
    X, y, _ = _problem(seed=9)
    X = np.column_stack([X, X[:, 0] + X[:, 1]])
    A, _ = scaled_cross(compute_moments(X, y).cross)
    assert (all_subsets_rss(A, np.arange(8, dtype=np.int64), PIVOT_TOLERANCE) == -1.0).all()


def test_border_each_scores_every_one_column_extension_like_numpy():
    # the branch and bound's last level: F + t for every free single-column term t
    from selectkit.kernels.subsets import _border_each

    X, y, _ = _problem(p=7, seed=3)
    X[:, 6] = X[:, 0] - 2.0 * X[:, 2]  # a combination of F: singular, never scored
    A, _ = scaled_cross(compute_moments(X, y).cross)
    cols = np.arange(7, dtype=np.int64)
    L, _ = factor_columns(A, cols[:3], PIVOT_TOLERANCE)
    n_best, sizes = 10, 5
    best_rss = np.full((sizes, n_best), np.inf)
    best_mask = np.zeros((sizes, n_best), dtype=np.uint64)
    best_count = np.zeros(sizes, dtype=np.int64)
    thr = np.full(sizes, np.inf)
    counts = np.zeros(3, dtype=np.int64)
    ones = np.ones(7, dtype=np.int64)
    _border_each(A, L, cols, np.arange(8, dtype=np.int64), cols, 3, 7, 3, ones, cols,
                 np.zeros(7, dtype=np.uint64), np.uint64(1) << cols.astype(np.uint64), PIVOT_TOLERANCE,
                 thr, thr.copy(), best_rss, best_mask, best_count, n_best, counts, np.zeros(8))
    assert counts[0] == 3 and counts[1] == 1
    want = sorted(reference_rss(X, y, [0, 1, 2, t]) for t in (3, 4, 5))
    np.testing.assert_allclose(best_rss[4, :3], want, rtol=1e-10)
    assert best_count[4] == 3


def test_inverse_increase_is_the_extra_sum_of_squares():
    # β_Bᵀ (M_BB)⁻¹ β_B with M = G⁻¹ equals rss(S without B) − rss(S), by numpy lstsq
    from selectkit.kernels.subsets import _inverse_increase

    X, y, A = _problem(p=6, seed=4)
    G = A[:6, :6]
    M = np.linalg.inv(G)
    beta = M @ A[:6, 6]
    full = reference_rss(X, y, list(range(6)))
    for block in ([2], [0, 3], [1, 4, 5]):
        slots = np.asarray(block, dtype=np.int64)
        rise = _inverse_increase(M, beta, slots, len(block), np.zeros((6, 6)), np.zeros(6))
        rest = [j for j in range(6) if j not in block]
        assert rise == pytest.approx(reference_rss(X, y, rest) - full, rel=1e-9)
