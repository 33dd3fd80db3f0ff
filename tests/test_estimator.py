import numpy as np
from sklearn.pipeline import Pipeline
from sklearn.linear_model import LinearRegression

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
