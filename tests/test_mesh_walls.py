"""Walls on a mesh: repeated reflections between oblique walls, a one-face dry barrier that holds,
and random walks beside an oblique wall against the image solution (walkers.engine.meshwalk)."""

from __future__ import annotations

import numpy as np
from mesh_files import jittered_mesh
from scipy import stats

from walkers.engine import meshwalk as mw
from walkers.fields.mesh import build_geometry
from walkers.fields.mesh_open import coast_only

THETA = np.pi / 6  # the mesh is turned by 30 degrees: its walls are oblique
NORMAL = np.array([np.cos(THETA), np.sin(THETA)])  # inward normal of the west wall
ALONG = np.array([-np.sin(THETA), np.cos(THETA)])
# 5-sigma critical level of a distribution test (two-sided normal tail beyond 5 sigma).
FIVE_SIGMA_P = 2.0 * stats.norm.sf(5.0)


def _turned(nx=8, ny=6, spacing=50, seed=11):
    x, y, faces = jittered_mesh(nx, ny, spacing, jitter=spacing // 6, seed=seed, quad_every=3)
    c, s = np.cos(THETA), np.sin(THETA)
    return build_geometry(c * x - s * y, c * y + s * x, faces, where="test")


def _trace(g, p, q, wet=None, max_refl=50):
    wet = np.ones(g.nface, np.uint8) if wet is None else wet
    f0 = mw.locate_points(
        g.node_x, g.node_y, g.face_nodes, g.neighbours, g.nearest_faces(*p.T), *p.T
    )
    return mw.trace_points(
        g.node_x,
        g.node_y,
        g.face_nodes,
        g.neighbours,
        coast_only(g).edge_open,
        wet,
        f0,
        p[:, 0],
        p[:, 1],
        q[:, 0],
        q[:, 1],
        max_refl,
    )


def test_repeated_reflections_between_two_oblique_walls_fold_the_path():
    """Between parallel walls at normal distance 0 and W, reflecting n times maps a normal
    coordinate d to the folded one: d mod 2W, then 2W − that beyond W (the method of images for
    a slab; Carslaw & Jaeger 1959, §3.3, from memory)."""
    g = _turned()
    width = 8 * 50.0
    rng = np.random.default_rng(21)
    n = 2000
    s = rng.uniform(100.0, 200.0, n)
    d0 = rng.uniform(10.0, width - 10.0, n)
    d1 = d0 + rng.uniform(-1500.0, 1500.0, n)
    p = s[:, None] * ALONG + d0[:, None] * NORMAL
    q = (s + rng.uniform(-30, 30, n))[:, None] * ALONG + d1[:, None] * NORMAL
    b, _, placed, x, y, _ = _trace(g, p, q)
    folded = np.mod(d1, 2 * width)
    folded = np.where(folded > width, 2 * width - folded, folded)
    assert placed.all() and np.all(b == -1)
    end = np.column_stack([x, y])
    np.testing.assert_allclose(end @ NORMAL, folded, atol=1e-8)
    np.testing.assert_allclose(end @ ALONG, q @ ALONG, atol=1e-8)
    assert np.mean(np.abs(d1 - d0) > width) > 0.5  # most paths reflect more than once


def test_a_barrier_one_face_thick_holds_long_steps():
    """Dry faces across the whole mesh (every face the line x = 740 m passes through): no path
    from the west side ends on the east side, however long the step (common practice: a dike one
    cell thick must hold)."""
    x, y, faces = jittered_mesh(24, 16, 64, jitter=12, seed=3)
    g = build_geometry(x, y, faces, where="test")
    used = g.face_nodes >= 0
    fx = np.where(used, g.node_x[np.where(used, g.face_nodes, 0)], np.nan)
    barrier = (np.nanmin(fx, axis=1) < 740.0) & (np.nanmax(fx, axis=1) > 740.0)
    wet = np.where(barrier, 0, 1).astype(np.uint8)
    rng = np.random.default_rng(22)
    n = 20_000
    p = np.column_stack([rng.uniform(1, 650, n), rng.uniform(1, 1023, n)])
    q = p + rng.normal(0, 400, (n, 2))
    b, _, placed, ex, ey, face = _trace(g, p, q, wet)
    ok = placed
    assert ok.mean() > 0.99
    assert np.all(ex[ok] < 740.0) and np.all(wet[face[ok]] == 1)
    # the twin: without the barrier many of the same paths end east of the line
    b, _, placed, ex, _, _ = _trace(g, p, q)
    assert np.mean(ex[placed] > 740.0) > 0.05


def _walk(g, start, steps, sigma, rng, rule):
    """Brownian steps from ``start`` (n, 2), each traced on the mesh; ``rule`` 'reflect' uses
    the trace, 'stay' keeps a particle whose step leaves the water where it was."""
    n = start.shape[0]
    p = start.copy()
    f = mw.locate_points(
        g.node_x, g.node_y, g.face_nodes, g.neighbours, g.nearest_faces(*p.T), *p.T
    )
    wet = np.ones(g.nface, np.uint8)
    edge_open = coast_only(g).edge_open
    for _ in range(steps):
        q = p + sigma * rng.standard_normal((n, 2))
        _, _, placed, x, y, face = mw.trace_points(
            g.node_x,
            g.node_y,
            g.face_nodes,
            g.neighbours,
            edge_open,
            wet,
            f,
            p[:, 0],
            p[:, 1],
            q[:, 0],
            q[:, 1],
            20,
        )
        if rule == "stay":
            inside = mw.locate_points(
                g.node_x, g.node_y, g.face_nodes, g.neighbours, f, q[:, 0], q[:, 1]
            )
            move = inside >= 0
            p[move], f[move] = q[move], inside[move]
        else:
            p = np.column_stack([x, y])
            f = face
    return p


def test_random_walk_beside_an_oblique_wall_follows_the_image_solution():
    """Particles released d0 = 10 m from the oblique west wall, K = 1 m2/s, 5 steps of 100 s
    (each 14 m rms, longer than d0): their distance from the wall has the density of the method
    of images, N(d0, 2Kt) + N(−d0, 2Kt) folded onto d ≥ 0 (Carslaw & Jaeger 1959, Conduction
    of Heat in Solids, §2.2, from memory); Kolmogorov–Smirnov test (scipy.stats.kstest) at the
    5-sigma level."""
    g = _turned(nx=12, ny=12, spacing=50, seed=12)
    k, dt, steps, d0 = 1.0, 100.0, 5, 10.0
    sigma = np.sqrt(2 * k * dt)
    spread = np.sqrt(2 * k * dt * steps)
    rng = np.random.default_rng(23)
    n = 50_000
    start = np.tile(300.0 * ALONG + d0 * NORMAL, (n, 1))

    def cdf(d):
        return stats.norm.cdf((d - d0) / spread) - stats.norm.cdf((-d - d0) / spread)

    end = _walk(g, start, steps, sigma, rng, "reflect")
    assert stats.kstest(end @ NORMAL, cdf).pvalue > FIVE_SIGMA_P
    # the twin: keeping a particle in place when its step leaves the water biases it away
    wrong = _walk(g, start, steps, sigma, np.random.default_rng(23), "stay")
    assert stats.kstest(wrong @ NORMAL, cdf).pvalue < FIVE_SIGMA_P
