"""A flow turned around in time, for particles moved backward (the adjoint transport).

Backward particles started at a detection at time ``t_ref`` move in backward time
``τ = t_ref − t`` with dX = [−u + (1/h) ∇·(hK)] dτ + √(2K) dW: advection reversed, the drift and
the dispersion as forward (Marchuk 1995, *Adjoint Equations and Analysis of Complex Systems*, ch. 1;
Keats, Yee & Lien 2007, *Atmos. Environ.* 41 — both from memory). The engine computes the drift
from K and the depth frames it is given, so a flow whose frames are put in τ order with u and v
negated, and the depth and wet frames merely reordered, is all the engine needs. Frames are
reversed and negated lazily, frame by frame, as the driver asks for them.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from walkers.fields.base import FlowField, GriddedVariable


class _ReversedFrames:
    """Frames of a lazy ``(nt, ny, nx)`` array in reversed order, optionally negated.

    Only what :meth:`GriddedVariable.frames` asks for is supported: a slice of frames with step 1.
    """

    def __init__(self, data: Any, sign: float) -> None:
        self._data = data
        self._sign = sign
        self.shape = tuple(int(n) for n in data.shape)

    def __getitem__(self, index: slice) -> np.ndarray:
        nt = self.shape[0]
        start, stop, step = index.indices(nt)
        if step != 1:
            raise IndexError("reversed frames: only slices of consecutive frames are read")
        if stop <= start:
            return np.empty((0, *self.shape[1:]))
        block = np.asarray(self._data[nt - stop : nt - start], dtype=np.float64)[::-1]
        return self._sign * block if self._sign != 1.0 else block.copy()


def _reversed(var: GriddedVariable, sign: float) -> GriddedVariable:
    data = var.data if var.steady and sign == 1.0 else _ReversedFrames(var.data, sign)
    return dataclasses.replace(var, data=data)


def reversed_flow(flow: FlowField, t_ref: float) -> FlowField:
    """The flow as seen by particles moving backward in time from ``t_ref`` (s, flow frame).

    Frame times become τ = t_ref − t (s), ascending; u and v change sign; depth and wet are the
    same frames in τ order. The result's ``time_units`` still name the forward frame: its times
    are ages before ``t_ref`` (kept in ``attrs["backward_from"]``), not dates.
    """
    times = t_ref - np.asarray(flow.times, dtype=np.float64)[::-1]
    attrs = dict(flow.attrs)
    attrs["backward_from"] = float(t_ref)
    return dataclasses.replace(
        flow,
        u=_reversed(flow.u, -1.0),
        v=_reversed(flow.v, -1.0),
        depth=_reversed(flow.depth, 1.0),
        wet=_reversed(flow.wet, 1.0),
        times=np.ascontiguousarray(times),
        attrs=attrs,
    )
