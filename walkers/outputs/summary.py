"""The end-of-run summary text: mass budget, and per receptor the peak, arrival and exceedance."""

from __future__ import annotations

import numpy as np
import xarray as xr

import walkers


def _iso(ds: xr.Dataset, seconds: float) -> str:
    from walkers.fields.times import iso_times

    t = xr.DataArray([seconds], dims="time", attrs=ds.time.attrs)
    return iso_times(t)[0]


def summary_text(ds: xr.Dataset) -> str:
    """The end-of-run summary: mass budget, and per receptor the peak, arrival and exceedance."""
    t = ds.time.values
    lines = [f"{ds.attrs.get('title') or 'walkers run'}", ""]
    released = float(ds.budget_released[-1])
    lines.append(f"Mass budget at {_iso(ds, float(t[-1]))} (kg):")
    lines.append(f"  released        {released:12.6g}")
    lines.append(f"  in water        {float(ds.budget_in_water[-1]):12.6g}")
    for e in ds.edge.values:
        lines.append(f"  left via {str(e):7s}{float(ds.budget_outflow.sel(edge=e)[-1]):12.6g}")
    lines.append(f"  decayed         {float(ds.budget_decayed[-1]):12.6g}")
    lines.append(f"  stranded (dry)  {float(ds.budget_held_dry[-1]):12.6g}")
    residual = released - float(
        ds.budget_in_water[-1]
        + ds.budget_outflow[:, -1].sum()
        + ds.budget_decayed[-1]
        + ds.budget_held_dry[-1]
    )
    lines.append(f"  closure error   {residual:12.3g}")
    if ds.sizes.get("receptor", 0):
        lines += ["", "Receptors (concentration in mg/L = g/m3 = 1e-3 kg/m3):"]
        dt = float(t[1] - t[0]) if len(t) > 1 else 0.0
        for k, name in enumerate(ds.receptor.values):
            series = ds.receptor_concentration.values[k]
            peak = float(np.nanmax(series)) if np.isfinite(series).any() else float("nan")
            when = _iso(ds, float(t[int(np.nanargmax(series))])) if peak > 0 else "-"
            lines.append(f"  {name}: peak {peak * 1e3:.4g} mg/L at {when}")
            if "receptor_threshold" in ds:
                for thr in ds.receptor_threshold.values[k]:
                    if not np.isfinite(thr):
                        continue
                    above = series > thr
                    first = _iso(ds, float(t[np.argmax(above)])) if above.any() else "never"
                    lines.append(
                        f"    above {thr * 1e3:.4g} mg/L: first at {first}, for about "
                        f"{above.sum() * dt / 3600.0:.3g} h (output interval {dt / 60:.3g} min)"
                    )
    lines += ["", f"Caution: {walkers.CAUTION}"]
    return "\n".join(lines)
