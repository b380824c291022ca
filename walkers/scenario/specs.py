"""The typed objects a checked scenario is made of: :class:`Scenario` and its flow, dispersion and
ensemble specifications (SI units; release times in seconds from the run start).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any, Literal

from walkers.scenario.column_output import ColumnOutput
from walkers.scenario.config import Dispersion, OutputGrid, Receptor, Release, Transport

# --------------------------------------------------------------------------------------------
# The typed objects produced.
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class LayerSelection:
    """Which part of a layered flow's water column the depth-averaged flow stands for.

    mode : ``"mean"`` (the whole column), ``"layer"`` or ``"band"``.
    layer : the layer, numbered from the surface (1 = top), when mode is ``"layer"``.
    band : (top, bottom) depths below the surface (m) when mode is ``"band"``, top < bottom.
    """

    mode: Literal["mean", "layer", "band"] = "mean"
    layer: int = 1
    band: tuple[float, float] = (0.0, 0.0)

    def describe(self) -> str:
        """The selection in words, e.g. "the thickness-weighted mean of the band 0 to 2 m"."""
        if self.mode == "layer":
            return f"layer {self.layer} from the surface"
        if self.mode == "band":
            top, bottom = self.band
            return (
                f"the thickness-weighted mean of the band {top:.6g} to {bottom:.6g} m below the "
                "surface"
            )
        return "the thickness-weighted depth mean"


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
    layers : which part of the water column a layered flow file stands for.
    velocity_axes : orientation of the velocity components on a curvilinear grid ("auto",
        "east_north" or "grid").
    open_boundaries : on a mesh, name -> {"nodes": [...]} or {"polyline": [[x, y], ...],
        "tolerance": m}.
    column : the run is three-dimensional ([vertical]): a reader keeps what the water column
        needs (layered velocities, vertical velocity, K_z) besides the depth-averaged flow.
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
    layers: LayerSelection = LayerSelection()
    velocity_axes: str = "auto"
    open_boundaries: dict[str, dict[str, Any]] = dataclasses.field(default_factory=dict)
    column: bool = False


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
    deposit_thresholds : deposits on the bed (kg m-2) to give exceedance probabilities for,
        sorted, each once (three-dimensional runs with a depositing bed only).
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
    deposit_thresholds: tuple[float, ...] = ()


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
    comment : a note for the outputs' ``comment`` attribute (may be empty).
    column_output : the water-column outputs of a three-dimensional run ([output] bands,
        profiles, section; see :mod:`walkers.scenario.column_output`).
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
    comment: str = ""
    #: what a three-dimensional run writes about the water column (unused by depth-averaged runs)
    column_output: ColumnOutput = dataclasses.field(default_factory=ColumnOutput)

    @property
    def duration(self) -> float:
        """Length of the run (s)."""
        return (self.end - self.start).total_seconds()

    @property
    def total_particles(self) -> int:
        return sum(int(r.particles) for r in self.releases)
