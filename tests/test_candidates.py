"""Tests of the candidate generator (selectkit.candidates)."""

import numpy as np
import pandas as pd
import pytest
import scipy.stats
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from selectkit import transforms as tf
from selectkit.candidates import CandidateSet, Refusal, ResponseTransform, Term, build_candidates
from selectkit.data import Dataset
from selectkit.errors import InputError, OptionError

CULTIVARS = ["Alma", "Ruby", "Sol"]


def every_form(dataset, **options):
    """build_candidates without the curvature gate: for tests of how each form is built."""
    return build_candidates(dataset, curvature_test=False, **options)


def greenhouse(n=120, seed=0, *, forced=(), weights=False):
    """Invented greenhouse bays: light (positive), co2 above ambient (3 zeros), night temperature
    anomaly (both signs), bay density (positive) and cultivar (categorical, reference 'Alma')."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({
        "light": rng.uniform(5.0, 30.0, n),
        "co2_above": rng.uniform(0.0, 400.0, n),
        "night_temp": rng.normal(0.0, 2.0, n),
        "density": rng.uniform(2.0, 4.0, n),
        "cultivar": pd.Categorical(rng.choice(CULTIVARS, n), categories=CULTIVARS),
    })
    frame.loc[:2, "co2_above"] = 0.0
    y = (5.0 + 2.0 * np.log(frame["light"].to_numpy()) + 0.1 * np.sqrt(frame["co2_above"].to_numpy())
         + 3.0 / frame["density"].to_numpy() + rng.normal(0.0, 0.3, n))
    return Dataset(response="yield_kg_m2", y=y, frame=frame, numeric=("light", "co2_above", "night_temp", "density"),
                   categorical=("cultivar",), forced=tuple(forced),
                   weights=rng.uniform(0.5, 2.0, n) if weights else None)


def small_dataset(columns, y=None, *, categorical=(), forced=()):
    frame = pd.DataFrame(columns)
    numeric = tuple(c for c in frame.columns if c not in categorical)
    n = len(frame)
    if y is None:
        y = np.random.default_rng(0).normal(size=n) + 10
    return Dataset(response="y", y=np.asarray(y, float), frame=frame, numeric=numeric,
                   categorical=tuple(categorical), forced=tuple(forced))


def term(cands, name):
    return cands.terms[cands.term_index(name)]


def column(cands, name):
    return cands.matrix[:, list(term(cands, name).columns)]


# --------------------------------------------------------------- forms


def test_default_forms_values_and_structure():
    ds = greenhouse()
    cands = build_candidates(ds)
    assert isinstance(cands, CandidateSet)
    assert cands.matrix.dtype == np.float64 and cands.matrix.flags.c_contiguous
    assert np.isfinite(cands.matrix).all()
    light = ds.frame["light"].to_numpy()
    np.testing.assert_array_equal(column(cands, "light")[:, 0], light)
    np.testing.assert_allclose(column(cands, "log(light)")[:, 0], np.log(light))
    np.testing.assert_allclose(column(cands, "sqrt(light)")[:, 0], np.sqrt(light))
    np.testing.assert_allclose(column(cands, "1/light")[:, 0], 1 / light)
    np.testing.assert_allclose(column(cands, "light^2")[:, 0], light**2)
    # Identity first in each family; families in column order.
    assert cands.families == ("light", "co2_above", "night_temp", "density", "cultivar")
    for fam in cands.families:
        first = next(t for t in cands.terms if t.family == fam)
        assert first.transform in ("identity", "dummies")
    # family_index agrees with families
    assert [cands.families[i] for i in cands.family_index] == [t.family for t in cands.terms]
    assert cands.family_index.dtype.kind == "i"
    # columns are contiguous and cover the matrix exactly once
    cols = [c for t in cands.terms for c in t.columns]
    assert cols == list(range(cands.matrix.shape[1]))
    assert len(cands.column_names) == cands.matrix.shape[1]
    assert cands.y is not None and np.array_equal(cands.y, ds.y)
    assert cands.response_transform.transform == "identity" and cands.response_transform.log_jacobian == 0.0


def skewed_greenhouse(n=120, seed=0):
    """Right-skewed positive predictors (lognormal light, gamma density), whose Box-Cox λ̂ lie far from 1."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"light": rng.lognormal(2.5, 0.6, n), "density": rng.gamma(2.0, 1.5, n) + 0.5,
                          "uniform_age": rng.uniform(1.0, 9.0, n)})
    y = 5.0 + 2.0 * np.log(frame["light"].to_numpy()) + rng.normal(0.0, 0.3, n)
    return Dataset(response="yield_kg_m2", y=y, frame=frame, numeric=tuple(frame.columns), categorical=())


def test_boxcox_lambda_of_each_predictor_is_the_scipy_mle():
    # Reference library: scipy.stats.boxcox_normmax(x, method='mle') of the predictor's own values.
    ds = skewed_greenhouse()
    cands = every_form(ds, forms=("identity", "boxcox"), near_duplicate=None)
    bc = [t for t in cands.terms if t.transform == "boxcox"]
    assert {t.family for t in bc} == {"light", "density"}
    for t in bc:
        x = ds.frame[t.family].to_numpy()
        lam = dict(t.params)["lambda"]
        assert lam == pytest.approx(scipy.stats.boxcox_normmax(x, method="mle"), abs=1e-6)
        np.testing.assert_allclose(column(cands, t.name)[:, 0], scipy.stats.boxcox(x, lmbda=lam), rtol=1e-10)
        assert t.name == f"boxcox({t.family}, {tf.format_number(lam, 2)})"


def test_yeojohnson_stands_in_for_boxcox_with_nonpositive_values():
    # Reference library: the λ of scipy.stats.yeojohnson(x).
    ds = greenhouse()
    cands = every_form(ds, forms=("identity", "boxcox"), near_duplicate=None)
    # night_temp is normal: its Yeo-Johnson λ̂ is about 1, a twin of the raw form (refused, with the reason)
    lam = scipy.stats.yeojohnson(ds.frame["night_temp"].to_numpy())[1]
    assert abs(lam - 1) < 0.1
    assert [t.name for t in cands.terms if t.family == "night_temp"] == ["night_temp"]
    (twin,) = [r for r in cands.refused if r.family == "night_temp"]
    assert "twin of night_temp" in twin.reason
    for fam in ("co2_above",):
        (t,) = [t for t in cands.terms if t.family == fam and t.transform != "identity"]
        assert t.transform == "yeojohnson"
        x = ds.frame[fam].to_numpy()
        assert dict(t.params)["lambda"] == pytest.approx(scipy.stats.yeojohnson(x)[1], abs=1e-6)
        assert any(fam in note and "Yeo-Johnson used in place of Box-Cox" in note for note in cands.notes)


def test_domain_refusals_name_the_count_and_the_fix():
    ds = greenhouse()
    cands = every_form(ds)
    report = cands.describe()
    refused = report[report["status"] == "refused"]
    log_co2 = refused[(refused["family"] == "co2_above") & (refused["form"] == "log")]
    assert len(log_co2) == 1
    reason = log_co2["reason"].iloc[0]
    assert reason.startswith("3 of 120 values are zero; log is undefined there")
    assert "shifts={'co2_above': 1}" in reason and "log(co2_above + 1)" in reason
    assert "shifts={'co2_above': 1}" in reason
    assert "log(co2_above)" not in set(cands.names)
    sqrt_temp = refused[(refused["family"] == "night_temp") & (refused["form"] == "sqrt")]
    n_negative = int((ds.frame["night_temp"] < 0).sum())
    assert sqrt_temp["reason"].iloc[0].startswith(f"{n_negative} of 120 values are negative")
    # night_temp crosses zero: 1/x would have its pole inside the data, so it is refused, saying so
    assert "1/night_temp" not in cands.names
    (pole,) = refused[(refused["family"] == "night_temp") & (refused["form"] == "reciprocal")]["reason"]
    low, high = ds.frame["night_temp"].min(), ds.frame["night_temp"].max()
    assert pole.startswith(f"night_temp crosses zero (min {tf.format_number(low)}, max {tf.format_number(high)})")
    assert "pole inside the data" in pole and "shifts={'night_temp': " in pole
    # every refusal is a Refusal with family, form and reason
    assert all(isinstance(r, Refusal) and r.reason for r in cands.refused)


def test_shifts_are_honoured_and_reported():
    ds = greenhouse()
    cands = every_form(ds, shifts={"co2_above": 1, "night_temp": "auto"})
    x = ds.frame["co2_above"].to_numpy()
    t = term(cands, "log(co2_above + 1)")
    assert dict(t.params)["shift"] == 1.0
    np.testing.assert_allclose(column(cands, "log(co2_above + 1)")[:, 0], np.log(x + 1))
    np.testing.assert_allclose(column(cands, "1/(co2_above + 1)")[:, 0], 1 / (x + 1))
    # identity and square are never shifted
    assert "co2_above" in cands.names and "co2_above^2" in cands.names
    temp = ds.frame["night_temp"].to_numpy()
    c = 1.0 - temp.min()  # auto: the smallest shift making every value at least 1
    (log_temp,) = [t for t in cands.terms if t.family == "night_temp" and t.transform == "log"]
    assert dict(log_temp.params)["shift"] == pytest.approx(c)
    assert log_temp.name == f"log(night_temp + {tf.format_number(c)})"
    assert np.min(temp + c) == pytest.approx(1.0)
    # Box-Cox replaces Yeo-Johnson once the shift makes the values positive
    assert any(t.family == "night_temp" and t.transform == "boxcox" for t in cands.terms)
    assert any("night_temp" in n and "auto" in n for n in cands.notes)
    assert any("co2_above" in n and "as asked" in n for n in cands.notes)
    report = cands.describe()
    assert "shift=1" in report.loc[report["term"] == "log(co2_above + 1)", "parameters"].iloc[0]


def test_too_small_shift_is_refused_with_advice():
    ds = small_dataset({"x": [-3.0, -1.0, 0.5, 2.0, 4.0, 1.0, 3.0, 2.5]})
    cands = every_form(ds, forms=("identity", "log"), shifts={"x": 2})
    (r,) = [r for r in cands.refused if r.form == "log"]
    assert "after the shift 2" in r.reason and "too small" in r.reason and "shifts={'x': 4}" in r.reason


def test_fractional_polynomials():
    ds = greenhouse()
    cands = build_candidates(ds, forms=("identity",), fractional_polynomials=True, near_duplicate=None)
    light = ds.frame["light"].to_numpy()
    names = [t.name for t in cands.terms if t.family == "light"]
    assert names == ["light", "1/light", "log(light)", "sqrt(light)", "light^2", "light^-2", "light^-0.5",
                     "light^3"]
    for p in tf.FRACTIONAL_POWERS:  # Royston & Altman (1994): x^p, p = 0 read as log
        name = tf.term_name("power", "light", {"power": p})
        expected = np.log(light) if p == 0 else light**p
        np.testing.assert_allclose(column(cands, name)[:, 0], expected, rtol=1e-12)


def test_unknown_options_raise_listing_valid_ones():
    ds = greenhouse(n=30)
    with pytest.raises(OptionError, match="identity, log, sqrt"):
        build_candidates(ds, forms=("identity", "cube"))
    with pytest.raises(OptionError, match="'light'"):
        build_candidates(ds, shifts={"cultivar": 1})
    with pytest.raises(OptionError, match="number or 'auto'"):
        build_candidates(ds, shifts={"light": "big"})
    with pytest.raises(OptionError, match="not a numeric predictor"):
        build_candidates(ds, interactions=[("light", "cultivar")])
    with pytest.raises(OptionError, match="near_duplicate"):
        build_candidates(ds, near_duplicate=1.5)
    with pytest.raises(OptionError, match="'log', 'sqrt'"):
        build_candidates(ds, response_transform="cube")
    with pytest.raises(OptionError, match="needs a λ"):
        build_candidates(ds, response_transform="boxcox")


# ------------------------------------------------------- blocks, hierarchy


def test_categorical_block_matches_pandas_dummies():
    # Reference library: pandas.get_dummies(drop_first=True) gives the non-reference dummies.
    ds = greenhouse()
    cands = build_candidates(ds, forms=("identity",))
    block = term(cands, "cultivar")
    assert block.kind == "block" and block.transform == "dummies" and block.width == 2
    assert block.levels == ("Ruby", "Sol") and block.reference == "Alma"
    assert [cands.column_names[c] for c in block.columns] == ["cultivar[Ruby]", "cultivar[Sol]"]
    expected = pd.get_dummies(ds.frame["cultivar"], drop_first=True).to_numpy(dtype=float)
    np.testing.assert_array_equal(column(cands, "cultivar"), expected)
    assert block.expression() == "[cultivar = Ruby] + [cultivar = Sol]"


def test_unused_reference_level_and_single_level():
    cat = pd.Categorical(["b", "c", "b", "c", "b", "c", "b", "c"], categories=["a", "b", "c"])
    one = pd.Categorical(["b"] * 8, categories=["b"])
    ds = small_dataset({"x": np.arange(1.0, 9.0), "kind": cat, "site": one}, categorical=("kind", "site"))
    cands = build_candidates(ds, forms=("identity",))
    block = term(cands, "kind")
    assert block.reference == "b" and block.levels == ("c",)
    assert any("'a'" in n and "do not occur" in n for n in cands.notes)
    assert any("reference level 'a' does not occur" in n for n in cands.notes)
    assert "site" not in cands.families
    assert any(r.family == "site" and "single level" in r.reason for r in cands.refused)


def test_interactions_all_pairs_and_hierarchy():
    ds = greenhouse()
    cands = build_candidates(ds, forms=("identity", "log"), interactions=True)
    inter = [t for t in cands.terms if t.kind == "interaction"]
    assert len(inter) == 6  # 4 numeric predictors → 6 pairs
    t = term(cands, "co2_above*light")  # names in alphabetical order
    assert t.family == "co2_above*light" and t.requires == ("co2_above", "light") and t.transform == "product"
    np.testing.assert_allclose(column(cands, "co2_above*light")[:, 0],
                               ds.frame["co2_above"].to_numpy() * ds.frame["light"].to_numpy())
    for t in inter:
        assert all(req in cands.families for req in t.requires)
    assert all(not t.requires for t in cands.terms if t.kind != "interaction")


def test_interactions_from_a_list_keep_the_given_order():
    ds = greenhouse()
    cands = build_candidates(ds, forms=("identity",), interactions=[("light", "density"), ("density", "light")])
    inter = [t for t in cands.terms if t.kind == "interaction"]
    assert [t.name for t in inter] == ["light*density"]
    assert inter[0].requires == ("light", "density")


def test_interaction_needs_its_main_effects():
    ds = small_dataset({"x": [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0], "z": np.arange(1.0, 9.0)})
    cands = build_candidates(ds, forms=("log",), interactions=True)
    assert "x" not in cands.families
    assert any(r.family == "x*z" and "needs a form of x" in r.reason for r in cands.refused)


def test_forced_family_marks_every_form():
    ds = greenhouse(forced=("light", "cultivar"))
    cands = build_candidates(ds)
    for t in cands.terms:
        assert t.forced == (t.family in ("light", "cultivar"))
    assert cands.describe().query("family == 'light' and status == 'kept'")["forced"].all()


def test_forced_family_without_any_form_is_an_error():
    ds = small_dataset({"x": [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0]}, forced=("x",))
    with pytest.raises(InputError, match="'x' must be in every model"):
        build_candidates(ds, forms=("log",))


# ------------------------------------------------------- near-duplicates


def test_near_duplicates_are_dropped_with_both_names():
    x = np.linspace(1000.0, 1001.0, 30)  # over a narrow range every smooth form is nearly linear
    ds = small_dataset({"x": x})
    cands = every_form(ds, forms=("identity", "log", "sqrt", "square"))
    assert [t.name for t in cands.terms] == ["x"]
    for r in cands.refused:
        assert "near-duplicate of x" in r.reason and r.name in r.reason and "kept x" in r.reason
    # |r| is the Pearson correlation: check one against numpy
    kept_all = every_form(ds, forms=("identity", "log", "sqrt", "square"), near_duplicate=None)
    assert len(kept_all.terms) == 4
    r = np.corrcoef(x, np.log(x))[0, 1]
    assert r > 0.9999


def test_binary_predictor_keeps_only_its_raw_form():
    ds = small_dataset({"vent_open": [0.0, 1.0] * 6})
    cands = build_candidates(ds)
    assert cands.names == ("vent_open",)
    forms = {r.form for r in cands.refused}
    assert {"log", "reciprocal", "sqrt", "square"} <= forms  # undefined at 0, or the same column as x


def test_constant_or_overflowing_forms_are_refused():
    ds = small_dataset({"x": [-1.0, 1.0] * 5, "big": np.geomspace(1e100, 1e160, 10)})
    cands = every_form(ds, forms=("identity", "square"))
    assert any(r.name == "x^2" and "constant" in r.reason for r in cands.refused)
    assert any(r.name == "big^2" and "not finite" in r.reason for r in cands.refused)
    assert np.isfinite(cands.matrix).all()


def test_constant_predictor_is_refused_once():
    ds = small_dataset({"x": np.arange(1.0, 9.0), "flat": np.full(8, 3.0)})
    cands = build_candidates(ds)
    assert "flat" not in cands.families
    (r,) = [r for r in cands.refused if r.family == "flat"]
    assert "constant" in r.reason


def test_too_few_rows_for_the_widest_model():
    rng = np.random.default_rng(0)
    ds = small_dataset({f"x{j}": rng.uniform(1, 2, 6) for j in range(5)})
    with pytest.raises(InputError, match="6 rows"):
        every_form(ds, forms=("identity",))
    # several forms of one family do not count against the rows: one form per model
    ds = small_dataset({f"x{j}": rng.uniform(1, 2, 8) for j in range(3)})
    cands = every_form(ds, forms=("identity", "log", "sqrt"), near_duplicate=None)
    assert cands.matrix.shape[1] > 8 - 2


# ------------------------------------------------------------- response


def test_response_transforms_and_log_jacobian():
    ds = greenhouse()
    y = ds.y
    log_c = build_candidates(ds, forms=("identity",), response_transform="log")
    np.testing.assert_allclose(log_c.y, np.log(y))
    assert log_c.response_transform == ResponseTransform("log(yield_kg_m2)", "log", (), -np.log(y).sum())
    bc = build_candidates(ds, forms=("identity",), response_transform=("boxcox", 0.5))
    np.testing.assert_allclose(bc.y, scipy.stats.boxcox(y, lmbda=0.5))  # reference library: scipy
    assert bc.response_transform.name == "boxcox(yield_kg_m2, 0.5)"
    assert bc.response_transform.log_jacobian == pytest.approx(-0.5 * np.log(y).sum())
    sq = build_candidates(ds, forms=("identity",), response_transform="sqrt")
    np.testing.assert_allclose(sq.y, np.sqrt(y))
    # with_response round trip from the original scale
    back = bc.with_response(None)
    np.testing.assert_array_equal(back.y, y)
    assert back.response_transform.log_jacobian == 0.0
    np.testing.assert_allclose(back.with_response("log").y, log_c.y)
    assert back.matrix is bc.matrix


def test_nonpositive_response_is_refused_for_log():
    ds = greenhouse(n=40)
    y = ds.y.copy()
    y[:2] = [0.0, -1.0]
    bad = Dataset(response="yield_kg_m2", y=y, frame=ds.frame, numeric=ds.numeric, categorical=ds.categorical)
    with pytest.raises(InputError, match="'yield_kg_m2' has 2 of 40 values ≤ 0"):
        build_candidates(bad, forms=("identity",), response_transform="log")
    cands = build_candidates(bad, forms=("identity",))
    with pytest.raises(InputError, match="≤ 0"):
        cands.with_response(("boxcox", 0.5))


def test_box_tidwell_form_uses_the_search_response_and_weights():
    rng = np.random.default_rng(4)
    x = rng.uniform(1.0, 10.0, 80)
    y = 2.0 + 3.0 * np.sqrt(x) + rng.normal(0.0, 0.01, 80)
    ds = small_dataset({"x": x}, y=y)
    cands = build_candidates(ds, forms=("identity", "boxtidwell"))
    (t,) = [t for t in cands.terms if t.transform == "boxtidwell"]
    assert dict(t.params)["power"] == pytest.approx(tf.box_tidwell(x, y).power, abs=1e-12)
    assert dict(t.params)["power"] == pytest.approx(0.5, abs=0.02)
    assert any("Box-Tidwell power" in n for n in cands.notes)
    w = rng.uniform(0.5, 2, 80)
    dsw = Dataset(response="y", y=y, frame=ds.frame, numeric=("x",), categorical=(), weights=w)
    (tw,) = [t for t in build_candidates(dsw, forms=("boxtidwell",)).terms]
    assert dict(tw.params)["power"] == pytest.approx(tf.box_tidwell(x, y, weights=w).power, abs=1e-12)


# ------------------------------------------------------------- new data


def test_transform_of_new_rows_and_errors():
    ds = greenhouse()
    cands = build_candidates(ds, interactions=[("light", "density")], shifts={"co2_above": "auto"})
    np.testing.assert_array_equal(cands.transform(ds.frame), cands.matrix)
    part = ds.frame.iloc[10:20].reset_index(drop=True)
    np.testing.assert_array_equal(cands.transform(part), cands.matrix[10:20])
    # plain strings instead of a Categorical work the same
    as_text = part.assign(cultivar=part["cultivar"].astype(str))
    np.testing.assert_array_equal(cands.transform(as_text), cands.matrix[10:20])
    unseen = part.assign(cultivar=["Zest"] + list(part["cultivar"].astype(str)[1:]))
    with pytest.raises(InputError, match="'cultivar'.*'Zest'"):
        cands.transform(unseen)
    with pytest.raises(InputError, match="lack 1 column.*'density'"):
        cands.transform(part.drop(columns="density"))
    bad = part.copy()
    bad.loc[0, "light"] = 0.0
    with pytest.raises(InputError, match="'light'.*1 of 10 values is zero"):
        cands.transform(bad)
    bad = part.copy()
    bad.loc[0, "light"] = np.nan
    with pytest.raises(InputError, match="'light'.*missing"):
        cands.transform(bad)


def test_describe_and_lookup():
    ds = greenhouse()
    cands = build_candidates(ds, interactions=[("light", "density")])
    report = cands.describe()
    assert list(report.columns) == ["term", "family", "form", "parameters", "columns", "requires", "forced",
                                    "status", "reason"]
    assert len(report) == len(cands.terms) + len(cands.refused)
    assert (report["status"] == "kept").sum() == len(cands.terms)
    assert report.loc[report["term"] == "cultivar", "columns"].iloc[0] == 2
    assert report.loc[report["term"] == "light*density", "requires"].iloc[0] == "light, density"
    assert cands.term_index("log(light)") == cands.names.index("log(light)")
    with pytest.raises(OptionError, match="no candidate term is named 'log\\(lite\\)'"):
        cands.term_index("log(lite)")
    assert isinstance(cands.terms[0], Term)


# ------------------------------------------------------------- properties

_values = st.one_of(
    st.floats(min_value=-1e3, max_value=1e3, allow_nan=False, allow_infinity=False),
    st.sampled_from([0.0, 1.0, 1e-8, -1e-8, 1e5]),
)


@st.composite
def datasets(draw):
    n = draw(st.integers(min_value=12, max_value=30))
    p = draw(st.integers(min_value=1, max_value=3))
    columns = {f"v{j}": draw(st.lists(_values, min_size=n, max_size=n)) for j in range(p)}
    frame = pd.DataFrame(columns, dtype=float)
    categorical = ()
    if draw(st.booleans()):
        frame["kind"] = pd.Categorical(draw(st.lists(st.sampled_from(["a", "b", "c"]), min_size=n, max_size=n)),
                                       categories=["a", "b", "c"])
        categorical = ("kind",)
    y = np.array(draw(st.lists(st.floats(min_value=-50, max_value=50, allow_nan=False), min_size=n, max_size=n)))
    numeric = tuple(f"v{j}" for j in range(p))
    shifts = {"v0": "auto"} if draw(st.booleans()) else None
    return Dataset(response="y", y=y, frame=frame, numeric=numeric, categorical=categorical), shifts


_settings = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@_settings
@given(datasets(), st.booleans())
def test_property_finite_and_reproducible(case, fp):
    ds, shifts = case
    cands = build_candidates(ds, shifts=shifts, fractional_polynomials=fp, interactions=True)
    assert cands.matrix.dtype == np.float64
    assert np.isfinite(cands.matrix).all()
    assert cands.matrix.shape == (ds.n, len(cands.column_names))
    np.testing.assert_array_equal(cands.transform(ds.frame), cands.matrix)
    # every family's terms are contiguous and every term has a unique name
    assert len(set(cands.names)) == len(cands.names)
    idx = cands.family_index
    assert np.all(np.diff(idx) >= 0)
    # deterministic: the same input gives the same candidates
    again = build_candidates(ds, shifts=shifts, fractional_polynomials=fp, interactions=True)
    assert again.names == cands.names and np.array_equal(again.matrix, cands.matrix)
    assert again.refused == cands.refused


@_settings
@given(datasets(), st.randoms(use_true_random=False))
def test_property_invariant_to_column_order(case, random):
    ds, shifts = case
    order = list(ds.frame.columns)
    random.shuffle(order)
    shuffled = Dataset(response="y", y=ds.y, frame=ds.frame[order], numeric=tuple(c for c in order if c in ds.numeric),
                       categorical=ds.categorical)
    a = build_candidates(ds, shifts=shifts, interactions=True)
    b = build_candidates(shuffled, shifts=shifts, interactions=True)

    def as_map(c):
        return {t.name: c.matrix[:, list(t.columns)] for t in c.terms}

    ma, mb = as_map(a), as_map(b)
    assert set(ma) == set(mb)
    for name in ma:
        np.testing.assert_array_equal(ma[name], mb[name])
    assert {(r.family, r.name, r.reason) for r in a.refused} == {(r.family, r.name, r.reason) for r in b.refused}


def test_box_tidwell_holds_the_other_predictors_linear():
    rng = np.random.default_rng(8)
    n = 150
    frame = pd.DataFrame({
        "spacing": rng.uniform(1.0, 10.0, n),
        "light": rng.normal(20.0, 5.0, n),
        "cultivar": pd.Categorical(rng.choice(CULTIVARS, n), categories=CULTIVARS),
    })
    y = (1.0 + 5.0 / frame["spacing"].to_numpy() + 0.5 * frame["light"].to_numpy()
         + (frame["cultivar"] == "Sol").to_numpy() * 2.0 + rng.normal(0.0, 0.05, n))
    ds = Dataset(response="y", y=y, frame=frame, numeric=("spacing", "light"), categorical=("cultivar",))
    cands = build_candidates(ds, forms=("identity", "boxtidwell"), box_tidwell_adjust=True)
    (t,) = [t for t in cands.terms if t.family == "spacing" and t.transform == "boxtidwell"]
    # the same fit by hand: covariates = light and the non-reference dummies of cultivar
    Z = np.column_stack([frame["light"].to_numpy(), pd.get_dummies(frame["cultivar"], drop_first=True).to_numpy(float)])
    expected = tf.box_tidwell(frame["spacing"].to_numpy(), y, covariates=Z).power
    assert dict(t.params)["power"] == pytest.approx(expected, abs=1e-7)
    assert dict(t.params)["power"] == pytest.approx(-1.0, abs=0.05)
    assert any("other predictors held linear" in note for note in cands.notes)
    alone = build_candidates(ds, forms=("identity", "boxtidwell"), box_tidwell_adjust=False)
    alone_terms = [t for t in alone.terms if t.family == "spacing" and t.transform == "boxtidwell"]
    marginal = tf.box_tidwell(frame["spacing"].to_numpy(), y)
    if marginal.power is None:
        assert not alone_terms
    else:
        assert dict(alone_terms[0].params)["power"] == pytest.approx(marginal.power, abs=1e-12)


def test_shipped_dataset_diabetes_raw_features():
    # Dataset shipped with scikit-learn (diabetes, raw units); reference library: scipy's Box-Cox MLE.
    from sklearn.datasets import load_diabetes

    bunch = load_diabetes(scaled=False, as_frame=True)
    frame = bunch.data.astype(float)
    ds = Dataset(response="progression", y=bunch.target.to_numpy(float), frame=frame, numeric=tuple(frame.columns),
                 categorical=())
    cands = build_candidates(ds)
    assert np.isfinite(cands.matrix).all()
    np.testing.assert_array_equal(cands.transform(frame), cands.matrix)
    # 'sex' takes two values (1, 2): each smooth form of it is a straight line of it, so only 'sex' remains
    assert [t.name for t in cands.terms if t.family == "sex"] == ["sex"]
    for t in cands.terms:
        if t.transform == "boxcox":
            x = frame[t.family].to_numpy()
            assert dict(t.params)["lambda"] == pytest.approx(scipy.stats.boxcox_normmax(x, method="mle"), abs=1e-6)
    # every feature is positive, so each gets a Box-Cox form, kept or refused as a near-duplicate
    boxcox_families = {t.family for t in cands.terms if t.transform == "boxcox"}
    boxcox_families |= {r.family for r in cands.refused if r.form == "boxcox"}
    assert boxcox_families == set(frame.columns)


def test_box_tidwell_form_needs_evidence_of_curvature():
    # invented: y curves in spacing (truth 1/spacing) and ignores probe; the t-test of x·log x added to the
    # linear fit (Box & Tidwell 1962) decides whether a power is built, at the 0.05 level (common practice)
    import statsmodels.api as sm

    rng = np.random.default_rng(5)
    n = 200
    frame = pd.DataFrame({"spacing": rng.uniform(1.0, 10.0, n), "probe": rng.uniform(1.0, 10.0, n)})
    y = 2.0 + 6.0 / frame["spacing"].to_numpy() + rng.normal(0.0, 0.2, n)
    ds = Dataset(response="y", y=y, frame=frame, numeric=("spacing", "probe"), categorical=())
    cands = every_form(ds, forms=("identity", "boxtidwell"))
    kept = {t.family for t in cands.terms if t.transform == "boxtidwell"}
    refused = {r.family: r.reason for r in cands.refused if r.form == "boxtidwell"}
    # reference: the same test by statsmodels OLS on [x, x·log x]
    for column in ("spacing", "probe"):
        x = frame[column].to_numpy()
        fit = sm.OLS(y, sm.add_constant(np.column_stack([x, x * np.log(x)]))).fit()
        if fit.pvalues[2] < 0.05:
            assert column in kept
        else:
            assert column in refused and "not distinguishable from 1" in refused[column]
    assert "spacing" in kept and "probe" in refused


# --------------------------------------------------------------- forms valid on the data (poles, twins)


def test_a_variable_crossing_zero_gets_no_form_with_a_pole_and_the_table_says_why():
    # A night temperature in °C from about -9 to 39: 1/x, log, sqrt and Box-Cox would put a pole or a
    # branch point inside the data; only the forms defined everywhere are built.
    rng = np.random.default_rng(3)
    temp = np.r_[-9.1, 38.9, rng.uniform(-9.0, 38.8, 198)]
    ds = small_dataset({"night_temp_c": temp}, y=20 + 0.2 * temp + rng.normal(0, 1, 200))
    cands = every_form(ds)
    assert set(cands.names) <= {"night_temp_c", "night_temp_c^2", *[n for n in cands.names if "yeojohnson" in n]}
    report = cands.describe().set_index("form")
    reason = report.loc["reciprocal", "reason"]
    assert reason.startswith("night_temp_c crosses zero (min -9.1, max 38.9); reciprocal has a pole inside")
    assert "shifts={'night_temp_c': 10.1}" in reason and "or leave the form out" in reason
    for form in ("log", "sqrt"):
        assert report.loc[form, "status"] == "refused"


def test_centred_columns_of_the_diabetes_data_get_no_reciprocal():
    # scikit-learn's bundled diabetes data (Efron et al. 2004): the ten predictors are centred and scaled,
    # so each crosses zero and 1/s1 would have its pole among the rows.
    from sklearn.datasets import load_diabetes

    bunch = load_diabetes(as_frame=True)
    frame = bunch.frame.drop(columns=["target", "sex"])
    ds = Dataset(response="progression", y=bunch.target.to_numpy(float), frame=frame,
                 numeric=tuple(frame.columns), categorical=())
    cands = every_form(ds)
    assert not [t.name for t in cands.terms if t.transform in ("reciprocal", "log", "sqrt", "boxcox")]
    pole = [r for r in cands.refused if r.family == "s1" and r.form == "reciprocal"]
    assert len(pole) == 1 and "s1 crosses zero" in pole[0].reason


def test_a_form_ruled_by_the_row_nearest_its_pole_is_not_built():
    # Positive everywhere, but one density is 0.01 while the rest lie in 2-4: 1/x puts nearly all its
    # spread on that row (leverage near 1 in a fit of 1/x alone; Huber 1981 calls above 0.5 dangerous).
    rng = np.random.default_rng(5)
    density = np.r_[0.01, rng.uniform(2.0, 4.0, 99)]
    ds = small_dataset({"density": density}, y=10 + rng.normal(0, 1, 100))
    cands = every_form(ds, forms=("identity", "reciprocal", "sqrt"))
    assert "1/density" not in cands.names and "sqrt(density)" in cands.names
    (refusal,) = [r for r in cands.refused if r.name == "1/density"]
    z = 1 / density - np.mean(1 / density)
    leverage = 1 / 100 + z[0] ** 2 / (z @ z)  # hat value of a one-regressor fit, by its textbook formula
    assert leverage > 0.5
    assert f"leverage of {leverage:.2f} on one row (data row 1, density = 0.01)" in refusal.reason
    assert "pole at zero" in refusal.reason


def test_a_data_chosen_power_next_to_a_named_form_is_its_twin():
    # A lognormal predictor: its Box-Cox λ̂ (the MLE of scipy.stats.boxcox_normmax) is close to 0, the log.
    rng = np.random.default_rng(2)
    light = rng.lognormal(2.5, 0.5, 400)
    lam = scipy.stats.boxcox_normmax(light, method="mle")
    assert abs(lam) <= 0.1
    ds = small_dataset({"light": light}, y=3 + np.log(light) + rng.normal(0, 0.2, 400))
    cands = build_candidates(ds, forms=("identity", "log", "boxcox"))
    assert [t.transform for t in cands.terms] == ["identity", "log"]
    (twin,) = [r for r in cands.refused if r.form == "boxcox"]
    assert f"is {lam:.3g}, within 0.1 of 0, the power of log(light): a twin" in twin.reason
    # without the log form there is no simpler twin, and the Box-Cox form is built
    assert [t.transform for t in build_candidates(ds, forms=("identity", "boxcox")).terms] == ["identity", "boxcox"]


# --------------------------------------------------------------- near-duplicate variables, collinear groups


def _units_table(n=300, seed=4):
    """Light logged twice: mol/m²/day and, by another sensor, a power of it (r = 0.99999 after a log)."""
    rng = np.random.default_rng(seed)
    light = rng.lognormal(2.7, 0.4, n)
    frame = {"light_mol": light, "co2_ppm": rng.uniform(50, 400, n),
             "light_lux_index": 3.1 * light**1.5 * np.exp(rng.normal(0, 3e-3, n))}
    y = 4 + 2 * np.log(light) + 0.004 * frame["co2_ppm"] + rng.normal(0, 0.3, n)
    return frame, y


def test_near_duplicate_variables_are_named_and_one_is_set_aside():
    frame, y = _units_table()
    cands = build_candidates(small_dataset(frame, y))
    assert "light_lux_index" not in {t.family for t in cands.terms}
    (aside,) = [r for r in cands.refused if r.family == "light_lux_index" and r.form == "every form"]
    # the best-matching forms are the two logs (log b = log 3.1 + 1.5 log a + noise)
    r = abs(np.corrcoef(np.log(frame["light_mol"]), np.log(frame["light_lux_index"]))[0, 1])
    assert 0.999 <= r < 0.99999
    assert f"near-duplicate of light_mol (|r| = {r:.6f} between log(light_mol) and log(light_lux_index)" in aside.reason
    assert "more usable forms (6 to 5)" in aside.reason and "prefer=['light_lux_index']" in aside.reason
    (note,) = [m for m in cands.notes if m.startswith("near-duplicates:")]
    assert "light_mol and light_lux_index" in note and "set light_lux_index aside" in note
    # the user picks the other one
    preferred = build_candidates(small_dataset(frame, y), prefer=["light_lux_index"])
    assert "light_mol" not in {t.family for t in preferred.terms}
    assert "you preferred it" in [r for r in preferred.refused if r.family == "light_mol" and r.form == "every form"][0].reason
    # both forced: both stay, with a note
    both = build_candidates(small_dataset(frame, y, forced=("light_mol", "light_lux_index")))
    assert {"light_mol", "light_lux_index"} <= {t.family for t in both.terms}
    assert any("both must be in every model" in m for m in both.notes)
    # turned off
    assert "light_lux_index" in {t.family for t in build_candidates(small_dataset(frame, y), twin_limit=None).terms}


def test_a_shared_outlier_does_not_make_two_noise_columns_twins():
    # Pearson r of two independent columns that share one huge value is near 1; their ranks are not.
    rng = np.random.default_rng(8)
    a, b = rng.normal(10, 1, 200), rng.normal(10, 1, 200)
    a[0] = b[0] = 1e4
    assert abs(np.corrcoef(a, b)[0, 1]) > 0.999
    cands = build_candidates(small_dataset({"a": a, "b": b}), forms=("identity",), vif_limit=None)
    assert {t.family for t in cands.terms} == {"a", "b"}


def test_a_nearly_collinear_group_loses_its_largest_vif_member():
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    rng = np.random.default_rng(6)
    n = 250
    heat, vent, lamps = rng.uniform(1, 5, n), rng.uniform(1, 5, n), rng.uniform(1, 5, n)
    total = heat + vent + lamps + rng.normal(0, 0.002, n)  # energy total: the sum of its parts
    frame = {"heat_kwh": heat, "vent_kwh": vent, "lamp_kwh": lamps, "total_kwh": total,
             "co2_ppm": rng.uniform(50, 400, n)}
    ds = small_dataset(frame, 3 + heat + rng.normal(0, 0.5, n))
    cands = build_candidates(ds, forms=("identity",))
    # Reference library: statsmodels' variance_inflation_factor on the design with an intercept.
    design = np.column_stack([np.ones(n)] + [frame[c] for c in frame])
    vifs = {c: variance_inflation_factor(design, j + 1) for j, c in enumerate(frame)}
    worst = max(vifs, key=vifs.get)
    assert vifs[worst] >= 1000
    (aside,) = [r for r in cands.refused if r.form == "every form"]
    assert aside.family == worst
    assert f"VIF {vifs[worst]:.4g} among the raw columns" in aside.reason
    for member in {"heat_kwh", "vent_kwh", "lamp_kwh", "total_kwh"} - {worst}:
        assert member in aside.reason
    assert "co2_ppm" not in aside.reason
    # the rest are no longer collinear: nothing else is set aside
    assert {t.family for t in cands.terms} == set(frame) - {worst}
    # forced and preferred members are protected
    kept = build_candidates(ds, forms=("identity",), prefer=[worst])
    assert worst in {t.family for t in kept.terms}
    assert len([r for r in kept.refused if r.form == "every form"]) == 1


# --------------------------------------------------------------- curvature gate


def _skewed_linear_table(n=300, seed=11, *, curved=False):
    """Three correlated lognormal predictors and a noise one; y is straight in all (or log in light)."""
    rng = np.random.default_rng(seed)
    common = rng.normal(size=n)
    light = np.exp(2.5 + 0.5 * (0.6 * common + 0.8 * rng.normal(size=n)))
    co2 = np.exp(5.0 + 0.4 * (0.6 * common + 0.8 * rng.normal(size=n)))
    density = rng.gamma(3.0, 1.0, n) + 0.5
    probe = rng.lognormal(0.0, 0.5, n)
    signal = 4.0 * np.log(light) if curved else 0.25 * light
    y = 2.0 + signal + 0.01 * co2 + 0.8 * density + rng.normal(0, 1.0, n)
    return {"light": light, "co2": co2, "density": density, "probe": probe}, y


def test_straight_predictors_are_offered_in_their_raw_form_only():
    import statsmodels.api as sm

    frame, y = _skewed_linear_table()
    cands = build_candidates(small_dataset(frame, y))
    for col in ("co2", "density", "probe"):
        reasons = [r.reason for r in cands.refused if r.family == col]
        if [t.name for t in cands.terms if t.family == col] != [col]:
            continue  # a straight variable may pass the gate by chance (t² > log n happens ~3 % of the time)
        assert reasons and all("no evidence that" in r for r in reasons)
    # The test statistic is the t of x·log x added to the fit of y on every raw predictor: statsmodels'
    # OLS t-value of that column (the Box-Tidwell test of power 1, Box & Tidwell 1962) is the reference.
    design = np.column_stack([np.ones(len(y))] + [frame[c] for c in sorted(frame)])
    for col in ("co2", "density"):
        x = frame[col]
        fit = sm.OLS(y, np.column_stack([design, x * np.log(x)])).fit()
        reason = [r.reason for r in cands.refused if r.family == col and r.form == "log"]
        if reason:
            assert f"t = {fit.tvalues[-1]:.2g}," in reason[0]
            assert fit.tvalues[-1] ** 2 <= np.log(len(y))


def test_a_truly_curved_predictor_keeps_its_curved_forms():
    frame, y = _skewed_linear_table(curved=True)
    cands = build_candidates(small_dataset(frame, y))
    assert "log(light)" in cands.names
    assert not [r for r in cands.refused if r.family == "light" and "no evidence" in r.reason]


def test_curvature_gate_rate_on_straight_tables_is_low():
    # Under a straight truth the gate passes a variable by chance with probability P(t² > log n) for a
    # t with n - p - 2 degrees of freedom (about 3.5 % at n = 300): over 40 tables × 4 variables, at most
    # a handful may pass; a confounded marginal test would pass far more (correlated predictors).
    from scipy import stats as st

    passed = 0
    for seed in range(40):
        frame, y = _skewed_linear_table(seed=100 + seed)
        cands = build_candidates(small_dataset(frame, y))
        passed += sum(1 for c in frame if [t.name for t in cands.terms if t.family == c] != [c])
    expected = 160 * 2 * st.t.sf(np.sqrt(np.log(300)), 300 - 6 - 2)
    assert passed <= expected + 3 * np.sqrt(expected) + 2


def test_the_gate_keeps_domain_reasons_for_forms_undefined_on_the_data():
    rng = np.random.default_rng(21)
    temp = rng.uniform(-9.0, 39.0, 200)
    cands = build_candidates(small_dataset({"night_temp_c": temp}, y=20 + 0.2 * temp + rng.normal(0, 1, 200)))
    report = cands.describe().set_index("form")
    assert "crosses zero" in report.loc["reciprocal", "reason"]  # its domain, not the gate
    assert "no evidence that night_temp_c bends" in report.loc["square", "reason"]  # defined, but straight


@pytest.mark.parametrize("weighted", [False, True])
def test_the_curvature_t_with_a_shared_factorisation_is_the_statsmodels_t(weighted):
    # The screen factorises the other predictors once and adds x then the probe (Frisch-Waugh-Lovell);
    # the t must be the one of the probe's coefficient in the full OLS / WLS fit (statsmodels).
    import statsmodels.api as sm

    from selectkit import transforms as tf
    from selectkit._vetting import _probe, _t_after

    rng = np.random.default_rng(12)
    n = 400
    Z = rng.normal(size=(n, 3))
    x = rng.uniform(1, 20, n) + Z[:, 0]
    x = x - x.min() + 1.0
    y = 1 + np.log(x) + Z @ [0.5, -0.2, 0.1] + rng.normal(0, 0.3, n)
    w = rng.uniform(0.5, 2.0, n) if weighted else None
    probe = _probe(x, True)
    got = _t_after(tf._Residualiser(n, w, Z), x, probe, y)
    X = sm.add_constant(np.column_stack([Z, x, probe]))
    fit = sm.WLS(y, X, weights=w).fit() if weighted else sm.OLS(y, X).fit()
    assert got == pytest.approx(fit.tvalues[-1], rel=1e-8)


@pytest.mark.parametrize("weighted", [False, True])
def test_leaving_one_predictor_out_of_one_factorisation_gives_the_statsmodels_residuals(weighted):
    # The screen factorises the whole design once and, for each predictor, projects off the design
    # without that predictor's columns (one of them two columns wide): the residuals of a vector must be
    # those of the OLS / WLS fit on that smaller design (statsmodels; √w-scaled for WLS, as selectkit uses).
    import statsmodels.api as sm

    from selectkit._vetting import _LeaveOneOut

    rng = np.random.default_rng(31)
    n = 500
    common = rng.normal(size=n)
    design = np.column_stack([np.ones(n), common + rng.normal(size=n), 1e3 * (common + rng.normal(size=n)),
                              rng.normal(size=n), rng.normal(size=n) ** 2, rng.uniform(0, 1e-3, n)])
    blocks = {"a": np.array([1]), "b": np.array([2]), "c": np.array([3, 4]), "d": np.array([5])}
    w = rng.uniform(0.5, 2.0, n) if weighted else None
    v = 3.0 * design[:, 1] - design[:, 3] + rng.normal(size=n)
    everyone = _LeaveOneOut.of(design, w, blocks)
    for name, cols in blocks.items():
        keep = [j for j in range(design.shape[1]) if j not in cols]
        fit = sm.WLS(v, design[:, keep], weights=w).fit() if weighted else sm.OLS(v, design[:, keep]).fit()
        expected = fit.resid * (np.sqrt(w) if weighted else 1.0)
        project = everyone.without(name)
        assert project.rank == len(keep)
        np.testing.assert_allclose(project(v), expected, rtol=0, atol=1e-9 * np.abs(v).max())
    # the same factorisation gives the t of each probe added to the whole design (statsmodels' t-value of it)
    probes = np.column_stack([design[:, 1] * np.abs(design[:, 1]), np.sin(design[:, 3])])
    got = everyone.added_t(v, probes)
    for j in range(probes.shape[1]):
        X = np.column_stack([design, probes[:, j]])
        fit = sm.WLS(v, X, weights=w).fit() if weighted else sm.OLS(v, X).fit()
        assert got[j] == pytest.approx(fit.tvalues[-1], rel=1e-8)


def test_a_rank_deficient_design_is_not_factorised_once():
    from selectkit._vetting import _LeaveOneOut

    rng = np.random.default_rng(32)
    x = rng.normal(size=100)
    design = np.column_stack([np.ones(100), x, 2.0 * x])
    assert _LeaveOneOut.of(design, None, {"a": np.array([1]), "b": np.array([2])}) is None


def test_the_screen_decides_the_same_with_one_factorisation_or_one_per_predictor(monkeypatch):
    # The shared factorisation only saves time: with it refused (every predictor factorised on its own,
    # the path taken for a rank-deficient design) the screen keeps the same forms and fits the same powers.
    from selectkit._vetting import _LeaveOneOut

    rng = np.random.default_rng(33)
    n = 600
    common = rng.normal(size=n)
    frame = {f"x{i}": np.exp(1.0 + 0.4 * (0.6 * common + 0.8 * rng.normal(size=n))) for i in range(6)}
    frame["swing"] = rng.normal(0.0, 5.0, n)
    y = (np.log(frame["x0"]) * 3 + 2.0 / frame["x1"] + 0.5 * frame["x2"] + 0.02 * frame["swing"] ** 2
         + rng.normal(0, 0.3, n))
    shared = build_candidates(small_dataset(frame, y))
    monkeypatch.setattr(_LeaveOneOut, "CONDITION_LIMIT", 0.0)  # never full rank: one factorisation each
    alone = build_candidates(small_dataset(frame, y))
    assert shared.names == alone.names
    assert [(r.family, r.form, r.reason) for r in shared.refused] == [(r.family, r.form, r.reason)
                                                                       for r in alone.refused]
    assert "log(x0)" in shared.names and not [r for r in shared.refused if r.family == "x0"
                                               and "no evidence" in r.reason]


def test_the_weighted_curvature_t_is_the_statsmodels_wls_t():
    # With row weights the fit is made on √w-scaled rows, where the intercept column is √w: y must not be
    # centred there (a constant is outside that span). Reference: statsmodels WLS t-value of the probe.
    import statsmodels.api as sm

    from selectkit._vetting import added_column_t

    rng = np.random.default_rng(34)
    n = 300
    X = np.column_stack([np.ones(n), rng.normal(size=n)])
    w = rng.uniform(0.2, 3.0, n)
    y = 5.0 + X[:, 1] + rng.normal(size=n) / np.sqrt(w)
    probe = (X[:, 1] ** 2)[:, None]
    expected = sm.WLS(y, np.column_stack([X, probe]), weights=w).fit().tvalues[-1]
    assert added_column_t(X, y, probe, w)[0] == pytest.approx(expected, rel=1e-9)
