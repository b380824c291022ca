"""Turn release definitions into particles: where each starts, when, and with what mass.

Instantaneous releases put all particles in at the start time. Continuous releases space release
times evenly (stratified: one particle at the middle of each of n equal sub-intervals of the
duration), and give each particle the mass released in its sub-interval, so a constant rate r over
duration T gives mass r·T/n a particle and the total is exactly r·T. For a time-series rate the
sub-intervals hold equal shares of the integrated mass (trapezoidal rule), so particles are denser
where the rate is high and every particle carries the same mass.

Positions: point; evenly along a line (stratified); uniform in a circle or a polygon (rejection
sampling in the bounding box). Shapes are in grid coordinates; circle radii are in metres.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from walkers.engine.state import ParticleState
from walkers.errors import InputError
from walkers.scenario.config import Release


def release_times_and_masses(release: Release) -> tuple[np.ndarray, np.ndarray]:
    """Release time (s) and mass (kg) of each particle of one release."""
    n = int(release.particles)
    if release.duration == 0.0:
        return np.full(n, float(release.start)), np.full(n, release.mass / n)
    if release.rates is None:
        times = release.start + (np.arange(n) + 0.5) * (release.duration / n)
        return times, np.full(n, release.mass / n)
    rt = np.asarray(release.rate_times, dtype=np.float64)
    rv = np.asarray(release.rates, dtype=np.float64)
    fine = np.linspace(0.0, release.duration, 4097)
    rate = np.interp(fine, rt, rv)
    cumulative = np.concatenate([[0.0], np.cumsum(0.5 * (rate[1:] + rate[:-1]) * np.diff(fine))])
    total = cumulative[-1]
    if not total > 0:
        raise InputError(f"release {release.name!r}: the rate series releases no mass")
    targets = (np.arange(n) + 0.5) * (total / n)
    times = release.start + np.interp(targets, cumulative, fine)
    return times, np.full(n, total / n)


def release_mass(release: Release) -> float:
    """Total mass (kg) the release puts in the water."""
    return float(release_times_and_masses(release)[1].sum())


def release_positions(
    release: Release, rng: np.random.Generator, metres_per_unit: tuple[float, float] = (1.0, 1.0)
) -> tuple[np.ndarray, np.ndarray]:
    """Starting positions (grid coordinates) of the particles of one release.

    metres_per_unit : metres per grid unit along x and y at the release (1 on projected grids),
    used to turn a circle radius in metres into grid units.
    """
    n = int(release.particles)
    c = np.atleast_2d(np.asarray(release.coords, dtype=np.float64))
    if release.shape == "point":
        return np.full(n, c[0, 0]), np.full(n, c[0, 1])
    if release.shape == "line":
        if len(c) < 2:
            raise InputError(f"release {release.name!r}: a line needs two or more vertices")
        seg = np.hypot(np.diff(c[:, 0]), np.diff(c[:, 1]))
        along = np.concatenate([[0.0], np.cumsum(seg)])
        s = (np.arange(n) + rng.random(n)) / n * along[-1]
        return np.interp(s, along, c[:, 0]), np.interp(s, along, c[:, 1])
    if release.shape == "circle":
        r = release.radius * np.sqrt(rng.random(n))
        a = 2.0 * np.pi * rng.random(n)
        return (
            c[0, 0] + r * np.cos(a) / metres_per_unit[0],
            c[0, 1] + r * np.sin(a) / metres_per_unit[1],
        )
    if len(c) < 3:
        raise InputError(f"release {release.name!r}: a polygon needs three or more vertices")
    return _uniform_in_polygon(c, n, rng)


def _uniform_in_polygon(
    ring: np.ndarray, n: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    lo = ring.min(axis=0)
    hi = ring.max(axis=0)
    xs: list[np.ndarray] = []
    ys: list[np.ndarray] = []
    have = 0
    while have < n:
        batch = max(2 * (n - have), 64)
        px = lo[0] + (hi[0] - lo[0]) * rng.random(batch)
        py = lo[1] + (hi[1] - lo[1]) * rng.random(batch)
        inside = points_in_polygon(px, py, ring)
        xs.append(px[inside])
        ys.append(py[inside])
        have += int(inside.sum())
    return np.concatenate(xs)[:n], np.concatenate(ys)[:n]


def points_in_polygon(px: np.ndarray, py: np.ndarray, ring: np.ndarray) -> np.ndarray:
    """Even-odd rule point-in-polygon test (ray casting)."""
    inside = np.zeros(px.shape, dtype=bool)
    xr, yr = ring[:, 0], ring[:, 1]
    j = len(ring) - 1
    for i in range(len(ring)):
        crosses = (yr[i] > py) != (yr[j] > py)
        with np.errstate(divide="ignore", invalid="ignore"):
            xcross = (xr[j] - xr[i]) * (py - yr[i]) / (yr[j] - yr[i]) + xr[i]
        inside ^= crosses & (px < xcross)
        j = i
    return inside


def make_particles(
    releases: Sequence[Release],
    rng: np.random.Generator,
    metres_per_unit: tuple[float, float] = (1.0, 1.0),
) -> tuple[ParticleState, np.ndarray]:
    """All particles of all releases, and the index of the release each belongs to."""
    xs, ys, ms, ts, owner = [], [], [], [], []
    for k, rel in enumerate(releases):
        x, y = release_positions(rel, rng, metres_per_unit)
        t, m = release_times_and_masses(rel)
        xs.append(x)
        ys.append(y)
        ms.append(m)
        ts.append(t)
        owner.append(np.full(len(x), k, dtype=np.int32))
    state = ParticleState.from_arrays(
        np.concatenate(xs), np.concatenate(ys), np.concatenate(ms), np.concatenate(ts)
    )
    return state, np.concatenate(owner)
