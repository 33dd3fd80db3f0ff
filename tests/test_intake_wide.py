"""Wide tables and many-level categoricals are refused or decided at intake, before any form is built.

Speed is measured by a script, not asserted here; these tests check what is
decided and that the refusal does not first describe every column.
Independent reference: numpy's matrix_rank (SVD) for the rank of the
centred columns.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import selectkit.data as data_module
from selectkit.data import prepare
from selectkit.errors import InputError


def wide(n=30, p=80, seed=0):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(rng.normal(size=(n, p)), columns=[f"probe_{j}" for j in range(p)])
    frame.insert(0, "yield_kg_m2", 20 + frame["probe_0"] + rng.normal(size=n))
    return frame


def test_more_columns_than_rows_is_refused_without_describing_each_column(monkeypatch):
    frame = wide()
    # reference: numpy's SVD rank — the 80 centred columns of 30 rows span only 29 directions
    centred = frame.drop(columns="yield_kg_m2").to_numpy() - frame.drop(columns="yield_kg_m2").to_numpy().mean(0)
    assert np.linalg.matrix_rank(centred) == 29
    calls = []
    monkeypatch.setattr(data_module, "_describe_combination", lambda *a: calls.append(a) or "")
    with pytest.raises(InputError) as info:
        prepare(frame, response="yield_kg_m2")
    message = str(info.value)
    assert "\n" not in message
    assert "30 rows, but 80 predictor columns plus the intercept need at least 82 rows" in message
    assert calls == []


def test_a_genuine_combination_is_still_described_exactly():
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"light": rng.uniform(10, 30, 25), "co2": rng.uniform(400, 1000, 25)})
    frame["light_co2_index"] = 3 * frame["light"] - 0.5 * frame["co2"] + 7
    frame["yield_kg_m2"] = rng.normal(40, 2, 25)
    data = prepare(frame, response="yield_kg_m2")
    dropped = [n.message for n in data.report.notes if n.column == "light_co2_index"][0]
    assert "light_co2_index = 3·light − 0.5·co2 + 7" in dropped


def test_many_level_categorical_is_set_aside_before_forms_and_can_be_kept():
    rng = np.random.default_rng(1)
    n = 200
    frame = pd.DataFrame({"light": rng.uniform(10, 30, n), "bay_row": [f"r{int(i):03d}" for i in
                                                                      rng.integers(0, 120, n)]})
    frame["yield_kg_m2"] = 20 + frame["light"] + rng.normal(size=n)
    data = prepare(frame, response="yield_kg_m2")
    levels = frame["bay_row"].nunique()
    assert "bay_row" not in data.predictors and "bay_row" in data.report.set_aside
    message = [x.message for x in data.report.notes if x.column == "bay_row"][0]
    assert f"{levels} levels in {n} rows" in message and "keep_id_columns" in message
    kept = prepare(frame, response="yield_kg_m2", keep_identifiers=["bay_row"])
    assert kept.categorical == ("bay_row",)
    # a categorical of few levels is untouched
    frame["cultivar"] = rng.choice(["Roma", "Ailsa", "Cherry"], n)
    assert "cultivar" in prepare(frame, response="yield_kg_m2").categorical


def test_cli_wide_table_is_exit_2_with_one_line(tmp_path):
    wide().to_csv(tmp_path / "wide.csv", index=False)
    proc = subprocess.run([sys.executable, "-m", "selectkit", "search", "wide.csv", "-r", "yield_kg_m2", "-o", "out"],
                          capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "too few rows" in lines[0] and "Traceback" not in proc.stderr
