"""Reduce particles to what users read: concentration, receptor series, mass budget, moments.

Concentration by box counting (2-D): C = Σ m_p / (A_cell · h_p), with h_p the water depth of the
flow cell holding particle p; in 1-D, C = Σ m_p / (Δx · A_p) with A_p the cross-section area. The
sampling error of a cell holding n particles is about C/√n (common practice; a multinomial count),
so the particle count is reported beside C. A smoothed estimate convolves the box counts with a
Gaussian kernel of a stated bandwidth (Silverman 1986, Density Estimation, ch. 4, from memory).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from walkers.engine import kernels
from walkers.engine.state import (
    DECAYED,
    EXITED,
    HELD_DRY,
    IN_WATER,
    ON_BED,
    WAITING,
    ParticleState,
)
from walkers.fields.geo import metres_per_degree
from walkers.scenario.config import EDGE_NAMES, OutputGrid, Receptor


def cell_measure(grid: OutputGrid, geographic: bool, ndim: int) -> np.ndarray:
    """Plan area (m2) of each output cell in 2-D, (ny, nx); cell length (m) in 1-D, (1, nx)."""
    if ndim == 1:
        return np.full((1, grid.nx), grid.dx)
    if not geographic:
        return np.full((grid.ny, grid.nx), grid.dx * grid.dy)
    mx, my = metres_per_degree(grid.y)
    return np.repeat((mx * grid.dx * my * grid.dy)[:, None], grid.nx, axis=1)


def particle_depths(state: ParticleState, depth: np.ndarray, xe: np.ndarray, ye: np.ndarray):
    """Depth (m) or cross-section (m2) of the flow cell holding each particle."""
    out = np.empty(len(state))
    kernels.depth_at_particles(state.x, state.y, np.ascontiguousarray(depth), xe, ye, out)
    return out


def concentration(
    state: ParticleState, depths: np.ndarray, grid: OutputGrid, measure: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Box-counting concentration (kg m-3) and particle count per output cell, shape (ny, nx)."""
    weight = state.mass / np.maximum(depths, 1e-9)
    total = np.zeros((grid.ny, grid.nx))
    count = np.zeros((grid.ny, grid.nx), dtype=np.int64)
    kernels.grid_mass(
        state.x,
        state.y,
        weight,
        state.status,
        grid.x0,
        grid.dx,
        grid.nx,
        grid.y0,
        grid.dy,
        grid.ny,
        total,
        count,
    )
    return total / measure, count


def smoothed(conc: np.ndarray, grid: OutputGrid, metres_per_unit: tuple[float, float]):
    """Gaussian-kernel estimate: box counts convolved with a kernel of ``grid.bandwidth`` metres."""
    sx = grid.bandwidth / (grid.dx * metres_per_unit[0])
    sy = grid.bandwidth / (grid.dy * metres_per_unit[1]) if grid.ny > 1 else 0.0
    from scipy.ndimage import gaussian_filter  # imported only by runs that smooth

    return gaussian_filter(conc, sigma=(sy, sx), mode="constant", truncate=4.0)


def receptor_values(
    state: ParticleState,
    depths: np.ndarray,
    receptors: Sequence[Receptor],
    conc: np.ndarray,
    grid: OutputGrid,
    geographic: bool,
    ndim: int,
) -> np.ndarray:
    """Concentration (kg m-3) at each receptor: mean over its circle, or its output cell."""
    out = np.zeros(len(receptors))
    water = state.status == IN_WATER
    for k, r in enumerate(receptors):
        if r.radius > 0.0:
            mx, my = metres_per_degree(r.y) if geographic else (1.0, 1.0)
            dx = (state.x[water] - r.x) * mx
            dy = (state.y[water] - r.y) * my if ndim == 2 else 0.0
            inside = dx * dx + dy * dy <= r.radius**2
            w = state.mass[water][inside] / np.maximum(depths[water][inside], 1e-9)
            size = np.pi * r.radius**2 if ndim == 2 else 2.0 * r.radius
            out[k] = w.sum() / size
        else:
            i = int(np.floor((r.x - grid.x0) / grid.dx + 0.5))
            j = int(np.floor((r.y - grid.y0) / grid.dy + 0.5)) if ndim == 2 else 0
            inside = 0 <= i < grid.nx and 0 <= j < grid.ny
            out[k] = conc[j, i] if inside else np.nan
    return out


def mass_budget(
    state: ParticleState, edges: int = len(EDGE_NAMES)
) -> dict[str, np.ndarray | float]:
    """Mass (kg) released, in water, out through each of ``edges`` edges (or a mesh's open
    boundaries), decayed and held dry; in three dimensions (``state.sigma`` set) also on the bed.

    released = in water + Σ outflow + decayed + held dry (+ on the bed) holds to round-off:
    decayed is what each released particle lost since release, plus the remainder of particles
    retired as decayed.
    """
    st = state.status
    released = st != WAITING
    outflow = np.array([state.mass[st == EXITED + e].sum() for e in range(edges)])
    budget: dict[str, np.ndarray | float] = {
        "budget_released": float(state.initial_mass[released].sum()),
        "budget_in_water": float(state.mass[st == IN_WATER].sum()),
        "budget_held_dry": float(state.mass[st == HELD_DRY].sum()),
        "budget_decayed": float(
            (state.initial_mass[released] - state.mass[released]).sum()
            + state.mass[st == DECAYED].sum()
        ),
        "budget_outflow": outflow,
        "particles_in_water": int(np.count_nonzero(st == IN_WATER)),
    }
    if state.sigma is not None:
        budget["budget_on_bed"] = float(state.mass[st == ON_BED].sum())
    return budget


def cloud_moments(state: ParticleState, geographic: bool) -> dict[str, float]:
    """Mass-weighted centroid (grid units) and spatial variances (m2) of the particles in water.

    Two passes of ``kernels.water_moments``: the centroid, then the spread about it (no
    cancellation between large sums)."""
    args = (state.x, state.y, state.mass, state.status)
    total, sx, sy = kernels.water_moments(*args, 0.0, 0.0, 1.0, 1.0)[:3]
    if not total > 0:
        nan = float("nan")
        return dict.fromkeys(
            ("centroid_x", "centroid_y", "variance_x", "variance_y", "covariance_xy"), nan
        )
    cx = sx / total
    cy = sy / total
    mx, my = metres_per_degree(cy) if geographic else (1.0, 1.0)
    sxx, syy, sxy = kernels.water_moments(*args, cx, cy, float(mx), float(my))[3:]
    return {
        "centroid_x": cx,
        "centroid_y": cy,
        "variance_x": sxx / total,
        "variance_y": syy / total,
        "covariance_xy": sxy / total,
    }
