"""Method names and user options → (module name, options object) for the pipeline.

The notebook face, the command line and the job runner name searches by
string; this module is the one place that turns such a name, the user's
per-method settings and the global settings (seed, time budget, criterion)
into the frozen options object of the module that implements the method.
"""

from __future__ import annotations

import dataclasses
import difflib

from ..errors import OptionError
from ..settings import RENAMED_VALUES

__all__ = ["MODULES", "RENAMED_METHODS", "make_options", "stepwise_criterion"]

MODULES = {
    "exhaustive": "selectkit.searches.exhaustive",
    "forward": "selectkit.searches.stepwise",
    "backward": "selectkit.searches.stepwise",
    "stepwise": "selectkit.searches.stepwise",
    "crossval": "selectkit.searches.crossval",
    "screen": "selectkit.searches.screen",
}
#: Former method names, refused with the new spelling (from the one list, selectkit.settings.RENAMED_VALUES).
RENAMED_METHODS = {old: new for old, new in RENAMED_VALUES.items() if new in MODULES}


def stepwise_criterion(criterion, aim):
    """Criterion a stepwise search steers by: the ranking criterion when it is one
    stepwise can use (AIC, AICc, BIC), else BIC to explain and AICc to predict."""
    if criterion in ("aic", "aicc", "bic"):
        return criterion
    return "bic" if aim == "explain" else "aicc"


def _build(cls, method, values: dict, user: dict):
    valid = {f.name for f in dataclasses.fields(cls)}
    for key in user:
        if key not in valid:
            close = difflib.get_close_matches(key, sorted(valid), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise OptionError(
                f"unknown setting {key!r} for search {method!r}{hint} Valid settings: {', '.join(sorted(valid))}"
            )
    merged = {k: v for k, v in values.items() if k in valid}
    merged.update(user)
    for key, value in list(merged.items()):
        if isinstance(value, list):
            merged[key] = tuple(value)
    try:
        return cls(**merged)
    except (TypeError, ValueError) as err:
        if isinstance(err, OptionError):
            raise
        raise OptionError(f"settings of search {method!r}: {err}") from err


def make_options(name, user: dict, *, seed, time_budget, exact_limit, folds, criterion, aim):
    """Return ``(module_name, options)`` for search ``name``.

    Parameters
    ----------
    name : str
        A method name (not "auto": resolve that first).
    user : dict
        The user's settings for this method; unknown keys raise ``OptionError``
        naming the nearest valid one.
    """
    import importlib

    if name in RENAMED_METHODS:
        raise OptionError(f"search method {name!r} was renamed; did you mean {RENAMED_METHODS[name]!r}?")
    if name not in MODULES:
        raise OptionError(f"unknown search method {name!r}; choose one of {', '.join(MODULES)}")
    module = importlib.import_module(MODULES[name])
    shared = {"seed": seed, "time_budget": time_budget, "folds": folds}
    if name == "exhaustive":
        options = _build(module.ExhaustiveOptions, name, shared, user)
    elif name in ("forward", "backward", "stepwise"):
        for key in ("direction", "method"):
            if key in user:
                wanted = RENAMED_METHODS.get(user[key], user[key])
                raise OptionError(f"search {name!r} has no setting {key!r}: the method's name says which steps "
                                  f"are tried; did you mean methods=({wanted!r},)? (forward, backward or stepwise)")
        values = dict(shared, method=name, criterion=stepwise_criterion(criterion, aim))
        if name == "backward":
            values["starts"] = ("full",)
        options = _build(module.StepwiseOptions, name, values, user)
    elif name == "crossval":
        options = _build(module.CrossvalOptions, name, dict(shared, exact_limit=exact_limit), user)
    else:  # screen
        values = dict(shared, limit=exact_limit, criterion=stepwise_criterion(criterion, aim))
        options = _build(module.ScreenOptions, name, values, user)
    return MODULES[name], options
