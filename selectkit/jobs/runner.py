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
import threading
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Mapping

from .._io import atomic_write_text
from ..errors import JobFileError, OptionError, SelectkitError, StoreError
from .progress import JobProgress, format_seconds, make_reporter
from .spec import JobSpec, load_job
from .store import STORE_NAME, RunStore, StoreLock, data_fingerprint, find_store

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
    runs out.  The budget is checked between work units.
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
RUN_SETTINGS = ("workers", "backend", "scheduler", "time_budget")


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
        New values for ``workers``, ``backend``, ``scheduler`` or
        ``time_budget`` (seconds or text such as ``"8h"``), e.g. to continue
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


def _with_run_settings(spec: JobSpec, run_settings: dict) -> JobSpec:
    from .spec import _SCHEMA

    changes = {}
    for key, value in run_settings.items():
        if key not in RUN_SETTINGS:
            raise OptionError(f"{key!r} cannot be changed when resuming; the settings that can are "
                              f"{', '.join(RUN_SETTINGS)} (the others would change what is found)")
        if value is None and key in ("scheduler", "time_budget"):
            changes[key] = None
            continue
        check = _SCHEMA["run"][key][0]
        try:
            changes[key] = check(value, key)
        except JobFileError as err:
            raise OptionError(str(err)) from err
    spec = replace(spec, **changes)
    if spec.scheduler is not None and spec.backend != "dask":
        raise OptionError(f"a scheduler address needs backend='dask' (got backend={spec.backend!r})")
    return spec


def _spec_from_store(folder_or_store) -> JobSpec:
    path = find_store(folder_or_store)
    with RunStore.open_read_only(path) as store:
        recorded = store.get("spec")
    if recorded is None:
        raise StoreError(f"the run store {str(path)!r} holds no job settings (it was never started); "
                         f"run the job file with 'selectkit job run JOB.toml'")
    spec = JobSpec.from_dict(recorded)
    return replace(spec, output=path.parent)


def _run(spec: JobSpec, *, resume: bool, progress, engine) -> JobOutcome:
    started = time.monotonic()
    folder = Path(spec.output)
    store_path = folder / STORE_NAME
    if not spec.table.is_file():
        raise JobFileError(f"the data file {str(spec.table)!r} of job {spec.name!r} does not exist; "
                           f"put it back or fix [data] table in the job file")
    if spec.backend == "dask":
        _check_dask(spec.scheduler)
    lock = StoreLock(store_path).acquire()
    try:
        store = RunStore.create_or_open(folder)
        try:
            return _run_locked(spec, store, resume=resume, progress=progress, engine=engine, started=started)
        finally:
            store.close()
    finally:
        lock.release()


def _check_dask(scheduler: str | None, timeout: float = 10.0) -> None:
    """Refuse early, in one line, when the Dask cluster cannot be used."""
    try:
        import distributed
    except ImportError as err:
        raise OptionError("backend 'dask' needs the dask extra; install it with: pip install 'selectkit[dask]'") from err
    if scheduler is None:
        try:
            distributed.get_client()
        except ValueError as err:
            raise OptionError("backend 'dask' needs the address of a scheduler: set [run] scheduler = "
                              "\"tcp://HOST:8786\" (no Dask client runs in this process)") from err
        return
    try:
        client = distributed.Client(scheduler, timeout=timeout)
    except (OSError, TimeoutError) as err:
        raise OptionError(f"cannot reach the Dask scheduler at {scheduler!r} within {timeout:.0f} s ({err}); "
                          f"check the address and that the scheduler runs") from err
    client.close()


def _run_locked(spec, store: RunStore, *, resume, progress, engine, started) -> JobOutcome:
    fingerprint = data_fingerprint(spec.table)
    recorded = store.get("spec")
    if recorded is not None and not resume:
        store.clear()
        recorded = None
    if recorded is not None:
        _check_same_job(spec, store, fingerprint)

    try:
        setup = engine.prepare(spec)
    except OptionError as err:
        where = spec.source or spec.name
        raise JobFileError(f"job {str(where)!r}: {err}") from err
    keys = engine.unit_keys(setup)
    done = store.finished_units() if recorded is not None else {}
    done = {k: v for k, v in done.items() if k in set(keys)}

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

    stop = _StopFlag(spec.time_budget, started)
    reporter = make_reporter(progress, spec.name, total=len(keys), initial=len(done),
                              initial_models=store.unit_counts()[1], started=started)
    last = [time.monotonic()]

    planned = set(keys)

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
        if isinstance(err, (KeyboardInterrupt, SystemExit)):
            store.set_many({"state": "interrupted", "stopped_by": f"stopped at once ({type(err).__name__})"})
            store.log("run stopped at once; the finished units are kept", level="warning")
        else:
            store.set_many({"state": "failed", "stopped_by": f"{type(err).__name__}: {err}"})
            store.log(f"run failed: {type(err).__name__}: {err}", level="error")
        raise
    reporter.close()

    units_done = store.unit_counts()[0]
    complete = set(keys) <= store.finished_keys()
    stopped_by = "completed" if complete else (stop.reason or "stopped before every unit finished")
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
        result = engine.finish(setup, founds, **run_options)
        outputs = engine.write(result, store.path.parent)
        store.record_shortlist(engine.shortlist_rows(result))
    else:
        # Stopped before any model was scored: nothing to rank; the summary says so.
        result, outputs = None, {}
        stopped_by = f"{stopped_by}; no model was scored yet, so no shortlist was written"
    models = int(sum(int(getattr(f, "evaluated", 0)) for f in founds))
    seconds = time.monotonic() - started
    outcome = JobOutcome(
        name=spec.name, store=store.path, outputs={k: Path(v) for k, v in outputs.items()}, complete=complete,
        units_done=units_done, units_total=len(keys), units_resumed=len(done), models_evaluated=models,
        stopped_by=stopped_by, not_exact=not_exact, seconds=seconds, result=result,
    )
    summary_path = store.path.parent / SUMMARY_NAME
    atomic_write_text(summary_path, json.dumps(_summary(outcome, spec), indent=2) + "\n")
    outcome = replace(outcome, outputs={**outcome.outputs, "run summary": summary_path})
    store.set_many({"state": "complete" if complete else "incomplete", "stopped_by": stopped_by,
                    "models_evaluated": models, "not_exact": list(not_exact),
                    "outputs": {k: str(v) for k, v in outcome.outputs.items()}, "run_ended_at": time.time()})
    store.log(f"run ended ({stopped_by}): {units_done} of {len(keys)} units, {models:,} models evaluated, "
              f"{format_seconds(seconds)}")
    return outcome


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


def _check_same_job(spec: JobSpec, store: RunStore, fingerprint: dict) -> None:
    recorded_data = store.get("data") or {}
    if recorded_data.get("sha256") != fingerprint["sha256"] or recorded_data.get("size") != fingerprint["size"]:
        raise StoreError(
            f"the data file {str(spec.table)!r} changed since the run store {str(store.path)!r} was made "
            f"({recorded_data.get('size')} bytes then, {fingerprint['size']} now; SHA-256 differs); resuming would "
            f"mix results of two tables: restore the file, or start afresh (selectkit job run --fresh, "
            f"or resume=False)",
            path=str(spec.table),
        )
    if store.get("spec_fingerprint") != spec.fingerprint():
        then = JobSpec.from_dict(store.get("spec")).result_settings()
        now = spec.result_settings()
        changed = [f"[{k.split('.')[0]}] {k.split('.')[1]}: {then.get(k)!r} -> {now.get(k)!r}"
                   for k in now if then.get(k) != now.get(k)]
        raise StoreError(
            f"the job's settings changed since the run store {str(store.path)!r} was made "
            f"({'; '.join(changed) or 'settings differ'}); use another output folder, or start afresh "
            f"(selectkit job run --fresh, or resume=False)"
        )


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
    """``should_stop`` for run_methods: a time budget and the signals received."""

    def __init__(self, budget: float | None, started: float):
        self.budget = budget
        self.started = started
        self.requested = False
        self.forced = False
        self.reason = ""

    def request(self, reason: str) -> None:
        if not self.requested:
            self.requested = True
            self.reason = reason

    def __call__(self) -> bool:
        if not self.requested and self.budget is not None and time.monotonic() - self.started >= self.budget:
            self.request(f"time budget of {format_seconds(self.budget)} reached")
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
