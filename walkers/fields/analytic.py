"""Analytic flows laid on a grid, for verification and demos.

Each flow here is linear in space (uniform, linear shear, solid-body rotation) or uniform in space
and periodic in time (tidal oscillation), so bilinear interpolation in space and linear
interpolation in time reproduce it exactly at the particles (up to the time sampling of the tidal
frames). That makes the engine's answers directly comparable with closed-form solutions.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import numpy.typing as npt

from walkers.errors import InputError
from walkers.fields.base import FlowField, GriddedVariable
from walkers.fields.grids import Curvilinear

FLOW_KINDS = ("uniform", "shear", "rotation", "tidal")


def grid_flow(
    x: npt.ArrayLike,
    y: npt.ArrayLike,
    times: npt.ArrayLike,
    velocity: Callable[[np.ndarray, np.ndarray, float], tuple[np.ndarray, np.ndarray]],
    depth: npt.ArrayLike = 10.0,
    wet: npt.ArrayLike | None = None,
    time_units: str = "seconds since 2000-01-01T00:00:00+00:00",
    ndim: int = 2,
) -> FlowField:
    """A :class:`FlowField` with u, v sampled from ``velocity(X, Y, t)`` at the cell centres.

    Parameters
    ----------
    x, y : cell-centre coordinates (m), ascending; in 1-D pass ``y = [0.0]``.
    times : frame times (s).
    velocity : function of meshgrid arrays X, Y (m) and time t (s) returning (u, v) in m s-1.
    depth : water depth (m) in 2-D or cross-section area (m2) in 1-D; a constant or an array
        (ny, nx) or (nt, ny, nx).
    wet : optional (ny, nx) boolean mask of water cells (land where False).
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    times = np.atleast_1d(np.asarray(times, dtype=np.float64))
    X, Y = np.meshgrid(x, y)
    frames = [velocity(X, Y, float(t)) for t in times]
    u = np.stack([np.broadcast_to(f[0], X.shape) for f in frames]).astype(np.float64)
    v = np.stack([np.broadcast_to(f[1], X.shape) for f in frames]).astype(np.float64)
    h = np.asarray(depth, dtype=np.float64)
    if h.ndim < 3:
        h = np.broadcast_to(h, X.shape)[None].copy()
    mask = np.ones(X.shape, dtype=np.float64) if wet is None else np.asarray(wet, np.float64)
    if ndim == 1:
        v = np.zeros_like(v)
    return FlowField(
        u=GriddedVariable(x, y, u, "u", "m s-1"),
        v=GriddedVariable(x, y, v, "v", "m s-1"),
        depth=GriddedVariable(x, y, h, "depth", "m" if ndim == 2 else "m2"),
        wet=GriddedVariable(x, y, mask[None], "wet", "1"),
        times=times,
        time_units=time_units,
        ndim=ndim,
    )


def analytic_flow(
    kind: str,
    *,
    x_range: tuple[float, float] = (-5000.0, 5000.0),
    y_range: tuple[float, float] = (-5000.0, 5000.0),
    nx: int = 101,
    ny: int = 101,
    depth: float = 10.0,
    u: float = 0.0,
    v: float = 0.0,
    shear: float = 0.0,
    angular_velocity: float = 0.0,
    amplitude: float = 0.0,
    period: float = 44712.0,
    duration: float = 86400.0,
    frame_interval: float = 600.0,
    ndim: int = 2,
) -> FlowField:
    """One of the analytic flows on a regular grid of cell centres.

    kind :
      - ``"uniform"``: (u, v) everywhere (m s-1);
      - ``"shear"``: u = u + shear * y (shear in s-1), v constant;
      - ``"rotation"``: solid-body rotation about the origin, u = -Ω y, v = Ω x (Ω in rad s-1);
      - ``"tidal"``: u = u + amplitude * cos(2π t / period), uniform in space, frames every
        ``frame_interval`` s over ``duration`` s.
    ndim : 2 for depth-averaged, 1 for a channel along x (``y`` collapses to one row).
    """
    if kind not in FLOW_KINDS:
        raise InputError(f"analytic flow {kind!r}: expected one of {', '.join(FLOW_KINDS)}")
    x = np.linspace(x_range[0], x_range[1], nx)
    y = np.array([0.0]) if ndim == 1 else np.linspace(y_range[0], y_range[1], ny)
    times = np.array([0.0])
    if kind == "uniform":

        def velocity(X, Y, t):
            return np.full_like(X, u), np.full_like(X, v)

    elif kind == "shear":

        def velocity(X, Y, t):
            return u + shear * Y, np.full_like(X, v)

    elif kind == "rotation":

        def velocity(X, Y, t):
            return -angular_velocity * Y, angular_velocity * X

    else:
        times = np.arange(0.0, duration + frame_interval, frame_interval)

        def velocity(X, Y, t):
            return np.full_like(X, u + amplitude * np.cos(2 * np.pi * t / period)), np.full_like(
                X, v
            )

    return grid_flow(x, y, times, velocity, depth=depth, ndim=ndim)


def curvilinear_flow(
    corner_x: npt.ArrayLike,
    corner_y: npt.ArrayLike,
    times: npt.ArrayLike,
    velocity: Callable[[np.ndarray, np.ndarray, float], tuple[np.ndarray, np.ndarray]],
    depth: npt.ArrayLike = 10.0,
    wet: npt.ArrayLike | None = None,
    time_units: str = "seconds since 2000-01-01T00:00:00+00:00",
) -> FlowField:
    """A :class:`FlowField` on a curvilinear grid of cells with the given corners (m).

    ``velocity(X, Y, t)`` gives the eastward and northward velocity (m s-1) at world points; it is
    sampled at the cell centres and turned into the index-space components ũ = J⁻¹ u the engine
    steps with (see :mod:`walkers.fields.grids`). ``depth`` (m) and ``wet`` are per cell (ny, nx)
    or constant.
    """
    grid = Curvilinear(np.asarray(corner_x, float), np.asarray(corner_y, float))
    ny, nx = grid.shape
    times = np.atleast_1d(np.asarray(times, dtype=np.float64))
    X, Y = grid.centres()
    inv = grid.inverse
    us, vs = [], []
    for t in times:
        ue, vn = (np.broadcast_to(c, X.shape) for c in velocity(X, Y, float(t)))
        us.append(inv[..., 0, 0] * ue + inv[..., 0, 1] * vn)
        vs.append(inv[..., 1, 0] * ue + inv[..., 1, 1] * vn)
    a, b = grid.x, grid.y
    h = np.asarray(depth, dtype=np.float64)
    if h.ndim < 3:
        h = np.broadcast_to(h, (ny, nx))[None].copy()
    mask = np.ones((ny, nx)) if wet is None else np.asarray(wet, dtype=np.float64)
    speed = "s-1 (grid index units)"
    return FlowField(
        u=GriddedVariable(a, b, np.stack(us), "u", speed),
        v=GriddedVariable(a, b, np.stack(vs), "v", speed),
        depth=GriddedVariable(a, b, h, "depth", "m"),
        wet=GriddedVariable(a, b, mask[None], "wet", "1"),
        times=times,
        time_units=time_units,
        grid=grid,
    )
