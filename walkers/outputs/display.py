"""How a result is shown to people: one concentration unit, plain numbers, one clock.

Files keep SI (kg m-3, seconds) with CF units; everything a person reads — the summary, figures,
the CSV, the report — goes through this module, so that all of them show the same numbers in
the same unit:

- concentration in one display unit: the one asked for (``--units``), else the unit in which the
  scenario wrote its first receptor threshold, else mg/L;
- numbers written out plainly (0.01, not 1e-05);
- times in UTC, said so, counted from the run start; durations in h and min.
"""

from __future__ import annotations

import datetime as dt
import json
import tomllib
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr

from walkers.fields.times import iso_times
from walkers.scenario.units import unit_factor

DEFAULT_UNIT = "mg/L"
UTC = dt.UTC


@dataclass(frozen=True)
class ConcentrationUnit:
    """A unit to show concentrations in: its name and the factor from kg m-3 to it."""

    name: str
    per_si: float

    def value(self, si: Any) -> Any:
        """Concentration(s) in kg m-3 → this unit."""
        return np.asarray(si, dtype=np.float64) * self.per_si

    def text(self, si: float) -> str:
        """e.g. ``0.01 mg/L`` for 1e-5 kg m-3."""
        return f"{plain(float(si) * self.per_si)} {self.name}"


def plain(value: float, digits: int = 3) -> str:
    """A number with ``digits`` significant figures and no exponent: 0.0123, 1230, 0."""
    if not np.isfinite(value):
        return "-"
    if value == 0:
        return "0"
    rounded = float(f"{value:.{digits}g}")
    return np.format_float_positional(rounded, trim="-")


def scenario_table(ds: xr.Dataset) -> dict[str, Any]:
    """The scenario a result was run from (its ``scenario`` attribute parsed), or {}."""
    text = str(ds.attrs.get("scenario", "") or "")
    try:
        return tomllib.loads(text) if text.strip() else {}
    except tomllib.TOMLDecodeError:
        return {}


def _threshold_unit(ds: xr.Dataset) -> str | None:
    for receptor in scenario_table(ds).get("receptors", []):
        for value in receptor.get("thresholds", []):
            unit = str(value).strip().split(maxsplit=1)
            if len(unit) == 2:
                return unit[1]
    return None


def concentration_unit(ds: xr.Dataset, units: str | None = None) -> ConcentrationUnit:
    """The display unit: ``units`` if given, else the scenario thresholds' unit, else mg/L.

    Raises InputError (naming ``--units``) for a unit that is not a concentration unit.
    """
    name = units or _threshold_unit(ds) or DEFAULT_UNIT
    where = "--units" if units else "receptor thresholds of the scenario"
    return ConcentrationUnit(name, 1.0 / unit_factor(name, "concentration", where))


def run_start(ds: xr.Dataset) -> dt.datetime:
    """The run start (UTC) from the result's ``run_start``, else its first output time."""
    text = str(ds.attrs.get("run_start", "") or iso_times(ds["time"])[0])
    return dt.datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(UTC)


def output_times(ds: xr.Dataset) -> list[dt.datetime]:
    """The output times as aware UTC date-times."""
    return [dt.datetime.fromisoformat(s).astimezone(UTC) for s in iso_times(ds["time"])]


def hours_since_start(ds: xr.Dataset) -> np.ndarray:
    """Hours from the run start to each output time."""
    start = run_start(ds)
    return np.array([(t - start).total_seconds() / 3600.0 for t in output_times(ds)])


def utc(when: dt.datetime) -> str:
    """e.g. ``2026-05-04 05:30 UTC``."""
    return when.astimezone(UTC).strftime("%Y-%m-%d %H:%M UTC")


def duration(seconds: float) -> str:
    """A duration in h and min, e.g. ``2 h 30 min``, ``45 min``, ``0 min``."""
    minutes = int(round(seconds / 60.0))
    hours, minutes = divmod(minutes, 60)
    if hours and minutes:
        return f"{hours} h {minutes} min"
    return f"{hours} h" if hours else f"{minutes} min"


def after_start(ds: xr.Dataset, when: dt.datetime) -> str:
    """e.g. ``2026-05-04 05:30 UTC (2 h 30 min after the run start)``."""
    return f"{utc(when)} ({duration((when - run_start(ds)).total_seconds())} after the run start)"


def time_axis_label(ds: xr.Dataset) -> str:
    """The label of a time axis in hours from the run start."""
    return f"hours since the run start, {utc(run_start(ds))}"


def release_points(ds: xr.Dataset) -> list[tuple[str, float, float]]:
    """(name, x, y) of each release's centre in grid coordinates, from the result's
    ``release_places`` attribute (empty for results that do not carry it)."""
    try:
        places = json.loads(str(ds.attrs.get("release_places", "[]")))
    except json.JSONDecodeError:
        return []
    return [(str(p["name"]), float(p["x"]), float(p["y"])) for p in places]


def open_edges(ds: xr.Dataset) -> list[str]:
    """Edges that mass can go out through: those the scenario marks absorbing, or (without a
    scenario) those through which some mass went out."""
    if "edge" not in ds.dims:
        return []
    table = scenario_table(ds)
    names = [str(e) for e in ds["edge"].values]
    if table:
        modes = table.get("edges", {})
        return [e for e in names if modes.get(e, "absorbing") == "absorbing"]
    if "budget_outflow" not in ds:
        return []
    return [e for e in names if float(ds["budget_outflow"].sel(edge=e).max()) > 0]


def edge_facing(ds: xr.Dataset) -> dict[str, str]:
    """ " (faces south)" and so on for edges whose names do not say which way they face (those
    of a curvilinear grid), from the result's ``edge_faces`` coordinate."""
    if "edge_faces" not in ds.coords:
        return {}
    return {
        str(e): f" (faces {f})"
        for e, f in zip(ds["edge"].values, ds["edge_faces"].values, strict=True)
        if str(e) != str(f)
    }
