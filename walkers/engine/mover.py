"""Prepare a window of flow frames for the step kernels and call them.

The mover turns a :class:`~walkers.fields.base.FlowWindow` and the run's
:class:`~walkers.scenario.config.Transport` into the plain arrays the kernels take: velocity frames
on their own axes, the wet mask on the cell grid, and the dispersion coefficients with the drift
(1/h) ∇·(h K) on cell centres, computed once per frame by finite differences.

Threads: the compiled step kernel is serial and releases the GIL; :func:`advance` has
:func:`walkers.engine.blocks.spread_blocks` spread ranges of blocks of particles over Python
threads (numba's number of threads, ``numba.set_num_threads``), with the same numbers bitwise
whatever the number of threads.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass, replace
from typing import Any, Literal

import numpy as np

from walkers.engine import kernels, twin, vertical
from walkers.engine.blocks import spread_blocks
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.fields.base import FlowField, FlowWindow, WindowColumn, centre_to_edges
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


def _fill_land(a: np.ndarray, wet: np.ndarray) -> np.ndarray:
    """Copy values of wet neighbours onto land cells (a few sweeps), so that finite differences
    across a coast see no jump: no diffusive flux through walls."""
    out = np.where(wet, a, np.nan)
    for _ in range(3):
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
        key = (when, window.times.size if when is None else 0, d.mode, d.k1, d.k2, *map(id, fields))
        if when is not None and key in per_frame:
            per_frame.move_to_end(key)
            drift_x[f], drift_y[f] = per_frame[key][0]
            continue
        wet = window.wet[min(f, window.wet.shape[0] - 1)] > 0
        h = _fill_land(window.depth[min(f, window.depth.shape[0] - 1)], wet)
        h = np.maximum(h, MIN_DRIFT_DEPTH)
        if d.mode == "aligned":
            u, v = _velocity_at_centres(flow, window, f)
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
    ua, va = _velocity_at_centres(flow, window, f)
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


def edge_modes(transport: Transport, flow: FlowField) -> np.ndarray:
    """1 (absorbing) or 0 (reflecting) for each edge of the flow's grid, in the engine's order.

    The scenario names edges by the grid's names (west ... north on rectilinear grids, first_i
    ... last_j on curvilinear ones); edges not named are absorbing. Naming edges the grid does
    not have is an InputError (a setting would otherwise be ignored)."""
    kind = flow.kind()
    names = kind.edge_names
    unknown = [e for e in transport.edges if e not in names]
    if unknown:
        from walkers.fields.grids import compass

        faces = ", ".join(
            f"{n} (faces {compass(b)})" for n, b in zip(names, kind.edge_bearings(), strict=True)
        )
        raise InputError(
            f"[edges] {', '.join(unknown)}: this flow's grid ({kind.describe()}) has the edges "
            f"{faces}; name those in [edges]"
        )
    return np.array(
        [1 if transport.edges.get(e, "absorbing") == "absorbing" else 0 for e in names],
        dtype=np.int64,
    )


def _velocity_at_centres(flow: FlowField, window: FlowWindow, f: int):
    """u and v of frame f interpolated to cell centres (for the flow-aligned tensor)."""
    from scipy.interpolate import RegularGridInterpolator

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
        ys = var.y if var.y.size > 1 else np.array([var.y[0] - 1.0, var.y[0] + 1.0])
        grid = frame if var.y.size > 1 else np.vstack([frame, frame])
        interp = RegularGridInterpolator(
            (ys, var.x), grid, bounds_error=False, fill_value=None, method="linear"
        )
        out.append(interp(pts).reshape(X.shape))
    return out[0], out[1]


@dataclass
class KernelInputs:
    """The argument tuples of ``kernels.advance`` for one window."""

    flow: tuple
    cells: tuple
    disp: tuple
    times: np.ndarray
    opts: np.ndarray
    edges_mode: np.ndarray
    decay_rate: float
    topology: tuple | None = None  # on a mesh: face_nodes, neighbours, edge_open (and faces)
    #: in three dimensions (depth, u*, params, layer centres, w heights, w, K_z heights, K_z):
    #: see ``kernels.advance`` and ``with_column``
    column: tuple | None = None


def kernel_inputs(flow: FlowField, window: FlowWindow, transport: Transport) -> KernelInputs:
    """Build the kernel argument tuples for a window of frames."""
    inv = kernels.axis_inverse_spacing
    ux, uy, vx, vy = (
        np.ascontiguousarray(a, np.float64) for a in (flow.u.x, flow.u.y, flow.v.x, flow.v.y)
    )
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    cx, cy = np.ascontiguousarray(flow.x, np.float64), np.ascontiguousarray(flow.y, np.float64)
    disp = dispersion_frames(flow, window, transport)
    kconst = np.array(
        [
            transport.dispersion.k1 if disp.constant else -1.0,
            transport.dispersion.k2 if disp.constant else -1.0,
            transport.dispersion.multiplier,
        ]
    )
    d = transport.dispersion
    opts = np.array(
        [
            flow.ndim,
            1 if transport.scheme == "rk4" else 0,
            1 if d.mode == "aligned" else 0,
            1 if disp.has_drift and transport.drift_correction else 0,
            1 if transport.bridge else 0,
            transport.max_reflections,
            1 if flow.geographic and not flow.curvilinear else 0,
            1 if disp.k12 is not None else 0,
        ],
        dtype=np.int64,
    )
    edges_mode = edge_modes(transport, flow)
    flow_t = (
        ux,
        uy,
        window.u,
        vx,
        vy,
        window.v,
        np.array([inv(ux), inv(uy), inv(vx), inv(vy)]),
    )
    cells_t = (xe, ye, window.wet, cx, cy, np.array([inv(xe), inv(ye), inv(cx), inv(cy)]))
    k12 = disp.k12 if disp.k12 is not None else np.zeros((1, 1, 1))
    disp_t = (
        disp.drift_x * d.multiplier,
        disp.drift_y * d.multiplier,
        disp.k1,
        disp.k2,
        kconst,
        k12,
    )
    return KernelInputs(
        flow_t, cells_t, disp_t, window.times, opts, edges_mode, transport.decay_rate
    )


def advance(
    state: ParticleState,
    inputs: KernelInputs,
    t0: float,
    dt: float,
    nsteps: int,
    step0: int,
    key: int,
    stepper: Literal["fast", "reference"] = "fast",
) -> None:
    """Advance all particles in place by nsteps steps of dt seconds from t0 (s).

    ``stepper`` "fast" runs the compiled kernels, "reference" their numpy twin (same numbers).
    Each particle's dispersion is further multiplied by ``state.dispersion_multiplier`` (1 if None).
    """
    mod = kernels if stepper == "fast" else twin
    # the compiled kernel's blocks of particles over threads (the twin runs on this thread)
    threads = {"spread": spread_blocks} if stepper == "fast" else {}
    topology = None
    if inputs.topology is not None:
        if state.face is None or state.face.shape[0] != len(state):
            state.face = np.full(len(state), -1, dtype=np.int64)
        topology = (*inputs.topology[:3], state.face)
    multiplier = state.dispersion_multiplier
    if multiplier is None:
        multiplier = np.ones(len(state))
    column = None
    if inputs.column is not None:
        if state.sigma is None or state.settling is None:
            raise InputError(
                "a three-dimensional step needs each particle's place in its column: the "
                "particle state has no sigma; place the particles with ParticleState.in_column"
            )
        column = (state.sigma, state.settling, *inputs.column)
    mod.advance(
        state.x,
        state.y,
        state.mass,
        state.initial_mass,
        state.release_time,
        state.exit_time,
        state.status,
        inputs.flow,
        inputs.cells,
        (*inputs.disp, np.ascontiguousarray(multiplier, dtype=np.float64)),
        inputs.times,
        inputs.opts,
        inputs.edges_mode,
        float(t0),
        float(dt),
        int(nsteps),
        int(step0),
        np.uint64(key),
        float(inputs.decay_rate),
        topology,
        column,
        **threads,
    )


def with_column(
    inputs: KernelInputs,
    depth: np.ndarray,
    ustar: np.ndarray | float,
    mode: int,
    kz: float = 0.0,
    deposition_velocity: float = 0.0,
    dt: float | None = None,
    *,
    layers: WindowColumn | None = None,
    critical_shear_stress: float = 0.0,
    erosion_rate: float = 0.0,
    water_density: float = 1025.0,
    bed_log: tuple[float, float] = (0.0, 0.0),
) -> KernelInputs:
    """The kernel inputs of a window with the vertical step (``walkers.engine.vertical``).

    depth : water depth frames on the cells (nf or 1, ny, nx), m; ustar : bed shear velocity
    (m s-1), a number or frames of the depth's shape; mode : ``vertical.KZ_CONSTANT`` (K_z = kz,
    m2 s-1), ``vertical.KZ_PARABOLIC`` or ``vertical.KZ_FILE`` (the K_z of ``layers``);
    deposition_velocity : w_d (m s-1), 0 a reflecting bed; dt : the run's step (s), checked
    against the number of vertical substeps Visser's criterion asks
    (``vertical.check_substeps``) when given.
    layers : the window's vertical structure (``FlowWindow.column``): u and v in layers are
    sampled at each particle's height, w is added to the vertical step where given;
    critical_shear_stress τ_c (Pa; 0: particles on the bed stay there), erosion_rate M_e (s-1)
    and water_density ρ (kg m-3): the return of particles on the bed to the water
    (``vertical.resuspension_chance``); bed_log : (a, b) of ln(h/z0) = 1 + a h^b, the law of the
    wall of layered velocities below their lowest layer centre (``vertical.bed_log_law``; a = 0:
    the lowest layer's value down to the bed).
    """
    if mode not in (vertical.KZ_CONSTANT, vertical.KZ_PARABOLIC, vertical.KZ_FILE):
        raise InputError(
            f"vertical diffusivity mode {mode!r}: give 1 (constant), 2 (parabolic) or 3 (from "
            "the flow file)"
        )
    for name, value in (
        ("vertical diffusivity", kz),
        ("deposition velocity", deposition_velocity),
        ("critical shear stress", critical_shear_stress),
        ("erosion rate", erosion_rate),
        ("water density", water_density),
    ):
        if not (np.isfinite(value) and value >= 0.0):
            raise InputError(f"{name} = {value!r}: must be a number >= 0 (SI units)")
    h = np.ascontiguousarray(depth, dtype=np.float64)
    if h.ndim != 3:
        raise InputError(f"column depth of shape {h.shape}: give frames (nf, ny, nx) in metres")
    u = np.asarray(ustar, dtype=np.float64)
    shape = np.broadcast_shapes(h.shape, u.shape)
    h = np.ascontiguousarray(np.broadcast_to(h, shape))
    u = np.ascontiguousarray(np.broadcast_to(u, shape))
    params = vertical.column_params(
        mode, kz, deposition_velocity, critical_shear_stress, erosion_rate, water_density, bed_log
    )
    none, flat = np.zeros(0), np.zeros((1, 1, 1))
    levels, wlev, w, klev, kzf = np.zeros(1), none, flat, none, flat
    flow = inputs.flow
    if layers is not None:
        if layers.levels.size > 1:
            levels = np.ascontiguousarray(layers.levels, dtype=np.float64)
            flow = (*flow[:2], layers.u, *flow[3:5], layers.v, flow[6])
        if layers.w_levels.size:
            wlev, w = layers.w_levels, layers.w
        if layers.kz_levels.size:
            klev, kzf = layers.kz_levels, layers.kz
    if mode == vertical.KZ_FILE and not klev.size:
        raise InputError(
            "vertical diffusivity from the flow file: the file has no vertical diffusivity "
            "(CF standard name ocean_vertical_tracer_diffusivity or ocean_vertical_diffusivity); "
            "add it, or choose a parabolic or constant K_z"
        )
    if dt is not None:
        vertical.check_substeps(dt, h, u, params, klev, kzf)
    arrays = tuple(np.ascontiguousarray(a, dtype=np.float64) for a in (levels, wlev, w, klev, kzf))
    return replace(inputs, flow=flow, column=(h, u, params, *arrays))


#: The K_z modes of the vertical settings' ``diffusivity`` (``Vertical``, walkers.scenario.config).
KZ_MODES = {
    "constant": vertical.KZ_CONSTANT,
    "parabolic": vertical.KZ_PARABOLIC,
    "file": vertical.KZ_FILE,
}


def column_inputs(
    inputs: KernelInputs,
    flow: FlowField,
    window: FlowWindow,
    settings: Any,
    ustar: np.ndarray | float,
    dt: float,
    depth: np.ndarray | None = None,
) -> KernelInputs:
    """The kernel inputs of a window in three dimensions: the call a run makes per window.

    settings : the scenario's vertical settings (``diffusivity`` "constant", "parabolic" or
    "file", ``coefficient`` K_z (m2 s-1), ``deposition_velocity`` (m s-1),
    ``critical_shear_stress`` (Pa; None: no resuspension), ``erosion_rate`` (s-1),
    ``water_density`` (kg m-3), the bed roughness ``manning_n`` or ``drag_coefficient`` of the
    law of the wall below the lowest layer centre, ``vertical.bed_log_law``); ustar : u* frames
    on the cells (m s-1); dt : the step (s); depth : the columns' depth frames (m; None:
    ``window.depth``, the cells'; on a mesh the faces', (nf or 1, 1, nface),
    ``mesh_inputs.column_depths``).
    The window's layered velocities, w and K_z (``window.column``, kept when the flow was
    opened with ``column=True``) are used where the flow has them.
    """
    mode = KZ_MODES.get(settings.diffusivity)
    if mode is None:
        raise InputError(
            f"vertical.diffusivity = {settings.diffusivity!r}: give one of {', '.join(KZ_MODES)}"
        )
    if mode == vertical.KZ_FILE and window.column is None:
        raise InputError(
            f'vertical.diffusivity = "file": the flow {flow.source} has no layers, so no '
            "vertical diffusivity profile; give a layered flow file with K_z, or choose a "
            "parabolic or constant K_z"
        )
    tau_c = settings.critical_shear_stress
    return with_column(
        inputs,
        window.depth if depth is None else depth,
        ustar,
        mode,
        float(settings.coefficient or 0.0),
        float(settings.deposition_velocity or 0.0),
        dt=dt,
        layers=window.column,
        critical_shear_stress=0.0 if tau_c is None else float(tau_c),
        erosion_rate=float(settings.erosion_rate or 0.0),
        water_density=float(getattr(settings, "water_density", 1025.0)),
        bed_log=vertical.bed_log_law(
            getattr(settings, "manning_n", None), getattr(settings, "drag_coefficient", None)
        ),
    )


def advect_points(
    flow: FlowField,
    x: np.ndarray,
    y: np.ndarray,
    t0: float,
    t1: float,
    dt: float,
    scheme: Literal["euler", "rk4"] = "rk4",
) -> tuple[np.ndarray, np.ndarray]:
    """Carry points with the flow alone (no dispersion) from t0 to t1 (s); returns (x, y).

    Edges reflect, coasts reflect; useful to compare paths through different file layouts.
    """
    from walkers.scenario.config import Dispersion

    n = int(round((t1 - t0) / dt))
    transport = Transport(
        dt=dt,
        dispersion=Dispersion(k1=0.0, k2=0.0),
        scheme=scheme,
        edges=dict.fromkeys(flow.kind().edge_names, "reflecting"),
    )
    x = np.atleast_1d(np.asarray(x, dtype=np.float64)).copy()
    y = np.atleast_1d(np.asarray(y, dtype=np.float64)).copy()
    state = ParticleState.from_arrays(x, y, np.ones(x.size), np.full(x.size, t0))
    inputs = kernel_inputs(flow, flow.window(t0, t1), transport)
    advance(state, inputs, t0, dt, n, 0, 0)
    return state.x, state.y
