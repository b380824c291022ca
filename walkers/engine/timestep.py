"""The time-step check: is dt short enough for the grid, the flow and the dispersion?

Three limits (common practice for random-walk models; the third from Visser 1997, Mar. Ecol.
Prog. Ser. 158, from memory):

1. advection: |u| dt ≤ one cell along each axis (u against the cell's width along x, v along y),
   so a step follows the flow field's own resolution;
2. dispersion: √(2 K dt) ≤ one cell along each axis, for the same reason (coasts hold at any
   step: the step's path is traced cell by cell and reflected at the first land face);
3. curvature of K: dt ≤ 0.1 / max|∂²K/∂x²|, so that K changes little over one random step
   ("dt ≪ 1/|K''|").

The check either passes, proposes a number of sub-steps that meets all three, or fails with a
message that says which limit was broken, where and by how much.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from walkers.engine.drift import metres_per_grid_unit
from walkers.errors import InputError
from walkers.fields.base import FlowField
from walkers.scenario.config import Transport

VISSER_FACTOR = 0.1


@dataclass(frozen=True)
class TimeStepReport:
    """Outcome of the check for a time step dt (s)."""

    dt: float
    max_speed: float  # m s-1 (the velocity component that crosses its cell fastest)
    min_cell: float  # m
    max_k: float  # m2 s-1
    max_k_curvature: float  # s-1 (|∂²K/∂x²| in m2 s-1 per m2)
    advection_ratio: float  # |u| dt / cell
    dispersion_ratio: float  # √(2K dt) / cell
    curvature_ratio: float  # dt |K''| / 0.1
    where: str
    advection_cell: float = 0.0  # m: the cell width the advection ratio is measured against
    dispersion_cell: float = 0.0  # m: the cell width the dispersion ratio is measured against

    @property
    def worst(self) -> float:
        return max(self.advection_ratio, self.dispersion_ratio, self.curvature_ratio)

    @property
    def ok(self) -> bool:
        return self.worst <= 1.0

    @property
    def substeps_needed(self) -> int:
        """Sub-steps that bring every ratio under 1 (the dispersion ratio falls as √n)."""
        n_adv = math.ceil(self.advection_ratio) if self.advection_ratio > 1 else 1
        n_disp = math.ceil(self.dispersion_ratio**2) if self.dispersion_ratio > 1 else 1
        n_curv = math.ceil(self.curvature_ratio) if self.curvature_ratio > 1 else 1
        return max(n_adv, n_disp, n_curv)

    def longest_step(self) -> float:
        """The longest time step (s) within all three limits (inf when nothing limits it)."""
        limits = [self.dt / self.advection_ratio] if self.advection_ratio > 0 else []
        if self.dispersion_ratio > 0:
            limits.append(self.dt / self.dispersion_ratio**2)
        if self.curvature_ratio > 0:
            limits.append(self.dt / self.curvature_ratio)
        return min(limits) if limits else float("inf")

    def message(self) -> str:
        parts = []
        if self.advection_ratio > 1:
            parts.append(
                f"|u|·dt = {self.max_speed * self.dt:.3g} m exceeds the cell width along that "
                f"velocity component ({self.advection_cell:.3g} m) {self.advection_ratio:.2f} times"
            )
        if self.dispersion_ratio > 1:
            parts.append(
                f"√(2K·dt) = {self.dispersion_ratio * self.dispersion_cell:.3g} m exceeds the "
                f"cell width along it ({self.dispersion_cell:.3g} m) "
                f"{self.dispersion_ratio:.2f} times"
            )
        if self.curvature_ratio > 1:
            parts.append(
                f"dt·|∂²K/∂x²| = {self.dt * self.max_k_curvature:.3g} is not ≪ 1 "
                f"(limit {VISSER_FACTOR})"
            )
        if not parts:
            return f"time step {self.dt:g} s is within all limits"
        return (
            f"time step {self.dt:g} s is too long {self.where}: "
            + "; ".join(parts)
            + f". Use a time step of at most {self.dt / self.substeps_needed:.4g} s, or allow "
            f"sub-steps ({self.substeps_needed} per step)."
        )


def _cell_widths(flow: FlowField) -> tuple[np.ndarray, np.ndarray]:
    """Cell widths (m) along x and along y on the cell grid, shape (ny, nx) each (inf along y in
    1-D). On a curvilinear grid, the lengths of the cell's sides along each index axis."""
    if flow.curvilinear:
        jac = flow.grid.jacobian
        return np.hypot(jac[..., 0, 0], jac[..., 1, 0]), np.hypot(jac[..., 0, 1], jac[..., 1, 1])
    mx, my = metres_per_grid_unit(flow)
    xe, ye = flow.cell_edges()
    wx = np.diff(xe)[None, :] * mx[:, None]
    if flow.ndim == 2 and flow.y.size > 1:
        wy = np.diff(ye)[:, None] * my[:, None] * np.ones((1, flow.x.size))
    else:
        wy = np.full_like(wx, np.inf)
    return wx, wy


def _on_cells(var_x: np.ndarray, var_y: np.ndarray, flow: FlowField, cells: np.ndarray):
    """Values of a cell-grid array at the points of a staggered variable's own axes (the cell
    holding each point)."""
    xe, ye = flow.cell_edges()
    i = np.clip(np.searchsorted(xe, var_x, side="right") - 1, 0, flow.x.size - 1)
    j = np.clip(np.searchsorted(ye, var_y, side="right") - 1, 0, flow.y.size - 1)
    return cells[np.ix_(j, i)]


def face_sizes(geometry) -> np.ndarray:
    """Size (m) of each mesh face for the time-step check: 4 A / P (area A, perimeter P), the side
    of a square and the diameter of the inscribed circle of a triangle (common practice)."""
    return 4.0 * geometry.area / geometry.edge_lengths().sum(axis=1)


def _mesh_time_step(flow: FlowField, transport: Transport, t0: float, t1: float) -> TimeStepReport:
    """The time-step check on a mesh, per face: |u| dt and √(2K dt) against the face's size
    (:func:`face_sizes`; the speed of a face: the largest of its corners' or its own), over the
    frames of [t0, t1]."""
    mesh = flow.attrs["mesh"]
    g = mesh.geometry
    side = face_sizes(g)
    dt = transport.dt
    i0, i1 = flow.frame_range(t0, t1)
    speed = np.zeros(g.nface)
    for i in range(i0, i1 + 1):
        w = flow.window(flow.times[i], flow.times[i])
        s = np.hypot(w.u[0, 0], w.v[0, 0])
        if mesh.u.location == "node":
            corners = np.where(g.face_nodes >= 0, g.face_nodes, g.face_nodes[:, :1])
            s = s[corners].max(axis=1)
        wet = w.wet[0, 0] > 0.5
        speed = np.maximum(speed, np.where(wet, s, 0.0))
    d = transport.dispersion
    k = max(d.k1, d.k2) * d.multiplier
    adv = speed * dt / side
    disp = np.sqrt(2.0 * k * dt) / side
    fa, fd = int(np.argmax(adv)), int(np.argmax(disp))
    return TimeStepReport(
        dt=dt,
        max_speed=float(speed[fa]),
        min_cell=float(side.min()),
        max_k=k,
        max_k_curvature=0.0,
        advection_ratio=float(adv[fa]),
        dispersion_ratio=float(disp[fd]),
        curvature_ratio=0.0,
        advection_cell=float(side[fa]),
        dispersion_cell=float(side[fd]),
        where=f"for this mesh (smallest face size 4A/P {side.min():.3g} m) and flow (fastest "
        f"crossing {speed[fa]:.3g} m/s in face {fa})",
    )


def check_time_step(flow: FlowField, transport: Transport, t0: float, t1: float) -> TimeStepReport:
    """Check dt against the flow frames in [t0, t1] (s) and the dispersion coefficients.

    Each limit is taken per axis and per cell: |u| dt against the cell's width along x, |v| dt
    against its width along y, √(2 K dt) of the coefficient along each axis against the width
    along that axis (flow-aligned dispersion: the larger coefficient against the narrower side).
    On a mesh, per face against its shortest edge.
    """
    if getattr(flow.kind(), "mesh", False):
        return _mesh_time_step(flow, transport, t0, t1)
    dt = transport.dt
    wx, wy = _cell_widths(flow)
    min_cell = float(min(wx.min(), wy.min()))
    i0, i1 = flow.frame_range(t0, t1)
    advection = 0.0
    advection_cell = min_cell
    max_speed = 0.0
    fastest = ""
    for i in range(i0, i1 + 1):
        w = flow.window(flow.times[i], flow.times[i])
        for var, arr, widths, axis in ((flow.u, w.u[0], wx, "x"), (flow.v, w.v[0], wy, "y")):
            if not arr.size:
                continue
            across = _on_cells(var.x, var.y, flow, widths)
            water = _on_cells(var.x, var.y, flow, w.wet[0] > 0)
            # curvilinear grids carry velocity in index units per second: one index unit is
            # the cell's side along that axis
            speed = np.abs(arr) * across if flow.curvilinear else np.abs(arr)
            with np.errstate(over="ignore", invalid="ignore"):
                ratio = np.where(water, speed, 0.0) * dt / across
            if not np.all(np.isfinite(ratio[water])):
                raise InputError(
                    f"flow velocity {var.name or axis!r} ({flow.source}): speeds up to "
                    f"{float(np.nanmax(np.where(water, speed, 0.0))):.3g} m s-1, or not finite, "
                    f"so that |u|·dt overflows at the time step of {dt:g} s; check the "
                    "velocity values and their units in the flow"
                )
            j, k = np.unravel_index(int(np.nanargmax(ratio)), ratio.shape)
            if ratio[j, k] > advection:
                advection = float(ratio[j, k])
                advection_cell = float(across[j, k])
                max_speed = float(speed[j, k])
                where = (
                    f"along grid axis {'i' if axis == 'x' else 'j'} at grid index "
                    f"i = {var.x[k]:.6g}, j = {var.y[j]:.6g}"
                    if flow.curvilinear
                    else f"along {axis} at x = {var.x[k]:.6g}, y = {var.y[j]:.6g}"
                )
                fastest = f"{where} (frame time {flow.times[i]:g} s, {flow.time_units})"
    d = transport.dispersion
    m = d.multiplier
    k1 = np.broadcast_to(d.k1_field if d.k1_field is not None else d.k1, wx.shape) * m
    k2 = np.broadcast_to(d.k2_field if d.k2_field is not None else d.k2, wx.shape) * m
    if d.mode == "aligned":
        across = np.minimum(wx, wy)
        disp_ratio = np.sqrt(2.0 * np.maximum(k1, k2) * dt) / across
    else:
        rx, ry = np.sqrt(2.0 * k1 * dt) / wx, np.sqrt(2.0 * k2 * dt) / wy
        across = np.where(rx >= ry, wx, wy)
        disp_ratio = np.maximum(rx, ry)
    jd = np.unravel_index(int(np.argmax(disp_ratio)), disp_ratio.shape)
    dispersion = float(disp_ratio[jd])
    dispersion_cell = float(across[jd])
    max_k = float(max(k1.max(), k2.max() if flow.ndim == 2 else 0.0))
    mx, my = metres_per_grid_unit(flow)
    fields = [f for f in (d.k1_field, d.k2_field) if f is not None]
    curvature = 0.0
    for f in fields:
        f = np.asarray(f, dtype=np.float64) * d.multiplier
        if flow.curvilinear:
            # second differences along each index axis over the cell's side along it
            for along, side in ((1, wx), (0, wy)):
                if f.shape[along] > 2:
                    second = np.gradient(np.gradient(f, axis=along), axis=along) / side**2
                    curvature = max(curvature, float(np.abs(second).max()))
            continue
        if f.shape[1] > 2:
            gx = np.gradient(np.gradient(f, flow.x * mx.mean(), axis=1), flow.x * mx.mean(), axis=1)
            curvature = max(curvature, float(np.abs(gx).max()))
        if f.shape[0] > 2:
            yy = flow.y * my.mean()
            gy = np.gradient(np.gradient(f, yy, axis=0), yy, axis=0)
            curvature = max(curvature, float(np.abs(gy).max()))
    return TimeStepReport(
        dt=dt,
        max_speed=max_speed,
        min_cell=min_cell,
        max_k=max_k,
        max_k_curvature=curvature,
        advection_ratio=advection,
        dispersion_ratio=dispersion,
        curvature_ratio=dt * curvature / VISSER_FACTOR,
        advection_cell=advection_cell,
        dispersion_cell=dispersion_cell,
        where=f"for this grid (smallest cell {min_cell:.3g} m) and flow (fastest crossing "
        f"{max_speed:.3g} m/s {fastest})",
    )
