"""Moments: centred cross-products of candidates and response from one pass.

(Contract stub with a plain implementation; the chunked, numerically careful
pass replaces ``compute_moments``.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Moments", "compute_moments"]


@dataclass(frozen=True, eq=False)
class Moments:
    """Sufficient statistics of a least-squares problem.

    The response is stored as the **last** variable: index ``m`` of ``mean``
    and row/column ``m`` of ``cross``.

    Attributes
    ----------
    n : int
        Number of rows.
    weight_sum : float
        Σ wᵢ (equals ``n`` without weights).
    mean : ndarray, shape (m + 1,)
        Weighted means of the m candidate columns and the response.
    cross : ndarray, shape (m + 1, m + 1)
        Weighted centred cross-products Σ wᵢ (xᵢ − x̄)(zᵢ − z̄)ᵀ.
    """

    n: int
    weight_sum: float
    mean: np.ndarray
    cross: np.ndarray

    @property
    def m(self) -> int:
        """Number of candidate columns."""
        return int(self.mean.shape[0] - 1)

    @property
    def tss(self) -> float:
        """Total (weighted) sum of squares of the response about its mean."""
        return float(self.cross[-1, -1])


def compute_moments(matrix, y, weights=None):
    x = np.column_stack([np.asarray(matrix, dtype=float), np.asarray(y, dtype=float)])
    w = np.ones(x.shape[0]) if weights is None else np.asarray(weights, dtype=float)
    mean = w @ x / w.sum()
    d = x - mean
    return Moments(n=x.shape[0], weight_sum=float(w.sum()), mean=mean, cross=(d * w[:, None]).T @ d)
