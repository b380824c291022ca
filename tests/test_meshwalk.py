"""The compiled mesh primitives (walkers.engine.meshwalk) against independent answers, and
against their numpy twin (walkers.engine.meshwalk_twin) to 1e-12."""

from __future__ import annotations

import numpy as np
import pytest
from mesh_files import jittered_mesh

from walkers.engine import meshwalk as mw
from walkers.engine import meshwalk_twin as twin
from walkers.fields.mesh import build_geometry
from walkers.fields.mesh_open import coast_only, mark_nodes

NX, NY, SPACING = 24, 16, 64
SCALE = 64  # test points have 6 binary digits after the point: edge tests are exact


@pytest.fixture(scope="module")
def geometry():
    return build_geometry(*jittered_mesh(NX, NY, SPACING, jitter=12, seed=3), where="test")


def _args(g):
    return g.node_x, g.node_y, g.face_nodes


def _points(g, rng, n_random, n_edge, n_node):
    """Random points on a 1/64 m lattice, points exactly on random edges, and nodes."""
    w, h = NX * SPACING, NY * SPACING
    rx = rng.integers(0, w * SCALE + 1, n_random) / SCALE
    ry = rng.integers(0, h * SCALE + 1, n_random) / SCALE
    f = rng.integers(0, g.nface, n_edge)
    k = rng.integers(0, 3, n_edge) % g.nvert[f]
    a, b = g.edge_nodes(f, k)
    t = rng.integers(1, SCALE, n_edge) / SCALE
    ex = g.node_x[a] + t * (g.node_x[b] - g.node_x[a])
    ey = g.node_y[a] + t * (g.node_y[b] - g.node_y[a])
    nodes = rng.integers(0, g.nnode, n_node)
    px = np.concatenate([rx, ex, g.node_x[nodes]])
    py = np.concatenate([ry, ey, g.node_y[nodes]])
    return px, py


def brute_force_containing(g, px, py):
    """For each point, the number of closed faces containing it and the lowest such face:
    point-in-convex-polygon by the sign of every edge's cross product, in exact integer
    arithmetic (coordinates times 64 are whole numbers)."""
    X = np.round(px * SCALE).astype(np.int64)
    Y = np.round(py * SCALE).astype(np.int64)
    nx_ = np.round(g.node_x * SCALE).astype(np.int64)
    ny_ = np.round(g.node_y * SCALE).astype(np.int64)
    count = np.zeros(px.size, dtype=np.int64)
    first = np.full(px.size, -1, dtype=np.int64)
    for f in range(g.nface):
        nv = g.nvert[f]
        inside = np.ones(px.size, dtype=bool)
        for k in range(nv):
            a, b = g.face_nodes[f, k], g.face_nodes[f, (k + 1) % nv]
            cross = (nx_[b] - nx_[a]) * (Y - ny_[a]) - (ny_[b] - ny_[a]) * (X - nx_[a])
            inside &= cross >= 0
        first[inside & (first < 0)] = f
        count += inside
    return count, first


def _contains(g, faces, px, py):
    return twin.inside_faces(*_args(g), faces, px, py)


def test_face_walk_agrees_with_brute_force_on_1e5_points(geometry):
    g = geometry
    rng = np.random.default_rng(20261202)
    px, py = _points(g, rng, 80_000, 15_000, 5_000)
    count, first = brute_force_containing(g, px, py)
    assert np.all(count >= 1)  # every point lies in the mesh (the outline is the rectangle)
    on_shared = count >= 2
    assert on_shared.sum() > 15_000  # edges and nodes inside the mesh: the tie rule is used
    # Half the walks start at face 0 (long walks), half at the nearest face centroid (k-d tree).
    start = np.where(np.arange(px.size) % 2 == 0, 0, g.nearest_faces(px, py))
    found = mw.locate_points(*_args(g), g.neighbours, start, px, py)
    single = count == 1
    np.testing.assert_array_equal(found[single], first[single])
    # Tie rule: a point on an edge or node is in every face touching it; the walk returns one
    # of them (the first it reaches).
    assert np.all(found >= 0)
    assert np.all(_contains(g, found, px, py))
    # the twin: the nearest face centroid alone is not the face containing the point
    guess = g.nearest_faces(px, py)
    assert np.mean(guess[single] != first[single]) > 0.01


def test_points_outside_the_mesh_are_not_located(geometry):
    g = geometry
    px = np.array([-1.0, NX * SPACING + 1.0, 10.0, np.nan])
    py = np.array([10.0, 10.0, -0.5, 10.0])
    found = mw.locate_points(*_args(g), g.neighbours, np.zeros(4, np.int64), px, py)
    assert found.tolist() == [-1, -1, -1, -1]


def test_interpolation_is_exact_for_linear_fields(geometry):
    """Barycentric weights on triangles and the isoparametric bilinear map on quadrilaterals
    reproduce every linear field exactly (Zienkiewicz & Taylor 2000, The Finite Element Method
    vol. 1, ch. 8, from memory); here to round-off of the values."""
    g = geometry
    rng = np.random.default_rng(5)
    px, py = _points(g, rng, 20_000, 2_000, 500)
    faces = mw.locate_points(*_args(g), g.neighbours, g.nearest_faces(px, py), px, py)
    field = 2.5 + 0.3 * g.node_x - 0.7 * g.node_y
    exact = 2.5 + 0.3 * px - 0.7 * py
    got = mw.interpolate_points(*_args(g), field, faces, px, py)
    bound = 64 * np.finfo(float).eps * np.max(np.abs(field))
    assert np.max(np.abs(got - exact)) < bound
    quads = g.nvert[faces] == 4
    assert quads.sum() > 1000 and (~quads).sum() > 1000
    # the twin: a wrong quadrilateral rule (the mean of the corners) is not exact
    corner_mean = g.face_mean_of_nodes(field)[faces]
    assert np.max(np.abs(corner_mean - exact)[quads]) > 1000 * bound


def test_weights_are_a_partition_of_unity_inside_the_face(geometry):
    g = geometry
    rng = np.random.default_rng(6)
    px, py = _points(g, rng, 5000, 0, 0)
    faces = mw.locate_points(*_args(g), g.neighbours, np.zeros(px.size, np.int64), px, py)
    w = twin.face_weights(*_args(g), faces, px, py)
    np.testing.assert_allclose(w.sum(axis=1), 1.0, atol=1e-13)
    assert np.all(w > -1e-12)


def _rotated(theta):
    x, y, faces = jittered_mesh(8, 6, 50, jitter=8, seed=11)
    c, s = np.cos(theta), np.sin(theta)
    return build_geometry(c * x - s * y, c * y + s * x, faces, where="test")


def test_reflection_at_an_oblique_wall_is_the_mirror_image():
    """The west wall of a mesh turned by 30 degrees: a step that crosses it ends at the mirror
    image of its candidate end in the wall's line (the method of images; Carslaw & Jaeger 1959,
    Conduction of Heat in Solids, §2.2, from memory)."""
    theta = np.pi / 6
    g = _rotated(theta)
    normal = np.array([np.cos(theta), np.sin(theta)])  # inward normal of the west wall
    along = np.array([-np.sin(theta), np.cos(theta)])
    rng = np.random.default_rng(8)
    n = 2000
    s = rng.uniform(60.0, 240.0, n)  # along the wall, away from its ends
    start_d = rng.uniform(0.5, 40.0, n)
    end_d = -rng.uniform(0.5, 60.0, n)
    shift = rng.uniform(-20.0, 20.0, n)
    p = s[:, None] * along + start_d[:, None] * normal
    q = (s + shift)[:, None] * along + end_d[:, None] * normal
    f0 = mw.locate_points(*_args(g), g.neighbours, g.nearest_faces(p[:, 0], p[:, 1]), *p.T)
    wet = np.ones(g.nface, np.uint8)
    bounds = coast_only(g)
    b, frac, placed, x, y, face = mw.trace_points(
        *_args(g), g.neighbours, bounds.edge_open, wet, f0, p[:, 0], p[:, 1], q[:, 0], q[:, 1], 10
    )
    mirror = q - 2.0 * ((q @ normal)[:, None]) * normal
    assert placed.all() and np.all(b == -1)
    np.testing.assert_allclose(np.column_stack([x, y]), mirror, atol=1e-9)
    assert np.all(_contains(g, face, x, y))
    # the twin: mirroring in the unturned wall (x = 0) is not the traced end
    wrong = q * np.array([-1.0, 1.0])
    assert np.min(np.hypot(*(wrong - mirror).T)) > 1e-3


def test_an_open_boundary_stops_the_path_at_the_crossing(geometry):
    g = geometry
    south = np.arange(NX + 1)  # nodes along y = 0
    bounds = mark_nodes(g, coast_only(g), "sea", south, where="test")
    rng = np.random.default_rng(9)
    n = 500
    px, py = rng.uniform(10, NX * SPACING - 10, n), rng.uniform(1, 60, n)
    qx, qy = px + rng.uniform(-5, 5, n), -rng.uniform(1, 50, n)
    f0 = mw.locate_points(*_args(g), g.neighbours, g.nearest_faces(px, py), px, py)
    wet = np.ones(g.nface, np.uint8)
    b, frac, placed, x, y, _ = mw.trace_points(
        *_args(g), g.neighbours, bounds.edge_open, wet, f0, px, py, qx, qy, 10
    )
    expected = py / (py - qy)  # where the straight path meets y = 0
    assert np.all(b == 0) and not placed.any()
    np.testing.assert_allclose(frac, expected, rtol=1e-12)
    np.testing.assert_allclose(y, 0.0, atol=1e-9)
    np.testing.assert_allclose(x, px + expected * (qx - px), rtol=1e-12)
    # the twin: the same edge as coast reflects instead
    b2, _, placed2, _, y2, _ = mw.trace_points(
        *_args(g), g.neighbours, coast_only(g).edge_open, wet, f0, px, py, qx, qy, 10
    )
    assert np.all(b2 == -1) and placed2.all()
    np.testing.assert_allclose(y2, -qy, atol=1e-9)


def test_a_dry_face_is_a_wall_and_a_bad_end_is_no_step(geometry):
    g = geometry
    wet = np.ones(g.nface, np.uint8)
    wet[g.centroid_x > 800.0] = 0
    rng = np.random.default_rng(10)
    n = 3000
    px, py = rng.uniform(5, 780, n), rng.uniform(5, NY * SPACING - 5, n)
    f0 = mw.locate_points(*_args(g), g.neighbours, g.nearest_faces(px, py), px, py)
    keep = wet[f0] == 1
    px, py, f0 = px[keep], py[keep], f0[keep]
    qx, qy = px + rng.normal(0, 300, px.size), py + rng.normal(0, 300, px.size)
    qx[:5] = np.nan
    edge_open = coast_only(g).edge_open
    b, frac, placed, x, y, face = mw.trace_points(
        *_args(g), g.neighbours, edge_open, wet, f0, px, py, qx, qy, 50
    )
    assert not placed[:5].any() and np.array_equal(x[:5], px[:5])
    ok = placed
    assert ok.mean() > 0.99
    assert np.all(wet[face[ok]] == 1) and np.all(_contains(g, face[ok], x[ok], y[ok]))
    # not placed: the particle keeps its position and face
    assert np.array_equal(x[~ok], px[~ok]) and np.array_equal(face[~ok], f0[~ok])


def test_compiled_primitives_equal_the_numpy_twin(geometry):
    g = geometry
    rng = np.random.default_rng(12)
    px, py = _points(g, rng, 30_000, 3_000, 1_000)
    px[::97] += 2000.0  # some outside the mesh
    start = rng.integers(0, g.nface, px.size)
    a = mw.locate_points(*_args(g), g.neighbours, start, px, py)
    b = twin.locate_points(*_args(g), g.neighbours, start, px, py)
    np.testing.assert_array_equal(a, b)
    inside = a >= 0
    field = np.sin(g.node_x / 300.0) * np.cos(g.node_y / 200.0)
    ia = mw.interpolate_points(*_args(g), field, a[inside], px[inside], py[inside])
    ib = twin.interpolate_points(*_args(g), field, a[inside], px[inside], py[inside])
    np.testing.assert_allclose(ia, ib, rtol=0, atol=1e-12)
    # paths with walls, dry faces, an open boundary and long steps
    wet = np.ones(g.nface, np.uint8)
    wet[rng.choice(g.nface, 60, replace=False)] = 0
    bounds = mark_nodes(g, coast_only(g), "sea", np.arange(NX + 1), where="test")
    f0, x0, y0 = a[inside], px[inside], py[inside]
    ok = wet[f0] == 1
    f0, x0, y0 = f0[ok], x0[ok], y0[ok]
    qx = x0 + rng.normal(0, 250, x0.size)
    qy = y0 + rng.normal(0, 250, x0.size)
    qx[::501] = np.inf
    args = (*_args(g), g.neighbours, bounds.edge_open, wet, f0, x0, y0, qx, qy, 6)
    ra = mw.trace_points(*args)
    rb = twin.trace_points(*args)
    for name, u, v in zip(
        ("boundary", "fraction", "placed", "x", "y", "face"), ra, rb, strict=True
    ):
        np.testing.assert_allclose(
            np.asarray(u, float), np.asarray(v, float), rtol=0, atol=1e-12, err_msg=name
        )
    assert ra[2].mean() > 0.5 and np.any(ra[0] == 0) and np.any(~ra[2] & (ra[0] < 0))
    h = 3.0 + 0.002 * g.node_x
    k = 1.0 + 0.5 * np.sin(g.node_y / 150.0)
    da = mw.face_drift(*_args(g), g.area, h, k, 0.3 * k, 2.0 * k)
    db = twin.face_drift(*_args(g), g.area, h, k, 0.3 * k, 2.0 * k)
    np.testing.assert_allclose(da, db, rtol=0, atol=1e-12)
