"""The dispersion coefficients and the drift (1/h) ∇·(h K) of a window of flow frames on cell
centres, computed per frame by finite differences, for the step kernels (``mover.kernel_inputs``):
the drift term keeps a well-mixed tracer well mixed where K or the depth vary (Hunter, Craig &
Phillips 1993, J. Comput. Phys. 106; Visser 1997, Mar. Ecol. Prog. Ser. 158; from memory).
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

from walkers.engine import kernels
from walkers.fields.base import FlowField, FlowWindow
from walkers.fields.geo import metres_per_degree
from walkers.scenario.config import Transport

MIN_DRIFT_DEPTH = 0.05  # m; depths are floored here when dividing by h (drying cells).


def metres_per_grid_unit(flow: FlowField) -> tuple[np.ndarray, np.ndarray]:
    """Metres per grid unit along x and along y for each row of the flow grid, shape (ny,).

    1 on projected grids; on geographic grids the WGS84 radii of curvature
    (:func:`walkers.fields.geo.metres_per_degree`).
    """
    if not flow.geographic:
        return np.ones_like(flow.y), np.ones_like(flow.y)
    return metres_per_degree(flow.y)


#: Sweeps of ``kernels.fill_land``: land cells up to this many cells from water take values
#: carried from it; those further inland take the mean of the field.
FILL_SWEEPS = 3


def _fill_land(a: np.ndarray, wet: np.ndarray) -> np.ndarray:
    """Copy values of wet neighbours onto land cells (a few sweeps), so that finite differences
    across a coast see no jump: no diffusive flux through walls (``kernels.fill_land``; its
    numpy twin is ``twin.fill_land``)."""
    out = np.empty(np.shape(wet))
    a64 = np.ascontiguousarray(np.broadcast_to(a, out.shape), dtype=np.float64)
    if kernels.fill_land(a64, np.ascontiguousarray(wet, dtype=np.bool_), FILL_SWEEPS, out):
        out[np.isnan(out)] = np.nanmean(out) if np.isfinite(out).any() else 0.0
    return out


def aligned_tensor(u, v, k_along, k_across):
    """The flow-aligned dispersion tensor (Kxx, Kyy, Kxy), m2 s-1: K_L along the velocity
    (u, v), K_T across it; K_T both ways where the water is still (Fischer et al. 1979, ch. 5,
    from memory). Arrays broadcast together."""
    speed2 = u * u + v * v
    moving = speed2 > 0.0
    safe = np.where(moving, speed2, 1.0)
    kl = np.where(moving, k_along, k_across)
    kxx = k_across + (kl - k_across) * np.where(moving, u * u / safe, 1.0)
    kyy = k_across + (kl - k_across) * np.where(moving, v * v / safe, 0.0)
    kxy = (kl - k_across) * np.where(moving, u * v / safe, 0.0)
    return kxx, kyy, kxy


def _gradient(a: np.ndarray, coord_m: np.ndarray, axis: int) -> np.ndarray:
    if a.shape[axis] < 2:
        return np.zeros_like(a)
    return np.gradient(a, coord_m, axis=axis)


@dataclass
class DispersionFrames:
    """Drift and dispersion coefficients on cell centres for a window of frames."""

    drift_x: np.ndarray  # (nf, ny, nx) m s-1 (index units s-1 on curvilinear grids)
    drift_y: np.ndarray
    k1: np.ndarray  # (nf or 1, ny, nx) m2 s-1, or (1, 1, 1) when constant
    k2: np.ndarray
    constant: bool
    has_drift: bool
    k12: np.ndarray | None = None  # off-diagonal of a full tensor (curvilinear grids)


CACHE_ENTRIES = 96  # windows of dispersion frames kept per flow (ensemble members reuse them)
FRAME_CACHE_ENTRIES = 8  # frames of the drift kept per flow (neighbouring windows share frames)


def dispersion_frames(
    flow: FlowField, window: FlowWindow, transport: Transport
) -> DispersionFrames:
    """K on cell centres and the drift (1/h) ∇·(h K) for each frame of the window.

    Results are cached on the flow per window and dispersion (not per multiplier, which the
    caller applies), so the members of an ensemble that share a flow compute them once.
    """
    d = transport.dispersion
    key = (window.times.tobytes(), d.mode, d.k1, d.k2, id(d.k1_field), id(d.k2_field))
    cache = flow.__dict__.setdefault("_dispersion_cache", OrderedDict())
    if key in cache:
        cache.move_to_end(key)
        return cache[key][0]
    if flow.curvilinear:
        frames = _index_space_dispersion(flow, window, transport)
    else:
        frames = _dispersion_frames(flow, window, transport)
    # the field arrays are held with the entry so that their ids cannot be reused meanwhile
    cache[key] = (frames, d.k1_field, d.k2_field)
    while len(cache) > CACHE_ENTRIES:
        cache.popitem(last=False)
    return frames


def _dispersion_frames(
    flow: FlowField, window: FlowWindow, transport: Transport
) -> DispersionFrames:
    """K on cell centres and the drift (1/h) ∇·(h K) for each frame of the window.

    Hunter, Craig & Phillips 1993 (J. Comput. Phys. 106) and Visser 1997 (Mar. Ecol. Prog. Ser.
    158) give the drift for varying K; Dimou & Adams 1993 (Estuar. Coast. Shelf Sci. 37) the depth
    term (all from memory). In 1-D the depth is the cross-section area A and the drift is
    (1/A) d(A K)/dx.
    """
    d = transport.dispersion
    ny, nx = flow.depth.data.shape[1:]
    nf = max(window.u.shape[0], window.depth.shape[0])
    if d.mode != "aligned" and window.depth.shape[0] == 1 and window.wet.shape[0] == 1:
        nf = 1  # K, h and so the drift are the same in every frame
    gridded = d.k1_field is not None or d.k2_field is not None
    k1 = np.broadcast_to(d.k1_field if d.k1_field is not None else d.k1, (ny, nx))
    k2 = np.broadcast_to(d.k2_field if d.k2_field is not None else d.k2, (ny, nx))
    mx, my = metres_per_grid_unit(flow)
    x_m = flow.x * (mx.mean() if flow.geographic else 1.0)
    drift_x = np.zeros((nf, ny, nx))
    drift_y = np.zeros((nf, ny, nx))
    depth_varies = window.depth.shape[0] > 1 or np.ptp(window.depth[0][window.wet[0] > 0]) > 0
    if not (gridded or d.mode == "aligned" or depth_varies):
        return DispersionFrames(
            drift_x, drift_y, np.full((1, 1, 1), d.k1), np.full((1, 1, 1), d.k2), True, False
        )
    # A frame's drift depends on that frame alone: kept per frame time, so a frame that several
    # windows hold (each output interval's window shares its ends) is computed once.
    per_frame = flow.__dict__.setdefault("_drift_frame_cache", OrderedDict())
    fields = (d.k1_field, d.k2_field)
    for f in range(nf):
        when = float(window.times[f]) if nf == window.times.size else None
        key = (when, d.mode, d.k1, d.k2, *map(id, fields))
        if when is not None and key in per_frame:
            per_frame.move_to_end(key)
            drift_x[f], drift_y[f] = per_frame[key][0]
            continue
        wet = window.wet[min(f, window.wet.shape[0] - 1)] > 0
        h = _fill_land(window.depth[min(f, window.depth.shape[0] - 1)], wet)
        h = np.maximum(h, MIN_DRIFT_DEPTH)
        if d.mode == "aligned":
            u, v = velocity_at_centres(flow, window, f)
            kxx, kyy, kxy = aligned_tensor(u, v, k1, k2)
        else:
            kxx, kyy, kxy = k1, k2, np.zeros((ny, nx))
        hkxx = _fill_land(h * kxx, wet)
        hkyy = _fill_land(h * kyy, wet)
        hkxy = _fill_land(h * kxy, wet)

        def gx(a: np.ndarray) -> np.ndarray:
            """∂a/∂x in metres (per row on geographic grids)."""
            if flow.geographic:
                return np.gradient(a, flow.x, axis=1) / mx[:, None] if nx > 1 else 0 * a
            return _gradient(a, x_m, 1)

        def gy(a: np.ndarray) -> np.ndarray:
            """∂a/∂y in metres: the difference in degrees over the meridian radius of each row
            (the distance along a meridian is ∫ M dφ, not φ·M(φ))."""
            return (
                _gradient(a, flow.y, 0) / my[:, None]
                if flow.geographic
                else _gradient(a, flow.y, 0)
            )

        drift_x[f] = (gx(hkxx) + gy(hkxy)) / h
        drift_y[f] = (gx(hkxy) + gy(hkyy)) / h
        if when is not None:
            # the field arrays are held with the entry so that their ids cannot be reused
            per_frame[key] = ((drift_x[f].copy(), drift_y[f].copy()), fields)
            while len(per_frame) > FRAME_CACHE_ENTRIES:
                per_frame.popitem(last=False)
    if flow.ndim == 1:
        drift_y[:] = 0.0
    k1f = np.ascontiguousarray(k1, dtype=np.float64)[None]
    k2f = np.ascontiguousarray(k2, dtype=np.float64)[None]
    constant = not gridded
    if constant:
        k1f = np.full((1, 1, 1), d.k1)
        k2f = np.full((1, 1, 1), d.k2)
    return DispersionFrames(drift_x, drift_y, k1f, k2f, constant, True)


def _physical_tensor(flow, window, transport, f, k1, k2):
    """K (m2 s-1) on cell centres in the world's east/north frame: (Kxx, Kyy, Kxy)."""
    d = transport.dispersion
    if d.mode != "aligned":
        return k1, k2, np.zeros_like(k1)
    # the physical velocity u = J ũ at cell centres gives the flow direction
    ua, va = velocity_at_centres(flow, window, f)
    jac = flow.grid.jacobian
    u = jac[..., 0, 0] * ua + jac[..., 0, 1] * va
    v = jac[..., 1, 0] * ua + jac[..., 1, 1] * va
    return aligned_tensor(u, v, k1, k2)


def _index_space_dispersion(
    flow: FlowField, window: FlowWindow, transport: Transport
) -> DispersionFrames:
    """The index-space tensor K̃ = J⁻¹ K J⁻ᵀ and drift (1/H) ∇_ξ·(H K̃), H = h |J|, on the cell
    centres of a curvilinear grid, for each frame of the window (see
    :mod:`walkers.fields.grids`; the drift as in :func:`_dispersion_frames`, with unit spacing)."""
    d = transport.dispersion
    grid = flow.grid
    ny, nx = grid.shape
    nf = max(window.u.shape[0], window.depth.shape[0])
    k1 = np.broadcast_to(d.k1_field if d.k1_field is not None else d.k1, (ny, nx)).astype(float)
    k2 = np.broadcast_to(d.k2_field if d.k2_field is not None else d.k2, (ny, nx)).astype(float)
    inv = grid.inverse
    varies = d.mode == "aligned"
    nk = nf if varies else 1
    if not varies and window.depth.shape[0] == 1 and window.wet.shape[0] == 1:
        nf = 1  # K̃, H and so the drift are the same in every frame
    out = {name: np.zeros((nk, ny, nx)) for name in ("k11", "k22", "k12")}
    drift_x = np.zeros((nf, ny, nx))
    drift_y = np.zeros((nf, ny, nx))
    for f in range(nf):
        wet = window.wet[min(f, window.wet.shape[0] - 1)] > 0
        h = np.maximum(_fill_land(window.depth[min(f, window.depth.shape[0] - 1)], wet), 0.0)
        big_h = np.maximum(h, MIN_DRIFT_DEPTH) * grid.area
        if f < nk:
            kxx, kyy, kxy = _physical_tensor(flow, window, transport, f, k1, k2)
            # K̃ = J⁻¹ K J⁻ᵀ, written out for 2 x 2
            a, b, c, e = inv[..., 0, 0], inv[..., 0, 1], inv[..., 1, 0], inv[..., 1, 1]
            out["k11"][f] = a * a * kxx + 2 * a * b * kxy + b * b * kyy
            out["k22"][f] = c * c * kxx + 2 * c * e * kxy + e * e * kyy
            out["k12"][f] = a * c * kxx + (a * e + b * c) * kxy + b * e * kyy
        g = min(f, nk - 1)
        hk11 = _fill_land(big_h * out["k11"][g], wet)
        hk22 = _fill_land(big_h * out["k22"][g], wet)
        hk12 = _fill_land(big_h * out["k12"][g], wet)
        ones_x, ones_y = np.arange(nx, dtype=float), np.arange(ny, dtype=float)
        drift_x[f] = (_gradient(hk11, ones_x, 1) + _gradient(hk12, ones_y, 0)) / big_h
        drift_y[f] = (_gradient(hk12, ones_x, 1) + _gradient(hk22, ones_y, 0)) / big_h
    return DispersionFrames(drift_x, drift_y, out["k11"], out["k22"], False, True, k12=out["k12"])


def velocity_at_centres(flow: FlowField, window: FlowWindow, f: int):
    """u and v of frame f interpolated to cell centres (for the flow-aligned tensor)."""
    X, Y = np.meshgrid(flow.x, flow.y)
    pts = np.stack([Y.ravel(), X.ravel()], axis=-1)
    out = []
    for var, arr in ((flow.u, window.u), (flow.v, window.v)):
        frame = arr[min(f, arr.shape[0] - 1)]
        if (
            frame.shape == X.shape
            and np.array_equal(var.x, flow.x)
            and np.array_equal(var.y, flow.y)
        ):
            out.append(frame)
            continue
        from scipy.interpolate import RegularGridInterpolator  # only when off the centres

        ys = var.y if var.y.size > 1 else np.array([var.y[0] - 1.0, var.y[0] + 1.0])
        grid = frame if var.y.size > 1 else np.vstack([frame, frame])
        interp = RegularGridInterpolator(
            (ys, var.x), grid, bounds_error=False, fill_value=None, method="linear"
        )
        out.append(interp(pts).reshape(X.shape))
    return out[0], out[1]
