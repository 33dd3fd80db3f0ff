"""The notebook face: ``selectkit.search(...)`` and its :class:`Result`.

The pipeline is composed here and nowhere else::

    prepare_search  : table → Dataset → CandidateSet → Moments, the methods to run
    run_methods     : every method's work units (resumable, parallel) → list of Found
    finish          : ranking, checks of the best models → Result

The job runner (:mod:`selectkit.jobs`) drives the same three steps with a run
store between them, so an overnight job and a notebook call give the same
shortlist for the same options and seed.
"""

from __future__ import annotations

import html
import importlib
import os
from contextlib import nullcontext
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

import numpy as np
import pandas as pd

from . import __version__
from ._io import atomic_write_bytes
from .errors import OptionError, SelectkitError
from .parallel import check_n_jobs, dask_session, run_units
from .settings import AIM_NAMES, METHOD_NAMES, RENAMED_VALUES

__all__ = [
    "METHODS",
    "AIMS",
    "SearchSetup",
    "Result",
    "prepare_search",
    "prepare_candidates",
    "unit_keys",
    "run_methods",
    "finish",
    "search",
    "load",
]

#: Search methods by name.  "auto" runs an exact search when the terms fit
#: (≤ ``exact_limit``) and the screening pipeline otherwise.
METHODS = METHOD_NAMES
#: Former names of values, refused with the new spelling.
_RENAMED = RENAMED_VALUES
AIMS = AIM_NAMES
_SAVE_FORMAT = "selectkit-result"
# 2: shortlists hold answers (sets of variables) first; 3: a data-only file (selectkit._datafile), no pickle
_SAVE_VERSION = 3


def _check_choice(value, valid, what):
    if isinstance(value, str) and value in _RENAMED and _RENAMED[value] in valid:
        raise OptionError(f"{what} {value!r} was renamed; did you mean {_RENAMED[value]!r}?")
    if value not in valid:
        raise OptionError(f"unknown {what} {value!r}; choose one of {', '.join(map(str, valid))}")
    return value


@dataclass(frozen=True, eq=False)
class MethodRun:
    """One search method to run: its name, the module that implements it and its options.

    The module is held by name so that a run pickles to worker processes.
    """

    name: str
    module_name: str
    options: Any

    @property
    def module(self):
        return importlib.import_module(self.module_name)


@dataclass(frozen=True, eq=False)
class SearchSetup:
    """Everything decided before the searches start.

    Attributes
    ----------
    dataset : Dataset
    candidates : CandidateSet
    moments : Moments
    runs : tuple of MethodRun
        The searches, in the order they run.
    settings : dict
        The options as given (plain values), for reports and run stores.
    deadline : selectkit._budget.Deadline or None
        The run's one time budget (``time_budget``), made when
        :func:`prepare_search` started; :func:`run_methods` and :func:`finish`
        use it unless given another.
    """

    dataset: Any
    candidates: Any
    moments: Any
    runs: tuple
    settings: Mapping
    deadline: Any = None

    @cached_property
    def planned(self) -> tuple:
        """Each run with its work units and their store keys ``"<method>/<unit key>"``.

        Planned once per setup (planning may screen or seed bounds), then
        shared by :func:`unit_keys` and :func:`run_methods`.  With a time
        budget each search gets what is left of it when it is planned, and a
        method with a ``settle`` step (screening) does it once here, so that its
        plan and its merge see the same screening.
        """
        return tuple(_plan_run(self, run) for run in self.runs)

    def __getstate__(self):
        # The planned units are derived and can be large: a saved result re-plans when asked.
        state = dict(self.__dict__)
        state.pop("planned", None)
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)


def _budgeted(options, deadline):
    """``options`` with the run's deadline: its ``time_budget`` set to what is left, its ``deadline`` set."""
    import dataclasses

    if deadline is None or not dataclasses.is_dataclass(options):
        return options
    names = {f.name for f in dataclasses.fields(options)}
    changes = {}
    if "deadline" in names:
        changes["deadline"] = deadline
    if "time_budget" in names:
        changes["time_budget"] = deadline.search_budget()
    return dataclasses.replace(options, **changes) if changes else options


def _plan_run(setup: "SearchSetup", run: "MethodRun") -> tuple:
    """``(run, units, keys)`` of one search: its options given the deadline and settled, then planned."""
    run = _settled(run, setup.candidates, setup.moments, setup.deadline)
    units = run.module.plan(setup.candidates, setup.moments, run.options)
    keys = [f"{run.name}/{u.key}" for u in units]
    if len(set(keys)) != len(keys):
        raise SelectkitError(f"search {run.name!r} planned two work units with one key")
    return run, tuple(units), tuple(keys)


def _settled(run: "MethodRun", candidates, moments, deadline) -> "MethodRun":
    """The run with the deadline handed to its options and its ``settle`` step (if any) done."""
    from dataclasses import replace

    options = _budgeted(run.options, deadline)
    settle = getattr(run.module, "settle", None)
    if settle is not None:
        options = settle(candidates, moments, options)
    return run if options is run.options else replace(run, options=options)


# ----------------------------------------------------------------------------------------------------
# stage 1: prepare
# ----------------------------------------------------------------------------------------------------


def prepare_candidates(data, **settings):
    """Read and check the data and build its candidate terms (the first half of :func:`prepare_search`).

    Takes the settings of the ``[data]`` and ``[forms]`` sections (see
    :mod:`selectkit.settings`).

    Returns
    -------
    (Dataset, CandidateSet)
    """
    from . import settings as _settings

    names = tuple(x.name for x in _settings.SETTINGS if x.section in ("data", "forms"))
    return _intake_and_candidates(data, _settings.resolve(settings, allowed=names), check_folds=False)


def _build_options(s) -> dict:
    options: dict[str, Any] = dict(
        fractional_polynomials=s["fractional_polynomials"],
        shifts=dict(s["shifts"]),
        interactions=s["interactions"] if isinstance(s["interactions"], bool) else list(s["interactions"]),
        response_transform=_response_transform(s["response_form"]),
        prefer=tuple(s["prefer"]),
        twin_limit=s["twin_limit"],
        vif_limit=s["vif_limit"],
        curvature_test=s["curvature_test"],
    )
    if s["forms"] is not None:
        options["forms"] = tuple(s["forms"])
    return options


def _in_parts(data, s):
    """Intake, candidates and moments of a table read in parts, or None when it is read whole."""
    from . import parts as _parts

    if not _parts.wants_parts(data, s["read_in_parts"]):
        return None
    from . import settings as _settings

    if s["decimal_mark"] is not None:
        raise OptionError(f"{_settings.spell('decimal_mark')} applies to one CSV file read whole; the parts of a "
                          f"table are read with the mark each file shows — leave it out")
    full = {x.name: x.default for x in _settings.SETTINGS if not x.required}
    full.update(s)
    return _parts.prepare_in_parts(data, full, build_options=_build_options(s), check_folds=True)


def _intake_and_candidates(data, s, *, check_folds):
    from . import candidates as _candidates
    from . import data as _data

    parted = _in_parts(data, s)
    if parted is not None:
        return parted[0], parted[1]
    dataset = _data.prepare(
        data,
        response=s["response"],
        predictors=list(s["predictors"]) if s["predictors"] else None,  # empty: every other column
        forced=list(s["always_include"]),
        exclude=list(s["leave_out"]),
        weights=s["row_weights"],
        missing=s["incomplete_rows"],
        keep_identifiers=list(s["keep_id_columns"]),
        decimal_mark=s["decimal_mark"],
    )
    if check_folds:
        _check_folds_fit(s["folds"], s["honest_folds"], dataset.n, s["seed"])
    cands = _candidates.build_candidates(dataset, **_build_options(s))
    return dataset, cands


def prepare_search(data, **settings) -> SearchSetup:
    """Read and check the data, build the candidates and their moments, choose the searches.

    Parameters are those of :func:`search` (every setting of
    :data:`selectkit.settings.SETTINGS`; the parallel ones are recorded and
    used by :func:`run_methods` and :func:`finish` through the caller).
    Every setting is checked before anything is read, then those that need
    the data (``folds`` and ``honest_folds`` against the rows) as soon as the
    data are read, so that a bad setting fails before any search work.  A
    ``time_budget`` starts here: it covers the whole run.

    Returns
    -------
    SearchSetup
    """
    from . import settings as _settings
    from ._budget import start_deadline
    from .moments import moments_of

    s = _settings.resolve(settings, allowed=_PYTHON_SETTINGS)
    deadline = start_deadline(s["time_budget"])
    time_budget = None if deadline is None else deadline.seconds
    methods = s["methods"]
    for name in s["method_options"]:
        if name not in methods and "auto" not in methods:
            raise OptionError(f"{_settings.spell('method_options')} gives settings for {name!r}, which is not among "
                              f"the methods ({', '.join(methods)}); add it to {_settings.spell('methods')} or drop "
                              f"its settings")

    parted = _in_parts(data, s)
    if parted is not None:
        dataset, cands, moments = parted
    else:
        dataset, cands = _intake_and_candidates(data, s, check_folds=True)
        moments = moments_of(cands)

    n_terms = len(cands.terms)
    resolved = []
    for name in methods:
        if name == "auto":
            name = "exhaustive" if n_terms <= s["exact_limit"] else "screen"
        if name not in resolved:
            resolved.append(name)
    runs = tuple(
        _make_run(name, s["method_options"].get(name, {}), seed=s["seed"], time_budget=time_budget,
                  exact_limit=s["exact_limit"], folds=s["folds"], criterion=s["criterion"], aim=s["aim"])
        for name in resolved
    )
    settings = {"selectkit_version": __version__,
                "data": data if isinstance(data, (str, os.PathLike)) else
                ("<DataFrame>" if cands.parts is None or cands.parts.table.frame is not None else
                 "<Dask DataFrame>")}
    settings.update(_settings_record(s, time_budget))
    settings.update({"methods_run": [r.name for r in runs], "n_rows": int(moments.n), "n_terms": n_terms})
    if cands.parts is not None:
        info = cands.parts
        settings["read_in_parts_record"] = {"description": info.description, "files": list(info.files),
                                            "parts": info.n_parts, "rows_read": info.n_rows,
                                            "rows_used": info.n_used, "sample_rows": info.sample_rows}
    if isinstance(settings["data"], os.PathLike):
        settings["data"] = os.fspath(settings["data"])
    return SearchSetup(dataset=dataset, candidates=cands, moments=moments, runs=runs, settings=settings,
                       deadline=deadline)


def _names_of_python_settings() -> tuple:
    from .settings import PYTHON, SETTINGS

    return tuple(x.name for x in SETTINGS if PYTHON in x.surfaces)


_PYTHON_SETTINGS = _names_of_python_settings()


def _response_transform(form):
    """The candidates' ``response_transform`` from the setting ``response_form`` ("boxcox:0.5" → a pair)."""
    if isinstance(form, str) and form.startswith("boxcox:"):
        return ("boxcox", float(form.split(":", 1)[1]))
    return form


def _settings_record(s: Mapping, time_budget) -> dict:
    """The checked settings as plain values (lists for tuples), for reports, JSON and run stores."""
    from .settings import BY_NAME

    out = {}
    for key, value in s.items():
        if not BY_NAME[key].recorded:
            continue  # where the run ran (workers, backend, scheduler) does not change what it found
        if key == "time_budget":
            value = time_budget
        elif key == "folds" and not isinstance(value, int):
            value = getattr(value, "k", str(value))
        elif key == "interactions" and not isinstance(value, bool):
            value = [list(pair) for pair in value]
        elif key == "response_form" and value is not None and not isinstance(value, str):
            value = repr(value)
        elif isinstance(value, tuple):
            value = list(value)
        elif isinstance(value, dict):
            value = {k: dict(v) if isinstance(v, dict) else v for k, v in value.items()}
        out[key] = value
    return out


def _check_folds_fit(folds, honest_folds, n_rows: int, seed) -> None:
    """Refuse, before any search, folds the rows cannot fill (the check ``make_folds`` would make later)."""
    from .errors import InputError
    from .searches.crossval import make_folds

    try:
        make_folds(folds, n_rows, seed)
    except InputError as err:
        raise OptionError(f"folds = {getattr(folds, 'k', folds)!r}: {err}") from err
    if int(honest_folds) > n_rows:
        raise OptionError(f"honest_folds = {honest_folds}: {honest_folds} outer folds need at least {honest_folds} "
                          f"rows; the data have {n_rows}; use fewer outer folds")


def check_output_folder(folder) -> Path:
    """Check, before any work, that results can be written to ``folder``; return it as a Path.

    The folder (or, when it does not exist yet, its nearest existing parent)
    must be a folder in which a file can be made: a probe file is created and
    removed.  Nothing is left behind.

    Raises
    ------
    OptionError
        One line naming the folder and what is wrong.
    """
    import tempfile

    folder = Path(folder).expanduser()
    probe_in = folder
    while not probe_in.exists():
        if probe_in.parent == probe_in:
            break
        probe_in = probe_in.parent
    if folder.exists() and not folder.is_dir():
        raise OptionError(f"the output folder {str(folder)!r} is a file, not a folder; choose another output folder "
                          f"or move the file away")
    if not probe_in.is_dir():
        raise OptionError(f"the output folder {str(folder)!r} cannot be made: {str(probe_in)!r} is a file, not a "
                          f"folder; choose another output folder")
    try:
        handle, name = tempfile.mkstemp(prefix=".selectkit-probe-", dir=probe_in)
        os.close(handle)
        os.unlink(name)
    except OSError as err:
        where = "" if probe_in == folder else f" (its parent {str(probe_in)!r} does not let a folder be made)"
        raise OptionError(f"the output folder {str(folder)!r} is not writable{where}: {err.strerror or err}; "
                          f"choose another output folder") from err
    return folder


def check_scheduler(scheduler: str | None, timeout: float = 10.0) -> None:
    """Refuse early, in one line, when the Dask backend cannot be used: no extra, no client, or no scheduler
    reachable at ``scheduler`` within ``timeout`` seconds."""
    try:
        import distributed
    except ImportError as err:
        raise OptionError("backend 'dask' needs the dask extra; install it with: pip install 'selectkit[dask]'") from err
    if scheduler is None:
        try:
            distributed.get_client()
        except ValueError as err:
            raise OptionError("backend 'dask' needs the address of a scheduler (tcp://HOST:8786); no Dask client "
                              "runs in this process") from err
        return
    try:
        client = distributed.Client(scheduler, timeout=timeout)
    except (OSError, TimeoutError) as err:
        raise OptionError(f"cannot reach the Dask scheduler at {scheduler!r} within {timeout:.0f} s ({err}); "
                          f"check the address and that the scheduler runs") from err
    client.close()


def check_run_options(*, n_jobs: int = 1, backend: str = "loky", scheduler: str | None = None,
                      timeout: float = 10.0) -> None:
    """Check the parallel options before any work: workers, backend, and that a Dask scheduler answers."""
    from .parallel import BACKENDS

    check_n_jobs(n_jobs)
    _check_choice(backend, BACKENDS, "parallel backend")
    if isinstance(timeout, bool) or not isinstance(timeout, (int, float)) or not 0 < timeout < float("inf"):
        raise OptionError(f"the scheduler timeout must be a positive number of seconds (got {timeout!r}); "
                          f"10 is the default")
    if scheduler is not None and backend != "dask":
        raise OptionError(f"a scheduler address needs backend 'dask' (got backend {backend!r})")
    if backend == "dask":
        check_scheduler(scheduler, timeout=timeout)


def _make_run(name, user_options, *, seed, time_budget, exact_limit, folds, criterion, aim) -> MethodRun:
    """Resolve a method name and its user options to a module and its options object."""
    from .searches import _adapters

    module_name, options = _adapters.make_options(
        name, dict(user_options), seed=seed, time_budget=time_budget, exact_limit=exact_limit,
        folds=folds, criterion=criterion, aim=aim,
    )
    return MethodRun(name=name, module_name=module_name, options=options)


# ----------------------------------------------------------------------------------------------------
# stage 2: run
# ----------------------------------------------------------------------------------------------------


def unit_keys(setup: SearchSetup) -> list[str]:
    """The keys of every work unit :func:`run_methods` will run, in order.

    A run store records finished units under these keys and hands them back
    to :func:`run_methods` as ``done`` on resume.
    """
    return [key for _, _, keys in setup.planned for key in keys]


def _call_unit(args):
    module_name, unit = args
    return importlib.import_module(module_name).run_unit(unit)


def run_methods(
    setup: SearchSetup,
    *,
    done: Mapping[str, Any] | None = None,
    on_unit: Callable[[str, Any], None] | None = None,
    n_jobs: int = 1,
    backend: str = "loky",
    scheduler: str | None = None,
    should_stop: Callable[[], bool] | None = None,
    deadline=None,
) -> list:
    """Run every planned search, unit by unit, and merge each into a ``Found``.

    Parameters
    ----------
    setup : SearchSetup
    done : mapping, optional
        Unit key → result of units already finished (a resumed job); they are
        not run again.
    on_unit : callable, optional
        ``on_unit(key, result)`` in this process as each new unit finishes.
    n_jobs, backend, scheduler
        See :func:`selectkit.parallel.run_units`.
    should_stop : callable, optional
        Polled as each unit finishes (before each, with one worker); when it returns True no new unit
        starts and each search is merged from the units that finished (and
        marked not proven exact).
    deadline : selectkit._budget.Deadline, optional
        The run's time budget; default ``setup.deadline``.  It is polled like
        ``should_stop`` and, through the plan, checked inside the searches; a
        search it cuts says so in ``stopped_by`` with the time that was left
        when the search started.

    Returns
    -------
    list of Found
        One per method, in the order of ``setup.runs`` (a method may return
        several, e.g. the screening pipeline).
    """
    check_n_jobs(n_jobs)
    done = dict(done or {})
    founds = []
    if deadline is not None and deadline is not setup.deadline:
        from dataclasses import replace

        setup = replace(setup, deadline=deadline)  # planned afresh with this budget
    deadline = setup.deadline
    session = dask_session(scheduler) if backend == "dask" else nullcontext()
    with session:
        for run, units, keys in _plans(setup):
            left = None if deadline is None else deadline.remaining()
            results: dict[int, Any] = {i: done[k] for i, k in enumerate(keys) if k in done}
            todo = [i for i in range(len(units)) if i not in results]

            def _record(j, result, todo=todo, results=results, keys=keys):
                results[todo[j]] = result
                if on_unit is not None:
                    on_unit(keys[todo[j]], result)

            # Every search runs at least one unit (planned with what is left of the budget, it returns at
            # once when nothing is left, with what its planning found); no unit starts after that.
            def _past_deadline(user=should_stop, results=results):
                return (deadline.expired() and bool(results)) or (user is not None and bool(user()))

            stop = should_stop if deadline is None else _past_deadline

            stopped = stop is not None and bool(todo) and stop()
            if todo and not stopped:
                finished = run_units(_call_unit, [(run.module_name, units[i]) for i in todo], n_jobs=n_jobs,
                                     backend=backend, scheduler=scheduler, on_result=_record,
                                     should_stop=stop)
                stopped = len(finished) < len(todo)
            ordered = [results.get(i) for i in range(len(units))]
            merged = run.module.merge(setup.candidates, setup.moments, run.options, ordered)
            merged = merged if isinstance(merged, (list, tuple)) else [merged]
            unfinished = stopped or any(r is None for r in ordered)
            if unfinished:
                from .searches._found import mark_incomplete

                merged = [mark_incomplete(f, "stopped before every work unit finished") for f in merged]
            if deadline is not None and deadline.expired():
                from .searches._found import mark_incomplete

                done_units = sum(r is not None for r in ordered)
                merged = [mark_incomplete(
                    f, f"the {deadline.describe()} of the whole run ran out during search {run.name!r} "
                       f"({_seconds(left)} were left when it started; {done_units} of {len(units)} work units "
                       f"finished)") if unfinished or "time budget" in str(f.stopped_by) else f for f in merged]
            founds.extend(merged)
    return founds


def _plans(setup: SearchSetup):
    """``(run, units, keys)`` of each search.  With a time budget and no plan made yet, each search is
    planned just before it runs, so that it is given what is left of the budget then."""
    if setup.deadline is None or "planned" in setup.__dict__:
        yield from setup.planned
        return
    for run in setup.runs:
        yield _plan_run(setup, run)


def _seconds(value) -> str:
    from ._budget import format_seconds

    return format_seconds(value)


# ----------------------------------------------------------------------------------------------------
# stage 3: finish
# ----------------------------------------------------------------------------------------------------


def finish(setup: SearchSetup, founds: Sequence, *, n_jobs: int = 1, backend: str = "loky",
           scheduler: str | None = None, deadline=None) -> "Result":
    """Rank the pooled models, check the best ones and return a :class:`Result`.

    ``deadline`` (default ``setup.deadline``) is the run's time budget: the
    bootstrap resamples and the outer folds of the honest error stop when it
    runs out, and the shortlist's notes say which stage stopped, what it did,
    and that the figures rest on that part.  Ranking and checks always run.
    """
    from . import rank as _rank_module

    from .searches.crossval import press_of, score_subsets

    from . import _stages

    s = setup.settings
    pooled = sorted({sub for f in founds for sub in f.subsets})
    _stages.step("ranking the pooled models", 0, 1)
    # CV errors come from moments (cheap) for every pooled model; PRESS needs a pass over the rows per
    # model, so unless it ranks the models it is computed for the shortlisted ones only.
    press_ranks = s["criterion"] == "press"
    scores = score_subsets(setup.candidates, pooled, folds=s["folds"], seed=s["seed"], moments=setup.moments,
                           press_for=None if press_ranks else ()) if pooled else None

    def _rank(scores):
        return _rank_module.rank(founds, setup.candidates, setup.moments, criterion=s["criterion"], aim=s["aim"],
                                 convention=s["parameter_count"], size=s["shortlist_size"], max_delta=s["keep_within"],
                                 scores=scores)

    shortlist = _rank(scores)
    if scores is not None and not press_ranks:
        shown = set(shortlist.subsets) | set(shortlist.model_subsets)
        found = press_of(setup.candidates, setup.moments,
                         [sub for sub, rss in zip(scores["subset"], scores["rss"]) if sub in shown and np.isfinite(rss)])
        scores["press"] = [found.get(sub, np.nan) for sub in scores["subset"]]
        shortlist = _rank(scores)  # same order (PRESS does not rank): now with PRESS shown
    _stages.step("ranking the pooled models", 1, 1)
    deadline = setup.deadline if deadline is None else deadline
    stability = None
    if s["resamples"] > 0:
        stability = _rank_module.stability(
            setup.candidates,
            _SearchRunner(tuple(setup.runs), deadline),
            n_boot=s["resamples"],
            seed=s["seed"],
            n_jobs=n_jobs,
            backend=backend,
            criterion=shortlist.criterion,
            deadline=deadline,
        )
    result = Result(setup=setup, founds=tuple(founds), ranked=shortlist, stability=stability)
    if s.get("split_fraction", 0) and shortlist.subsets:
        from .inference import split_inference

        result.split = split_inference(setup.candidates, _SearchRunner(tuple(setup.runs), deadline),
                                       fraction=s["split_fraction"], seed=s["seed"], criterion=shortlist.criterion,
                                       convention=s["parameter_count"], time_ordered=s["time_ordered"],
                                       best_on_all_rows=shortlist.subsets[0], moments=setup.moments)
    if s.get("honest_folds", 0) >= 2:
        result.honest_error(folds=s["honest_folds"], n_jobs=n_jobs, backend=backend, scheduler=scheduler,
                            deadline=deadline)
    if deadline is not None:
        _note_budget(result, founds, deadline)
    return result


def _note_budget(result: "Result", founds, deadline) -> None:
    """Say in the shortlist's notes which stages the time budget cut, and what they did."""
    from dataclasses import replace

    notes = [f"search {f.method!r} was cut short by the {deadline.describe()}: {f.stopped_by}"
             for f in founds if "time budget" in str(f.stopped_by)]
    if result.stability is not None:
        notes += [n for n in result.stability.notes if "time budget" in n]
    elif result.settings.get("resamples", 0) > 0:
        notes.append(f"The {deadline.describe()} ran out before the bootstrap resamples could be compared with the "
                     f"searches on all rows: no stability is shown.")
    honest = getattr(result, "honest", None)
    if honest is not None:
        notes += [n for n in getattr(honest, "notes", ()) if "time budget" in n]
    elif result.settings.get("honest_folds", 0) >= 2:
        notes.append(f"The {deadline.describe()} ran out before an outer fold of the honest error finished: "
                     f"no honest error is shown.")
    if notes:
        result._ranked = replace(result._ranked, notes=tuple(result._ranked.notes) + tuple(notes))



@dataclass(frozen=True)
class _SearchRunner:
    """Picklable callable that repeats the searches of a setup on other rows (bootstrap
    resamples for stability, outer training folds for the honest error) and pools them."""

    runs: tuple
    deadline: Any = None

    def __call__(self, candidates):
        from ._budget import BudgetSpent
        from .moments import moments_of
        from .searches._found import pool

        moments = moments_of(candidates)
        found = []
        for run in self.runs:
            if self.deadline is not None and self.deadline.expired():
                raise BudgetSpent(f"the {self.deadline.describe()} ran out before search {run.name!r}")
            run = _settled(run, candidates, moments, self.deadline)
            units = run.module.plan(candidates, moments, run.options)
            results = []
            for unit in units:
                if self.deadline is not None and self.deadline.expired():
                    raise BudgetSpent(f"the {self.deadline.describe()} ran out during search {run.name!r}")
                results.append(run.module.run_unit(unit))
            merged = run.module.merge(candidates, moments, run.options, results)
            found.extend(merged if isinstance(merged, (list, tuple)) else [merged])
        if self.deadline is not None and self.deadline.expired():
            # the clock may have cut a search: a repeat that did not run to its end is left out
            raise BudgetSpent(f"the {self.deadline.describe()} ran out during the searches")
        return pool(found)


# ----------------------------------------------------------------------------------------------------
# the facade
# ----------------------------------------------------------------------------------------------------


def search(data, **settings) -> "Result":
    """Search for the best linear models of ``response`` and return a ranked, checked shortlist.

    Every setting is a keyword argument; each has the same name as a job-file
    key and, with dashes, a command-line flag (see :mod:`selectkit.settings`,
    where they are defined once).  A former spelling (``forced``, ``n_jobs``,
    ``max_delta`` ...) is refused with the current one.

    Parameters
    ----------
    data : str, path or DataFrame
        A CSV or Parquet file, or a DataFrame (never modified).
{parameters}

    Returns
    -------
    Result

    Notes
    -----
    ``methods`` names the searches to run and pool: ``"exhaustive"`` (exact best
    subsets by branch and bound), ``"forward"`` (forward selection),
    ``"backward"`` (backward elimination), ``"stepwise"`` (steps both ways),
    ``"crossval"`` (model size chosen by cross-validation), ``"screen"``
    (screen → exact search on the survivors → stepwise polish) and ``"auto"``
    (exhaustive when the candidate terms are at most ``exact_limit``, else
    screen).  The result does not depend on ``workers`` or ``backend``.

    The p-values and intervals of a model chosen by a search are optimistic:
    the same data chose the model and estimated it.  Prefer the honest
    cross-validated error, and check the chosen model on data it has not seen.
    Association is not causation, and the decision rests with the
    practitioner and local professional standards.

    Examples
    --------
    >>> import selectkit
    >>> from selectkit.demo import make_greenhouse
    >>> result = selectkit.search(make_greenhouse(), response="yield_kg_m2", seed=0)  # doctest: +SKIP
    >>> result.terms(0)  # doctest: +SKIP
    ('log(light_mol_m2_day)', 'sqrt(co2_above_ambient_ppm)', ...)
    """
    from . import settings as _settings

    s = _settings.resolve(settings, allowed=_PYTHON_SETTINGS)  # every name and value checked before any work
    check_run_options(n_jobs=s["workers"], backend=s["backend"], scheduler=s["scheduler"],
                      timeout=s["scheduler_timeout"])
    setup = prepare_search(data, **settings)
    founds = run_methods(setup, n_jobs=s["workers"], backend=s["backend"], scheduler=s["scheduler"])
    return finish(setup, founds, n_jobs=s["workers"], backend=s["backend"], scheduler=s["scheduler"])


def _dress_search() -> None:
    """Give :func:`search` the signature and Parameters of every setting (``help()``, ``inspect``, IDEs)."""
    import inspect

    from . import settings as _settings

    data = inspect.Parameter("data", inspect.Parameter.POSITIONAL_OR_KEYWORD)
    search.__signature__ = _settings.signature(extra_first=[data])
    search.__doc__ = search.__doc__.replace("{parameters}", _settings.parameters_doc())
    prepare_search.__signature__ = search.__signature__


_dress_search()


class Result:
    """What a search found: the shortlist, its evidence, and access to every model.

    Attributes
    ----------
    shortlist : DataFrame
        One row per shortlisted answer (a set of variables, in its best
        forms), best first; see :class:`selectkit.rank.Shortlist`.
    models : DataFrame
        The model-level list: the best models, whatever answer they belong to.
    candidates : CandidateSet
    founds : tuple of Found
        What each search returned.
    stability : Stability or None
    """

    def __init__(self, *, setup: SearchSetup, founds, ranked, stability=None):
        self._setup = setup
        self.founds = tuple(founds)
        self._ranked = ranked
        self.stability = stability
        self.honest = None
        #: SplitInference (selectkit.inference) when ``split_fraction`` asked for honest p-values, else None
        self.split = None
        self._checks: dict[int, Any] = {}
        self._models: dict[int, Any] = {}

    # -- tables -------------------------------------------------------------------------------------
    @property
    def shortlist(self) -> pd.DataFrame:
        """The shortlist as a DataFrame: one row per answer (a set of variables), best first.

        Each row is the answer's best model with ``answer_weight``,
        ``models_in_answer`` and ``form_alternatives`` (the other forms within
        Δ ≤ 2 of it).  ``terms(i)``, ``model(i)`` and ``checks(i)`` take the
        row number ``i`` of this table.
        """
        return self._ranked.table

    @property
    def models(self) -> pd.DataFrame:
        """The model-level list: the best pooled models, whatever answer each belongs to (column ``answer``)."""
        return self._ranked.models

    @property
    def ranking(self):
        """The ranker's full :class:`selectkit.rank.Shortlist` (all pooled models, support, fits)."""
        return self._ranked

    @property
    def candidates(self):
        """The :class:`~selectkit.candidates.CandidateSet` searched."""
        return self._setup.candidates

    @property
    def dataset(self):
        return self._setup.dataset

    @property
    def settings(self) -> dict:
        return dict(self._setup.settings)

    def _subset(self, i: int) -> tuple[int, ...]:
        subsets = self._ranked.subsets
        if not 0 <= int(i) < len(subsets):
            raise OptionError(f"model {i} is not in the shortlist; it holds models 0 to {len(subsets) - 1}")
        return subsets[int(i)]

    def terms(self, i: int = 0) -> tuple[str, ...]:
        """Readable names of the terms of shortlisted model ``i``."""
        return tuple(self.candidates.terms[j].name for j in self._subset(i))

    def model(self, i: int = 0):
        """statsmodels results of the QR refit of shortlisted model ``i``.

        For a table read in parts the refit is on the checks' sample of rows
        (``self.candidates``); the shortlist's coefficients, and
        :meth:`predict`, use every row.
        """
        from .rank import refit

        if i not in self._models:
            self._models[i] = refit(self.candidates, self._subset(i))
        return self._models[i]

    def checks(self, i: int = 0):
        """Assumption checks (:class:`selectkit.diagnostics.Diagnosis`) of model ``i``."""
        from .diagnostics import diagnose

        if i not in self._checks:
            self._checks[i] = diagnose(self.candidates, self._subset(i),
                                       time_ordered=self._setup.settings["time_ordered"])
        return self._checks[i]

    def predict(self, frame: pd.DataFrame, i: int = 0) -> np.ndarray:
        """Predictions of model ``i`` for new rows (on the scale of the searched response)."""
        cols = [c for j in self._subset(i) for c in self.candidates.terms[j].columns]
        X = self.candidates.transform(frame)[:, cols]
        if self.candidates.parts is not None:  # the all-row fit, from the moments
            from .rank import moment_fit

            params = np.asarray(moment_fit(self._setup.moments, cols).coef, dtype=float)
        else:
            params = np.asarray(self.model(i).params)
        return params[0] + X @ params[1:]

    def honest_error(self, *, folds: int = 5, n_jobs: int = 1, backend: str = "loky", scheduler: str | None = None,
                     deadline=None):
        """Honest prediction error of the whole procedure (searches + ranking), by outer cross-validation.

        Every search of this result and the choice of the best model by the
        ranking criterion are repeated on the training rows of each outer fold;
        the chosen model is scored on the fold's rows, which took no part in the
        choice (Varma & Simon 2006).  Compare ``error`` with ``naive_error``,
        the CV error of the model chosen on all rows: the difference is the
        optimism of selection.  The result is kept as ``self.honest`` and shown
        in the report.  With a ``deadline`` (a :class:`selectkit._budget.Deadline`)
        the outer folds stop when it runs out; the result then rests on the
        folds that finished and its ``notes`` say so.

        Returns
        -------
        selectkit.searches.crossval.NestedResult
        """
        from .searches.crossval import procedure_cv_error

        if self.candidates.parts is not None:
            raise OptionError("the honest error repeats the searches on the rows of each outer fold, which a table "
                              "read in parts does not hold; search it with read_in_parts='no' (if it fits in "
                              "memory) to get it")
        criterion = self._ranked.criterion
        if criterion in ("press", "cv_mse", "holdout_mse"):
            criterion = "aicc"  # the repeated choice needs an rss-based criterion
        table = self._ranked.table
        naive = float(table["cv_mse"].iloc[0]) if "cv_mse" in table and len(table) else float("nan")
        self.honest = procedure_cv_error(
            self.candidates, _SearchRunner(tuple(self._setup.runs), deadline), criterion=criterion,
            convention=self._setup.settings["parameter_count"], folds=folds, seed=self._setup.settings["seed"],
            moments=self._setup.moments, naive_error=naive,
            procedure=" + ".join(r.name for r in self._setup.runs) + " search(es)",
            n_jobs=n_jobs, backend=backend, scheduler=scheduler, deadline=deadline,
        )
        return self.honest

    def response_boxcox(self, i: int = 0):
        """Box-Cox profile of the response given the terms of shortlisted model ``i`` (Box & Cox 1964).

        A check of the response's scale, not a decision: when the 95 % interval
        excludes the λ the search used (1: no transform), consider searching
        again with ``response_form`` set to the suggested λ — models on
        different response scales are compared only with the log-Jacobian
        added, which selectkit does.

        Returns
        -------
        selectkit.response.ResponseBoxCox
        """
        from .response import boxcox_response

        y = self.candidates.dataset.y if self.candidates.dataset is not None else self.candidates.y
        cols = [c for j in self._subset(i) for c in self.candidates.terms[j].columns]
        return boxcox_response(np.asarray(y, dtype=float), self.candidates.matrix[:, cols],
                               weights=self.candidates.weights)

    # -- plots --------------------------------------------------------------------------------------
    def plot_criterion(self):
        """matplotlib Figure: best criterion value against model size (``plots.criterion_by_size`` draws it)."""
        from .report import plots

        return plots.criterion_by_size(self._ranked).to_matplotlib()

    def plot_support(self):
        """matplotlib Figure: summed model weight of each variable across the pooled models."""
        from .report import plots

        return plots.variable_support(self._ranked).to_matplotlib()

    def plot_residuals(self, i: int = 0):
        """Figures of the checks of model ``i``, one per question, each titled with its check's level.

        Returns
        -------
        dict of str to matplotlib.figure.Figure
            Keyed ``mean`` (does the mean follow the terms?), ``forms``
            (component-plus-residual panels of the numeric terms; absent when
            the model has none), ``shape`` (are the errors shaped like a normal
            sample?), ``spread`` (does the spread change with the fitted
            value?) and ``influence`` (does any row pull the fit?).  The
            captions with the verdicts are in
            :func:`selectkit.report.plots.check_figures`.
        """
        from .report import plots

        return {item.key: item.figure for item in plots.check_figures(self.checks(i), self.candidates)}

    # -- outputs ------------------------------------------------------------------------------------
    def diagnoses(self, count: int | None = None) -> list:
        """Assumption checks of the first ``count`` shortlisted models (all by default), best first.

        A model that cannot be refitted or checked (its columns are dependent on
        these rows even after centring and scaling) is ``None`` in the list and
        its reason is added to the shortlist's ``notes``, which the report, the
        JSON document and the summary show; the other models are checked and
        reported as usual, so one such model never stops the run.
        """
        from . import _stages
        from .errors import SearchError

        count = len(self._ranked.subsets) if count is None else min(count, len(self._ranked.subsets))
        out = []
        for i in range(count):
            _stages.step("checking the shortlisted models", i, count)
            fit = self._ranked.fits[i] if i < len(self._ranked.fits) else None
            problem = getattr(fit, "problem", None)
            if problem is None:
                try:
                    out.append(self.checks(i))
                    continue
                except SearchError as err:
                    problem = str(err)
            out.append(None)
            terms = " + ".join(self.terms(i)) or "intercept only"
            note = f"Model {i + 1} ({terms}) could not be refitted or checked and is shown without them: {problem}"
            if note not in self._ranked.notes:
                import dataclasses

                self._ranked = dataclasses.replace(self._ranked, notes=tuple(self._ranked.notes) + (note,))
        _stages.step("checking the shortlisted models", count, count)
        return out

    def _report_contents(self) -> dict:
        diagnoses = self.diagnoses()  # first: a model that cannot be checked adds a note to the shortlist
        return dict(settings=self.settings, candidates=self.candidates, founds=self.founds,
                    shortlist=self._ranked, diagnoses=diagnoses, stability=self.stability,
                    honest=self.honest, split=self.split, scales=self._response_scales(diagnoses))

    def _response_scales(self, diagnoses) -> dict:
        """Box-Cox profiles of the response for the detailed answers whose errors are skewed (normality a
        problem, skewness beyond ±0.5) and whose untransformed response is positive: the next step offered."""
        from .errors import SelectkitError

        if self.candidates.response_transform.transform != "identity":
            return {}
        y = self.candidates.dataset.y if self.candidates.dataset is not None else self.candidates.y
        if not np.all(np.asarray(y, dtype=float) > 0):
            return {}
        detailed = self.settings.get("detailed_answers", 3)
        out = {}
        for i, d in enumerate(diagnoses[: len(diagnoses) if detailed is None else int(detailed)]):
            if d is None:
                continue
            from .diagnostics import _shape

            skewed = [c for c in d.checks if c.aspect == "normality" and c.level == "a problem"]
            shape = _shape(np.asarray(d.residuals, dtype=float))
            if skewed and shape is not None and abs(shape[0]) > 0.5:  # |g₁| > 0.5: the normality rule's own cut
                try:
                    out[i] = self.response_boxcox(i)
                except (SelectkitError, np.linalg.LinAlgError, ValueError):
                    continue
        return out

    def write(self, folder) -> dict:
        """Write the shortlist (CSV, JSON) and the HTML report into ``folder``; return their paths."""
        from . import report

        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        return report.write_outputs(folder, **self._report_contents())

    def to_html(self, path) -> Path:
        """Write the self-contained HTML report to ``path``."""
        from .report import html as report_html

        return report_html.write_html(Path(path), **self._report_contents())

    def summary(self) -> str:
        """A short plain-text summary."""
        from .report import text

        best = [d for d in self.diagnoses(1) if d is not None]  # first: it may add a note
        return text.summary(settings=self.settings, founds=self.founds, shortlist=self._ranked,
                            diagnoses=best, honest=self.honest)

    def __repr__(self) -> str:
        return (f"<selectkit.Result: {len(self._ranked.subsets)} shortlisted answers of "
                f"{self._setup.settings['response']!r}, best: {' + '.join(self.terms(0)) or '(intercept only)'}>")

    def _repr_html_(self) -> str:
        columns = [c for c in ("answer", "terms", "delta_from_best", "answer_weight", "form_alternatives",
                               self._ranked.criterion) if c in self.shortlist.columns]
        table = self.shortlist[list(dict.fromkeys(columns))].head(10).to_html(
            index=False, escape=True, float_format=lambda v: f"{v:.4g}")
        head = html.escape(f"selectkit: {len(self._ranked.subsets)} shortlisted answers (sets of variables, each "
                           f"in its best forms) of {self._setup.settings['response']}; the model-level list is "
                           "result.models")
        caution = ("p-values of a selected model are optimistic; association is not causation; "
                   "the decision rests with the practitioner.")
        return f"<div><strong>{head}</strong>{table}<p><em>{html.escape(caution)}</em></p></div>"

    # -- persistence --------------------------------------------------------------------------------
    def save(self, path) -> Path:
        """Save the result to one data-only file, atomically (the suffix ``.skres`` is customary).

        The file holds data only — JSON and numpy arrays, in the format of
        :mod:`selectkit._datafile` — never a pickle, so loading a file received
        from someone else builds values and runs none of its contents.  The
        time budget of the run is not kept (it means nothing once saved).

        Raises
        ------
        TypeError
            When the result holds something the format has no place for (a
            search's extras of a type it does not know); nothing is written then.
        """
        from . import _datafile

        path = Path(path)
        payload = {
            "selectkit_version": __version__,
            "setup": self._setup,
            "founds": self.founds,
            "ranked": self._ranked,
            "stability": self.stability,
            "honest": self.honest,
            "split": self.split,
        }
        atomic_write_bytes(path, _datafile.dumps(payload, kind=_SAVE_FORMAT, version=_SAVE_VERSION))
        return path


def load(path) -> Result:
    """Load a :class:`Result` saved with :meth:`Result.save`.

    The file is read as data only: it is checked to be a selectkit result file
    of this format version and nothing in it is executed (a pickle, or any file
    that is not a result, is refused).

    Raises
    ------
    DataFileError
        When there is no file at ``path``.
    InputError
        When the file is not a selectkit result file of this version.
    """
    from . import _datafile
    from .errors import DataFileError, InputError

    path = Path(path)
    if not path.is_file():
        raise DataFileError(f"no saved result at {path}; save one with result.save(path)")
    blob = path.read_bytes()
    try:
        payload = _datafile.loads(blob, kind=_SAVE_FORMAT, version=_SAVE_VERSION)
    except _datafile.RefusedData as err:
        raise InputError(f"{path} is not a selectkit result file of this version ({err.reason}); results are "
                         f"saved with Result.save, and a result saved by an older selectkit must be made again "
                         f"with selectkit.search") from err
    names = ("setup", "founds", "ranked", "stability", "honest")
    if not isinstance(payload, dict) or any(name not in payload for name in names) \
            or type(payload["setup"]).__name__ != "SearchSetup" or type(payload["ranked"]).__name__ != "Shortlist":
        raise InputError(f"{path} is not a selectkit result file (its contents are not a saved result); results "
                         f"are saved with Result.save")
    result = Result(setup=payload["setup"], founds=payload["founds"], ranked=payload["ranked"],
                    stability=payload["stability"])
    result.honest = payload["honest"]
    result.split = payload.get("split")
    return result
