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
