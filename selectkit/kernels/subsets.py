"""Residual sums of squares of subsets and the branch-and-bound inner loop (numba).

Everything here works on the **correlation-scaled** centred cross-product
matrix ``A`` of shape ``(m + 1, m + 1)``: every candidate column and the
response divided by the square root of its centred sum of squares, so the
diagonal is 1 (0 for a constant column) and the response is the last
row/column.  On this scale

* the rss of a model is a fraction of the total sum of squares (multiply by
  ``tss`` for the rss on the data's scale);
* the Cholesky pivot of a column is the fraction of that column's own centred
  sum of squares left unexplained by the columns before it, so the test
  ``pivot ≤ PIVOT_TOLERANCE`` (``selectkit.kernels``) marks the column as a
  numerical linear combination of the earlier ones — the subset is then
  rank-deficient and is skipped and counted, never scored.

Factors are kept in lower-triangular form ``L`` (row-major, ``A = L Lᵀ``) with
the response as the last row: ``L[c, l]`` is the response's coordinate ``z_l``
along the ``l``-th orthogonalised column, and the rss of the first ``i``
columns is ``d + Σ_{l ≥ i} z_l²`` where ``d = L[c, c]`` is the rss of all ``c``
columns: only ``d`` carries the cancellation of 1 − R²; the rss of shorter
leading subsets add non-negative terms to it.

Functions
---------
subset_rss(A, cols, tol)
    rss of one subset by Cholesky; −1 when rank-deficient.
factor_columns(A, cols, tol)
    the factor ``L`` (response last), its skipped (singular) columns and the rss.
add_column(A, L, cols, ncols, j, tol) / drop_column(L, cols, ncols, position)
    one-column updates of a factor in O(k²) (bordering; Givens rotations).
branch_and_bound(...)
    the exact best-subset inner loop used by :mod:`selectkit.searches.exhaustive`.
all_subsets_rss(A, cols, tol)
    the rss of every subset (full enumeration by Givens downdates; p ≤ 26).

References
----------
Golub, G. H. and Van Loan, C. F. (2013). Matrix Computations, 4th ed., §4.2
    (Cholesky), §6.5 (updating factorisations).  Johns Hopkins.
Gatu, C. and Kontoghiorghes, E. J. (2006). Branch-and-bound algorithms for
    computing the best-subset regression models. J. Comput. Graph. Statist.
    15(1), 139-156.
Goodnight, J. H. (1979). A tutorial on the SWEEP operator. The American
    Statistician 33(3), 149-158.
Higham, N. J. (2002). Accuracy and Stability of Numerical Algorithms, 2nd ed.,
    ch. 10 (Cholesky factorisation of positive definite matrices).  SIAM.
"""

from __future__ import annotations

import numpy as np
from numba import njit

__all__ = [
    "scaled_cross",
    "subset_rss",
    "factor_columns",
    "add_column",
    "drop_column",
    "branch_and_bound",
    "all_subsets_rss",
    "PRUNE_SLACK",
    "DOWNDATE_LIMIT",
]

#: Relative slack of the pruning test: a subtree is cut only when its bound
#: exceeds the threshold by more than this fraction, so that rounding in the
#: bound (computed in another column order) can never cut a qualifying model.
PRUNE_SLACK = 1e-9

#: The branch and bound downdates a node's inverse from its parent's while
#: (columns removed since the last fresh factorisation + 1) × (largest diagonal
#: entry of that factorisation's inverse, a variance inflation factor) stays at
#: most this; beyond it the node is refactored.  Rounding in the Schur steps
#: grows about like that product times the unit roundoff, so the rss used as a
#: bound stays within about 1e-12 relative, far inside ``PRUNE_SLACK``.
DOWNDATE_LIMIT = 4096.0


def scaled_cross(cross):
    """Correlation-scale a centred cross-product matrix (response last).

    Parameters
    ----------
    cross : ndarray, shape (m + 1, m + 1)

    Returns
    -------
    A : ndarray
        ``cross[i, j] / (s_i s_j)`` with ``s = sqrt(diag(cross))``; rows and
        columns of constant variables are left at zero.
    scales : ndarray
        ``s``.
    """
    cross = np.asarray(cross, dtype=np.float64)
    scales = np.sqrt(np.maximum(np.diag(cross), 0.0))
    safe = np.where(scales > 0, scales, 1.0)
    A = cross / np.outer(safe, safe)
    A[scales == 0, :] = 0.0
    A[:, scales == 0] = 0.0
    A = 0.5 * (A + A.T)
    np.fill_diagonal(A, np.where(scales > 0, 1.0, 0.0))
    return np.ascontiguousarray(A), scales


@njit(cache=True)
def _factor_into(A, cols, ncols, L, skipped, start, tol):
    """Left-looking Cholesky of A[cols + (y,)] into L, rows ``start..ncols``.

    Rows ``0..start-1`` of ``L`` and ``skipped`` must already hold the factor of
    the first ``start`` columns (same columns in the same order).  A column
    whose pivot is ≤ tol × its diagonal is marked skipped: its row of ``L`` is
    zero, so the factor is that of the span of the kept columns.
    """
    yi = A.shape[0] - 1
    for j in range(start, ncols + 1):
        cj = yi if j == ncols else cols[j]
        for l in range(j):
            if skipped[l]:
                L[j, l] = 0.0
                continue
            s = A[cols[l], cj]
            for i in range(l):
                s -= L[l, i] * L[j, i]
            L[j, l] = s / L[l, l]
        d = A[cj, cj]
        for l in range(j):
            d -= L[j, l] * L[j, l]
        if j == ncols:
            L[j, j] = d if d > 0.0 else 0.0
        elif A[cj, cj] <= 0.0 or d <= tol * A[cj, cj]:
            skipped[j] = True
            L[j, j] = 0.0
            for l in range(j):
                L[j, l] = 0.0
        else:
            skipped[j] = False
            L[j, j] = np.sqrt(d)


@njit(cache=True)
def factor_columns(A, cols, tol):
    """Cholesky factor of the scaled Gram matrix of ``cols`` with the response last.

    Parameters
    ----------
    A : ndarray, shape (m + 1, m + 1)
        Correlation-scaled centred cross-products (see :func:`scaled_cross`).
    cols : ndarray of int64
        Candidate columns, in order.
    tol : float
        Pivot tolerance (``selectkit.kernels.PIVOT_TOLERANCE``).

    Returns
    -------
    L : ndarray, shape (c + 1, c + 1)
        Lower factor; ``L[c, c]`` is the (scaled) rss of the span of the kept columns.
    skipped : ndarray of bool, shape (c + 1,)
        Columns whose pivot fell below the tolerance.
    """
    c = cols.shape[0]
    L = np.zeros((c + 1, c + 1))
    skipped = np.zeros(c + 1, dtype=np.bool_)
    _factor_into(A, cols, c, L, skipped, 0, tol)
    return L, skipped


@njit(cache=True)
def subset_rss(A, cols, tol):
    """Scaled rss of the model with columns ``cols`` (intercept implied), or −1 if rank-deficient.

    rss = 1 − R² on the correlation scale; multiply by the response's centred
    sum of squares for the rss on the data's scale.
    """
    L, skipped = factor_columns(A, cols, tol)
    c = cols.shape[0]
    for j in range(c):
        if skipped[j]:
            return -1.0
    return L[c, c]


@njit(cache=True)
def add_column(A, L, cols, ncols, j, tol):
    """Border the factor of ``cols[:ncols]`` with column ``j`` in O(k²).

    Parameters
    ----------
    A : ndarray
        Scaled cross-products.
    L : ndarray, shape (≥ ncols + 2, ≥ ncols + 2)
        Factor of ``cols[:ncols]`` with the response in row ``ncols``; on
        success it becomes the factor of ``cols[:ncols] + [j]`` with the
        response in row ``ncols + 1``.
    cols : ndarray of int64
        Receives ``j`` at position ``ncols``.
    ncols : int
    j : int
    tol : float

    Returns
    -------
    float
        The new scaled rss, or −1 (and ``L``, ``cols`` untouched) when ``j``
        is a numerical combination of the columns already in.
    """
    k = ncols
    new = np.empty(k)
    for l in range(k):
        s = A[cols[l], j]
        for i in range(l):
            s -= L[l, i] * new[i]
        new[l] = s / L[l, l]
    d = A[j, j]
    for l in range(k):
        d -= new[l] * new[l]
    if A[j, j] <= 0.0 or d <= tol * A[j, j]:
        return -1.0
    rho = np.sqrt(d)
    yi = A.shape[0] - 1
    zj = A[j, yi]
    for l in range(k):
        zj -= new[l] * L[k, l]
    zj /= rho
    rss = L[k, k] - zj * zj
    if rss < 0.0:
        rss = 0.0
    # response row moves from k to k + 1
    for l in range(k):
        L[k + 1, l] = L[k, l]
    L[k + 1, k] = zj
    L[k + 1, k + 1] = rss
    for l in range(k):
        L[k, l] = new[l]
    L[k, k] = rho
    cols[k] = j
    return rss


@njit(cache=True)
def drop_column(L, cols, ncols, position):
    """Remove column ``position`` from the factor of ``cols[:ncols]`` in O(k²).

    The rows below ``position`` are shifted up and the resulting
    upper-Hessenberg part is restored to triangular form by Givens rotations
    (Golub & Van Loan §6.5.2), applied to the response row as well; the rss
    grows by the square of the response coordinate rotated out.

    Returns
    -------
    float
        The new scaled rss; ``L`` and ``cols`` hold the factor of the ``ncols − 1``
        remaining columns with the response in row ``ncols − 1``.
    """
    k = ncols
    d = L[k, k]
    # delete row `position`: rows below move up one (each keeps one entry past its diagonal)
    for r in range(position, k):
        for l in range(r + 2):
            L[r, l] = L[r + 1, l]
    for r in range(position, k - 1):
        cols[r] = cols[r + 1]
    for l in range(k + 1):
        L[k, l] = 0.0
    # rotate columns (r, r + 1) to clear the entry just past each model row's diagonal
    for r in range(position, k - 1):
        a = L[r, r]
        b = L[r, r + 1]
        rho = np.hypot(a, b)
        cth = a / rho
        sth = b / rho
        for rr in range(r, k):
            u = L[rr, r]
            v = L[rr, r + 1]
            L[rr, r] = cth * u + sth * v
            L[rr, r + 1] = -sth * u + cth * v
        L[r, r + 1] = 0.0
    out = L[k - 1, k - 1]
    rss = d + out * out
    L[k - 1, k - 1] = rss
    L[k - 1, k] = 0.0
    return rss


@njit(cache=True)
def _mask_less(a, b):
    """(sorted tuple of rank bits of a) < (that of b), lexicographically."""
    one = np.uint64(1)
    while True:
        if a == b:
            return False
        if a == np.uint64(0):
            return True
        if b == np.uint64(0):
            return False
        la = a & (~a + one)
        lb = b & (~b + one)
        if la != lb:
            return la < lb
        a = a ^ la
        b = b ^ lb


@njit(cache=True)
def _insert(best_rss, best_mask, best_count, thr, init_thr, size, rss, mask, n_best):
    cnt = best_count[size]
    if cnt == n_best:
        wr = best_rss[size, cnt - 1]
        if rss > wr or (rss == wr and not _mask_less(mask, best_mask[size, cnt - 1])):
            return
        pos = cnt - 1
    else:
        pos = cnt
        best_count[size] = cnt + 1
    while pos > 0 and (best_rss[size, pos - 1] > rss or
                       (best_rss[size, pos - 1] == rss and _mask_less(mask, best_mask[size, pos - 1]))):
        best_rss[size, pos] = best_rss[size, pos - 1]
        best_mask[size, pos] = best_mask[size, pos - 1]
        pos -= 1
    best_rss[size, pos] = rss
    best_mask[size, pos] = mask
    if best_count[size] == n_best:
        t = best_rss[size, n_best - 1]
        thr[size] = t if t < init_thr[size] else init_thr[size]


@njit(cache=True)
def _prunable(bound, thr, lo, hi):
    top = -1.0
    for s in range(lo, hi + 1):
        if thr[s] > top:
            top = thr[s]
    return bound * (1.0 - PRUNE_SLACK) > top


@njit(cache=True)
def _family_count(terms, start, stop, t_fam, scratch):
    """Π over families of (1 + number of terms of the family in terms[start:stop]) − 1."""
    for i in range(start, stop):
        scratch[t_fam[terms[i]]] = 0
    for i in range(start, stop):
        scratch[t_fam[terms[i]]] += 1
    total = 1.0
    for i in range(start, stop):
        f = t_fam[terms[i]]
        if scratch[f] > 0:
            total *= 1.0 + scratch[f]
            scratch[f] = 0
    return total - 1.0


@njit(cache=True)
def _family_width(terms, start, stop, t_fam, t_width, scratch):
    """Σ over the variables in terms[start:stop] of the widest form: the most columns a model can add."""
    for i in range(start, stop):
        scratch[t_fam[terms[i]]] = 0
    for i in range(start, stop):
        f = t_fam[terms[i]]
        w = t_width[terms[i]]
        if w > scratch[f]:
            scratch[f] = w
    total = 0
    for i in range(start, stop):
        f = t_fam[terms[i]]
        total += scratch[f]
        scratch[f] = 0
    return total


@njit(cache=True)
def _small_quadratic(G, b, w):
    """bᵀ G⁻¹ b for a small SPD matrix G (w × w) by Cholesky; 0 when not SPD."""
    Lw = np.zeros((w, w))
    for j in range(w):
        for l in range(j):
            s = G[j, l]
            for i in range(l):
                s -= Lw[j, i] * Lw[l, i]
            Lw[j, l] = s / Lw[l, l]
        d = G[j, j]
        for l in range(j):
            d -= Lw[j, l] * Lw[j, l]
        if d <= 0.0:
            return 0.0  # not positive definite numerically: claim no rise (a safe bound)
        Lw[j, j] = np.sqrt(d)
    v = np.empty(w)
    total = 0.0
    for j in range(w):
        s = b[j]
        for l in range(j):
            s -= Lw[j, l] * v[l]
        v[j] = s / Lw[j, j]
        total += v[j] * v[j]
    return total


@njit(cache=True)
def _drop_increase(W, L, c, fw, q, idx, nidx, G, bvec):
    """Rise in rss when the free columns ``idx`` (local to the free block) are dropped.

    With W = L_ff⁻¹ (lower), β_B = (Wᵀ z)_B and (G⁻¹)_BB = (WᵀW)_BB, the rise is
    β_Bᵀ [(G⁻¹)_BB]⁻¹ β_B (the extra-sum-of-squares of the block).
    """
    for u in range(nidx):
        a = idx[u]
        s = 0.0
        for l in range(a, q):
            s += W[l, a] * L[c, fw + l]
        bvec[u] = s
        for v in range(u + 1):
            b = idx[v]
            start = a if a > b else b
            s2 = 0.0
            for l in range(start, q):
                s2 += W[l, a] * W[l, b]
            G[u, v] = s2
            G[v, u] = s2
    if nidx == 1:
        return bvec[0] * bvec[0] / G[0, 0]
    return _small_quadratic(G, bvec, nidx)


@njit(cache=True)
def _inverse_increase(M, beta, slots, nidx, G, bvec):
    """Rise in rss when the columns at ``slots[:nidx]`` are removed: β_Bᵀ (M_BB)⁻¹ β_B."""
    if nidx == 1:
        a = slots[0]
        return beta[a] * beta[a] / M[a, a]
    for u in range(nidx):
        bvec[u] = beta[slots[u]]
        for v in range(nidx):
            G[u, v] = M[slots[u], slots[v]]
    return _small_quadratic(G, bvec, nidx)


@njit(cache=True)
def _border_each(A, L, cols, col_start, terms, k, n_s, fw, t_width, t_fam, t_req, t_bit,
                 tol, thr, init_thr, best_rss, best_mask, best_count, n_best, counts, row):
    """Score F + t for every single-column free term t, F = the ``fw`` fixed columns.

    ``L`` holds the factor of F with the response in row ``fw``; each model costs
    one forward substitution (O(fw²)): rss(F + t) = rss(F) − z_t², with z_t the
    response's coordinate along t orthogonalised against F.  A pivot at or
    below the tolerance counts the model as singular, as in the factor of F + t.
    """
    yi = A.shape[0] - 1
    fam_f = np.uint64(0)
    req_f = np.uint64(0)
    mask_f = np.uint64(0)
    for i in range(k):
        t = terms[i]
        fam_f |= np.uint64(1) << np.uint64(t_fam[t])
        req_f |= t_req[t]
        mask_f |= t_bit[t]
    rss_f = L[fw, fw]
    size = fw + 1
    for i in range(k, n_s):
        t = terms[i]
        if t_width[t] != 1:
            continue
        fams = fam_f | (np.uint64(1) << np.uint64(t_fam[t]))
        if ((req_f | t_req[t]) & ~fams) != np.uint64(0):
            continue
        j = cols[col_start[i]]
        d = A[j, j]
        zj = A[j, yi]
        for l in range(fw):
            s = A[cols[l], j]
            for m in range(l):
                s -= L[l, m] * row[m]
            row[l] = s / L[l, l]
            d -= row[l] * row[l]
            zj -= row[l] * L[fw, l]
        if A[j, j] <= 0.0 or d <= tol * A[j, j]:
            counts[1] += 1
            continue
        counts[0] += 1
        r = rss_f - zj * zj / d
        if r < 0.0:
            r = 0.0
        if r <= thr[size] * (1.0 + PRUNE_SLACK) or best_count[size] < n_best:
            _insert(best_rss, best_mask, best_count, thr, init_thr, size, r, mask_f | t_bit[t], n_best)


@njit(cache=True)
def _order_before(a, b, tier, fam_inc, inc):
    if tier[a] != tier[b]:
        return tier[a] < tier[b]
    if fam_inc[a] != fam_inc[b]:
        return fam_inc[a] > fam_inc[b]
    return inc[a] > inc[b]


@njit(cache=True, nogil=True)
def branch_and_bound(A, t_cols, t_width, t_fam, t_req, t_bit, max_size, n_best, tol,
                     init_thr, thr, best_rss, best_mask, best_count,
                     st_terms, st_len, st_k, st_bound, st_root, top_arr,
                     counts, pruned_count, node_budget, family_tiers,
                     st_level, lvl_M, lvl_beta, lvl_rss, lvl_ok, lvl_vif, lvl_r, lvl_in):
    """Run up to ``node_budget`` nodes of the depth-first best-subset search.

    The tree is the dropping-columns tree of Gatu & Kontoghiorghes (2006) over
    terms: a node is an ordered term list S whose first ``k`` terms are fixed;
    its subtree holds every subset of S that contains the fixed terms.  One
    Cholesky factor of S gives the rss of all its leading subsets S[:i]
    (recorded), and each child drops one free term S[i] and fixes S[:i].
    Because adding columns never increases rss, rss(S) bounds every model in
    the subtree; a child is cut when its bound exceeds the current n-th best
    rss at every size (in columns) its subtree can reach.  A child's bound is
    rss(S) + β_Bᵀ (G⁻¹)_BB⁻¹ β_B, the exact increase from dropping term B; its
    free terms are ordered by decreasing increase (most important first) so
    that the large subtrees get the high bounds.

    A node's rss and the increases of its free terms come from its parent's
    by downdating: every level of the depth-first path keeps the inverse of
    the conditional Gram matrix of its free columns, ``M = (G⁻¹)_ff``, the
    coefficients ``β`` and the rss of its full list, and a child removes its
    dropped columns from them by Schur-complement steps (the reverse sweep;
    Goodnight 1979): for a removed column ``e``, ``M ← M − M[:, e] M[e, :] / M[e, e]``,
    ``β ← β − M[:, e] β_e / M[e, e]`` and ``rss ← rss + β_e² / M[e, e]``, O(q²)
    instead of the O(c³) of a fresh factorisation.  Only the leading columns
    that are recorded (at most ``max_size``) are factored by Cholesky.  A
    level is refactored from scratch (and becomes the base of the levels
    below it) when the downdates could lose accuracy: when
    (removed columns since the base + 1) × max diag(M) of the base exceeds
    ``DOWNDATE_LIMIT`` (the largest variance inflation factor bounds the
    growth of rounding errors in the Schur steps, Higham 2002 §10.1), and
    whenever the node's columns are numerically singular (pivot tolerance).
    A node with room for one more column only (its subtree is the models
    F + t of its fixed columns F and one free single-column term t) scores
    those models directly, one forward substitution against F's factor each
    (:func:`_border_each`), instead of walking them one node per model; they
    count as evaluated.  Children are pushed so that the one fixing the most
    important terms is searched first, which lowers the thresholds early.

    State lives in the arrays passed in, so a search can stop after
    ``node_budget`` nodes (a time budget) and be resumed by calling again:
    the stack (``st_*``, with each node's depth in ``st_level``) and the
    per-depth downdate state (``lvl_*``; ``lvl_in[d, t]`` marks the terms of
    the node last evaluated at depth ``d``).
    Compiled without the GIL, so units run in parallel on the threading backend.

    Returns
    -------
    bool
        True when the stack is empty (the search is complete).
    """
    n_terms = t_width.shape[0]
    total_cols = 0
    for t in range(n_terms):
        total_cols += t_width[t]
    L = np.zeros((total_cols + 1, total_cols + 1))
    skipped = np.zeros(total_cols + 1, dtype=np.bool_)
    cols = np.zeros(total_cols, dtype=np.int64)
    row = np.zeros(total_cols + 1)
    col_start = np.zeros(n_terms + 1, dtype=np.int64)  # first column of each position
    suffix = np.zeros(total_cols + 1)
    inc = np.zeros(n_terms)
    order = np.zeros(n_terms, dtype=np.int64)
    scratch = np.zeros(n_terms + 64, dtype=np.int64)
    W = np.zeros((total_cols, total_cols))
    G = np.zeros((total_cols + 1, total_cols + 1))
    bvec = np.zeros(total_cols + 1)
    terms = np.zeros(n_terms, dtype=np.int64)
    child = np.zeros(n_terms, dtype=np.int64)
    idx = np.zeros(total_cols + 1, dtype=np.int64)
    fam_inc = np.zeros(n_terms)
    tier = np.zeros(n_terms, dtype=np.int64)
    t_off = np.zeros(n_terms + 1, dtype=np.int64)  # first slot of each term in the level state
    for t in range(n_terms):
        t_off[t + 1] = t_off[t] + t_width[t]
    pos_slot = np.zeros(total_cols + 1, dtype=np.int64)  # slot of each column of the node's layout
    slots = np.zeros(total_cols + 1, dtype=np.int64)
    node_in = np.zeros(n_terms, dtype=np.bool_)
    fam_members = np.zeros(n_terms + 64, dtype=np.int64)
    nodes = 0
    while top_arr[0] >= 0 and nodes < node_budget:
        nodes += 1
        top = top_arr[0]
        n_s = st_len[top]
        k = st_k[top]
        bound = st_bound[top]
        is_root = st_root[top]
        for i in range(n_s):
            terms[i] = st_terms[top, i]
        top_arr[0] = top - 1
        # column layout
        c = 0
        for i in range(n_s):
            col_start[i] = c
            t = terms[i]
            for q in range(t_width[t]):
                cols[c] = t_cols[t, q]
                pos_slot[c] = t_off[t] + q
                c += 1
        col_start[n_s] = c
        fw = col_start[k]
        lo = fw if is_root else fw + 1
        # largest model below: one form per variable (the widest) on top of the fixed terms
        hi = fw + _family_width(terms, k, n_s, t_fam, t_width, scratch)
        if hi > max_size:
            hi = max_size
        if lo > hi:
            continue
        if not is_root and _prunable(bound, thr, lo, hi):
            pruned_count[0] += _family_count(terms, k, n_s, t_fam, scratch)
            continue
        level = st_level[top]
        if not is_root and hi == fw + 1:
            # room for one more column only: the subtree is the models F + t for
            # the single-column free terms t; score each by bordering F's factor
            _factor_into(A, cols, fw, L, skipped, 0, tol)
            fixed_singular = False
            for j in range(fw):
                if skipped[j]:
                    fixed_singular = True
            if fixed_singular:
                pruned_count[1] += _family_count(terms, k, n_s, t_fam, scratch)
                continue
            _border_each(A, L, cols, col_start, terms, k, n_s, fw, t_width, t_fam, t_req, t_bit,
                         tol, thr, init_thr, best_rss, best_mask, best_count, n_best, counts, row)
            continue
        # downdate from the parent's level when it holds a usable inverse
        use_down = False
        if not is_root and lvl_ok[level - 1]:
            pl = level - 1
            for t in range(n_terms):
                node_in[t] = False
            for i in range(n_s):
                node_in[terms[i]] = True
            n_p = 0
            for i in range(k, n_s):
                t = terms[i]
                for q in range(t_width[t]):
                    slots[n_p] = t_off[t] + q
                    n_p += 1
            n_keep = n_p
            for t in range(n_terms):
                if lvl_in[pl, t] and not node_in[t]:
                    for q in range(t_width[t]):
                        slots[n_p] = t_off[t] + q
                        n_p += 1
            n_removed = n_p - n_keep
            if (lvl_r[pl] + n_removed + 1) * lvl_vif[pl] <= DOWNDATE_LIMIT:
                Mp = lvl_M[pl]
                Mc = lvl_M[level]
                bp = lvl_beta[pl]
                bc = lvl_beta[level]
                # the first removal reads the parent's level and writes this one
                e = slots[n_keep]
                d = Mp[e, e]
                use_down = d > 0.0
                if use_down:
                    be = bp[e]
                    rss_down = lvl_rss[pl] + be * be / d
                    for ua in range(n_p):
                        if ua == n_keep:
                            continue
                        sa = slots[ua]
                        f = Mp[sa, e] / d
                        bc[sa] = bp[sa] - f * be
                        for ub in range(n_p):
                            if ub == n_keep:
                                continue
                            sb = slots[ub]
                            Mc[sa, sb] = Mp[sa, sb] - f * Mp[e, sb]
                # further removals (family forms set aside, block columns) in place
                for ep in range(n_keep + 1, n_p):
                    if not use_down:
                        break
                    e = slots[ep]
                    d = Mc[e, e]
                    if not d > 0.0:
                        use_down = False
                        break
                    be = bc[e]
                    rss_down += be * be / d
                    for ua in range(n_p):
                        if ua >= n_keep and ua <= ep:
                            continue
                        sa = slots[ua]
                        f = Mc[sa, e] / d
                        if f == 0.0:
                            continue
                        bc[sa] -= f * be
                        for ub in range(n_p):
                            if ub >= n_keep and ub <= ep:
                                continue
                            sb = slots[ub]
                            Mc[sa, sb] -= f * Mc[e, sb]
                if use_down:
                    lvl_ok[level] = True
                    lvl_rss[level] = rss_down
                    lvl_vif[level] = lvl_vif[pl]
                    lvl_r[level] = lvl_r[pl] + n_removed
                    for t in range(n_terms):
                        lvl_in[level, t] = node_in[t]
        if use_down:
            # factor only the leading columns that can be recorded
            fam_acc = np.uint64(0)
            n_f = 0
            for i in range(n_s + 1):
                if col_start[i] > max_size:
                    break
                n_f = col_start[i]
                if i == n_s:
                    break
                fb = np.uint64(1) << np.uint64(t_fam[terms[i]])
                if fam_acc & fb:
                    break
                fam_acc |= fb
        else:
            n_f = c
        _factor_into(A, cols, n_f, L, skipped, 0, tol)
        fixed_singular = False
        any_skipped = False
        for j in range(n_f):
            if skipped[j]:
                any_skipped = True
                if j < fw:
                    fixed_singular = True
        if fixed_singular:
            pruned_count[1] += _family_count(terms, k, n_s, t_fam, scratch) + (1.0 if is_root else 0.0)
            continue
        rss_all = lvl_rss[level] if use_down else L[c, c]
        if not is_root and _prunable(rss_all, thr, lo, hi):
            pruned_count[0] += _family_count(terms, k, n_s, t_fam, scratch)
            continue
        # rss of every leading subset
        suffix[n_f] = L[n_f, n_f]
        for l in range(n_f - 1, -1, -1):
            z = L[n_f, l]
            suffix[l] = suffix[l + 1] + z * z
        fam_acc = np.uint64(0)
        req_acc = np.uint64(0)
        mask = np.uint64(0)
        singular = False
        start = k if is_root else k + 1
        for i in range(n_s + 1):
            width = col_start[i]
            if width > max_size:
                break
            if i >= start:
                if singular:
                    counts[1] += 1
                elif (req_acc & ~fam_acc) == np.uint64(0):
                    counts[0] += 1
                    r = suffix[width]
                    if r <= thr[width] * (1.0 + PRUNE_SLACK) or best_count[width] < n_best:
                        _insert(best_rss, best_mask, best_count, thr, init_thr, width, r, mask, n_best)
            if i == n_s:
                break
            t = terms[i]
            fb = np.uint64(1) << np.uint64(t_fam[t])
            if fam_acc & fb:
                break
            fam_acc |= fb
            req_acc |= t_req[t]
            mask |= t_bit[t]
            for j in range(col_start[i], min(col_start[i + 1], n_f)):
                if skipped[j]:
                    singular = True
        # exact increase of rss when dropping each free term
        for i in range(k, n_s):
            inc[i] = 0.0
            fam_inc[i] = 0.0
            fam_members[t_fam[terms[i]]] = 0
        for i in range(k, n_s):
            fam_members[t_fam[terms[i]]] += 1
        if not use_down:
            lvl_ok[level] = False
        if use_down and n_s - k > 1:
            for i in range(k, n_s):
                t = terms[i]
                for q in range(t_width[t]):
                    idx[q] = t_off[t] + q
                inc[i] = _inverse_increase(lvl_M[level], lvl_beta[level], idx, t_width[t], G, bvec)
            if family_tiers:
                for i in range(k, n_s):
                    fam_inc[i] = -1.0
                for i in range(k, n_s):
                    if fam_inc[i] >= 0.0:
                        continue
                    f = t_fam[terms[i]]
                    if fam_members[f] == 1:
                        fam_inc[i] = inc[i]
                        continue
                    nidx = 0
                    members = 0
                    for p in range(k, n_s):
                        if t_fam[terms[p]] == f:
                            members += 1
                            t = terms[p]
                            for q in range(t_width[t]):
                                idx[nidx] = t_off[t] + q
                                nidx += 1
                    value = inc[i] if members == 1 else _inverse_increase(
                        lvl_M[level], lvl_beta[level], idx, nidx, G, bvec)
                    for p in range(k, n_s):
                        if t_fam[terms[p]] == f:
                            fam_inc[p] = value
        elif not any_skipped and n_s - k > 0:
            q = c - fw
            # W = inverse of the trailing lower block L[fw:c, fw:c]
            for jj in range(q):
                for ii in range(q):
                    W[ii, jj] = 0.0
            for jj in range(q):
                W[jj, jj] = 1.0 / L[fw + jj, fw + jj]
                for ii in range(jj + 1, q):
                    s = 0.0
                    for l in range(jj, ii):
                        s += L[fw + ii, fw + l] * W[l, jj]
                    W[ii, jj] = -s / L[fw + ii, fw + ii]
            # keep M = WᵀW (the inverse of the free block given the fixed) and β = Wᵀz
            # for the children to downdate, when they can do so accurately
            vif = 0.0
            for jj in range(q):
                s = 0.0
                for l in range(jj, q):
                    s += W[l, jj] * W[l, jj]
                if s > vif:
                    vif = s
            if 2.0 * vif <= DOWNDATE_LIMIT:
                for jj in range(q):
                    sj = pos_slot[fw + jj]
                    bsum = 0.0
                    for l in range(jj, q):
                        bsum += W[l, jj] * L[c, fw + l]
                    lvl_beta[level, sj] = bsum
                    for ii in range(jj, q):
                        s = 0.0
                        for l in range(ii, q):
                            s += W[l, ii] * W[l, jj]
                        si = pos_slot[fw + ii]
                        lvl_M[level, si, sj] = s
                        lvl_M[level, sj, si] = s
                lvl_ok[level] = True
                lvl_rss[level] = rss_all
                lvl_vif[level] = vif
                lvl_r[level] = 0
                for t in range(n_terms):
                    lvl_in[level, t] = False
                for i in range(n_s):
                    lvl_in[level, terms[i]] = True
            if n_s - k > 1:
                for i in range(k, n_s):
                    nidx = 0
                    for j in range(col_start[i], col_start[i + 1]):
                        idx[nidx] = j - fw
                        nidx += 1
                    inc[i] = _drop_increase(W, L, c, fw, q, idx, nidx, G, bvec)
                if family_tiers:
                    # increase when dropping every form of a variable at once
                    for i in range(k, n_s):
                        fam_inc[i] = -1.0
                    for i in range(k, n_s):
                        if fam_inc[i] >= 0.0:
                            continue
                        f = t_fam[terms[i]]
                        if fam_members[f] == 1:
                            fam_inc[i] = inc[i]
                            continue
                        nidx = 0
                        members = 0
                        for p in range(k, n_s):
                            if t_fam[terms[p]] == f:
                                members += 1
                                for j in range(col_start[p], col_start[p + 1]):
                                    idx[nidx] = j - fw
                                    nidx += 1
                        value = inc[i] if members == 1 else _drop_increase(W, L, c, fw, q, idx, nidx, G, bvec)
                        for p in range(k, n_s):
                            if t_fam[terms[p]] == f:
                                fam_inc[p] = value
        n_free = n_s - k
        # tier of a free term: how many forms of its variable rank above it
        for i in range(k, n_s):
            tier[i] = 0
            if family_tiers and fam_members[t_fam[terms[i]]] > 1:
                for p in range(k, n_s):
                    if p != i and t_fam[terms[p]] == t_fam[terms[i]] and (
                            inc[p] > inc[i] or (inc[p] == inc[i] and p < i)):
                        tier[i] += 1
        # free positions sorted by (tier, decreasing variable increase, decreasing increase), stable
        for i in range(n_free):
            order[i] = k + i
        for i in range(1, n_free):
            v = order[i]
            j = i - 1
            while j >= 0 and _order_before(v, order[j], tier, fam_inc, inc):
                order[j + 1] = order[j]
                j -= 1
            order[j + 1] = v
        # children: drop position i, fix terms[:i]
        new_fams = np.uint64(0)
        for i in range(k, n_s - 1):
            if col_start[i] + 1 > max_size:
                break  # this child and every later one fix too many columns
            if i > k:
                fb = np.uint64(1) << np.uint64(t_fam[terms[i - 1]])
                if new_fams & fb:
                    # fixing terms[:i] would put two forms of one variable in every
                    # model below; so would every later child
                    break
                new_fams |= fb
            for p in range(i):
                child[p] = terms[p]
            m_child = i
            for oi in range(n_free):
                p = order[oi]
                if p <= i:
                    continue
                t = terms[p]
                if new_fams & (np.uint64(1) << np.uint64(t_fam[t])):
                    continue
                child[m_child] = t
                m_child += 1
            if m_child == i:
                continue
            cw_fixed = col_start[i]
            cw_all = cw_fixed + _family_width(child, i, m_child, t_fam, t_width, scratch)
            clo = cw_fixed + 1
            chi = cw_all if cw_all < max_size else max_size
            if clo > chi:
                continue
            cb = rss_all + inc[i]
            if _prunable(cb, thr, clo, chi):
                pruned_count[0] += _family_count(child, i, m_child, t_fam, scratch)
                continue
            top = top_arr[0] + 1
            top_arr[0] = top
            for p in range(m_child):
                st_terms[top, p] = child[p]
            st_len[top] = m_child
            st_k[top] = i
            st_bound[top] = cb
            st_root[top] = False
            st_level[top] = level + 1
    counts[2] += nodes
    return top_arr[0] < 0


@njit(cache=True, nogil=True)
def all_subsets_rss(A, cols, tol):
    """Scaled rss of every subset of ``cols`` (intercept implied), by the dropping-columns tree.

    Full enumeration with no bound: a node's factor gives the rss of all its
    leading subsets, and each child's factor comes from its parent's by one
    Givens downdate (:func:`drop_column`, O(k²)) instead of a fresh O(k³)
    factorisation (Gatu & Kontoghiorghes 2006).

    Parameters
    ----------
    A : ndarray
        Scaled cross-products (:func:`scaled_cross`).
    cols : ndarray of int64, length p ≤ 26
        Candidate columns; bit ``i`` of a subset's index stands for ``cols[i]``.
    tol : float
        Pivot tolerance.

    Returns
    -------
    rss : ndarray, shape (2**p,)
        ``rss[mask]``; −1 for every subset when the full set is rank-deficient
        (this enumeration does not handle singular problems; the branch-and-bound
        search does).
    """
    p = cols.shape[0]
    out = np.full(1 << p, -1.0)
    L0, skipped = factor_columns(A, cols, tol)
    for j in range(p):
        if skipped[j]:
            return out
    frames = np.zeros((p + 1, p + 2, p + 2))
    f_pos = np.zeros((p + 1, p + 1), dtype=np.int64)  # original positions, in order
    f_len = np.zeros(p + 1, dtype=np.int64)
    f_k = np.zeros(p + 1, dtype=np.int64)
    f_next = np.zeros(p + 1, dtype=np.int64)
    for r in range(p + 1):
        for l in range(p + 1):
            frames[0, r, l] = L0[r, l]
    for j in range(p):
        f_pos[0, j] = j
    f_len[0] = p
    f_k[0] = 0
    # record the root's leading subsets, including the empty one
    acc = L0[p, p]
    mask = 0
    for j in range(p):
        mask |= 1 << j
    out[mask] = acc
    for j in range(p - 1, -1, -1):
        z = L0[p, j]
        acc += z * z
        mask ^= 1 << j
        out[mask] = acc
    f_next[0] = 0
    depth = 0
    while depth >= 0:
        n_s = f_len[depth]
        i = f_k[depth] + f_next[depth]
        if i > n_s - 2:
            depth -= 1
            continue
        f_next[depth] += 1
        d = depth + 1
        for r in range(n_s + 1):
            for l in range(r + 1):
                frames[d, r, l] = frames[depth, r, l]
        for j in range(n_s):
            f_pos[d, j] = f_pos[depth, j]
        drop_column(frames[d], f_pos[d], n_s, i)
        m = n_s - 1
        f_len[d] = m
        f_k[d] = i
        f_next[d] = 0
        # leading subsets i+1..m of the child (those up to i were recorded above it)
        Ld = frames[d]
        mask = 0
        for j in range(m):
            mask |= 1 << f_pos[d, j]
        acc = Ld[m, m]
        out[mask] = acc
        for j in range(m - 1, i, -1):
            z = Ld[m, j]
            acc += z * z
            mask ^= 1 << f_pos[d, j]
            out[mask] = acc
        depth = d
    return out
