"""One helper for the context variables through which a caller hands a stage something to use while it runs."""

from __future__ import annotations

from contextlib import contextmanager
from contextvars import ContextVar

__all__ = ["holding"]


@contextmanager
def holding(variable: ContextVar, value):
    """Set ``variable`` to ``value`` while the block runs, then restore what it held (also on error)."""
    token = variable.set(value)
    try:
        yield value
    finally:
        variable.reset(token)
