"""Assumption checks of a fitted model: linearity, normality, constant variance,
independence, multicollinearity and influence.

:func:`diagnose` refits one model by QR and returns a :class:`Diagnosis`: a
tuple of named :class:`Check` results (statistic, p-value, passed, a one-line
verdict with the number behind it, the published reference and a remedy in
words), plus the data behind the residual plots and the influence table.

Every statistic is computed here from the QR decomposition with numpy and
scipy; the tests compare each with its reference implementation in statsmodels
or scipy.  Models with row weights are checked on the whitened scale
(√wᵢ·yᵢ, √wᵢ·xᵢ), where the weighted model is an ordinary least-squares one.

Thresholds marked "common practice" are rules of thumb with no single
published source; they flag rows and terms for a look, never for automatic
action.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .errors import OptionError, SearchError

__all__ = [
    "Check",
    "Diagnosis",
    "diagnose",
    "SHAPIRO_MAX_ROWS",
    "VIF_LIMIT",
    "CONDITION_LIMIT",
]

#: scipy's Shapiro-Wilk p-value is accurate up to this many rows (Royston 1995); above, it is not run.
SHAPIRO_MAX_ROWS = 5000
#: VIF above which a term is flagged (common practice).
VIF_LIMIT = 10.0
#: Condition number of the standardised design above which collinearity is flagged (common practice;
#: Belsley, Kuh & Welsch 1980 discuss 30 as a level where dependencies start to matter).
CONDITION_LIMIT = 30.0
#: Durbin-Watson statistics inside this range are read as no first-order autocorrelation (common practice).
DURBIN_WATSON_RANGE = (1.5, 2.5)

_REFERENCES = {
    "reset": "Ramsey, J. B. (1969). Tests for specification errors in classical linear least-squares "
             "regression analysis. J. R. Statist. Soc. B 31(2), 350-371.",
    "shapiro_wilk": "Shapiro, S. S. and Wilk, M. B. (1965). An analysis of variance test for normality. "
                    "Biometrika 52, 591-611; p-value by Royston (1995), AS R94.",
    "jarque_bera": "Jarque, C. M. and Bera, A. K. (1980). Efficient tests for normality, homoscedasticity "
                   "and serial independence of regression residuals. Economics Letters 6(3), 255-259.",
    "breusch_pagan": "Breusch, T. S. and Pagan, A. R. (1979). Econometrica 47(5), 1287-1294; studentised "
                     "form of Koenker, R. (1981). J. Econometrics 17, 107-112.",
    "durbin_watson": "Durbin, J. and Watson, G. S. (1950, 1951). Testing for serial correlation in least "
                     "squares regression I, II. Biometrika 37, 409-428; 38, 159-178.",
    "vif": "Marquardt, D. W. (1970). Technometrics 12(3), 591-612; generalised VIF for blocks: Fox, J. and "
           "Monette, G. (1992). JASA 87, 178-183. Limit 10: common practice.",
    "condition_number": "Belsley, D. A., Kuh, E. and Welsch, R. E. (1980). Regression Diagnostics. Wiley. "
                        "Limit 30: common practice.",
    "leverage": "Hoaglin, D. C. and Welsch, R. E. (1978). The hat matrix in regression and ANOVA. "
                "American Statistician 32(1), 17-22 (limit 2k/n).",
    "cooks_distance": "Cook, R. D. (1977). Detection of influential observation in linear regression. "
                      "Technometrics 19(1), 15-18. Limit 4/n: common practice.",
}


@dataclass(frozen=True)
class Check:
    """One assumption check.

    Attributes
    ----------
    name : str
        Short identifier (``reset``, ``shapiro_wilk``, ``jarque_bera``,
        ``breusch_pagan``, ``durbin_watson``, ``vif``, ``condition_number``,
        ``leverage``, ``cooks_distance``).
    aspect : str
        The assumption it looks at (``linearity``, ``normality``,
        ``constant variance``, ``independence``, ``multicollinearity``,
        ``influence``).
    statistic : float or None
    pvalue : float or None
        None for checks judged by a threshold rather than a test.
    passed : bool or None
        None when the check was not assessed (the verdict says why).
    verdict : str
        One plain sentence with the number behind it.
    reference : str
        Published source of the test or of the threshold.
    remedy : str or None
        What to try when the check fails.
    """

    name: str
    aspect: str
    statistic: float | None
    pvalue: float | None
    passed: bool | None
    verdict: str
    reference: str
    remedy: str | None = None


@dataclass(frozen=True, eq=False)
class Diagnosis:
    """The checks of one model and the data behind its residual plots.

    Attributes
    ----------
    subset : tuple of int
    terms : tuple of str
    n, k : int
        Rows and coefficients (intercept included).
    alpha : float
        Significance level the tests were judged at.
    time_ordered : bool
    checks : tuple of Check
    fitted, residuals, studentized, leverage, cooks_distance : ndarray, shape (n,)
        On the whitened scale when the model has weights; ``studentized`` are
        internally studentised residuals eᵢ / (s √(1 − hᵢᵢ)).
    term_values : DataFrame
        The model's numeric coefficient columns (for residuals-vs-term plots).
    vif : DataFrame
        Per coefficient column: ``coefficient``, ``term``, ``vif``.
    term_vif : DataFrame
        Per term: ``term``, ``columns``, ``gvif``, ``gvif_per_column``
        (GVIF^(1/df), comparable with a VIF) and ``flagged``.
    condition_number : float
    flagged_rows : DataFrame
        ``row`` (position in the data used), ``leverage``, ``cooks_distance``,
        ``studentized_residual`` and ``reason``.
    """

    subset: tuple[int, ...]
    terms: tuple[str, ...]
    n: int
    k: int
    alpha: float
    time_ordered: bool
    checks: tuple[Check, ...]
    fitted: np.ndarray
    residuals: np.ndarray
    studentized: np.ndarray
    leverage: np.ndarray
    cooks_distance: np.ndarray
    term_values: pd.DataFrame
    vif: pd.DataFrame
    term_vif: pd.DataFrame
    condition_number: float
    flagged_rows: pd.DataFrame

    def check(self, name: str) -> Check:
        """The check called ``name``; raises listing the names when unknown."""
        for c in self.checks:
            if c.name == name:
                return c
        raise OptionError(f"no check named {name!r}; the checks are {', '.join(c.name for c in self.checks)}")

    def table(self) -> pd.DataFrame:
        """The checks as a DataFrame (one row per check)."""
        return pd.DataFrame([
            {"aspect": c.aspect, "check": c.name, "statistic": c.statistic, "pvalue": c.pvalue,
             "passed": c.passed, "verdict": c.verdict, "remedy": c.remedy, "reference": c.reference}
            for c in self.checks
        ])

    @property
    def remedies(self) -> tuple[str, ...]:
        """Remedies of the failed checks, each once."""
        out: list[str] = []
        for c in self.checks:
            if c.passed is False and c.remedy and c.remedy not in out:
                out.append(c.remedy)
        return tuple(out)

    @property
    def failed(self) -> tuple[str, ...]:
        """Names of the failed checks."""
        return tuple(c.name for c in self.checks if c.passed is False)


# --------------------------------------------------------------------------- helpers


def _p(value: float) -> str:
    return "p < 0.0001" if value < 1e-4 else f"p = {value:.4f}"


def _ols(design, y):
    """QR least squares: coefficients, fitted, residuals, hat diagonal, rank."""
    q, r = np.linalg.qr(design)
    diag = np.abs(np.diag(r))
    rank = int(np.sum(diag > diag.max() * 1e-10)) if diag.size else 0
    beta = np.linalg.solve(r, q.T @ y) if rank == design.shape[1] else np.linalg.lstsq(design, y, rcond=None)[0]
    fitted = design @ beta
    hat = np.sum(q * q, axis=1)
    return beta, fitted, y - fitted, hat, rank


def _rss(design, y):
    _, _, resid, _, _ = _ols(design, y)
    return float(resid @ resid)


def _model_arrays(candidates, subset):
    """The model's columns, their labels (as in the coefficient tables) and owning terms."""
    from .rank import _coefficient_labels  # one home for coefficient labels

    entries = _coefficient_labels(candidates, subset)
    n = candidates.matrix.shape[0]
    x = (np.column_stack([np.asarray(candidates.matrix[:, j], dtype=float) for _, j, _, _ in entries])
         if entries else np.empty((n, 0)))
    return x, [label for _, _, label, _ in entries], [term for term, _, _, _ in entries]


# --------------------------------------------------------------------------- checks


def _reset(design, y, fitted, rss, alpha):
    """Ramsey's RESET: F test of adding ŷ² and ŷ³ (powers of the standardised fitted values)."""
    n, k = design.shape
    spread = fitted.std()
    if k == 1 or spread <= 1e-12 * max(1.0, np.abs(fitted).max()):
        return Check("reset", "linearity", None, None, None,
                     "Not assessed: an intercept-only model has no slope that could bend.",
                     _REFERENCES["reset"])
    if n - k - 2 <= 0:
        return Check("reset", "linearity", None, None, None,
                     f"Not assessed: {n} rows leave no degrees of freedom for the test with {k} coefficients.",
                     _REFERENCES["reset"])
    z = (fitted - fitted.mean()) / spread
    augmented = np.column_stack([design, z ** 2, z ** 3])
    rss_aug = _rss(augmented, y)
    dfd = n - k - 2
    f = ((rss - rss_aug) / 2.0) / (rss_aug / dfd)
    p = float(stats.f.sf(f, 2, dfd))
    passed = p >= alpha
    if passed:
        verdict = f"RESET F = {f:.3g}, {_p(p)}: no sign that the mean bends away from these terms."
    else:
        verdict = (f"RESET F = {f:.3g}, {_p(p)}: the mean response bends in a way the terms do not "
                   "follow; the model misses a curve or a term.")
    return Check("reset", "linearity", float(f), p, passed, verdict, _REFERENCES["reset"],
                 None if passed else
                 "Try a transformed form of a term (log, square root, reciprocal) or a missing term; "
                 "the residuals-against-term plots show which term bends.")


def _shapiro(resid, alpha):
    n = resid.shape[0]
    if n > SHAPIRO_MAX_ROWS:
        return Check("shapiro_wilk", "normality", None, None, None,
                     f"Not run: {n} rows is above {SHAPIRO_MAX_ROWS}, where the Shapiro-Wilk p-value "
                     "approximation is not valid and the test flags trivial departures; see Jarque-Bera "
                     "and the Q-Q plot.", _REFERENCES["shapiro_wilk"])
    if n < 3:
        return Check("shapiro_wilk", "normality", None, None, None,
                     f"Not run: the test needs at least 3 rows ({n} given).", _REFERENCES["shapiro_wilk"])
    w, p = stats.shapiro(resid)
    return _normality_check("shapiro_wilk", "Shapiro-Wilk W", float(w), float(p), alpha, n)


def _jarque_bera(resid, alpha):
    """JB = n/6 · (S² + (K − 3)²/4), S and K from the biased central moments; χ²(2) p-value."""
    n = resid.shape[0]
    centred = resid - resid.mean()
    m2 = np.mean(centred ** 2)
    if m2 <= 0:
        return Check("jarque_bera", "normality", None, None, None,
                     "Not assessed: the residuals are all zero.", _REFERENCES["jarque_bera"])
    skew = np.mean(centred ** 3) / m2 ** 1.5
    kurt = np.mean(centred ** 4) / m2 ** 2
    jb = n / 6.0 * (skew ** 2 + (kurt - 3.0) ** 2 / 4.0)
    p = float(stats.chi2.sf(jb, 2))
    check = _normality_check("jarque_bera", "Jarque-Bera", float(jb), p, alpha, n)
    extra = f" (skewness {skew:.2f}, kurtosis {kurt:.2f})"
    return Check(check.name, check.aspect, check.statistic, check.pvalue, check.passed,
                 check.verdict[:-1] + extra + ".", check.reference, check.remedy)


def _normality_check(name, label, statistic, p, alpha, n):
    passed = p >= alpha
    if passed:
        verdict = f"{label} = {statistic:.4g}, {_p(p)}: the residuals look compatible with normal errors."
    else:
        verdict = f"{label} = {statistic:.4g}, {_p(p)}: the residuals depart from a normal shape."
    remedy = None if passed else (
        "Look at the Q-Q plot and the flagged rows first; with many rows, mild non-normality matters "
        "little for the coefficients, while skewed errors often call for a response transform (log or "
        "Box-Cox)." + (" With this many rows the test detects even small departures." if n > 500 else ""))
    return Check(name, "normality", statistic, p, passed, verdict, _REFERENCES[name], remedy)


def _breusch_pagan(design, resid, fitted, alpha):
    """Koenker's studentised Breusch-Pagan: LM = n·R² of e² on the design; χ²(k − 1)."""
    n, k = design.shape
    if k == 1:
        return Check("breusch_pagan", "constant variance", None, None, None,
                     "Not assessed: an intercept-only model has no term the variance could follow.",
                     _REFERENCES["breusch_pagan"])
    e2 = resid ** 2
    rss_aux = _rss(design, e2)
    tss_aux = float(np.sum((e2 - e2.mean()) ** 2))
    if tss_aux <= 0:
        return Check("breusch_pagan", "constant variance", None, None, None,
                     "Not assessed: the squared residuals do not vary.", _REFERENCES["breusch_pagan"])
    lm = n * (1.0 - rss_aux / tss_aux)
    p = float(stats.chi2.sf(lm, k - 1))
    passed = p >= alpha
    grows = np.corrcoef(np.abs(resid), fitted)[0, 1] > 0 if fitted.std() > 0 else False
    if passed:
        verdict = f"Breusch-Pagan LM = {lm:.3g}, {_p(p)}: no sign that the spread of the errors changes."
        remedy = None
    else:
        verdict = (f"Breusch-Pagan LM = {lm:.3g}, {_p(p)}: the spread of the errors changes with the terms"
                   + (", growing with the fitted value." if grows else "."))
        remedy = ("A response transform (log or Box-Cox) often steadies a spread that grows with the fitted "
                  "value; otherwise use row weights or heteroscedasticity-consistent standard errors."
                  if grows else
                  "Look at the scale-location plot; use row weights for the term the spread follows, or "
                  "heteroscedasticity-consistent standard errors.")
    return Check("breusch_pagan", "constant variance", float(lm), p, passed, verdict,
                 _REFERENCES["breusch_pagan"], remedy)


def _durbin_watson(resid, time_ordered):
    if not time_ordered:
        return Check("durbin_watson", "independence", None, None, None,
                     "Not assessed: row order was not declared to mean time or sequence.",
                     _REFERENCES["durbin_watson"])
    dw = float(np.sum(np.diff(resid) ** 2) / np.sum(resid ** 2))
    low, high = DURBIN_WATSON_RANGE
    passed = low <= dw <= high
    if passed:
        verdict = f"Durbin-Watson = {dw:.3f}, inside {low}-{high}: no sign of correlation between neighbouring rows."
    else:
        kind = "positive" if dw < low else "negative"
        verdict = (f"Durbin-Watson = {dw:.3f}, outside {low}-{high} (common practice): neighbouring rows have "
                   f"{kind}ly correlated errors.")
    return Check("durbin_watson", "independence", dw, None, passed, verdict,
                 _REFERENCES["durbin_watson"] + " Range 1.5-2.5: common practice.",
                 None if passed else
                 "Errors follow each other in time: add a trend or season term, model the correlation "
                 "(e.g. a time-series error model), or widen the standard errors (HAC).")


def _vif_tables(x, labels, owners):
    """VIF per column from the inverse correlation matrix; GVIF per term (Fox & Monette 1992).

    VIFⱼ = [R⁻¹]ⱼⱼ with R the correlation matrix of the non-constant columns, which equals
    1/(1 − R²ⱼ) of column j regressed on the others and the intercept.
    GVIF of a term with columns A: det(R_AA)·det(R_BB)/det(R), B the other columns.
    """
    p = x.shape[1]
    if p == 0:
        return (pd.DataFrame({"coefficient": [], "term": [], "vif": []}),
                pd.DataFrame({"term": [], "columns": [], "gvif": [], "gvif_per_column": [], "flagged": []}),
                float("nan"))
    centred = x - x.mean(axis=0)
    scale = np.sqrt(np.sum(centred ** 2, axis=0))
    constant = scale <= 1e-12 * np.maximum(1.0, np.abs(x).max(axis=0))
    if constant.any():
        bad = [labels[j] for j in np.flatnonzero(constant)]
        raise SearchError(f"term column {bad[0]!r} is constant on these rows; it cannot be checked or fitted "
                          "with an intercept — drop it from the model")
    standard = centred / scale
    corr = standard.T @ standard
    singular_values = np.linalg.svd(standard, compute_uv=False)
    condition = float(singular_values[0] / singular_values[-1]) if singular_values[-1] > 0 else float("inf")
    try:
        inverse = np.linalg.inv(corr)
        vif = np.diag(inverse).copy()
    except np.linalg.LinAlgError:
        vif = np.full(p, np.inf)
    per_column = pd.DataFrame({"coefficient": labels, "term": owners, "vif": vif})
    terms = list(dict.fromkeys(owners))
    sign_all, logdet_all = np.linalg.slogdet(corr)
    rows = []
    for term in terms:
        a = [j for j in range(p) if owners[j] == term]
        b = [j for j in range(p) if owners[j] != term]
        if sign_all <= 0:
            gvif = np.inf
        else:
            _, logdet_a = np.linalg.slogdet(corr[np.ix_(a, a)])
            logdet_b = np.linalg.slogdet(corr[np.ix_(b, b)])[1] if b else 0.0
            gvif = float(np.exp(logdet_a + logdet_b - logdet_all))
        per_df = gvif ** (1.0 / len(a))
        rows.append({"term": term, "columns": len(a), "gvif": gvif, "gvif_per_column": per_df,
                     "flagged": bool(per_df > VIF_LIMIT)})
    return per_column, pd.DataFrame(rows), condition


def _vif_check(term_vif):
    if term_vif.empty:
        return Check("vif", "multicollinearity", None, None, None,
                     "Not assessed: the model has no term besides the intercept.", _REFERENCES["vif"])
    if len(term_vif) == 1:
        return Check("vif", "multicollinearity", 1.0, None, None,
                     "Not assessed: a single term cannot be collinear with another.", _REFERENCES["vif"])
    worst = term_vif.iloc[int(np.argmax(term_vif["gvif_per_column"].to_numpy()))]
    flagged = term_vif.loc[term_vif["flagged"], "term"].tolist()
    value = float(worst["gvif_per_column"])
    if not flagged:
        verdict = f"Largest VIF {value:.3g} ({worst['term']}) is below {VIF_LIMIT:g}: the terms are not strongly collinear."
        return Check("vif", "multicollinearity", value, None, True, verdict, _REFERENCES["vif"])
    verdict = (f"Largest VIF {value:.3g} ({worst['term']}); {len(flagged)} term(s) above {VIF_LIMIT:g}: "
               + ", ".join(flagged) + ". Their coefficients are unstable.")
    return Check("vif", "multicollinearity", value, None, False, verdict, _REFERENCES["vif"],
                 "Keep one of the correlated terms, combine them, or centre the components of an "
                 "interaction; the fitted values are unaffected, only the split between terms is.")


def _condition_check(condition, p):
    if p < 2:
        return Check("condition_number", "multicollinearity", None if p == 0 else 1.0, None, None,
                     "Not assessed: fewer than two terms.", _REFERENCES["condition_number"])
    passed = bool(condition <= CONDITION_LIMIT)
    verdict = (f"Condition number of the standardised design = {condition:.3g}, "
               + (f"below {CONDITION_LIMIT:g}." if passed else
                  f"above {CONDITION_LIMIT:g}: near-dependencies among the terms."))
    return Check("condition_number", "multicollinearity", condition, None, passed, verdict,
                 _REFERENCES["condition_number"],
                 None if passed else "See the VIFs for which terms are involved; drop or combine them.")


def _influence(resid, hat, n, k, rss):
    """Leverage hᵢᵢ and Cook's Dᵢ = eᵢ² hᵢᵢ / (k s² (1 − hᵢᵢ)²), s² = rss/(n − k)."""
    dof = n - k
    s2 = rss / dof if dof > 0 else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        studentized = resid / np.sqrt(s2 * (1.0 - hat))
        cooks = resid ** 2 * hat / (k * s2 * (1.0 - hat) ** 2)
    return studentized, cooks


def _influence_checks(hat, cooks, studentized, n, k):
    leverage_limit = 2.0 * k / n
    cooks_limit = 4.0 / n
    high_leverage = np.flatnonzero(hat > leverage_limit)
    high_cooks = np.flatnonzero(~(cooks <= cooks_limit))  # NaN/inf (hᵢᵢ = 1) count as flagged
    rows = sorted(set(high_leverage) | set(high_cooks))
    flagged = pd.DataFrame({
        "row": np.array(rows, dtype=np.int64),
        "leverage": hat[rows] if rows else np.array([]),
        "cooks_distance": cooks[rows] if rows else np.array([]),
        "studentized_residual": studentized[rows] if rows else np.array([]),
        "reason": [" and ".join(r for r, hit in (("Cook's distance", i in set(high_cooks)),
                                                 ("leverage", i in set(high_leverage))) if hit)
                   for i in rows],
    })
    remedy = ("Check the flagged rows for recording or entry errors and for conditions unlike the rest; "
              "refit without them only to see how much the model moves, report both fits, and never "
              "delete rows automatically.")

    def listing(indices):
        shown = ", ".join(str(int(i)) for i in indices[:10])
        return ("row " if len(indices) == 1 else "rows ") + shown + (
            f" and {len(indices) - 10} more" if len(indices) > 10 else "")

    def count(indices):
        return f"{len(indices)} row" + ("" if len(indices) == 1 else "s")

    top = float(np.nanmax(np.where(np.isfinite(cooks), cooks, np.nan))) if np.isfinite(cooks).any() else np.inf
    cooks_check = Check(
        "cooks_distance", "influence", top, None, bool(high_cooks.size == 0),
        (f"Largest Cook's distance {top:.3g}; no row above 4/n = {cooks_limit:.3g}." if high_cooks.size == 0 else
         f"Largest Cook's distance {top:.3g}; {count(high_cooks)} above 4/n = {cooks_limit:.3g}: "
         f"{listing(high_cooks)}."),
        _REFERENCES["cooks_distance"], None if high_cooks.size == 0 else remedy)
    leverage_check = Check(
        "leverage", "influence", float(hat.max()) if hat.size else None, None, bool(high_leverage.size == 0),
        (f"Largest leverage {hat.max():.3g}; no row above 2k/n = {leverage_limit:.3g}." if high_leverage.size == 0
         else f"Largest leverage {hat.max():.3g}; {count(high_leverage)} above 2k/n = {leverage_limit:.3g}, "
              f"far from the others in the terms' space: {listing(high_leverage)}."),
        _REFERENCES["leverage"], None if high_leverage.size == 0 else remedy)
    return cooks_check, leverage_check, flagged


# --------------------------------------------------------------------------- entry point


def diagnose(candidates, subset, *, time_ordered=False, alpha=0.05) -> Diagnosis:
    """Check the assumptions of the least-squares model ``y ~ intercept + subset``.

    Parameters
    ----------
    candidates : CandidateSet
    subset : sequence of int
        Term indices into ``candidates.terms``.
    time_ordered : bool, default False
        Whether the row order means time or sequence; only then is the
        Durbin-Watson statistic judged.
    alpha : float, default 0.05
        Level at which the tests (RESET, Shapiro-Wilk, Jarque-Bera,
        Breusch-Pagan) are judged.

    Returns
    -------
    Diagnosis

    Notes
    -----
    * Linearity — RESET (Ramsey 1969): F test of adding ŷ² and ŷ³ to the model,
      F(2, n − k − 2); equals ``statsmodels.stats.diagnostic.linear_reset``
      with ``power=3, use_f=True``.
    * Normality — Shapiro-Wilk (scipy, up to 5000 rows) and Jarque-Bera,
      JB = n/6 (S² + (K − 3)²/4) ~ χ²(2).
    * Constant variance — studentised Breusch-Pagan (Koenker 1981):
      LM = n·R² of eᵢ² on the design ~ χ²(k − 1).
    * Independence — Durbin-Watson d = Σ(eᵢ − eᵢ₋₁)²/Σeᵢ², only when
      ``time_ordered``; 1.5 ≤ d ≤ 2.5 is read as no autocorrelation (common
      practice).
    * Multicollinearity — VIFⱼ = 1/(1 − R²ⱼ) per column, GVIF^(1/df) per term
      (Fox & Monette 1992) flagged above 10 (common practice); the condition
      number of the design with columns centred and scaled to unit length,
      flagged above 30 (common practice).
    * Influence — leverage hᵢᵢ flagged above 2k/n (Hoaglin & Welsch 1978) and
      Cook's distance flagged above 4/n (common practice).

    Examples
    --------
    >>> import numpy as np
    >>> from tests.factories import make_candidates
    >>> rng = np.random.default_rng(0)
    >>> x = rng.uniform(1, 100, size=(80, 1)); y = 3 + 2 * np.log(x[:, 0]) + rng.normal(0, 0.3, 80)
    >>> diagnose(make_candidates(x, y), (0,)).check("reset").passed
    False
    """
    if not (isinstance(alpha, (int, float, np.floating)) and 0 < alpha < 1):
        raise OptionError(f"alpha must be a number between 0 and 1 (got {alpha!r})")
    subset = tuple(sorted(int(i) for i in subset))
    x, labels, owners = _model_arrays(candidates, subset)
    y = np.asarray(candidates.y, dtype=float)
    n = y.shape[0]
    design = np.column_stack([np.ones(n), x])
    if candidates.weights is not None:
        root = np.sqrt(np.asarray(candidates.weights, dtype=float))
        design_w, y_w = design * root[:, None], y * root
    else:
        design_w, y_w = design, y
    k = design.shape[1]
    if n <= k:
        raise SearchError(f"the model has {k} coefficients but only {n} rows; it cannot be checked")
    _, fitted_w, resid, hat, rank_ = _ols(design_w, y_w)
    if rank_ < k:
        raise SearchError(
            "the model's columns are linearly dependent on these rows ("
            + ", ".join(labels) + "); drop one of the dependent terms")
    rss = float(resid @ resid)
    studentized, cooks = _influence(resid, hat, n, k, rss)
    per_column, term_vif, condition = _vif_tables(x, labels, owners)
    cooks_check, leverage_check, flagged = _influence_checks(hat, cooks, studentized, n, k)
    checks = (
        _reset(design_w, y_w, fitted_w, rss, alpha),
        _shapiro(resid, alpha),
        _jarque_bera(resid, alpha),
        _breusch_pagan(design_w, resid, fitted_w, alpha),
        _durbin_watson(resid, time_ordered),
        _vif_check(term_vif),
        _condition_check(condition, x.shape[1]),
        leverage_check,
        cooks_check,
    )
    numeric_columns = {label: x[:, j] for j, label in enumerate(labels)
                       if len(np.unique(x[:, j])) > 2}
    return Diagnosis(
        subset=subset,
        terms=tuple(candidates.terms[i].name for i in subset),
        n=n,
        k=k,
        alpha=float(alpha),
        time_ordered=bool(time_ordered),
        checks=checks,
        fitted=fitted_w,
        residuals=resid,
        studentized=studentized,
        leverage=hat,
        cooks_distance=cooks,
        term_values=pd.DataFrame(numeric_columns),
        vif=per_column,
        term_vif=term_vif,
        condition_number=condition,
        flagged_rows=flagged,
    )
