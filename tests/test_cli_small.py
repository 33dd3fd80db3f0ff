"""Small command-line behaviours: whole option names, refused counts, a closed pipe, plain warning lines.

The contract checked throughout: bad input gets one line on standard error and exit code 2, no traceback.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest

from selectkit import cli
from selectkit.cli import build_parser, main
from tests.test_api import _small_frame

ROOT = Path(__file__).resolve().parents[1]


def _python(*args):
    return [sys.executable, "-m", "selectkit", *args]


def _environment():
    return {**os.environ, "PYTHONPATH": str(ROOT)}


def _refused(argv, capsys) -> str:
    """Parse ``argv`` through ``main``; return the one line it wrote to stderr after exiting with 2."""
    capsys.readouterr()
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 2
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert "Traceback" not in err and "usage:" not in err
    return lines[0]


def _parsers(parser):
    """The parser and every subparser below it."""
    yield parser
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for child in action.choices.values():
                yield from _parsers(child)


# --------------------------------------------------------------------------- abbreviations


def test_every_parser_and_subparser_refuses_abbreviations():
    parsers = list(_parsers(build_parser()))
    assert len(parsers) == 10  # selectkit, search, forms, demo, job, job new/run/resume/extend/status
    assert all(p.allow_abbrev is False for p in parsers)


@pytest.mark.parametrize("argv, typo", [
    (["search", "t.csv", "-r", "y", "--fold", "3"], "--fold"),      # would have meant --folds
    (["search", "t.csv", "-r", "y", "--work", "2"], "--work"),      # --workers
    (["search", "t.csv", "-r", "y", "--see", "1"], "--see"),        # --seed
    (["search", "t.csv", "--resp", "y"], "--resp"),                 # --response
    (["job", "resume", "results", "--work", "2"], "--work"),
    (["demo", "--se", "1"], "--se"),
])
def test_an_abbreviated_option_is_refused_not_guessed(argv, typo, capsys):
    assert typo in _refused(argv, capsys)


def test_whole_names_still_work():
    args = build_parser().parse_args(["search", "t.csv", "--response", "y", "--folds", "3", "--workers", "-1",
                                      "--seed", "0", "--resamples", "0", "--honest-folds", "0", "--methods", "stepwise"])
    assert (args.folds, args.workers, args.seed, args.resamples, args.honest_folds) == (3, -1, 0, 0, 0)


@pytest.mark.parametrize("argv, words", [
    (["search", "t.csv", "-r", "y", "--methods", "both"], "did you mean 'stepwise'"),
    (["search", "t.csv", "-r", "y", "--statsmodels-convention"], "did you mean --parameter-count coefficients-only"),
    (["search", "t.csv", "-r", "y", "--parameter-count", "statsmodels"], "did you mean 'coefficients-only'"),
])
def test_former_names_are_refused_naming_the_new_one(argv, words, capsys):
    assert words in _refused(argv, capsys)


def test_the_parameter_count_is_passed_on():
    args = build_parser().parse_args(["search", "t.csv", "-r", "y", "--parameter-count", "coefficients-only"])
    from selectkit import settings

    assert settings.resolve(cli._given(args, cli._SEARCH_SETTINGS), where="cli")["parameter_count"] == \
        "coefficients-only"
    plain = build_parser().parse_args(["search", "t.csv", "-r", "y"])
    assert settings.resolve(cli._given(plain, cli._SEARCH_SETTINGS), where="cli")["parameter_count"] == \
        "sigma-counted"


# --------------------------------------------------------------------------- counts and sizes


@pytest.mark.parametrize("argv, words", [
    (["search", "t.csv", "-r", "y", "--resamples", "-1"], "--resamples"),
    (["search", "t.csv", "-r", "y", "--shortlist-size", "0"], "--shortlist-size"),
    (["search", "t.csv", "-r", "y", "--folds", "1"], "--folds"),
    (["search", "t.csv", "-r", "y", "--folds", "-5"], "--folds"),
    (["search", "t.csv", "-r", "y", "--honest-folds", "1"], "--honest-folds"),
    (["search", "t.csv", "-r", "y", "--honest-folds", "-3"], "--honest-folds"),
    (["search", "t.csv", "-r", "y", "--workers", "0"], "--workers"),
    (["search", "t.csv", "-r", "y", "--workers", "-2"], "--workers"),
    (["search", "t.csv", "-r", "y", "--seed", "-1"], "--seed"),
    (["search", "t.csv", "-r", "y", "--keep-within", "-0.5"], "--keep-within"),
    (["search", "t.csv", "-r", "y", "--time-budget", "0"], "--time-budget"),
    (["search", "t.csv", "-r", "y", "--time-budget", "nan"], "--time-budget"),
    (["search", "t.csv", "-r", "y", "--resamples", "2.5"], "must be a whole number"),
    (["demo", "--workers", "0"], "--workers"),
    (["demo", "--seed", "-4"], "--seed"),
    (["job", "resume", "results", "--workers", "-7"], "--workers"),
])
def test_a_negative_or_empty_count_is_refused_in_one_line(argv, words, capsys):
    line = _refused(argv, capsys)
    assert words in line and ("must be" in line or "write" in line)  # names the option and says what it takes


def test_the_refusal_holds_through_a_real_process(tmp_path):
    proc = subprocess.run(_python("search", "t.csv", "-r", "y", "--resamples", "-1"), capture_output=True,
                          text=True, timeout=120, cwd=tmp_path, env=_environment())
    assert proc.returncode == 2
    assert proc.stderr.strip().splitlines() == [
        "selectkit search: error: argument --resamples: must be 0 (skip) or a positive number of resamples "
        "(got -1) (see selectkit search --help)"]


# --------------------------------------------------------------------------- files that are not tables


def _nested_table(path):
    import pandas as pd

    rng = np.random.default_rng(2)
    frame = pd.DataFrame({"y": rng.normal(size=20), "x": rng.normal(size=20)})
    frame["readings"] = [rng.normal(size=2) for _ in range(20)]  # a Parquet list column
    frame.to_parquet(path)


@pytest.mark.parametrize("name, make, argv, words", [
    ("bays.csv", lambda p: p.write_bytes(bytes(range(256)) * 4), ["-r", "y"], "'bays.csv' looks like binary data"),
    ("bays.csv", lambda p: p.write_bytes(b"%PDF-1.4\n" + bytes(64)), ["-r", "y"], "looks like a PDF document"),
    ("bays.parquet", _nested_table, ["-r", "readings"], "response column 'readings' holds lists"),
    ("bays.parquet", _nested_table, ["-r", "y", "--predictors", "x,readings"], "column 'readings' holds lists"),
])
def test_a_file_that_is_not_a_table_gets_one_line_and_exit_2(tmp_path, capsys, monkeypatch, name, make, argv,
                                                             words):
    if name.endswith(".parquet"):
        pytest.importorskip("pyarrow")
    make(tmp_path / name)
    monkeypatch.chdir(tmp_path)
    capsys.readouterr()
    code = main(["search", name, *argv, "-o", "out"])
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and words in lines[0], err
    assert "Traceback" not in err and "internal error" not in err


# --------------------------------------------------------------------------- a closed pipe


@pytest.fixture()
def finished_job(tmp_path):
    from selectkit.jobs import load_job
    from tests.test_jobs import run_fake, write_job, write_table

    write_table(tmp_path / "bays.csv")
    run_fake(load_job(write_job(tmp_path)))
    return tmp_path / "results"


def _with_reader_gone(*args, cwd):
    """Run selectkit with its standard output a pipe whose reader has already gone (as `| head` after
    its lines)."""
    child = subprocess.Popen(_python(*args), stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=cwd,
                             env=_environment())
    child.stdout.close()  # long before the child has imported anything and printed
    err = child.stderr.read().decode()
    child.stderr.close()
    return child.wait(timeout=120), err


def test_job_status_into_a_closed_pipe_ends_quietly(finished_job):
    code, err = _with_reader_gone("job", "status", str(finished_job), cwd=finished_job.parent)
    assert code == cli.EXIT_BROKEN_PIPE
    assert err == ""  # no traceback, no "internal error", no "Exception ignored" at exit


def test_forms_into_a_closed_pipe_ends_quietly(tmp_path):
    _small_frame().to_csv(tmp_path / "bays.csv", index=False)
    code, err = _with_reader_gone("forms", "bays.csv", "-r", "yield_kg_m2", cwd=tmp_path)
    assert code == cli.EXIT_BROKEN_PIPE and err == ""


def test_job_status_to_an_open_reader_still_prints(finished_job):
    proc = subprocess.run(_python("job", "status", str(finished_job)), capture_output=True, text=True,
                          timeout=120, env=_environment())
    assert proc.returncode == 0 and proc.stdout.strip() and proc.stderr == ""


# --------------------------------------------------------------------------- warnings


def _noisy_command(args):
    """Stands in for a command during which libraries warn: a repeated message, and numpy's log of 0."""
    warnings.warn("the design matrix is nearly singular\n  (condition number 3e12)", UserWarning)
    warnings.warn("the design matrix is nearly singular\n  (condition number 3e12)", UserWarning)
    with np.errstate(divide="warn"):
        np.log(np.zeros(1))
    return 0


def test_library_warnings_become_one_plain_line_each(monkeypatch, capsys):
    monkeypatch.setattr(cli, "_run_forms", _noisy_command)
    capsys.readouterr()
    assert main(["forms", "t.csv", "-r", "y"]) == 0
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 2, lines  # the repeated warning is shown once
    assert all(line.startswith("selectkit: warning from ") for line in lines)
    assert not any(".py" in line or os.sep + "tests" in line for line in lines)  # no source paths
    assert "nearly singular (condition number 3e12)" in lines[0]
    assert "divide by zero" in lines[1] and "results it touched may be missing" in lines[1]


def test_with_debug_warnings_are_left_to_python(monkeypatch, capsys):
    monkeypatch.setattr(cli, "_run_forms", _noisy_command)
    with pytest.warns(UserWarning, match="nearly singular"), pytest.warns(RuntimeWarning, match="divide by zero"):
        assert main(["forms", "t.csv", "-r", "y", "--debug"]) == 0
    assert "selectkit: warning" not in capsys.readouterr().err


def test_the_warning_display_is_restored_after_main(monkeypatch):
    before = warnings.showwarning
    monkeypatch.setattr(cli, "_run_forms", lambda args: 0)
    main(["forms", "t.csv", "-r", "y"])
    assert warnings.showwarning is before
