"""Row identifiers need evidence: a name, an even step with no relation to anything — not distinct integers alone.

Independent references: scipy.stats.spearmanr for the rank correlations the
notes report, and statsmodels OLS for the identity between the t test of a
partial correlation and the t statistic of the column in a regression.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from selectkit._identifiers import _partial, identifier_evidence, name_word
from selectkit.data import prepare


def bays(n=40, seed=3):
    """Invented greenhouse bays: pollinator visits (distinct counts) and light drive the yield."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "bay_id": np.arange(1, n + 1),
        "pollinator_visits": rng.choice(np.arange(50, 2000), n, replace=False),
        "light_mol_m2_day": rng.uniform(10, 30, n).round(2),
        "day_of_season": rng.permutation(np.arange(1, n + 1)),
        "tray_order": rng.permutation(np.arange(101, 101 + n)),
    })
    frame["yield_kg_m2"] = (10 + 0.01 * frame["pollinator_visits"] + 0.5 * frame["light_mol_m2_day"]
                            + 0.3 * frame["day_of_season"] + rng.normal(0, 1, n))
    return frame


def note(data, column):
    found = [n for n in data.report.notes if n.column == column]
    assert found, f"no note about {column}"
    return found[0]


def test_distinct_counts_that_drive_the_response_stay_predictors():
    data = prepare(bays(), response="yield_kg_m2")
    assert "pollinator_visits" in data.numeric
    message = note(data, "pollinator_visits").message
    assert "distinct integers" in message and "kept as a predictor" in message and "\n" not in message


def test_a_named_identifier_is_set_aside_and_the_note_gives_evidence_and_the_way_back():
    data = prepare(bays(), response="yield_kg_m2")
    assert "bay_id" not in data.predictors and list(data.identifiers.columns)[0] == "bay_id"
    dropped = note(data, "bay_id")
    assert dropped.kind == "dropped"
    assert "its name says so ('id')" in dropped.message and "step evenly by 1 from 1 to 40" in dropped.message
    assert "keep_id_columns=['bay_id']" in dropped.message
    kept = prepare(bays(), response="yield_kg_m2", keep_identifiers=["bay_id"])
    assert "bay_id" in kept.numeric


def test_an_even_step_with_no_relation_is_an_identifier():
    data = prepare(bays(), response="yield_kg_m2")
    assert "tray_order" not in data.predictors
    message = note(data, "tray_order").message
    assert "step evenly by 1 from 101 to 140" in message and "no relation" in message


def test_an_even_step_that_drives_the_response_is_kept():
    data = prepare(bays(), response="yield_kg_m2")
    assert "day_of_season" in data.numeric
    message = note(data, "day_of_season").message
    assert "follows 'yield_kg_m2' (" in message and "not an identifier" in message


def test_an_even_step_that_drives_the_response_beside_a_stronger_predictor_is_kept():
    from scipy import stats

    rng = np.random.default_rng(1)
    day = rng.permutation(np.arange(1.0, 41.0))
    light = rng.normal(size=40)
    yield_ = 20 * light + 0.1 * day + rng.normal(0, 0.3, 40)
    assert stats.spearmanr(day, yield_).pvalue > 0.5  # on its own, day shows nothing (reference: scipy)
    evidence = identifier_evidence("day_of_season", day, response="yield", y=yield_, others=[("light", light)])
    assert evidence.related_to == "yield" and evidence.measure == "partial r" and not evidence.is_identifier


def test_huge_floats_are_no_evidence_of_an_identifier():
    # every float above 2**53 is an integer, so integrality says nothing there
    frame = bays().drop(columns=["bay_id", "tray_order"])
    rng = np.random.default_rng(5)
    frame["spectral_energy_j"] = rng.uniform(1e16, 1e17, len(frame))
    data = prepare(frame, response="yield_kg_m2")
    assert "spectral_energy_j" in data.numeric


def test_text_identifiers_are_still_set_aside():
    frame = bays()
    frame["sensor_tag"] = [f"S-{i:04d}" for i in range(len(frame))]
    data = prepare(frame, response="yield_kg_m2")
    assert "sensor_tag" not in data.predictors and note(data, "sensor_tag").kind == "dropped"


@pytest.mark.parametrize("name, word", [
    ("bay_id", "id"), ("bayID", "id"), ("ID", "id"), ("sensorSerial", "serial"), ("plot_code", "code"),
    ("row_number", "number"), ("sample_no", "no"), ("number_of_visitors", None), ("no_of_plants", None),
    ("pollinator_visits", None), ("idle_hours", None), ("keyhole_area", None),
])
def test_identifier_words_in_names(name, word):
    assert name_word(name) == word


def test_reported_rank_correlation_agrees_with_scipy():
    from scipy import stats

    rng = np.random.default_rng(8)
    x = rng.permutation(np.arange(1.0, 41.0))
    y = x + rng.normal(0, 10, 40)
    evidence = identifier_evidence("tray_order", x, response="yield", y=y, others=[])
    reference = stats.spearmanr(x, y)  # reference: scipy
    assert evidence.rho == pytest.approx(reference.statistic, abs=1e-12)
    assert evidence.pvalue == pytest.approx(reference.pvalue, rel=1e-9)
    assert evidence.related_to == "yield" and not evidence.is_identifier


def test_partial_correlation_test_equals_the_regression_t_statistic():
    import statsmodels.api as sm

    rng = np.random.default_rng(9)
    n = 40
    others = [("light", rng.normal(size=n)), ("co2", rng.normal(size=n))]
    x = rng.normal(size=n)
    y = 2 * others[0][1] + 0.4 * x + rng.normal(size=n)
    r, pvalue = _partial(x, y, others)
    # reference: statsmodels OLS of y on the other columns and x; the t test of x's coefficient is the same test
    design = sm.add_constant(np.column_stack([others[0][1], others[1][1], x]))
    fit = sm.OLS(y, design).fit()
    assert pvalue == pytest.approx(fit.pvalues[-1], rel=1e-8)
    assert np.sign(r) == np.sign(fit.params[-1])
