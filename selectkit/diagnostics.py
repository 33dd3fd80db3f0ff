"""Assumption checks of a fitted model: linearity, normality, constant variance,
independence, multicollinearity and influence.

:func:`diagnose` refits one model by QR and returns a :class:`Diagnosis`: a
tuple of named :class:`Check` results (statistic, p-value, a verdict level,
a one-line verdict with the number behind it, the published reference and a
remedy in words), plus the data behind the residual plots and the influence
table.

Every statistic is computed here from the QR decomposition with numpy and
scipy; the tests compare each with its reference implementation in statsmodels
or scipy.  Models with row weights are checked on the whitened scale
(√wᵢ·yᵢ, √wᵢ·xᵢ), where the weighted model is an ordinary least-squares one.

Verdicts in proportion
----------------------
Each check ends in one of three levels — ``"fine"``, ``"worth a look"``,
``"a problem"`` — or ``"not assessed"`` where it does not apply.  A level
weighs the size of a departure, not only whether a test detects it: with tens
of thousands of rows every test detects departures too small to matter, and a
screening cut-off flags a fixed share of clean rows by design.

* Screening cut-offs (leverage 2k/n, Cook's distance 4/n) can reach
  "worth a look" at most; "a problem" needs a stronger published threshold
  (Cook's distance above the median of F(k, n − k), leverage above 0.5).
* Tests (RESET, Shapiro-Wilk, Jarque-Bera, Breusch-Pagan) that do not reject
  at ``alpha`` are "fine"; a rejection is graded by the size of the departure
  (skewness and excess kurtosis of the residuals; Cohen's f² of the added
  terms).
* ``Check.passed`` is kept for compatibility: True for "fine" and
  "worth a look" (nothing stops the model being used; the verdict names what
  to look at), False for "a problem", None for "not assessed".

Each rule and its source is given beside its constant below; thresholds marked
"common practice" are rules of thumb with no single published source.  They
point at rows and terms for a look, never for automatic action.
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
    "WeightedOffer",
    "diagnose",
    "LEVELS",
    "FINE",
    "WORTH_A_LOOK",
    "PROBLEM",
    "NOT_ASSESSED",
    "SHAPIRO_MAX_ROWS",
    "VIF_LIMIT",
    "VIF_PROBLEM",
    "CONDITION_LIMIT",
    "CONDITION_PROBLEM",
    "ROWS_LISTED",
]

#: The verdict levels, mildest first, then the level of a check that does not apply.
FINE, WORTH_A_LOOK, PROBLEM, NOT_ASSESSED = "fine", "worth a look", "a problem", "not assessed"
LEVELS = (FINE, WORTH_A_LOOK, PROBLEM, NOT_ASSESSED)
_PASSED = {FINE: True, WORTH_A_LOOK: True, PROBLEM: False, NOT_ASSESSED: None}

#: scipy's Shapiro-Wilk p-value is accurate up to this many rows (Royston 1995); above, it is not run.
SHAPIRO_MAX_ROWS = 5000
#: VIF (GVIF^(1/df) for a block) above which a term is "worth a look" (common practice).
VIF_LIMIT = 10.0
#: VIF above which collinearity is "a problem": the term shares over 99 % of its variation with the
#: others (common practice; O'Brien 2007, Quality & Quantity 41, 673-690, shows why 10 alone is no verdict).
VIF_PROBLEM = 100.0
#: Condition number of the standardised design above which collinearity is "worth a look", and above
#: which it is "a problem": Belsley, Kuh & Welsch (1980) read 30 to 100 as moderate to strong
#: dependencies and above 100 as strong (bands quoted from memory; their scaling is not centred).
CONDITION_LIMIT = 30.0
CONDITION_PROBLEM = 100.0
#: Durbin-Watson statistics inside this range are "fine" (no first-order autocorrelation to speak of),
#: outside the wider one "a problem" (|ρ̂| ≈ |1 − d/2| above 0.5); between, "worth a look" (common practice).
DURBIN_WATSON_RANGE = (1.5, 2.5)
DURBIN_WATSON_PROBLEM_RANGE = (1.0, 3.0)
#: Sample skewness |g₁| above which the residuals' shape is "worth a look" / "a problem" (Bulmer 1979,
#: Principles of Statistics, calls 0.5-1 moderately and above 1 highly skewed; quoted from memory).
SKEWNESS_LOOK, SKEWNESS_PROBLEM = 0.5, 1.0
#: Excess kurtosis g₂ above which (or, for the first, below minus which) the shape is "worth a look" /
#: "a problem" (common practice).  Only heavy tails (g₂ > 2) are "a problem": light tails cost
#: least squares little.
EXCESS_KURTOSIS_LOOK, EXCESS_KURTOSIS_PROBLEM = 1.0, 2.0
#: Up to this many rows a rejected normality test is "worth a look" even when the estimated departure is
#: small, and "a problem" at p < NORMALITY_STRONG_P: with few rows the coefficient tests lean on the
#: normal shape and skewness and kurtosis are estimated roughly (our own rule; common practice).
SMALL_SAMPLE_ROWS = 100
NORMALITY_STRONG_P = 0.001
#: Cohen's f² below which a rejected RESET or Breusch-Pagan test is "worth a look" rather than
#: "a problem": Cohen (1988), Statistical Power Analysis for the Behavioral Sciences, 2nd ed., calls
#: f² = 0.02 a small effect.
EFFECT_F2_SMALL = 0.02
#: Leverage above which a row is "worth a look" (and above 2k/n), and "a problem" (and above 2k/n):
#: Huber (1981), Robust Statistics, reads hᵢᵢ ≤ 0.2 as safe, 0.2-0.5 as risky, above 0.5 as to be avoided.
LEVERAGE_LOOK, LEVERAGE_PROBLEM = 0.2, 0.5
#: Percentiles of F(k, n − k) that Cook's distance is compared with: above the 20th a row is "worth a
#: look" (Kutner, Nachtsheim, Neter & Li 2005, Applied Linear Statistical Models, 5th ed., sec. 10.4:
#: below the 10th-20th percentile a row has little influence; quoted from memory), above the median
#: "a problem" (Cook & Weisberg 1982, Residuals and Influence in Regression).
COOKS_LOOK_PERCENTILE, COOKS_PROBLEM_PERCENTILE = 0.2, 0.5
#: Rows above 4/n make Cook's distance "worth a look" only when they outnumber the count expected with
#: normal errors by more than this many standard deviations (our own rule; see ``_influence_checks``).
EXCESS_ROWS_SD = 3.0
#: At most this many rows are named in a check's verdict, largest first.
ROWS_LISTED = 10

_REFERENCES = {
    "reset": "Ramsey, J. B. (1969). Tests for specification errors in classical linear least-squares "
             "regression analysis. J. R. Statist. Soc. B 31(2), 350-371. Size: Cohen's f² below 0.02 is "
             "small (Cohen 1988).",
    "shapiro_wilk": "Shapiro, S. S. and Wilk, M. B. (1965). An analysis of variance test for normality. "
                    "Biometrika 52, 591-611; p-value by Royston (1995), AS R94. Size bands: skewness 0.5 "
                    "and 1 (Bulmer 1979), excess kurtosis 1 and 2 (common practice).",
    "jarque_bera": "Jarque, C. M. and Bera, A. K. (1980). Efficient tests for normality, homoscedasticity "
                   "and serial independence of regression residuals. Economics Letters 6(3), 255-259. "
                   "Size bands: skewness 0.5 and 1 (Bulmer 1979), excess kurtosis 1 and 2 (common practice).",
    "breusch_pagan": "Breusch, T. S. and Pagan, A. R. (1979). Econometrica 47(5), 1287-1294; studentised "
                     "form of Koenker, R. (1981). J. Econometrics 17, 107-112. Size: Cohen's f² below 0.02 "
                     "is small (Cohen 1988).",
    "durbin_watson": "Durbin, J. and Watson, G. S. (1950, 1951). Testing for serial correlation in least "
                     "squares regression I, II. Biometrika 37, 409-428; 38, 159-178.",
    "vif": "Marquardt, D. W. (1970). Technometrics 12(3), 591-612; generalised VIF for blocks: Fox, J. and "
           "Monette, G. (1992). JASA 87, 178-183. Limits 10 and 100: common practice.",
    "condition_number": "Belsley, D. A., Kuh, E. and Welsch, R. E. (1980). Regression Diagnostics. Wiley. "
                        "Bands 30 and 100 (from memory).",
    "outlier": " Rows named by the mean-shift outlier test: externally studentised residual against "
               "t(n-k-1), Bonferroni-adjusted (Cook, R. D. and Weisberg, S. 1982, Residuals and Influence in "
               "Regression, ch. 2).",
    "leverage": "Hoaglin, D. C. and Welsch, R. E. (1978). The hat matrix in regression and ANOVA. "
                "American Statistician 32(1), 17-22 (screening cut-off 2k/n); Huber, P. J. (1981). Robust "
                "Statistics. Wiley (0.2 risky, above 0.5 to be avoided).",
    "cooks_distance": "Cook, R. D. (1977). Detection of influential observation in linear regression. "
                      "Technometrics 19(1), 15-18; Cook, R. D. and Weisberg, S. (1982). Residuals and "
                      "Influence in Regression. Chapman & Hall (median of F(k, n-k)); Kutner, M. H. et al. "
                      "(2005). Applied Linear Statistical Models, 5th ed. (20th percentile). Screening "
                      "cut-off 4/n: common practice.",
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
        Kept for compatibility with the level: True for ``"fine"`` and
        ``"worth a look"``, False for ``"a problem"``, None for
        ``"not assessed"`` (the verdict says why).
    verdict : str
        One plain sentence with the number behind it.
    reference : str
        Published source of the test and of the thresholds.
    remedy : str or None
        What to try or to look at when the check is not fine.
    level : str
        ``"fine"``, ``"worth a look"``, ``"a problem"`` or ``"not assessed"``
        (see :data:`LEVELS`).  When not given it follows ``passed``
        (True → fine, False → a problem, None → not assessed); when given it
        must agree with ``passed``.
    rows : tuple of str
        The rows named in the verdict (at most :data:`ROWS_LISTED`, largest
        first), as the verdict names them: by the identifier column, or by
        data row of the file counting from 1.
    rows_not_listed : int
        How many more rows are above the check's cut-off than are named.
    """

    name: str
    aspect: str
    statistic: float | None
    pvalue: float | None
    passed: bool | None
    verdict: str
    reference: str
    remedy: str | None = None
    level: str | None = None
    rows: tuple[str, ...] = ()
    rows_not_listed: int = 0

    def __post_init__(self):
        if self.level is None:
            object.__setattr__(self, "level", {True: FINE, False: PROBLEM, None: NOT_ASSESSED}[self.passed])
        elif self.level not in LEVELS:
            raise OptionError(f"check level must be one of {', '.join(map(repr, LEVELS))} (got {self.level!r})")
        elif _PASSED[self.level] is not self.passed:
            raise OptionError(f"check {self.name!r}: level {self.level!r} needs passed={_PASSED[self.level]!r} "
                              f"(got {self.passed!r})")


def _check(name, aspect, statistic, pvalue, level, verdict, reference, remedy=None, rows=(), rows_not_listed=0):
    """A :class:`Check` whose ``passed`` follows from its level."""
    return Check(name, aspect, statistic, pvalue, _PASSED[level], verdict, reference, remedy, level,
                 tuple(rows), int(rows_not_listed))


@dataclass(frozen=True, eq=False)
class WeightedOffer:
    """A weighted fit offered when the spread of the errors follows one term.

    The variance is modelled as σ²ᵢ ∝ xᵢ^γ (multiplicative heteroscedasticity;
    Harvey 1976, Econometrica 44(3), 461-465 — quoted from memory): γ̂ is the
    slope of log eᵢ² on log xᵢ, and the model is refitted by weighted least
    squares with weights xᵢ^−γ̂ (times the row weights, if any).

    Attributes
    ----------
    source : str
        The variable the spread follows (the largest R² of log e² on log x among
        the model's positive numeric terms).
    power : float
        γ̂.
    r_squared : float
        R² of log e² on log x.
    coefficients : DataFrame
        ``coefficient``, ``estimate``, ``std_error`` of the weighted fit.
    breusch_pagan : float
        Its studentised Breusch-Pagan LM, and ``pvalue`` its p-value.
    pvalue : float
    """

    source: str
    power: float
    r_squared: float
    coefficients: pd.DataFrame
    breusch_pagan: float
    pvalue: float


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
        Every row above a screening cut-off (leverage 2k/n or Cook's distance
        4/n), largest Cook's distance first: ``row`` (0-based position in the
        data used), ``name`` (as the verdicts name it, see ``rows_named``),
        ``leverage``, ``cooks_distance``, ``studentized_residual`` and
        ``reason``.  The verdicts name at most :data:`ROWS_LISTED` of them.
    rows_named : str
        How rows are named: ``"by <identifier column>"`` when intake set an
        identifier column aside, otherwise ``"data rows of the file, counting
        from 1"`` (or ``"rows of the table, counting from 1"`` for a DataFrame).
    weighted_offer : WeightedOffer or None
        When the constant-variance check is not fine and the spread follows
        one positive numeric term: the weighted fit that term's power of the
        variance suggests, with its own Breusch-Pagan test, for comparison.
    robust_se : ndarray, shape (k,)
        Heteroscedasticity-consistent standard errors of the coefficients
        (intercept first), HC3 of MacKinnon & White (1985):
        cov = (XᵀX)⁻¹ Xᵀ diag(eᵢ²/(1 − hᵢᵢ)²) X (XᵀX)⁻¹, on the √w scale with
        row weights — equal to statsmodels' ``cov_type="HC3"``.  They stay
        valid when the spread of the errors changes; the report shows them
        beside the ordinary ones when the constant-variance check is not fine.
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
    rows_named: str = "rows, counting from 1"
    robust_se: np.ndarray | None = None
    weighted_offer: "WeightedOffer | None" = None

    def check(self, name: str) -> Check:
        """The check called ``name``; raises listing the names when unknown."""
        for c in self.checks:
            if c.name == name:
                return c
        raise OptionError(f"no check named {name!r}; the checks are {', '.join(c.name for c in self.checks)}")

    def __repr__(self) -> str:
        """A few lines: the model, the checks by level, the rows flagged; :meth:`table` holds the detail."""
        model = " + ".join(self.terms) or "intercept only"
        by_level = []
        for level in (PROBLEM, WORTH_A_LOOK, NOT_ASSESSED, FINE):
            names = [c.name for c in self.checks if c.level == level]
            if names:
                by_level.append(f"{level}: {', '.join(names)}" if level != FINE else f"fine: {len(names)}")
        return (f"<Diagnosis of {model}: {self.n} rows, {self.k} coefficients>\n"
                f"  checks — {'; '.join(by_level) or 'none'}\n"
                f"  {len(self.flagged_rows)} row(s) above a screening cut-off (.flagged_rows); "
                f"every check with its verdict: .table()")

    def table(self) -> pd.DataFrame:
        """The checks as a DataFrame (one row per check)."""
        return pd.DataFrame([
            {"aspect": c.aspect, "check": c.name, "statistic": c.statistic, "pvalue": c.pvalue,
             "level": c.level, "passed": c.passed, "verdict": c.verdict, "remedy": c.remedy,
             "reference": c.reference}
            for c in self.checks
        ])

    @property
    def remedies(self) -> tuple[str, ...]:
        """Remedies of the checks that are "a problem", then of those "worth a look", each once."""
        out: list[str] = []
        for level in (PROBLEM, WORTH_A_LOOK):
            for c in self.checks:
                if c.level == level and c.remedy and c.remedy not in out:
                    out.append(c.remedy)
        return tuple(out)

    @property
    def failed(self) -> tuple[str, ...]:
        """Names of the checks whose level is "a problem" (``passed`` False)."""
        return tuple(c.name for c in self.checks if c.level == PROBLEM)

    @property
    def worth_a_look(self) -> tuple[str, ...]:
        """Names of the checks whose level is "worth a look"."""
        return tuple(c.name for c in self.checks if c.level == WORTH_A_LOOK)


# --------------------------------------------------------------------------- helpers


def _bend_pointer(candidates, subset, design, y, root) -> str:
    """The numeric term along which the mean bends most, and the forms of its variable the search did not try.

    For each numeric one-column term of the model, the curvature probe of its
    source variable — x·log x for a positive x (the Box-Tidwell test of power
    1; Box & Tidwell 1962), x² otherwise — is added to this model's design and
    its t statistic taken (:func:`selectkit._vetting.added_column_t`); the
    largest |t| names the term whose component-plus-residual panel to read.
    Empty when no term can be probed.
    """
    from ._vetting import _probe, added_column_t

    frame = getattr(getattr(candidates, "dataset", None), "frame", None)
    n = design.shape[0]
    names, probes = [], []
    for index in subset:
        term = candidates.terms[index]
        if term.kind != "numeric" or len(term.columns) != 1 or not term.source:
            continue
        source = term.source[0]
        if frame is not None and source in frame.columns and len(frame) == n \
                and pd.api.types.is_numeric_dtype(frame[source]):
            x = frame[source].to_numpy(dtype=float)
        else:
            x = np.asarray(candidates.matrix[:, term.columns[0]], dtype=float)
        if not np.all(np.isfinite(x)) or np.ptp(x) <= 0:
            continue
        probe = _probe(x, bool(np.min(x) > 0))
        names.append((term.name, source))
        probes.append(probe if root is None else probe * root)
    if not probes:
        return ""
    t = added_column_t(design, y, np.column_stack(probes))
    if not np.any(np.isfinite(t)):
        return ""
    j = int(np.nanargmax(np.abs(t)))
    term, source = names[j]
    offered = sorted({c.name for c in candidates.terms if c.family == source})
    refused = [r for r in candidates.refused if r.family == source]
    untried = "; ".join(f"{r.form} ({r.reason.split(';')[0].split(' — ')[0]})" for r in refused[:4])
    text = (f"The bend is largest along {source} (its curvature probe added to this model: t = {t[j]:.2g}); read "
            f"its panel in the figure of forms, where the fitted {term} leaves the points. Forms of {source} "
            f"in the search: {', '.join(offered)}.")
    if untried:
        text += f" Refused for the data: {untried}."
    from .candidates import DEFAULT_FORMS
    from .settings import spell

    used = {c.transform for c in candidates.terms if c.family == source} | {r.form for r in refused}
    asked = [f for f in DEFAULT_FORMS if f not in used]
    if asked:
        text += (f" Not offered in this run: {', '.join(asked)} — offer them with "
                 f"{spell('forms', ['identity', *asked])}.")
    return text


def _weighted_offer(candidates, subset, design, y, resid, labels):
    """The :class:`WeightedOffer` for the positive numeric term the squared residuals follow most, or None."""
    from .rank import _least_squares

    frame = getattr(getattr(candidates, "dataset", None), "frame", None)
    n = design.shape[0]
    base = np.ones(n) if candidates.weights is None else np.asarray(candidates.weights, dtype=float)
    log_e2 = np.log(np.maximum(resid ** 2, np.finfo(float).tiny))
    best = None
    for index in subset:
        term = candidates.terms[index]
        if term.kind != "numeric" or not term.source:
            continue
        source = term.source[0]
        if frame is None or source not in frame.columns or len(frame) != n or \
                not pd.api.types.is_numeric_dtype(frame[source]):
            continue
        xs = frame[source].to_numpy(dtype=float)
        if not (np.all(np.isfinite(xs)) and np.min(xs) > 0 and np.ptp(xs) > 0):
            continue
        lx = np.log(xs)
        slope, intercept = np.polyfit(lx, log_e2, 1)
        fitted = intercept + slope * lx
        r2 = 1.0 - float(np.sum((log_e2 - fitted) ** 2)) / float(np.sum((log_e2 - log_e2.mean()) ** 2))
        if best is None or r2 > best[2]:
            best = (source, float(slope), r2, xs)
    if best is None or not best[2] > 0:
        return None
    source, power, r2, xs = best
    w = base * xs ** (-power)
    root = np.sqrt(w / np.mean(w))
    fit = _least_squares(design * root[:, None], y * root)
    if fit.dependent >= 0:
        return None
    e = fit.residuals
    scale = float(e @ e) / (n - design.shape[1])
    se = np.sqrt(np.diag(fit.cov_root @ fit.cov_root.T) * scale)
    table = pd.DataFrame({"coefficient": ["intercept"] + list(labels), "estimate": fit.coef, "std_error": se})
    check = _breusch_pagan(design * root[:, None], e, fit.fitted, 0.05, fit.basis)  # the same test, refitted
    return WeightedOffer(source=source, power=power, r_squared=r2, coefficients=table,
                         breusch_pagan=float("nan") if check.statistic is None else check.statistic,
                         pvalue=float("nan") if check.pvalue is None else check.pvalue)


def robust_intervals(estimate, robust_se, df_resid, level=0.95) -> dict:
    """t intervals from the HC3 standard errors: ``{"robust standard error (HC3)", "95% low (HC3)", ...}``.

    The interval is estimate ± t_{(1+level)/2, n−k}·se_HC3, the t reference of
    statsmodels' robust tables with ``use_t=True``.
    """
    estimate, robust_se = np.asarray(estimate, dtype=float), np.asarray(robust_se, dtype=float)
    q = float(stats.t.ppf(0.5 + level / 2.0, max(int(df_resid), 1)))
    percent = f"{100 * level:g}%"
    return {"robust standard error (HC3)": robust_se, f"{percent} low (HC3)": estimate - q * robust_se,
            f"{percent} high (HC3)": estimate + q * robust_se}


def _hc3(basis, cov_root, resid, hat):
    """HC3 standard errors (MacKinnon & White 1985) from the fit's factors.

    With B the covariance root ((XᵀX)⁻¹ = BBᵀ) and Q = XB the orthonormal basis
    of the design, (XᵀX)⁻¹Xᵀ = BQᵀ, so the sandwich is
    B (Qᵀ diag(uᵢ) Q) Bᵀ with uᵢ = eᵢ²/(1 − hᵢᵢ)²: one O(n·k²) product, no
    n × n matrix.  A row with hᵢᵢ = 1 makes it infinite.
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        u = resid ** 2 / (1.0 - hat) ** 2
        meat = basis.T @ (basis * u[:, None])
        cov = cov_root @ meat @ cov_root.T
    return np.sqrt(np.maximum(np.diag(cov), 0.0))


def _p(value: float) -> str:
    return "p < 0.0001" if value < 1e-4 else f"p = {value:.4f}"


def _model_arrays(candidates, subset):
    """The model's columns, their labels (as in the coefficient tables) and owning terms."""
    from .rank import _coefficient_labels  # one home for coefficient labels

    entries = _coefficient_labels(candidates, subset)
    n = candidates.matrix.shape[0]
    x = (np.column_stack([np.asarray(candidates.matrix[:, j], dtype=float) for _, j, _, _ in entries])
         if entries else np.empty((n, 0)))
    return x, [label for _, _, label, _ in entries], [term for term, _, _, _ in entries]


# --------------------------------------------------------------------------- checks


def _test_level(p, alpha, effect):
    """Level of a test with an effect size: fine unless it rejects; then Cohen's f² decides."""
    if p >= alpha:
        return FINE
    return PROBLEM if effect >= EFFECT_F2_SMALL else WORTH_A_LOOK


def _rss_with(basis, extra, resid, rss):
    """rss after adding the columns ``extra`` to a model whose design has the orthonormal basis ``basis``.

    The residuals ``resid`` are orthogonal to the basis, so adding ``extra``
    removes their projection on the part of ``extra`` outside the basis:
    rss_aug = rss − ‖Q₂ᵀe‖², Q₂ from the QR of (I − QQᵀ)·extra.  A column of
    ``extra`` whose part outside the basis is at most :data:`RANK_TOLERANCE`
    of its centred length adds nothing (the rank rule of the fits).  Costs
    O(n·k) for the projection and O(n) per added column, instead of a new QR
    of the whole augmented design.
    """
    from .rank import RANK_TOLERANCE

    extra = np.asarray(extra, dtype=float).reshape(len(resid), -1)
    outside = extra - basis @ (basis.T @ extra)
    length = np.linalg.norm(extra - extra.mean(axis=0), axis=0)
    q, r = np.linalg.qr(outside)
    keep = np.abs(np.diag(r)) > RANK_TOLERANCE * np.maximum(length, np.finfo(float).tiny)
    gained = q[:, keep].T @ resid
    return max(float(rss - gained @ gained), 0.0)


def _reset(design, y, fitted, rss, alpha, basis, root=None):
    """Ramsey's RESET: F test of adding ŷ² and ŷ³ (powers of the standardised fitted values).

    With row weights (``root`` = √w; ``design``, ``y`` and ``fitted`` then on
    the √w scale) the powers are those of the fitted values on the response's
    own scale, weighted like every other column: √w·z², √w·z³ — the RESET of
    the weighted fit (the powers of √w·ŷ would test another model).

    The size of a bend is Cohen's f² of the two added powers,
    f² = (rss − rss_aug) / rss_aug: a rejection with f² below 0.02 (Cohen's
    small effect) is "worth a look", above it "a problem".
    """
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
    own = fitted if root is None else fitted / root
    z = (own - own.mean()) / own.std()
    added = np.column_stack([z ** 2, z ** 3]) * (1.0 if root is None else root[:, None])
    rss_aug = _rss_with(basis, added, y - fitted, rss)
    dfd = n - k - 2
    f = ((rss - rss_aug) / 2.0) / (rss_aug / dfd)
    p = float(stats.f.sf(f, 2, dfd))
    effect = (rss - rss_aug) / rss_aug if rss_aug > 0 else np.inf
    level = _test_level(p, alpha, effect)
    head = f"RESET F = {f:.3g}, {_p(p)}"
    if level == FINE:
        verdict = f"{head}: no sign that the mean bends away from these terms."
    elif level == WORTH_A_LOOK:
        verdict = (f"{head}: the test detects a bend, but a slight one (f² = {effect:.2g}, below Cohen's small "
                   f"effect {EFFECT_F2_SMALL:g}); with {n} rows even slight bends are detected.")
    else:
        verdict = (f"{head}, f² = {effect:.2g}: the mean response bends in a way the terms do not "
                   "follow; the model misses a curve or a term.")
    return _check("reset", "linearity", float(f), p, level, verdict, _REFERENCES["reset"],
                  None if level == FINE else
                  "Try a transformed form of a term (log, square root, reciprocal) or a missing term; "
                  "the panels of each term (component plus residual) show which term bends.")


def _shape(resid):
    """Sample skewness g₁ = m₃/m₂^{3/2} and excess kurtosis g₂ = m₄/m₂² − 3 (biased central moments).

    The moment estimators of Jarque & Bera (1980); Joanes & Gill (1998,
    The Statistician 47, 183-189) call them g₁ and g₂.  None when the
    residuals do not vary.
    """
    centred = resid - resid.mean()
    m2 = float(np.mean(centred ** 2))
    if m2 <= 0:
        return None
    return float(np.mean(centred ** 3) / m2 ** 1.5), float(np.mean(centred ** 4) / m2 ** 2 - 3.0)


def _shapiro(resid, alpha, outliers=((), "", 0)):
    n = resid.shape[0]
    if n > SHAPIRO_MAX_ROWS:
        return Check("shapiro_wilk", "normality", None, None, None,
                     f"Not run: {n} rows is above {SHAPIRO_MAX_ROWS}, where the Shapiro-Wilk p-value "
                     "approximation is not valid and the test flags trivial departures; see Jarque-Bera "
                     "and the Q-Q plot.", _REFERENCES["shapiro_wilk"])
    if n < 3:
        return Check("shapiro_wilk", "normality", None, None, None,
                     f"Not run: the test needs at least 3 rows ({n} given).", _REFERENCES["shapiro_wilk"])
    shape = _shape(resid)
    if shape is None:
        return Check("shapiro_wilk", "normality", None, None, None,
                     "Not assessed: the residuals are all zero.", _REFERENCES["shapiro_wilk"])
    w, p = stats.shapiro(resid)
    return _normality_check("shapiro_wilk", "Shapiro-Wilk W", float(w), float(p), alpha, n, shape, outliers)


def _jarque_bera(resid, alpha, outliers=((), "", 0)):
    """JB = n/6 · (g₁² + g₂²/4), g₁, g₂ from the biased central moments; χ²(2) p-value."""
    n = resid.shape[0]
    shape = _shape(resid)
    if shape is None:
        return Check("jarque_bera", "normality", None, None, None,
                     "Not assessed: the residuals are all zero.", _REFERENCES["jarque_bera"])
    skew, excess = shape
    jb = n / 6.0 * (skew ** 2 + excess ** 2 / 4.0)
    p = float(stats.chi2.sf(jb, 2))
    return _normality_check("jarque_bera", "Jarque-Bera", float(jb), p, alpha, n, shape, outliers)


def _normality_level(p, alpha, n, skew, excess):
    """Level of a normality test, weighing the size of the departure as well as the p-value.

    * p ≥ alpha: "fine".
    * Otherwise "a problem" when |g₁| > 1 or g₂ > 2; "worth a look" when
      |g₁| > 0.5 or |g₂| > 1.
    * A rejection with a smaller estimated departure is "fine" with more than
      :data:`SMALL_SAMPLE_ROWS` rows (the test detects trivial departures);
      with fewer it is "worth a look", and "a problem" at p < 0.001.

    Returns the level and which rule decided (``"test"``, ``"size"``,
    ``"few rows"``, ``"small"``).
    """
    if p >= alpha:
        return FINE, "test"
    if abs(skew) > SKEWNESS_PROBLEM or excess > EXCESS_KURTOSIS_PROBLEM:
        return PROBLEM, "size"
    few = n <= SMALL_SAMPLE_ROWS
    if few and p < NORMALITY_STRONG_P:
        return PROBLEM, "few rows"
    if abs(skew) > SKEWNESS_LOOK or abs(excess) > EXCESS_KURTOSIS_LOOK:
        return WORTH_A_LOOK, "size"
    if few:
        return WORTH_A_LOOK, "few rows"
    return FINE, "small"


def _normality_check(name, label, statistic, p, alpha, n, shape, outliers=((), "", 0)):
    skew, excess = shape
    level, rule = _normality_level(p, alpha, n, skew, excess)
    head = f"{label} = {statistic:.4g}, {_p(p)}"
    size = f"skewness {skew:.2f}, excess kurtosis {excess:.2f}"
    look = f"|skewness| > {SKEWNESS_LOOK:g} or |excess kurtosis| > {EXCESS_KURTOSIS_LOOK:g}"
    problem = f"|skewness| > {SKEWNESS_PROBLEM:g} or excess kurtosis > {EXCESS_KURTOSIS_PROBLEM:g}"
    bands = f"a problem from {problem}" if level == PROBLEM else f"worth a look from {look}, a problem from {problem}"
    if rule == "test":
        verdict = f"{head} ({size}): the residuals look compatible with normal errors."
    elif rule == "small":
        verdict = (f"{head}: the test detects a departure, but its size is small ({size}; worth a look only from "
                   f"{look}); with {n} rows even slight departures are detected, and this one matters little "
                   "for the coefficients.")
    elif rule == "few rows":
        verdict = (f"{head}: the residuals depart from a normal shape ({size}); with only {n} rows the size "
                   "is estimated roughly and the coefficient tests lean on the normal shape"
                   + (", and the test rejects strongly." if level == PROBLEM else "."))
    elif level == PROBLEM:
        verdict = f"{head}: the residuals depart from a normal shape by a sizeable amount ({size}; {bands})."
    else:
        light = abs(skew) <= SKEWNESS_LOOK and excess < -EXCESS_KURTOSIS_LOOK
        verdict = (f"{head}: the residuals depart from a normal shape by a moderate amount ({size}; {bands})"
                   + ("; the tails are lighter than normal, which costs least squares little." if light else "."))
    names, text, rest = outliers if level != FINE else ((), "", 0)
    if text:
        verdict += (f" Rows far off the fit (Bonferroni outlier test at {alpha:g}), largest |studentised "
                    f"residual| first, {text}.")
    remedy = None if level == FINE else (
        "Look at the Q-Q plot and the rows named here and under influence first; with many rows, mild "
        "non-normality matters little for the coefficients, while skewed errors often call for a response "
        "transform (log or Box-Cox) and a few rows far off the fit for a check of how they were recorded.")
    return _check(name, "normality", statistic, p, level, verdict, _REFERENCES[name] + _REFERENCES["outlier"],
                  remedy, names, rest)


def _breusch_pagan(design, resid, fitted, alpha, basis):
    """Koenker's studentised Breusch-Pagan: LM = n·R² of e² on the design; χ²(k − 1).

    The size of a change in spread is Cohen's f² = R²/(1 − R²) of that
    auxiliary regression: a rejection with f² below 0.02 is "worth a look",
    above it "a problem".
    """
    n, k = design.shape
    if k == 1:
        return Check("breusch_pagan", "constant variance", None, None, None,
                     "Not assessed: an intercept-only model has no term the variance could follow.",
                     _REFERENCES["breusch_pagan"])
    e2 = resid ** 2
    aux = e2 - basis @ (basis.T @ e2)  # e² on the design: the residual of its projection on the design's basis
    rss_aux = float(aux @ aux)
    tss_aux = float(np.sum((e2 - e2.mean()) ** 2))
    if tss_aux <= 0:
        return Check("breusch_pagan", "constant variance", None, None, None,
                     "Not assessed: the squared residuals do not vary.", _REFERENCES["breusch_pagan"])
    r2 = 1.0 - rss_aux / tss_aux
    lm = n * r2
    p = float(stats.chi2.sf(lm, k - 1))
    effect = r2 / (1.0 - r2) if r2 < 1 else np.inf
    level = _test_level(p, alpha, effect)
    grows = np.corrcoef(np.abs(resid), fitted)[0, 1] > 0 if fitted.std() > 0 else False
    head = f"Breusch-Pagan LM = {lm:.3g}, {_p(p)}"
    if level == FINE:
        verdict = f"{head}: no sign that the spread of the errors changes."
        remedy = None
    else:
        if level == PROBLEM:
            verdict = (f"{head}, f² = {effect:.2g}: the spread of the errors changes with the terms"
                       + (", growing with the fitted value." if grows else "."))
        else:
            verdict = (f"{head}: the spread of the errors changes with the terms, but slightly (f² = "
                       f"{effect:.2g} of the squared residuals on the terms, below Cohen's small effect "
                       f"{EFFECT_F2_SMALL:g})" + (", growing with the fitted value." if grows else "."))
        verdict += (" The coefficient table shows heteroscedasticity-robust (HC3) standard errors beside the "
                    "ordinary ones; read the intervals from those.")
        remedy = ("A response transform (log or Box-Cox) often steadies a spread that grows with the fitted "
                  "value; otherwise use row weights, or the robust (HC3) standard errors shown."
                  if grows else
                  "Look at the spread figure; use row weights for the term the spread follows, or the robust "
                  "(HC3) standard errors shown.")
    return _check("breusch_pagan", "constant variance", float(lm), p, level, verdict,
                  _REFERENCES["breusch_pagan"], remedy)


def _durbin_watson(resid, time_ordered):
    if not time_ordered:
        return Check("durbin_watson", "independence", None, None, None,
                     "Not assessed: row order was not declared to mean time or sequence.",
                     _REFERENCES["durbin_watson"])
    dw = float(np.sum(np.diff(resid) ** 2) / np.sum(resid ** 2))
    low, high = DURBIN_WATSON_RANGE
    worst_low, worst_high = DURBIN_WATSON_PROBLEM_RANGE
    if low <= dw <= high:
        level = FINE
        verdict = f"Durbin-Watson = {dw:.3f}, inside {low}-{high}: no sign of correlation between neighbouring rows."
    else:
        kind = "positive" if dw < low else "negative"
        level = WORTH_A_LOOK if worst_low <= dw <= worst_high else PROBLEM
        where = (f"outside {low}-{high} but inside {worst_low:g}-{worst_high:g}" if level == WORTH_A_LOOK
                 else f"outside {worst_low:g}-{worst_high:g}")
        verdict = (f"Durbin-Watson = {dw:.3f}, {where} (common practice): neighbouring rows have "
                   f"{kind}ly correlated errors (first-order correlation about {1 - dw / 2:.2f}).")
    return _check("durbin_watson", "independence", dw, None, level, verdict,
                  _REFERENCES["durbin_watson"] + " Ranges 1.5-2.5 and 1-3: common practice.",
                  None if level == FINE else
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
    """Largest VIF (GVIF^(1/df) for a block): fine up to 10, worth a look up to 100, a problem above."""
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
        return _check("vif", "multicollinearity", value, None, FINE, verdict, _REFERENCES["vif"])
    level = PROBLEM if value > VIF_PROBLEM else WORTH_A_LOOK
    verdict = (f"Largest VIF {value:.3g} ({worst['term']}); {len(flagged)} term(s) above {VIF_LIMIT:g}: "
               + ", ".join(flagged)
               + (f". Above {VIF_PROBLEM:g} a term shares over 99 % of its variation with the others: its "
                  "coefficient is unstable." if level == PROBLEM else
                  f", below {VIF_PROBLEM:g}: their coefficients are less precise than they would be apart."))
    return _check("vif", "multicollinearity", value, None, level, verdict, _REFERENCES["vif"],
                  "Keep one of the correlated terms, combine them, or centre the components of an "
                  "interaction; the fitted values are unaffected, only the split between terms is.")


def _condition_check(condition, p):
    """Condition number of the standardised design: fine up to 30, worth a look up to 100, a problem above."""
    if p < 2:
        return Check("condition_number", "multicollinearity", None if p == 0 else 1.0, None, None,
                     "Not assessed: fewer than two terms.", _REFERENCES["condition_number"])
    if condition <= CONDITION_LIMIT:
        level = FINE
        tail = f"below {CONDITION_LIMIT:g}."
    elif condition <= CONDITION_PROBLEM:
        level = WORTH_A_LOOK
        tail = f"between {CONDITION_LIMIT:g} and {CONDITION_PROBLEM:g}: moderate near-dependencies among the terms."
    else:
        level = PROBLEM
        tail = f"above {CONDITION_PROBLEM:g}: strong near-dependencies among the terms."
    verdict = f"Condition number of the standardised design = {condition:.3g}, " + tail
    return _check("condition_number", "multicollinearity", condition, None, level, verdict,
                  _REFERENCES["condition_number"],
                  None if level == FINE else "See the VIFs for which terms are involved; drop or combine them.")


def _influence(resid, hat, n, k, rss):
    """Leverage hᵢᵢ and Cook's Dᵢ = eᵢ² hᵢᵢ / (k s² (1 − hᵢᵢ)²), s² = rss/(n − k)."""
    dof = n - k
    s2 = rss / dof if dof > 0 else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        studentized = resid / np.sqrt(s2 * (1.0 - hat))
        cooks = resid ** 2 * hat / (k * s2 * (1.0 - hat) ** 2)
    return studentized, cooks


def _outlier_rows(studentized, n, k, alpha, namer, how):
    """Rows whose response is far off the fit: the mean-shift outlier test with a Bonferroni bound.

    tᵢ = rᵢ √((n − k − 1)/(n − k − rᵢ²)), the externally studentised residual
    from the internally studentised rᵢ, is t(n − k − 1) under normal errors;
    a row is named when n · 2·P(T > |tᵢ|) < alpha (Cook & Weisberg 1982,
    ch. 2; equals ``statsmodels`` ``outlier_test(method="bonf")``).
    Returns (names, text, rest) as :func:`_listed`, text prefixed by ``how``.
    """
    dof = n - k - 1
    if dof < 1:
        return (), "", 0
    r2 = studentized ** 2
    with np.errstate(divide="ignore", invalid="ignore"):
        external = np.abs(studentized) * np.sqrt(dof / (n - k - r2))
    external = np.where(np.isfinite(external), external, 0.0)
    # n·2·P(T > |tᵢ|) < alpha  ⇔  |tᵢ| > the upper alpha/(2n) point of t(dof) (one quantile, not n tail areas)
    far = np.flatnonzero(external > stats.t.isf(alpha / (2.0 * n), dof))
    names, text, rest = _listed(far, external, namer)
    return names, (f"{how}: {text}" if text else ""), rest


def _row_namer(candidates, n):
    """How rows are named in verdicts, and a function from 0-based position to that name.

    By the first identifier column intake set aside (``Dataset.identifiers``)
    when there is one; otherwise by the 1-based data row of the file
    (``Dataset.source_rows`` + 1, so rows dropped for missing values keep
    their place), or 1-based position when the candidates carry no dataset.
    """
    dataset = getattr(candidates, "dataset", None)
    source_rows = getattr(dataset, "source_rows", None)
    if source_rows is not None and len(source_rows) != n:
        source_rows = None
    identifiers = getattr(dataset, "identifiers", None)
    if identifiers is not None and identifiers.shape[1] > 0 and len(identifiers) == n:
        column = str(identifiers.columns[0])
        values = identifiers.iloc[:, 0].to_numpy(dtype=object)

        def by_identifier(i):
            value = values[i]
            if value is None or (isinstance(value, float) and np.isnan(value)):
                row = int(source_rows[i]) + 1 if source_rows is not None else i + 1
                return f"(no {column}, data row {row})"
            if isinstance(value, (float, np.floating)) and float(value).is_integer():
                return str(int(value))
            return str(value)

        return f"by {column}", by_identifier
    if source_rows is not None:
        report = getattr(dataset, "report", None)
        where = "data rows of the file" if getattr(report, "source", None) is not None else "rows of the table"
        return f"{where}, counting from 1", _RowNumbers(np.asarray(source_rows, dtype=np.int64) + 1)
    return "rows, counting from 1", _RowNumbers(None)


class _RowNumbers:
    """Names rows by a number counting from 1: ``numbers[i]``, or i + 1 when there are none."""

    def __init__(self, numbers):
        self.numbers = numbers

    def __call__(self, i):
        return str(int(self.numbers[i]) if self.numbers is not None else int(i) + 1)

    def many(self, rows):
        rows = np.asarray(rows, dtype=np.int64)
        return (self.numbers[rows] if self.numbers is not None else rows + 1).astype(str).astype(object)


def _names(namer, rows):
    """The names of many rows (one array operation when the namer has one)."""
    many = getattr(namer, "many", None)
    return many(rows) if many is not None else [namer(int(i)) for i in rows]


def _listed(indices, values, namer):
    """At most ROWS_LISTED of ``indices``, largest ``values`` first (non-finite first): names, text, rest."""
    indices = np.asarray(indices, dtype=np.int64)
    if indices.size == 0:
        return (), "", 0
    key = np.where(np.isfinite(values[indices]), values[indices], np.inf)
    order = indices[np.lexsort((indices, -key))]  # largest first, ties by position
    shown = order[:ROWS_LISTED]
    names = tuple(namer(int(i)) for i in shown)
    rest = int(order.size - shown.size)
    text = ", ".join(f"{name} ({values[i]:.3g})" for name, i in zip(names, shown))
    return names, text + (f" and {rest} more" if rest else ""), rest


def _count(number, what="row"):
    return f"{number} {what}" + ("" if number == 1 else "s")


#: Above this many rows the shares of :func:`_expected_above_cooks` are interpolated between exact values
#: (scipy's Beta survival function costs about 4 ms per thousand rows; 2049 exact values cost 6 ms).
_EXACT_SHARES = 4096


def _expected_above_cooks(hat, n, k, limit):
    """Expected number, and its standard deviation, of rows with Dᵢ > limit under normal errors.

    Dᵢ = rᵢ² hᵢᵢ / (k (1 − hᵢᵢ)) with rᵢ the internally studentised residual,
    and rᵢ²/(n − k) ~ Beta(½, (n − k − 1)/2) under normal errors given the
    design (Beckman & Trussell 1974, JASA 69, 199-201; Cook & Weisberg 1982,
    sec. 2.2 — quoted from memory).  So P(Dᵢ > c) =
    P(Beta > c k (1 − hᵢᵢ) / (hᵢᵢ (n − k))), and the count above c is a sum
    of nearly independent indicators: mean Σpᵢ, variance Σpᵢ(1 − pᵢ).  The
    rows share s², which makes the indicators slightly negatively correlated,
    so this standard deviation is a little too large and the "more than
    chance" rule errs towards "fine" (checked against a simulation in the
    tests).  None when n − k − 1 < 1.
    """
    if n - k - 1 < 1:
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        bound = limit * k * (1.0 - hat) / (hat * (n - k))
    bound = np.clip(np.where(hat >= 1.0, 0.0, bound), 0.0, 1.0)
    b = (n - k - 1) / 2.0
    if bound.size > _EXACT_SHARES:
        # P is smooth and monotone in the bound: exact at 2049 quantiles of the bounds, linear between
        # (the sum moves by far less than its own standard deviation; our choice, checked in the tests)
        grid = np.unique(np.quantile(bound, np.linspace(0.0, 1.0, 2049)))
        share = np.interp(bound, grid, stats.beta.sf(grid, 0.5, b))
    else:
        share = stats.beta.sf(bound, 0.5, b)
    return float(share.sum()), float(np.sqrt(np.sum(share * (1.0 - share))))


def _influence_checks(hat, cooks, studentized, n, k, rss, namer, how):
    """Leverage and Cook's distance checks, and the table of rows above a screening cut-off.

    Cook's distance: "a problem" when a row is above the median of
    F(k, n − k) (Cook & Weisberg 1982); "worth a look" when a row is above
    its 20th percentile (Kutner et al. 2005), or when more rows exceed the
    4/n screening cut-off than normal errors would put there — the expected
    count plus three standard deviations (see ``_expected_above_cooks``):
    about 5 % of clean rows are above 4/n by design, so the count alone says
    nothing; "fine" otherwise.

    Leverage: "a problem" above 0.5, "worth a look" above 0.2 (Huber 1981);
    both also need hᵢᵢ > 2k/n (Hoaglin & Welsch 1978), so that with n < 10k,
    where 2k/n exceeds 0.2, only rows that stand apart from the average
    leverage k/n count.  Leverage is a property of the design, not of the
    errors, so no share of rows is expected above 2k/n by chance; rows above
    it are named, but alone never lift the level.
    """
    leverage_screen = 2.0 * k / n
    cooks_screen = 4.0 / n
    high_leverage = np.flatnonzero(hat > leverage_screen)
    not_finite = ~np.isfinite(cooks)
    high_cooks = np.flatnonzero(~(cooks <= cooks_screen))  # NaN/inf (hᵢᵢ = 1) count as above
    rows = np.union1d(high_leverage, high_cooks).astype(np.int64)
    sort_key = np.where(np.isfinite(cooks[rows]), cooks[rows], np.inf)
    rows = rows[np.lexsort((-hat[rows], -sort_key))]
    by_cooks, by_leverage = ~(cooks[rows] <= cooks_screen), hat[rows] > leverage_screen
    flagged = pd.DataFrame({
        "row": rows,
        "name": _names(namer, rows),
        "leverage": hat[rows],
        "cooks_distance": cooks[rows],
        "studentized_residual": studentized[rows],
        "reason": np.where(by_cooks & by_leverage, "Cook's distance and leverage",
                           np.where(by_cooks, "Cook's distance", "leverage")).astype(object),
    })
    remedy = ("Check the named rows for recording or entry errors and for conditions unlike the rest; "
              "refit without them only to see how much the model moves, report both fits, and never "
              "delete rows automatically.")

    # ---- Cook's distance
    if rss <= 0:
        cooks_check = Check("cooks_distance", "influence", None, None, None,
                            "Not assessed: the model fits every row exactly.", _REFERENCES["cooks_distance"])
    else:
        f_look = float(stats.f.ppf(COOKS_LOOK_PERCENTILE, k, n - k))
        f_median = float(stats.f.ppf(COOKS_PROBLEM_PERCENTILE, k, n - k))
        top = float(np.inf if not_finite.any() else cooks.max())
        above_median = int(np.sum(not_finite | (cooks > f_median)))
        above_look = int(np.sum(not_finite | (cooks > f_look)))
        expected = _expected_above_cooks(hat, n, k, cooks_screen)
        excess = expected is not None and high_cooks.size > expected[0] + EXCESS_ROWS_SD * expected[1]
        if expected is None:
            screen = f"{_count(high_cooks.size)} above the 4/n = {cooks_screen:.3g} screening cut-off"
        else:
            screen = (f"{_count(high_cooks.size)} above the 4/n = {cooks_screen:.3g} screening cut-off, where "
                      f"normal errors would put about {expected[0]:.0f} ± {expected[1]:.0f}"
                      + (" — more than chance explains: a group of rows, often far out in the terms, fits "
                         "worse than the rest" if excess else
                         (" (the cut-off flags about one clean row in twenty by design)" if n >= 100 else "")))
        dist = f"F({k}, {n - k})"
        if above_median:
            level = PROBLEM
            head = (f"Largest Cook's distance {top:.3g}; {_count(above_median)} above the median of {dist}, "
                    f"{f_median:.3g} (Cook & Weisberg 1982): deleting such a row alone moves the coefficients "
                    "outside their 50 % confidence region")
        elif above_look:
            level = WORTH_A_LOOK
            head = (f"Largest Cook's distance {top:.3g}; {_count(above_look)} above the 20th percentile of "
                    f"{dist}, {f_look:.3g}, but below its median {f_median:.3g}: a sizeable pull on the fit")
        elif excess:
            level = WORTH_A_LOOK
            head = (f"Largest Cook's distance {top:.3g}, below the 20th percentile of {dist}, {f_look:.3g}: "
                    "no single row moves the fit much")
        else:
            level = FINE
            head = (f"Largest Cook's distance {top:.3g}, below the 20th percentile of {dist}, {f_look:.3g}: "
                    "no row moves the fit much")
        names, text, rest = ((), "", 0) if level == FINE else _listed(high_cooks, cooks, namer)
        verdict = f"{head}; {screen}." + (f" Largest first, {how}: {text}." if text else "")
        cooks_check = _check("cooks_distance", "influence", top, None, level, verdict,
                             _REFERENCES["cooks_distance"], None if level == FINE else remedy, names, rest)

    # ---- leverage
    look_limit = max(LEVERAGE_LOOK, leverage_screen)
    problem_limit = max(LEVERAGE_PROBLEM, leverage_screen)

    def label(limit, published):
        return (f"{published:g} (Huber 1981)" if limit == published else f"2k/n = {leverage_screen:.3g}")

    top_h = float(hat.max())
    above_problem = int(np.sum(hat > problem_limit))
    above_look = int(np.sum(hat > look_limit))
    screen = (f"{_count(high_leverage.size)} above the 2k/n = {leverage_screen:.3g} screening cut-off"
              if high_leverage.size else f"no row above the 2k/n = {leverage_screen:.3g} screening cut-off")
    if above_problem:
        level = PROBLEM
        head = (f"Largest leverage {top_h:.3g}; {_count(above_problem)} above "
                f"{label(problem_limit, LEVERAGE_PROBLEM)}: such a row largely fits itself, and the model's "
                "course near it rests on that row alone")
    elif above_look:
        level = WORTH_A_LOOK
        head = (f"Largest leverage {top_h:.3g}; {_count(above_look)} above {label(look_limit, LEVERAGE_LOOK)}, "
                "far from the others in the terms' space: their own response carries much of their fitted value")
    else:
        level = FINE
        head = (f"Largest leverage {top_h:.3g}, not above {label(look_limit, LEVERAGE_LOOK)}: no row's own "
                "response carries much of its fitted value")
    names, text, rest = ((), "", 0) if level == FINE else _listed(high_leverage, hat, namer)
    verdict = f"{head}; {screen}." + (f" Largest first, {how}: {text}." if text else "")
    leverage_check = _check("leverage", "influence", top_h, None, level, verdict, _REFERENCES["leverage"],
                            None if level == FINE else remedy, names, rest)
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
        Breusch-Pagan) reject; a rejection is then graded by its size.

    Returns
    -------
    Diagnosis

    Notes
    -----
    Each check ends "fine", "worth a look", "a problem" or "not assessed"
    (``Check.level``; ``Check.passed`` is False only for "a problem").

    * Linearity — RESET (Ramsey 1969): F test of adding ŷ² and ŷ³ to the model,
      F(2, n − k − 2); equals ``statsmodels.stats.diagnostic.linear_reset``
      with ``power=3, use_f=True``.  A rejection is "a problem" when the added
      powers' Cohen's f² reaches 0.02 (Cohen 1988), else "worth a look".
    * Normality — Shapiro-Wilk (scipy, up to 5000 rows) and Jarque-Bera,
      JB = n/6 (g₁² + g₂²/4) ~ χ²(2), g₁ the skewness and g₂ the excess
      kurtosis.  A rejection is "a problem" when |g₁| > 1 or g₂ > 2, "worth a
      look" when |g₁| > 0.5 or |g₂| > 1, and otherwise "fine" above 100 rows
      (a trivial departure) but "worth a look" up to 100 rows ("a problem" at
      p < 0.001).
    * Constant variance — studentised Breusch-Pagan (Koenker 1981):
      LM = n·R² of eᵢ² on the design ~ χ²(k − 1), graded like RESET with
      f² = R²/(1 − R²).
    * Independence — Durbin-Watson d = Σ(eᵢ − eᵢ₋₁)²/Σeᵢ², only when
      ``time_ordered``; fine inside 1.5-2.5, a problem outside 1-3, worth a
      look between (common practice).
    * Multicollinearity — VIFⱼ = 1/(1 − R²ⱼ) per column, GVIF^(1/df) per term
      (Fox & Monette 1992): worth a look above 10, a problem above 100 (common
      practice); the condition number of the design with columns centred and
      scaled to unit length: worth a look above 30, a problem above 100
      (Belsley, Kuh & Welsch 1980).
    * Influence — Cook's distance Dᵢ: a problem above the median of
      F(k, n − k) (Cook & Weisberg 1982), worth a look above its 20th
      percentile (Kutner et al. 2005) or when more rows exceed the 4/n
      screening cut-off than normal errors explain; leverage hᵢᵢ: a problem
      above 0.5, worth a look above 0.2 (Huber 1981), each only when also
      above the 2k/n screening cut-off (Hoaglin & Welsch 1978).  At most ten
      rows are named per check, largest first, by the identifier column when
      intake found one, otherwise by data row of the file counting from 1.

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
    from .rank import RANK_TOLERANCE, _least_squares

    # The rank test runs on the centred, unit-length columns, never on the raw design.
    fit = _least_squares(design_w, y_w)
    fitted_w, resid, hat = fit.fitted, fit.residuals, fit.hat
    if fit.dependent >= 0:
        names = ["intercept"] + list(labels)
        before = ", ".join(names[:fit.dependent]) or "nothing"
        raise SearchError(
            f"the model's column {names[fit.dependent]!r} is a linear combination of {before} on these {n} "
            f"rows even after centring and scaling the columns (the part outside their span is at most "
            f"{RANK_TOLERANCE:g} of its length); the model ({', '.join(labels)}) cannot be checked — drop "
            "that term or one it depends on")
    rss = float(resid @ resid)
    robust_se = _hc3(fit.basis, fit.cov_root, resid, hat)
    studentized, cooks = _influence(resid, hat, n, k, rss)
    per_column, term_vif, condition = _vif_tables(x, labels, owners)
    rows_named, namer = _row_namer(candidates, n)
    cooks_check, leverage_check, flagged = _influence_checks(hat, cooks, studentized, n, k, rss, namer, rows_named)
    outliers = _outlier_rows(studentized, n, k, alpha, namer, rows_named)
    checks = (
        _reset(design_w, y_w, fitted_w, rss, alpha, basis=fit.basis,
               root=None if candidates.weights is None else root),
        _shapiro(resid, alpha, outliers),
        _jarque_bera(resid, alpha, outliers),
        _breusch_pagan(design_w, resid, fitted_w, alpha, basis=fit.basis),
        _durbin_watson(resid, time_ordered),
        _vif_check(term_vif),
        _condition_check(condition, x.shape[1]),
        leverage_check,
        cooks_check,
    )
    if checks[0].level not in (FINE, None, NOT_ASSESSED):  # the mean bends: say along which term, and what next
        pointer = _bend_pointer(candidates, subset, design_w, y_w, None if candidates.weights is None else root)
        if pointer:
            import dataclasses

            reset = checks[0]
            checks = (dataclasses.replace(reset, remedy=f"{reset.remedy} {pointer}" if reset.remedy else pointer),
                      ) + checks[1:]
    offer = None
    if checks[3].level not in (FINE, None, NOT_ASSESSED):
        offer = _weighted_offer(candidates, subset, design, y, resid, labels)
    # columns with more than two distinct values (a value other than the smallest and the largest): no sort
    numeric_columns = {label: x[:, j] for j, label in enumerate(labels)
                       if np.any((x[:, j] != x[:, j].min()) & (x[:, j] != x[:, j].max()))}
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
        rows_named=rows_named,
        robust_se=robust_se,
        weighted_offer=offer,
    )
