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
"""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from .errors import OptionError

__all__ = ["BACKENDS", "WorkUnit", "run_units", "dask_session", "spawn_seeds", "check_n_jobs"]

BACKENDS = ("loky", "threading", "multiprocessing", "sequential", "dask")


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
        Workers; ``1`` runs in this process without joblib's overhead.
    backend : str, default "loky"
        A name from :data:`BACKENDS`.
    scheduler : str, optional
        Address of a Dask scheduler (``"tcp://host:8786"``) when ``backend="dask"``;
        a client already connected to it in this process is reused.
    on_result : callable, optional
        Called as ``on_result(index, result)`` in this process as each result
        arrives, in unit order (used for checkpoints and progress).
    should_stop : callable, optional
        Polled in this process before each unit starts (one worker) or as each
        result arrives (several); when it returns True no further result is
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
    if backend == "sequential" or (n_jobs == 1 and backend != "dask") or (len(units) <= 1 and backend != "dask"):
        for i, unit in enumerate(units):
            if should_stop is not None and should_stop():
                break
            result = function(unit)
            if on_result is not None:
                on_result(i, result)
            results.append(result)
        return results

    import joblib

    def _consume(iterator):
        try:
            for i, result in enumerate(iterator):
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
    _consume(parallel(joblib.delayed(function)(u) for u in units))
    return results


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
