"""The water-column reductions of a three-dimensional run held at each output time, and their
CF-1.8 variables in the result (see :mod:`walkers.run.column_reduce` for the reductions and
``docs/outputs.md`` for the variables).

The gridded ones (the concentration in each depth band, the deposit) go to the run's field store
beside the depth-averaged fields, one (y, x) field each (``band_<k>``, ``deposit``), so they are
streamed to disk with them on long runs; the profiles at receptors, the section, the heights of
the sampled tracks and the mass on the bed are series held in memory.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import dask.array
import numpy as np

from walkers.run import column_reduce as column
from walkers.run import reduce
from walkers.run.store import DiskFields, MemoryFields
from walkers.scenario.column_output import ColumnOutput, DepthBand
from walkers.scenario.config import OutputGrid, Receptor, Vertical

KG_M3 = "kg m-3"


def band_field(k: int) -> str:
    """Name in the field store of the concentration in band ``k``."""
    return f"band_{k}"


def column_field_variables(column_output: ColumnOutput) -> dict[str, type]:
    """The (y, x) fields a three-dimensional run stores at every output time, with their dtypes."""
    variables: dict[str, type] = {
        band_field(k): np.float64 for k in range(len(column_output.bands))
    }
    if column_output.deposit:
        variables["deposit"] = np.float64
    return variables


def column_settings(column_output: ColumnOutput | None, vertical: Vertical) -> ColumnOutput:
    """The water-column outputs of a run with the vertical step ``vertical``: those the scenario
    names (the defaults when None), with the deposit only where the bed can keep particles (a
    depositing bed; a reflecting one never holds any, so its deposit would be zero everywhere)."""
    return dataclasses.replace(
        column_output or ColumnOutput(), deposit=vertical.deposition_velocity > 0
    )


def column_fields(
    particles, depths: np.ndarray, column_output: ColumnOutput, grid: OutputGrid, measure
) -> tuple[np.ndarray, np.ndarray | None]:
    """The gridded water-column reductions at one output time: the concentration in each depth
    band (kg m-3, (bands, ny, nx)) and the deposit on the bed (kg m-2, (ny, nx); None unless
    ``column_output.deposit``). ``depths``: the water depth (m) at each particle; ``measure``:
    the plan area (m2) of each output cell."""
    p = particles
    if p.sigma is None:
        raise ValueError("water-column outputs need particles with heights (sigma): a 3-D run")
    args = (p.x, p.y, p.sigma, depths, p.mass, p.status)
    bands, _ = column.band_concentration(*args, column_output.bands, grid, measure)
    bed = None
    if column_output.deposit:
        bed = column.deposit(p.x, p.y, p.mass, p.status, grid, measure)[0]
    return bands, bed


def band_coordinates(bands: Sequence[DepthBand]) -> dict[str, Any]:
    """The ``band`` coordinate of a result and its reference and limits."""
    return {
        "band": (
            "band",
            np.array([b.name for b in bands], dtype=object),
            {"long_name": "depth band name"},
        ),
        "band_reference": (
            "band",
            np.array([b.reference for b in bands]),
            {"long_name": "what the band's limits are measured from: surface, bed or column"},
        ),
        "band_start": (
            "band",
            np.array([b.limits[0] for b in bands]),
            {"units": "m", "long_name": "distance of the band's near limit from its reference"},
        ),
        "band_end": (
            "band",
            np.array([b.limits[1] for b in bands]),
            {
                "units": "m",
                "long_name": "distance of the band's far limit from its reference (inf: "
                "to the far end of the column); limits are clipped to the local depth",
            },
        ),
    }


class ColumnSeries:
    """The water-column series of a run over ``nt`` output times (see the module docstring)."""

    def __init__(self, column_output: ColumnOutput, nt: int, nrec: int, tracks: int):
        self.output = column_output
        levels = column_output.levels
        self.nt = nt
        self.profile = np.full((nrec, levels, nt), np.nan)
        self.track_z = np.full((tracks, nt), np.nan) if tracks else None
        self.section: np.ndarray | None = None
        self.section_depth: np.ndarray | None = None
        if column_output.section is not None:
            # the number of bins along the line depends only on its length in metres: known when
            # the first output is recorded (metres per degree on geographic grids)
            self.section = np.empty((0, levels, nt))
            self.section_depth = np.empty((0, nt))
        self._geometry: dict[str, np.ndarray] | None = None

    def arrays(self) -> dict[str, np.ndarray]:
        """Every series by a flat name (``column.<name>``), for checkpoints."""
        out: dict[str, np.ndarray] = {"column.profile": self.profile}
        if self.track_z is not None:
            out["column.track_z"] = self.track_z
        if self.section is not None and self.section_depth is not None:
            out["column.section"] = self.section
            out["column.section_depth"] = self.section_depth
        return out

    @classmethod
    def from_arrays(cls, column_output: ColumnOutput, arrays: dict[str, np.ndarray]):
        """The series whose :meth:`arrays` were ``arrays`` (KeyError if one is missing)."""
        series = cls.__new__(cls)
        series.output = column_output
        series.profile = arrays["column.profile"]
        series.nt = series.profile.shape[2]
        series.track_z = arrays.get("column.track_z")
        series.section = arrays.get("column.section")
        series.section_depth = arrays.get("column.section_depth")
        series._geometry = None
        return series

    def geometry(self, geographic: bool) -> dict[str, np.ndarray]:
        """The section's bins (see :func:`walkers.run.column_reduce.section_geometry`)."""
        assert self.output.section is not None
        if self._geometry is None:
            self._geometry = column.section_geometry(self.output.section, geographic)
        return self._geometry

    def record(
        self,
        k: int,
        particles,
        depths: np.ndarray,
        receptors: Sequence[Receptor],
        grid: OutputGrid,
        geographic: bool,
        track_index: np.ndarray | None,
    ) -> dict[str, np.ndarray]:
        """Reduce the particles at output ``k``; return the (y, x) fields for the field store."""
        p = particles
        measure = reduce.cell_measure(grid, geographic, 2)
        bands, bed = column_fields(p, depths, self.output, grid, measure)
        fields = {band_field(b): bands[b] for b in range(len(self.output.bands))}
        if bed is not None:
            fields["deposit"] = bed
        args = (p.x, p.y, p.sigma, depths, p.mass, p.status)
        if receptors:
            places, area = column.receptor_places(receptors, grid, measure, geographic)
            self.profile[:, :, k] = column.receptor_profiles(
                *args, places, area, self.output.levels
            )
        if self.output.section is not None:
            geometry = self.geometry(geographic)
            conc, depth = column.section_concentration(
                *args, geometry, self.output.section, self.output.levels
            )
            assert self.section is not None and self.section_depth is not None
            if self.section.shape[0] != conc.shape[0]:
                nt = self.nt
                self.section = np.full((conc.shape[0], self.output.levels, nt), np.nan)
                self.section_depth = np.full((conc.shape[0], nt), np.nan)
            self.section[:, :, k] = conc
            self.section_depth[:, k] = depth
        if track_index is not None and self.track_z is not None:
            self.track_z[:, k] = column.track_heights(p.sigma, depths, p.status, track_index)
        return fields

    def coordinates(self, geographic: bool, xunits: str, yunits: str) -> dict[str, Any]:
        """The band, height and section coordinates of the result."""
        coords: dict[str, Any] = {
            **band_coordinates(self.output.bands),
            "height": (
                "height",
                self.output.heights,
                {
                    "units": "1",
                    "long_name": "height above the bed as a fraction of the local water depth "
                    "(centre of a layer of equal thickness; 0 bed, 1 surface)",
                },
            ),
        }
        if self.output.section is not None:
            g = self.geometry(geographic)
            coords.update(
                {
                    "section_distance": (
                        "section_distance",
                        g["distance"],
                        {"units": "m", "long_name": "distance along the section line (bin centre)"},
                    ),
                    "section_x": (
                        "section_distance",
                        g["x"],
                        {"units": xunits, "long_name": "section bin centre x"},
                    ),
                    "section_y": (
                        "section_distance",
                        g["y"],
                        {"units": yunits, "long_name": "section bin centre y"},
                    ),
                    "section_length": (
                        "section_distance",
                        g["length"],
                        {"units": "m", "long_name": "length of the section bin along the line"},
                    ),
                }
            )
        return coords

    def variables(self, fields: MemoryFields | DiskFields, track: bool) -> dict[str, Any]:
        """The water-column variables of the result."""
        names = [band_field(b) for b in range(len(self.output.bands))]
        parts = [fields.data(n) for n in names]
        stack = dask.array.stack if isinstance(fields, DiskFields) else np.stack
        data: dict[str, Any] = {
            "concentration_in_band": (
                ("time", "band", "y", "x"),
                stack(parts, axis=1),
                {
                    "units": KG_M3,
                    "long_name": "concentration in the depth band (box counting over the band's "
                    "thickness in each column)",
                },
            ),
            "receptor_profile": (
                ("receptor", "height", "time"),
                self.profile,
                {"units": KG_M3, "long_name": "concentration in the layer at the receptor"},
            ),
        }
        if self.output.deposit:
            data["deposit"] = (
                ("time", "y", "x"),
                fields.data("deposit"),
                {"units": "kg m-2", "long_name": "mass on the bed per bed area"},
            )
        section = self.output.section
        if section is not None and self.section is not None and self.section_depth is not None:
            data["section_concentration"] = (
                ("section_distance", "height", "time"),
                self.section,
                {
                    "units": KG_M3,
                    "long_name": f"concentration on the vertical section {section.name}",
                    "section_name": section.name,
                    "section_width_m": float(section.width),
                },
            )
            data["section_depth"] = (
                ("section_distance", "time"),
                self.section_depth,
                {
                    "units": "m",
                    "long_name": "mean water depth at the particles counted in the section bin",
                },
            )
        if track and self.track_z is not None:
            data["track_height_above_bed"] = (
                ("trajectory", "time"),
                self.track_z,
                {
                    "units": "m",
                    "standard_name": "height_above_sea_floor",
                    "long_name": "sampled particle height above the bed",
                },
            )
        return data
