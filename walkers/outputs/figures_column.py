"""Figures of a three-dimensional run: the deposit map, profiles at the receptors and the vertical
section along the scenario's line.

They follow :mod:`walkers.outputs.figures`: a title, axis labels with units, a colour bar with
units, the times shown (UTC, from the run start) and the caution in small print at the bottom;
concentrations in the run's display unit, the deposit in g/m². The deposit map is drawn on the
ground and with the furniture of :mod:`walkers.outputs.mapping`, like the concentration maps. A
result without the water-column variables (a depth-averaged run) gets none of these figures.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib import colormaps
from matplotlib.colors import LogNorm

from walkers.outputs.display import plain
from walkers.outputs.figures import (
    _chosen_indices,
    _colour_bar_label,
    _figure,
    _footer,
    _ground_flags,
    _map_size,
    _Run,
)
from walkers.outputs.mapping import (
    LAND_COLOUR,
    cell_edges,
    draw_furniture,
    draw_ground,
    draw_places,
    legend_handles,
)

DEPOSIT_CMAP = "copper_r"
SECTION_COLOUR = "#2a6f97"
#: Display factor of the deposit: kg m-2 to g/m².
GRAMS_PER_KG = 1000.0
DECADES = 4  # decades below the maximum shown on the log colour scales
PROFILE_TIMES = 4  # output times drawn in each receptor's profile at most


def column_figures(run: _Run, folder: Path) -> list[Path]:
    """The water-column figures the result has variables for, drawn into ``folder``:
    ``deposit.png``, ``receptor_profiles.png`` and ``section.png``."""
    ds = run.ds
    written = []
    if "deposit" in ds:
        written.append(_deposit_figure(run, folder / "deposit.png"))
    if "receptor_profile" in ds and ds.sizes.get("receptor", 0) > 0:
        written.append(_profile_figure(run, folder / "receptor_profiles.png"))
    if "section_concentration" in ds:
        written.append(_section_figure(run, folder / "section.png"))
    return written


def _log_norm(values: np.ndarray) -> LogNorm | None:
    """A log colour scale over the top :data:`DECADES` decades of the positive values (None if
    there are none)."""
    positive = values[np.isfinite(values) & (values > 0)]
    if positive.size == 0:
        return None
    vmax = float(positive.max())
    vmin = max(float(positive.min()), vmax * 10.0**-DECADES)
    return LogNorm(vmin=min(vmin, vmax / 10.0), vmax=vmax)


def _no_data(ax, text: str) -> None:
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color="0.4")


def _deposit_figure(run: _Run, path: Path) -> Path:
    """The deposit on the bed at the last output time over the map's ground."""
    ds = run.ds
    last = ds.sizes["time"] - 1
    field = np.asarray(ds["deposit"].isel(time=last).values) * GRAMS_PER_KG
    fig = _figure(*_map_size(run, 7.0))
    ax = fig.add_subplot()
    xe, ye = cell_edges(ds["x"].values), cell_edges(ds["y"].values)
    draw_ground(ax, ds, _ground_flags(run))
    norm = _log_norm(field)
    if norm is None:
        _no_data(ax, "nothing on the bed at this time")
    else:
        image = ax.imshow(
            np.ma.masked_less_equal(field, 0.0),
            cmap=colormaps[DEPOSIT_CMAP].with_extremes(bad=(0, 0, 0, 0), under=(0, 0, 0, 0)),
            norm=norm,
            extent=(xe[0], xe[-1], ye[0], ye[-1]),
            origin="lower",
            interpolation="nearest",
        )
        _colour_bar_label(fig, ax, image, "deposit on the bed (g/m², log scale)")
    draw_places(ax, ds)
    draw_furniture(ax, ds)
    handles = legend_handles(ds, False)
    if "section_x" in ds.coords:
        (line,) = ax.plot(
            ds["section_x"].values,
            ds["section_y"].values,
            color=SECTION_COLOUR,
            lw=1.2,
            ls="-.",
            label="section line",
        )
        handles.append(line)
    ax.legend(handles=handles, fontsize=6, loc="upper left", framealpha=0.85)
    on_bed = float(ds["budget_on_bed"].isel(time=last)) if "budget_on_bed" in ds else np.nan
    ax.set_title(
        f"Deposit on the bed at {run.stamps[last]} ({plain(on_bed)} kg on the bed)", fontsize=10
    )
    _footer(fig, run.stamps[last])
    fig.savefig(path)
    return path


def _profile_times(nt: int) -> list[int]:
    """Up to :data:`PROFILE_TIMES` output times spread over the run, the last included."""
    return sorted({int(round(i)) for i in np.linspace(0, nt - 1, PROFILE_TIMES + 1)[1:]})


def _profile_figure(run: _Run, path: Path) -> Path:
    """One panel per receptor: concentration against height above the bed (fraction of the
    depth) at a few output times."""
    ds = run.ds
    n = ds.sizes["receptor"]
    fig = _figure(min(2.6 * n + 1.2, 10.0), 4.2)
    axes = fig.subplots(1, n, sharey=True, squeeze=False)[0]
    profile = run.conc(ds["receptor_profile"].transpose("receptor", "height", "time").values)
    heights = ds["height"].values
    chosen = _profile_times(ds.sizes["time"])
    colours = colormaps["viridis"](np.linspace(0.1, 0.85, len(chosen)))
    for r, (ax, name) in enumerate(zip(axes, ds["receptor"].values, strict=True)):
        drawn = False
        for colour, k in zip(colours, chosen, strict=True):
            values = profile[r, :, k]
            if np.isfinite(values).any() and np.nanmax(values) > 0:
                ax.plot(
                    values, heights, color=colour, lw=1.4, marker=".", label=f"{run.hours[k]:g} h"
                )
                drawn = True
        if not drawn:
            _no_data(ax, "no particles\nat this receptor")
        ax.axhspan(-0.04, 0.0, color=LAND_COLOUR)  # the bed
        ax.axhline(1.0, color="#4a7ab5", lw=0.8, ls="--")  # the surface
        ax.set_ylim(-0.04, 1.04)
        ax.set_xlim(left=0.0)
        ax.set_title(str(name), fontsize=9, loc="left")
        ax.set_xlabel(f"concentration ({run.unit.name})", fontsize=8)
        ax.grid(True, lw=0.4, color="0.88")
        if drawn:
            ax.legend(fontsize=6, title="after the start", title_fontsize=6, loc="upper right")
    axes[0].set_ylabel("height above the bed (fraction of the water depth)", fontsize=8)
    fig.suptitle("Vertical profiles at the receptors (bed shaded, surface dashed)", fontsize=10)
    _footer(fig, f"{run.stamps[chosen[0]]} to {run.stamps[chosen[-1]]}")
    fig.savefig(path)
    return path


def _section_depths(ds) -> np.ndarray:
    """Water depth (m) at each section bin and output time, (bins, times): the mean depth at the
    particles counted there; where none were, the mean over the times some were, interpolated
    along the line where no particle ever came (all NaN if none ever did)."""
    depth = np.asarray(ds["section_depth"].transpose("section_distance", "time").values)
    counted = np.isfinite(depth)
    with np.errstate(invalid="ignore"):
        mean = np.where(counted.any(axis=1), np.nansum(depth, axis=1) / counted.sum(axis=1), np.nan)
    s = ds["section_distance"].values
    known = np.isfinite(mean)
    if known.any():
        mean = np.interp(s, s[known], mean[known])
    return np.where(counted, depth, mean[:, None])


def _section_figure(run: _Run, path: Path) -> Path:
    """The section at up to three output times: distance along the line against depth below the
    surface (m), the layers stretched over the local depth at that time, the bed drawn below."""
    ds = run.ds
    conc = run.conc(
        ds["section_concentration"].transpose("section_distance", "height", "time").values
    )
    chosen = _chosen_indices(run, None)
    fig = _figure(7.5, 1.2 + 2.0 * len(chosen))
    axes = fig.subplots(len(chosen), 1, sharex=True, squeeze=False)[:, 0]
    s_edges = np.concatenate([[0.0], np.cumsum(ds["section_length"].values)])
    depths = _section_depths(ds)
    norm = _log_norm(conc[:, :, chosen])
    name = str(ds["section_concentration"].attrs.get("section_name", "section"))
    for ax, k in zip(axes, chosen, strict=True):
        ax.set_title(
            f"{run.stamps[k]} ({run.hours[k]:g} h after the run start)", fontsize=8, loc="left"
        )
        if norm is None or not np.isfinite(depths).any():
            _no_data(ax, "no particles near the line at this time")
            continue
        h_edges = np.interp(s_edges, ds["section_distance"].values, depths[:, k])
        levels = ds.sizes["height"]
        fraction = np.linspace(0.0, 1.0, levels + 1)
        # corners: z = -(1 - fraction) h below the surface, each column stretched over its depth
        X = np.repeat(s_edges[None, :], levels + 1, axis=0)
        Z = -(1.0 - fraction[:, None]) * h_edges[None, :]
        mesh = ax.pcolormesh(
            X,
            Z,
            np.ma.masked_less_equal(conc[:, :, k].T, 0.0),
            cmap=colormaps["viridis"],
            norm=norm,
            shading="flat",
        )
        bottom = 1.15 * float(np.nanmax(h_edges))
        ax.fill_between(s_edges, -h_edges, -bottom, color=LAND_COLOUR, lw=0)
        ax.plot(s_edges, -h_edges, color="0.35", lw=1.0)
        ax.axhline(0.0, color="#4a7ab5", lw=0.8, ls="--")
        ax.set_ylim(-bottom, 0.05 * bottom)
        ax.set_ylabel("depth (m)", fontsize=8)
        _colour_bar_label(fig, ax, mesh, f"{run.unit.name}, log")
    axes[-1].set_xlabel("distance along the section line (m)")
    fig.suptitle(
        f"Vertical section '{name}' (bed sand-coloured, surface dashed; blank: no particles)",
        fontsize=10,
    )
    _footer(fig, f"{run.stamps[chosen[0]]} to {run.stamps[chosen[-1]]}")
    fig.savefig(path)
    return path
