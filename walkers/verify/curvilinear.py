"""Verification cases on curvilinear grids: the engine stepping in index space (see
:mod:`walkers.fields.grids`) against closed-form results.

- a free vortex on a polar grid, without dispersion: paths are circles, θ = θ₀ + Γt/r²;
- a point release in uniform flow along a rotated grid of oblong cells, with K different along
  east and north: the Gaussian plume, and the same statistics as on a rectilinear grid;
- a straight coast along a rotated grid: the method of images;
- a well-mixed tracer on a polar grid with the depth varying along the radius stays well mixed.

Keyword overrides make a run deliberately wrong (``speed_factor``, ``dispersion_factor``,
``wall``, ``drift``); the tests show each check catches them.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
from scipy import stats

from walkers.engine import mover
from walkers.engine.state import IN_WATER, ParticleState
from walkers.fields.analytic import analytic_flow, curvilinear_flow
from walkers.fields.base import centre_to_edges
from walkers.run import reduce
from walkers.scenario.config import INDEX_EDGE_NAMES, Dispersion, OutputGrid, Transport
from walkers.verify import analytic
from walkers.verify.checks import (
    FISCHER,
    CaseResult,
    Check,
    Z,
    box_error_check,
    evolve,
    ks_check,
    mean_check,
    variance_check,
)

VORTEX = "Batchelor 1967, An Introduction to Fluid Dynamics, the line vortex (from memory)"
IMAGES = "Carslaw & Jaeger 1959, Conduction of Heat in Solids, §2.2, method of images (from memory)"
MIXED = (
    "Hunter, Craig & Phillips 1993, J. Comput. Phys. 106; Dimou & Adams 1993, Estuar. Coast. "
    "Shelf Sci. 37 (from memory)"
)


def polar_corners(r_faces: np.ndarray, theta_faces: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Corners of a polar grid about the origin: i along the radius (m), j along the angle (rad)."""
    r, th = np.meshgrid(r_faces, theta_faces)
    return r * np.cos(th), r * np.sin(th)


def rotated_corners(nx: int, ny: int, dx: float, dy: float, angle: float, origin=(0.0, 0.0)):
    """Corners of nx by ny cells of dx by dy metres, the i axis turned ``angle`` rad from east."""
    a, b = np.meshgrid(np.arange(nx + 1) * dx, np.arange(ny + 1) * dy)
    c, s = math.cos(angle), math.sin(angle)
    return origin[0] + a * c - b * s, origin[1] + a * s + b * c


def _rest(X, Y, t):
    return 0.0 * X, 0.0 * X


def case_vortex(particles: int, seed: int, speed_factor: float = 1.0) -> CaseResult:
    """A free vortex u_θ = Γ/r on a polar grid, no dispersion: circles at angular speed Γ/r².

    Bounds (elementary geometry): the cells' sides are chords, so a point of a cell lies within
    r (1 − cos(Δθ/2)) of the circle through its corners' radius; the index-space speed uses the
    chord, Δθ/(2 sin(Δθ/2)) ≈ 1 + Δθ²/24 times the arc, and a radius off by that sag changes
    Γ/r² by at most 2 r (1 − cos(Δθ/2)) / r: the angle travelled is within
    Δθ²/24 + 3 (1 − cos(Δθ/2)) of Γt/r² (relative).
    """
    del seed
    gamma, t_end, dt = 500.0, 1800.0, 5.0
    r_faces = np.linspace(500.0, 1500.0, 41)
    d_theta = math.radians(1.0)
    theta_faces = np.arange(301) * d_theta
    cx, cy = polar_corners(r_faces, theta_faces)

    def vortex(X, Y, t):
        r2 = X * X + Y * Y
        return -speed_factor * gamma * Y / r2, speed_factor * gamma * X / r2

    flow = curvilinear_flow(cx, cy, [0.0], vortex)
    n = max(int(particles), 1)
    k = np.arange(n) % 40
    r0 = 0.5 * (r_faces[k] + r_faces[k + 1])
    th0 = math.radians(10.0) + 0.5 * d_theta
    a, b = flow.grid.to_engine(r0 * math.cos(th0), r0 * math.sin(th0))
    a, b = mover.advect_points(flow, a, b, 0.0, t_end, dt, "rk4")
    x, y = flow.grid.to_physical(a, b)
    r = np.hypot(x, y)
    travelled = np.mod(np.arctan2(y, x) - th0, 2.0 * math.pi)
    want = gamma * t_end / r0**2
    sag = 1.0 - math.cos(0.5 * d_theta)
    result = CaseResult("curvilinear-vortex", "Free vortex on a polar curvilinear grid", n)
    result.checks += [
        Check(
            "largest |r − r0| / r0",
            float(np.max(np.abs(r - r0) / r0)),
            0.0,
            sag,
            f"{VORTEX}; chord sag 1 − cos(Δθ/2)",
            kind="max",
        ),
        Check(
            "largest relative error of the angle travelled",
            float(np.max(np.abs(travelled - want) / want)),
            0.0,
            d_theta**2 / 24.0 + 3.0 * sag,
            f"{VORTEX}; chord/arc and sag bounds",
            kind="max",
        ),
    ]
    return result


def _plume(flow, tr, x0, y0, particles, seed, t_end):
    """Particles released at (x0, y0) (m) and moved to t_end; their world positions in water."""
    st = ParticleState.from_arrays(
        np.full(particles, x0), np.full(particles, y0), np.ones(particles), np.zeros(particles)
    )
    if flow.curvilinear:
        st.x[:], st.y[:] = flow.grid.to_engine(st.x, st.y)
    st = evolve(flow, tr, st, 0.0, t_end, seed)
    water = st.status == IN_WATER
    x, y = flow.kind().to_physical(st.x[water], st.y[water])
    return x, y


def case_channel(particles: int, seed: int, dispersion_factor: float = 1.0) -> CaseResult:
    """Uniform flow along a rotated grid of oblong cells, K different along east and north."""
    angle, speed, kx, ky, h, t_end = math.radians(30.0), 0.3, 2.0, 1.0, 8.0, 3600.0
    u, v = speed * math.cos(angle), speed * math.sin(angle)
    # 160 x 100 cells of 40 m along the flow by 25 m across, the middle corner at the origin
    cx, cy = rotated_corners(160, 100, 40.0, 25.0, angle)
    cx, cy = cx - cx[50, 80], cy - cy[50, 80]
    flow = curvilinear_flow(cx, cy, [0.0], lambda X, Y, t: (u + 0 * X, v + 0 * X), depth=h)
    rect = analytic_flow(
        "uniform", u=u, v=v, x_range=(-4000, 4000), y_range=(-4000, 4000), nx=201, ny=201, depth=h
    )
    disp = Dispersion(k1=kx * dispersion_factor, k2=ky)
    tr = Transport(dt=60.0, dispersion=disp, edges=dict.fromkeys(INDEX_EDGE_NAMES, "absorbing"))
    x, y = _plume(flow, tr, 0.0, 0.0, particles, seed, t_end)
    rect_tr = Transport(dt=60.0, dispersion=Dispersion(k1=kx, k2=ky))
    xr, yr = _plume(rect, rect_tr, 0.0, 0.0, particles, seed + 1, t_end)
    sx, sy = math.sqrt(2 * kx * t_end), math.sqrt(2 * ky * t_end)
    mx, my = u * t_end, v * t_end
    result = CaseResult(
        "curvilinear-channel", "Point release along a rotated curvilinear grid", particles
    )
    pair = "; the rectilinear run's value within 5·√2 standard errors"
    result.checks += [
        mean_check("centroid x (m)", x, mx, sx, FISCHER),
        mean_check("centroid y (m)", y, my, sy, FISCHER),
        variance_check("variance x (m2)", x, 2 * kx * t_end, FISCHER),
        variance_check("variance y (m2)", y, 2 * ky * t_end, FISCHER),
        Check(
            "covariance xy (m2)",
            float(np.cov(x, y)[0, 1]),
            0.0,
            Z * sx * sy / math.sqrt(len(x)),
            f"{FISCHER}; SE of a sample covariance σxσy/√n",
        ),
        ks_check("KS distance, x", x, stats.norm(mx, sx).cdf, FISCHER),
        ks_check("KS distance, y", y, stats.norm(my, sy).cdf, FISCHER),
        Check(
            "centroid x: curvilinear − rectilinear (m)",
            float(np.mean(x) - np.mean(xr)),
            0.0,
            Z * math.sqrt(2.0) * sx / math.sqrt(particles),
            FISCHER + pair,
        ),
        Check(
            "variance x: curvilinear / rectilinear",
            float(np.var(x, ddof=1) / np.var(xr, ddof=1)),
            1.0,
            Z * 2.0 / math.sqrt(particles),
            FISCHER + pair,
        ),
        Check(
            "variance y: curvilinear / rectilinear",
            float(np.var(y, ddof=1) / np.var(yr, ddof=1)),
            1.0,
            Z * 2.0 / math.sqrt(particles),
            FISCHER + pair,
        ),
    ]
    d = 25.0
    grid = OutputGrid(
        x0=mx - 4 * sx, dx=d, nx=int(8 * sx / d) + 1, y0=my - 4 * sy, dy=d, ny=int(8 * sy / d) + 1
    )
    seen = ParticleState.from_arrays(x, y, np.full(len(x), 1.0 / len(x)), np.zeros(len(x)))
    seen.status[:] = IN_WATER
    conc, _ = reduce.concentration(
        seen, np.full(len(x), h), grid, np.full((grid.ny, grid.nx), d * d)
    )
    ex = grid.x0 + d * (np.arange(grid.nx + 1) - 0.5)
    ey = grid.y0 + d * (np.arange(grid.ny + 1) - 0.5)
    p = np.outer(np.diff(stats.norm.cdf(ey, my, sy)), np.diff(stats.norm.cdf(ex, mx, sx)))
    unit = 1.0 / (h * d * d)
    result.checks.append(
        box_error_check("concentration rel. L2 error", conc, p * unit, unit, len(x), FISCHER)
    )
    return result


def case_wall(particles: int, seed: int, wall: str = "land") -> CaseResult:
    """A straight coast along a rotated curvilinear grid: the distance from the wall follows the
    law of a normal mirrored in the wall. Twice: land filling every row below the wall with
    steps of 0.56 cell (σ of a step against the 8 m cell side), and a coast one cell thick with
    steps of 1.5 cells, through which nothing may pass (``wall="absent"``: no land)."""
    angle, k, d0, t_end = math.radians(30.0), 1.0, 50.0, 1800.0
    sigma = math.sqrt(2 * k * t_end)
    ny, nx, dx, dy = 120, 120, 12.0, 8.0
    cx, cy = rotated_corners(nx, ny, dx, dy, angle)
    wall_row = 40
    # the wall is the line j = wall_row - 1/2: along the i axis, at dy * wall_row from its foot
    normal = np.array([-math.sin(angle), math.cos(angle)])
    along = np.array([math.cos(angle), math.sin(angle)])
    start = along * (dx * nx / 2) + normal * (dy * wall_row + d0)
    cdf = lambda v: analytic.reflected_normal_cdf(v, x0=d0, sigma=sigma)  # noqa: E731
    result = CaseResult("curvilinear-wall", "Coast along a rotated curvilinear grid", particles)
    for label, dt, rows in (
        ("0.56-cell steps", 10.0, slice(0, wall_row)),
        ("1.5-cell steps, coast one cell thick", 72.0, slice(wall_row - 1, wall_row)),
    ):
        wet = np.ones((ny, nx), dtype=bool)
        if wall == "land":
            wet[rows] = False
        flow = curvilinear_flow(cx, cy, [0.0], _rest, depth=10.0, wet=wet)
        tr = Transport(
            dt=dt,
            dispersion=Dispersion(k1=k, k2=k),
            edges=dict.fromkeys(INDEX_EDGE_NAMES, "reflecting"),
        )
        x, y = _plume(flow, tr, float(start[0]), float(start[1]), particles, seed, t_end)
        dist = x * normal[0] + y * normal[1] - dy * wall_row
        result.checks += [
            Check(f"{label}: particles kept (fraction)", len(x) / particles, 1.0, 0.0, IMAGES),
            Check(
                f"{label}: particles behind the wall",
                float(np.sum(dist < 0.0)),
                0.0,
                0.0,
                "a reflecting wall lets nothing through (common practice)",
            ),
            ks_check(f"{label}: KS distance to images law", dist, cdf, IMAGES),
        ]
    return result


def case_well_mixed(particles: int, seed: int, drift: bool = True) -> CaseResult:
    """Uniform concentration stays uniform on a polar grid (cells from 17 to 52 m wide) with the
    depth varying along the radius: the drift (1/H)∇·(H K̃), H = h|J|, holds it there."""
    r_faces = np.linspace(500.0, 1500.0, 41)
    theta_faces = np.radians(np.linspace(0.0, 90.0, 46))
    cx, cy = polar_corners(r_faces, theta_faces)
    rc = 0.5 * (r_faces[1:] + r_faces[:-1])
    depth = np.broadcast_to(5.0 + 3.0 * np.cos(2 * np.pi * (rc - 500.0) / 1000.0), (45, 40))
    flow = curvilinear_flow(cx, cy, [0.0], _rest, depth=depth)
    tr = Transport(
        dt=20.0,
        dispersion=Dispersion(k1=1.0, k2=1.0),
        edges=dict.fromkeys(INDEX_EDGE_NAMES, "reflecting"),
        drift_correction=drift,
    )
    rng = np.random.default_rng(seed)
    area = flow.grid.cell_area()
    cell = rng.choice(area.size, size=particles, p=(area / area.sum()).ravel())
    j, i = np.divmod(cell, area.shape[1])
    a = i - 0.5 + rng.uniform(size=particles)
    b = j - 0.5 + rng.uniform(size=particles)
    # uniform concentration C0 = 1: each particle carries the water volume it stands for
    mass = depth[j, i] * area.sum() / particles
    st = ParticleState.from_arrays(a, b, mass, np.zeros(particles))
    st = evolve(flow, tr, st, 0.0, 20000.0, seed)
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    w = st.mass / reduce.particle_depths(st, flow.depth.data[0], xe, ye)
    band = np.clip(np.floor((st.x + 0.5) / 4.0).astype(int), 0, 9)
    band_area = area.sum(axis=0).reshape(10, 4).sum(axis=1)
    sums = np.bincount(band, weights=w, minlength=10) / band_area
    se = np.sqrt(np.bincount(band, weights=w * w, minlength=10)) / band_area
    worst = float(np.max(np.abs(sums - 1.0) / se))
    result = CaseResult(
        "curvilinear-well-mixed", "Well-mixed condition on a polar curvilinear grid", particles
    )
    result.checks.append(
        Check("largest |C − 1| over 10 radial bands, in standard errors", worst, 0.0, Z, MIXED)
    )
    return result


CURVILINEAR_CASES: dict[str, tuple[Callable[..., CaseResult], int]] = {
    "curvilinear-vortex": (case_vortex, 400),
    "curvilinear-channel": (case_channel, 20000),
    "curvilinear-wall": (case_wall, 20000),
    "curvilinear-well-mixed": (case_well_mixed, 40000),
}
