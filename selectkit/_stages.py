"""Who hears how far the work after the search has come (the command line's bar, a job's log), if anyone.

Finishing a search — ranking, PRESS, bootstrap resamples, the outer folds of
the honest error, the checks of each shortlisted model, the report — is
several stages of known length.  The code of each stage calls :func:`step`
as it goes; whoever wants to show it puts a listener in place with
:func:`heard_by` while the work runs.  Outside such a block :func:`step`
costs one lookup and does nothing, so the library stays silent in a
notebook.  Listeners run in the calling process only (steps of work run on
workers are reported when their results come back).
"""

from __future__ import annotations

from contextvars import ContextVar

from ._context import holding

__all__ = ["step", "heard_by"]

_LISTENER: ContextVar = ContextVar("selectkit_stage_listener", default=None)


def step(stage: str, done: int, total: int) -> None:
    """Say that ``done`` of the ``total`` steps of ``stage`` are finished (``done`` 0 when it starts)."""
    listener = _LISTENER.get()
    if listener is not None:
        listener(stage, done, total)


def heard_by(listener):
    """Call ``listener(stage, done, total)`` on every :func:`step` while the block runs (a context manager)."""
    return holding(_LISTENER, listener)
