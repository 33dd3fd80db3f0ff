"""Figures of the report, drawn with matplotlib's object API (no pyplot, no global state).

Every function returns a :class:`matplotlib.figure.Figure` backed by the Agg
canvas, so it works without a display (:func:`check_figures` a list of them,
each with its question and its check's verdict); :func:`to_png_base64` turns a figure
into the text of a ``data:image/png`` URI for the self-contained HTML report.
"""

from __future__ import annotations

import base64
import io
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

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
    "to_png_base64",
]

_INK = "#24507a"
_ACCENT = "#c0392b"
_MUTED = "#8a8f98"


def _plain(text) -> str:
    """A user string shown as typed: ``$`` would otherwise start matplotlib's math mode."""
    return str(text).replace("$", r"\$")


#: Fixed margins of every figure (fractions of its size).  A layout engine ("constrained", "tight")
#: measures every text box on each draw and doubled the cost of a figure; fixed margins cost nothing.
_MARGINS = dict(left=0.1, right=0.97, bottom=0.15, top=0.84, wspace=0.32, hspace=0.55)


def _figure(width=6.0, height=4.0, **margins):
    """A figure on the Agg canvas with fixed margins (``margins`` override :data:`_MARGINS`)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    figure = Figure(figsize=(width, height))
    FigureCanvasAgg(figure)
    figure.subplots_adjust(**{**_MARGINS, **margins})
    return figure


def to_png_base64(figure, *, dpi=80) -> str:
    """The figure as base64 PNG text (for ``<img src="data:image/png;base64,...">``)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, metadata={"Software": None})
    return base64.b64encode(buffer.getvalue()).decode("ascii")


def _label(criterion: str) -> str:
    return {"adj_r2": "adjusted R²", "cv_mse": "CV mean squared error", "holdout_mse": "held-out MSE",
            "press": "PRESS", "cp": "Mallows' Cp"}.get(criterion, criterion.upper())


def criterion_by_size(shortlist, *, criterion=None):
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
    figure = _figure(6.0, 4.0, left=0.14, top=0.92, bottom=0.12)
    axes = figure.add_subplot()
    by_size = {}
    for size, value in zip(sizes, values):
        if np.isfinite(value):
            current = by_size.get(size)
            if current is None or (value < current if lower else value > current):
                by_size[size] = value
    if by_size:
        xs = sorted(by_size)
        ys = [by_size[x] for x in xs]
        axes.scatter(sizes[np.isfinite(values)], values[np.isfinite(values)], s=10, color=_MUTED,
                     alpha=0.5, label="every pooled model")
        axes.plot(xs, ys, marker="o", color=_INK, label="best of each size")
        best = int(np.argmin(ys) if lower else np.argmax(ys))
        axes.scatter([xs[best]], [ys[best]], s=90, facecolors="none", edgecolors=_ACCENT, linewidths=2,
                     label="best overall", zorder=3)
        axes.legend(frameon=False, fontsize=8)
    else:
        axes.text(0.5, 0.5, f"no model has a {_label(criterion)} value", ha="center", va="center",
                  transform=axes.transAxes)
    from matplotlib.ticker import MaxNLocator

    axes.xaxis.set_major_locator(MaxNLocator(integer=True))
    axes.set_xlabel("number of terms (intercept not counted)")
    axes.set_ylabel(_label(criterion) + (" (lower is better)" if lower else " (higher is better)"))
    axes.set_title(f"Best {_label(criterion)} at each model size", fontsize=10)
    return figure


def variable_support(shortlist, *, top=25):
    """Horizontal bars: summed model weight of the pooled models holding each variable."""
    support = shortlist.variable_support.head(top)
    names = [_plain(v) for v in support["variable"]][::-1]
    height = max(2.0, 0.28 * len(support) + 1.0)
    # room on the left for the longest name (about 0.075 in per character at 8 pt), at most half the width
    left = min(0.5, (0.2 + 0.075 * max((len(v) for v in names), default=4)) / 6.0)
    figure = _figure(6.0, height, left=left, bottom=0.55 / height, top=1.0 - 0.35 / height)
    axes = figure.add_subplot()
    values = support["support"].to_numpy(dtype=float)[::-1]
    axes.barh(range(len(names)), values, color=[_INK if v >= 0.5 else _MUTED for v in values])
    axes.set_yticks(range(len(names)), names, fontsize=8)
    axes.set_xlim(0, 1)
    axes.axvline(0.5, color=_MUTED, linewidth=0.8, linestyle=":")
    axes.set_xlabel(f"summed {shortlist.weight_criterion.upper()} weight of models holding the variable")
    axes.set_title("Support for each variable across the pooled models", fontsize=10)
    return figure


#: Most points drawn in one scatter; larger data are thinned to every k-th row (deterministic).
MAX_POINTS = 5000
def _thin(count: int, cap: int) -> np.ndarray:
    """Row positions kept when at most ``cap`` of ``count`` points are drawn: every k-th row."""
    if count <= cap:
        return np.arange(count)
    return np.arange(0, count, int(np.ceil(count / cap)))


def _scatter(axes, x, y, **style):
    keep = _thin(len(x), MAX_POINTS)
    axes.scatter(np.asarray(x)[keep], np.asarray(y)[keep], s=10, color=_INK, alpha=0.7, **style)
    if len(keep) < len(x):
        axes.text(0.99, 0.01, f"every {int(np.ceil(len(x) / MAX_POINTS))}th row shown", ha="right",
                  va="bottom", fontsize=7, color=_MUTED, transform=axes.transAxes)


def _smooth_line(axes, x, y, *, bins=None):
    """A smoother of the points: the mean of ``y`` in groups of about equal size by increasing ``x``.

    Binned means (a regressogram; common practice, our choice over a local
    regression smoother) cost one sort whatever the number of rows.  The
    number of groups is ``bins`` or, by default, about one per 8 rows between
    5 and :data:`SMOOTHER_BINS`.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if len(x) < 10 or np.ptp(x) <= 0:
        return
    count = bins or int(min(SMOOTHER_BINS, max(5, len(x) // 8)))
    groups = [g for g in np.array_split(np.argsort(x, kind="stable"), count) if g.size]
    axes.plot([x[g].mean() for g in groups], [y[g].mean() for g in groups], color=_ACCENT, linewidth=1.2)


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
    figure : matplotlib.figure.Figure
    """

    key: str
    title: str
    level: str
    caption: str
    figure: object


def _legend(axes, fontsize=7, loc="upper left"):
    """A legend on a light box, readable over dense points."""
    axes.legend(fontsize=fontsize, loc=loc, frameon=True, facecolor="white", framealpha=0.85, edgecolor="none")


def _aspect_verdict(diagnosis, aspect):
    """(level, text): the most severe level of the checks of ``aspect`` and their verdicts in one line."""
    checks = [c for c in diagnosis.checks if c.aspect == aspect]
    if not checks:
        return "not assessed", "No check of this aspect was run."
    level = min((c.level for c in checks), key=_SEVERITY.index)
    text = " ".join(f"{_CHECK_LABEL.get(c.name, c.name)} ({c.level}): {c.verdict}" for c in checks)
    return level, text


def _titled(figure, diagnosis, key):
    """Put the question and its check's level on top of the figure; returns the level."""
    title, aspect = CHECK_FIGURES[key]
    level, _ = _aspect_verdict(diagnosis, aspect)
    figure.suptitle(f"{title}   check: {level}", fontsize=10, color=_LEVEL_INK.get(level, _INK))
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
    figure = _figure(6.0, 3.8)
    axes = figure.add_subplot()
    fitted, resid = np.asarray(diagnosis.fitted, float), np.asarray(diagnosis.residuals, float)
    _scatter(axes, fitted, resid, label="a row")
    axes.collections[0].set_color(_MUTED)
    axes.collections[0].set_alpha(0.45)
    axes.axhline(0.0, color=_INK, linewidth=0.8)
    centres, means, spans = [], [], []
    for group in _bins(fitted, _bin_count(len(fitted))):
        centres.append(float(np.mean(fitted[group])))
        means.append(float(np.mean(resid[group])))
        spans.append(2.0 * float(np.std(resid[group], ddof=1)) / np.sqrt(group.size))
    if centres:
        axes.errorbar(centres, means, yerr=spans, fmt="s", color=_ACCENT, markersize=5, capsize=3,
                      linewidth=1.2, label="mean residual of a group, ±2 standard errors")
        _legend(axes, fontsize=7, loc="upper left")
    axes.set_xlabel("fitted value")
    axes.set_ylabel("residual (observed − fitted)")
    _titled(figure, diagnosis, "mean")
    return figure


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
    figure = _figure(8.0, 3.6, bottom=0.2)
    left, right = figure.subplots(1, 2)
    r = np.sort(np.asarray(diagnosis.studentized, float)[np.isfinite(diagnosis.studentized)])
    n = r.shape[0]
    if n:
        edges = np.histogram_bin_edges(r, bins=int(np.clip(np.sqrt(n), 5, 40)))
        left.hist(r, bins=edges, density=True, color=_INK, alpha=0.55, edgecolor="white", linewidth=0.5)
        grid = np.linspace(min(edges[0], -3.5), max(edges[-1], 3.5), 200)
        left.plot(grid, stats.norm.pdf(grid), color=_ACCENT, linewidth=1.4, label="standard normal density")
        _legend(left, fontsize=7, loc="upper left")
        expected = _blom_quantiles(n)
        keep = _thin(n, MAX_POINTS)
        position = np.arange(1, n + 1)[keep]
        low = stats.norm.ppf(stats.beta.ppf(0.025, position, n - position + 1)) - expected[keep]
        high = stats.norm.ppf(stats.beta.ppf(0.975, position, n - position + 1)) - expected[keep]
        right.fill_between(expected[keep], low, high, color=_MUTED, alpha=0.25, linewidth=0,
                           label="95 % band of a normal sample")
        right.axhline(0.0, color=_MUTED, linewidth=0.8)
        _scatter(right, expected, r - expected)
        _legend(right, fontsize=7, loc="upper left")
    left.set_xlabel("studentised residual")
    left.set_ylabel("density")
    left.set_title("Their histogram and the normal curve", fontsize=9)
    right.set_xlabel("expected value for a normal sample")
    right.set_ylabel("ordered residual − expected value")
    right.set_title("Each ordered residual against its normal expectation", fontsize=9)
    _titled(figure, diagnosis, "shape")
    return figure


def spread_by_fitted(diagnosis):
    """Size of the studentised residuals along the fitted values, group by group.

    Points are |rᵢ|, the absolute internally studentised residuals.  The rows
    are split by fitted value into groups as in :func:`mean_follows_terms`;
    each group shows its root mean square √(Σrᵢ²/m) with the 95 % interval
    √(Σrᵢ²/χ²₀.₉₇₅,ₘ) to √(Σrᵢ²/χ²₀.₀₂₅,ₘ) (rᵢ treated as normal with a
    common variance).  Constant variance puts every group near 1 (the dotted
    line); a trend is what the Breusch-Pagan test (Koenker 1981 form) detects.
    """
    figure = _figure(6.0, 3.8)
    axes = figure.add_subplot()
    fitted = np.asarray(diagnosis.fitted, float)
    r = np.asarray(diagnosis.studentized, float)
    finite = np.isfinite(r)
    fitted, r = fitted[finite], r[finite]
    _scatter(axes, fitted, np.abs(r))
    axes.collections[0].set_color(_MUTED)
    axes.collections[0].set_alpha(0.45)
    axes.axhline(1.0, color=_INK, linewidth=0.8, linestyle=":", label="the same spread everywhere")
    centres, sizes, lows, highs = [], [], [], []
    for group in _bins(fitted, _bin_count(len(fitted))):
        total, m = float(np.sum(r[group] ** 2)), group.size
        centres.append(float(np.mean(fitted[group])))
        sizes.append(np.sqrt(total / m))
        lows.append(np.sqrt(total / stats.chi2.ppf(0.975, m)))
        highs.append(np.sqrt(total / stats.chi2.ppf(0.025, m)))
    if centres:
        sizes, lows, highs = np.array(sizes), np.array(lows), np.array(highs)
        axes.errorbar(centres, sizes, yerr=[sizes - lows, highs - sizes], fmt="D", color=_ACCENT, markersize=5,
                      capsize=3, linewidth=1.2, label="root mean square of a group, 95 % interval")
    _legend(axes, fontsize=7, loc="upper left")
    axes.set_ylim(bottom=0)
    axes.set_xlabel("fitted value")
    axes.set_ylabel("|studentised residual|")
    _titled(figure, diagnosis, "spread")
    return figure


#: Most rows drawn as stems in an influence panel: the largest of those above the screening cut-off.
MAX_STEMS = 300


def _stems(axes, values, limit, names, what):
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
        axes.fill_between([1, n], 0, float(below.max()), color=_MUTED, alpha=0.25, linewidth=0,
                          label=f"{below.size} rows below the screening cut-off")
    axes.vlines(keep + 1, 0, shown[keep], color=_ACCENT, linewidth=0.9)
    axes.scatter(keep + 1, shown[keep], s=6, color=_ACCENT)
    for row in ranked[:8]:
        axes.annotate(_plain(names.get(int(row), int(row) + 1)), (row + 1, shown[row]), fontsize=7,
                      color=_ACCENT, xytext=(2, 2), textcoords="offset points")
    axes.set_xlim(0, n + 1)
    axes.set_xlabel("row, in the order used (counting from 1)"
                    + (f"; the {MAX_STEMS} largest of {above.size} above the cut-off drawn"
                       if above.size > MAX_STEMS else ""))
    axes.set_ylabel(what)
    return max(top, 0.0)


def _cut_lines(axes, top, lines):
    """Draw the horizontal cut-offs below ``1.25·top``; list the others in a note."""
    ceiling = max(top * 1.25, min(value for value, _, _ in lines) * 1.2)
    beyond = []
    for value, style, label in lines:
        if np.isfinite(value) and value <= ceiling:
            axes.axhline(value, color=style[0], linestyle=style[1], linewidth=0.9, label=label)
        elif np.isfinite(value):
            beyond.append(label if ":" in label else f"{label} = {value:.3g}")
    axes.set_ylim(0, ceiling)
    for label in beyond:  # a legend entry without a mark: the cut-off is above every row, not drawn
        axes.plot([], [], " ", label=f"above every row, not drawn: {label}")
    _legend(axes, fontsize=6.5, loc="upper left")


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
    figure = _figure(8.0, 3.6, bottom=0.2)
    left, right = figure.subplots(1, 2)
    cooks = np.asarray(diagnosis.cooks_distance, float)
    top = _stems(left, cooks, 4.0 / n, names, "Cook's distance")
    lines = [(4.0 / n, (_MUTED, ":"), f"4/n = {4.0 / n:.3g} (screening)")]
    if n > k:
        lines += [(float(stats.f.ppf(COOKS_LOOK_PERCENTILE, k, n - k)), ("#b9770e", "--"),
                   f"F({k}, {n - k}) 20th percentile"),
                  (float(stats.f.ppf(COOKS_PROBLEM_PERCENTILE, k, n - k)), (_ACCENT, "-"),
                   f"F({k}, {n - k}) median")]
    _cut_lines(left, top, lines)
    left.set_title("How much each row moves the fit", fontsize=9)
    hat = np.asarray(diagnosis.leverage, float)
    top = _stems(right, hat, 2.0 * k / n, names, "leverage")
    _cut_lines(right, min(top, 1.0), [(2.0 * k / n, (_MUTED, ":"), f"2k/n = {2.0 * k / n:.3g} (screening)"),
                                      (LEVERAGE_LOOK, ("#b9770e", "--"), f"Huber (1981): {LEVERAGE_LOOK:g}"),
                                      (LEVERAGE_PROBLEM, (_ACCENT, "-"), f"Huber (1981): {LEVERAGE_PROBLEM:g}")])
    right.set_title("How far each row sits from the others in the terms", fontsize=9)
    _titled(figure, diagnosis, "influence")
    return figure


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


def term_forms(diagnosis, candidates, *, columns=3):
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

    Returns
    -------
    matplotlib.figure.Figure or None
        None when the model has no numeric term.
    """
    components, _ = term_components(diagnosis, candidates)
    if not components:
        return None
    count = len(components)
    ncols = min(columns, count)
    nrows = int(np.ceil(count / ncols))
    figure = _figure(3.3 * ncols, 2.9 * nrows + 0.4, left=0.1 if ncols > 1 else 0.16,
                     top=1.0 - 0.5 / (2.9 * nrows + 0.4), bottom=0.5 / (2.9 * nrows + 0.4))
    axes = np.atleast_1d(figure.subplots(nrows, ncols)).reshape(-1)
    for ax, part in zip(axes, components):
        _scatter(ax, part.x, part.partial)
        ax.collections[0].set_alpha(0.45)
        order = np.argsort(part.x, kind="stable")
        line = order[_thin(order.size, MAX_POINTS)]
        ax.plot(part.x[line], part.component[line], color=_INK, linewidth=1.8, label="fitted form")
        if part.band is not None and np.all(np.isfinite(part.band[line])):
            ax.fill_between(part.x[line], part.component[line] - 2 * part.band[line],
                            part.component[line] + 2 * part.band[line], color=_INK, alpha=0.15, linewidth=0,
                            label="±2 standard errors")
        before = len(ax.get_lines())
        _smooth_line(ax, part.x, part.partial)
        for smooth in ax.get_lines()[before:]:
            smooth.set_linestyle("--")
            smooth.set_label("smoother of the points")
        ax.set_title(_plain(part.term), fontsize=9)
        ax.set_xlabel(_plain(part.source if part.on_source_scale else f"{part.term} (the term's own scale)"),
                      fontsize=8)
        ax.set_ylabel("residual + term's part", fontsize=8)
    _legend(axes[0])
    for ax in axes[count:]:
        ax.set_visible(False)
    _titled(figure, diagnosis, "forms")
    return figure


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
            figure = term_forms(diagnosis, candidates)
            if figure is None:
                continue
            _, skipped = term_components(diagnosis, candidates)
            if skipped:
                extra = (" Not drawn (categorical blocks and interactions have no single curve): "
                         + ", ".join(skipped) + ".")
        else:
            figure = draw[key](diagnosis)
        level, verdicts = _aspect_verdict(diagnosis, aspect)
        weighted = (" With row weights, residuals and fitted values are on the √w scale."
                    if candidates is not None and candidates.weights is not None and key != "forms" else "")
        caption = f"{title} Check: {level}. {verdicts} {_READING[key]}{extra}{weighted}"
        out.append(CheckFigure(key=key, title=title, level=level, caption=caption, figure=figure))
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
    nrows = int(np.ceil(count / ncols))
    figure = _figure(3.0 * ncols, 2.6 * nrows, top=1.0 - 0.2 / (2.6 * nrows), bottom=0.45 / (2.6 * nrows))
    axes = np.atleast_1d(figure.subplots(nrows, ncols)).reshape(-1)
    for ax, name in zip(axes, frame.columns):
        x = frame[name].to_numpy(dtype=float)
        _scatter(ax, x, diagnosis.residuals)
        ax.axhline(0.0, color=_MUTED, linewidth=0.8)
        _smooth_line(ax, x, diagnosis.residuals)
        ax.set_xlabel(_plain(name), fontsize=8)
        ax.set_ylabel("residual", fontsize=8)
    for ax in axes[count:]:
        ax.set_visible(False)
    return figure
