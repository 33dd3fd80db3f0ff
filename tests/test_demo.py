"""The bundled demo: data reproducible from the generator, and the whole job recovers the truth."""

import io
import subprocess
import sys

import pandas as pd
import pytest

import selectkit
from selectkit.demo import (RESPONSE, TRUE_COEFFICIENTS, TRUE_EQUATION, TRUE_INTERCEPT, TRUE_TERMS, demo_csv_path,
                            make_greenhouse)


def test_bundled_csv_is_what_the_generator_writes():
    path = demo_csv_path()
    assert path is not None, "demo/greenhouse.csv is missing from the checkout"
    buffer = io.StringIO()
    make_greenhouse().to_csv(buffer, index=False, lineterminator="\n")
    assert path.read_text() == buffer.getvalue()


@pytest.fixture(scope="module")
def demo_result():
    return selectkit.search(pd.read_csv(demo_csv_path()), response=RESPONSE, seed=0)


def _families(result, terms):
    cands = result.candidates
    return {cands.terms[cands.term_index(t)].family for t in terms}


def test_the_top_answer_holds_the_generating_variables_in_the_generating_forms(demo_result):
    top = demo_result.shortlist.iloc[0]
    assert _families(demo_result, demo_result.terms(0)) == _families(demo_result, TRUE_TERMS)
    # each generating form is the answer's best form or one of its alternatives within Δ ≤ 2
    offered = set(demo_result.terms(0))
    for _, forms in demo_result.ranking.answer_forms[0]:
        offered.update(forms)
    assert set(TRUE_TERMS) <= offered, top["form_alternatives"]
    # the generating model itself is in the model-level list, under answer 1
    models = demo_result.models
    generating = [i for i, terms in enumerate(models["terms"]) if set(terms.split(" + ")) == set(TRUE_TERMS)]
    assert generating and int(models["answer"].iloc[generating[0]]) == 1
    # answers are distinct sets of variables
    assert demo_result.shortlist["variables"].is_unique


def test_checks_pass_on_the_generating_model(demo_result):
    from selectkit.diagnostics import diagnose

    cands = demo_result.candidates
    checks = diagnose(cands, tuple(cands.term_index(t) for t in TRUE_TERMS))
    by_name = {c.name: c for c in checks.checks}
    linearity = [c for name, c in by_name.items() if "linear" in name.lower() or "reset" in name.lower()]
    assert linearity and all(c.passed is not False for c in linearity)


def test_demo_command_runs_end_to_end(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "selectkit", "demo", "--output", str(tmp_path / "demo")],
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    assert "the top answer holds exactly the generating variables" in proc.stdout
    assert f"generated from: {TRUE_EQUATION}" in proc.stdout and " ~ " not in proc.stdout
    assert any(p.suffix == ".html" for p in (tmp_path / "demo").iterdir())


def test_printed_equation_holds_the_coefficients_a_least_squares_fit_recovers():
    # Independent check: statsmodels OLS of the response on the generating terms, fitted on a large invented
    # sample (4 outlying rows among 20 000 barely move it), recovers each printed coefficient within 5 SE.
    import numpy as np
    import statsmodels.api as sm

    frame = make_greenhouse(20_000, seed=7)
    X = pd.DataFrame({
        "log(light_mol_m2_day)": np.log(frame["light_mol_m2_day"]),
        "sqrt(co2_above_ambient_ppm)": np.sqrt(frame["co2_above_ambient_ppm"]),
        "night_temp_c": frame["night_temp_c"],
        "1/plant_density_m2": 1.0 / frame["plant_density_m2"],
        "Amber": (frame["cultivar"] == "Amber").astype(float),
        "Garnet": (frame["cultivar"] == "Garnet").astype(float),
    })
    fit = sm.OLS(frame[RESPONSE], sm.add_constant(X)).fit()
    want = {"const": TRUE_INTERCEPT, **{k: v for k, v in TRUE_COEFFICIENTS.items() if k != "cultivar"},
            "Amber": TRUE_COEFFICIENTS["cultivar"]["Amber"], "Garnet": TRUE_COEFFICIENTS["cultivar"]["Garnet"]}
    for name, value in want.items():
        assert abs(fit.params[name] - value) < 5 * fit.bse[name] + 0.05, name
    assert TRUE_EQUATION.startswith(f"{RESPONSE} = 6 + 5.5*log(light_mol_m2_day)")
    assert "- 10/plant_density_m2" in TRUE_EQUATION and "Amber +1.6" in TRUE_EQUATION
