"""The reductions of a run held at each output time, and the result Dataset made from them."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

import walkers
from walkers.fields.base import FlowField
from walkers.fields.grids import compass
from walkers.run import reduce
from walkers.run.accumulate_column import ColumnSeries, column_field_variables
from walkers.run.store import DiskFields, MemoryFields
from walkers.scenario.column_output import ColumnOutput
from walkers.scenario.config import EDGE_NAMES, OutputGrid, Receptor


def _field_variables(grid: OutputGrid, column: ColumnOutput | None = None) -> dict[str, type]:
    """The 3-D fields a run stores at every output time, with their dtypes; with ``column`` (a
    three-dimensional run's water-column outputs) also the depth bands and the deposit."""
    variables: dict[str, type] = {"concentration": np.float64, "particle_count": np.int32}
    if grid.bandwidth > 0:
        variables["concentration_smoothed"] = np.float64
    if column is not None:
        variables.update(column_field_variables(column))
    return variables


class _Accumulator:
    """Holds the reductions at each output time while the run goes on.

    The 3-D fields go to ``fields`` (in memory or streamed to disk, see :mod:`walkers.run.store`);
    the maximum concentration over time is a running maximum; the rest are series over time.
    ``column``: the water-column outputs of a three-dimensional run (its particles have heights,
    ``sigma``), held by :class:`walkers.run.accumulate_column.ColumnSeries`; None for a
    depth-averaged run.
    """

    def __init__(
        self,
        nt: int,
        grid: OutputGrid,
        nrec: int,
        tracks: int,
        fields: MemoryFields | DiskFields,
        edges: int = len(EDGE_NAMES),
        column: ColumnOutput | None = None,
    ):
        self.fields = fields
        self.column = None if column is None else ColumnSeries(column, nt, nrec, tracks)
        self._column_arrays: dict[str, np.ndarray] = {}
        self.conc_max = np.full((grid.ny, grid.nx), -np.inf)
        self.receptor = np.zeros((nrec, nt))
        self.budget = {
            k: np.zeros(nt)
            for k in ("budget_released", "budget_in_water", "budget_decayed", "budget_held_dry")
        }
        self.outflow = np.zeros((edges, nt))
        self.in_water = np.zeros(nt, dtype=np.int32)
        self.moments = {
            k: np.full(nt, np.nan)
            for k in ("centroid_x", "centroid_y", "variance_x", "variance_y", "covariance_xy")
        }
        self.track_x = np.full((tracks, nt), np.nan) if tracks else None
        self.track_y = np.full((tracks, nt), np.nan) if tracks else None

    def arrays(self) -> dict[str, np.ndarray]:
        """Every array held in memory, by a flat name (for checkpoints); the fields too when they
        are in memory (``field.<name>``). See :meth:`from_arrays` and :meth:`field_record`."""
        out = {
            "conc_max": self.conc_max,
            "receptor": self.receptor,
            "outflow": self.outflow,
            "in_water": self.in_water,
        }
        if isinstance(self.fields, MemoryFields):
            out.update({f"field.{k}": v for k, v in self.fields.arrays.items()})
        if self.track_x is not None and self.track_y is not None:
            out["track_x"], out["track_y"] = self.track_x, self.track_y
        out.update({f"budget.{k}": v for k, v in self.budget.items()})
        out.update({f"moment.{k}": v for k, v in self.moments.items()})
        if self.column is not None:
            out.update(self.column.arrays())
        return out

    def field_record(self, folder: Path) -> dict[str, Any] | None:
        """For fields on disk: hand their segments over to ``folder`` (a checkpoint's) and return
        the record that :meth:`walkers.run.store.DiskFields.from_record` reads back (see
        :meth:`walkers.run.store.DiskFields.hand_over`); None for fields in memory."""
        if isinstance(self.fields, DiskFields):
            return self.fields.hand_over(folder)
        return None

    @classmethod
    def from_arrays(
        cls,
        arrays: dict[str, np.ndarray],
        fields: DiskFields | None = None,
        column: ColumnOutput | None = None,
    ) -> _Accumulator:
        """The accumulator whose :meth:`arrays` were ``arrays``; its fields are those arrays or,
        for fields on disk, ``fields``; ``column`` as it was made with (KeyError if an array is
        missing)."""
        acc = cls.__new__(cls)
        acc._column_arrays = {k: v for k, v in arrays.items() if k.startswith("column.")}
        acc.column = None
        acc.resume_column(column)
        acc.conc_max, acc.receptor = arrays["conc_max"], arrays["receptor"]
        acc.outflow, acc.in_water = arrays["outflow"], arrays["in_water"]
        acc.track_x, acc.track_y = arrays.get("track_x"), arrays.get("track_y")
        acc.budget = {k[len("budget.") :]: v for k, v in arrays.items() if k.startswith("budget.")}
        acc.moments = {
            k: arrays[f"moment.{k}"]
            for k in ("centroid_x", "centroid_y", "variance_x", "variance_y", "covariance_xy")
        }
        prefix = "field."
        acc.fields = (
            fields
            if fields is not None
            else MemoryFields.from_arrays(
                {k[len(prefix) :]: v for k, v in arrays.items() if k.startswith(prefix)}
            )
        )
        return acc

    def resume_column(self, column: ColumnOutput | None) -> None:
        """Give an accumulator read back by :meth:`from_arrays` the water-column settings of its
        run (a checkpoint holds the series, the scenario the settings); None: a depth-averaged
        run, nothing to do. KeyError if the arrays held no water-column series."""
        if column is not None and self.column is None:
            self.column = ColumnSeries.from_arrays(column, self._column_arrays)

    def record(self, k, particles, depths, conc, count, receptors, grid, flow, mpu, track_index):
        fields = {"concentration": conc, "particle_count": count}
        if "concentration_smoothed" in self.fields.variables:
            fields["concentration_smoothed"] = reduce.smoothed(conc, grid, mpu)
        if self.column is not None:
            fields.update(
                self.column.record(
                    k, particles, depths, receptors, grid, flow.geographic, track_index
                )
            )
        self.fields.put(k, fields)
        np.maximum(self.conc_max, conc, out=self.conc_max)
        if receptors:
            self.receptor[:, k] = reduce.receptor_values(
                particles, depths, receptors, conc, grid, flow.geographic, flow.ndim
            )
        b = reduce.mass_budget(particles, self.outflow.shape[0])
        if "budget_on_bed" in b:  # three dimensions
            self.budget.setdefault("budget_on_bed", np.zeros(self.in_water.shape[0]))
        for name in self.budget:
            self.budget[name][k] = b[name]
        self.outflow[:, k] = b["budget_outflow"]
        self.in_water[k] = b["particles_in_water"]
        for name, value in reduce.cloud_moments(particles, flow.geographic).items():
            self.moments[name][k] = value
        if track_index is not None:
            visible = particles.status[track_index] == 1
            self.track_x[:, k] = np.where(visible, particles.x[track_index], np.nan)
            self.track_y[:, k] = np.where(visible, particles.y[track_index], np.nan)

    def dataset(self, times, flow, grid, receptors, releases, seed, member, title, text):
        geo = flow.geographic
        xunits, yunits = ("degrees_east", "degrees_north") if geo else ("m", "m")
        coords = _result_coordinates(times, flow, grid, receptors, xunits, yunits)
        data = self._variables(grid, xunits, yunits)
        _add_thresholds(data, receptors)
        self._add_tracks(data, xunits, yunits)
        if self.column is not None:
            coords.update(self.column.coordinates(geo, xunits, yunits))
            data.update(self.column.variables(self.fields, self.track_x is not None))
        attrs = {
            "title": title,
            "seed": int(seed),
            "walkers_version": walkers.__version__,
            "scenario": text,
            "crs_wkt": flow.crs_wkt or "",
            "geographic": int(geo),
            "grid_kind": _grid_kind(flow),
            "caution": walkers.CAUTION,
            "source": flow.source,
            "releases": "; ".join(r.name for r in releases),
        }
        if member is not None:
            attrs["member"] = int(member)
        return xr.Dataset(data, coords=coords, attrs=attrs)

    def _variables(self, grid: OutputGrid, xunits: str, yunits: str) -> dict[str, Any]:
        """Fields, receptor series, the budget by edge and in total, particle numbers, moments."""
        kgm3 = "kg m-3"
        data: dict[str, Any] = {
            "concentration": (
                ("time", "y", "x"),
                self.fields.data("concentration"),
                {"units": kgm3, "long_name": "concentration (box counting)"},
            ),
            "particle_count": (
                ("time", "y", "x"),
                self.fields.data("particle_count"),
                {"units": "1", "long_name": "number of particles in the cell"},
            ),
            "concentration_max": (
                ("y", "x"),
                self.conc_max,
                {"units": kgm3, "long_name": "maximum concentration over time"},
            ),
            "receptor_concentration": (
                ("receptor", "time"),
                self.receptor,
                {"units": kgm3, "long_name": "concentration at receptor"},
            ),
            "budget_outflow": (
                ("edge", "time"),
                self.outflow,
                {"units": "kg", "long_name": "mass that went out through the open edge"},
            ),
            "particles_in_water": (
                "time",
                self.in_water,
                {"units": "1", "long_name": "particles in water"},
            ),
        }
        if "concentration_smoothed" in self.fields.variables:
            data["concentration_smoothed"] = (
                ("time", "y", "x"),
                self.fields.data("concentration_smoothed"),
                {
                    "units": kgm3,
                    "long_name": "concentration (Gaussian kernel)",
                    "bandwidth_m": grid.bandwidth,
                },
            )
        long_names = {
            "budget_released": "mass released so far",
            "budget_in_water": "mass in the water",
            "budget_decayed": "mass lost to decay",
            "budget_held_dry": "mass held in dry cells",
            "budget_on_bed": "mass deposited on the bed",
        }
        for name, values in self.budget.items():
            data[name] = ("time", values, {"units": "kg", "long_name": long_names[name]})
        for name, values in self.moments.items():
            units = (xunits if name.endswith("x") else yunits) if "centroid" in name else "m2"
            data[name] = ("time", values, {"units": units, "long_name": name.replace("_", " ")})
        return data

    def _add_tracks(self, data: dict[str, Any], xunits: str, yunits: str) -> None:
        """The sampled particle tracks, if any were kept."""
        if self.track_x is not None:
            data["track_x"] = (
                ("trajectory", "time"),
                self.track_x,
                {"units": xunits, "long_name": "sampled particle position x"},
            )
            data["track_y"] = (
                ("trajectory", "time"),
                self.track_y,
                {"units": yunits, "long_name": "sampled particle position y"},
            )


def _grid_kind(flow: FlowField) -> str:
    """ "rectilinear", "curvilinear" or "mesh": the kind of grid the run stepped on."""
    kind = flow.kind()
    if getattr(kind, "mesh", False):
        return "mesh"
    return "curvilinear" if kind.curvilinear else "rectilinear"


def _result_coordinates(
    times: np.ndarray,
    flow: FlowField,
    grid: OutputGrid,
    receptors: Sequence[Receptor],
    xunits: str,
    yunits: str,
) -> dict[str, Any]:
    """The result's coordinates: output times, cell centres, edges and receptors."""
    kind = flow.kind()
    edge_attrs = {"long_name": "domain edge"}
    if kind.curvilinear:
        edge_attrs["comment"] = "the edges of a curvilinear grid, named by grid index"
    coords = {
        "time": (
            "time",
            times,
            {
                "units": flow.time_units,
                "calendar": flow.calendar,
                "standard_name": "time",
                "axis": "T",
            },
        ),
        "x": ("x", grid.x, {"units": xunits, "axis": "X", "long_name": "output cell centre"}),
        "y": ("y", grid.y, {"units": yunits, "axis": "Y", "long_name": "output cell centre"}),
        "edge": ("edge", np.array(kind.edge_names), edge_attrs),
        "edge_faces": (
            "edge",
            np.array([compass(b) for b in kind.edge_bearings()]),
            {"long_name": "compass direction the edge faces, outward, on average"},
        ),
        "receptor": (
            "receptor",
            np.array([r.name for r in receptors], dtype=object),
            {"long_name": "receptor name"},
        ),
        "receptor_x": (
            "receptor",
            np.array([r.x for r in receptors], dtype=float),
            {"units": xunits, "long_name": "receptor position x"},
        ),
        "receptor_y": (
            "receptor",
            np.array([r.y for r in receptors], dtype=float),
            {"units": yunits, "long_name": "receptor position y"},
        ),
        "receptor_radius": (
            "receptor",
            np.array([r.radius for r in receptors], dtype=float),
            {"units": "m", "long_name": "receptor averaging radius"},
        ),
    }
    return coords


def _add_thresholds(data: dict[str, Any], receptors: Sequence[Receptor]) -> None:
    """Each receptor's concentration thresholds of concern (NaN-padded), if any receptor has one."""
    kgm3 = "kg m-3"
    thresholds = [r.thresholds for r in receptors]
    if any(thresholds):
        width = max(len(t) for t in thresholds)
        table = np.full((len(receptors), width), np.nan)
        for k, t in enumerate(thresholds):
            table[k, : len(t)] = t
        data["receptor_threshold"] = (
            ("receptor", "threshold"),
            table,
            {"units": kgm3, "long_name": "concentration threshold of concern"},
        )
