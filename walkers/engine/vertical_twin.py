"""The numpy twin of ``walkers.engine.vertical``: the same arithmetic, vectorised over particles."""

from __future__ import annotations

import numpy as np

from walkers.engine.vertical import KAPPA, KZ_CONSTANT, MAX_COLUMN_REFLECTIONS, MIN_COLUMN_DEPTH


def cell_frame_values(arr, it, wt, j, i):
    """Twin of ``vertical.cell_frame_value`` for arrays of (it, wt, j, i)."""
    if arr.shape[0] == 1:
        return arr[0, j, i]
    f = arr[it, j, i]
    later = arr[np.minimum(it + 1, arr.shape[0] - 1), j, i]
    return np.where(wt >= 1.0, later, np.where(wt > 0.0, f + wt * (later - f), f))


def column_longest(depth, ustar, params):
    """Twin of ``vertical.column_longest`` for arrays."""
    if params[0] == KZ_CONSTANT:
        return np.full(depth.shape, np.inf)
    curved = (ustar > 0.0) & (depth >= MIN_COLUMN_DEPTH)
    safe = np.where(curved, ustar, 1.0)
    return np.where(curved, params[4] * depth / (2.0 * KAPPA * safe), np.inf)


def column_steps(sigma, depth, ustar, ws, params, dt, r):
    """Twin of ``vertical.column_step`` for arrays (dt an array of steps, s)."""
    deep = depth >= MIN_COLUMN_DEPTH
    h = np.where(deep, depth, 1.0)
    z = sigma * h
    if params[0] == KZ_CONSTANT:
        dk = np.zeros_like(z)
        k = np.full_like(z, params[1])
    else:
        a = KAPPA * ustar
        dk = a * (1.0 - 2.0 * z / h) * params[3]
        zm = np.minimum(np.maximum(z + 0.5 * dk * dt, 0.0), h)
        k = a * zm * (1.0 - zm / h)
    zn = z + (dk - ws) * dt + r * np.sqrt(2.0 * k * dt)
    below = np.zeros(z.shape, bool)
    for _ in range(MAX_COLUMN_REFLECTIONS):
        low = zn < 0.0
        high = ~low & (zn > h)
        if not (low.any() or high.any()):
            break
        zn = np.where(low, -zn, np.where(high, 2.0 * h - zn, zn))
        below |= low
    zn = np.minimum(np.maximum(zn, 0.0), h)
    chance = np.zeros(z.shape)
    wd = params[2]
    if wd > 0.0:
        safe_k = np.where(k > 0.0, k, 1.0)
        safe_ws = np.where(ws > 0.0, ws, 1.0)
        by_k = np.minimum(wd * np.sqrt(np.pi * dt / safe_k), 1.0)
        by_ws = np.where(ws > 0.0, np.minimum(wd / safe_ws, 1.0), 1.0)
        chance = np.where(below, np.where(k > 0.0, by_k, by_ws), 0.0)
    return np.where(deep, zn / h, sigma), np.where(deep, chance, 0.0)
