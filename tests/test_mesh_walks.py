"""The mesh primitives together: the per-face drift (1/h)∇·(hK), piecewise constant, and the
reflecting trace keep a well-mixed tracer well mixed over a sloping bed (walkers.engine.meshwalk;
a test-local Euler–Maruyama loop stands for the engine's step until it steps on meshes)."""

from __future__ import annotations

import numpy as np
from mesh_files import jittered_mesh
from scipy import stats

from walkers.engine import meshwalk as mw
from walkers.fields.mesh import build_geometry
from walkers.fields.mesh_open import coast_only

WIDTH, HEIGHT = 1536.0, 1024.0
FIVE_SIGMA_P = 2.0 * stats.norm.sf(5.0)


def _depth(x):
    return 1.0 + 3.0 * x / WIDTH  # m: from 1 m at the west wall to 4 m at the east wall


def _walk(drift: bool, seed: int = 31):
    x, y, faces = jittered_mesh(24, 16, 64, jitter=12, seed=5)
    g = build_geometry(x, y, faces, where="test")
    k, dt, steps, n = 10.0, 100.0, 200, 40_000
    h = _depth(g.node_x)
    ones = np.ones(g.nnode)
    dx, dy = mw.face_drift(
        g.node_x, g.node_y, g.face_nodes, g.area, h, k * ones, 0 * ones, k * ones
    )
    if not drift:
        dx, dy = np.zeros_like(dx), np.zeros_like(dy)
    rng = np.random.default_rng(seed)
    # well mixed: particles ∝ h, so x has the density ∝ 1 + 3x/W (inverse CDF of a line)
    u = rng.uniform(size=n)
    px = WIDTH * (np.sqrt(1.0 + 15.0 * u) - 1.0) / 3.0
    py = rng.uniform(0.0, HEIGHT, n)
    f = mw.locate_points(
        g.node_x, g.node_y, g.face_nodes, g.neighbours, g.nearest_faces(px, py), px, py
    )
    wet = np.ones(g.nface, np.uint8)
    edge_open = coast_only(g).edge_open
    s = np.sqrt(2.0 * k * dt)
    for _ in range(steps):
        qx = px + dx[f] * dt + s * rng.standard_normal(n)
        qy = py + dy[f] * dt + s * rng.standard_normal(n)
        _, _, placed, ex, ey, face = mw.trace_points(
            g.node_x, g.node_y, g.face_nodes, g.neighbours, edge_open, wet, f, px, py, qx, qy, 20
        )
        px, py, f = ex, ey, face
    return px


def test_a_well_mixed_tracer_stays_mixed_over_a_sloping_bed():
    """Particles spread ∝ h stay ∝ h when the drift (1/h)∇·(hK) is added (Hunter, Craig &
    Phillips 1993, J. Comput. Phys. 106; Visser 1997, Mar. Ecol. Prog. Ser. 158, from memory):
    the positions across the slope pass a Kolmogorov–Smirnov test against the density
    ∝ 1 + 3x/W at the 5-sigma level after 200 steps of 100 s with K = 10 m2/s (steps of 45 m
    rms on faces of about 64 m; spread √(2Kt) = 632 m across the 1536 m basin, with reflections
    at every wall)."""

    def cdf(x):
        return (x + 1.5 * x * x / WIDTH) / (2.5 * WIDTH)

    assert stats.kstest(_walk(drift=True), cdf).pvalue > FIVE_SIGMA_P
    # the twin: without the drift particles gather in the shallows
    assert stats.kstest(_walk(drift=False), cdf).pvalue < FIVE_SIGMA_P


def _release(noise_factor: float, seed: int = 41):
    """A point release in a uniform current on the jittered mixed mesh: node velocity
    interpolated in each particle's face, steps traced (test-local Euler–Maruyama loop)."""
    x, y, faces = jittered_mesh(24, 16, 64, jitter=12, seed=6)
    g = build_geometry(x, y, faces, where="test")
    u0, v0, k, dt, steps, n = 0.05, 0.02, 2.0, 60.0, 100, 20_000
    un, vn = np.full(g.nnode, u0), np.full(g.nnode, v0)
    rng = np.random.default_rng(seed)
    px, py = np.full(n, 400.0), np.full(n, 400.0)
    f = mw.locate_points(
        g.node_x, g.node_y, g.face_nodes, g.neighbours, g.nearest_faces(px, py), px, py
    )
    wet = np.ones(g.nface, np.uint8)
    edge_open = coast_only(g).edge_open
    s = noise_factor * np.sqrt(2.0 * k * dt)
    for _ in range(steps):
        u = mw.interpolate_points(g.node_x, g.node_y, g.face_nodes, un, f, px, py)
        v = mw.interpolate_points(g.node_x, g.node_y, g.face_nodes, vn, f, px, py)
        qx = px + u * dt + s * rng.standard_normal(n)
        qy = py + v * dt + s * rng.standard_normal(n)
        _, _, _, px, py, f = mw.trace_points(
            g.node_x, g.node_y, g.face_nodes, g.neighbours, edge_open, wet, f, px, py, qx, qy, 20
        )
    t = steps * dt
    return px, py, 400.0 + u0 * t, 400.0 + v0 * t, 2.0 * k * t, n


def _moments_agree(px, py, mx, my, var, n):
    """Centroid and variance within 5 standard errors: sqrt(var / n) for the mean and
    var sqrt(2 / (n - 1)) for the sample variance of a normal sample (common practice)."""
    se_mean = np.sqrt(var / n)
    se_var = var * np.sqrt(2.0 / (n - 1))
    return (
        abs(px.mean() - mx) < 5 * se_mean
        and abs(py.mean() - my) < 5 * se_mean
        and abs(px.var(ddof=1) - var) < 5 * se_var
        and abs(py.var(ddof=1) - var) < 5 * se_var
    )


def test_point_release_in_uniform_flow_on_a_mesh():
    """Centroid x0 + u t and variance 2 K t in each direction (Fischer et al. 1979, Mixing in
    Inland and Coastal Waters, ch. 2): 20 000 particles, 100 steps of 60 s, K = 2 m2/s, far
    from the walls (final spread 155 m, centroid at least 3.3 spreads from every wall)."""
    assert _moments_agree(*_release(1.0))
    # the twin: steps of sqrt(K dt) instead of sqrt(2 K dt) give half the variance
    assert not _moments_agree(*_release(np.sqrt(0.5)))
