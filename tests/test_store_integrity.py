"""Run-store integrity: every stored unit carries a checksum; damage is found, named and repaired or reported.

A flipped bit in a stored unit's bytes (written with :mod:`sqlite3` directly,
as a failing disk would) must never reach the shortlist: the resume finds the
unit's checksum wrong, runs the unit again and ends with the shortlist of an
uninterrupted run, naming the unit it re-ran.  A damaged SQLite page gives one
line that says what can be recovered and how, never a traceback.
"""

from __future__ import annotations

import hashlib
import sqlite3

import pytest

from selectkit.errors import StoreError
from selectkit.jobs import STORE_NAME, RunStore, load_job, store_status
from selectkit.jobs.store import unit_checksum
from tests.test_jobs import uninterrupted_shortlist, _main, run_fake, write_job, write_table


@pytest.fixture(scope="module")
def straight(tmp_path_factory):
    """The shortlist of an uninterrupted run (the reference every repaired run must give)."""
    return uninterrupted_shortlist(tmp_path_factory.mktemp("straight"))


def _flip_a_bit(store_path, key=None):
    """Flip one bit in the middle of a stored unit's bytes; return the unit's key."""
    with sqlite3.connect(store_path) as db:
        if key is None:
            key = db.execute("SELECT key FROM units WHERE state = 'done' ORDER BY position LIMIT 1").fetchone()[0]
        blob = bytearray(db.execute("SELECT result FROM units WHERE key = ?", (key,)).fetchone()[0])
        blob[len(blob) // 2] ^= 0x10
        db.execute("UPDATE units SET result = ? WHERE key = ?", (bytes(blob), key))
    return key


def test_checksum_is_sha256_of_key_and_stored_bytes(tmp_path):
    store = RunStore.create_or_open(tmp_path)
    try:
        store.record_unit("exhaustive/chunk-001", {"rss": [1.5, 2.5]})
        key, blob, checksum = store._db.execute("SELECT key, result, checksum FROM units").fetchone()
    finally:
        store.close()
    # independent computation with hashlib (FIPS 180-4 SHA-256)
    assert checksum == hashlib.sha256(key.encode() + b"\0" + blob).hexdigest() == unit_checksum(key, blob)


def test_a_flipped_bit_in_a_partial_store_is_rerun_on_resume(tmp_path, straight):
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, exhaustive="chunks = 12\ndelay = 0.05", extra_run='time_budget = "0.3s"\n'))
    first = run_fake(spec)
    assert not first.complete and first.units_done >= 2
    key = _flip_a_bit(tmp_path / "results" / STORE_NAME)
    again = run_fake(spec.with_settings(time_budget=None))
    assert again.complete
    assert again.units_resumed == first.units_done - 1  # every unit but the damaged one came from the store
    assert any(key in note and "failed their checksum" in note for note in again.notes), again.notes
    assert key in again.render()
    assert (tmp_path / "results" / "shortlist.csv").read_bytes() == straight
    assert any("failed their checksum" in line for line in store_status(tmp_path / "results").log)


def test_a_flipped_bit_in_a_complete_store_never_reaches_the_shortlist(tmp_path, straight):
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path))
    assert run_fake(spec).complete
    # the unit whose models hold the best shortlist rows would change the answer most: damage several
    keys = [_flip_a_bit(tmp_path / "results" / STORE_NAME, f"exhaustive/chunk-{i:03d}") for i in (0, 5, 11)]
    again = run_fake(spec)
    assert again.complete and again.units_resumed == 9
    assert all(k in " ".join(again.notes) for k in keys)
    assert (tmp_path / "results" / "shortlist.csv").read_bytes() == straight


def test_status_counts_a_damaged_unit_out_and_names_it(tmp_path):
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, exhaustive="chunks = 12\ndelay = 0.05", extra_run='time_budget = "0.3s"\n'))
    first = run_fake(spec)
    assert not first.complete and first.units_done >= 2
    key = _flip_a_bit(tmp_path / "results" / STORE_NAME)
    status = store_status(tmp_path / "results")
    # the stored bytes of one finished unit changed: it is not finished any more, and the status says which
    assert status.units_done == first.units_done - 1 and status.units_damaged == (key,)
    assert f"{first.units_done - 1} of {status.units_total} finished" in status.render()
    assert key in status.render() and "checksum" in status.render()
    with RunStore.open_read_only(tmp_path / "results") as store:
        assert store.unit_counts()[0] == first.units_done  # reading the status marked nothing


def test_read_units_names_the_damaged_and_keeps_the_rest(tmp_path):
    store = RunStore.create_or_open(tmp_path)
    try:
        for i in range(3):
            store.record_unit(f"u{i}", {"value": i})
    finally:
        store.close()
    _flip_a_bit(tmp_path / STORE_NAME, "u1")
    with RunStore.open_read_only(tmp_path) as store:
        good, damaged = store.read_units()
        assert good == {"u0": {"value": 0}, "u2": {"value": 2}} and damaged == ["u1"]
        assert store.unit_counts()[0] == 3  # a read-only reader changes nothing
    store = RunStore.create_or_open(tmp_path)
    try:
        assert store.verify_units() == ["u1"]
        assert store.finished_keys() == {"u0", "u2"}  # marked damaged: the next resume runs it again
    finally:
        store.close()


def _damage_page(store_path, page: int):
    """Overwrite one whole page of the SQLite file with noise (the store is closed and checkpointed)."""
    size = store_path.stat().st_size
    with sqlite3.connect(store_path) as db:
        page_size = db.execute("PRAGMA page_size").fetchone()[0]
    pages = size // page_size
    page = page if page > 0 else pages + page + 1
    assert 1 < page <= pages, (page, pages)
    with open(store_path, "r+b") as handle:
        handle.seek((page - 1) * page_size)
        handle.write(bytes((i * 37 + 11) % 256 for i in range(page_size)))
    return page


@pytest.mark.parametrize("page", [2, 3])
def test_a_damaged_page_gives_one_line_and_exit_2(tmp_path, capsys, monkeypatch, page):
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path))
    assert run_fake(spec).complete
    store_path = tmp_path / "results" / STORE_NAME
    assert not (tmp_path / "results" / (STORE_NAME + "-wal")).exists()  # checkpointed when the job closed it
    _damage_page(store_path, page)

    from selectkit.jobs import runner
    from tests.test_jobs import FakeEngine

    monkeypatch.setattr(runner, "_API", FakeEngine())
    refused = 0
    for command in (["resume", "results"], ["run", "bays.toml"], ["status", "results"]):
        code, out, err = _main(*command, cwd=tmp_path, capsys=capsys, monkeypatch=monkeypatch)
        if code == 0:  # this page held nothing the command reads (e.g. a free page): nothing to report
            continue
        lines = err.strip().splitlines()
        assert code == 2, err
        assert len(lines) == 1 and lines[0].startswith("selectkit: error: ") and "Traceback" not in err, err
        assert "--fresh" in lines[0] and ("damaged" in lines[0] or "not a" in lines[0]), lines[0]
        refused += 1
    assert refused >= 1  # the damage was met, and reported readably


def test_fresh_start_moves_a_damaged_store_aside_and_runs(tmp_path, straight):
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path))
    assert run_fake(spec).complete
    store_path = tmp_path / "results" / STORE_NAME
    with open(store_path, "r+b") as handle:  # the header page too: nothing SQLite can open
        handle.write(b"\x00" * 4096)
    with pytest.raises(StoreError, match="--fresh"):
        run_fake(spec)
    fresh = run_fake(spec, resume=False)
    assert fresh.complete and fresh.units_resumed == 0
    assert (tmp_path / "results" / "shortlist.csv").read_bytes() == straight
    kept = [p.name for p in (tmp_path / "results").iterdir() if ".damaged-" in p.name]
    assert kept, "the damaged store is moved aside, not deleted"
