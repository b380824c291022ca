"""Reductions of a three-dimensional run over the water column: concentration in depth bands, the
deposit on the bed, vertical profiles at receptors and a vertical section along a line.

The particles come as plain arrays: positions ``x``, ``y`` (grid coordinates), ``sigma`` (height
above the bed as a fraction of the local depth, 0 bed .. 1 surface), ``depth`` (m, of the flow cell
holding each particle), ``mass`` (kg) and ``status`` (see :mod:`walkers.engine.state`).

Box counting in the vertical, as :func:`walkers.run.reduce.concentration` does over the whole
column: a particle of mass m in a band of thickness b (m) in its column adds m / (A b) to the
band's concentration in its output cell of plan area A, so C_band = Σ m_p / (A b_p) (kg m-3); a
band given as distances [s, e] from the surface or the bed has thickness b = min(e, h) - min(s, h)
in a column of depth h. For the whole column b = h, and the band equals the depth-averaged
concentration to the last bit (same weights, same order). The sampling error of a cell holding n
particles is about C/√n (common practice; a multinomial count). Profiles and sections split the
column into L equal layers of h/L each (heights as fractions of the depth). The deposit is the
mass on the bed over the cell's plan area (kg m-2).

The sums run in particle order, serially, so they are bitwise reproducible; each compiled
reduction has a numpy twin in :mod:`walkers.run.column_reduce_twin` that the tests hold equal.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numba as nb
import numpy as np

from walkers.engine.kernels import JIT, STATUS_ON_BED, STATUS_WATER
from walkers.errors import InputError
from walkers.fields.geo import metres_per_degree
from walkers.scenario.column_output import BAND_REFERENCES, DepthBand, SectionLine
from walkers.scenario.config import OutputGrid, Receptor

#: Depths below this (m) count as this in the weights m / b, as in the depth-averaged reduction.
SMALLEST_DEPTH = 1e-9
_SURFACE = BAND_REFERENCES.index("surface")
_COLUMN = BAND_REFERENCES.index("column")


# --------------------------------------------------------------------------------------------
# compiled reductions
# --------------------------------------------------------------------------------------------


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def _grid_inverse(grid):
    """(x0, 1/dx, nx, y0, 1/dy, ny) of the output grid given as (x0, dx, nx, y0, dy, ny)."""
    return grid[0], 1.0 / grid[1], grid[2], grid[3], 1.0 / grid[4], grid[5]


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def _output_cell(x, y, x0, inv_dx, nx, y0, inv_dy, ny):
    """(j, i) of the output cell holding (x, y), or (-1, -1) outside the grid; cell (j, i) spans
    x0 + (i ± ½) dx, as in ``kernels.grid_mass``."""
    fi = (x - x0) * inv_dx + 0.5
    fj = (y - y0) * inv_dy + 0.5
    if not (fi >= 0.0 and fj >= 0.0 and fi < nx and fj < ny):
        return -1, -1
    return int(fj), int(fi)


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def _band_thickness(reference, start, end, sigma, h):
    """Thickness (m) of a band in a column of depth h if a particle at height ``sigma`` lies in
    it, else 0."""
    if reference == _COLUMN:
        return max(h, SMALLEST_DEPTH)
    lo = min(start, h)
    hi = min(end, h)
    # distance from the band's reference: below the surface, or above the bed
    d = (1.0 - sigma) * h if reference == _SURFACE else sigma * h
    if hi > lo and lo <= d <= hi:
        return max(hi - lo, SMALLEST_DEPTH)
    return 0.0


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def band_mass(x, y, sigma, depth, mass, status, reference, start, end, grid, out, count):
    """Add m / b of each particle in water to every band (index b of ``reference``, ``start``,
    ``end``) that holds it, in its output cell: out[b, j, i] += m / b_p, count[b, j, i] += 1.

    grid : (x0, dx, nx, y0, dy, ny) of the output grid, as floats."""
    x0, inv_dx, nx, y0, inv_dy, ny = _grid_inverse(grid)
    nb_ = reference.shape[0]
    for p in range(x.shape[0]):
        if status[p] != STATUS_WATER:
            continue
        j, i = _output_cell(x[p], y[p], x0, inv_dx, nx, y0, inv_dy, ny)
        if j < 0:
            continue
        for b in range(nb_):
            thick = _band_thickness(reference[b], start[b], end[b], sigma[p], depth[p])
            if thick > 0.0:
                out[b, j, i] += mass[p] / thick
                count[b, j, i] += 1


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def bed_mass(x, y, mass, status, grid, out, count):
    """Add the mass (kg) of each particle on the bed to its output cell."""
    x0, inv_dx, nx, y0, inv_dy, ny = _grid_inverse(grid)
    for p in range(x.shape[0]):
        if status[p] != STATUS_ON_BED:
            continue
        j, i = _output_cell(x[p], y[p], x0, inv_dx, nx, y0, inv_dy, ny)
        if j >= 0:
            out[j, i] += mass[p]
            count[j, i] += 1


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def _layer(sigma, levels):
    """Index of the layer (of ``levels`` equal layers) holding height ``sigma``; the surface
    (sigma = 1) belongs to the top layer."""
    k = int(sigma * levels)
    return min(max(k, 0), levels - 1)


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def profile_mass(x, y, sigma, depth, mass, status, places, levels, out):
    """Add m / h of each particle in water to the layer holding it at every receptor that holds
    it: out[r, k] += m / h.

    places : (receptors, 6): (x, y, radius² (m²), metres per unit x, metres per unit y, kind):
    kind 0 a circle about (x, y); kind 1 the box [x - rx, x + rx) x [y - ry, y + ry) with rx, ry
    in columns 2 and 3 (grid units), for a receptor that reads its output cell; kind -1 none."""
    for p in range(x.shape[0]):
        if status[p] != STATUS_WATER:
            continue
        w = mass[p] / max(depth[p], SMALLEST_DEPTH)
        k = _layer(sigma[p], levels)
        for r in range(places.shape[0]):
            kind = places[r, 5]
            if kind == 0.0:
                dx = (x[p] - places[r, 0]) * places[r, 3]
                dy = (y[p] - places[r, 1]) * places[r, 4]
                inside = dx * dx + dy * dy <= places[r, 2]
            elif kind == 1.0:
                ex = x[p] - places[r, 0]
                ey = y[p] - places[r, 1]
                inside = -places[r, 2] <= ex < places[r, 2] and -places[r, 3] <= ey < places[r, 3]
            else:
                inside = False
            if inside:
                out[r, k] += w


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def _along_line(px, py, cum, x, y, sx, sy):
    """(distance along the polyline (m), distance from it (m)) of the point (x, y): the nearest
    point on the line, or (-1, inf) when the nearest point lies beyond either end. Vertices
    ``px``, ``py`` in grid units, ``sx``, ``sy`` metres per grid unit, ``cum`` the distance (m)
    of each vertex along the line."""
    best = math.inf
    along = -1.0
    last = px.shape[0] - 2
    for s in range(last + 1):
        ax = (px[s + 1] - px[s]) * sx
        ay = (py[s + 1] - py[s]) * sy
        bx = (x - px[s]) * sx
        by = (y - py[s]) * sy
        length2 = ax * ax + ay * ay
        t = (ax * bx + ay * by) / length2
        if (s == 0 and t < 0.0) or (s == last and t > 1.0):
            continue
        t = min(max(t, 0.0), 1.0)
        ex = bx - t * ax
        ey = by - t * ay
        d2 = ex * ex + ey * ey
        if d2 < best:
            best = d2
            along = cum[s] + t * (cum[s + 1] - cum[s])
    return along, math.sqrt(best)


@nb.njit(**JIT)  # type: ignore[call-overload]  # JIT is a plain dict of options
def section_mass(x, y, sigma, depth, mass, status, line, half_width, spacing, levels, out, hsum, n):
    """Add m / h of each particle in water within ``half_width`` (m) of the polyline to its
    (distance bin, layer): out[d, k] += m / h; hsum[d] += h and n[d] += 1 (for the mean depth).

    line : (vertices, 5): x, y (grid units), distance along the line (m), and metres per grid
    unit x and y (the same in every row), see :func:`section_geometry`."""
    nd = out.shape[0]
    px, py, cum = line[:, 0], line[:, 1], line[:, 2]
    sx, sy = line[0, 3], line[0, 4]
    for p in range(x.shape[0]):
        if status[p] != STATUS_WATER:
            continue
        along, off = _along_line(px, py, cum, x[p], y[p], sx, sy)
        if along < 0.0 or off > half_width:
            continue
        d = min(int(along / spacing), nd - 1)
        out[d, _layer(sigma[p], levels)] += mass[p] / max(depth[p], SMALLEST_DEPTH)
        hsum[d] += depth[p]
        n[d] += 1


# --------------------------------------------------------------------------------------------
# the reductions as the accumulator calls them
# --------------------------------------------------------------------------------------------


def _grid_tuple(grid: OutputGrid) -> np.ndarray:
    return np.array([grid.x0, grid.dx, grid.nx, grid.y0, grid.dy, grid.ny], dtype=np.float64)


def band_table(bands: Sequence[DepthBand]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(reference index, start (m), end (m)) of each band, as the compiled reduction takes them."""
    reference = np.array([BAND_REFERENCES.index(b.reference) for b in bands], dtype=np.int64)
    start = np.array([b.limits[0] for b in bands], dtype=np.float64)
    end = np.array([b.limits[1] for b in bands], dtype=np.float64)
    return reference, start, end


def band_concentration(x, y, sigma, depth, mass, status, bands, grid, measure):
    """Concentration (kg m-3) and particle count in each depth band, (bands, ny, nx).

    measure : plan area of each output cell (m2), (ny, nx), see ``reduce.cell_measure``."""
    total = np.zeros((len(bands), grid.ny, grid.nx))
    count = np.zeros((len(bands), grid.ny, grid.nx), dtype=np.int64)
    band_mass(x, y, sigma, depth, mass, status, *band_table(bands), _grid_tuple(grid), total, count)
    return total / measure, count


def deposit(x, y, mass, status, grid, measure):
    """Mass on the bed per bed area (kg m-2) and the number of particles on the bed, (ny, nx)."""
    total = np.zeros((grid.ny, grid.nx))
    count = np.zeros((grid.ny, grid.nx), dtype=np.int64)
    bed_mass(x, y, mass, status, _grid_tuple(grid), total, count)
    return total / measure, count


def receptor_places(
    receptors: Sequence[Receptor], grid: OutputGrid, measure: np.ndarray, geographic: bool
) -> tuple[np.ndarray, np.ndarray]:
    """The receptors as the compiled profile reduction takes them (see :func:`profile_mass`),
    and each one's plan area (m2): a circle of its radius, or the output cell holding it (NaN
    outside the grid)."""
    places = np.zeros((len(receptors), 6))
    area = np.full(len(receptors), np.nan)
    for r, rec in enumerate(receptors):
        if rec.radius > 0.0:
            mx, my = metres_per_degree(rec.y) if geographic else (1.0, 1.0)
            places[r] = (rec.x, rec.y, rec.radius**2, float(mx), float(my), 0.0)
            area[r] = math.pi * rec.radius**2
            continue
        i = int(np.floor((rec.x - grid.x0) / grid.dx + 0.5))
        j = int(np.floor((rec.y - grid.y0) / grid.dy + 0.5))
        if 0 <= i < grid.nx and 0 <= j < grid.ny:
            cx, cy = grid.x0 + i * grid.dx, grid.y0 + j * grid.dy
            places[r] = (cx, cy, grid.dx / 2, grid.dy / 2, 0.0, 1.0)
            area[r] = measure[j, i]
        else:
            places[r, 5] = -1.0
    return places, area


def receptor_profiles(x, y, sigma, depth, mass, status, places, area, levels):
    """Concentration (kg m-3) in each of ``levels`` equal layers at each receptor, (receptors,
    levels): Σ m_p / (A h_p / L) over the particles in the receptor's circle (or cell) and layer.
    Its mean over the layers is the receptor's depth-averaged concentration."""
    total = np.zeros((places.shape[0], levels))
    profile_mass(x, y, sigma, depth, mass, status, places, levels, total)
    return total * levels / area[:, None]


def section_geometry(section: SectionLine, geographic: bool) -> dict[str, np.ndarray]:
    """The section's line as the compiled reduction takes it and its bins along the line.

    Returns ``line`` (vertices, 5), ``distance`` (m, bin centres), ``length`` (m, each bin's
    length along the line: the last may be shorter), ``x``, ``y`` (grid units, bin centres).
    On geographic grids, metres per degree are taken at the line's mean latitude."""
    pts = section.points
    mx, my = metres_per_degree(float(pts[:, 1].mean())) if geographic else (1.0, 1.0)
    seg = np.hypot(np.diff(pts[:, 0]) * mx, np.diff(pts[:, 1]) * my)
    if not np.all(seg > 0):
        raise InputError(
            f"output.section {section.name!r}: two consecutive points are the same; remove one"
        )
    cum = np.concatenate([[0.0], np.cumsum(seg)])
    nd = max(1, math.ceil(cum[-1] / section.spacing - 1e-9))
    edges = np.minimum(np.arange(nd + 1) * section.spacing, cum[-1])
    centre = 0.5 * (edges[:-1] + edges[1:])
    line = np.column_stack([pts, cum, np.full(len(pts), float(mx)), np.full(len(pts), float(my))])
    return {
        "line": line,
        "distance": centre,
        "length": np.diff(edges),
        "x": np.interp(centre, cum, pts[:, 0]),
        "y": np.interp(centre, cum, pts[:, 1]),
    }


def section_concentration(x, y, sigma, depth, mass, status, geometry, section, levels):
    """Concentration (kg m-3) on the section, (distance bins, levels), and the mean water depth
    (m) of the particles counted in each distance bin (NaN where none): Σ m_p / (Δs W h_p / L)
    over the particles within W/2 of the line, in bin Δs along it and in the layer."""
    nd = len(geometry["distance"])
    total = np.zeros((nd, levels))
    hsum = np.zeros(nd)
    n = np.zeros(nd, dtype=np.int64)
    section_mass(
        x,
        y,
        sigma,
        depth,
        mass,
        status,
        geometry["line"],
        section.width / 2,
        section.spacing,
        levels,
        total,
        hsum,
        n,
    )
    conc = total * levels / (geometry["length"][:, None] * section.width)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_depth = np.where(n > 0, hsum / n, np.nan)
    return conc, mean_depth


def track_heights(sigma, depth, status, index):
    """Height above the bed (m) of the tracked particles ``index``; NaN for those not in water."""
    visible = status[index] == STATUS_WATER
    return np.where(visible, sigma[index] * depth[index], np.nan)
