"""What keeps the report and the start-up cheap: figures for the first answers only, influence panels that
draw only the rows worth naming, smoothers on binned means, a light ``import selectkit``, and a note before
a first run compiles the kernels.  (How long these take is measured by benchmarks/bench_end_to_end.py, not
here.)"""

from __future__ import annotations

import re
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

import selectkit
from selectkit import cli
from selectkit.diagnostics import diagnose
from selectkit.report import plots
from tests.factories import make_candidates


def _bays(n=120, seed=0):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({f"x{i}": rng.uniform(1, 10, n) for i in range(5)})
    frame["yield_kg_m2"] = 2 + frame["x0"] + 0.5 * np.log(frame["x1"]) + rng.normal(0, 1.0, n)
    return frame


def _sections(html):
    return dict(re.findall(r'<section id="(model-\d+)".*?>(.*?)</section>', html, flags=re.S))


def test_only_the_first_answers_get_figures(tmp_path):
    result = selectkit.search(_bays(), response="yield_kg_m2", forms=("identity", "log"), shortlist_size=4,
                              detailed_answers=1, seed=0)
    assert len(result.shortlist) >= 2
    html = (result.write(tmp_path)["report_html"]).read_text(encoding="utf-8")
    sections = _sections(html)
    assert "<svg" in sections["model-1"]
    for key, body in sections.items():
        if key != "model-1":
            assert "<svg" not in body and "detailed_answers" in body
            assert "Assumption checks" in body and "Coefficients" in body  # the tables stay for every answer


def test_the_influence_panel_draws_only_rows_above_the_screening_cut_off():
    rng = np.random.default_rng(4)
    n = 3000
    x = rng.uniform(1, 100, size=(n, 2))
    y = 1 + 0.1 * x[:, 0] + rng.normal(0, 1, n)
    d = diagnose(make_candidates(x, y), (0, 1))
    chart = plots.row_influence(d)
    figure = chart.to_matplotlib()
    for panel, axes, values, limit in ((chart.panels[0], figure.axes[0], d.cooks_distance, 4.0 / n),
                                       (chart.panels[1], figure.axes[1], d.leverage, 2.0 * d.k / n)):
        above = int(np.sum(np.asarray(values) > limit))
        stems = [layer for layer in panel.layers if layer.kind == "stems"][0]
        assert len(stems.x) == min(above, plots.MAX_STEMS)  # one stem per row worth naming
        drawn = [c for c in axes.collections if c.__class__.__name__ == "LineCollection"][0]
        assert len(drawn.get_segments()) == len(stems.x)
        assert 0 < above < n // 4


def test_the_smoother_is_the_mean_of_groups_of_rows():
    from selectkit.report.chart import Panel

    x = np.arange(100.0)
    y = (x // 10) ** 2.0
    panel = Panel()
    plots._smooth_line(panel, x, y, bins=10)
    line = panel.layers[0]
    np.testing.assert_allclose(line.x, [x[i:i + 10].mean() for i in range(0, 100, 10)])
    np.testing.assert_allclose(line.y, [float(k * k) for k in range(10)])


def test_importing_the_command_line_loads_no_numerical_library():
    code = ("import sys, selectkit.cli; heavy = [m for m in ('pandas', 'numpy', 'scipy', 'matplotlib', 'numba', "
            "'statsmodels') if m in sys.modules]; print(','.join(heavy))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0 and done.stdout.strip() == "", done.stdout + done.stderr


def test_the_facade_is_still_there_when_asked_for():
    assert callable(selectkit.search) and selectkit.Result.__name__ == "Result" and "search" in dir(selectkit)
    with pytest.raises(AttributeError):
        selectkit.no_such_thing  # noqa: B018


def test_a_first_run_says_it_compiles_before_it_starts(tmp_path, monkeypatch, capsys):
    import selectkit.kernels

    table = tmp_path / "bays.csv"
    _bays(40).to_csv(table, index=False)
    monkeypatch.setattr(selectkit.kernels, "compiled_on_disk", lambda: False)
    assert cli.main(["search", str(table), "-r", "yield_kg_m2", "--forms", "identity", "--detailed-answers", "0",
                     "--output", str(tmp_path / "out")]) == 0
    assert "first run: compiling the search kernels" in capsys.readouterr().err
    monkeypatch.undo()
    assert selectkit.kernels.compiled_on_disk() is True  # this run (and the suite) left them on disk


def test_skewed_errors_offer_the_response_scale_with_its_box_cox_interval(tmp_path):
    # Invented bays whose yield is log-normal around a straight mean in light: on the raw scale the errors
    # are right-skewed; the report must offer the Box-Cox profile and the log scale (λ̂ near 0).
    rng = np.random.default_rng(2)
    n = 300
    frame = pd.DataFrame({"light": rng.uniform(1, 10, n)})
    frame["yield_kg_m2"] = np.exp(0.5 + 0.25 * frame["light"] + rng.normal(0, 0.6, n))
    result = selectkit.search(frame, response="yield_kg_m2", forms=("identity",), shortlist_size=1, seed=0)
    assert any(c.aspect == "normality" and c.level == "a problem" for c in result.checks(0).checks)
    page = result.write(tmp_path)["report_html"].read_text(encoding="utf-8")
    assert "Does the response want another scale?" in page
    profile = result.response_boxcox(0)
    assert profile.interval[1] < 1.0 and abs(profile.lambda_hat) < 0.3  # the raw scale is out, log nearly in
    assert "response_form=&#x27;boxcox:" in page or "response_form=&#x27;log&#x27;" in page
