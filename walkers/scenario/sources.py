"""Typed, SI-unit descriptions of a source-attribution question: detections, candidate sources and
the measurement error model (what ``walkers trace`` takes; built from a trace scenario by
:mod:`walkers.scenario.trace`).

Times are seconds in the run's time frame (from the run start when built from a scenario file).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

from walkers.errors import InputError

DETECTION_KINDS = ("measured", "present", "absent")


@dataclass(frozen=True)
class Detection:
    """A sample of the water: where, over which time window, and what it showed.

    x, y : place (grid coordinates); radius : radius (m) of the water the sample stands for
        (0: a point).
    start, end : the sample's time window (s); a grab sample has start == end. The sample is taken
        to be the mean concentration over the window.
    kind : ``"measured"`` (a concentration ``value`` in kg m-3 with a log-normal error),
        ``"present"`` (at or above ``detection_limit``) or ``"absent"`` (a clean sample, below
        ``detection_limit``).
    """

    name: str
    x: float
    y: float
    start: float
    end: float
    kind: Literal["measured", "present", "absent"] = "measured"
    value: float = math.nan
    detection_limit: float = math.nan
    radius: float = 0.0

    def __post_init__(self) -> None:
        where = f"detection {self.name!r}"
        if self.kind not in DETECTION_KINDS:
            raise InputError(
                f"{where}: kind {self.kind!r}; expected one of {', '.join(DETECTION_KINDS)}"
            )
        if not self.end >= self.start:
            raise InputError(f"{where}: the window ends before it starts; swap start and end")
        if self.kind == "measured" and not (math.isfinite(self.value) and self.value > 0):
            raise InputError(
                f"{where}: a measured sample needs a concentration > 0; give a clean sample as "
                "kind 'absent' with its detection limit"
            )
        if self.kind != "measured" and not (
            math.isfinite(self.detection_limit) and self.detection_limit > 0
        ):
            raise InputError(f"{where}: kind {self.kind!r} needs a detection limit > 0 (kg m-3)")
        if not (math.isfinite(self.radius) and self.radius >= 0):
            raise InputError(f"{where}: radius must be >= 0 m")


@dataclass(frozen=True)
class Candidate:
    """A place that may have released the substance, at a constant rate over [start, end] (s).

    radius : radius (m) of the circle over which the influence is averaged (0: the output cell
        holding the point).
    """

    name: str
    x: float
    y: float
    start: float
    end: float
    radius: float = 0.0

    def __post_init__(self) -> None:
        where = f"candidate {self.name!r}"
        if not self.end >= self.start:
            raise InputError(f"{where}: the release window ends before it starts")
        if not (math.isfinite(self.radius) and self.radius >= 0):
            raise InputError(f"{where}: radius must be >= 0 m")


@dataclass(frozen=True)
class ErrorModel:
    """How measurements scatter about the true concentration, and the prior on release mass.

    sigma : standard deviation of the natural logarithm of a measurement about the true value
        (log-normal error; 0.5 means a factor of about 1.65 either way for one standard deviation).
    mass_min, mass_max : range (kg) of the log-uniform prior on a candidate's released mass.
    time_bins : each candidate window is split into this many equal release-time bins, weighed
        as separate hypotheses.
    level : probability of the reported mass interval (central, e.g. 0.9).
    """

    sigma: float = 0.5
    mass_min: float = 1e-3
    mass_max: float = 1e6
    time_bins: int = 1
    level: float = 0.9

    def __post_init__(self) -> None:
        if not (math.isfinite(self.sigma) and self.sigma > 0):
            raise InputError(f"error model: sigma = {self.sigma!r}; must be > 0")
        if not (0 < self.mass_min < self.mass_max < math.inf):
            raise InputError(
                "error model: mass range must satisfy 0 < mass_min < mass_max "
                f"(got {self.mass_min!r} kg to {self.mass_max!r} kg)"
            )
        if int(self.time_bins) < 1:
            raise InputError("error model: time_bins must be a whole number >= 1")
        if not 0 < self.level < 1:
            raise InputError(f"error model: level = {self.level!r}; must lie between 0 and 1")
