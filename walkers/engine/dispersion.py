"""Dispersion coefficients for a run on a given flow: a scenario's dispersion resolved on the
flow grid (constant, or estimated from depth, speed and bed roughness), and the run's transport.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from walkers.engine.coefficients import estimate_dispersion
from walkers.errors import InputError
from walkers.fields.base import FlowField, GriddedVariable
from walkers.scenario.config import Dispersion, Transport
from walkers.scenario.specs import DispersionSpec, Scenario


def resolve_dispersion(spec: DispersionSpec, flow: FlowField) -> Dispersion:
    """The :class:`Dispersion` for this flow.

    Estimated coefficients are gridded on the flow's cell grid and aligned with the flow:
    K_L = 5.93 h u* (Elder 1959), K_T = transverse_factor h u* (Fischer et al. 1979, ch. 5),
    averaged over the flow frames (u* is computed per frame from that frame's depth and
    speed, the velocities being interpolated linearly to the cell centres). Dry cells get 0.
    """
    if spec.method == "constant":
        assert spec.constant is not None
        return spec.constant

    if getattr(flow.kind(), "mesh", False):
        raise InputError(
            "dispersion.method = 'estimated' is not available on unstructured meshes yet; give "
            "the coefficients as constants (dispersion.longitudinal and transverse, or "
            "coefficient)"
        )
    if flow.ndim != 2:
        raise InputError(
            "dispersion.method = 'estimated' needs a 2-D flow with a water depth; for a 1-D "
            "channel give dispersion.longitudinal (or coefficient) as a constant"
        )
    xc, yc = flow.x, flow.y
    k_l = np.zeros((len(yc), len(xc)))
    k_t = np.zeros_like(k_l)
    n = len(flow.times)
    for i in range(n):
        u = _on_cells(flow.u, flow.u.frames(i, i)[0], xc, yc)
        v = _on_cells(flow.v, flow.v.frames(i, i)[0], xc, yc)
        h = flow.depth.frames(i, i)[0]
        wet = flow.wet.frames(i, i)[0] > 0.5
        h = np.where(wet & np.isfinite(h), h, 0.0)
        kl, kt = estimate_dispersion(
            h,
            np.hypot(u, v),
            manning_n=spec.manning_n,
            drag_coefficient=spec.drag_coefficient,
            transverse_factor=spec.transverse_factor,
        )
        k_l += np.where(wet, np.maximum(kl, spec.minimum), 0.0) / n
        k_t += np.where(wet, np.maximum(kt, spec.minimum), 0.0) / n
    return Dispersion(
        k1=float(k_l.max(initial=0.0)),
        k2=float(k_t.max(initial=0.0)),
        mode="aligned",
        k1_field=k_l,
        k2_field=k_t,
        multiplier=spec.multiplier,
    )


def _on_cells(var: GriddedVariable, frame: np.ndarray, xc: np.ndarray, yc: np.ndarray):
    """A (ny, nx) frame on the variable's own coordinates, linearly interpolated to the cells.

    Missing values (land) count as still water.
    """
    a = np.nan_to_num(np.asarray(frame, dtype=np.float64), nan=0.0)
    if np.array_equal(var.x, xc) and np.array_equal(var.y, yc):
        return a  # already on the cells (interpolating at the nodes gives the same values)
    if len(var.x) > 1:
        a = np.stack([np.interp(xc, var.x, row) for row in a])
    else:
        a = np.broadcast_to(a[:, :1], (a.shape[0], len(xc)))
    if len(var.y) > 1:
        a = np.stack([np.interp(yc, var.y, col) for col in a.T], axis=1)
    else:
        a = np.broadcast_to(a[:1, :], (len(yc), len(xc)))
    return a


def transport_for(scenario: Scenario, flow: FlowField) -> Transport:
    """The :class:`Transport` for a run on ``flow``, with the dispersion resolved on it."""
    return dataclasses.replace(
        scenario.transport_base, dispersion=resolve_dispersion(scenario.dispersion, flow)
    )
