"""The particle engine: compiled step kernels, their numpy twin, and the mover that feeds them."""

from walkers.engine.mover import advect_points

__all__ = ["advect_points"]
