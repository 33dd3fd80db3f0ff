"""Where a long stage keeps the results of its pieces as they finish (a job's run store), if anywhere.

A stage made of pieces — each part of a table read in parts, each outer fold
of the honest error — asks :func:`current` for a keeper; a job's runner puts
its run store there (:func:`kept_in`) while the stage runs.  A piece whose
result is kept under the same name and basis is not computed again, so a
killed job resumes where it stopped.  Outside a job there is no keeper and
nothing is kept.
"""

from __future__ import annotations

import hashlib
from contextvars import ContextVar

import numpy as np

from ._context import holding

__all__ = ["current", "kept_in", "basis"]

_KEEPER: ContextVar = ContextVar("selectkit_keeper", default=None)


def current():
    """The keeper of this context (``get(name, basis)``, ``put(name, basis, value)``), or None."""
    return _KEEPER.get()


def kept_in(keeper):
    """Keep the pieces' results with ``keeper`` while the block runs (a context manager)."""
    return holding(_KEEPER, keeper)


def basis(*items) -> str:
    """SHA-256 of what a piece's result was computed from (arrays by their bytes, the rest by ``repr``)."""
    digest = hashlib.sha256()
    for item in items:
        if isinstance(item, np.ndarray):
            digest.update(str(item.dtype).encode("ascii") + repr(item.shape).encode("ascii"))
            digest.update(np.ascontiguousarray(item).tobytes())
        else:
            digest.update(repr(item).encode("utf-8"))
        digest.update(b"\0")
    return digest.hexdigest()
