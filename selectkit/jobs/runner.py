"""Run a job: checkpoint every work unit, resume, honour a time budget and signals.

:func:`run_job` drives the three steps of :mod:`selectkit.api`
(``prepare_search`` → ``run_methods`` → ``finish``) with a :class:`RunStore`
between them: each finished work unit is committed to the store as it
arrives, a resumed job hands the finished units back to ``run_methods`` (which
does not run them again), and the pooled searches, the shortlist and the
result files are written at the end.  Because every unit is deterministic
(its own spawned seed) and the searches merge units in plan order, a job
interrupted any number of times ends with the same shortlist as one that ran
straight through.
"""

from __future__ import annotations

import json
import signal
import sqlite3
import threading
import time
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Mapping

from .. import _stages
from .._io import atomic_write_text
from ..errors import JobFileError, OptionError, SelectkitError, StoreError
from .progress import JobProgress, format_seconds, make_reporter, stage_show_for
from ..settings import JOB, speaking
from .spec import JobSpec, load_job
from .store import STORE_NAME, RunStore, StoreLock, damaged_store_error, data_fingerprint, find_store, move_aside

__all__ = ["JobOutcome", "JobProgress", "run_job", "resume_job", "RUN_SETTINGS", "SUMMARY_NAME", "format_seconds"]

#: Name of the small JSON file, beside the store, that says how the last run ended.
SUMMARY_NAME = "run-summary.json"


# --------------------------------------------------------------------------- values
@dataclass(frozen=True, eq=False)
class JobOutcome:
    """How a run of a job ended.

    Attributes
    ----------
    name : str
    store : Path
        The run store.
    outputs : Mapping[str, Path]
        Result files written (shortlist CSV/JSON, report...), by label.
    complete : bool
        True when every planned unit finished.
    units_done, units_total : int
    units_resumed : int
        Units taken from the store rather than run in this run.
    models_evaluated : int
        Models scored by the searches (their ``Found.evaluated``, summed).
    stopped_by : str
        ``"completed"`` or why the run stopped early.
    not_exact : tuple of str
        Searches whose answer is not proven exact (heuristics, or cut short).
    seconds : float
        Wall-clock time of this run.
    result : selectkit.api.Result or None
        The ranked, checked result (not part of equality).
    notes : tuple of str
        What a person should know about this run: stored units that failed
        their checksum and were run again, settings that changed on resume,
        stages the time budget cut.
    """

    name: str
    store: Path
    outputs: Mapping[str, Path]
    complete: bool
    units_done: int
    units_total: int
    units_resumed: int
    models_evaluated: int
    stopped_by: str
    not_exact: tuple[str, ...]
    seconds: float
    result: Any = field(default=None, repr=False)
    notes: tuple[str, ...] = ()

    def render(self) -> str:
        """A few readable lines for a person."""
        head = "complete" if self.complete else f"INCOMPLETE ({self.stopped_by})"
        lines = [
            f"job {self.name}: {head}",
            f"  units: {self.units_done} of {self.units_total} finished"
            + (f" ({self.units_resumed} from earlier runs)" if self.units_resumed else ""),
            f"  models evaluated: {self.models_evaluated:,}",
            f"  time this run: {format_seconds(self.seconds)}",
            f"  run store: {self.store}",
        ]
        if self.not_exact:
            lines.append(f"  not proven exact: {', '.join(self.not_exact)}")
        for note in self.notes:
            lines.append(f"  note: {note}")
        for label, path in self.outputs.items():
            lines.append(f"  {label}: {path}")
        if not self.complete:
            lines.append(f"  continue with: selectkit job resume {self.store.parent}")
        lines.append("  note: p-values of a selected model are optimistic; association is not causation; "
                     "the decision rests with the practitioner and local professional standards.")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.render()


# --------------------------------------------------------------------------- the api seams
class _StoreKeeper:
    """The run store as the keeper of pieces of a stage (:mod:`selectkit._kept`): each part of a table
    read in parts, each outer fold of the honest error.  ``salt`` joins every basis (the pooled results
    and settings, for what is computed from them)."""

    def __init__(self, store, salt: str = ""):
        self.store, self.salt = store, salt

    def get(self, stage, basis):
        return self.store.finished(stage, self.salt + basis)

    def put(self, stage, basis, value):
        self.store.record_finished(stage, self.salt + basis, value)



class _ApiEngine:
    """The three steps of :mod:`selectkit.api`, as the runner calls them."""

    def prepare(self, spec: JobSpec):
        from .. import api

        return api.prepare_search(str(spec.table), **spec.search_options())

    def unit_keys(self, setup) -> list[str]:
        from .. import api

        return list(api.unit_keys(setup))

    def run(self, setup, **options) -> list:
        from .. import api

        return api.run_methods(setup, **options)

    def finish(self, setup, founds, **options):
        from .. import api

        return api.finish(setup, founds, **options)

    def write(self, result, folder) -> dict:
        return dict(result.write(folder))

    def keep(self, result) -> dict | None:
        """What the run store keeps of a finished ranking stage (data only); None for a result it cannot keep."""
        from .. import api

        if not isinstance(result, api.Result):
            return None
        return {"ranked": result._ranked, "stability": result.stability, "honest": result.honest,
                "split": result.split}

    def restore(self, setup, founds, kept):
        """A Result from the kept ranking stage and the pooled results."""
        from .. import api

        result = api.Result(setup=setup, founds=founds, ranked=kept["ranked"], stability=kept["stability"])
        result.honest = kept["honest"]
        result.split = kept.get("split")
        return result

    def shortlist_rows(self, result) -> list[dict]:
        return json.loads(result.shortlist.to_json(orient="records", double_precision=15))


_API = _ApiEngine()


# --------------------------------------------------------------------------- entry points
def run_job(spec_or_path, *, resume: bool = True, progress=None) -> JobOutcome:
    """Run a job, continuing its run store when there is one.

    Parameters
    ----------
    spec_or_path : JobSpec, or path of a job file, or an output folder / run store
        A folder or store resumes the job recorded there (as :func:`resume_job`).
    resume : bool, default True
        Continue from the units already in the store.  False starts afresh:
        the store's units, results and log are forgotten.
    progress : None, False, "bar", "lines" or callable
        None picks a tqdm bar when standard error is a terminal and plain
        log lines (every 30 s) otherwise; False shows nothing; a callable is
        called with a :class:`JobProgress` after each unit.

    Returns
    -------
    JobOutcome

    Raises
    ------
    JobFileError
        The job file is malformed, or an option it gives is refused.
    StoreBusyError
        Another process is running the same store.
    StoreError
        The data file or the job's settings changed since the store was made.

    Notes
    -----
    SIGINT and SIGTERM stop the job after the units in hand (a second SIGINT
    stops at once); the searches are pooled from what finished and the
    shortlist is written, marked incomplete.  So is it when the time budget
    runs out.  The budget starts when the units begin (reading and preparing
    the data do not use it); it is checked between work units (every stored
    unit is whole) and then by the bootstrap resamples and the honest error.
    """
    if isinstance(spec_or_path, JobSpec):
        spec = spec_or_path
    else:
        path = Path(spec_or_path).expanduser()
        if path.is_dir() or path.name == STORE_NAME:
            return resume_job(path, progress=progress)
        spec = load_job(path)
    return _run(spec, resume=resume, progress=progress, engine=_API)


#: Settings a resumed job may change (they do not change what is found).
RUN_SETTINGS = ("workers", "backend", "scheduler", "scheduler_timeout", "time_budget")

#: [ranking] settings used only after the units (ranking, bootstrap, honest error): a job may change them
#: on resume, since the stored units do not depend on them.
RANKING_ONLY = ("ranking.parameter_count", "ranking.shortlist_size", "ranking.keep_within", "ranking.resamples",
                "ranking.honest_folds", "ranking.split_fraction")


def resume_job(folder_or_store, *, progress=None, **run_settings) -> JobOutcome:
    """Continue the job recorded in an output folder (or its run store).

    The job's settings come from the store, so the job file is not needed;
    the data file must be where it was and unchanged.  See :func:`run_job`.

    Parameters
    ----------
    folder_or_store : str or Path
        The job's output folder, or its ``run-store.sqlite``.
    progress : see :func:`run_job`
    **run_settings
        New values for ``workers``, ``backend``, ``scheduler``,
        ``scheduler_timeout`` (seconds) or ``time_budget`` (seconds or text
        such as ``"8h"``), e.g. to continue
        on a Dask cluster a job started on a laptop.

    Examples
    --------
    >>> resume_job("bays-results", workers=8, backend="dask",
    ...            scheduler="tcp://scheduler.example:8786")  # doctest: +SKIP
    """
    spec = _spec_from_store(folder_or_store)
    if run_settings:
        spec = _with_run_settings(spec, run_settings)
    return _run(spec, resume=True, progress=progress, engine=_API)


def extend_job(folder_or_store, *, progress=None, **run_settings) -> JobOutcome:
    """Add the rows of files that joined a job's table (a folder or a glob) since its last run, and rank again.

    Moments are additive: the files read before are not read again (their
    surveys and moments are in the run store), and the forms chosen before
    are kept, so that those moments stay valid.  Only the new files are read
    (their values are checked against the chosen forms: a value outside a
    form's domain, or a level not seen before, stops the run with the file
    and the fix); the searches then run again on all rows, and the report
    names the files that went in.

    Parameters
    ----------
    folder_or_store, progress, **run_settings
        As :func:`resume_job`.

    Raises
    ------
    StoreError
        When a file read before has changed or gone (extending only adds
        rows), or the table is one file.
    JobFileError
        When no file joined the table.
    """
    from ..parts import is_parted_source

    spec = _spec_from_store(folder_or_store)
    if run_settings:
        spec = _with_run_settings(spec, run_settings)
    if not is_parted_source(spec.table):
        raise StoreError(f"job {spec.name!r} reads one data file ({str(spec.table)!r}); extending adds the files "
                         f"that join a table kept as a folder or a glob of files — start afresh for a new file")
    path = find_store(folder_or_store)
    with RunStore.create_or_open(path.parent) as store:
        then = (store.get("data") or {}).get("files") or {}
        if not then:
            raise StoreError(f"the run store {str(path)!r} does not list the files of its table (it was made "
                             f"before tables in parts were kept file by file); start afresh")
        now = data_fingerprint(spec.table)
        changed = [f for f, mark in then.items() if now["files"].get(f) != mark]
        if changed:
            gone = [f for f in changed if f not in now["files"]]
            raise StoreError(f"{len(changed)} file(s) read before changed or went away since the last run "
                             f"({', '.join(map(repr, changed[:5]))}{' gone' if gone else ''}); extending only "
                             f"adds files: put them back, or start afresh (selectkit job run --fresh)")
        added = [f for f in now["files"] if f not in then]
        if not added:
            raise JobFileError(f"no file joined the table of job {spec.name!r} since its last run "
                               f"({len(then)} files); nothing to extend")
        store.forget_searches()
        store.set_many({"data": {"path": str(spec.table), **now}})
        store.log(f"extending with {len(added)} new file(s): {', '.join(added[:10])}"
                  f"{' and more' if len(added) > 10 else ''}")
    return _run(spec, resume=True, progress=progress, engine=_API)


def _with_run_settings(spec: JobSpec, run_settings: dict) -> JobSpec:
    from .. import settings

    changes = {}
    for key, value in run_settings.items():
        if key not in RUN_SETTINGS:
            raise OptionError(f"{settings.spell(key).rstrip('=')!r} cannot be changed when resuming; the settings "
                              f"that can are {', '.join(RUN_SETTINGS)} (the others would change what is found)")
        if value is None and key in ("scheduler", "time_budget"):
            changes[key] = None
            continue
        changes[key] = settings.check_value(key, value)  # named as the caller's surface writes it
    spec = spec.with_settings(**changes)
    if spec.scheduler is not None and spec.backend != "dask":
        raise OptionError(f"a scheduler address needs {settings.spell('backend', 'dask')} "
                          f"(got backend {spec.backend!r})")
    return spec


def _spec_from_store(folder_or_store) -> JobSpec:
    path = find_store(folder_or_store)
    try:
        with RunStore.open_read_only(path) as store:
            recorded = store.get("spec")
    except sqlite3.DatabaseError as err:
        raise damaged_store_error(path, err) from err
    if recorded is None:
        raise StoreError(f"the run store {str(path)!r} holds no job settings (it was never started); "
                         f"run the job file with 'selectkit job run JOB.toml'")
    spec = JobSpec.from_dict(recorded)
    return spec.with_settings(output=path.parent)


def _run(spec: JobSpec, *, resume: bool, progress, engine) -> JobOutcome:
    started = time.monotonic()
    folder = Path(spec.output)
    store_path = folder / STORE_NAME
    # Every setting that can be judged before any work is judged here, before the lock and the store.
    from ..parts import table_exists

    if not table_exists(spec.table):
        raise JobFileError(f"the data file {str(spec.table)!r} of job {spec.name!r} does not exist; "
                           f"put it back or fix [data] table in the job file")
    _check_output(folder)
    if spec.backend == "dask":
        _check_dask(spec.scheduler, timeout=spec.scheduler_timeout)
    lock = StoreLock(store_path).acquire()
    try:
        store = _open_store(folder, fresh=not resume)
        try:
            return _run_locked(spec, store, resume=resume, progress=progress, engine=engine, started=started)
        except sqlite3.DatabaseError as err:  # a page SQLite cannot read, met while running
            raise damaged_store_error(store.path, err) from err
        finally:
            store.close()
    finally:
        lock.release()


def _open_store(folder: Path, *, fresh: bool) -> RunStore:
    """Open the store; starting afresh, a damaged one is moved aside (kept, renamed) and a new one made."""
    store = None
    try:
        store = RunStore.create_or_open(folder)
        if fresh:
            store.about()  # reads the settings: fails on a damaged store before anything is cleared
            store.unit_counts()
        return store
    except (StoreError, sqlite3.DatabaseError) as err:
        damaged = isinstance(err, sqlite3.DatabaseError) or "damaged" in str(err) or "not a usable" in str(err)
        if not (fresh and damaged):
            if isinstance(err, sqlite3.DatabaseError):
                raise damaged_store_error(folder / STORE_NAME, err) from err
            raise
    if store is not None:
        try:
            store.close()
        except sqlite3.Error:  # pragma: no cover - the connection of a damaged store may not close cleanly
            pass
    move_aside(folder / STORE_NAME)
    return RunStore.create_or_open(folder)


def _check_output(folder: Path) -> None:
    from .. import api

    try:
        api.check_output_folder(folder)
    except OptionError as err:
        raise JobFileError(f"[run] output: {err}") from err


def _check_dask(scheduler: str | None, timeout: float = 10.0) -> None:
    """Refuse early, in one line, when the Dask cluster cannot be used (no extra, no client, no scheduler
    reachable within ``timeout`` seconds)."""
    from .. import api

    api.check_scheduler(scheduler, timeout=timeout)


def _run_locked(spec, store: RunStore, *, resume, progress, engine, started) -> JobOutcome:
    from .._budget import Deadline

    fingerprint = data_fingerprint(spec.table)
    recorded = store.get("spec")
    if recorded is not None and not resume:
        store.clear()
        recorded = None
    notes: list[str] = []
    if recorded is not None:
        notes += _check_same_job(spec, store, fingerprint)

    from .._kept import kept_in

    try:
        # a table read in parts keeps each part's survey and moments in the store as they arrive
        with speaking(JOB), kept_in(_StoreKeeper(store)):  # a hint names the job file's key
            setup = engine.prepare(spec)
    except OptionError as err:
        where = spec.source or spec.name
        message = f"job {str(where)!r}: {err}"
        store.set_many({"state": "failed", "stopped_by": f"a setting was refused before any work: {err}"})
        store.log(f"run refused before any work: {err}; fix the setting and run the job again", level="error")
        raise JobFileError(message) from err
    keys = engine.unit_keys(setup)
    planned = set(keys)
    done, damaged = store.read_units() if recorded is not None else ({}, [])
    done = {k: v for k, v in done.items() if k in planned}
    if damaged:
        notes.append(_damaged_note(damaged, "re-run in this run"))
        store.log(f"{len(damaged)} stored unit(s) failed their checksum and are run again: {', '.join(damaged)}",
                  level="warning")

    store.set_many({
        "spec": spec.to_dict(),
        "spec_fingerprint": spec.fingerprint(),
        "data": {"path": str(spec.table), **fingerprint},
        "name": spec.name,
        "state": "running",
        "stopped_by": "",
        "units_total": len(keys),
        "run_started_at": time.time(),
        "runs": int(store.get("runs", 0)) + 1,
    })
    store.log(f"run {store.get('runs')} started: {len(done)} of {len(keys)} units already finished"
              + (f"; time budget {format_seconds(spec.time_budget)}" if spec.time_budget else ""))
    for note in notes:
        store.log(note)

    # The budget starts with the units: reading and preparing the data do not use it.
    deadline = Deadline.start(spec.time_budget) if spec.time_budget is not None else None
    stop = _StopFlag(deadline)
    reporter = make_reporter(progress, spec.name, total=len(keys), initial=len(done),
                              initial_models=store.unit_counts()[1], started=started)
    last = [time.monotonic()]

    def on_unit(key, result):
        if key not in planned:  # the runner and the searches disagree on unit keys: never store it
            raise SelectkitError(f"internal error: finished unit {key!r} is not among the planned units "
                                 f"({len(planned)} planned); please report it")
        now = time.monotonic()
        models = _count_models(result)
        store.record_unit(key, result, models=models, seconds=now - last[0])
        last[0] = now
        reporter.unit(key, models)

    run_options = dict(n_jobs=spec.workers, backend=spec.backend, scheduler=spec.scheduler)
    pooling_error = None
    try:
        with _signals_caught(stop):
            try:
                founds = engine.run(setup, done=done, on_unit=on_unit, should_stop=stop, **run_options)
            except (Exception, KeyboardInterrupt):
                if not stop.requested or stop.forced:
                    raise
                # Ctrl-C on a terminal reaches the worker processes too, and joblib passes their
                # KeyboardInterrupt on; the stop was asked for, so pool what the store holds.
                try:
                    founds = engine.run(setup, done=store.finished_units(), should_stop=lambda: True, n_jobs=1)
                except Exception as err:  # a search that cannot merge a partial set of units
                    pooling_error, founds = err, []
    except BaseException as err:
        reporter.close()
        _record_failure(store, err)
        raise
    reporter.close()

    # Verify what the store now holds (the units of this run were just written): a unit whose stored
    # bytes fail their checksum is marked damaged, so that the next resume runs it again.
    spoiled = store.verify_units()
    if spoiled:
        notes.append(_damaged_note(spoiled, "to be re-run by the next resume"))
        store.log(f"{len(spoiled)} stored unit(s) failed their checksum after they were stored: "
                  f"{', '.join(spoiled)}", level="warning")
    units_done = store.unit_counts()[0]
    complete = planned <= store.finished_keys()
    stopped_by = "completed" if complete else (stop.reason or "stopped before every unit finished")
    try:
        store.record_pooled(founds)
        not_exact = tuple(dict.fromkeys(str(f.method) for f in founds if not getattr(f, "exact", False)))
        if pooling_error is not None:
            result, outputs = None, {}
            not_exact = tuple(str(run.name) for run in getattr(setup, "runs", ()))
            stopped_by = (f"{stopped_by}; the searches could not pool the finished units "
                          f"({type(pooling_error).__name__}: {pooling_error}), so no shortlist was written")
            store.log(f"pooling the finished units failed: {type(pooling_error).__name__}: {pooling_error}",
                      level="warning")
        elif any(len(f) for f in founds):
            stages = stage_show_for(progress, prefix=f"job {spec.name}: ", log=store.log)
            try:
                with _stages.heard_by(stages):
                    result = _finish_checkpointed(engine, store, spec, setup, founds, complete=complete,
                                                  deadline=deadline, run_options=run_options)
                    store.log("writing the shortlist and the report")
                    outputs = engine.write(result, store.path.parent)
            finally:
                stages.close()
            store.record_shortlist(engine.shortlist_rows(result))
            cut = _budget_notes(result)
            if cut:
                notes += cut
                if complete:  # every unit finished, but a later stage did not: a resume finishes it
                    complete = False
                    stopped_by = f"{deadline.describe()} reached after the units, during the ranking stages"
        else:
            # Stopped before any model was scored: nothing to rank; the summary says so.
            result, outputs = None, {}
            stopped_by = f"{stopped_by}; no model was scored yet, so no shortlist was written"
    except BaseException as err:
        _record_failure(store, err, after_units=True)
        raise
    models = int(sum(int(getattr(f, "evaluated", 0)) for f in founds))
    seconds = time.monotonic() - started
    outcome = JobOutcome(
        name=spec.name, store=store.path, outputs={k: Path(v) for k, v in outputs.items()}, complete=complete,
        units_done=units_done, units_total=len(keys), units_resumed=len(done), models_evaluated=models,
        stopped_by=stopped_by, not_exact=not_exact, seconds=seconds, result=result, notes=tuple(notes),
    )
    summary_path = store.path.parent / SUMMARY_NAME
    atomic_write_text(summary_path, json.dumps(_summary(outcome, spec), indent=2) + "\n")
    outcome = replace(outcome, outputs={**outcome.outputs, "run summary": summary_path})
    store.set_many({"state": "complete" if complete else "incomplete", "stopped_by": stopped_by,
                    "models_evaluated": models, "not_exact": list(not_exact), "notes": list(notes),
                    "outputs": {k: str(v) for k, v in outcome.outputs.items()}, "run_ended_at": time.time()})
    store.log(f"run ended ({stopped_by}): {units_done} of {len(keys)} units, {models:,} models evaluated, "
              f"{format_seconds(seconds)}")
    return outcome


def _finish_checkpointed(engine, store, spec, setup, founds, *, complete, deadline, run_options):
    """Rank, check and (with the settings asking for them) resample: once per set of pooled results.

    When every unit has finished, the ranking stage's result — the shortlist,
    the bootstrap stability and the honest error, the costly part of finishing —
    is kept in the run store beside the hash of the pooled results and the
    settings it was computed from; a run that stops after it (a kill while the
    report is written) resumes from it instead of computing it again.  A stage
    cut short by the time budget is not kept: the next run finishes it.
    """
    basis = store.pooled_basis(spec.fingerprint()) if complete else None
    restore, keep = getattr(engine, "restore", None), getattr(engine, "keep", None)
    if basis is not None and restore is not None:
        kept = store.finished("ranking", basis)
        if kept is not None:
            store.log("ranking, stability and honest error taken from the run store (an earlier run finished "
                      "them from the same pooled results and settings)")
            return restore(setup, founds, kept)
    store.log("ranking and checking the best models"
              + ("; then the bootstrap resamples and the honest error, if asked for" if complete else ""))
    began = time.monotonic()
    from .._kept import kept_in

    # the outer folds of the honest error are kept as they finish, against the pooled results and settings
    with kept_in(_StoreKeeper(store, salt=basis or "")) if basis is not None else _no_keeper():
        result = engine.finish(setup, founds, deadline=deadline, **run_options)
    value = keep(result) if basis is not None and keep is not None and not _budget_notes(result) else None
    if value is not None:
        store.record_finished("ranking", basis, value, seconds=time.monotonic() - began)
    return result


@contextmanager
def _no_keeper():
    yield None


def _record_failure(store: RunStore, err: BaseException, *, after_units: bool = False) -> None:
    """Record in the store how a run ended with an error (never leave it looking 'interrupted')."""
    if isinstance(err, sqlite3.DatabaseError):
        return  # the store itself is damaged: nothing can be recorded in it
    try:
        if isinstance(err, (KeyboardInterrupt, SystemExit)):
            store.set_many({"state": "interrupted", "stopped_by": f"stopped at once ({type(err).__name__})"})
            store.log("run stopped at once; the finished units are kept", level="warning")
            return
        stage = " after every unit had finished (the units are kept; fix the cause and resume)" if after_units else ""
        store.set_many({"state": "failed", "stopped_by": f"{type(err).__name__}: {err}"})
        store.log(f"run failed{stage}: {type(err).__name__}: {err}", level="error")
    except sqlite3.DatabaseError:  # pragma: no cover - the store broke while recording the failure
        pass


def _damaged_note(keys, what: str) -> str:
    shown = ", ".join(keys[:5]) + (f" and {len(keys) - 5} more" if len(keys) > 5 else "")
    return (f"{len(keys)} stored unit(s) failed their checksum (their stored bytes changed) and are {what}: "
            f"{shown}")


def _budget_notes(result) -> list[str]:
    """The notes of a result that say the time budget cut a stage (bootstrap, honest error)."""
    ranking = getattr(result, "ranking", None)
    return [n for n in getattr(ranking, "notes", ()) if "time budget" in n and "search " not in n[:8]]


def _summary(outcome: JobOutcome, spec: JobSpec) -> dict:
    return {
        "job": outcome.name,
        "complete": outcome.complete,
        "stopped_by": outcome.stopped_by,
        "units_done": outcome.units_done,
        "units_total": outcome.units_total,
        "models_evaluated": outcome.models_evaluated,
        "not_proven_exact": list(outcome.not_exact),
        "data": str(spec.table),
        "outputs": {k: str(v) for k, v in outcome.outputs.items()},
        "caution": "p-values of a selected model are optimistic; association is not causation; "
                   "the decision rests with the practitioner and local professional standards.",
    }


def _check_same_job(spec: JobSpec, store: RunStore, fingerprint: dict) -> list[str]:
    """Refuse to resume when the data or a setting the stored units depend on changed; return notes on the
    settings that changed but may (those used only after the units, or any when no unit had finished)."""
    recorded_data = store.get("data") or {}
    if recorded_data.get("sha256") != fingerprint["sha256"] or recorded_data.get("size") != fingerprint["size"]:
        raise StoreError(
            f"the data file {str(spec.table)!r} changed since the run store {str(store.path)!r} was made "
            f"({recorded_data.get('size')} bytes then, {fingerprint['size']} now; SHA-256 differs); resuming would "
            f"mix results of two tables: restore the file, or start afresh (selectkit job run --fresh, "
            f"or resume=False)",
            path=str(spec.table),
        )
    if store.get("spec_fingerprint") == spec.fingerprint():
        return []
    then_spec = JobSpec.from_dict(store.get("spec"))
    then, now = then_spec.result_settings(), spec.result_settings()
    changed = [k for k in now if then.get(k) != now.get(k)]

    def show(keys):
        return "; ".join(f"[{k.split('.')[0]}] {k.split('.')[1]}: {then.get(k)!r} -> {now.get(k)!r}" for k in keys)

    if store.unit_counts()[0] == 0:
        return [f"settings changed before any unit had finished, so the new ones are used: {show(changed)}"]
    binding = [k for k in changed if _changes_units(k, then_spec, spec)]
    if binding:
        raise StoreError(
            f"the job's settings changed since the run store {str(store.path)!r} was made "
            f"({show(binding) or 'settings differ'}); the stored units depend on "
            f"{'it' if len(binding) == 1 else 'them'}: put the old value back, use another output folder, or "
            f"start afresh (selectkit job run --fresh, or resume=False)"
        )
    return [f"settings used only after the units changed, so the stored units are kept: {show(changed)}"]


def _changes_units(dotted: str, then: JobSpec, now: JobSpec) -> bool:
    """Whether a changed setting changes what the work units compute (so stored units cannot be reused)."""
    if dotted in RANKING_ONLY:
        return False
    methods = set(then.methods) | set(now.methods)
    if dotted == "ranking.folds":
        return "crossval" in methods  # otherwise the folds only score the pooled models
    if dotted in ("ranking.criterion", "ranking.aim"):
        from ..searches._adapters import stepwise_criterion

        steered = methods & {"forward", "backward", "stepwise", "screen", "auto"}
        return bool(steered) and (stepwise_criterion(then.criterion, then.aim)
                                  != stepwise_criterion(now.criterion, now.aim))
    return True


def _count_models(result) -> int | None:
    """Models a unit result says it scored (``evaluated``), when it says so cheaply."""
    for name in ("evaluated", "models_evaluated"):
        value = result.get(name) if isinstance(result, Mapping) else getattr(result, name, None)
        if value is not None:
            try:
                return int(value)
            except (TypeError, ValueError):
                return None
    if isinstance(result, Mapping) and "visited" in result:
        try:
            return len(result["visited"])
        except TypeError:
            return None
    return None


# --------------------------------------------------------------------------- stopping
class _StopFlag:
    """``should_stop`` for run_methods: the run's deadline (from when the units began) and the signals received."""

    def __init__(self, deadline):
        self.deadline = deadline
        self.requested = False
        self.forced = False
        self.reason = ""

    def request(self, reason: str) -> None:
        if not self.requested:
            self.requested = True
            self.reason = reason

    def __call__(self) -> bool:
        if not self.requested and self.deadline is not None and self.deadline.expired():
            self.request(f"{self.deadline.describe()} reached")
        return self.requested


class _signals_caught:
    """Catch SIGINT/SIGTERM while a job runs (main thread only); restore the handlers after."""

    def __init__(self, stop: _StopFlag):
        self.stop = stop
        self.previous = {}

    def _handle(self, signum, frame):
        name = signal.Signals(signum).name
        if self.stop.requested and signum == signal.SIGINT:
            self.stop.forced = True
            raise KeyboardInterrupt
        self.stop.request(f"stopped by {name}")

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                self.previous[sig] = signal.signal(sig, self._handle)
        return self

    def __exit__(self, *exc):
        for sig, handler in self.previous.items():
            signal.signal(sig, handler)
        self.previous.clear()
        return False
