"""Moments: centred cross-products of candidates and response from one pass.

Every search works from the sufficient statistics of least squares — the
weighted means and the centred cross-product matrix of the candidate columns
and the response — never from the n×p data again, so its cost does not depend
on the number of rows.

The pass is chunked: each chunk's moments are computed by the two-pass centred
formula (mean first, then Σ w (x − x̄)(z − z̄)ᵀ), and chunks are merged with the
exact pairwise update of Chan, Golub & LeVeque (1979, 1983)::

    W = W_A + W_B,   δ = x̄_B − x̄_A,
    x̄ = x̄_A + δ · W_B / W,
    C = C_A + C_B + δ δᵀ · W_A W_B / W

which is also run backwards to remove rows: ``Moments(all) − Moments(fold)``
gives the moments of the training rows of a cross-validation fold without a
second pass over the data.

References
----------
Chan, T. F., Golub, G. H. and LeVeque, R. J. (1979). Updating formulae and a
    pairwise algorithm for computing sample variances. Stanford CS report
    STAN-CS-79-773; (1983) Algorithms for computing the sample variance:
    analysis and recommendations. Amer. Statist. 37(3), 242-247.
Welford, B. P. (1962). Note on a method for calculating corrected sums of
    squares and products. Technometrics 4(3), 419-420.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np

from .errors import DataFileError, InputError, SearchError
from .kernels import PIVOT_TOLERANCE

__all__ = [
    "moments_of",
    "Moments",
    "Solution",
    "compute_moments",
    "moments_from_chunks",
    "moments_from_file",
    "solve",
    "heldout_sse",
    "DEFAULT_CHUNK_ROWS",
]

#: Rows per chunk of the moment pass (about 8 MB per 16 columns of float64).
DEFAULT_CHUNK_ROWS = 65_536


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

    Notes
    -----
    ``a + b`` merges the moments of two disjoint sets of rows and ``a − b``
    removes the rows of ``b`` (which must be a subset of the rows of ``a``);
    both are exact up to rounding (Chan, Golub & LeVeque 1979).

    Examples
    --------
    >>> import numpy as np
    >>> X = np.arange(12.0).reshape(6, 2); y = np.array([1., 3, 2, 5, 4, 6])
    >>> whole = compute_moments(X, y)
    >>> part = compute_moments(X[:2], y[:2])
    >>> rest = whole - part
    >>> bool(np.allclose(rest.cross, compute_moments(X[2:], y[2:]).cross))
    True
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

    @property
    def scales(self) -> np.ndarray:
        """Square roots of the diagonal of ``cross`` (root centred sums of squares), response last."""
        return np.sqrt(np.maximum(np.diag(self.cross), 0.0))

    def uncentred(self) -> np.ndarray:
        """Uncentred weighted cross-products Σ wᵢ xᵢ zᵢᵀ = C + W x̄ x̄ᵀ (response last)."""
        return self.cross + self.weight_sum * np.outer(self.mean, self.mean)

    def __add__(self, other: "Moments") -> "Moments":
        if not isinstance(other, Moments):
            return NotImplemented
        _check_same_width(self, other)
        if other.weight_sum == 0:
            return Moments(self.n + other.n, self.weight_sum, self.mean.copy(), self.cross.copy())
        if self.weight_sum == 0:
            return Moments(self.n + other.n, other.weight_sum, other.mean.copy(), other.cross.copy())
        total = self.weight_sum + other.weight_sum
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.weight_sum / total)
        cross = self.cross + other.cross + np.outer(delta, delta) * (self.weight_sum * other.weight_sum / total)
        return Moments(self.n + other.n, float(total), mean, _symmetric(cross))

    def __sub__(self, other: "Moments") -> "Moments":
        if not isinstance(other, Moments):
            return NotImplemented
        _check_same_width(self, other)
        n = self.n - other.n
        rest = self.weight_sum - other.weight_sum
        if n <= 0 or not rest > 0:
            raise InputError(
                f"cannot remove {other.n} rows (weight {other.weight_sum:g}) from moments of {self.n} rows "
                f"(weight {self.weight_sum:g}): nothing would be left; a fold must be a strict subset of the rows"
            )
        if other.weight_sum == 0:
            return Moments(n, self.weight_sum, self.mean.copy(), self.cross.copy())
        mean = self.mean + (self.mean - other.mean) * (other.weight_sum / rest)
        delta = other.mean - mean
        cross = self.cross - other.cross - np.outer(delta, delta) * (rest * other.weight_sum / self.weight_sum)
        return Moments(n, float(rest), mean, _symmetric(cross))


@dataclass(frozen=True)
class Solution:
    """Least-squares fit computed from moments.

    Attributes
    ----------
    columns : tuple of int
        Candidate columns of the model, in the order of ``coef``.
    intercept : float
        Fitted intercept (0.0 when fitted without one).
    coef : ndarray
        Coefficients of ``columns``.
    rss : float
        Weighted residual sum of squares Σ wᵢ eᵢ².
    """

    columns: tuple[int, ...]
    intercept: float
    coef: np.ndarray
    rss: float


def _symmetric(a: np.ndarray) -> np.ndarray:
    return 0.5 * (a + a.T)


def _check_same_width(a: Moments, b: Moments) -> None:
    if a.mean.shape != b.mean.shape:
        raise InputError(
            f"moments of {a.m} and {b.m} candidate columns cannot be combined; "
            "both must come from the same candidate set"
        )


def _empty(width: int) -> Moments:
    return Moments(0, 0.0, np.zeros(width), np.zeros((width, width)))


#: Deviations from the mean below this (√ of the smallest normal double, ≈ 1.5e-154) have squares
#: that underflow: their sums of squares and cross-products are zero or lose their digits.
SMALLEST_SPREAD = float(np.sqrt(np.finfo(np.float64).tiny))
#: Deviations above this (≈ 1.3e148: √ of the largest double over 10⁶ rows' worth of headroom)
#: have sums of squares that overflow once enough rows are added.
LARGEST_SPREAD = float(np.sqrt(np.finfo(np.float64).max) / 2.0 ** 20)


def _what(j: int, width: int, names) -> str:
    """How an error names variable ``j`` of ``width`` (the response last)."""
    if names is not None and j < len(names):
        return f"{'the response' if j == width - 1 else 'column'} {str(names[j])!r}"
    return "the response" if j == width - 1 else f"candidate column {j}"


def _check_range(Z: np.ndarray, D: np.ndarray, C: np.ndarray, mean: np.ndarray, first_row: int, names) -> None:
    """Raise when a column's spread is beyond what double-precision cross-products can hold.

    The cross-products are formed from deviations dᵢ = xᵢ − x̄; with every |dᵢ|
    below :data:`SMALLEST_SPREAD` each dᵢ² is below the smallest normal double
    (2.2e-308) and underflows, and with |dᵢ| above :data:`LARGEST_SPREAD` the
    sums Σdᵢ² overflow to infinity.  Either way no least-squares quantity of
    the column (rss, R², a criterion) can be represented, whatever the
    algorithm, so this is an input error whose fix is to rescale the column.
    """
    rows, width = Z.shape
    with np.errstate(over="ignore", invalid="ignore"):  # max |d| as two reductions: no n × p temporary
        spread = np.maximum(D.max(axis=0), -D.min(axis=0)) if rows else np.zeros(width)
    bad_big = ~np.isfinite(mean) | ~np.isfinite(np.diag(C)) | ~(spread <= LARGEST_SPREAD)
    bad_small = (spread > 0) & (spread < SMALLEST_SPREAD)
    where = f"rows {first_row}..{first_row + rows - 1}"
    for j in range(width):
        column = None if names is None or j >= len(names) else str(names[j])
        if bad_small[j]:
            count = int(np.count_nonzero(D[:, j]))
            factor = f"1e{min(int(np.ceil(-np.log10(spread[j]))), 300)}"  # 1e300: still a finite double
            raise InputError(
                f"{_what(j, width, names)} varies around its mean by at most {spread[j]:.2g} ({count} of the "
                f"{rows} {where} differ from it): below {SMALLEST_SPREAD:.2g}, where squares of "
                "double-precision numbers underflow, so no least-squares fit can use it — multiply it by "
                f"{factor} (or another power of ten) before the search",
                column=column, column_index=j, count=count,
            )
        if bad_big[j]:
            values = np.abs(D[:, j]) if np.isfinite(mean[j]) else np.abs(Z[:, j])
            count = int(np.count_nonzero(~(values <= LARGEST_SPREAD)))
            top = float(np.max(values))
            fix = (f"divide it by 1e{int(np.floor(np.log10(top)))} (or another power of ten)" if np.isfinite(top)
                   else "divide it by a power of ten")
            raise InputError(
                f"{_what(j, width, names)} varies around its mean by up to {top:.2g} ({count} of the {rows} "
                f"{where} beyond {LARGEST_SPREAD:.2g}): its sums of squares overflow double precision "
                f"(largest 1.8e308), so no least-squares fit can use it — {fix} before the search; the "
                "ranking does not change and the coefficients scale with it",
                column=column, column_index=j, count=count,
            )


def _chunk_moments(X: np.ndarray, y: np.ndarray, w: np.ndarray | None, first_row: int,
                   names=None) -> Moments:
    """Two-pass centred moments of one chunk (response appended last)."""
    if X.ndim == 1:
        X = X[:, None]
    if X.shape[0] != y.shape[0]:
        raise InputError(
            f"the candidate matrix has {X.shape[0]} rows but the response has {y.shape[0]} "
            f"(chunk starting at row {first_row}); pass them with the same rows"
        )
    return stacked_moments(np.column_stack([X, y]).astype(np.float64, copy=False), w, first_row, names)


def stacked_moments(Z: np.ndarray, w: np.ndarray | None, first_row: int, names=None) -> Moments:
    """Two-pass centred moments of the rows of ``Z = [X, y]`` (the response its last column).

    The mean over the rows, the deviations D = Z − mean and DᵀD (or
    (D·w)ᵀD with weights), after the checks that every value and weight is
    finite (weights non-negative) and every spread representable
    (:func:`_check_range`).  A caller that already holds ``[X, y]`` in one
    matrix (a table read in parts builds it in place) passes it without a copy.
    """
    bad = ~np.isfinite(Z)
    if bad.any():
        counts = bad.sum(axis=0)
        j = int(np.flatnonzero(counts)[0])
        what = _what(j, Z.shape[1], names)
        raise InputError(
            f"{what} has {int(counts[j])} missing or infinite values in rows {first_row}.."
            f"{first_row + Z.shape[0] - 1}; drop or impute those rows before computing moments",
        )
    rows = Z.shape[0]
    if w is None:
        if rows == 0:
            return _empty(Z.shape[1])
        with np.errstate(over="ignore", invalid="ignore"):
            mean = Z.mean(axis=0)
            D = Z - mean
            C = _symmetric(D.T @ D)
        _check_range(Z, D, C, mean, first_row, names)
        return Moments(rows, float(rows), mean, C)
    w = np.asarray(w, dtype=np.float64).reshape(-1)
    if w.shape[0] != rows:
        raise InputError(f"the weights have {w.shape[0]} rows but the data have {rows} (chunk at row {first_row})")
    if not np.all(np.isfinite(w)) or np.any(w < 0):
        n_bad = int(np.sum(~np.isfinite(w) | (w < 0)))
        raise InputError(
            f"{n_bad} weights are negative, missing or infinite (rows {first_row}..{first_row + rows - 1}); "
            "weights must be finite and non-negative"
        )
    total = float(w.sum())
    if total == 0:
        return Moments(rows, 0.0, np.zeros(Z.shape[1]), np.zeros((Z.shape[1], Z.shape[1])))
    with np.errstate(over="ignore", invalid="ignore"):
        mean = w @ Z / total
        D = Z - mean
        C = _symmetric((D * w[:, None]).T @ D)
    _check_range(Z, D, C, mean, first_row, names)
    return Moments(rows, total, mean, C)


def compute_moments(matrix, y, weights=None, *, chunk_rows: int = DEFAULT_CHUNK_ROWS, names=None) -> Moments:
    """Weighted means and centred cross-products of ``[matrix, y]`` in one chunked pass.

    Parameters
    ----------
    matrix : array_like, shape (n, m)
        Candidate columns.
    y : array_like, shape (n,)
        Response.
    weights : array_like, shape (n,), optional
        Non-negative case weights wᵢ (weighted least squares minimises Σ wᵢ eᵢ²).
    chunk_rows : int
        Rows per chunk; each chunk is centred on its own mean (two-pass) and
        merged pairwise (Chan, Golub & LeVeque 1979).
    names : sequence of str, optional
        Names of the m columns and the response (last), for the errors.

    Returns
    -------
    Moments

    Raises
    ------
    InputError
        On mismatched lengths, missing/infinite values or invalid weights, and
        when a column's deviations from its mean are so small that their
        squares underflow (below :data:`SMALLEST_SPREAD`) or so large that
        their sums of squares overflow (above :data:`LARGEST_SPREAD`): no
        double-precision cross-product can hold such a column, and the error
        says by which power of ten to rescale it.

    Examples
    --------
    >>> import numpy as np
    >>> mom = compute_moments(np.array([[1.0], [2.0], [3.0]]), np.array([2.0, 4.0, 6.5]))
    >>> float(mom.cross[0, 1])   # Σ (x − x̄)(y − ȳ)
    4.5
    """
    X = np.asarray(matrix, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    yv = np.asarray(y, dtype=np.float64).reshape(-1)
    w = None if weights is None else np.asarray(weights, dtype=np.float64).reshape(-1)
    if X.shape[0] != yv.shape[0]:
        raise InputError(
            f"the candidate matrix has {X.shape[0]} rows but the response has {yv.shape[0]}; "
            "pass them with the same rows"
        )
    if w is not None and w.shape[0] != yv.shape[0]:
        raise InputError(f"the weights have {w.shape[0]} rows but the data have {yv.shape[0]}; pass one weight per row")
    step = _check_chunk_rows(chunk_rows)
    return moments_from_chunks(
        ((X[s:s + step], yv[s:s + step], None if w is None else w[s:s + step])
         for s in range(0, max(X.shape[0], 1), step)),
        names=names,
    )


def _check_chunk_rows(chunk_rows) -> int:
    if isinstance(chunk_rows, bool) or not isinstance(chunk_rows, (int, np.integer)) or chunk_rows < 1:
        raise InputError(f"chunk_rows must be a positive whole number of rows (got {chunk_rows!r})")
    return int(chunk_rows)


def moments_of(candidates, *, chunk_rows: int = 65536) -> Moments:
    """Moments of a candidate set: its matrix, its (searched) response and its row weights.

    The one pass over the data that every search starts from; searches take
    ``moments=None`` to mean this.

    Parameters
    ----------
    candidates : CandidateSet
        Anything with ``matrix``, ``y`` and ``weights``.
    """
    names = getattr(candidates, "column_names", None)
    response = getattr(candidates, "response", None)
    names = tuple(names) + (response,) if names is not None and response is not None else None
    return compute_moments(candidates.matrix, candidates.y, candidates.weights, chunk_rows=chunk_rows, names=names)


def moments_from_chunks(chunks: Iterable, *, names=None) -> Moments:
    """Merge the moments of chunks of rows given as ``(X, y, w_or_None)`` triples.

    Parameters
    ----------
    chunks : iterable of tuple
        ``(X, y)`` or ``(X, y, w)``; every ``X`` must have the same columns.
    names : sequence of str, optional
        Names of the columns and the response (last), for the errors.

    Returns
    -------
    Moments
        Moments of all rows; only one chunk is held at a time.
    """
    total = None
    first_row = 0
    for chunk in chunks:
        if len(chunk) == 2:
            X, y = chunk
            w = None
        elif len(chunk) == 3:
            X, y, w = chunk
        else:
            raise InputError(f"each chunk must be (X, y) or (X, y, weights); got a tuple of {len(chunk)} items")
        X = np.asarray(X, dtype=np.float64)
        yv = np.asarray(y, dtype=np.float64).reshape(-1)
        part = _chunk_moments(X, yv, w, first_row, names)
        first_row += yv.shape[0]
        if total is None:
            total = part
        else:
            if part.mean.shape != total.mean.shape:
                raise InputError(
                    f"the chunk starting at row {first_row - yv.shape[0]} has {part.m} candidate columns "
                    f"but earlier chunks had {total.m}; every chunk needs the same columns"
                )
            total = total + part
    if total is None or total.n == 0:
        raise InputError("no rows to compute moments from; the data are empty")
    if not total.weight_sum > 0:
        raise InputError(f"all {total.n} weights are zero; at least one row needs a positive weight")
    diagonal = np.diag(total.cross)
    if not np.all(np.isfinite(diagonal)):
        j = int(np.flatnonzero(~np.isfinite(diagonal))[0])
        raise InputError(
            f"{_what(j, diagonal.shape[0], names)} has a sum of squares about its mean over {total.n} rows that "
            "overflows double precision (largest 1.8e308); divide it by a power of ten before the search",
            column=None if names is None or j >= len(names) else str(names[j]), column_index=j, count=total.n,
        )
    return total


def moments_from_file(
    path,
    candidates=None,
    *,
    transform: Callable | None = None,
    chunk_rows: int = DEFAULT_CHUNK_ROWS,
    columns: list | None = None,
    weights_column: str | None = None,
) -> Moments:
    """Moments of a CSV or Parquet file read in chunks, so memory does not grow with n.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.csv`` (optionally compressed, read with ``pandas.read_csv(chunksize=...)``)
        or ``.parquet``/``.pq`` file (read with ``pyarrow`` ``iter_batches``).
    candidates : CandidateSet, optional
        Its ``transform(frame)`` re-applies the stored forms to each chunk;
        the response column ``candidates.response`` is taken through the
        candidate set's response transform (same λ).
    transform : callable, optional
        Used instead of ``candidates.transform``: ``frame -> (X, y)`` or ``(X, y, w)``.
    chunk_rows : int
        Rows per chunk.
    columns : list of str, optional
        Only these columns are read from the file.
    weights_column : str, optional
        With ``candidates``: the column of row weights, if any.

    Returns
    -------
    Moments

    Raises
    ------
    DataFileError
        When the file is missing or of an unknown kind.
    InputError
        When neither ``candidates`` with a ``transform`` method nor ``transform`` is given.
    """
    step = _check_chunk_rows(chunk_rows)
    if transform is None and callable(getattr(candidates, "transform", None)):
        transform = _candidate_chunks(candidates, weights_column)
    if transform is None or not callable(transform):
        raise InputError(
            "moments_from_file needs a way to turn a chunk of the table into (X, y): pass a candidate set "
            "with a transform method, or transform=callable"
        )
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise DataFileError(f"data file {path!r} does not exist; check the path")
    lower = path.lower()
    if lower.endswith((".parquet", ".pq")):
        try:
            import pyarrow.parquet as pq
        except ImportError as err:  # pragma: no cover - depends on the environment
            raise DataFileError("reading Parquet needs pyarrow; install it with: pip install pyarrow") from err

        def frames():
            # pre_buffer=False: the default read-ahead keeps the buffers of earlier
            # row groups alive, and the memory of the pass then grows with the file
            handle = pq.ParquetFile(path, pre_buffer=False)
            for batch in handle.iter_batches(batch_size=step, columns=columns):
                yield batch.to_pandas()
    elif lower.endswith((".csv", ".csv.gz", ".csv.bz2", ".csv.xz", ".txt", ".tsv")):
        import pandas as pd

        def frames():
            sep = "\t" if lower.endswith(".tsv") else ","
            with pd.read_csv(path, chunksize=step, usecols=columns, sep=sep) as reader:
                yield from reader
    else:
        raise DataFileError(
            f"cannot tell the kind of {path!r} from its name; use a .csv or .parquet file"
        )

    def chunks():
        for frame in frames():
            out = transform(frame)
            if not isinstance(out, tuple) or len(out) not in (2, 3):
                raise InputError("the transform must return (X, y) or (X, y, weights) for each chunk")
            yield out

    return moments_from_chunks(chunks())


def _candidate_chunks(candidates, weights_column, terms=None):
    """frame -> (X, y[, w]) through a CandidateSet's stored forms and response transform.

    With ``terms`` (indices), only those terms' columns are built; the others are left as zeros.
    """
    from .transforms import transform_response

    response = candidates.response
    rt = getattr(candidates, "response_transform", None)
    kind = getattr(rt, "transform", "identity")
    lam = dict(getattr(rt, "params", ())).get("lambda")

    def chunk(frame):
        for name in [response] + ([weights_column] if weights_column else []):
            if name not in frame.columns:
                raise InputError(
                    f"the file has no column {name!r}; the candidates were built with it — "
                    "pass the file the candidates came from",
                    column=name,
                )
        X = np.asarray(candidates.transform(frame) if terms is None else candidates._transform(frame, terms),
                       dtype=np.float64)
        y = frame[response].to_numpy(dtype=np.float64, na_value=np.nan)
        if kind != "identity":
            bad = int(np.count_nonzero(~(y > 0)))
            if bad:
                raise InputError(
                    f"response {response!r} has {bad} values ≤ 0 or missing in a chunk of {len(y)} rows; "
                    f"its {kind} transform needs positive values",
                    column=response,
                )
            y = transform_response(y, kind, lam)
        if weights_column:
            return X, y, frame[weights_column].to_numpy(dtype=np.float64, na_value=np.nan)
        return X, y

    return chunk


def _pivoted_factor(A: np.ndarray, tolerance: float):
    """Cholesky factor of a scaled Gram matrix with a unit-diagonal pivot test.

    ``A`` has unit diagonal (or zero for a constant column).  Returns the upper
    factor and the index of the first column whose pivot falls below
    ``tolerance`` (−1 when none does).
    """
    size = A.shape[0]
    diag = np.diag(A)
    if size and np.all(diag > 0):
        # LAPACK first; the column-by-column loop below only to name the first failing pivot.
        try:
            L = np.linalg.cholesky(A)
        except np.linalg.LinAlgError:
            L = None
        if L is not None and np.all(np.diag(L) ** 2 > tolerance * diag):
            return np.ascontiguousarray(L.T), -1
    R = np.zeros_like(A)
    for j in range(size):
        d = A[j, j] - R[:j, j] @ R[:j, j]
        if A[j, j] <= 0 or d <= tolerance * A[j, j]:
            return R, j
        R[j, j] = np.sqrt(d)
        R[j, j + 1:] = (A[j, j + 1:] - R[:j, j] @ R[:j, j + 1:]) / R[j, j]
    return R, -1


def solve(moments: Moments, columns, *, intercept: bool = True) -> Solution:
    """Least-squares coefficients and rss of a model from moments only.

    With an intercept the fit uses the centred cross-products ``C``:
    β = C_XX⁻¹ C_Xy, a = ȳ − x̄ᵀβ, rss = C_yy − C_yXβ.  Without one, the
    uncentred products C + W x̄x̄ᵀ.  The Gram matrix is scaled to unit diagonal
    and factored by Cholesky; a pivot below ``PIVOT_TOLERANCE`` times the
    column's own (scaled, hence unit) sum of squares — i.e. R² of the column on
    the earlier ones above 1 − tolerance — means rank deficiency.

    Parameters
    ----------
    moments : Moments
    columns : sequence of int
        Candidate columns of the model (may be empty).
    intercept : bool, default True

    Returns
    -------
    Solution

    Raises
    ------
    SearchError
        When the columns are rank-deficient (collinear, or a constant column).

    Examples
    --------
    >>> import numpy as np
    >>> X = np.array([[0.0], [1.0], [2.0], [3.0]]); y = 1.0 + 2.0 * X[:, 0]
    >>> fit = solve(compute_moments(X, y), [0])
    >>> round(fit.intercept, 12), round(float(fit.coef[0]), 12), round(fit.rss, 12)
    (1.0, 2.0, 0.0)
    """
    cols = tuple(int(c) for c in columns)
    m = moments.m
    for c in cols:
        if not 0 <= c < m:
            raise InputError(f"column index {c} is out of range; the moments hold {m} candidate columns")
    if len(set(cols)) != len(cols):
        raise SearchError(f"the columns {cols} repeat a column; a model cannot hold a column twice")
    G = moments.cross if intercept else moments.uncentred()
    idx = list(cols) + [m]
    A = G[np.ix_(idx, idx)]
    scale = np.sqrt(np.maximum(np.diag(A), 0.0))
    safe = np.where(scale > 0, scale, 1.0)
    S = A / np.outer(safe, safe)
    R, bad = _pivoted_factor(S[:-1, :-1], PIVOT_TOLERANCE)
    if bad >= 0:
        raise SearchError(
            f"candidate column {cols[bad]} is (numerically) a linear combination of "
            f"{'the constant' if scale[bad] == 0 else 'the columns before it'} in the model {cols}; "
            "drop it or one of the columns it depends on",
            column=None, columns=cols, singular_column=cols[bad],
        )
    k = len(cols)
    z = np.linalg.solve(R.T, S[:-1, -1]) if k else np.zeros(0)
    beta_scaled = np.linalg.solve(R, z) if k else np.zeros(0)
    coef = beta_scaled * safe[-1] / safe[:-1]
    rss_scaled = max(1.0 - float(z @ z), 0.0)
    rss = rss_scaled * A[-1, -1]
    a = float(moments.mean[-1] - moments.mean[:-1][list(cols)] @ coef) if intercept else 0.0
    return Solution(cols, a, coef, float(rss))


def heldout_sse(train: Moments, test: Moments, columns, *, intercept: bool = True) -> float:
    """Sum of squared prediction errors on the test rows of the model fitted on the training rows.

    Computed from moments only (no data pass).  With the fit (a, β) from
    ``train`` and the test rows' weighted means and centred cross-products::

        Σ w (y − a − xᵀβ)² = C_yy − 2βᵀC_Xy + βᵀC_XXβ + W_test (ȳ − a − x̄ᵀβ)²

    (centred form of the uncentred expansion, which loses fewer digits).

    Parameters
    ----------
    train, test : Moments
        Of disjoint rows, e.g. ``all − fold`` and ``fold``.
    columns : sequence of int
    intercept : bool, default True

    Returns
    -------
    float
        Weighted by the test rows' weights when there are weights.

    Raises
    ------
    SearchError
        When the columns are rank-deficient on the training rows.
    """
    _check_same_width(train, test)
    fit = solve(train, columns, intercept=intercept)
    cols = list(fit.columns)
    m = test.m
    b = fit.coef
    C = test.cross
    spread = C[m, m]
    if cols:
        spread = spread - 2.0 * b @ C[cols, m] + b @ C[np.ix_(cols, cols)] @ b
    offset = test.mean[m] - fit.intercept - (test.mean[cols] @ b if cols else 0.0)
    return float(max(spread, 0.0) + test.weight_sum * offset * offset)
