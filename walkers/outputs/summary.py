"""The end-of-run summary text: mass budget, and per receptor the peak, arrival and exceedance."""

from __future__ import annotations

import numpy as np
import xarray as xr

import walkers
from walkers.fields.times import elapsed_seconds, iso_times


def summary_text(ds: xr.Dataset) -> str:
    """The end-of-run summary: mass budget, and per receptor the peak, arrival and exceedance.

    ``ds``: a result as a run returns it, or read back with numeric or decoded times."""
    stamps = iso_times(ds.time)
    t = elapsed_seconds(ds.time)
    lines = [f"{ds.attrs.get('title') or 'walkers run'}", ""]
    released = float(ds.mass_released[-1])
    lines.append(f"Mass budget at {stamps[-1]} (kg):")
    lines.append(f"  released        {released:12.6g}")
    lines.append(f"  in water        {float(ds.mass_in_water[-1]):12.6g}")
    for e in ds.edge.values:
        lines.append(f"  left via {str(e):7s}{float(ds.mass_left.sel(edge=e)[-1]):12.6g}")
    lines.append(f"  decayed         {float(ds.mass_decayed[-1]):12.6g}")
    lines.append(f"  stranded (dry)  {float(ds.mass_stranded[-1]):12.6g}")
    residual = released - float(
        ds.mass_in_water[-1]
        + ds.mass_left[:, -1].sum()
        + ds.mass_decayed[-1]
        + ds.mass_stranded[-1]
    )
    lines.append(f"  closure error   {residual:12.3g}")
    if ds.sizes.get("receptor", 0):
        lines += ["", "Receptors (concentration in mg/L = g/m3 = 1e-3 kg/m3):"]
        dt = float(t[1] - t[0]) if len(t) > 1 else 0.0
        for k, name in enumerate(ds.receptor.values):
            series = ds.receptor_concentration.values[k]
            peak = float(np.nanmax(series)) if np.isfinite(series).any() else float("nan")
            when = stamps[int(np.nanargmax(series))] if peak > 0 else "-"
            lines.append(f"  {name}: peak {peak * 1e3:.4g} mg/L at {when}")
            if "receptor_threshold" in ds:
                for thr in ds.receptor_threshold.values[k]:
                    if not np.isfinite(thr):
                        continue
                    above = series > thr
                    first = stamps[int(np.argmax(above))] if above.any() else "never"
                    lines.append(
                        f"    above {thr * 1e3:.4g} mg/L: first at {first}, for about "
                        f"{above.sum() * dt / 3600.0:.3g} h (output interval {dt / 60:.3g} min)"
                    )
    lines += ["", f"Caution: {walkers.CAUTION}"]
    return "\n".join(lines)
