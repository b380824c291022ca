"""A scenario run to its files: the run, the CF-NetCDF output written atomically, the summary.

This sits above the stages (it drives the run stage and the outputs stage), beside the
command line.
"""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import xarray as xr

from walkers.files import check_target
from walkers.outputs.summary import summary_text
from walkers.outputs.writer import tracks_path, write_results
from walkers.run.runner import scenario_inputs, simulate_scenario
from walkers.run.simulate import RunState
from walkers.scenario.load import load_scenario
from walkers.scenario.specs import Scenario


@dataclass
class RunOutcome:
    """What a run produced: the result Dataset, the file written (if any) and the summary text."""

    results: xr.Dataset
    path: Path | None
    summary: str


def run_scenario(
    scenario: Scenario | str | os.PathLike,
    *,
    output: str | os.PathLike | None = None,
    overwrite: bool = False,
    stepper: Literal["fast", "reference"] = "fast",
    progress: Callable[[float, float, int], None] | None = None,
    resume: RunState | None = None,
    on_output: Callable[[RunState], None] | None = None,
    units: str | None = None,
    inputs: Sequence[str | os.PathLike] = (),
) -> RunOutcome:
    """Run a scenario, write its CF-NetCDF output atomically and return the outcome.

    The targets (the output and, with sampled tracks, its tracks file) are checked before the run
    starts, so a long run never ends on "file exists"; none may be an input of the run (the
    scenario file, the flow files, or any of ``inputs``, e.g. a checkpoint being resumed).
    ``units``: the concentration unit of the summary (default: the scenario thresholds' unit,
    else mg/L).
    """
    if not isinstance(scenario, Scenario):
        scenario = load_scenario(Path(scenario))
    path = Path(output) if output is not None else Path(scenario.output_path)
    sources = [*scenario_inputs(scenario), *inputs]
    for target in [path, tracks_path(path)] if scenario.tracks else [path]:
        check_target(target, overwrite, sources)
    ds = simulate_scenario(
        scenario, stepper=stepper, progress=progress, resume=resume, on_output=on_output
    )
    write_results(ds, path, overwrite=overwrite, inputs=inputs)
    return RunOutcome(ds, path, summary_text(ds, units))
