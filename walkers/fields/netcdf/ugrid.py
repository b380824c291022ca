"""UGRID 1.0 two-dimensional meshes: the mesh topology, its nodes and faces, and its boundary.

What is read (UGRID Conventions 1.0, 2016, "2D triangular mesh topology" and "2D flexible mesh
(mixed triangles, quadrilaterals, etc.) topology"):

- the mesh topology variable: ``cf_role = "mesh_topology"`` with ``topology_dimension = 2``;
- ``node_coordinates``: projected x / y (metres, km; the CRS from a CF ``grid_mapping`` on the
  coordinates or on the topology variable, or given by the caller) or longitude / latitude
  (degrees), which are projected onto a local transverse Mercator centred on the mesh (WGS84
  ellipsoid, scale 1 on the central meridian) so that the engine works in metres; the projection
  is recorded in the geometry (``projection``, ``crs_wkt``), and eastward / northward
  velocities are turned onto its x / y axes (by the meridian convergence at each point);
- ``face_node_connectivity`` with ``start_index`` 0 or 1 (0 by default), ``_FillValue`` for the
  missing corners of triangles in a mixed mesh, and ``face_dimension`` when the table is stored
  corners first;
- ``face_coordinates`` (optional): kept, projected, as ``attrs["face_coordinates"]``;
- ``boundary_node_connectivity`` (optional): the model's boundary edges. Where a variable on the
  boundary dimension has CF ``flag_values`` / ``flag_meanings`` (CF-1.8 §3.5), each meaning
  other than a coast word (closed, coast, land, wall, shore, no_flow) names an open boundary made
  of the edges with that flag.

Data variables on the mesh are read by :mod:`walkers.fields.netcdf.ugrid_fields`.
"""

from __future__ import annotations

import os
from typing import Any

import netCDF4
import numpy as np
from pyproj import CRS, Transformer

from walkers.errors import InputError
from walkers.fields.geo import crs_from_cf, crs_from_user
from walkers.fields.mesh import MeshFlow, MeshGeometry, build_geometry
from walkers.fields.mesh_open import (
    OpenBoundaries,
    coast_only,
    mark_node_pairs,
    mark_nodes,
    mark_polyline,
)
from walkers.fields.netcdf.roles import _DEG_EAST, _DEG_NORTH, _LENGTH_UNITS, _norm_units
from walkers.fields.netcdf.ugrid_fields import Topology, read_mesh_fields
from walkers.scenario.specs import LayerSelection

#: Flag meanings of a boundary-type variable that mean coast (reflecting), not an open boundary.
COAST_WORDS = ("closed", "coast", "land", "wall", "shore", "no_flow", "noflow")


def _attr(var: Any, key: str, default: str = "") -> str:
    return str(var.getncattr(key)) if key in var.ncattrs() else default


def is_ugrid(path: str | os.PathLike) -> bool:
    """Whether a NetCDF file holds a UGRID mesh topology variable (False if unreadable)."""
    try:
        with netCDF4.Dataset(os.fspath(path)) as ds:
            return any(_attr(v, "cf_role") == "mesh_topology" for v in ds.variables.values())
    except OSError:
        return False


def find_topology(ds: netCDF4.Dataset, path: str, mesh: str | None = None) -> Topology:
    """The 2-D mesh topology of a file (the one named ``mesh`` if given)."""
    found = [
        n
        for n, v in ds.variables.items()
        if _attr(v, "cf_role") == "mesh_topology" and _attr(v, "topology_dimension") == "2"
    ]
    if mesh is not None:
        if mesh not in found:
            raise InputError(
                f"mesh file {path!r}: no 2-D mesh topology variable {mesh!r}; the file has "
                f"{', '.join(repr(n) for n in found) or 'none'}"
            )
        found = [mesh]
    if not found:
        raise InputError(
            f"mesh file {path!r}: no mesh topology variable found: UGRID 1.0 needs a variable "
            "with cf_role = 'mesh_topology' and topology_dimension = 2 whose attributes "
            "node_coordinates and face_node_connectivity name the nodes and faces"
        )
    if len(found) > 1:
        raise InputError(
            f"mesh file {path!r}: several 2-D meshes ({', '.join(found)}); name the one to use "
            "(mesh = NAME)"
        )
    var = ds.variables[found[0]]
    where = f"mesh file {path!r}: mesh topology {found[0]!r}"
    names = _attr(var, "node_coordinates").split()
    faces = _attr(var, "face_node_connectivity")
    if len(names) < 2 or not faces:
        raise InputError(
            f"{where} needs the attributes node_coordinates (two variables: x and y, or "
            "longitude and latitude) and face_node_connectivity (UGRID 1.0)"
        )
    for name in names[:2] + [faces]:
        if name not in ds.variables:
            raise InputError(f"{where} names variable {name!r}, which is not in the file")
    x_name, y_name = _order_xy(ds, names[:2])
    conn = ds.variables[faces]
    face_dim = _attr(var, "face_dimension") or conn.dimensions[0]
    if face_dim not in conn.dimensions:
        raise InputError(
            f"{where}: face_dimension {face_dim!r} is not a dimension of {faces!r} "
            f"{conn.dimensions}"
        )
    unit = _norm_units(_attr(ds.variables[x_name], "units")).replace(" ", "")
    geographic = unit in _DEG_EAST or _attr(ds.variables[x_name], "standard_name") == "longitude"
    return Topology(
        name=found[0],
        node_x=x_name,
        node_y=y_name,
        face_nodes=faces,
        node_dim=ds.variables[x_name].dimensions[0],
        face_dim=face_dim,
        geographic=geographic,
    )


def _order_xy(ds: netCDF4.Dataset, names: list[str]) -> tuple[str, str]:
    """(x, y) of two coordinate variables, by standard_name or units, else in the given order."""

    def is_y(name: str) -> bool:
        var = ds.variables[name]
        std = _attr(var, "standard_name")
        unit = _norm_units(_attr(var, "units")).replace(" ", "")
        return std in ("latitude", "projection_y_coordinate") or unit in _DEG_NORTH

    if is_y(names[0]) and not is_y(names[1]):
        return names[1], names[0]
    return names[0], names[1]


def _values(ds: netCDF4.Dataset, name: str, path: str) -> np.ndarray:
    values = np.ma.filled(np.ma.asarray(ds.variables[name][:]).astype(np.float64), np.nan)
    if not np.all(np.isfinite(values)):
        raise InputError(f"mesh file {path!r}: variable {name!r} has missing or non-finite values")
    return values.ravel()


def _length(ds: netCDF4.Dataset, name: str, path: str) -> np.ndarray:
    """A projected coordinate in metres."""
    unit = _norm_units(_attr(ds.variables[name], "units"))
    if unit not in _LENGTH_UNITS and unit not in ("", "1"):
        raise InputError(
            f"mesh file {path!r}: coordinate {name!r} has units {unit!r}; expected metres (m), "
            "km, or degrees_east / degrees_north"
        )
    return _values(ds, name, path) * _LENGTH_UNITS.get(unit, 1.0)


def local_projection(lon: np.ndarray, lat: np.ndarray) -> tuple[CRS, str]:
    """A transverse Mercator on the WGS84 ellipsoid centred on the mesh (central meridian and
    origin latitude at the mid-range, rounded to 1e-6 degree; scale 1; no false offsets)."""
    lon0 = round(0.5 * (float(np.min(lon)) + float(np.max(lon))), 6)
    lat0 = round(0.5 * (float(np.min(lat)) + float(np.max(lat))), 6)
    text = f"+proj=tmerc +lat_0={lat0} +lon_0={lon0} +k=1 +x_0=0 +y_0=0 +ellps=WGS84 +units=m"
    return CRS.from_proj4(text), text


def _crs_of(ds: netCDF4.Dataset, path: str, topo: Topology, crs: str | None) -> CRS | None:
    if crs is not None:
        return crs_from_user(crs, where="crs")
    for holder in (topo.node_x, topo.name):
        gm = _attr(ds.variables[holder], "grid_mapping").split(":")[0].strip()
        if gm:
            if gm not in ds.variables:
                raise InputError(
                    f"mesh file {path!r}: grid_mapping {gm!r} named by {holder!r} is not in the "
                    "file"
                )
            gvar = ds.variables[gm]
            attrs = {k: gvar.getncattr(k) for k in gvar.ncattrs()}
            return crs_from_cf(attrs, where=f"mesh file {path!r}: {gm}")
    return None


def project(
    ds: netCDF4.Dataset, path: str, topo: Topology, crs: str | None, names: tuple[str, str]
) -> tuple[np.ndarray, np.ndarray, str | None, str]:
    """Coordinates ``names`` (x, y) in metres: (x, y, CRS WKT, projection note)."""
    given = _crs_of(ds, path, topo, crs)
    if not topo.geographic and (given is None or not given.is_geographic):
        x, y = _length(ds, names[0], path), _length(ds, names[1], path)
        return x, y, None if given is None else given.to_wkt(), ""
    lon, lat = _values(ds, names[0], path), _values(ds, names[1], path)
    if np.any(np.abs(lat) > 90.0):
        raise InputError(f"mesh file {path!r}: latitude {names[1]!r} has values beyond ±90 degrees")
    node_lon = _values(ds, topo.node_x, path)
    node_lat = _values(ds, topo.node_y, path)
    local, text = local_projection(node_lon, node_lat)
    source = given if given is not None else CRS.from_epsg(4326)
    to_local = Transformer.from_crs(source, local, always_xy=True)
    x, y = to_local.transform(lon, lat)
    note = f"longitude/latitude projected onto {text}"
    return np.asarray(x, np.float64), np.asarray(y, np.float64), local.to_wkt(), note


def grid_north(
    ds: netCDF4.Dataset, path: str, topo: Topology, crs: str | None
) -> tuple[np.ndarray, np.ndarray]:
    """(sin a, cos a) at each node of a lon/lat mesh, a the angle from the local projection's
    y axis clockwise to true north (the meridian convergence, up to its sign convention), from
    the projected direction of a short step north (1e-5 degree)."""
    lon, lat = _values(ds, topo.node_x, path), _values(ds, topo.node_y, path)
    given = _crs_of(ds, path, topo, crs)
    local, _ = local_projection(lon, lat)
    to_local = Transformer.from_crs(
        given if given is not None else CRS.from_epsg(4326), local, always_xy=True
    )
    x0, y0 = to_local.transform(lon, lat)
    x1, y1 = to_local.transform(lon, lat + 1e-5)
    dx, dy = np.asarray(x1) - x0, np.asarray(y1) - y0
    length = np.hypot(dx, dy)
    return dx / length, dy / length


def _to_grid_axes(flow: MeshFlow, north: tuple[np.ndarray, np.ndarray]) -> None:
    """Eastward / northward velocities of a lon/lat mesh turned onto the projection's x / y axes:
    with true north N = (sin a, cos a) and east E = (cos a, -sin a) in grid axes,
    (u, v)_grid = u_east E + v_north N. Each component keeps its location; where the other one
    sits elsewhere it is moved there (corner mean, or area-weighted face mean) for the turn.
    Layered velocities (``flow.layers``) are turned alike."""
    _turn(flow.geometry, north, flow.u, flow.v)
    if flow.layers is not None:
        _turn(flow.geometry, north, flow.layers.u, flow.layers.v)


def _turn(g: MeshGeometry, north: tuple[np.ndarray, np.ndarray], u, v) -> None:
    """:func:`_to_grid_axes` of one pair of velocity components (data (..., n)), in place."""
    sin_n, cos_n = north
    old = {"u": u, "v": v}
    new = {}
    for role, var in old.items():
        other = old["v" if role == "u" else "u"]
        if other.location == var.location:
            across = other.data
        elif var.location == "face":
            across = g.face_mean_of_nodes(other.data)
        else:
            across = g.node_mean_of_faces(other.data)
        sin_a, cos_a = sin_n, cos_n
        if var.location == "face":
            sin_a, cos_a = g.face_mean_of_nodes(sin_n), g.face_mean_of_nodes(cos_n)
        if role == "u":
            new[role] = var.data * cos_a + across * sin_a
        else:
            new[role] = -across * sin_a + var.data * cos_a
    u.data, v.data = new["u"], new["v"]


def face_node_table(ds: netCDF4.Dataset, path: str, topo: Topology) -> np.ndarray:
    """The face-node table (nface, 3 or 4), 0-based, -1 for missing corners."""
    var = ds.variables[topo.face_nodes]
    where = f"mesh file {path!r}: variable {topo.face_nodes!r}"
    raw = np.ma.asarray(var[:])
    if var.dimensions[0] != topo.face_dim:
        raw = raw.T
    if raw.ndim != 2:
        raise InputError(f"{where} must have two dimensions (faces, corners)")
    if raw.shape[1] > 4:
        raise InputError(
            f"{where} allows {raw.shape[1]} corners a face; triangles and quadrilaterals (3 or 4 "
            "corners) are handled"
        )
    mask = np.ma.getmaskarray(raw)
    data = np.ma.getdata(raw).astype(np.float64)
    if not np.all(np.isfinite(data[~mask])) or np.any(data[~mask] != np.round(data[~mask])):
        raise InputError(f"{where} holds values that are not whole numbers")
    start = _attr(var, "start_index", "0")
    try:
        start_index = int(float(start))
    except ValueError:
        start_index = -1
    if start_index not in (0, 1):
        raise InputError(f"{where}: start_index {start!r} must be 0 or 1 (UGRID 1.0)")
    table = np.where(mask, -1, data.astype(np.int64) - start_index)
    below = ~mask & (table < 0)
    if np.any(below):
        f = int(np.nonzero(below)[0][0])
        raise InputError(
            f"{where}: face {f} has corner {int(data[below][0])} below start_index {start_index}; "
            "mark missing corners with the variable's _FillValue"
        )
    return table


def read_geometry(
    ds: netCDF4.Dataset, path: str, topo: Topology, crs: str | None
) -> tuple[MeshGeometry, dict[str, Any]]:
    """The checked geometry of a file's mesh, and attrs (face coordinates when given)."""
    x, y, wkt, note = project(ds, path, topo, crs, (topo.node_x, topo.node_y))
    table = face_node_table(ds, path, topo)
    geometry = build_geometry(
        x,
        y,
        table,
        where=f"mesh file {path!r}: variable {topo.face_nodes!r}",
        crs_wkt=wkt,
        projection=note,
    )
    attrs: dict[str, Any] = {}
    centres = _attr(ds.variables[topo.name], "face_coordinates").split()
    if centres:
        missing = [n for n in centres[:2] if n not in ds.variables]
        if len(centres) < 2 or missing:
            raise InputError(
                f"mesh file {path!r}: face_coordinates of {topo.name!r} must name two variables "
                f"in the file; {' '.join(centres)!r} given"
            )
        fx, fy, _, _ = project(ds, path, topo, crs, _order_xy(ds, centres[:2]))
        if fx.size != geometry.nface:
            raise InputError(
                f"mesh file {path!r}: face coordinates {centres[0]!r} hold {fx.size} values for "
                f"{geometry.nface} faces"
            )
        attrs["face_coordinates"] = (fx, fy)
    return geometry, attrs


def file_boundaries(
    ds: netCDF4.Dataset, path: str, topo: Topology, geometry: MeshGeometry
) -> OpenBoundaries:
    """Open boundaries the model wrote: boundary_node_connectivity with a flagged boundary-type
    variable on its dimension (see the module docstring); coast only without one."""
    bounds = coast_only(geometry)
    name = _attr(ds.variables[topo.name], "boundary_node_connectivity")
    if not name:
        return bounds
    where = f"mesh file {path!r}: variable {name!r}"
    if name not in ds.variables:
        raise InputError(f"{where} is named by boundary_node_connectivity but is not in the file")
    var = ds.variables[name]
    raw = np.ma.filled(np.ma.asarray(var[:]).astype(np.int64), -1)
    if raw.ndim != 2 or 2 not in raw.shape:
        raise InputError(f"{where} must be (boundary edges, 2) node pairs")
    pairs = raw if raw.shape[1] == 2 else raw.T
    pairs = pairs - int(float(_attr(var, "start_index", "0")))
    dim = var.dimensions[0] if raw.shape[1] == 2 else var.dimensions[1]
    types = [
        v
        for v in ds.variables.values()
        if v.dimensions == (dim,) and {"flag_meanings", "flag_values"} <= set(v.ncattrs())
    ]
    if not types:
        return bounds
    kind = types[0]
    codes = np.ma.filled(np.ma.asarray(kind[:]).astype(np.int64), -1)
    flags = np.atleast_1d(np.asarray(kind.getncattr("flag_values"), dtype=np.int64))
    meanings = str(kind.getncattr("flag_meanings")).split()
    for flag, meaning in zip(flags, meanings, strict=False):
        if any(w in meaning.lower() for w in COAST_WORDS):
            continue
        chosen = pairs[codes == flag]
        if chosen.size:
            bounds = mark_node_pairs(
                geometry, bounds, meaning, chosen, where=f"{where} (boundary type {kind.name!r})"
            )
    return bounds


def scenario_boundaries(
    geometry: MeshGeometry, bounds: OpenBoundaries, given: dict[str, Any], where: str
) -> OpenBoundaries:
    """Add open boundaries given by name: ``{"nodes": [...]}`` (0-based node numbers along the
    mesh boundary) or ``{"polyline": [[x, y], ...], "tolerance": metres}`` (mesh metres)."""
    for name, spec in given.items():
        here = f"{where} open boundary {name!r}"
        if "nodes" in spec:
            bounds = mark_nodes(geometry, bounds, name, np.asarray(spec["nodes"]), where=here)
        elif "polyline" in spec:
            tol = float(spec.get("tolerance", 1.0))
            bounds = mark_polyline(
                geometry, bounds, name, np.asarray(spec["polyline"], float), tol, where=here
            )
        else:
            raise InputError(f"{here}: give 'nodes' (a node list) or 'polyline' (points)")
    return bounds


def open_mesh_flow(
    path: str | os.PathLike,
    *,
    mesh: str | None = None,
    variables: dict[str, str] | None = None,
    units: dict[str, str] | None = None,
    crs: str | None = None,
    min_depth: float = 0.05,
    layers: LayerSelection | None = None,
    open_boundaries: dict[str, Any] | None = None,
    column: bool = False,
) -> MeshFlow:
    """Read a depth-averaged flow on a UGRID 1.0 2-D mesh into a :class:`MeshFlow`.

    Parameters as :func:`walkers.fields.netcdf.open.open_flow`; ``mesh`` names the topology
    variable when a file holds several; ``open_boundaries`` adds named open boundaries to those
    of the file (see :func:`scenario_boundaries`). Faces shallower than ``min_depth`` (m), or
    flagged dry by a wet/dry variable, are dry. ``column``: keep a layered file's velocity on its
    levels as well (``MeshFlow.layers``, for a three-dimensional run).
    """
    path = os.fspath(path)
    try:
        ds = netCDF4.Dataset(path)
    except OSError as exc:
        raise InputError(f"mesh file {path!r}: cannot be opened as NetCDF ({exc})") from exc
    with ds:
        topo = find_topology(ds, path, mesh)
        geometry, attrs = read_geometry(ds, path, topo, crs)
        bounds = file_boundaries(ds, path, topo, geometry)
        if open_boundaries:
            bounds = scenario_boundaries(geometry, bounds, open_boundaries, f"mesh {path!r}:")
        flow = read_mesh_fields(
            ds,
            path,
            topo,
            geometry,
            variables=dict(variables or {}),
            units=dict(units or {}),
            min_depth=min_depth,
            layers=layers or LayerSelection(),
            column=column,
        )
        if geometry.projection:
            _to_grid_axes(flow, grid_north(ds, path, topo, crs))
    flow.open_boundaries = bounds
    flow.attrs.update(attrs)
    flow.attrs["mesh"] = topo.name
    return flow
