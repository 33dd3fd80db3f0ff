"""Honest inference after selection, by sample splitting (Cox 1975; Wasserman & Roeder 2009).

The p-values and intervals of a model chosen by a search on the same rows are
optimistic: the rows chose the model and then judged it.  Splitting the rows
restores them: the searches run on one part (the *selection* rows), the model
they choose is then estimated on the other part (the *estimation* rows), which
played no part in the choice, so its p-values and intervals mean what they
say — for that model, chosen that way.  The price is power: the estimation
part is smaller, its standard errors larger by about √(n / n_estimation), and
the selection part, smaller too, finds weak effects less often.

References
----------
(Quoted from memory.)
Cox, D. R. (1975). A note on data-splitting for the evaluation of significance
levels. Biometrika 62(2), 441-444.
Wasserman, L. & Roeder, K. (2009). High-dimensional variable selection.
Annals of Statistics 37(5A), 2178-2201.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["SplitInference", "split_inference", "split_rows"]


@dataclass(frozen=True, eq=False)
class SplitInference:
    """A model chosen on one part of the rows and estimated on the other.

    Attributes
    ----------
    fraction : float
        Share of the rows the searches chose the model on.
    seed : int
        Seed of the split (``numpy.random.default_rng([seed, 1975])``); with
        ``time_ordered`` the first rows select and the later ones estimate, no
        seed is used.
    time_ordered : bool
    n_select, n_estimate : int
    terms : tuple of str
        The chosen model's terms (the best by ``criterion`` on the selection rows).
    subset : tuple of int
    criterion : str
    coefficients : DataFrame
        On the estimation rows: ``coefficient``, ``term``, ``estimate``,
        ``std_error``, ``ci_low``, ``ci_high`` (95 % t intervals) and
        ``p_value`` — the honest ones — then ``std_error_all_rows`` and
        ``p_value_all_rows_optimistic`` of the same model fitted on every row,
        for comparison.
    same_as_all_rows : bool
        Whether the model chosen on the selection rows is the best model of the
        searches on all rows.
    notes : tuple of str
        The loss of power and how to read the table.
    """

    fraction: float
    seed: int
    time_ordered: bool
    n_select: int
    n_estimate: int
    terms: tuple
    subset: tuple
    criterion: str
    coefficients: pd.DataFrame
    same_as_all_rows: bool
    notes: tuple


def split_rows(n: int, fraction: float, seed: int, *, time_ordered: bool = False):
    """(selection rows, estimation rows), each sorted: a seeded random split, or first/last rows in time order."""
    size = int(round(fraction * n))
    if time_ordered:
        order = np.arange(n)
    else:
        order = np.random.default_rng([int(seed), 1975]).permutation(n)
    return np.sort(order[:size]), np.sort(order[size:])


def split_inference(candidates, runner, *, fraction=0.5, seed=0, criterion="bic", convention="sigma-counted",
                    time_ordered=False, best_on_all_rows=None, moments=None) -> SplitInference:
    """Choose a model on ``fraction`` of the rows with ``runner``; estimate it on the rest.

    Parameters
    ----------
    candidates : CandidateSet
    runner : callable
        ``runner(candidates, moments=...) -> Found``: the run's own searches
        (the same as the bootstrap and the honest error repeat).
    fraction : float, default 0.5
        Share of the rows for the selection, strictly between 0 and 1.
    seed : int
    criterion, convention : str
        How the best model of the selection rows is chosen (as on all rows).
    time_ordered : bool
        Select on the first rows, estimate on the later ones (no shuffle).
    best_on_all_rows : tuple of int, optional
        The best model of the searches on all rows, to say whether the split chose it.
    moments : Moments, optional
        Those of all rows (the run's own), for the comparison fit; made when not given.

    Returns
    -------
    SplitInference

    Raises
    ------
    selectkit.errors.OptionError
        When either part would have too few rows for the models searched.
    """
    from .errors import OptionError
    from .moments import moments_of
    from .rank import _best_of, _call_runner, _resample, _term_names, fit_model

    full_moments = moments
    n = int(candidates.matrix.shape[0])
    if not 0.0 < float(fraction) < 1.0:
        raise OptionError(f"the split fraction must lie strictly between 0 and 1 (got {fraction!r}); 0.5 is usual")
    select_rows, estimate_rows = split_rows(n, fraction, seed, time_ordered=time_ordered)
    if min(select_rows.size, estimate_rows.size) < 10:
        raise OptionError(f"a split of {n} rows at {fraction:g} leaves {select_rows.size} rows to select and "
                          f"{estimate_rows.size} to estimate; each part needs at least 10")
    chooser = _resample(candidates, select_rows)
    moments = moments_of(chooser)
    found = _call_runner(runner, chooser, moments)
    names = [_term_names(chooser, s) for s in found.subsets]
    best = _best_of(found, criterion, convention=convention, tss=moments.tss, log_jacobian=0.0, names=names,
                    candidates=chooser)
    subset = tuple(found.subsets[best])
    estimator = _resample(candidates, estimate_rows)
    held_out = fit_model(estimator, subset, moments=moments_of(estimator))
    everything = fit_model(candidates, subset, moments=full_moments if full_moments is not None
                           else moments_of(candidates))
    table = held_out.coefficients.rename(columns={"p_value_optimistic": "p_value"})
    table["std_error_all_rows"] = everything.coefficients["std_error"].to_numpy()
    table["p_value_all_rows_optimistic"] = everything.coefficients["p_value_optimistic"].to_numpy()
    inflation = float(np.sqrt(n / estimate_rows.size))
    how = ("the first rows selected and the later rows estimated (rows in time order)" if time_ordered
           else f"a random split seeded {seed}")
    notes = (
        f"The searches chose this model on {select_rows.size} of the {n} rows ({how}); it was estimated on the "
        f"other {estimate_rows.size}, which took no part in the choice, so its p-values and intervals are "
        "honest for a model chosen this way (Cox 1975; Wasserman & Roeder 2009).",
        f"The price is power: standard errors about {inflation:.2f} times those of a fit on all rows, and a "
        "selection on fewer rows finds weak effects less often. The p-values on all rows are shown beside them "
        "and are optimistic.",
    )
    if held_out.problem:
        notes += (f"The chosen model could not be fitted on the estimation rows: {held_out.problem}",)
    same = best_on_all_rows is not None and tuple(best_on_all_rows) == subset
    return SplitInference(fraction=float(fraction), seed=int(seed), time_ordered=bool(time_ordered),
                          n_select=int(select_rows.size), n_estimate=int(estimate_rows.size),
                          terms=tuple(_term_names(candidates, subset)), subset=subset, criterion=str(criterion),
                          coefficients=table, same_as_all_rows=bool(same), notes=notes)
