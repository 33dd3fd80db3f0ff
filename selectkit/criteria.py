"""Information criteria and fit statistics from (rss, n, k): the one home of their conventions.

Every search hands back the residual sum of squares ``rss``, the number of rows
``n`` and ``k``, the number of regression coefficients **including the
intercept**.  Every criterion is computed here and nowhere else.

Conventions
-----------
Gaussian log-likelihood at the maximum-likelihood estimate of the error
variance (σ̂² = rss/n)::

    ℓ = −n/2 · (log(2π · rss/n) + 1)

``convention="sigma-counted"`` (the default) counts σ² as an estimated parameter,
so a model with ``k`` coefficients has ``k + 1`` parameters::

    AIC  = −2ℓ + 2(k+1)                                  (Akaike 1974)
    BIC  = −2ℓ + log(n)(k+1)                             (Schwarz 1978)
    AICc = AIC + 2(k+1)(k+2)/(n−k−2)                     (Hurvich & Tsai 1989)

``convention="coefficients-only"`` counts the ``k`` coefficients only, as
``statsmodels.regression.linear_model.RegressionResults.aic``/``.bic`` do::

    AIC  = −2ℓ + 2k,   BIC = −2ℓ + log(n)·k,   AICc = AIC + 2k(k+1)/(n−k−1)

Both conventions differ by a constant for AIC and BIC at fixed ``n``, so
rankings never depend on the choice.  (AICc's correction term differs by more
than a constant, but the ordering of models that differ in k by one is the same
in practice; we document the choice rather than hide it.)

References
----------
Akaike, H. (1974). A new look at the statistical model identification.
    IEEE Trans. Automatic Control 19(6), 716-723.
Schwarz, G. (1978). Estimating the dimension of a model. Ann. Statist. 6(2), 461-464.
Hurvich, C. M. and Tsai, C.-L. (1989). Regression and time series model
    selection in small samples. Biometrika 76(2), 297-307.
Mallows, C. L. (1973). Some comments on Cp. Technometrics 15(4), 661-675.
Box, G. E. P. and Cox, D. R. (1964). An analysis of transformations.
    J. R. Statist. Soc. B 26(2), 211-252.
Burnham, K. P. and Anderson, D. R. (2002). Model Selection and Multimodel
    Inference, 2nd ed. Springer.
"""

from __future__ import annotations

import numpy as np

from .errors import OptionError
from .settings import PARAMETER_COUNTS, RENAMED_VALUES

__all__ = [
    "CONVENTIONS",
    "RENAMED_CONVENTIONS",
    "check_convention",
    "CRITERIA",
    "LOWER_IS_BETTER",
    "log_likelihood",
    "aic",
    "aicc",
    "bic",
    "mallows_cp",
    "r_squared",
    "adjusted_r_squared",
    "compute",
    "akaike_weights",
    "check_criterion",
]

#: How many parameters a model of ``k`` coefficients counts: ``k + 1`` (σ² counted, the default) or ``k``.
CONVENTIONS = PARAMETER_COUNTS  # the one list, in selectkit.settings
#: Former names of the conventions, refused with the new spelling (from selectkit.settings.RENAMED_VALUES).
RENAMED_CONVENTIONS = {old: new for old, new in RENAMED_VALUES.items() if new in CONVENTIONS}

#: Criteria that can rank models; the value says whether lower is better.
LOWER_IS_BETTER = {
    "aic": True,
    "aicc": True,
    "bic": True,
    "cp": True,
    "adj_r2": False,
    "press": True,
    "cv_mse": True,
    "holdout_mse": True,
}
CRITERIA = tuple(LOWER_IS_BETTER)


def check_criterion(name: str) -> str:
    """Return ``name`` lower-cased if it is a known criterion, else raise.

    Raises
    ------
    OptionError
        Listing the valid names.
    """
    key = str(name).lower()
    if key not in LOWER_IS_BETTER:
        raise OptionError(
            f"unknown criterion {name!r}; choose one of {', '.join(CRITERIA)}"
        )
    return key


def check_convention(convention: str) -> str:
    """Return ``convention`` if it is one of :data:`CONVENTIONS`, else raise.

    Raises
    ------
    OptionError
        Naming the new spelling of a former name ("selectkit", "statsmodels"),
        else listing the valid names.
    """
    if convention in RENAMED_CONVENTIONS:
        raise OptionError(f"criterion convention {convention!r} was renamed; "
                          f"did you mean {RENAMED_CONVENTIONS[convention]!r}?")
    if convention not in CONVENTIONS:
        raise OptionError(
            f"unknown criterion convention {convention!r}; choose one of {', '.join(CONVENTIONS)}"
        )
    return convention


def _n_parameters(k, convention: str):
    check_convention(convention)
    k = np.asarray(k, dtype=float)
    return k + 1.0 if convention == "sigma-counted" else k


def log_likelihood(rss, n, log_jacobian=0.0):
    """Gaussian log-likelihood at the MLE, ℓ = −n/2 · (log(2π·rss/n) + 1).

    Parameters
    ----------
    rss : float or array_like
        Residual sum of squares (on the scale of the transformed response).
    n : int
        Number of rows.
    log_jacobian : float, default 0
        log |J| of the response transform, Σ log |dz/dy|, added to ℓ so that
        likelihoods of models fitted to different response transforms are on
        the scale of the original response (Box & Cox 1964).  For Box-Cox at
        λ this is (λ − 1) Σ log yᵢ.

    Returns
    -------
    float or ndarray
    """
    rss = np.asarray(rss, dtype=float)
    with np.errstate(divide="ignore"):
        value = -0.5 * n * (np.log(2.0 * np.pi * rss / n) + 1.0) + log_jacobian
    return value[()] if value.ndim == 0 else value


def aic(rss, n, k, *, convention="sigma-counted", log_jacobian=0.0):
    """Akaike information criterion, AIC = −2ℓ + 2p.

    ``p = k + 1`` (coefficients including the intercept, plus σ²) under the
    default convention, ``p = k`` under ``convention="coefficients-only"``.

    Examples
    --------
    >>> round(float(aic(10.0, 20, 3)), 6)
    53.303173
    """
    p = _n_parameters(k, convention)
    value = -2.0 * log_likelihood(rss, n, log_jacobian) + 2.0 * p
    return value[()] if np.ndim(value) == 0 else value


def bic(rss, n, k, *, convention="sigma-counted", log_jacobian=0.0):
    """Bayesian (Schwarz) information criterion, BIC = −2ℓ + log(n)·p.

    ``p`` counts parameters as in :func:`aic`.
    """
    p = _n_parameters(k, convention)
    value = -2.0 * log_likelihood(rss, n, log_jacobian) + np.log(n) * p
    return value[()] if np.ndim(value) == 0 else value


def aicc(rss, n, k, *, convention="sigma-counted", log_jacobian=0.0):
    """Small-sample corrected AIC (Hurvich & Tsai 1989).

    AICc = AIC + 2p(p+1)/(n − p − 1), with ``p`` as in :func:`aic`; infinite
    when ``n ≤ p + 1``.
    """
    p = _n_parameters(k, convention)
    base = aic(rss, n, k, convention=convention, log_jacobian=log_jacobian)
    denom = n - p - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        value = np.where(denom > 0, base + 2.0 * p * (p + 1.0) / np.where(denom > 0, denom, 1.0), np.inf)
    return value[()] if np.ndim(value) == 0 else value


def mallows_cp(rss, n, k, sigma2_full):
    """Mallows' Cp = rss/σ̂²_full − n + 2k (Mallows 1973).

    Parameters
    ----------
    sigma2_full : float
        Unbiased error variance of the largest model considered,
        rss_full/(n − k_full); with it Cp equals k for that model.
    """
    rss = np.asarray(rss, dtype=float)
    value = rss / sigma2_full - n + 2.0 * np.asarray(k, dtype=float)
    return value[()] if value.ndim == 0 else value


def r_squared(rss, tss):
    """Coefficient of determination, R² = 1 − rss/tss (tss about the mean)."""
    value = 1.0 - np.asarray(rss, dtype=float) / tss
    return value[()] if value.ndim == 0 else value


def adjusted_r_squared(rss, n, k, tss):
    """Adjusted R² = 1 − (rss/(n−k)) / (tss/(n−1)), k counting the intercept.

    Equals ``statsmodels`` ``rsquared_adj`` for a model with an intercept.
    """
    rss = np.asarray(rss, dtype=float)
    k = np.asarray(k, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        value = 1.0 - (rss / (n - k)) / (tss / (n - 1.0))
    return value[()] if value.ndim == 0 else value


def compute(rss, n, k, *, tss, sigma2_full=None, convention="sigma-counted", log_jacobian=0.0):
    """All rss-based criteria at once, as a dict of arrays.

    Parameters
    ----------
    rss, k : array_like
        One entry per model.
    n : int
    tss : float
        Total sum of squares of the (transformed) response about its mean.
    sigma2_full : float, optional
        For Cp; when omitted Cp is left out.

    Returns
    -------
    dict
        Keys ``log_likelihood, aic, aicc, bic, r2, adj_r2`` and ``cp`` when
        ``sigma2_full`` is given.
    """
    rss = np.atleast_1d(np.asarray(rss, dtype=float))
    k = np.atleast_1d(np.asarray(k, dtype=float))
    out = {
        "log_likelihood": np.atleast_1d(log_likelihood(rss, n, log_jacobian)),
        "aic": np.atleast_1d(aic(rss, n, k, convention=convention, log_jacobian=log_jacobian)),
        "aicc": np.atleast_1d(aicc(rss, n, k, convention=convention, log_jacobian=log_jacobian)),
        "bic": np.atleast_1d(bic(rss, n, k, convention=convention, log_jacobian=log_jacobian)),
        "r2": np.atleast_1d(r_squared(rss, tss)),
        "adj_r2": np.atleast_1d(adjusted_r_squared(rss, n, k, tss)),
    }
    if sigma2_full is not None:
        out["cp"] = np.atleast_1d(mallows_cp(rss, n, k, sigma2_full))
    return out


def akaike_weights(values):
    """Akaike weights wᵢ = exp(−Δᵢ/2) / Σ exp(−Δⱼ/2) (Burnham & Anderson 2002, §2.9).

    Parameters
    ----------
    values : array_like
        AIC, AICc or BIC of each model (lower is better); infinite values get
        weight 0.

    Returns
    -------
    delta, weights : ndarray
        Δᵢ = valueᵢ − min(value) and the weights, which sum to 1.
    """
    values = np.asarray(values, dtype=float)
    finite = np.isfinite(values)
    if not finite.any():
        raise OptionError("no model has a finite criterion value; cannot weight models")
    delta = values - values[finite].min()
    rel = np.where(finite, np.exp(-0.5 * np.where(finite, delta, 0.0)), 0.0)
    return delta, rel / rel.sum()
