"""The numpy twin of :mod:`walkers.engine.meshwalk`: the same arithmetic, vectorised over points.

Each function follows its compiled counterpart operation for operation (the face walk and the
path trace move every point one event per pass), so the tests can hold the two equal to 1e-12;
see the compiled module for the contracts and references.
"""

from __future__ import annotations

import numpy as np

from walkers.engine.meshwalk import NEWTON_MAX, NEWTON_TOL, NUDGE_MAX

_K = np.arange(4)


def _corners(face_nodes: np.ndarray, f: np.ndarray):
    """Corner count, start and end node of each edge k (n, 4) of faces f; unused slots 0."""
    nv = np.where(face_nodes[f, 3] < 0, 3, 4)
    a = face_nodes[f]
    b = np.take_along_axis(a, (_K[None, :] + 1) % nv[:, None], axis=1)
    present = _K[None, :] < nv[:, None]
    return nv, np.where(present, a, 0), np.where(present, b, 0), present


def _side(node_x, node_y, a, b, px, py):
    ax = node_x[a]
    ay = node_y[a]
    return (node_x[b] - ax) * (py - ay) - (node_y[b] - ay) * (px - ax)


def inside_faces(node_x, node_y, face_nodes, f, px, py) -> np.ndarray:
    """Whether each point lies in its closed face f."""
    _, a, b, present = _corners(face_nodes, f)
    side = _side(node_x, node_y, a, b, px[:, None], py[:, None])
    return np.all(~present | (side >= 0.0), axis=1)


def brute_force_faces(node_x, node_y, face_nodes, px, py) -> np.ndarray:
    """The lowest-numbered closed face containing each point, or -1."""
    out = np.full(px.size, -1, dtype=np.int64)
    for i in range(px.size):
        every = np.arange(face_nodes.shape[0])
        inside = inside_faces(
            node_x,
            node_y,
            face_nodes,
            every,
            np.full(every.size, px[i]),
            np.full(every.size, py[i]),
        )
        hits = np.flatnonzero(inside)
        out[i] = hits[0] if hits.size else -1
    return out


def locate_points(node_x, node_y, face_nodes, neighbours, start, px, py) -> np.ndarray:
    """Twin of ``meshwalk.locate_points``."""
    px = np.asarray(px, dtype=np.float64)
    py = np.asarray(py, dtype=np.float64)
    n = px.size
    result = np.full(n, -1, dtype=np.int64)
    f = np.asarray(start, dtype=np.int64).copy()
    prev = np.full(n, -1, dtype=np.int64)
    active = np.isfinite(px) & np.isfinite(py)
    brute = np.zeros(n, dtype=bool)
    for _ in range(face_nodes.shape[0]):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        fi = f[idx]
        _, a, b, present = _corners(face_nodes, fi)
        side = _side(node_x, node_y, a, b, px[idx, None], py[idx, None])
        g = neighbours[fi]
        outside = present & (side < 0.0)
        out_of_mesh = np.any(outside & (g < 0), axis=1)
        cand = outside & (g >= 0) & (g != prev[idx, None])
        with np.errstate(invalid="ignore", divide="ignore"):
            d = side / np.hypot(node_x[b] - node_x[a], node_y[b] - node_y[a])
        d = np.where(cand, d, 0.0)
        kbest = np.argmin(d, axis=1)
        moves = d[np.arange(idx.size), kbest] < 0.0
        stop = ~moves
        result[idx[stop & ~out_of_mesh]] = fi[stop & ~out_of_mesh]
        brute[idx[stop & out_of_mesh]] = True
        active[idx[stop]] = False
        go = idx[moves]
        prev[go] = f[go]
        f[go] = g[moves, kbest[moves]]
    brute |= active
    if np.any(brute):
        result[brute] = brute_force_faces(node_x, node_y, face_nodes, px[brute], py[brute])
    return result


def bilinear_local(node_x, node_y, face_nodes, f, px, py):
    """Twin of ``meshwalk.bilinear_local`` for arrays of quadrilaterals f and points."""
    n0, n1, n2, n3 = (face_nodes[f, k] for k in range(4))
    x0, y0 = node_x[n0], node_y[n0]
    ax, ay = node_x[n1] - x0, node_y[n1] - y0
    bx, by = node_x[n3] - x0, node_y[n3] - y0
    cx = node_x[n2] - node_x[n1] - node_x[n3] + x0
    cy = node_y[n2] - node_y[n1] - node_y[n3] + y0
    rx, ry = px - x0, py - y0
    xi = np.full(px.size, 0.5)
    eta = np.full(px.size, 0.5)
    active = np.ones(px.size, dtype=bool)
    for _ in range(NEWTON_MAX):
        i = np.flatnonzero(active)
        if i.size == 0:
            break
        fx = ax[i] * xi[i] + bx[i] * eta[i] + cx[i] * xi[i] * eta[i] - rx[i]
        fy = ay[i] * xi[i] + by[i] * eta[i] + cy[i] * xi[i] * eta[i] - ry[i]
        j11 = ax[i] + cx[i] * eta[i]
        j12 = bx[i] + cx[i] * xi[i]
        j21 = ay[i] + cy[i] * eta[i]
        j22 = by[i] + cy[i] * xi[i]
        det = j11 * j22 - j12 * j21
        dxi = (j22 * fx - j12 * fy) / det
        deta = (j11 * fy - j21 * fx) / det
        xi[i] -= dxi
        eta[i] -= deta
        active[i[np.abs(dxi) + np.abs(deta) < NEWTON_TOL]] = False
    return xi, eta


def face_weights(node_x, node_y, face_nodes, faces, px, py) -> np.ndarray:
    """Corner weights (n, 4) of points in their faces (twin of ``meshwalk.face_weights``)."""
    faces = np.asarray(faces, dtype=np.int64)
    w = np.zeros((faces.size, 4))
    tri = face_nodes[faces, 3] < 0
    t = np.flatnonzero(tri)
    if t.size:
        a, b, c = (face_nodes[faces[t], k] for k in range(3))
        whole = _side(node_x, node_y, a, b, node_x[c], node_y[c])
        w[t, 0] = _side(node_x, node_y, b, c, px[t], py[t]) / whole
        w[t, 1] = _side(node_x, node_y, c, a, px[t], py[t]) / whole
        w[t, 2] = _side(node_x, node_y, a, b, px[t], py[t]) / whole
    q = np.flatnonzero(~tri)
    if q.size:
        xi, eta = bilinear_local(node_x, node_y, face_nodes, faces[q], px[q], py[q])
        w[q, 0] = (1.0 - xi) * (1.0 - eta)
        w[q, 1] = xi * (1.0 - eta)
        w[q, 2] = xi * eta
        w[q, 3] = (1.0 - xi) * eta
    return w


def interpolate_points(node_x, node_y, face_nodes, values, faces, px, py) -> np.ndarray:
    """Twin of ``meshwalk.interpolate_points`` (corner weights summed in corner order)."""
    w = face_weights(node_x, node_y, face_nodes, faces, px, py)
    corners = face_nodes[faces]
    out = np.zeros(np.size(faces))
    for k in range(4):
        used = corners[:, k] >= 0
        out = np.where(used, out + w[:, k] * values[np.where(used, corners[:, k], 0)], out)
    return out


def _nudge_inside(node_x, node_y, face_nodes, f, qx, qy):
    """Twin of ``meshwalk.nudge_inside`` for arrays."""
    qx, qy = qx.copy(), qy.copy()
    need = ~inside_faces(node_x, node_y, face_nodes, f, qx, qy)
    if not np.any(need):
        return qx, qy
    i = np.flatnonzero(need)
    nv, a, _, present = _corners(face_nodes, f[i])
    mx = np.zeros(i.size)
    my = np.zeros(i.size)
    for k in range(4):
        mx = np.where(present[:, k], mx + node_x[a[:, k]], mx)
        my = np.where(present[:, k], my + node_y[a[:, k]], my)
    mx, my = mx / nv, my / nv
    x_out, y_out = mx.copy(), my.copy()
    open_ = np.ones(i.size, dtype=bool)
    step = 2.0**-40
    for _ in range(NUDGE_MAX):
        x = qx[i] + (mx - qx[i]) * step
        y = qy[i] + (my - qy[i]) * step
        ok = open_ & inside_faces(node_x, node_y, face_nodes, f[i], x, y)
        x_out[ok], y_out[ok] = x[ok], y[ok]
        open_ &= ~ok
        step *= 2.0
        if step >= 1.0 or not np.any(open_):
            break
    qx[i], qy[i] = x_out, y_out
    return qx, qy


def trace_points(
    node_x, node_y, face_nodes, neighbours, edge_open, wet_face, faces, px, py, qx, qy, max_refl
):
    """Twin of ``meshwalk.trace_points``: every path moves one event per pass."""
    n = px.size
    f0 = np.asarray(faces, dtype=np.int64)
    f = f0.copy()
    qx, qy = np.array(qx, dtype=np.float64), np.array(qy, dtype=np.float64)
    sx, sy = np.array(px, dtype=np.float64), np.array(py, dtype=np.float64)
    boundary = np.full(n, -1, dtype=np.int64)
    fraction = np.ones(n)
    placed = np.zeros(n, dtype=bool)
    x, y, face = sx.copy(), sy.copy(), f0.copy()
    done = np.zeros(n)
    refl = np.zeros(n, dtype=np.int64)
    skip = np.full(n, -1, dtype=np.int64)
    active = np.isfinite(qx) & np.isfinite(qy)
    rows = np.arange(n)
    for _ in range((face_nodes.shape[0] + 4) * (max_refl + 1)):
        i = rows[active]
        if i.size == 0:
            break
        fi = f[i]
        _, a, b, present = _corners(face_nodes, fi)
        valid = present & (_K[None, :] != skip[i, None])
        sq = _side(node_x, node_y, a, b, qx[i, None], qy[i, None])
        ss = _side(node_x, node_y, a, b, sx[i, None], sy[i, None])
        cand = valid & (sq < 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(cand, np.maximum(ss / (ss - sq), 0.0), 2.0)
        kbest = np.argmin(t, axis=1)
        tbest = t[np.arange(i.size), kbest]
        crossing = tbest < 2.0
        # placed: no edge crossed
        stay = i[~crossing]
        if stay.size:
            xs, ys = _nudge_inside(node_x, node_y, face_nodes, f[stay], qx[stay], qy[stay])
            x[stay], y[stay], face[stay], placed[stay] = xs, ys, f[stay], True
            active[stay] = False
        i, kb, tb = i[crossing], kbest[crossing], tbest[crossing]
        a, b = a[crossing, kb], b[crossing, kb]
        cx = sx[i] + tb * (qx[i] - sx[i])
        cy = sy[i] + tb * (qy[i] - sy[i])
        frac = done[i] + tb * (1.0 - done[i])
        g = neighbours[f[i], kb]
        opened = edge_open[f[i], kb]
        leaves = (g < 0) & (opened >= 0)
        out = i[leaves]
        boundary[out], fraction[out], x[out], y[out], face[out] = (
            opened[leaves],
            frac[leaves],
            cx[leaves],
            cy[leaves],
            f[out],
        )
        active[out] = False
        closed = ~leaves & ((g < 0) | (wet_face[np.maximum(g, 0)] == 0))
        spent = closed & (refl[i] >= max_refl)
        active[i[spent]] = False  # not placed: start kept
        wall = closed & ~spent
        w = i[wall]
        aw, bw = a[wall], b[wall]
        ex, ey = node_x[bw] - node_x[aw], node_y[bw] - node_y[aw]
        along = ((qx[w] - node_x[aw]) * ex + (qy[w] - node_y[aw]) * ey) / (ex * ex + ey * ey)
        qx[w] = 2.0 * (node_x[aw] + along * ex) - qx[w]
        qy[w] = 2.0 * (node_y[aw] + along * ey) - qy[w]
        refl[w] += 1
        skip[w] = kb[wall]
        move = ~leaves & ~closed
        m = i[move]
        gm = g[move]
        shared = neighbours[gm] == f[m][:, None]
        skip[m] = np.where(shared.any(axis=1), np.argmax(shared, axis=1), -1)
        f[m] = gm
        keep = wall | move
        k_ = i[keep]
        sx[k_], sy[k_], done[k_] = cx[keep], cy[keep], frac[keep]
    x[~placed & (boundary < 0)] = np.asarray(px, dtype=np.float64)[~placed & (boundary < 0)]
    y[~placed & (boundary < 0)] = np.asarray(py, dtype=np.float64)[~placed & (boundary < 0)]
    face[~placed & (boundary < 0)] = f0[~placed & (boundary < 0)]
    return boundary, fraction, placed, x, y, face


def _green_gauss(node_x, node_y, face_nodes, area, values):
    nv, a, b, present = _corners(face_nodes, np.arange(face_nodes.shape[0]))
    gx = np.zeros(face_nodes.shape[0])
    gy = np.zeros(face_nodes.shape[0])
    for k in range(4):
        mean = 0.5 * (values[a[:, k]] + values[b[:, k]])
        gx = np.where(present[:, k], gx + mean * (node_y[b[:, k]] - node_y[a[:, k]]), gx)
        gy = np.where(present[:, k], gy - mean * (node_x[b[:, k]] - node_x[a[:, k]]), gy)
    return gx / area, gy / area


def face_drift(node_x, node_y, face_nodes, area, h, kxx, kxy, kyy):
    """Twin of ``meshwalk.face_drift``."""
    nv, a, _, present = _corners(face_nodes, np.arange(face_nodes.shape[0]))
    hm = np.zeros(face_nodes.shape[0])
    for k in range(4):
        hm = np.where(present[:, k], hm + h[a[:, k]], hm)
    hm = hm / nv
    gxx_x, _ = _green_gauss(node_x, node_y, face_nodes, area, h * kxx)
    gxy_x, gxy_y = _green_gauss(node_x, node_y, face_nodes, area, h * kxy)
    _, gyy_y = _green_gauss(node_x, node_y, face_nodes, area, h * kyy)
    wet = hm > 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        dx = np.where(wet, (gxx_x + gxy_y) / hm, 0.0)
        dy = np.where(wet, (gxy_x + gyy_y) / hm, 0.0)
    return dx, dy
