"""The scenario file (TOML): parse, check at the door, and produce typed SI-unit run objects.

Every key the scenario file may hold is described once, as data, in :data:`SCHEMA` (kind, units,
default, whether required, allowed values, help). :func:`load_scenario` walks a TOML file or a dict
against it: unknown keys are rejected with a "did you mean", values are converted to SI with
:func:`walkers.units.parse_quantity`, and every complaint is an :class:`~walkers.errors.InputError`
that names the file, the key path (e.g. ``releases[0].mass``), the bad value and what is accepted.
The reference page ``docs/scenario.md`` is generated from the same schema by
:func:`schema_markdown`, so the documentation and the validator cannot drift apart.

Times: ``run.start``/``run.end`` and release starts are ISO 8601 date-times with a zone. Inside the
returned :class:`Scenario` all release times are seconds relative to the run start.
"""

from __future__ import annotations

import dataclasses
import difflib
import glob
import math
import tomllib
from dataclasses import dataclass
from datetime import datetime
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

import numpy as np

from walkers.config import EDGE_NAMES, Dispersion, OutputGrid, Receptor, Release, Transport
from walkers.errors import InputError
from walkers.units import UNIT_TABLE, accepted_units, parse_quantity, unit_factor

if TYPE_CHECKING:
    from walkers.fields.base import FlowField, GriddedVariable

#: Most particles a single run (one ensemble member) may hold.
MAX_PARTICLES = 10**8
#: Most cells an output grid may hold.
MAX_OUTPUT_CELLS = 10**8
#: Flow roles a flow file may supply, with the dimension of their units (None: no units).
FLOW_ROLES: dict[str, str | None] = {
    "u": "velocity",
    "v": "velocity",
    "depth": "length",
    "bed_level": "length",
    "water_level": "length",
    "mask": None,
    "area": "area",
}

# --------------------------------------------------------------------------------------------
# The schema: data describing every key.
# --------------------------------------------------------------------------------------------

KINDS = {
    "text": "text",
    "choice": "one of the allowed words",
    "integer": "whole number",
    "number": "number (no units)",
    "boolean": "true or false",
    "quantity": "number with units",
    "quantities": "list of numbers with units",
    "integers": "list of whole numbers",
    "time": "ISO 8601 date-time with a zone",
    "times_or_offsets": "list of ISO 8601 date-times or time offsets",
    "coordinate": "grid coordinate (m, or degrees on geographic grids)",
    "degrees": "degrees (number)",
    "points": "list of [x, y] pairs",
    "paths": "file path or list of file paths",
    "unit": "unit name",
}


@dataclass(frozen=True)
class Key:
    """One scenario key: its kind (see :data:`KINDS`), help text and checks.

    dimension : for quantities and unit names, the physical dimension (see walkers.units).
    default : the value used when the key is absent, written as in the file (None: no default).
    allowed : for ``kind="choice"``, the accepted words.
    bound : ``"positive"`` (> 0) or ``"nonnegative"`` (>= 0) for numbers and quantities.
    length : for lists, the exact number of items (0: any number >= 1).
    only_when : the key is allowed only when another key is present (``"files"``) or has a given
        value (``"method=estimated"``) in the same table.
    """

    kind: str
    help: str
    dimension: str | None = None
    default: Any = None
    required: bool = False
    allowed: tuple[str, ...] = ()
    bound: str = ""
    length: int = 0
    only_when: str = ""


@dataclass(frozen=True)
class Choice:
    """Alternative groups of keys of which exactly one group must be given (each group complete).

    ``required=False``: at most one group. ``only_when`` as for :class:`Key`.
    """

    alternatives: tuple[tuple[str, ...], ...]
    required: bool = True
    only_when: str = ""


@dataclass(frozen=True)
class Section:
    """A table of the scenario file (``many=True``: an array of tables, ``[[name]]``)."""

    help: str
    keys: dict[str, Key | Section]
    many: bool = False
    required: bool = False
    choices: tuple[Choice, ...] = ()
    only_when: str = ""


_EDGE = Key(
    "choice",
    "What happens to a particle that reaches this edge of the flow domain: 'absorbing' (it leaves "
    "and its mass is booked to this edge in the budget) or 'reflecting' (it is mirrored back).",
    default="absorbing",
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
        "flow": Section(
            "The velocity field: flow files (NetCDF) or an analytic flow.",
            {
                "files": Key(
                    "paths",
                    "Flow file, or list of files in time order; relative to the scenario file; "
                    "wildcards (*, ?) are expanded and sorted.",
                ),
                "variables": Section(
                    "Variable names in the flow files, per role, where the reader cannot find "
                    "them from their CF standard names.",
                    {
                        role: Key("text", f"Name of the {role.replace('_', ' ')} variable.")
                        for role in FLOW_ROLES
                    },
                    only_when="files",
                ),
                "units": Section(
                    "Units of the flow-file variables, per role, where the file's units "
                    "attribute is missing or wrong.",
                    {
                        role: Key("unit", f"Units of the {role.replace('_', ' ')} variable.", dim)
                        for role, dim in FLOW_ROLES.items()
                        if dim is not None
                    },
                    only_when="files",
                ),
                "crs": Key(
                    "text",
                    'Coordinate reference system of the flow grid, e.g. "EPSG:32631", where the '
                    "files do not say.",
                    only_when="files",
                ),
                "minimum_depth": Key(
                    "quantity",
                    "Cells shallower than this are dry (walls).",
                    dimension="length",
                    default="0.05 m",
                    bound="nonnegative",
                    only_when="files",
                ),
                "depth": Key(
                    "quantity",
                    "A constant water depth, for flow files that hold no depth.",
                    dimension="length",
                    bound="positive",
                    only_when="files",
                ),
                "analytic": Section(
                    "An analytic flow on a regular grid in metres, for tests and demos. Its time "
                    "0 is the run start.",
                    {
                        "kind": Key(
                            "choice",
                            "uniform: (u, v) everywhere; shear: u + shear * y; rotation: "
                            "solid-body rotation about (0, 0); tidal: u + amplitude * "
                            "cos(2 pi t / period).",
                            required=True,
                            allowed=("uniform", "shear", "rotation", "tidal"),
                        ),
                        "u": Key(
                            "quantity", "Velocity along x.", dimension="velocity", default="0 m/s"
                        ),
                        "v": Key(
                            "quantity", "Velocity along y.", dimension="velocity", default="0 m/s"
                        ),
                        "shear": Key(
                            "quantity", "Shear du/dy (shear flow).", dimension="rate", default=0
                        ),
                        "angular_velocity": Key(
                            "quantity",
                            "Angular velocity, rad/s (rotation).",
                            dimension="rate",
                            default=0,
                        ),
                        "amplitude": Key(
                            "quantity",
                            "Amplitude of the tidal velocity (tidal).",
                            dimension="velocity",
                            default="0 m/s",
                        ),
                        "period": Key(
                            "quantity",
                            "Tidal period (tidal).",
                            dimension="time",
                            default="12.42 h",
                            bound="positive",
                        ),
                        "frame_interval": Key(
                            "quantity",
                            "Interval between flow frames (tidal).",
                            dimension="time",
                            default="10 min",
                            bound="positive",
                        ),
                        "depth": Key(
                            "quantity",
                            "Water depth (2-D flows).",
                            dimension="length",
                            default="10 m",
                            bound="positive",
                            only_when="dimensions=2",
                        ),
                        "area": Key(
                            "quantity",
                            "Wetted cross-section area of the channel (1-D flows).",
                            dimension="area",
                            bound="positive",
                            only_when="dimensions=1",
                        ),
                        "extent": Key(
                            "quantities",
                            "Cell-centre extent [west, east, south, north] of the grid.",
                            dimension="length",
                            default=["-5 km", "5 km", "-5 km", "5 km"],
                            length=4,
                        ),
                        "cells": Key(
                            "integers",
                            "Number of cells [along x, along y].",
                            default=[101, 101],
                            length=2,
                            bound="positive",
                        ),
                        "dimensions": Key(
                            "integer",
                            "2 for a depth-averaged flow, 1 for a channel along x.",
                            default=2,
                        ),
                    },
                ),
            },
            required=True,
            choices=(Choice((("files",), ("analytic",))),),
        ),
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
            "Behaviour of the four edges of the flow domain.",
            {name: _EDGE for name in EDGE_NAMES},
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
            },
            many=True,
            required=True,
            choices=(
                Choice((("x", "y"), ("lon", "lat"), ("points",), ("points_lonlat",))),
                Choice((("mass",), ("rate",), ("rate_times", "rates"))),
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


# --------------------------------------------------------------------------------------------
# The typed objects produced.
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FlowSpec:
    """Where the flow comes from; :meth:`build` opens or makes it.

    kind : ``"files"`` or ``"analytic"``.
    paths : flow files (absolute), in time order.
    variables, units : per-role variable names and unit names for the reader.
    crs : coordinate reference system of the flow grid (e.g. "EPSG:32631"), or None.
    min_depth : cells shallower than this (m) are dry.
    constant_depth : water depth (m) for files without one, or None.
    analytic : keyword arguments of :func:`walkers.fields.analytic.analytic_flow`.
    time_origin : ISO 8601 time of an analytic flow's time 0 (the run start).
    time_range : (run start, run end) in ISO 8601: flow files keep only the frames covering it.
    """

    kind: Literal["files", "analytic"]
    paths: tuple[Path, ...] = ()
    variables: dict[str, str] = dataclasses.field(default_factory=dict)
    units: dict[str, str] = dataclasses.field(default_factory=dict)
    crs: str | None = None
    min_depth: float = 0.05
    constant_depth: float | None = None
    analytic: dict[str, Any] = dataclasses.field(default_factory=dict)
    time_origin: str = ""
    time_range: tuple[str, str] | None = None

    def build(self) -> FlowField:
        """Open the flow files, or lay the analytic flow on its grid (time 0 = run start)."""
        if self.kind == "files":
            from walkers.fields.netcdf import open_flow

            return open_flow(
                [str(p) for p in self.paths],
                variables=dict(self.variables),
                units=dict(self.units),
                crs=self.crs,
                min_depth=self.min_depth,
                constant_depth=self.constant_depth,
                time_range=self.time_range,
            )
        from walkers.fields.analytic import analytic_flow

        flow = analytic_flow(**self.analytic)
        return dataclasses.replace(flow, time_units=f"seconds since {self.time_origin}")


@dataclass(frozen=True)
class DispersionSpec:
    """Dispersion as asked for: constant, or estimated from the flow (see :meth:`resolve`).

    method : ``"constant"`` or ``"estimated"``.
    constant : the coefficients when constant (m2 s-1).
    manning_n (s m^-1/3) / drag_coefficient : bed roughness when estimated.
    transverse_factor : K_T / (h u*), 0.15 straight or 0.6 meandering (Fischer et al. 1979, ch. 5).
    minimum : background coefficient (m2 s-1) that estimated values are raised to, in wet cells.
    multiplier : factor on the coefficients.
    """

    method: Literal["constant", "estimated"]
    constant: Dispersion | None = None
    manning_n: float | None = None
    drag_coefficient: float | None = None
    transverse_factor: float = 0.6
    minimum: float = 0.0
    multiplier: float = 1.0

    def resolve(self, flow: FlowField) -> Dispersion:
        """The :class:`Dispersion` for this flow.

        Estimated coefficients are gridded on the flow's cell grid and aligned with the flow:
        K_L = 5.93 h u* (Elder 1959), K_T = transverse_factor h u* (Fischer et al. 1979, ch. 5),
        averaged over the flow frames (u* is computed per frame from that frame's depth and
        speed, the velocities being interpolated linearly to the cell centres). Dry cells get 0.
        """
        if self.method == "constant":
            assert self.constant is not None
            return self.constant
        from walkers.coefficients import estimate_dispersion

        if flow.ndim != 2:
            raise InputError(
                "dispersion.method = 'estimated' needs a 2-D flow with a water depth; for a 1-D "
                "channel give dispersion.longitudinal (or coefficient) as a constant"
            )
        xc, yc = flow.x, flow.y
        k_l = np.zeros((len(yc), len(xc)))
        k_t = np.zeros_like(k_l)
        n = len(flow.times)
        for i in range(n):
            u = _on_cells(flow.u, flow.u.frames(i, i)[0], xc, yc)
            v = _on_cells(flow.v, flow.v.frames(i, i)[0], xc, yc)
            h = flow.depth.frames(i, i)[0]
            wet = flow.wet.frames(i, i)[0] > 0.5
            h = np.where(wet & np.isfinite(h), h, 0.0)
            kl, kt = estimate_dispersion(
                h,
                np.hypot(u, v),
                manning_n=self.manning_n,
                drag_coefficient=self.drag_coefficient,
                transverse_factor=self.transverse_factor,
            )
            k_l += np.where(wet, np.maximum(kl, self.minimum), 0.0) / n
            k_t += np.where(wet, np.maximum(kt, self.minimum), 0.0) / n
        return Dispersion(
            k1=float(k_l.max(initial=0.0)),
            k2=float(k_t.max(initial=0.0)),
            mode="aligned",
            k1_field=k_l,
            k2_field=k_t,
            multiplier=self.multiplier,
        )


def _on_cells(var: GriddedVariable, frame: np.ndarray, xc: np.ndarray, yc: np.ndarray):
    """A (ny, nx) frame on the variable's own coordinates, linearly interpolated to the cells.

    Missing values (land) count as still water.
    """
    a = np.nan_to_num(np.asarray(frame, dtype=np.float64), nan=0.0)
    if len(var.x) > 1:
        a = np.stack([np.interp(xc, var.x, row) for row in a])
    else:
        a = np.broadcast_to(a[:, :1], (a.shape[0], len(xc)))
    if len(var.y) > 1:
        a = np.stack([np.interp(yc, var.y, col) for col in a.T], axis=1)
    else:
        a = np.broadcast_to(a[:1, :], (len(yc), len(xc)))
    return a


@dataclass(frozen=True)
class EnsembleSpec:
    """How ensemble members vary the source of one release (all times and lengths SI).

    members : number of members.
    release : name of the release that varies; release_index : its position in the releases.
    start : ``"fixed"``, ``"uniform"`` (in [start_earliest, start_latest], s from the run start)
        or ``"normal"`` (sd ``start_sd`` s about the release's start).
    location : ``"fixed"``, ``"normal"`` (sd ``location_sd`` m along x and y) or
        ``"uniform_circle"`` (within ``location_radius`` m of the release position).
    mass : ``"fixed"``, ``"lognormal"`` (median ``mass_median`` kg, spread factor exp(sigma)
        ``mass_spread``) or ``"triangular"`` (``mass_min``, ``mass_mode``, ``mass_max`` kg); for a
        rate release the rates scale with the drawn mass.
    duration_range : uniform duration (s) range, or None.
    dispersion_multiplier_range : uniform multiplier range, or None.
    """

    members: int
    release: str
    release_index: int
    start: Literal["fixed", "uniform", "normal"] = "fixed"
    start_earliest: float = 0.0
    start_latest: float = 0.0
    start_sd: float = 0.0
    location: Literal["fixed", "normal", "uniform_circle"] = "fixed"
    location_sd: float = 0.0
    location_radius: float = 0.0
    mass: Literal["fixed", "lognormal", "triangular"] = "fixed"
    mass_median: float = 0.0
    mass_spread: float = 1.0
    mass_min: float = 0.0
    mass_mode: float = 0.0
    mass_max: float = 0.0
    duration_range: tuple[float, float] | None = None
    dispersion_multiplier_range: tuple[float, float] | None = None


@dataclass(frozen=True)
class Scenario:
    """A checked scenario in SI units.

    Time frame: ``start``/``end`` are the run's limits (timezone-aware datetimes; ``start_iso`` /
    ``end_iso`` the same in ISO 8601). Every release time (``Release.start``, ``rate_times``) and
    the ensemble start window are in **seconds relative to the run start**. The driver converts
    them to the flow's time frame by adding the offset of the run start in that frame (for an
    analytic flow the offset is 0: its time 0 is the run start).

    transport : time step, scheme, decay and edges, with the dispersion; None when the dispersion
        is estimated from the flow. :meth:`transport_for` (flow) is right in both cases.
    transport_base : the same without a meaningful dispersion (zero coefficients); internal.
    geographic : positions are lon/lat degrees (grid coordinates of a geographic flow grid).
    text : the scenario file's text (TOML; for a dict input, None).
    """

    title: str
    start_iso: str
    end_iso: str
    start: datetime
    end: datetime
    dt: float
    output_interval: float
    seed: int
    substep: bool
    tracks: int
    transport: Transport | None
    dispersion: DispersionSpec
    releases: list[Release]
    output: OutputGrid
    receptors: list[Receptor]
    flow: FlowSpec
    output_path: Path
    ensemble: EnsembleSpec | None
    geographic: bool
    text: str | None
    source_path: Path | None
    transport_base: Transport = dataclasses.field(repr=False)

    @property
    def duration(self) -> float:
        """Length of the run (s)."""
        return (self.end - self.start).total_seconds()

    @property
    def total_particles(self) -> int:
        return sum(int(r.particles) for r in self.releases)

    def transport_for(self, flow: FlowField) -> Transport:
        """The :class:`Transport` for a run on ``flow``, with the dispersion resolved on it."""
        return dataclasses.replace(self.transport_base, dispersion=self.dispersion.resolve(flow))

    def check_flow(self, flow: FlowField) -> None:
        """Check that positions fit the flow: coordinate kind, and releases, receptors and the
        output grid inside the flow domain. Raises InputError naming the offending key."""
        if flow.geographic != self.geographic:
            want = "lon/lat (degrees)" if flow.geographic else "x/y (metres)"
            raise InputError(
                f"the flow grid is {'geographic' if flow.geographic else 'projected'}: give "
                f"release and receptor positions as {want}"
            )
        west, east, south, north = flow.extent()
        if flow.ndim == 1:
            south, north = -math.inf, math.inf
        for i, rel in enumerate(self.releases):
            pts = np.asarray(rel.coords)
            if not (
                np.all((pts[:, 0] >= west) & (pts[:, 0] <= east))
                and np.all((pts[:, 1] >= south) & (pts[:, 1] <= north))
            ):
                raise InputError(
                    f"releases[{i}] ({rel.name}): position outside the flow domain "
                    f"x {west:g}..{east:g}, y {south:g}..{north:g}"
                )
        for i, rec in enumerate(self.receptors):
            if not (west <= rec.x <= east and south <= rec.y <= north):
                raise InputError(
                    f"receptors[{i}] ({rec.name}): ({rec.x:g}, {rec.y:g}) is outside the flow "
                    f"domain x {west:g}..{east:g}, y {south:g}..{north:g}"
                )
        g = self.output
        if g.x[-1] < west or g.x[0] > east or g.y[-1] < south or g.y[0] > north:
            raise InputError(
                f"output.grid does not overlap the flow domain x {west:g}..{east:g}, "
                f"y {south:g}..{north:g}"
            )


# --------------------------------------------------------------------------------------------
# Walking a table against the schema.
# --------------------------------------------------------------------------------------------


def _join(path: str, key: str) -> str:
    return f"{path}.{key}" if path else key


def _type_name(value: object) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int | float):
        return "a number"
    if isinstance(value, str):
        return "text"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list | tuple):
        return "a list"
    if isinstance(value, datetime):
        return "a date-time"
    return f"a {type(value).__name__}"


def _condition_met(condition: str, data: dict[str, Any], section: Section) -> bool:
    """Whether ``"key"`` is present or ``"key=value"`` holds (defaults count) in ``data``."""
    if not condition:
        return True
    key, _, wanted = condition.partition("=")
    if not wanted:
        return key in data
    spec = section.keys[key]
    value = data.get(key, spec.default if isinstance(spec, Key) else None)
    return isinstance(value, str | int) and not isinstance(value, bool) and str(value) == wanted


def _condition_text(condition: str) -> str:
    key, _, wanted = condition.partition("=")
    if not wanted:
        return f"{key} is given"
    return f"{key} = {wanted}" if wanted.isdigit() else f"{key} = {wanted!r}"


def _alternatives_text(choice: Choice) -> str:
    return " | ".join(" + ".join(group) for group in choice.alternatives)


def _walk(section: Section, data: object, path: str) -> dict[str, Any]:
    """Check ``data`` against ``section``; return the converted values (None where absent)."""
    label = path or "the scenario"
    if not isinstance(data, dict):
        raise InputError(f"{label}: expected a table of keys, got {_type_name(data)} {data!r}")
    names = list(section.keys)
    for key in data:
        if not isinstance(key, str) or key not in section.keys:
            hint = difflib.get_close_matches(str(key), names, n=1, cutoff=0.6)
            did_you_mean = f"; did you mean {hint[0]!r}?" if hint else ""
            raise InputError(
                f"{_join(path, str(key))}: unknown key{did_you_mean} Keys accepted in "
                f"{label}: {', '.join(names)}"
            )
    for key in data:
        spec = section.keys[key]
        if spec.only_when and not _condition_met(spec.only_when, data, section):
            raise InputError(
                f"{_join(path, key)}: applies only when {_condition_text(spec.only_when)}"
            )
    for choice in section.choices:
        if choice.only_when and not _condition_met(choice.only_when, data, section):
            continue
        given = []
        for group in choice.alternatives:
            present = [k for k in group if k in data]
            if present and len(present) < len(group):
                missing = [k for k in group if k not in data]
                raise InputError(
                    f"{label}: {', '.join(present)} needs {', '.join(missing)} as well "
                    f"(give {' + '.join(group)} together)"
                )
            if present:
                given.append(group)
        if len(given) > 1:
            raise InputError(
                f"{label}: give only one of {_alternatives_text(choice)}; got "
                f"{' and '.join(' + '.join(g) for g in given)}"
            )
        if not given and choice.required:
            raise InputError(f"{label}: missing; give one of {_alternatives_text(choice)}")
    out: dict[str, Any] = {}
    for key, spec in section.keys.items():
        where = _join(path, key)
        if isinstance(spec, Section):
            if spec.many:
                items = data.get(key, [])
                if not isinstance(items, list) or not all(isinstance(t, dict) for t in items):
                    raise InputError(
                        f"{where}: expected an array of tables ([[{key}]] in TOML), got "
                        f"{_type_name(items)}"
                    )
                if spec.required and not items:
                    raise InputError(f"{where}: at least one [[{key}]] table is required")
                out[key] = [_walk(spec, item, f"{where}[{i}]") for i, item in enumerate(items)]
            elif key in data:
                out[key] = _walk(spec, data[key], where)
            elif spec.required:
                raise InputError(f"{where}: the [{where}] table is required. {spec.help}")
            else:
                out[key] = None
        elif key in data:
            out[key] = _convert(spec, data[key], where)
        elif spec.required:
            raise InputError(
                f"{where}: required key missing ({KINDS[spec.kind]}{_units_note(spec)}). "
                f"{spec.help}"
            )
        elif spec.default is not None:
            out[key] = _convert(spec, spec.default, where)
        else:
            out[key] = None
    return out


def _units_note(spec: Key) -> str:
    if spec.kind in ("quantity", "quantities") and spec.dimension:
        return f", in {accepted_units(spec.dimension)}"
    return ""


def _check_bound(value: float, spec: Key, where: str, raw: object) -> None:
    if spec.bound == "positive" and not value > 0:
        raise InputError(f"{where} = {raw!r}: must be greater than 0")
    if spec.bound == "nonnegative" and not value >= 0:
        raise InputError(f"{where} = {raw!r}: must be 0 or greater")


def _is_number(value: object) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _finite(value: object) -> bool:
    """Whether ``value`` is a number (not a boolean) that converts to a finite float."""
    if not isinstance(value, int | float) or isinstance(value, bool):
        return False
    try:
        return math.isfinite(float(value))
    except OverflowError:
        return False


def _resolve_path(name: str, base: Path, where: str) -> Path:
    """``name`` as an absolute path; relative paths are taken from ``base``."""
    try:
        path = Path(name).expanduser()
    except RuntimeError:
        raise InputError(f"{where} = {name!r}: cannot expand '~' in this path") from None
    return path if path.is_absolute() else base / path


def _parse_time(value: object, where: str) -> datetime:
    example = 'expected an ISO 8601 date-time with a zone, e.g. "2026-05-04T06:00:00Z"'
    if isinstance(value, datetime):
        stamp = value
    elif isinstance(value, str):
        try:
            stamp = datetime.fromisoformat(value.strip())
        except ValueError:
            raise InputError(f"{where} = {value!r}: not a date-time; {example}") from None
    else:
        raise InputError(f"{where} = {value!r}: {example}, got {_type_name(value)}")
    if stamp.tzinfo is None or stamp.utcoffset() is None:
        raise InputError(
            f'{where} = {value!r}: no time zone; add one ("Z" for UTC or e.g. "+01:00"); {example}'
        )
    return stamp


def _convert(spec: Key, raw: object, where: str) -> Any:
    """Convert one value of kind ``spec.kind``; raise InputError naming ``where`` if it is bad."""
    kind = spec.kind
    if kind in ("text", "choice"):
        if not isinstance(raw, str) or not raw.strip() or "\x00" in raw:
            raise InputError(f"{where} = {raw!r}: expected {KINDS[kind]}, got {_type_name(raw)}")
        if kind == "choice" and raw not in spec.allowed:
            hint = difflib.get_close_matches(raw, spec.allowed, n=1, cutoff=0.6)
            did_you_mean = f" (did you mean {hint[0]!r}?)" if hint else ""
            raise InputError(
                f"{where} = {raw!r}{did_you_mean}: expected one of "
                f"{', '.join(repr(a) for a in spec.allowed)}"
            )
        return raw.strip()
    if kind == "integer":
        if not isinstance(raw, int) or isinstance(raw, bool):
            raise InputError(f"{where} = {raw!r}: expected a whole number, got {_type_name(raw)}")
        _check_bound(raw, spec, where, raw)
        return raw
    if kind == "number":
        if not isinstance(raw, int | float) or not _finite(raw):
            raise InputError(f"{where} = {raw!r}: expected a finite number without units")
        _check_bound(float(raw), spec, where, raw)
        return float(raw)
    if kind == "boolean":
        if not isinstance(raw, bool):
            raise InputError(f"{where} = {raw!r}: expected true or false, got {_type_name(raw)}")
        return raw
    if kind == "quantity":
        value = parse_quantity(raw, spec.dimension or "", where)
        _check_bound(value, spec, where, raw)
        return value
    if kind == "time":
        return _parse_time(raw, where)
    if kind == "unit":
        if not isinstance(raw, str):
            raise InputError(f"{where} = {raw!r}: expected a unit name such as 'cm/s'")
        unit_factor(raw, spec.dimension or "", f"{where} = {raw!r}")
        return raw.strip()
    if kind == "coordinate":
        if not (_is_number(raw) or isinstance(raw, str)):
            raise InputError(
                f"{where} = {raw!r}: expected a grid coordinate (a number, or a length such as "
                f'"2 km"), got {_type_name(raw)}'
            )
        return raw
    if kind == "degrees":
        if not isinstance(raw, int | float) or not _finite(raw):
            raise InputError(f"{where} = {raw!r}: expected a number of degrees")
        return float(raw)
    if kind == "paths":
        items = [raw] if isinstance(raw, str) else raw
        if (
            not isinstance(items, list)
            or not items
            or not all(isinstance(p, str) and p.strip() and "\x00" not in p for p in items)
        ):
            raise InputError(
                f"{where} = {raw!r}: expected a file path or a non-empty list of file paths"
            )
        return [p.strip() for p in items]
    # The remaining kinds are lists.
    if not isinstance(raw, list) or not raw:
        raise InputError(
            f"{where} = {raw!r}: expected a non-empty list ({KINDS[kind]}), got {_type_name(raw)}"
        )
    if spec.length and len(raw) != spec.length:
        raise InputError(f"{where} = {raw!r}: expected a list of {spec.length} items")
    if kind == "quantities":
        values = [
            parse_quantity(v, spec.dimension or "", f"{where}[{i}]") for i, v in enumerate(raw)
        ]
        for i, v in enumerate(values):
            _check_bound(v, spec, f"{where}[{i}]", raw[i])
        return values
    if kind == "integers":
        sub = dataclasses.replace(spec, kind="integer")
        return [_convert(sub, v, f"{where}[{i}]") for i, v in enumerate(raw)]
    if kind == "times_or_offsets":
        return [_time_or_offset(v, f"{where}[{i}]") for i, v in enumerate(raw)]
    if kind == "points":
        for i, pair in enumerate(raw):
            if not (
                isinstance(pair, list)
                and len(pair) == 2
                and all(_is_number(c) or isinstance(c, str) for c in pair)
            ):
                raise InputError(f"{where}[{i}] = {pair!r}: expected a pair [x, y]")
        return raw
    raise ValueError(f"schema error: unknown kind {kind!r} at {where}")


def _time_or_offset(raw: object, where: str) -> tuple[str, Any]:
    """("time", datetime) for an ISO 8601 date-time, ("offset", seconds) for a duration."""
    if isinstance(raw, datetime) or (isinstance(raw, str) and "T" in raw and ":" in raw):
        return "time", _parse_time(raw, where)
    try:
        return "offset", parse_quantity(raw, "time", where)
    except InputError:
        raise InputError(
            f'{where} = {raw!r}: expected a time offset from the release start such as "1 h" '
            'or an ISO 8601 date-time with a zone such as "2026-05-04T07:00:00Z"'
        ) from None


# --------------------------------------------------------------------------------------------
# Building the typed objects.
# --------------------------------------------------------------------------------------------


def _coordinate(raw: object, where: str, geographic: bool) -> float:
    """A grid coordinate: metres (number or length) on projected grids, degrees on geographic."""
    if not geographic:
        return parse_quantity(raw, "length", where)
    if isinstance(raw, int | float) and _finite(raw):
        return float(raw)
    if isinstance(raw, str):
        number, _, unit = raw.strip().partition(" ")
        if unit.strip() in ("deg", "degrees", "°"):
            try:
                value = float(number)
            except ValueError:
                value = math.nan
            if math.isfinite(value):
                return value
    raise InputError(
        f"{where} = {raw!r}: positions are lon/lat, so grid coordinates are degrees: give a "
        'number (or "<number> deg")'
    )


def _check_lonlat(lon: float, lat: float, where: str) -> None:
    if not (-180.0 <= lon <= 360.0 and -90.0 <= lat <= 90.0):
        raise InputError(
            f"{where}: lon = {lon!r}, lat = {lat!r}: need -180 <= lon <= 360 and -90 <= lat <= 90"
        )


def _geographic(raw: dict[str, Any]) -> bool:
    """Whether positions are lon/lat; mixing lon/lat and x/y is refused."""
    styles = set()
    for table in ("releases", "receptors"):
        items = raw.get(table)
        for i, item in enumerate(items if isinstance(items, list) else []):
            if not isinstance(item, dict):
                continue
            if "lon" in item or "lat" in item or "points_lonlat" in item:
                styles.add(("geographic", f"{table}[{i}]"))
            if "x" in item or "y" in item or "points" in item:
                styles.add(("projected", f"{table}[{i}]"))
    kinds = {s for s, _ in styles}
    if len(kinds) > 1:
        geo = sorted(w for s, w in styles if s == "geographic")[0]
        proj = sorted(w for s, w in styles if s == "projected")[0]
        raise InputError(
            f"{geo} uses lon/lat but {proj} uses x/y: give all positions one way (x/y in metres "
            "for projected grids, lon/lat in degrees for geographic grids)"
        )
    return kinds == {"geographic"}


def _seconds(a: datetime, b: datetime) -> float:
    """b - a in seconds."""
    return (b - a).total_seconds()


def _build_releases(
    items: list[dict[str, Any]], start: datetime, end: datetime, geographic: bool
) -> list[Release]:
    run_length = _seconds(start, end)
    releases: list[Release] = []
    names: set[str] = set()
    for i, r in enumerate(items):
        where = f"releases[{i}]"
        name = r["name"] or f"release{i + 1}"
        if name in names:
            raise InputError(f"{where}.name = {name!r}: names must differ between releases")
        names.add(name)
        shape = r["shape"]
        if r["x"] is not None:
            coords = [
                [_coordinate(r["x"], f"{where}.x", False), _coordinate(r["y"], f"{where}.y", False)]
            ]
        elif r["lon"] is not None:
            _check_lonlat(r["lon"], r["lat"], where)
            coords = [[r["lon"], r["lat"]]]
        else:
            key = "points" if r["points"] is not None else "points_lonlat"
            coords = [
                [_coordinate(c, f"{where}.{key}[{j}]", geographic) for c in pair]
                for j, pair in enumerate(r[key])
            ]
        if geographic:
            for j, (lon, lat) in enumerate(coords):
                _check_lonlat(lon, lat, f"{where} position {j}")
        if shape in ("point", "circle") and len(coords) != 1:
            raise InputError(
                f"{where}: a {shape} release takes one position (x, y or lon, lat), not points"
            )
        if shape == "line" and len(coords) != 2:
            raise InputError(
                f"{where}: a line release takes its two ends in points = [[x1, y1], [x2, y2]]"
            )
        if shape == "line" and coords[0] == coords[1]:
            raise InputError(f"{where}.points: the two ends of a line must differ")
        if shape == "polygon":
            pts = np.asarray(coords)
            area = 0.5 * abs(
                np.dot(pts[:, 0], np.roll(pts[:, 1], 1)) - np.dot(pts[:, 1], np.roll(pts[:, 0], 1))
            )
            if len(coords) < 3 or not area > 0:
                raise InputError(
                    f"{where}.points: a polygon release needs at least 3 vertices enclosing an area"
                )
        if shape == "circle" and r["radius"] is None:
            raise InputError(f'{where}: a circle release needs radius (a length, e.g. "50 m")')
        t0 = _seconds(start, r["start"]) if r["start"] is not None else 0.0
        if not 0.0 <= t0 < run_length:
            raise InputError(
                f"{where}.start = {r['start'].isoformat()}: must lie in the run, from run.start "
                "(included) to run.end (excluded)"
            )
        duration = r["duration"]
        rate_times = rates = None
        if r["mass"] is not None:
            duration = duration or 0.0
            mass = r["mass"]
        elif r["rate"] is not None:
            if not duration:
                raise InputError(
                    f'{where}: a release given by rate needs duration > 0 (e.g. "2 h"); for an '
                    "instantaneous release give mass"
                )
            mass = r["rate"] * duration
        else:
            if len(r["rate_times"]) != len(r["rates"]) or len(r["rates"]) < 2:
                raise InputError(
                    f"{where}: rate_times and rates must be lists of the same length, at least 2 "
                    f"(got {len(r['rate_times'])} and {len(r['rates'])})"
                )
            rate_times = np.array(
                [t0 + v if tag == "offset" else _seconds(start, v) for tag, v in r["rate_times"]]
            )
            rates = np.array(r["rates"], dtype=np.float64)
            if not np.all(np.diff(rate_times) > 0):
                raise InputError(f"{where}.rate_times: times must be strictly ascending")
            if rate_times[0] > t0 + 1e-9:
                raise InputError(
                    f"{where}.rate_times: the first time must be at or before the release start"
                )
            if duration is None:
                duration = float(rate_times[-1] - t0)
            if t0 + duration > rate_times[-1] + 1e-9:
                raise InputError(
                    f"{where}.duration: the rate series ends before the release does; extend "
                    "rate_times or shorten duration"
                )
            mass = _integrate_rate(rate_times, rates, t0, t0 + duration)
            if not mass > 0:
                raise InputError(
                    f"{where}.rates: the rates integrate to no mass over the release; give "
                    "rates > 0"
                )
        if t0 + duration > run_length + 1e-9:
            raise InputError(
                f"{where}: the release ends after run.end; shorten duration or extend run.end"
            )
        if not (math.isfinite(mass) and mass > 0):
            raise InputError(f"{where}: the released mass {mass!r} kg is not a finite number > 0")
        releases.append(
            Release(
                shape=shape,
                coords=np.asarray(coords, dtype=np.float64),
                particles=r["particles"],
                start=t0,
                duration=float(duration),
                mass=float(mass),
                radius=r["radius"] or 0.0,
                rate_times=rate_times,
                rates=rates,
                name=name,
            )
        )
    return releases


def _integrate_rate(times: np.ndarray, rates: np.ndarray, t0: float, t1: float) -> float:
    """Mass (kg) released by the piecewise-linear rate series between t0 and t1 (s)."""
    inner = times[(times > t0) & (times < t1)]
    t = np.concatenate([[t0], inner, [t1]])
    r = np.interp(t, times, rates)
    return float(np.sum(0.5 * (r[1:] + r[:-1]) * np.diff(t)))


def _build_output_grid(g: dict[str, Any], bandwidth: float, geographic: bool) -> OutputGrid:
    def coord(key: str) -> float:
        return _coordinate(g[key], f"output.grid.{key}", geographic)

    if g["cell_size"] is not None:
        dx = dy = coord("cell_size")
        size_key_x = size_key_y = "cell_size"
    else:
        dx, dy = coord("cell_size_x"), coord("cell_size_y")
        size_key_x, size_key_y = "cell_size_x", "cell_size_y"
    for value, key in ((dx, size_key_x), (dy, size_key_y)):
        if not value > 0:
            raise InputError(f"output.grid.{key} = {g[key]!r}: must be greater than 0")
    if g["west"] is not None:
        west, east, south, north = (coord(k) for k in ("west", "east", "south", "north"))
        if not (east > west and north > south):
            raise InputError(
                "output.grid: east must be greater than west and north greater than south"
            )
        fx, fy = (east - west) / dx, (north - south) / dy
        if not fx * fy <= MAX_OUTPUT_CELLS:
            raise InputError(
                f"output.grid: about {fx:.3g} x {fy:.3g} cells is more than "
                f"{MAX_OUTPUT_CELLS:.0e}; use larger cells or a smaller extent"
            )
        nx = math.ceil(fx - 1e-9)
        ny = math.ceil(fy - 1e-9)
        x0, y0 = west + 0.5 * dx, south + 0.5 * dy
    else:
        x0, y0 = coord("x_origin"), coord("y_origin")
        nx, ny = g["cells_x"], g["cells_y"]
    if nx * ny > MAX_OUTPUT_CELLS:
        raise InputError(
            f"output.grid: {nx} x {ny} cells is more than {MAX_OUTPUT_CELLS:.0e}; use larger "
            "cells or a smaller extent"
        )
    return OutputGrid(x0=x0, dx=dx, nx=nx, y0=y0, dy=dy, ny=ny, bandwidth=bandwidth)


def _build_receptors(items: list[dict[str, Any]]) -> list[Receptor]:
    receptors = []
    names: set[str] = set()
    for i, r in enumerate(items):
        where = f"receptors[{i}]"
        name = r["name"] or f"receptor{i + 1}"
        if name in names:
            raise InputError(f"{where}.name = {name!r}: names must differ between receptors")
        names.add(name)
        if r["x"] is not None:
            x = _coordinate(r["x"], f"{where}.x", False)
            y = _coordinate(r["y"], f"{where}.y", False)
        else:
            _check_lonlat(r["lon"], r["lat"], where)
            x, y = r["lon"], r["lat"]
        receptors.append(
            Receptor(
                name=name,
                x=x,
                y=y,
                radius=r["radius"],
                thresholds=tuple(r["thresholds"] or ()),
            )
        )
    return receptors


def _build_dispersion(d: dict[str, Any]) -> DispersionSpec:
    if d["method"] == "estimated":
        factor = 0.15 if d["channel"] == "straight" else 0.6
        return DispersionSpec(
            method="estimated",
            manning_n=d["manning_n"],
            drag_coefficient=d["drag_coefficient"],
            transverse_factor=factor,
            minimum=d["minimum"],
            multiplier=d["multiplier"],
        )
    mode: Literal["axes", "aligned"]
    if d["coefficient"] is not None:
        k1 = k2 = d["coefficient"]
        mode = "axes"
    elif d["longitudinal"] is not None:
        k1, k2, mode = d["longitudinal"], d["transverse"], "aligned"
    else:
        k1, k2, mode = d["along_x"], d["along_y"], "axes"
    return DispersionSpec(
        method="constant",
        constant=Dispersion(k1=k1, k2=k2, mode=mode, multiplier=d["multiplier"]),
        multiplier=d["multiplier"],
    )


def _is_file(path: Path) -> bool:
    try:
        return path.is_file()
    except OSError:
        return False


def _build_flow(
    f: dict[str, Any], base_dir: Path, start: datetime, end: datetime, duration: float
) -> FlowSpec:
    if f["files"] is not None:
        paths: list[Path] = []
        for i, name in enumerate(f["files"]):
            where = f"flow.files[{i}]" if len(f["files"]) > 1 else "flow.files"
            pattern = _resolve_path(name, base_dir, where)
            if any(c in name for c in "*?["):
                found = sorted(Path(p) for p in glob.glob(str(pattern)))
                if not found:
                    raise InputError(f"{where} = {name!r}: no file matches {pattern}")
                paths.extend(found)
            elif not _is_file(pattern):
                raise InputError(
                    f"{where} = {name!r}: no such file {pattern} (paths are relative to the "
                    "scenario file)"
                )
            else:
                paths.append(pattern)
        crs = f["crs"]
        if crs is not None:
            import pyproj

            try:
                pyproj.CRS.from_user_input(crs)
            except pyproj.exceptions.CRSError:
                raise InputError(
                    f"flow.crs = {crs!r}: not a coordinate reference system pyproj knows; give "
                    'e.g. "EPSG:32631" or a WKT string'
                ) from None
        return FlowSpec(
            kind="files",
            paths=tuple(paths),
            variables={k: v for k, v in (f["variables"] or {}).items() if v is not None},
            units={k: v for k, v in (f["units"] or {}).items() if v is not None},
            crs=crs,
            min_depth=f["minimum_depth"],
            constant_depth=f["depth"],
            time_range=(start.isoformat(), end.isoformat()),
        )
    a = f["analytic"]
    west, east, south, north = a["extent"]
    nx, ny = a["cells"]
    if not (east > west and (north > south or a["dimensions"] == 1)):
        raise InputError(
            "flow.analytic.extent: give [west, east, south, north] with east > west and "
            "north > south"
        )
    if a["dimensions"] not in (1, 2):
        raise InputError(f"flow.analytic.dimensions = {a['dimensions']!r}: expected 1 or 2")
    if a["dimensions"] == 1 and a["area"] is None:
        raise InputError(
            "flow.analytic.area: a 1-D channel (dimensions = 1) needs its cross-section area, "
            'e.g. "120 m2"'
        )
    if nx < 2 or (a["dimensions"] == 2 and ny < 2) or nx * ny > MAX_OUTPUT_CELLS:
        raise InputError(
            f"flow.analytic.cells = {a['cells']!r}: need at least 2 cells along each axis and "
            f"at most {MAX_OUTPUT_CELLS:.0e} in all"
        )
    frames = duration / a["frame_interval"] if a["kind"] == "tidal" else 1
    if frames > 10**6:
        raise InputError(
            "flow.analytic.frame_interval: more than a million tidal frames; use a longer interval"
        )
    return FlowSpec(
        kind="analytic",
        analytic={
            "kind": a["kind"],
            "x_range": (west, east),
            "y_range": (south, north),
            "nx": nx,
            "ny": ny,
            "depth": a["depth"] if a["dimensions"] == 2 else a["area"],
            "u": a["u"],
            "v": a["v"],
            "shear": a["shear"],
            "angular_velocity": a["angular_velocity"],
            "amplitude": a["amplitude"],
            "period": a["period"],
            "duration": duration,
            "frame_interval": a["frame_interval"],
            "ndim": a["dimensions"],
        },
        time_origin=start.isoformat(),
    )


def _build_ensemble(
    e: dict[str, Any], releases: list[Release], start: datetime, run_length: float
) -> EnsembleSpec:
    names = [r.name for r in releases]
    if e["release"] is None:
        if len(releases) > 1:
            raise InputError(
                f"ensemble.release: missing; with several releases say which one varies "
                f"(one of {', '.join(names)})"
            )
        index = 0
    elif e["release"] in names:
        index = names.index(e["release"])
    else:
        raise InputError(
            f"ensemble.release = {e['release']!r}: no release of that name; expected one of "
            f"{', '.join(names)}"
        )
    fields: dict[str, Any] = {
        "members": e["members"],
        "release": names[index],
        "release_index": index,
    }
    if e["members"] > 10**6:
        raise InputError(f"ensemble.members = {e['members']}: at most 1000000")
    if e["start_earliest"] is not None:
        early = _seconds(start, e["start_earliest"])
        late = _seconds(start, e["start_latest"])
        if not 0 <= early < late < run_length:
            raise InputError(
                "ensemble.start_earliest/start_latest: need run.start <= earliest < latest < "
                "run.end"
            )
        fields.update(start="uniform", start_earliest=early, start_latest=late)
    elif e["start_sd"] is not None:
        fields.update(start="normal", start_sd=e["start_sd"])
    if e["location_sd"] is not None:
        fields.update(location="normal", location_sd=e["location_sd"])
    elif e["location_radius"] is not None:
        fields.update(location="uniform_circle", location_radius=e["location_radius"])
    if e["mass_median"] is not None:
        if not e["mass_spread"] >= 1:
            raise InputError(
                f"ensemble.mass_spread = {e['mass_spread']!r}: the spread factor exp(sigma) "
                "must be >= 1 (1 = no spread)"
            )
        fields.update(mass="lognormal", mass_median=e["mass_median"], mass_spread=e["mass_spread"])
    elif e["mass_min"] is not None:
        lo, mode, hi = e["mass_min"], e["mass_mode"], e["mass_max"]
        if not (lo <= mode <= hi and lo < hi):
            raise InputError(
                "ensemble.mass_min/mass_mode/mass_max: need mass_min <= mass_mode <= mass_max "
                "and mass_min < mass_max"
            )
        fields.update(mass="triangular", mass_min=lo, mass_mode=mode, mass_max=hi)
    for key in ("duration", "dispersion_multiplier"):
        lo, hi = e[f"{key}_min"], e[f"{key}_max"]
        if lo is not None:
            if not lo <= hi:
                raise InputError(f"ensemble.{key}_min: must not exceed {key}_max")
            fields[f"{key}_range"] = (lo, hi)
    return EnsembleSpec(**fields)


# --------------------------------------------------------------------------------------------
# Public entry points.
# --------------------------------------------------------------------------------------------


def load_scenario(
    source: str | Path | dict[str, Any], *, base_dir: str | Path | None = None
) -> Scenario:
    """Read, check and convert a scenario (a TOML file path or an already-parsed dict).

    Parameters
    ----------
    source : path of a TOML scenario file, or a dict with the same structure.
    base_dir : directory against which relative paths (flow files, output file) are resolved;
        default the scenario file's directory, or the current directory for a dict.

    Returns
    -------
    Scenario, in SI units, release times in seconds from the run start.

    Raises
    ------
    InputError
        for anything wrong with the input, naming the file, the key path and what is accepted.
    """
    text: str | None = None
    source_path: Path | None = None
    if isinstance(source, dict):
        raw = source
        label = "scenario"
        stem = "scenario"
    elif isinstance(source, str | Path):
        source_path = Path(source).expanduser().resolve()
        label = str(source)
        stem = source_path.stem
        try:
            text = source_path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise InputError(f"{label}: no such scenario file") from None
        except (OSError, UnicodeDecodeError) as err:
            raise InputError(f"{label}: cannot read the scenario file ({err})") from None
        try:
            raw = tomllib.loads(text)
        except tomllib.TOMLDecodeError as err:
            raise InputError(f"{label}: not valid TOML: {err}") from None
    else:
        raise InputError(f"scenario: expected a file path or a dict, got {type(source).__name__}")
    if base_dir is None:
        base = source_path.parent if source_path is not None else Path.cwd()
    else:
        base = Path(base_dir)
    try:
        return _build(raw, base, stem, text, source_path)
    except InputError as err:
        raise InputError(f"{label}: {err}") from None


def _build(
    raw: dict[str, Any], base: Path, stem: str, text: str | None, source_path: Path | None
) -> Scenario:
    geographic = _geographic(raw)
    s = _walk(SCHEMA, raw, "")
    run = s["run"]
    start, end = run["start"], run["end"]
    run_length = _seconds(start, end)
    if not run_length > 0:
        raise InputError(
            f"run.end = {end.isoformat()}: must be after run.start = {start.isoformat()}"
        )
    dt, interval = run["time_step"], run["output_interval"]
    if dt > run_length:
        raise InputError(f"run.time_step: {dt:g} s is longer than the run ({run_length:g} s)")
    if run_length / dt > 10**9:
        raise InputError(f"run.time_step: {dt:g} s makes more than 10^9 steps; use a longer one")
    if interval > run_length:
        raise InputError(
            f"run.output_interval: {interval:g} s is longer than the run ({run_length:g} s)"
        )
    ratio = interval / dt
    if abs(ratio - round(ratio)) > 1e-9 * max(ratio, 1.0) or round(ratio) < 1:
        raise InputError(
            f"run.output_interval = {interval:g} s is not a whole multiple of run.time_step = "
            f"{dt:g} s; choose e.g. {max(round(ratio), 1) * dt:g} s"
        )
    releases = _build_releases(s["releases"], start, end, geographic)
    total = sum(r.particles for r in releases)
    if total > MAX_PARTICLES:
        raise InputError(f"releases: {total} particles in all; at most {MAX_PARTICLES:.0e} per run")
    if run["tracks"] > total:
        raise InputError(f"run.tracks = {run['tracks']}: more than the {total} particles released")
    if geographic and s["flow"]["analytic"] is not None:
        raise InputError(
            "flow.analytic: analytic flows are laid out in metres; give positions as x/y"
        )
    flow = _build_flow(s["flow"], base, start, end, run_length)
    dispersion = _build_dispersion(s["dispersion"])
    decay = s["decay"] or {"rate": None, "half_life": None}
    if decay["half_life"] is not None:
        decay_rate = math.log(2.0) / decay["half_life"]
    else:
        decay_rate = decay["rate"] or 0.0
    edges = s["edges"] or {name: "absorbing" for name in EDGE_NAMES}
    base_transport = Transport(
        dt=dt,
        dispersion=Dispersion(k1=0.0, k2=0.0, multiplier=dispersion.multiplier),
        scheme=run["scheme"],
        decay_rate=decay_rate,
        edges=dict(edges),
    )
    transport = (
        dataclasses.replace(base_transport, dispersion=dispersion.constant)
        if dispersion.constant is not None
        else None
    )
    out = s["output"]
    grid = _build_output_grid(out["grid"], out["bandwidth"], geographic)
    receptors = _build_receptors(s["receptors"])
    output_path = _resolve_path(out["file"] or f"{stem}.nc", base, "output.file")
    if output_path.suffix != ".nc":
        raise InputError(f"output.file = {str(output_path)!r}: the name must end in .nc")
    if source_path is not None and output_path.resolve() == source_path:
        raise InputError("output.file: would overwrite the scenario file itself")
    ensemble = (
        _build_ensemble(s["ensemble"], releases, start, run_length)
        if s["ensemble"] is not None
        else None
    )
    if ensemble is not None and ensemble.members * total > 10**11:
        raise InputError(
            f"ensemble.members = {ensemble.members}: with {total} particles per member this is "
            "more than 10^11 particles; use fewer members or particles"
        )
    return Scenario(
        title=run["title"] or stem,
        start_iso=start.isoformat(),
        end_iso=end.isoformat(),
        start=start,
        end=end,
        dt=dt,
        output_interval=interval,
        seed=run["seed"],
        substep=run["substep"],
        tracks=run["tracks"],
        transport=transport,
        dispersion=dispersion,
        releases=releases,
        output=grid,
        receptors=receptors,
        flow=flow,
        output_path=output_path,
        ensemble=ensemble,
        geographic=geographic,
        text=text,
        source_path=source_path,
        transport_base=base_transport,
    )


def template_text() -> str:
    """The commented, runnable scenario template that ``walkers new`` writes."""
    return resources.files("walkers").joinpath("template.toml").read_text(encoding="utf-8")


def _default_text(spec: Key) -> str:
    if spec.default is None:
        return "required" if spec.required else "—"
    value = spec.default
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, list):
        return "[" + ", ".join(f'"{v}"' if isinstance(v, str) else str(v) for v in value) + "]"
    return str(value)


def _section_markdown(section: Section, path: str, level: int) -> list[str]:
    heading = f"[[{path}]]" if section.many else f"[{path}]"
    lines = [f"{'#' * level} `{heading}`", ""]
    notes = []
    if section.required:
        notes.append("required")
    if section.only_when:
        notes.append(f"only when {_condition_text(section.only_when)}")
    lines.append(section.help + (f" ({'; '.join(notes)})" if notes else ""))
    lines.append("")
    keys = {k: v for k, v in section.keys.items() if isinstance(v, Key)}
    if keys:
        lines += [
            "| key | kind | units | default | allowed / notes | meaning |",
            "|---|---|---|---|---|---|",
        ]
        for name, spec in keys.items():
            units = f"{UNIT_TABLE[spec.dimension][0]}" if spec.dimension else ""
            notes = []
            if spec.allowed:
                notes.append(", ".join(f"`{a}`" for a in spec.allowed))
            if spec.bound:
                notes.append("> 0" if spec.bound == "positive" else ">= 0")
            if spec.length:
                notes.append(f"{spec.length} items")
            if spec.only_when:
                notes.append(f"only when {_condition_text(spec.only_when)}")
            lines.append(
                f"| `{name}` | {KINDS[spec.kind]} | {units} | {_default_text(spec)} | "
                f"{'; '.join(notes)} | {spec.help} |"
            )
        lines.append("")
    for choice in section.choices:
        rule = "Give exactly one of" if choice.required else "Give at most one of"
        when = f" (when {_condition_text(choice.only_when)})" if choice.only_when else ""
        groups = ", ".join(" + ".join(f"`{k}`" for k in g) for g in choice.alternatives)
        lines += [f"- {rule}{when}: {groups}.", ""]
    for name, sub in section.keys.items():
        if isinstance(sub, Section):
            lines += _section_markdown(sub, f"{path}.{name}" if path else name, level + 1)
    return lines


def schema_markdown() -> str:
    """The scenario-file reference (docs/scenario.md), generated from :data:`SCHEMA`."""
    lines = [
        "# Scenario file reference",
        "",
        "<!-- Generated by walkers.scenario.schema_markdown(); do not edit by hand. -->",
        "",
        SCHEMA.help,
        "",
        "Times are ISO 8601 date-times with a zone (`2026-05-04T06:00:00Z`). Release times are "
        "kept in seconds from `run.start`. Positions are grid coordinates: `x`/`y` in metres on "
        "projected grids, or `lon`/`lat` in degrees on geographic grids (not mixed).",
        "",
        "## Units",
        "",
        "| dimension | SI unit | accepted units |",
        "|---|---|---|",
    ]
    for dim, (si, _, units) in UNIT_TABLE.items():
        lines.append(f"| {dim} | {si} | {', '.join(f'`{u}`' for u in units)} |")
    lines.append("")
    for name, spec in SCHEMA.keys.items():
        assert isinstance(spec, Section)
        lines += _section_markdown(spec, name, 2)
    return "\n".join(lines).rstrip() + "\n"
