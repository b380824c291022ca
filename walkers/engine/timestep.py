"""The time-step check: is dt short enough for the grid, the flow and the dispersion?

Three limits (common practice for random-walk models; the third from Visser 1997, Mar. Ecol.
Prog. Ser. 158, from memory):

1. advection: |u| dt ≤ one cell, so a step never jumps over a coast cell;
2. dispersion: √(2 K dt) ≤ one cell, for the same reason;
3. curvature of K: dt ≤ 0.1 / max|∂²K/∂x²|, so that K changes little over one random step
   ("dt ≪ 1/|K''|").

The check either passes, proposes a number of sub-steps that meets all three, or fails with a
message that says which limit was broken, where and by how much.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from walkers.engine.mover import metres_per_grid_unit
from walkers.fields.base import FlowField
from walkers.scenario.config import Transport

VISSER_FACTOR = 0.1


@dataclass(frozen=True)
class TimeStepReport:
    """Outcome of the check for a time step dt (s)."""

    dt: float
    max_speed: float  # m s-1 (largest velocity component)
    min_cell: float  # m
    max_k: float  # m2 s-1
    max_k_curvature: float  # s-1 (|∂²K/∂x²| in m2 s-1 per m2)
    advection_ratio: float  # |u| dt / cell
    dispersion_ratio: float  # √(2K dt) / cell
    curvature_ratio: float  # dt |K''| / 0.1
    where: str

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

    def message(self) -> str:
        parts = []
        if self.advection_ratio > 1:
            parts.append(
                f"|u|·dt = {self.max_speed * self.dt:.3g} m exceeds the smallest cell "
                f"({self.min_cell:.3g} m) {self.advection_ratio:.2f} times"
            )
        if self.dispersion_ratio > 1:
            parts.append(
                f"√(2K·dt) = {math.sqrt(2 * self.max_k * self.dt):.3g} m exceeds the smallest "
                f"cell ({self.min_cell:.3g} m) {self.dispersion_ratio:.2f} times"
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


def check_time_step(flow: FlowField, transport: Transport, t0: float, t1: float) -> TimeStepReport:
    """Check dt against the flow frames in [t0, t1] (s) and the dispersion coefficients."""
    dt = transport.dt
    mx, my = metres_per_grid_unit(flow)
    dxs = np.diff(flow.x) * mx.min() if flow.x.size > 1 else np.array([np.inf])
    dys = np.diff(flow.y) * my.min() if (flow.y.size > 1 and flow.ndim == 2) else np.array([np.inf])
    min_cell = float(min(dxs.min(), dys.min()))
    i0, i1 = flow.frame_range(t0, t1)
    max_speed = 0.0
    fastest = ""
    for i in range(i0, i1 + 1):
        w = flow.window(flow.times[i], flow.times[i])
        for var, arr in ((flow.u, w.u[0]), (flow.v, w.v[0])):
            if not arr.size:
                continue
            j, k = np.unravel_index(int(np.argmax(np.abs(arr))), arr.shape)
            if abs(arr[j, k]) > max_speed:
                max_speed = float(abs(arr[j, k]))
                fastest = (
                    f"at x = {var.x[k]:.6g}, y = {var.y[j]:.6g} (frame time {flow.times[i]:g} s, "
                    f"{flow.time_units})"
                )
    d = transport.dispersion
    fields = [f for f in (d.k1_field, d.k2_field) if f is not None]
    ks = [np.max(f) for f in fields] + [d.k1 if d.k1_field is None else 0.0]
    ks.append(d.k2 if d.k2_field is None else 0.0)
    max_k = float(max(ks)) * d.multiplier
    curvature = 0.0
    for f in fields:
        f = np.asarray(f, dtype=np.float64) * d.multiplier
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
        advection_ratio=max_speed * dt / min_cell,
        dispersion_ratio=math.sqrt(2.0 * max_k * dt) / min_cell,
        curvature_ratio=dt * curvature / VISSER_FACTOR,
        where=f"for this grid (smallest cell {min_cell:.3g} m) and flow (fastest "
        f"{max_speed:.3g} m/s {fastest})",
    )
