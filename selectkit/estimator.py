"""A scikit-learn estimator around the search, so a chosen model drops into a ``Pipeline``.

:class:`SubsetRegressor` follows scikit-learn's contract: the constructor only
stores parameters, :meth:`fit` validates and learns, learned state ends in
``_``.  ``fit`` runs :func:`selectkit.search` on a DataFrame, keeps shortlisted
model ``model_rank`` (0 = the best) and refits it; ``transform`` gives that
model's term columns for new rows (the transforms re-applied with the
parameters learnt at fit time), ``predict`` its predictions.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, RegressorMixin, TransformerMixin
from sklearn.utils.validation import check_is_fitted

from .errors import InputError

__all__ = ["SubsetRegressor"]

_RESPONSE = "__selectkit_response__"


class SubsetRegressor(RegressorMixin, TransformerMixin, BaseEstimator):
    """Select a linear model with selectkit and use it as an estimator.

    Parameters
    ----------
    methods : tuple of str, default ("auto",)
        Searches to run; see :func:`selectkit.search`.
    aim : {"explain", "predict"}, default "predict"
        Ranking by BIC ("explain") or AICc ("predict").
    criterion : str, optional
        Rank by this criterion instead.
    forms : tuple of str, optional
        Forms of each numeric predictor (default: all of them).
    model_rank : int, default 0
        Which shortlisted model to use (0 = best).
    seed : int, default 0
    workers : int, default 1
        Worker processes (-1: every core), as :func:`selectkit.search` names them.
    search_options : dict, optional
        Any other setting of :func:`selectkit.search`, by the same name.

    Attributes
    ----------
    result_ : selectkit.api.Result
    terms_ : tuple of str
        Readable names of the chosen model's terms.
    intercept_ : float
    coef_ : ndarray
        One coefficient per column of :meth:`transform`'s output.
    feature_names_in_ : ndarray of str
        Column names of a DataFrame ``X`` (set only for a DataFrame, as in
        scikit-learn). An array ``X`` has its columns named ``x0, x1, ...``,
        and the term names use those.
    n_features_in_ : int

    Notes
    -----
    Predictions are on the scale of the searched response: when the search
    used a transformed response (e.g. ``response_form="log"``), back-transform
    them yourself, remembering that the naive back-transform of a log model
    estimates the median, not the mean.

    Examples
    --------
    >>> from selectkit.demo import make_greenhouse
    >>> from selectkit.estimator import SubsetRegressor
    >>> frame = make_greenhouse()
    >>> y = frame.pop("yield_kg_m2")
    >>> model = SubsetRegressor(methods=("stepwise",)).fit(frame, y)  # doctest: +SKIP
    >>> model.predict(frame.head(3))  # doctest: +SKIP
    """

    def __init__(self, methods=("auto",), aim="predict", criterion=None, forms=None, model_rank=0, seed=0,
                 workers=1, search_options=None):
        self.methods = methods
        self.aim = aim
        self.criterion = criterion
        self.forms = forms
        self.model_rank = model_rank
        self.seed = seed
        self.workers = workers
        self.search_options = search_options

    def fit(self, X, y):
        """Run the search on ``X`` (a DataFrame, or an array whose columns are named ``x0, x1, ...``) and ``y``;
        keep model ``model_rank``."""
        from .api import search

        named = isinstance(X, pd.DataFrame)
        X = _as_frame(X, None)
        y = np.asarray(y, dtype=float).reshape(-1)
        if y.shape[0] != X.shape[0]:
            raise InputError(f"X has {X.shape[0]} rows but y has {y.shape[0]}; pass one response value per row")
        frame = X.reset_index(drop=True).copy()
        frame[_RESPONSE] = y
        options = dict(self.search_options or {})
        if self.forms is not None:
            options["forms"] = tuple(self.forms)
        result = search(frame, response=_RESPONSE, methods=self.methods, aim=self.aim, criterion=self.criterion,
                        seed=self.seed, workers=self.workers, **options)
        self.result_ = result
        self.terms_ = result.terms(self.model_rank)
        params = np.asarray(result.model(self.model_rank).params, dtype=float)
        self.intercept_ = float(params[0])
        self.coef_ = params[1:]
        if named:
            self.feature_names_in_ = np.asarray(X.columns, dtype=object)
        elif hasattr(self, "feature_names_in_"):
            del self.feature_names_in_  # a refit on an array: the old names no longer apply
        self._input_names = [str(c) for c in X.columns]
        self.n_features_in_ = X.shape[1]
        subset = result.ranking.subsets[self.model_rank]
        self._columns = [c for j in subset for c in result.candidates.terms[j].columns]
        return self

    def transform(self, X):
        """The chosen model's term columns for the rows of ``X``."""
        check_is_fitted(self, "coef_")
        X = _as_frame(X, self._input_names)
        matrix = self.result_.candidates.transform(X.reset_index(drop=True))
        return matrix[:, self._columns]

    def predict(self, X):
        """Predictions of the chosen model for the rows of ``X``."""
        return self.intercept_ + self.transform(X) @ self.coef_

    def get_feature_names_out(self, input_features=None):
        """Names of :meth:`transform`'s columns (a block gives one name per dummy)."""
        check_is_fitted(self, "coef_")
        names = self.result_.candidates.column_names
        return np.asarray([names[c] for c in self._columns], dtype=object)


def _as_frame(X, names):
    """``X`` as a DataFrame: a DataFrame as it is, an array with columns named ``names`` (fit: ``x0, x1, ...``).

    At transform time (``names`` given) a DataFrame lacking a training column is
    read by position, like an array, when it has as many columns.
    """
    if isinstance(X, pd.DataFrame):
        if names is None or all(name in X.columns for name in names):
            return X
        X = X.to_numpy()
    array = np.asarray(X)
    if array.ndim != 2:
        raise InputError(f"X must be a table of rows by columns (2-D); got an array of shape {array.shape}; "
                         f"reshape a single column with X.reshape(-1, 1)")
    if names is None:
        names = [f"x{j}" for j in range(array.shape[1])]  # scikit-learn's names for unnamed columns
    elif array.shape[1] != len(names):
        raise InputError(f"X has {array.shape[1]} columns but the model was fitted on {len(names)} "
                         f"({', '.join(names[:8])}{', ...' if len(names) > 8 else ''}); pass the same columns")
    return pd.DataFrame(array, columns=names)
