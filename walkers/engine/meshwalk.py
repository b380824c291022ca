"""Compiled primitives of particle tracking on unstructured meshes (numba, cached on disk).

A mesh is the plain arrays of :class:`walkers.fields.mesh.MeshGeometry`: node coordinates (m),
``face_nodes`` (nface, 4) counter-clockwise with -1 as the fourth corner of a triangle, and
``neighbours`` (nface, 4), the face across edge k (corner k to corner k + 1), -1 on the mesh
boundary. Every function here is module-level and calls only module-level compiled functions,
so each caches on disk; ``walkers.engine.meshwalk_twin`` does the same arithmetic with numpy and
the tests hold the two equal to 1e-12.

Contracts
---------
- ``walk_to_face``: the face that contains a point, walking from a start face across the edge
  the point lies farthest outside of (a visibility walk; Devillers, Pion & Teillaud 2002, "Walking
  in a triangulation", Int. J. Found. Comput. Sci. 13, from memory). Faces are closed: a point on
  an edge or a node lies in every face that touches it, and the walk returns the first of them it
  reaches (the tie rule). The walk does not step back into the face it just left, and after at
  most nface steps, or when the point lies outside the current face only across mesh-boundary
  edges (a concave coast), it falls back to testing every face in order (the lowest-numbered face
  containing the point). -1: the point is outside the mesh or not finite.
- ``face_weights``: interpolation weights of the corners: barycentric on triangles, bilinear on
  quadrilaterals with the local coordinates found by Newton's method on the bilinear map
  (isoparametric; both reproduce every linear field exactly). Values on nodes are interpolated
  with them. Values on faces (a finite-volume model's cell means) are used piecewise constant: the
  cell mean is what such a model conserves, a reconstruction would need a limiter to avoid new
  extremes, and a reconstructed velocity could point through a closed edge that the model keeps
  shut.
- ``trace_mesh_path``: the straight path of a step from a point in face f to a candidate end,
  face by face; at a closed edge (mesh boundary not open, or a dry neighbour) the rest of the path
  is mirrored in the edge's line at the crossing point and the trace goes on; at an open edge it
  stops. Same return shape as ``walkers.engine.kernels.trace_path`` with one face index in place
  of the cell's two: (boundary, fraction, placed, x, y, face).
- ``face_drift``: (1/h) ∇·(hK) per face from h and K on the nodes, by the Green–Gauss gradient
  of the nodal interpolant (exact for linear fields; the gradient of the linear interpolant on a
  triangle, the mean gradient of the bilinear one on a quadrilateral), divided by h at the face's
  parametric centre. First order in the face size for smooth h and K.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from walkers.engine.kernels import INLINE, JIT

#: Newton iterations of the inverse bilinear map stop when a step is below this (local units).
NEWTON_TOL = 1e-14
NEWTON_MAX = 30
#: A placed end is moved towards its face's corner mean by at most this many halvings of the
#: distance (starting from 2^-40 of it) until it is inside the closed face (round-off).
NUDGE_MAX = 60


@nb.njit(**INLINE)
def corner_count(face_nodes, f):
    """3 for a triangle, 4 for a quadrilateral."""
    return 3 if face_nodes[f, 3] < 0 else 4


@nb.njit(**INLINE)
def next_corner(k, nv):
    """(k + 1) mod nv for 0 <= k < nv, without an integer division (tens of cycles)."""
    return k + 1 if k + 1 < nv else 0


@nb.njit(**INLINE)
def edge_side(node_x, node_y, a, b, px, py):
    """(b - a) × (p - a), m2: positive when p lies left of the edge a→b (inside a
    counter-clockwise face), zero on its line."""
    ax = node_x[a]
    ay = node_y[a]
    return (node_x[b] - ax) * (py - ay) - (node_y[b] - ay) * (px - ax)


@nb.njit(**INLINE)
def inside_face(node_x, node_y, face_nodes, f, px, py):
    """Whether p lies in the closed face f (on its edges and corners included)."""
    nv = corner_count(face_nodes, f)
    for k in range(nv):
        a = face_nodes[f, k]
        b = face_nodes[f, next_corner(k, nv)]
        if edge_side(node_x, node_y, a, b, px, py) < 0.0:
            return False
    return True


@nb.njit(**JIT)
def brute_force_face(node_x, node_y, face_nodes, px, py):
    """The lowest-numbered closed face containing p, or -1."""
    for g in range(face_nodes.shape[0]):
        if inside_face(node_x, node_y, face_nodes, g, px, py):
            return g
    return -1


@nb.njit(**JIT)
def walk_to_face(node_x, node_y, face_nodes, neighbours, start, px, py):
    """The face containing p, walking from face ``start`` (see the module docstring)."""
    if not (math.isfinite(px) and math.isfinite(py)):
        return -1
    nface = face_nodes.shape[0]
    f = start
    prev = -1
    for _ in range(nface):
        nv = corner_count(face_nodes, f)
        worst = 0.0
        kbest = -1
        out_of_mesh = False
        for k in range(nv):
            a = face_nodes[f, k]
            b = face_nodes[f, next_corner(k, nv)]
            side = edge_side(node_x, node_y, a, b, px, py)
            if side < 0.0:
                g = neighbours[f, k]
                if g < 0:
                    out_of_mesh = True
                elif g != prev:
                    # distance outside the edge's line (m): the walk crosses the farthest
                    d = side / math.hypot(node_x[b] - node_x[a], node_y[b] - node_y[a])
                    if d < worst:
                        worst = d
                        kbest = k
        if kbest < 0:
            if out_of_mesh:
                break
            return f
        prev = f
        f = neighbours[f, kbest]
    return brute_force_face(node_x, node_y, face_nodes, px, py)


@nb.njit(**JIT)
def locate_points(node_x, node_y, face_nodes, neighbours, start, px, py):
    """``walk_to_face`` for arrays of points, each from its own start face."""
    n = px.shape[0]
    out = np.empty(n, np.int64)
    for i in range(n):
        out[i] = walk_to_face(node_x, node_y, face_nodes, neighbours, start[i], px[i], py[i])
    return out


@nb.njit(**JIT)
def bilinear_local(node_x, node_y, face_nodes, f, px, py):
    """Local coordinates (xi, eta) of p in quadrilateral f: the root of
    x(xi, eta) = x0 + a xi + b eta + c xi eta (and the same in y), by Newton's method from the
    centre (0.5, 0.5). For a strictly convex quadrilateral the map is one-to-one."""
    n0 = face_nodes[f, 0]
    n1 = face_nodes[f, 1]
    n2 = face_nodes[f, 2]
    n3 = face_nodes[f, 3]
    x0 = node_x[n0]
    y0 = node_y[n0]
    ax = node_x[n1] - x0
    ay = node_y[n1] - y0
    bx = node_x[n3] - x0
    by = node_y[n3] - y0
    cx = node_x[n2] - node_x[n1] - node_x[n3] + x0
    cy = node_y[n2] - node_y[n1] - node_y[n3] + y0
    rx = px - x0
    ry = py - y0
    xi = 0.5
    eta = 0.5
    for _ in range(NEWTON_MAX):
        fx = ax * xi + bx * eta + cx * xi * eta - rx
        fy = ay * xi + by * eta + cy * xi * eta - ry
        j11 = ax + cx * eta
        j12 = bx + cx * xi
        j21 = ay + cy * eta
        j22 = by + cy * xi
        det = j11 * j22 - j12 * j21
        dxi = (j22 * fx - j12 * fy) / det
        deta = (j11 * fy - j21 * fx) / det
        xi -= dxi
        eta -= deta
        if abs(dxi) + abs(deta) < NEWTON_TOL:
            break
    return xi, eta


@nb.njit(**INLINE)
def face_weights(node_x, node_y, face_nodes, f, px, py, w):
    """Fill ``w`` (4,) with the weights of face f's corners at p: barycentric on a triangle
    (ratios of signed sub-triangle areas), bilinear (1-xi)(1-eta), xi(1-eta), xi eta,
    (1-xi) eta on a quadrilateral; 0 for a triangle's missing fourth corner."""
    if face_nodes[f, 3] < 0:
        a = face_nodes[f, 0]
        b = face_nodes[f, 1]
        c = face_nodes[f, 2]
        whole = edge_side(node_x, node_y, a, b, node_x[c], node_y[c])
        w[0] = edge_side(node_x, node_y, b, c, px, py) / whole
        w[1] = edge_side(node_x, node_y, c, a, px, py) / whole
        w[2] = edge_side(node_x, node_y, a, b, px, py) / whole
        w[3] = 0.0
    else:
        xi, eta = bilinear_local(node_x, node_y, face_nodes, f, px, py)
        w[0] = (1.0 - xi) * (1.0 - eta)
        w[1] = xi * (1.0 - eta)
        w[2] = xi * eta
        w[3] = (1.0 - xi) * eta


@nb.njit(**JIT)
def node_value(values, face_nodes, f, w):
    """A node variable at the point whose corner weights in face f are ``w``."""
    total = 0.0
    for k in range(corner_count(face_nodes, f)):
        total += w[k] * values[face_nodes[f, k]]
    return total


@nb.njit(**JIT)
def interpolate_points(node_x, node_y, face_nodes, values, faces, px, py):
    """A node variable (nnode,) at points in known faces (linear / bilinear)."""
    n = px.shape[0]
    out = np.empty(n)
    w = np.empty(4)
    for i in range(n):
        face_weights(node_x, node_y, face_nodes, faces[i], px[i], py[i], w)
        out[i] = node_value(values, face_nodes, faces[i], w)
    return out


@nb.njit(**JIT)
def nudge_inside(node_x, node_y, face_nodes, f, qx, qy):
    """p moved towards the corner mean of face f until the closed face holds it (a point that
    round-off left a few ulps outside an edge it was reflected at or entered through)."""
    if inside_face(node_x, node_y, face_nodes, f, qx, qy):
        return qx, qy
    nv = corner_count(face_nodes, f)
    mx = 0.0
    my = 0.0
    for k in range(nv):
        mx += node_x[face_nodes[f, k]]
        my += node_y[face_nodes[f, k]]
    mx /= nv
    my /= nv
    step = 2.0**-40
    for _ in range(NUDGE_MAX):
        x = qx + (mx - qx) * step
        y = qy + (my - qy) * step
        if inside_face(node_x, node_y, face_nodes, f, x, y):
            return x, y
        step *= 2.0
        if step >= 1.0:
            break
    return mx, my


@nb.njit(**JIT)
def entry_edge(neighbours, g, f):
    """The edge of face g shared with face f (-1 if none)."""
    for k in range(4):
        if neighbours[g, k] == f:
            return k
    return -1


@nb.njit(**INLINE)
def trace_mesh_path(
    node_x, node_y, face_nodes, neighbours, edge_open, wet_face, f0, px, py, qx, qy, max_refl
):
    """Follow the straight path of a step from p (in wet face f0) to the candidate end q, face
    by face, and reflect it at closed edges (see the module docstring).

    An edge is closed when it is on the mesh boundary and not open (``edge_open`` -1), or when
    the face beyond it is dry (``wet_face`` 0). At a closed edge the rest of the path is mirrored
    in the edge's line and the trace goes on from the crossing point, so the path never leaves
    the water, whatever the step; reflection in a straight wall is exact for Brownian motion (the
    method of images; Carslaw & Jaeger 1959, Conduction of Heat in Solids, §2.2, from memory).
    When the path leaves a face through a corner the lowest-numbered edge at that corner is
    taken. Crossing an open edge ends the path there.

    Returns (boundary, fraction, placed, x, y, face): the open boundary crossed (its index) or
    -1, the fraction of the path travelled at the crossing, whether the end was placed, the end
    (inside ``face``, which is wet) or the crossing point. A path still reflecting after
    ``max_refl`` reflections, or whose end is not finite, is not placed (p and f0 returned).
    """
    if not (math.isfinite(qx) and math.isfinite(qy)):
        return -1, 1.0, False, px, py, f0
    if inside_face(node_x, node_y, face_nodes, f0, qx, qy):
        return -1, 1.0, True, qx, qy, f0
    return cross_faces(
        node_x, node_y, face_nodes, neighbours, edge_open, wet_face, f0, px, py, qx, qy, max_refl
    )


@nb.njit(**JIT)
def cross_faces(
    node_x, node_y, face_nodes, neighbours, edge_open, wet_face, f0, px, py, qx, qy, max_refl
):
    """:func:`trace_mesh_path` for a step that leaves its start face (out of line: the step
    loop inlines only the first tests)."""
    f = f0
    sx = px
    sy = py
    done = 0.0
    reflections = 0
    skip = -1
    for _ in range((face_nodes.shape[0] + 4) * (max_refl + 1)):
        nv = corner_count(face_nodes, f)
        tbest = 2.0
        kbest = -1
        inside = True  # q on the inner side of every edge tested
        for k in range(nv):
            if k == skip:
                continue
            a = face_nodes[f, k]
            b = face_nodes[f, next_corner(k, nv)]
            sq = edge_side(node_x, node_y, a, b, qx, qy)
            if sq < 0.0:
                inside = False
                ss = edge_side(node_x, node_y, a, b, sx, sy)
                t = max(ss / (ss - sq), 0.0)
                if t < tbest:
                    tbest = t
                    kbest = k
        if kbest < 0:
            if inside and skip >= 0:
                # :func:`inside_face` needs only the edge not tested (the one the path came in
                # through), which round-off may leave q a few ulps outside
                a = face_nodes[f, skip]
                b = face_nodes[f, next_corner(skip, nv)]
                if not edge_side(node_x, node_y, a, b, qx, qy) < 0.0:
                    return -1, 1.0, True, qx, qy, f
            x, y = nudge_inside(node_x, node_y, face_nodes, f, qx, qy)
            return -1, 1.0, True, x, y, f
        cx = sx + tbest * (qx - sx)
        cy = sy + tbest * (qy - sy)
        frac = done + tbest * (1.0 - done)
        g = neighbours[f, kbest]
        if g < 0 and edge_open[f, kbest] >= 0:
            return edge_open[f, kbest], frac, False, cx, cy, f
        if g < 0 or wet_face[g] == 0:
            if reflections >= max_refl:
                break
            reflections += 1
            a = face_nodes[f, kbest]
            b = face_nodes[f, next_corner(kbest, nv)]
            ex = node_x[b] - node_x[a]
            ey = node_y[b] - node_y[a]
            along = ((qx - node_x[a]) * ex + (qy - node_y[a]) * ey) / (ex * ex + ey * ey)
            qx = 2.0 * (node_x[a] + along * ex) - qx
            qy = 2.0 * (node_y[a] + along * ey) - qy
            skip = kbest
        else:
            skip = entry_edge(neighbours, g, f)
            f = g
        sx = cx
        sy = cy
        done = frac
    return -1, 1.0, False, px, py, f0


@nb.njit(**JIT)
def trace_points(
    node_x, node_y, face_nodes, neighbours, edge_open, wet_face, faces, px, py, qx, qy, max_refl
):
    """``trace_mesh_path`` for arrays of paths: (boundary, fraction, placed, x, y, face)."""
    n = px.shape[0]
    boundary = np.empty(n, np.int64)
    fraction = np.empty(n)
    placed = np.empty(n, np.bool_)
    x = np.empty(n)
    y = np.empty(n)
    face = np.empty(n, np.int64)
    for i in range(n):
        r = trace_mesh_path(
            node_x,
            node_y,
            face_nodes,
            neighbours,
            edge_open,
            wet_face,
            faces[i],
            px[i],
            py[i],
            qx[i],
            qy[i],
            max_refl,
        )
        boundary[i], fraction[i], placed[i], x[i], y[i], face[i] = r
    return boundary, fraction, placed, x, y, face


@nb.njit(**JIT)
def green_gauss(node_x, node_y, face_nodes, area, values, f):
    """Gradient (∂/∂x, ∂/∂y) of a node variable over face f: (1/A) ∮ φ n ds with φ linear along
    each edge (the trapezoid rule is then exact)."""
    nv = corner_count(face_nodes, f)
    gx = 0.0
    gy = 0.0
    for k in range(nv):
        a = face_nodes[f, k]
        b = face_nodes[f, next_corner(k, nv)]
        mean = 0.5 * (values[a] + values[b])
        # outward normal times length of a counter-clockwise edge a→b: (dy, -dx)
        gx += mean * (node_y[b] - node_y[a])
        gy -= mean * (node_x[b] - node_x[a])
    return gx / area[f], gy / area[f]


@nb.njit(**JIT)
def face_drift(node_x, node_y, face_nodes, area, h, kxx, kxy, kyy):
    """(1/h) ∇·(hK) per face (m s-1), from depth h (m) and the dispersion tensor K (m2 s-1) on
    the nodes: x component (∂(h Kxx)/∂x + ∂(h Kxy)/∂y) / h, y component
    (∂(h Kxy)/∂x + ∂(h Kyy)/∂y) / h (Hunter, Craig & Phillips 1993, J. Comput. Phys. 106, from
    memory), h taken at the face's parametric centre (the mean of its corners). 0 where that h
    is not positive (a dry face)."""
    nface = face_nodes.shape[0]
    nnode = node_x.shape[0]
    hxx = np.empty(nnode)
    hxy = np.empty(nnode)
    hyy = np.empty(nnode)
    for i in range(nnode):
        hxx[i] = h[i] * kxx[i]
        hxy[i] = h[i] * kxy[i]
        hyy[i] = h[i] * kyy[i]
    dx = np.zeros(nface)
    dy = np.zeros(nface)
    for f in range(nface):
        nv = corner_count(face_nodes, f)
        hm = 0.0
        for k in range(nv):
            hm += h[face_nodes[f, k]]
        hm /= nv
        if hm > 0.0:
            gxx_x, _ = green_gauss(node_x, node_y, face_nodes, area, hxx, f)
            gxy_x, gxy_y = green_gauss(node_x, node_y, face_nodes, area, hxy, f)
            _, gyy_y = green_gauss(node_x, node_y, face_nodes, area, hyy, f)
            dx[f] = (gxx_x + gxy_y) / hm
            dy[f] = (gxy_x + gyy_y) / hm
    return dx, dy
