"""Job files, the run store, the runner (with a small stand-in search) and the job commands.

The stand-in search below (``plan``/``run_unit``/``merge``, the contract of
:mod:`selectkit.search`) is a plain best-subset enumeration by least squares,
split into work units; it runs through the real :func:`selectkit.api.run_methods`
so that checkpointing and resuming are tested on the real unit loop.  The
stand-in ranking scores every subset by BIC from :mod:`selectkit.criteria`.
Other job tests (resume after SIGKILL, Dask) import these helpers.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from selectkit import criteria
from selectkit.errors import JobFileError, OptionError, SelectkitError, StoreBusyError, StoreError
from selectkit.jobs import (
    RunStore,
    STORE_NAME,
    data_fingerprint,
    load_job,
    parse_duration,
    parse_job,
    starter_job,
    store_status,
)
from selectkit.jobs.runner import _ApiEngine, _run
from selectkit.jobs.store import StoreLock
from selectkit.parallel import WorkUnit
from selectkit.searches import Found

ROOT = Path(__file__).resolve().parents[1]
PREDICTORS = [f"x{j}" for j in range(8)]


# --------------------------------------------------------------------------- stand-in search
@dataclass(frozen=True)
class FakeOptions:
    """Options of the stand-in search: units, and a pause per unit (to make runs long enough to kill)."""

    chunks: int = 12
    delay: float = 0.0
    fail_at: int = -1  # this unit raises while the file ``fail_while`` exists
    fail_while: str = ""


def plan(candidates, moments, options):
    m = len(candidates.terms)
    masks = list(range(1, 2 ** m))
    failing = (options.fail_at, options.fail_while)
    return [WorkUnit(key=f"chunk-{i:03d}", payload=(candidates.matrix, candidates.y, tuple(masks[i::options.chunks]),
                                                  options.delay, i, failing))
            for i in range(options.chunks)]


def run_unit(unit):
    X, y, masks, delay, index, (fail_at, fail_while) = unit.payload
    time.sleep(delay)
    if index == fail_at and os.path.exists(fail_while):
        raise RuntimeError(f"unit {index} failed on purpose")
    n, m = X.shape
    subsets, rss = [], []
    for mask in masks:
        cols = [j for j in range(m) if mask >> j & 1]
        design = np.column_stack([np.ones(n), X[:, cols]])
        coef, *_ = np.linalg.lstsq(design, y, rcond=None)
        subsets.append(tuple(cols))
        rss.append(float(np.sum((y - design @ coef) ** 2)))
    return {"subsets": subsets, "rss": rss, "evaluated": len(masks)}


def merge(candidates, moments, options, results):
    subsets, rss = [], []
    for result in results:
        if result is not None:
            subsets.extend(result["subsets"])
            rss.extend(result["rss"])
    return Found(method="exhaustive", subsets=tuple(subsets), rss=np.array(rss),
                 k=np.array([len(s) + 1 for s in subsets]), n=candidates.matrix.shape[0],
                 evaluated=len(subsets), exact=all(r is not None for r in results))


class FakeResult:
    """Shortlist of the stand-in ranking; writes CSV and JSON atomically like ``Result.write``."""

    def __init__(self, shortlist):
        self.shortlist = shortlist

    def write(self, folder):
        from selectkit._io import atomic_write_text

        folder = Path(folder)
        csv = atomic_write_text(folder / "shortlist.csv", self.shortlist.to_csv(index=False, float_format="%.10g"))
        js = atomic_write_text(folder / "shortlist.json", self.shortlist.to_json(orient="records", double_precision=10))
        return {"shortlist (CSV)": csv, "shortlist (JSON)": js}


class FakeEngine(_ApiEngine):
    """The runner's seams with the real ``run_methods`` and a stand-in prepare and finish."""

    def prepare(self, spec):
        from selectkit.api import MethodRun, SearchSetup
        from selectkit.moments import compute_moments
        from tests.factories import make_candidates

        frame = pd.read_csv(spec.table)
        columns = list(spec.predictors or ()) or [c for c in frame.columns if c != spec.response]
        cands = make_candidates(frame[columns].to_numpy(float), frame[spec.response].to_numpy(float), names=columns)
        settings = dict(spec.method_options.get("exhaustive", {}))
        options = FakeOptions(**settings)
        runs = (MethodRun(name="exhaustive", module_name="tests.test_jobs", options=options),)
        return SearchSetup(dataset=None, candidates=cands, moments=compute_moments(cands.matrix, cands.y),
                           runs=runs, settings={"shortlist_size": spec.shortlist_size})

    def finish(self, setup, founds, **options):
        found = founds[0]
        names = [t.name for t in setup.candidates.terms]
        bic = criteria.bic(found.rss, found.n, found.k)
        rows = sorted(
            ((float(b), int(k), " + ".join(names[i] for i in s), float(r)) for b, k, s, r in
             zip(bic, found.k, found.subsets, found.rss)),
        )[: setup.settings["shortlist_size"]]
        frame = pd.DataFrame(rows, columns=["bic", "coefficients", "terms", "rss"])
        return FakeResult(frame)


def run_fake(spec, *, resume=True, progress=False):
    return _run(spec, resume=resume, progress=progress, engine=FakeEngine())


# --------------------------------------------------------------------------- fixtures

def uninterrupted_shortlist(folder):
    """The shortlist CSV bytes of a job run straight through in ``folder`` (the reference a resumed or
    repaired run must reproduce), with the stand-in search of this file."""
    write_table(folder / "bays.csv")
    outcome = run_fake(load_job(write_job(folder)))
    assert outcome.complete
    return outcome.outputs["shortlist (CSV)"].read_bytes()

def write_table(path: Path, seed: int = 0, n: int = 200) -> Path:
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, len(PREDICTORS)))
    y = 1.0 + 2.0 * X[:, 0] - 1.5 * X[:, 2] + 0.8 * X[:, 5] + rng.normal(scale=1.0, size=n)
    frame = pd.DataFrame(X, columns=PREDICTORS)
    frame.insert(0, "yield_kg_m2", y)
    frame.to_csv(path, index=False, float_format="%.8f")
    return path


def write_job(folder: Path, *, extra_run: str = "", exhaustive: str = "chunks = 12", output="results",
              table="bays.csv") -> Path:
    text = textwrap.dedent(f"""\
        [data]
        table = "{table}"
        response = "yield_kg_m2"

        [search]
        methods = ["exhaustive"]
        [search.exhaustive]
        {exhaustive}

        [ranking]
        shortlist_size = 8

        [run]
        seed = 3
        output = "{output}"
        """) + extra_run
    path = folder / "bays.toml"
    path.write_text(text)
    return path


@pytest.fixture
def job_folder(tmp_path):
    write_table(tmp_path / "bays.csv")
    return tmp_path


# --------------------------------------------------------------------------- durations
@pytest.mark.parametrize("text, seconds", [("8h", 28800.0), ("90m", 5400.0), ("1h30m", 5400.0), ("1h 30m", 5400.0),
                                           ("45s", 45.0), ("2d", 172800.0), (3600, 3600.0), (0.5, 0.5),
                                           ("1.5h", 5400.0)])
def test_durations(text, seconds):
    assert parse_duration(text) == seconds


@pytest.mark.parametrize("bad", ["-5m", "8 hours", "h", "", 0, -3, True, "0s", float("inf")])
def test_bad_durations_are_refused(bad):
    with pytest.raises(JobFileError):
        parse_duration(bad)


# --------------------------------------------------------------------------- job files
FULL_JOB = """\
[data]
table = "bays.csv"
response = "yield_kg_m2"
predictors = ["x0", "x1", "x2", "x3"]
always_include = ["x0"]
leave_out = []
incomplete_rows = "drop"
time_ordered = true

[forms]
forms = ["identity", "log", "sqrt"]
fractional_polynomials = true
shifts = { x1 = 1, x2 = "auto" }
interactions = ["x0*x1"]
response_form = "boxcox:0.5"

[search]
methods = ["exhaustive", "stepwise"]
exact_limit = 30
[search.exhaustive]
max_size = 3

[ranking]
aim = "predict"
criterion = "aicc"
parameter_count = "coefficients-only"
shortlist_size = 5
keep_within = 4
folds = 4
resamples = 20

[run]
seed = 11
workers = 2
backend = "dask"
scheduler = "tcp://127.0.0.1:8786"
time_budget = "1h30m"
output = "out"
"""


def test_full_job_file_is_read(job_folder):
    path = job_folder / "full.toml"
    path.write_text(FULL_JOB)
    spec = load_job(path)
    assert spec.table == (job_folder / "bays.csv").resolve()
    assert spec.output == (job_folder / "out").resolve()
    assert spec.predictors == ("x0", "x1", "x2", "x3")
    assert spec.time_budget == 5400.0
    assert spec.workers == 2 and spec.backend == "dask" and spec.scheduler == "tcp://127.0.0.1:8786"
    assert dict(spec.method_options["exhaustive"]) == {"max_size": 3}
    options = spec.search_options()
    assert options["shifts"] == {"x1": 1, "x2": "auto"}
    assert options["interactions"] == (("x0", "x1"),)
    assert options["response_form"] == "boxcox:0.5"
    assert options["keep_within"] == 4.0 and options["resamples"] == 20 and options["incomplete_rows"] == "drop"
    assert "time_budget" not in options  # enforced by the runner, between units


def test_search_options_are_accepted_by_prepare_search(job_folder):
    """Every key search_options() gives is a keyword of api.prepare_search (checked by signature)."""
    import inspect

    from selectkit import api

    path = job_folder / "full.toml"
    path.write_text(FULL_JOB)
    parameters = inspect.signature(api.prepare_search).parameters
    unknown = set(load_job(path).search_options()) - set(parameters)
    assert not unknown
    # Every method name a job accepts is one the api knows.
    from selectkit.jobs.spec import METHOD_NAMES

    assert set(METHOD_NAMES) == set(api.METHODS)


def test_spec_round_trips_through_a_dict(job_folder):
    path = job_folder / "full.toml"
    path.write_text(FULL_JOB)
    spec = load_job(path)
    again = type(spec).from_dict(json.loads(json.dumps(spec.to_dict())))
    assert again == spec
    assert again.fingerprint() == spec.fingerprint()
    assert again.search_options() == spec.search_options()


def test_run_settings_do_not_change_the_fingerprint(job_folder):
    base = parse_job(FULL_JOB, base=job_folder)
    assert base.with_settings(workers=1, backend="loky", scheduler=None, time_budget=None).fingerprint() == base.fingerprint()
    assert base.with_settings(seed=12).fingerprint() != base.fingerprint()
    assert base.with_settings(criterion="bic").fingerprint() != base.fingerprint()


@pytest.mark.parametrize("edit, words", [
    (("[run]", "[run]\nwokers = 2"), ["'wokers'", "did you mean 'workers'"]),
    (("[ranking]", "[ranking]\nseed = 2"), ["'seed'", "belongs in [run]"]),
    (("[ranking]", "[rankng]"), ["unknown section [rankng]", "did you mean 'ranking'"]),
    (("max_size = 3", "time_budget = 60"), ["[search.exhaustive] time_budget", "[run] time_budget"]),
    (('[search.exhaustive]', '[search.exhaustve]'), ["[search.exhaustve]", "did you mean 'exhaustive'"]),
    (('methods = ["exhaustive", "stepwise"]\nexact_limit = 30\n[search.exhaustive]',
      'methods = ["auto"]\nexact_limit = 30\n[search.auto]'), ["[search.auto]: cannot hold settings"]),
    (('workers = 2', 'workers = "two"'), ["[run] workers", "whole number"]),
    (('workers = 2', 'workers = 0'), ["[run] workers", "positive number of worker processes"]),
    (('time_budget = "1h30m"', 'time_budget = -60'), ["time_budget", "positive"]),
    (('time_budget = "1h30m"', 'time_budget = "-2h"'), ["time_budget", "not a duration"]),
    (('table = "bays.csv"', 'table = "missing.csv"'), ["missing.csv", "does not exist"]),
    (('methods = ["exhaustive", "stepwise"]', 'methods = ["exhaustiv"]'), ["'exhaustiv'", "did you mean 'exhaustive'"]),
    (('response = "yield_kg_m2"\n', ''), ["[data] response is missing"]),
    # former names are refused with the new spelling
    (('methods = ["exhaustive", "stepwise"]', 'methods = ["exhaustive", "both"]'), ["'both'", "did you mean 'stepwise'"]),
    (('[search.exhaustive]', '[search.both]'), ["[search.both]", "did you mean 'stepwise'"]),
    (('parameter_count = "coefficients-only"', 'parameter_count = "statsmodels"'), ["did you mean 'coefficients-only'"]),
    (('parameter_count = "coefficients-only"', 'parameter_count = "selectkit"'), ["did you mean 'sigma-counted'"]),
    (('aim = "predict"', 'aim = "guess"'), ["aim", "explain, predict"]),
    (('backend = "dask"', 'backend = "loky"'), ["scheduler is set", "dask"]),
    (('[search.exhaustive]', '[search.forward]'), ["[search.forward]", "not in [search] methods"]),
    (('forms = ["identity", "log", "sqrt"]', 'forms = 42'), ["forms", "list"]),
    (('forms = ["identity", "log", "sqrt"]', 'offer = ["log"]'), ["'offer'", "did you mean forms"]),
    (('leave_out = []', 'leave_out = ["x0"]'), ["'x0' is in both always_include and leave_out"]),
    (('leave_out = []', 'leave_out = []\nleave_out = ["x1"]'), ["not valid TOML"]),
    (('predictors = ["x0", "x1", "x2", "x3"]', 'predictors = ["x0", "x1", "x1"]'), ["more than once"]),
    (("[run]", "[run"), ["not valid TOML"]),
])
def test_malformed_job_files_give_one_clear_line(job_folder, edit, words):
    old, new = edit
    assert old in FULL_JOB
    path = job_folder / "bad.toml"
    path.write_text(FULL_JOB.replace(old, new, 1))
    with pytest.raises(JobFileError) as caught:
        load_job(path)
    message = str(caught.value)
    assert "\n" not in message
    for word in words:
        assert word in message, message


def test_missing_job_file(tmp_path):
    with pytest.raises(JobFileError, match="does not exist"):
        load_job(tmp_path / "none.toml")


def test_settings_for_what_auto_may_run_are_accepted(job_folder):
    text = FULL_JOB.replace('methods = ["exhaustive", "stepwise"]', 'methods = ["auto"]')
    spec = parse_job(text, base=job_folder)
    assert spec.methods == ("auto",) and dict(spec.method_options["exhaustive"]) == {"max_size": 3}


def test_job_file_takes_the_candidate_screens(job_folder):
    text = FULL_JOB.replace("[forms]", '[forms]\nprefer = ["light"]\ntwin_limit = "off"\nvif_limit = "off"\ncurvature_test = false', 1)
    options = parse_job(text, base=job_folder).search_options()
    assert options["prefer"] == ("light",) and options["twin_limit"] is None and options["vif_limit"] is None
    assert options["curvature_test"] is False
    defaults = parse_job(FULL_JOB, base=job_folder).search_options()
    assert defaults["twin_limit"] == 0.999 and defaults["curvature_test"] is True and defaults["decimal_mark"] is None
    with pytest.raises(JobFileError, match="decimal_mark"):
        parse_job(FULL_JOB.replace("[data]", '[data]\ndecimal_mark = ";"', 1), base=job_folder)


def test_job_file_never_executes_code(job_folder):
    # TOML has no code; a value that looks like code is only text (and here a bad column name is fine to parse).
    text = FULL_JOB.replace('response = "yield_kg_m2"', 'response = "__import__(\'os\').system(\'touch pwned\')"')
    spec = parse_job(text, base=job_folder)
    assert spec.response.startswith("__import__")
    assert not (job_folder / "pwned").exists()


def test_starter_job_lists_columns_and_guesses_the_response(job_folder):
    text = starter_job(job_folder / "bays.csv")
    for column in ["yield_kg_m2", *PREDICTORS]:
        assert f"#   {column}" in text
    assert 'response = "yield_kg_m2"   # guessed' in text
    path = job_folder / "bays.toml"
    path.write_text(text)
    spec = load_job(path)  # the starter file is a valid job as it stands
    assert spec.response == "yield_kg_m2" and spec.methods == ("auto",)
    assert spec.output == (job_folder / "bays-results").resolve()


def test_starter_job_without_a_guess_asks_for_the_response(tmp_path):
    pd.DataFrame({"a": [1.0, 2.0], "b": [3.0, 4.0]}).to_csv(tmp_path / "t.csv", index=False)
    text = starter_job(tmp_path / "t.csv")
    assert 'response = ""   # fill in' in text
    (tmp_path / "t.toml").write_text(text)
    with pytest.raises(JobFileError, match="response is empty"):
        load_job(tmp_path / "t.toml")
    assert 'response = "b"' in starter_job(tmp_path / "t.csv", response="b")
    with pytest.raises(JobFileError, match="did you mean 'b'"):
        starter_job(tmp_path / "t.csv", response="bb")


# --------------------------------------------------------------------------- store
def test_store_commits_units_and_reads_them_back(tmp_path):
    store = RunStore.create_or_open(tmp_path)
    store.record_unit("exhaustive/a", {"rss": np.arange(3.0)}, models=3)
    store.record_unit("exhaustive/b", [1, 2], models=2)
    store.close()
    with RunStore.open_read_only(tmp_path) as again:
        units = again.finished_units()
        assert list(units) == ["exhaustive/a", "exhaustive/b"]
        np.testing.assert_array_equal(units["exhaustive/a"]["rss"], np.arange(3.0))
        assert again.unit_counts() == (2, 5)
        with pytest.raises(StoreError, match="read-only"):
            again.record_unit("x", 1)
    journal = RunStore.create_or_open(tmp_path)._db.execute("PRAGMA journal_mode").fetchone()[0]
    assert journal == "wal"


def test_data_fingerprint_is_sha256_and_size(tmp_path):
    import hashlib

    path = tmp_path / "t.csv"
    path.write_bytes(b"a,b\n1,2\n")
    assert data_fingerprint(path) == {"sha256": hashlib.sha256(b"a,b\n1,2\n").hexdigest(), "size": 8}


def test_lock_refuses_a_second_holder_and_is_released(tmp_path):
    store_path = tmp_path / STORE_NAME
    first = StoreLock(store_path).acquire()
    with pytest.raises(StoreBusyError, match="in use by another job"):
        StoreLock(store_path).acquire(wait=0.1)
    first.release()
    StoreLock(store_path).acquire(wait=0.1).release()


def test_lock_of_a_killed_process_is_released(tmp_path):
    store_path = tmp_path / STORE_NAME
    code = (f"from selectkit.jobs.store import StoreLock; import time, sys; "
            f"lock = StoreLock({str(store_path)!r}).acquire(); print('held', flush=True); time.sleep(60)")
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert child.stdout.readline().strip() == "held"
        with pytest.raises(StoreBusyError, match=f"process {child.pid}"):
            StoreLock(store_path).acquire(wait=0.1)
    finally:
        child.kill()
        child.wait(timeout=10)
    StoreLock(store_path).acquire(wait=1.0).release()


def test_missing_store_is_a_clear_error(tmp_path):
    with pytest.raises(StoreError, match="no run store"):
        store_status(tmp_path)


# --------------------------------------------------------------------------- runner
def test_run_completes_and_records_everything(job_folder):
    spec = load_job(write_job(job_folder))
    outcome = run_fake(spec)
    assert outcome.complete and outcome.stopped_by == "completed"
    assert outcome.units_done == outcome.units_total == 12 and outcome.units_resumed == 0
    assert outcome.models_evaluated == 2 ** 8 - 1
    shortlist = pd.read_csv(outcome.outputs["shortlist (CSV)"])
    # Independent check: best BIC model by a statsmodels refit of every subset.
    import itertools

    import statsmodels.api as sm

    frame = pd.read_csv(job_folder / "bays.csv")
    best = min(
        (sm.OLS(frame["yield_kg_m2"], sm.add_constant(frame[list(c)])).fit().bic, c)
        for r in range(1, 9) for c in itertools.combinations(PREDICTORS, r)
    )
    assert shortlist["terms"][0] == " + ".join(best[1])
    summary = json.loads(outcome.outputs["run summary"].read_text())
    assert summary["complete"] is True and summary["units_done"] == 12
    status = store_status(job_folder / "results")
    assert status.state == "complete" and not status.running
    assert status.units_done == 12 and status.units_total == 12
    assert status.shortlist[0]["terms"] == shortlist["terms"][0]
    assert "complete" in status.render() and "x0" in status.render()
    with RunStore.open_read_only(job_folder / "results") as store:
        assert len(store.pooled()) == 1 and store.pooled_summary()[0]["exact"]
        assert store.get("data")["sha256"] == data_fingerprint(job_folder / "bays.csv")["sha256"]


def test_time_budget_stops_marks_incomplete_and_resume_finishes_identically(job_folder, tmp_path_factory):
    straight_folder = tmp_path_factory.mktemp("straight")
    write_table(straight_folder / "bays.csv")
    run_fake(load_job(write_job(straight_folder, exhaustive="chunks = 12")))

    spec = load_job(write_job(job_folder, exhaustive="chunks = 12\ndelay = 0.1", extra_run='time_budget = "0.35s"\n'))
    first = run_fake(spec)
    assert not first.complete and "time budget" in first.stopped_by
    assert 1 <= first.units_done < 12
    assert first.not_exact == ("exhaustive",)
    summary = json.loads((job_folder / "results" / "run-summary.json").read_text())
    assert summary["complete"] is False and summary["not_proven_exact"] == ["exhaustive"]
    assert store_status(job_folder / "results").state == "incomplete"

    second = run_fake(spec.with_settings(time_budget=None))  # a run setting: allowed to change on resume
    assert second.complete and second.units_resumed == first.units_done
    assert (job_folder / "results" / "shortlist.csv").read_bytes() == \
        (straight_folder / "results" / "shortlist.csv").read_bytes()


def test_sigterm_stops_after_the_unit_in_hand_and_handlers_are_restored(job_folder):
    spec = load_job(write_job(job_folder, exhaustive="chunks = 12\ndelay = 0.02"))
    before = {s: signal.getsignal(s) for s in (signal.SIGINT, signal.SIGTERM)}
    seen = []

    def progress(snapshot):
        seen.append(snapshot)
        if snapshot.units_done == 3:
            os.kill(os.getpid(), signal.SIGTERM)

    outcome = run_fake(spec, progress=progress)
    assert not outcome.complete and outcome.stopped_by == "stopped by SIGTERM"
    assert outcome.units_done == 3
    assert [s.units_done for s in seen] == [1, 2, 3] and seen[-1].units_total == 12
    assert {s: signal.getsignal(s) for s in before} == before
    resumed = run_fake(spec)
    assert resumed.complete and resumed.units_resumed == 3


def test_changed_data_is_refused_on_resume(job_folder):
    spec = load_job(write_job(job_folder))
    run_fake(spec)
    with open(job_folder / "bays.csv", "a") as handle:
        handle.write("1,1,1,1,1,1,1,1,1\n")
    with pytest.raises(StoreError, match="changed since the run store") as caught:
        run_fake(spec)
    assert "--fresh" in str(caught.value)
    fresh = run_fake(spec, resume=False)  # starting afresh is allowed
    assert fresh.complete and fresh.units_resumed == 0


def test_changed_settings_are_refused_and_named(job_folder):
    spec = load_job(write_job(job_folder))
    run_fake(spec)
    with pytest.raises(StoreError, match=r"\[run\] seed: 3 -> 4"):
        run_fake(spec.with_settings(seed=4))
    again = run_fake(spec.with_settings(workers=2, backend="threading"))  # run settings may change
    assert again.complete and again.units_resumed == 12


def test_resume_from_the_folder_uses_the_stored_settings(job_folder):
    from selectkit.jobs.runner import _spec_from_store

    spec = load_job(write_job(job_folder))
    run_fake(spec)
    stored = _spec_from_store(job_folder / "results")
    assert stored == spec


def test_option_refused_by_the_search_is_a_job_file_error(job_folder):
    class Refusing(FakeEngine):
        def prepare(self, spec):
            raise OptionError("unknown criterion 'bicc'; choose one of aic, bic")

    spec = load_job(write_job(job_folder))
    with pytest.raises(JobFileError, match="bays.toml.*unknown criterion 'bicc'"):
        _run(spec, resume=True, progress=False, engine=Refusing())


def test_parallel_and_sequential_runs_give_the_same_shortlist(job_folder, tmp_path_factory):
    other = tmp_path_factory.mktemp("parallel")
    write_table(other / "bays.csv")
    one = run_fake(load_job(write_job(job_folder)))
    two = run_fake(load_job(write_job(other, extra_run="workers = 2\n")))
    assert one.outputs["shortlist (CSV)"].read_bytes() == two.outputs["shortlist (CSV)"].read_bytes()


def test_progress_lines_when_not_on_a_terminal(job_folder, capsys):
    spec = load_job(write_job(job_folder))
    run_fake(spec, progress="lines")
    err = capsys.readouterr().err.strip().splitlines()
    assert err and "units" in err[-1] and "12/12" in err[-1]
    run_fake(spec, progress=None)  # standard error is not a terminal here: plain lines
    err = capsys.readouterr().err
    assert "12/12 units" in err and "\r" not in err
    run_fake(spec, progress="bar")
    err = capsys.readouterr().err
    assert "12/12" in err and "models" in err
    with pytest.raises(OptionError, match="unknown progress"):
        run_fake(spec, progress="fancy")


# --------------------------------------------------------------------------- the command line
def _cli(*args, cwd):
    return subprocess.run([sys.executable, "-m", "selectkit", "job", *args], capture_output=True, text=True,
                          cwd=cwd, timeout=120, env={**os.environ, "PYTHONPATH": str(ROOT)})


def _main(*args, cwd, capsys, monkeypatch):
    """The command line in this process (``python -m selectkit`` exits with ``main()``'s return value)."""
    from selectkit.cli import main

    monkeypatch.chdir(cwd)
    capsys.readouterr()
    code = main(["job", *args])
    out, err = capsys.readouterr()
    return code, out, err


def test_cli_bad_job_file_exit_code_2_and_one_line(job_folder):
    """Through a real ``python -m selectkit`` process."""
    path = job_folder / "bad.toml"
    path.write_text(FULL_JOB.replace("[run]", "[run]\nwokers = 2", 1))
    done = _cli("run", str(path), cwd=job_folder)
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "did you mean 'workers'" in lines[0], done.stderr
    assert done.stdout == ""


@pytest.mark.parametrize("edit, words", [
    (('workers = 2', 'workers = "two"'), "whole number"),
    (('table = "bays.csv"', 'table = "nowhere.csv"'), "does not exist"),
    (('time_budget = "1h30m"', 'time_budget = -1'), "positive"),
    (("[ranking]", "[ranking]\nseed = 2"), "belongs in [run]"),
])
def test_cli_more_bad_job_files(job_folder, edit, words, capsys, monkeypatch):
    path = job_folder / "bad.toml"
    path.write_text(FULL_JOB.replace(*edit, 1))
    code, out, err = _main("run", str(path), cwd=job_folder, capsys=capsys, monkeypatch=monkeypatch)
    assert code == 2 and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("selectkit: error: ") and words in lines[0], err


def test_cli_job_new_writes_a_valid_starter(job_folder, capsys, monkeypatch):
    code, out, err = _main("new", "bays.csv", "-o", "starter.toml", "--response", "yield_kg_m2", cwd=job_folder,
                           capsys=capsys, monkeypatch=monkeypatch)
    assert code == 0, err
    assert load_job(job_folder / "starter.toml").response == "yield_kg_m2"


def test_cli_job_new_into_another_folder_points_back_at_the_table(job_folder, capsys, monkeypatch):
    (job_folder / "other" / "folder").mkdir(parents=True)
    code, out, err = _main("new", "bays.csv", "-o", "other/folder/job.toml", cwd=job_folder,
                           capsys=capsys, monkeypatch=monkeypatch)
    assert code == 0, err
    text = (job_folder / "other" / "folder" / "job.toml").read_text()
    assert 'table = "../../bays.csv"' in text
    spec = load_job(job_folder / "other" / "folder" / "job.toml")  # resolved from the job file's folder
    assert spec.table == (job_folder / "bays.csv").resolve()


def test_cli_job_new_on_parquet_without_pyarrow_names_the_extra(job_folder, capsys, monkeypatch):
    import builtins

    (job_folder / "bays.parquet").write_bytes(b"PAR1")  # never opened: the import fails first
    real_import = builtins.__import__

    def no_pyarrow(name, *args, **kwargs):
        if name == "pyarrow" or name.startswith("pyarrow."):
            raise ModuleNotFoundError("No module named 'pyarrow'", name="pyarrow")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_pyarrow)
    code, out, err = _main("new", "bays.parquet", cwd=job_folder, capsys=capsys, monkeypatch=monkeypatch)
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1, err
    assert "pip install 'selectkit[parquet]'" in lines[0] and "bays.parquet" in lines[0]
    assert "No module named" not in lines[0]


def test_cli_status_of_a_store(job_folder, capsys, monkeypatch):
    run_fake(load_job(write_job(job_folder)))
    code, out, err = _main("status", "results", cwd=job_folder, capsys=capsys, monkeypatch=monkeypatch)
    assert code == 0, err
    assert "complete" in out and "12 of 12" in out
    code, out, err = _main("status", "nowhere", cwd=job_folder, capsys=capsys, monkeypatch=monkeypatch)
    assert code == 2 and "no run store" in err


def test_cli_runs_a_real_job_end_to_end(tmp_path):
    """``selectkit job run`` with the real pipeline (intake to HTML report), then ``job status``."""
    from tests.test_jobs_resume import REAL_JOB, write_positive_table

    write_positive_table(tmp_path / "bays.csv")
    (tmp_path / "job.toml").write_text(REAL_JOB.replace("shortlist_size = 3", "shortlist_size = 1"))
    done = _cli("run", "job.toml", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert "job job: complete" in done.stdout and "optimistic" in done.stdout
    for name in ("shortlist.csv", "shortlist.json", "report.html", "run-summary.json", STORE_NAME):
        assert (tmp_path / "results" / name).is_file(), name
    assert pd.read_csv(tmp_path / "results" / "shortlist.csv")["terms"][0] == "log(x0) + sqrt(x2) + x5"
    status = store_status(tmp_path / "results").render()
    assert "job job: complete" in status and "log(x0) + sqrt(x2) + x5" in status


def test_half_made_store_is_refused_readably(tmp_path):
    import sqlite3

    with sqlite3.connect(tmp_path / STORE_NAME) as db:
        db.execute("CREATE TABLE about (name TEXT PRIMARY KEY, value TEXT NOT NULL)")
    with pytest.raises(StoreError, match="not a complete run store .*try again in a moment"):
        store_status(tmp_path)
    (tmp_path / "junk").mkdir()
    (tmp_path / "junk" / STORE_NAME).write_bytes(b"not a database at all" * 100)
    with pytest.raises(StoreError, match="not a readable run store"):
        store_status(tmp_path / "junk")


def test_moving_the_data_file_keeps_the_store_usable(job_folder, tmp_path_factory):
    """The data's content is fingerprinted, not its path: a moved table resumes, an edited one does not."""
    spec = load_job(write_job(job_folder, exhaustive="chunks = 12\ndelay = 0.02", extra_run='time_budget = "0.1s"\n'))
    first = run_fake(spec)
    assert not first.complete
    elsewhere = tmp_path_factory.mktemp("moved-data")
    (job_folder / "bays.csv").rename(elsewhere / "bays.csv")
    moved = spec.with_settings(table=elsewhere / "bays.csv", time_budget=None)
    again = run_fake(moved)
    assert again.complete and again.units_resumed == first.units_done


def test_a_failing_unit_marks_the_store_failed_and_keeps_the_finished_units(job_folder):
    marker = job_folder / "fail-now"
    marker.write_text("")
    spec = load_job(write_job(job_folder, exhaustive=f'chunks = 12\nfail_at = 5\nfail_while = "{marker}"'))
    with pytest.raises(RuntimeError, match="unit 5 failed on purpose"):
        run_fake(spec)
    status = store_status(job_folder / "results")
    assert status.state == "failed" and "unit 5 failed on purpose" in status.stopped_by
    assert status.units_done == 5 and "error" in status.render()
    marker.unlink()
    again = run_fake(spec)
    assert again.complete and again.units_resumed == 5


def test_resume_may_change_run_settings_only(job_folder, monkeypatch):
    from selectkit.jobs import runner

    spec = load_job(write_job(job_folder, exhaustive="chunks = 12\ndelay = 0.02", extra_run='time_budget = "0.1s"\n'))
    first = run_fake(spec)
    assert not first.complete
    monkeypatch.setattr(runner, "_API", FakeEngine())
    with pytest.raises(OptionError, match="'seed' cannot be changed when resuming"):
        runner.resume_job(job_folder / "results", seed=4)
    with pytest.raises(OptionError, match="time_budget must be"):
        runner.resume_job(job_folder / "results", time_budget=-5)
    with pytest.raises(OptionError, match="needs backend='dask'"):
        runner.resume_job(job_folder / "results", scheduler="tcp://127.0.0.1:1")
    again = runner.resume_job(job_folder / "results", progress=False, time_budget=None, workers=1)
    assert again.complete and again.units_resumed == first.units_done


def test_stop_before_any_model_writes_no_shortlist_but_says_so(job_folder):
    spec = load_job(write_job(job_folder, exhaustive="chunks = 12\ndelay = 0.05", extra_run='time_budget = 1e-9\n'))
    outcome = run_fake(spec)
    assert not outcome.complete and outcome.units_done == 0 and outcome.result is None
    assert "no model was scored yet" in outcome.stopped_by
    assert set(outcome.outputs) == {"run summary"}
    assert not (job_folder / "results" / "shortlist.csv").exists()
    summary = json.loads(outcome.outputs["run summary"].read_text())
    assert summary["complete"] is False and "no shortlist" in summary["stopped_by"]
    assert "selectkit job resume" in outcome.render()


def test_starter_job_survives_awkward_names(tmp_path):
    frame = pd.DataFrame({'yield "kg"': [1.0, 2.0, 3.0], "light\\dli": [1.0, 2.0, 4.0], "CO₂ ppm": [3.0, 1.0, 2.0]})
    frame.to_csv(tmp_path / 'bay "A".csv', index=False)
    (tmp_path / "job.toml").write_text(starter_job(tmp_path / 'bay "A".csv', response='yield "kg"'))
    spec = load_job(tmp_path / "job.toml")
    assert spec.response == 'yield "kg"' and spec.table.name == 'bay "A".csv'


def test_a_unit_key_the_runner_did_not_plan_is_never_stored(job_folder):
    class Drifting(FakeEngine):
        def unit_keys(self, setup):
            return [f"other/{key}" for key in super().unit_keys(setup)]

    spec = load_job(write_job(job_folder))
    with pytest.raises(SelectkitError, match="not among the planned units"):
        _run(spec, resume=True, progress=False, engine=Drifting())
    assert store_status(job_folder / "results").units_done == 0


def test_a_search_that_cannot_pool_a_partial_run_still_stops_cleanly(job_folder):
    """When a search's merge refuses unfinished units, the stop keeps the units and says why there is no shortlist."""
    class Strict(FakeEngine):
        def run(self, setup, **options):
            founds = super().run(setup, **options)
            if not founds[0].exact:
                raise TypeError("merge needs every unit")
            return founds

    spec = load_job(write_job(job_folder, exhaustive="chunks = 12\ndelay = 0.02"))

    def stop_after_three(snapshot):
        if snapshot.units_done == 3:
            os.kill(os.getpid(), signal.SIGTERM)

    outcome = _run(spec, resume=True, progress=stop_after_three, engine=Strict())
    assert not outcome.complete and outcome.units_done == 3
    assert "could not pool the finished units (TypeError: merge needs every unit)" in outcome.stopped_by
    assert outcome.not_exact == ("exhaustive",) and set(outcome.outputs) == {"run summary"}
    status = store_status(job_folder / "results")
    assert status.state == "incomplete" and "pooling the finished units failed" in status.render()
    again = _run(spec, resume=True, progress=False, engine=Strict())
    assert again.complete and again.units_resumed == 3


def test_a_method_setting_the_search_refuses_is_a_job_file_error(tmp_path):
    """Checked by the real search before any work: the message names the valid settings."""
    from selectkit.jobs.runner import _API
    from tests.test_jobs_resume import REAL_JOB, write_positive_table

    write_positive_table(tmp_path / "bays.csv")
    (tmp_path / "job.toml").write_text(REAL_JOB.replace('methods = ["exhaustive", "stepwise"]',
                                                        'methods = ["exhaustive"]\n[search.exhaustive]\nmax_terms = 3'))
    with pytest.raises(JobFileError, match="job.toml.*'max_terms'.*max_size") as caught:
        _run(load_job(tmp_path / "job.toml"), resume=True, progress=False, engine=_API)
    assert "\n" not in str(caught.value)
    assert store_status(tmp_path / "results").units_done == 0


def test_honest_folds_in_a_job_file_reach_the_search(tmp_path):
    # the [ranking] key is handed to the search as honest_folds; 1 outer fold is refused up front
    from selectkit.jobs import parse_job

    (tmp_path / "bays.csv").write_text("y,a\n1,2\n")
    text = '[data]\ntable = "bays.csv"\nresponse = "y"\n[ranking]\nhonest_folds = {}\n'
    spec = parse_job(text.format(5), base=tmp_path, check_table=False)
    assert spec.search_options()["honest_folds"] == 5
    with pytest.raises(JobFileError, match="honest_folds"):
        parse_job(text.format(1), base=tmp_path, check_table=False)
