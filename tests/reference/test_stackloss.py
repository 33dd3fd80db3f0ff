"""Stack loss data (Brownlee 1965), shipped with statsmodels.datasets.stackloss.

Published full-model OLS fit (Brownlee 1965; also Draper & Smith, from memory):
STACKLOSS = −39.92 + 0.7156 AIRFLOW + 1.2953 WATERTEMP − 0.1521 ACIDCONC.
Backward elimination by AIC removes ACIDCONC first (its t ≈ −0.97 is by far the
weakest; checked here against an explicit statsmodels refit loop).
"""

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.datasets import stackloss

from selectkit import criteria
from selectkit.moments import compute_moments
from selectkit.searches.stepwise import stepwise_search
from tests.factories import make_candidates

NAMES = ["AIRFLOW", "WATERTEMP", "ACIDCONC"]


@pytest.fixture(scope="module")
def data():
    frame = stackloss.load_pandas().data
    X = frame[NAMES].to_numpy(dtype=float)
    y = frame["STACKLOSS"].to_numpy(dtype=float)
    return X, y, make_candidates(X, y, names=NAMES)


def test_full_model_coefficients_published(data):
    X, y, cand = data
    fit = sm.OLS(y, sm.add_constant(X)).fit()
    # Brownlee (1965): -39.92, 0.7156, 1.2953, -0.1521
    np.testing.assert_allclose(fit.params, [-39.92, 0.7156, 1.2953, -0.1521], atol=6e-3)
    # the swept moments give the same rss for the full model
    found = stepwise_search(cand, method="backward", start="full")
    assert found.rss[0] == pytest.approx(fit.ssr, rel=1e-10)


def test_backward_aic_drops_acidconc_first(data):
    X, y, cand = data
    found = stepwise_search(cand, method="backward", start="full", criterion="aic")
    path = found.details["path"]
    assert path[1]["move"] == "drop" and path[1]["term"] == "ACIDCONC"
    # Independent check: statsmodels refits of each one-term-dropped model.
    aics = {}
    for drop in range(3):
        keep = [j for j in range(3) if j != drop]
        aics[NAMES[drop]] = sm.OLS(y, sm.add_constant(X[:, keep])).fit().aic
    assert min(aics, key=aics.get) == "ACIDCONC"
    full_aic = sm.OLS(y, sm.add_constant(X)).fit().aic
    # criterion values differ from statsmodels' by the constant 2 (σ² counted), see criteria.py
    assert path[1]["criterion_before"] == pytest.approx(full_aic + 2, rel=1e-10)
    assert path[1]["criterion_after"] == pytest.approx(aics["ACIDCONC"] + 2, rel=1e-10)
    # it then stops: dropping AIRFLOW or WATERTEMP from the two-term model raises AIC
    assert found.details["final"] == ((0, 1),)
    assert found.stopped_by == "no move improves the criterion"


def test_bic_and_aicc_values_come_from_criteria_module(data):
    X, y, cand = data
    found = stepwise_search(cand, method="backward", start="full", criterion="bic")
    n = len(y)
    for step in found.details["path"]:
        assert step["criterion_after"] == pytest.approx(float(criteria.bic(step["rss_after"], n, step["k_after"])))
    tss = compute_moments(X, y).tss
    assert 0 < found.rss.min() < tss
