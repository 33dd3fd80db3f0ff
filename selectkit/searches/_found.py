"""``Found``: what every search hands to the ranker."""

from __future__ import annotations

import copyreg
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Mapping

import numpy as np

__all__ = ["Found", "mark_incomplete", "pool"]


def _read_only(items: dict) -> MappingProxyType:
    return MappingProxyType(items)


# Frozen values keep their extras in read-only mappings, which the standard
# pickle cannot handle; register a reducer (pickled as a copy, rebuilt
# read-only) so Found values travel to worker processes. Files never hold
# pickles: saved results and the run store use selectkit._datafile.
copyreg.pickle(MappingProxyType, lambda proxy: (_read_only, (dict(proxy),)))


@dataclass(frozen=True, eq=False)
class Found:
    """Models a search kept, with what is needed to score them anywhere.

    Criteria are never computed inside a search: every model carries ``rss``,
    ``k`` and the shared ``n`` so :mod:`selectkit.criteria` can score it.

    Attributes
    ----------
    method : str
        Name of the search that produced the models (``"exhaustive"``, ``"forward"``...).
    subsets : tuple of tuple of int
        Each model as a sorted tuple of term indices into ``CandidateSet.terms``.
        The intercept is implicit and not listed.
    rss : ndarray of float64
        Residual sum of squares of each model.
    k : ndarray of int
        Number of regression coefficients of each model, **including the intercept**
        (a categorical block of L levels counts L − 1).
    n : int
        Number of rows the models were fitted to.
    evaluated : int
        Subsets whose rss was computed.
    pruned : int
        Subsets ruled out by a bound without being evaluated (branch and bound).
    singular : int
        Rank-deficient subsets detected and skipped.
    exact : bool
        True only when the search proved its answer (an exhaustive search that
        ran to completion).  Heuristics (stepwise, screening) are never exact.
    stopped_by : str
        Why the search ended, in words (``"completed"``, ``"time budget of 60 s reached"``...).
    details : Mapping
        Method-specific extras (the path of a stepwise search, a CV table).
    """

    method: str
    subsets: tuple[tuple[int, ...], ...]
    rss: np.ndarray
    k: np.ndarray
    n: int
    evaluated: int = 0
    pruned: int = 0
    singular: int = 0
    exact: bool = False
    stopped_by: str = "completed"
    details: Mapping = field(default_factory=lambda: MappingProxyType({}))

    def __post_init__(self):
        object.__setattr__(self, "subsets", tuple(tuple(sorted(int(i) for i in s)) for s in self.subsets))
        object.__setattr__(self, "rss", np.asarray(self.rss, dtype=float).reshape(-1))
        object.__setattr__(self, "k", np.asarray(self.k, dtype=np.int64).reshape(-1))
        if not (len(self.subsets) == self.rss.shape[0] == self.k.shape[0]):
            raise ValueError("Found: subsets, rss and k must have the same length")

    def __len__(self) -> int:
        return len(self.subsets)


def mark_incomplete(found: Found, reason: str) -> Found:
    """A copy of ``found`` marked as not proven exact, with ``reason`` in ``stopped_by``."""
    from dataclasses import replace

    stopped = reason if found.stopped_by in ("", "completed") else f"{found.stopped_by}; {reason}"
    return replace(found, exact=False, stopped_by=stopped)


def pool(founds) -> Found:
    """Pool several ``Found`` into one (duplicates removed, first occurrence kept).

    The pooled value is exact only if every part is; counts are summed.
    """
    founds = list(founds)
    if not founds:
        raise ValueError("pool() needs at least one Found")
    seen: dict[tuple[int, ...], tuple[float, int]] = {}
    for f in founds:
        for sub, rss, k in zip(f.subsets, f.rss, f.k):
            seen.setdefault(sub, (float(rss), int(k)))
    subsets = tuple(seen)
    return Found(
        method="+".join(dict.fromkeys(f.method for f in founds)),
        subsets=subsets,
        rss=np.array([seen[s][0] for s in subsets]),
        k=np.array([seen[s][1] for s in subsets], dtype=np.int64),
        n=founds[0].n,
        evaluated=sum(f.evaluated for f in founds),
        pruned=sum(f.pruned for f in founds),
        singular=sum(f.singular for f in founds),
        exact=all(f.exact for f in founds),
        stopped_by="; ".join(dict.fromkeys(f.stopped_by for f in founds)),
    )
