"""Small builders of stage values for tests (not part of the package).

``make_candidates`` builds a :class:`CandidateSet` straight from arrays so that
search tests do not depend on the candidate generator.
"""

from __future__ import annotations

import numpy as np

from selectkit.candidates import CandidateSet, ResponseTransform, Term

IDENTITY = ResponseTransform(name="y", transform="identity", params=(), log_jacobian=0.0)


def make_candidates(X, y, *, names=None, families=None, blocks=None, requires=None, forced=(), weights=None):
    """A CandidateSet with one term per column, except columns grouped in ``blocks``.

    Parameters
    ----------
    X : array (n, m)
    y : array (n,)
    names : list of m column names (default x0, x1, ...)
    families : list of m family labels (default: each column its own family)
    blocks : dict block_name -> list of column indices that form one term
    requires : dict term_name -> tuple of families required (hierarchy)
    forced : term names every model must hold
    """
    X = np.asarray(X, dtype=float)
    n, m = X.shape
    names = list(names) if names is not None else [f"x{j}" for j in range(m)]
    families = list(families) if families is not None else list(names)
    blocks = dict(blocks or {})
    requires = dict(requires or {})
    in_block = {j: b for b, cols in blocks.items() for j in cols}
    terms = []
    seen_blocks = set()
    for j in range(m):
        if j in in_block:
            b = in_block[j]
            if b in seen_blocks:
                continue
            seen_blocks.add(b)
            cols = tuple(sorted(blocks[b]))
            terms.append(Term(name=b, family=b, kind="block", transform="dummies", source=(b,), params=(),
                              columns=cols, requires=tuple(requires.get(b, ())), forced=b in forced))
        else:
            terms.append(Term(name=names[j], family=families[j], kind="numeric", transform="identity",
                              source=(families[j],), params=(), columns=(j,),
                              requires=tuple(requires.get(names[j], ())), forced=names[j] in forced))
    return CandidateSet(matrix=X, column_names=tuple(names), terms=tuple(terms), y=np.asarray(y, dtype=float),
                        response="y", weights=None if weights is None else np.asarray(weights, dtype=float),
                        response_transform=IDENTITY)


def ar1_design(n, p, rho=0.5, seed=0):
    """Predictors with AR(rho) correlation, corr(x_i, x_j) = rho^|i-j|."""
    rng = np.random.default_rng(seed)
    cov = rho ** np.abs(np.subtract.outer(np.arange(p), np.arange(p)))
    return rng.multivariate_normal(np.zeros(p), cov, size=n)
