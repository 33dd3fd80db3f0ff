"""Honest error of the whole procedure, against an explicit reimplementation with statsmodels refits."""

import itertools

import numpy as np
import pandas as pd
import statsmodels.api as sm

import selectkit
from selectkit.searches.crossval import make_folds


def _frame(n=90, seed=11):
    # invented: three real effects among six probes
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 6))
    frame = pd.DataFrame(X, columns=[f"probe_{j}" for j in range(6)])
    frame["yield_kg_m2"] = 2 + X[:, 0] - 0.7 * X[:, 1] + 0.4 * X[:, 2] + rng.normal(0, 1, n)
    return frame


def test_honest_error_equals_outer_folds_refitted_by_hand():
    frame = _frame()
    result = selectkit.search(frame, response="yield_kg_m2", methods=("exhaustive",), forms=("identity",),
                              seed=3, honest_folds=4)
    honest = result.honest
    assert honest is not None and len(honest.folds) == 4
    # reference: in each outer fold, every subset refitted with statsmodels on the training rows, the best by
    # BIC (statsmodels' convention ranks the same), then its squared prediction error on the fold's rows
    names = [f"probe_{j}" for j in range(6)]
    errors = []
    for fold in make_folds(4, len(frame), 3):
        test = fold.test_rows
        train = np.setdiff1d(np.arange(len(frame)), test)
        best = None
        for size in range(0, 7):
            for subset in itertools.combinations(names, size):
                X = sm.add_constant(frame.loc[train, list(subset)], has_constant="add")
                fit = sm.OLS(frame.loc[train, "yield_kg_m2"], X).fit()
                key = (fit.bic, size, tuple(sorted(subset)))
                if best is None or key < best[0]:
                    best = (key, subset, fit)
        _, subset, fit = best
        Xt = sm.add_constant(frame.loc[test, list(subset)], has_constant="add")
        errors.append(float(np.mean((frame.loc[test, "yield_kg_m2"] - fit.predict(Xt)) ** 2)))
    assert np.allclose(honest.folds["test_mse"].to_numpy(), errors, rtol=1e-9)
    assert np.isclose(honest.error, np.mean(errors), rtol=1e-9)
    assert np.isclose(honest.optimism, honest.error - honest.naive_error)


def test_honest_error_reaches_summary_report_and_json(tmp_path):
    import json

    result = selectkit.search(_frame(), response="yield_kg_m2", methods=("stepwise",), forms=("identity",),
                              honest_folds=3)
    assert "Honest error of the whole procedure" in result.summary()
    paths = result.write(tmp_path)
    assert "honest-error" in paths["report_html"].read_text()
    document = json.loads(paths["shortlist_json"].read_text())
    assert document["honest_error"]["outer_folds"] == 3
    back = selectkit.load(result.save(tmp_path / "r.skres"))
    assert back.honest is not None and back.honest.error == result.honest.error
