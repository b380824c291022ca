"""Curvilinear structured grids in CF files: two-dimensional coordinates and velocity components.

A variable on a curvilinear grid names its coordinates in its ``coordinates`` attribute (CF-1.8
§5.2, §5.6): two 2-D variables over the variable's two horizontal dimensions, either longitude
and latitude (``degrees_east`` / ``degrees_north``) or projected x and y
(``projection_x_coordinate`` / ``projection_y_coordinate`` with the variable's ``grid_mapping``).
The last dimension of the coordinate variables runs along the grid index i, the first along j.
Cell corners come from the coordinates' ``bounds`` (CF-1.8 §7.1, four vertices per cell) where
the file gives them, and otherwise from the cell centres
(:func:`walkers.fields.grids.corners_from_centres`).

Velocities may sit on the cell centres or on the cell faces (Arakawa C: u between cells along i,
v between cells along j); the index positions of a staggered variable are found from its own
coordinates, or, without them, from its size (one point fewer: the inner faces; one more: all
faces). Their components are read as

- ``east_north``: eastward and northward (standard names ``eastward_*`` / ``northward_*``), or
  along the projected x and y of a projected grid;
- ``grid``: along the grid's own axes i and j (``sea_water_x_velocity`` on a lon/lat grid, a file
  with a grid-angle variable, ``angle_of_rotation_from_east_to_x``, or velocities on cell faces).

and turned into the contravariant components the engine steps with, ũ = J⁻¹ u (index units per
second): east/north components through the inverse Jacobian; grid-axis components by the
grid-angle variable where there is one (rotated to east/north first), else divided by the length
of the cell side along their axis (exact on orthogonal grids).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import netCDF4
import numpy as np

from walkers.errors import InputError
from walkers.fields.grids import Curvilinear, corners_from_bounds, corners_from_centres
from walkers.fields.netcdf.roles import (
    _DEG_EAST,
    _DEG_NORTH,
    _LENGTH_UNITS,
    _X_NAMES,
    _Y_NAMES,
    _norm_units,
)

#: Standard names of a grid-angle variable (CF standard name table).
ANGLE_NAMES = ("angle_of_rotation_from_east_to_x",)
#: Accepted values of the scenario's [flow] velocity_axes.
VELOCITY_AXES = ("auto", "east_north", "grid")


def _attr(var: Any, key: str) -> str:
    return str(var.getncattr(key)) if key in var.ncattrs() else ""


def coordinate_pair(ds: netCDF4.Dataset, var: Any) -> tuple[str, str] | None:
    """Names (x, y) of the 2-D coordinate variables a variable names in ``coordinates``, or None
    when it names none (a rectilinear grid)."""
    names = _attr(var, "coordinates").split()
    xs, ys = [], []
    for name in names:
        c = ds.variables.get(name)
        if c is None or c.ndim != 2 or not set(c.dimensions) <= set(var.dimensions):
            continue
        std = _attr(c, "standard_name").lower()
        unit = _norm_units(_attr(c, "units")).replace(" ", "")
        if std in _X_NAMES or unit in _DEG_EAST:
            xs.append(name)
        elif std in _Y_NAMES or unit in _DEG_NORTH:
            ys.append(name)
    if not xs and not ys:
        return None
    if len(xs) != 1 or len(ys) != 1:
        raise InputError(
            f"variable {var.name!r}: its coordinates attribute {_attr(var, 'coordinates')!r} "
            "should name exactly one 2-D x (longitude or projection_x_coordinate) and one 2-D y "
            "(latitude or projection_y_coordinate) variable over its horizontal dimensions"
        )
    return xs[0], ys[0]


@dataclass
class GridFromFile:
    """A curvilinear grid read from a file: the grid and its horizontal dimensions."""

    grid: Curvilinear
    x_dim: str  # along i
    y_dim: str  # along j
    x_name: str
    y_name: str


def read_grid(ds: netCDF4.Dataset, path: str, var: Any) -> GridFromFile:
    """The curvilinear grid of variable ``var`` (its 2-D coordinates and their bounds)."""
    pair = coordinate_pair(ds, var)
    assert pair is not None
    xname, yname = pair
    cx_var, cy_var = ds.variables[xname], ds.variables[yname]
    if cx_var.dimensions != cy_var.dimensions:
        raise InputError(
            f"flow file {path!r}: coordinates {xname!r} {cx_var.dimensions} and {yname!r} "
            f"{cy_var.dimensions} must lie on the same two dimensions"
        )
    y_dim, x_dim = cx_var.dimensions
    geographic = _norm_units(_attr(cx_var, "units")).replace(" ", "") in _DEG_EAST or _attr(
        cx_var, "standard_name"
    ).lower() in ("longitude", "grid_longitude")
    factor = 1.0
    if not geographic:
        unit = _norm_units(_attr(cx_var, "units")).replace(" ", "")
        if unit not in _LENGTH_UNITS:
            raise InputError(
                f"flow file {path!r}: coordinate {xname!r} has units {unit!r}; expected metres "
                "(m, km) for projected coordinates, or degrees_east for longitude"
            )
        factor = _LENGTH_UNITS[unit]
    cx = _values(cx_var) * factor
    cy = _values(cy_var) * factor
    corners = None
    bx_name, by_name = _attr(cx_var, "bounds"), _attr(cy_var, "bounds")
    if bx_name and by_name and bx_name in ds.variables and by_name in ds.variables:
        bx, by = _values(ds.variables[bx_name]) * factor, _values(ds.variables[by_name]) * factor
        if bx.shape == cx.shape + (4,) and by.shape == bx.shape:
            corners = corners_from_bounds(bx, by)
    if corners is None:
        bad = ~(np.isfinite(cx) & np.isfinite(cy))
        if bad.any():
            j, i = (int(v[0]) for v in np.nonzero(bad))
            raise InputError(
                f"flow file {path!r}: coordinates {xname!r}/{yname!r} are missing (NaN or fill) "
                f"at cell (j={j}, i={i}) ({int(bad.sum())} cell(s)); a curvilinear grid needs "
                "coordinates at every cell, land included"
            )
        corners = corners_from_centres(cx, cy)
    grid = Curvilinear(
        corners[0],
        corners[1],
        geographic=geographic,
        name=f"flow file {path!r}: grid of {xname!r}/{yname!r}",
    )
    return GridFromFile(grid, x_dim, y_dim, xname, yname)


def _values(var: Any) -> np.ndarray:
    return np.ma.filled(np.ma.asarray(var[:]).astype(np.float64), np.nan)


def staggered_axis(
    ds: netCDF4.Dataset, path: str, var: Any, dim: str, along: str, cells: GridFromFile
) -> np.ndarray:
    """Index positions (ascending) of a variable's points along one grid axis (``along`` "x"
    for i, "y" for j): the cell centres 0..n-1, or cell faces half a cell off."""
    n_cells = cells.grid.shape[1] if along == "x" else cells.grid.shape[0]
    n = ds.dimensions[dim].size
    if dim == (cells.x_dim if along == "x" else cells.y_dim):
        return np.arange(n, dtype=np.float64)
    pair = coordinate_pair(ds, var)
    if pair is not None:
        px, py = (_values(ds.variables[name]) for name in pair)
        cdims = ds.variables[pair[0]].dimensions
        if cells.grid.geographic is False:
            unit = _norm_units(_attr(ds.variables[pair[0]], "units")).replace(" ", "")
            px, py = px * _LENGTH_UNITS.get(unit, 1.0), py * _LENGTH_UNITS.get(unit, 1.0)
        a, b = cells.grid.to_engine(px.ravel(), py.ravel())
        pos = (a if along == "x" else b).reshape(px.shape)
        axis = cdims.index(dim)
        # the index position along this axis, averaged across the other
        line = np.nanmean(pos, axis=1 - axis)
        offset = np.nanmedian(line - np.arange(n))
        if np.isfinite(offset):
            for candidate in (-0.5, 0.0, 0.5):
                if abs(offset - candidate) < 0.1:
                    return np.arange(n, dtype=np.float64) + candidate
    if n == n_cells - 1:
        return np.arange(n, dtype=np.float64) + 0.5
    if n == n_cells + 1:
        return np.arange(n, dtype=np.float64) - 0.5
    raise InputError(
        f"flow file {path!r}: variable {var.name!r} has {n} points along {dim!r} against "
        f"{n_cells} cells, and its coordinates do not place it on the cell centres or faces; "
        "give its 2-D coordinates in a coordinates attribute"
    )


def components_of(var: Any, ds: netCDF4.Dataset, grid: Curvilinear, setting: str) -> str:
    """How a file's velocity components are oriented: ``east_north`` or ``grid`` (see the module
    docstring); ``setting`` is the scenario's [flow] velocity_axes."""
    if setting != "auto":
        return setting
    std = _attr(var, "standard_name").lower()
    if "eastward" in std or "northward" in std:
        return "east_north"
    if find_angle(ds) is not None:
        return "grid"
    if ("_x_" in std or "_y_" in std or std.endswith(("x_velocity", "y_velocity"))) and (
        not grid.geographic
    ):
        return "east_north"  # along the projected x and y of the grid mapping
    return "grid"


def find_angle(ds: netCDF4.Dataset) -> str | None:
    """Name of the grid-angle variable (angle of the i axis from east, anticlockwise), if any."""
    for name, var in ds.variables.items():
        if _attr(var, "standard_name") in ANGLE_NAMES and var.ndim == 2:
            return name
    return None


def read_angle(ds: netCDF4.Dataset, path: str, name: str) -> np.ndarray:
    """The grid angle (radians), (ny, nx)."""
    var = ds.variables[name]
    unit = _norm_units(_attr(var, "units")).replace(" ", "")
    values = _values(var)
    if unit in ("radian", "radians", "rad"):
        return values
    if unit.startswith("degree") or unit in ("deg", ""):
        return np.deg2rad(values)
    raise InputError(
        f"flow file {path!r}: grid angle {name!r} has units {unit!r}; expected degrees or radians"
    )


@dataclass
class IndexVelocity:
    """Turns velocity frames (m s-1, (nt, ny, nx) on their own points) into contravariant
    components (index units s-1) on the same points."""

    grid: Curvilinear
    components: str  # "east_north" or "grid"
    u_x: np.ndarray  # index positions of u along i and j, and of v
    u_y: np.ndarray
    v_x: np.ndarray
    v_y: np.ndarray
    angle: np.ndarray | None = None  # (ny, nx) radians, grid axis i from east, anticlockwise

    def check(self, path: str) -> None:
        """InputError for east/north components that do not sit on the cell centres."""
        if self.components == "east_north" and not self._centred():
            raise InputError(
                f"flow file {path!r}: the velocity components are eastward/northward but lie on "
                "the cell faces; a staggered grid's components must run along the grid axes "
                '(set [flow] velocity_axes = "grid"), or give them at the cell centres'
            )

    def describe(self) -> str:
        """How the file's components are turned into the index-space ones (for ``inspect``)."""
        where = "at the cell centres" if self._centred() else "on the cell faces (Arakawa C)"
        if self.components == "east_north":
            return f"eastward/northward (or projected x/y) {where}, through the inverse Jacobian"
        if self.angle is not None and self._centred():
            return f"along the grid axes {where}, rotated by the file's grid angle"
        return f"along the grid axes {where}, over the cell side along each axis"

    def _centred(self) -> bool:
        ny, nx = self.grid.shape
        cx, cy = np.arange(nx), np.arange(ny)
        return all(
            a.size == b.size and np.allclose(a, b)
            for a, b in ((self.u_x, cx), (self.u_y, cy), (self.v_x, cx), (self.v_y, cy))
        )

    def __call__(self, u: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        inv = self.grid.inverse
        if self.components == "grid" and (self.angle is None or not self._centred()):
            return u / self._side(0, self.u_x, self.u_y), v / self._side(1, self.v_x, self.v_y)
        if self.components == "grid":
            # rotate to east/north with the file's angle, then as below (cell centres only)
            assert self.angle is not None
            c, s = np.cos(self.angle), np.sin(self.angle)
            u, v = u * c - v * s, u * s + v * c
        return inv[..., 0, 0] * u + inv[..., 0, 1] * v, inv[..., 1, 0] * u + inv[..., 1, 1] * v

    def _side(self, axis: int, px: np.ndarray, py: np.ndarray) -> np.ndarray:
        """Length (m) of the cell side along ``axis`` at the points (px, py): the mean of the
        two cells a face lies between (the one cell at the grid's edge)."""
        jac = self.grid.jacobian
        side = np.hypot(jac[..., 0, axis], jac[..., 1, axis])
        ny, nx = side.shape
        i_lo = np.clip(np.floor(px).astype(int), 0, nx - 1)
        i_hi = np.clip(np.ceil(px).astype(int), 0, nx - 1)
        j_lo = np.clip(np.floor(py).astype(int), 0, ny - 1)
        j_hi = np.clip(np.ceil(py).astype(int), 0, ny - 1)
        return 0.25 * (
            side[np.ix_(j_lo, i_lo)]
            + side[np.ix_(j_lo, i_hi)]
            + side[np.ix_(j_hi, i_lo)]
            + side[np.ix_(j_hi, i_hi)]
        )
