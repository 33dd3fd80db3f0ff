"""Data makers shared by the benchmarks (invented greenhouse-style data).

Every maker takes a seed and returns plain arrays, so any benchmark can time
selectkit and the alternative a modeller would use on exactly the same data.
"""

from __future__ import annotations

import os
import sys

import numpy as np

# benchmarks import the test factories (``tests.factories``) for CandidateSet building.
sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

__all__ = ["ar_design", "linear_problem", "family_problem", "candidates_for", "family_candidates", "bay_chunks"]


def ar_design(n: int, p: int, *, rho: float = 0.5, seed: int = 0) -> np.ndarray:
    """Gaussian predictors with AR(ρ) correlation, corr(x_i, x_j) = ρ^|i−j|.

    Built recursively (x_j = ρ x_{j−1} + √(1−ρ²) e_j), which gives exactly that
    correlation without forming the p × p covariance.
    """
    rng = np.random.default_rng(seed)
    E = rng.standard_normal((n, p))
    X = np.empty((n, p))
    X[:, 0] = E[:, 0]
    s = np.sqrt(1.0 - rho * rho)
    for j in range(1, p):
        X[:, j] = rho * X[:, j - 1] + s * E[:, j]
    return X


def linear_problem(n: int = 1000, p: int = 20, *, n_true: int = 8, rho: float = 0.5, snr: float = 3.0,
                   seed: int = 0):
    """AR(ρ) predictors and a response with ``n_true`` real effects at signal-to-noise ``snr``.

    The true effects sit at evenly spread columns with coefficients alternating
    in sign and size (1, −0.8, 0.6, ...); the noise variance is var(signal)/snr.

    Returns
    -------
    X : ndarray (n, p)
    y : ndarray (n,)
    true : tuple of int
        Columns with a real effect.
    """
    X = ar_design(n, p, rho=rho, seed=seed)
    rng = np.random.default_rng(seed + 1)
    n_true = min(n_true, p)
    true = tuple(int(round(v)) for v in np.linspace(0, p - 1, n_true))
    beta = np.zeros(p)
    for i, j in enumerate(true):
        beta[j] = (1.0 - 0.2 * (i % 4)) * (-1) ** i
    signal = X @ beta
    noise_sd = np.sqrt(signal.var() / snr)
    y = 3.0 + signal + noise_sd * rng.standard_normal(n)
    return X, y, true


def family_problem(n: int = 1000, n_sources: int = 14, n_columns: int = 40, *, n_true: int = 8,
                   snr: float = 3.0, seed: int = 0):
    """Positive source variables, each offered in up to three forms (x, log x, √x).

    The response depends on ``n_true`` sources through one form each (log for
    some, √ for others, raw for the rest).  Forms are dropped from the last
    sources until there are ``n_columns`` columns.

    Returns
    -------
    X : ndarray (n, n_columns)
    y : ndarray (n,)
    names : list of str
        Readable names ``x3``, ``log(x3)``, ``sqrt(x3)``.
    families : list of str
        The source variable of each column.
    """
    base = ar_design(n, n_sources, rho=0.5, seed=seed)
    raw = np.exp(0.5 * base) * 2.0  # positive, skewed
    rng = np.random.default_rng(seed + 1)
    forms = [3] * n_sources
    extra = 3 * n_sources - n_columns
    j = n_sources - 1
    while extra > 0 and j >= 0:
        forms[j] -= 1
        extra -= 1
        j -= 1
    columns, names, families = [], [], []
    for s in range(n_sources):
        x = raw[:, s]
        made = [(f"x{s}", x), (f"log(x{s})", np.log(x)), (f"sqrt(x{s})", np.sqrt(x))][: forms[s]]
        for name, col in made:
            columns.append(col)
            names.append(name)
            families.append(f"x{s}")
    X = np.column_stack(columns)
    true = [int(round(v)) for v in np.linspace(0, n_sources - 1, min(n_true, n_sources))]
    signal = np.zeros(n)
    for i, s in enumerate(true):
        form = (np.log, np.sqrt, lambda v: v)[i % 3]
        col = form(raw[:, s])
        signal += (1.0 - 0.2 * (i % 4)) * (-1) ** i * (col - col.mean()) / col.std()
    y = 10.0 + signal + np.sqrt(signal.var() / snr) * rng.standard_normal(n)
    return X, y, names, families


def candidates_for(X, y, names=None, families=None):
    """A CandidateSet (one term per column) through the test factories."""
    from tests.factories import make_candidates

    return make_candidates(X, y, names=names, families=families)


def family_candidates(**kwargs):
    """``family_problem`` wrapped as a CandidateSet."""
    X, y, names, families = family_problem(**kwargs)
    return candidates_for(X, y, names=names, families=families)


def bay_chunks(seed: int, rows: int, n_columns: int, chunk: int = 200_000):
    """Chunks ``(X, y)`` of an invented table of positive predictors, ``rows`` in all.

    Each predictor is ``10·exp(0.25 z)`` with ``z`` Gaussian and correlated with
    its neighbour, so log, square root and reciprocal forms all apply; the
    response grows with the log of the first eight (coefficients 4 down to
    −2.4) plus unit Gaussian noise.  Chunk ``i`` uses the seed ``[seed, i]``,
    so any chunk can be made again on its own, without the others.
    """
    n_effects = min(8, n_columns)
    for index, start in enumerate(range(0, rows, chunk)):
        size = min(chunk, rows - start)
        rng = np.random.default_rng([seed, index])
        Z = rng.standard_normal((size, n_columns))
        Z[:, 1:] += 0.5 * Z[:, :-1]
        X = 10.0 * np.exp(0.25 * Z)
        y = 20.0 + np.log(X[:, :n_effects]) @ np.linspace(4.0, -2.4, n_effects) + rng.standard_normal(size)
        yield X, y


def print_table(title, header, rows):
    """Print ``rows`` under ``header``, right-aligned columns, after a blank line and ``title``."""
    widths = [max(len(str(h)), *(len(str(r[i])) for r in rows)) for i, h in enumerate(header)]
    print(f"\n{title}")
    print("  ".join(str(h).rjust(w) for h, w in zip(header, widths)))
    print("  ".join("-" * w for w in widths))
    for r in rows:
        print("  ".join(str(v).rjust(w) for v, w in zip(r, widths)))
