"""Search methods. Each returns a :class:`Found`.

Every method module (``exhaustive``, ``stepwise``, ``crossval``, ``screen``)
follows one contract so that the notebook face, the command line and the job
runner (which checkpoints each unit) can drive any of them the same way::

    units = module.plan(candidates, moments, options)        # list[WorkUnit], fixed order
    results = [module.run_unit(u) for u in units]            # any order, any process
    found = module.merge(candidates, moments, options, results)  # -> Found (results in plan order)

plus a convenience function that does the three steps with
:func:`selectkit.parallel.run_units` (e.g. ``exhaustive_search(candidates, ...,
n_jobs=2)``).  ``options`` is the method's own frozen options dataclass.
"""

from ._found import Found

__all__ = ["Found"]
