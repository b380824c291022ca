"""Prepare a window of flow frames for the step kernels and call them.

The mover turns a :class:`~walkers.fields.base.FlowWindow` and the run's
:class:`~walkers.scenario.config.Transport` into the plain arrays the kernels take: velocity frames
on their own axes, the wet mask on the cell grid, and the dispersion coefficients with the drift
(1/h) ∇·(h K) on cell centres (:mod:`walkers.engine.drift`).

Threads: the compiled step kernel is serial and releases the GIL; :func:`advance` has
:func:`walkers.engine.blocks.spread_blocks` spread ranges of blocks of particles over Python
threads (numba's number of threads, ``numba.set_num_threads``), with the same numbers bitwise
whatever the number of threads.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any, Literal

import numpy as np

from walkers.engine import kernels, twin, vertical
from walkers.engine.blocks import spread_blocks
from walkers.engine.drift import dispersion_frames
from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.fields.base import FlowField, FlowWindow, WindowColumn, centre_to_edges
from walkers.scenario.config import Transport


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
    substep_fraction: float = vertical.VISSER_FRACTION,
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
    the lowest layer's value down to the bed); substep_fraction : the longest vertical substep
    as a fraction of 1/max|d²K_z/dz²| (Visser's criterion).
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
    # read-only whatever the shapes given (a view of the caller's frames is, a broadcast copy
    # would not be): numba types the two apart and would compile the step kernel for each
    h.flags.writeable = False
    u.flags.writeable = False
    params = vertical.column_params(
        mode,
        kz,
        deposition_velocity,
        critical_shear_stress,
        erosion_rate,
        water_density,
        bed_log,
        substep_fraction,
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
    law of the wall below the lowest layer centre, ``vertical.bed_log_law``, and the
    ``substep_fraction`` of Visser's criterion); ustar : u* frames
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
        substep_fraction=float(getattr(settings, "substep_fraction", vertical.VISSER_FRACTION)),
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
