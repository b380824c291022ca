"""The end-of-run summary text: mass budget, and per receptor the peak, arrival and exceedance.

Concentrations are shown in one display unit and times in UTC from the run start
(:mod:`walkers.outputs.display`); the time above a threshold counts each output interval whose
sample is above it (so it is known to about one output interval).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

import walkers
from walkers.outputs.display import (
    ConcentrationUnit,
    after_start,
    concentration_unit,
    duration,
    edge_facing,
    open_edges,
    output_times,
    run_start,
    utc,
)


def episodes(above: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) output indices of each unbroken run of True in ``above``."""
    flags = np.concatenate([[False], np.asarray(above, dtype=bool), [False]])
    changes = np.flatnonzero(np.diff(flags.astype(np.int8)))
    return [(int(a), int(b) - 1) for a, b in zip(changes[::2], changes[1::2], strict=True)]


def budget_rows(ds: xr.Dataset) -> list[tuple[str, float]]:
    """(account, kg) at the end of the run; only edges that mass can go out through."""
    rows = [
        ("released", float(ds.budget_released[-1])),
        ("in water", float(ds.budget_in_water[-1])),
    ]
    facing = edge_facing(ds)
    mesh = ds.attrs.get("grid_kind") == "mesh"
    for e in open_edges(ds):
        where = f"open boundary {e}" if mesh else f"the {e} edge"
        rows.append(
            (f"out through {where}{facing.get(e, '')}", float(ds.budget_outflow.sel(edge=e)[-1]))
        )
    rows += [
        ("decayed", float(ds.budget_decayed[-1])),
        ("held on dry cells", float(ds.budget_held_dry[-1])),
    ]
    if "budget_on_bed" in ds:  # three dimensions
        rows.append(("on the bed", float(ds.budget_on_bed[-1])))
    return rows


def _budget_lines(ds: xr.Dataset) -> list[str]:
    times = output_times(ds)
    lines = [f"Mass budget at {utc(times[-1])}, the end of the run (kg):"]
    rows = budget_rows(ds)
    residual = rows[0][1] - float(
        ds.budget_in_water[-1]
        + ds.budget_outflow[:, -1].sum()
        + ds.budget_decayed[-1]
        + ds.budget_held_dry[-1]
        + (ds.budget_on_bed[-1] if "budget_on_bed" in ds else 0.0)
    )
    width = max(len(r[0]) for r in rows) + 2
    lines += [f"  {name:{width}s}{value:12.6g}" for name, value in rows]
    lines.append(f"  {'closure error':{width}s}{residual:12.3g}")
    return lines


def _threshold_line(
    ds: xr.Dataset, series: np.ndarray, threshold: float, unit: ConcentrationUnit, step: float
) -> str:
    times = output_times(ds)
    runs = episodes(series > threshold)
    head = f"    above {unit.text(threshold)}: "
    if not runs:
        return head + "never exceeded"
    longest = max(b - a + 1 for a, b in runs)
    total = sum(b - a + 1 for a, b in runs)
    count = f"{len(runs)} episodes" if len(runs) > 1 else "1 episode"
    return (
        head + f"first at {after_start(ds, times[runs[0][0]])}; {count}, the longest "
        f"{duration(longest * step)}, {duration(total * step)} in all"
    )


def receptor_lines(ds: xr.Dataset, unit: ConcentrationUnit) -> list[str]:
    """Per receptor: the peak and when, then each threshold's first exceedance and durations."""
    times = output_times(ds)
    step = (times[1] - times[0]).total_seconds() if len(times) > 1 else 0.0
    lines = [
        f"Receptors (concentration in {unit.name}; time above a threshold to within one output "
        f"interval, {duration(step)}):"
    ]
    for k, name in enumerate(ds.receptor.values):
        series = np.asarray(ds.receptor_concentration.values[k], dtype=np.float64)
        peak = float(np.nanmax(series)) if np.isfinite(series).any() else float("nan")
        if not peak > 0:
            lines.append(f"  {name}: no particles reached it")
        else:
            at = int(np.nanargmax(series))
            rising = "; still rising at the end of the run" if at == series.size - 1 else ""
            lines.append(
                f"  {name}: peak {unit.text(peak)} at {after_start(ds, times[at])}{rising}"
            )
        if "receptor_threshold" in ds:
            for thr in ds.receptor_threshold.values[k]:
                if np.isfinite(thr):
                    lines.append(_threshold_line(ds, series, float(thr), unit, step))
    return lines


def summary_text(ds: xr.Dataset, units: str | None = None) -> str:
    """The end-of-run summary: mass budget, and per receptor the peak, arrival and exceedance.

    ``units``: the concentration unit to show (default: the scenario thresholds' unit, else mg/L).
    """
    unit = concentration_unit(ds, units)
    times = output_times(ds)
    lines = [f"{ds.attrs.get('title') or 'walkers run'}", ""]
    lines.append(f"Run from {utc(run_start(ds))} to {utc(times[-1])}; all times in UTC.")
    if ds.attrs.get("vertical"):
        lines.append(f"Three-dimensional: {ds.attrs['vertical']}.")
        lines.append(f"Releases in the water column: {ds.attrs.get('release_behaviour', '')}.")
    lines.append("")
    lines += _budget_lines(ds)
    if ds.sizes.get("receptor", 0):
        lines.append("")
        lines += receptor_lines(ds, unit)
    lines += ["", f"Caution: {walkers.CAUTION}"]
    return "\n".join(lines)
