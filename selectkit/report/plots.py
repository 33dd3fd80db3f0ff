"""Figures of the report, described as :class:`~selectkit.report.chart.Chart` objects.

Every function returns a chart (:func:`check_figures` a list of
:class:`CheckFigure`, each with its question and its check's verdict).  The
report draws them as inline SVG (:meth:`Chart.to_svg`, a few milliseconds each
at any number of rows); :meth:`Chart.to_matplotlib` gives the same figure as a
matplotlib one for a notebook.  Scatters hold at most :data:`MAX_POINTS` rows
(every k-th row, said in the panel) and smoothers are binned means, so a
figure costs the same at any n.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from .chart import Chart

__all__ = [
    "criterion_by_size",
    "variable_support",
    "CHECK_FIGURES",
    "CheckFigure",
    "check_figures",
    "mean_follows_terms",
    "term_forms",
    "term_components",
    "TermComponent",
    "error_shape",
    "spread_by_fitted",
    "row_influence",
    "residuals_vs_terms",
]

_INK = "#24507a"
_ACCENT = "#c0392b"
_MUTED = "#8a8f98"


def _label(criterion: str) -> str:
    return {"adj_r2": "adjusted R²", "cv_mse": "CV mean squared error", "holdout_mse": "held-out MSE",
            "press": "PRESS", "cp": "Mallows' Cp"}.get(criterion, criterion.upper())


def criterion_by_size(shortlist, *, criterion=None) -> Chart:
    """Best value of the criterion among pooled models of each size (number of terms).

    Parameters
    ----------
    shortlist : selectkit.rank.Shortlist
    criterion : str, optional
        Column of ``shortlist.scored`` to plot; defaults to the ranking criterion.
    """
    from ..criteria import LOWER_IS_BETTER

    criterion = criterion or shortlist.criterion
    scored = shortlist.scored
    lower = LOWER_IS_BETTER.get(criterion, True)
    values = scored[criterion].to_numpy(dtype=float)
    sizes = scored["n_terms"].to_numpy()
    chart = Chart(6.0, 4.0)
    panel = chart.panel(title=f"Best {_label(criterion)} at each model size", title_size=10, integer_x=True,
                        xlabel="number of terms (intercept not counted)", legend=True, legend_size=8,
                        ylabel=_label(criterion) + (" (lower is better)" if lower else " (higher is better)"))
    by_size = {}
    for size, value in zip(sizes, values):
        if np.isfinite(value):
            current = by_size.get(size)
            if current is None or (value < current if lower else value > current):
                by_size[size] = value
    if by_size:
        xs = sorted(by_size)
        ys = [by_size[x] for x in xs]
        finite = np.isfinite(values)
        panel.points(sizes[finite], values[finite], color=_MUTED, alpha=0.5, label="every pooled model")
        panel.line(xs, ys, marker="o", label="best of each size")
        best = int(np.argmin(ys) if lower else np.argmax(ys))
        panel.points([xs[best]], [ys[best]], color=_ACCENT, size=10.0, hollow=True, line_width=2.0,
                     label="best overall")
    else:
        panel.notes.append(f"no model has a {_label(criterion)} value")
    return chart


def variable_support(shortlist, *, top=25) -> Chart:
    """Horizontal bars: summed model weight of the pooled models holding each variable."""
    support = shortlist.variable_support.head(top)
    names = [str(v) for v in support["variable"]][::-1]
    height = max(2.0, 0.28 * len(support) + 1.0)
    values = support["support"].to_numpy(dtype=float)[::-1]
    chart = Chart(6.0, height)
    panel = chart.panel(title="Support for each variable across the pooled models", title_size=10,
                        categories=names, xlim=(0.0, 1.0),
                        xlabel=f"summed {shortlist.weight_criterion.upper()} weight of models holding the variable")
    panel.hbars(values, colors=[_INK if v >= 0.5 else _MUTED for v in values])
    panel.vline(0.5, color=_MUTED, dash=":")
    return chart


#: Most points drawn in one scatter; larger data are thinned to every k-th row (deterministic).  Two
#: thousand dots show a cloud's shape as well as more do, and keep an SVG panel near 25 kB (our choice).
MAX_POINTS = 2000


#: Most vertices of a smooth curve or band (a fitted form, a normal band): they bend slowly, so a few
#: hundred vertices draw them as well as one per row (our choice).
LINE_POINTS = 250


def _thin(count: int, cap: int) -> np.ndarray:
    """Row positions kept when at most ``cap`` of ``count`` points are drawn: every k-th row."""
    if count <= cap:
        return np.arange(count)
    return np.arange(0, count, int(np.ceil(count / cap)))


def _scatter(panel, x, y, *, color=_INK, alpha=0.7, label=None):
    """The points ``(x, y)``, thinned to :data:`MAX_POINTS` with a note saying so."""
    keep = _thin(len(x), MAX_POINTS)
    panel.points(np.asarray(x, float)[keep], np.asarray(y, float)[keep], color=color, alpha=alpha, label=label)
    if len(keep) < len(x):
        panel.notes.append(f"every {int(np.ceil(len(x) / MAX_POINTS))}th row shown")


def _smooth_line(panel, x, y, *, bins=None, dash="-", label=None, order=None):
    """A smoother of the points: the mean of ``y`` in groups of about equal size by increasing ``x``.

    Binned means (a regressogram; common practice, our choice over a local
    regression smoother) cost one sort whatever the number of rows.  The
    number of groups is ``bins`` or, by default, about one per 8 rows between
    5 and :data:`SMOOTHER_BINS`.  ``order``: the stable sorting order of x,
    when the caller holds it.  Returns the ``(x, y)`` of the means drawn
    (None when too few points).
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.all():
        order = None
        x, y = x[ok], y[ok]
    if len(x) < 10 or np.ptp(x) <= 0:
        return None
    count = bins or int(min(SMOOTHER_BINS, max(5, len(x) // 8)))
    order = np.argsort(x, kind="stable") if order is None else order
    groups = [g for g in np.array_split(order, count) if g.size]
    xs, ys = np.array([x[g].mean() for g in groups]), np.array([y[g].mean() for g in groups])
    panel.line(xs, ys, color=_ACCENT, line_width=1.2, dash=dash, label=label)
    return xs, ys


# --------------------------------------------------------------------------- figures of the checks
#
# One figure per family of checks, each titled by the question it answers and
# captioned with that check's verdict (``Diagnosis.checks``).

#: Most groups of the binned-means smoother (:func:`_smooth_line`): enough to follow a curve the fitted
#: form misses, few enough that each mean rests on many rows at large n (our own choice).
SMOOTHER_BINS = 30
#: The figures of one model's checks: key -> (title, aspect of the checks whose verdict it carries).
CHECK_FIGURES = {
    "mean": ("Does the mean follow the terms?", "linearity"),
    "forms": ("Is each numeric term in the right form?", "linearity"),
    "shape": ("Are the errors shaped like a normal sample?", "normality"),
    "spread": ("Does the spread change with the fitted value?", "constant variance"),
    "influence": ("Does any row pull the fit?", "influence"),
}
#: Verdict levels from the most to the least severe (``"not assessed"`` last).
_SEVERITY = ("a problem", "worth a look", "fine", "not assessed")
_LEVEL_INK = {"a problem": _ACCENT, "worth a look": "#b9770e", "fine": "#1e7b4a", "not assessed": _MUTED}
_CHECK_LABEL = {"reset": "RESET", "shapiro_wilk": "Shapiro-Wilk", "jarque_bera": "Jarque-Bera",
                "breusch_pagan": "Breusch-Pagan", "cooks_distance": "Cook's distance", "leverage": "Leverage",
                "durbin_watson": "Durbin-Watson", "vif": "VIF", "condition_number": "Condition number"}


@dataclass(frozen=True, eq=False)
class CheckFigure:
    """One figure of a model's checks.

    Attributes
    ----------
    key : str
        One of :data:`CHECK_FIGURES` (``mean``, ``forms``, ``shape``, ``spread``, ``influence``).
    title : str
        The question the figure answers (also the figure's title).
    level : str
        The most severe level among the checks of its aspect: ``"a problem"``,
        ``"worth a look"``, ``"fine"`` or ``"not assessed"``.
    caption : str
        Title, level, each check's verdict sentence and how to read the figure.
    chart : selectkit.report.chart.Chart
        The figure's description (``chart.to_svg()`` for a page).
    figure : matplotlib.figure.Figure
        The same figure drawn by matplotlib (imported then), a new one at each access.
    """

    key: str
    title: str
    level: str
    caption: str
    chart: Chart

    @property
    def figure(self):
        return self.chart.to_matplotlib()


def _aspect_verdict(diagnosis, aspect):
    """(level, text): the most severe level of the checks of ``aspect`` and their verdicts in one line."""
    checks = [c for c in diagnosis.checks if c.aspect == aspect]
    if not checks:
        return "not assessed", "No check of this aspect was run."
    level = min((c.level for c in checks), key=_SEVERITY.index)
    text = " ".join(f"{_CHECK_LABEL.get(c.name, c.name)} ({c.level}): {c.verdict}" for c in checks)
    return level, text


def _titled(chart, diagnosis, key):
    """Put the question and its check's level on top of the chart; returns the level."""
    title, aspect = CHECK_FIGURES[key]
    level, _ = _aspect_verdict(diagnosis, aspect)
    chart.title = f"{title}   check: {level}"
    chart.title_color = _LEVEL_INK.get(level, _INK)
    return level


def _bins(x, count):
    """Row positions of ``count`` groups of about equal size, by increasing ``x`` (stable order)."""
    order = np.argsort(x, kind="stable")
    return [b for b in np.array_split(order, count) if b.size >= 2]


def _bin_count(n):
    return int(min(12, max(3, n // 15)))


def mean_follows_terms(diagnosis):
    """Residuals against fitted values with the mean residual of groups of rows by fitted value.

    The rows are split, by fitted value, into groups of about equal size
    (between 3 and 12 groups, about 15 rows or more each); each group's mean
    residual is drawn with ±2 standard errors (s/√m, s the group's standard
    deviation).  When the mean follows the terms every bar straddles zero; a
    run of bars on one side, or a bend, is the curvature that RESET (Ramsey
    1969) tests for.  With row weights the values are on the √w scale.
    """
    chart = Chart(6.0, 3.8)
    panel = chart.panel(xlabel="fitted value", ylabel="residual (observed − fitted)", legend=True)
    fitted, resid = np.asarray(diagnosis.fitted, float), np.asarray(diagnosis.residuals, float)
    _scatter(panel, fitted, resid, color=_MUTED, alpha=0.45, label="a row")
    panel.hline(0.0, color=_INK)
    centres, means, spans = [], [], []
    for group in _bins(fitted, _bin_count(len(fitted))):
        centres.append(float(np.mean(fitted[group])))
        means.append(float(np.mean(resid[group])))
        spans.append(2.0 * float(np.std(resid[group], ddof=1)) / np.sqrt(group.size))
    if centres:
        means, spans = np.array(means), np.array(spans)
        panel.errorbar(centres, means, means - spans, means + spans, marker="s",
                       label="mean residual of a group, ±2 standard errors")
    _titled(chart, diagnosis, "mean")
    return chart


def _blom_quantiles(n):
    """Expected standard normal order statistics by Blom's (1958) positions (i − 3/8)/(n + 1/4)."""
    return stats.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))


def error_shape(diagnosis):
    """Two views of the studentised residuals' shape against the normal one.

    Left: their histogram (density scale) with the standard normal density
    over it.  Right: each ordered residual's distance from its normal
    expectation (Blom 1958 positions), with the pointwise 95 % band of that
    distance for a normal sample of the same size: the i-th smallest of n
    standard normal values is Φ⁻¹(U₍ᵢ₎) with U₍ᵢ₎ ~ Beta(i, n − i + 1), so
    the band is Φ⁻¹ of that Beta's 2.5 % and 97.5 % points.  Points leaving
    the band at the ends are heavy or light tails; a tilt is skewness.
    """
    chart = Chart(8.0, 3.6, columns=2)
    left = chart.panel(title="Their histogram and the normal curve", xlabel="studentised residual",
                       ylabel="density", legend=True)
    right = chart.panel(title="Each ordered residual against its normal expectation", legend=True,
                        xlabel="expected value for a normal sample", ylabel="ordered residual − expected value")
    r = np.sort(np.asarray(diagnosis.studentized, float)[np.isfinite(diagnosis.studentized)])
    n = r.shape[0]
    if n:
        edges = np.histogram_bin_edges(r, bins=int(np.clip(np.sqrt(n), 5, 40)))
        counts, _ = np.histogram(r, bins=edges, density=True)
        left.bars(edges[:-1], np.diff(edges), counts)
        grid = np.linspace(min(edges[0], -3.5), max(edges[-1], 3.5), 200)
        left.line(grid, stats.norm.pdf(grid), color=_ACCENT, line_width=1.4, label="standard normal density")
        expected = _blom_quantiles(n)
        keep = _thin(n, LINE_POINTS)
        position = np.arange(1, n + 1)[keep]
        low = stats.norm.ppf(stats.beta.ppf(0.025, position, n - position + 1)) - expected[keep]
        high = stats.norm.ppf(stats.beta.ppf(0.975, position, n - position + 1)) - expected[keep]
        right.band(expected[keep], low, high, label="95 % band of a normal sample")
        right.hline(0.0)
        _scatter(right, expected, r - expected)
    _titled(chart, diagnosis, "shape")
    return chart


def spread_by_fitted(diagnosis):
    """Size of the studentised residuals along the fitted values, group by group.

    Points are |rᵢ|, the absolute internally studentised residuals.  The rows
    are split by fitted value into groups as in :func:`mean_follows_terms`;
    each group shows its root mean square √(Σrᵢ²/m) with the 95 % interval
    √(Σrᵢ²/χ²₀.₉₇₅,ₘ) to √(Σrᵢ²/χ²₀.₀₂₅,ₘ) (rᵢ treated as normal with a
    common variance).  Constant variance puts every group near 1 (the dotted
    line); a trend is what the Breusch-Pagan test (Koenker 1981 form) detects.
    """
    chart = Chart(6.0, 3.8)
    panel = chart.panel(xlabel="fitted value", ylabel="|studentised residual|", ylim=(0.0, None), legend=True)
    fitted = np.asarray(diagnosis.fitted, float)
    r = np.asarray(diagnosis.studentized, float)
    finite = np.isfinite(r)
    fitted, r = fitted[finite], r[finite]
    _scatter(panel, fitted, np.abs(r), color=_MUTED, alpha=0.45)
    panel.hline(1.0, color=_INK, dash=":", label="the same spread everywhere")
    centres, sizes, lows, highs = [], [], [], []
    for group in _bins(fitted, _bin_count(len(fitted))):
        total, m = float(np.sum(r[group] ** 2)), group.size
        centres.append(float(np.mean(fitted[group])))
        sizes.append(np.sqrt(total / m))
        lows.append(np.sqrt(total / stats.chi2.ppf(0.975, m)))
        highs.append(np.sqrt(total / stats.chi2.ppf(0.025, m)))
    if centres:
        panel.errorbar(centres, sizes, lows, highs, marker="D", label="root mean square of a group, 95 % interval")
    _titled(chart, diagnosis, "spread")
    return chart


#: Most rows drawn as stems in an influence panel: the largest of those above the screening cut-off.
MAX_STEMS = 300


def _stems(panel, values, limit, names, what):
    """Stems from zero for the rows above ``limit`` (the largest :data:`MAX_STEMS`); names the largest.

    The rows below the screening cut-off are not drawn one by one (at 10⁶ rows
    they were a solid block that cost most of the report); a shaded band up to
    the largest of them shows where they lie.
    """
    n = values.shape[0]
    finite = np.isfinite(values)
    top = float(np.max(values[finite])) if finite.any() else 1.0
    shown = np.where(finite, values, top * 1.1 if top > 0 else 1.0)  # hᵢᵢ = 1: Dᵢ infinite, drawn at the top
    above = np.flatnonzero(~(values <= limit))
    ranked = above[np.lexsort((above, -shown[above]))]
    keep = np.sort(ranked[:MAX_STEMS])
    below = values[finite & (values <= limit)]
    if below.size:
        panel.band([1, n], [0.0, 0.0], [float(below.max())] * 2, label=f"{below.size} rows below the screening cut-off")
    panel.stems(keep + 1, shown[keep])
    named = ranked[:8]
    panel.labels(named + 1, shown[named], [names.get(int(row), int(row) + 1) for row in named])
    panel.xlim = (0, n + 1)
    panel.xlabel = ("row, in the order used (counting from 1)"
                    + (f"; the {MAX_STEMS} largest of {above.size} above the cut-off drawn"
                       if above.size > MAX_STEMS else ""))
    panel.ylabel = what
    return max(top, 0.0)


def _cut_lines(panel, top, lines):
    """Draw the horizontal cut-offs below ``1.25·top``; list the others in the legend."""
    ceiling = max(top * 1.25, min(value for value, _, _ in lines) * 1.2)
    beyond = []
    for value, style, label in lines:
        if np.isfinite(value) and value <= ceiling:
            panel.hline(value, color=style[0], dash=style[1], line_width=0.9, label=label)
        elif np.isfinite(value):
            beyond.append(label if ":" in label else f"{label} = {value:.3g}")
    panel.ylim = (0.0, ceiling)
    for label in beyond:  # a legend entry without a mark: the cut-off is above every row, not drawn
        panel.key(f"above every row, not drawn: {label}")
    panel.legend, panel.legend_size = True, 6.5


def row_influence(diagnosis):
    """Cook's distance and leverage of each row, with the cut-offs the influence checks use.

    Left: Cook's distance Dᵢ (Cook 1977) by row, with the 4/n screening
    cut-off (common practice), the 20th percentile of F(k, n − k) (Kutner et
    al. 2005) and its median (Cook & Weisberg 1982).  Right: leverage hᵢᵢ by
    row with the 2k/n screening cut-off (Hoaglin & Welsch 1978) and Huber's
    (1981) 0.2 and 0.5.  Rows above the screening cut-off are red and the
    largest are named as the verdicts name them (``Diagnosis.flagged_rows``).
    """
    from ..diagnostics import (
        COOKS_LOOK_PERCENTILE,
        COOKS_PROBLEM_PERCENTILE,
        LEVERAGE_LOOK,
        LEVERAGE_PROBLEM,
    )

    n, k = diagnosis.n, diagnosis.k
    flagged = diagnosis.flagged_rows
    names = (dict(zip(flagged["row"].astype(int), flagged["name"].astype(str)))
             if flagged is not None and "name" in flagged else {})
    chart = Chart(8.0, 3.6, columns=2)
    left = chart.panel(title="How much each row moves the fit")
    right = chart.panel(title="How far each row sits from the others in the terms")
    cooks = np.asarray(diagnosis.cooks_distance, float)
    top = _stems(left, cooks, 4.0 / n, names, "Cook's distance")
    lines = [(4.0 / n, (_MUTED, ":"), f"4/n = {4.0 / n:.3g} (screening)")]
    if n > k:
        lines += [(float(stats.f.ppf(COOKS_LOOK_PERCENTILE, k, n - k)), ("#b9770e", "--"),
                   f"F({k}, {n - k}) 20th percentile"),
                  (float(stats.f.ppf(COOKS_PROBLEM_PERCENTILE, k, n - k)), (_ACCENT, "-"),
                   f"F({k}, {n - k}) median")]
    _cut_lines(left, top, lines)
    hat = np.asarray(diagnosis.leverage, float)
    top = _stems(right, hat, 2.0 * k / n, names, "leverage")
    _cut_lines(right, min(top, 1.0), [(2.0 * k / n, (_MUTED, ":"), f"2k/n = {2.0 * k / n:.3g} (screening)"),
                                      (LEVERAGE_LOOK, ("#b9770e", "--"), f"Huber (1981): {LEVERAGE_LOOK:g}"),
                                      (LEVERAGE_PROBLEM, (_ACCENT, "-"), f"Huber (1981): {LEVERAGE_PROBLEM:g}")])
    _titled(chart, diagnosis, "influence")
    return chart


@dataclass(frozen=True, eq=False)
class TermComponent:
    """The component-plus-residual values of one numeric term.

    Attributes
    ----------
    term : str
        The term's name (``log(light)``).
    source : str
        Its source variable (``light``).
    x : ndarray, shape (n,)
        The source variable on its own scale when the candidates carry their
        dataset, otherwise the term's own column (``on_source_scale`` False).
    component : ndarray, shape (n,)
        bⱼ·fⱼ(xᵢ), the term's fitted contribution.
    partial : ndarray, shape (n,)
        eᵢ + bⱼ·fⱼ(xᵢ), the raw residual plus the contribution.
    coefficient : float
        bⱼ; 1 for a spline, whose part is the sum of its columns times their coefficients.
    on_source_scale : bool
    band : ndarray, shape (n,), optional
        Standard error of the fitted part at each row, √(xⱼᵀ Σⱼ xⱼ) with Σⱼ the
        estimated covariance of the term's coefficients (σ̂²(XᵀX)⁻¹ restricted
        to them): the pointwise band drawn as ±2 of it.
    """

    term: str
    source: str
    x: np.ndarray
    component: np.ndarray
    partial: np.ndarray
    coefficient: float
    on_source_scale: bool
    band: np.ndarray | None = None


def term_components(diagnosis, candidates):
    """Component-plus-residual values of every numeric term of the diagnosed model.

    The model is refitted by least squares on the candidate columns (weighted
    when the candidates carry row weights, with the weights' square roots);
    eᵢ = yᵢ − ŷᵢ are the raw residuals.  Categorical blocks and interactions
    are skipped.

    Returns
    -------
    components : list of TermComponent
    skipped : list of str
        Names of the terms not drawn (blocks and interactions).
    """
    from ..rank import _design, _least_squares

    subset = tuple(diagnosis.subset)
    design, entries = _design(candidates, subset)
    X = design.to_numpy(dtype=float)
    y = np.asarray(candidates.y, dtype=float)
    if candidates.weights is not None:
        root = np.sqrt(np.asarray(candidates.weights, dtype=float))
        fit = _least_squares(X * root[:, None], y * root)
    else:
        fit = _least_squares(X, y)
    resid = y - X @ fit.coef
    dof = X.shape[0] - X.shape[1]
    wresid = resid if candidates.weights is None else resid * root
    sigma2 = float(wresid @ wresid) / dof if dof > 0 else np.nan
    position: dict[str, list] = {}  # design column 0: intercept
    for i, (term, _, _, _) in enumerate(entries):
        position.setdefault(term, []).append(1 + i)
    dataset = getattr(candidates, "dataset", None)
    frame = getattr(dataset, "frame", None)
    components, skipped = [], []
    for index in subset:
        term = candidates.terms[index]
        if term.kind != "numeric" or (len(term.columns) != 1 and term.transform != "spline"):
            skipped.append(term.name)
            continue
        columns = position[term.name]
        if len(columns) == 1:
            b = float(fit.coef[columns[0]])
            f = X[:, columns[0]]
        else:  # a spline's block: its part is the sum of its columns times their coefficients
            b, f = 1.0, X[:, columns] @ fit.coef[columns]
        source = term.source[0] if term.source else term.name
        x, on_source = f, False
        if frame is not None and source in frame.columns and len(frame) == len(y):
            values = frame[source]
            if pd.api.types.is_numeric_dtype(values):
                x, on_source = values.to_numpy(dtype=float), True
        own = X[:, columns]
        cov = (fit.cov_root @ fit.cov_root.T)[np.ix_(columns, columns)] * sigma2
        band = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", own, cov, own), 0.0))
        components.append(TermComponent(term=term.name, source=str(source), x=x, component=b * f,
                                        partial=resid + b * f, coefficient=b, on_source_scale=on_source,
                                        band=band))
    return components, skipped


def term_forms(diagnosis, candidates, *, columns=3, components=None):
    """Component-plus-residual panels: is each numeric term's form right?

    For each numeric term bⱼ·fⱼ(x) of the model, the panel plots the source
    variable x on its own scale against the partial residual
    eᵢ + bⱼ·fⱼ(xᵢ) (Ezekiel 1924; Larsen & McCleary 1972), the raw residual
    plus the term's fitted contribution, uncentred.  The fitted form
    bⱼ·fⱼ(x) is drawn as a line over the points and a smoother of the points
    (binned means, :func:`_smooth_line`) beside it: where the
    smoother leaves the line, the data follow another form of x than the one
    fitted (a spline's fitted part is drawn the same way).  Categorical
    blocks and interactions have no single curve and are not drawn.  Without the candidates' dataset (or for a source that is not
    a numeric column of it) x is the term's own column.

    References
    ----------
    (Volumes and pages quoted from memory.)
    Ezekiel, M. (1924). A method of handling curvilinear correlation for any
    number of variables. J. Amer. Statist. Assoc. 19(148), 431-453.
    Larsen, W. A. & McCleary, S. J. (1972). The use of partial residual plots
    in regression analysis. Technometrics 14(3), 781-790.

    ``components``: what :func:`term_components` gives for this model, when
    the caller holds it (the refit is not made again).

    Returns
    -------
    Chart or None
        None when the model has no numeric term.
    """
    if components is None:
        components, _ = term_components(diagnosis, candidates)
    if not components:
        return None
    count = len(components)
    ncols = min(columns, count)
    nrows = int(np.ceil(count / ncols))
    chart = Chart(3.3 * ncols, 2.9 * nrows + 0.4, columns=ncols)
    for i, part in enumerate(components):
        panel = chart.panel(title=part.term, label_size=8, legend=i == 0, ylabel="residual + term's part",
                            xlabel=part.source if part.on_source_scale else f"{part.term} (the term's own scale)")
        _scatter(panel, part.x, part.partial, alpha=0.45)
        order = np.argsort(part.x, kind="stable")
        line = order[_thin(order.size, LINE_POINTS)]
        panel.line(part.x[line], part.component[line], line_width=1.8, label="fitted form")
        if part.band is not None and np.all(np.isfinite(part.band[line])):
            panel.band(part.x[line], part.component[line] - 2 * part.band[line],
                       part.component[line] + 2 * part.band[line], color=_INK, alpha=0.15,
                       label="±2 standard errors")
        _smooth_line(panel, part.x, part.partial, dash="--", label="smoother of the points", order=order)
    _titled(chart, diagnosis, "forms")
    return chart


_READING = {
    "mean": "Points are the residuals against the fitted values; the squares are the mean residual of groups "
            "of rows by fitted value, with ±2 standard errors. When the mean follows the terms the bars "
            "straddle zero; a run on one side or a bend is curvature the terms miss.",
    "forms": "Each panel plots, against the source variable on its own scale, the residual plus that term's "
             "fitted part (component plus residual: Ezekiel 1924; Larsen & McCleary 1972); the axis says when "
             "it is the term's own scale instead. The solid line is "
             "the fitted form, the dashed curve a smoother of the points: where the two part, another form "
             "of that variable may fit better.",
    "shape": "Left, the studentised residuals' histogram under the normal curve; right, each ordered residual's "
             "distance from its expected value in a normal sample, inside the band a normal sample of this "
             "size stays in 95 % of the time at each point. Leaving the band at the ends means heavy or "
             "light tails; a tilt means skew.",
    "spread": "Points are the sizes of the studentised residuals; the diamonds are each group's root mean "
              "square with a 95 % interval. With constant variance they sit near 1; a trend means the spread "
              "grows or shrinks with the fitted value.",
    "influence": "Cook's distance and leverage with the cut-offs the checks use; each row above the "
                 "screening cut-off is a red stem and the largest are named as in the verdicts; the grey band "
                 "reaches the largest of the rows below it. Rows are shown for a look, never removed.",
}


def check_figures(diagnosis, candidates=None):
    """The figures of one model's checks, each answering one question with that check's verdict.

    Parameters
    ----------
    diagnosis : selectkit.diagnostics.Diagnosis
    candidates : CandidateSet, optional
        Needed for the component-plus-residual panels (:func:`term_forms`);
        without it they are left out.

    Returns
    -------
    list of CheckFigure
        In the order of :data:`CHECK_FIGURES`: ``mean``, ``forms`` (when the
        model has a numeric term and ``candidates`` is given), ``shape``,
        ``spread``, ``influence``.  Each caption holds the figure's question,
        the level of its checks, their verdict sentences and how to read it.

    Examples
    --------
    >>> import numpy as np
    >>> from selectkit.diagnostics import diagnose
    >>> from tests.factories import make_candidates
    >>> rng = np.random.default_rng(0)
    >>> x = rng.uniform(1, 100, size=(80, 1)); y = 3 + 2 * np.log(x[:, 0]) + rng.normal(0, 0.3, 80)
    >>> cands = make_candidates(x, y)
    >>> [(item.key, item.level) for item in check_figures(diagnose(cands, (0,)), cands)][:2]
    [('mean', 'a problem'), ('forms', 'a problem')]
    """
    draw = {"mean": mean_follows_terms, "shape": error_shape, "spread": spread_by_fitted,
            "influence": row_influence}
    out = []
    for key, (title, aspect) in CHECK_FIGURES.items():
        extra = ""
        if key == "forms":
            if candidates is None:
                continue
            components, skipped = term_components(diagnosis, candidates)
            figure = term_forms(diagnosis, candidates, components=components)
            if figure is None:
                continue
            if skipped:
                extra = (" Not drawn (categorical blocks and interactions have no single curve): "
                         + ", ".join(skipped) + ".")
        else:
            figure = draw[key](diagnosis)
        level, verdicts = _aspect_verdict(diagnosis, aspect)
        weighted = (" With row weights, residuals and fitted values are on the √w scale."
                    if candidates is not None and candidates.weights is not None and key != "forms" else "")
        step = int(np.ceil(diagnosis.n / MAX_POINTS))
        thinned = (f" The points are every {step}th of the {diagnosis.n:,} rows (at most {MAX_POINTS:,} drawn); "
                   "the group means, bands and checks use every row."
                   if step > 1 and key in ("mean", "forms", "shape", "spread") else "")
        caption = f"{title} Check: {level}. {verdicts} {_READING[key]}{extra}{weighted}{thinned}"
        out.append(CheckFigure(key=key, title=title, level=level, caption=caption, chart=figure))
    return out


def residuals_vs_terms(diagnosis, *, columns=3):
    """Residuals against each numeric column of the model (a bend points at the term to transform).

    Returns None when the model has no numeric column with more than two values.
    """
    frame = diagnosis.term_values
    if frame.shape[1] == 0:
        return None
    count = frame.shape[1]
    ncols = min(columns, count)
    chart = Chart(3.0 * ncols, 2.6 * int(np.ceil(count / ncols)), columns=ncols)
    for name in frame.columns:
        panel = chart.panel(xlabel=str(name), ylabel="residual", label_size=8)
        x = frame[name].to_numpy(dtype=float)
        _scatter(panel, x, diagnosis.residuals)
        panel.hline(0.0)
        _smooth_line(panel, x, diagnosis.residuals)
    return chart
