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
from typing import Literal

import numpy as np

from walkers.errors import InputError

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
    """

    bands: tuple[DepthBand, ...] = field(default_factory=default_bands)
    levels: int = DEFAULT_LEVELS
    section: SectionLine | None = None

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
