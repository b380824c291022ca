"""The keys of a trace scenario (``walkers trace``): a run's flow, dispersion, edges and output
grid as in :data:`walkers.scenario.schema.SCHEMA`, with detections, candidate sources and the
error model in place of releases, receptors and ensembles.
"""

from __future__ import annotations

import dataclasses
from typing import cast

from walkers.scenario.keys import Choice, Key, Section
from walkers.scenario.schema import SCHEMA

_PLACE = {
    "name": Key("text", "Label in outputs (default detection1, candidate1, ...)."),
    "x": Key("coordinate", "x of the place (m)."),
    "y": Key("coordinate", "y of the place (m)."),
    "lon": Key("degrees", "Longitude of the place (geographic)."),
    "lat": Key("degrees", "Latitude of the place (geographic)."),
}

_run = cast(Section, SCHEMA.keys["run"])
_RUN = dataclasses.replace(
    _run,
    help="The period examined: particles go backward from run.end to run.start; every "
    "detection and candidate window lies in it. Time step, output interval and options as for a "
    "run.",
    keys={k: v for k, v in _run.keys.items() if k != "tracks"},
)

TRACE_SCHEMA = Section(
    "A trace scenario asks where the water of one or more samples came from: particles start at "
    "each detection and move backward in time through the flow, and the candidate sources are "
    "ranked against all detections. Quantities are written with units as in a run scenario.",
    {
        "run": _RUN,
        **{k: v for k, v in SCHEMA.keys.items() if k in ("flow", "dispersion", "decay", "edges")},
        "detections": Section(
            "One table [[detections]] per sample: its place, its time or time window, and what "
            "it showed (a concentration, or present/absent against a detection limit).",
            {
                **_PLACE,
                "radius": Key(
                    "quantity",
                    "Radius of the water the sample stands for; 0 = a point.",
                    dimension="length",
                    default="0 m",
                    bound="nonnegative",
                ),
                "time": Key("time", "Time of a grab sample."),
                "start": Key("time", "Start of a sampling window (a composite sample)."),
                "end": Key("time", "End of the sampling window."),
                "concentration": Key(
                    "quantity",
                    'Measured concentration, e.g. "0.05 mg/L".',
                    dimension="concentration",
                    bound="positive",
                ),
                "result": Key(
                    "choice",
                    "'present' (at or above the detection limit) or 'absent' (a clean sample).",
                    allowed=("present", "absent"),
                ),
                "detection_limit": Key(
                    "quantity",
                    "Detection limit of a present/absent result.",
                    dimension="concentration",
                    bound="positive",
                ),
            },
            many=True,
            required=True,
            choices=(
                Choice((("x", "y"), ("lon", "lat"))),
                Choice((("time",), ("start", "end"))),
                Choice((("concentration",), ("result", "detection_limit"))),
            ),
        ),
        "candidates": Section(
            "One table [[candidates]] per possible source: a place and the window in which it "
            "may have released (at a constant rate).",
            {
                **_PLACE,
                "radius": Key(
                    "quantity",
                    "Radius over which the influence is averaged; 0 = the output cell holding "
                    "the point.",
                    dimension="length",
                    default="0 m",
                    bound="nonnegative",
                ),
                "start": Key("time", "Earliest release time (default: run.start)."),
                "end": Key("time", "Latest release time (default: run.end)."),
            },
            many=True,
            required=True,
            choices=(Choice((("x", "y"), ("lon", "lat"))),),
        ),
        "attribution": Section(
            "How many backward particles, and the error model the candidates are weighed under.",
            {
                "particles": Key(
                    "integer",
                    "Backward particles per detection.",
                    required=True,
                    bound="positive",
                ),
                "sigma": Key(
                    "number",
                    "Standard deviation of the natural logarithm of a measurement about the true "
                    "value (log-normal error); 0.5 is about a factor 1.65.",
                    default=0.5,
                    bound="positive",
                ),
                "mass_min": Key(
                    "quantity",
                    "Smallest release mass considered (log-uniform prior).",
                    dimension="mass",
                    default="1 g",
                    bound="positive",
                ),
                "mass_max": Key(
                    "quantity",
                    "Largest release mass considered.",
                    dimension="mass",
                    default="1000 t",
                    bound="positive",
                ),
                "release_bins": Key(
                    "integer",
                    "Each candidate window is split into this many equal release-time bins, "
                    "weighed as separate hypotheses.",
                    default=1,
                    bound="positive",
                ),
                "interval": Key(
                    "number",
                    "Probability of the central interval reported for the release mass.",
                    default=0.9,
                    bound="positive",
                ),
            },
            required=True,
        ),
        "output": SCHEMA.keys["output"],
    },
)
