import numpy as np
import pytest
from sklearn.pipeline import Pipeline
from sklearn.linear_model import LinearRegression
from sklearn.preprocessing import StandardScaler

from selectkit.errors import InputError
from selectkit.estimator import SubsetRegressor
from tests.test_api import _small_frame


def test_estimator_in_a_pipeline_matches_a_plain_refit():
    frame = _small_frame()
    y = frame.pop("yield_kg_m2")
    model = SubsetRegressor(methods=("exhaustive",), aim="explain", forms=("identity", "log", "reciprocal")).fit(frame, y)
    assert set(model.terms_) == {"log(light)", "1/density", "cultivar"}
    names = list(model.get_feature_names_out())
    assert len(names) == model.transform(frame).shape[1] == 3
    # reference: scikit-learn's LinearRegression on the selected columns (reference library)
    pipe = Pipeline([("select", SubsetRegressor(methods=("exhaustive",), aim="explain", forms=("identity", "log", "reciprocal"))),
                     ("ols", LinearRegression())]).fit(frame, y)
    assert np.allclose(pipe.predict(frame), model.predict(frame), rtol=1e-9)
    assert np.allclose(model.predict(frame.head(5)),
                       LinearRegression().fit(model.transform(frame), y).predict(model.transform(frame.head(5))))


def test_numpy_input_in_a_pipeline_gets_generated_names():
    frame = _small_frame().drop(columns="cultivar")
    y = frame.pop("yield_kg_m2").to_numpy()
    X = frame.to_numpy()  # columns light, density, probe_a, probe_b → x0, x1, x2, x3
    model = SubsetRegressor(methods=("exhaustive",), aim="explain", forms=("identity", "log", "reciprocal")).fit(X, y)
    assert set(model.terms_) == {"log(x0)", "1/x1"}
    assert list(model.get_feature_names_out()) == list(model.terms_)
    assert model.n_features_in_ == 4 and not hasattr(model, "feature_names_in_")  # as scikit-learn does for arrays
    # reference: scikit-learn's LinearRegression on the same two columns computed by hand (reference library)
    by_hand = np.column_stack([np.log(X[:, 0]) if term == "log(x0)" else 1.0 / X[:, 1] for term in model.terms_])
    assert np.allclose(model.predict(X[:7]), LinearRegression().fit(by_hand, y).predict(by_hand[:7]), rtol=1e-9)
    # the same array behind a scaler: the scaler hands on an array, the selector names its columns
    pipe = Pipeline([("scale", StandardScaler()),
                     ("select", SubsetRegressor(methods=("exhaustive",), aim="explain", forms=("identity",))),
                     ("ols", LinearRegression())]).fit(X, y)
    assert set(pipe.named_steps["select"].terms_) <= {"x0", "x1", "x2", "x3"}
    assert pipe.predict(X[:3]).shape == (3,)
    with pytest.raises(InputError, match="X has 3 columns but the model was fitted on 4"):
        model.predict(X[:, :3])
    with pytest.raises(InputError, match="2-D"):
        SubsetRegressor().fit(X[:, 0], y)
