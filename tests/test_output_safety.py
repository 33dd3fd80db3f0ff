"""Output safety: formula-safe CSV cells, escaped terminal output, TOML quoting, outputs written as one set.

External checks: the CSV files are read back with Python's own ``csv`` module and with pandas; the job
files are read back with ``tomllib`` (the standard library's TOML 1.0 reader). Which first characters make
a spreadsheet run a cell as a formula (``=``, ``+``, ``-``, ``@``, tab, carriage return) is common practice
(the OWASP advice on CSV injection, cited from memory), not a published standard.
"""

from __future__ import annotations

import csv
import io
import json
import os
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from selectkit import _io, report
from selectkit.cli import main
from selectkit.errors import JobFileError
from selectkit.jobs.starter import starter_job
from selectkit.moments import compute_moments
from selectkit.rank import rank
from selectkit.report import html as report_html
from selectkit.report import tables, text
from tests.factories import make_candidates
from tests.test_api import _small_frame
from tests.test_rank import brute_force

# The escape character in a term name makes matplotlib warn of a missing glyph in the report's figures.
pytestmark = pytest.mark.filterwarnings("ignore:Glyph 27:UserWarning")

FORMULA = '=HYPERLINK("http://example.invalid","open")'
ESCAPE = "light\x1b[2J"
SET_NAMES = sorted(report.OUTPUT_NAMES.values())


def _rows(csv_text: str) -> list[list[str]]:
    return list(csv.reader(io.StringIO(csv_text, newline="")))


# --------------------------------------------------------------------------- CSV cells


def test_text_cells_and_names_that_start_a_formula_get_an_apostrophe_and_numbers_stay_numbers():
    frame = pd.DataFrame({
        "=SUM(A1:A9)": ["=1+1", "+cmd", "-x", "@me", "\tinside", "\rback", "plain", None],
        "score": [-1.5, -2e-9, 0.0, 3.0, -4.0, 5.0, -6.25, 7.0],
        "level": pd.Categorical(["-1", "-2.5e3", "+7", "-", "a-b", "b", "@x", "b"]),
    })
    rows = _rows(tables.csv_text(frame))
    assert rows[0] == ["'=SUM(A1:A9)", "score", "level"]
    assert [r[0] for r in rows[1:]] == ["'=1+1", "'+cmd", "'-x", "'@me", "'\tinside", "'\rback", "plain", ""]
    # a plain number written as text (a level such as -1) is a number to a spreadsheet, not a formula
    assert [r[2] for r in rows[1:]] == ["-1", "-2.5e3", "+7", "'-", "a-b", "b", "'@x", "b"]
    back = pd.read_csv(io.StringIO(tables.csv_text(frame)))
    assert back["score"].dtype == float
    np.testing.assert_array_equal(back["score"].to_numpy(), frame["score"].to_numpy())
    assert list(frame.columns)[0] == "=SUM(A1:A9)" and frame.iloc[0, 0] == "=1+1"  # the input is not changed


def test_a_carriage_return_inside_a_name_does_not_split_a_row():
    frame = pd.DataFrame({"terms": ["light\rforged,row", "co2"], "bic": [-1.0, 2.0]})
    rows = _rows(tables.csv_text(frame))
    assert rows == [["terms", "bic"], ["light\rforged,row", "-1"], ["co2", "2"]]
    assert pd.read_csv(io.StringIO(tables.csv_text(frame)))["terms"].tolist() == ["light\rforged,row", "co2"]


@pytest.fixture(scope="module")
def hostile_run():
    rng = np.random.default_rng(4)
    n = 60
    X = rng.normal(size=(n, 3))
    y = 1.0 + X @ [1.0, 0.6, 0.0] + rng.normal(size=n)
    cands = make_candidates(X, y, names=[FORMULA, ESCAPE, "@cmd"])
    moments = compute_moments(cands.matrix, cands.y)
    found = brute_force(cands, method="exhaustive")
    return cands, moments, found


def _write(folder, hostile_run, size):
    cands, moments, found = hostile_run
    shortlist = rank([found], cands, moments, size=size, scores=False)
    return report.write_outputs(folder, settings={}, candidates=cands, founds=[found], shortlist=shortlist,
                                diagnoses=[])


def test_every_output_csv_neutralises_names_but_the_json_keeps_them(hostile_run, tmp_path):
    paths = _write(tmp_path, hostile_run, size=4)
    written = sorted(tmp_path.glob("*.csv"))
    assert paths["shortlist_csv"] in written
    for path in written:
        rows = _rows(path.read_text(encoding="utf-8"))
        header, body = rows[0], rows[1:]
        terms = [row[header.index("terms")] for row in body]
        assert terms and all(not t.startswith(("=", "+", "-", "@")) for t in terms), path.name
        assert any(t.startswith("'" + FORMULA) for t in terms), path.name
    frame = pd.read_csv(paths["shortlist_csv"])
    assert frame["log_likelihood"].dtype == float and (frame["log_likelihood"] < 0).all()  # negative, numeric
    document = json.loads(paths["shortlist_json"].read_text(encoding="utf-8"))
    assert FORMULA in document["models"][0]["terms"]  # JSON is data, not a spreadsheet: names unchanged


def test_forms_save_writes_a_formula_safe_csv(tmp_path, capsys):
    frame = _small_frame().rename(columns={"probe_a": "=2+3", "probe_b": "@SUM(A1)"})
    table = tmp_path / "bays.csv"
    frame.to_csv(table, index=False)
    saved = tmp_path / "terms.csv"
    assert main(["forms", str(table), "-r", "yield_kg_m2", "--forms", "identity", "--save", str(saved)]) == 0
    cells = [cell for row in _rows(saved.read_text(encoding="utf-8")) for cell in row]
    assert "'=2+3" in cells and "'@SUM(A1)" in cells
    assert not any(cell.startswith(("=", "+", "@")) for cell in cells)


# --------------------------------------------------------------------------- terminal


def test_printable_escapes_control_characters_only():
    assert text.printable("a\x1b[31mb") == "a\\x1b[31mb"
    assert text.printable("line\nforged\tcell\r") == "line\\nforged\\tcell\\r"
    assert text.printable("\x7f\x9b\u202e\u2028") == "\\x7f\\x9b\\u202e\\u2028"
    kept = "CO₂ ppm, light\\dli, Ümlaut"
    assert text.printable(kept) == kept
    once = text.printable("x\x1b\n")
    assert text.printable(once) == once


def test_the_summary_never_carries_an_escape_sequence(hostile_run):
    cands, moments, found = hostile_run
    shortlist = rank([found], cands, moments, size=3, scores=False)
    shown = text.summary(shortlist=shortlist, settings={"response": "y\x1b]0;title\x07"}, founds=[found])
    assert "\x1b" not in shown and "\x07" not in shown
    assert "light\\x1b[2J" in shown and "y\\x1b]0;title\\x07" in shown


def test_cli_prints_names_and_errors_escaped(tmp_path, capsys):
    frame = _small_frame().rename(columns={"probe_a": ESCAPE})
    table = tmp_path / "bays.csv"
    frame.to_csv(table, index=False)
    assert main(["forms", str(table), "-r", "yield_kg_m2", "--forms", "identity"]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and "light\\x1b[2J" in out
    assert main(["forms", str(table), "-r", "yield\x1b[2J\nforged"]) == 2
    err = capsys.readouterr().err
    assert "\x1b" not in err and len(err.strip().splitlines()) == 1 and "yield\\x1b[2J\\nforged" in err


# --------------------------------------------------------------------------- TOML


@pytest.mark.parametrize("name", [
    "bays\n[run]\nworkers = 64\n.csv",          # a newline must not open a live table
    'bay "A" \\ B\t\r\x1b\x7f\x01.csv',         # quotes, backslash, tab, CR, ESC, DEL, another control
    "CO₂ é.csv",
])
def test_starter_job_quotes_the_file_name_so_toml_reads_back_exactly_it(tmp_path, name):
    table = tmp_path / name
    pd.DataFrame({"yield_kg_m2": [1.0, 2.0, 3.0], "light": [1.0, 2.0, 4.0]}).to_csv(table, index=False)
    document = tomllib.loads(starter_job(table))
    assert document["data"]["table"] == name
    assert document["run"]["output"] == table.stem + "-results"
    assert "workers" not in document["run"]  # nothing in the name became a setting (the key stays commented)
    assert set(document) == {"data", "forms", "search", "ranking", "run"}


def test_job_new_writes_a_file_tomllib_reads(tmp_path, capsys):
    name = "greenhouse\nworkers = 64.csv"
    table = tmp_path / name
    pd.DataFrame({"yield_kg_m2": [1.0, 2.0], "light": [1.0, 2.0]}).to_csv(table, index=False)
    out = tmp_path / "job.toml"
    assert main(["job", "new", str(table), "-o", str(out)]) == 0
    assert tomllib.loads(out.read_text(encoding="utf-8"))["data"]["table"] == name
    assert "\n" not in capsys.readouterr().out.strip()  # the confirmation is one line, the newline escaped


def test_a_name_that_is_not_text_is_refused_with_a_reason(tmp_path):
    from selectkit.jobs.starter import _toml_text

    with pytest.raises(JobFileError, match="not valid UTF-8"):
        _toml_text("bays\udcff.csv")  # an undecodable byte in a file name, as os.fsdecode gives it


# --------------------------------------------------------------------------- one set


def _snapshot(folder):
    """Every entry of ``folder``: a file's bytes, or ``"folder"`` for a folder (a staging folder left behind)."""
    return {p.name: "folder" if p.is_dir() else p.read_bytes() for p in folder.iterdir()}


@pytest.fixture(scope="module")
def two_sets(hostile_run, tmp_path_factory):
    """Reference copies of two different complete sets (shortlists of 2 and of 4 models)."""
    old, new = tmp_path_factory.mktemp("old"), tmp_path_factory.mktemp("new")
    _write(old, hostile_run, size=2)
    _write(new, hostile_run, size=4)
    old, new = _snapshot(old), _snapshot(new)
    assert sorted(old) == SET_NAMES and all(old[name] != new[name] for name in SET_NAMES)
    return old, new


def _fail(*args, **kwargs):
    raise OSError(28, "No space left on device")


def test_a_writer_failing_mid_set_leaves_the_old_set_whole(hostile_run, two_sets, tmp_path, monkeypatch):
    old, _ = two_sets
    _write(tmp_path, hostile_run, size=2)
    (tmp_path / "notes.txt").write_text("mine")  # the user's own file beside the outputs
    monkeypatch.setattr(report_html, "write_html", _fail)
    with pytest.raises(OSError, match="No space left"):
        _write(tmp_path, hostile_run, size=4)
    assert _snapshot(tmp_path) == {**old, "notes.txt": b"mine"}  # old set byte for byte, no staging folder


def test_a_failure_on_the_first_write_leaves_no_partial_set(hostile_run, tmp_path, monkeypatch):
    monkeypatch.setattr(report_html, "write_html", _fail)
    with pytest.raises(OSError):
        _write(tmp_path / "out", hostile_run, size=4)
    assert list((tmp_path / "out").iterdir()) == []  # no CSV or JSON without their report


def test_a_kill_during_the_moves_is_finished_by_the_next_write(hostile_run, two_sets, tmp_path, monkeypatch):
    _, new = two_sets
    _write(tmp_path, hostile_run, size=2)
    real_replace = os.replace
    moved = []

    def killed_after_one_move(source, target):
        if Path(target).parent == tmp_path:  # a move of the set into place (not a write inside the staging)
            if moved:
                raise KeyboardInterrupt  # stands in for a kill between two renames of the set
            moved.append(Path(target))
        real_replace(source, target)

    monkeypatch.setattr(_io.os, "replace", killed_after_one_move)
    with pytest.raises(KeyboardInterrupt):
        _write(tmp_path, hostile_run, size=4)
    monkeypatch.setattr(_io.os, "replace", real_replace)
    mixed = _snapshot(tmp_path)
    assert {name for name in SET_NAMES if mixed[name] == new[name]} == {moved[0].name}  # one file moved in
    assert mixed[_io.STAGING_NAME] == "folder"  # ...and the ready staging folder says the set is unfinished
    # The next write, even one that fails, first completes the interrupted set.
    monkeypatch.setattr(report_html, "write_html", _fail)
    with pytest.raises(OSError):
        _write(tmp_path, hostile_run, size=2)
    assert _snapshot(tmp_path) == new


def test_a_staging_folder_never_marked_ready_is_discarded(hostile_run, two_sets, tmp_path):
    _, new = two_sets
    stale = tmp_path / _io.STAGING_NAME
    stale.mkdir()
    (stale / "shortlist.csv").write_text("half of an older set")
    paths = _write(tmp_path, hostile_run, size=4)
    assert _snapshot(tmp_path) == new
    assert all(path.parent == tmp_path for path in paths.values())
