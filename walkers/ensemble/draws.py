"""Source draws of ensemble members: start, position, mass, duration and dispersion multiplier,
from each member's own random stream.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from walkers.engine.randomness import source_generator
from walkers.engine.releases import release_mass
from walkers.errors import InputError
from walkers.fields.base import FlowField, centre_to_edges
from walkers.scenario.config import Release
from walkers.scenario.specs import EnsembleSpec

#: Redraws allowed for a start outside the run or a position on land before giving up.
MAX_REDRAWS = 1000


# --------------------------------------------------------------------------------------------
# Source draws
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SourceDraw:
    """What one member drew for the varying release.

    start : release start (s after the run start); x, y : reference position (grid coordinates,
    the first vertex of the release shape); mass : total mass released (kg); duration (s);
    dispersion_multiplier : factor on the scenario's dispersion coefficients (1).
    """

    member: int
    start: float
    x: float
    y: float
    mass: float
    duration: float
    dispersion_multiplier: float


def _metres_per_unit(flow: FlowField, y: float) -> tuple[float, float]:
    if not flow.geographic:
        return 1.0, 1.0
    from walkers.fields.geo import metres_per_degree

    mx, my = metres_per_degree(y)
    return float(mx), float(my)


def _in_water(flow: FlowField, x: float, y: float, frame: int) -> bool:
    """Whether (x, y) lies inside the flow grid in a wet cell of the given frame."""
    if getattr(flow.kind(), "mesh", False):
        face = int(flow.grid.locate(np.array([x]), np.array([y]))[0])
        return face >= 0 and bool(flow.wet.frames(frame, frame)[0][0, face] >= 0.5)
    if flow.curvilinear:
        a, b = flow.grid.to_engine(np.array([x]), np.array([y]))
        x, y = float(a[0]), float(b[0])
        if not np.isfinite(x):
            return False
    xe, ye = centre_to_edges(flow.x), centre_to_edges(flow.y)
    if flow.ndim == 1:
        y = float(flow.y[0])
    if not (xe[0] <= x <= xe[-1] and ye[0] <= y <= ye[-1]):
        return False
    i = min(int(np.searchsorted(xe, x, side="right")) - 1, flow.x.size - 1)
    j = min(int(np.searchsorted(ye, y, side="right")) - 1, flow.y.size - 1)
    return bool(flow.wet.frames(frame, frame)[0][j, i] >= 0.5)


def draw_source(
    spec: EnsembleSpec,
    release: Release,
    *,
    seed: int,
    member: int,
    flow: FlowField,
    run_length: float,
    flow_offset: float = 0.0,
) -> SourceDraw:
    """Draw member ``member``'s source from ``source_generator(seed, member)``.

    The draws come in a fixed order (start, position, mass, duration, dispersion multiplier), each
    only if the spec varies it, so a member's draws depend on nothing but the seed, the member and
    the spec.

    - start: uniform in [start_earliest, start_latest], or normal (sd ``start_sd`` s) about the
      release start, redrawn while outside the run [0, run_length] s (a truncated normal);
    - position: a normal displacement (sd ``location_sd`` m along x and along y; along x only in
      1-D) or uniform in a circle of ``location_radius`` m (r = R sqrt(U), angle 2 pi U), redrawn
      while the displaced reference point is outside the flow grid or in a dry cell at the drawn
      start;
    - mass: log-normal, m = median * spread**Z with Z standard normal (so ln m has sd ln spread),
      or triangular (min, mode, max) (kg);
    - duration: uniform (s); dispersion multiplier: uniform.

    flow_offset : the run start in the flow's time frame (s), to find the frame at the start.
    Raises InputError when no acceptable start or position turns up in :data:`MAX_REDRAWS` tries.
    """
    rng = source_generator(seed, member)
    start = float(release.start)
    if spec.start == "uniform":
        start = float(rng.uniform(spec.start_earliest, spec.start_latest))
    elif spec.start == "normal":
        for _ in range(MAX_REDRAWS):
            start = float(release.start + spec.start_sd * rng.standard_normal())
            if 0.0 <= start <= run_length:
                break
        else:
            raise InputError(
                f"ensemble.start_sd = {spec.start_sd:g} s: no drawn start fell inside the run in "
                f"{MAX_REDRAWS} tries; use a smaller spread or a longer run"
            )
    x0, y0 = (float(v) for v in np.atleast_2d(np.asarray(release.coords, dtype=float))[0])
    x, y = x0, y0
    if spec.location != "fixed":
        mx, my = _metres_per_unit(flow, y0)
        t_flow = flow_offset + start
        frame = 0 if flow.wet.steady else flow.frame_range(t_flow, t_flow)[0]
        for _ in range(MAX_REDRAWS):
            if spec.location == "normal":
                ex, ey = spec.location_sd * rng.standard_normal(2)
            else:
                r = spec.location_radius * math.sqrt(rng.random())
                angle = 2.0 * math.pi * rng.random()
                ex, ey = r * math.cos(angle), r * math.sin(angle)
            x = x0 + ex / mx
            y = y0 if flow.ndim == 1 else y0 + ey / my
            if _in_water(flow, x, y, frame):
                break
        else:
            key = "location_sd" if spec.location == "normal" else "location_radius"
            raise InputError(
                f"ensemble.{key}: no drawn position of release {release.name!r} fell in the "
                f"water in {MAX_REDRAWS} tries; move the release or use a smaller spread"
            )
    mass = release_mass(release)
    if spec.mass == "lognormal":
        mass = float(spec.mass_median * spec.mass_spread ** rng.standard_normal())
    elif spec.mass == "triangular":
        mass = float(rng.triangular(spec.mass_min, spec.mass_mode, spec.mass_max))
    duration = float(release.duration)
    if spec.duration_range is not None:
        duration = float(rng.uniform(*spec.duration_range))
    multiplier = 1.0
    if spec.dispersion_multiplier_range is not None:
        multiplier = float(rng.uniform(*spec.dispersion_multiplier_range))
    return SourceDraw(member, start, x, y, mass, duration, multiplier)


def member_release(release: Release, draw: SourceDraw) -> Release:
    """The varying release as member ``draw.member`` has it (times still from the run start).

    The shape moves rigidly with its reference point. The total mass is the drawn (or original)
    mass whatever the duration: a longer release spreads the same mass over more time. A
    time-series rate is stretched in time by the duration ratio and scaled to the mass.
    """
    coords = np.atleast_2d(np.asarray(release.coords, dtype=np.float64))
    shift = np.array([draw.x, draw.y]) - coords[0]
    moved = dict(coords=coords + shift, start=draw.start, duration=draw.duration)
    if release.rates is None or draw.duration == 0.0:
        return dataclasses.replace(release, **moved, mass=draw.mass, rate_times=None, rates=None)
    stretch = draw.duration / release.duration
    times = (
        draw.start + (np.asarray(release.rate_times, dtype=np.float64) - release.start) * stretch
    )
    shaped = dataclasses.replace(release, **moved, rate_times=times)
    rates = np.asarray(release.rates, dtype=np.float64) * (draw.mass / release_mass(shaped))
    return dataclasses.replace(shaped, rates=rates, mass=draw.mass)
