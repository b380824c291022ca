"""Running members: the scenario, flow and transport prepared once per process, each member's
drawn source and releases, and a batch of members moved as one particle population and reduced
to small sums.
"""

from __future__ import annotations

import dataclasses
import hashlib
import math
import pickle
import tomllib
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from walkers.engine.dispersion import transport_for
from walkers.engine.randomness import run_streams
from walkers.ensemble.batches import count_exceedance
from walkers.ensemble.draws import SourceDraw, draw_source, member_release
from walkers.ensemble.water_column import ColumnSums, deposit_thresholds
from walkers.errors import InputError
from walkers.fields.base import FlowField, GriddedVariable
from walkers.fields.scenario_flow import build_flow
from walkers.scenario.config import Release, Transport
from walkers.scenario.load import load_scenario
from walkers.scenario.specs import Scenario

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
        from walkers.run.runner import check_places, flow_offset

        scenario = recipe.load()
        if scenario.ensemble is None:
            raise InputError(
                "the scenario has no [ensemble] table: add one with at least 'members'"
            )
        flow = build_flow(scenario.flow)
        offset = flow_offset(scenario, flow)
        check_places(scenario, flow, offset)
        flow = _held_in_memory(flow, offset, offset + scenario.duration)
        _PREPARED.clear()  # one scenario at a time per process: flows can be large
        _PREPARED[key] = _Prepared(scenario, flow, transport_for(scenario, flow), offset)
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
    column: ColumnSums | None = None  # three-dimensional runs: bands, deposit, on the bed


def member_releases(prepared: _Prepared, draw: SourceDraw) -> list[Release]:
    """The scenario's releases as member ``draw.member`` has them, in the flow's seconds."""
    from walkers.run.runner import shift_release

    sc = prepared.scenario
    spec = sc.ensemble
    assert spec is not None
    return [
        shift_release(member_release(r, draw) if i == spec.release_index else r, prepared.offset)
        for i, r in enumerate(sc.releases)
    ]


def member_draw(prepared: _Prepared, member: int) -> SourceDraw:
    """Member ``member``'s drawn source."""
    sc = prepared.scenario
    spec = sc.ensemble
    assert spec is not None
    return draw_source(
        spec,
        sc.releases[spec.release_index],
        seed=sc.seed,
        member=member,
        flow=prepared.flow,
        run_length=sc.duration,
        flow_offset=prepared.offset,
    )


@contextmanager
def _one_kernel_thread() -> Iterator[None]:
    """Run the compiled kernels on one thread, then restore the caller's thread count.

    With several Dask workers on one machine, more kernel threads than free cores lose much: the
    parallelism across workers is across batches of members. In-process, a batch's kernel calls
    use the caller's threads. Results do not depend on the number of kernel threads.
    """
    import numba

    before = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        yield
    finally:
        numba.set_num_threads(before)


def _run_batch(recipe: _Recipe, lo: int, hi: int, thresholds: tuple[float, ...]) -> _BatchResult:
    """Run members lo..hi-1 as one population and reduce them (a Dask task: one kernel thread,
    the worker building the scenario, flow and transport itself from the recipe)."""
    with _one_kernel_thread():
        return _reduce_batch(_prepare(recipe), lo, hi, thresholds)


def _reduce_batch(
    prepared: _Prepared,
    lo: int,
    hi: int,
    thresholds: tuple[float, ...],
    stepper: Literal["fast", "reference"] = "fast",
) -> _BatchResult:
    """Members lo..hi-1 moved as one population (:mod:`walkers.run.population`) and reduced
    member by member at each output time: exceedance counts, the concentration sum, each
    member's running maximum (members of the batch x cells) and receptor series (members of the
    batch x receptors x times); in three dimensions also the water-column sums
    (:class:`~walkers.ensemble.water_column.ColumnSums`)."""
    from walkers.run.population import make_population, result_frame, simulate_population

    sc = prepared.scenario
    nthr, nrec = len(thresholds), len(sc.receptors)
    thr = np.asarray(thresholds, dtype=np.float64)
    nb = hi - lo
    draws = [member_draw(prepared, m) for m in range(lo, hi)]
    population = make_population(
        [member_releases(prepared, d) for d in draws],
        [d.dispersion_multiplier for d in draws],
        range(lo, hi),
        sc.seed,
        prepared.flow,
        prepared.transport,
    )
    grid = sc.output
    shape = (int(round(sc.duration / sc.output_interval)) + 1, grid.ny, grid.nx)
    conc_sum = np.zeros(shape)
    exceed = np.zeros((nthr, *shape), dtype=np.int32)
    conc_max = np.full((nb, grid.ny, grid.nx), -np.inf)
    series = np.zeros((nb, nrec, shape[0]))
    column = ColumnSums.zeros(prepared, nthr, nb, shape)
    deposit_thr = deposit_thresholds(prepared)

    def fold(k: int, b: int, conc: np.ndarray, values: np.ndarray, budget: dict) -> None:
        conc_sum[k] += conc
        np.maximum(conc_max[b], conc, out=conc_max[b])
        count_exceedance(exceed[:, k], conc, thr)
        series[b, :, k] = values
        if column is not None:
            column.fold_budget(k, b, budget)

    def fold_column(k: int, b: int, bands: np.ndarray, bed: np.ndarray | None) -> None:
        assert column is not None
        column.fold_fields(k, bands, bed, thr, deposit_thr)

    times = simulate_population(
        prepared.flow,
        prepared.transport,
        population,
        fold,
        start=prepared.offset,
        end=prepared.offset + sc.duration,
        output_interval=sc.output_interval,
        output_grid=grid,
        receptors=sc.receptors,
        walk_key=run_streams(sc.seed, lo)[0],
        time_step_check="substep" if sc.substep else "fail",
        stepper=stepper,
        column_output=sc.column_output,
        on_column=fold_column if column is not None else None,
    )
    window = np.zeros((nthr, *shape[1:]), dtype=np.int32)
    for i in range(nthr):
        window[i] = np.count_nonzero(conc_max > thr[i], axis=0)
    peak = np.zeros((nb, nrec))
    arrival = np.full((nb, nrec, nthr), math.inf)
    above = np.zeros((nb, nrec, nthr))
    t_rel = times - prepared.offset
    for b in range(nb):
        for r in range(nrec):
            peak[b, r] = series[b, r].max()
            for i in range(nthr):
                arrival[b, r, i], above[b, r, i] = threshold_crossing(t_rel, series[b, r], thr[i])
    frame = result_frame(times, prepared.flow, grid, sc.receptors)
    steps = nb * _particle_steps(sc)
    return _BatchResult(
        lo, hi, exceed, window, conc_sum, draws, peak, arrival, above, steps, frame, column
    )


def _particle_steps(sc: Scenario) -> int:
    """Particle-steps of one member: particles times time steps over the run (sub-steps aside)."""
    return sc.total_particles * int(round(sc.duration / sc.dt))
