"""The flow a scenario asks for: opened or laid out from its :class:`FlowSpec`, and the
scenario's places (releases, receptors, output grid, points) checked against it.
"""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import numpy as np

from walkers.errors import InputError
from walkers.fields.base import FlowField
from walkers.scenario.specs import FlowSpec, Scenario

# ----------------------------------------------------------------------------------------------
# Points
# ----------------------------------------------------------------------------------------------


def check_points_in_water(
    flow: FlowField, xs: Any, ys: Any, what: str, *, t: float | None = None
) -> None:
    """InputError naming ``what`` (e.g. "release 'outfall'") if a point is outside or on land.

    xs, ys : point coordinates in the flow's grid coordinates (m, or degrees); ys is ignored in 1-D.
    t : time (s, flow frame) whose frame decides wet or dry; the first frame if None.
    """
    xs = np.atleast_1d(np.asarray(xs, dtype=np.float64))
    ys = np.zeros_like(xs) if flow.ndim == 1 else np.atleast_1d(np.asarray(ys, dtype=np.float64))
    xe, ye = flow.cell_edges()
    k = 0 if t is None or flow.wet.steady else flow.frame_range(t, t)[0]
    wet = flow.wet.frames(k, k)[0]
    unit = "degrees" if flow.geographic else "m"
    if getattr(flow.kind(), "mesh", False):
        faces = flow.grid.locate(xs, ys)
        for n, (x, y) in enumerate(zip(xs, ys, strict=True)):
            label = what if xs.size == 1 else f"{what} point {n}"
            if faces[n] < 0:
                raise InputError(
                    f"{label} at ({x:.10g}, {y:.10g}) lies outside the mesh of {flow.source}; "
                    "move it inside (see 'walkers inspect --map')"
                )
            if wet[0, faces[n]] < 0.5:
                raise InputError(
                    f"{label} at ({x:.10g}, {y:.10g}) lies in a dry face ({int(faces[n])}) of "
                    f"{flow.source}; move it into the water"
                )
        return
    # the engine's coordinates of the points (index space on a curvilinear grid)
    ax, ay = flow.kind().to_engine(xs, ys) if flow.curvilinear else (xs, ys)
    for n, (x, y) in enumerate(zip(xs, ys, strict=True)):
        label = what if xs.size == 1 else f"{what} point {n}"
        where = f"({x:.10g}, {y:.10g})" if flow.ndim == 2 else f"x = {x:.10g}"
        if not (np.isfinite(x) and np.isfinite(y)):
            raise InputError(f"{label}: position {where} is not a finite number")
        if flow.curvilinear:
            if not np.isfinite(ax[n]):
                raise InputError(
                    f"{label} at {where} lies outside the cells of the curvilinear grid of "
                    f"{flow.source}; move it inside (see 'walkers inspect --map')"
                )
            i = min(max(int(np.floor(ax[n] + 0.5)), 0), flow.x.size - 1)
            j = min(max(int(np.floor(ay[n] + 0.5)), 0), flow.y.size - 1)
            if wet[j, i] < 0.5:
                raise InputError(
                    f"{label} at {where} lies on land or in a dry cell of {flow.source} (grid "
                    f"cell i={i}, j={j}); move it into the water"
                )
            continue
        inside_x = xe[0] <= x <= xe[-1]
        inside_y = flow.ndim == 1 or ye[0] <= y <= ye[-1]
        if not (inside_x and inside_y):
            raise InputError(
                f"{label} at {where} lies outside the flow grid of {flow.source} "
                f"(x {xe[0]:.10g} to {xe[-1]:.10g}, y {ye[0]:.10g} to {ye[-1]:.10g} {unit}); "
                "move it inside"
            )
        i = min(int(np.searchsorted(xe, x, side="right")) - 1, flow.x.size - 1)
        j = (
            0
            if flow.ndim == 1
            else min(int(np.searchsorted(ye, y, side="right")) - 1, flow.y.size - 1)
        )
        if wet[j, i] < 0.5:
            raise InputError(
                f"{label} at {where} lies on land or in a dry cell of {flow.source} (cell centred "
                f"at x={flow.x[i]:.10g}, y={flow.y[j]:.10g} {unit}); move it into the water"
            )


def build_flow(spec: FlowSpec, column: bool = False) -> FlowField:
    """Open the flow files, or lay the analytic flow on its grid (time 0 = run start).

    column : a three-dimensional run (also when ``spec.column``, set by a [vertical] section):
    keep a layered file's vertical structure (``open_flow(..., column=True)``; on a mesh its
    layered velocities, ``open_mesh_flow(..., column=True)``)."""
    column = column or spec.column
    if spec.kind == "files":
        from walkers.fields.netcdf.open import open_flow
        from walkers.fields.netcdf.ugrid import is_ugrid

        paths = [str(p) for p in spec.paths]
        if any(is_ugrid(p) for p in paths if "*" not in p and "?" not in p):
            return _mesh_flow(spec, paths, column)
        if spec.open_boundaries:
            raise InputError(
                "flow.open_boundaries: open boundaries are named on unstructured meshes (UGRID "
                "files) only; on a grid, say which edges are open in [edges]"
            )
        return open_flow(
            [str(p) for p in spec.paths],
            variables=dict(spec.variables),
            units=dict(spec.units),
            crs=spec.crs,
            min_depth=spec.min_depth,
            constant_depth=spec.constant_depth,
            time_range=spec.time_range,
            layers=spec.layers,
            velocity_axes=spec.velocity_axes,
            column=column,
        )
    from walkers.fields.analytic import analytic_flow

    flow = analytic_flow(**spec.analytic)
    return dataclasses.replace(flow, time_units=f"seconds since {spec.time_origin}")


def _mesh_flow(spec: FlowSpec, paths: list[str], column: bool) -> FlowField:
    """A UGRID mesh flow (one file) as the run stage's flow (``column``: with its layers)."""
    from walkers.fields.mesh_field import mesh_field
    from walkers.fields.netcdf.ugrid import open_mesh_flow

    if len(paths) != 1:
        raise InputError(
            f"flow.files: {len(paths)} files given; a mesh flow (UGRID) is read from one file "
            "(join its frames into one file)"
        )
    mesh = open_mesh_flow(
        paths[0],
        variables=dict(spec.variables),
        units=dict(spec.units),
        crs=spec.crs,
        min_depth=spec.min_depth,
        layers=spec.layers,
        open_boundaries=dict(spec.open_boundaries),
        column=column,
    )
    return mesh_field(mesh)


def check_flow(scenario: Scenario, flow: FlowField) -> None:
    """Check that positions fit the flow: coordinate kind, and releases, receptors and the
    output grid inside the flow domain. Raises InputError naming the offending key."""
    if flow.geographic != scenario.geographic:
        want = "lon/lat (degrees)" if flow.geographic else "x/y (metres)"
        raise InputError(
            f"the flow grid is {'geographic' if flow.geographic else 'projected'}: give "
            f"release and receptor positions as {want}"
        )
    if flow.curvilinear or getattr(flow.kind(), "mesh", False):
        _check_inside_grid(scenario, flow)
        return
    west, east, south, north = flow.extent()
    if flow.ndim == 1:
        south, north = -math.inf, math.inf
    for i, rel in enumerate(scenario.releases):
        pts = np.asarray(rel.coords)
        if not (
            np.all((pts[:, 0] >= west) & (pts[:, 0] <= east))
            and np.all((pts[:, 1] >= south) & (pts[:, 1] <= north))
        ):
            raise InputError(
                f"releases[{i}] ({rel.name}): position outside the flow domain "
                f"x {west:g}..{east:g}, y {south:g}..{north:g}"
            )
    for i, rec in enumerate(scenario.receptors):
        if not (west <= rec.x <= east and south <= rec.y <= north):
            raise InputError(
                f"receptors[{i}] ({rec.name}): ({rec.x:g}, {rec.y:g}) is outside the flow "
                f"domain x {west:g}..{east:g}, y {south:g}..{north:g}"
            )
    g = scenario.output
    if g.x[-1] < west or g.x[0] > east or g.y[-1] < south or g.y[0] > north:
        raise InputError(
            f"output.grid does not overlap the flow domain x {west:g}..{east:g}, "
            f"y {south:g}..{north:g}"
        )


def _check_inside_grid(scenario: Scenario, flow: FlowField) -> None:
    """Releases and receptors inside the cells of a curvilinear grid, and the output grid
    overlapping it (InputError naming the key otherwise)."""
    grid = flow.grid
    mesh = getattr(grid, "mesh", False)

    def inside(x, y) -> np.ndarray:
        if mesh:
            return grid.locate(np.asarray(x, float), np.asarray(y, float)) >= 0
        return np.isfinite(grid.to_engine(np.asarray(x, float), np.asarray(y, float))[0])

    where = "the mesh's faces" if mesh else "the curvilinear grid's cells"
    for i, rel in enumerate(scenario.releases):
        pts = np.atleast_2d(np.asarray(rel.coords, dtype=float))
        if not inside(pts[:, 0], pts[:, 1]).all():
            raise InputError(
                f"releases[{i}] ({rel.name}): position outside {where}; see 'walkers inspect "
                "--map' for the grid"
            )
    for i, rec in enumerate(scenario.receptors):
        if not inside([rec.x], [rec.y]).all():
            raise InputError(
                f"receptors[{i}] ({rec.name}): ({rec.x:g}, {rec.y:g}) is outside {where}"
            )
    g = scenario.output
    gx, gy = np.meshgrid(g.x, g.y)
    if not inside(gx.ravel(), gy.ravel()).any():
        raise InputError(f"output.grid does not overlap {where}")
