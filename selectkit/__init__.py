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
    "Result",
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


# The search methods live in the subpackage ``selectkit.searches`` (not
# ``selectkit.search``, which is the facade function below).
from .api import Result, load, search  # noqa: E402
