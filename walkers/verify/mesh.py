"""Verification cases on unstructured meshes: the engine's step with its mesh option against
closed-form results.

- a point release in uniform flow on a jittered mesh of triangles and quadrilaterals: the
  Gaussian plume, centroid x0 + ut and variances 2Kt (Fischer et al. 1979);
- a well-mixed tracer over a sloping bed stays well mixed with the per-face drift (1/h)∇·(hK)
  (Hunter, Craig & Phillips 1993; Visser 1997).

Keyword overrides make a run deliberately wrong (``dispersion_factor``, ``drift``).
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import stats

from walkers.engine import mover
from walkers.engine.mesh_inputs import locate_particles, mesh_kernel_inputs
from walkers.engine.randomness import run_streams
from walkers.engine.state import IN_WATER, ParticleState
from walkers.fields.mesh import MeshFlow, MeshVariable, build_geometry
from walkers.fields.mesh_field import mesh_field
from walkers.fields.mesh_open import coast_only
from walkers.scenario.config import Dispersion, Transport
from walkers.verify.checks import (
    FISCHER,
    P_FIVE_SIGMA,
    CaseResult,
    Check,
    ks_check,
    mean_check,
    variance_check,
)

MIXED = "Hunter, Craig & Phillips 1993, J. Comput. Phys. 106; Visser 1997, MEPS 158 (from memory)"


def jittered_mesh(
    nx: int = 12,
    ny: int = 8,
    spacing: int = 64,
    jitter: int = 12,
    seed: int = 7,
    quad_every: int = 3,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A rectangle of nx × ny cells, nodes jittered by whole metres inside the rectangle (the
    outline stays straight), every ``quad_every``-th cell a quadrilateral and the others split
    into two triangles along alternating diagonals. Coordinates are whole metres, so every edge
    test on points with few binary digits is exact in floating point.

    Returns node_x, node_y (m) and faces (nface, 4), 0-based, -1 as a triangle's fourth corner.
    """
    rng = np.random.default_rng(seed)
    gx, gy = np.meshgrid(np.arange(nx + 1) * spacing, np.arange(ny + 1) * spacing)
    jx = rng.integers(-jitter, jitter + 1, gx.shape)
    jy = rng.integers(-jitter, jitter + 1, gy.shape)
    jx[:, [0, -1]] = 0
    jy[[0, -1], :] = 0
    x = (gx + jx).astype(np.float64).ravel()
    y = (gy + jy).astype(np.float64).ravel()
    nid = np.arange((nx + 1) * (ny + 1)).reshape(ny + 1, nx + 1)
    faces = []
    for j in range(ny):
        for i in range(nx):
            a, b, c, d = nid[j, i], nid[j, i + 1], nid[j + 1, i + 1], nid[j + 1, i]
            if quad_every and (i + j) % quad_every == 0:
                faces.append([a, b, c, d])
            elif (i + j) % 2:
                faces += [[a, b, c, -1], [a, c, d, -1]]
            else:
                faces += [[a, b, d, -1], [b, c, d, -1]]
    return x, y, np.array(faces, dtype=np.int64)


def _steady(g, u: float, depth: np.ndarray) -> MeshFlow:
    return MeshFlow(
        g,
        np.array([0.0]),
        "seconds since 2026-01-01T00:00:00Z",
        "standard",
        MeshVariable("node", np.full((1, g.nnode), u)),
        MeshVariable("node", np.zeros((1, g.nnode))),
        MeshVariable("node", np.broadcast_to(depth, (1, g.nnode)).astype(float)),
        np.ones((1, g.nface), np.uint8),
        coast_only(g),
        source="verification mesh",
    )


def _evolve(mesh: MeshFlow, transport: Transport, x, y, t_end: float, seed: int) -> ParticleState:
    flow = mesh_field(mesh)
    n = len(x)
    state = ParticleState.from_arrays(x, y, np.ones(n), np.zeros(n))
    locate_particles(flow, state)
    key, _ = run_streams(seed)
    inputs = mesh_kernel_inputs(flow, flow.window(0.0, t_end), transport)
    steps = int(round(t_end / transport.dt))
    mover.advance(state, inputs, 0.0, transport.dt, steps, 0, key)
    return state


def case_mesh_point(particles: int, seed: int, dispersion_factor: float = 1.0) -> CaseResult:
    """Point release in uniform flow on a jittered mesh of triangles and quadrilaterals."""
    x, y, faces = jittered_mesh(48, 32, 64, jitter=12, seed=5)
    g = build_geometry(x, y, faces, where="verification mesh")
    u, k, t_end = 0.2, 1.0, 3600.0
    tr = Transport(dt=30.0, dispersion=Dispersion(k1=k * dispersion_factor, k2=k))
    x0, y0 = 800.0, 1000.0
    st = _evolve(
        _steady(g, u, np.full(g.nnode, 5.0)),
        tr,
        np.full(particles, x0),
        np.full(particles, y0),
        t_end,
        seed,
    )
    water = st.status == IN_WATER
    px, py = st.x[water], st.y[water]
    sigma = math.sqrt(2 * k * t_end)
    result = CaseResult("mesh-point", "Point release, uniform flow, jittered mixed mesh", particles)
    result.checks += [
        Check("particles kept (fraction)", float(water.mean()), 1.0, 0.0, FISCHER),
        mean_check("centroid x (m)", px, x0 + u * t_end, sigma, FISCHER),
        mean_check("centroid y (m)", py, y0, sigma, FISCHER),
        variance_check("variance x (m2)", px, sigma**2, FISCHER),
        variance_check("variance y (m2)", py, sigma**2, FISCHER),
        ks_check("KS distance, x", px, stats.norm(x0 + u * t_end, sigma).cdf, FISCHER),
    ]
    return result


def case_mesh_well_mixed(particles: int, seed: int, drift: bool = True) -> CaseResult:
    """Particles spread ∝ h over a bed from 1 m to 4 m deep stay ∝ h on a mesh."""
    x, y, faces = jittered_mesh(24, 16, 64, jitter=12, seed=5)
    g = build_geometry(x, y, faces, where="verification mesh")
    width, height = 1536.0, 1024.0
    rng = np.random.default_rng(seed)
    px = width * (np.sqrt(1.0 + 15.0 * rng.uniform(size=particles)) - 1.0) / 3.0
    py = rng.uniform(0.0, height, particles)
    tr = Transport(dt=100.0, dispersion=Dispersion(k1=10.0, k2=10.0), drift_correction=drift)
    st = _evolve(_steady(g, 0.0, 1.0 + 3.0 * g.node_x / width), tr, px, py, 20000.0, seed)

    def cdf(v):
        return (v / width + 1.5 * (v / width) ** 2) / 2.5

    p = stats.kstest(st.x, cdf).pvalue
    result = CaseResult(
        "mesh-well-mixed", "Well-mixed condition over a sloping bed, mesh", particles
    )
    result.checks.append(
        Check(
            "KS p-value across the slope (>= 5-sigma level)",
            float(p),
            1.0,
            P_FIVE_SIGMA,
            f"{MIXED}; scipy.stats.kstest",
            kind="min",
        )
    )
    return result


MESH_CASES: dict[str, tuple[Callable[..., CaseResult], int]] = {
    "mesh-point": (case_mesh_point, 20000),
    "mesh-well-mixed": (case_mesh_well_mixed, 40000),
}
