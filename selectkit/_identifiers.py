"""The evidence that a numeric column is a row identifier rather than a measurement.

A private helper of :mod:`selectkit.data`.  Distinct integers alone are no
evidence: visitor counts, plant counts or doses are often all different.  A
column of at least ``IDENTIFIER_MIN_ROWS`` distinct integers (below 2**53,
where floating point still tells integers apart) is an identifier when

* its name says so — a word such as ``id``, ``code``, ``serial`` or ``key``
  anywhere in it, or ``number``, ``no``, ``nr``, ``index`` as its last word
  (``bay_id``, ``sensorSerial``, ``row_number``; not ``number_of_visitors``);
* or its sorted values go up by a constant step (``1001, 1002, ...``) *and*
  they show no relation of magnitude to the response or to any other numeric
  column: neither Spearman's rank correlation with the response nor the
  partial correlation with the response given the other numeric columns (a
  column that drives the response beside stronger ones may show little on its
  own) is significant at :data:`RELATION_LEVEL`, nor is Spearman's correlation
  with any other numeric column at that level divided by their number
  (Bonferroni).

A column named like an identifier is set aside even when it follows the
response (rows sorted by time or position), and the note says so.  Spearman's
test is that of :func:`scipy.stats.spearmanr` (t approximation on n − 2
degrees of freedom).  The partial correlation r of x and y given k columns is
tested by t = r·sqrt(df / (1 − r²)) on df = n − 2 − k, which equals the t
statistic of x in the least-squares fit of y on the k columns and x (the
tests check that identity against statsmodels).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = ["IdentifierEvidence", "identifier_evidence", "RELATION_LEVEL", "ID_WORDS", "ID_LAST_WORDS"]

#: Significance level of the rank correlation that counts as a relation (common practice, no published source).
RELATION_LEVEL = 0.01

#: Words that mark a column as an identifier wherever they stand in its name.
ID_WORDS = frozenset({"id", "ids", "uid", "uuid", "guid", "serial", "code", "key"})
#: Words that mark a column as an identifier when they end its name.
ID_LAST_WORDS = frozenset({"number", "no", "nr", "num", "index", "idx"})

_LARGEST_EXACT_INTEGER = 2.0 ** 53
_WORDS = re.compile(r"[A-Z]+(?![a-z])|[A-Z]?[a-z]+|\d+")


@dataclass(frozen=True)
class IdentifierEvidence:
    """What was found about a column of distinct integers.

    Attributes
    ----------
    column : str
    n_values : int
        Non-missing values.
    name_word : str or None
        The word of the name that marks an identifier.
    step : float or None
        The constant step of the sorted values, None when they do not step evenly.
    lowest, highest : float
    related_to : str or None
        The column (the response first) that the values follow, None when none does.
    rho, pvalue : float or None
        The correlation with ``related_to`` (or, when none is related, the
        largest one checked) and its p-value.
    is_identifier : bool
        The verdict (see the module docstring).
    measure : str
        Which correlation ``rho`` is: ``"Spearman ρ"`` or ``"partial r"``
        (given the other numeric columns).
    """

    column: str
    n_values: int
    name_word: str | None
    step: float | None
    lowest: float
    highest: float
    related_to: str | None
    rho: float | None
    pvalue: float | None
    is_identifier: bool
    measure: str = "Spearman ρ"

    def reasons(self) -> str:
        """The evidence as a clause, e.g. "its name says so ('id') and its 40 values step evenly from 1 to 40"."""
        parts = []
        if self.name_word:
            parts.append(f"its name says so ('{self.name_word}')")
        if self.step is not None:
            parts.append(f"its {self.n_values} values step evenly by {_number(self.step)} from "
                         f"{_number(self.lowest)} to {_number(self.highest)}, like a row number")
        if self.name_word is None and self.related_to is None and self.rho is not None and parts:
            parts[-1] += (f", and show no relation to the response or the other columns (largest |correlation| "
                          f"{abs(self.rho):.2f})")
        return " and ".join(parts) if parts else f"its {self.n_values} values are distinct integers"

    def relation(self) -> str:
        """'it follows the response (Spearman ρ = 0.81, p = 3e-08)' or ''."""
        if self.related_to is None:
            return ""
        return f"it follows '{self.related_to}' ({self.measure} = {self.rho:.2f}, p = {self.pvalue:.1g})"


def _number(value: float) -> str:
    return f"{value:.0f}" if float(value).is_integer() else f"{value:.4g}"


def name_word(name: str) -> str | None:
    """The word of ``name`` that marks it as an identifier, or None."""
    words = [w.lower() for w in _WORDS.findall(name)]
    for word in words:
        if word in ID_WORDS:
            return word
    if words and words[-1] in ID_LAST_WORDS:
        return words[-1]
    return None


def distinct_integers(values: np.ndarray, min_rows: int) -> bool:
    """All non-missing values finite, integral, below 2**53 in size and distinct, and at least ``min_rows``."""
    present = values[~np.isnan(values)]
    if present.size < min_rows or not np.all(np.isfinite(present)):
        return False
    if np.abs(present).max() >= _LARGEST_EXACT_INTEGER:
        return False  # every float this large is an integer: no evidence
    return bool(np.all(present == np.round(present)) and np.unique(present).size == present.size)


def _spearman(x: np.ndarray, y: np.ndarray):
    both = ~(np.isnan(x) | np.isnan(y))
    if both.sum() < 3 or np.ptp(x[both]) == 0 or np.ptp(y[both]) == 0:
        return None
    result = stats.spearmanr(x[both], y[both])
    return float(result.statistic), float(result.pvalue)


def _partial(x: np.ndarray, y: np.ndarray, others: list):
    """Pearson correlation of x and y given the other columns, and its p-value; None if it cannot be had.

    Both are residualised on an intercept and the k other columns (complete
    rows only); t = r·sqrt(df / (1 − r²)) on df = n − 2 − k (module docstring).
    """
    columns = [c for _, c in others]
    rows = ~(np.isnan(x) | np.isnan(y))
    for c in columns:
        rows &= ~np.isnan(c)
    n, k = int(rows.sum()), len(columns)
    df = n - 2 - k
    if k == 0 or df < 3:
        return None
    design = np.column_stack([np.ones(n)] + [c[rows] for c in columns])
    fitted = design @ np.linalg.lstsq(design, np.column_stack([x[rows], y[rows]]), rcond=None)[0]
    rx, ry = (np.column_stack([x[rows], y[rows]]) - fitted).T
    denominator = np.linalg.norm(rx) * np.linalg.norm(ry)
    if denominator == 0:
        return None
    r = float(np.clip(rx @ ry / denominator, -1.0, 1.0))
    if abs(r) == 1.0:
        return r, 0.0
    t = r * np.sqrt(df / (1.0 - r * r))
    return r, float(2 * stats.t.sf(abs(t), df))


def identifier_evidence(name: str, values: np.ndarray, *, response: str, y: np.ndarray, others) -> IdentifierEvidence:
    """Weigh the evidence that a column of distinct integers is a row identifier.

    Parameters
    ----------
    name : str
    values : ndarray of float
        The column, NaN for missing; must satisfy :func:`distinct_integers`.
    response : str
    y : ndarray of float
        The response on the same rows.
    others : iterable of (str, ndarray)
        The other numeric columns on the same rows, checked lazily and only
        when the verdict depends on them.

    Returns
    -------
    IdentifierEvidence
    """
    present = np.sort(values[~np.isnan(values)])
    steps = np.diff(present)
    step = float(steps[0]) if steps.size and np.all(steps == steps[0]) else None
    word = name_word(name)
    related_to = rho = pvalue = None
    measure = "Spearman ρ"
    if word is not None or step is not None:
        measure = "Spearman ρ"
        found = _spearman(values, y)
        if found is not None:
            rho, pvalue = found
            if pvalue < RELATION_LEVEL:
                related_to = response
        if related_to is None and word is None:
            others = list(others)
            # a column that drives the response beside stronger ones may show little on its own
            found = _partial(values, y, others)
            if found is not None and found[1] < RELATION_LEVEL:
                related_to, rho, pvalue, measure = response, found[0], found[1], "partial r"
        if related_to is None and word is None:
            level = RELATION_LEVEL / max(len(others), 1)
            for other, x in others:
                found = _spearman(values, x)
                if found is None:
                    continue
                if rho is None or abs(found[0]) > abs(rho):
                    rho, pvalue = found
                if found[1] < level:
                    related_to, rho, pvalue = other, found[0], found[1]
                    break
    is_identifier = word is not None or (step is not None and related_to is None)
    return IdentifierEvidence(column=name, n_values=int(present.size), name_word=word, step=step,
                              lowest=float(present[0]), highest=float(present[-1]), related_to=related_to,
                              rho=rho, pvalue=pvalue, is_identifier=is_identifier,
                              measure=measure if related_to == response else "Spearman ρ")
