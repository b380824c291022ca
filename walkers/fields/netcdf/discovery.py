"""Discovery of a flow file's layout: which variable plays each role, its axes, their order and
direction, its units factor and the file's times and coordinate reference system.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import cftime
import netCDF4
import numpy as np

from walkers.errors import InputError
from walkers.fields.geo import crs_from_cf, crs_from_user
from walkers.fields.netcdf.curvilinear import (
    GridFromFile,
    IndexVelocity,
    components_of,
    coordinate_pair,
    find_angle,
    read_angle,
    read_grid,
    staggered_axis,
)
from walkers.fields.netcdf.layers import find_vertical
from walkers.fields.netcdf.roles import (
    _DEG_EAST,
    _DEG_NORTH,
    _LENGTH_UNITS,
    _NAME_HINTS,
    _ROLE_DIMENSION,
    _ROLE_SI,
    _ROLE_UNITS,
    _ROLE_WORDS,
    _X_NAMES,
    _Y_NAMES,
    STANDARD_NAMES,
    _norm_units,
    _scenario_hint,
)
from walkers.scenario.units import unit_factor

# ----------------------------------------------------------------------------------------------
# What one file holds: variables, their roles and axes
# ----------------------------------------------------------------------------------------------


@dataclass
class _Axis:
    """A space axis of a variable: coordinate values in file order and whether to flip it."""

    dim: str
    values: np.ndarray  # ascending, in metres or degrees
    flip: bool


@dataclass
class _Layout:
    """Where a role's data sits in its variable, and how to bring it to (time, y, x) in SI."""

    role: str
    name: str
    dims: tuple[str, ...]
    time_axis: int | None
    x: _Axis
    y: _Axis | None
    factor: float
    file_units: str
    attrs: dict[str, Any] = field(default_factory=dict)
    z_dim: str | None = None  # the layer dimension of layered velocities

    @property
    def shape_yx(self) -> tuple[int, int]:
        return (1 if self.y is None else self.y.values.size, self.x.values.size)

    def index(self, t0: int | None = None, t1: int | None = None) -> tuple[Any, ...]:
        """The netCDF index reading frames t0..t1-1 (all, if no time axis); other dims at 0."""
        idx: list[Any] = []
        for d in self.dims:
            if self.time_axis is not None and d == self.dims[self.time_axis]:
                idx.append(slice(t0, t1))
            elif d in (self.x.dim, self.z_dim) or (self.y is not None and d == self.y.dim):
                idx.append(slice(None))
            else:
                idx.append(0)
        return tuple(idx)

    def arrange(self, raw: Any) -> np.ndarray:
        """Raw netCDF values (masked) -> float64 (nt, ny, nx), SI, ascending axes, NaN for fill;
        layered velocities (nt, layers, ny, nx), layers in file order."""
        arr = np.ma.filled(np.ma.asarray(raw).astype(np.float64), np.nan)
        kept = [d for d in self.dims if d in self._kept()]
        order = [kept.index(d) for d in self._kept()]
        arr = np.transpose(arr, order)
        if self.time_axis is None:
            arr = arr[None]
        if self.y is None:
            arr = arr[..., None, :]
        if self.x.flip:
            arr = arr[..., ::-1]
        if self.y is not None and self.y.flip:
            arr = arr[..., ::-1, :]
        return np.ascontiguousarray(arr * self.factor)

    def _kept(self) -> list[str]:
        kept = []
        if self.time_axis is not None:
            kept.append(self.dims[self.time_axis])
        if self.z_dim is not None:
            kept.append(self.z_dim)
        if self.y is not None:
            kept.append(self.y.dim)
        kept.append(self.x.dim)
        return kept


def _describe_vars(ds: netCDF4.Dataset) -> str:
    items = []
    for name, var in ds.variables.items():
        if name in ds.dimensions:
            continue
        bits = [f"dims=({', '.join(var.dimensions)})"]
        for key in ("standard_name", "units"):
            if key in var.ncattrs():
                bits.append(f"{key}={var.getncattr(key)}")
        items.append(f"{name} [{'; '.join(bits)}]")
    return "; ".join(items) if items else "(none)"


def _attr(var: Any, key: str, default: str = "") -> str:
    return str(var.getncattr(key)) if key in var.ncattrs() else default


def time_dimension(ds: netCDF4.Dataset, var: Any) -> str | None:
    """The time dimension of ``var``: one whose coordinate has CF time units, standard_name
    time or axis T, or the unlimited dimension; None if it has none."""
    for d in var.dimensions:
        coord = ds.variables.get(d)
        if coord is not None and (
            " since " in _attr(coord, "units")
            or _attr(coord, "standard_name") == "time"
            or _attr(coord, "axis").upper() == "T"
        ):
            return d
        if ds.dimensions[d].isunlimited():
            return d
    return None


def file_times(ds: netCDF4.Dataset, path: str, time_dim: str | None) -> tuple[list[Any], str]:
    """Frame times of a file along ``time_dim`` as cftime datetimes, and the calendar."""
    if time_dim is None:
        return [], "standard"
    coord = ds.variables.get(time_dim)
    if coord is None:
        # a time variable named otherwise than its dimension (auxiliary, CF-1.8 §5)
        coord = next(
            (
                v
                for v in ds.variables.values()
                if v.dimensions == (time_dim,) and " since " in _attr(v, "units")
            ),
            None,
        )
    units = "" if coord is None else _attr(coord, "units")
    if coord is None or " since " not in units:
        raise InputError(
            f"flow file {path!r}: time dimension {time_dim!r} needs a coordinate "
            "variable with CF units such as 'seconds since 2026-03-01T00:00:00Z'"
        )
    calendar = _attr(coord, "calendar", "standard").lower()
    values = np.ma.filled(np.ma.asarray(coord[:]).astype(np.float64), np.nan)
    if not np.all(np.isfinite(values)):
        raise InputError(f"flow file {path!r}: time has missing values")
    try:
        dates = cftime.num2date(values, units, calendar, only_use_cftime_datetimes=True)
    except ValueError as exc:
        raise InputError(
            f"flow file {path!r}: cannot decode time units {units!r} with calendar "
            f"{calendar!r} ({exc})"
        ) from exc
    return list(np.atleast_1d(dates)), calendar


class _FileSchema:
    """The roles, axes and time coordinate of one open NetCDF file."""

    def __init__(
        self,
        ds: netCDF4.Dataset,
        path: str,
        variables: dict[str, str],
        units: dict[str, str],
        has_constant_depth: bool,
        velocity_axes: str = "auto",
    ) -> None:
        self.ds = ds
        self.path = path
        self.overrides = dict(variables)
        self.units = units
        self.roles: dict[str, str] = {}
        self.geographic: bool | None = None
        u_name = self._find("u", required=True)
        assert u_name is not None
        u_var = ds.variables[u_name]
        self.time_dim = self._time_dim(u_var)
        self.vertical = find_vertical(ds, path, u_var, self.time_dim)
        self.bed_from_formula = False
        #: the vertical velocity and diffusivity kept for 3-D runs (``.column``), role ->
        #: (layout, vertical coordinate); filled by ``open_flow`` when asked
        self.column_variables: dict[str, Any] = {}
        skip = {self.time_dim, None if self.vertical is None else self.vertical.dim}
        spatial = [d for d in u_var.dimensions if d not in skip and ds.dimensions[d].size > 1]
        self.ndim = 1 if len(spatial) == 1 else 2
        if self.ndim == 1 and self.vertical is not None:
            raise InputError(
                f"flow file {path!r}: velocity {u_name!r} of a 1-D channel is in layers along "
                f"{self.vertical.dim!r}; layers are read on 2-D grids only: give the "
                "cross-section-averaged velocity"
            )
        self.roles["u"] = u_name
        if self.ndim == 2:
            v_name = self._find("v", required=True)
            assert v_name is not None
            self.roles["v"] = v_name
            self._find_depth(has_constant_depth)
        else:
            area = self._find("area", required=not has_constant_depth)
            if area is not None:
                self.roles["area"] = area
        mask = self._find("mask", required=False)
        if mask is not None:
            self.roles["mask"] = mask
        self.curvilinear = self._curvilinear_grid()
        self.layouts = {role: self._layout(role, name) for role, name in self.roles.items()}
        geos = {lay.x.dim: self._is_geographic(lay.x.dim) for lay in self.layouts.values()}
        if len(set(geos.values())) > 1:
            raise InputError(
                f"flow file {path!r}: some variables are on longitude/latitude and others on "
                "projected coordinates; all roles must share one kind of grid"
            )
        self.geographic = self.ndim == 2 and next(iter(geos.values()))
        self.index_velocity = (
            None if self.curvilinear is None else self._index_velocity(velocity_axes)
        )

    def _index_velocity(self, setting: str) -> IndexVelocity:
        """How the velocity components of a curvilinear grid become index-space components."""
        cells = self.curvilinear
        assert cells is not None
        u_var = self.ds.variables[self.roles["u"]]
        components = components_of(u_var, self.ds, cells.grid, setting)
        angle_name = find_angle(self.ds)
        angle = None
        if components == "grid" and angle_name is not None:
            angle = read_angle(self.ds, self.path, angle_name)
            if angle.shape != cells.grid.shape:
                angle = None  # on another grid (e.g. the faces): the cell sides are used
        lu, lv = self.layouts["u"], self.layouts["v"]
        assert lu.y is not None and lv.y is not None
        mapping = IndexVelocity(
            cells.grid, components, lu.x.values, lu.y.values, lv.x.values, lv.y.values, angle
        )
        mapping.check(self.path)
        return mapping

    def _curvilinear_grid(self) -> GridFromFile | None:
        """The curvilinear grid of the cell variable (depth, mask, ... or u), if its
        ``coordinates`` attribute names 2-D coordinates (CF-1.8 §5.2); None otherwise."""
        if self.ndim != 2:
            return None
        for role in ("depth", "area", "water_level", "mask", "bed_level", "u"):
            if role in self.roles:
                var = self.ds.variables[self.roles[role]]
                break
        try:
            pair = coordinate_pair(self.ds, var)
        except InputError as exc:
            raise InputError(f"flow file {self.path!r}: {exc}") from exc
        if pair is None:
            return None
        return read_grid(self.ds, self.path, var)

    def _find_depth(self, has_constant_depth: bool) -> None:
        """The depth roles of a 2-D file: its water depth, or water level and bed level.

        A parametric vertical coordinate brings its own surface (eta) and bed depth (CF-1.8
        Appendix D), used unless the scenario names the depth; z levels also take the water
        level, the surface that closes their top layer.
        """
        vc = self.vertical
        if vc is not None and vc.parametric and "depth" not in self.overrides:
            for role, term in (("water_level", "eta"), ("bed_level", "depth")):
                given = self._find(role, required=False) if role in self.overrides else None
                self.roles[role] = given or vc.terms[term]
            self.bed_from_formula = "bed_level" not in self.overrides
            return
        depth = self._find("depth", required=False)
        if depth is not None:
            self.roles["depth"] = depth
            if vc is not None:
                water = self._find("water_level", required=False)
                # a water level on the horizontal grid; one without it (a single series) is
                # not used, and the datum (z = 0) closes the top layer
                if water is not None and self.ds.variables[water].ndim >= 2:
                    self.roles["water_level"] = water
            return
        water = self._find("water_level", required=False)
        bed = self._find("bed_level", required=False)
        if water is not None and bed is not None:
            self.roles["water_level"] = water
            self.roles["bed_level"] = bed
        elif not has_constant_depth:
            raise InputError(
                f"flow file {self.path!r}: no water depth found. Variables in the file: "
                f"{_describe_vars(self.ds)}. Accepted: a depth variable with standard_name "
                f"{' or '.join(STANDARD_NAMES['depth'])}, or a bed level "
                f"({', '.join(STANDARD_NAMES['bed_level'])}, or positive='up'/'down') "
                "together with a water level "
                f"({', '.join(STANDARD_NAMES['water_level'])}); "
                f"{_scenario_hint('depth')}, or give a constant depth (m)"
            )

    # --- discovery -----------------------------------------------------------------------------

    def _candidates_by_hint(self, role: str) -> list[str]:
        names, words = _NAME_HINTS.get(role, (set(), ()))
        table = _ROLE_UNITS.get(role)
        found = []
        for name, var in self.ds.variables.items():
            if name in self.ds.dimensions or var.ndim == 0:
                continue
            # area and mask: units are checked later (area) or irrelevant (mask)
            unit_ok = role in ("area", "mask") or _norm_units(_attr(var, "units")) in (table or {})
            long_name = _attr(var, "long_name").lower()
            name_hit = name.lower() in names or any(w in long_name for w in words)
            if role == "mask":
                name_hit = "mask" in name.lower() or "mask" in long_name
            if unit_ok and name_hit:
                found.append(name)
        return found

    def _find(self, role: str, *, required: bool) -> str | None:
        ds, path = self.ds, self.path
        if role in self.overrides:
            name = self.overrides[role]
            if name not in ds.variables:
                raise InputError(
                    f"flow file {path!r}: variable {name!r} given for the {_ROLE_WORDS[role]} "
                    f"({role}) is not in the file. Variables in the file: {_describe_vars(ds)}"
                )
            return name
        std = STANDARD_NAMES[role]
        found = [n for n, v in ds.variables.items() if _attr(v, "standard_name") in std]
        how = "standard_name"
        if not found:
            found = self._candidates_by_hint(role)
            how = "units and name"
        if len(found) > 1:
            raise InputError(
                f"flow file {path!r}: the {_ROLE_WORDS[role]} ({role}) is ambiguous: variables "
                f"{', '.join(found)} all match by {how}; {_scenario_hint(role)} "
                f"with one of {', '.join(found)}"
            )
        if found:
            return found[0]
        if required:
            accepted = f"standard_name {' or '.join(std)}" if std else "no standard name"
            hint_names, hint_words = _NAME_HINTS.get(role, (set(), ()))
            extra = ""
            if hint_words:
                shown = "m s-1 or cm s-1" if role in ("u", "v") else _ROLE_SI.get(role, "")
                extra = (
                    f", or units {shown} with a long_name containing "
                    f"{' / '.join(repr(w) for w in hint_words[:3])}"
                )
            raise InputError(
                f"flow file {path!r}: no {_ROLE_WORDS[role]} ({role}) found. Variables in the "
                f"file: {_describe_vars(ds)}. Accepted: a variable with {accepted}{extra}; "
                f"{_scenario_hint(role)}"
            )
        return None

    def _time_dim(self, var: Any) -> str | None:
        return time_dimension(self.ds, var)

    # --- axes and units ------------------------------------------------------------------------

    def _axis_kind(self, dim: str, var_name: str) -> str:
        coord = self.ds.variables.get(dim)
        if self.curvilinear is not None:
            # on a curvilinear grid every horizontal dimension is a grid index
            return self._index_axis_kind(dim, var_name)
        if coord is None or coord.ndim != 1:
            return ""
        std, axis = _attr(coord, "standard_name").lower(), _attr(coord, "axis").upper()
        unit = _norm_units(_attr(coord, "units")).replace(" ", "")
        if std in _X_NAMES or axis == "X" or unit in _DEG_EAST:
            return "x"
        if std in _Y_NAMES or axis == "Y" or unit in _DEG_NORTH:
            return "y"
        low = dim.lower()
        if low.startswith(("x", "lon", "east")):
            return "x"
        if low.startswith(("y", "lat", "north")):
            return "y"
        return ""

    def _index_axis_kind(self, dim: str, var_name: str) -> str:
        """On a curvilinear grid: "x" for a dimension along the grid index i, "y" along j, by the
        variable's 2-D coordinates (their last dimension runs along i), else by position."""
        cells = self.curvilinear
        assert cells is not None
        if dim == cells.x_dim:
            return "x"
        if dim == cells.y_dim:
            return "y"
        var = self.ds.variables[var_name]
        pair = coordinate_pair(self.ds, var)
        if pair is not None:
            y_dim, x_dim = self.ds.variables[pair[0]].dimensions
            return "x" if dim == x_dim else "y" if dim == y_dim else ""
        skip = {self.time_dim, None if self.vertical is None else self.vertical.dim}
        spatial = [d for d in var.dimensions if d not in skip]
        if len(spatial) == 2:
            return "x" if dim == spatial[1] else "y"
        return ""

    def _is_geographic(self, dim: str) -> bool:
        if self.curvilinear is not None:
            return self.curvilinear.grid.geographic
        coord = self.ds.variables[dim]
        unit = _norm_units(_attr(coord, "units")).replace(" ", "")
        return unit in _DEG_EAST or _attr(coord, "standard_name") in ("longitude",)

    def _coordinate(self, dim: str, var_name: str) -> _Axis:
        if self.curvilinear is not None:
            along = self._index_axis_kind(dim, var_name)
            var = self.ds.variables[var_name]
            values = staggered_axis(self.ds, self.path, var, dim, along, self.curvilinear)
            return _Axis(dim=dim, values=values, flip=False)
        coord = self.ds.variables[dim]
        values = np.ma.filled(np.ma.asarray(coord[:]).astype(np.float64), np.nan).ravel()
        where = f"flow file {self.path!r}: coordinate {dim!r} (of {var_name!r})"
        if not np.all(np.isfinite(values)):
            raise InputError(f"{where} has missing or non-finite values; every cell needs one")
        unit = _norm_units(_attr(coord, "units")).replace(" ", "")
        if unit not in _DEG_EAST | _DEG_NORTH and unit not in ("", "1", "degrees"):
            if unit not in _LENGTH_UNITS:
                raise InputError(
                    f"{where} has units {unit!r}; expected metres (m), km, degrees_east or "
                    "degrees_north"
                )
            values = values * _LENGTH_UNITS[unit]
        if values.size > 1:
            step = np.diff(values)
            if np.any(step == 0):
                i = int(np.flatnonzero(step == 0)[0])
                raise InputError(
                    f"{where} repeats the value {values[i]:.10g} at indices {i} and {i + 1}; "
                    "coordinates must be strictly increasing or decreasing, with no duplicates"
                )
            if not (np.all(step > 0) or np.all(step < 0)):
                i = int(np.flatnonzero(np.sign(step) != np.sign(step[0]))[0])
                raise InputError(
                    f"{where} is not monotonic: {values[i + 1]:.10g} at index {i + 1} follows "
                    f"{values[i]:.10g}; coordinates must be strictly increasing or decreasing"
                )
        flip = values.size > 1 and values[1] < values[0]
        return _Axis(dim=dim, values=values[::-1].copy() if flip else values, flip=flip)

    def _factor(self, role: str, var: Any) -> tuple[float, str]:
        """Factor to SI of a role's variable: the scenario's units if given, else the file's."""
        if role == "mask":
            return 1.0, ""
        file_units = _attr(var, "units")
        given = self.units.get(role)
        if given is not None:
            key = _norm_units(given)
            if key in _ROLE_UNITS[role]:
                return _ROLE_UNITS[role][key], given
            where = f"[flow.units] {role} (for variable {var.name!r} of {self.path!r})"
            return unit_factor(given, _ROLE_DIMENSION[role], where), given
        table = _ROLE_UNITS[role]
        key = _norm_units(file_units)
        if key not in table:
            state = f"has units {file_units!r}" if file_units else "has no units attribute"
            raise InputError(
                f"flow file {self.path!r}: variable {var.name!r} ({_ROLE_WORDS[role]}) {state}; "
                f"accepted: {', '.join(sorted(table))}. Fix the file or state the units in the "
                f'scenario: [flow.units] {role} = "{_ROLE_SI[role]}"'
            )
        return table[key], file_units

    def _layout(self, role: str, name: str) -> _Layout:
        var = self.ds.variables[name]
        time_axis = None
        x_dim = y_dim = z_dim = None
        layered = self.vertical is not None and role in ("u", "v")
        for i, d in enumerate(var.dimensions):
            size = self.ds.dimensions[d].size
            if d == self.time_dim:
                time_axis = i
                continue
            if layered and d == self.vertical.dim:  # type: ignore[union-attr]
                z_dim = d
                continue
            if size == 1:
                continue  # a single layer or station: dropped
            kind = "x" if self.ndim == 1 else self._axis_kind(d, name)
            if kind == "x" and x_dim is None:
                x_dim = d
            elif kind == "y" and y_dim is None:
                y_dim = d
            else:
                raise InputError(
                    f"flow file {self.path!r}: variable {name!r} has a dimension {d!r} "
                    f"(size {size}) besides time, x and y (and, for velocities, their layers); "
                    "give other fields on one horizontal grid. Each x and y dimension needs a 1-D "
                    "coordinate variable of "
                    "the same name with standard_name projection_x_coordinate / "
                    "projection_y_coordinate (or longitude / latitude) or axis = 'X' / 'Y'"
                )
        if x_dim is None or (self.ndim == 2 and y_dim is None):
            raise InputError(
                f"flow file {self.path!r}: variable {name!r} (dims {var.dimensions}) lacks an "
                f"{'x' if x_dim is None else 'y'} dimension; the {_ROLE_WORDS[role]} must lie on "
                "the same kind of grid as the velocity"
            )
        if layered and z_dim is None:
            raise InputError(
                f"flow file {self.path!r}: velocity {name!r} ({role}) has no layer dimension "
                f"{self.vertical.dim!r} while {self.roles['u']!r} has; give both velocity "  # type: ignore[union-attr]
                "components in the same layers"
            )
        factor, file_units = self._factor(role, var)
        attrs = {k: var.getncattr(k) for k in var.ncattrs()}
        if role == "bed_level" and self.bed_from_formula:
            attrs["positive"] = "down"  # Appendix D: depth is below the datum, positive
        return _Layout(
            role=role,
            name=name,
            dims=tuple(var.dimensions),
            time_axis=time_axis,
            x=self._coordinate(x_dim, name),
            y=None if y_dim is None else self._coordinate(y_dim, name),
            factor=factor,
            file_units=file_units,
            attrs=attrs,
            z_dim=z_dim,
        )

    # --- time and CRS -------------------------------------------------------------------------

    def times(self) -> tuple[list[Any], str]:
        """Frame times of this file as cftime datetimes, and the calendar."""
        return file_times(self.ds, self.path, self.time_dim)

    def crs_wkt(self, crs: str | None) -> str | None:
        if crs is not None:
            return crs_from_user(crs, where="crs").to_wkt()
        gm = _attr(self.ds.variables[self.roles["u"]], "grid_mapping")
        if gm:
            gm_name = gm.split(":")[0].split()[0]
            if gm_name not in self.ds.variables:
                raise InputError(
                    f"flow file {self.path!r}: grid_mapping {gm_name!r} named by "
                    f"{self.roles['u']!r} is not in the file"
                )
            gvar = self.ds.variables[gm_name]
            attrs = {k: gvar.getncattr(k) for k in gvar.ncattrs()}
            return crs_from_cf(attrs, where=f"flow file {self.path!r}: {gm_name}").to_wkt()
        if self.geographic:
            return crs_from_user("EPSG:4326").to_wkt()
        return None
