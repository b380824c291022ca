"""The UGRID 1.0 mesh reader: topology, mixed faces, indexing, locations, layers, wet/dry, open
boundaries, and every bad-input message (walkers.fields.netcdf.ugrid, walkers.fields.mesh,
walkers.fields.mesh_open)."""

from __future__ import annotations

import re

import numpy as np
import pytest
from mesh_files import jittered_mesh, write_ugrid
from pyproj import Geod, Proj

from walkers.errors import InputError
from walkers.fields.mesh import build_geometry
from walkers.fields.mesh_open import coast_only, mark_nodes, mark_polyline
from walkers.fields.netcdf.ugrid import is_ugrid, open_mesh_flow

NX, NY, SPACING = 12, 8, 64
TIMES = np.array([0.0, 1800.0, 3600.0])


@pytest.fixture(scope="module")
def mesh():
    return jittered_mesh(NX, NY, SPACING)


def _fields(x, faces, nt=3, depth=3.0):
    nface = faces.shape[0]
    return {
        "u": ("node", np.tile(0.25 + 1e-3 * x, (nt, 1))),
        "v": ("face", np.full((nt, nface), -0.1)),
        "depth": ("face", np.full((nt, nface), depth)),
    }


def _write(tmp_path, mesh, name="m.nc", **kw):
    x, y, faces = mesh
    kw.setdefault("fields", _fields(x, faces))
    kw.setdefault("times", TIMES)
    return write_ugrid(tmp_path / name, x, y, faces, **kw)


def test_mixed_mesh_read_the_same_with_0_and_1_based_connectivity(tmp_path, mesh):
    one = open_mesh_flow(_write(tmp_path, mesh, "one.nc", start_index=1))
    zero = open_mesh_flow(_write(tmp_path, mesh, "zero.nc", start_index=0, corners_first=True))
    x, y, faces = mesh
    for a, b in ((one.geometry, zero.geometry),):
        np.testing.assert_array_equal(a.face_nodes, b.face_nodes)
        np.testing.assert_array_equal(a.neighbours, b.neighbours)
        np.testing.assert_array_equal(a.area, b.area)
    g = one.geometry
    assert np.array_equal(g.face_nodes, faces)  # written counter-clockwise: kept as given
    assert {3, 4} == set(g.nvert.tolist())
    # Shoelace areas of a mesh whose outline is the unjittered rectangle sum to its area
    # (common practice); each face is positive.
    assert g.area.sum() == pytest.approx(NX * NY * SPACING**2, rel=1e-14)
    assert np.all(g.area > 0)
    # Every edge of the outline is a boundary edge, and only those (Euler: 2 (nx + ny)).
    assert g.boundary_edges.shape[0] == 2 * (NX + NY)


def test_clockwise_faces_are_turned_counter_clockwise(mesh):
    x, y, faces = mesh
    flipped = faces.copy()
    tri = faces[:, 3] < 0
    flipped[tri, :3] = faces[tri, 2::-1]
    flipped[~tri] = faces[~tri, ::-1]
    a = build_geometry(x, y, faces, where="test")
    b = build_geometry(x, y, flipped, where="test")
    np.testing.assert_array_equal(a.area, b.area)
    # the same faces, each starting from another corner: same neighbour sets
    assert sorted(map(tuple, np.sort(a.neighbours, axis=1))) == sorted(
        map(tuple, np.sort(b.neighbours, axis=1))
    )


def test_neighbours_are_mutual(mesh):
    g = build_geometry(*mesh, where="test")
    f, k = np.nonzero(g.neighbours >= 0)
    back = g.neighbours[g.neighbours[f, k]]
    assert np.all(np.any(back == f[:, None], axis=1))


def test_node_and_face_variables_keep_their_location_and_units(tmp_path, mesh):
    x, y, faces = mesh
    fields = _fields(x, faces)
    fields["u"] = ("node", fields["u"][1] * 100.0)
    path = _write(tmp_path, mesh, fields=fields, edit=lambda ds: setattr(ds["u"], "units", "cm/s"))
    flow = open_mesh_flow(path)
    assert flow.u.location == "node" and flow.v.location == "face"
    np.testing.assert_allclose(flow.u.data, np.tile(0.25 + 1e-3 * x, (3, 1)), rtol=1e-14)
    assert flow.times.tolist() == TIMES.tolist()
    assert flow.time_units.startswith("seconds since 2026-06-01")
    assert flow.attrs["face_coordinates"][0].size == faces.shape[0]


def test_lon_lat_mesh_is_projected_to_metres(tmp_path, mesh):
    x, y, faces = mesh
    lon = -4.5 + x * 1e-5
    lat = 52.0 + y * 1e-5
    flow = open_mesh_flow(
        write_ugrid(
            tmp_path / "geo.nc",
            lon,
            lat,
            faces,
            fields=_fields(x, faces),
            times=TIMES,
            geographic=True,
        )
    )
    g = flow.geometry
    assert "tmerc" in g.projection and g.crs_wkt
    # Edge lengths against geodesics on the WGS84 ellipsoid (Karney 2013, "Algorithms for
    # geodesics", J. Geod. 87, through pyproj.Geod). A transverse Mercator with scale 1 on its
    # central meridian stretches lengths by about x²/(2R²) (Snyder 1987, eq. 8-10, from memory):
    # under 1e-7 within 2 km of it, taken with margin as 1e-6.
    a, b = g.edge_nodes(g.boundary_edges[:, 0], g.boundary_edges[:, 1])
    _, _, geodesic = Geod(ellps="WGS84").inv(lon[a], lat[a], lon[b], lat[b])
    projected = np.hypot(g.node_x[b] - g.node_x[a], g.node_y[b] - g.node_y[a])
    np.testing.assert_allclose(projected, geodesic, rtol=1e-6)
    # the twin: degrees taken as metres are not metres
    assert not np.allclose(np.hypot(lon[b] - lon[a], lat[b] - lat[a]), geodesic, rtol=1e-6)


def test_layered_velocity_is_the_thickness_weighted_mean(tmp_path, mesh):
    x, y, faces = mesh
    nface = faces.shape[0]
    # Four sigma layers (CF-1.8 Appendix D, ocean_sigma_coordinate) at midpoints -0.05, -0.2,
    # -0.45, -0.8 without bounds: the reader puts their faces half-way between midpoints, the
    # surface and the bed closing the ends (0, -0.125, -0.325, -0.625, -1), so the thicknesses
    # are 0.125, 0.2, 0.3, 0.375 of the column. Layer velocities 1, 2, 3, 4 m/s give the column
    # mean 0.125·1 + 0.2·2 + 0.3·3 + 0.375·4 = 2.925 m/s.
    sigma = np.array([-0.05, -0.2, -0.45, -0.8])
    layered = np.broadcast_to(np.array([1.0, 2.0, 3.0, 4.0])[None, :, None], (3, 4, nface))
    fields = {
        "u": ("face", layered),
        "v": ("face", 0.5 * layered),
        "eta": ("face", np.full((3, nface), 0.4)),
        "bed": ("face", np.full((3, nface), 4.6)),
    }
    flow = open_mesh_flow(_write(tmp_path, mesh, fields=fields, sigma=sigma))
    np.testing.assert_allclose(flow.u.data, 2.925, rtol=1e-14)
    np.testing.assert_allclose(flow.v.data, 0.5 * 2.925, rtol=1e-14)
    np.testing.assert_allclose(flow.depth.data, 5.0, rtol=1e-14)
    assert "ocean_sigma_coordinate" in flow.attrs["vertical"]
    # the twin: the plain mean of the layers is not the thickness-weighted mean
    assert not np.allclose(flow.u.data, layered.mean(axis=1))


def test_wet_per_face_from_depth_and_from_a_flag(tmp_path, mesh):
    x, y, faces = mesh
    nface = faces.shape[0]
    fields = _fields(x, faces)
    depth = np.full((3, nface), 2.0)
    depth[1, :10] = 0.04  # below the 0.05 m minimum depth at the second frame
    fields["depth"] = ("face", depth)
    flag = np.ones((3, nface))
    flag[2, 20:25] = 0.0
    fields["wet"] = ("face", flag)
    flow = open_mesh_flow(_write(tmp_path, mesh, fields=fields))
    assert flow.wet.shape == (3, nface)
    assert flow.wet[0].all()
    assert np.flatnonzero(flow.wet[1] == 0).tolist() == list(range(10))
    assert np.flatnonzero(flow.wet[2] == 0).tolist() == list(range(20, 25))


def test_node_depth_makes_a_face_wet_by_its_corner_mean(tmp_path, mesh):
    x, y, faces = mesh
    fields = _fields(x, faces)
    node_depth = np.where(x < 200.0, 0.0, 1.0)
    fields["depth"] = ("node", np.tile(node_depth, (3, 1)))
    flow = open_mesh_flow(_write(tmp_path, mesh, fields=fields), min_depth=0.5)
    used = faces >= 0
    mean = np.where(used, node_depth[np.where(used, faces, 0)], 0).sum(1) / used.sum(1)
    np.testing.assert_array_equal(flow.wet[0], (mean >= 0.5).astype(np.uint8))


def test_open_boundary_from_the_files_boundary_variable(tmp_path, mesh):
    # The south edge of the rectangle: nodes 0..NX, as the model lists them.
    south = np.stack([np.arange(NX), np.arange(1, NX + 1)], axis=1)
    flow = open_mesh_flow(_write(tmp_path, mesh, boundary={"sea_mouth": south}))
    bounds = flow.open_boundaries
    assert bounds.names == ("sea_mouth",)
    assert bounds.edge_count("sea_mouth") == NX


def test_open_boundaries_from_nodes_and_from_a_polyline(mesh):
    x, y, faces = mesh
    g = build_geometry(x, y, faces, where="test")
    east = np.arange(NY + 1) * (NX + 1) + NX  # the east column of nodes, south to north
    b = mark_nodes(g, coast_only(g), "river", east, where="scenario")
    width = NX * SPACING
    b = mark_polyline(g, b, "sea", np.array([[0.0, 0.0], [width, 0.0]]), 0.5, where="scenario")
    assert b.names == ("river", "sea")
    assert b.edge_count("river") == NY and b.edge_count("sea") == NX
    assert int(np.sum(b.edge_open >= 0)) == NX + NY


@pytest.mark.parametrize(
    ("how", "message"),
    [
        ("nodes-inside", "does not lie on the mesh boundary: nodes"),
        ("polyline-off", "does not lie on the mesh boundary: its point"),
        ("twice", "is named twice"),
        ("overlap", "already belongs to open boundary 'first'"),
    ],
)
def test_open_boundaries_that_are_not_on_the_mesh_boundary(mesh, how, message):
    x, y, faces = mesh
    g = build_geometry(x, y, faces, where="test")
    b = coast_only(g)
    south = np.arange(NX + 1)
    with pytest.raises(InputError, match=message) as err:
        if how == "nodes-inside":
            mark_nodes(g, b, "bad", np.array([NX + 2, NX + 3]), where="scenario")
        elif how == "polyline-off":
            mark_polyline(g, b, "bad", np.array([[0, 0], [100.0, 300.0]]), 1.0, where="scenario")
        elif how == "twice":
            b = mark_nodes(g, b, "first", south[:3], where="scenario")
            mark_nodes(g, b, "first", south[5:7], where="scenario")
        else:
            b = mark_nodes(g, b, "first", south[:3], where="scenario")
            mark_nodes(g, b, "second", south[1:5], where="scenario")
    assert "scenario" in str(err.value)


def _set(var, key, value):
    def edit(ds):
        ds[var].setncattr(key, value)

    return edit


@pytest.mark.parametrize(
    ("case", "message"),
    [
        ("past", "face 0 names node 117 (0-based) but the mesh has 117 nodes"),
        ("repeated", "face 0 repeats node 0 among its corners"),
        ("flat", "face 1 (nodes [1, 2, 3], 0-based) has zero area"),
        ("edge", "variable 'u' (u) has location 'edge', which walkers does not read"),
        ("topology", "no mesh topology variable found"),
        ("start", "start_index '2' must be 0 or 1"),
        ("missing-u", "variable 'u' (u) is missing (fill value or NaN) at frame 0 for face"),
    ],
)
def test_bad_mesh_files_are_named(tmp_path, mesh, case, message):
    x, y, faces = mesh
    x, y, faces = x.copy(), y.copy(), faces.copy()
    fields = _fields(x, faces)
    edit = None
    if case == "past":
        faces[0, 0] = x.size
    elif case == "repeated":
        faces[0, 1] = faces[0, 0]
    elif case == "flat":
        # three nodes on one line: a face of zero area
        faces[1] = [1, 2, 3, -1]
    elif case == "edge":
        edit = _set("u", "location", "edge")
    elif case == "topology":
        edit = _set("Mesh2", "cf_role", "none")
    elif case == "start":
        edit = _set("Mesh2_face_nodes", "start_index", 2)
    elif case == "missing-u":
        u = fields["u"][1].copy()
        u[0, faces[3, 0]] = np.nan
        fields["u"] = ("node", u)
    path = write_ugrid(tmp_path / "bad.nc", x, y, faces, fields=fields, times=TIMES, edit=edit)
    with pytest.raises(InputError, match=re.escape(message)) as err:
        open_mesh_flow(path)
    assert str(path) in str(err.value)
    if case in ("past", "repeated", "flat", "start"):
        assert "'Mesh2_face_nodes'" in str(err.value)


def test_is_ugrid_tells_a_mesh_file(tmp_path, mesh):
    assert is_ugrid(_write(tmp_path, mesh))
    assert not is_ugrid(tmp_path / "absent.nc")


def _rename(old, new):
    def edit(ds):
        ds.renameVariable(old, new)

    return edit


@pytest.mark.parametrize(
    ("case", "message"),
    [
        ("nonconvex", "quadrilateral 0 (nodes [0, 1, 14, 13], 0-based) is not convex"),
        ("shared", "is shared by more than two faces"),
        ("node-var", "mesh topology 'Mesh2' names variable 'Mesh2_node_x', which is not in"),
        ("face-dim", "face_dimension 'nowhere' is not a dimension of 'Mesh2_face_nodes'"),
        ("no-depth", "no water depth found among the variables of mesh 'Mesh2'"),
        ("units", "variable 'v' (northward (y) velocity) has units 'furlongs'"),
        ("override", "variable 'speed_x' given for the eastward (x) velocity (u) is not in"),
        ("boundary-off", "does not lie on the mesh boundary: nodes 14 and 15"),
        ("coord-units", "coordinate 'Mesh2_node_x' has units 'feet'"),
    ],
)
def test_more_bad_mesh_files_are_named(tmp_path, mesh, case, message):
    x, y, faces = (a.copy() for a in mesh)
    fields = _fields(x, faces)
    edit, boundary, kw = None, None, {}
    if case == "nonconvex":
        # move the third corner of the first quadrilateral (a cell at the south-west corner)
        # inside it: the quadrilateral turns clockwise at one corner
        x[faces[0, 2]], y[faces[0, 2]] = x[faces[0, 0]] + 10.0, y[faces[0, 0]] + 10.0
    elif case == "shared":
        faces = np.vstack([faces, faces[:1]])  # a face given twice
        fields = _fields(x, faces)
    elif case == "node-var":
        edit = _rename("Mesh2_node_x", "other_x")
    elif case == "face-dim":
        edit = _set("Mesh2", "face_dimension", "nowhere")
    elif case == "no-depth":
        del fields["depth"]
    elif case == "units":
        edit = _set("v", "units", "furlongs")
    elif case == "override":
        kw["variables"] = {"u": "speed_x"}
    elif case == "boundary-off":
        boundary = {"sea": np.array([[14, 15]])}  # an interior edge
    elif case == "coord-units":
        edit = _set("Mesh2_node_x", "units", "feet")
    path = write_ugrid(
        tmp_path / "bad.nc", x, y, faces, fields=fields, times=TIMES, edit=edit, boundary=boundary
    )
    with pytest.raises(InputError, match=re.escape(message)) as err:
        open_mesh_flow(path, **kw)
    assert str(path) in str(err.value)


def test_a_folded_mesh_is_refused():
    # triangle B lies on top of A: both run from node 0 to node 1 along their shared edge
    x, y = np.array([0.0, 1.0, 0.0, 0.5]), np.array([0.0, 0.0, 1.0, 0.5])
    with pytest.raises(InputError, match="faces 0 and 1 run the same way along their shared edge"):
        build_geometry(x, y, np.array([[0, 1, 2], [0, 1, 3]]), where="mesh file 'f.nc'")


def test_lon_lat_velocities_are_turned_onto_the_projection_axes(tmp_path, mesh):
    """A northward current on a lon/lat mesh points along the meridian, which on the local
    transverse Mercator leans from the y axis by the meridian convergence (PROJ's factors,
    pyproj.Proj.get_factors; Snyder 1987, Map Projections, eq. 8-11, from memory)."""
    x, y, faces = mesh
    lon, lat = -4.5 + x * 1e-4, 52.0 + y * 1e-5
    nface = faces.shape[0]
    fields = {
        "u": ("node", np.zeros((3, x.size))),
        "v": ("node", np.full((3, x.size), 0.5)),
        "depth": ("face", np.full((3, nface), 3.0)),
    }
    path = write_ugrid(
        tmp_path / "geo.nc", lon, lat, faces, fields=fields, times=TIMES, geographic=True
    )
    flow = open_mesh_flow(path)
    speed = np.hypot(flow.u.data, flow.v.data)
    np.testing.assert_allclose(speed, 0.5, rtol=1e-12)
    lean = np.degrees(np.arctan2(flow.u.data[0], flow.v.data[0]))
    local = Proj(flow.geometry.projection.split("onto ")[1])
    convergence = local.get_factors(lon, lat).meridian_convergence
    np.testing.assert_allclose(np.abs(lean), np.abs(convergence), atol=1e-6)
    assert np.max(np.abs(convergence)) > 1e-3  # degrees: the mesh reaches off the meridian
    # the twin: the velocity left on the file's axes (no lean) is off by the convergence
    assert np.max(np.abs(lean)) > 1e-3


def test_open_boundaries_given_to_the_reader(tmp_path, mesh):
    path = _write(tmp_path, mesh)
    east = (np.arange(NY + 1) * (NX + 1) + NX).tolist()
    flow = open_mesh_flow(
        path,
        open_boundaries={
            "river": {"nodes": east},
            "sea": {"polyline": [[0.0, 0.0], [NX * SPACING, 0.0]], "tolerance": 0.5},
        },
    )
    assert flow.open_boundaries.names == ("river", "sea")
    assert flow.open_boundaries.edge_count("sea") == NX
    with pytest.raises(InputError, match="open boundary 'river': give 'nodes'") as err:
        open_mesh_flow(path, open_boundaries={"river": {"points": east}})
    assert str(path) in str(err.value)


def test_layered_node_velocity_with_surface_and_bed_on_faces(tmp_path, mesh):
    """Terms of the vertical coordinate on faces are moved to the nodes of a node velocity (the
    area-weighted mean of the faces around each node); uniform terms stay uniform, so the depth
    mean is the same 2.925 m/s as in the face test above (CF-1.8 Appendix D)."""
    x, y, faces = mesh
    nface = faces.shape[0]
    layered = np.broadcast_to(np.array([1.0, 2.0, 3.0, 4.0])[None, :, None], (3, 4, x.size))
    fields = {
        "u": ("node", layered),
        "v": ("node", layered),
        "eta": ("face", np.full((3, nface), 0.4)),
        "bed": ("face", np.full((3, nface), 4.6)),
    }
    flow = open_mesh_flow(
        _write(tmp_path, mesh, fields=fields, sigma=np.array([-0.05, -0.2, -0.45, -0.8]))
    )
    assert flow.u.location == "node"
    np.testing.assert_allclose(flow.u.data, 2.925, rtol=1e-13)


def test_depth_from_water_level_and_bed_depth(tmp_path, mesh):
    """No depth variable: depth = level + bed for a bed given as a depth below the datum
    (standard_name sea_floor_depth_below_geoid, CF standard name table)."""
    x, y, faces = mesh
    nface = faces.shape[0]
    fields = _fields(x, faces)
    del fields["depth"]
    eta = np.linspace(-0.5, 0.5, 3)[:, None] * np.ones((1, nface))
    fields["eta"] = ("face", eta)
    fields["bed"] = ("face", np.tile(np.linspace(0.2, 3.0, nface), (3, 1)))
    flow = open_mesh_flow(_write(tmp_path, mesh, fields=fields))
    np.testing.assert_allclose(flow.depth.data, eta + np.linspace(0.2, 3.0, nface), rtol=1e-14)
    assert flow.attrs["roles"]["bed_level"] == "bed"
    # faces with less than the minimum depth (0.05 m) are dry
    expected = (eta + np.linspace(0.2, 3.0, nface)) >= 0.05
    np.testing.assert_array_equal(flow.wet.astype(bool), expected)
