"""What a job is doing, read from its run store (safe while the job runs)."""

from __future__ import annotations

import sqlite3
import time
from dataclasses import dataclass
from pathlib import Path

from .progress import format_seconds
from .store import RunStore, damaged_store_error, find_store, is_running

__all__ = ["StoreStatus", "store_status"]


@dataclass(frozen=True)
class StoreStatus:
    """The state of a run store, as another shell sees it.

    Attributes
    ----------
    store : Path
    name : str
        The job's name.
    state : str
        ``"running"`` (a process holds the store), ``"interrupted"`` (the last
        run did not end: killed or crashed), ``"complete"``, ``"incomplete"``
        (stopped by its time budget or a signal, shortlist written),
        ``"failed"`` or ``"not started"``.
    running : bool
        Whether a process holds the store's lock now.
    units_done, units_total : int
    models_evaluated : int
        Models scored so far, as far as the finished units say.
    stopped_by : str
    not_exact : tuple of str
        Searches not proven exact (after a run ended).
    started_at, updated_at : float or None
        Unix times of the last run's start and of the last finished unit.
    log : tuple of str
        The last lines of the store's log.
    shortlist : tuple of dict
        The first rows of the stored shortlist (after a run ended).
    data : str
        The data file the store belongs to.
    eta : float or None
        While running: seconds left, from the pace of the units finished in this run.
    units_damaged : tuple of str
        Keys of the units recorded as finished whose stored bytes fail their
        checksum: they are not counted in ``units_done``, and the next resume
        runs them again.
    """

    store: Path
    name: str
    state: str
    running: bool
    units_done: int
    units_total: int
    models_evaluated: int
    stopped_by: str
    not_exact: tuple[str, ...]
    started_at: float | None
    updated_at: float | None
    log: tuple[str, ...]
    shortlist: tuple[dict, ...]
    data: str
    eta: float | None = None
    units_damaged: tuple[str, ...] = ()

    def render(self) -> str:
        """Readable lines for a person."""
        lines = [f"job {self.name}: {self.state}"]
        share = f" ({100 * self.units_done / self.units_total:.0f}%)" if self.units_total else ""
        lines.append(f"  units: {self.units_done} of {self.units_total} finished{share}")
        if self.units_damaged:
            shown = ", ".join(self.units_damaged[:5]) + (f" and {len(self.units_damaged) - 5} more"
                                                        if len(self.units_damaged) > 5 else "")
            lines.append(f"  {len(self.units_damaged)} more recorded as finished fail their checksum (their stored "
                         f"bytes changed) and are run again by the next resume: {shown}")
        lines.append(f"  models evaluated: {self.models_evaluated:,}")
        now = time.time()
        if self.started_at is not None:
            lines.append(f"  last run started {format_seconds(now - self.started_at)} ago")
        if self.updated_at is not None:
            lines.append(f"  last unit finished {format_seconds(now - self.updated_at)} ago")
        if self.running and self.eta is not None:
            lines.append(f"  about {format_seconds(self.eta)} left at this run's pace")
        if self.stopped_by and self.state not in ("running", "complete"):
            lines.append(f"  stopped by: {self.stopped_by}")
        if self.not_exact:
            lines.append(f"  not proven exact: {', '.join(self.not_exact)}")
        lines.append(f"  data: {self.data}")
        lines.append(f"  run store: {self.store}")
        if self.shortlist:
            lines.append("  best models so far:")
            for i, row in enumerate(self.shortlist, start=1):
                terms = row.get("terms", row.get("model", ""))
                if isinstance(terms, (list, tuple)):
                    terms = " + ".join(map(str, terms))
                lines.append(f"    {i}. {terms or '(intercept only)'}")
        if self.log:
            lines.append("  log:")
            lines.extend(f"    {line}" for line in self.log)
        if self.state in ("interrupted", "incomplete"):
            lines.append(f"  continue with: selectkit job resume {self.store.parent}")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.render()


def store_status(folder_or_store, *, log_lines: int = 5, shortlist_rows: int = 5) -> StoreStatus:
    """Read a job's progress from its output folder or run store.

    The store is opened read-only, so this is safe while the job runs, from
    any process.

    Parameters
    ----------
    folder_or_store : str or Path
        The job's output folder (``[run] output``) or its ``run-store.sqlite``.
    log_lines, shortlist_rows : int
        How many of the last log lines and first shortlist rows to include.

    Returns
    -------
    StoreStatus

    Raises
    ------
    StoreError
        When there is no readable store there.
    """
    path = find_store(folder_or_store)
    try:
        return _read_status(path, log_lines=log_lines, shortlist_rows=shortlist_rows)
    except sqlite3.DatabaseError as err:  # a damaged page: one line saying what can be done
        raise damaged_store_error(path, err) from err


def _read_status(path, *, log_lines: int, shortlist_rows: int) -> StoreStatus:
    running = is_running(path)
    with RunStore.open_read_only(path) as store:
        about = store.about()
        done, models = store.unit_counts()
        damaged = tuple(store.verify_units())  # read-only: counted here, marked by the next run
        done -= len(damaged)
        finished = [at for _, _, at in store.unit_times() if at is not None]
        updated = max(finished, default=None)
        started = about.get("run_started_at")
        this_run = 0 if started is None else sum(at >= started for at in finished)
        log = tuple(f"{time.strftime('%Y-%m-%d %H:%M:%S', time.localtime(at))} {level}: {message}"
                    for at, level, message in store.log_lines(last=log_lines))
        shortlist = tuple(store.shortlist()[:shortlist_rows])
    recorded_state = about.get("state")
    if running:
        state = "running"
    elif recorded_state is None:
        state = "not started"
    elif recorded_state == "running":
        state = "interrupted"
    else:
        state = recorded_state
    total = int(about.get("units_total", 0) or 0)
    eta = None
    if running and this_run > 0 and started is not None:
        eta = (time.time() - started) / this_run * max(0, total - done)
    if about.get("state") in ("complete", "incomplete"):
        models = int(about.get("models_evaluated", models))
    return StoreStatus(
        store=path,
        name=str(about.get("name", path.parent.name)),
        state=state,
        running=running,
        units_done=done,
        units_total=total,
        models_evaluated=models,
        stopped_by=str(about.get("stopped_by", "")),
        not_exact=tuple(about.get("not_exact", ())),
        started_at=about.get("run_started_at"),
        updated_at=updated,
        log=log,
        shortlist=shortlist if state != "running" else (),
        data=str((about.get("data") or {}).get("path", "")),
        eta=eta,
        units_damaged=damaged,
    )
