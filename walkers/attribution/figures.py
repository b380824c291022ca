"""Figures of a trace result in the house map style: the influence map of each detection and
the ranking of the candidates, each with the standard caution and the ranking caution.

The influence map shows the influence summed over the release times (s m-3): the window-mean
concentration at the detection that a steady release of 1 kg s-1 from that cell over the whole
period examined would give. Ground, hatching and furniture come from
:mod:`walkers.outputs.mapping`; numbers people read go through
:func:`~walkers.outputs.display.plain`.
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib import colormaps
from matplotlib.colors import LogNorm
from matplotlib.lines import Line2D
from matplotlib.patches import Circle

import walkers
from walkers.attribution.trace import RANKING_CAUTION
from walkers.outputs.display import plain
from walkers.outputs.figures import CONC_CMAP, DECADES, FOOTER_FONT, PLAIN_TICKS, _figure
from walkers.outputs.mapping import (
    _HALO,
    METRES_PER_DEGREE,
    RECEPTOR_COLOUR,
    RELEASE_COLOUR,
    cell_edges,
    draw_furniture,
    draw_ground,
    hatch_thin_cells,
    is_geographic,
    legend_handles,
)


def summed_influence(ds: xr.Dataset, detection: str) -> tuple[np.ndarray, np.ndarray]:
    """The influence of ``detection`` integrated over release time (s m-3, trapezoidal rule over
    the output times) and the most backward particles any output time had in each cell."""
    one = ds.sel(detection=detection)
    times = ds["time"].values
    field = np.trapezoid(np.asarray(one["influence"].values), times, axis=0)
    counts = np.asarray(one["particle_count"].values).max(axis=0)
    return field, counts


def _footer(fig, width_in: float) -> None:
    text = textwrap.fill(f"{RANKING_CAUTION} {walkers.CAUTION}", width=int(width_in * 19))
    fig.text(0.01, 0.005, text, fontsize=FOOTER_FONT, va="bottom", ha="left", color="0.25")


def _mark(ax, x: float, y: float, radius: float, geographic: bool, **style) -> None:
    if radius > 0:
        scale = 1.0 / METRES_PER_DEGREE if geographic else 1.0
        ax.add_patch(Circle((x, y), radius * scale, fill=False, lw=1.0, ls="--", **style))


def influence_map(ds: xr.Dataset, detection: str, path: Path) -> Path:
    """Map of where the water of ``detection`` came from, with the candidates ranked."""
    field, counts = summed_influence(ds, detection)
    xe, ye = cell_edges(ds["x"].values), cell_edges(ds["y"].values)
    ratio = (ye[-1] - ye[0]) / (xe[-1] - xe[0])
    width = 7.0
    height = float(np.clip((width - 2.3) * ratio + 1.4, 3.4, 1.4 * width))
    if (width - 2.3) * ratio + 1.4 > height:
        width = float(np.clip((height - 1.4) / ratio + 2.3, 4.0, width))
    fig = _figure(width, height, lines=4)
    ax = fig.add_subplot()
    draw_ground(ax, ds)
    top = float(field.max())
    norm = LogNorm(vmin=top / 10**DECADES, vmax=top) if top > 0 else None
    cmap = colormaps[CONC_CMAP].with_extremes(bad=(0, 0, 0, 0), under=(0, 0, 0, 0))
    image = ax.imshow(
        np.ma.masked_less_equal(field, 0.0),
        cmap=cmap,
        norm=norm,
        extent=(xe[0], xe[-1], ye[0], ye[-1]),
        origin="lower",
        interpolation="nearest",
    )
    thin = hatch_thin_cells(ax, ds, counts)
    geographic = is_geographic(ds)
    det = ds.sel(detection=detection)
    dx, dy = float(det["detection_x"]), float(det["detection_y"])
    _mark(ax, dx, dy, float(det["detection_radius"]), geographic, ec=RECEPTOR_COLOUR)
    ax.plot(dx, dy, marker="^", ms=8, mfc=RECEPTOR_COLOUR, mec="white", mew=0.8, ls="none")
    ax.annotate(
        f"sample: {detection}",
        (dx, dy),
        xytext=(6, 4),
        textcoords="offset points",
        fontsize=7,
        fontweight="bold",
        path_effects=_HALO,
    )
    for name in ds["candidate"].values:
        c = ds.sel(candidate=name)
        cx, cy = float(c["candidate_x"]), float(c["candidate_y"])
        _mark(ax, cx, cy, float(c["candidate_radius"]), geographic, ec=RELEASE_COLOUR)
        ax.plot(cx, cy, marker="*", ms=11, mfc=RELEASE_COLOUR, mec="white", mew=0.8, ls="none")
        label = f"{int(c['candidate_rank'])}. {name} ({plain(100 * float(c['probability']), 2)} %)"
        ax.annotate(
            label,
            (cx, cy),
            xytext=(-8, -10),
            ha="right",
            textcoords="offset points",
            fontsize=7,
            path_effects=_HALO,
        )
    draw_furniture(ax, ds)
    handles = legend_handles(ds, thin)
    handles[0].set_label("no influence")
    handles += [
        Line2D(
            [], [], marker="^", ms=6, mfc=RECEPTOR_COLOUR, mec="white", ls="none", label="sample"
        ),
        Line2D(
            [],
            [],
            marker="*",
            ms=9,
            mfc=RELEASE_COLOUR,
            mec="white",
            ls="none",
            label="candidate: rank, probability",
        ),
    ]
    ax.legend(handles=handles, fontsize=6, loc="upper left", framealpha=0.85)
    if norm is not None:
        bar = fig.colorbar(image, cax=ax.inset_axes((1.03, 0.0, 0.035, 1.0)))
        bar.set_label("concentration at the sample per 1 kg/s released (s m-3)", fontsize=7)
        bar.ax.yaxis.set_major_formatter(PLAIN_TICKS)
    ax.set_title(f"Where the water of the sample '{detection}' came from", fontsize=10)
    _footer(fig, width)
    fig.savefig(path)
    return path


def ranking_figure(ds: xr.Dataset, path: Path) -> Path:
    """Bars of the candidates' posterior probabilities, with each one's release mass and its
    interval written beside it."""
    order = np.argsort(np.asarray(ds["candidate_rank"].values))
    names = [str(ds["candidate"].values[i]) for i in order]
    prob = np.nan_to_num(np.asarray(ds["probability"].values)[order])
    level = float(ds.attrs.get("interval_level", 0.9))
    fig = _figure(7.0, 1.6 + 0.45 * len(names), lines=4)
    ax = fig.add_subplot()
    rows = np.arange(len(names))[::-1]
    ax.barh(rows, prob, color=colormaps[CONC_CMAP](0.55), height=0.6)
    for row, i in zip(rows, order, strict=True):
        c = ds.isel(candidate=int(i))
        if np.isfinite(float(c["mass_estimate"])):
            text = (
                f"{plain(float(c['mass_estimate']))} kg ({level:.0%}: "
                f"{plain(float(c['mass_lower']))} to {plain(float(c['mass_upper']))} kg)"
            )
        else:
            text = "cannot explain the samples"
        ax.annotate(
            text,
            (float(prob[rows.size - 1 - row]), row),
            xytext=(4, 0),
            textcoords="offset points",
            va="center",
            fontsize=7,
        )
    ax.set_yticks(rows, names, fontsize=8)
    ax.set_xlim(0.0, 1.6)
    ax.set_xticks([0, 0.25, 0.5, 0.75, 1.0])
    ax.set_xlabel("probability among the candidates given, and the release mass", fontsize=8)
    ax.set_title("Which candidate fits the samples", fontsize=10)
    _footer(fig, 7.0)
    fig.savefig(path)
    return path


def trace_figures(ds: xr.Dataset, folder: Path) -> list[Path]:
    """Every trace figure into ``folder`` (created if missing): one influence map per detection
    and the ranking."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = [
        influence_map(ds, str(name), folder / f"influence_{k + 1}.png")
        for k, name in enumerate(ds["detection"].values)
    ]
    paths.append(ranking_figure(ds, folder / "ranking.png"))
    return paths
