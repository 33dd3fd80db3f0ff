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
# ``selectkit.search``, which is the facade function).  The facade is imported on first use
# (PEP 562), so that ``import selectkit`` and commands that need no data (``--version``,
# ``job status``) do not load pandas and numpy first.
_FACADE = ("search", "load", "Result")


def __getattr__(name):
    if name in _FACADE:
        from . import api

        value = getattr(api, name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'selectkit' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_FACADE))
