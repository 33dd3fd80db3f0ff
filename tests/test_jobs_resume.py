"""A job killed with SIGKILL part-way and resumed ends with the shortlist of an uninterrupted run.

The job runs in a child process (the stand-in search of ``tests/test_jobs.py``
through the real unit loop of ``api.run_methods``); the parent watches the run
store read-only and kills the child once a number of units, drawn with a
seeded generator, has been committed.
"""

from __future__ import annotations

import shutil
from pathlib import Path
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from selectkit.errors import StoreBusyError, StoreError
from selectkit.jobs import load_job, store_status
from tests.test_jobs import uninterrupted_shortlist, ROOT, _cli, run_fake, write_job, write_table

UNITS = 12
CHILD = "import sys; from selectkit.jobs import load_job; from tests.test_jobs import run_fake; run_fake(load_job(sys.argv[1]))"


def _start_child(job_path):
    return subprocess.Popen([sys.executable, "-c", CHILD, str(job_path)], cwd=ROOT,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)


def _wait_for_units(folder, count, child, timeout=60.0):
    """Poll the store read-only until ``count`` units are committed; return the status seen."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if child.poll() is not None:
            raise AssertionError(f"the job ended before it could be killed: {child.stderr.read()}")
        try:
            status = store_status(folder)
        except StoreError:
            status = None  # not created yet
        if status is not None and status.units_total and status.units_done >= count:
            return status
        time.sleep(0.01)
    raise AssertionError(f"{count} units were not committed within {timeout} s")


@pytest.fixture(scope="module")
def straight_shortlist(tmp_path_factory):
    return uninterrupted_shortlist(tmp_path_factory.mktemp("straight"))


# Points at which to kill: numbers of committed units, drawn once from a seeded generator.
KILL_POINTS = sorted(np.random.default_rng(20261202).choice(np.arange(0, UNITS - 1), size=3, replace=False).tolist())


@pytest.mark.parametrize("kill_after", KILL_POINTS)
def test_sigkill_then_resume_gives_the_uninterrupted_shortlist(tmp_path, straight_shortlist, kill_after):
    write_table(tmp_path / "bays.csv")
    job = write_job(tmp_path, exhaustive=f"chunks = {UNITS}\ndelay = 0.12")
    child = _start_child(job)
    try:
        seen = _wait_for_units(tmp_path / "results", kill_after, child)
        assert seen.state == "running" and seen.running
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    assert child.returncode == -signal.SIGKILL
    killed = store_status(tmp_path / "results")
    assert killed.state == "interrupted" and not killed.running
    assert kill_after <= killed.units_done < UNITS
    assert "selectkit job resume" in killed.render()
    assert not (tmp_path / "results" / "shortlist.csv").exists()

    resumed = run_fake(load_job(job))
    assert resumed.complete and resumed.units_resumed == killed.units_done
    assert resumed.units_done == UNITS
    assert (tmp_path / "results" / "shortlist.csv").read_bytes() == straight_shortlist


def test_second_run_on_a_busy_store_is_refused(tmp_path):
    write_table(tmp_path / "bays.csv")
    # Long enough (40 units of 0.5 s) that the first job still runs while the second is refused.
    job = write_job(tmp_path, exhaustive="chunks = 40\ndelay = 0.5")
    child = _start_child(job)
    try:
        status = _wait_for_units(tmp_path / "results", 1, child)
        assert status.state == "running" and "running" in status.render()
        assert status.eta is not None and status.eta > 0 and "left at this run's pace" in status.render()
        with pytest.raises(StoreBusyError, match=f"in use by another job \\(process {child.pid}\\)"):
            run_fake(load_job(job))
        done = _cli("run", str(job), cwd=tmp_path)
        assert done.returncode == 2 and "in use by another job" in done.stderr
        assert len(done.stderr.strip().splitlines()) == 1
        # The refused runs left the store alone: the first job still runs and commits units.
        later = _wait_for_units(tmp_path / "results", status.units_done + 1, child)
        assert later.running and later.state == "running"
    finally:
        child.kill()
        child.wait(timeout=30)
    assert store_status(tmp_path / "results").state == "interrupted"


def test_ctrl_c_to_a_running_job_writes_an_incomplete_shortlist(tmp_path):
    """SIGINT to the whole process group, as Ctrl-C on a terminal sends it: the loky workers get it too."""
    import os

    write_table(tmp_path / "bays.csv")
    job = write_job(tmp_path, exhaustive="chunks = 12\ndelay = 0.25", extra_run="workers = 2\n")
    child = subprocess.Popen([sys.executable, "-c", CHILD, str(job)], cwd=ROOT, start_new_session=True,
                             stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_units(tmp_path / "results", 2, child)
        os.killpg(child.pid, signal.SIGINT)
        assert child.wait(timeout=60) == 0, child.stderr.read()
    finally:
        if child.poll() is None:
            os.killpg(child.pid, signal.SIGKILL)
            child.wait()
    status = store_status(tmp_path / "results")
    assert status.state == "incomplete" and status.stopped_by == "stopped by SIGINT"
    assert status.not_exact == ("exhaustive",)
    assert 2 <= status.units_done < 12
    assert (tmp_path / "results" / "shortlist.csv").exists()
    resumed = run_fake(load_job(job).with_settings(workers=1))  # a run setting: may change on resume
    assert resumed.complete and resumed.units_resumed == status.units_done


def test_moved_output_folder_resumes_from_its_store(tmp_path):
    """``resume_job(folder)`` needs no job file: the settings come from the store."""
    from selectkit.jobs.runner import _spec_from_store

    write_table(tmp_path / "bays.csv")
    job = write_job(tmp_path, exhaustive=f"chunks = {UNITS}\ndelay = 0.05", extra_run='time_budget = "0.2s"\n')
    first = run_fake(load_job(job))
    assert not first.complete
    shutil.move(tmp_path / "results", tmp_path / "moved")
    spec = _spec_from_store(tmp_path / "moved")
    assert spec.output == (tmp_path / "moved").resolve()

    again = run_fake(spec.with_settings(time_budget=None))
    assert again.complete and again.units_resumed == first.units_done


# --------------------------------------------------------------------------- the real searches
# The same kill-and-resume check with the real pipeline (intake, candidates, exact
# best subset and stepwise, ranking).  The HTML report is left out to keep the
# test quick (its figures take seconds each); the shortlist CSV is written by
# the real writer, ``selectkit.report.tables.write_csv``.
from selectkit.jobs.runner import _ApiEngine, _run  # noqa: E402

REAL_JOB = """\
[data]
table = "bays.csv"
response = "yield_kg_m2"

[forms]
forms = ["identity", "log", "sqrt"]

[search]
methods = ["exhaustive", "stepwise"]

[ranking]
shortlist_size = 3
folds = 3

[run]
seed = 5
output = "results"
"""


class TablesEngine(_ApiEngine):
    """The real seams; ``write`` writes only the shortlist CSV (no HTML report)."""

    def write(self, result, folder):
        from selectkit.report import tables

        return {"shortlist_csv": tables.write_csv(Path(folder) / "shortlist.csv", result.ranking)}


class SlowRealEngine(TablesEngine):
    """Real searches, with a pause after each committed unit so that the child can be killed part-way."""

    def run(self, setup, *, on_unit=None, **options):
        def slowly(key, result):
            on_unit(key, result)
            time.sleep(0.2)

        return super().run(setup, on_unit=slowly if on_unit is not None else None, **options)


CHILD_REAL = ("import sys; from selectkit.jobs import load_job; from selectkit.jobs.runner import _run; "
              "from tests.test_jobs_resume import SlowRealEngine; "
              "_run(load_job(sys.argv[1]), resume=True, progress=False, engine=SlowRealEngine())")


def write_positive_table(path: Path, seed: int = 1, n: int = 200) -> Path:
    """Invented bay measurements, all positive so that log and sqrt forms exist."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    X = rng.uniform(1.0, 10.0, size=(n, 8))
    y = 3.0 + 2.0 * np.log(X[:, 0]) - 0.8 * np.sqrt(X[:, 2]) + 0.3 * X[:, 5] + rng.normal(scale=0.5, size=n)
    frame = pd.DataFrame(X, columns=[f"x{j}" for j in range(8)])
    frame.insert(0, "yield_kg_m2", y)
    frame.to_csv(path, index=False, float_format="%.8f")
    return path


@pytest.fixture(scope="module")
def real_straight(tmp_path_factory):
    folder = tmp_path_factory.mktemp("real-straight")
    write_positive_table(folder / "bays.csv")
    (folder / "job.toml").write_text(REAL_JOB)
    outcome = _run(load_job(folder / "job.toml"), resume=True, progress=False, engine=TablesEngine())
    assert outcome.complete and outcome.units_total >= 3
    return outcome


def test_real_search_job_matches_the_notebook_face(real_straight, tmp_path):
    """The job's shortlist equals selectkit.search with the same options (one code path, two faces)."""
    import pandas as pd

    from selectkit.api import search  # (selectkit.search is shadowed by the subpackage once it is imported)

    spec = load_job(real_straight.store.parent.parent / "job.toml")
    result = search(str(spec.table), **spec.search_options())
    from selectkit.report import tables

    expected = tables.write_csv(tmp_path / "shortlist.csv", result.ranking).read_bytes()
    assert real_straight.outputs["shortlist_csv"].read_bytes() == expected
    frame = pd.read_csv(real_straight.outputs["shortlist_csv"])
    # The generating model (invented data: log(x0), sqrt(x2), x5) is shortlisted.
    assert "log(x0) + sqrt(x2) + x5" in set(frame["terms"])


# Kill points as shares of the planned units (the planner decides how many there are), drawn once.
REAL_KILL_SHARES = sorted(np.round(np.random.default_rng(7).uniform(0.1, 0.9, size=2), 2).tolist())


@pytest.mark.parametrize("kill_share", REAL_KILL_SHARES)
def test_real_search_killed_and_resumed_gives_the_same_shortlist(tmp_path, real_straight, kill_share):
    kill_after = min(real_straight.units_total - 1, max(1, round(kill_share * real_straight.units_total)))
    write_positive_table(tmp_path / "bays.csv")
    (tmp_path / "job.toml").write_text(REAL_JOB)
    child = subprocess.Popen([sys.executable, "-c", CHILD_REAL, str(tmp_path / "job.toml")], cwd=ROOT,
                             stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        _wait_for_units(tmp_path / "results", kill_after, child, timeout=120)
        child.send_signal(signal.SIGKILL)
        child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    killed = store_status(tmp_path / "results")
    assert killed.state == "interrupted" and kill_after <= killed.units_done < killed.units_total
    resumed = _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=TablesEngine())
    assert resumed.complete and resumed.units_resumed == killed.units_done
    assert resumed.models_evaluated == real_straight.models_evaluated
    assert resumed.outputs["shortlist_csv"].read_bytes() == real_straight.outputs["shortlist_csv"].read_bytes()


def test_real_search_stopped_by_a_signal_then_resumed(tmp_path_factory):
    """Cross-validated search stopped after two units (SIGTERM from the progress hook) and resumed.

    The stopped run pools the finished units into a shortlist marked not proven exact; the resumed
    run ends with the shortlist of an uninterrupted run.
    """
    import os

    job = REAL_JOB.replace('methods = ["exhaustive", "stepwise"]', 'methods = ["crossval"]')
    straight_folder = tmp_path_factory.mktemp("cv-straight")
    write_positive_table(straight_folder / "bays.csv")
    (straight_folder / "job.toml").write_text(job)
    straight = _run(load_job(straight_folder / "job.toml"), resume=True, progress=False, engine=TablesEngine())
    assert straight.complete and straight.units_total >= 3

    folder = tmp_path_factory.mktemp("cv-stopped")
    write_positive_table(folder / "bays.csv")
    (folder / "job.toml").write_text(job)
    spec = load_job(folder / "job.toml")

    def stop_after_two(snapshot):
        if snapshot.units_done == 2:
            os.kill(os.getpid(), signal.SIGTERM)

    stopped = _run(spec, resume=True, progress=stop_after_two, engine=TablesEngine())
    assert not stopped.complete and stopped.units_done == 2 and stopped.stopped_by == "stopped by SIGTERM"
    assert "crossval" in stopped.not_exact
    assert stopped.outputs["shortlist_csv"].is_file()
    resumed = _run(spec.with_settings(), resume=True, progress=False, engine=TablesEngine())
    assert resumed.complete and resumed.units_resumed == 2
    assert resumed.outputs["shortlist_csv"].read_bytes() == straight.outputs["shortlist_csv"].read_bytes()


# --------------------------------------------------------------------------- finishing is checkpointed


class _NoFinish(TablesEngine):
    """Fails if the ranking stage is computed again: a resumed finish must come from the run store."""

    def finish(self, *args, **kwargs):
        raise AssertionError("the ranking stage was computed again")


def test_a_job_killed_after_its_ranking_stage_resumes_without_computing_it_again(tmp_path):
    from selectkit.jobs.store import RunStore

    write_positive_table(tmp_path / "bays.csv")
    (tmp_path / "job.toml").write_text(REAL_JOB.replace("folds = 3", "folds = 3\nresamples = 4"))
    first = _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=TablesEngine())
    assert first.complete
    shortlist = first.outputs["shortlist_csv"].read_bytes()
    first.outputs["shortlist_csv"].unlink()  # as if killed while the outputs were written

    again = _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=_NoFinish())
    assert again.complete and again.outputs["shortlist_csv"].read_bytes() == shortlist
    assert again.result.stability is not None and again.result.stability.n_boot == 4  # kept with the ranking
    with RunStore.open_read_only(first.store) as store:
        assert any("taken from the run store" in message for _, _, message in store.log_lines())


def test_a_changed_ranking_setting_computes_the_ranking_stage_again(tmp_path):
    write_positive_table(tmp_path / "bays.csv")
    (tmp_path / "job.toml").write_text(REAL_JOB)
    assert _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=TablesEngine()).complete
    (tmp_path / "job.toml").write_text(REAL_JOB.replace("shortlist_size = 3", "shortlist_size = 2"))
    with pytest.raises(AssertionError, match="computed again"):  # other settings: the kept stage does not apply
        _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=_NoFinish())
    again = _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=TablesEngine())
    assert len(again.result.shortlist) <= 2


def test_a_job_killed_during_the_honest_error_resumes_with_the_outer_folds_it_had_finished(tmp_path, monkeypatch):
    """The outer folds of the honest error are pieces the run store keeps (selectkit._kept)."""
    from selectkit.jobs.store import RunStore
    from selectkit.searches import crossval

    write_positive_table(tmp_path / "bays.csv")
    (tmp_path / "job.toml").write_text(REAL_JOB.replace("folds = 3", "folds = 3\nhonest_folds = 4"))
    straight_folder = tmp_path / "straight"
    straight_folder.mkdir()
    write_positive_table(straight_folder / "bays.csv")
    (straight_folder / "job.toml").write_text((tmp_path / "job.toml").read_text())
    straight = _run(load_job(straight_folder / "job.toml"), resume=True, progress=False, engine=TablesEngine())

    original = RunStore.record_finished
    kept = []

    def record(self, stage, basis, value, **kw):  # "killed" once two outer folds are kept
        original(self, stage, basis, value, **kw)
        if stage.startswith("honest-fold/"):
            kept.append(stage)
            if len(kept) == 2:
                raise KeyboardInterrupt

    monkeypatch.setattr(RunStore, "record_finished", record)
    with pytest.raises(KeyboardInterrupt):
        _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=TablesEngine())
    monkeypatch.setattr(RunStore, "record_finished", original)

    ran = []
    unit = crossval._procedure_unit
    monkeypatch.setattr(crossval, "_procedure_unit", lambda payload: ran.append(payload[-1]) or unit(payload))
    again = _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=TablesEngine())
    assert again.complete
    assert len(ran) == 2  # the two folds not kept; the kept two came from the store
    a, b = again.result.honest, straight.result.honest
    assert a.error == pytest.approx(b.error, rel=1e-12) and list(a.folds["terms"]) == list(b.folds["terms"])
