"""The plain-numpy twin of the compiled step: same arithmetic, same random numbers.

It is vectorised over particles and loops over steps, the way an engineer would write a mover in
numpy. It serves as the oracle the compiled kernel is tested against (to 1e-12) and as the
baseline of the benchmark. Arguments are those of :func:`walkers.engine.kernels.advance`.
"""

from __future__ import annotations

import numpy as np

from walkers.engine import column_twin, mesh_twin, meshwalk_twin
from walkers.engine.kernels import (
    COMP_BRIDGE_X,
    COMP_BRIDGE_Y,
    COMP_NORMAL,
    COMPONENTS,
    DECAYED_FRACTION,
    DEG,
    STATUS_DECAYED,
    STATUS_EXITED,
    STATUS_HELD_DRY,
    STATUS_WAITING,
    STATUS_WATER,
    WGS84_A,
    WGS84_E2,
    ZIG_F,
    ZIG_R,
    ZIG_X,
)

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_MIX1 = np.uint64(0xBF58476D1CE4E5B9)
_MIX2 = np.uint64(0x94D049BB133111EB)


def mix64(z: np.ndarray) -> np.ndarray:
    """SplitMix64 output function on uint64 arrays (wrapping arithmetic)."""
    z = (z ^ (z >> np.uint64(30))) * _MIX1
    z = (z ^ (z >> np.uint64(27))) * _MIX2
    return z ^ (z >> np.uint64(31))


def particle_streams(key: int, particles: np.ndarray) -> np.ndarray:
    p = np.asarray(particles).astype(np.uint64)
    return mix64(np.uint64(key) ^ (p * _GOLDEN))


def _open_unit(z: np.ndarray) -> np.ndarray:
    return ((z >> np.uint64(11)).astype(np.float64) + 1.0) * (1.0 / 9007199254740992.0)


def _hashes(streams: np.ndarray, step: int, comp: int) -> np.ndarray:
    counter = np.uint64(step) * np.uint64(COMPONENTS) + np.uint64(comp)
    return mix64(streams + np.full_like(streams, counter) * _GOLDEN)


def uniforms(streams: np.ndarray, step: int, comp: int) -> np.ndarray:
    """Uniform deviates in (0, 1] for each stream at (step, component)."""
    return _open_unit(_hashes(streams, step, comp))


def _next(z: np.ndarray) -> np.ndarray:
    return mix64(z + _GOLDEN)


def _ziggurat_layer(z: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    i = (z & np.uint64(255)).astype(np.intp)
    x = (z >> np.uint64(11)).astype(np.float64) * (1.0 / 9007199254740992.0) * ZIG_X[i]
    negative = ((z >> np.uint64(8)) & np.uint64(1)) == 1
    return i, x, negative


def _ziggurat_rest(z: np.ndarray) -> np.ndarray:
    """The ziggurat's wedge and tail tests and fresh draws, vectorised over the pending hashes
    (the same sequence of hashes as ``kernels.ziggurat_rest``)."""
    out = np.empty(z.size)
    todo = np.arange(z.size)
    z = z.copy()
    while todo.size:
        i, x, negative = _ziggurat_layer(z)
        done = x < ZIG_X[i + 1]
        val = x.copy()
        tail = ~done & (i == 0)
        if np.any(tail):
            k = np.flatnonzero(tail)
            zt = z[k]
            res = np.empty(k.size)
            open_ = np.arange(k.size)
            while open_.size:
                zt[open_] = _next(zt[open_])
                a = -np.log(_open_unit(zt[open_])) / ZIG_R
                zt[open_] = _next(zt[open_])
                b = -np.log(_open_unit(zt[open_]))
                ok = b + b > a * a
                res[open_[ok]] = ZIG_R + a[ok]
                open_ = open_[~ok]
            val[k] = res
            z[k] = zt
            done[k] = True
        wedge = np.flatnonzero(~done)
        if wedge.size:
            iw = i[wedge]
            z[wedge] = _next(z[wedge])
            yv = ZIG_F[iw] + _open_unit(z[wedge]) * (ZIG_F[iw + 1] - ZIG_F[iw])
            xw = x[wedge]
            done[wedge] = yv < np.exp(-0.5 * xw * xw)
        out[todo[done]] = np.where(negative[done], -val[done], val[done])
        todo = todo[~done]
        z = _next(z[~done])
    return out


def normals(z: np.ndarray) -> np.ndarray:
    """Standard normal deviates from 64-bit hashes (the ziggurat of ``kernels.normal_from``)."""
    i, x, negative = _ziggurat_layer(z)
    out = np.where(negative, -x, x)
    slow = np.flatnonzero(~(x < ZIG_X[i + 1]))
    if slow.size:
        out[slow] = _ziggurat_rest(z[slow])
    return out


def normal_pairs(streams: np.ndarray, step: int) -> tuple[np.ndarray, np.ndarray]:
    return (
        normals(_hashes(streams, step, COMP_NORMAL)),
        normals(_hashes(streams, step, COMP_NORMAL + 1)),
    )


def _locate(c: np.ndarray, v: np.ndarray, inv: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Interval and weight on axis c; on a uniform axis (inv = 1/spacing > 0) the weight is
    (v - c[i]) * inv, as in ``kernels.locate``."""
    n = c.shape[0]
    if n < 2:
        return np.zeros(v.shape, np.int64), np.zeros(v.shape)
    i = np.clip(np.searchsorted(c, v, side="right") - 1, 0, n - 2)
    w = (v - c[i]) * inv if inv > 0.0 else (v - c[i]) / (c[i + 1] - c[i])
    low = v <= c[0]
    high = v >= c[-1]
    w = np.where(low, 0.0, np.where(high, 1.0, w))
    return i, w


def _cell(edges: np.ndarray, v: np.ndarray) -> np.ndarray:
    return np.clip(np.searchsorted(edges, v, side="right") - 1, 0, edges.shape[0] - 2)


def _time_weight(times: np.ndarray, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return _locate(times, t)


def _sample(arr, ax, ay, invx, invy, it, wt, x, y, lay=(1, None, None)):
    """Bilinear in space at (x, y) on the axes (ax, ay), linear in time between frames it and
    it + 1 (a single frame as is): the twin of ``kernels.sample``. Layered frames, lay = (nl, k,
    wz) with nl > 1 (frame f layer k at f nl + k): at layer k, linear in height towards layer
    k + 1 with weight wz > 0, or towards 0 with weight -wz > 0 (the law of the wall below the
    lowest layer centre), the twin of ``kernels.layer_bilinear``."""
    nl, k, wz = lay
    last = arr.shape[0] - 1
    i, wx = _locate(ax, x, invx)
    j, wy = _locate(ay, y, invy)
    i1 = np.minimum(i + 1, arr.shape[2] - 1)
    j1 = np.minimum(j + 1, arr.shape[1] - 1)
    if arr.shape[0] == nl:
        it = np.zeros_like(it)
        wt = np.zeros_like(wt)

    def at(f):
        return (1.0 - wy) * ((1.0 - wx) * arr[f, j, i] + wx * arr[f, j, i1]) + wy * (
            (1.0 - wx) * arr[f, j1, i] + wx * arr[f, j1, i1]
        )

    def in_time(layer):
        f0 = np.minimum(it * nl + layer, last)
        f = at(f0)
        later = wt > 0.0
        if np.any(later):
            f = np.where(later, f + wt * (at(np.minimum(f0 + nl, last)) - f), f)
        return f

    if nl == 1:
        return in_time(0)
    out = in_time(k)
    out = np.where(wz > 0.0, out + wz * (in_time(k + 1) - out), out)
    return np.where(wz < 0.0, out * (1.0 + wz), out)


def _metres_to_grid(geographic, y):
    if not geographic:
        one = np.ones_like(y)
        return one, one
    s = np.sin(y * DEG)
    q = 1.0 - WGS84_E2 * s * s
    n_rad = WGS84_A / np.sqrt(q)
    m_rad = WGS84_A * (1.0 - WGS84_E2) / (q * np.sqrt(q))
    return 1.0 / (n_rad * np.cos(y * DEG) * DEG), 1.0 / (m_rad * DEG)


def _velocity(flow, times, t, x, y, lay=(1, None, None)):
    ux, uy, U, vx, vy, V, inv = flow
    it, wt = _time_weight(times, t)
    return (
        _sample(U, ux, uy, inv[0], inv[1], it, wt, x, y, lay),
        _sample(V, vx, vy, inv[2], inv[3], it, wt, x, y, lay),
    )


def _advect(flow, times, scheme, geographic, x, y, t, h, lay=(1, None, None)):
    u1, v1 = _velocity(flow, times, t, x, y, lay)
    sx, sy = _metres_to_grid(geographic, y)
    if scheme == 0:
        return u1 * h * sx, v1 * h * sy
    u2, v2 = _velocity(flow, times, t + 0.5 * h, x + 0.5 * h * u1 * sx, y + 0.5 * h * v1 * sy, lay)
    u3, v3 = _velocity(flow, times, t + 0.5 * h, x + 0.5 * h * u2 * sx, y + 0.5 * h * v2 * sy, lay)
    u4, v4 = _velocity(flow, times, t + h, x + h * u3 * sx, y + h * v3 * sy, lay)
    return (
        h * sx * (u1 + 2.0 * u2 + 2.0 * u3 + u4) / 6.0,
        h * sy * (v1 + 2.0 * v2 + 2.0 * v3 + v4) / 6.0,
    )


def trace_paths(px, py, pi, pj, qx, qy, xe, ye, wet, iw, edges_mode, max_refl):
    """Twin of ``kernels.trace_path``, vectorised over particles: each pass moves every path one
    event further (into the next cell, a reflection, an exit or the end); ``iw`` is each
    particle's frame of the wet mask. A path that ends in its own cell or a neighbour, with
    the cells of the rectangle between them wet, is placed at once, as in the kernel.
    Returns (edge, fraction, placed, qx, qy, ci, cj)."""
    n = px.size
    ncx, ncy = xe.size - 1, ye.size - 1
    edge = np.full(n, -1)
    frac_out = np.ones(n)
    i, j = pi.copy(), pj.copy()
    sx, sy = px.copy(), py.copy()
    qx, qy = qx.copy(), qy.copy()
    ox, oy = px.copy(), py.copy()
    oi, oj = pi.copy(), pj.copy()
    done = np.zeros(n)
    refl = np.zeros(n, np.int64)
    with np.errstate(invalid="ignore"):
        ci = np.clip(pi - (qx < xe[pi]) + (qx >= xe[pi + 1]), 0, ncx - 1)
        cj = np.clip(pj - (qy < ye[pj]) + (qy >= ye[pj + 1]), 0, ncy - 1)
        near = (xe[ci] <= qx) & (qx < xe[ci + 1]) & (ye[cj] <= qy) & (qy < ye[cj + 1])
    near &= (wet[iw, cj, ci] != 0) & (wet[iw, pj, ci] != 0) & (wet[iw, cj, pi] != 0)
    placed = near.copy()
    ox[near], oy[near], oi[near], oj[near] = qx[near], qy[near], ci[near], cj[near]
    act = np.flatnonzero(~near & np.isfinite(qx) & np.isfinite(qy))
    for _ in range((ncx + ncy + 2) * (max_refl + 1)):
        if act.size == 0:
            break
        ia, ja = i[act], j[act]
        dx, dy = qx[act] - sx[act], qy[act] - sy[act]
        tx, ty = np.full(act.size, 2.0), np.full(act.size, 2.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            fx = np.where(dx > 0.0, xe[np.minimum(ia + 1, ncx)], xe[ia])
            fy = np.where(dy > 0.0, ye[np.minimum(ja + 1, ncy)], ye[ja])
            tx = np.where(dx != 0.0, np.maximum((fx - sx[act]) / dx, 0.0), tx)
            ty = np.where(dy != 0.0, np.maximum((fy - sy[act]) / dy, 0.0), ty)
        end = (tx >= 1.0) & (ty >= 1.0)
        e = act[end]
        ie, je = i[e], j[e]
        hi_x = (ie < ncx - 1) & (qx[e] >= xe[np.minimum(ie + 1, ncx)])
        lo_x = ~hi_x & (ie > 0) & (qx[e] < xe[ie])
        qx[e] = np.where(hi_x, np.nextafter(xe[np.minimum(ie + 1, ncx)], -np.inf), qx[e])
        qx[e] = np.where(lo_x, xe[ie], qx[e])
        hi_y = (je < ncy - 1) & (qy[e] >= ye[np.minimum(je + 1, ncy)])
        lo_y = ~hi_y & (je > 0) & (qy[e] < ye[je])
        qy[e] = np.where(hi_y, np.nextafter(ye[np.minimum(je + 1, ncy)], -np.inf), qy[e])
        qy[e] = np.where(lo_y, ye[je], qy[e])
        placed[e] = True
        ox[e], oy[e], oi[e], oj[e] = qx[e], qy[e], ie, je
        go = ~end
        act, tx, ty, dx, dy, fx, fy = (v[go] for v in (act, tx, ty, dx, dy, fx, fy))
        across_x = tx <= ty
        t = np.where(across_x, tx, ty)
        frac = done[act] + t * (1.0 - done[act])
        cross_x = np.where(across_x, fx, sx[act] + ty * dx)
        cross_y = np.where(across_x, sy[act] + tx * dy, fy)
        ni = i[act] + np.where(across_x, np.where(dx > 0.0, 1, -1), 0)
        nj = j[act] + np.where(across_x, 0, np.where(dy > 0.0, 1, -1))
        outside = (ni < 0) | (ni >= ncx) | (nj < 0) | (nj >= ncy)
        which = np.where(across_x, np.where(ni < 0, 0, 1), np.where(nj < 0, 2, 3))
        absorbing = outside & (np.asarray(edges_mode)[which] == 1)
        gone = act[absorbing]
        edge[gone] = which[absorbing]
        frac_out[gone] = frac[absorbing]
        ox[gone], oy[gone] = cross_x[absorbing], cross_y[absorbing]
        oi[gone], oj[gone] = i[gone], j[gone]
        inside = ~outside
        closed = outside.copy()
        closed[inside] = wet[iw[act[inside]], nj[inside], ni[inside]] == 0
        stuck = closed & ~absorbing & (refl[act] >= max_refl)
        reflect = closed & ~absorbing & ~stuck
        r = act[reflect]
        rx = across_x[reflect]
        refl[r] += 1
        qx[r] = np.where(rx, 2.0 * fx[reflect] - qx[r], qx[r])
        qy[r] = np.where(rx, qy[r], 2.0 * fy[reflect] - qy[r])
        move = ~closed
        mv = act[move]
        i[mv], j[mv] = ni[move], nj[move]
        cont = reflect | move
        c = act[cont]
        sx[c], sy[c] = cross_x[cont], cross_y[cont]
        done[c] = frac[cont]
        act = c
    return edge, frac_out, placed, ox, oy, oi, oj


def advance(
    x,
    y,
    m,
    m0,
    trel,
    texit,
    status,
    flow,
    cells,
    disp,
    times,
    opts,
    edges_mode,
    t0,
    dt,
    nsteps,
    step0,
    key,
    decay_rate,
    topology=None,
    column=None,
):
    """Numpy twin of :func:`walkers.engine.kernels.advance` (same arguments, in place)."""
    ndim, scheme, aligned, has_drift, bridge, max_refl, geographic, tensor = (
        int(o) for o in opts[:8]
    )
    mesh = int(opts[8]) if opts.shape[0] > 8 else 0
    xe, ye, wet, cx, cy, invc = cells
    DX, DY, K1, K2, kconst, K3, KM = disp
    if mesh:
        face_nodes, neighbours, edge_open, hint = topology
        mesh_t = (xe, ye, face_nodes)
        faces_all = meshwalk_twin.locate_points(
            xe, ye, face_nodes, neighbours, np.where(hint >= 0, hint, 0), x, y
        )
    x_w, x_e, y_s, y_n = xe[0], xe[-1], ye[0], ye[-1]
    streams_all = particle_streams(key, np.arange(x.shape[0]))
    for s in range(nsteps):
        t = t0 + s * dt
        t_end = t + dt
        back = np.zeros(0, np.int64)
        if column is not None:

            def cells_of(p):
                if mesh:
                    return faces_all[p], np.zeros(p.size, np.int64)
                return _cell(xe, x[p]), _cell(ye, y[p])

            back = column_twin.resuspend(
                column, status, streams_all, step0 + s, times, t, t_end, cells_of
            )
        new = (status == STATUS_WAITING) & (trel < t_end)
        status[new] = STATUS_WATER
        act = np.flatnonzero((status == STATUS_WATER) | (status == STATUS_HELD_DRY))
        if back.size:
            act = act[~np.isin(act, back)]
        if act.size == 0:
            continue
        tstart = np.where(new[act], np.maximum(t, trel[act]), t)
        h = t_end - tstart
        keep = h > 0.0
        act, tstart, h = act[keep], tstart[keep], h[keep]
        px, py = x[act], y[act]
        it, wt = _time_weight(times, tstart)
        iw = np.where(wt < 0.5, it, it + 1)
        if wet.shape[0] == 1:
            iw = np.zeros_like(iw)
        if mesh:
            face = faces_all[act]
            wet_here = (face >= 0) & (wet[iw, 0, np.maximum(face, 0)] != 0)
        else:
            wet_here = wet[iw, _cell(ye, py), _cell(xe, px)] != 0
        st = status[act]
        st = np.where(~wet_here, STATUS_HELD_DRY, np.where(st == STATUS_HELD_DRY, STATUS_WATER, st))
        if decay_rate > 0.0:
            pm = m[act] * np.exp(-decay_rate * h)
            m[act] = pm
            gone = pm <= DECAYED_FRACTION * m0[act]
            st = np.where(gone, STATUS_DECAYED, st)
        status[act] = st
        moving = st == STATUS_WATER
        act, tstart, h, px, py, it, wt, iw = (
            a[moving] for a in (act, tstart, h, px, py, it, wt, iw)
        )
        if act.size == 0:
            continue
        streams = streams_all[act]
        lay = (1, None, None)
        if column is not None and column[5].shape[0] > 1:
            # the particles' columns: the face on a mesh (row 0), the cell on a lattice
            cj = np.zeros(act.size, np.int64) if mesh else _cell(ye, py)
            ci = faces_all[act] if mesh else _cell(xe, px)
            weights = column_twin.layer_weight(
                column[5], column[0][act], column[4], column[2], it, wt, cj, ci
            )
            lay = (column[5].shape[0], *weights)
        if mesh:
            face = faces_all[act]
            ax_, ay_, u_start, v_start = mesh_twin.mesh_advect(
                flow, mesh_t, neighbours, mesh == 1, times, scheme, px, py, tstart, h, face, lay
            )
        else:
            ax_, ay_ = _advect(flow, times, scheme, geographic, px, py, tstart, h, lay)
        if kconst[0] >= 0.0:
            k1 = np.full(act.size, kconst[0])
            k2 = np.full(act.size, kconst[1])
        else:
            k1 = _sample(K1, cx, cy, invc[2], invc[3], it, wt, px, py)
            k2 = _sample(K2, cx, cy, invc[2], invc[3], it, wt, px, py)
        k1 = k1 * (kconst[2] * KM[act])
        k2 = k2 * (kconst[2] * KM[act])
        z1, z2 = normal_pairs(streams, step0 + s)
        sx, sy = _metres_to_grid(geographic, py)
        if tensor:
            k12 = _sample(K3, cx, cy, invc[2], invc[3], it, wt, px, py) * (kconst[2] * KM[act])
            l11 = np.sqrt(np.maximum(k1, 0.0))
            l21 = np.where(l11 > 0.0, k12 / np.where(l11 > 0.0, l11, 1.0), 0.0)
            l22 = np.sqrt(np.maximum(k2 - l21 * l21, 0.0))
            root = np.sqrt(2.0 * h)
            nxm = root * l11 * z1
            nym = root * (l21 * z1 + l22 * z2)
            kxx, kyy = k1, k2
        elif aligned:
            u, v = (u_start, v_start) if mesh else _velocity(flow, times, tstart, px, py, lay)
            speed = np.sqrt(u * u + v * v)
            moving_flow = speed > 0.0
            safe = np.where(moving_flow, speed, 1.0)
            ex = np.where(moving_flow, u / safe, 1.0)
            ey = np.where(moving_flow, v / safe, 0.0)
            k1 = np.where(moving_flow, k1, k2)
            aL = np.sqrt(2.0 * k1 * h) * z1
            aT = np.sqrt(2.0 * k2 * h) * z2
            nxm = aL * ex - aT * ey
            nym = aL * ey + aT * ex
            kxx = k2 + (k1 - k2) * ex * ex
            kyy = k2 + (k1 - k2) * ey * ey
        else:
            nxm = np.sqrt(2.0 * k1 * h) * z1
            nym = np.sqrt(2.0 * k2 * h) * z2
            kxx, kyy = k1, k2
        dxm, dym = nxm, nym
        if has_drift and mesh:
            dxm = dxm + mesh_twin.frame_value(DX, it, wt, face) * KM[act] * h
            dym = dym + mesh_twin.frame_value(DY, it, wt, face) * KM[act] * h
        elif has_drift:
            dxm = dxm + _sample(DX, cx, cy, invc[2], invc[3], it, wt, px, py) * KM[act] * h
            dym = dym + _sample(DY, cx, cy, invc[2], invc[3], it, wt, px, py) * KM[act] * h
        qx = px + ax_ + dxm * sx
        qy = py + ay_ + dym * sy if ndim == 2 else py.copy()
        iw_cells = iw if wet.shape[0] > 1 else np.zeros_like(iw)
        if mesh:
            left, frac, placed = np.full(act.size, -1), np.ones(act.size), np.zeros(act.size, bool)
            ci = face.copy()
            for frame in np.unique(iw_cells):
                sel = iw_cells == frame
                out = meshwalk_twin.trace_points(
                    xe,
                    ye,
                    face_nodes,
                    neighbours,
                    edge_open,
                    wet[frame, 0],
                    face[sel],
                    px[sel],
                    py[sel],
                    qx[sel],
                    qy[sel],
                    max_refl,
                )
                left[sel], frac[sel], placed[sel], qx[sel], qy[sel], ci[sel] = out
            faces_all[act[placed]] = ci[placed]
        else:
            pi, pj = _cell(xe, px), _cell(ye, py)
            left, frac, placed, qx, qy, ci, cj = trace_paths(
                px, py, pi, pj, qx, qy, xe, ye, wet, iw_cells, edges_mode, max_refl
            )
        tcross = tstart + h * frac
        if bridge and not mesh:
            cand = (left < 0) & placed
            bx = np.full(act.size, -1)
            ux_ = uniforms(streams, step0 + s, COMP_BRIDGE_X)
            ncx, ncy = xe.size - 1, ye.size - 1
            for e, d0, d1, beside in (
                (0, (px - x_w) / sx, (qx - x_w) / sx, (pi == 0) | (ci == 0)),
                (1, (x_e - px) / sx, (x_e - qx) / sx, (pi == ncx - 1) | (ci == ncx - 1)),
            ):
                if edges_mode[e] != 1:
                    continue
                near = cand & beside & (bx < 0) & (kxx > 0.0) & (d0 * d1 < 20.0 * kxx * h)
                kh = np.where(near, kxx * h, 1.0)
                hit = near & (ux_ < np.exp(np.where(near, -d0 * d1 / kh, -np.inf)))
                bx = np.where(near & (bx < 0), np.where(hit, e, -2), bx)
            left = np.where(bx >= 0, bx, left)
            if ndim == 2:
                by = np.full(act.size, -1)
                uy_ = uniforms(streams, step0 + s, COMP_BRIDGE_Y)
                cand = cand & (left < 0)
                for e, d0, d1, beside in (
                    (2, (py - y_s) / sy, (qy - y_s) / sy, (pj == 0) | (cj == 0)),
                    (3, (y_n - py) / sy, (y_n - qy) / sy, (pj == ncy - 1) | (cj == ncy - 1)),
                ):
                    if edges_mode[e] != 1:
                        continue
                    near = cand & beside & (by < 0) & (kyy > 0.0) & (d0 * d1 < 20.0 * kyy * h)
                    kh = np.where(near, kyy * h, 1.0)
                    hit = near & (uy_ < np.exp(np.where(near, -d0 * d1 / kh, -np.inf)))
                    by = np.where(near & (by < 0), np.where(hit, e, -2), by)
                left = np.where(by >= 0, by, left)
            tcross = np.where((bx >= 0) | ((left >= 0) & cand), tstart + 0.5 * h, tcross)
        gone = left >= 0
        status[act[gone]] = (STATUS_EXITED + left[gone]).astype(status.dtype)
        texit[act[gone]] = tcross[gone]
        moved = gone | placed
        x[act[moved]] = qx[moved]
        y[act[moved]] = qy[moved]
        if column is not None:
            stay = ~gone
            if mesh:
                cells_at = (face[stay], np.zeros(int(stay.sum()), np.int64))
            else:
                cells_at = (pi[stay], pj[stay])
            column_twin.column_walk(
                column,
                act[stay],
                streams[stay],
                step0 + s,
                it[stay],
                wt[stay],
                h[stay],
                cells_at,
                status,
            )
    if mesh:
        hint[:] = faces_all


def fill_land(a: np.ndarray, wet: np.ndarray, sweeps: int) -> np.ndarray:
    """:func:`walkers.engine.kernels.fill_land` and its caller ``drift._fill_land`` in numpy:
    values of wet neighbours copied onto land cells (``sweeps`` sweeps, each NaN cell taking the
    mean of its neighbours that are not NaN), then the rest take the mean of the field."""
    out = np.where(wet, a, np.nan)
    for _ in range(sweeps):
        missing = np.isnan(out)
        if not missing.any():
            break
        padded = np.pad(out, 1, mode="edge")
        neighbours = np.stack(
            [padded[:-2, 1:-1], padded[2:, 1:-1], padded[1:-1, :-2], padded[1:-1, 2:]]
        )
        count = np.sum(~np.isnan(neighbours), axis=0)
        mean = np.nansum(neighbours, axis=0) / np.maximum(count, 1)
        out = np.where(missing & (count > 0), mean, out)
    return np.where(np.isnan(out), np.nanmean(out) if np.isfinite(out).any() else 0.0, out)
