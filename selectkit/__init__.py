"""selectkit: find which predictors, in which forms, give a defensible linear model.

The notebook face::

    import selectkit
    result = selectkit.search("greenhouse.csv", response="yield_kg_m2", seed=0)
    result.shortlist      # pandas DataFrame, best model first
    result.terms(0)       # readable term names of model 0
    result.model(0)       # statsmodels results of its QR refit
"""

from .errors import (
    DataFileError,
    InputError,
    JobFileError,
    OptionError,
    SearchError,
    SelectkitError,
    StoreBusyError,
    StoreError,
    TooManyCandidatesError,
)

__version__ = "0.1.0"

__all__ = [
    "search",
    "load",
    "__version__",
    "SelectkitError",
    "InputError",
    "DataFileError",
    "OptionError",
    "SearchError",
    "TooManyCandidatesError",
    "JobFileError",
    "StoreError",
    "StoreBusyError",
]


def __getattr__(name):
    # The facade imports every stage; load it on first use so that
    # ``import selectkit`` stays light for the command line.
    if name in ("search", "load", "Result", "SelectedModel"):
        from . import api

        return getattr(api, name)
    raise AttributeError(f"module 'selectkit' has no attribute {name!r}")
