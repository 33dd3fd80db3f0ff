"""Files that cannot run code: saved results and run stores hold data only, and anything else is refused.

A pickle runs what its bytes ask for when it is loaded.  Each test below hands
selectkit a crafted pickle whose loading would create a marker file — renamed to
a saved result's suffix, put in a run store's place, or slipped into a stored
unit — and checks that it is refused with a readable line and that the marker
never appears.  The round trips check that what is saved comes back equal.
"""

from __future__ import annotations

import io
import json
import pickle
import sqlite3
import struct
from types import MappingProxyType

import numpy as np
import pandas as pd
import pytest

import selectkit
from selectkit import _datafile
from selectkit.errors import InputError, StoreError
from selectkit.jobs import STORE_NAME, RunStore, load_job, store_status
from selectkit.jobs.store import unit_checksum
from selectkit.searches import Found
from tests.test_api import _small_frame
from tests.test_jobs import uninterrupted_shortlist, _main, run_fake, write_job, write_table


# --------------------------------------------------------------------------- the trap
class _Trap:
    """Pickles to a call of ``open(marker, "w")``: loading the pickle creates the marker file."""

    def __init__(self, marker):
        self.marker = str(marker)

    def __reduce__(self):
        return open, (self.marker, "w")


def _trap_bytes(marker) -> bytes:
    return pickle.dumps({"units": [_Trap(marker)]}, protocol=pickle.HIGHEST_PROTOCOL)


def test_the_trap_bites_when_unpickled(tmp_path):
    """The crafted pickle does run code when unpickled: the refusals below are not vacuous."""
    marker = tmp_path / "ran"
    handle = pickle.loads(_trap_bytes(marker))["units"][0]
    handle.close()
    assert marker.exists()


@pytest.fixture
def no_unpickling(monkeypatch):
    """Any use of pickle's loaders fails the test (selectkit must read files without them)."""

    def refuse(*args, **kwargs):
        raise AssertionError("pickle was used to read a file")

    monkeypatch.setattr(pickle, "loads", refuse)
    monkeypatch.setattr(pickle, "load", refuse)
    monkeypatch.setattr(pickle, "Unpickler", refuse)


def _craft(document: dict, arrays: bytes = b"") -> bytes:
    """A data file written by hand (magic, length, JSON, arrays), to try what the decoder accepts."""
    text = json.dumps(document).encode("utf-8")
    return _datafile.MAGIC + struct.pack("<Q", len(text)) + text + arrays


# --------------------------------------------------------------------------- saved results
@pytest.fixture(scope="module")
def result():
    # invented greenhouse rows (tests/test_api.py); two searches, a bootstrap and the honest error so that
    # every part of a Result is saved
    return selectkit.search(_small_frame(), response="yield_kg_m2", methods=("exhaustive", "forward"),
                            forms=("identity", "log", "reciprocal"), resamples=4, honest_folds=2, seed=0)


@pytest.mark.parametrize("name", ["greenhouse.skres", "greenhouse.sqlite", STORE_NAME, "greenhouse.json",
                                  "greenhouse.npz", "greenhouse"])
def test_a_pickle_renamed_to_our_suffixes_is_refused_and_runs_nothing(tmp_path, name):
    marker = tmp_path / "ran"
    path = tmp_path / name
    path.write_bytes(_trap_bytes(marker))
    with pytest.raises(InputError) as caught:
        selectkit.load(path)
    message = str(caught.value)
    assert "is not a selectkit result file" in message and "pickle" in message and "Result.save" in message
    assert "\n" not in message
    assert not marker.exists()


def test_load_never_calls_pickle(result, tmp_path, no_unpickling):
    path = result.save(tmp_path / "greenhouse.skres")
    back = selectkit.load(path)
    assert back.terms(0) == result.terms(0)


def test_saved_result_is_data_only(result, tmp_path):
    path = result.save(tmp_path / "greenhouse.skres")
    blob = path.read_bytes()
    assert blob.startswith(_datafile.MAGIC)
    # the header is plain JSON naming the format and its version
    (length,) = struct.unpack_from("<Q", blob, len(_datafile.MAGIC))
    start = len(_datafile.MAGIC) + 8
    document = json.loads(blob[start: start + length])
    assert document["format"] == "selectkit-result" and document["version"] == 3
    # every array after it is an .npy record that numpy reads with allow_pickle=False
    stream = io.BytesIO(blob[start + length:])
    for _ in range(document["arrays"]):
        assert np.lib.format.read_array(stream, allow_pickle=False).dtype.kind != "O"
    assert stream.read() == b""


def test_round_trip_gives_the_same_shortlist_terms_checks_and_report(result, tmp_path):
    back = selectkit.load(result.save(tmp_path / "greenhouse.skres"))
    pd.testing.assert_frame_equal(back.shortlist, result.shortlist)
    pd.testing.assert_frame_equal(back.models, result.models)
    pd.testing.assert_frame_equal(back.ranking.variable_support, result.ranking.variable_support)
    assert back.ranking.notes == result.ranking.notes
    for i in range(min(3, len(result.shortlist))):
        assert back.terms(i) == result.terms(i)
        mine, theirs = back.checks(i), result.checks(i)
        assert [(c.name, c.statistic, c.pvalue, c.verdict) for c in mine.checks] == \
               [(c.name, c.statistic, c.pvalue, c.verdict) for c in theirs.checks]
        np.testing.assert_array_equal(np.asarray(back.model(i).params), np.asarray(result.model(i).params))
    assert back.settings == result.settings
    assert back.honest.error == result.honest.error
    pd.testing.assert_frame_equal(back.honest.folds, result.honest.folds)
    pd.testing.assert_frame_equal(back.stability.variable_share, result.stability.variable_share)
    assert [f.subsets for f in back.founds] == [f.subsets for f in result.founds]
    assert back.summary() == result.summary()
    frame = _small_frame().drop(columns="yield_kg_m2")
    np.testing.assert_array_equal(back.predict(frame), result.predict(frame))
    # the tables and the JSON document of the report (the HTML page, slow to draw, is made from the same parts)
    from selectkit.report import tables

    assert tables.shortlist_csv(back.ranking) == tables.shortlist_csv(result.ranking)
    assert tables.models_csv(back.ranking) == tables.models_csv(result.ranking)
    assert tables.shortlist_document(**back._report_contents()) == tables.shortlist_document(**result._report_contents())


def test_a_result_file_of_another_version_or_kind_is_refused(result, tmp_path):
    blob = result.save(tmp_path / "greenhouse.skres").read_bytes()
    (length,) = struct.unpack_from("<Q", blob, len(_datafile.MAGIC))
    start = len(_datafile.MAGIC) + 8
    document = json.loads(blob[start: start + length])
    older = tmp_path / "older.skres"
    older.write_bytes(_craft({**document, "version": 2}, blob[start + length:]))
    with pytest.raises(InputError, match="format version 2"):
        selectkit.load(older)
    unit = tmp_path / "unit.skres"
    unit.write_bytes(_datafile.dumps({"subsets": [(1,)]}, kind="selectkit-unit", version=1))
    with pytest.raises(InputError, match="'selectkit-unit'"):
        selectkit.load(unit)
    cut = tmp_path / "cut.skres"
    cut.write_bytes(blob[: len(blob) // 2])
    with pytest.raises(InputError, match="not a selectkit result file"):
        selectkit.load(cut)
    text = tmp_path / "table.skres"
    text.write_text("light,yield\n1,2\n")
    with pytest.raises(InputError, match="does not start like one"):
        selectkit.load(text)


# --------------------------------------------------------------------------- the codec
def test_codec_round_trip_keeps_types():
    frame = pd.DataFrame({
        "light": [12.5, np.nan, -0.0],
        "bays": np.array([1, 2, 3], dtype=np.int64),
        "cultivar": pd.Categorical(["Ruby", "Amber", "Ruby"], categories=["Amber", "Ruby"]),
        "note": ["a", None, "c"],
        "count": pd.array([1, None, 3], dtype="Int64"),
        "ok": [True, False, True],
    }, index=pd.Index([10, 20, 30], name="row"))
    value = {
        "tuple": (1, 2.5, "x", None, True), "list": [(0, 1), (2,)], 7: "an int key", (1, 2): "a tuple key",
        "nan": float("nan"), "inf": float("-inf"), "zero": -0.0, "big": 2 ** 70,
        "scalars": (np.float64(0.1), np.int64(-3), np.bool_(True)),
        "array": np.arange(6, dtype=np.float32).reshape(2, 3), "objects": np.array([(1,), "b"], dtype=object),
        "readonly": MappingProxyType({"a": 1}), "frozen": frozenset({1, 2}), "frame": frame,
        "series": frame["light"], "found": Found(method="exhaustive", subsets=((0, 2), (1,)), rss=[1.5, 2.5],
                                                 k=[3, 2], n=30, details=MappingProxyType({"path": frame})),
    }
    back = _datafile.loads(_datafile.dumps(value, kind="test", version=1), kind="test", version=1)
    assert list(back) == list(value)
    assert back["tuple"] == value["tuple"] and type(back["tuple"]) is tuple
    assert back["list"] == [(0, 1), (2,)] and type(back["list"]) is list
    assert back[7] == "an int key" and back[(1, 2)] == "a tuple key"
    assert np.isnan(back["nan"]) and back["inf"] == float("-inf") and str(back["zero"]) == "-0.0"
    assert back["big"] == 2 ** 70
    assert [type(v) for v in back["scalars"]] == [np.float64, np.int64, np.bool_]
    assert back["scalars"] == value["scalars"]
    assert back["array"].dtype == np.float32 and np.array_equal(back["array"], value["array"])
    assert back["objects"].dtype == object and list(back["objects"]) == [(1,), "b"]
    assert isinstance(back["readonly"], MappingProxyType) and dict(back["readonly"]) == {"a": 1}
    assert back["frozen"] == frozenset({1, 2}) and isinstance(back["frozen"], frozenset)
    pd.testing.assert_frame_equal(back["frame"], frame)
    pd.testing.assert_series_equal(back["series"], frame["light"])
    found = back["found"]
    assert isinstance(found, Found) and found.subsets == ((0, 2), (1,)) and found.rss.tolist() == [1.5, 2.5]
    assert found.k.dtype == np.int64 and isinstance(found.details, MappingProxyType)
    pd.testing.assert_frame_equal(found.details["path"], frame)


def test_codec_refuses_what_it_cannot_write():
    with pytest.raises(TypeError, match="function"):
        _datafile.dumps({"f": lambda: 1}, kind="test", version=1)
    with pytest.raises(TypeError, match="_Trap"):
        _datafile.dumps([_Trap("x")], kind="test", version=1)


def test_a_pickled_array_inside_a_data_file_is_refused_and_runs_nothing(tmp_path):
    marker = tmp_path / "ran"
    inner = io.BytesIO()
    np.lib.format.write_array(inner, np.array([_Trap(marker)], dtype=object), allow_pickle=True)
    blob = _craft({"format": "test", "version": 1, "arrays": 1, "value": {"$": "array", "i": 0}}, inner.getvalue())
    with pytest.raises(_datafile.RefusedData, match="arrays"):
        _datafile.loads(blob, kind="test", version=1)
    assert not marker.exists()


@pytest.mark.parametrize("value, words", [
    ({"$": "record", "type": "Popen", "fields": {}}, "may not hold"),
    ({"$": "record", "type": "MethodRun", "fields": {"name": "exhaustive", "module_name": "antigravity",
                                                     "options": None}}, "not one of selectkit's searches"),
    ({"$": "record", "type": "Found", "fields": {"method": "x", "subsets": [], "rss": [], "k": [], "n": 1,
                                                 "shell": "rm"}}, "unknown fields"),
    ({"$": "record", "type": "FoldScheme", "fields": {"kind": "sideways"}}, "refuses"),
    ({"$": "eval", "items": ["1"]}, "unknown kind"),
    ({"$": "array", "i": 3}, "points nowhere"),
    ({"$": "float", "v": "__import__('os')"}, "not one"),
    ({"$": "extension", "dtype": "os.system", "items": []}, "cannot build"),
])
def test_decoder_refuses_values_outside_its_lists(value, words):
    blob = _craft({"format": "test", "version": 1, "arrays": 0, "value": value})
    with pytest.raises(_datafile.RefusedData, match=words):
        _datafile.loads(blob, kind="test", version=1)


def test_decoder_refuses_damaged_files():
    good = _datafile.dumps({"rss": np.array([1.0, 2.0])}, kind="test", version=1)
    assert _datafile.loads(good, kind="test", version=1)["rss"].tolist() == [1.0, 2.0]
    for blob, words in [(good + b"x", "after its end"), (good[:-3], "arrays are damaged"),
                        (good[:20], "cut short"), (good.replace(b'"format"', b'"formax"'), "not 'test'")]:
        with pytest.raises(_datafile.RefusedData, match=words):
            _datafile.loads(blob, kind="test", version=1)


# --------------------------------------------------------------------------- the run store
def test_real_work_units_come_back_equal_through_the_store(tmp_path):
    """Every search's unit results and pooled Found, stored and read back, give the same shortlist."""
    from selectkit import api

    setup = api.prepare_search(_small_frame(), response="yield_kg_m2",
                               methods=("exhaustive", "stepwise", "crossval", "screen"),
                               forms=("identity", "log", "reciprocal"), seed=0)
    store = RunStore.create_or_open(tmp_path)
    try:
        founds = api.run_methods(setup, on_unit=lambda key, res: store.record_unit(key, res))
        stored, damaged = store.read_units()
        store.record_pooled(founds)
        pooled = store.pooled()
    finally:
        store.close()
    assert not damaged and list(stored) == api.unit_keys(setup)
    again = api.run_methods(setup, done=stored)
    assert [f.subsets for f in again] == [f.subsets for f in founds] == [f.subsets for f in pooled]
    assert all(np.array_equal(a.rss, b.rss) for a, b in zip(again, founds))
    first, second = api.finish(setup, founds), api.finish(setup, again)
    assert first.shortlist.to_csv() == second.shortlist.to_csv()


@pytest.fixture(scope="module")
def straight(tmp_path_factory):
    """The shortlist of an uninterrupted job (stand-in search of tests/test_jobs.py)."""
    return uninterrupted_shortlist(tmp_path_factory.mktemp("straight"))


def test_a_pickle_in_place_of_a_unit_is_rerun_never_loaded(tmp_path, straight, no_unpickling):
    marker = tmp_path / "ran"
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path))
    assert run_fake(spec).complete
    store_path = tmp_path / "results" / STORE_NAME
    key = "exhaustive/chunk-004"
    trap = _trap_bytes(marker)
    with sqlite3.connect(store_path) as db:  # a crafted store: the checksum matches the pickle's bytes
        db.execute("UPDATE units SET result = ?, checksum = ? WHERE key = ?", (trap, unit_checksum(key, trap), key))
    db.close()
    with RunStore.open_read_only(store_path) as store:
        good, damaged = store.read_units()
    assert damaged == [key] and key not in good
    again = run_fake(spec)
    assert again.complete and again.units_resumed == 11
    assert (tmp_path / "results" / "shortlist.csv").read_bytes() == straight
    assert not marker.exists()


def test_a_pickle_in_place_of_the_pooled_results_is_refused(tmp_path, no_unpickling):
    marker = tmp_path / "ran"
    write_table(tmp_path / "bays.csv")
    assert run_fake(load_job(write_job(tmp_path))).complete
    store_path = tmp_path / "results" / STORE_NAME
    with sqlite3.connect(store_path) as db:
        db.execute("UPDATE pooled SET found = ?", (_trap_bytes(marker),))
    db.close()
    with RunStore.open_read_only(store_path) as store, pytest.raises(StoreError, match="pickle"):
        store.pooled()
    assert not marker.exists()


def test_a_store_of_an_older_selectkit_is_refused_and_fresh_starts_over(tmp_path, straight, capsys, monkeypatch):
    marker = tmp_path / "ran"
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path))
    assert run_fake(spec).complete
    store_path = tmp_path / "results" / STORE_NAME
    with sqlite3.connect(store_path) as db:  # what an older selectkit wrote: version 1, pickled units
        db.execute("UPDATE about SET value = '1' WHERE name = 'schema_version'")
        db.execute("UPDATE units SET result = ?, checksum = NULL", (_trap_bytes(marker),))
    db.close()
    with pytest.raises(StoreError, match="older selectkit") as caught:
        run_fake(spec)
    assert "--fresh" in str(caught.value) and "pickle" in str(caught.value)
    with pytest.raises(StoreError, match="older selectkit"):
        store_status(tmp_path / "results")

    from selectkit.jobs import runner
    from tests.test_jobs import FakeEngine

    monkeypatch.setattr(runner, "_API", FakeEngine())
    for command in (["resume", "results"], ["status", "results"]):
        code, _, err = _main(*command, cwd=tmp_path, capsys=capsys, monkeypatch=monkeypatch)
        lines = err.strip().splitlines()
        assert code == 2 and len(lines) == 1 and "Traceback" not in err, err
        assert "older selectkit" in lines[0] and "--fresh" in lines[0]
    fresh = run_fake(spec, resume=False)
    assert fresh.complete and fresh.units_resumed == 0
    assert (tmp_path / "results" / "shortlist.csv").read_bytes() == straight
    assert any(".damaged-" in p.name for p in (tmp_path / "results").iterdir()), "the old store is kept aside"
    assert not marker.exists()


def test_a_pickle_in_place_of_the_store_file_is_refused(tmp_path, capsys, monkeypatch):
    marker = tmp_path / "ran"
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path))
    (tmp_path / "results").mkdir()
    (tmp_path / "results" / STORE_NAME).write_bytes(_trap_bytes(marker))
    with pytest.raises(StoreError, match="--fresh"):
        store_status(tmp_path / "results")
    with pytest.raises(StoreError, match="--fresh"):
        run_fake(spec.with_settings())
    assert not marker.exists()
