"""Work units and their dispatch through joblib; seeds that survive parallelism.

A search splits its work into :class:`WorkUnit` values (picklable, each with a
stable ``key``), runs them with :func:`run_units` and merges the results in the
order the units were planned.  Because results come back in submission order
and every random draw inside a unit uses a seed spawned for that unit, the
merged answer is the same for any ``n_jobs`` and any backend.  The job runner
(:mod:`selectkit.jobs`) uses the same units to checkpoint and resume.

Backends are joblib's, chosen by name: ``"loky"`` (default, processes),
``"threading"``, ``"multiprocessing"``, ``"sequential"`` and ``"dask"``, which
runs the units on a Dask cluster through joblib's Dask backend (needs the
``selectkit[dask]`` extra and a scheduler address, or starts nothing and uses
the current ``distributed.Client``).

Small work stays in this process.  Starting process workers costs far more
than a small search: a cold pool of two loky workers that import the search
modules and load numba's cached kernels took 1.1–3.1 s on the project's
2-core machine (shared with other jobs), while every unit of an exact
search at p = 30 took 0.1–17 ms (all 25 together 0.02–0.06 s), so two
workers made such a search slower than one.  :func:`run_units` with a process backend ("loky",
"multiprocessing") therefore runs the units here, one after another, timing
each, and hands the rest to the workers only once the work still to do,
projected from the units timed so far, exceeds the break-even
``S·w/(w−1)`` (``S`` = :data:`WORKER_START_SECONDS`, ``w`` workers: the
start-up ``S`` plus a ``w``-fold speed-up on work ``R`` beats doing ``R``
here only when ``R > S·w/(w−1)``; 4 s with two workers).  ``benchmarks/
bench_stepwise.py`` measures ``S`` and the per-unit times again (section 4).
Where a unit runs never changes its result, so the answer is the same for
any ``n_jobs`` either way; the threading and Dask backends run as asked
(threads start in milliseconds, a Dask cluster is already running).
"""

from __future__ import annotations

import time
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from .errors import OptionError
from .settings import BACKEND_NAMES

__all__ = ["BACKENDS", "WORKER_START_SECONDS", "WorkUnit", "run_units", "dask_session", "spawn_seeds",
           "check_n_jobs", "projected_seconds", "worth_workers"]

BACKENDS = BACKEND_NAMES  # the one list, in selectkit.settings
#: Backends that start worker processes, and so pay a start-up cost.
PROCESS_BACKENDS = ("loky", "multiprocessing")
#: Seconds to start a cold pool of process workers ready to run a unit (spawn, import of the
#: search modules, numba's cached kernels loaded): 1.1–3.1 s measured for two loky workers on the
#: project's shared 2-core machine (``benchmarks/bench_stepwise.py``, section 4: the same units
#: run on a cold pool minus run here); 2 s is taken.  A pool still warm from an earlier call
#: costs about 0.03 s, but is not assumed: a warm pool is not known to be there.
WORKER_START_SECONDS = 2.0


@dataclass(frozen=True)
class WorkUnit:
    """An independent piece of a search.

    Attributes
    ----------
    key : str
        Stable identifier, unique within a search (e.g. ``"exhaustive/branch-003"``);
        the run store records units by it.
    payload : object
        Whatever the method's ``run_unit`` needs (picklable).
    """

    key: str
    payload: Any


def check_n_jobs(n_jobs) -> int:
    """Validate ``n_jobs`` (a positive int, or −1 for every core) and return it."""
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)):
        raise OptionError(f"n_jobs must be a whole number (got {n_jobs!r}); use 1, 2, ... or -1 for all cores")
    if n_jobs == 0 or n_jobs < -1:
        raise OptionError(f"n_jobs must be a positive number of workers or -1 for all cores (got {n_jobs})")
    return int(n_jobs)


def _check_backend(backend: str) -> str:
    if backend not in BACKENDS:
        raise OptionError(f"unknown parallel backend {backend!r}; choose one of {', '.join(BACKENDS)}")
    return backend


def run_units(
    function: Callable[[Any], Any],
    units: Sequence[Any],
    *,
    n_jobs: int = 1,
    backend: str = "loky",
    scheduler: str | None = None,
    on_result: Callable[[int, Any], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> list:
    """Run ``function(unit)`` for every unit and return results in unit order.

    Parameters
    ----------
    function : callable
        A module-level function (picklable).
    units : sequence
        Arguments, one per call.
    n_jobs : int, default 1
        Workers; ``1`` runs in this process without joblib's overhead.  With a
        process backend, units also run here while the work left is too small
        to pay for starting workers (see the module notes and
        :func:`worth_workers`); the results are the same.
    backend : str, default "loky"
        A name from :data:`BACKENDS`.
    scheduler : str, optional
        Address of a Dask scheduler (``"tcp://host:8786"``) when ``backend="dask"``;
        a client already connected to it in this process is reused.
    on_result : callable, optional
        Called as ``on_result(index, result)`` in this process as each result
        arrives, in unit order (used for checkpoints and progress).
    should_stop : callable, optional
        Polled in this process before each unit that runs here starts, and as
        each result of a worker arrives; when it returns True no further result is
        collected and the units not yet started are cancelled.

    Returns
    -------
    list
        ``[function(u) for u in units]`` in unit order — only the leading part
        that finished when ``should_stop`` ended the run early.
    """
    n_jobs = check_n_jobs(n_jobs)
    _check_backend(backend)
    units = list(units)
    results: list = []
    in_process = backend == "sequential" or (backend != "dask" and (n_jobs == 1 or len(units) <= 1))
    gauged = backend in PROCESS_BACKENDS and not in_process
    seconds: list[float] = []
    if in_process or gauged:
        # Run here, timing each unit; with a process backend, stop as soon as the projected work
        # left would pay for starting workers, and hand the rest to them.
        for i, unit in enumerate(units):
            if should_stop is not None and should_stop():
                return results
            if gauged and worth_workers(seconds, len(units) - i, n_jobs):
                break
            start = time.perf_counter()
            result = function(unit)
            seconds.append(time.perf_counter() - start)
            if on_result is not None:
                on_result(i, result)
            results.append(result)
        else:
            return results
    offset = len(results)

    import joblib

    def _consume(iterator):
        try:
            for i, result in enumerate(iterator, start=offset):
                if on_result is not None:
                    on_result(i, result)
                results.append(result)
                if should_stop is not None and should_stop():
                    break
        finally:
            close = getattr(iterator, "close", None)
            if close is not None:
                close()  # cancels the units not yet started

    if backend == "dask":
        with _dask_client(scheduler):
            with joblib.parallel_config(backend="dask"):
                _consume(joblib.Parallel(return_as="generator")(joblib.delayed(function)(u) for u in units))
        return results

    parallel = joblib.Parallel(n_jobs=n_jobs, backend=backend, return_as="generator")
    _consume(parallel(joblib.delayed(function)(u) for u in units[offset:]))
    return results


def _workers(n_jobs: int) -> int:
    if n_jobs == -1:
        import os

        return os.cpu_count() or 1
    return n_jobs


def projected_seconds(seconds: Sequence[float], units_left: int) -> float:
    """Seconds the ``units_left`` units would take here, from the units timed so far.

    Each is taken to cost the median of the timed units, leaving out the
    first once there are others (it carries one-time costs such as loading
    compiled kernels).  Nothing timed yet: 0.
    """
    if not seconds or units_left <= 0:
        return 0.0
    sample = seconds[1:] if len(seconds) > 1 else seconds
    return float(np.median(sample)) * units_left


def worth_workers(seconds: Sequence[float], units_left: int, n_jobs: int) -> bool:
    """Whether starting process workers for the ``units_left`` units beats running them here.

    With ``w = min(workers, units_left)`` workers, start-up ``S`` =
    :data:`WORKER_START_SECONDS` and projected work ``R``
    (:func:`projected_seconds`), workers finish after about ``S + R/w`` and
    this process after ``R``: workers pay only when ``R > S·w/(w−1)``
    (4 s with two workers and ``S`` = 2 s).  Before any unit is timed the
    answer is no: the first unit always runs here.
    """
    w = min(_workers(n_jobs), units_left)
    if w < 2 or not seconds:
        return False
    return projected_seconds(seconds, units_left) > WORKER_START_SECONDS * w / (w - 1)


@contextmanager
def _dask_client(scheduler: str | None):
    """A ``distributed.Client`` for ``scheduler``: the one already open in this process when
    it points there, else a new one closed on exit; with no address, the current client."""
    try:
        import distributed
    except ImportError as err:  # pragma: no cover - depends on the environment
        raise OptionError(
            "backend 'dask' needs the dask extra; install it with: pip install 'selectkit[dask]'"
        ) from err
    try:
        current = distributed.default_client()
    except ValueError:
        current = None
    if scheduler is None or (current is not None and current.scheduler is not None
                             and current.scheduler.address == scheduler):
        if current is None and scheduler is None:
            raise OptionError("backend 'dask' needs a scheduler address (e.g. tcp://host:8786) or an open "
                              "distributed.Client in this process")
        yield current
        return
    client = distributed.Client(scheduler)
    try:
        yield client
    finally:
        client.close()


@contextmanager
def dask_session(scheduler: str | None):
    """Keep one Dask client open for several :func:`run_units` calls (a whole search).

    Outside a session each ``run_units(..., backend="dask")`` connects and
    disconnects; inside, they reuse this connection.
    """
    with _dask_client(scheduler) as client:
        yield client


def spawn_seeds(seed, count: int) -> list[np.random.SeedSequence]:
    """``count`` independent child seeds of ``seed`` (``SeedSequence.spawn``).

    Unit ``i`` always gets child ``i``, so draws do not depend on ``n_jobs``.
    """
    return np.random.SeedSequence(seed).spawn(int(count))
