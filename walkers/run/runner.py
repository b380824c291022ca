"""A scenario from start to finish: build the flow, run, write the outputs, summarise.

The command line's ``walkers run`` is a thin layer over :func:`run_scenario`; from Python the same
run is ``run_scenario(load_scenario("case.toml"))``, or :func:`simulate_scenario` for the Dataset
alone without writing anything.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Literal

import numpy as np
import xarray as xr

from walkers.engine.dispersion import transport_for
from walkers.engine.state import BYTES_PER_PARTICLE
from walkers.errors import InputError, RunFailure
from walkers.fields.base import FlowField
from walkers.fields.scenario_flow import build_flow, check_flow
from walkers.run.accumulate import _field_variables
from walkers.run.simulate import RunState, simulate
from walkers.run.store import streams_to_disk
from walkers.scenario.config import Release
from walkers.scenario.specs import Scenario

#: Bytes of memory a particle takes during a run: its state (BYTES_PER_PARTICLE), its release index
#: (int32) and the temporaries of the reductions at output times (depth, weight and two selections
#: of masses, float64 each).
PARTICLE_WORKING_BYTES = BYTES_PER_PARTICLE + 4 + 4 * 8
#: Further bytes a particle takes in a three-dimensional run: its height in the column and its
#: settling velocity (float64 each; ``ParticleState.sigma``, ``settling``).
COLUMN_BYTES = 2 * 8


def flow_offset(scenario: Scenario, flow: FlowField) -> float:
    """Seconds of the run start in the flow's time frame (0 for analytic flows)."""
    if scenario.flow.kind == "analytic":
        return 0.0
    from walkers.fields.times import to_flow_seconds

    return float(to_flow_seconds(scenario.start_iso, flow))


def shift_release(release: Release, offset: float) -> Release:
    """A release with its times moved into the flow's frame (seconds)."""
    rate_times = None if release.rate_times is None else np.asarray(release.rate_times) + offset
    return dataclasses.replace(release, start=release.start + offset, rate_times=rate_times)


def check_places(scenario: Scenario, flow: FlowField, offset: float) -> None:
    """Releases and receptors must be in water at the run start; the grid must overlap."""
    check_flow(scenario, flow)
    if scenario.flow.kind != "files":
        return
    from walkers.fields.scenario_flow import check_points_in_water

    for i, rel in enumerate(scenario.releases):
        pts = np.atleast_2d(rel.coords)
        check_points_in_water(
            flow, pts[:1, 0], pts[:1, 1], f"releases[{i}] ({rel.name})", t=offset + rel.start
        )
    for i, rec in enumerate(scenario.receptors):
        check_points_in_water(
            flow, np.array([rec.x]), np.array([rec.y]), f"receptors[{i}] ({rec.name})", t=offset
        )


def release_places(scenario: Scenario) -> str:
    """JSON list of each release's name and centre in grid coordinates (the mean of its
    vertices), kept in the result's ``release_places`` attribute for maps and reports."""
    return json.dumps(
        [
            {
                "name": r.name,
                "x": float(np.mean(r.coords[:, 0])),
                "y": float(np.mean(r.coords[:, 1])),
            }
            for r in scenario.releases
        ]
    )


def land_on_output_grid(flow: FlowField, scenario: Scenario, t0: float, t1: float) -> np.ndarray:
    """Per output cell: 1 where its centre lies in a flow cell that is dry in every frame of the
    run, 2 where it lies outside the flow grid (more than half a flow cell beyond its outer cell
    centres), 0 in water."""
    g = scenario.output
    if flow.curvilinear or getattr(flow.kind(), "mesh", False):
        return _land_on_output_grid_curvilinear(flow, scenario, t0, t1)
    xe = np.concatenate([[-np.inf], 0.5 * (flow.x[1:] + flow.x[:-1]), [np.inf]])
    ye = np.concatenate([[-np.inf], 0.5 * (flow.y[1:] + flow.y[:-1]), [np.inf]])
    i = np.searchsorted(xe, g.x, side="right") - 1
    j = np.searchsorted(ye, g.y, side="right") - 1
    land = (~_ever_wet(flow, t0, t1)[np.ix_(j, i)]).astype(np.int8)
    half_x = 0.5 * (flow.x[-1] - flow.x[0]) / max(flow.x.size - 1, 1)
    half_y = 0.5 * (flow.y[-1] - flow.y[0]) / max(flow.y.size - 1, 1)
    outside_x = (g.x < flow.x[0] - half_x) | (g.x > flow.x[-1] + half_x)
    outside_y = (g.y < flow.y[0] - half_y) | (g.y > flow.y[-1] + half_y)
    land[outside_y[:, None] | outside_x[None, :]] = 2
    return land


def land_variable(flow: FlowField, scenario: Scenario, offset: float) -> tuple:
    """The result's ``land`` variable (y, x): :func:`land_on_output_grid` over the run, with its
    CF flags."""
    return (
        ("y", "x"),
        land_on_output_grid(flow, scenario, offset, offset + scenario.duration),
        {
            "units": "1",
            "long_name": "water (0), land or never-wet cell (1), outside the flow grid (2)",
            "flag_values": np.array([0, 1, 2], dtype=np.int8),
            "flag_meanings": "water land outside_flow_grid",
        },
    )


def _ever_wet(flow: FlowField, t0: float, t1: float) -> np.ndarray:
    """Flow cells wet in at least one frame of [t0, t1] (s)."""
    ever_wet = np.zeros(flow.wet.data.shape[1:], dtype=bool)
    i0, i1 = flow.frame_range(t0, t1)
    for k in range(i0, i1 + 1):
        ever_wet |= flow.wet.frames(k, k)[0] > 0.5
    return ever_wet


def _land_on_output_grid_curvilinear(
    flow: FlowField, scenario: Scenario, t0: float, t1: float
) -> np.ndarray:
    """As :func:`land_on_output_grid`, on a curvilinear grid or a mesh: the cell (face) holding
    each output cell centre is found in index space or by the face walk (2 where none)."""
    g = scenario.output
    gx, gy = np.meshgrid(g.x, g.y)
    if getattr(flow.kind(), "mesh", False):
        face = flow.grid.locate(gx.ravel(), gy.ravel())
        land = (~_ever_wet(flow, t0, t1)[0, np.maximum(face, 0)]).astype(np.int8)
        land[face < 0] = 2
        return land.reshape(gx.shape)
    a, b = flow.grid.to_engine(gx.ravel(), gy.ravel())
    outside = ~np.isfinite(a)
    i = np.clip(np.floor(np.nan_to_num(a) + 0.5).astype(np.int64), 0, flow.x.size - 1)
    j = np.clip(np.floor(np.nan_to_num(b) + 0.5).astype(np.int64), 0, flow.y.size - 1)
    land = (~_ever_wet(flow, t0, t1)[j, i]).astype(np.int8)
    land[outside] = 2
    return land.reshape(gx.shape)


def memory_estimate(scenario: Scenario, flow: FlowField) -> tuple[int, int]:
    """(bytes per particle, bytes of everything else) a run of ``scenario`` on ``flow`` needs
    (a particle of a three-dimensional run: :data:`COLUMN_BYTES` more).

    Everything else:

    - the 3-D fields (concentration float64, counts int32, smoothed concentration float64 if
      asked): held for every output time and counted twice (the file writer holds a copy) when
      the run keeps them in memory; when they stream to disk
      (:func:`walkers.run.store.streams_to_disk`), three output times' worth (the one being
      reduced, the store's write and the writer's chunk);
    - the running maximum of the concentration (float64 on the output grid);
    - the series over time (receptors, sampled tracks), counted twice;
    - the window of flow frames in memory (about ten float64 arrays per frame on the flow grid:
      velocities, depth, wet mask, drift and dispersion coefficients).
    """
    g = scenario.output
    nt = int(round(scenario.duration / scenario.output_interval)) + 1
    three_d = scenario.transport_base.vertical is not None
    variables = _field_variables(g, scenario.column_output if three_d else None)
    field_bytes = g.nx * g.ny * sum(np.dtype(d).itemsize for d in variables.values())
    held = 3 if streams_to_disk((nt, g.ny, g.nx), variables) else 2 * nt
    series = 2 * nt * (8 * len(scenario.receptors) + 2 * 8 * scenario.tracks)
    outputs = held * field_bytes + 8 * g.nx * g.ny + series
    frames = 1
    if not flow.steady:
        spacing = float(np.median(np.diff(flow.times)))
        frames = min(len(flow.times), int(np.ceil(scenario.output_interval / spacing)) + 2)
    window = 10 * 8 * frames * flow.x.size * flow.y.size
    return PARTICLE_WORKING_BYTES + (COLUMN_BYTES if three_d else 0), outputs + window


def check_memory(scenario: Scenario, flow: FlowField) -> None:
    """Refuse, before the run, a run that would not fit in the memory available now.

    Compares :func:`memory_estimate` with ``psutil.virtual_memory().available`` and says how many
    particles would fit.
    """
    import psutil

    per_particle, fixed = memory_estimate(scenario, flow)
    particles = scenario.total_particles
    need = particles * per_particle + fixed
    available = int(psutil.virtual_memory().available)
    if need <= available:
        return
    nt = int(round(scenario.duration / scenario.output_interval)) + 1
    cells = scenario.output.nx * scenario.output.ny
    if fixed >= available:
        raise InputError(
            f"output: {nt} output times of {cells} cells, {len(scenario.receptors)} receptors "
            f"and {scenario.tracks} sampled tracks need about {fixed / 1e9:.3g} GB of memory, "
            f"more than the {available / 1e9:.3g} GB available; use a coarser output.grid "
            "(larger cell_size or a smaller area), fewer run.tracks or a longer "
            "run.output_interval"
        )
    fit = (available - fixed) // per_particle
    raise InputError(
        f"releases: {particles} particles need about {particles * per_particle / 1e9:.3g} GB of "
        f"memory ({per_particle} bytes each) and the outputs about {fixed / 1e9:.3g} GB, but only "
        f"{available / 1e9:.3g} GB is available: about {fit} particles would fit. Use fewer "
        "particles (releases[].particles), a coarser output.grid, or a machine with more memory"
    )


def scenario_inputs(scenario: Scenario) -> list[Path]:
    """The files a run of ``scenario`` reads: its scenario file (if any) and its flow files."""
    paths = [Path(p) for p in scenario.flow.paths]
    if scenario.source_path is not None:
        paths.insert(0, Path(scenario.source_path))
    return paths


def input_provenance(scenario: Scenario) -> list[dict[str, Any]]:
    """Name, size, modification time and SHA-256 of every input file of the scenario."""
    records = []
    for p in scenario_inputs(scenario):
        digest = hashlib.sha256()
        with open(p, "rb") as fh:
            while block := fh.read(1 << 20):
                digest.update(block)
        st = p.stat()
        records.append(
            {
                "path": str(p),
                "bytes": st.st_size,
                "modified": datetime.fromtimestamp(st.st_mtime, UTC).isoformat(timespec="seconds"),
                "sha256": digest.hexdigest(),
            }
        )
    return records


def check_inputs_unchanged(before: list[dict[str, Any]], scenario: Scenario) -> None:
    """Raise RunFailure if a flow file's SHA-256 differs from ``before`` (its
    :func:`input_provenance` at the run start): the file was changed or replaced while the run
    read it, so the result could mix two versions of it. (The scenario file is read once, before
    the run, so editing it meanwhile is no concern.)"""
    now = {r["path"]: r for r in input_provenance(scenario)}
    flows = {str(Path(p)) for p in scenario.flow.paths}
    for record in before:
        if record["path"] not in flows:
            continue
        after = now[record["path"]]
        if after["sha256"] != record["sha256"]:
            raise RunFailure(
                f"input file {record['path']!r} changed while the run was reading it (SHA-256 "
                f"{record['sha256'][:12]}... at the start, {after['sha256'][:12]}... now; "
                f"{record['bytes']} then {after['bytes']} bytes); the result could mix two "
                "versions of it, so nothing was written. Run again once the file is final"
            )


def simulate_scenario(
    scenario: Scenario,
    *,
    stepper: Literal["fast", "reference"] = "fast",
    progress: Callable[[float, float, int], None] | None = None,
    resume: RunState | None = None,
    on_output: Callable[[RunState], None] | None = None,
    flow: FlowField | None = None,
) -> xr.Dataset:
    """Run a scenario and return its result Dataset (nothing is written).

    A flow opened here has its files closed when the run ends, interrupted or not, so that a
    later run in the same process reads the files as they are then (HDF5 would otherwise serve
    the old contents of a file still open)."""
    if flow is None:
        opened = build_flow(scenario.flow)
        try:
            return simulate_scenario(
                scenario,
                stepper=stepper,
                progress=progress,
                resume=resume,
                on_output=on_output,
                flow=opened,
            )
        finally:
            opened.close()
    provenance = input_provenance(scenario)
    offset = flow_offset(scenario, flow)
    check_places(scenario, flow, offset)
    check_memory(scenario, flow)
    transport = transport_for(scenario, flow)
    releases = [shift_release(r, offset) for r in scenario.releases]
    ds = simulate(
        flow,
        transport,
        releases,
        start=offset,
        end=offset + scenario.duration,
        output_interval=scenario.output_interval,
        output_grid=scenario.output,
        receptors=scenario.receptors,
        seed=scenario.seed,
        tracks=scenario.tracks,
        time_step_check="substep" if scenario.substep else "fail",
        stepper=stepper,
        progress=progress,
        title=scenario.title,
        scenario_text=scenario.text or "",
        resume=resume,
        on_output=on_output,
        column_output=scenario.column_output,
    )
    ds["land"] = land_variable(flow, scenario, offset)
    check_inputs_unchanged(provenance, scenario)
    ds.attrs["input_files"] = json.dumps(provenance)
    if scenario.comment:
        ds.attrs["comment"] = scenario.comment
    ds.attrs["release_places"] = release_places(scenario)
    ds.attrs["run_start"] = scenario.start_iso
    ds.attrs["run_end"] = scenario.end_iso
    if transport.vertical is not None:
        from walkers.run.column import describe_releases, describe_vertical

        ds.attrs["vertical"] = describe_vertical(transport.vertical, flow)
        ds.attrs["release_behaviour"] = describe_releases(scenario.releases)
    return ds
