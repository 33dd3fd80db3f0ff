"""NIST StRD Longley (1967): certified values for the full model, and a QR brute force of every subset.

Source: NIST Statistical Reference Datasets, linear regression, "Longley"
(https://www.itl.nist.gov/div898/strd/lls/data/Longley.shtml), higher-difficulty
problem; the data ship with statsmodels (``statsmodels.datasets.longley``) with
the columns in the NIST order (x1 GNP deflator, x2 GNP, x3 unemployed, x4 armed
forces, x5 population, x6 year; y total employment).
"""

import itertools

import numpy as np
import pytest
from statsmodels.datasets import longley

from selectkit.kernels import PIVOT_TOLERANCE
from selectkit.kernels.subsets import scaled_cross, subset_rss
from selectkit.moments import compute_moments, solve
from selectkit.searches.exhaustive import exhaustive_search
from tests.factories import make_candidates

#: Certified residual standard deviation (NIST StRD Longley), on 16 − 7 = 9 degrees of freedom.
CERTIFIED_RESIDUAL_SD = 304.854073561965
CERTIFIED_RSS = 9 * CERTIFIED_RESIDUAL_SD**2

#: Certified parameter estimates (NIST StRD Longley; written here from memory of the
#: published table, and confirmed by agreement with statsmodels' QR fit in this test).
CERTIFIED_PARAMS = np.array([
    -3482258.63459582,
    15.0618722713733,
    -0.358191792925910e-01,
    -2.02022980381683,
    -1.03322686717359,
    -0.511041056535807e-01,
    1829.15146461355,
])
#: Certified R² (NIST StRD Longley, from memory as above).
CERTIFIED_R2 = 0.995479004577296


def _data():
    frame = longley.load_pandas()
    return frame.exog.to_numpy(dtype=float), frame.endog.to_numpy(dtype=float)


def _significant_digits(value, reference):
    return -np.log10(abs(value - reference) / abs(reference))


def test_kernel_rss_of_the_full_model_matches_the_certified_value():
    X, y = _data()
    mom = compute_moments(X, y)
    A, _ = scaled_cross(mom.cross)
    rss = subset_rss(A, np.arange(6, dtype=np.int64), PIVOT_TOLERANCE) * mom.tss
    assert _significant_digits(rss, CERTIFIED_RSS) >= 8
    sd = np.sqrt(rss / 9)
    assert _significant_digits(sd, CERTIFIED_RESIDUAL_SD) >= 8
    assert 1 - rss / mom.tss == pytest.approx(CERTIFIED_R2, rel=1e-9)


def test_solve_reproduces_the_certified_parameters():
    X, y = _data()
    fit = solve(compute_moments(X, y), range(6))
    params = np.r_[fit.intercept, fit.coef]
    digits = [_significant_digits(p, c) for p, c in zip(params, CERTIFIED_PARAMS)]
    assert min(digits) >= 7, digits
    assert _significant_digits(fit.rss, CERTIFIED_RSS) >= 8
    # the QR fit of a general-purpose library agrees with the certified values too
    ref, *_ = np.linalg.lstsq(np.column_stack([np.ones(16), X]), y, rcond=None)
    assert min(_significant_digits(p, c) for p, c in zip(ref, CERTIFIED_PARAMS)) >= 6


def _qr_rss(X, y, cols):
    design = np.column_stack([np.ones(len(y)), X[:, list(cols)]])
    q, r = np.linalg.qr(design)
    resid = y - q @ (q.T @ y)
    return float(resid @ resid)


def test_best_subset_ranking_equals_qr_brute_force():
    X, y = _data()
    names = ["gnp_deflator", "gnp", "unemployed", "armed_forces", "population", "year"]
    found = exhaustive_search(make_candidates(X, y, names=names), n_best_per_size=20)
    assert found.exact
    for size in range(7):
        ref = sorted((_qr_rss(X, y, c), c) for c in itertools.combinations(range(6), size))
        got = [(r, s) for s, r, k in zip(found.subsets, found.rss, found.k) if k == size + 1]
        assert [s for _, s in got] == [c for _, c in ref], size
        np.testing.assert_allclose([r for r, _ in got], [r for r, _ in ref], rtol=1e-9)
