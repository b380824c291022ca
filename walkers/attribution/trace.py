"""Source attribution from detections: one backward run per detection, then the ranking.

:func:`trace` is the Python entry point (``walkers trace`` calls it through
:func:`walkers.attribution.scenario_run.trace_scenario`); it returns one Dataset holding the
influence field of every detection, the influence of every candidate place, the mass each
candidate would need, and the posterior ranking (layout in ``docs/outputs.md``, section 7).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np
import xarray as xr

import walkers
from walkers.attribution.inference import Ranking, Sensitivities, rank_candidates, sensitivities
from walkers.attribution.influence import INFLUENCE_MEANING, INFLUENCE_UNITS, backward_run
from walkers.errors import InputError
from walkers.fields.base import FlowField
from walkers.scenario.config import EDGE_NAMES, OutputGrid, Transport
from walkers.scenario.sources import Candidate, Detection, ErrorModel

RANKING_CAUTION = (
    "This ranks possibilities and proves nothing: it weighs only the candidates given, under the "
    "stated error model, the flow and the dispersion used; a source not on the list, a flow or "
    "dispersion that is wrong, or a sample that is wrong changes the answer."
)


def _check(
    detections: Sequence[Detection], candidates: Sequence[Candidate], start: float, end: float
) -> None:
    if not detections:
        raise InputError("detections: at least one detection is needed to trace back from")
    if not candidates:
        raise InputError("candidates: at least one candidate source is needed to rank")
    for kind, items in (("detection", detections), ("candidate", candidates)):
        names = [d.name for d in items]
        if len(set(names)) != len(names):
            raise InputError(f"{kind} names must differ; {names} has repeats")
        for d in items:
            if d.start < start - 1e-6 or d.end > end + 1e-6:
                raise InputError(
                    f"{kind} {d.name!r}: its window [{d.start:g} s, {d.end:g} s] lies outside "
                    f"the run [{start:g} s, {end:g} s]; widen run.start/run.end to cover it"
                )
    last = max(d.end for d in detections)
    if all(c.start >= last for c in candidates):
        raise InputError(
            "candidates: every candidate window starts at or after the end of the last detection "
            f"({last:g} s); a release after the samples cannot explain them: give windows that "
            "begin earlier"
        )


def trace(
    flow: FlowField,
    transport: Transport,
    detections: Sequence[Detection],
    candidates: Sequence[Candidate],
    model: ErrorModel,
    *,
    start: float,
    end: float,
    output_interval: float,
    output_grid: OutputGrid,
    particles: int,
    seed: int = 0,
    stepper: Literal["fast", "reference"] = "fast",
    time_step_check: Literal["fail", "substep", "warn", "off"] = "fail",
    title: str = "",
) -> xr.Dataset:
    """Trace every detection back from ``end`` to ``start`` (s, flow frame) with ``particles``
    backward particles each (detection j uses the independent random streams of member j), and
    rank the candidates against all detections under ``model``."""
    _check(detections, candidates, start, end)
    runs = [
        backward_run(
            flow,
            transport,
            det,
            candidates,
            start=start,
            end=end,
            output_interval=output_interval,
            output_grid=output_grid,
            particles=particles,
            seed=seed,
            member=j,
            stepper=stepper,
            time_step_check=time_step_check,
        )
        for j, det in enumerate(detections)
    ]
    times = runs[0]["time"].values
    place_influence = np.stack([r["place_influence"].values for r in runs])
    place_count = np.stack([r["place_count"].values for r in runs])
    sens = sensitivities(times, place_influence, place_count, candidates, model.time_bins)
    ranking = rank_candidates(detections, candidates, sens, model)
    ds = _assemble(runs, detections, candidates, model, sens, ranking, flow)
    ds.attrs.update(
        title=title or "walkers trace",
        seed=int(seed),
        backward_particles=int(particles),
        walkers_version=walkers.__version__,
        caution=walkers.CAUTION,
        ranking_caution=RANKING_CAUTION,
        crs_wkt=flow.crs_wkt or "",
        geographic=int(flow.geographic),
        source=flow.source,
        error_model=(
            f"log-normal measurement error, sigma = {model.sigma:g} (natural log), plus the "
            f"influence's sampling error 1/sqrt(n); mass prior log-uniform on "
            f"[{model.mass_min:g} kg, {model.mass_max:g} kg]; candidates equally likely a priori"
        ),
        interval_level=float(model.level),
        explained=int(ranking.explained),
        influence=INFLUENCE_MEANING,
    )
    return ds


def _assemble(
    runs: list[xr.Dataset],
    detections: Sequence[Detection],
    candidates: Sequence[Candidate],
    model: ErrorModel,
    sens: Sensitivities,
    ranking: Ranking,
    flow: FlowField,
) -> xr.Dataset:
    """The trace result: coordinates, fields and the ranking (all SI)."""
    first = runs[0]
    tunits = {"units": f"{flow.time_units}", "calendar": flow.calendar}
    xy = "degrees_east" if flow.geographic else "m", "degrees_north" if flow.geographic else "m"
    det = {"dims": "detection"}
    can = {"dims": "candidate"}

    def per(items, attr):
        return np.array([float(getattr(d, attr)) for d in items])

    coords = {
        "time": ("time", first["time"].values, {**tunits, "long_name": "release time"}),
        "x": ("x", first["x"].values, {"units": xy[0], "long_name": "cell centre x"}),
        "y": ("y", first["y"].values, {"units": xy[1], "long_name": "cell centre y"}),
        "edge": ("edge", list(EDGE_NAMES), {"long_name": "edge of the flow domain"}),
        "detection": ("detection", [d.name for d in detections], {"long_name": "detection"}),
        "candidate": ("candidate", [c.name for c in candidates], {"long_name": "candidate"}),
    }
    fields = {
        "influence": (
            ("detection", "time", "y", "x"),
            np.stack([r["influence"].values for r in runs]),
            {"units": INFLUENCE_UNITS, "long_name": "influence on the detection"},
        ),
        "particle_count": (
            ("detection", "time", "y", "x"),
            np.stack([r["particle_count"].values for r in runs]).astype(np.int32),
            {"units": "1", "long_name": "backward particles in the cell"},
        ),
        "from_outside": (
            ("detection", "edge", "time"),
            np.stack([r["from_outside"].values for r in runs]),
            {
                "units": "1",
                "long_name": "fraction of the sampled water that entered through the open edge "
                "after the release time",
            },
        ),
        "candidate_influence": (
            ("detection", "candidate", "time"),
            np.stack([r["place_influence"].values for r in runs]),
            {"units": INFLUENCE_UNITS, "long_name": "influence of the candidate on the detection"},
        ),
        "candidate_particle_count": (
            ("detection", "candidate", "time"),
            np.stack([r["place_count"].values for r in runs]),
            {"units": "1", "long_name": "backward particles within the candidate's circle"},
        ),
        "candidate_sensitivity": (
            ("detection", "candidate", "release_bin"),
            sens.influence,
            {
                "units": INFLUENCE_UNITS,
                "long_name": "window-mean concentration at the detection per kg released evenly "
                "over the release-time bin",
            },
        ),
        "release_bin_start": (
            ("candidate", "release_bin"),
            sens.bin_edges[:, :-1],
            {**tunits, "long_name": "start of the release-time bin"},
        ),
        "release_bin_end": (
            ("candidate", "release_bin"),
            sens.bin_edges[:, 1:],
            {**tunits, "long_name": "end of the release-time bin"},
        ),
        "mass_needed": (
            ("detection", "candidate"),
            ranking.mass_needed,
            {
                "units": "kg",
                "long_name": "mass the candidate would need to release over its window to give "
                "the measured value alone",
            },
        ),
        "probability": (
            "candidate",
            ranking.probability,
            {"units": "1", "long_name": "posterior probability among the candidates given"},
        ),
        "probability_by_release_bin": (
            ("candidate", "release_bin"),
            ranking.probability_by_bin,
            {"units": "1", "long_name": "posterior probability of the candidate and release bin"},
        ),
        "candidate_rank": (
            "candidate",
            ranking.rank.astype(np.int32),
            {"units": "1", "long_name": "rank by posterior probability (1 = most probable)"},
        ),
        "mass_estimate": (
            "candidate",
            ranking.mass_median,
            {"units": "kg", "long_name": "posterior median of the released mass"},
        ),
        "mass_most_likely": (
            "candidate",
            ranking.mass_most_likely,
            {"units": "kg", "long_name": "most probable released mass"},
        ),
        "mass_lower": (
            "candidate",
            ranking.mass_lower,
            {
                "units": "kg",
                "long_name": f"released mass, lower end of the {model.level:.0%} interval",
            },
        ),
        "mass_upper": (
            "candidate",
            ranking.mass_upper,
            {
                "units": "kg",
                "long_name": f"released mass, upper end of the {model.level:.0%} interval",
            },
        ),
    }
    places = {
        "detection_x": (det, per(detections, "x"), xy[0], "detection place x"),
        "detection_y": (det, per(detections, "y"), xy[1], "detection place y"),
        "detection_radius": (det, per(detections, "radius"), "m", "radius the sample stands for"),
        "detection_start": (det, per(detections, "start"), tunits, "start of the sampling window"),
        "detection_end": (det, per(detections, "end"), tunits, "end of the sampling window"),
        "detection_value": (det, per(detections, "value"), "kg m-3", "measured concentration"),
        "detection_limit": (det, per(detections, "detection_limit"), "kg m-3", "detection limit"),
        "candidate_x": (can, per(candidates, "x"), xy[0], "candidate place x"),
        "candidate_y": (can, per(candidates, "y"), xy[1], "candidate place y"),
        "candidate_radius": (can, per(candidates, "radius"), "m", "candidate averaging radius"),
        "candidate_start": (can, per(candidates, "start"), tunits, "start of the release window"),
        "candidate_end": (can, per(candidates, "end"), tunits, "end of the release window"),
    }
    for name, (dims, values, units, long_name) in places.items():
        attrs: dict[str, str] = dict(units) if isinstance(units, dict) else {"units": str(units)}
        fields[name] = (dims["dims"], values, {**attrs, "long_name": long_name})
    fields["detection_kind"] = (
        "detection",
        np.array([d.kind for d in detections], dtype=object),
        {"long_name": "what the sample showed: measured, present or absent"},
    )
    return xr.Dataset(fields, coords=coords)
