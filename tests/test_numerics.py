"""Numerical edge cases: offsets, near-constant signal columns, tiny and huge values.

Each case goes through ``selectkit.search`` on a DataFrame and through the command line.  The
data are invented (greenhouse bays); every coefficient is checked against an independent
computation (numpy's lstsq on centred data, statsmodels OLS on a rescaled problem), transformed
back to the original units.
"""

import dataclasses
import re
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import selectkit
from selectkit import api
from selectkit.cli import main
from selectkit.errors import InputError, SearchError
from selectkit.moments import compute_moments, moments_of
from selectkit.rank import _least_squares, fit_model, refit
from selectkit.searches._found import Found
from tests.factories import make_candidates

N = 60


def _run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "selectkit", *args], capture_output=True, text=True,
                          cwd=cwd, timeout=300)


def _offset_frame():
    """Sensor readings logged with an offset of 1e9 in both the predictors and the response."""
    rng = np.random.default_rng(11)
    u1, u2 = rng.normal(size=N), rng.normal(size=N)
    return pd.DataFrame({"probe_a": 1e9 + u1, "probe_b": 1e9 + u2,
                         "yield_g": 1e9 + 2.0 * u1 - 1.0 * u2 + 0.1 * rng.normal(size=N)})


def _near_constant_frame():
    """A column that barely moves (5 + 1e-9·noise) but carries the whole signal."""
    rng = np.random.default_rng(12)
    noise = rng.normal(size=N)
    return pd.DataFrame({"drift": 5.0 + 1e-9 * noise, "shade": rng.normal(size=N),
                         "yield_g": 2.0 + 3.0 * noise + 0.1 * rng.normal(size=N)})


def _centred_fit(frame, columns, response):
    """Independent fit: numpy lstsq on centred columns, statsmodels OLS for the standard errors
    on the same centred problem, both transformed back to the original units."""
    x = frame[columns].to_numpy(dtype=float)
    y = frame[response].to_numpy(dtype=float)
    xbar, ybar = x.mean(axis=0), y.mean()
    xc, yc = x - xbar, y - ybar
    slopes = np.linalg.lstsq(xc, yc, rcond=None)[0]
    intercept = ybar - xbar @ slopes
    centred = sm.OLS(yc, sm.add_constant(xc)).fit()
    # β₀ = a − x̄ᵀβ: covariance through T = [[1, −x̄ᵀ], [0, I]].
    t = np.eye(len(columns) + 1)
    t[0, 1:] = -xbar
    cov = t @ np.asarray(centred.cov_params()) @ t.T
    return np.r_[intercept, slopes], np.sqrt(np.diag(cov))


def _estimates(result, i=0):
    table = result.ranking.fits[i].coefficients.set_index("coefficient")
    return table


# --------------------------------------------------------------------------- offsets of 1e9


def test_offsets_of_1e9_refit_matches_centred_lstsq_and_statsmodels():
    frame = _offset_frame()
    result = selectkit.search(frame, response="yield_g", forms=["identity"], methods=["exhaustive"])
    assert set(result.terms(0)) == {"probe_a", "probe_b"}
    table = _estimates(result)
    expected, expected_se = _centred_fit(frame, ["probe_a", "probe_b"], "yield_g")
    got = table.loc[["intercept", "probe_a", "probe_b"], "estimate"].to_numpy()
    # Slopes: the offset costs ~1e-7 absolute per stored value (ulp of 1e9) and nothing more.
    np.testing.assert_allclose(got[1:], expected[1:], rtol=1e-7)
    np.testing.assert_allclose(got[0], expected[0], rtol=1e-7)
    se = table.loc[["intercept", "probe_a", "probe_b"], "std_error"].to_numpy()
    assert np.all(np.isfinite(se))
    np.testing.assert_allclose(se, expected_se, rtol=1e-4)
    checks = result.checks(0)
    # condition number of the standardised columns, computed independently with numpy's SVD
    z = frame[["probe_a", "probe_b"]].to_numpy() - frame[["probe_a", "probe_b"]].to_numpy().mean(axis=0)
    s = np.linalg.svd(z / np.linalg.norm(z, axis=0), compute_uv=False)
    assert checks.condition_number == pytest.approx(s[0] / s[-1], rel=1e-6)


def test_offsets_cli_succeeds_and_writes(tmp_path, capsys):
    path = tmp_path / "probes.csv"
    _offset_frame().to_csv(path, index=False, float_format="%.17g")
    out = tmp_path / "out"
    assert main(["search", str(path), "-r", "yield_g", "--forms", "identity", "--output", str(out)]) == 0
    assert any(p.name.endswith(".html") for p in out.iterdir())


# --------------------------------------------------------------------------- near-constant signal


def test_near_constant_signal_column_is_refitted_exactly():
    frame = _near_constant_frame()
    result = selectkit.search(frame, response="yield_g", forms=["identity"], methods=["exhaustive"])
    assert "drift" in result.terms(0)
    columns = [c for c in ("drift", "shade") if c in result.terms(0)]
    table = _estimates(result)
    expected, expected_se = _centred_fit(frame, columns, "yield_g")
    got = table.loc[["intercept"] + columns, "estimate"].to_numpy()
    np.testing.assert_allclose(got, expected, rtol=1e-8)
    # The slope on drift is about 3e9 (3 per unit of noise, noise = 1e9·(drift − 5)).
    assert table.loc["drift", "estimate"] == pytest.approx(3e9, rel=0.05)
    np.testing.assert_allclose(table.loc[["intercept"] + columns, "std_error"].to_numpy(), expected_se, rtol=1e-4)
    result.checks(0)  # the checks run too


def test_near_constant_cli_succeeds(tmp_path):
    path = tmp_path / "drift.csv"
    _near_constant_frame().to_csv(path, index=False, float_format="%.17g")
    out = tmp_path / "out"
    proc = _run("search", str(path), "-r", "yield_g", "--forms", "identity", "--output", str(out), "--quiet")
    assert proc.returncode == 0, proc.stderr
    assert any(p.name.endswith(".csv") for p in out.iterdir())


# --------------------------------------------------------------------------- beyond double precision


def _subnormal_frame():
    rng = np.random.default_rng(13)
    frame = pd.DataFrame({"trace_gas": 1e-310 * (1.0 + rng.uniform(size=N)), "shade": rng.normal(size=N)})
    frame["yield_g"] = 1.0 + frame["shade"] + rng.normal(size=N)
    return frame


def _huge_response_frame():
    rng = np.random.default_rng(14)
    frame = pd.DataFrame({"light": rng.uniform(1, 10, N), "shade": rng.normal(size=N)})
    frame["yield_g"] = 1e300 * (1.0 + 0.1 * frame["light"] + 0.01 * rng.normal(size=N))
    return frame


def test_subnormal_column_is_named_as_beyond_double_precision_not_a_combination():
    # Its sums of squares would underflow: the column is left out of the search with its reason (the run
    # goes on with the rest), and never called a linear combination of the others.
    result = selectkit.search(_subnormal_frame(), response="yield_g")
    (aside,) = [r for r in result.candidates.refused if r.family == "trace_gas" and r.form == "every form"]
    assert "beyond what sums of squares can hold in double precision; rescale the column" in aside.reason
    assert "combination" not in aside.reason
    assert set(result.terms(0)) == {"shade"}
    # forced into every model, it cannot be left out: one clear error naming it
    with pytest.raises(InputError, match="trace_gas") as caught:
        selectkit.search(_subnormal_frame(), response="yield_g", always_include=["trace_gas"])
    assert "double precision" in str(caught.value) and "combination" not in str(caught.value)


def test_huge_response_says_so_instead_of_blaming_the_criterion():
    with pytest.raises(InputError) as caught:
        selectkit.search(_huge_response_frame(), response="yield_g")
    message = str(caught.value)
    assert "response 'yield_g'" in message and f"{N} of the {N} rows" in message
    assert re.search(r"divide it by 1e29\d", message)  # the deviations are about 5e299
    assert "criterion" not in message


def test_beyond_double_precision_cli_exits_2_with_one_line(tmp_path):
    path = tmp_path / "bays.csv"
    _huge_response_frame().to_csv(path, index=False, float_format="%.17g")
    out = tmp_path / "out"
    proc = _run("search", str(path), "-r", "yield_g", "--output", str(out))
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "power of ten" in lines[0] and "Traceback" not in proc.stderr
    assert not out.exists()


def test_a_predictor_beyond_double_precision_is_named_at_the_terminal(tmp_path):
    path = tmp_path / "bays.csv"
    _subnormal_frame().to_csv(path, index=False, float_format="%.17g")
    proc = _run("search", str(path), "-r", "yield_g", "--output", str(tmp_path / "out"))
    assert proc.returncode == 0, proc.stderr
    assert "note: trace_gas is not in the search:" in proc.stdout and "double precision" in proc.stdout


@pytest.mark.parametrize("factor", [1e60, 1e-60])
def test_a_response_far_from_one_but_within_range_ranks_and_scales(factor):
    # Scaling the response by a power of ten changes no ranking; the coefficients scale with it.
    # (At 1e±60 the fourth powers of the residuals — cross-validation's standard error, the
    # Jarque-Bera kurtosis — still fit in a double; beyond about 1e±77 they do not, see the report.)
    frame = _huge_response_frame()
    frame["yield_g"] = 1.0 + 0.1 * frame["light"] + 0.01 * np.random.default_rng(15).normal(size=N)
    base = selectkit.search(frame, response="yield_g", forms=["identity", "log"], methods=["exhaustive"])
    scaled_frame = frame.assign(yield_g=frame["yield_g"] * factor)
    scaled = selectkit.search(scaled_frame, response="yield_g", forms=["identity", "log"], methods=["exhaustive"])
    assert scaled.ranking.subsets == base.ranking.subsets
    np.testing.assert_allclose(scaled.ranking.fits[0].coefficients["estimate"].to_numpy(),
                               base.ranking.fits[0].coefficients["estimate"].to_numpy() * factor, rtol=1e-9)


def test_compute_moments_without_names_points_at_the_column_index():
    x = np.column_stack([np.linspace(0, 1, 10), 1e-200 * np.arange(10.0)])
    with pytest.raises(InputError, match="candidate column 1"):
        compute_moments(x, np.arange(10.0))


# --------------------------------------------------------------------------- the scaled factorisation


def test_least_squares_agrees_with_statsmodels_ols_and_wls():
    rng = np.random.default_rng(16)
    x = np.column_stack([np.ones(50), rng.normal(size=(50, 3))])
    y = x @ [1.0, 2.0, -1.0, 0.5] + rng.normal(size=50)
    fit = _least_squares(x, y)
    reference = sm.OLS(y, x).fit()
    np.testing.assert_allclose(fit.coef, reference.params, rtol=1e-12)
    np.testing.assert_allclose(fit.cov_root @ fit.cov_root.T, reference.normalized_cov_params, rtol=1e-10)
    np.testing.assert_allclose(fit.hat, reference.get_influence().hat_matrix_diag, rtol=1e-10)
    w = rng.uniform(0.5, 2.0, 50)
    cands = make_candidates(x[:, 1:], y, weights=w)
    mine = refit(cands, (0, 1, 2))
    theirs = sm.WLS(y, x, weights=w).fit()
    np.testing.assert_allclose(np.asarray(mine.params), theirs.params, rtol=1e-12)
    np.testing.assert_allclose(np.asarray(mine.bse), theirs.bse, rtol=1e-10)


def test_least_squares_names_the_dependent_column():
    rng = np.random.default_rng(17)
    a = rng.normal(size=30)
    x = np.column_stack([np.ones(30), a, rng.normal(size=30), 3.0 * a - 2.0])
    fit = _least_squares(x, rng.normal(size=30))
    assert fit.dependent == 3 and fit.rank == 3


# --------------------------------------------------------------------------- one model never aborts the run


def test_a_shortlisted_model_that_cannot_be_refitted_is_reported_and_the_run_completes(tmp_path):
    rng = np.random.default_rng(18)
    frame = pd.DataFrame({"light": rng.uniform(1, 10, 40), "co2": rng.uniform(100, 500, 40)})
    frame["yield_g"] = 1 + np.log(frame["light"]) + 0.01 * frame["co2"] + 0.1 * rng.normal(size=40)
    setup = api.prepare_search(frame, response="yield_g", methods=["exhaustive"], forms=["identity", "log"],
                               curvature_test=False)
    names = [t.name for t in setup.candidates.terms]
    i, j = names.index("log(light)"), names.index("log(co2)")
    # Make log(co2) an exact affine copy of log(light) behind the intake's back, and hand the
    # ranking that singular model as the best one: it must be reported with its reason.
    matrix = setup.candidates.matrix.copy()
    matrix[:, setup.candidates.terms[j].columns[0]] = 2.0 * matrix[:, setup.candidates.terms[i].columns[0]] + 1.0
    cands = dataclasses.replace(setup.candidates, matrix=matrix)
    setup = dataclasses.replace(setup, candidates=cands, moments=moments_of(cands))
    founds = list(api.run_methods(setup))
    singular = tuple(sorted((i, j)))
    founds.append(Found(method="listed", subsets=(singular,), rss=np.array([0.999 * min(founds[0].rss)]),
                        k=np.array([3]), n=40))
    result = api.finish(setup, founds)
    assert result.ranking.subsets[0] == singular
    fit = result.ranking.fits[0]
    assert fit.problem is not None and "'log(co2)'" in fit.problem
    assert fit.coefficients["estimate"].isna().all()
    assert all(f.problem is None for f in result.ranking.fits[1:])
    with pytest.raises(SearchError):
        result.checks(0)  # asked for directly, the model still says why it cannot be checked
    diagnoses = result.diagnoses()
    assert diagnoses[0] is None and all(d is not None for d in diagnoses[1:])
    paths = result.write(tmp_path / "out")
    assert all(p.exists() for p in paths.values())
    notes = [n for n in result.ranking.notes if n.startswith("Model 1 ")]
    assert len(notes) == 1 and "log(co2)" in notes[0]
    assert "could not be refitted or checked" in result.summary()
    html = next(p for p in paths.values() if str(p).endswith(".html")).read_text(encoding="utf-8")
    assert "could not be refitted or checked" in html


def test_fit_model_reports_instead_of_raising():
    rng = np.random.default_rng(19)
    a = rng.normal(size=30)
    cands = make_candidates(np.column_stack([a, 2.0 * a, rng.normal(size=30)]), rng.normal(size=30))
    fit = fit_model(cands, (0, 1))
    assert fit.problem is not None and "not refitted" in fit.equation
    assert fit_model(cands, (0, 2)).problem is None
