"""Stage 3, engine: particles and their step — state, releases, random streams, the compiled step
kernels and their numpy twin, kernel inputs, the time-step check, dispersion coefficients and
drift.

May import: the base, ``walkers.scenario`` and ``walkers.fields``.
"""

from walkers.engine.mover import advect_points

__all__ = ["advect_points"]
