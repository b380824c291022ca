"""Small UGRID 1.0 mesh files for the tests, written the way hydrodynamic models write them.

netCDF4 with a dummy topology variable (cf_role mesh_topology), 1-based int32 connectivity with
a _FillValue for the missing corner of triangles, node and face coordinates, data variables with
``mesh`` and ``location`` attributes, an optional boundary-edge table with a flagged type
variable, and optional sigma layers.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import netCDF4
import numpy as np

from walkers.verify.mesh import jittered_mesh  # noqa: F401 (the tests' meshes come from here)

FILL = -999


def write_ugrid(
    path: Path,
    node_x: np.ndarray,
    node_y: np.ndarray,
    faces: np.ndarray,
    *,
    start_index: int = 1,
    fields: dict[str, tuple[str, np.ndarray]] | None = None,
    times: np.ndarray | None = None,
    geographic: bool = False,
    boundary: dict[str, np.ndarray] | None = None,
    sigma: np.ndarray | None = None,
    corners_first: bool = False,
    edit: Any = None,
) -> Path:
    """Write a mesh file.

    faces : (nface, 4) 0-based with -1 for a missing corner (written as _FillValue).
    fields : role -> (location, data (time, n) or, for layered velocities, (time, layer, n));
        roles u, v, depth, eta (sea surface height), bed (depth below the datum), wet (a 1 wet /
        0 dry flag on faces).
    boundary : open boundary name -> (n, 2) node pairs (0-based), written as
        boundary_node_connectivity with a flagged type variable (the rest of the mesh boundary is
        not listed; a listed pair with flag 0 is coast).
    sigma : sigma values at layer midpoints (ocean_sigma_coordinate with eta and bed as terms).
    corners_first : store the connectivity as (corners, faces) with face_dimension set.
    edit : called with the open dataset before closing (to break it on purpose).
    """
    fields = fields or {}
    times = np.array([0.0]) if times is None else times
    with netCDF4.Dataset(path, "w") as ds:
        ds.Conventions = "CF-1.8 UGRID-1.0"
        ds.createDimension("nMesh2_node", node_x.size)
        ds.createDimension("nMesh2_face", faces.shape[0])
        ds.createDimension("nMaxMesh2_face_nodes", 4)
        ds.createDimension("time", None)
        t = ds.createVariable("time", "f8", ("time",))
        t.units, t.standard_name = "seconds since 2026-06-01 00:00:00", "time"
        t[:] = times
        mesh = ds.createVariable("Mesh2", "i4", ())
        mesh.cf_role = "mesh_topology"
        mesh.topology_dimension = np.int32(2)
        mesh.node_coordinates = "Mesh2_node_x Mesh2_node_y"
        mesh.face_node_connectivity = "Mesh2_face_nodes"
        mesh.face_dimension = "nMesh2_face"
        mesh.face_coordinates = "Mesh2_face_x Mesh2_face_y"
        xs = "longitude" if geographic else "projection_x_coordinate"
        ys = "latitude" if geographic else "projection_y_coordinate"
        xu, yu = ("degrees_east", "degrees_north") if geographic else ("m", "m")
        for name, values, std, unit in (
            ("Mesh2_node_x", node_x, xs, xu),
            ("Mesh2_node_y", node_y, ys, yu),
        ):
            var = ds.createVariable(name, "f8", ("nMesh2_node",))
            var.standard_name, var.units = std, unit
            var[:] = values
        used = faces >= 0
        counts = used.sum(axis=1)
        # a broken table (a corner past the node count) still gets face coordinates
        safe = np.clip(faces, 0, node_x.size - 1)
        for name, values, std, unit in (
            ("Mesh2_face_x", np.where(used, node_x[safe], 0).sum(1) / counts, xs, xu),
            ("Mesh2_face_y", np.where(used, node_y[safe], 0).sum(1) / counts, ys, yu),
        ):
            var = ds.createVariable(name, "f8", ("nMesh2_face",))
            var.standard_name, var.units = std, unit
            var[:] = values
        table = np.where(used, faces + start_index, FILL).astype(np.int32)
        dims = ("nMesh2_face", "nMaxMesh2_face_nodes")
        if corners_first:
            dims, table = dims[::-1], table.T
        conn = ds.createVariable("Mesh2_face_nodes", "i4", dims, fill_value=np.int32(FILL))
        conn.cf_role = "face_node_connectivity"
        conn.start_index = np.int32(start_index)
        conn[:] = table
        if boundary:
            _boundary(ds, mesh, boundary, start_index)
        if sigma is not None:
            ds.createDimension("layer", sigma.size)
            lay = ds.createVariable("layer", "f8", ("layer",))
            lay.standard_name, lay.positive = "ocean_sigma_coordinate", "up"
            lay.formula_terms = "sigma: layer eta: eta depth: bed"
            lay[:] = sigma
        for role, (location, data) in fields.items():
            _field(ds, role, location, data)
        if edit is not None:
            edit(ds)
    return path


_ROLES = {
    "u": ("eastward_sea_water_velocity", "m s-1"),
    "v": ("northward_sea_water_velocity", "m s-1"),
    "depth": ("sea_floor_depth_below_sea_surface", "m"),
    "eta": ("sea_surface_height", "m"),
    "bed": ("sea_floor_depth_below_geoid", "m"),
}


def _field(ds: netCDF4.Dataset, role: str, location: str, data: np.ndarray) -> None:
    dim = "nMesh2_node" if location == "node" else "nMesh2_face"
    layered = data.ndim == 3
    dims = ("time", "layer", dim) if layered else ("time", dim)
    if role == "bed":
        dims, data = (dim,), data[0]
    var = ds.createVariable(role, "f8", dims, fill_value=-9999.0)
    var.mesh, var.location = "Mesh2", location
    if role == "wet":
        var.flag_values = np.array([0, 1], dtype=np.int8)
        var.flag_meanings = "dry wet"
    else:
        var.standard_name, var.units = _ROLES[role]
    var[:] = np.ma.masked_invalid(data)


def _boundary(ds, mesh, boundary: dict[str, np.ndarray], start_index: int) -> None:
    pairs = np.concatenate([np.asarray(p).reshape(-1, 2) for p in boundary.values()])
    codes = np.concatenate(
        [np.full(len(np.asarray(p).reshape(-1, 2)), k + 1) for k, p in enumerate(boundary.values())]
    )
    ds.createDimension("nMesh2_boundary", pairs.shape[0])
    ds.createDimension("Two", 2)
    mesh.boundary_node_connectivity = "Mesh2_boundary_nodes"
    var = ds.createVariable("Mesh2_boundary_nodes", "i4", ("nMesh2_boundary", "Two"))
    var.cf_role = "boundary_node_connectivity"
    var.start_index = np.int32(start_index)
    var[:] = pairs + start_index
    kind = ds.createVariable("Mesh2_boundary_type", "i1", ("nMesh2_boundary",))
    kind.flag_values = np.arange(len(boundary) + 1, dtype=np.int8)
    kind.flag_meanings = " ".join(["closed", *boundary.keys()])
    kind[:] = codes
