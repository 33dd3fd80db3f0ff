"""Compiled kernels (numba). The only place numba is used.

The package is split by consumer so that the exact search and the stepwise
search can evolve their inner loops independently:

- :mod:`selectkit.kernels.subsets` — rss of subsets, branch-and-bound inner loops;
- :mod:`selectkit.kernels.steps` — sweep-operator add/drop/swap steps for stepwise.

Both work on the centred cross-product matrix of :class:`selectkit.moments.Moments`
(response last) and know nothing of pandas or files.
"""

#: A pivot smaller than this fraction of the column's own centred sum of
#: squares marks the column as (numerically) a linear combination of the
#: columns already in the model: the subset is skipped and counted as singular.
PIVOT_TOLERANCE = 1e-10
