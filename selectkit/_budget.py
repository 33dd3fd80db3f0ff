"""One time budget per run: a :class:`Deadline` made once and handed to every long stage.

A run with a time budget makes one :class:`Deadline` when its work starts and
passes the same value down to the screening, the searches, the bootstrap
resamples and the honest error; each checks it between its own steps and, when
it stops early, says which stage stopped and what it had done.  Without a
budget no stage looks at the clock, so results are exactly those of an
unbudgeted run.

The deadline is a wall-clock instant (:func:`time.time`), so the value keeps its
meaning in worker processes (joblib, Dask) on machines with synchronised clocks.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

from .errors import SelectkitError

__all__ = ["Deadline", "BudgetSpent", "start_deadline", "format_seconds"]


class BudgetSpent(SelectkitError):
    """A stage found the run's time budget spent before it could finish a piece of work.

    Raised inside a repeated search (a bootstrap resample, an outer fold of the
    honest error) so that the caller leaves that piece out instead of counting
    a search the clock cut short.
    """


def format_seconds(seconds: float) -> str:
    """``"1h 2m 5s"``, ``"4.2 s"``: a short readable duration."""
    seconds = float(seconds)
    if seconds < 60:
        return f"{seconds:.3g} s"
    minutes, secs = divmod(int(round(seconds)), 60)
    hours, minutes = divmod(minutes, 60)
    days, hours = divmod(hours, 24)
    parts = [f"{v}{u}" for v, u in ((days, "d"), (hours, "h"), (minutes, "m"), (secs, "s")) if v]
    return " ".join(parts) or "0s"


@dataclass(frozen=True)
class Deadline:
    """The end of a run's time budget.

    Attributes
    ----------
    seconds : float
        The budget, as given.
    ends_at : float
        Wall-clock time (:func:`time.time`) at which it is spent.

    Examples
    --------
    >>> deadline = Deadline.start(60)
    >>> deadline.expired(), 59 < deadline.remaining() <= 60
    (False, True)
    """

    seconds: float
    ends_at: float

    @classmethod
    def start(cls, seconds: float) -> "Deadline":
        """A deadline ``seconds`` from now."""
        seconds = float(seconds)
        return cls(seconds=seconds, ends_at=time.time() + seconds)

    def remaining(self) -> float:
        """Seconds left (0 once spent)."""
        return max(0.0, self.ends_at - time.time())

    def expired(self) -> bool:
        """Whether the budget is spent."""
        return time.time() >= self.ends_at

    __call__ = expired  # usable as a ``should_stop`` callable

    def describe(self) -> str:
        """``"time budget of 30 s"``."""
        return f"time budget of {format_seconds(self.seconds)}"

    def search_budget(self) -> float:
        """Seconds to hand to a search that takes a ``time_budget`` in seconds (always positive)."""
        return max(self.remaining(), 1e-6)


def start_deadline(time_budget) -> Deadline | None:
    """A :class:`Deadline` for ``time_budget`` seconds, or None without a budget.

    A ``Deadline`` passed in is returned as it is, so one budget can be handed
    on without being restarted.
    """
    if time_budget is None or isinstance(time_budget, Deadline):
        return time_budget
    return Deadline.start(time_budget)
