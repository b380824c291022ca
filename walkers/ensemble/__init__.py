"""Stage 6, ensemble: many runs with sampled sources — draws, execution (in-process or Dask),
batch reductions and statistics, the assembled result and its figures. The method is described
in :mod:`walkers.ensemble.execute`.

May import: the base and the stages before it (``scenario`` to ``outputs``).
"""
