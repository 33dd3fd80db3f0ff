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


def compiled_on_disk() -> bool:
    """Whether every kernel has its compiled form in numba's on-disk cache (``cache=True``).

    False on a first run (or after an upgrade changed a kernel's source): the
    kernels are then compiled on first use, which takes about a minute once,
    and the command line says so before it starts.  Reads numba's cache index
    paths (an internal of numba); when they cannot be read, returns True so that
    nothing is said rather than something wrong.
    """
    import os

    from numba.core.registry import CPUDispatcher

    from . import steps, subsets

    try:
        for module in (subsets, steps):
            for kernel in vars(module).values():
                if isinstance(kernel, CPUDispatcher) and kernel._cache is not None:
                    if not os.path.exists(kernel._cache._cache_file._index_path):
                        return False
    except AttributeError:  # another numba version: no promise either way
        return True
    return True
