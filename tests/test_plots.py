"""Tests of the figures of a model's checks (selectkit.report.plots.check_figures and friends).

External checks: the component-plus-residual values drawn are compared with an
independent statsmodels OLS / WLS fit on the same candidate columns; the
normal-sample band is compared with order statistics of simulated normal
samples (numpy); the SVG text is parsed by the standard library's XML parser
and the matplotlib drawing of the same chart is rendered to PNG by matplotlib.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from selectkit.candidates import build_candidates
from selectkit.data import prepare
from selectkit.diagnostics import diagnose
from selectkit.moments import compute_moments
from selectkit.rank import rank
from selectkit.report import html as report_html
from selectkit.report import plots
from tests.test_rank import brute_force

#: Titles of a familiar default layout that ours must not copy.
BANNED = ("normal q-q", "residuals vs fitted", "scale-location", "residuals vs leverage")


def _greenhouse(n=150, seed=3, curved_spread=False):
    """Invented greenhouse bays: yield follows log(light), CO2 linearly, and cultivar."""
    rng = np.random.default_rng(seed)
    light = rng.uniform(2, 40, n)
    co2 = rng.uniform(300, 900, n)
    cultivar = rng.choice(["Ruby", "Gold", "Jade"], n)
    scale = 0.02 + 0.01 * light if curved_spread else 0.1
    y = 1.0 + 0.8 * np.log(light) + 0.002 * co2 + 0.3 * (cultivar == "Ruby") + rng.normal(0, 1, n) * scale
    weight = rng.uniform(0.5, 2.0, n)
    return pd.DataFrame({"yield_kg": y, "light": light, "co2": co2, "cultivar": cultivar, "bay_area": weight})


def _candidates(frame, **options):
    return build_candidates(prepare(frame, response="yield_kg", predictors=["light", "co2", "cultivar"],
                                    **options), forms=("identity", "log"), curvature_test=False)


def _subset(cands, names):
    index = {t.name: i for i, t in enumerate(cands.terms)}
    return tuple(index[name] for name in names)


def _all_text(chart):
    """Every piece of text a chart shows, read back from its SVG: title, axes titles, labels, legends, notes."""
    return ["".join(node.itertext()) for node in ET.fromstring(chart.to_svg()).iter("{http://www.w3.org/2000/svg}text")]


def _panel(chart, title):
    return next(p for p in chart.panels if p.title == title)


def _layers(panel, kind):
    return [layer for layer in panel.layers if layer.kind == kind]


@pytest.fixture(scope="module")
def fitted():
    frame = _greenhouse()
    cands = _candidates(frame)
    right = diagnose(cands, _subset(cands, ["log(light)", "co2", "cultivar"]))
    wrong = diagnose(cands, _subset(cands, ["light", "co2", "cultivar"]))  # raw light for a log truth
    return {"frame": frame, "candidates": cands, "right": right, "wrong": wrong}


def _worst(diagnosis, aspect):
    order = ["a problem", "worth a look", "fine", "not assessed"]
    levels = [c.level for c in diagnosis.checks if c.aspect == aspect]
    return min(levels, key=order.index)


@pytest.mark.parametrize("model", ["right", "wrong"])
def test_each_figure_carries_the_level_and_verdicts_of_its_check(fitted, model):
    d = fitted[model]
    items = plots.check_figures(d, fitted["candidates"])
    assert [i.key for i in items] == ["mean", "forms", "shape", "spread", "influence"]
    aspects = {"mean": "linearity", "forms": "linearity", "shape": "normality", "spread": "constant variance",
               "influence": "influence"}
    for item in items:
        level = _worst(d, aspects[item.key])
        assert item.level == level
        assert item.chart.title.endswith(f"check: {level}")
        assert any(text.endswith(f"check: {level}") for text in _all_text(item.chart))  # drawn in the SVG
        assert item.caption.startswith(f"{item.title} Check: {level}.")
        for check in d.checks:
            if check.aspect == aspects[item.key]:
                assert check.verdict in item.caption
        assert "?" in item.title  # titled as the question it answers


def test_a_wrong_form_shows_in_the_level_of_the_linearity_figures(fitted):
    # y follows log(light) with noise sd 0.1 over light in 2-40: raw light misses a strong curve
    wrong = {i.key: i.level for i in plots.check_figures(fitted["wrong"], fitted["candidates"])}
    right = {i.key: i.level for i in plots.check_figures(fitted["right"], fitted["candidates"])}
    assert wrong["mean"] == wrong["forms"] == "a problem"
    assert right["mean"] == right["forms"] == "fine"


@pytest.mark.parametrize("model, term, source_form", [("right", "log(light)", np.log), ("wrong", "light", None)])
def test_component_plus_residual_values_match_statsmodels(fitted, model, term, source_form):
    cands, d, frame = fitted["candidates"], fitted[model], fitted["frame"]
    columns = [c for i in d.subset for c in cands.terms[i].columns]
    ols = sm.OLS(cands.y, sm.add_constant(cands.matrix[:, columns])).fit()  # independent refit
    names = [t.name for i in d.subset for t in [cands.terms[i]] for _ in t.columns]
    j = names.index(term)
    f = cands.matrix[:, columns[j]]
    b = ols.params[1 + j]
    expected = ols.resid + b * f
    if source_form is not None:  # the candidate column is the form of the raw source variable
        np.testing.assert_allclose(f, source_form(frame["light"].to_numpy()), rtol=1e-12)

    chart = plots.term_forms(d, cands)
    titles = [p.title for p in chart.panels]
    assert "cultivar" not in titles  # blocks are not drawn
    panel = _panel(chart, term)
    points = _layers(panel, "points")[0]
    np.testing.assert_allclose(points.x, frame["light"].to_numpy())  # x on the source's own scale
    np.testing.assert_allclose(points.y, expected, rtol=1e-9, atol=1e-12)
    assert panel.xlabel == "light"
    form, smoother = _layers(panel, "line")
    order = np.argsort(frame["light"].to_numpy(), kind="stable")
    np.testing.assert_allclose(form.x, frame["light"].to_numpy()[order])
    np.testing.assert_allclose(form.y, (b * f)[order], rtol=1e-9, atol=1e-12)
    assert smoother.dash == "--" and len(smoother.x) > 10
    # the matplotlib drawing of the same chart holds the same points (one description, two renderers)
    figure = chart.to_matplotlib()
    ax = figure.axes[titles.index(term)]
    np.testing.assert_allclose(ax.collections[0].get_offsets()[:, 1], expected, rtol=1e-9, atol=1e-12)


def test_the_smoother_leaves_the_line_only_for_the_wrong_form(fitted):
    # The point of the panels: for raw light (truth log) the lowess bends away from the straight fitted
    # line; for log(light) it follows the fitted curve.  Compared by the mean squared gap on the line's x.
    def gap(model, term):
        form, smoother = _layers(_panel(plots.term_forms(fitted[model], fitted["candidates"]), term), "line")
        on_form = np.interp(smoother.x, form.x, form.y)
        return float(np.mean((smoother.y - on_form) ** 2))

    assert gap("wrong", "light") > 5 * gap("right", "log(light)")  # about 11 times here


def test_weighted_component_plus_residual_matches_statsmodels_wls():
    frame = _greenhouse(n=90, seed=5)
    cands = _candidates(frame, weights="bay_area")
    d = diagnose(cands, _subset(cands, ["log(light)", "co2"]))
    columns = [cands.terms[i].columns[0] for i in d.subset]
    X = sm.add_constant(cands.matrix[:, columns])
    wls = sm.WLS(cands.y, X, weights=cands.weights).fit()  # independent weighted refit
    raw = cands.y - X @ wls.params
    components, skipped = plots.term_components(d, cands)
    assert skipped == []
    for j, part in enumerate(components):
        np.testing.assert_allclose(part.partial, raw + wls.params[1 + j] * X[:, 1 + j], rtol=1e-9, atol=1e-12)
    caption = {i.key: i.caption for i in plots.check_figures(d, cands)}
    assert "√w scale" in caption["mean"]


def test_skipped_terms_are_named_in_the_caption(fitted):
    forms = next(i for i in plots.check_figures(fitted["right"], fitted["candidates"]) if i.key == "forms")
    assert "Not drawn" in forms.caption and "cultivar" in forms.caption


def test_normal_band_covers_simulated_normal_order_statistics(fitted):
    # Check of the band's formula against simulation: 95 % pointwise limits of the i-th smallest of n
    # standard normal values, from 4000 simulated samples (numpy), agree with the drawn band.
    chart = plots.error_shape(fitted["right"])
    band = _layers(chart.panels[1], "band")[0]
    n = int(np.isfinite(fitted["right"].studentized).sum())
    assert n <= plots.LINE_POINTS  # every order statistic is a vertex of the band here
    expected = plots._blom_quantiles(n)
    simulated = np.sort(np.random.default_rng(0).normal(size=(4000, n)), axis=1)
    low = np.quantile(simulated, 0.025, axis=0) - expected
    high = np.quantile(simulated, 0.975, axis=0) - expected
    np.testing.assert_allclose(band.x, expected)
    np.testing.assert_allclose(band.low, low, atol=0.05)
    np.testing.assert_allclose(band.high, high, atol=0.05)


def test_influence_figure_names_rows_as_the_verdicts_do():
    frame = _greenhouse(n=60, seed=8)
    frame.loc[7, "yield_kg"] += 3.0  # one invented bad bay: far off the fit
    frame.loc[7, "light"] = 39.0
    cands = _candidates(frame)
    d = diagnose(cands, _subset(cands, ["log(light)", "co2"]))
    chart = plots.row_influence(d)
    named = set(_layers(chart.panels[0], "labels")[0].texts)
    assert d.check("cooks_distance").level != "fine"
    assert d.check("cooks_distance").rows[0] in named  # the row the verdict names first is labelled
    assert d.check("cooks_distance").rows[0] in _all_text(chart)  # and drawn in the SVG
    legend = [layer.label for layer in chart.panels[0].layers if layer.label]
    assert any("median" in text for text in legend)


def test_no_copied_title_appears_and_every_figure_renders_in_both_ways(fitted):
    import io

    for model in ("right", "wrong"):
        for item in plots.check_figures(fitted[model], fitted["candidates"]):
            shown = " | ".join(_all_text(item.chart) + [item.caption, item.title]).lower()
            for banned in BANNED:
                assert banned not in shown, (item.key, banned)
            buffer = io.BytesIO()
            item.figure.savefig(buffer, format="png", dpi=30)  # the matplotlib drawing, by matplotlib
            assert buffer.getvalue()[:8] == b"\x89PNG\r\n\x1a\n"


def test_the_report_page_embeds_the_check_figures_with_their_verdicts(fitted):
    cands = fitted["candidates"]
    found = brute_force(cands, method="exhaustive")
    short = rank([found], cands, compute_moments(cands.matrix, cands.y), size=2, scores=False)
    diagnoses = [diagnose(cands, s) for s in short.subsets]
    page = report_html.render_html(shortlist=short, candidates=cands, diagnoses=diagnoses)
    for item in plots.check_figures(diagnoses[0], cands):
        assert report_html._e(item.caption) in page
    assert page.count("<figure><svg ") >= 2 + 5 * len(diagnoses) - 1
    for banned in BANNED:
        assert banned not in page.lower()


def test_figures_without_candidates_leave_out_the_term_panels(fitted):
    items = plots.check_figures(fitted["right"])
    assert [i.key for i in items] == ["mean", "shape", "spread", "influence"]


def test_result_plot_residuals_gives_one_figure_per_question():
    import selectkit

    frame = _greenhouse(n=60, seed=11)
    result = selectkit.search(frame[["yield_kg", "light", "co2", "cultivar"]], response="yield_kg",
                              methods=("exhaustive",), forms=("identity", "log"))
    figures = result.plot_residuals(0)
    assert set(figures) <= {"mean", "forms", "shape", "spread", "influence"}
    assert {"mean", "shape", "spread", "influence"} <= set(figures)
    levels = {i.key: i.level for i in plots.check_figures(result.checks(0), result.candidates)}
    for key, figure in figures.items():  # matplotlib figures, for a notebook
        assert figure._suptitle.get_text().endswith(f"check: {levels[key]}")


def test_result_plots_of_the_shortlist_are_matplotlib_drawings_of_the_report_charts():
    import selectkit

    frame = _greenhouse(n=60, seed=11)
    result = selectkit.search(frame[["yield_kg", "light", "co2", "cultivar"]], response="yield_kg",
                              methods=("exhaustive",), forms=("identity", "log"))
    figure = result.plot_criterion()
    best = [ln for ln in figure.axes[0].get_lines() if ln.get_marker() == "o"][0]
    expected = result._ranked.scored.groupby("n_terms")[result._ranked.criterion].min()  # pandas, independently
    np.testing.assert_allclose(best.get_ydata(), expected.to_numpy())
    bars = result.plot_support().axes[0].patches
    assert sorted(b.get_width() for b in bars) == pytest.approx(sorted(result._ranked.variable_support["support"]))
