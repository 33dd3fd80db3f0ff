"""One self-contained HTML page: settings, candidates, searches, shortlist, checks, cautions.

The page has no script and loads nothing: styles are inline and every figure
is inline SVG (:meth:`selectkit.report.chart.Chart.to_svg`), drawn without a
plotting library in a few milliseconds each.  Every string that comes from
the user or the data (column names, levels, file names, settings) passes
through :func:`html.escape`.
"""

from __future__ import annotations

import html
import math
from pathlib import Path

import numpy as np
import pandas as pd

from .. import _stages
from .._io import atomic_write_text
from . import plots
from .text import CAUTIONS

__all__ = ["render_html", "write_html"]

_STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:0;background:#f6f5f1;color:#1f2a33;line-height:1.45}
main{max-width:1080px;margin:0 auto;padding:1.5rem 1.25rem 3rem}
header.page{background:#24507a;color:#fff;padding:1.2rem 1.25rem}
header.page h1{margin:0;font-size:1.45rem;font-weight:600}
header.page p{margin:.3rem 0 0;opacity:.85}
section{background:#fff;border-radius:6px;padding:1rem 1.2rem;margin:1.1rem 0;box-shadow:0 1px 2px rgba(0,0,0,.08)}
h2{font-size:1.15rem;margin:.1rem 0 .6rem;color:#24507a}
h3{font-size:1rem;margin:1rem 0 .4rem}
table{border-collapse:collapse;font-size:.84rem;margin:.4rem 0;width:auto}
th,td{padding:.22rem .55rem;border-bottom:1px solid #e3e1da;text-align:left;vertical-align:top}
th{background:#eef2f6;font-weight:600}
td.num{text-align:right;font-variant-numeric:tabular-nums}
.scroll{overflow-x:auto}
.equation{font-family:ui-monospace,Menlo,Consolas,monospace;background:#f3f6f9;padding:.5rem .7rem;border-radius:4px;overflow-x:auto}
.ok{color:#1d7a3a;font-weight:600}.look{color:#9a6700;font-weight:600}.fail{color:#b03a2e;font-weight:600}.na{color:#7b8189}
.caution{border-left:4px solid #c0392b;background:#fdf3f1;padding:.6rem .9rem;margin:.6rem 0}
.note{color:#55606b;font-size:.88rem}
figure{margin:.6rem 0}figure svg{max-width:100%;height:auto;border:1px solid #e3e1da}
figcaption{font-size:.82rem;color:#55606b}
nav ol{columns:2;font-size:.9rem}
"""


def _e(value) -> str:
    return html.escape(str(value), quote=True)


def _fmt(value) -> str:
    if value is None or value is pd.NA:
        return "—"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if not math.isfinite(value):
            return "—"
        if value != 0 and (abs(value) < 1e-3 or abs(value) >= 1e6):
            return f"{value:.3e}"
        return f"{value:.4g}" if abs(value) < 1e4 else f"{value:.1f}"
    return str(value)


def _is_number(value) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))


def _table(frame: pd.DataFrame, *, headers=None) -> str:
    """A DataFrame as an HTML table; every header and cell escaped."""
    headers = headers or {}
    head = "".join(f"<th>{_e(headers.get(c, c))}</th>" for c in frame.columns)
    rows = []
    for record in frame.itertuples(index=False, name=None):
        cells = []
        for value in record:
            css = ' class="num"' if _is_number(value) else ""
            cells.append(f"<td{css}>{_e(_fmt(value))}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    return f'<div class="scroll"><table><thead><tr>{head}</tr></thead><tbody>{"".join(rows)}</tbody></table></div>'


def _figure(chart, caption: str) -> str:
    if chart is None:
        return ""
    return f"<figure>{chart.to_svg(namespace=False)}<figcaption>{_e(caption)}</figcaption></figure>"


def _section(anchor: str, title: str, body: str) -> str:
    return f'<section id="{anchor}"><h2>{_e(title)}</h2>{body}</section>'


# --------------------------------------------------------------------------- sections


#: How "What was asked" words each recorded setting; one not listed shows its key with spaces.
_SETTING_LABELS = {
    "data": "table", "response": "response", "predictors": "predictors considered",
    "always_include": "always in every model", "leave_out": "left out", "row_weights": "row weights from column",
    "incomplete_rows": "rows with a missing value", "keep_id_columns": "identifier-like columns kept",
    "decimal_mark": "decimal mark of the file", "forms": "forms offered",
    "fractional_polynomials": "fractional-polynomial powers", "shifts": "shift before log or square root",
    "interactions": "products of two predictors", "response_form": "form of the response",
    "prefer": "variables kept first among near-duplicates", "twin_limit": "near-duplicate limit (correlation)",
    "vif_limit": "collinearity limit (VIF)", "curvature_test": "curved forms only where the fit bends",
    "methods": "searches asked for", "methods_run": "searches run", "method_options": "settings of each search",
    "exact_limit": "largest number of terms searched exactly by auto",
    "criterion": "ranked by", "aim": "aim", "parameter_count": "parameters counted in AIC and BIC",
    "shortlist_size": "answers in the shortlist", "keep_within": "keep models within this distance of the best",
    "folds": "cross-validation folds", "time_ordered": "rows are in time order",
    "resamples": "bootstrap resamples for stability", "honest_folds": "outer folds for the honest error",
    "seed": "seed", "time_budget": "time budget", "n_rows": "rows used", "n_terms": "candidate terms",
    "selectkit_version": "selectkit version",
}
#: Words for the values of a few settings.
_SETTING_VALUES = {
    "parameter_count": {"sigma-counted": "the coefficients and the error variance (sigma-counted)",
                        "coefficients-only": "the coefficients only (coefficients-only)"},
    "incomplete_rows": {"refuse": "refused: the search stops and lists them", "drop": "dropped"},
}
#: Settings whose value 0 means the step was skipped.
_ZERO_SKIPS = ("resamples", "honest_folds")


def _setting_words(key: str, value) -> str | None:
    """One setting as a person would write it; None when it was not set (nothing to show)."""
    if value is None and key in ("twin_limit", "vif_limit"):
        return "off (every variable kept)"
    if value is None or (isinstance(value, (str, list, tuple, dict)) and len(value) == 0):
        return None
    if key == "data" and value == "<DataFrame>":
        return "a DataFrame passed in memory"
    if key in _ZERO_SKIPS and value == 0:
        return "none (skipped)"
    if key == "criterion":
        return str(value).upper() if str(value) in ("aic", "aicc", "bic", "cp", "press") else str(value)
    if key == "time_budget" and isinstance(value, (int, float)):
        return f"{value:g} seconds"
    if key == "interactions" and value is True:
        return "every pair of numeric predictors"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if key in _SETTING_VALUES and value in _SETTING_VALUES[key]:
        return _SETTING_VALUES[key][value]
    if isinstance(value, dict):  # shifts by column; settings of each search
        parts = []
        for name, inner in value.items():
            if isinstance(inner, dict):
                inside = "; ".join(f"{k} = {_setting_words(str(k), v) or 'none'}" for k, v in inner.items())
                parts.append(f"{name}: {inside or 'its defaults'}")
            else:
                parts.append(f"{name} = {_setting_words(str(name), inner) or 'none'}")
        return "; ".join(parts)
    if isinstance(value, (list, tuple)):
        return ", ".join("*".join(map(str, v)) if isinstance(v, (list, tuple)) else str(v) for v in value)
    return str(value)


def _settings_section(settings) -> str:
    if not settings:
        return "<p class=\"note\">No settings were recorded.</p>"
    rows = []
    for key, value in settings.items():
        shown = _setting_words(str(key), value)
        if shown is not None:
            rows.append({"what": _SETTING_LABELS.get(str(key), str(key).replace("_", " ")), "as asked": shown})
    if not rows:
        return "<p class=\"note\">No settings were recorded.</p>"
    return _table(pd.DataFrame(rows))


def _candidate_section(candidates) -> str:
    if candidates is None:
        return "<p class=\"note\">The candidate set was not given.</p>"
    if hasattr(candidates, "describe"):
        frame = candidates.describe()
    else:
        frame = pd.DataFrame(
            [{"term": t.name, "family": t.family, "form": t.transform, "columns": t.width,
              "status": "kept", "reason": ""} for t in candidates.terms]
            + [{"term": r.form, "family": r.family, "form": r.form, "columns": 0,
                "status": "refused", "reason": r.reason} for r in candidates.refused])
    kept = int((frame["status"] == "kept").sum()) if "status" in frame else len(frame)
    refused = len(frame) - kept
    transform = candidates.response_transform
    scale = transform.name if transform.transform != "identity" else candidates.response
    intro = (f"<p>{kept} candidate term(s) in {len({t.family for t in candidates.terms})} variable "
             f"famil{'y' if len({t.family for t in candidates.terms}) == 1 else 'ies'}; {refused} form(s) "
             f"refused, with the reason. A model holds at most one form of each variable. "
             f"Response modelled as <b>{_e(scale)}</b>.</p>")
    notes = "".join(f"<p class=\"note\">{_e(n)}</p>" for n in getattr(candidates, "notes", ()))
    dataset = getattr(candidates, "dataset", None)
    report = getattr(dataset, "report", None)
    if report is not None and report.notes:
        # What intake did with the table (columns set aside, rows dropped, warnings) comes first.
        intro = ("<p>Reading the table: " + _e(f"{report.n_rows_read} rows read, {report.n_rows_used} used.")
                 + "</p><ul>" + "".join(f"<li>{_e(note.message)}</li>" for note in report.notes) + "</ul>" + intro)
    if len(frame) > 25:
        return (intro + f"<details><summary>Show all {len(frame)} rows (kept terms, then refused forms)</summary>"
                + _table(frame) + "</details>" + notes)
    return intro + _table(frame) + notes


def _search_section(founds, shortlist) -> str:
    if not founds:
        return "<p class=\"note\">No search details were given.</p>"
    rows = []
    for f in founds:
        rows.append({
            "search": f.method,
            "models kept": len(f),
            "subsets evaluated": int(f.evaluated),
            "ruled out by a bound": int(f.pruned),
            "rank-deficient, skipped": int(f.singular),
            "proven best": "yes" if f.exact else "no (heuristic or stopped early)",
            "why it stopped": f.stopped_by,
        })
    return (_table(pd.DataFrame(rows))
            + f"<p>{len(shortlist.scored)} distinct models were pooled from these searches; a model found by "
              "several searches appears once and lists them all.</p>")


def _support_note(founds, shortlist) -> str:
    text = (f"Support is the summed {shortlist.weight_criterion.upper()} weight of the {len(shortlist.scored)} "
            "pooled models that hold the variable in any form; it is relative to that list.")
    if founds and not any(f.exact for f in founds):
        text += (" No search here was exact, so the list is the path of a heuristic search rather than every "
                 "competitive subset, and the support leans on the few models it visited.")
    return f'<p class="note">{_e(text)}</p>'


def _criterion_text(shortlist) -> str:
    weight = shortlist.weight_criterion.upper()
    extra = (" For BIC these are BIC weights: approximate probabilities of each model among those pooled, "
             "with equal prior probabilities." if shortlist.weight_criterion == "bic" else "")
    return (f"<p><b>Ranking criterion: {_e(shortlist.criterion.upper())}.</b> {_e(shortlist.criterion_reason)}</p>"
            f"<p class=\"note\">Δ is the distance from the best model on that criterion. The weight of a model "
            f"is exp(−Δ/2) normalised over the pooled models, from {_e(weight)}.{_e(extra)} Models within "
            "Δ ≤ 2 of the best are marked as having comparable support (common practice). "
            f"Mallows' Cp: {_e(shortlist.cp_variance_source)}. Criteria convention: "
            f"{_e(shortlist.convention)}.</p>")


_SHORTLIST_HEADERS = {
    "position": "model #", "answer": "answer", "terms": "terms", "n_terms": "terms (count)", "k": "coefficients k",
    "delta_from_best": "Δ", "model_weight": "weight", "comparable_support": "comparable support",
    "adj_r2": "adjusted R²", "r2": "R²", "cv_mse": "CV MSE", "cv_se": "CV SE",
    "holdout_mse": "held-out MSE", "press": "PRESS", "found_by": "found by",
    "variables": "variables", "answer_weight": "weight of the answer", "models_in_answer": "models in it",
    "form_alternatives": "forms as good (Δ ≤ 2)",
}


def _shortlist_section(shortlist) -> str:
    """The answers first (sets of variables, each in its best forms), then the model-level list."""
    answer_columns = ["answer", "terms", "delta_from_best", "answer_weight", "models_in_answer",
                      "form_alternatives", shortlist.criterion, "adj_r2", "cv_mse", "position"]
    answer_columns = list(dict.fromkeys(c for c in answer_columns if c in shortlist.table.columns))
    model_columns = ["position", "answer", "terms", "n_terms", "k", "delta_from_best", "model_weight",
                     "comparable_support", shortlist.criterion, "aicc", "bic", "adj_r2", "cv_mse", "cv_se",
                     "found_by"]
    model_columns = list(dict.fromkeys(c for c in model_columns if c in shortlist.models.columns))
    notes = "".join(f"<p class=\"note\">{_e(n)}</p>" for n in shortlist.notes)
    answers_intro = (
        "<p>An <b>answer</b> is a set of variables, whatever their forms: models that hold the same variables "
        "in different forms are one answer, because the data often tell such forms apart only weakly. Each "
        "row shows the answer's best model, the summed weight of every pooled model holding exactly those "
        f"variables ({len(shortlist.scored)} models make {int(shortlist.scored['answer'].max())} answers), "
        "and the other forms found within Δ ≤ 2 of its best. Answers are ranked by their best model.</p>")
    models_intro = ("<h3>Model by model</h3><p class=\"note\">The best models whatever their answer; the "
                    "column answer links each to its row above.</p>")
    return (_criterion_text(shortlist) + answers_intro
            + _table(shortlist.table[answer_columns], headers=_SHORTLIST_HEADERS)
            + models_intro + _table(shortlist.models[model_columns], headers=_SHORTLIST_HEADERS) + notes)


def _checks_table(diagnosis) -> str:
    rows = []
    for c in diagnosis.checks:
        level = getattr(c, "level", None) or {True: "fine", False: "a problem", None: "not assessed"}[c.passed]
        style = {"fine": "ok", "worth a look": "look", "a problem": "fail"}.get(level, "na")
        mark = f'<span class="{style}">{_e(level)}</span>'
        remedy = f"<br><i>What to try:</i> {_e(c.remedy)}" if c.remedy else ""
        rows.append(f"<tr><td>{_e(c.aspect)}</td><td>{mark}</td><td>{_e(c.verdict)}{remedy}</td>"
                    f"<td class=\"note\">{_e(c.reference)}</td></tr>")
    return ('<div class="scroll"><table><thead><tr><th>assumption</th><th>result</th><th>verdict</th>'
            f"<th>source</th></tr></thead><tbody>{''.join(rows)}</tbody></table></div>")


def _weighted_part(offer, diagnosis) -> str:
    """The weighted fit offered when the spread follows one term (Harvey 1976), beside the ordinary one."""
    from ..settings import spell

    before = diagnosis.check("breusch_pagan")
    return ("<h3>A weighted fit for the changing spread</h3>"
            f"<p>The squared residuals follow {_e(offer.source)}: the slope of log e² on log {_e(offer.source)} is "
            f"γ̂ = {_e(_fmt(offer.power))} (R² = {_e(_fmt(offer.r_squared))}), as if the variance grew as "
            f"{_e(offer.source)}^γ (Harvey 1976). Refitted with weights {_e(offer.source)}^−{_e(_fmt(offer.power))}: "
            f"Breusch-Pagan LM = {_e(_fmt(offer.breusch_pagan))}, p = {_e(_fmt(offer.pvalue))} "
            f"(ordinary fit: LM = {_e(_fmt(before.statistic))}). To search with these weights, add the column "
            f"{_e(offer.source)}^−{_e(_fmt(offer.power))} to the table and give {_e(spell('row_weights', 'COL'))}."
            "</p>" + _table(offer.coefficients, headers={"std_error": "standard error"})
            + '<p class="note">The weights were estimated from these residuals, so this fit is a comparison, not '
              "a proof; the robust (HC3) standard errors above need no model of the variance.</p>")


def _scale_part(scale) -> str:
    """The response's Box-Cox profile offered when the errors are skewed (Box & Cox 1964)."""
    from ..settings import spell

    low, high = scale.interval
    form = None
    if scale.suggested is not None and scale.suggested != 1:
        form = {0.0: "log", 0.5: "sqrt"}.get(float(scale.suggested), f"boxcox:{scale.suggested:g}")
    elif scale.suggested is None and not low <= 1.0 <= high:  # no simple power inside: λ̂ itself
        form = f"boxcox:{scale.lambda_hat:.2g}"
    advice = (f"Search again with the response on that scale ({_e(spell('response_form', form))}); "
              "models on another scale are compared with the log-Jacobian added, as selectkit does."
              if form else "No interpretable power is clearly better than the scale used.")
    return ("<h3>Does the response want another scale?</h3>"
            f"<p>The errors are skewed. Box-Cox profile of the response given these terms: λ̂ = "
            f"{_e(_fmt(scale.lambda_hat))}, 95% interval {_e(_fmt(low))} to {_e(_fmt(high))}. "
            f"{_e(scale.verdict)} {advice}</p><p class=\"note\">{_e(scale.caution)} ({_e(scale.reference)})</p>")


def _model_section(position, fit, diagnosis, row, candidates=None, *, figures=True, scale=None) -> str:
    parts = [f'<p class="equation">{_e(fit.equation)}</p>',
             f"<p>n = {fit.n} rows, k = {fit.k} coefficients, residual standard error {_e(_fmt(fit.sigma))}; "
             f"Δ = {_e(_fmt(row['delta_from_best']))}, model weight {_e(_fmt(row['model_weight']))}, "
             f"weight of the answer {_e(_fmt(row.get('answer_weight')))} over {_e(row.get('models_in_answer'))} "
             f"model(s); found by {_e(row['found_by'])}.</p>"]
    if row.get("form_alternatives"):
        parts.append(f"<p>Forms as good for this answer (within Δ ≤ 2 of its best): "
                     f"{_e(row['form_alternatives'])}. The data do not tell these apart; choose among them "
                     "by what you know of the process.</p>")
    coefficients = fit.coefficients.rename(columns={"p_value_optimistic": "p-value (optimistic)",
                                                    "std_error": "standard error", "ci_low": "95% low",
                                                    "ci_high": "95% high"})
    robust = getattr(diagnosis, "robust_se", None) if diagnosis is not None else None
    spread = next((c for c in diagnosis.checks if c.name == "breusch_pagan"), None) if diagnosis is not None else None
    sampled = diagnosis is not None and diagnosis.n < fit.n  # a table read in parts: checks on its sample
    if robust is not None and spread is not None and spread.level not in ("fine", None, "not assessed") \
            and len(robust) == len(coefficients) and not sampled:
        # the spread of the errors changes: intervals from the HC3 standard errors (MacKinnon & White 1985)
        from ..diagnostics import robust_intervals

        coefficients = coefficients.assign(**robust_intervals(coefficients["estimate"], robust, fit.n - fit.k))
    parts.append("<h3>Coefficients</h3>" + _table(coefficients))
    parts.append('<p class="note">The intervals and p-values treat this model as chosen in advance; '
                 "because the data chose it, they are optimistic.</p>")
    if diagnosis is not None:
        parts.append("<h3>Assumption checks</h3>")
        if sampled:
            parts.append(f'<p class="note">The table was read in parts: these checks, the rows named and the '
                         f'figures use a seeded sample of {diagnosis.n:,} of its {fit.n:,} rows, refitted there; '
                         f'the coefficients above use every row'
                         + (" (HC3 intervals, which need every row, are not shown)" if robust is not None
                            and spread is not None and spread.level not in ("fine", None, "not assessed") else "")
                         + '.</p>')
        parts.append(_checks_table(diagnosis))
        if len(diagnosis.flagged_rows):
            # The diagnosis keeps every row above a screening cut-off, largest Cook's distance first;
            # the page shows the first ten (the screening cut-offs flag about 5 % of clean rows).
            shown = diagnosis.flagged_rows.head(10)
            rest = len(diagnosis.flagged_rows) - len(shown)
            named = getattr(diagnosis, "rows_named", "")
            parts.append("<h3>Rows to look at</h3>"
                         + _table(shown, headers={"name": "row name", "cooks_distance": "Cook's distance",
                                                  "studentized_residual": "studentised residual",
                                                  "reason": "above the screening cut-off of"})
                         + '<p class="note">'
                         + (f"Largest Cook's distance first; {rest} more rows are above a screening cut-off "
                            "(leverage 2k/n or Cook's distance 4/n). " if rest else "")
                         + (f"Rows are named {_e(named)}; " if named else "")
                         + "row is the position among the rows used, counting from 0. "
                         "Rows are listed for a check, not removed.</p>")
        if not figures:
            parts.append('<p class="note">The figures of the checks are drawn for the first answers only '
                         '(setting detailed_answers); the verdicts above are those of every check.</p>')
    if diagnosis is not None and figures:
        parts.append("<h3>What the checks look like</h3>")
        shown = plots.check_figures(diagnosis, candidates)
        for item in shown:
            parts.append(_figure(item.chart, item.caption))
        if candidates is None or not any(item.key == "forms" for item in shown):
            parts.append(_figure(plots.residuals_vs_terms(diagnosis),
                                 "Residuals against each numeric column of the model: a bend suggests another "
                                 "form of that term."))
    if diagnosis is not None:
        if not diagnosis.vif.empty and len(diagnosis.term_vif) > 1:
            parts.append("<h3>Collinearity</h3>"
                         + _table(diagnosis.term_vif, headers={"gvif": "GVIF",
                                                               "gvif_per_column": "scaled GVIF (comparable with a VIF)",
                                                               "columns": "coefficients"})
                         + '<p class="note">GVIF: generalised variance inflation of a term\'s coefficients '
                           "together; scaled GVIF, its root of order the number of coefficients, is the VIF itself "
                           "for a one-column term and reads on the same scale (Fox &amp; Monette 1992).</p>")
    offer = getattr(diagnosis, "weighted_offer", None) if diagnosis is not None else None
    if offer is not None:
        parts.append(_weighted_part(offer, diagnosis))
    if scale is not None:
        parts.append(_scale_part(scale))
    if diagnosis is None:
        parts.append('<p class="note">The assumption checks of this model were not run.</p>')
    return _section(f"model-{position}", f"Answer {position}: {' + '.join(fit.terms) or 'intercept only'}",
                    "".join(parts))


def _stability_section(stability) -> str:
    intro = (f"<p>{stability.n_boot} bootstrap resamples of the rows (seed {_e(stability.seed)}), each searched "
             f"again and its best model taken by {_e(stability.criterion.upper())}. The best model on all "
             f"rows ({_e(' + '.join(stability.full_data_best) or 'intercept only')}) was chosen again in "
             f"{_e(_fmt(100 * stability.share_same_as_full))}% of the resamples.</p>")
    notes = "".join(f"<p class=\"note\">{_e(n)}</p>" for n in stability.notes)
    forms = stability.form_share[stability.form_share["share_selected"] > 0]
    return (intro + "<h3>Variables</h3>"
            + _table(stability.variable_share, headers={"share_selected": "share of resamples"})
            + "<h3>Forms</h3>" + _table(forms, headers={"share_selected": "share of resamples"}) + notes)


def _cautions_section() -> str:
    return "".join(f'<div class="caution"><b>{_e(title)}.</b> {_e(text)}</div>' for title, text in CAUTIONS)


# --------------------------------------------------------------------------- page


def _split_section(split) -> str:
    """The model chosen on the selection rows, with its honest p-values from the estimation rows."""
    table = split.coefficients.rename(columns={
        "std_error": "standard error", "ci_low": "95% low", "ci_high": "95% high", "p_value": "p-value (honest)",
        "std_error_all_rows": "standard error on all rows", "p_value_all_rows_optimistic": "p-value on all rows "
        "(optimistic)"})
    same = ("It is the best model of the searches on all rows." if split.same_as_all_rows else
            "It is not the best model of the searches on all rows: with fewer rows the choice can differ.")
    return (f"<p class=\"equation\">{_e(' + '.join(split.terms) or 'intercept only')}</p><p>{_e(same)}</p>"
            + _table(table) + "".join(f'<p class="note">{_e(n)}</p>' for n in split.notes))


def _honest_section(honest) -> str:
    """The honest error of the whole procedure next to the optimistic one."""
    rows = [("honest error (mean squared prediction error of the procedure)", _fmt(honest.error)),
            ("its standard error", _fmt(honest.standard_error)),
            ("CV error of the model chosen on all rows (optimistic)", _fmt(honest.naive_error)),
            ("optimism of selection (honest − optimistic)", _fmt(honest.optimism))]
    table = "<table>" + "".join(f"<tr><th>{_e(a)}</th><td>{_e(b)}</td></tr>" for a, b in rows) + "</table>"
    return (f"<p>What was repeated inside each outer fold: {_e(honest.procedure)}.</p>" + table
            + f"<div class=\"caution\">{_e(honest.caution)}</div>" + _table(honest.folds))


def render_html(*, shortlist, settings=None, candidates=None, founds=(), diagnoses=(), stability=None,
                honest=None, split=None, scales=None) -> str:
    """The report as one HTML string (no script, no external resource).

    Parameters
    ----------
    shortlist : selectkit.rank.Shortlist
    settings : dict, optional
    candidates : CandidateSet, optional
    founds : sequence of Found
    diagnoses : sequence of Diagnosis
        Aligned with the shortlisted models.
    stability : Stability, optional
    honest : NestedResult, optional
        The honest error of the whole procedure (outer cross-validation).
    split : selectkit.inference.SplitInference, optional
        Honest p-values by sample splitting.
    scales : dict, optional
        Position → :class:`selectkit.response.ResponseBoxCox` for the answers
        whose errors are skewed: the response's Box-Cox profile, offered as the
        next step.

    Returns
    -------
    str
    """
    from .. import __version__

    settings = dict(settings or {})
    diagnoses = list(diagnoses or ())
    response = settings.get("response") or (candidates.response if candidates is not None else "the response")
    sections = [
        ("settings", "What was asked", _settings_section(settings)),
        ("candidates", "Candidate terms", _candidate_section(candidates)),
        ("searches", "How the searches went", _search_section(list(founds), shortlist)),
        ("by-size", "Criterion against model size",
         _figure(plots.criterion_by_size(shortlist),
                 "Best criterion value among the pooled models of each size.")),
        ("support", "How strongly each variable is supported",
         _figure(plots.variable_support(shortlist),
                 "Summed weight of the pooled models that hold each variable (any form).")
         + _support_note(founds, shortlist) + _table(shortlist.variable_support)),
        ("shortlist", "The shortlist: answers first", _shortlist_section(shortlist)),
    ]
    body = [_section(a, t, b) for a, t, b in sections]
    detailed = settings.get("detailed_answers", 3)
    detailed = len(shortlist.fits) if detailed is None else int(detailed)
    for i, fit in enumerate(shortlist.fits):
        _stages.step("writing the report", i, len(shortlist.fits))
        row = shortlist.table.iloc[i]
        body.append(_model_section(i + 1, fit, diagnoses[i] if i < len(diagnoses) else None, row,
                                   candidates, figures=i < detailed, scale=(scales or {}).get(i)))
    _stages.step("writing the report", len(shortlist.fits), len(shortlist.fits))
    if stability is not None:
        body.append(_section("stability", "Does the choice survive resampling?", _stability_section(stability)))
    if honest is not None:
        body.append(_section("honest-error", "How well the whole procedure predicts new rows",
                             _honest_section(honest)))
    if split is not None:
        body.append(_section("split", "Honest p-values: chosen on some rows, estimated on the others",
                             _split_section(split)))
    body.append(_section("cautions", "Before you rely on these models", _cautions_section()))
    nav_items = [(a, t) for a, t, _ in sections] + [(f"model-{i + 1}", f"Answer {i + 1}")
                                                    for i in range(len(shortlist.fits))]
    if stability is not None:
        nav_items.append(("stability", "Resampling"))
    if honest is not None:
        nav_items.append(("honest-error", "Honest error"))
    if split is not None:
        nav_items.append(("split", "Honest p-values"))
    nav_items.append(("cautions", "Cautions"))
    nav = "<nav><ol>" + "".join(f'<li><a href="#{a}">{_e(t)}</a></li>' for a, t in nav_items) + "</ol></nav>"
    best = shortlist.fits[0].equation if shortlist.fits else ""
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<title>{_e('selectkit report: ' + str(response))}</title>"
        f"<style>{_STYLE}</style></head><body>"
        f"<header class=\"page\"><h1>{_e('Model shortlist for ' + str(response))}</h1>"
        f"<p>{len(shortlist.scored)} models pooled, {shortlist.n} rows, ranked by "
        f"{_e(shortlist.criterion.upper())}. Made by selectkit {_e(__version__)}.</p></header>"
        f"<main><section><h2>At a glance</h2><p class=\"equation\">{_e(best)}</p>"
        f"<div class=\"caution\">{_e(CAUTIONS[0][1])}</div>{nav}</section>"
        + "".join(body)
        + "</main></body></html>\n"
    )


def write_html(path, *, shortlist, settings=None, candidates=None, founds=(), diagnoses=(),
               stability=None, honest=None, split=None, scales=None) -> Path:
    """Render the report and write it atomically to ``path``; return the path."""
    text = render_html(shortlist=shortlist, settings=settings, candidates=candidates, founds=founds,
                       diagnoses=diagnoses, stability=stability, honest=honest, split=split, scales=scales)
    return atomic_write_text(Path(path), text)
