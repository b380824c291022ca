"""The numpy twin of ``walkers.engine.vertical``: the same arithmetic, vectorised over particles."""

from __future__ import annotations

import numpy as np

from walkers.engine.vertical import (
    KAPPA,
    KZ_CONSTANT,
    KZ_FILE,
    MAX_COLUMN_REFLECTIONS,
    MIN_COLUMN_DEPTH,
)


def cell_frame_values(arr, it, wt, j, i):
    """Twin of ``vertical.cell_frame_value`` for arrays of (it, wt, j, i)."""
    if arr.shape[0] == 1:
        return arr[0, j, i]
    f = arr[it, j, i]
    later = arr[np.minimum(it + 1, arr.shape[0] - 1), j, i]
    return np.where(wt >= 1.0, later, np.where(wt > 0.0, f + wt * (later - f), f))


def column_profiles(arr, levels, it, wt, j, i):
    """Twin of ``kernels.column_profile``: (particles, levels) values of layered frames."""
    nl = levels.shape[0]
    out = np.zeros((it.size, max(nl, 1)))
    for q in range(nl):
        if arr.shape[0] == nl:
            out[:, q] = arr[q, j, i]
            continue
        later = arr[np.minimum((it + 1) * nl + q, arr.shape[0] - 1), j, i]
        f = arr[it * nl + q, j, i]
        out[:, q] = np.where(wt >= 1.0, later, np.where(wt > 0.0, f + wt * (later - f), f))
    return out


def profile_at(levels, values, s):
    """Twin of ``vertical.profile_at``: values (particles, levels), heights s (particles,)."""
    n = levels.shape[0]
    rows = np.arange(s.size)
    if n == 1:
        return values[:, 0], np.zeros(s.size)
    k = np.clip(np.searchsorted(levels, s, side="right") - 1, 0, n - 2)
    g = (values[rows, k + 1] - values[rows, k]) / (levels[k + 1] - levels[k])
    inside = (s > levels[0]) & (s < levels[n - 1])
    value = np.where(
        s <= levels[0], values[:, 0], np.where(inside, values[rows, k] + g * (s - levels[k]), 0.0)
    )
    value = np.where(s >= levels[n - 1], values[:, n - 1], value)
    return value, np.where(inside, g, 0.0)


def profile_curvature(depth, klev, kcol):
    """Twin of ``vertical.profile_curvature`` for arrays (kcol (particles, levels))."""
    worst = np.zeros(depth.shape)
    for q in range(1, klev.shape[0] - 1):
        below = (kcol[:, q] - kcol[:, q - 1]) / ((klev[q] - klev[q - 1]) * depth)
        above = (kcol[:, q + 1] - kcol[:, q]) / ((klev[q + 1] - klev[q]) * depth)
        c = np.abs(above - below) / (0.5 * (klev[q + 1] - klev[q - 1]) * depth)
        worst = np.maximum(worst, c)
    return worst


def column_longest(depth, ustar, params):
    """Twin of ``vertical.column_longest`` for arrays."""
    if params[0] == KZ_CONSTANT:
        return np.full(depth.shape, np.inf)
    curved = (ustar > 0.0) & (depth >= MIN_COLUMN_DEPTH)
    safe = np.where(curved, ustar, 1.0)
    return np.where(curved, params[4] * depth / (2.0 * KAPPA * safe), np.inf)


def substep_longest(depth, ustar, params, klev, kcol):
    """Twin of ``vertical.substep_longest`` for arrays."""
    if params[0] != KZ_FILE:
        return column_longest(depth, ustar, params)
    deep = depth >= MIN_COLUMN_DEPTH
    with np.errstate(divide="ignore", invalid="ignore"):
        c = profile_curvature(np.where(deep, depth, 1.0), klev, kcol)
        return np.where(deep & (c > 0.0), params[4] / np.where(c > 0.0, c, 1.0), np.inf)


def resuspension_chances(ustar, params, dt):
    """Twin of ``vertical.resuspension_chance`` for arrays of u*."""
    tau_c = params[5]
    tau = params[7] * ustar * ustar
    up = tau > tau_c
    rate = params[6] * (tau / tau_c - 1.0) * dt
    return np.where(up, -np.expm1(-np.where(up, rate, 0.0)), 0.0)


def column_steps(z, depth, inv_depth, ustar, ws, params, dt, r, klev, kcol, wlev, wcol):
    """Twin of ``vertical.column_step`` for arrays (z heights, m; columns deeper than
    MIN_COLUMN_DEPTH; dt an array of steps, s; kcol and wcol the (particles, levels)
    profiles). Returns (z', P)."""
    h = depth
    if params[0] == KZ_CONSTANT:
        dk = np.zeros_like(z)
        k = np.full_like(z, params[1])
    elif params[0] == KZ_FILE:
        g = profile_at(klev, kcol, z * inv_depth)[1]
        dk = g * inv_depth * params[3]
        zm = np.minimum(np.maximum(z + 0.5 * dk * dt, 0.0), h)
        k = np.maximum(profile_at(klev, kcol, zm * inv_depth)[0], 0.0)
    else:
        a = KAPPA * ustar
        dk = a * (1.0 - 2.0 * z * inv_depth) * params[3]
        zm = np.minimum(np.maximum(z + 0.5 * dk * dt, 0.0), h)
        k = a * zm * (1.0 - zm * inv_depth)
    if wlev.shape[0] > 0:
        w = profile_at(wlev, wcol, z * inv_depth)[0]
        zn = z + (dk - ws + w) * dt + r * np.sqrt(2.0 * k * dt)
    else:
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
    return zn, chance
