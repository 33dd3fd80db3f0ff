"""Data-chosen powers on a large table come from a seeded sample of rows, the same on every run, and say so."""

import numpy as np
import pandas as pd

from selectkit import transforms as tf
from selectkit.api import prepare_candidates


def test_the_sample_is_seeded_sorted_and_only_for_large_tables():
    assert tf.parameter_rows(tf.PARAMETER_SAMPLE_ROWS) is None
    rows = tf.parameter_rows(tf.PARAMETER_SAMPLE_ROWS + 1000)
    again = tf.parameter_rows(tf.PARAMETER_SAMPLE_ROWS + 1000)
    assert rows.size == tf.PARAMETER_SAMPLE_ROWS and np.array_equal(rows, again)
    assert np.all(np.diff(rows) > 0)


def test_a_power_from_the_sample_is_the_power_fitted_on_those_rows_and_near_the_truth():
    rng = np.random.default_rng(2)
    n = tf.PARAMETER_SAMPLE_ROWS * 2
    x = rng.uniform(1, 20, n)
    y = 1 + 2 * np.sqrt(x) + rng.normal(0, 0.2, n)
    rows = tf.parameter_rows(n)
    whole = tf.box_tidwell(x, y).power
    assert whole == tf.box_tidwell(x[rows], y[rows]).power  # the sample, exactly (an independent refit on it)
    assert abs(whole - 0.5) < 0.02  # and close to the generating power 0.5
    lam = tf.boxcox_lambda(x)
    assert lam == tf.boxcox_lambda(x[rows])


def test_the_candidates_say_the_powers_came_from_a_sample():
    rng = np.random.default_rng(3)
    n = tf.PARAMETER_SAMPLE_ROWS + 5000
    frame = pd.DataFrame({"light": rng.uniform(1, 20, n)})
    frame["yield_kg_m2"] = np.log(frame["light"]) + rng.normal(0, 0.3, n)
    _, cands = prepare_candidates(frame, response="yield_kg_m2", forms=("identity", "boxcox"))
    assert any("seeded sample" in note and f"{n:,}" in note for note in cands.notes)
