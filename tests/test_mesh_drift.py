"""The drift (1/h) ∇·(hK) on a mesh (walkers.engine.meshwalk.face_drift) against the analytic
value, within a discretisation error bound derived below."""

from __future__ import annotations

import numpy as np
from mesh_files import jittered_mesh

from walkers.engine import meshwalk as mw
from walkers.fields.mesh import build_geometry

# Quadratic depth h and fluxes P = hK (m, m3 s-1): their second derivatives are constants, so the
# bound below is exact to evaluate. Positive on the 1536 m × 1024 m test rectangle.
H = (4.0, 0.002, -0.001, 2e-6, 0.0, 0.0)  # c, x, y, x², xy, y²
PXX = (10.0, 0.01, 0.005, 0.0, 1e-5, 3e-6)
PXY = (1.0, 0.002, 0.0, 4e-6, 0.0, 0.0)
PYY = (8.0, 0.0, -0.004, 0.0, 3e-6, 2e-6)


def _value(c, x, y):
    return c[0] + c[1] * x + c[2] * y + c[3] * x * x + c[4] * x * y + c[5] * y * y


def _gradient(c, x, y):
    return c[1] + 2 * c[3] * x + c[4] * y, c[2] + c[4] * x + 2 * c[5] * y


def _hessian_norm(c):
    return float(np.linalg.norm(np.array([[2 * c[3], c[4]], [c[4], 2 * c[5]]]), 2))


def _drift(g, fields):
    h = _value(fields[0], g.node_x, g.node_y)
    kxx, kxy, kyy = (_value(c, g.node_x, g.node_y) / h for c in fields[1:])
    return mw.face_drift(g.node_x, g.node_y, g.face_nodes, g.area, h, kxx, kxy, kyy)


def _analytic(g, fields):
    """(1/h)(∂x Pxx + ∂y Pxy, ∂x Pxy + ∂y Pyy) at each face centroid (Hunter, Craig & Phillips
    1993, J. Comput. Phys. 106, from memory: the drift that keeps a well-mixed tracer mixed)."""
    x, y = g.centroid_x, g.centroid_y
    h, pxx, pxy, pyy = fields
    dxx, _ = _gradient(pxx, x, y)
    dxy_x, dxy_y = _gradient(pxy, x, y)
    _, dyy = _gradient(pyy, x, y)
    hc = _value(h, x, y)
    return (dxx + dxy_y) / hc, (dxy_x + dyy) / hc


def _bounds(g, fields):
    """Per triangle, a bound on |drift − analytic| at the centroid c.

    The Green–Gauss gradient G of a triangle's nodal values is the gradient of its linear
    interpolant, so G·(x_i − x_0) = Q(x_i) − Q(x_0). Taylor's theorem about c gives
    Q(x_i) = Q(c) + ∇Q(c)·(x_i − c) + R_i with |R_i| ≤ ½ M |x_i − c|², M the largest second
    derivative (Hessian 2-norm). Hence E (G − ∇Q(c)) = r with rows E_i = x_i − x_0 and
    |r_i| ≤ M d², d = max |x_i − c|, so |G − ∇Q(c)| ≤ ‖E⁻¹‖₂ √2 M d². The corner mean of h
    differs from h(c) by at most ½ M_h d². With e the error of ∇·P and h̄ the corner mean,
    |P'/h̄ − P'/h(c)| ≤ e / h̄ + |P'| |h̄ − h(c)| / (h̄ h(c)).  (Derived here; Taylor's theorem.)
    """
    c = g.face_nodes[:, :3]
    x, y = g.node_x[c], g.node_y[c]
    cx, cy = g.centroid_x, g.centroid_y
    d2 = np.max((x - cx[:, None]) ** 2 + (y - cy[:, None]) ** 2, axis=1)
    e = np.stack(
        [
            np.stack([x[:, 1] - x[:, 0], y[:, 1] - y[:, 0]], 1),
            np.stack([x[:, 2] - x[:, 0], y[:, 2] - y[:, 0]], 1),
        ],
        1,
    )
    inv = np.linalg.norm(np.linalg.inv(e), 2, axis=(1, 2))
    grad_err = [inv * np.sqrt(2.0) * _hessian_norm(p) * d2 for p in fields[1:]]
    hbar = np.mean(_value(fields[0], x, y), axis=1)
    hc = _value(fields[0], cx, cy)
    dh = 0.5 * _hessian_norm(fields[0]) * d2
    ax, ay = _analytic(g, fields)
    bx = (grad_err[0] + grad_err[1]) / hbar + np.abs(ax * hc) * dh / (hbar * hc)
    by = (grad_err[1] + grad_err[2]) / hbar + np.abs(ay * hc) * dh / (hbar * hc)
    return bx, by


def _triangles(n):
    x, y, faces = jittered_mesh(
        n, 2 * n // 3, 1536 // n, jitter=1536 // n // 5, seed=4, quad_every=0
    )
    return build_geometry(x, y, faces, where="test")


def test_drift_within_the_discretisation_bound():
    fields = (H, PXX, PXY, PYY)
    for n in (12, 24):
        g = _triangles(n)
        dx, dy = _drift(g, fields)
        ax, ay = _analytic(g, fields)
        bx, by = _bounds(g, fields)
        assert np.all(np.abs(dx - ax) <= bx) and np.all(np.abs(dy - ay) <= by)
    # the twin: the divergence of K alone, without the depth (a classic mistake), breaks the bound
    g = _triangles(24)
    h = _value(H, g.node_x, g.node_y)
    kxx, kxy, kyy = (_value(c, g.node_x, g.node_y) / h for c in fields[1:])
    wx, _ = mw.face_drift(g.node_x, g.node_y, g.face_nodes, g.area, np.ones_like(h), kxx, kxy, kyy)
    ax, _ = _analytic(g, fields)
    bx, _ = _bounds(g, fields)
    assert np.mean(np.abs(wx - ax) > bx) > 0.5


def test_drift_is_exact_for_linear_depth_and_fluxes_on_mixed_faces():
    """Linear h and hK: the Green–Gauss gradient is exact on triangles and quadrilaterals (the
    divergence theorem with the trapezoid rule on straight edges), and the corner mean is h at
    the centre of a triangle; on quadrilaterals h is compared at the parametric centre."""
    x, y, faces = jittered_mesh(12, 8, 64, jitter=12, seed=2, quad_every=2)
    g = build_geometry(x, y, faces, where="test")
    lin = tuple((*c[:3], 0.0, 0.0, 0.0) for c in (H, PXX, PXY, PYY))
    dx, dy = _drift(g, lin)
    hm = g.face_mean_of_nodes(_value(lin[0], g.node_x, g.node_y))
    ex = (lin[1][1] + lin[2][2]) / hm
    ey = (lin[2][1] + lin[3][2]) / hm
    np.testing.assert_allclose(dx, ex, rtol=1e-11)
    np.testing.assert_allclose(dy, ey, rtol=1e-11)
    assert np.any(g.nvert == 4)
