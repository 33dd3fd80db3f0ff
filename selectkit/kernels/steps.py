"""Sweep-operator steps for stepwise search (numba, ``cache=True``).

The stepwise search keeps one *swept* cross-product matrix ``S`` of shape
``(m + 1, m + 1)`` whose last row/column is the response.  Columns in the
current model are swept, the others are not.  With the sign convention of
Dempster (1969) and Goodnight (1979), after sweeping the set ``K``:

* ``S[K, K] = −(X_Kᵀ X_K)⁻¹`` (centred),
* ``S[K, y]`` holds the regression coefficients,
* ``S[y, y]`` is the residual sum of squares,
* for an unswept column ``j``, ``S[j, j]`` is the residual sum of squares of
  ``x_j`` regressed on ``X_K`` (the pivot it would be swept on).

Sweeping a column that is in the model again (the *reverse* sweep) takes it
out exactly.  Because a sweep on pivot ``k`` changes entry ``(i, j)`` using only
entries in rows/columns ``i, j, k``, the residual sum of squares after adding
and/or removing a few columns is found by sweeping only the small sub-matrix on
those columns and the response: a move of width ``w`` costs ``O((w + 1)³)``,
independent of ``n`` and of ``m``.  Applying the chosen move costs ``O(m²)``
per column; nothing is ever refitted from scratch.

The search works on the *correlation-scaled* matrix (every candidate column
divided by the square root of its centred sum of squares), so that a pivot is
directly the fraction of a column's centred sum of squares not explained by
the model; a pivot below ``PIVOT_TOLERANCE`` marks a rank-deficient move.

References
----------
Dempster, A. P. (1969). Elements of Continuous Multivariate Analysis. Addison-Wesley.
Goodnight, J. H. (1979). A tutorial on the SWEEP operator. The American
    Statistician 33(3), 149-158.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .subsets import scaled_cross

__all__ = ["scale_cross", "sweep_in_place", "evaluate_moves", "apply_move"]


def scale_cross(cross):
    """Correlation-scale a centred cross-product matrix (response last) for sweeping.

    The scaling itself is :func:`selectkit.kernels.subsets.scaled_cross`'s (one
    home for it); this returns the reciprocal scales the sweep code works with.

    Parameters
    ----------
    cross : ndarray, shape (m + 1, m + 1)

    Returns
    -------
    scaled : ndarray
        ``D C D`` with ``D = diag(1/sqrt(C_jj))``; a column with zero centred
        sum of squares gets scale 0 (an all-zero row/column, always singular).
    scale : ndarray, shape (m + 1,)
        The diagonal of ``D``; the response's residual sum of squares is
        ``scaled_rss / scale[-1]**2``.
    """
    scaled, sizes = scaled_cross(cross)
    scale = np.zeros_like(sizes)
    scale[sizes > 0] = 1.0 / sizes[sizes > 0]
    if not sizes[-1] > 0:
        scale[-1] = 1.0  # constant response: rss is 0 for every model
    return scaled, scale


@njit(cache=True)
def sweep_in_place(S, k, inside):
    """Sweep (``inside[k]`` False) or reverse-sweep (True) ``S`` on pivot ``k``.

    Flips ``inside[k]``.  The caller checks the pivot before a forward sweep.
    """
    size = S.shape[0]
    h = S[k, k]
    for i in range(size):
        if i == k:
            continue
        aik = S[i, k]
        if aik == 0.0:
            continue
        for j in range(size):
            if j == k:
                continue
            S[i, j] -= aik * S[k, j] / h
    sign = -1.0 if inside[k] else 1.0
    for i in range(size):
        if i == k:
            continue
        S[i, k] = sign * S[i, k] / h
        S[k, i] = sign * S[k, i] / h
    S[k, k] = -1.0 / h
    inside[k] = not inside[k]


@njit(cache=True)
def evaluate_moves(S, inside, moves, tolerance):
    """Scaled residual sum of squares after each candidate move.

    Parameters
    ----------
    S : ndarray (m + 1, m + 1)
        The current swept, correlation-scaled matrix (response last).
    inside : ndarray of bool (m + 1,)
        Which columns are swept (in the model).
    moves : ndarray of int64 (n_moves, width)
        Columns toggled by each move, padded with −1.  List the columns that
        leave the model before those that enter (a swap: old form first).
    tolerance : float
        Pivot tolerance relative to the column's own centred sum of squares
        (1 after scaling).

    Returns
    -------
    rss : ndarray (n_moves,)
        Scaled residual sum of squares after the move (NaN when singular).
    singular : ndarray of bool (n_moves,)
        True when a column entering the model has a pivot below ``tolerance``.
    """
    n_moves = moves.shape[0]
    width = moves.shape[1]
    y = S.shape[0] - 1
    rss = np.empty(n_moves)
    singular = np.zeros(n_moves, dtype=np.bool_)
    for r in range(n_moves):
        w = 0
        while w < width and moves[r, w] >= 0:
            w += 1
        idx = np.empty(w + 1, dtype=np.int64)
        for a in range(w):
            idx[a] = moves[r, a]
        idx[w] = y
        sub = np.empty((w + 1, w + 1))
        flags = np.zeros(w + 1, dtype=np.bool_)
        for a in range(w + 1):
            for b in range(w + 1):
                sub[a, b] = S[idx[a], idx[b]]
        for a in range(w):
            flags[a] = inside[idx[a]]
        ok = True
        for a in range(w):
            if not flags[a]:
                if not (sub[a, a] >= tolerance):
                    ok = False
                    break
            sweep_in_place(sub, a, flags)
        if ok:
            value = sub[w, w]
            rss[r] = value if value > 0.0 else 0.0
        else:
            rss[r] = np.nan
            singular[r] = True
    return rss, singular


@njit(cache=True)
def apply_move(S, inside, columns, tolerance):
    """Toggle ``columns`` in ``S`` in order; return False (``S`` untouched) if singular.

    The pivots are checked on the sub-matrix first so that a failed move
    leaves ``S`` and ``inside`` as they were.
    """
    cols = np.empty((1, columns.shape[0]), dtype=np.int64)
    for a in range(columns.shape[0]):
        cols[0, a] = columns[a]
    _, singular = evaluate_moves(S, inside, cols, tolerance)
    if singular[0]:
        return False
    for a in range(columns.shape[0]):
        sweep_in_place(S, columns[a], inside)
    return True
