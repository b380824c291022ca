"""Numpy twins of the compiled water-column reductions of :mod:`walkers.run.column_reduce`.

Each follows the same arithmetic on the same particles, vectorised (``np.add.at`` adds in particle
order), so the tests hold the twins and the compiled reductions equal; the twins are oracles, the
run uses the compiled ones.
"""

from __future__ import annotations

import numpy as np

from walkers.engine.state import IN_WATER, ON_BED
from walkers.run.column_reduce import SMALLEST_DEPTH


def _cells(x, y, grid):
    """Output cell (j, i) of each point and whether it lies on the grid."""
    x0, dx, nx, y0, dy, ny = grid
    fi = (x - x0) * (1.0 / dx) + 0.5
    fj = (y - y0) * (1.0 / dy) + 0.5
    on = (fi >= 0.0) & (fj >= 0.0) & (fi < nx) & (fj < ny)
    return np.where(on, fj, 0).astype(np.int64), np.where(on, fi, 0).astype(np.int64), on


def band_mass(x, y, sigma, depth, mass, status, reference, start, end, grid, out, count):
    """Twin of :func:`walkers.run.column_reduce.band_mass`."""
    j, i, on = _cells(x, y, grid)
    keep = on & (status == IN_WATER)
    h = depth
    for b in range(len(reference)):
        if reference[b] == 2:
            thick = np.maximum(h, SMALLEST_DEPTH)
            inside = keep
        else:
            lo, hi = np.minimum(start[b], h), np.minimum(end[b], h)
            d = (1.0 - sigma) * h if reference[b] == 0 else sigma * h
            inside = keep & (hi > lo) & (lo <= d) & (d <= hi)
            thick = np.maximum(hi - lo, SMALLEST_DEPTH)
        np.add.at(out[b], (j[inside], i[inside]), mass[inside] / thick[inside])
        np.add.at(count[b], (j[inside], i[inside]), 1)


def bed_mass(x, y, mass, status, grid, out, count):
    """Twin of :func:`walkers.run.column_reduce.bed_mass`."""
    j, i, on = _cells(x, y, grid)
    keep = on & (status == ON_BED)
    np.add.at(out, (j[keep], i[keep]), mass[keep])
    np.add.at(count, (j[keep], i[keep]), 1)


def _layers(sigma, levels):
    return np.clip((sigma * levels).astype(np.int64), 0, levels - 1)


def profile_mass(x, y, sigma, depth, mass, status, places, levels, out):
    """Twin of :func:`walkers.run.column_reduce.profile_mass`."""
    water = status == IN_WATER
    w = mass / np.maximum(depth, SMALLEST_DEPTH)
    k = _layers(sigma, levels)
    for r, (px, py, a, b, c, kind) in enumerate(places):
        if kind == 0.0:
            inside = ((x - px) * b) ** 2 + ((y - py) * c) ** 2 <= a
        elif kind == 1.0:
            ex, ey = x - px, y - py
            inside = (-a <= ex) & (ex < a) & (-b <= ey) & (ey < b)
        else:
            continue
        sel = water & inside
        np.add.at(out[r], k[sel], w[sel])


def section_mass(x, y, sigma, depth, mass, status, line, half_width, spacing, levels, out, hsum, n):
    """Twin of :func:`walkers.run.column_reduce.section_mass`."""
    px, py, cum, sx, sy = line[:, 0], line[:, 1], line[:, 2], line[0, 3], line[0, 4]
    best = np.full(len(x), np.inf)
    along = np.full(len(x), -1.0)
    last = len(px) - 2
    for s in range(last + 1):
        ax, ay = (px[s + 1] - px[s]) * sx, (py[s + 1] - py[s]) * sy
        bx, by = (x - px[s]) * sx, (y - py[s]) * sy
        t = (ax * bx + ay * by) / (ax * ax + ay * ay)
        allowed = ~(((s == 0) & (t < 0.0)) | ((s == last) & (t > 1.0)))
        t = np.clip(t, 0.0, 1.0)
        ex, ey = bx - t * ax, by - t * ay
        d2 = ex * ex + ey * ey
        better = allowed & (d2 < best)
        best = np.where(better, d2, best)
        along = np.where(better, cum[s] + t * (cum[s + 1] - cum[s]), along)
    sel = (status == IN_WATER) & (along >= 0.0) & (np.sqrt(best) <= half_width)
    d = np.minimum((along[sel] / spacing).astype(np.int64), out.shape[0] - 1)
    k = _layers(sigma[sel], levels)
    np.add.at(out, (d, k), mass[sel] / np.maximum(depth[sel], SMALLEST_DEPTH))
    np.add.at(hsum, d, depth[sel])
    np.add.at(n, d, 1)
