"""Box-Cox transform of the response, chosen by profile likelihood given the predictors.

For each λ the response is transformed, z = (y^λ − 1)/λ (log y at λ = 0), the
linear model z = Xβ + ε is fitted by (weighted) least squares, and the
Gaussian log-likelihood at the MLE is taken **on the scale of y**, i.e. with
the log-Jacobian of the transform added (Box & Cox 1964)::

    ℓ(λ) = −n/2 · (log(2π · rss(λ)/n) + 1) + ½ Σ log wᵢ + (λ − 1) Σ log yᵢ

(``½ Σ log wᵢ`` is 0 without weights; it does not depend on λ and makes ℓ equal
to the ``llf`` of a statsmodels WLS fit plus the Jacobian).  λ̂ maximises ℓ; the
95 % interval is {λ : ℓ(λ) ≥ ℓ(λ̂) − χ²₁,₀.₉₅/2} (likelihood-ratio interval).

References
----------
Box, G. E. P. and Cox, D. R. (1964). An analysis of transformations.
    J. R. Statist. Soc. B 26(2), 211-252.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from . import criteria
from .errors import InputError, OptionError
from .transforms import boxcox, format_number, response_log_jacobian

__all__ = ["ResponseBoxCox", "boxcox_response", "response_log_jacobian", "profile_log_likelihood",
           "INTERPRETABLE_LAMBDAS"]

#: λ values with a plain reading: 1/y, 1/√y, log y, √y, y (common practice, no single source).
INTERPRETABLE_LAMBDAS = (-1.0, -0.5, 0.0, 0.5, 1.0)
_READING = {-1.0: "reciprocal (1/y)", -0.5: "reciprocal square root", 0.0: "log", 0.5: "square root",
            1.0: "no transform"}


@dataclass(frozen=True, eq=False)
class ResponseBoxCox:
    """Result of :func:`boxcox_response`.

    Attributes
    ----------
    lambda_hat : float
        λ̂, the maximiser of the profile log-likelihood within ``bounds``.
    interval : tuple of float
        95 % likelihood-ratio interval for λ, clipped to ``bounds``.
    interval_open : tuple of bool
        Whether the lower / upper end stopped at the bound rather than at the
        χ² cut-off (the true interval reaches further).
    suggested : float or None
        Of the interpretable λ in {−1, −0.5, 0, 0.5, 1} that lie inside the
        interval, the one nearest λ̂; None when none does (common practice, no
        single source).
    log_likelihood : float
        ℓ(λ̂), on the scale of y.
    grid, profile : ndarray
        λ values across ``bounds`` and ℓ at each.
    n : int
    verdict : str
        One sentence for the report.
    caution : str
        The usual caution about choosing a scale from the same data.
    reference : str
    """

    lambda_hat: float
    interval: tuple[float, float]
    interval_open: tuple[bool, bool]
    suggested: float | None
    log_likelihood: float
    grid: np.ndarray
    profile: np.ndarray
    n: int
    verdict: str
    caution: str = ("λ was chosen from these data, so p-values and intervals of a model fitted on the chosen "
                    "scale are optimistic; the choice of scale rests with the practitioner and local "
                    "professional standards.")
    reference: str = "Box, G. E. P. and Cox, D. R. (1964), J. R. Statist. Soc. B 26(2), 211-252"

    def __repr__(self) -> str:
        """A few lines: λ̂, its interval, the suggestion; :meth:`table` holds the profile."""
        low, high = (f"{v:.3g}" for v in self.interval)
        opened = ("(" if self.interval_open[0] else "[") + f"{low}, {high}" + (")" if self.interval_open[1] else "]")
        suggested = "none" if self.suggested is None else (
            f"{format_number(self.suggested)} ({_READING.get(float(self.suggested), '')})")
        return (f"<ResponseBoxCox: {self.n} rows, λ̂ = {self.lambda_hat:.3g}, 95 % interval {opened}, "
                f"suggested λ = {suggested}>\n"
                f"  {self.verdict}\n"
                f"  the profile log-likelihood over {len(self.grid)} values of λ: .table()")

    def table(self):
        """The profile as a DataFrame: ``lambda``, ``log_likelihood`` (on the scale of y) and ``in_interval``."""
        import pandas as pd

        grid = np.asarray(self.grid, dtype=float)
        return pd.DataFrame({"lambda": grid, "log_likelihood": np.asarray(self.profile, dtype=float),
                             "in_interval": (grid >= self.interval[0]) & (grid <= self.interval[1])})


def _check_inputs(y, X, weights):
    y = np.asarray(y, dtype=np.float64)
    if y.ndim != 1:
        raise InputError(f"the response must be one column, got an array of shape {y.shape}")
    n = y.shape[0]
    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    if X.ndim != 2 or X.shape[0] != n:
        raise InputError(f"the predictor matrix has shape {X.shape}, but the response has {n} rows")
    if not np.all(np.isfinite(y)):
        raise InputError(f"the response has {int(np.count_nonzero(~np.isfinite(y)))} of {n} values missing "
                         "or infinite; drop those rows first")
    if not np.all(np.isfinite(X)):
        raise InputError("the predictor matrix holds missing or infinite values; drop those rows first")
    bad = int(np.count_nonzero(y <= 0))
    if bad:
        raise InputError(
            f"the response has {bad} of {n} values ≤ 0 (smallest {format_number(y.min())}); the Box-Cox "
            "transform needs positive values — keep the response untransformed or use a positive response"
        )
    w = None
    if weights is not None:
        w = np.asarray(weights, dtype=np.float64)
        if w.shape != (n,) or not np.all(np.isfinite(w)) or np.any(w <= 0):
            raise InputError(f"weights must be {n} positive finite numbers, one per row")
    design = np.column_stack([np.ones(n), X])
    if n <= np.linalg.matrix_rank(design):
        raise InputError(
            f"{n} rows but {X.shape[1]} predictor columns (+1 intercept); need more rows than coefficients "
            "to profile λ — use fewer predictors or more rows"
        )
    return y, design, w


def _projector(design, w):
    """Orthonormal basis of the column space of √w·[1, X] (rank-revealing SVD)."""
    A = design if w is None else design * np.sqrt(w)[:, None]
    U, s, _ = np.linalg.svd(A, full_matrices=False)
    tol = s.max() * max(A.shape) * np.finfo(float).eps if s.size else 0.0
    return U[:, s > tol]


def profile_log_likelihood(y, X, lam, *, weights=None):
    """ℓ(λ) of the Box-Cox response model, on the scale of y (see the module docstring).

    Parameters
    ----------
    y : array_like, positive, shape (n,)
    X : array_like, shape (n, p)
        Predictor columns; an intercept is added.
    lam : float or array_like
    weights : array_like, optional

    Returns
    -------
    float or ndarray
    """
    y, design, w = _check_inputs(y, X, weights)
    basis = _projector(design, w)
    values = np.array([_profile(y, basis, w, float(t)) for t in np.atleast_1d(lam)])
    return float(values[0]) if np.ndim(lam) == 0 else values


def _profile(y, basis, w, lam):
    n = y.shape[0]
    z = boxcox(y, lam)
    if w is not None:
        z = z * np.sqrt(w)
    resid = z - basis @ (basis.T @ z)
    rss = float(resid @ resid)
    if not np.isfinite(rss) or rss <= 0:
        return -np.inf
    extra = 0.5 * float(np.sum(np.log(w))) if w is not None else 0.0
    return float(criteria.log_likelihood(rss, n, response_log_jacobian(y, "boxcox", lam))) + extra


def boxcox_response(y, X, *, weights=None, bounds=(-2.0, 2.0), grid_size=81):
    """Box-Cox λ for the response given the predictors, by profile likelihood (Box & Cox 1964).

    Parameters
    ----------
    y : array_like, positive, shape (n,)
    X : array_like, shape (n, p)
        Predictor columns (p may be 0); an intercept is always added.
    weights : array_like, optional
        Row weights of a weighted least-squares fit.
    bounds : (float, float), default (−2, 2)
        Range searched for λ̂ and its interval.
    grid_size : int, default 81
        Points of the reported profile.

    Returns
    -------
    ResponseBoxCox

    Raises
    ------
    InputError
        A response with values ≤ 0, shapes that do not match, too few rows.
    OptionError
        Bounds that are not an increasing pair of finite numbers.

    Notes
    -----
    p-values and intervals of a model fitted after choosing λ from the same data
    are optimistic; the choice of scale rests with the practitioner.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> X = rng.uniform(0, 1, (200, 2))
    >>> y = np.exp(1 + X @ [1.0, -0.5] + rng.normal(0, 0.1, 200))
    >>> res = boxcox_response(y, X)
    >>> res.suggested
    0.0
    """
    try:
        low, high = (float(b) for b in bounds)
    except (TypeError, ValueError) as err:
        raise OptionError(f"bounds must be a pair of numbers (low, high), got {bounds!r}") from err
    if not (np.isfinite(low) and np.isfinite(high) and low < high):
        raise OptionError(f"bounds must be finite with low < high, got {bounds!r}")
    if int(grid_size) < 3:
        raise OptionError(f"grid_size must be at least 3, got {grid_size}")
    y, design, w = _check_inputs(y, X, weights)
    basis = _projector(design, w)

    def ell(t):
        return _profile(y, basis, w, float(t))

    grid = np.linspace(low, high, int(grid_size))
    profile = np.array([ell(t) for t in grid])
    i = int(np.argmax(profile))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    res = optimize.minimize_scalar(lambda t: -ell(t), bounds=(lo, hi), method="bounded",
                                   options={"xatol": 1e-10, "maxiter": 500})
    lam_hat = float(res.x)
    best = ell(lam_hat)
    if profile[i] > best:
        lam_hat, best = float(grid[i]), float(profile[i])
    cut = best - stats.chi2.ppf(0.95, 1) / 2.0

    def edge(a, b):
        # a is inside (ℓ ≥ cut), b the bound; root of ℓ − cut between them, else the bound.
        if ell(b) >= cut:
            return b, True
        return float(optimize.brentq(lambda t: ell(t) - cut, min(a, b), max(a, b), xtol=1e-10)), False

    lower, open_low = edge(lam_hat, low)
    upper, open_high = edge(lam_hat, high)
    inside = [v for v in INTERPRETABLE_LAMBDAS if lower <= v <= upper]
    suggested = min(inside, key=lambda v: (abs(v - lam_hat), v)) if inside else None
    verdict = _verdict(lam_hat, (lower, upper), (open_low, open_high), suggested)
    return ResponseBoxCox(
        lambda_hat=lam_hat,
        interval=(lower, upper),
        interval_open=(open_low, open_high),
        suggested=suggested,
        log_likelihood=best,
        grid=grid,
        profile=profile,
        n=int(y.shape[0]),
        verdict=verdict,
    )


def _verdict(lam_hat, interval, interval_open, suggested):
    low_text = ("below " if interval_open[0] else "") + f"{interval[0]:.2f}"
    high_text = ("above " if interval_open[1] else "") + f"{interval[1]:.2f}"
    head = f"Box-Cox λ̂ = {lam_hat:.2f} (95% interval {low_text} to {high_text})"
    if suggested is None:
        return head + "; no simple power lies inside the interval, so use λ̂ itself or reconsider the model."
    reading = _READING[suggested]
    if suggested == 1.0:
        return head + "; λ = 1 lies inside the interval: the data give no reason to transform the response."
    return head + f"; λ = {format_number(suggested)} ({reading}) lies inside the interval and is the simplest choice."
