"""Verification cases for gridded coasts: land walls hold particles and keep a well-mixed tracer
well mixed, at steps comparable to the cells.

A step's straight path is traced cell by cell and reflected at the first land face it meets
(``walkers.engine.kernels.trace_path``). Reflection in a straight wall is exact for Brownian motion
at any step (method of images; Carslaw & Jaeger 1959), and because the reflected path is
reversible, a uniform tracer stays uniform beside any arrangement of land cells (the well-mixed
condition; Hunter, Craig & Phillips 1993, J. Comput. Phys. 106; Visser 1997, Mar. Ecol. Prog.
Ser. 158; from memory). The cases run at steps whose spread σ = √(2K dt) is 0.25 to 2 cells and
Courant numbers u dt / Δx up to 1.

The ``stepper`` override runs the numpy twin instead of the compiled kernel, so that the tests can
swap the twin's path tracer for a deliberately wrong wall rule and show every check can fail.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Literal

import numpy as np
from scipy import stats

from walkers.engine.state import EXITED, IN_WATER, ParticleState
from walkers.fields.analytic import grid_flow
from walkers.fields.base import FlowField
from walkers.scenario.config import Dispersion, Transport
from walkers.verify import analytic
from walkers.verify.checks import P_FIVE_SIGMA, CaseResult, Check, Z, evolve, ks_check

IMAGES = "Carslaw & Jaeger 1959, Conduction of Heat in Solids, §2.2, method of images (from memory)"
WELL_MIXED = (
    "Hunter, Craig & Phillips 1993, J. Comput. Phys. 106; Visser 1997, MEPS 158 (from memory); "
    "scipy.stats.chisquare"
)
HOLDS = "a reflecting wall lets nothing through (common practice)"
Stepper = Literal["fast", "reference"]
SIGMAS = (0.25, 0.5, 1.0, 2.0)  # spread of one step, in cells
GEOMETRIES = ("walls-x", "walls-y", "one-cell-channel", "staircase", "headland")
ALL_EDGES = ("west", "east", "south", "north")


def _walk(
    flow: FlowField,
    transport: Transport,
    x: np.ndarray,
    y: np.ndarray,
    nsteps: int,
    seed: int,
    stepper: Stepper,
) -> ParticleState:
    """Move unit-mass particles released at t = 0 over nsteps steps of a steady flow."""
    state = ParticleState.from_arrays(x, y, np.ones(x.size), np.zeros(x.size))
    return evolve(flow, transport, state, 0.0, nsteps * transport.dt, seed, stepper)


def _uniform_in_water(
    rng: np.random.Generator, n: int, xe: np.ndarray, ye: np.ndarray, wet: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """n positions uniform over the wet cells of a grid of unit-free cell edges xe, ye."""
    areas = np.outer(np.diff(ye), np.diff(xe)) * wet
    cells = rng.choice(areas.size, size=n, p=(areas / areas.sum()).ravel())
    j, i = np.unravel_index(cells, areas.shape)
    return (
        xe[i] + rng.uniform(size=n) * (xe[i + 1] - xe[i]),
        ye[j] + rng.uniform(size=n) * (ye[j + 1] - ye[j]),
    )


def _chi_square_check(name: str, counts: np.ndarray, expected: np.ndarray) -> Check:
    """χ² test of counts against expected counts (both summing to the same total)."""
    if counts.sum() == 0:
        return Check(f"{name}: chi-square p-value", 0.0, 1.0, P_FIVE_SIGMA, WELL_MIXED, kind="min")
    p = float(stats.chisquare(counts, expected).pvalue)
    return Check(f"{name}: chi-square p-value", p, 1.0, P_FIVE_SIGMA, WELL_MIXED, kind="min")


def _ratio_check(name: str, count: float, total: int, share: float) -> Check:
    """Density in a part of the water, relative to uniform, within 5 binomial standard errors."""
    se = math.sqrt(share * (1.0 - share) / total) / share
    return Check(name, count / total / share, 1.0, Z * se, WELL_MIXED)


def _basin(geometry: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cell edges (m, 1 m cells) and the wet mask of the closed basins of the well-mixed case."""
    n = 40
    xe = np.arange(n + 1, dtype=np.float64)
    ye = np.arange(n + 1, dtype=np.float64)
    i, j = np.meshgrid(np.arange(n), np.arange(n))
    if geometry == "staircase":
        wet = j >= (i // 2) + 5  # a coast of slope 1 in 2, built of single steps
    elif geometry == "headland":
        wet = ~((i >= 15) & (i < 25) & (j < 28)) & ~((i >= 19) & (i < 21) & (j < 34))
    else:
        raise ValueError(geometry)
    return xe, ye, wet


def _near_land(wet: np.ndarray) -> np.ndarray:
    """Water cells that share a face with land (the domain edge does not count)."""
    land = ~wet
    near = np.zeros_like(wet)
    near[1:, :] |= land[:-1, :]
    near[:-1, :] |= land[1:, :]
    near[:, 1:] |= land[:, :-1]
    near[:, :-1] |= land[:, 1:]
    return near & wet


def _basin_checks(
    result: CaseResult, geometry: str, sigma: float, particles: int, seed: int, stepper: Stepper
) -> None:
    """A closed basin with no flow: counts per wet cell against uniform after 100 steps."""
    xe, ye, wet = _basin(geometry)
    xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
    flow = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=5.0, wet=wet)
    k = 0.5 * sigma**2  # dt = 1 s, so √(2 K dt) = σ cells
    tr = Transport(
        dt=1.0, dispersion=Dispersion(k1=k, k2=k), edges=dict.fromkeys(ALL_EDGES, "reflecting")
    )
    rng = np.random.default_rng(seed)
    x0, y0 = _uniform_in_water(rng, particles, xe, ye, wet)
    st = _walk(flow, tr, x0, y0, 100, seed, stepper)
    label = f"{geometry}, σ = {sigma:g} cell"
    result.checks.append(
        Check(
            f"{label}: particles on land or lost",
            float(np.sum(st.status != IN_WATER)),
            0.0,
            0.0,
            HOLDS,
            kind="max",
        )
    )
    counts = np.histogram2d(st.y, st.x, bins=(ye, xe))[0]
    on_land = float(counts[~wet].sum())
    result.checks.append(
        Check(f"{label}: particles inside land cells", on_land, 0.0, 0.0, HOLDS, kind="max")
    )
    expected = np.full(int(wet.sum()), particles / wet.sum())
    result.checks.append(_chi_square_check(label, counts[wet], expected))
    near = _near_land(wet)
    result.checks.append(
        _ratio_check(
            f"{label}: density in cells beside land / uniform",
            float(counts[near].sum()),
            particles,
            float(near.sum() / wet.sum()),
        )
    )


def _channel_checks(
    result: CaseResult,
    axis: str,
    width: int,
    sigma: float,
    courant: float,
    particles: int,
    seed: int,
    stepper: Stepper,
) -> None:
    """A channel `width` cells wide between single rows of land cells, flow along it at the
    given Courant number, absorbing domain edges beyond the land. Particles start uniform over a
    reach long enough that a central window behaves as in an endless channel; the density across
    the channel in that window is tested against uniform, in bins of a quarter cell."""
    nsteps = 50
    k = 0.5 * sigma**2
    u = courant  # 1 m cells, dt = 1 s
    reach_sd = math.sqrt(nsteps) * sigma
    window = (0.0, 50.0)
    lo = window[0] - u * nsteps - 6.0 * reach_sd - 2.0
    hi = window[1] + 6.0 * reach_sd + 2.0
    along = np.arange(math.floor(lo) - 2, math.ceil(hi) + 3, dtype=np.float64)
    across = np.arange(-1.0, width + 2.0)  # land cell, `width` water cells, land cell
    along_c = 0.5 * (along[1:] + along[:-1])
    across_c = 0.5 * (across[1:] + across[:-1])
    wet_1d = (across_c > 0.0) & (across_c < width)
    rng = np.random.default_rng(seed)
    s_along = rng.uniform(lo, hi, particles)
    s_across = rng.uniform(0.0, float(width), particles)
    if axis == "x":
        wet = np.broadcast_to(wet_1d[:, None], (across_c.size, along_c.size))
        flow = grid_flow(along_c, across_c, [0.0], lambda X, Y, t: (u + 0 * X, 0 * X), wet=wet)
        x0, y0 = s_along, s_across
    else:
        wet = np.broadcast_to(wet_1d[None, :], (along_c.size, across_c.size))
        flow = grid_flow(across_c, along_c, [0.0], lambda X, Y, t: (0 * X, u + 0 * X), wet=wet)
        x0, y0 = s_across, s_along
    tr = Transport(
        dt=1.0, dispersion=Dispersion(k1=k, k2=k), edges=dict.fromkeys(ALL_EDGES, "absorbing")
    )
    st = _walk(flow, tr, x0, y0, nsteps, seed, stepper)
    pa, pc = (st.x, st.y) if axis == "x" else (st.y, st.x)
    label = f"walls along {axis}, {width} cell(s) wide, σ = {sigma:g}, Courant {courant:g}"
    side_edges = (EXITED + 2, EXITED + 3) if axis == "x" else (EXITED + 0, EXITED + 1)
    through_banks = float(np.isin(st.status, side_edges).sum())
    result.checks.append(
        Check(
            f"{label}: particles out through the edges behind the banks",
            through_banks,
            0.0,
            0.0,
            HOLDS,
            kind="max",
        )
    )
    inside = (st.status == IN_WATER) & (pa >= window[0]) & (pa < window[1])
    bins = np.linspace(0.0, float(width), 4 * width + 1)
    counts = np.histogram(pc[inside], bins=bins)[0]
    stray = float(np.sum(inside & ((pc < 0.0) | (pc > width))))
    result.checks.append(
        Check(f"{label}: particles inside the banks", stray, 0.0, 0.0, HOLDS, kind="max")
    )
    # Expected count in the window: the initial density times the window's area.
    total = int(inside.sum())
    result.checks.append(
        _chi_square_check(label, counts, np.full(counts.size, total / counts.size))
    )
    expected_total = particles * (window[1] - window[0]) / (hi - lo)
    result.checks.append(
        Check(
            f"{label}: particles in the window / expected",
            total / expected_total,
            1.0,
            Z / math.sqrt(expected_total),
            WELL_MIXED,
        )
    )
    if width >= 3:
        beside = float(np.r_[counts[:4], counts[-4:]].sum())  # within one cell of either bank
        result.checks.append(
            _ratio_check(
                f"{label}: density within one cell of the banks / uniform",
                beside,
                total,
                8.0 / counts.size,
            )
        )


def case_coast_well_mixed(
    particles: int,
    seed: int,
    stepper: Stepper = "fast",
    sigmas: tuple[float, ...] = SIGMAS,
    geometries: tuple[str, ...] = GEOMETRIES,
) -> CaseResult:
    """A uniform tracer stays uniform beside land walls along x and y, an oblique staircase coast,
    a headland and a channel one cell wide, at step spreads of 0.25 to 2 cells (``sigmas`` and
    ``geometries`` pick a subset, for the slow numpy twin)."""
    result = CaseResult(
        "coast-well-mixed", "Well-mixed condition beside land cells, steps up to 2 cells", particles
    )
    for n, sigma in enumerate(sigmas):
        s = seed + 10 * n
        if "walls-x" in geometries:
            _channel_checks(result, "x", 10, sigma, 1.0, particles, s, stepper)
        if "walls-y" in geometries:
            _channel_checks(result, "y", 10, sigma, 0.5, particles, s + 1, stepper)
        if "one-cell-channel" in geometries:
            _channel_checks(result, "x", 1, sigma, 1.0, particles // 4, s + 2, stepper)
        for k, basin in enumerate(("staircase", "headland")):
            if basin in geometries:
                _basin_checks(result, basin, sigma, particles, s + 3 + k, stepper)
    return result


def case_thin_barrier(particles: int, seed: int, stepper: Stepper = "fast") -> CaseResult:
    """A still basin split by a land wall one cell thick: nothing crosses at any step size."""
    result = CaseResult(
        "thin-barrier", "A land wall one cell thick holds, steps up to 2 cells", particles
    )
    xe = np.arange(0.0, 81.0, 2.0)  # 2 m cells
    ye = np.arange(0.0, 41.0, 2.0)
    xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
    wet = np.broadcast_to(~((xc > 40.0) & (xc < 42.0)), (yc.size, xc.size))
    flow = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=5.0, wet=wet)
    rng = np.random.default_rng(seed)
    for sigma_cells in (0.5, 1.0, 2.0):
        dt = (2.0 * sigma_cells) ** 2 / 2.0  # K = 1 m2/s: σ = √(2 dt) m
        tr = Transport(
            dt=dt,
            dispersion=Dispersion(k1=1.0, k2=1.0),
            edges=dict.fromkeys(ALL_EDGES, "reflecting"),
        )
        x0 = rng.uniform(0.0, 40.0, particles)
        y0 = rng.uniform(0.0, 40.0, particles)
        st = _walk(flow, tr, x0, y0, int(round(600.0 / dt)), seed, stepper)
        beyond = float(np.sum(st.x > 40.0))
        result.checks.append(
            Check(
                f"σ = {sigma_cells:g} cell: particles beyond the wall after 600 s",
                beyond,
                0.0,
                0.0,
                HOLDS,
                kind="max",
            )
        )
    return result


def case_land_wall_images(particles: int, seed: int, stepper: Stepper = "fast") -> CaseResult:
    """A point release 5 m from a land wall one cell thick (water behind it too): positions follow
    the method-of-images law at step spreads of 1 and 2 cells."""
    result = CaseResult(
        "land-wall-images", "Point release beside a thin land wall, images law", particles
    )
    k, x0, t_end = 1.0, 5.0, 600.0
    xe = np.arange(-40.0, 301.0, 2.0)
    ye = np.arange(-200.0, 201.0, 2.0)
    xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
    wet = np.broadcast_to(~((xc > -2.0) & (xc < 0.0)), (yc.size, xc.size))
    flow = grid_flow(xc, yc, [0.0], lambda X, Y, t: (0 * X, 0 * X), depth=5.0, wet=wet)
    sigma_t = math.sqrt(2.0 * k * t_end)
    law: Callable = lambda v: analytic.reflected_normal_cdf(v, x0=x0, sigma=sigma_t)  # noqa: E731
    for sigma_cells in (1.0, 2.0):
        dt = (2.0 * sigma_cells) ** 2 / (2.0 * k)
        tr = Transport(
            dt=dt, dispersion=Dispersion(k1=k, k2=k), edges=dict.fromkeys(ALL_EDGES, "reflecting")
        )
        st = _walk(
            flow,
            tr,
            np.full(particles, x0),
            np.zeros(particles),
            int(round(t_end / dt)),
            seed,
            stepper,
        )
        behind = float(np.sum(st.x < 0.0))
        result.checks.append(
            Check(
                f"σ = {sigma_cells:g} cell: particles behind the wall",
                behind,
                0.0,
                0.0,
                HOLDS,
                kind="max",
            )
        )
        result.checks.append(
            ks_check(
                f"σ = {sigma_cells:g} cell: KS distance to images law",
                st.x[st.x >= 0.0],
                law,
                IMAGES,
            )
        )
    return result


COAST_CASES: dict[str, tuple[Callable[..., CaseResult], int]] = {
    "thin-barrier": (case_thin_barrier, 20000),
    "land-wall-images": (case_land_wall_images, 20000),
    "coast-well-mixed": (case_coast_well_mixed, 200000),
}
