"""Data variables on a UGRID mesh: velocity, depth and wet/dry, read into SI arrays.

A variable belongs to the mesh when its ``mesh`` attribute names the topology variable; its
``location`` (UGRID 1.0) says where it sits: ``node`` or ``face`` are read, anything else (edges,
volumes) is refused with a message. A variable without ``location`` is placed by its dimension.
Roles are found as on grids (:mod:`walkers.fields.netcdf.roles`): a name given by the caller,
else the CF standard name, else units with a telling name.

Layered velocities (a CF vertical coordinate on the layer dimension; CF-1.8 Appendix D or z
levels) are reduced to one value per node or face by the thickness-weighted mean of
:mod:`walkers.fields.netcdf.layers` (the same code as on grids). The surface height and bed depth
it needs are taken where the velocity sits; a term on the other location is moved there (node
values to a face: the mean of its corners; face values to a node: the area-weighted mean of the
faces around it). For a three-dimensional run (``column=True``) the layered u and v are also
kept, on heights that are fractions of the depth (:class:`~walkers.fields.mesh.MeshLayers`),
placed as on grids (:func:`walkers.fields.netcdf.column.on_levels`: sigma layers as they are,
z and s layers interpolated in each column to equal layers' centres), with the vertical velocity
w and the vertical diffusivity K_z where the file has them (by CF standard name, on their own
layers, e.g. the interfaces), moved to the faces, the columns of the vertical step.

Wet/dry per face and frame: a face is wet when its water depth (the mean of its corners' depths
where depth is on nodes) is at least the minimum depth and, where the file has a wet/dry or
land/sea flag variable (CF flag_values / flag_meanings, or standard_name sea_binary_mask /
land_binary_mask), the flag says water (a flag on nodes: every corner must be water).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import cftime
import netCDF4
import numpy as np

from walkers.errors import InputError
from walkers.fields.mesh import FACE, NODE, MeshFlow, MeshGeometry, MeshLayers, MeshVariable
from walkers.fields.mesh_open import coast_only
from walkers.fields.netcdf.column import (
    DIFFUSIVITY_UNITS,
    KZ_NAMES,
    W_NAMES,
    common_levels,
    on_levels,
)
from walkers.fields.netcdf.discovery import file_times, time_dimension
from walkers.fields.netcdf.frames import _mask_to_water, depth_from_levels
from walkers.fields.netcdf.layers import (
    VerticalCoordinate,
    find_vertical,
    layer_faces,
    layer_points,
    layer_weights,
    thickness_mean,
)
from walkers.fields.netcdf.roles import (
    _LAND_WORDS,
    _NAME_HINTS,
    _ROLE_DIMENSION,
    _ROLE_SI,
    _ROLE_UNITS,
    _ROLE_WORDS,
    _VELOCITY_UNITS,
    _WATER_WORDS,
    STANDARD_NAMES,
    _norm_units,
)
from walkers.scenario.specs import LayerSelection
from walkers.scenario.units import unit_factor


@dataclass
class Topology:
    """The mesh topology variable of a file and the names it gives."""

    name: str
    node_x: str
    node_y: str
    face_nodes: str
    node_dim: str
    face_dim: str
    geographic: bool


def _attr(var: Any, key: str, default: str = "") -> str:
    return str(var.getncattr(key)) if key in var.ncattrs() else default


class _MeshFile:
    """The mesh variables of one open file and how to read them."""

    def __init__(
        self,
        ds: netCDF4.Dataset,
        path: str,
        topo: Topology,
        geometry: MeshGeometry,
        variables: dict[str, str],
        units: dict[str, str],
    ) -> None:
        self.ds, self.path, self.topo, self.geometry = ds, path, topo, geometry
        self.overrides, self.units = variables, units
        self.members = [n for n, v in ds.variables.items() if _attr(v, "mesh") == topo.name]
        self.time_dim: str | None = None
        self.layer_dim: str | None = None

    def describe(self) -> str:
        bits = []
        for name in self.members:
            var = self.ds.variables[name]
            keys = ("standard_name", "location", "units")
            extra = ", ".join(f"{k}={_attr(var, k)}" for k in keys)
            bits.append(f"{name} [{extra}]")
        return "; ".join(bits) or "(none)"

    def find(self, role: str, *, required: bool) -> str | None:
        """The variable playing ``role`` among the mesh's variables."""
        if role in self.overrides:
            name = self.overrides[role]
            if name not in self.ds.variables:
                raise InputError(
                    f"mesh file {self.path!r}: variable {name!r} given for the "
                    f"{_ROLE_WORDS.get(role, role)} ({role}) is not in the file. Mesh variables: "
                    f"{self.describe()}"
                )
            return name
        found = [
            n
            for n in self.members
            if _attr(self.ds.variables[n], "standard_name") in STANDARD_NAMES.get(role, ())
        ]
        if not found:
            found = [n for n in self.members if self._hinted(n, role)]
        if len(found) > 1:
            raise InputError(
                f"mesh file {self.path!r}: the {_ROLE_WORDS.get(role, role)} ({role}) is "
                f"ambiguous: variables {', '.join(found)} all match; name one in the scenario: "
                f'[flow.variables] {role} = "NAME"'
            )
        if found:
            return found[0]
        if required:
            raise InputError(
                f"mesh file {self.path!r}: no {_ROLE_WORDS.get(role, role)} ({role}) found among "
                f"the variables of mesh {self.topo.name!r} (attribute mesh = "
                f"{self.topo.name!r}): {self.describe()}. Accepted: standard_name "
                f"{' or '.join(STANDARD_NAMES.get(role, ())) or '(none)'}; or name it in the "
                f'scenario: [flow.variables] {role} = "NAME"'
            )
        return None

    def _hinted(self, name: str, role: str) -> bool:
        var = self.ds.variables[name]
        if role == "mask":
            meanings = _attr(var, "flag_meanings").lower()
            return bool(meanings) and any(w in meanings for w in _WATER_WORDS + _LAND_WORDS)
        names, words = _NAME_HINTS.get(role, (set(), ()))
        unit_ok = _norm_units(_attr(var, "units")) in _ROLE_UNITS.get(role, {})
        long_name = _attr(var, "long_name").lower()
        return unit_ok and (name.lower() in names or any(w in long_name for w in words))

    def location(self, name: str, role: str) -> tuple[str, str]:
        """(location, its dimension) of a mesh variable."""
        var = self.ds.variables[name]
        loc = _attr(var, "location")
        dims = {NODE: self.topo.node_dim, FACE: self.topo.face_dim}
        if not loc:
            held = [k for k, d in dims.items() if d in var.dimensions]
            if len(held) != 1:
                raise InputError(
                    f"mesh file {self.path!r}: variable {name!r} ({role}) has no location "
                    "attribute and no node or face dimension; give it location = 'node' or "
                    "'face' (UGRID 1.0)"
                )
            loc = held[0]
        if loc not in dims:
            raise InputError(
                f"mesh file {self.path!r}: variable {name!r} ({role}) has location {loc!r}, "
                "which walkers does not read; give it on the mesh's nodes or faces (location "
                "'node' or 'face', UGRID 1.0)"
            )
        if dims[loc] not in var.dimensions:
            raise InputError(
                f"mesh file {self.path!r}: variable {name!r} ({role}) has location {loc!r} but "
                f"not the {loc} dimension {dims[loc]!r} (dimensions {var.dimensions})"
            )
        return loc, dims[loc]

    def factor(self, name: str, role: str) -> float:
        """Factor to SI units: the scenario's units if given, else the file's."""
        var = self.ds.variables[name]
        given = self.units.get(role)
        if given is not None:
            key = _norm_units(given)
            if key in _ROLE_UNITS[role]:
                return _ROLE_UNITS[role][key]
            where = f"[flow.units] {role} (for variable {name!r} of {self.path!r})"
            return unit_factor(given, _ROLE_DIMENSION[role], where)
        file_units = _attr(var, "units")
        table = _ROLE_UNITS[role]
        if _norm_units(file_units) not in table:
            state = f"has units {file_units!r}" if file_units else "has no units attribute"
            raise InputError(
                f"mesh file {self.path!r}: variable {name!r} ({_ROLE_WORDS[role]}) {state}; "
                f"accepted: {', '.join(sorted(table))}. Fix the file or state the units in the "
                f'scenario: [flow.units] {role} = "{_ROLE_SI[role]}"'
            )
        return table[_norm_units(file_units)]

    def read(
        self,
        name: str,
        role: str,
        layer_dim: str | None = None,
        factor: float | None = None,
        si: str = "",
    ) -> MeshVariable:
        """A variable as (frames, [layers,] n) float64 in SI, NaN for fill values; its layers on
        ``layer_dim`` (default: the velocity's), scaled by ``factor`` to ``si`` (default: the
        role's units)."""
        var = self.ds.variables[name]
        loc, dim = self.location(name, role)
        layers = layer_dim or self.layer_dim
        keep = [d for d in (self.time_dim, layers, dim) if d in var.dimensions]
        index: list[Any] = []
        for d in var.dimensions:
            if d in keep:
                index.append(slice(None))
            elif self.ds.dimensions[d].size == 1:
                index.append(0)
            else:
                raise InputError(
                    f"mesh file {self.path!r}: variable {name!r} ({role}) has a dimension {d!r} "
                    f"(size {self.ds.dimensions[d].size}) besides time, layers and its {loc} "
                    "dimension"
                )
        raw = np.ma.filled(np.ma.asarray(var[tuple(index)]).astype(np.float64), np.nan)
        kept = [d for d in var.dimensions if d in keep]
        data = np.transpose(raw, [kept.index(d) for d in keep])
        if self.time_dim not in var.dimensions:
            data = data[None]
        if factor is None:
            factor = 1.0 if role == "mask" else self.factor(name, role)
            si = _ROLE_SI.get(role, "")
        return MeshVariable(loc, np.ascontiguousarray(data * factor), name, si)

    def at(self, variable: MeshVariable, location: str) -> np.ndarray:
        """A (frames, n) variable's values on ``location``."""
        if variable.location == location:
            return variable.data
        if location == FACE:
            return self.geometry.face_mean_of_nodes(variable.data)
        return self.geometry.node_mean_of_faces(variable.data)


def read_mesh_fields(
    ds: netCDF4.Dataset,
    path: str,
    topo: Topology,
    geometry: MeshGeometry,
    *,
    variables: dict[str, str],
    units: dict[str, str],
    min_depth: float,
    layers: LayerSelection,
    column: bool = False,
) -> MeshFlow:
    """Velocity, depth and wet/dry of a mesh file (see the module docstring); ``column``: keep
    layered velocities on their levels too (a three-dimensional run)."""
    if not (np.isfinite(min_depth) and min_depth >= 0):
        raise InputError(f"minimum depth {min_depth!r} m: must be a finite number >= 0")
    mf = _MeshFile(ds, path, topo, geometry, variables, units)
    u_name = mf.find("u", required=True)
    v_name = mf.find("v", required=True)
    assert u_name is not None and v_name is not None
    u_var = ds.variables[u_name]
    mf.time_dim = time_dimension(ds, u_var)
    vertical = find_vertical(ds, path, u_var, mf.time_dim)
    mf.layer_dim = None if vertical is None else vertical.dim
    roles = {"u": u_name, "v": v_name}
    u, v = mf.read(u_name, "u"), mf.read(v_name, "v")
    depth, level = _depth(mf, vertical, roles)
    kept = None
    if vertical is not None:
        layered = u, v
        u = _reduce_layers(mf, vertical, u, depth, level, layers, roles)
        v = _reduce_layers(mf, vertical, v, depth, level, layers, roles)
        if column:
            kept = _on_levels(mf, vertical, *layered, depth, level)
            kept.w_levels, kept.w = _column_variable(mf, "w", depth, level)
            kept.kz_levels, kept.kz = _column_variable(mf, "kz", depth, level)
    mask_name = mf.find("mask", required=False)
    wet = _wet(mf, depth, mask_name, min_depth)
    if mask_name is not None:
        roles["mask"] = mask_name
    for var, role in ((u, "u"), (v, "v")):
        _check_in_water(mf, var, role, wet)
    dates, calendar = file_times(ds, path, mf.time_dim)
    if dates:
        first = dates[0]
        time_units = (
            f"seconds since {first.year:04d}-{first.month:02d}-{first.day:02d}T00:00:00+00:00"
        )
        times = np.atleast_1d(np.asarray(cftime.date2num(dates, time_units, calendar), float))
    else:
        time_units, times = "seconds since 2000-01-01T00:00:00+00:00", np.array([0.0])
    for var in (u, v, depth):
        if var.data.shape[0] not in (1, times.size):
            raise InputError(
                f"mesh file {path!r}: variable {var.name!r} has {var.data.shape[0]} frames, the "
                f"time axis {times.size}"
            )
    clean = [
        MeshVariable(x.location, np.nan_to_num(x.data, nan=0.0), x.name, x.units)
        for x in (u, v, depth)
    ]
    attrs: dict[str, Any] = {"roles": roles, "min_depth": float(min_depth)}
    if vertical is not None:
        attrs["vertical"] = vertical.describe(layers)
    return MeshFlow(
        geometry=geometry,
        times=times,
        time_units=time_units,
        calendar=calendar,
        u=clean[0],
        v=clean[1],
        depth=clean[2],
        wet=wet.astype(np.uint8),
        open_boundaries=coast_only(geometry),
        source=path,
        attrs=attrs,
        layers=kept,
    )


def _depth(
    mf: _MeshFile, vertical: VerticalCoordinate | None, roles: dict[str, str]
) -> tuple[MeshVariable, MeshVariable | None]:
    """The water depth (m) and, where the file gives it, the water level (m above the datum)."""
    if vertical is not None and vertical.parametric and "depth" not in mf.overrides:
        eta = mf.read(vertical.terms["eta"], "water_level")
        bed = mf.read(vertical.terms["depth"], "bed_level")
        roles["water_level"], roles["bed_level"] = eta.name, bed.name
        on = eta.location
        total = mf.at(eta, on) + mf.at(bed, on)  # CF-1.8 Appendix D: depth below the datum
        return MeshVariable(on, total, f"{eta.name} + {bed.name}", "m"), eta
    name = mf.find("depth", required=False)
    level_name = mf.find("water_level", required=False)
    level = None if level_name is None else mf.read(level_name, "water_level")
    if name is not None:
        roles["depth"] = name
        if level is not None:
            roles["water_level"] = level.name
        return mf.read(name, "depth"), level
    bed_name = mf.find("bed_level", required=False)
    if level is not None and bed_name is not None:
        bed = mf.read(bed_name, "bed_level")
        roles["water_level"], roles["bed_level"] = level.name, bed_name
        attrs: dict[str, Any] = {
            k: mf.ds.variables[bed_name].getncattr(k)
            for k in ("positive", "standard_name")
            if k in mf.ds.variables[bed_name].ncattrs()
        }
        on = level.location
        total = depth_from_levels(mf.at(level, on), mf.at(bed, on), attrs)
        return MeshVariable(on, total, f"{level.name} and {bed_name}", "m"), level
    raise InputError(
        f"mesh file {mf.path!r}: no water depth found among the variables of mesh "
        f"{mf.topo.name!r}: {mf.describe()}. Accepted: a depth with standard_name "
        f"{' or '.join(STANDARD_NAMES['depth'])}, or a bed level with a water level; or name it "
        'in the scenario: [flow.variables] depth = "NAME"'
    )


def _reduce_layers(
    mf: _MeshFile,
    vc: VerticalCoordinate,
    vel: MeshVariable,
    depth: MeshVariable,
    level: MeshVariable | None,
    selection: LayerSelection,
    roles: dict[str, str],
) -> MeshVariable:
    """Layered (frames, layers, n) velocity -> the thickness-weighted mean (frames, n)."""
    if vel.data.ndim != 3:
        raise InputError(
            f"mesh file {mf.path!r}: velocity {vel.name!r} has no layer dimension {vc.dim!r} "
            f"while {roles['u']!r} has; give both components in the same layers"
        )
    eta, bed = _surface_and_bed(mf, vel.location, depth, level)
    lower, upper = layer_faces(vc, eta[:, None, :], bed[:, None, :])
    weights = layer_weights(vc, lower, upper, eta[:, None, :], selection)
    mean = thickness_mean(vel.data[:, :, None, :], weights)[:, 0, :]
    return MeshVariable(vel.location, mean, vel.name, vel.units)


def _surface_and_bed(
    mf: _MeshFile, on: str, depth: MeshVariable, level: MeshVariable | None
) -> tuple[np.ndarray, np.ndarray]:
    """The surface height and the bed's depth below the datum (m), (frames, n) on ``on``; the
    surface at the datum where the file gives no water level; NaN bed where there is no water."""
    total = mf.at(depth, on)
    eta = np.zeros_like(total) if level is None else mf.at(level, on)
    with np.errstate(invalid="ignore"):
        bed = np.where(total > 0.0, total - eta, np.nan)
    return eta, bed


def _on_levels(
    mf: _MeshFile,
    vc: VerticalCoordinate,
    u: MeshVariable,
    v: MeshVariable,
    depth: MeshVariable,
    level: MeshVariable | None,
) -> MeshLayers:
    """Layered (frames, layers, n) u and v on heights that are fractions of the depth, as on
    grids (:func:`walkers.fields.netcdf.column.on_levels`)."""
    out = []
    for vel in (u, v):
        eta, bed = _surface_and_bed(mf, vel.location, depth, level)
        fraction = layer_points(vc, eta[:, None, :], bed[:, None, :])  # (frames, layers, 1, n)
        values = vel.data[:, :, None, :]
        values = np.broadcast_to(values, np.broadcast_shapes(values.shape, fraction.shape))
        levels, kept = on_levels(fraction, values, common_levels(fraction))
        out.append((levels, MeshVariable(vel.location, kept[:, :, 0, :], vel.name, vel.units)))
    if not np.array_equal(out[0][0], out[1][0]):
        raise InputError(
            f"mesh file {mf.path!r}: the layers of {u.name!r} and {v.name!r} lie at different "
            "heights; give both velocity components on the same layers and location"
        )
    return MeshLayers(out[0][0], out[0][1], out[1][1])


def _column_variable(
    mf: _MeshFile, role: str, depth: MeshVariable, level: MeshVariable | None
) -> tuple[np.ndarray | None, MeshVariable | None]:
    """The mesh's vertical velocity (``role`` "w") or vertical diffusivity ("kz"), found by its
    CF standard name (``column.W_NAMES``, ``column.KZ_NAMES``), on heights that are fractions
    of the depth (its own vertical coordinate: models write w and K_z on the layer interfaces as
    often as at their centres) and on the faces, the columns of the vertical step (node values:
    the mean of a face's corners, level by level): (levels, values (frames, n, nface)), or
    (None, None) when the file has none."""
    names, units, si = {
        "w": (W_NAMES, _VELOCITY_UNITS, "m s-1"),
        "kz": (KZ_NAMES, DIFFUSIVITY_UNITS, "m2 s-1"),
    }[role]
    found = [
        n for std in names for n in mf.members if _attr(mf.ds.variables[n], "standard_name") == std
    ]
    if not found:
        return None, None
    name = found[0]
    var = mf.ds.variables[name]
    where = f"mesh file {mf.path!r}: variable {name!r} ({_attr(var, 'standard_name')})"
    vc = find_vertical(mf.ds, mf.path, var, mf.time_dim)
    if vc is None:
        raise InputError(
            f"{where} has no vertical coordinate; give it in layers (sigma, s or z coordinates, "
            "CF-1.8 §4.3), or remove its standard_name to leave it unused"
        )
    unit = _norm_units(_attr(var, "units"))
    if unit not in units:
        raise InputError(f"{where} has units {unit!r}; give one of {', '.join(units)}")
    values = mf.read(name, role, layer_dim=vc.dim, factor=units[unit], si=si)
    if values.data.ndim != 3:
        raise InputError(f"{where}: dimensions {var.dimensions} are not time, layers, node or face")
    eta, bed = _surface_and_bed(mf, values.location, depth, level)
    fraction = layer_points(vc, eta[:, None, :], bed[:, None, :])  # (frames, layers, 1, n)
    data = values.data[:, :, None, :]
    data = np.broadcast_to(data, np.broadcast_shapes(data.shape, fraction.shape))
    levels, kept = on_levels(fraction, data, common_levels(fraction))
    kept = kept[:, :, 0, :]
    if values.location == NODE:
        nf, nk, n = kept.shape
        faces = mf.geometry.face_mean_of_nodes(kept.reshape(nf * nk, n))
        kept = faces.reshape(nf, nk, -1)
    return levels, MeshVariable(FACE, np.ascontiguousarray(kept), name, si)


def _wet(mf: _MeshFile, depth: MeshVariable, mask_name: str | None, min_depth: float) -> np.ndarray:
    """(frames, nface) bool: depth at the face at least ``min_depth`` and the flag says water."""
    face_depth = mf.at(depth, FACE)
    with np.errstate(invalid="ignore"):
        wet = np.isfinite(face_depth) & (face_depth >= min_depth)
    if mask_name is None:
        return wet
    flag = mf.read(mask_name, "mask")
    flag_var = mf.ds.variables[mask_name]
    attrs = {k: flag_var.getncattr(k) for k in flag_var.ncattrs()}
    is_water = _mask_to_water(flag.data, attrs)  # CF flag meanings: wet/dry, water/land
    if flag.location == NODE:
        corners = np.where(mf.geometry.face_nodes >= 0, mf.geometry.face_nodes, 0)
        used = mf.geometry.face_nodes >= 0
        is_water = np.all(is_water[..., corners] | ~used, axis=-1)
    return wet & is_water


def _check_in_water(mf: _MeshFile, var: MeshVariable, role: str, wet: np.ndarray) -> None:
    """InputError where a wet face needs a velocity value the file does not give."""
    missing = ~np.isfinite(var.data)
    if not np.any(missing):
        return
    if var.location == FACE:
        bad = missing & wet
    else:
        corners = np.where(mf.geometry.face_nodes >= 0, mf.geometry.face_nodes, 0)
        used = mf.geometry.face_nodes >= 0
        bad = np.any(missing[..., corners] & used, axis=-1) & wet
    if np.any(bad):
        frame, face = (int(i[0]) for i in np.nonzero(bad))
        raise InputError(
            f"mesh file {mf.path!r}: variable {var.name!r} ({role}) is missing (fill value or "
            f"NaN) at frame {frame} for face {face} (0-based), which the depth says is wet. Fix "
            "the file, or mark the face dry with a depth below the minimum depth"
        )
