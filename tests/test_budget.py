"""One time budget per run: screening, searches, resamples and the honest error share one deadline.

The stand-in search of ``tests/test_jobs.py`` (a best-subset enumeration split
into units, each pausing a little) makes every stage take a known minimum
time, so a stage that ignored the budget shows up as a run that lasts many
budgets.  Bounds are loose (a budget plus a second or two); the tests check
what was cut and what the notes say, never speed.
"""

from __future__ import annotations

import pickle
import time

import pytest
from dataclasses import replace

import numpy as np
import pandas as pd

from selectkit import api
from selectkit._budget import BudgetSpent, Deadline, start_deadline
from selectkit.api import MethodRun
from selectkit.jobs import load_job
from selectkit.jobs.runner import _run
from tests.test_jobs import FakeEngine, FakeOptions, run_fake, write_job, write_table


def _bays(n=60, p=4, seed=1):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    y = 1.0 + 2.0 * X[:, 0] - 1.0 * X[:, 2] + rng.normal(scale=0.7, size=n)
    frame = pd.DataFrame(X, columns=[f"sensor_{j}" for j in range(p)])
    frame.insert(0, "yield_kg_m2", y)
    return frame


def test_deadline_counts_down_pickles_and_is_not_restarted():
    deadline = Deadline.start(60)
    assert not deadline.expired() and 59 < deadline.remaining() <= 60
    assert pickle.loads(pickle.dumps(deadline)) == deadline  # travels to worker processes unchanged
    assert start_deadline(deadline) is deadline and start_deadline(None) is None
    spent = Deadline.start(1e-9)
    time.sleep(0.001)
    assert spent.expired() and spent() and spent.remaining() == 0.0 and spent.search_budget() > 0


def _slow_setup(frame, *, budget, stability=0, honest_folds=0, delay=0.05, chunks=4):
    """A real setup (intake, candidates, moments) whose one search is the slow stand-in."""
    setup = api.prepare_search(frame, response="yield_kg_m2", forms=["identity"], resamples=stability,
                               honest_folds=honest_folds, folds=3, seed=2, time_budget=budget)
    run = MethodRun(name="exhaustive", module_name="tests.test_jobs", options=FakeOptions(chunks=chunks, delay=delay))
    return replace(setup, runs=(run,))


def test_resamples_and_honest_error_share_the_one_budget():
    # Unbudgeted, 30 resamples and 5 outer folds would take 35 searches x 4 units x 0.05 s = 7 s.
    frame = _bays()
    warm = _slow_setup(frame, budget=None, delay=0.0)
    api.finish(warm, api.run_methods(warm))  # first imports (statsmodels) out of the way of the clock
    started = time.monotonic()
    setup = _slow_setup(frame, budget=2.0, stability=30, honest_folds=5)
    founds = api.run_methods(setup)
    result = api.finish(setup, founds)
    elapsed = time.monotonic() - started
    assert elapsed < 2.0 + 1.5, elapsed  # one budget, plus at most the search in hand and the ranking
    assert founds[0].exact  # the search itself (0.2 s) finished within the budget
    notes = " ".join(result.ranking.notes)
    if result.stability is not None:
        assert result.stability.n_boot < 30
        assert "ran out during the bootstrap" in notes and "of 30 resamples finished" in notes
    else:
        assert "no stability is shown" in notes
    assert result.honest is None and "no honest error is shown" in notes


def test_a_budget_that_does_not_cut_leaves_the_result_unchanged():
    frame = _bays()
    plain = _slow_setup(frame, budget=None, delay=0.0)
    budgeted = _slow_setup(frame, budget=600, delay=0.0)
    a = api.finish(plain, api.run_methods(plain))
    b = api.finish(budgeted, api.run_methods(budgeted))
    pd.testing.assert_frame_equal(a.shortlist, b.shortlist)
    assert not any("time budget" in n for n in b.ranking.notes)


def test_honest_error_is_cut_between_outer_folds_and_says_so():
    from selectkit.searches.crossval import procedure_cv_error

    frame = _bays()
    setup = _slow_setup(frame, budget=None)
    calls = []

    def runner(candidates):
        calls.append(1)
        if len(calls) > 2:
            raise BudgetSpent("the time budget ran out during the searches")
        return api._SearchRunner(setup.runs)(candidates)

    honest = procedure_cv_error(setup.candidates, runner, criterion="bic", folds=5, seed=0,
                                deadline=Deadline.start(600))
    assert len(honest.folds) == 2 and "2 of 5 outer folds finished" in honest.notes[0]
    assert "2 of them finished within the time budget" in honest.procedure
    # without a deadline nothing is left out: all five folds (checked against a count, not a time)
    full = procedure_cv_error(setup.candidates, api._SearchRunner(setup.runs), criterion="bic", folds=5, seed=0)
    assert len(full.folds) == 5 and full.notes == ()
    # the folds that ran are the first two of the unbudgeted estimate, to the last bit
    pd.testing.assert_frame_equal(honest.folds, full.folds.iloc[:2])


def test_searches_planned_one_by_one_each_get_what_is_left():
    """Two slow searches under one budget: the second starts with what the first left, not a new budget."""
    frame = _bays()
    setup = _slow_setup(frame, budget=0.5, delay=0.1, chunks=6)
    second = MethodRun(name="stepwise", module_name="tests.test_jobs", options=FakeOptions(chunks=6, delay=0.1))
    setup = replace(setup, runs=setup.runs + (second,))
    started = time.monotonic()
    founds = api.run_methods(setup)
    assert time.monotonic() - started < 0.5 + 1.0
    assert not founds[0].exact and "ran out during search 'exhaustive'" in founds[0].stopped_by
    assert "were left when it started" in founds[0].stopped_by
    # the second search still ran one unit (so it reports something) and says the budget was spent
    assert len(founds[1]) > 0 and "ran out during search 'stepwise'" in founds[1].stopped_by
    assert "1 of 6 work units finished" in founds[1].stopped_by


# --------------------------------------------------------------------------- screening
def _wide(n=200, p=120, seed=3):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    y = 3 * X[:, 5] - 2 * X[:, 17] + X[:, 40] + rng.normal(scale=0.5, size=n)
    frame = pd.DataFrame(X, columns=[f"probe_{j:03d}" for j in range(p)])
    frame.insert(0, "yield_kg_m2", y)
    return frame


def test_screening_path_is_cut_by_the_deadline_and_says_so():
    from selectkit.searches.screen import screen_candidates

    setup = api.prepare_search(_wide(), response="yield_kg_m2", forms=["identity"], methods=["exhaustive"])
    cands = setup.candidates
    plain = screen_candidates(cands, limit=10)
    assert plain.cut_short == ""
    # A generous deadline computes the path in parts: the same entries as scikit-learn's one-call path.
    parts = screen_candidates(cands, limit=10, deadline=Deadline.start(600))
    assert parts.kept == plain.kept and parts.entry == plain.entry and parts.cut_short == ""
    # A spent deadline: only the first part (5 of 100 penalties) runs, and the result says so.
    spent = Deadline.start(1e-9)
    time.sleep(0.001)
    cut = screen_candidates(cands, limit=10, deadline=spent)
    assert "cut by the time budget" in cut.cut_short and "after 5 of 100 penalties" in cut.cut_short
    entered = [i for i, e in enumerate(cut.entry) if np.isfinite(e)]
    assert entered and all(cut.entry[i] < 5 for i in entered)
    # the terms that entered within those 5 penalties are the ones the full path has entering there
    assert entered == [i for i, e in enumerate(plain.entry) if e < 5]
    assert set(entered) <= set(cut.kept)
    assert any("cut by the time budget" in reason for _, reason in cut.set_aside)


def test_screen_search_under_a_budget_names_the_cut_stage():
    started = time.monotonic()
    result = api.search(_wide(), response="yield_kg_m2", forms=["identity"], methods=["screen"],
                        method_options={"screen": {"limit": 12}}, time_budget=1e-3)
    assert time.monotonic() - started < 30  # every stage looked at the clock (the whole run is small anyway)
    exact = result.founds[0]
    assert not exact.exact and "cut by the time budget" in exact.stopped_by
    assert any("time budget" in n for n in result.ranking.notes)
    assert len(result.shortlist) >= 1


def test_screening_is_done_once_per_run():
    from selectkit.searches import screen

    setup = api.prepare_search(_wide(), response="yield_kg_m2", forms=["identity"], methods=["screen"],
                               method_options={"screen": {"limit": 12}})
    calls = []
    original = screen.screen_candidates

    def counting(*args, **kwargs):
        calls.append(1)
        return original(*args, **kwargs)

    import unittest.mock

    with unittest.mock.patch.object(screen, "screen_candidates", counting):
        api.run_methods(setup)
    assert len(calls) == 1  # plan and merge share it (before, merge screened a second time)


# --------------------------------------------------------------------------- jobs
def test_job_budget_starts_when_the_units_begin(tmp_path):
    """Slow data preparation does not eat a job's budget: every resume runs units."""
    class SlowPrepare(FakeEngine):
        def prepare(self, spec):
            time.sleep(0.4)  # reading a big table
            return super().prepare(spec)

    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, exhaustive="chunks = 12\ndelay = 0.1", extra_run='time_budget = "0.25s"\n'))
    first = _run(spec, resume=True, progress=False, engine=SlowPrepare())
    assert not first.complete and first.units_done >= 1
    second = _run(spec, resume=True, progress=False, engine=SlowPrepare())
    assert second.units_done > first.units_done


def test_job_resume_accepts_the_durations_the_help_promises(tmp_path, capsys, monkeypatch):
    from selectkit.cli import main
    from selectkit.jobs import runner

    write_table(tmp_path / "bays.csv")
    spec = load_job(write_job(tmp_path, exhaustive="chunks = 12\ndelay = 0.05", extra_run="time_budget = 1e-9\n"))
    run_fake(spec)
    monkeypatch.setattr(runner, "_API", FakeEngine())
    monkeypatch.chdir(tmp_path)
    for given in ("60", "1m", "90s", "0.5h"):
        assert main(["job", "resume", "results", "--time-budget", given, "--quiet"]) == 0, capsys.readouterr().err
    with pytest.raises(SystemExit) as stop:  # a usage error: argparse exits with 2
        main(["job", "resume", "results", "--time-budget", "soon", "--quiet"])
    assert stop.value.code == 2 and "not a duration" in capsys.readouterr().err
