"""Every key a scenario file may hold, described once as data (:data:`SCHEMA`).

The validator (:mod:`walkers.scenario.walk`) and the reference page ``docs/scenario.md``
(:mod:`walkers.scenario.docs`) both read this table, so they cannot drift apart.
"""

from __future__ import annotations

from walkers.scenario.column_output import COLUMN_OUTPUT
from walkers.scenario.config import EDGE_NAMES, INDEX_EDGE_NAMES
from walkers.scenario.keys import Choice, Key, Section
from walkers.scenario.schema_flow import FLOW
from walkers.scenario.schema_vertical import RELEASE_COLUMN_CHOICES, RELEASE_COLUMN_KEYS, VERTICAL

_EDGE = Key(
    "choice",
    "What happens to a particle that reaches this edge of the flow domain: 'absorbing' (it goes "
    "out and its mass is booked to this edge in the budget) or 'reflecting' (it is mirrored back). "
    "Default: absorbing.",
    allowed=("absorbing", "reflecting"),
)

SCHEMA = Section(
    "A scenario file describes one run: when, on which flow, with which dispersion, decay and "
    "edges, what is released where, and what is written. Quantities are written as a number "
    'followed by a unit, e.g. "500 kg" or "25 cm/s"; a bare number is taken in SI units.',
    {
        "run": Section(
            "The run's time span, time step and numerical options.",
            {
                "title": Key("text", "A title carried into the outputs (default: file name)."),
                "comment": Key(
                    "text",
                    "A note carried into the outputs as their 'comment' attribute, e.g. that the "
                    "place is invented.",
                ),
                "start": Key(
                    "time",
                    "Start of the run, ISO 8601 with a zone, e.g. 2026-05-04T06:00:00Z.",
                    required=True,
                ),
                "end": Key("time", "End of the run, after the start.", required=True),
                "time_step": Key(
                    "quantity",
                    'Time step of the particle moves, e.g. "60 s".',
                    dimension="time",
                    required=True,
                    bound="positive",
                ),
                "output_interval": Key(
                    "quantity",
                    "Interval between written output times; a whole multiple of the time step.",
                    dimension="time",
                    required=True,
                    bound="positive",
                ),
                "seed": Key(
                    "integer",
                    "Seed of the random numbers; the same seed gives the same result.",
                    default=0,
                    bound="nonnegative",
                ),
                "scheme": Key(
                    "choice",
                    "Scheme for the advective part of a step: 'euler' or 'rk4' (better in "
                    "strongly curved flow).",
                    default="euler",
                    allowed=("euler", "rk4"),
                ),
                "substep": Key(
                    "boolean",
                    "Where a step would move a particle more than a flow cell, split the step "
                    "into sub-steps instead of stopping with an error.",
                    default=False,
                ),
                "tracks": Key(
                    "integer",
                    "Number of particles whose tracks are sampled and written.",
                    default=0,
                    bound="nonnegative",
                ),
            },
            required=True,
        ),
        "flow": FLOW,
        "dispersion": Section(
            "Horizontal dispersion: constant coefficients, or estimated from the flow's depth and "
            "speed with Elder (1959) along the flow and Fischer et al. (1979, ch. 5) across it.",
            {
                "method": Key(
                    "choice",
                    "'constant' or 'estimated'.",
                    default="constant",
                    allowed=("constant", "estimated"),
                ),
                "coefficient": Key(
                    "quantity",
                    "One coefficient in every direction.",
                    dimension="diffusivity",
                    bound="nonnegative",
                    only_when="method=constant",
                ),
                "longitudinal": Key(
                    "quantity",
                    "Coefficient along the local flow direction.",
                    dimension="diffusivity",
                    bound="nonnegative",
                    only_when="method=constant",
                ),
                "transverse": Key(
                    "quantity",
                    "Coefficient across the local flow direction.",
                    dimension="diffusivity",
                    bound="nonnegative",
                    only_when="method=constant",
                ),
                "along_x": Key(
                    "quantity",
                    "Coefficient along the grid's x axis.",
                    dimension="diffusivity",
                    bound="nonnegative",
                    only_when="method=constant",
                ),
                "along_y": Key(
                    "quantity",
                    "Coefficient along the grid's y axis.",
                    dimension="diffusivity",
                    bound="nonnegative",
                    only_when="method=constant",
                ),
                "manning_n": Key(
                    "number",
                    "Manning roughness n (s m^-1/3): u* = n |U| sqrt(g) / h^(1/6).",
                    bound="positive",
                    only_when="method=estimated",
                ),
                "drag_coefficient": Key(
                    "number",
                    "Bed drag coefficient C_d: u* = sqrt(C_d) |U|.",
                    bound="positive",
                    only_when="method=estimated",
                ),
                "channel": Key(
                    "choice",
                    "'straight' (K_T = 0.15 h u*) or 'meandering' (K_T = 0.6 h u*; also for "
                    "estuaries).",
                    default="meandering",
                    allowed=("straight", "meandering"),
                    only_when="method=estimated",
                ),
                "minimum": Key(
                    "quantity",
                    "Background coefficient: estimated values below it are raised to it, so that "
                    "slack or still water (harbour basins) still mixes (common practice: "
                    "0.1-1 m2/s).",
                    dimension="diffusivity",
                    default="0 m2/s",
                    bound="nonnegative",
                    only_when="method=estimated",
                ),
                "multiplier": Key(
                    "number",
                    "Factor applied to the coefficients.",
                    default=1.0,
                    bound="nonnegative",
                ),
            },
            required=True,
            choices=(
                Choice(
                    (("coefficient",), ("longitudinal", "transverse"), ("along_x", "along_y")),
                    only_when="method=constant",
                ),
                Choice((("manning_n",), ("drag_coefficient",)), only_when="method=estimated"),
            ),
        ),
        "vertical": VERTICAL,
        "decay": Section(
            "First-order decay of the released substance: m <- m exp(-k dt).",
            {
                "rate": Key("quantity", "Decay rate k.", dimension="rate", bound="nonnegative"),
                "half_life": Key(
                    "quantity",
                    "Half-life T; k = ln 2 / T.",
                    dimension="time",
                    bound="positive",
                ),
            },
            choices=(Choice((("rate",), ("half_life",)), required=False),),
        ),
        "edges": Section(
            "Behaviour of the four edges of the flow domain. On a rectilinear grid they are "
            "west, east, south and north; on a curvilinear grid they are named by grid index: "
            "first_i (the column i = 0), last_i, first_j (the row j = 0) and last_j ('walkers "
            "inspect' says which way each faces). Edges not named are absorbing.",
            {name: _EDGE for name in EDGE_NAMES + INDEX_EDGE_NAMES},
        ),
        "releases": Section(
            "One table [[releases]] per release.",
            {
                "name": Key("text", "Label in outputs (default release1, release2, ...)."),
                "shape": Key(
                    "choice",
                    "point, line (two ends in 'points'), circle (centre and radius) or polygon "
                    "(vertices in 'points').",
                    default="point",
                    allowed=("point", "line", "circle", "polygon"),
                ),
                "x": Key("coordinate", "x of the point or circle centre (m)."),
                "y": Key("coordinate", "y of the point or circle centre (m)."),
                "lon": Key("degrees", "Longitude of the point or circle centre (geographic)."),
                "lat": Key("degrees", "Latitude of the point or circle centre (geographic)."),
                "points": Key("points", "Line ends or polygon vertices, [[x, y], ...] in metres."),
                "points_lonlat": Key(
                    "points", "Line ends or polygon vertices, [[lon, lat], ...] in degrees."
                ),
                "radius": Key(
                    "quantity",
                    "Radius of a circle release.",
                    dimension="length",
                    bound="positive",
                    only_when="shape=circle",
                ),
                "start": Key("time", "Start of the release (default: run start)."),
                "duration": Key(
                    "quantity",
                    "Duration; 0 for an instantaneous release (default 0 with 'mass').",
                    dimension="time",
                    bound="nonnegative",
                ),
                "mass": Key(
                    "quantity",
                    "Total mass released.",
                    dimension="mass",
                    bound="positive",
                ),
                "rate": Key(
                    "quantity",
                    "Constant release rate over the duration.",
                    dimension="mass_rate",
                    bound="positive",
                ),
                "rate_times": Key(
                    "times_or_offsets",
                    'Times of a rate series: offsets from the release start ("0 h", "1 h") '
                    "or ISO 8601 date-times; ascending, the first at or before the start.",
                ),
                "rates": Key(
                    "quantities",
                    "Release rates at rate_times (linear in between).",
                    dimension="mass_rate",
                    bound="nonnegative",
                ),
                "particles": Key(
                    "integer",
                    "Number of particles for this release.",
                    required=True,
                    bound="positive",
                ),
                **RELEASE_COLUMN_KEYS,
            },
            many=True,
            required=True,
            choices=(
                Choice((("x", "y"), ("lon", "lat"), ("points",), ("points_lonlat",))),
                Choice((("mass",), ("rate",), ("rate_times", "rates"))),
                *RELEASE_COLUMN_CHOICES,
            ),
        ),
        "output": Section(
            "What is written and on which grid.",
            {
                "file": Key(
                    "text",
                    "Output NetCDF file, relative to the scenario file (default: the "
                    "scenario's name with .nc, next to it).",
                ),
                "bandwidth": Key(
                    "quantity",
                    "Gaussian kernel bandwidth of the smoothed concentration; 0 = cell counts.",
                    dimension="length",
                    default="0 m",
                    bound="nonnegative",
                ),
                "grid": Section(
                    "The concentration grid, independent of the flow grid, in grid coordinates: "
                    "either its extent and cell size, or its first cell centre, cell size and "
                    "cell counts.",
                    {
                        "west": Key("coordinate", "West edge of the grid."),
                        "east": Key("coordinate", "East edge of the grid."),
                        "south": Key("coordinate", "South edge of the grid."),
                        "north": Key("coordinate", "North edge of the grid."),
                        "x_origin": Key("coordinate", "x of the first cell centre."),
                        "y_origin": Key("coordinate", "y of the first cell centre."),
                        "cells_x": Key("integer", "Number of cells along x.", bound="positive"),
                        "cells_y": Key("integer", "Number of cells along y.", bound="positive"),
                        "cell_size": Key("coordinate", "Cell size along x and y."),
                        "cell_size_x": Key("coordinate", "Cell size along x."),
                        "cell_size_y": Key("coordinate", "Cell size along y."),
                    },
                    required=True,
                    choices=(
                        Choice(
                            (
                                ("west", "east", "south", "north"),
                                ("x_origin", "y_origin", "cells_x", "cells_y"),
                            )
                        ),
                        Choice((("cell_size",), ("cell_size_x", "cell_size_y"))),
                    ),
                ),
                **COLUMN_OUTPUT,
            },
            required=True,
        ),
        "receptors": Section(
            "One table [[receptors]] per place where concentration is recorded over time.",
            {
                "name": Key("text", "Label in outputs (default receptor1, receptor2, ...)."),
                "x": Key("coordinate", "x of the receptor (m)."),
                "y": Key("coordinate", "y of the receptor (m)."),
                "lon": Key("degrees", "Longitude of the receptor (geographic)."),
                "lat": Key("degrees", "Latitude of the receptor (geographic)."),
                "radius": Key(
                    "quantity",
                    "Averaging radius; 0 = the output cell holding the point.",
                    dimension="length",
                    default="0 m",
                    bound="nonnegative",
                ),
                "thresholds": Key(
                    "quantities",
                    'Concentrations of concern, e.g. ["0.1 mg/L", "1 mg/L"].',
                    dimension="concentration",
                    bound="positive",
                ),
            },
            many=True,
            choices=(Choice((("x", "y"), ("lon", "lat"))),),
        ),
        "ensemble": Section(
            "Many runs with an uncertain source: each member draws the start, place, mass, "
            "duration of one release and the dispersion multiplier from the distributions given.",
            {
                "members": Key("integer", "Number of members.", required=True, bound="positive"),
                "release": Key(
                    "text", "Name of the release that varies (default: the only release)."
                ),
                "start_earliest": Key("time", "Earliest start (uniform window)."),
                "start_latest": Key("time", "Latest start (uniform window)."),
                "start_sd": Key(
                    "quantity",
                    "Standard deviation of a normal start time about the release start.",
                    dimension="time",
                    bound="positive",
                ),
                "location_sd": Key(
                    "quantity",
                    "Standard deviation of a normal displacement along x and y.",
                    dimension="length",
                    bound="positive",
                ),
                "location_radius": Key(
                    "quantity",
                    "Radius of a circle in which the position is uniform.",
                    dimension="length",
                    bound="positive",
                ),
                "mass_median": Key(
                    "quantity", "Median of a log-normal mass.", dimension="mass", bound="positive"
                ),
                "mass_spread": Key(
                    "number",
                    "Log-normal spread factor exp(sigma) (>= 1): about 68 % of members lie "
                    "within median / spread and median * spread.",
                ),
                "mass_min": Key(
                    "quantity", "Triangular mass: minimum.", dimension="mass", bound="positive"
                ),
                "mass_mode": Key(
                    "quantity", "Triangular mass: mode.", dimension="mass", bound="positive"
                ),
                "mass_max": Key(
                    "quantity", "Triangular mass: maximum.", dimension="mass", bound="positive"
                ),
                "duration_min": Key(
                    "quantity",
                    "Uniform duration: minimum.",
                    dimension="time",
                    bound="nonnegative",
                ),
                "duration_max": Key(
                    "quantity",
                    "Uniform duration: maximum.",
                    dimension="time",
                    bound="nonnegative",
                ),
                "dispersion_multiplier_min": Key(
                    "number", "Uniform dispersion multiplier: minimum.", bound="nonnegative"
                ),
                "dispersion_multiplier_max": Key(
                    "number", "Uniform dispersion multiplier: maximum.", bound="nonnegative"
                ),
                "deposit_thresholds": Key(
                    "quantities",
                    "Three-dimensional runs with a depositing bed: deposits on the bed of concern "
                    '(mass per bed area), e.g. ["1 g/m2", "10 g/m2"]; the ensemble gives the '
                    "probability that the deposit exceeds each.",
                    dimension="areal_density",
                    bound="positive",
                ),
            },
            choices=(
                Choice((("start_earliest", "start_latest"), ("start_sd",)), required=False),
                Choice((("location_sd",), ("location_radius",)), required=False),
                Choice(
                    (("mass_median", "mass_spread"), ("mass_min", "mass_mode", "mass_max")),
                    required=False,
                ),
                Choice((("duration_min", "duration_max"),), required=False),
                Choice(
                    (("dispersion_multiplier_min", "dispersion_multiplier_max"),),
                    required=False,
                ),
            ),
        ),
    },
)
