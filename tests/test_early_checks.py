"""Settings that can be judged before any search work are judged then (issue: validation after the work).

Each bad setting must fail before a single search unit runs: the stand-ins
below make any search work fail loudly, so a check that came too late would
show up as the wrong error.  Jobs whose failure was a setting can be fixed and
continued; a setting the stored units depend on still refuses, naming it.
"""

from __future__ import annotations

import os
import re

import numpy as np
import pandas as pd
import pytest

from selectkit import api
from selectkit.errors import JobFileError, OptionError, StoreError
from selectkit.jobs import load_job, store_status
from selectkit.jobs.runner import _changes_units, _run
from tests.test_jobs import FakeEngine, run_fake, write_job, write_table
from tests.test_jobs_resume import REAL_JOB, TablesEngine, write_positive_table


def _bays(n=40, seed=0):
    """Invented greenhouse bays: yield from light and CO2 (plus a distractor)."""
    rng = np.random.default_rng(seed)
    light = rng.uniform(10, 40, n)
    co2 = rng.uniform(100, 600, n)
    density = rng.uniform(2, 4, n)
    yield_kg = 2 + 0.3 * light + 0.004 * co2 + rng.normal(0, 0.5, n)
    return pd.DataFrame({"yield_kg_m2": yield_kg, "light_mol_m2_day": light, "co2_above_ambient_ppm": co2,
                         "plant_density_m2": density})


@pytest.fixture
def no_search_work(monkeypatch):
    """Make the first piece of search work (the candidates, the moments pass, a unit) fail loudly."""
    def refuse(*args, **kwargs):
        raise AssertionError("search work started before the settings were checked")

    import selectkit.candidates
    import selectkit.moments

    monkeypatch.setattr(selectkit.candidates, "build_candidates", refuse)
    monkeypatch.setattr(selectkit.moments, "moments_of", refuse)
    monkeypatch.setattr(api, "run_methods", refuse)


# --------------------------------------------------------------------------- the notebook face
def test_folds_larger_than_the_rows_fail_before_any_search(no_search_work):
    with pytest.raises(OptionError, match=r"folds = 1000: 1000 folds need at least 1000 rows; the data have 40"):
        api.prepare_search(_bays(), response="yield_kg_m2", folds=1000)
    with pytest.raises(OptionError, match=r"honest_folds = 41: .*the data have 40"):
        api.prepare_search(_bays(), response="yield_kg_m2", honest_folds=41)


@pytest.mark.parametrize("option, value, words", [
    ("seed", -1, "seed must be 0 or more (seeds of numpy's SeedSequence are non-negative) (got -1)"),
    ("seed", 1.5, "seed must be a whole number"),
    ("resamples", -3, "resamples must be 0 (skip) or a positive number of resamples (got -3)"),
    ("folds", 1, "folds must be at least 2 folds"),
    ("time_budget", -5, "time_budget must be a positive number of seconds"),
])
def test_bad_numbers_fail_before_the_data_are_read(option, value, words, tmp_path):
    # the table does not even exist: the option is refused first, so no time is spent reading
    with pytest.raises(OptionError, match=re.escape(words)):
        api.prepare_search(tmp_path / "not-there.csv", response="yield_kg_m2", **{option: value})


def test_output_folder_that_is_a_file_or_under_a_file_is_refused(tmp_path):
    blocker = tmp_path / "shortlist-here"
    blocker.write_text("a file, not a folder")
    with pytest.raises(OptionError, match="is a file, not a folder"):
        api.check_output_folder(blocker)
    with pytest.raises(OptionError, match="cannot be made: .* is a file"):
        api.check_output_folder(blocker / "inside")
    assert api.check_output_folder(tmp_path / "new" / "deeper") == tmp_path / "new" / "deeper"
    assert not (tmp_path / "new").exists()  # the check leaves nothing behind
    assert sorted(p.name for p in tmp_path.iterdir()) == ["shortlist-here"]


def test_output_folder_where_no_file_can_be_made_is_refused(tmp_path, monkeypatch):
    import tempfile

    def no_room(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(tempfile, "mkstemp", no_room)
    with pytest.raises(OptionError, match="is not writable.*Permission denied"):
        api.check_output_folder(tmp_path)


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0,
                    reason="the superuser may write into a read-only folder")
def test_read_only_output_folder_is_refused(tmp_path):
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        with pytest.raises(OptionError, match="is not writable"):
            api.check_output_folder(folder)
    finally:
        folder.chmod(0o755)


def test_unreachable_scheduler_is_refused_before_the_data_are_read(monkeypatch, no_search_work):
    pytest.importorskip("distributed")
    original = api.check_scheduler
    monkeypatch.setattr(api, "check_scheduler", lambda scheduler, timeout=10.0: original(scheduler, timeout=1.0))
    with pytest.raises(OptionError, match="cannot reach the Dask scheduler at 'tcp://127.0.0.1:1'"):
        api.search(_bays(), response="yield_kg_m2", backend="dask", scheduler="tcp://127.0.0.1:1")
    with pytest.raises(OptionError, match="needs backend 'dask'"):
        api.check_run_options(backend="loky", scheduler="tcp://127.0.0.1:1")
    with pytest.raises(OptionError, match="n_jobs"):
        api.check_run_options(n_jobs=0)


def _recording_scheduler_check(monkeypatch):
    """Replace the scheduler check by one that records the timeout it was given and refuses, as out of reach."""
    seen = []

    def check(scheduler, timeout=10.0):
        seen.append(timeout)
        raise OptionError(f"cannot reach the Dask scheduler at {scheduler!r} within {timeout:g} s (stand-in)")

    monkeypatch.setattr(api, "check_scheduler", check)
    return seen


def test_the_scheduler_timeout_is_settable_and_checked(monkeypatch, no_search_work):
    seen = _recording_scheduler_check(monkeypatch)
    with pytest.raises(OptionError, match="within 2.5 s"):
        api.search(_bays(), response="yield_kg_m2", backend="dask", scheduler="tcp://127.0.0.1:1",
                   scheduler_timeout=2.5)
    assert seen == [2.5]
    for bad in (0, -1, float("nan"), "10", True):
        with pytest.raises(OptionError, match="scheduler timeout must be a positive number of seconds"):
            api.check_run_options(backend="dask", scheduler="tcp://127.0.0.1:1", timeout=bad)


# --------------------------------------------------------------------------- the command line
def _cli(args, capsys):
    from selectkit.cli import main

    capsys.readouterr()
    try:
        code = main(args)
    except SystemExit as stop:  # argparse refuses some values itself, also with exit code 2
        code = stop.code
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("extra, words", [
    (["--folds", "1000"], "1000 folds need at least 1000 rows; the data have 40"),
    (["--seed", "-2"], "-2"),
    (["--resamples", "-1"], "resamples"),
])
def test_cli_bad_settings_exit_2_before_any_search(tmp_path, capsys, monkeypatch, no_search_work, extra, words):
    _bays().to_csv(tmp_path / "bays.csv", index=False)
    monkeypatch.chdir(tmp_path)
    code, out, err = _cli(["search", "bays.csv", "-r", "yield_kg_m2", "-o", "out", *extra], capsys)
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("selectkit") and "error: " in lines[0] and words in lines[0], err
    assert "Traceback" not in err and not (tmp_path / "out").exists()


def test_cli_output_that_is_a_file_exits_2_before_reading(tmp_path, capsys, monkeypatch):
    _bays().to_csv(tmp_path / "bays.csv", index=False)
    (tmp_path / "out").write_text("taken")
    monkeypatch.chdir(tmp_path)

    def refuse(*args, **kwargs):
        raise AssertionError("the data were read before the output folder was checked")

    monkeypatch.setattr(api, "prepare_search", refuse)
    code, out, err = _cli(["search", "bays.csv", "-r", "yield_kg_m2", "-o", "out"], capsys)
    assert code == 2 and "is a file, not a folder" in err and len(err.strip().splitlines()) == 1


def test_cli_unreachable_scheduler_exits_2_before_reading(tmp_path, capsys, monkeypatch):
    pytest.importorskip("distributed")
    _bays().to_csv(tmp_path / "bays.csv", index=False)
    monkeypatch.chdir(tmp_path)
    original = api.check_scheduler
    monkeypatch.setattr(api, "check_scheduler", lambda scheduler, timeout=10.0: original(scheduler, timeout=1.0))
    monkeypatch.setattr(api, "prepare_search", lambda *a, **k: (_ for _ in ()).throw(AssertionError("read")))
    code, out, err = _cli(["search", "bays.csv", "-r", "yield_kg_m2", "--backend", "dask",
                           "--scheduler", "tcp://127.0.0.1:1"], capsys)
    assert code == 2 and "cannot reach the Dask scheduler" in err and len(err.strip().splitlines()) == 1


def test_cli_scheduler_timeout_is_passed_on_and_a_bad_one_refused(tmp_path, capsys, monkeypatch, no_search_work):
    _bays().to_csv(tmp_path / "bays.csv", index=False)
    monkeypatch.chdir(tmp_path)
    seen = _recording_scheduler_check(monkeypatch)
    address = ["--backend", "dask", "--scheduler", "tcp://127.0.0.1:1"]
    code, out, err = _cli(["search", "bays.csv", "-r", "yield_kg_m2", *address, "--scheduler-timeout", "3"], capsys)
    assert code == 2 and seen == [3.0] and "within 3 s" in err and len(err.strip().splitlines()) == 1
    code, out, err = _cli(["search", "bays.csv", "-r", "yield_kg_m2", *address, "--scheduler-timeout", "0"], capsys)
    assert code == 2 and "--scheduler-timeout" in err and len(err.strip().splitlines()) == 1


# --------------------------------------------------------------------------- jobs
def test_job_with_too_many_folds_fails_before_any_unit_and_can_be_fixed(tmp_path):
    write_positive_table(tmp_path / "bays.csv")
    job = tmp_path / "job.toml"
    job.write_text(REAL_JOB.replace("folds = 3", "folds = 1000"))
    with pytest.raises(JobFileError, match=r"job.toml.*1000 folds need at least 1000 rows"):
        _run(load_job(job), resume=True, progress=False, engine=TablesEngine())
    status = store_status(tmp_path / "results")
    assert status.state == "failed" and status.units_done == 0  # not "interrupted"
    assert "1000 folds" in status.stopped_by

    job.write_text(REAL_JOB)  # the fix: folds back to 3; no --fresh needed
    fixed = _run(load_job(job), resume=True, progress=False, engine=TablesEngine())
    assert fixed.complete and fixed.units_resumed == 0
    assert store_status(tmp_path / "results").state == "complete"


def test_ranking_only_settings_may_change_on_resume_and_say_so(tmp_path):
    """Stop a job part-way, change settings used only after the units, resume: the units are kept."""
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, exhaustive="chunks = 12\ndelay = 0.05", extra_run='time_budget = "0.2s"\n'))
    first = run_fake(spec)
    assert not first.complete and first.units_done >= 1
    changed = spec.with_settings(time_budget=None, folds=7, shortlist_size=3, resamples=0, honest_folds=0)
    again = run_fake(changed)
    assert again.complete and again.units_resumed == first.units_done
    assert any("[ranking] shortlist_size: 8 -> 3" in n and "[ranking] folds: 5 -> 7" in n for n in again.notes)
    assert len(pd.read_csv(again.outputs["shortlist (CSV)"])) == 3

    # a setting the units depend on still refuses, in one line naming it
    with pytest.raises(StoreError, match=r"\[run\] seed: 3 -> 9.*the stored units depend on it") as caught:
        run_fake(changed.with_settings(seed=9))
    assert "\n" not in str(caught.value)


def test_which_settings_change_the_units(tmp_path):
    write_table(tmp_path / "bays.csv")
    base = load_job(write_job(tmp_path))  # methods = ["exhaustive"]
    assert not _changes_units("ranking.folds", base, base.with_settings(folds=9))
    assert not _changes_units("ranking.criterion", base, base.with_settings(criterion="aic"))  # exhaustive only
    assert not _changes_units("ranking.shortlist_size", base, base.with_settings(shortlist_size=2))
    stepwise = base.with_settings(methods=("stepwise",))
    # stepwise steers by the criterion (BIC to explain by default): AIC would change its path
    assert _changes_units("ranking.criterion", stepwise, stepwise.with_settings(criterion="aic"))
    assert not _changes_units("ranking.criterion", stepwise, stepwise.with_settings(criterion="bic"))
    crossval = base.with_settings(methods=("crossval",))
    assert _changes_units("ranking.folds", crossval, crossval.with_settings(folds=9))
    assert _changes_units("forms.forms", base, base.with_settings(forms=("log",)))


def test_settings_may_change_freely_while_no_unit_has_finished(tmp_path):
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, exhaustive="chunks = 4\ndelay = 0.05", extra_run="time_budget = 1e-9\n"))
    first = run_fake(spec)
    assert first.units_done == 0
    again = run_fake(spec.with_settings(seed=11, time_budget=None))
    assert again.complete and any("before any unit had finished" in n for n in again.notes)


def test_job_output_that_is_a_file_is_refused_before_the_store(tmp_path):
    write_table(tmp_path / "bays.csv")
    (tmp_path / "results").write_text("taken")
    spec = load_job(write_job(tmp_path))
    with pytest.raises(JobFileError, match=r"\[run\] output: .*is a file, not a folder"):
        run_fake(spec)
    assert (tmp_path / "results").read_text() == "taken"


def test_job_finish_failure_is_recorded_as_failed_not_interrupted(tmp_path):
    class Failing(FakeEngine):
        def finish(self, setup, founds, **options):
            raise ValueError("ranking refused")

    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, exhaustive="chunks = 3"))
    with pytest.raises(ValueError, match="ranking refused"):
        _run(spec, resume=True, progress=False, engine=Failing())
    status = store_status(tmp_path / "results")
    assert status.state == "failed" and "ranking refused" in status.stopped_by and status.units_done == 3
    again = run_fake(spec)  # the cause gone, a resume finishes from the stored units
    assert again.complete and again.units_resumed == 3


def test_job_scheduler_timeout_is_read_checked_and_used(tmp_path, monkeypatch):
    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, extra_run='backend = "dask"\nscheduler = "tcp://127.0.0.1:1"\n'
                                                  'scheduler_timeout = 4\n'))
    assert spec.scheduler_timeout == 4.0
    assert spec.with_settings(scheduler_timeout=30.0).fingerprint() == spec.fingerprint()  # where, not what
    seen = _recording_scheduler_check(monkeypatch)
    with pytest.raises(OptionError, match="within 4 s"):
        run_fake(spec)
    assert seen == [4.0]
    with pytest.raises(JobFileError, match=r"\[run\] scheduler_timeout must be a positive number"):
        load_job(write_job(tmp_path, extra_run="scheduler_timeout = -3\n"))
