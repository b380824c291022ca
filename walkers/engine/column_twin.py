"""The numpy twin of the three-dimensional parts of the step (``kernels.column_walk``, the
return from the bed, the layer weights of layered velocities, which ``twin._sample`` samples):
the twin's vertical half, vectorised over particles, with the arithmetic of
``walkers.engine.vertical`` (``vertical_twin``)."""

from __future__ import annotations

import math

import numpy as np

from walkers.engine import twin as _twin
from walkers.engine import vertical_twin
from walkers.engine.kernels import (
    MAX_SUBSTEPS,
    STATUS_ON_BED,
    STATUS_WATER,
    VERTICAL_COMPONENTS,
    VERTICAL_SALT,
)
from walkers.engine.vertical import MIN_COLUMN_DEPTH, P_LOG_A, P_LOG_B


def bed_weights(s1, s, log_ratio):
    """Twin of ``kernels.bed_weight`` for arrays of heights s and of ln(h/z0) ``log_ratio``."""
    lo = math.log(s1) + log_ratio
    with np.errstate(divide="ignore", invalid="ignore"):
        ls = np.log(s)
        w = np.where(ls + log_ratio > 0.0, (ls - math.log(s1)) / lo, -1.0)
    return np.where((log_ratio > 0.0) & (lo > 0.0), w, 0.0)


def layer_weight(levels, s, params, depth, it, wt, j, i):
    """Twin of ``kernels.layer_weight`` for arrays of heights s and of (it, wt, j, i)."""
    nl = levels.shape[0]
    if nl == 1:
        return np.zeros(s.shape, np.int64), np.zeros(s.shape)
    k = np.clip(np.searchsorted(levels, s, side="right") - 1, 0, nl - 2)
    w = (s - levels[k]) / (levels[k + 1] - levels[k])
    low = s <= levels[0]
    high = s >= levels[-1]
    w = np.where(low | high, 0.0, w)
    if np.any(low):
        ratio = bed_log_ratios(params, depth, it[low], wt[low], j[low], i[low])
        w[low] = bed_weights(levels[0], s[low], ratio)
    return np.where(high, nl - 1, k), w


def bed_log_ratios(params, depth, it, wt, j, i):
    """Twin of ``kernels.bed_log_ratio`` for arrays of (it, wt, j, i)."""
    if params.shape[0] <= P_LOG_A or not params[P_LOG_A] > 0.0:
        return np.zeros(np.shape(i))
    h = vertical_twin.cell_frame_values(depth, it, wt, j, i)
    return 1.0 + params[P_LOG_A] * np.maximum(h, 0.0) ** params[P_LOG_B]


def column_hashes(vstreams, step, comp):
    counter = np.uint64(step) * np.uint64(VERTICAL_COMPONENTS) + np.uint64(comp)
    return _twin.mix64(vstreams + np.full_like(vstreams, counter) * _twin._GOLDEN)


def resuspend(column, status, streams_all, step, times, t, t_end, cells_of):
    """Twin of the kernel's return of particles on the bed to the water at the start of a step
    (``vertical.resuspension_chance``); returns the particles returned (they move from the next
    step on)."""
    params = column[4]
    bed = np.flatnonzero(status == STATUS_ON_BED)
    if params.shape[0] <= 5 or not params[5] > 0.0 or bed.size == 0:
        return np.zeros(0, np.int64)
    i, j = cells_of(bed)
    it, wt = _twin._time_weight(times, np.full(bed.size, t))
    us = vertical_twin.cell_frame_values(column[3], it, wt, j, i)
    chance = vertical_twin.resuspension_chances(us, params, t_end - t)
    u = _twin._open_unit(column_hashes(_twin.mix64(streams_all[bed] ^ VERTICAL_SALT), step, 0))
    up = bed[(chance > 0.0) & (u < chance)]
    column[0][up] = 0.0
    status[up] = STATUS_WATER
    return up


def column_walk(column, act, streams, step, it, wt, h, cells_at, status):
    """Twin of the kernel's ``column_walk`` for the particles ``act`` still in the water after
    the horizontal step, in the cells ``cells_at`` (i, j) where their steps began."""
    sigma, settling, depth, ustar, params = column[:5]
    klev, kz, wlev, w = column[8], column[9], column[6], column[7]
    i, j = cells_at
    vstreams = _twin.mix64(streams ^ VERTICAL_SALT)
    hw = vertical_twin.cell_frame_values(depth, it, wt, j, i)
    us = vertical_twin.cell_frame_values(ustar, it, wt, j, i)
    kcol = vertical_twin.column_profiles(kz, klev, it, wt, j, i)
    wcol = vertical_twin.column_profiles(w, wlev, it, wt, j, i)
    longest = vertical_twin.substep_longest(hw, us, params, klev, kcol)
    with np.errstate(divide="ignore", invalid="ignore"):
        n = np.where(longest < h, np.minimum(np.ceil(h / longest), MAX_SUBSTEPS), 1).astype(int)
    # columns too shallow to step in keep their particles' sigma
    n = np.where(hw >= MIN_COLUMN_DEPTH, n, 0)
    sub = h / np.maximum(n, 1)
    safe_h = np.where(n > 0, hw, 1.0)
    z = sigma[act] * hw
    inv = 1.0 / safe_h
    ws = settling[act]
    down = np.zeros(act.size, bool)
    for k in range(int(n.max()) if n.size else 0):
        on = np.flatnonzero((k < n) & ~down)
        r = _twin.normals(column_hashes(vstreams[on], step, 2 * k))
        new, chance = vertical_twin.column_steps(
            z[on],
            hw[on],
            inv[on],
            us[on],
            ws[on],
            params,
            sub[on],
            r,
            klev,
            kcol[on],
            wlev,
            wcol[on],
        )
        z[on] = new
        u = _twin._open_unit(column_hashes(vstreams[on], step, 2 * k + 1))
        down[on] = (chance > 0.0) & (u < chance)
    z[down] = 0.0
    sigma[act] = np.where(n > 0, z / safe_h, sigma[act])
    status[act[down]] = STATUS_ON_BED
