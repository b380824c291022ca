"""Write the demo mesh flow: Curlew Basin, an invented harbour off the Saltmarsh Estuary.

Usage::

    python scenarios/make_demo_mesh.py [--outdir DIR]

(``make_demo_flows.py`` writes it too.) A dredged entrance channel, Curlew Cut (600 m long,
120 m wide, bed 6 m below mean sea level), leaves the Saltmarsh Estuary's east bank eastward and
opens into a basin 840 m long and 540 m wide whose bed rises from 5 m below mean sea level at its
west end to 0.8 m above it at its head, so the head dries around low water. Everything is
invented; the mesh sits in WGS 84 / UTM zone 30N (EPSG:32630) beside the estuary demo grid.

Mesh (UGRID 1.0, mixed): the channel is quadrilaterals of 60 m; the basin is triangles (each
60 m lattice cell split along alternating diagonals, interior nodes moved by a fixed smooth
displacement so that triangles are irregular), except a strip of quadrilaterals along the quay
on its north side. 1-based connectivity with a _FillValue for the triangles' fourth corner, as
models write it.

Tide: the estuary's water level, uniform (long-wave approximation): eta(t) = A cos(2 pi (t -
t_HW) / T), A = 1.0 m, T = 12.42 h, high water 03:00 UTC on 2026-05-04; frames every 30 min over
one day. Flow from continuity (Vreugdenhil 1994, Numerical Methods for Shallow-Water Flow, ch. 2,
from memory): the eastward discharge through the lattice column at x is d(eta)/dt times the wet
area east of it, and the velocity in each wet face of the column is that discharge over the
column's wet cross-section (so volume is conserved column by column, to the lattice's
resolution); v = 0. Faces with less than 0.10 m of water are dry (depth and velocity 0).

The mouth of the channel (its west end) is the open boundary ``saltmarsh_entrance``, written as
the model's boundary edges (``boundary_node_connectivity`` with a flagged boundary-type
variable); every other boundary edge is quay or shore (``closed``).
"""

from __future__ import annotations

import argparse
from collections import Counter
from pathlib import Path

import netCDF4
import numpy as np
from pyproj import CRS

EPSG = 32630
ORIGIN = (436000.0, 4934000.0)  # UTM 30N of the channel's west end, south bank (m)
CELL = 60.0  # m
CHANNEL = (10, 2)  # cells along, across
BASIN = (14, 9)  # cells east-west, north-south
BASIN_SOUTH = -3  # lattice row of the basin's south side (the channel spans rows 0..1)
QUAY_ROWS = 1  # rows of quadrilaterals along the basin's north (quay) side
TIDE_AMPLITUDE = 1.0  # m
TIDE_PERIOD = 12.42 * 3600.0  # s
TIDE_HIGH_WATER = 3.0 * 3600.0  # s
FRAME_INTERVAL = 1800.0  # s
FRAMES = 49  # one day
DRY_DEPTH = 0.10  # m
TIME_UNITS = "seconds since 2026-05-04T00:00:00Z"
FILL = -999


def lattice_cells() -> list[tuple[int, int, str]]:
    """(column, row, kind) of every water cell; kind 'quad' or 'tri'."""
    cells = []
    for i in range(CHANNEL[0]):
        for j in range(CHANNEL[1]):
            cells.append((i, j, "quad"))
    north = BASIN_SOUTH + BASIN[1]
    for i in range(CHANNEL[0], CHANNEL[0] + BASIN[0]):
        for j in range(BASIN_SOUTH, north):
            cells.append((i, j, "quad" if j >= north - QUAY_ROWS else "tri"))
    return cells


def bed_level(x: np.ndarray) -> np.ndarray:
    """Bed (m below mean sea level, positive down) at distance x (m) east of the channel mouth:
    6 m in the channel, 5 m at the basin's west end rising linearly to -0.8 m (above mean sea
    level) at its head."""
    start = CHANNEL[0] * CELL
    length = BASIN[0] * CELL
    s = np.clip((x - start) / length, 0.0, 1.0)
    return np.where(x < start, 6.0, 5.0 - 5.8 * s)


def build_mesh() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Nodes (local m), faces (nface, 4; -1 for triangles) and each face's lattice column."""
    cells = lattice_cells()
    corners = sorted({(i + di, j + dj) for i, j, _ in cells for di in (0, 1) for dj in (0, 1)})
    index = {c: n for n, c in enumerate(corners)}
    ii = np.array([c[0] for c in corners], dtype=np.float64)
    jj = np.array([c[1] for c in corners], dtype=np.float64)
    x, y = ii * CELL, jj * CELL
    # interior basin nodes moved by a smooth fixed displacement (at most 9 m), the outline kept
    inner = np.array(
        [
            all((i + di, j + dj) in index for di in (-1, 0, 1) for dj in (-1, 0, 1))
            and i > CHANNEL[0]
            for i, j in corners
        ]
    )
    x = x + np.where(inner, 9.0 * np.sin(1.7 * ii + 0.9 * jj), 0.0)
    y = y + np.where(inner, 9.0 * np.cos(1.3 * ii - 2.1 * jj), 0.0)
    faces, column = [], []
    for i, j, kind in cells:
        a, b = index[(i, j)], index[(i + 1, j)]
        c, d = index[(i + 1, j + 1)], index[(i, j + 1)]
        if kind == "quad":
            faces.append([a, b, c, d])
            column.append(i)
        elif (i + j) % 2:
            faces += [[a, b, c, -1], [a, c, d, -1]]
            column += [i, i]
        else:
            faces += [[a, b, d, -1], [b, c, d, -1]]
            column += [i, i]
    return x, y, np.array(faces, dtype=np.int64), np.array(column)


def _areas(x, y, faces):
    used = faces >= 0
    nv = used.sum(axis=1)
    k = np.arange(4)[None, :]
    a = np.where(used, faces, 0)
    b = np.take_along_axis(a, (k + 1) % nv[:, None], axis=1)
    cross = np.where(k < nv[:, None], x[a] * y[b] - x[b] * y[a], 0.0)
    area = 0.5 * cross.sum(axis=1)
    cx = np.where(used, x[a], 0).sum(1) / nv
    return area, cx


def tide(t: np.ndarray) -> np.ndarray:
    """Water level (m above mean sea level), rounded to 2**-10 m."""
    eta = TIDE_AMPLITUDE * np.cos(2.0 * np.pi * (t - TIDE_HIGH_WATER) / TIDE_PERIOD)
    return np.round(eta * 1024.0) / 1024.0


def build_flow(x, y, faces, column):
    """Times (s), face depth (m), face u (m s-1) per frame; see the module docstring."""
    area, cx = _areas(x, y, faces)
    bed = bed_level(cx)
    times = np.arange(FRAMES) * FRAME_INTERVAL
    eta = tide(times)
    rate = (tide(times + FRAME_INTERVAL) - tide(times - FRAME_INTERVAL)) / (2 * FRAME_INTERVAL)
    depth = eta[:, None] + bed[None, :]
    wet = depth >= DRY_DEPTH
    depth = np.where(wet, depth, 0.0)
    u = np.zeros_like(depth)
    columns = np.unique(column)
    for n in range(FRAMES):
        for i in columns:
            here = (column == i) & wet[n]
            if not here.any():
                continue
            east = (column > i) & wet[n]
            half = (column == i) & wet[n]
            inflow = rate[n] * (area[east].sum() + 0.5 * area[half].sum())
            section = np.sum(depth[n, here] * area[here]) / CELL  # wet cross-section (m2)
            u[n, here] = inflow / section
    u = np.round(u * 2.0**16) / 2.0**16
    return times, depth, u, bed


def write_mesh(path: Path) -> None:
    """Write Curlew Basin's mesh flow (UGRID 1.0, CF-1.8) via a temporary name."""
    x, y, faces, column = build_mesh()
    times, depth, u, _ = build_flow(x, y, faces, column)
    node_bed = bed_level(x)
    tmp = path.with_name(path.name + ".part")
    with netCDF4.Dataset(tmp, "w", format="NETCDF4") as ds:
        ds.setncatts(
            {
                "Conventions": "CF-1.8 UGRID-1.0",
                "title": "Curlew Basin (invented): tidal flow on a mixed mesh",
                "institution": "invented demonstration data for walkers",
                "source": "scenarios/make_demo_mesh.py; synthetic, not a model",
            }
        )
        ds.createDimension("node", x.size)
        ds.createDimension("face", faces.shape[0])
        ds.createDimension("max_face_nodes", 4)
        ds.createDimension("time", times.size)
        crs = ds.createVariable("crs", "i4", ())
        wkt = CRS.from_epsg(EPSG).to_wkt()
        crs.setncatts({**CRS.from_epsg(EPSG).to_cf(), "crs_wkt": wkt})
        mesh = ds.createVariable("mesh", "i4", ())
        mesh.setncatts(
            {
                "cf_role": "mesh_topology",
                "long_name": "Curlew Basin and Curlew Cut",
                "topology_dimension": np.int32(2),
                "node_coordinates": "node_x node_y",
                "face_node_connectivity": "face_nodes",
                "face_dimension": "face",
                "boundary_node_connectivity": "boundary_nodes",
            }
        )
        for name, values, std in (
            ("node_x", x + ORIGIN[0], "projection_x_coordinate"),
            ("node_y", y + ORIGIN[1], "projection_y_coordinate"),
        ):
            var = ds.createVariable(name, "f8", ("node",))
            var.setncatts({"standard_name": std, "units": "m", "grid_mapping": "crs"})
            var[:] = values
        conn = ds.createVariable(
            "face_nodes", "i4", ("face", "max_face_nodes"), fill_value=np.int32(FILL)
        )
        conn.setncatts({"cf_role": "face_node_connectivity", "start_index": np.int32(1)})
        conn[:] = np.where(faces >= 0, faces + 1, FILL)
        _boundary(ds, x, y, faces)
        t = ds.createVariable("time", "f8", ("time",))
        t.setncatts({"standard_name": "time", "units": TIME_UNITS, "calendar": "standard"})
        t[:] = times
        for name, data, dims, std, unit, loc in (
            ("u", u, ("time", "face"), "eastward_sea_water_velocity", "m s-1", "face"),
            (
                "v",
                np.zeros_like(u),
                ("time", "face"),
                "northward_sea_water_velocity",
                "m s-1",
                "face",
            ),
            ("depth", depth, ("time", "face"), "sea_floor_depth_below_sea_surface", "m", "face"),
            ("bed", node_bed, ("node",), "sea_floor_depth_below_mean_sea_level", "m", "node"),
        ):
            var = ds.createVariable(name, "f4", dims, zlib=True, complevel=6)
            var.setncatts(
                {
                    "standard_name": std,
                    "units": unit,
                    "mesh": "mesh",
                    "location": loc,
                    "grid_mapping": "crs",
                    "coordinates": "node_x node_y" if loc == "node" else "",
                }
            )
            if name == "bed":
                var.positive = "down"
            var[:] = data
    tmp.replace(path)


def _boundary(ds: netCDF4.Dataset, x, y, faces) -> None:
    """Every boundary edge (counter-clockwise), flagged 1 at the channel mouth (x = 0)."""
    used = faces >= 0
    nv = used.sum(axis=1)
    sides = [
        (int(faces[f, k]), int(faces[f, (k + 1) % nv[f]]))
        for f in range(faces.shape[0])
        for k in range(nv[f])
    ]
    count = Counter((min(a, b), max(a, b)) for a, b in sides)
    pairs = [(a, b) for a, b in sides if count[(min(a, b), max(a, b))] == 1]
    pairs_arr = np.array(pairs, dtype=np.int64)
    mouth = (x[pairs_arr[:, 0]] == 0.0) & (x[pairs_arr[:, 1]] == 0.0)
    ds.createDimension("boundary_edge", len(pairs))
    ds.createDimension("two", 2)
    var = ds.createVariable("boundary_nodes", "i4", ("boundary_edge", "two"))
    var.setncatts({"cf_role": "boundary_node_connectivity", "start_index": np.int32(1)})
    var[:] = pairs_arr + 1
    kind = ds.createVariable("boundary_type", "i1", ("boundary_edge",))
    kind.setncatts(
        {
            "long_name": "kind of boundary edge",
            "flag_values": np.array([0, 1], dtype=np.int8),
            "flag_meanings": "closed saltmarsh_entrance",
        }
    )
    kind[:] = mouth.astype(np.int8)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--outdir", type=Path, default=Path(__file__).resolve().parent)
    args = parser.parse_args(argv)
    path = args.outdir / "curlew_basin_mesh.nc"
    write_mesh(path)
    print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB)")


if __name__ == "__main__":
    main()
