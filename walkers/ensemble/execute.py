"""Ensembles for an uncertain source: sampled members, exceedance probabilities, receptor stats.

Each member m draws the varying release's start, position, mass, duration and a multiplier on the
dispersion coefficients from ``walkers.engine.randomness.source_generator(seed, m)`` as the
scenario's ``[ensemble]`` table says (:class:`walkers.scenario.EnsembleSpec`).

Members are grouped into fixed batches that depend only on the scenario (the number of members and
of particles per member, never on the number of workers): the first half of the members
``[0, N//2)`` and the second half ``[N//2, N)`` are each cut into nearly equal batches of about
:data:`~walkers.ensemble.batches.BATCH_PARTICLES` particles, with bounds on a batch's particles and
members x output cells so that its memory does not grow with the members (:func:`batches`). A
batch's members are one particle population (:mod:`walkers.run.population`): a member label per
particle (a contiguous range), each member's start, place and mass in its particles' values and its
dispersion multiplier per particle, all moved by one kernel call per output interval. As each output
time passes, each member is reduced at once into small sums — exceedance counts per threshold,
output cell and time (int32), the sum of the concentration fields (for the ensemble mean), its
running maximum (for the window) and its receptor series (for the per-member numbers) — so no
member's fields are ever held. The driver adds the batch sums in batch order as they arrive (holding
back a batch that finishes early until the ones before it are in), so the result is bitwise the same
in-process (whatever the number of kernel threads), on any number of Dask workers, and after a
worker is lost and its batches run again elsewhere.

Random numbers: each member's source draws and particle placing come from its own streams
(``source_generator(seed, m)``, ``run_streams(seed, m)``), as in its own run; the random walk of a
batch draws from the walk key of its first member, numbered by particle across the batch (see
:mod:`walkers.run.population`). A member's walk therefore depends on the batch it falls in, which
the scenario fixes.

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

Three-dimensional scenarios (a ``[vertical]`` table) add the water column: each member's
concentration in each depth band and its deposit on the bed, reduced at each output time as its
single run reduces them, and its share of the released mass on the bed
(:mod:`walkers.ensemble.water_column`).

Mass scaling: concentration is linear in the released mass, so a quantity with no threshold in it
(the ensemble-mean concentration, a mean receptor series) could take a member's mass draw by
scaling a unit-mass run of that member — provided the varying release is the only release (with
fixed releases beside it, C = C_fixed + m C_unit is not a scaled run). It is not valid for
exceedance probabilities, arrival times or times above a threshold: whether C exceeds a threshold
depends on the product of mass and field member by member, so these need each member's own field.
Members here therefore always run with their drawn mass. Members share the flow: each process
builds the :class:`~walkers.fields.base.FlowField` (and resolves the dispersion) once per scenario
and reuses it for every batch it runs.

Execution: in-process by default; ``workers=N`` starts a local ``dask.distributed`` cluster of N
single-threaded worker processes on the loopback interface; ``scheduler="tcp://host:port"`` uses a
running one. Workers get the scenario (TOML text or dict and its base directory), never arrays,
and build the flow themselves; only batch reductions travel back. Dask reruns the tasks of a lost
worker elsewhere.
"""

from __future__ import annotations

import hashlib
import pickle
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path
from typing import Any

import xarray as xr

from walkers.ensemble.assemble import _assemble
from walkers.ensemble.batches import _OrderedReducer, batches, ensemble_thresholds
from walkers.ensemble.members import (
    _BatchResult,
    _prepare,
    _Recipe,
    _recipe_of,
    _reduce_batch,
    _run_batch,
)
from walkers.errors import InputError
from walkers.scenario.specs import Scenario

ProgressCallback = Callable[[int, int], None]


# --------------------------------------------------------------------------------------------
# Execution
# --------------------------------------------------------------------------------------------


def _iterate_in_process(
    recipe: _Recipe, ranges: list[tuple[int, int]], thresholds: tuple[float, ...]
) -> Iterator[tuple[int, _BatchResult]]:
    prepared = _prepare(recipe)
    for index, (lo, hi) in enumerate(ranges):
        yield index, _reduce_batch(prepared, lo, hi, thresholds)


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


def _connect(scheduler: str | None) -> Any:
    """A Dask client of the running scheduler at ``scheduler`` (InputError if unreachable)."""
    from dask.distributed import Client

    try:
        return Client(scheduler, timeout="20s")
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(
            f"scheduler {scheduler!r}: cannot connect ({exc}); give the address of a "
            "running Dask scheduler such as tcp://127.0.0.1:8786"
        ) from None


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
    A three-dimensional scenario adds ``band_exceedance_probability`` (threshold, time, band, y,
    x), ``member_on_bed_fraction`` (member, time) and its percentiles, and where the bed deposits
    ``deposit_mean`` (time, y, x) kg m-2 and ``deposit_exceedance_probability``
    (deposit_threshold, time, y, x) (:mod:`walkers.ensemble.water_column`).
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
    ranges = batches(n, sc.total_particles, sc.output.nx * sc.output.ny)
    reducer = _OrderedReducer(ranges, n)
    cluster = client = None
    try:
        if workers or scheduler:
            from dask.distributed import Client

            if workers:
                cluster = _local_cluster(workers)
                client = Client(cluster)
            else:
                client = _connect(scheduler)
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
