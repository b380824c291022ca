"""Ensembles for an uncertain source: sampled members, exceedance probabilities, receptor stats.

Each member m draws the varying release's start, position, mass, duration and a multiplier on the
dispersion coefficients from ``walkers.randomness.source_generator(seed, m)`` as the scenario's
``[ensemble]`` table says (:class:`walkers.scenario.EnsembleSpec`), then runs
``simulate(..., seed=seed, member=m)``; its random walk uses the member's own spawned streams.

Members are grouped into fixed batches that depend only on the number of members (never on the
number of workers): the first half of the members ``[0, N//2)`` and the second half ``[N//2, N)``
are each cut into batches of :func:`batch_size` members. A batch runs its members in order and
reduces them at once to small sums — exceedance counts per threshold, output cell and time
(int32), the sum of the concentration fields (for the ensemble mean) — and per-member numbers (the
draws and the receptor results). The driver adds the batch sums in batch order as they arrive
(holding back a batch that finishes early until the ones before it are in), so the result is
bitwise the same in-process, on any number of Dask workers, and after a worker is lost and its
batches run again elsewhere. No member's fields are ever held beyond its batch.

Estimates (N members, k of them in the first half):

- exceedance probability P = (members with C > threshold) / N per cell and time, and over the
  whole window (C's maximum over the output times above the threshold); its binomial standard
  error is sqrt(P (1 - P) / N) (common practice);
- convergence: max over cells and times of |P(N) - P(k)|; for independent members this change has
  standard error sqrt(p (1 - p) (N - k) / (N k)) (= sqrt(p (1 - p) / N) for k = N/2; variances of
  independent binomial counts add — common practice), reported at the cell of the largest change
  and at p = 1/2 (the largest it can be);
- per receptor: peak concentration, arrival time (first crossing of the threshold, linearly
  interpolated between output times) and time above the threshold (linear interpolation within
  each output interval), as the 5th, 50th and 95th percentiles over the members with a bootstrap
  95 % confidence interval. Percentiles are order statistics (the inverse of the empirical CDF,
  Hyndman & Fan 1996, Am. Stat. 50, definition 1 — from memory); the interval is the percentile
  bootstrap over 2000 resamples from a fixed-seed Generator (Efron & Tibshirani 1993, An
  Introduction to the Bootstrap, ch. 13 — from memory). A member that never crosses a threshold
  has an infinite arrival time: a percentile (or bound) that falls on such members is NaN, read
  "not within the run".

Mass scaling: concentration is linear in the released mass, so a quantity with no threshold in it
(the ensemble-mean concentration, a mean receptor series) could take a member's mass draw by
scaling a unit-mass run of that member — provided the varying release is the only release (with
fixed releases beside it, C = C_fixed + m C_unit is not a scaled run). It is not valid for
exceedance probabilities, arrival times or times above a threshold: whether C exceeds a threshold
depends on the product of mass and field member by member, so these need each member's own field.
Members here therefore always run with their drawn mass. Members share the flow: each process
builds the :class:`~walkers.fields.base.FlowField` (and resolves the dispersion) once per scenario
and reuses it for every member it runs.

Execution: in-process by default; ``workers=N`` starts a local ``dask.distributed`` cluster of N
single-threaded worker processes on the loopback interface; ``scheduler="tcp://host:port"`` uses a
running one. Workers get the scenario (TOML text or dict and its base directory), never arrays,
and build the flow themselves; only batch reductions travel back. Dask reruns the tasks of a lost
worker elsewhere.
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
import pickle
import tomllib
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

import walkers
from walkers.config import Release, Transport
from walkers.errors import InputError
from walkers.fields.base import FlowField, GriddedVariable, centre_to_edges
from walkers.randomness import source_generator
from walkers.releases import release_mass
from walkers.scenario import EnsembleSpec, Scenario, load_scenario

#: Percentiles reported for the receptor distributions (percent).
PERCENTILES = (5.0, 50.0, 95.0)
#: Bootstrap resamples and confidence level of the percentile intervals.
BOOTSTRAP_RESAMPLES = 2000
CONFIDENCE = 0.95
#: Fixed key mixed with the run seed for the bootstrap Generator.
_BOOTSTRAP_KEY = 0x626F6F74
#: Redraws allowed for a start outside the run or a position on land before giving up.
MAX_REDRAWS = 1000
#: Batches per half of the ensemble aimed at (the batch size follows from the member count only).
_BATCHES_PER_HALF = 16

ProgressCallback = Callable[[int, int], None]


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


# --------------------------------------------------------------------------------------------
# Per-process preparation (scenario, flow, transport): built once, reused by every member
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Recipe:
    """How a process gets the scenario: TOML text or a dict with its base directory, or (for a
    :class:`Scenario` built from a dict in Python) the checked Scenario itself — small, no flow
    arrays either way."""

    kind: str  # "toml", "dict" or "scenario"
    content: Any
    base_dir: str

    def key(self) -> str:
        return hashlib.sha256(pickle.dumps((self.kind, self.content, self.base_dir))).hexdigest()

    def load(self) -> Scenario:
        if self.kind == "scenario":
            return self.content
        raw = tomllib.loads(self.content) if self.kind == "toml" else self.content
        return load_scenario(raw, base_dir=self.base_dir)


@dataclass
class _Prepared:
    scenario: Scenario
    flow: FlowField
    transport: Transport
    offset: float  # the run start in the flow's time frame (s)


_PREPARED: dict[str, _Prepared] = {}
#: Largest flow (bytes of float64 frames over the run) held in memory for the members.
MAX_FLOW_BYTES = 2 * 1024**3


def _held_in_memory(flow: FlowField, t0: float, t1: float) -> FlowField:
    """The flow's frames covering [t0, t1] (s, flow frame) read once into memory, so that the
    members a process runs do not each read the files again; a flow larger than
    :data:`MAX_FLOW_BYTES` stays lazy. The frames are the same numbers, so results do not change.
    """
    i0, i1 = flow.frame_range(t0, t1)
    cells = sum(int(np.prod(v.data.shape[1:])) for v in (flow.u, flow.v, flow.depth, flow.wet))
    if 8 * cells * (i1 - i0 + 1) > MAX_FLOW_BYTES:
        return flow

    def held(var: GriddedVariable) -> GriddedVariable:
        return dataclasses.replace(var, data=var.frames(i0, i1))

    return dataclasses.replace(
        flow,
        u=held(flow.u),
        v=held(flow.v),
        depth=held(flow.depth),
        wet=held(flow.wet),
        times=np.array(flow.times[i0 : i1 + 1], dtype=np.float64),
    )


def _prepare(recipe: _Recipe) -> _Prepared:
    """The scenario, flow and transport of a recipe, built once per process."""
    key = recipe.key()
    if key not in _PREPARED:
        from walkers.runner import check_places, flow_offset

        scenario = recipe.load()
        if scenario.ensemble is None:
            raise InputError(
                "the scenario has no [ensemble] table: add one with at least 'members'"
            )
        flow = scenario.flow.build()
        offset = flow_offset(scenario, flow)
        check_places(scenario, flow, offset)
        flow = _held_in_memory(flow, offset, offset + scenario.duration)
        _PREPARED.clear()  # one scenario at a time per process: flows can be large
        _PREPARED[key] = _Prepared(scenario, flow, scenario.transport_for(flow), offset)
    return _PREPARED[key]


def _recipe_of(scenario: Scenario | dict | str | Path, base_dir: str | Path | None) -> _Recipe:
    if isinstance(scenario, Scenario):
        if scenario.text is not None and scenario.source_path is not None:
            return _Recipe("toml", scenario.text, str(scenario.source_path.parent))
        return _Recipe("scenario", scenario, str(base_dir or Path.cwd()))
    if isinstance(scenario, dict):
        return _Recipe("dict", scenario, str(Path(base_dir or Path.cwd()).resolve()))
    path = Path(scenario).expanduser().resolve()
    loaded = load_scenario(path, base_dir=base_dir)
    assert loaded.text is not None
    return _Recipe("toml", loaded.text, str(Path(base_dir).resolve() if base_dir else path.parent))


# --------------------------------------------------------------------------------------------
# One member, one batch
# --------------------------------------------------------------------------------------------


def threshold_crossing(t: np.ndarray, c: np.ndarray, threshold: float) -> tuple[float, float]:
    """First time (s) a series ``c`` (at times ``t``) rises above ``threshold``, and the time (s)
    it spends above it, both by linear interpolation between samples; (inf, 0) if never above.
    """
    above = c > threshold
    if not above.any():
        return math.inf, 0.0
    k = int(np.argmax(above))
    if k == 0:
        first = float(t[0])
    else:
        first = float(t[k - 1] + (threshold - c[k - 1]) / (c[k] - c[k - 1]) * (t[k] - t[k - 1]))
    a0, a1 = above[:-1], above[1:]
    c0, c1 = c[:-1], c[1:]
    span = np.diff(t)
    with np.errstate(divide="ignore", invalid="ignore"):
        part = np.where(a0, (c0 - threshold) / (c0 - c1), (c1 - threshold) / (c1 - c0))
    fraction = np.where(a0 & a1, 1.0, np.where(a0 ^ a1, part, 0.0))
    return first, float(np.sum(fraction * span))


@dataclass
class _BatchResult:
    """Reductions of the members [lo, hi), in member order."""

    lo: int
    hi: int
    exceed: np.ndarray  # (nthr, nt, ny, nx) int32: members with C > threshold
    window: np.ndarray  # (nthr, ny, nx) int32: members with max over time of C > threshold
    conc_sum: np.ndarray  # (nt, ny, nx) float64: sum of the members' concentration
    draws: list[SourceDraw]
    peak: np.ndarray  # (nb, nrec) kg m-3
    arrival: np.ndarray  # (nb, nrec, nthr) s after the run start; inf = never
    above: np.ndarray  # (nb, nrec, nthr) s
    particle_steps: int
    frame: xr.Dataset  # coordinates and attributes of a member's result, no data


def run_member(
    prepared: _Prepared, member: int, *, engine: str = "compiled"
) -> tuple[SourceDraw, xr.Dataset]:
    """Draw member ``member``'s source and run it; return the draw and the result Dataset."""
    from walkers.runner import shift_release
    from walkers.simulate import simulate

    sc = prepared.scenario
    spec = sc.ensemble
    assert spec is not None
    varying = sc.releases[spec.release_index]
    draw = draw_source(
        spec,
        varying,
        seed=sc.seed,
        member=member,
        flow=prepared.flow,
        run_length=sc.duration,
        flow_offset=prepared.offset,
    )
    releases = [
        member_release(r, draw) if i == spec.release_index else r for i, r in enumerate(sc.releases)
    ]
    dispersion = prepared.transport.dispersion
    transport = dataclasses.replace(
        prepared.transport,
        dispersion=dataclasses.replace(
            dispersion, multiplier=dispersion.multiplier * draw.dispersion_multiplier
        ),
    )
    ds = simulate(
        prepared.flow,
        transport,
        [shift_release(r, prepared.offset) for r in releases],
        start=prepared.offset,
        end=prepared.offset + sc.duration,
        output_interval=sc.output_interval,
        output_grid=sc.output,
        receptors=sc.receptors,
        seed=sc.seed,
        member=member,
        time_step_check="substep" if sc.substep else "fail",
        engine=engine,  # type: ignore[arg-type]
        title=sc.title,
    )
    return draw, ds


@contextmanager
def _one_kernel_thread() -> Iterator[None]:
    """Run the compiled kernels on one thread, then restore the caller's thread count.

    A member is small: its kernels gain little from threads and, with more threads than free
    cores (several Dask workers on one machine), lose much. The parallelism of an ensemble is
    across members. Results do not depend on the number of kernel threads.
    """
    import numba

    before = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(before)


def _run_batch(recipe: _Recipe, lo: int, hi: int, thresholds: tuple[float, ...]) -> _BatchResult:
    """Run members lo..hi-1 in order and reduce them (a Dask task, or a step in-process)."""
    with _one_kernel_thread():
        return _reduce_batch(_prepare(recipe), lo, hi, thresholds)


def _reduce_batch(
    prepared: _Prepared, lo: int, hi: int, thresholds: tuple[float, ...]
) -> _BatchResult:
    sc = prepared.scenario
    nthr, nrec = len(thresholds), len(sc.receptors)
    thr = np.asarray(thresholds, dtype=np.float64)
    nb = hi - lo
    peak = np.zeros((nb, nrec))
    arrival = np.full((nb, nrec, nthr), math.inf)
    above = np.zeros((nb, nrec, nthr))
    draws: list[SourceDraw] = []
    grid = sc.output
    shape = (int(round(sc.duration / sc.output_interval)) + 1, grid.ny, grid.nx)
    conc_sum = np.zeros(shape)
    exceed = np.zeros((nthr, *shape), dtype=np.int32)
    window = np.zeros((nthr, *shape[1:]), dtype=np.int32)
    frame = None
    steps = 0
    for b, member in enumerate(range(lo, hi)):
        draw, ds = run_member(prepared, member)
        draws.append(draw)
        conc = ds["concentration"].values
        if frame is None:
            frame = ds.drop_vars(list(ds.data_vars)).drop_vars("edge")
        conc_sum += conc
        cmax = conc.max(axis=0)
        for i in range(nthr):
            exceed[i] += conc > thr[i]
            window[i] += cmax > thr[i]
        t_rel = ds["time"].values - prepared.offset
        series = ds["receptor_concentration"].values
        for r in range(nrec):
            peak[b, r] = series[r].max()
            for i in range(nthr):
                arrival[b, r, i], above[b, r, i] = threshold_crossing(t_rel, series[r], thr[i])
        steps += _particle_steps(sc)
    assert frame is not None
    return _BatchResult(lo, hi, exceed, window, conc_sum, draws, peak, arrival, above, steps, frame)


def _particle_steps(sc: Scenario) -> int:
    """Particle-steps of one member: particles times time steps over the run (sub-steps aside)."""
    return sc.total_particles * int(round(sc.duration / sc.dt))


# --------------------------------------------------------------------------------------------
# Batching, ordered reduction, statistics
# --------------------------------------------------------------------------------------------


def batch_size(members: int) -> int:
    """Members per batch: a function of the member count only, so every way of running the
    ensemble cuts it the same way (and sums in the same order)."""
    half = max(members // 2, 1)
    return max(1, math.ceil(half / _BATCHES_PER_HALF))


def batches(members: int) -> list[tuple[int, int]]:
    """The (lo, hi) member ranges: the first half [0, N//2) and the rest, each cut in batches."""
    size = batch_size(members)
    half = members // 2
    out = []
    for a, b in ((0, half), (half, members)):
        out += [(lo, min(lo + size, b)) for lo in range(a, b, size)]
    return out


class _OrderedReducer:
    """Adds batch results in batch order, holding back those that arrive early."""

    def __init__(self, ranges: list[tuple[int, int]], members: int):
        self.ranges = ranges
        self.members = members
        self.half = members // 2
        self.next = 0
        self.waiting: dict[int, _BatchResult] = {}
        self.exceed: np.ndarray | None = None
        self.window: np.ndarray | None = None
        self.conc_sum: np.ndarray | None = None
        self.exceed_half: np.ndarray | None = None
        self.draws: list[SourceDraw] = []
        self.peak: list[np.ndarray] = []
        self.arrival: list[np.ndarray] = []
        self.above: list[np.ndarray] = []
        self.particle_steps = 0
        self.frame: xr.Dataset | None = None

    @property
    def done(self) -> int:
        return self.ranges[self.next - 1][1] if self.next else 0

    def add(self, index: int, result: _BatchResult) -> None:
        self.waiting[index] = result
        while self.next in self.waiting:
            self._take(self.waiting.pop(self.next))
            self.next += 1

    def _take(self, r: _BatchResult) -> None:
        if self.exceed is None:
            self.exceed, self.window = r.exceed.copy(), r.window.copy()
            self.conc_sum = r.conc_sum.copy()
            self.frame = r.frame
        else:
            assert self.window is not None and self.conc_sum is not None
            self.exceed += r.exceed
            self.window += r.window
            self.conc_sum += r.conc_sum
        if r.hi == self.half:
            self.exceed_half = self.exceed.copy()
        self.draws += r.draws
        self.peak.append(r.peak)
        self.arrival.append(r.arrival)
        self.above.append(r.above)
        self.particle_steps += r.particle_steps


def _order_statistic(sorted_values: np.ndarray, q: float) -> np.ndarray:
    """The q-quantile (0 < q <= 1) of values sorted along the last axis: the smallest value whose
    empirical CDF reaches q (Hyndman & Fan 1996, definition 1 — from memory)."""
    n = sorted_values.shape[-1]
    return sorted_values[..., max(math.ceil(q * n) - 1, 0)]


def percentiles_with_ci(
    values: np.ndarray, rng: np.random.Generator, resamples: int = BOOTSTRAP_RESAMPLES
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Percentiles :data:`PERCENTILES` of ``values`` along axis 0 (members), with the lower and
    upper bounds of their percentile-bootstrap :data:`CONFIDENCE` interval.

    values : (members, ...) array; +inf allowed (e.g. never arrived). Returns three arrays of shape
    (..., len(PERCENTILES)); infinite results become NaN.
    """
    n = values.shape[0]
    moved = np.moveaxis(values, 0, -1)  # (..., n)
    est = np.stack([_order_statistic(np.sort(moved, axis=-1), p / 100) for p in PERCENTILES], -1)
    picks = rng.integers(0, n, size=(resamples, n))
    boot = np.sort(moved[..., picks], axis=-1)  # (..., B, n)
    reps = np.stack([_order_statistic(boot, p / 100) for p in PERCENTILES], -1)  # (..., B, P)
    reps = np.sort(np.moveaxis(reps, -2, -1), axis=-1)  # (..., P, B)
    alpha = (1.0 - CONFIDENCE) / 2.0
    lower = _order_statistic(reps, alpha)
    upper = _order_statistic(reps, 1.0 - alpha)

    def finite(a: np.ndarray) -> np.ndarray:
        return np.where(np.isfinite(a), a, np.nan)

    return finite(est), finite(lower), finite(upper)


def ensemble_thresholds(scenario: Scenario, extra: Sequence[float] = ()) -> tuple[float, ...]:
    """The thresholds (kg m-3) the probabilities are given for: every receptor threshold of the
    scenario and any given in ``extra``, sorted, each once."""
    values = [t for r in scenario.receptors for t in r.thresholds] + [float(t) for t in extra]
    for t in values:
        if not (math.isfinite(t) and t > 0):
            raise InputError(f"ensemble threshold {t!r} kg m-3: must be a finite number > 0")
    return tuple(sorted(set(values)))


# --------------------------------------------------------------------------------------------
# Execution
# --------------------------------------------------------------------------------------------


def _iterate_in_process(
    recipe: _Recipe, ranges: list[tuple[int, int]], thresholds: tuple[float, ...]
) -> Iterator[tuple[int, _BatchResult]]:
    for index, (lo, hi) in enumerate(ranges):
        yield index, _run_batch(recipe, lo, hi, thresholds)


def _iterate_dask(
    client: Any, recipe: _Recipe, ranges: list[tuple[int, int]], thresholds: tuple[float, ...]
) -> Iterator[tuple[int, _BatchResult]]:
    from dask.distributed import as_completed

    token = hashlib.sha256(pickle.dumps((recipe.key(), thresholds))).hexdigest()[:16]
    futures = {
        client.submit(
            _run_batch,
            recipe,
            lo,
            hi,
            thresholds,
            key=f"walkers-ensemble-{token}-{i}",
            pure=False,
        ): i
        for i, (lo, hi) in enumerate(ranges)
    }
    try:
        for future in as_completed(list(futures)):
            result = future.result()
            index = futures[future]
            future.release()
            yield index, result
    finally:
        client.cancel(list(futures))


def _local_cluster(workers: int) -> Any:
    from dask.distributed import LocalCluster

    return LocalCluster(
        n_workers=workers,
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
    )


def run_ensemble(
    scenario: Scenario | dict | str | Path,
    *,
    members: int | None = None,
    workers: int = 0,
    scheduler: str | None = None,
    progress: ProgressCallback | None = None,
    thresholds: Sequence[float] = (),
    base_dir: str | Path | None = None,
) -> xr.Dataset:
    """Run the ensemble of a scenario and reduce it to probabilities and receptor statistics.

    Parameters
    ----------
    scenario : a checked :class:`Scenario`, or a scenario dict or TOML path (with its
        ``[ensemble]`` table).
    members : number of members (default: ``ensemble.members`` of the scenario).
    workers : 0 runs in this process; N > 0 starts a local Dask cluster of N single-threaded
        worker processes on 127.0.0.1 for the run.
    scheduler : address of a running Dask scheduler (e.g. ``"tcp://127.0.0.1:8786"``); its workers
        must see the flow files at the same paths. Excludes ``workers``.
    progress : called as progress(members reduced, members in all) after each batch is added.
    thresholds : concentrations (kg m-3) to give probabilities for, beside the receptors' ones.
    base_dir : directory for relative paths of a dict scenario (default the current directory).

    Returns
    -------
    An xarray.Dataset (numeric times as in a run's result): ``exceedance_probability`` (threshold,
    time, y, x) and ``window_exceedance_probability`` (threshold, y, x), units "1";
    ``concentration_mean`` (time, y, x) kg m-3; per receptor the percentiles (5, 50, 95) of peak
    concentration, arrival time and time above threshold with bootstrap intervals, and
    ``receptor_exceedance_probability``; the member table (drawn source and receptor results
    along ``member``); ``convergence_change`` and ``convergence_standard_error`` (threshold).
    The bitwise-same Dataset comes back however it is run (see the module docstring).

    Raises InputError for a scenario without ``[ensemble]``, bad options, or a Dask scheduler
    that cannot be reached.
    """
    if workers < 0:
        raise InputError(f"workers = {workers}: must be 0 (in-process) or a positive number")
    if workers and scheduler:
        raise InputError(
            "give either workers (a local cluster) or scheduler (an address), not both"
        )
    recipe = _recipe_of(scenario, base_dir)
    prepared = _prepare(recipe)
    sc = prepared.scenario
    assert sc.ensemble is not None
    n = sc.ensemble.members if members is None else int(members)
    if n < 2:
        raise InputError(f"members = {n}: an ensemble needs at least 2 members")
    if n > 10**6:
        raise InputError(f"members = {n}: at most 1000000")
    thr = ensemble_thresholds(sc, thresholds)
    ranges = batches(n)
    reducer = _OrderedReducer(ranges, n)
    cluster = client = None
    try:
        if workers or scheduler:
            from dask.distributed import Client

            if workers:
                cluster = _local_cluster(workers)
                client = Client(cluster)
            else:
                try:
                    client = Client(scheduler, timeout="20s")
                except (OSError, TimeoutError, ValueError) as exc:
                    raise InputError(
                        f"scheduler {scheduler!r}: cannot connect ({exc}); give the address of a "
                        "running Dask scheduler such as tcp://127.0.0.1:8786"
                    ) from None
            results = _iterate_dask(client, recipe, ranges, thr)
        else:
            results = _iterate_in_process(recipe, ranges, thr)
        for index, result in results:
            before = reducer.next
            reducer.add(index, result)
            if progress is not None and reducer.next > before:
                progress(reducer.done, n)
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    return _assemble(reducer, prepared, thr)


def _assemble(red: _OrderedReducer, prepared: _Prepared, thr: tuple[float, ...]) -> xr.Dataset:
    from walkers.runner import land_on_output_grid

    sc = prepared.scenario
    spec = sc.ensemble
    assert spec is not None and red.frame is not None and red.exceed is not None
    assert red.window is not None and red.conc_sum is not None and red.exceed_half is not None
    n, k = red.members, red.half
    frame = red.frame
    nthr = len(thr)
    xunits = frame["x"].attrs.get("units", "m")
    yunits = frame["y"].attrs.get("units", "m")
    run_start = f"seconds after the run start {sc.start_iso}"
    one = "1"
    data: dict[str, Any] = {
        "concentration_mean": (
            ("time", "y", "x"),
            red.conc_sum / n,
            {"units": "kg m-3", "long_name": "ensemble-mean concentration (box counting)"},
        ),
        "source_start": (
            "member",
            np.array([d.start for d in red.draws]),
            {"units": "s", "long_name": "drawn release start", "comment": run_start},
        ),
        "source_x": (
            "member",
            np.array([d.x for d in red.draws]),
            {"units": xunits, "long_name": "drawn release position x"},
        ),
        "source_y": (
            "member",
            np.array([d.y for d in red.draws]),
            {"units": yunits, "long_name": "drawn release position y"},
        ),
        "source_mass": (
            "member",
            np.array([d.mass for d in red.draws]),
            {"units": "kg", "long_name": "drawn mass released"},
        ),
        "source_duration": (
            "member",
            np.array([d.duration for d in red.draws]),
            {"units": "s", "long_name": "drawn release duration"},
        ),
        "dispersion_multiplier": (
            "member",
            np.array([d.dispersion_multiplier for d in red.draws]),
            {"units": one, "long_name": "drawn factor on the dispersion coefficients"},
        ),
        "land": (
            ("y", "x"),
            land_on_output_grid(prepared.flow, sc, prepared.offset, prepared.offset + sc.duration),
            {
                "units": one,
                "long_name": "land or never-wet cell (1) in the flow",
                "flag_values": np.array([0, 1], dtype=np.int8),
                "flag_meanings": "water land",
            },
        ),
    }
    rng = np.random.default_rng(np.random.SeedSequence([int(sc.seed), _BOOTSTRAP_KEY]))
    nrec = len(sc.receptors)
    if nrec:
        peak = np.concatenate(red.peak)
        data["member_receptor_peak"] = (
            ("member", "receptor"),
            peak,
            {"units": "kg m-3", "long_name": "peak concentration at receptor over the run"},
        )
        est, lo, hi = percentiles_with_ci(peak, rng)
        _add_percentiles(
            data,
            "receptor_peak",
            ("receptor",),
            est,
            lo,
            hi,
            "kg m-3",
            "peak concentration at receptor",
            "",
        )
    if nthr:
        p = red.exceed / n
        p_half = red.exceed_half / k
        change = np.abs(p - p_half).reshape(nthr, -1)
        worst = change.argmax(axis=1)
        p_worst = p.reshape(nthr, -1)[np.arange(nthr), worst]
        factor = (n - k) / (n * k)
        data["exceedance_probability"] = (
            ("threshold", "time", "y", "x"),
            p,
            {
                "units": one,
                "long_name": "probability that the concentration exceeds the threshold",
                "comment": "fraction of members; binomial standard error sqrt(P (1 - P) / N)",
            },
        )
        data["window_exceedance_probability"] = (
            ("threshold", "y", "x"),
            red.window / n,
            {
                "units": one,
                "long_name": "probability that the concentration exceeds the threshold at "
                "some output time",
            },
        )
        data["convergence_change"] = (
            "threshold",
            change.max(axis=1),
            {
                "units": one,
                "long_name": "largest change of the exceedance probability over the second "
                f"half of the members (|P({n}) - P({k})| over cells and times)",
            },
        )
        data["convergence_standard_error"] = (
            "threshold",
            np.sqrt(p_worst * (1.0 - p_worst) * factor),
            {
                "units": one,
                "long_name": "binomial standard error of that change at the cell where it is "
                "largest",
                "largest_possible": math.sqrt(0.25 * factor),
            },
        )
    if nthr and nrec:
        arrival = np.concatenate(red.arrival)
        above = np.concatenate(red.above)
        data["member_arrival_time"] = (
            ("member", "receptor", "threshold"),
            np.where(np.isfinite(arrival), arrival, np.nan),
            {
                "units": "s",
                "long_name": "first time the receptor concentration exceeds the threshold",
                "comment": f"{run_start}; NaN: not within the run",
            },
        )
        data["member_time_above_threshold"] = (
            ("member", "receptor", "threshold"),
            above,
            {"units": "s", "long_name": "time the receptor concentration is above the threshold"},
        )
        data["receptor_exceedance_probability"] = (
            ("receptor", "threshold"),
            np.isfinite(arrival).mean(axis=0),
            {
                "units": one,
                "long_name": "probability that the receptor concentration exceeds the threshold "
                "within the run",
            },
        )
        est, lo, hi = percentiles_with_ci(arrival, rng)
        _add_percentiles(
            data,
            "arrival_time",
            ("receptor", "threshold"),
            est,
            lo,
            hi,
            "s",
            "arrival time at receptor",
            f"{run_start}; NaN: not within the run",
        )
        est, lo, hi = percentiles_with_ci(above, rng)
        _add_percentiles(
            data,
            "time_above_threshold",
            ("receptor", "threshold"),
            est,
            lo,
            hi,
            "s",
            "time above threshold at receptor",
            "",
        )
    coords: dict[str, Any] = {str(name): frame[name].variable for name in frame.coords}
    coords["member"] = (
        "member",
        np.arange(n, dtype=np.int32),
        {"long_name": "ensemble member", "standard_name": "realization", "units": one},
    )
    coords["percentile"] = (
        "percentile",
        np.array(PERCENTILES),
        {"units": "percent", "long_name": "percentile over the members"},
    )
    if nthr:
        coords["threshold"] = (
            "threshold",
            np.array(thr),
            {"units": "kg m-3", "long_name": "concentration threshold"},
        )
    attrs = {
        "title": f"{sc.title}: ensemble of {n} members",
        "seed": int(sc.seed),
        "walkers_version": walkers.__version__,
        "scenario": sc.text or "",
        "crs_wkt": frame.attrs.get("crs_wkt", ""),
        "geographic": int(frame.attrs.get("geographic", 0)),
        "caution": walkers.CAUTION,
        "source": frame.attrs.get("source", ""),
        "members": int(n),
        "members_first_half": int(k),
        "member_batch_size": int(batch_size(n)),
        "varying_release": spec.release,
        "particle_steps": int(red.particle_steps),
        "bootstrap": f"percentile bootstrap, {BOOTSTRAP_RESAMPLES} resamples, "
        f"{CONFIDENCE:.0%} interval",
    }
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _add_percentiles(data, stem, dims, est, lo, hi, units, what, comment) -> None:
    extra = {"comment": comment} if comment else {}
    level = f"{CONFIDENCE:.0%}"
    for suffix, values, label in (
        ("percentile", est, f"{what}: percentile over the members"),
        (
            "ci_lower",
            lo,
            f"{what}: lower bound of the bootstrap {level} interval of the percentile",
        ),
        (
            "ci_upper",
            hi,
            f"{what}: upper bound of the bootstrap {level} interval of the percentile",
        ),
    ):
        data[f"{stem}_{suffix}"] = (
            (*dims, "percentile"),
            values,
            {"units": units, "long_name": label, **extra},
        )


def write_ensemble(ds: xr.Dataset, path: str | Path, *, overwrite: bool = False) -> Path:
    """Write an ensemble Dataset as CF-1.8 NetCDF through :func:`walkers.io.write_results`
    (temporary name, then rename; an existing file is kept unless ``overwrite``)."""
    from walkers.io import write_results

    return write_results(ds, path, overwrite=overwrite)


def summary_text(ds: xr.Dataset) -> str:
    """The end-of-ensemble summary: per receptor and threshold the probability of exceedance and
    the percentiles of arrival time, time above threshold and peak; the convergence; the caution.
    Concentrations in mg/L (= g m-3 = 1e-3 kg m-3), times in hours after the run start."""
    n = int(ds.sizes["member"])
    lines = [str(ds.attrs.get("title", "walkers ensemble")), ""]
    pct = "/".join(f"{p:g}" for p in PERCENTILES)

    def hours(values: np.ndarray) -> str:
        return "/".join("-" if np.isnan(v) else f"{v / 3600:.3g}" for v in values)

    for r, name in enumerate(ds["receptor"].values if "receptor" in ds.dims else []):
        peak = ds["receptor_peak_percentile"].values[r] * 1e3
        lines.append(f"{name}: peak (percentiles {pct}) {'/'.join(f'{v:.3g}' for v in peak)} mg/L")
        for k, level in enumerate(ds["threshold"].values if "threshold" in ds.dims else []):
            p = float(ds["receptor_exceedance_probability"].values[r, k])
            se = math.sqrt(p * (1 - p) / n)
            lines.append(
                f"  above {level * 1e3:.3g} mg/L: probability {p:.2f} (± {se:.2f}); arrival at "
                f"{hours(ds['arrival_time_percentile'].values[r, k])} h; time above "
                f"{hours(ds['time_above_threshold_percentile'].values[r, k])} h"
            )
    if "convergence_change" in ds:
        lines.append("")
        for k, level in enumerate(ds["threshold"].values):
            lines.append(
                f"Convergence at {level * 1e3:.3g} mg/L: probabilities moved by at most "
                f"{float(ds['convergence_change'][k]):.3f} over the second half of the {n} "
                f"members (standard error there {float(ds['convergence_standard_error'][k]):.3f})"
            )
    lines += [
        "",
        f"Percentiles {pct} over the members; '-': not within the run.",
        f"Caution: {walkers.CAUTION}",
    ]
    return "\n".join(lines)
