"""The notebook face end to end: search → Result, refits, persistence, determinism."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import selectkit
from selectkit.errors import InputError, OptionError


def _small_frame(n=120, seed=3):
    # invented: yield from log(light) and 1/density, plus three noise probes and a cultivar; density spans
    # 1-4 plants/m², where 1/density bends enough for 120 rows to show it (over 2-4 it is nearly straight)
    rng = np.random.default_rng(seed)
    light = rng.uniform(8, 30, n)
    density = rng.uniform(1, 4, n)
    cultivar = rng.choice(["Ruby", "Amber"], n)
    frame = pd.DataFrame({
        "light": light,
        "density": density,
        "probe_a": rng.normal(50, 10, n),
        "probe_b": rng.normal(5, 1, n),
        "cultivar": cultivar,
    })
    frame["yield_kg_m2"] = (5 + 6 * np.log(light) - 9 / density + 1.5 * (cultivar == "Amber")
                            + rng.normal(0, 0.8, n))
    return frame


@pytest.fixture(scope="module")
def result():
    return selectkit.search(_small_frame(), response="yield_kg_m2", methods=("exhaustive",),
                            forms=("identity", "log", "reciprocal"), seed=0)


def test_search_recovers_the_generating_terms(result):
    assert isinstance(result.shortlist, pd.DataFrame)
    assert set(result.terms(0)) == {"log(light)", "1/density", "cultivar"}


def test_model_is_the_statsmodels_refit_of_the_same_columns(result):
    # reference: statsmodels OLS on the columns built by hand
    frame = _small_frame()
    X = pd.DataFrame({"log_light": np.log(frame["light"]), "inv_density": 1 / frame["density"],
                      "amber": (frame["cultivar"] == "Amber").astype(float)})
    ref = sm.OLS(frame["yield_kg_m2"], sm.add_constant(X)).fit()
    fit = result.model(0)
    assert np.isclose(fit.ssr, ref.ssr, rtol=1e-10)
    # the reference level of cultivar is the more frequent one, so compare what does not depend on coding
    assert np.allclose(fit.fittedvalues, ref.fittedvalues, rtol=1e-10)
    assert np.isclose(fit.params["log(light)"], ref.params["log_light"], rtol=1e-9)
    assert np.isclose(fit.params["1/density"], ref.params["inv_density"], rtol=1e-9)
    assert np.allclose(fit.bse["log(light)"], ref.bse["log_light"], rtol=1e-9)


def test_predict_on_new_rows_matches_the_refit(result):
    frame = _small_frame()
    pred = result.predict(frame.drop(columns="yield_kg_m2"), 0)
    assert np.allclose(pred, result.model(0).fittedvalues, rtol=1e-9, atol=1e-9)


def test_save_and_load_round_trip(result, tmp_path):
    path = result.save(tmp_path / "greenhouse.skres")
    back = selectkit.load(path)
    pd.testing.assert_frame_equal(back.shortlist, result.shortlist)
    assert back.terms(0) == result.terms(0)


def test_load_refuses_other_files(tmp_path):
    bad = tmp_path / "not-a-result.bin"
    bad.write_bytes(b"\x80\x04K\x01.")  # a pickle of the number 1
    with pytest.raises(selectkit.SelectkitError):
        selectkit.load(bad)
    with pytest.raises(FileNotFoundError):
        selectkit.load(tmp_path / "missing.skres")


def test_repr_html_escapes_user_strings():
    frame = _small_frame().rename(columns={"probe_a": "<script>alert(1)</script>"})
    res = selectkit.search(frame, response="yield_kg_m2", methods=("exhaustive",), forms=("identity",),
                           shortlist_size=30)
    page = res._repr_html_()
    assert "<script>" not in page


def test_same_shortlist_for_one_and_two_workers():
    frame = _small_frame()
    one = selectkit.search(frame, response="yield_kg_m2", methods=("exhaustive", "stepwise"), workers=1, seed=4)
    two = selectkit.search(frame, response="yield_kg_m2", methods=("exhaustive", "stepwise"), workers=2, seed=4)
    pd.testing.assert_frame_equal(one.shortlist, two.shortlist)


def test_unknown_method_lists_valid_ones():
    with pytest.raises(OptionError, match="exhaustive"):
        selectkit.search(_small_frame(), response="yield_kg_m2", methods=("greedy",))


def test_unknown_method_setting_suggests_nearest():
    with pytest.raises(OptionError, match="did you mean"):
        selectkit.search(_small_frame(), response="yield_kg_m2", methods=("exhaustive",),
                         method_options={"exhaustive": {"max_sise": 3}})


@pytest.mark.parametrize("options, words", [
    ({"methods": ("both",)}, "did you mean 'stepwise'"),
    ({"parameter_count": "statsmodels"}, "did you mean 'coefficients-only'"),
    ({"parameter_count": "selectkit"}, "did you mean 'sigma-counted'"),
    ({"convention": "sigma-counted"}, "did you mean parameter_count="),
    ({"n_jobs": 2}, "did you mean workers="),
    ({"forced": ["x"]}, "did you mean always_include="),
    ({"methods": ("stepwise",), "method_options": {"stepwise": {"direction": "forward"}}},
     "did you mean methods=('forward',)"),
    ({"methods": ("forward",), "method_options": {"both": {}}}, "did you mean 'stepwise'"),
    ({"methods": ("forward",), "method_options": {"forward": {"direction": "both"}}},
     "did you mean methods=('stepwise',)"),
])
def test_former_names_are_refused_with_the_new_spelling(options, words):
    with pytest.raises(OptionError, match=words.replace("(", r"\(").replace(")", r"\)")):
        selectkit.search(_small_frame(), response="yield_kg_m2", **options)


def test_missing_response_is_an_input_error():
    with pytest.raises(InputError, match="yield"):
        selectkit.search(_small_frame(), response="yield")


def test_response_boxcox_of_a_shortlisted_model_finds_a_log_scale():
    # simulation (seeded): y = exp(linear predictor + noise), so λ = 0 is right and λ = 1 is not (Box & Cox 1964)
    rng = np.random.default_rng(21)
    frame = pd.DataFrame({"light": rng.uniform(8, 30, 150), "probe": rng.normal(0, 1, 150)})
    frame["yield_kg_m2"] = np.exp(1 + 0.08 * frame["light"] + rng.normal(0, 0.15, 150))
    res = selectkit.search(frame, response="yield_kg_m2", methods=("exhaustive",), forms=("identity",))
    fit = res.response_boxcox(0)
    low, high = fit.interval
    assert low <= 0 <= high and high < 1


def test_shortlist_names_the_variables_behind_the_forms(result):
    families = {t.name: t.family for t in result.candidates.terms}
    for i in range(len(result.shortlist)):
        listed = [v for v in result.shortlist["variables"].iloc[i].split(", ") if v]
        assert sorted(listed) == sorted({families[name] for name in result.terms(i)})
    same = result.shortlist.groupby("variables")["position"].apply(list)
    if (same.apply(len) > 1).any():
        assert "hold the same variables in different forms" in result.summary()


def test_shortlisted_press_is_leave_one_out_error(result):
    # reference: scikit-learn's LeaveOneOut refits of model 0's columns (Allen 1974: PRESS = LOO error)
    from sklearn.linear_model import LinearRegression
    from sklearn.model_selection import LeaveOneOut, cross_val_predict

    cols = [c for j in result.ranking.subsets[0] for c in result.candidates.terms[j].columns]
    X, y = result.candidates.matrix[:, cols], result.candidates.y
    loo = cross_val_predict(LinearRegression(), X, y, cv=LeaveOneOut())
    assert np.isclose(result.shortlist["press"].iloc[0], np.sum((y - loo) ** 2), rtol=1e-9)
    assert result.shortlist["press"].notna().all()
