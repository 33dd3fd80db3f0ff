"""Tests of selectkit.report: CSV and JSON shortlist, schema, HTML page, figures, text summary.

External checks: the JSON document and the schema itself are validated with the
``jsonschema`` package (draft 2020-12 validator), and the CSV is read back with
pandas.
"""

from __future__ import annotations

import json
import os
import re

import numpy as np
import pandas as pd
import pytest

from selectkit import report
from selectkit.diagnostics import diagnose
from selectkit.errors import InputError
from selectkit.moments import compute_moments
from selectkit.rank import rank, stability
from selectkit.report import html as report_html
from selectkit.report import plots, tables, text
from tests.factories import make_candidates
from tests.test_rank import brute_force, brute_force_runner

jsonschema = pytest.importorskip("jsonschema")

HOSTILE = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    rng = np.random.default_rng(0)
    n = 70
    light = rng.uniform(5, 40, size=n)
    ruby = (rng.uniform(size=n) < 0.5).astype(float)
    noise = rng.normal(size=n)
    y = 1.0 + 0.8 * np.log(light) + 0.3 * ruby + rng.normal(scale=0.1, size=n)
    X = np.column_stack([np.log(light), noise, ruby])
    cands = make_candidates(X, y, names=["log(light)", HOSTILE, "cultivar[Ruby]"],
                            families=["light", HOSTILE, "cultivar"], blocks={"cultivar": [2]})
    moments = compute_moments(cands.matrix, cands.y)
    found = brute_force(cands, method="exhaustive")
    short = rank([found], cands, moments, size=3, scores=False)
    diagnoses = [diagnose(cands, s) for s in short.subsets]
    stab = stability(cands, brute_force_runner, n_boot=4, seed=1)
    settings = {"response": "yield_kg_m2", "data": f"bays {HOSTILE}.csv", "methods": ["exhaustive"], "seed": 1}
    folder = tmp_path_factory.mktemp("out")
    paths = report.write_outputs(folder, settings=settings, candidates=cands, founds=[found], shortlist=short,
                                 diagnoses=diagnoses, stability=stab)
    return {"candidates": cands, "found": found, "shortlist": short, "diagnoses": diagnoses,
            "stability": stab, "settings": settings, "folder": folder, "paths": paths}


def test_write_outputs_writes_four_files_and_no_temporary_file(run):
    paths = run["paths"]
    assert set(paths) == {"shortlist_csv", "models_csv", "shortlist_json", "report_html"}
    assert sorted(os.listdir(run["folder"])) == ["models.csv", "report.html", "shortlist.csv", "shortlist.json"]
    for path in paths.values():
        assert path.stat().st_size > 0


def test_csv_round_trips(run):
    frame = pd.read_csv(run["paths"]["shortlist_csv"])
    table = run["shortlist"].table
    assert list(frame.columns) == [c for c in tables.CSV_COLUMNS if c in table.columns]
    assert list(frame["terms"]) == list(table["terms"])
    np.testing.assert_allclose(frame["bic"], table["bic"], rtol=1e-9)
    np.testing.assert_allclose(frame["model_weight"], table["model_weight"], rtol=1e-9)
    assert frame["cv_mse"].isna().all()  # scores were not requested: empty cells, not zeros
    # one row per answer: no two rows hold the same variables
    assert frame["variables"].is_unique and list(frame["answer"]) == list(range(1, len(frame) + 1))
    models = pd.read_csv(run["paths"]["models_csv"])
    assert list(models.columns) == [c for c in tables.MODEL_CSV_COLUMNS if c in run["shortlist"].models.columns]
    assert list(models["terms"]) == list(run["shortlist"].models["terms"])
    assert list(models["position"]) == list(range(1, len(models) + 1))


def test_json_validates_against_its_schema(run):
    document = json.loads(run["paths"]["shortlist_json"].read_text(encoding="utf-8"))
    schema = tables.load_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    jsonschema.Draft202012Validator(schema).validate(document)
    assert tables.validate_document(document) == []
    assert document["schema_version"] == tables.SCHEMA_VERSION
    assert document["ranking"]["criterion"] == "bic"
    assert document["answers"][0]["answer"] == 1
    best = document["answers"][0]["best_model"]
    assert best["terms"] == list(run["shortlist"].terms(0))
    assert document["models"][0]["terms"] == best["terms"] and "checks" not in document["models"][0]
    assert best["scores"]["cv_mse"] is None  # NaN becomes null
    assert best["coefficients"][0]["coefficient"] == "intercept"
    assert {c["name"] for c in best["checks"]} >= {"reset", "breusch_pagan", "cooks_distance"}
    assert document["stability"]["replicates"] == 4
    assert len(document["cautions"]) == 4


@pytest.mark.parametrize("breakage", [
    lambda d: d.pop("models"),
    lambda d: d.pop("answers"),
    lambda d: d["answers"][0].__setitem__("models_in_answer", 0),
    lambda d: d.__setitem__("schema_version", "0.9"),
    lambda d: d["models"][0].__setitem__("k", "three"),
    lambda d: d["models"][0]["scores"].__setitem__("aic", "low"),
    lambda d: d["ranking"].__setitem__("criterion", "aik"),
    lambda d: d.__setitem__("extra_key", 1),
    lambda d: d["models"][0].__setitem__("position", 0),
    lambda d: d.__setitem__("stability", {"replicates": 3}),
    lambda d: d.__setitem__("cautions", []),
    lambda d: d["models"][0]["terms"].append(3),  # a number in a list of strings (the one-loop path)
    lambda d: d.__setitem__("notes", [None]),
])
def test_own_validator_agrees_with_jsonschema_on_broken_documents(run, breakage):
    document = json.loads(run["paths"]["shortlist_json"].read_text(encoding="utf-8"))
    breakage(document)
    schema = tables.load_schema()
    assert not jsonschema.Draft202012Validator(schema).is_valid(document)
    problems = tables.validate_document(document)
    assert problems
    with pytest.raises(InputError, match="schema"):
        tables.check_document(document)


def test_html_is_self_contained_and_escapes_user_strings(run):
    page = run["paths"]["report_html"].read_text(encoding="utf-8")
    assert "<script" not in page.lower()
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "http://" not in page and "https://" not in page
    assert not re.search(r"""(src|href)\s*=\s*["'](?!#)""", page)  # nothing loaded: figures are inline SVG
    # criterion-by-size and support charts, plus a residual panel and a term panel per model
    assert page.count("<figure><svg ") >= 2 + 2 * len(run["shortlist"].fits)
    for heading in ("What was asked", "Candidate terms", "How the searches went", "The shortlist",
                    "Does the choice survive resampling?", "Before you rely on these models"):
        assert heading in page
    assert "optimistic" in page and "not causation" in page.lower()
    assert "local professional standards" in page
    assert "[cultivar = Ruby]" in page


def test_html_without_checks_or_stability_still_renders(run):
    page = report_html.render_html(shortlist=run["shortlist"])
    assert "<script" not in page.lower()
    assert "assumption checks of this model were not run" in page
    assert "Does the choice survive resampling?" not in page


def test_criterion_by_size_plots_the_best_of_each_size(run):
    short = run["shortlist"]
    chart = plots.criterion_by_size(short)
    line = [layer for layer in chart.panels[0].layers if layer.kind == "line" and layer.marker == "o"][0]
    expected = short.scored.groupby("n_terms")["bic"].min()  # pandas, independently of the figure's loop
    np.testing.assert_allclose(line.x, expected.index.to_numpy())
    np.testing.assert_allclose(line.y, expected.to_numpy())
    drawn = chart.to_matplotlib().axes[0].get_lines()  # and the matplotlib drawing of it
    np.testing.assert_allclose([ln for ln in drawn if ln.get_marker() == "o"][0].get_ydata(), expected.to_numpy())


def test_every_figure_draws(run):
    d = run["diagnoses"][0]
    short = run["shortlist"]
    import io
    import xml.etree.ElementTree as ET

    charts = [plots.criterion_by_size(short), plots.variable_support(short), plots.residuals_vs_terms(d)]
    charts += [item.chart for item in plots.check_figures(d, run["candidates"])]
    for chart in charts:
        assert chart is not None and chart.panels
        root = ET.fromstring(chart.to_svg())  # well-formed XML, by the standard library's parser
        assert root.tag == "{http://www.w3.org/2000/svg}svg" and float(root.get("width")) > 0
        buffer = io.BytesIO()
        chart.to_matplotlib().savefig(buffer, format="png", dpi=30)
        assert buffer.getvalue()[:8] == b"\x89PNG\r\n\x1a\n"
    bars = plots.variable_support(short).to_matplotlib().axes[0].patches
    assert sorted(b.get_width() for b in bars) == pytest.approx(sorted(short.variable_support["support"]))


def test_text_summary(run):
    summary = text.summary(shortlist=run["shortlist"], settings=run["settings"], founds=[run["found"]],
                           diagnoses=run["diagnoses"], paths=run["paths"])
    assert "yield_kg_m2" in summary
    assert "Ranked by BIC" in summary
    assert run["shortlist"].fits[0].equation in summary
    assert "optimistic" in summary and "not causation" in summary
    assert str(run["paths"]["report_html"]) in summary
    assert "linearity" in summary


def test_outputs_replace_older_files(run, tmp_path):
    old = tmp_path / "shortlist.csv"
    old.write_text("stale", encoding="utf-8")
    paths = report.write_outputs(tmp_path, settings={}, candidates=run["candidates"], founds=[],
                                 shortlist=run["shortlist"], diagnoses=[])
    assert paths["shortlist_csv"].read_text(encoding="utf-8").startswith("answer,variables")
    assert sorted(os.listdir(tmp_path)) == ["models.csv", "report.html", "shortlist.csv", "shortlist.json"]


def test_large_data_are_thinned_in_the_plots():
    rng = np.random.default_rng(9)
    n = 12_000
    X = rng.normal(size=(n, 2))
    d = diagnose(make_candidates(X, X @ [1.0, -1.0] + rng.normal(size=n)), (0, 1))
    chart = plots.mean_follows_terms(d)
    points = [layer for layer in chart.panels[0].layers if layer.kind == "points"][0]
    assert len(points.x) <= plots.MAX_POINTS
    np.testing.assert_allclose(points.x, d.fitted[:: int(np.ceil(n / plots.MAX_POINTS))])
    assert any("row shown" in note for note in chart.panels[0].notes) and "row shown" in chart.to_svg()
    svg = chart.to_svg()  # the SVG draws each kept point once: one "h0" dot per row shown
    assert svg.count("h0") == len(points.x)
    captions = {item.key: item.caption for item in plots.check_figures(d)}
    assert "every 6th of the 12,000 rows" in captions["mean"] and "every 6th" not in captions["influence"]


def test_dollar_signs_in_names_do_not_break_the_figures():
    rng = np.random.default_rng(10)
    X = rng.normal(size=(40, 2))
    cands = make_candidates(X, X[:, 0] + rng.normal(size=40), names=["a$^$b", "price$"])
    short = rank([brute_force(cands)], cands, compute_moments(X, cands.y), scores=False)
    import io

    for chart in (plots.variable_support(short), plots.residuals_vs_terms(diagnose(cands, (0, 1)))):
        chart.to_matplotlib().savefig(io.BytesIO(), format="png", dpi=30)  # "$" would start math mode
        assert "a$^$b" in chart.to_svg() or "price$" in chart.to_svg()
    labels = [t.get_text() for t in plots.variable_support(short).to_matplotlib().axes[0].get_yticklabels()]
    assert r"a\$^\$b" in labels


def test_what_was_asked_reads_as_a_person_would_write_it():
    settings = {"selectkit_version": "9.9", "data": "<DataFrame>", "response": "yield_kg_m2", "predictors": None,
                "always_include": [], "leave_out": ["bay_id"], "forms": ["identity", "log"], "shifts": {"co2": "auto"},
                "interactions": [["light", "co2"]], "method_options": {"exhaustive": {"max_size": 3}},
                "criterion": "bic", "parameter_count": "coefficients-only", "resamples": 0, "curvature_test": True,
                "time_budget": None, "row_weights": None, "incomplete_rows": "drop", "vif_limit": None}
    page = report_html._settings_section(settings)
    cells = re.findall(r"<td[^>]*>(.*?)</td>", page)
    shown = dict(zip(cells[::2], cells[1::2]))
    assert shown == {
        "selectkit version": "9.9", "table": "a DataFrame passed in memory", "response": "yield_kg_m2",
        "left out": "bay_id", "forms offered": "identity, log", "shift before log or square root": "co2 = auto",
        "products of two predictors": "light*co2", "settings of each search": "exhaustive: max_size = 3",
        "ranked by": "BIC", "parameters counted in AIC and BIC": "the coefficients only (coefficients-only)",
        "bootstrap resamples for stability": "none (skipped)", "curved forms only where the fit bends": "yes",
        "rows with a missing value": "dropped", "collinearity limit (VIF)": "off (every variable kept)",
    }
    assert "null" not in page and "&lt;DataFrame&gt;" not in page and "[]" not in page


def test_collinearity_table_says_what_the_scaled_gvif_is():
    # three correlated columns and a 3-level block, so the collinearity table (more than one term) is drawn
    rng = np.random.default_rng(5)
    n = 60
    a = rng.normal(size=n)
    b = a + rng.normal(scale=0.5, size=n)
    level = rng.integers(0, 3, n)
    X = np.column_stack([a, b, level == 1, level == 2]).astype(float)
    y = 2 * a - 1.5 * b + 1.5 * X[:, 2] + 2 * X[:, 3] + rng.normal(scale=0.5, size=n)
    cands = make_candidates(X, y, names=["a", "b", "kind[2]", "kind[3]"], families=["a", "b", "kind", "kind"],
                            blocks={"kind": [2, 3]})
    moments = compute_moments(cands.matrix, cands.y)
    found = brute_force(cands, method="exhaustive")
    short = rank([found], cands, moments, size=1, scores=False)
    assert len(short.subsets[0]) == 3  # every term in: a, b and the block
    page = report_html.render_html(settings={}, candidates=cands, founds=[found], shortlist=short,
                                   diagnoses=[diagnose(cands, s) for s in short.subsets])
    assert "scaled GVIF (comparable with a VIF)" in page and "GVIF^(1/columns)" not in page
    assert "Fox &amp; Monette 1992" in page
