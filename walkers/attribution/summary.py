"""The end-of-trace summary people read: the ranking, the masses and the cautions."""

from __future__ import annotations

import textwrap

import numpy as np
import xarray as xr

import walkers
from walkers.attribution.trace import RANKING_CAUTION
from walkers.outputs.display import plain


def ranking_text(ds: xr.Dataset) -> str:
    """The candidates from the most to the least probable, with the release mass each would
    need (posterior median and interval), what each detection showed, and the cautions."""
    level = float(ds.attrs.get("interval_level", 0.9))
    lines = [str(ds.attrs.get("title", "walkers trace")), ""]
    lines.append("Samples:")
    for name in ds["detection"].values:
        d = ds.sel(detection=name)
        kind = str(d["detection_kind"].values)
        if kind == "measured":
            shown = f"{plain(float(d['detection_value']) * 1e3)} mg/L measured"
        else:
            limit = plain(float(d["detection_limit"]) * 1e3)
            shown = f"{kind} (detection limit {limit} mg/L)"
        outside = float(d["from_outside"].isel(time=0).sum())
        lines.append(
            f"  {name}: {shown}; {plain(100 * outside, 2)} % of its water came in through "
            "open edges during the period examined"
        )
    lines += ["", f"Candidates, most probable first (release mass: median, {level:.0%} interval):"]
    order = np.argsort(np.asarray(ds["candidate_rank"].values))
    for i in order:
        c = ds.isel(candidate=int(i))
        p = float(c["probability"])
        if np.isfinite(float(c["mass_estimate"])):
            mass = (
                f"{plain(float(c['mass_estimate']))} kg ({plain(float(c['mass_lower']))} to "
                f"{plain(float(c['mass_upper']))} kg)"
            )
        else:
            mass = "cannot explain the samples"
        prob = "-" if not np.isfinite(p) else f"{plain(100 * p, 2)} %"
        lines.append(f"  {int(c['candidate_rank'])}. {c['candidate'].item()}: {prob}; {mass}")
    if not int(ds.attrs.get("explained", 1)):
        lines.append("  No candidate can explain the samples: look for a source not on the list.")
    lines.append("")
    lines += textwrap.wrap(f"Caution: {RANKING_CAUTION} {walkers.CAUTION}", width=100)
    return "\n".join(lines)
