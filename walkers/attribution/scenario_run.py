"""A trace scenario from start to result: build the flow, check the places, trace, add the map
ground and provenance (``walkers trace`` and :func:`trace_scenario`)."""

from __future__ import annotations

import dataclasses
import json
from typing import Literal

import numpy as np
import xarray as xr

from walkers.attribution.trace import trace
from walkers.engine.dispersion import transport_for
from walkers.fields.scenario_flow import build_flow, check_flow, check_points_in_water
from walkers.run.runner import (
    check_inputs_unchanged,
    flow_offset,
    input_provenance,
    land_variable,
)
from walkers.scenario.sources import Candidate, Detection
from walkers.scenario.trace import TraceScenario


def trace_scenario(
    question: TraceScenario,
    *,
    particles: int | None = None,
    stepper: Literal["fast", "reference"] = "fast",
) -> xr.Dataset:
    """Trace a scenario's detections back and rank its candidates; return the result Dataset.

    particles : backward particles per detection instead of the scenario's
        ``attribution.particles`` (e.g. a small number for a quick look or a test).
    """
    scenario = question.run
    provenance = input_provenance(scenario)
    flow = build_flow(scenario.flow)
    offset = flow_offset(scenario, flow)
    check_flow(scenario, flow)
    places: list[tuple[str, Detection | Candidate]] = [
        *((f"detections[{i}]", d) for i, d in enumerate(question.detections)),
        *((f"candidates[{i}]", c) for i, c in enumerate(question.candidates)),
    ]
    for where, p in places:
        check_points_in_water(
            flow, np.array([p.x]), np.array([p.y]), f"{where} ({p.name})", t=offset + p.start
        )
    detections = [
        dataclasses.replace(d, start=d.start + offset, end=d.end + offset)
        for d in question.detections
    ]
    candidates = [
        dataclasses.replace(c, start=c.start + offset, end=c.end + offset)
        for c in question.candidates
    ]
    ds = trace(
        flow,
        transport_for(scenario, flow),
        detections,
        candidates,
        question.model,
        start=offset,
        end=offset + scenario.duration,
        output_interval=scenario.output_interval,
        output_grid=scenario.output,
        particles=particles or question.particles,
        seed=scenario.seed,
        stepper=stepper,
        time_step_check="substep" if scenario.substep else "fail",
        title=scenario.title,
    )
    ds["land"] = land_variable(flow, scenario, offset)
    check_inputs_unchanged(provenance, scenario)
    ds.attrs.update(
        input_files=json.dumps(provenance),
        scenario=scenario.text or "",
        run_start=scenario.start_iso,
        run_end=scenario.end_iso,
    )
    if scenario.comment:
        ds.attrs["comment"] = scenario.comment
    return ds
