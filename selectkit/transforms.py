"""Transforms of predictors and response: the one home of their definitions and readable names.

Every function here is pure: arrays in, arrays (or numbers, or small named
results) out.  Nothing here knows about tables, candidates or searches.

Forms of a predictor ``x`` (``c`` is an optional shift the user asked for)

===============  ===============================================  ================
transform        value                                            defined where
===============  ===============================================  ================
``identity``     x                                                everywhere
``log``          log(x + c)  (natural log)                        x + c > 0
``sqrt``         √(x + c)                                         x + c ≥ 0
``reciprocal``   1/(x + c)                                        x + c of one sign, ≠ 0
``square``       x²                                               everywhere
``power``        (x + c)^p, p = 0 meaning log(x + c)              see below
``boxcox``       ((x + c)^λ − 1)/λ, log(x + c) at λ = 0           x + c > 0
``yeojohnson``   Yeo & Johnson (2000), see :func:`yeojohnson`     everywhere
``boxtidwell``   (x + c)^α, α from :func:`box_tidwell`            x + c > 0
``product``      x·z (an interaction)                             everywhere
===============  ===============================================  ================

A power p is defined everywhere for p = 1, 2, 3; where x + c ≥ 0 for p = 0.5;
where x + c is of one sign and ≠ 0 for p = −1, −2; where x + c > 0 for p = 0, −0.5
(:func:`domain_problem` says why a form is undefined on given data).

Readable names (:func:`term_name`) use plain notation: ``x``, ``log(x)``,
``sqrt(x)``, ``1/x``, ``x^2``, ``x^-0.5``, ``boxcox(x, 0.37)``,
``yeojohnson(x, 0.8)``, ``log(x + 1.5)``, ``x*z``.

References
----------
Box, G. E. P. and Cox, D. R. (1964). An analysis of transformations.
    J. R. Statist. Soc. B 26(2), 211-252.
Box, G. E. P. and Tidwell, P. W. (1962). Transformation of the independent
    variables. Technometrics 4(4), 531-550.
Royston, P. and Altman, D. G. (1994). Regression using fractional polynomials
    of continuous covariates. Applied Statistics 43(3), 429-467.
Yeo, I.-K. and Johnson, R. A. (2000). A new family of power transformations to
    improve normality or symmetry. Biometrika 87(4), 954-959.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np
from scipy import optimize, stats

from .errors import OptionError
from .settings import FORM_NAMES

__all__ = [
    "FORMS",
    "TRANSFORMS",
    "FRACTIONAL_POWERS",
    "RESPONSE_TRANSFORMS",
    "identity",
    "log",
    "sqrt",
    "reciprocal",
    "square",
    "power",
    "boxcox",
    "boxcox_llf",
    "boxcox_lambda",
    "parameter_rows",
    "PARAMETER_SAMPLE_ROWS",
    "yeojohnson",
    "yeojohnson_llf",
    "yeojohnson_lambda",
    "BoxTidwellResult",
    "box_tidwell",
    "apply",
    "domain_problem",
    "has_pole",
    "term_name",
    "term_expression",
    "format_number",
    "transform_response",
    "response_log_jacobian",
]

#: Forms the candidate generator can be asked for by name.
FORMS = FORM_NAMES  # the one list, in selectkit.settings
#: Restricted cubic spline forms by number of knots (off by default: each adds a block of k − 1 columns).
SPLINE_FORMS = {name: int(name[len("spline"):]) for name in FORMS if name.startswith("spline")}
#: Every transform a term can carry (``power`` comes from fractional polynomials).
TRANSFORMS = tuple(f for f in FORMS if f not in SPLINE_FORMS) + ("spline", "power", "product")
#: Knots of a restricted cubic spline at these quantiles of x, by number of knots — the placements
#: recommended in common practice (Harrell, *Regression Modeling Strategies*, 2nd ed. 2015, sec. 2.4.6;
#: quoted from memory).
SPLINE_QUANTILES = {3: (0.10, 0.50, 0.90), 4: (0.05, 0.35, 0.65, 0.95), 5: (0.05, 0.275, 0.50, 0.725, 0.95)}
#: The fractional-polynomial powers of Royston & Altman (1994); 0 means log.
FRACTIONAL_POWERS = (-2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0, 3.0)
#: Transforms of the response.
RESPONSE_TRANSFORMS = ("identity", "log", "sqrt", "boxcox")

#: Search range of the Box-Cox and Yeo-Johnson λ of a predictor.
_LAMBDA_RANGE = 5.0


def _params(params) -> dict:
    """Parameters as a dict, from a mapping or from a tuple of (name, value) pairs."""
    if params is None:
        return {}
    if isinstance(params, Mapping):
        return dict(params)
    return dict(params)


# --------------------------------------------------------------------- forms


def identity(x):
    """x, as float64."""
    return np.asarray(x, dtype=float).copy()


def log(x, shift=0.0):
    """Natural log, log(x + c)."""
    return np.log(np.asarray(x, dtype=float) + shift)


def sqrt(x, shift=0.0):
    """Square root, √(x + c)."""
    return np.sqrt(np.asarray(x, dtype=float) + shift)


def reciprocal(x, shift=0.0):
    """Reciprocal, 1/(x + c)."""
    return 1.0 / (np.asarray(x, dtype=float) + shift)


def square(x):
    """Square, x²."""
    x = np.asarray(x, dtype=float)
    return x * x


def power(x, p, shift=0.0):
    """Power (x + c)^p, with p = 0 meaning log(x + c) (Royston & Altman 1994).

    Examples
    --------
    >>> power([1.0, 4.0], -0.5).tolist()
    [1.0, 0.5]
    >>> power([1.0], 0).tolist()
    [0.0]
    """
    x = np.asarray(x, dtype=float) + shift
    if p == 0:
        return np.log(x)
    if p == 1:
        return x.copy()
    if p == 2:
        return x * x
    if p == 0.5:
        return np.sqrt(x)
    if p == -1:
        return 1.0 / x
    return np.power(x, float(p))


def boxcox(x, lam, shift=0.0):
    """Box-Cox transform ((x + c)^λ − 1)/λ, and log(x + c) at λ = 0 (Box & Cox 1964).

    Computed as expm1(λ·log(x + c))/λ, which is accurate for λ near 0.

    Examples
    --------
    >>> boxcox([1.0, 4.0], 0.5).tolist()
    [0.0, 2.0]
    """
    logx = np.log(np.asarray(x, dtype=float) + shift)
    if lam == 0:
        return logx
    return np.expm1(lam * logx) / lam


def _boxcox_derivative(logx, lam):
    """d/dλ of the Box-Cox transform, given log x (series near λ = 0)."""
    if abs(lam) < 1e-5:
        return logx**2 / 2.0 + lam * logx**3 / 6.0
    xl = np.exp(lam * logx)
    return (lam * xl * logx - np.expm1(lam * logx)) / lam**2


def yeojohnson(x, lam):
    """Yeo-Johnson transform (Yeo & Johnson 2000), defined for every real x.

    ψ(x, λ) = ((x + 1)^λ − 1)/λ for x ≥ 0 (log(x + 1) at λ = 0) and
    −((1 − x)^(2−λ) − 1)/(2 − λ) for x < 0 (−log(1 − x) at λ = 2).

    Examples
    --------
    >>> yeojohnson([-1.0, 0.0, 3.0], 1.0).tolist()
    [-1.0, 0.0, 3.0]
    """
    x = np.asarray(x, dtype=float)
    out = np.empty_like(x)
    pos = x >= 0
    a = np.log1p(x[pos])
    out[pos] = a if lam == 0 else np.expm1(lam * a) / lam
    b = np.log1p(-x[~pos])
    out[~pos] = -b if lam == 2 else -np.expm1((2.0 - lam) * b) / (2.0 - lam)
    return out


# ------------------------------------------------------- λ by maximum likelihood


def boxcox_llf(x, lam):
    """Box-Cox profile log-likelihood of λ for the predictor's own distribution.

    ℓ(λ) = (λ − 1) Σ log xᵢ − n/2 · log σ̂²(λ), with σ̂²(λ) the variance (divisor n)
    of the transformed values: the normal log-likelihood maximised over mean and
    variance, constants dropped (Box & Cox 1964).  This is the convention of
    ``scipy.stats.boxcox_llf``.  Computed on x divided by its geometric mean
    (which changes ℓ by a constant, −n·log g, added back) so that large |λ| do
    not overflow.

    Parameters
    ----------
    x : array_like, positive
    lam : float
    """
    return _boxcox_profile(x)(lam)


def _boxcox_profile(x):
    """:func:`boxcox_llf` of ``x`` as a function of λ alone, log x computed once for every λ asked."""
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    logx = np.log(x)
    mean_log = logx.mean()
    log_sum = logx.sum()
    u = logx - mean_log  # log of x / geometric mean

    def llf(lam):
        z = u if lam == 0 else np.expm1(lam * u) / lam
        var = np.mean((z - z.mean()) ** 2)
        if not np.isfinite(var) or var <= 0:
            return -np.inf
        # var(boxcox(x)) = g^(2λ) var(boxcox(x/g))
        return float((lam - 1.0) * log_sum - 0.5 * n * (2.0 * lam * mean_log + np.log(var)))

    return llf


def yeojohnson_llf(x, lam):
    """Yeo-Johnson profile log-likelihood of λ (Yeo & Johnson 2000).

    ℓ(λ) = −n/2 · log σ̂²(λ) + (λ − 1) Σ sign(xᵢ) log(|xᵢ| + 1), σ̂² with divisor n;
    the convention of ``scipy.stats.yeojohnson_llf``.
    """
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    with np.errstate(over="ignore", invalid="ignore"):
        z = yeojohnson(x, lam)
        var = np.mean((z - z.mean()) ** 2)
    if not np.isfinite(var) or var <= 0:
        return -np.inf
    return float(-0.5 * n * np.log(var) + (lam - 1.0) * np.sum(np.sign(x) * np.log1p(np.abs(x))))


def _maximise(llf, low=-_LAMBDA_RANGE, high=_LAMBDA_RANGE):
    """Maximise a smooth 1-d function: a grid, then bounded Brent around the best point."""
    grid = np.linspace(low, high, 41)
    values = np.array([llf(g) for g in grid])
    if not np.any(np.isfinite(values)):
        return math.nan
    i = int(np.nanargmax(np.where(np.isfinite(values), values, -np.inf)))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    res = optimize.minimize_scalar(
        lambda t: -llf(t), bounds=(lo, hi), method="bounded", options={"xatol": 1e-10, "maxiter": 500}
    )
    return float(res.x)


#: Tables with more rows estimate the data-chosen powers (Box-Cox and Yeo-Johnson λ, Box-Tidwell α) on a
#: seeded sample of this many rows (:func:`parameter_rows`): a power is fixed to a few digits long before
#: 10⁵ rows (its standard error falls as 1/√n), while each evaluation costs a pass over all the rows. Our choice.
PARAMETER_SAMPLE_ROWS = 50_000


def parameter_rows(n: int):
    """Rows on which data-chosen powers are estimated: None (all of them) up to
    :data:`PARAMETER_SAMPLE_ROWS`, else that many drawn without replacement by
    ``numpy.random.default_rng(0)`` and sorted — the same rows on every run,
    worker and backend."""
    if n <= PARAMETER_SAMPLE_ROWS:
        return None
    return np.sort(np.random.default_rng(0).choice(n, size=PARAMETER_SAMPLE_ROWS, replace=False))


def _sampled(*arrays):
    rows = parameter_rows(arrays[0].shape[0])
    return arrays if rows is None else tuple(None if a is None else a[rows] for a in arrays)


def boxcox_lambda(x):
    """λ̂ maximising :func:`boxcox_llf` over [−5, 5].

    On more than :data:`PARAMETER_SAMPLE_ROWS` rows, estimated on the seeded
    sample :func:`parameter_rows`.

    Agrees with ``scipy.stats.boxcox_normmax(x, method='mle')`` when the
    maximum is inside the range; otherwise returns the nearer end of the range
    (the candidate generator refuses such a λ̂ as extreme).  ``x`` must be positive.

    Examples
    --------
    >>> x = np.exp(np.linspace(-1, 1, 50))   # log-uniform: log is the normalising form
    >>> abs(boxcox_lambda(x)) < 0.5
    True
    """
    (x,) = _sampled(np.asarray(x, dtype=float))
    return _maximise(_boxcox_profile(x))


def yeojohnson_lambda(x):
    """λ̂ maximising :func:`yeojohnson_llf` over [−5, 5].

    Agrees with the λ returned by ``scipy.stats.yeojohnson(x)`` when the maximum
    is inside the range.  On more than :data:`PARAMETER_SAMPLE_ROWS` rows,
    estimated on the seeded sample :func:`parameter_rows`.
    """
    (x,) = _sampled(np.asarray(x, dtype=float))
    return _maximise(lambda t: yeojohnson_llf(x, t))


# ------------------------------------------------------------------ Box-Tidwell


@dataclass(frozen=True)
class BoxTidwellResult:
    """Outcome of :func:`box_tidwell`.

    Attributes
    ----------
    power : float or None
        α̂, the power of x that best linearises y on x; None when refused.
    converged : bool
    iterations : int
    reason : str or None
        Why no power is returned (no convergence, extreme power, no association).
    statistic, pvalue : float
        t statistic and two-sided p-value of the constructed variable x·log x
        added to the straight-line fit of y on x: the test of α = 1
        (Box & Tidwell 1962; Fox, Applied Regression Analysis and Generalized
        Linear Models, 3rd ed., 2016, ch. 12 — chapter cited from memory).
    reference : str
    """

    power: float | None
    converged: bool
    iterations: int
    reason: str | None
    statistic: float
    pvalue: float
    reference: str = "Box, G. E. P. and Tidwell, P. W. (1962), Technometrics 4(4), 531-550"


class _Residualiser:
    """Projects vectors off the nuisance space of a (weighted) least-squares fit.

    The nuisance space is spanned by √w·[1, Z] (intercept and covariates held
    linear); by the Frisch-Waugh-Lovell theorem, a fit of √w·y on √w·[g, 1, Z]
    gives the same coefficient of g and the same residuals as the fit of the
    residualised √w·y on the residualised √w·g.
    """

    def __init__(self, n, w, covariates):
        self.scale = None if w is None else np.sqrt(w)
        if covariates is None or np.shape(covariates)[1] == 0:
            self.basis = None  # the intercept alone: centring
            self.rank = 1
            if self.scale is not None:
                self.basis = (self.scale / np.linalg.norm(self.scale))[:, None]
            return
        A = np.column_stack([np.ones(n), covariates])
        if self.scale is not None:
            A = A * self.scale[:, None]
        U, sv, _ = np.linalg.svd(A, full_matrices=False)
        keep = sv > sv.max() * max(A.shape) * np.finfo(float).eps
        self.basis = U[:, keep]
        self.rank = int(keep.sum())

    def __call__(self, v):
        if self.scale is not None:
            v = v * self.scale
        if self.basis is None:
            return v - v.mean()
        return v - self.basis @ (self.basis.T @ v)


def _fit(columns, y):
    """Coefficients, residual sum of squares and (XᵀX)⁻¹ of y on residualised columns (k ≤ 2)."""
    k = len(columns)
    G = np.array([[columns[i] @ columns[j] for j in range(k)] for i in range(k)])
    r = np.array([c @ y for c in columns])
    d = np.sqrt(np.diag(G))
    if not (np.all(np.isfinite(G)) and np.all(np.isfinite(r))) or np.any(d == 0):
        return np.full(k, np.nan), math.inf, None
    Gs = G / np.outer(d, d)
    coef = np.linalg.lstsq(Gs, r / d, rcond=None)[0] / d
    resid = y.copy()
    for j in range(k):
        resid -= coef[j] * columns[j]
    try:
        inverse = np.linalg.inv(Gs) / np.outer(d, d)
    except np.linalg.LinAlgError:
        inverse = None
    return coef, float(resid @ resid), inverse


def box_tidwell(x, y, *, weights=None, covariates=None, max_power=3.0, tol=1e-7, max_iter=50):
    """The power α of x that best linearises y on x (Box & Tidwell 1962).

    Fits y = β₀ + β₁·g(x, α) [+ Zδ] by least squares in α, with g the Box-Cox form
    ((x^α − 1)/α, log x at α = 0), whose span with the intercept equals that of
    {1, x^α}.  Each iteration linearises g around the current α: with β₁ from
    the fit of y on g(x, α) and γ the coefficient of ∂g/∂α added to that fit,
    α ← α + γ/β₁ (for α = 1 this is Box and Tidwell's α₁ = 1 + γ/β₁).  A step that
    raises the residual sum of squares is halved.  The fixed point is the
    least-squares α.  x is divided by its geometric mean first (α is unchanged).

    Parameters
    ----------
    x : array_like, positive
    y : array_like
    weights : array_like, optional
        Row weights of a weighted least-squares fit.
    covariates : array_like, shape (n, q), optional
        Other columns held linear in every fit (Z above), as Box and Tidwell
        do with the other regressors; the intercept is always included.
    max_power : float, default 3
        A power with |α| above this is refused as extreme.
    tol : float
        Convergence when |Δα| < tol.
    max_iter : int, default 50

    On more than :data:`PARAMETER_SAMPLE_ROWS` rows the power is estimated on
    the seeded sample :func:`parameter_rows` (the same rows for every column).

    Returns
    -------
    BoxTidwellResult
        ``power`` is None, with ``reason``, when the iteration does not converge,
        the power is extreme, or y shows no straight-line association with x.

    Examples
    --------
    >>> x = np.linspace(1, 10, 60)
    >>> round(box_tidwell(x, 2 + 3 * np.sqrt(x)).power, 4)
    0.5
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    w = None if weights is None else np.asarray(weights, dtype=float)
    Z = None if covariates is None else np.asarray(covariates, dtype=float).reshape(x.shape[0], -1)
    x, y, w, Z = _sampled(x, y, w, Z)  # more than PARAMETER_SAMPLE_ROWS rows: the seeded sample
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        return _box_tidwell(x, y, w, Z, max_power, tol, max_iter)


def _box_tidwell(x, y, w, Z, max_power, tol, max_iter, project=None):
    """The iteration of :func:`box_tidwell` on rows already sampled; ``project``: a prebuilt
    :class:`_Residualiser` of ``[1, Z]`` (then ``Z`` is not used), shared with other fits on those rows."""
    n = x.shape[0]
    logu = np.log(x) - np.log(x).mean()
    project = _Residualiser(n, w, Z) if project is None else project
    yr = project(y)

    # Test of α = 1: t statistic of x·log x added to the straight line.
    u = np.exp(logu)
    coef, rss, inverse = _fit([project(u), project(u * logu)], yr)
    df = n - project.rank - 2
    statistic, pvalue = math.nan, math.nan
    if df > 0 and 0 < rss < math.inf and inverse is not None and inverse[1, 1] > 0:
        statistic = float(coef[1] / math.sqrt(rss / df * inverse[1, 1]))
        pvalue = float(2.0 * stats.t.sf(abs(statistic), df))

    def fit(alpha):
        g = logu if alpha == 0 else np.expm1(alpha * logu) / alpha
        if not np.all(np.isfinite(g)):
            return g, math.nan, math.inf
        coef, rss, _ = _fit([project(g)], yr)
        return g, coef[0], rss

    alpha = 1.0
    g, b1, rss = fit(alpha)
    rss0 = float(yr @ yr)
    if np.ptp(y) == 0 or rss0 <= 0 or rss >= rss0 * (1.0 - 1e-8):
        return BoxTidwellResult(None, False, 0, "y shows no straight-line association with x", statistic, pvalue)
    for it in range(1, max_iter + 1):
        ga = _boxcox_derivative(logu, alpha)
        coef, _, _ = _fit([project(g), project(ga)], yr)
        step = coef[1] / b1
        if not np.isfinite(step):
            return BoxTidwellResult(None, False, it, "the iteration broke down (non-finite step)", statistic, pvalue)
        new_alpha = alpha + step
        for _ in range(40):
            if abs(new_alpha) <= 4.0 * max_power + 1.0:
                new_g, new_b1, new_rss = fit(new_alpha)
                if np.isfinite(new_rss) and new_rss <= rss * (1.0 + 1e-12):
                    break
            step /= 2.0
            new_alpha = alpha + step
        else:
            return BoxTidwellResult(None, False, it, "the iteration did not reduce the residual sum of squares",
                                    statistic, pvalue)
        moved = abs(new_alpha - alpha)
        alpha, g, b1, rss = new_alpha, new_g, new_b1, new_rss
        if abs(alpha) > max_power:
            return BoxTidwellResult(None, False, it,
                                    f"the power drifted to {alpha:.3g}, beyond ±{max_power:g} (extreme)",
                                    statistic, pvalue)
        if moved < tol:
            return BoxTidwellResult(float(alpha), True, it, None, statistic, pvalue)
    return BoxTidwellResult(None, False, max_iter, f"the iteration did not converge in {max_iter} steps",
                            statistic, pvalue)


# ---------------------------------------------------------- dispatch and domains


def spline_knots(x, count: int):
    """The ``count`` knots of a restricted cubic spline at :data:`SPLINE_QUANTILES` of x; None when they
    are not distinct (too few distinct values)."""
    x = np.asarray(x, dtype=float)
    knots = np.quantile(x, SPLINE_QUANTILES[int(count)])
    if np.any(np.diff(knots) <= 1e-12 * max(1.0, float(np.max(np.abs(knots))))):
        return None
    return tuple(float(k) for k in knots)


def restricted_cubic_spline(x, knots) -> np.ndarray:
    """The basis of a restricted (natural) cubic spline: x and k − 2 curved columns (Stone & Koo 1985).

    With knots t₁ < … < t_k, column j (j = 1 … k − 2) is
    [(x − t_j)₊³ − (x − t_{k−1})₊³ (t_k − t_j)/(t_k − t_{k−1})
     + (x − t_k)₊³ (t_{k−1} − t_j)/(t_k − t_{k−1})] / (t_k − t₁)²,
    cubic between the knots, linear beyond the outer ones; with an intercept
    the columns span the natural cubic splines with these knots.  The
    division by (t_k − t₁)² keeps the columns on the scale of x (common
    practice).  Checked against patsy's natural cubic regression splines
    (``cr``) in the tests: the same span.

    References
    ----------
    (Quoted from memory.)
    Stone, C. J. & Koo, C.-Y. (1985). Additive splines in statistics. Proc. Statistical Computing Section,
    American Statistical Association, 45-48.
    """
    x = np.asarray(x, dtype=float)
    t = np.asarray(knots, dtype=float)
    k = t.size
    scale = (t[-1] - t[0]) ** 2

    def cube(u):
        return np.maximum(u, 0.0) ** 3

    columns = [x]
    for j in range(k - 2):
        columns.append((cube(x - t[j]) - cube(x - t[-2]) * (t[-1] - t[j]) / (t[-1] - t[-2])
                        + cube(x - t[-1]) * (t[-2] - t[j]) / (t[-1] - t[-2])) / scale)
    return np.column_stack(columns)


def apply(transform, x, params=()):
    """Apply the named transform with its stored parameters.

    Parameters
    ----------
    transform : str
        One of :data:`TRANSFORMS` except ``product`` (see :func:`numpy.multiply`).
    x : array_like
    params : mapping or tuple of (name, value) pairs
        ``shift`` (default 0) for every form but identity, square and
        yeojohnson; ``lambda`` for boxcox and yeojohnson; ``power`` for power
        and boxtidwell.

    Returns
    -------
    ndarray of float64
        May hold non-finite values outside the domain (see :func:`domain_problem`).
    """
    p = _params(params)
    c = float(p.get("shift", 0.0))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if transform == "identity":
            return identity(x)
        if transform == "log":
            return log(x, c)
        if transform == "sqrt":
            return sqrt(x, c)
        if transform == "reciprocal":
            return reciprocal(x, c)
        if transform == "square":
            return square(x)
        if transform in ("power", "boxtidwell"):
            return power(x, float(p["power"]), c)
        if transform == "boxcox":
            return boxcox(x, float(p["lambda"]), c)
        if transform == "yeojohnson":
            return yeojohnson(x, float(p["lambda"]))
        if transform == "spline":
            return restricted_cubic_spline(x, p["knots"])
    raise OptionError(f"unknown transform {transform!r}; choose one of {', '.join(TRANSFORMS[:-1])}")


def _domain_kind(transform, p) -> str:
    """'positive' (x + c > 0), 'nonnegative', 'one_sign' (x + c ≠ 0, all of one sign) or 'any'."""
    if transform in ("log", "boxcox", "boxtidwell"):
        return "positive"
    if transform == "sqrt":
        return "nonnegative"
    if transform == "reciprocal":
        return "one_sign"
    if transform == "power":
        q = float(p["power"])
        if q == 0 or (q < 0 and q != int(q)):
            return "positive"
        if q < 0:
            return "one_sign"
        if q != int(q):
            return "nonnegative"
    return "any"


def _count_word(count, n, what):
    return f"{count} of {n} values {'is' if count == 1 else 'are'} {what}"


def has_pole(transform, params=()) -> bool:
    """Whether the form tends to ±∞ as x + c → 0 (log, 1/x, negative powers, Box-Cox with λ ≤ 0).

    Such a form is ruled by the rows nearest zero; the candidate generator
    checks the leverage those rows get (see :mod:`selectkit.candidates`).
    """
    p = _params(params)
    if transform == "log" or transform == "reciprocal":
        return True
    if transform in ("power", "boxtidwell"):
        return float(p.get("power", 1.0)) <= 0
    if transform == "boxcox":
        return float(p.get("lambda", 1.0)) <= 0
    return False


def domain_problem(transform, x, params=(), *, column="x"):
    """Why a form is undefined on these data, or None when it is defined everywhere.

    A form with a pole or a branch point at zero is defined only where the
    (shifted) variable keeps one sign over the rows: log, Box-Cox, Box-Tidwell
    and fractional negative powers need x + c > 0; √ and fractional positive
    powers x + c ≥ 0; 1/x and negative whole powers x + c of one sign, never
    zero.  A variable that crosses zero (a temperature in °C, a centred
    column) has the pole *inside* the data, where a few rows near zero would
    rule the fit; such a form is refused, not built.

    Parameters
    ----------
    transform : str
    x : array_like
        The raw values (before any shift).
    params : mapping or pairs
        Holds ``shift`` and ``power`` where relevant.
    column : str
        The column's name, used in the message.

    Returns
    -------
    str or None
        e.g. ``"3 of 120 values are zero; log is undefined there"``.

    Examples
    --------
    >>> domain_problem("log", [0.0, 1.0, 2.0])
    '1 of 3 values is zero; log is undefined there'
    >>> domain_problem("log", [0.0, 1.0, 2.0], {"shift": 1}) is None
    True
    >>> domain_problem("reciprocal", [-9.1, 2.0, 38.9], column="temp_c")
    'temp_c crosses zero (min -9.1, max 38.9); reciprocal has a pole inside the data'
    """
    p = _params(params)
    c = float(p.get("shift", 0.0))
    kind = _domain_kind(transform, p)
    if kind == "any":
        return None
    v = np.asarray(x, dtype=float) + c
    n = v.shape[0]
    if n == 0:
        return None
    zero = int(np.count_nonzero(v == 0))
    negative = int(np.count_nonzero(v < 0))
    positive = n - zero - negative
    if transform == "power":
        label = term_name(transform, column, {"power": p["power"]})
    elif transform == "boxtidwell":
        label = "a Box-Tidwell power"
    else:
        label = transform
    where = f"{column} + {format_number(c)}" if c else column
    shifted = f" (after the shift {format_number(c)})" if c else ""
    parts = []
    if kind in ("positive", "one_sign") and zero:
        parts.append(_count_word(zero, n, "zero"))
    if kind in ("positive", "nonnegative") and negative:
        low = float(np.min(v))
        parts.append(_count_word(negative, n, f"negative (smallest {where} = {format_number(low)})"))
    if kind == "one_sign" and negative and positive:
        low, high = float(np.min(v)), float(np.max(v))
        parts.append(f"{where} crosses zero (min {format_number(low)}, max {format_number(high)})")
        return "; ".join(parts) + shifted + f"; {label} has a pole inside the data"
    if not parts:
        return None
    return "; ".join(parts) + shifted + f"; {label} is undefined there"


# ------------------------------------------------------------------------ names


def format_number(value, decimals=None):
    """A number in short plain notation: 1, 1.5, 0.37, -0.5, 1e-05.

    Parameters
    ----------
    value : float
    decimals : int, optional
        Round to this many decimals (trailing zeros dropped); by default up to
        6 significant digits.

    Examples
    --------
    >>> format_number(2.0), format_number(-0.5), format_number(0.3712, 2), format_number(1.25, 1)
    ('2', '-0.5', '0.37', '1.2')
    """
    value = float(value)
    if decimals is not None:
        value = round(value, decimals)
        text = f"{value:.{decimals}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
    elif value == int(value) and abs(value) < 1e15:
        text = str(int(value))
    else:
        text = f"{value:.6g}"
    return "0" if text in ("-0", "") else text


def _arg(source, c):
    return f"{source} + {format_number(c)}" if c > 0 else (f"{source} - {format_number(-c)}" if c < 0 else source)


def _pow(base, q, simple):
    return f"{base}^{q}" if simple else f"({base})^{q}"


def term_name(transform, source, params=(), *, digits=2):
    """Readable name of a term in plain notation.

    Parameters
    ----------
    transform : str
    source : str or tuple of str
        The source column (two for ``product``).
    params : mapping or pairs
    digits : int, default 2
        Decimals shown for an estimated λ or power.

    Examples
    --------
    >>> term_name("log", "light"), term_name("reciprocal", "density"), term_name("power", "x", {"power": -0.5})
    ('log(light)', '1/density', 'x^-0.5')
    >>> term_name("boxcox", "x", {"lambda": 0.3712}), term_name("log", "x", {"shift": 1.5})
    ('boxcox(x, 0.37)', 'log(x + 1.5)')
    >>> term_name("product", ("x", "z"))
    'x*z'
    """
    p = _params(params)
    if transform == "product":
        return "*".join(source)
    if isinstance(source, tuple):
        (source,) = source
    c = float(p.get("shift", 0.0))
    arg = _arg(source, c)
    simple = c == 0
    if transform == "identity":
        return source
    if transform == "log":
        return f"log({arg})"
    if transform == "sqrt":
        return f"sqrt({arg})"
    if transform == "reciprocal":
        return f"1/{arg}" if simple else f"1/({arg})"
    if transform == "square":
        return f"{source}^2"
    if transform in ("power", "boxtidwell"):
        q = float(p["power"])
        shown = format_number(q) if transform == "power" else format_number(q, digits)
        if transform == "power":
            named = {0.0: "log", 0.5: "sqrt", 1.0: "identity", -1.0: "reciprocal"}
            if q in named:
                return term_name(named[q], source, p)
            if q == 2 and simple:
                return f"{source}^2"
        return _pow(arg, shown, simple)
    if transform == "boxcox":
        return f"boxcox({arg}, {format_number(float(p['lambda']), digits)})"
    if transform == "yeojohnson":
        return f"yeojohnson({source}, {format_number(float(p['lambda']), digits)})"
    if transform == "spline":
        return f"spline({source}, {len(p['knots'])} knots)"
    raise OptionError(f"unknown transform {transform!r}; choose one of {', '.join(TRANSFORMS)}")


def term_expression(transform, source, params=(), *, digits=6):
    """A term written as an expression of the original variables, for an equation.

    Estimated parameters are written with ``digits`` significant digits, and
    Box-Cox is written out: ``(x^0.3712 - 1)/0.3712``.  Yeo-Johnson has no single
    closed form over the real line and stays ``yeojohnson(x, 0.812345)``.

    Examples
    --------
    >>> term_expression("boxcox", "x", {"lambda": 0.3712})
    '(x^0.3712 - 1)/0.3712'
    >>> term_expression("log", "x", {"shift": 1})
    'log(x + 1)'
    """
    p = _params(params)
    if transform == "boxcox":
        if isinstance(source, tuple):
            (source,) = source
        c = float(p.get("shift", 0.0))
        lam = float(p["lambda"])
        arg = _arg(source, c)
        if lam == 0:
            return f"log({arg})"
        shown = f"{lam:.{digits}g}"
        return f"({_pow(arg, shown, c == 0)} - 1)/{shown}"
    if transform == "yeojohnson":
        if isinstance(source, tuple):
            (source,) = source
        return f"yeojohnson({source}, {float(p['lambda']):.{digits}g})"
    if transform == "boxtidwell":
        if isinstance(source, tuple):
            (source,) = source
        c = float(p.get("shift", 0.0))
        return _pow(_arg(source, c), f"{float(p['power']):.{digits}g}", c == 0)
    return term_name(transform, source, p)


# ------------------------------------------------------------------- response


def _check_response_transform(transform, lam):
    if transform not in RESPONSE_TRANSFORMS:
        raise OptionError(
            f"unknown response transform {transform!r}; choose one of {', '.join(RESPONSE_TRANSFORMS)}"
        )
    if transform == "boxcox" and (lam is None or not np.isfinite(float(lam))):
        raise OptionError("the Box-Cox response transform needs a finite λ, e.g. ('boxcox', 0.5)")


def transform_response(y, transform, lam=None):
    """The response on the transformed scale z = t(y).

    ``identity``: y; ``log``: log y; ``sqrt``: √y; ``boxcox``: (y^λ − 1)/λ.
    The caller checks the domain (y > 0 for log, sqrt and boxcox).
    """
    _check_response_transform(transform, lam)
    y = np.asarray(y, dtype=float)
    if transform == "identity":
        return y.copy()
    if transform == "log":
        return np.log(y)
    if transform == "sqrt":
        return np.sqrt(y)
    return boxcox(y, float(lam))


def response_log_jacobian(y, transform, lam=None):
    """log |J| = Σ log |dzᵢ/dyᵢ| of a response transform z = t(y).

    Added to the Gaussian log-likelihood of a model fitted to z, it gives the
    likelihood on the scale of y, so criteria of models fitted to different
    response transforms can be compared (Box & Cox 1964, §2)::

        identity   0
        log        −Σ log yᵢ
        sqrt       −n·log 2 − ½ Σ log yᵢ
        boxcox     (λ − 1) Σ log yᵢ

    Parameters
    ----------
    y : array_like
        The response on its original scale; positive unless identity.
    transform : str
        One of :data:`RESPONSE_TRANSFORMS`.
    lam : float, optional
        λ, for ``boxcox`` only.

    Examples
    --------
    >>> round(response_log_jacobian([1.0, np.e], "log"), 12)
    -1.0
    """
    _check_response_transform(transform, lam)
    if transform == "identity":
        return 0.0
    y = np.asarray(y, dtype=float)
    sum_log = float(np.sum(np.log(y)))
    if transform == "log":
        return -sum_log
    if transform == "sqrt":
        return -y.shape[0] * math.log(2.0) - 0.5 * sum_log
    return (float(lam) - 1.0) * sum_log
