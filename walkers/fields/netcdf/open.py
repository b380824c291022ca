"""Flow fields from hydrodynamic-model NetCDF files (CF conventions), read lazily.

:func:`open_flow` finds the variables that play each role, checks the grid, units and times at the
door, and returns a :class:`~walkers.fields.base.FlowField` whose time-varying arrays are read
from disk only when :meth:`FlowField.window` asks for a range of frames.

Roles and how they are found (the ``variables`` argument always wins):

- ``u``, ``v``: depth-averaged velocity (m s-1 or cm s-1), by CF ``standard_name``
  (:data:`STANDARD_NAMES`), then by velocity units with a name or ``long_name`` hint;
- ``depth``: water depth (m); or ``bed_level`` and ``water_level`` (m), depth = water level − bed
  level, or water level + bed depth when the bed variable is positive downwards (``positive =
  "down"`` or a ``sea_floor_depth_below_*`` standard name);
- ``mask``: land/sea mask (1 water, 0 land; ``land_binary_mask`` inverted; ``flag_values`` /
  ``flag_meanings`` read for the words water, sea, wet or land, dry);
- ``area``: wetted cross-section (m2) of a 1-D channel, where ``u`` has a single space dimension.

Layered velocities (sigma, s or z coordinates, CF-1.8 §4.3 and Appendix D) are reduced on read
to the thickness-weighted mean over the selected part of each column (:mod:`.layers`); a
parametric coordinate's formula_terms supply the water level (eta) and bed depth, and the depth
handed out is the total water depth, bed depth + eta.

Grids are rectilinear, projected (metres) or geographic (degrees), with axes in any order and
either direction, and u and v each on their own coordinates (staggered grids). The cell grid is the
grid of the depth (or mask) variable. Arrays handed out are float64, SI, ordered (time, y, x) with
ascending coordinates; velocities are 0 where there is no water, and ``wet`` says where there is.

References: CF Conventions 1.8 (Eaton et al. 2020), sections 4 (coordinates), 4.4 (time and
calendars), 5.6 (grid mappings) and 3.5 (flags).
"""

from __future__ import annotations

import glob
import os
from collections.abc import Sequence
from typing import Any

import cftime
import netCDF4
import numpy as np

from walkers.errors import InputError
from walkers.fields.base import (
    ColumnFields,
    FlowField,
    GriddedVariable,
    centre_to_edges,
    describe_column,
)
from walkers.fields.netcdf.column import find_column_variables
from walkers.fields.netcdf.discovery import _FileSchema
from walkers.fields.netcdf.frames import _FlowSource, _LazyFrames
from walkers.fields.netcdf.roles import _ROLE_WORDS, STANDARD_NAMES
from walkers.fields.times import _seconds_iso, _to_seconds
from walkers.scenario.specs import LayerSelection

"""CF standard names that identify each role."""


# ----------------------------------------------------------------------------------------------
# Opening
# ----------------------------------------------------------------------------------------------


def _expand_paths(paths: Any) -> list[str]:
    if isinstance(paths, (str, os.PathLike)):
        paths = [paths]
    out: list[str] = []
    for p in paths:
        text = os.fspath(p)
        if not os.path.exists(text) and any(c in text for c in "*?["):
            matches = sorted(glob.glob(text))
            if not matches:
                raise InputError(f"flow file pattern {text!r} matches no file; check the path")
            out.extend(matches)
        else:
            out.append(text)
    if not out:
        raise InputError("no flow file given; name at least one NetCDF file")
    return out


def _open_dataset(path: str) -> netCDF4.Dataset:
    if not os.path.exists(path):
        raise InputError(f"flow file {path!r} does not exist; check the path in the scenario")
    if os.path.isdir(path):
        raise InputError(f"flow file {path!r} is a directory; name a NetCDF file")
    try:
        return netCDF4.Dataset(path)
    except OSError as exc:
        raise InputError(
            f"flow file {path!r} is not a NetCDF file that can be read ({exc}); give a "
            "NetCDF-3 or NetCDF-4 file from the hydrodynamic model"
        ) from exc


def _cell_grid(schema: _FileSchema) -> tuple[np.ndarray, np.ndarray]:
    lays = schema.layouts
    for role in ("depth", "area", "water_level", "mask", "bed_level"):
        if role in lays:
            lay = lays[role]
            return lay.x.values, (np.array([0.0]) if lay.y is None else lay.y.values)
    if schema.ndim == 1:
        return lays["u"].x.values, np.array([0.0])
    assert lays["u"].y is not None
    return lays["v"].x.values, lays["u"].y.values


def _check_shapes(schema: _FileSchema, cell: tuple[np.ndarray, np.ndarray]) -> None:
    """Every role lies on the cell grid, or (u, v) on faces staggered by at most half a cell."""
    cx, cy = cell
    xe, ye = centre_to_edges(cx), centre_to_edges(cy)
    lays = schema.layouts
    for role, lay in lays.items():
        axes = [("x", lay.x.values, cx, xe)]
        if lay.y is not None:
            axes.append(("y", lay.y.values, cy, ye))
        for axis, vals, centres, edges in axes:
            same = vals.size == centres.size and np.allclose(vals, centres)
            if role in ("u", "v"):
                tol = 1e-6 * float(np.max(np.abs(edges)) + 1.0)
                ok = same or (
                    abs(vals.size - centres.size) <= 1
                    and vals[0] >= edges[0] - tol
                    and vals[-1] <= edges[-1] + tol
                )
            else:
                ok = same
            if not ok:
                shapes = ", ".join(
                    f"{lay2.name} ({r}) {lay2.shape_yx[0]}x{lay2.shape_yx[1]}"
                    for r, lay2 in lays.items()
                )
                raise InputError(
                    f"flow file {schema.path!r}: the grids disagree: {lay.name!r} ({role}) has "
                    f"{vals.size} points along {axis} from {vals[0]:.10g} to {vals[-1]:.10g}, the "
                    f"cell grid has {centres.size} from {centres[0]:.10g} to {centres[-1]:.10g} "
                    f"(shapes y x: {shapes}). Velocities may sit on cell faces (at most one point "
                    "more or fewer); other variables must share the cell grid"
                )
    nt = {
        r: schema.ds.dimensions[lay.dims[lay.time_axis]].size
        for r, lay in lays.items()
        if lay.time_axis is not None
    }
    if len(set(nt.values())) > 1:
        raise InputError(
            f"flow file {schema.path!r}: variables have different numbers of frames: "
            + ", ".join(f"{lays[r].name} {n}" for r, n in nt.items())
        )


def _frame_units(first: Any) -> str:
    return f"seconds since {first.year:04d}-{first.month:02d}-{first.day:02d}T00:00:00+00:00"


def open_flow(
    paths: str | os.PathLike | Sequence[str | os.PathLike],
    *,
    variables: dict[str, str] | None = None,
    units: dict[str, str] | None = None,
    crs: str | None = None,
    min_depth: float = 0.05,
    time_range: tuple[Any, Any] | None = None,
    constant_depth: float | None = None,
    layers: LayerSelection | None = None,
    velocity_axes: str = "auto",
    column: bool = False,
) -> FlowField:
    """Open a hydrodynamic-model flow field from one NetCDF file or several along time.

    Parameters
    ----------
    paths : a file, a glob pattern or a list of files; several files are joined along time
        (sorted by their first frame) and must not overlap.
    variables : role -> variable name, overriding discovery (roles u, v, depth, water_level,
        bed_level, mask, area).
    units : role -> units, overriding (or supplying) the file's units attribute.
    crs : the grid's CRS (``"EPSG:32633"`` or WKT), overriding the file's grid_mapping.
    min_depth : cells shallower than this (m) are dry.
    time_range : (start, end) as ISO 8601 strings with zone or datetimes: keep only the frames
        needed to cover it.
    constant_depth : depth (m; in 1-D the cross-section area, m2) to use when the file has none.
    layers : for layered velocities, the part of the water column to average over (the whole
        column by default); see :mod:`walkers.fields.netcdf.layers`.
    velocity_axes : on a curvilinear grid, how the velocity components are oriented: "auto"
        (from standard names and a grid-angle variable), "east_north" or "grid" (along the grid
        axes); see :mod:`walkers.fields.netcdf.curvilinear`.
    column : for three-dimensional runs: keep layered velocities, and the vertical velocity and
        diffusivity where the file has them, in ``flow.column`` (:mod:`.column`); u and v stay
        the depth mean.

    Returns
    -------
    FlowField with lazy u, v, depth and wet; ``attrs`` holds the roles found, file units, paths.
    """
    variables = dict(variables or {})
    units = dict(units or {})
    _check_arguments(variables, min_depth, constant_depth)
    layers = layers or LayerSelection()
    file_list = _expand_paths(paths)
    try:
        first, dates, calendar, cell, wkt = _read_schemas(
            file_list, variables, units, constant_depth is not None, crs, velocity_axes, column
        )
    except RuntimeError as exc:  # netCDF's error for data it cannot read
        raise InputError(
            f"flow file(s) {', '.join(repr(p) for p in file_list)}: cannot be read ({exc}); a "
            "file may be damaged or incomplete: copy or write it again"
        ) from exc
    _check_layer_selection(first, layers)
    has_time, time_units, frame_file, frame_local, seconds = _frame_times(
        first, dates, calendar, file_list
    )
    if time_range is not None and has_time and seconds.size > 1:
        # (a single frame is a steady flow, valid at all times)
        frame_file, frame_local, seconds = _frames_in_range(
            time_range, frame_file, frame_local, seconds, time_units, calendar, file_list
        )

    source = _FlowSource(
        file_list,
        first.layouts,
        frame_file,
        frame_local,
        seconds,
        time_units,
        calendar,
        cell,
        first.ndim,
        float(min_depth),
        constant_depth,
        first.vertical,
        layers,
        first.column_variables if column else None,
    )
    source.index_velocity = first.index_velocity
    flow = _build_flow(source, first, seconds, time_units, calendar, wkt, file_list)
    flow.attrs.update(
        roles=dict(first.roles),
        file_units={r: lay.file_units for r, lay in first.layouts.items()},
        files=list(file_list),
        min_depth=float(min_depth),
        constant_depth=constant_depth,
        velocity_components=(
            "eastward/northward (or along projected x/y)"
            if first.index_velocity is None
            else first.index_velocity.describe()
        ),
        vertical=(
            "none (depth-averaged velocities)"
            if first.vertical is None
            else first.vertical.describe(layers)
        ),
    )
    first_block = source.block(0, 0)
    if source.keep_column:
        flow.column = _column_fields(source, first, first_block, seconds.size)
    if column:
        flow.attrs["column"] = _describe_column(flow.column, first)
    if not np.any(first_block["wet"] > 0.5):
        raise InputError(
            f"flow {flow.source}: every cell is land or dry in the first frame "
            f"({source.time_iso(0) if has_time else 'steady'}); check the mask, the depth "
            f"variable and its sign, and the minimum depth ({min_depth} m)"
        )
    return flow


def _check_layer_selection(schema: _FileSchema, layers: LayerSelection) -> None:
    """InputError if a layer or band is asked of a file without layers, or a layer it lacks."""
    vc = schema.vertical
    if vc is None and layers.mode != "mean":
        raise InputError(
            f"flow.layers: {layers.describe()} is asked for, but the velocity "
            f"{schema.roles['u']!r} of {schema.path!r} has no layers (it is depth-averaged "
            "already); remove [flow.layers] or give a layered flow file"
        )
    if vc is not None and layers.mode == "layer" and not 1 <= layers.layer <= vc.size:
        raise InputError(
            f"flow.layers.layer = {layers.layer}: {schema.path!r} has {vc.size} layers along "
            f"{vc.dim!r}; give a layer from 1 (top) to {vc.size} (bottom)"
        )


def _check_arguments(
    variables: dict[str, str], min_depth: float, constant_depth: float | None
) -> None:
    """InputError for an unknown role, a bad minimum depth or a bad constant depth."""
    unknown = set(variables) - set(STANDARD_NAMES)
    if unknown:
        raise InputError(
            f"flow variables: unknown role(s) {', '.join(sorted(unknown))}; roles are "
            f"{', '.join(STANDARD_NAMES)}"
        )
    if not (np.isfinite(min_depth) and min_depth >= 0):
        raise InputError(f"minimum depth {min_depth!r} m: must be a finite number >= 0")
    if constant_depth is not None and not (np.isfinite(constant_depth) and constant_depth > 0):
        raise InputError(f"constant depth {constant_depth!r}: must be a finite number > 0")


def _read_schemas(
    file_list: list[str],
    variables: dict[str, str],
    units: dict[str, str],
    has_constant_depth: bool,
    crs: str | None,
    velocity_axes: str = "auto",
    column: bool = False,
) -> tuple[_FileSchema, list[list[Any]], str, tuple[np.ndarray, np.ndarray], str | None]:
    """Discover the layout of every file and check they agree: the first file's schema, each
    file's frame dates, the calendar, the cell grid and the CRS (WKT)."""
    schemas: list[_FileSchema] = []
    dates: list[list[Any]] = []
    calendars: set[str] = set()
    datasets = []
    try:
        for path in file_list:
            ds = _open_dataset(path)
            datasets.append(ds)
            schema = _FileSchema(ds, path, variables, units, has_constant_depth, velocity_axes)
            schemas.append(schema)
            d, cal = schema.times()
            dates.append(d)
            calendars.add(cal)
        first = schemas[0]
        first.column_variables = find_column_variables(first) if column else {}
        cell = _cell_grid(first)
        _check_shapes(first, cell)
        for schema in schemas[1:]:
            _check_same_grid(first, schema)
        if len(calendars) > 1:
            raise InputError(
                f"flow files {file_list}: calendars differ ({', '.join(sorted(calendars))}); "
                "all files must use one calendar"
            )
        calendar = calendars.pop()
        wkt = first.crs_wkt(crs)
    finally:
        for ds in datasets:
            ds.close()

    return first, dates, calendar, cell, wkt


def _frame_times(
    first: _FileSchema, dates: list[list[Any]], calendar: str, file_list: list[str]
) -> tuple[bool, str, np.ndarray, np.ndarray, np.ndarray]:
    """The frames of all files in time order: whether there is time, the frame time units, each
    frame's file and index in it, and its time (s)."""
    has_time = first.time_dim is not None
    if len(file_list) > 1 and not has_time:
        raise InputError(
            f"flow files {file_list}: several files given but they have no time dimension; "
            "give one file for a steady flow"
        )
    if has_time:
        order = sorted(range(len(file_list)), key=lambda i: dates[i][0] if dates[i] else 0)
        time_units = _frame_units(min(d[0] for d in dates if d))
        frame_file = np.concatenate([np.full(len(dates[i]), i, dtype=np.intp) for i in order])
        frame_local = np.concatenate([np.arange(len(dates[i]), dtype=np.intp) for i in order])
        seconds = np.concatenate(
            [
                np.atleast_1d(
                    np.asarray(cftime.date2num(dates[i], time_units, calendar), np.float64)
                )
                for i in order
            ]
        )
        _check_times(seconds, frame_file, file_list, time_units, calendar)
    else:
        first_date = cftime.datetime(2000, 1, 1, calendar=calendar)
        time_units = _frame_units(first_date)
        frame_file = np.zeros(0, dtype=np.intp)
        frame_local = np.zeros(0, dtype=np.intp)
        seconds = np.array([0.0])
    return has_time, time_units, frame_file, frame_local, seconds


def _frames_in_range(
    time_range: tuple[Any, Any],
    frame_file: np.ndarray,
    frame_local: np.ndarray,
    seconds: np.ndarray,
    time_units: str,
    calendar: str,
    file_list: list[str],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The frames needed to cover ``time_range`` (InputError if the flow does not cover it)."""
    t0 = _to_seconds(time_range[0], time_units, calendar)
    t1 = _to_seconds(time_range[1], time_units, calendar)
    if t0 < seconds[0] - 1e-6 or t1 > seconds[-1] + 1e-6 or t1 < t0:
        raise InputError(
            f"time range {_seconds_iso(t0, time_units, calendar)} to "
            f"{_seconds_iso(t1, time_units, calendar)} is outside the flow's frames "
            f"{_seconds_iso(seconds[0], time_units, calendar)} to "
            f"{_seconds_iso(seconds[-1], time_units, calendar)} ({', '.join(file_list)})"
        )
    i0 = max(int(np.searchsorted(seconds, t0, side="right")) - 1, 0)
    i1 = min(int(np.searchsorted(seconds, t1, side="left")), seconds.size - 1)
    return (
        frame_file[i0 : i1 + 1],
        frame_local[i0 : i1 + 1],
        seconds[i0 : i1 + 1],
    )


def _check_same_grid(first: _FileSchema, other: _FileSchema) -> None:
    for role, lay in first.layouts.items():
        lay2 = other.layouts.get(role)
        same = (
            lay2 is not None
            and lay2.name == lay.name
            and lay2.x.values.size == lay.x.values.size
            and np.allclose(lay2.x.values, lay.x.values)
            and (lay.y is None) == (lay2.y is None)
            and (lay.y is None or np.allclose(lay2.y.values, lay.y.values))  # type: ignore[union-attr]
            and (lay.time_axis is None) == (lay2.time_axis is None)
            and lay2.factor == lay.factor
        )
        if same and first.curvilinear is not None:
            g1, g2 = first.curvilinear.grid, other.curvilinear and other.curvilinear.grid
            same = bool(
                g2
                and g1.corner_x.shape == g2.corner_x.shape
                and np.allclose(g1.corner_x, g2.corner_x)
                and np.allclose(g1.corner_y, g2.corner_y)
            )
        if not same:
            raise InputError(
                f"flow file {other.path!r}: the {_ROLE_WORDS[role]} ({role}) differs from "
                f"{first.path!r} in variable, grid or units; files joined along time must share "
                "variables and grids"
            )


def _check_times(
    seconds: np.ndarray, frame_file: np.ndarray, paths: list[str], units: str, calendar: str
) -> None:
    step = np.diff(seconds)
    if np.any(step <= 0):
        k = int(np.flatnonzero(step <= 0)[0])
        fa, fb = paths[int(frame_file[k])], paths[int(frame_file[k + 1])]
        what = "is repeated" if step[k] == 0 else "goes backwards"
        where = f"in {fa!r}" if fa == fb else f"between {fa!r} and {fb!r}"
        raise InputError(
            f"flow time {what} {where}: {_seconds_iso(seconds[k], units, calendar)} then "
            f"{_seconds_iso(seconds[k + 1], units, calendar)}; frames must be strictly increasing "
            "in time with no duplicates (remove the overlap)"
        )


def _column_fields(
    source: _FlowSource, schema: _FileSchema, block: dict[str, np.ndarray], nt: int
) -> ColumnFields:
    """The layered fields a three-dimensional run uses, lazy like the flow's (their levels from
    the first frame's block)."""
    cx, cy = source.cell_x, source.cell_y

    def var(role: str, x, y, steady: bool, unit: str) -> GriddedVariable:
        nl = block[f"column_{role}_levels"].size
        shape = (1 if steady else nt, nl, y.size, x.size)
        name = source.layouts[role].name
        return GriddedVariable(x, y, _LazyFrames(source, f"column_{role}", shape), name, unit)

    lu, lv = schema.layouts["u"], schema.layouts["v"]
    assert lu.y is not None and lv.y is not None
    unit = "m s-1" if schema.curvilinear is None else "s-1 (grid index units)"
    out = ColumnFields(
        block["column_u_levels"],
        var("u", lu.x.values, lu.y.values, source.velocity_steady, unit),
        var("v", lv.x.values, lv.y.values, source.velocity_steady, unit),
    )
    for role, unit in (("w", "m s-1"), ("kz", "m2 s-1")):
        if f"column_{role}" not in block:
            continue
        steady = source.depth_steady and role not in source.varying
        levels = block[f"column_{role}_levels"]
        setattr(out, f"{role}_levels", levels)
        setattr(out, role, var(role, cx, cy, steady, unit))
    out.describe = _describe_column(out, schema)
    return out


def _describe_column(column: ColumnFields | None, schema: _FileSchema) -> str:
    """One line for ``walkers inspect``: what the file gives of the vertical."""
    if column is None:
        return (
            "velocity: the depth mean (the file has no layers); vertical velocity: none (no "
            "vertical advection); K_z: none in the file"
        )
    names = {r: lay.name for r, (lay, _) in schema.column_variables.items()}
    w, kz = column.w_levels, column.kz_levels
    return describe_column(
        column.levels,
        None if column.w is None or w is None else (names["w"], w.size),
        None if column.kz is None or kz is None else (names["kz"], kz.size),
    )


def _build_flow(
    source: _FlowSource,
    schema: _FileSchema,
    seconds: np.ndarray,
    time_units: str,
    calendar: str,
    wkt: str | None,
    file_list: list[str],
) -> FlowField:
    cx, cy = source.cell_x, source.cell_y
    nt = seconds.size
    lays = schema.layouts

    def var(key: str, x, y, steady: bool, name: str, unit: str) -> GriddedVariable:
        shape = (1 if steady else nt, y.size, x.size)
        return GriddedVariable(x, y, _LazyFrames(source, key, shape), name, unit)

    lu = lays["u"]
    uy = np.array([0.0]) if lu.y is None else lu.y.values
    vel_steady = source.velocity_steady
    speed_units = "m s-1" if schema.curvilinear is None else "s-1 (grid index units)"
    u = var("u", lu.x.values, uy, vel_steady, lu.name, speed_units)
    if schema.ndim == 2:
        lv = lays["v"]
        assert lv.y is not None
        v = var("v", lv.x.values, lv.y.values, vel_steady, lv.name, speed_units)
    else:
        v = GriddedVariable(lu.x.values, uy, np.zeros((1, 1, lu.x.values.size)), "v", "m s-1")
    depth_name = next(
        (lays[r].name for r in ("depth", "area", "water_level") if r in lays), "constant depth"
    )
    depth = var("depth", cx, cy, source.depth_steady, depth_name, "m" if schema.ndim == 2 else "m2")
    wet = var("wet", cx, cy, source.wet_steady, "wet", "1")
    return FlowField(
        u=u,
        v=v,
        depth=depth,
        wet=wet,
        times=seconds,
        time_units=time_units,
        calendar=calendar,
        geographic=bool(schema.geographic),
        crs_wkt=wkt,
        ndim=schema.ndim,
        source=", ".join(file_list),
        grid=None if schema.curvilinear is None else schema.curvilinear.grid,
    )
