"""What a three-dimensional run writes about the water column, in SI units: depth bands, vertical
profiles at receptors and a vertical section along a line (the ``[output]`` keys ``bands``,
``profiles`` and ``section``). A depth-averaged run writes none of them.

Heights in the column are given, as in the particle state, as fractions of the local water depth
above the bed (0 bed, 1 surface); band limits are distances in metres from the surface or from the
bed, clipped to the local depth.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from walkers.errors import InputError
from walkers.scenario.keys import Choice, Key, Section
from walkers.scenario.walk import _check_lonlat, _coordinate

#: Where a depth band is measured from: below the surface, above the bed, or the whole column.
BAND_REFERENCES = ("surface", "bed", "column")
#: Heights of a profile or section when the scenario gives none: ten layers of a tenth of the depth.
DEFAULT_LEVELS = 10


@dataclass(frozen=True)
class DepthBand:
    """A named band of the water column.

    reference : ``"surface"`` (distances below the surface), ``"bed"`` (distances above the bed)
        or ``"column"`` (the whole column; ``start`` and ``end`` are not used).
    start, end : distances from the reference (m) between which the band lies, 0 <= start < end;
        ``end`` may be ``inf``. In a column of depth h the band is [min(start, h), min(end, h)]
        from the reference, so its thickness there is min(end, h) - min(start, h).
    """

    name: str
    reference: Literal["surface", "bed", "column"] = "column"
    start: float = 0.0
    end: float = math.inf

    def __post_init__(self) -> None:
        where = f"output.bands {self.name!r}"
        if self.reference not in BAND_REFERENCES:
            raise InputError(
                f"{where}: reference {self.reference!r}; expected one of "
                f"{', '.join(BAND_REFERENCES)}"
            )
        if self.reference != "column" and not (0.0 <= self.start < self.end):
            raise InputError(
                f"{where}: start ({self.start:g} m) must be >= 0 m and less than end "
                f"({self.end:g} m)"
            )

    @property
    def limits(self) -> tuple[float, float]:
        """(start, end) in metres from the reference; (0, inf) for the whole column."""
        if self.reference == "column":
            return 0.0, math.inf
        return float(self.start), float(self.end)


@dataclass(frozen=True)
class SectionLine:
    """A vertical section along a polyline.

    points : (n, 2) vertices in grid coordinates (m, or degrees on geographic grids), n >= 2.
    width : the band either side of the line holds the particles counted, ``width`` in all (m).
    spacing : length of a bin along the line (m).
    """

    name: str
    points: np.ndarray
    width: float
    spacing: float

    def __post_init__(self) -> None:
        where = f"output.section {self.name!r}"
        pts = np.asarray(self.points, dtype=np.float64)
        if pts.ndim != 2 or pts.shape[0] < 2 or pts.shape[1] != 2:
            raise InputError(f"{where}: points must be two or more [x, y] pairs")
        if not np.all(np.isfinite(pts)):
            raise InputError(f"{where}: points must be finite numbers")
        if not (self.width > 0 and self.spacing > 0):
            raise InputError(f"{where}: width and spacing must be greater than 0 m")
        object.__setattr__(self, "points", pts)


def default_bands() -> tuple[DepthBand, ...]:
    """The bands of a run whose scenario names none: 1 m below the surface, 1 m above the bed,
    and the whole column."""
    return (
        DepthBand("surface", "surface", 0.0, 1.0),
        DepthBand("bottom", "bed", 0.0, 1.0),
        DepthBand("whole_column", "column"),
    )


@dataclass(frozen=True)
class ColumnOutput:
    """The water-column outputs of a three-dimensional run.

    bands : the depth bands of ``concentration_in_band`` (names differ).
    levels : number of equal layers (fractions of the depth) of the receptor profiles and the
        section, >= 1.
    section : the vertical section, or None.
    deposit : whether the run writes the deposit on the bed: only a depositing bed keeps
        particles (a reflecting one never holds any, so its deposit would be zero everywhere);
        set by the run from its [vertical] bed.
    """

    bands: tuple[DepthBand, ...] = field(default_factory=default_bands)
    levels: int = DEFAULT_LEVELS
    section: SectionLine | None = None
    deposit: bool = True

    def __post_init__(self) -> None:
        names = [b.name for b in self.bands]
        if len(set(names)) != len(names):
            raise InputError(f"output.bands: names must differ, got {', '.join(names)}")
        if not self.bands:
            raise InputError("output.bands: give at least one band, or leave the key out")
        if int(self.levels) < 1:
            raise InputError(f"output.profiles.levels = {self.levels!r}: must be >= 1")

    @property
    def heights(self) -> np.ndarray:
        """Centres of the profile layers as fractions of the depth above the bed (0..1)."""
        return (np.arange(self.levels, dtype=np.float64) + 0.5) / self.levels


# --------------------------------------------------------------------------------------------
# the [output] keys, and the settings built from them
# --------------------------------------------------------------------------------------------

#: The [output] subsections of the water-column outputs (added to the schema's [output] table).
COLUMN_OUTPUT: dict[str, Key | Section] = {
    "bands": Section(
        "Three-dimensional runs: one table [[output.bands]] per depth band whose concentration is "
        "written on the output grid (concentration_in_band). A band lies between 'start' and "
        "'end' below the surface or above the bed, clipped to the local depth; 'column' is the "
        "whole column. Default: surface (0-1 m below the surface), bottom (0-1 m above the bed) "
        "and whole_column.",
        {
            "name": Key("text", "Label in outputs.", required=True),
            "reference": Key(
                "choice",
                "What 'start' and 'end' are measured from: 'surface' (down), 'bed' (up), or "
                "'column' (the whole water column; no start or end).",
                required=True,
                allowed=BAND_REFERENCES,
            ),
            "start": Key(
                "quantity",
                "Distance from the reference where the band begins.",
                dimension="length",
                bound="nonnegative",
            ),
            "end": Key(
                "quantity",
                "Distance from the reference where the band ends (more than start).",
                dimension="length",
                bound="positive",
            ),
        },
        many=True,
    ),
    "profiles": Section(
        "Three-dimensional runs: vertical profiles at every receptor (receptor_profile), in "
        "layers of equal thickness, heights as fractions of the local depth.",
        {
            "levels": Key(
                "integer",
                "Number of layers of equal thickness from the bed to the surface.",
                default=DEFAULT_LEVELS,
                bound="positive",
            ),
        },
    ),
    "section": Section(
        "Three-dimensional runs: a vertical section along a line (section_concentration): the "
        "concentration over distance along the line and height (in the layers of "
        "[output.profiles]) from the particles within width/2 of the line.",
        {
            "name": Key("text", "Label in outputs (default: section)."),
            "points": Key("points", "The line's vertices, [[x, y], ...] in metres."),
            "points_lonlat": Key("points", "The line's vertices, [[lon, lat], ...] in degrees."),
            "width": Key(
                "quantity",
                "Width of the band about the line whose particles count.",
                dimension="length",
                required=True,
                bound="positive",
            ),
            "spacing": Key(
                "quantity",
                "Length of a bin along the line.",
                dimension="length",
                required=True,
                bound="positive",
            ),
        },
        choices=(Choice((("points",), ("points_lonlat",))),),
    ),
}


def build_column_output(out: dict[str, Any], geographic: bool) -> ColumnOutput:
    """The water-column outputs from the checked [output] table (see :data:`COLUMN_OUTPUT`)."""
    bands = []
    for i, b in enumerate(out.get("bands") or []):
        where = f"output.bands[{i}]"
        if b["reference"] == "column":
            if b["start"] is not None or b["end"] is not None:
                raise InputError(
                    f"{where}: a 'column' band is the whole column; leave out start and end"
                )
            bands.append(DepthBand(b["name"], "column"))
            continue
        if b["end"] is None:
            raise InputError(
                f"{where}: give end, the distance from the {b['reference']} where the band "
                'ends (e.g. "1 m")'
            )
        bands.append(DepthBand(b["name"], b["reference"], b["start"] or 0.0, b["end"]))
    levels = (out.get("profiles") or {}).get("levels") or DEFAULT_LEVELS
    section = None
    sec = out.get("section")
    if sec is not None:
        key = "points" if sec["points"] is not None else "points_lonlat"
        if key == "points_lonlat" and not geographic:
            raise InputError(
                "output.section.points_lonlat: the scenario's positions are x/y in metres; give "
                "points"
            )
        pts = [
            [_coordinate(c, f"output.section.{key}[{j}]", geographic) for c in pair]
            for j, pair in enumerate(sec[key])
        ]
        if geographic:
            for j, (lon, lat) in enumerate(pts):
                _check_lonlat(lon, lat, f"output.section position {j}")
        section = SectionLine(
            sec["name"] or "section", np.asarray(pts), sec["width"], sec["spacing"]
        )
    return ColumnOutput(
        bands=tuple(bands) if bands else default_bands(), levels=int(levels), section=section
    )
