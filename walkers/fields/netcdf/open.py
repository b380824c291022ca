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

Grids are rectilinear, projected (metres) or geographic (degrees), with axes in any order and
either direction, and u and v each on their own coordinates (staggered grids). The cell grid is the
grid of the depth (or mask) variable. Arrays handed out are float64, SI, ordered (time, y, x) with
ascending coordinates; velocities are 0 where there is no water, and ``wet`` says where there is.

References: CF Conventions 1.8 (Eaton et al. 2020), sections 4 (coordinates), 4.4 (time and
calendars), 5.6 (grid mappings) and 3.5 (flags).
"""

from __future__ import annotations

import datetime as _dt
import glob
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import cftime
import netCDF4
import numpy as np

from walkers.errors import InputError
from walkers.fields.base import FlowField, GriddedVariable, centre_to_edges
from walkers.fields.geo import crs_from_cf, crs_from_user
from walkers.units import unit_factor

FRAME_CACHE_BYTES = 4 * 2**20  # HDF5 chunk cache of each variable of an open flow file

STANDARD_NAMES: dict[str, tuple[str, ...]] = {
    "u": (
        "eastward_sea_water_velocity",
        "sea_water_x_velocity",
        "x_sea_water_velocity",
        "barotropic_eastward_sea_water_velocity",
        "barotropic_sea_water_x_velocity",
    ),
    "v": (
        "northward_sea_water_velocity",
        "sea_water_y_velocity",
        "y_sea_water_velocity",
        "barotropic_northward_sea_water_velocity",
        "barotropic_sea_water_y_velocity",
    ),
    "depth": ("sea_floor_depth_below_sea_surface", "sea_floor_depth"),
    "water_level": (
        "sea_surface_height",
        "sea_surface_height_above_geoid",
        "sea_surface_height_above_mean_sea_level",
        "sea_surface_height_above_reference_ellipsoid",
        "sea_surface_height_above_geopotential_datum",
        "water_surface_height_above_reference_datum",
    ),
    "bed_level": (
        "sea_floor_depth_below_geoid",
        "sea_floor_depth_below_mean_sea_level",
        "sea_floor_depth_below_reference_ellipsoid",
        "sea_floor_depth_below_geopotential_datum",
    ),
    "mask": ("sea_binary_mask", "land_binary_mask"),
    "area": (),
}
"""CF standard names that identify each role."""

_ROLE_WORDS = {
    "u": "eastward (x) velocity",
    "v": "northward (y) velocity",
    "depth": "water depth",
    "water_level": "water level",
    "bed_level": "bed level",
    "mask": "land/water mask",
    "area": "cross-section area",
}
_NAME_HINTS = {
    "u": (
        {"u", "ua", "ubar", "uo", "ucur", "u_velocity", "velocity_x", "vel_x"},
        ("eastward", "x velocity", "x-velocity", "x component", "x-component", "velocity in x"),
    ),
    "v": (
        {"v", "va", "vbar", "vo", "vcur", "v_velocity", "velocity_y", "vel_y"},
        ("northward", "y velocity", "y-velocity", "y component", "y-component", "velocity in y"),
    ),
    "depth": (
        {"depth", "water_depth", "total_depth", "h"},
        ("water depth", "depth of water", "total depth", "total water depth"),
    ),
    "area": (set(), ("cross-section", "cross section", "cross_section")),
    "water_level": (
        {"zeta", "eta", "ssh", "water_level", "waterlevel", "wl", "elev"},
        ("water level", "surface elevation", "water surface"),
    ),
    "bed_level": (
        {"bed", "bed_level", "bedlevel", "zb", "bathymetry", "bottom"},
        ("bed level", "bed elevation", "bottom elevation", "bathymetry"),
    ),
}
_LENGTH_UNITS = {
    "m": 1.0,
    "meter": 1.0,
    "meters": 1.0,
    "metre": 1.0,
    "metres": 1.0,
    "cm": 0.01,
    "km": 1000.0,
}
_VELOCITY_UNITS = {
    "m s-1": 1.0,
    "m/s": 1.0,
    "m s^-1": 1.0,
    "m.s-1": 1.0,
    "m s**-1": 1.0,
    "meter second-1": 1.0,
    "metre second-1": 1.0,
    "meters per second": 1.0,
    "metres per second": 1.0,
    "cm s-1": 0.01,
    "cm/s": 0.01,
    "cm s^-1": 0.01,
    "cm.s-1": 0.01,
    "cm s**-1": 0.01,
    "centimeters per second": 0.01,
}
_AREA_UNITS = {"m2": 1.0, "m^2": 1.0, "m**2": 1.0, "square meters": 1.0, "square metres": 1.0}
_ROLE_UNITS = {
    "u": _VELOCITY_UNITS,
    "v": _VELOCITY_UNITS,
    "depth": _LENGTH_UNITS,
    "water_level": _LENGTH_UNITS,
    "bed_level": _LENGTH_UNITS,
    "area": _AREA_UNITS,
}
_ROLE_SI = {
    "u": "m s-1",
    "v": "m s-1",
    "depth": "m",
    "water_level": "m",
    "bed_level": "m",
    "area": "m2",
}
_ROLE_DIMENSION = {
    "u": "velocity",
    "v": "velocity",
    "depth": "length",
    "water_level": "length",
    "bed_level": "length",
    "area": "area",
}
_X_NAMES = {"projection_x_coordinate", "longitude", "grid_longitude"}
_Y_NAMES = {"projection_y_coordinate", "latitude", "grid_latitude"}
_DEG_EAST = {"degrees_east", "degree_east", "degrees_e", "degree_e", "degreese", "degreee"}
_DEG_NORTH = {"degrees_north", "degree_north", "degrees_n", "degree_n", "degreesn", "degreen"}
_WATER_WORDS = ("water", "sea", "wet", "ocean", "river", "lake")
_LAND_WORDS = ("land", "dry", "island", "shore")


def _scenario_hint(role: str) -> str:
    return f'name it explicitly in the scenario: [flow.variables] {role} = "NAME"'


def _norm_units(text: str) -> str:
    return " ".join(str(text).strip().lower().split())


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

    @property
    def shape_yx(self) -> tuple[int, int]:
        return (1 if self.y is None else self.y.values.size, self.x.values.size)

    def index(self, t0: int | None = None, t1: int | None = None) -> tuple[Any, ...]:
        """The netCDF index reading frames t0..t1-1 (all, if no time axis); other dims at 0."""
        idx: list[Any] = []
        for d in self.dims:
            if self.time_axis is not None and d == self.dims[self.time_axis]:
                idx.append(slice(t0, t1))
            elif d == self.x.dim or (self.y is not None and d == self.y.dim):
                idx.append(slice(None))
            else:
                idx.append(0)
        return tuple(idx)

    def arrange(self, raw: Any) -> np.ndarray:
        """Raw netCDF values (masked) -> float64 (nt, ny, nx), SI, ascending axes, NaN for fill."""
        arr = np.ma.filled(np.ma.asarray(raw).astype(np.float64), np.nan)
        kept = [d for d in self.dims if d in self._kept()]
        order = [kept.index(d) for d in self._kept()]
        arr = np.transpose(arr, order)
        if self.time_axis is None:
            arr = arr[None]
        if self.y is None:
            arr = arr[:, None, :]
        if self.x.flip:
            arr = arr[:, :, ::-1]
        if self.y is not None and self.y.flip:
            arr = arr[:, ::-1, :]
        return np.ascontiguousarray(arr * self.factor)

    def _kept(self) -> list[str]:
        kept = []
        if self.time_axis is not None:
            kept.append(self.dims[self.time_axis])
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


class _FileSchema:
    """The roles, axes and time coordinate of one open NetCDF file."""

    def __init__(
        self,
        ds: netCDF4.Dataset,
        path: str,
        variables: dict[str, str],
        units: dict[str, str],
        has_constant_depth: bool,
    ) -> None:
        self.ds = ds
        self.path = path
        self.overrides = variables
        self.units = units
        self.roles: dict[str, str] = {}
        self.geographic: bool | None = None
        u_name = self._find("u", required=True)
        assert u_name is not None
        u_var = ds.variables[u_name]
        self.time_dim = self._time_dim(u_var)
        spatial = [d for d in u_var.dimensions if d != self.time_dim and ds.dimensions[d].size > 1]
        self.ndim = 1 if len(spatial) == 1 else 2
        self.roles["u"] = u_name
        if self.ndim == 2:
            v_name = self._find("v", required=True)
            assert v_name is not None
            self.roles["v"] = v_name
            depth = self._find("depth", required=False)
            if depth is not None:
                self.roles["depth"] = depth
            else:
                water = self._find("water_level", required=False)
                bed = self._find("bed_level", required=False)
                if water is not None and bed is not None:
                    self.roles["water_level"] = water
                    self.roles["bed_level"] = bed
                elif not has_constant_depth:
                    raise InputError(
                        f"flow file {path!r}: no water depth found. Variables in the file: "
                        f"{_describe_vars(ds)}. Accepted: a depth variable with standard_name "
                        f"{' or '.join(STANDARD_NAMES['depth'])}, or a bed level "
                        f"({', '.join(STANDARD_NAMES['bed_level'])}, or positive='up'/'down') "
                        "together with a water level "
                        f"({', '.join(STANDARD_NAMES['water_level'])}); "
                        f"{_scenario_hint('depth')}, or give a constant depth (m)"
                    )
        else:
            area = self._find("area", required=not has_constant_depth)
            if area is not None:
                self.roles["area"] = area
        mask = self._find("mask", required=False)
        if mask is not None:
            self.roles["mask"] = mask
        self.layouts = {role: self._layout(role, name) for role, name in self.roles.items()}
        geos = {lay.x.dim: self._is_geographic(lay.x.dim) for lay in self.layouts.values()}
        if len(set(geos.values())) > 1:
            raise InputError(
                f"flow file {path!r}: some variables are on longitude/latitude and others on "
                "projected coordinates; all roles must share one kind of grid"
            )
        self.geographic = self.ndim == 2 and next(iter(geos.values()))

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
        for d in var.dimensions:
            coord = self.ds.variables.get(d)
            if coord is not None and (
                " since " in _attr(coord, "units")
                or _attr(coord, "standard_name") == "time"
                or _attr(coord, "axis").upper() == "T"
            ):
                return d
            if self.ds.dimensions[d].isunlimited():
                return d
        return None

    # --- axes and units ------------------------------------------------------------------------

    def _axis_kind(self, dim: str, var_name: str) -> str:
        coord = self.ds.variables.get(dim)
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

    def _is_geographic(self, dim: str) -> bool:
        coord = self.ds.variables[dim]
        unit = _norm_units(_attr(coord, "units")).replace(" ", "")
        return unit in _DEG_EAST or _attr(coord, "standard_name") in ("longitude",)

    def _coordinate(self, dim: str, var_name: str) -> _Axis:
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
        x_dim = y_dim = None
        for i, d in enumerate(var.dimensions):
            size = self.ds.dimensions[d].size
            if d == self.time_dim:
                time_axis = i
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
                    f"(size {size}) besides time, x and y; give depth-averaged fields on one "
                    "horizontal grid. Each x and y dimension needs a 1-D coordinate variable of "
                    "the same name with standard_name projection_x_coordinate / "
                    "projection_y_coordinate (or longitude / latitude) or axis = 'X' / 'Y'"
                )
        if x_dim is None or (self.ndim == 2 and y_dim is None):
            raise InputError(
                f"flow file {self.path!r}: variable {name!r} (dims {var.dimensions}) lacks an "
                f"{'x' if x_dim is None else 'y'} dimension; the {_ROLE_WORDS[role]} must lie on "
                "the same kind of grid as the velocity"
            )
        factor, file_units = self._factor(role, var)
        return _Layout(
            role=role,
            name=name,
            dims=tuple(var.dimensions),
            time_axis=time_axis,
            x=self._coordinate(x_dim, name),
            y=None if y_dim is None else self._coordinate(y_dim, name),
            factor=factor,
            file_units=file_units,
            attrs={k: var.getncattr(k) for k in var.ncattrs()},
        )

    # --- time and CRS -------------------------------------------------------------------------

    def times(self) -> tuple[list[Any], str]:
        """Frame times of this file as cftime datetimes, and the calendar."""
        if self.time_dim is None:
            return [], "standard"
        coord = self.ds.variables.get(self.time_dim)
        units = "" if coord is None else _attr(coord, "units")
        if coord is None or " since " not in units:
            raise InputError(
                f"flow file {self.path!r}: time dimension {self.time_dim!r} needs a coordinate "
                "variable with CF units such as 'seconds since 2026-03-01T00:00:00Z'"
            )
        calendar = _attr(coord, "calendar", "standard").lower()
        values = np.ma.filled(np.ma.asarray(coord[:]).astype(np.float64), np.nan)
        if not np.all(np.isfinite(values)):
            raise InputError(f"flow file {self.path!r}: time has missing values")
        try:
            dates = cftime.num2date(values, units, calendar, only_use_cftime_datetimes=True)
        except ValueError as exc:
            raise InputError(
                f"flow file {self.path!r}: cannot decode time units {units!r} with calendar "
                f"{calendar!r} ({exc})"
            ) from exc
        return list(np.atleast_1d(dates)), calendar

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


# ----------------------------------------------------------------------------------------------
# Lazy reading of frames
# ----------------------------------------------------------------------------------------------


def _bracket(src: np.ndarray, tgt: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Indices (lo, hi) of the points of ``src`` (ascending) around each value of ``tgt``.

    A target on a source point (to 1e-6 of the spacing) gets lo == hi; targets beyond the ends
    get the end point.
    """
    n = src.size
    if n == 1:
        zero = np.zeros(tgt.size, dtype=np.intp)
        return zero, zero
    tol = 1e-6 * float(np.min(np.diff(src)))
    j = np.searchsorted(src, tgt)
    jc = np.clip(j, 0, n - 1)
    jm = np.clip(j - 1, 0, n - 1)
    on_hi = np.abs(src[jc] - tgt) <= tol
    on_lo = np.abs(src[jm] - tgt) <= tol
    lo = np.where(on_hi, jc, jm)
    hi = np.where(on_lo & ~on_hi, jm, jc)
    return lo, hi


def _corners(a: np.ndarray, ly, hy, lx, hx) -> list[np.ndarray]:
    return [a[:, ly][:, :, lx], a[:, ly][:, :, hx], a[:, hy][:, :, lx], a[:, hy][:, :, hx]]


def _mask_to_water(values: np.ndarray, attrs: dict[str, Any]) -> np.ndarray:
    """Water (True) / land from a mask variable, by its standard_name or flag meanings (CF 3.5)."""
    finite = np.isfinite(values)
    if attrs.get("standard_name") == "land_binary_mask":
        return finite & (values < 0.5)
    if "flag_values" in attrs and "flag_meanings" in attrs:
        flags = np.atleast_1d(np.asarray(attrs["flag_values"], dtype=np.float64))
        meanings = str(attrs["flag_meanings"]).lower().split()
        water = [
            f for f, m in zip(flags, meanings, strict=False) if any(w in m for w in _WATER_WORDS)
        ]
        if water:
            return finite & np.isin(values, water)
        land = [
            f for f, m in zip(flags, meanings, strict=False) if any(w in m for w in _LAND_WORDS)
        ]
        if land:
            return finite & ~np.isin(values, land)
    return finite & (values > 0.5)


class _FlowSource:
    """Reads frames of every role from one or more files and derives depth and wet per frame.

    Static (time-less) variables are read once when the source is built; time-varying ones are
    read a block of frames at a time, and the last block is kept so that u, v, depth and wet of
    one window cost one read. ``frames_read`` counts frames read from disk (for tests and logs).
    """

    def __init__(
        self,
        paths: list[str],
        layouts: dict[str, _Layout],
        frame_file: np.ndarray,
        frame_local: np.ndarray,
        times: np.ndarray,
        time_units: str,
        calendar: str,
        cell: tuple[np.ndarray, np.ndarray],
        ndim: int,
        min_depth: float,
        constant_depth: float | None,
    ) -> None:
        self.paths = paths
        self.layouts = layouts
        self.frame_file = frame_file
        self.frame_local = frame_local
        self.times = times
        self.time_units = time_units
        self.calendar = calendar
        self.cell_x, self.cell_y = cell
        self.ndim = ndim
        self.min_depth = min_depth
        self.constant_depth = constant_depth
        self.frames_read = 0
        self._cache: tuple[tuple[int, int], dict[str, np.ndarray]] | None = None
        self._handles: dict[int, netCDF4.Dataset] = {}
        self.static: dict[str, np.ndarray] = {}
        with netCDF4.Dataset(paths[int(frame_file[0]) if frame_file.size else 0]) as ds:
            for role, lay in layouts.items():
                if lay.time_axis is None:
                    self.static[role] = lay.arrange(ds.variables[lay.name][lay.index()])
        self.varying = [r for r, lay in layouts.items() if lay.time_axis is not None]
        depth_roles = {"depth", "water_level", "bed_level", "area"} & set(layouts)
        self.wet_from_file = bool(depth_roles) or "mask" in layouts
        wet_inputs = (depth_roles | {"mask"}) if self.wet_from_file else {"u", "v"}
        self.wet_steady = not (wet_inputs & set(self.varying))
        self.depth_steady = not (depth_roles & set(self.varying))
        self.nt = max(1, frame_file.size)

    def time_iso(self, k: int) -> str:
        """ISO 8601 time of frame k (for messages)."""
        return _seconds_iso(self.times[k], self.time_units, self.calendar)

    def __getstate__(self) -> dict[str, Any]:
        # sent to other processes without the cached block; files are reopened there
        state = dict(self.__dict__)
        state["_cache"] = None
        state["_handles"] = {}
        return state

    def _dataset(self, f: int) -> netCDF4.Dataset:
        """File f, kept open between reads (its chunk cache then serves neighbouring frames)."""
        if f not in self._handles:
            ds = netCDF4.Dataset(self.paths[f])
            # a small chunk cache per variable: HDF5's default (64 MiB each) fills up over a long
            # run and makes memory grow with run length
            for var in ds.variables.values():
                var.set_var_chunk_cache(size=FRAME_CACHE_BYTES)
            self._handles[f] = ds
        return self._handles[f]

    def close(self) -> None:
        """Close the files kept open for reading frames."""
        for ds in self._handles.values():
            ds.close()
        self._handles.clear()

    def _read_raw(self, i0: int, i1: int) -> dict[str, np.ndarray]:
        """Time-varying roles for frames i0..i1 (inclusive), arranged, straight from the files."""
        out: dict[str, list[np.ndarray]] = {r: [] for r in self.varying}
        k = i0
        while k <= i1:
            f = int(self.frame_file[k])
            k_end = k
            while (
                k_end + 1 <= i1
                and self.frame_file[k_end + 1] == f
                and self.frame_local[k_end + 1] == self.frame_local[k_end] + 1
            ):
                k_end += 1
            a, b = int(self.frame_local[k]), int(self.frame_local[k_end]) + 1
            ds = self._dataset(f)
            for role in self.varying:
                lay = self.layouts[role]
                out[role].append(lay.arrange(ds.variables[lay.name][lay.index(a, b)]))
            k = k_end + 1
        self.frames_read += i1 - i0 + 1
        return {r: np.concatenate(parts, axis=0) for r, parts in out.items()}

    def _get(self, raw: dict[str, np.ndarray], role: str) -> np.ndarray:
        return raw[role] if role in raw else self.static[role]

    def block(self, i0: int, i1: int) -> dict[str, np.ndarray]:
        """u, v, depth, wet for frames i0..i1, derived and checked (cached for the last block)."""
        if self._cache is not None and self._cache[0] == (i0, i1):
            return self._cache[1]
        raw = self._read_raw(i0, i1) if self.varying else {}
        u = self._get(raw, "u")
        v = self._get(raw, "v") if self.ndim == 2 else np.zeros_like(u[:1])
        shape = (1, self.cell_y.size, self.cell_x.size)
        if "depth" in self.layouts:
            depth = self._get(raw, "depth")
        elif "area" in self.layouts:
            depth = self._get(raw, "area")
        elif "water_level" in self.layouts:
            depth = self._depth_from_levels(raw)
        else:
            depth = np.full(shape, float(self.constant_depth or 0.0))
        if self.wet_from_file:
            wet = np.isfinite(depth) & (depth >= self.min_depth if self.ndim == 2 else depth > 0)
            if "mask" in self.layouts:
                wet = wet & _mask_to_water(self._get(raw, "mask"), self.layouts["mask"].attrs)
            self._check_velocity_in_water(u, "u", wet, i0)
            if self.ndim == 2:
                self._check_velocity_in_water(v, "v", wet, i0)
        else:
            wet = self._wet_from_velocity(u, v)
        result = {
            "u": np.nan_to_num(u, nan=0.0),
            "v": np.nan_to_num(v, nan=0.0),
            "depth": np.where(np.isfinite(depth), depth, 0.0),
            "wet": wet.astype(np.float64),
        }
        self._cache = ((i0, i1), result)
        return result

    def _depth_from_levels(self, raw: dict[str, np.ndarray]) -> np.ndarray:
        level = self._get(raw, "water_level")
        bed = self._get(raw, "bed_level")
        lay = self.layouts["bed_level"]
        positive = str(lay.attrs.get("positive", "")).lower()
        std = str(lay.attrs.get("standard_name", ""))
        down = positive == "down" or (positive != "up" and std.startswith("sea_floor_depth"))
        return level + bed if down else level - bed

    def _velocity_brackets(self, role: str, *, around_cells: bool = False):
        """Bracketing indices: cells around each velocity point, or (``around_cells``) velocity
        points around each cell centre."""
        lay = self.layouts[role]
        vy = np.array([0.0]) if lay.y is None else lay.y.values
        if around_cells:
            ly, hy = _bracket(vy, self.cell_y)
            lx, hx = _bracket(lay.x.values, self.cell_x)
        else:
            ly, hy = _bracket(self.cell_y, vy)
            lx, hx = _bracket(self.cell_x, lay.x.values)
        return ly, hy, lx, hx

    def _check_velocity_in_water(self, vel: np.ndarray, role: str, wet: np.ndarray, i0: int):
        """NaN velocity where all cells around the velocity point are wet: a defect of the file."""
        if np.all(np.isfinite(vel)):
            return
        inside = np.logical_and.reduce(_corners(wet, *self._velocity_brackets(role)))
        bad = ~np.isfinite(vel) & inside
        if np.any(bad):
            k, j, i = (int(n[0]) for n in np.nonzero(bad))
            lay = self.layouts[role]
            frame = min(i0 + k, self.nt - 1)
            xv = lay.x.values[i]
            yv = 0.0 if lay.y is None else lay.y.values[j]
            raise InputError(
                f"flow file(s) {', '.join(repr(p) for p in self.paths)}: variable {lay.name!r} "
                f"({role}) is missing (fill value or NaN) at frame {self.time_iso(frame)}, "
                f"point x={xv:.10g}, y={yv:.10g} (row {j}, column {i} after sorting axes "
                "ascending), where the depth/mask says there is water. Fix the file, or mark "
                "the cell as land in the mask or with a depth below the minimum depth"
            )

    def _wet_from_velocity(self, u: np.ndarray, v: np.ndarray) -> np.ndarray:
        fu = _corners(np.isfinite(u), *self._velocity_brackets("u", around_cells=True))
        if self.ndim == 1:
            return np.logical_or.reduce(fu)
        fv = _corners(np.isfinite(v), *self._velocity_brackets("v", around_cells=True))
        lu, lv = self.layouts["u"], self.layouts["v"]
        assert lu.y is not None and lv.y is not None
        collocated = all(
            a.size == b.size and np.allclose(a, b)
            for a, b in (
                (lu.x.values, self.cell_x),
                (lu.y.values, self.cell_y),
                (lv.x.values, self.cell_x),
                (lv.y.values, self.cell_y),
            )
        )
        if collocated:
            return np.logical_and.reduce(fu) & np.logical_and.reduce(fv)
        # staggered: a cell is water when any of its faces carries a velocity
        return np.logical_or.reduce(fu) | np.logical_or.reduce(fv)


class _LazyFrames:
    """One derived variable of a :class:`_FlowSource`, sliced along time like an array."""

    def __init__(self, source: _FlowSource, key: str, shape: tuple[int, int, int]) -> None:
        self.source = source
        self.key = key
        self.shape = shape
        self.dtype = np.dtype(np.float64)
        self.ndim = 3

    @property
    def frames_read(self) -> int:
        """Frames read from disk so far by the source behind this variable."""
        return self.source.frames_read

    def __getitem__(self, item: Any) -> np.ndarray:
        if isinstance(item, tuple):
            head, rest = item[0], item[1:]
        else:
            head, rest = item, ()
        if self.shape[0] == 1:
            # steady: the same frame whatever the time, from any block already derived
            cached = self.source._cache
            frames = (cached[1] if cached is not None else self.source.block(0, 0))[self.key]
            if isinstance(head, (int, np.integer)):
                return np.asarray(frames[(0, *rest)])
            return np.asarray(frames[:1][(head, *rest)])
        if isinstance(head, (int, np.integer)):
            k = int(head) % self.shape[0]
            return self.source.block(k, k)[self.key][(0, *rest)]
        start, stop, step = head.indices(self.shape[0])
        if stop <= start:
            return np.empty((0, *self.shape[1:]))
        data = self.source.block(start, stop - 1)[self.key]
        if data.shape[0] == 1:
            data = np.broadcast_to(data, (stop - start, *data.shape[1:]))
        return np.asarray(data[(slice(None, None, step), *rest)])

    def __array__(self, dtype: Any = None, copy: Any = None) -> np.ndarray:
        out = self[:]
        return out if dtype is None else out.astype(dtype)


# ----------------------------------------------------------------------------------------------
# Times
# ----------------------------------------------------------------------------------------------


def _iso(date: Any) -> str:
    return f"{date.isoformat()}+00:00"


def _seconds_iso(seconds: float, time_units: str, calendar: str) -> str:
    date = cftime.num2date(float(seconds), time_units, calendar, only_use_cftime_datetimes=True)
    return _iso(date)


def flow_time_iso(flow: FlowField, seconds: float) -> str:
    """ISO 8601 (UTC) of a time given in seconds in the flow's frame."""
    return _seconds_iso(seconds, flow.time_units, flow.calendar)


_ISO_RE = re.compile(
    r"^(?P<y>[+-]?\d{4,})-(?P<mo>\d{2})-(?P<d>\d{2})"
    r"(?:[T ](?P<h>\d{2}):(?P<mi>\d{2})(?::(?P<s>\d{2})(?:[.,](?P<f>\d{1,6})\d*)?)?)?"
    r"\s*(?P<z>Z|z|UTC|[+-]\d{2}(?::?\d{2})?)?$"
)


def _to_seconds(when: Any, time_units: str, calendar: str) -> float:
    """Seconds in the frame (time_units, calendar) of a date-time given with a zone.

    Strings are parsed here rather than by :mod:`datetime` so that dates of non-standard
    calendars (e.g. 30 February in a 360_day calendar) can be written.
    """
    if isinstance(when, cftime.datetime):
        parts = (
            when.year,
            when.month,
            when.day,
            when.hour,
            when.minute,
            when.second,
            when.microsecond,
        )
        offset = _dt.timedelta(0)
    elif isinstance(when, _dt.datetime):
        if when.tzinfo is None or when.utcoffset() is None:
            raise InputError(
                f"time {when.isoformat()!r}: no time zone; add one, e.g. 'Z' for UTC or '+01:00'"
            )
        parts = (
            when.year,
            when.month,
            when.day,
            when.hour,
            when.minute,
            when.second,
            when.microsecond,
        )
        offset = when.utcoffset() or _dt.timedelta(0)
    elif isinstance(when, str):
        m = _ISO_RE.match(when.strip())
        if m is None:
            raise InputError(
                f"time {when!r}: not an ISO 8601 date-time; write e.g. '2026-03-01T06:00:00Z'"
            )
        if m["z"] is None:
            raise InputError(
                f"time {when!r}: no time zone; add one, e.g. 'Z' for UTC or '+01:00' "
                "(write '2026-03-01T06:00:00Z')"
            )
        parts = (
            int(m["y"]),
            int(m["mo"]),
            int(m["d"]),
            int(m["h"] or 0),
            int(m["mi"] or 0),
            int(m["s"] or 0),
            int((m["f"] or "0").ljust(6, "0")),
        )
        zone = m["z"].upper()
        if zone in ("Z", "UTC"):
            offset = _dt.timedelta(0)
        else:
            digits = zone[1:].replace(":", "")
            minutes = int(digits[:2]) * 60 + (int(digits[2:4]) if len(digits) > 2 else 0)
            offset = _dt.timedelta(minutes=minutes if zone[0] == "+" else -minutes)
    else:
        raise InputError(f"time {when!r}: expected an ISO 8601 string or a datetime")
    try:
        date = cftime.datetime(*parts, calendar=calendar) - offset
    except ValueError as exc:
        raise InputError(
            f"time {when!r}: this date does not exist in the flow's {calendar!r} calendar ({exc})"
        ) from exc
    return float(cftime.date2num(date, time_units, calendar))


def to_flow_seconds(when: Any, flow: FlowField) -> float:
    """Seconds in the flow's time frame (``flow.time_units``, ``flow.calendar``) of a date-time.

    ``when`` is an ISO 8601 string or a datetime, either with a time zone (a naive time is an
    InputError: the zone must be stated), or a cftime datetime (taken as UTC in the flow calendar).
    """
    return _to_seconds(when, flow.time_units, flow.calendar)


def check_time_window(flow: FlowField, t0: float, t1: float) -> None:
    """InputError unless the times [t0, t1] (s, flow frame) lie within the flow's frames.

    A steady flow (one frame) covers all times.
    """
    if flow.steady:
        return
    first, last = float(flow.times[0]), float(flow.times[-1])
    if t0 < first - 1e-6 or t1 > last + 1e-6 or t1 < t0:
        raise InputError(
            f"the run covers {flow_time_iso(flow, t0)} to {flow_time_iso(flow, t1)} but the flow "
            f"({flow.source}) has frames from {flow_time_iso(flow, first)} to "
            f"{flow_time_iso(flow, last)}; move the release/run times inside the flow's span or "
            "supply flow files that cover the run"
        )


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
    for n, (x, y) in enumerate(zip(xs, ys, strict=True)):
        label = what if xs.size == 1 else f"{what} point {n}"
        where = f"({x:.10g}, {y:.10g})" if flow.ndim == 2 else f"x = {x:.10g}"
        if not (np.isfinite(x) and np.isfinite(y)):
            raise InputError(f"{label}: position {where} is not a finite number")
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

    Returns
    -------
    FlowField with lazy u, v, depth and wet; ``attrs`` holds the roles found, file units, paths.
    """
    variables = dict(variables or {})
    units = dict(units or {})
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
    file_list = _expand_paths(paths)

    schemas: list[_FileSchema] = []
    dates: list[list[Any]] = []
    calendars: set[str] = set()
    datasets = []
    try:
        for path in file_list:
            ds = _open_dataset(path)
            datasets.append(ds)
            schema = _FileSchema(ds, path, variables, units, constant_depth is not None)
            schemas.append(schema)
            d, cal = schema.times()
            dates.append(d)
            calendars.add(cal)
        first = schemas[0]
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

    if time_range is not None and has_time and seconds.size > 1:
        # (a single frame is a steady flow, valid at all times)
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
        frame_file, frame_local, seconds = (
            frame_file[i0 : i1 + 1],
            frame_local[i0 : i1 + 1],
            seconds[i0 : i1 + 1],
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
    )
    flow = _build_flow(source, first, seconds, time_units, calendar, wkt, file_list)
    flow.attrs.update(
        roles=dict(first.roles),
        file_units={r: lay.file_units for r, lay in first.layouts.items()},
        files=list(file_list),
        min_depth=float(min_depth),
        constant_depth=constant_depth,
    )
    first_block = source.block(0, 0)
    if not np.any(first_block["wet"] > 0.5):
        raise InputError(
            f"flow {flow.source}: every cell is land or dry in the first frame "
            f"({source.time_iso(0) if has_time else 'steady'}); check the mask, the depth "
            f"variable and its sign, and the minimum depth ({min_depth} m)"
        )
    return flow


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
    vel_steady = lu.time_axis is None
    u = var("u", lu.x.values, uy, vel_steady, lu.name, "m s-1")
    if schema.ndim == 2:
        lv = lays["v"]
        assert lv.y is not None
        v = var("v", lv.x.values, lv.y.values, vel_steady, lv.name, "m s-1")
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
    )
