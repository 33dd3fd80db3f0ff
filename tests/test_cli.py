"""The command line: exit codes, one-line errors, nothing written on failure, complete help."""

import subprocess
import sys

import pytest

from selectkit.cli import build_parser, main
from tests.test_api import _small_frame


def _run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "selectkit", *args], capture_output=True, text=True,
                          cwd=cwd, timeout=300)


@pytest.fixture()
def table(tmp_path):
    path = tmp_path / "bays.csv"
    _small_frame().to_csv(path, index=False)
    return path


def test_missing_response_column_is_one_line_exit_2_and_writes_nothing(table, tmp_path):
    out = tmp_path / "out"
    proc = _run("search", str(table), "--response", "yeild_kg_m2", "--output", str(out))
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "yeild_kg_m2" in lines[0]
    assert "Traceback" not in proc.stderr
    assert not out.exists()


def test_missing_file_is_exit_2(tmp_path):
    proc = _run("search", str(tmp_path / "nope.csv"), "--response", "y")
    assert proc.returncode == 2 and "nope.csv" in proc.stderr and "Traceback" not in proc.stderr


def test_debug_shows_the_traceback(tmp_path):
    proc = _run("search", str(tmp_path / "nope.csv"), "--response", "y", "--debug")
    assert proc.returncode != 0 and "Traceback" in proc.stderr


def test_search_writes_shortlist_and_report(table, tmp_path, capsys):
    out = tmp_path / "results"
    code = main(["search", str(table), "-r", "yield_kg_m2", "--methods", "exhaustive", "--forms",
                 "identity,log,reciprocal", "--output", str(out)])
    assert code == 0
    written = sorted(p.name for p in out.iterdir())
    assert any(name.endswith(".csv") for name in written)
    assert any(name.endswith(".json") for name in written)
    assert any(name.endswith(".html") for name in written)
    assert "log(light)" in capsys.readouterr().out


def test_forms_lists_terms_and_refusals(tmp_path, capsys):
    frame = _small_frame()
    frame["probe_b"] = frame["probe_b"] - frame["probe_b"].min()  # one zero: log and 1/x refused
    path = tmp_path / "bays.csv"
    frame.to_csv(path, index=False)
    assert main(["forms", str(path), "-r", "yield_kg_m2"]) == 0
    printed = capsys.readouterr().out
    assert "log(light)" in printed and "probe_b" in printed


def test_every_command_has_help():
    parser = build_parser()
    for args in (["--help"], ["search", "--help"], ["forms", "--help"], ["demo", "--help"], ["job", "--help"],
                 ["job", "run", "--help"], ["job", "new", "--help"], ["job", "status", "--help"],
                 ["job", "resume", "--help"]):
        with pytest.raises(SystemExit) as stop:
            parser.parse_args(args)
        assert stop.value.code == 0
