"""Candidate terms: every allowed form of every predictor, grouped in families.

(Contract stub: the dataclasses below are the interface other stages rely on.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Term", "Refusal", "ResponseTransform", "CandidateSet", "build_candidates"]


@dataclass(frozen=True)
class Term:
    """One candidate term: what a search adds to or drops from a model.

    Attributes
    ----------
    name : str
        Readable name in plain notation: ``x``, ``log(x)``, ``sqrt(x)``, ``1/x``,
        ``x^2``, ``x^-0.5``, ``boxcox(x, 0.37)``, ``log(x + 1)``, ``x*z``; a
        categorical block is named after its column (``cultivar``).
    family : str
        The source variable; a model holds at most one term of each family.
        For a categorical block its column; for an interaction ``x*z``.
    kind : str
        ``"numeric"``, ``"block"`` (dummy columns of a categorical) or ``"interaction"``.
    transform : str
        ``identity, log, sqrt, reciprocal, square, power, boxcox, boxtidwell,
        yeojohnson, dummies, product``.
    source : tuple of str
        Source column(s).
    params : tuple of (str, float) pairs
        Parameters of the transform (``lambda``, ``power``, ``shift``...).
    columns : tuple of int
        Indices of this term's columns in ``CandidateSet.matrix`` (several for a block).
    requires : tuple of str
        Families that must also be in any model holding this term (hierarchy).
    forced : bool
        Whether every model must hold this term's family.
    """

    name: str
    family: str
    kind: str
    transform: str
    source: tuple[str, ...]
    params: tuple[tuple[str, float], ...]
    columns: tuple[int, ...]
    requires: tuple[str, ...] = ()
    forced: bool = False

    @property
    def width(self) -> int:
        """Number of columns (regression coefficients) the term adds."""
        return len(self.columns)


@dataclass(frozen=True)
class Refusal:
    """A form that was not produced, and why (domain, near-duplicate...)."""

    family: str
    form: str
    reason: str


@dataclass(frozen=True)
class ResponseTransform:
    """The transform applied to the response and its log-Jacobian Σ log|dz/dy|."""

    name: str  # readable, e.g. "log(yield)" or "boxcox(yield, 0.5)"
    transform: str  # "identity", "log", "boxcox", ...
    params: tuple[tuple[str, float], ...]
    log_jacobian: float


@dataclass(frozen=True, eq=False)
class CandidateSet:
    """The candidate matrix, its terms and their provenance.

    Attributes
    ----------
    matrix : ndarray, shape (n, m)
        Every candidate column, float64, finite.
    column_names : tuple of str, length m
    terms : tuple of Term
        The search's units; term ``i``'s columns are ``terms[i].columns``.
    y : ndarray, shape (n,)
        The response on the scale the search uses (after any response transform).
    response : str
    weights : ndarray or None
    response_transform : ResponseTransform
    refused : tuple of Refusal
    notes : tuple of str
    dataset : Dataset
        The intake result the candidates were built from.
    """

    matrix: np.ndarray
    column_names: tuple[str, ...]
    terms: tuple[Term, ...]
    y: np.ndarray
    response: str
    weights: np.ndarray | None
    response_transform: ResponseTransform
    refused: tuple[Refusal, ...] = ()
    notes: tuple[str, ...] = ()
    dataset: object = None


def build_candidates(dataset, **options):  # pragma: no cover - replaced by the full implementation
    raise NotImplementedError
