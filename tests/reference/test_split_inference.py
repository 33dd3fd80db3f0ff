"""Honest p-values by sample splitting (Cox 1975; Wasserman & Roeder 2009) against a split made by hand.

The by-hand version: the same seeded split of the rows, the same search run on the selection rows with
``selectkit.search``, and statsmodels OLS of the chosen terms on the estimation rows.
"""

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import selectkit
from selectkit.inference import split_rows


def _bays(n=240, seed=6):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({f"x{i}": rng.normal(size=n) for i in range(6)})
    frame["yield_kg_m2"] = 1 + 0.8 * frame["x0"] - 0.5 * frame["x3"] + rng.normal(0, 1, n)
    return frame


def test_split_inference_equals_a_split_made_by_hand():
    frame = _bays()
    result = selectkit.search(frame, response="yield_kg_m2", forms=("identity",), split_fraction=0.5, seed=3)
    split = result.split
    select, estimate = split_rows(len(frame), 0.5, 3)
    assert (split.n_select, split.n_estimate) == (select.size, estimate.size) == (120, 120)
    chooser = selectkit.search(frame.iloc[select].reset_index(drop=True), response="yield_kg_m2",
                               forms=("identity",), seed=3)
    assert split.terms == chooser.terms(0)  # the same model chosen on the selection rows
    columns = list(split.terms)
    part = frame.iloc[estimate]
    ref = sm.OLS(part["yield_kg_m2"].to_numpy(), sm.add_constant(part[columns].to_numpy())).fit()
    table = split.coefficients
    np.testing.assert_allclose(table["estimate"], ref.params, rtol=1e-9)
    np.testing.assert_allclose(table["std_error"], ref.bse, rtol=1e-9)
    np.testing.assert_allclose(table["p_value"], ref.pvalues, rtol=1e-7)
    ci = ref.conf_int()
    np.testing.assert_allclose(table["ci_low"], ci[:, 0], rtol=1e-9)
    whole = sm.OLS(frame["yield_kg_m2"].to_numpy(), sm.add_constant(frame[columns].to_numpy())).fit()
    np.testing.assert_allclose(table["std_error_all_rows"], whole.bse, rtol=1e-9)
    # the price: standard errors about √2 larger on half the rows
    assert np.all(table["std_error"] > table["std_error_all_rows"])
    assert any("about 1.41 times" in note for note in split.notes)


def test_time_ordered_rows_select_first_and_estimate_later():
    select, estimate = split_rows(100, 0.3, 0, time_ordered=True)
    assert np.array_equal(select, np.arange(30)) and np.array_equal(estimate, np.arange(30, 100))


def test_the_split_is_seeded_and_written_in_the_report(tmp_path):
    frame = _bays()
    one = selectkit.search(frame, response="yield_kg_m2", forms=("identity",), split_fraction=0.4, seed=1)
    two = selectkit.search(frame, response="yield_kg_m2", forms=("identity",), split_fraction=0.4, seed=1)
    pd.testing.assert_frame_equal(one.split.coefficients, two.split.coefficients)
    page = one.write(tmp_path)["report_html"].read_text(encoding="utf-8")
    assert "p-value (honest)" in page and "Cox 1975" in page
    document = json.loads(one.write(tmp_path)["shortlist_json"].read_text(encoding="utf-8"))
    assert document["split_inference"]["n_select"] == one.split.n_select
    assert document["split_inference"]["terms"] == list(one.split.terms)
    again = selectkit.load(one.save(tmp_path / "r.skres"))
    pd.testing.assert_frame_equal(again.split.coefficients, one.split.coefficients)


def test_a_split_leaving_too_few_rows_is_refused():
    from selectkit.errors import OptionError

    with pytest.raises(OptionError, match="split_fraction"):
        selectkit.search(_bays(), response="yield_kg_m2", split_fraction=1.5)
    with pytest.raises(OptionError, match="each part needs at least 10"):
        selectkit.search(_bays(n=30), response="yield_kg_m2", forms=("identity",), split_fraction=0.8)
