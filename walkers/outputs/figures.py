"""Figures of a run: concentration maps, receptor series, the mass budget and a plume animation.

Every figure carries a title, axis labels with units, a colour bar with units where colour means a
value, the time it shows (UTC, from the run start) and the caution in small print at the bottom.
Concentrations are shown in one display unit (:mod:`walkers.outputs.display`) with plain numbers.
Maps use a logarithmic colour scale over the ground and furniture of :mod:`walkers.outputs.mapping`
(clean water, land, outside the flow grid, thinly sampled cells hatched, release, receptors with
their circles, scale bar, north arrow, CRS). Figures are drawn on the Agg canvas directly (no
pyplot state), so plotting never changes the caller's matplotlib backend.
"""

from __future__ import annotations

import os
import textwrap
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import dask
import numpy as np
import xarray as xr
from matplotlib import colormaps
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import LogNorm
from matplotlib.figure import Figure
from matplotlib.layout_engine import ConstrainedLayoutEngine
from matplotlib.lines import Line2D
from matplotlib.text import Text
from matplotlib.ticker import FuncFormatter

import walkers
from walkers.errors import InputError
from walkers.files import refuse_inputs
from walkers.outputs.display import (
    ConcentrationUnit,
    concentration_unit,
    hours_since_start,
    output_times,
    plain,
    time_axis_label,
    utc,
)
from walkers.outputs.mapping import (
    RECEPTOR_COLOUR,
    RELEASE_COLOUR,
    THIN_GID,
    cell_edges,
    draw_furniture,
    draw_ground,
    draw_places,
    hatch_thin_cells,
    is_geographic,
    legend_handles,
)
from walkers.outputs.reader import open_results
from walkers.run import store

CONC_CMAP = "viridis"
FOOTER_FONT = 6.0  # points
#: dask's scheduler for reading a streamed result frame by frame: each read is one small task, and
#: the threaded scheduler's start-up per read cost the estuary demo's figures 1.7 s of 6.4 s.
READ_SCHEDULER = "synchronous"
MAX_FRAMES = 25  # frames in the animated GIF at most (every k-th output time)
DECADES = 4  # decades of concentration shown below the maximum on the log colour scale
PLAIN_TICKS = FuncFormatter(lambda v, _pos: plain(v, 2))


@dataclass
class _Run:
    """What the figures need from a result, gathered once (concentrations in the display unit)."""

    ds: xr.Dataset
    stamps: list[str]
    hours: np.ndarray
    land: np.ndarray | None
    norm: LogNorm
    unit: ConcentrationUnit

    @property
    def one_dimensional(self) -> bool:
        return self.ds.sizes["y"] == 1

    @property
    def geographic(self) -> bool:
        return is_geographic(self.ds)

    @property
    def time_label(self) -> str:
        return time_axis_label(self.ds)

    def conc(self, si: np.ndarray) -> np.ndarray:
        return self.unit.value(si)


def _load(
    ds_or_path: xr.Dataset | str | os.PathLike, land: xr.DataArray | None, units: str | None
) -> _Run:
    if isinstance(ds_or_path, xr.Dataset):
        ds = ds_or_path
    else:
        ds = open_results(ds_or_path, stream=True)
        if sum(v.nbytes for v in ds.variables.values() if v.ndim >= 3) <= store.FIELD_MEMORY_BUDGET:
            # fields as small as a run keeps in memory are read whole, at once: read frame by
            # frame, the estuary demo's figures made 200 reads (docs/performance.md)
            ds = ds.load()
    if "concentration" not in ds:
        raise InputError("result has no 'concentration' variable; is this a walkers result?")
    mask = None
    if land is not None:
        if land.shape != (ds.sizes["y"], ds.sizes["x"]):
            raise InputError(
                f"land mask shape {land.shape}: expected (y, x) = "
                f"({ds.sizes['y']}, {ds.sizes['x']}), the output grid"
            )
        mask = np.asarray(land.values, dtype=bool)
    elif "land" in ds:
        mask = np.asarray(ds["land"].values) == 1
    unit = concentration_unit(ds, units)
    lowest, highest = _positive_range(ds["concentration"])
    vmax = float(unit.value(highest))
    vmin = max(float(unit.value(lowest)), vmax * 10.0**-DECADES)
    if vmin >= vmax:
        vmin = vmax / 10.0
    return _Run(
        ds=ds,
        stamps=[utc(t) for t in output_times(ds)],
        hours=hours_since_start(ds),
        land=mask,
        norm=LogNorm(vmin=vmin, vmax=vmax),
        unit=unit,
    )


def _frames(conc: xr.DataArray, stride: int = 1) -> Iterator[tuple[int, np.ndarray]]:
    """(index, field) of every ``stride``-th output time, read one at a time (a result opened with
    ``stream=True`` is never all in memory)."""
    for i in range(0, conc.sizes["time"], stride):
        yield i, np.asarray(conc.isel(time=i).values)


def _positive_range(conc: xr.DataArray) -> tuple[float, float]:
    """Smallest and largest positive concentration (kg m-3) over all output times; (1, 1) when
    there is none."""
    lowest, highest = np.inf, 0.0
    for _, field in _frames(conc):
        positive = field[field > 0]
        if positive.size:
            lowest = min(lowest, float(positive.min()))
            highest = max(highest, float(positive.max()))
    return (lowest, highest) if highest > 0 else (1.0, 1.0)


def _max_and_count(run: _Run) -> tuple[np.ndarray, np.ndarray | None]:
    """The maximum over time of each cell's concentration, and the particle count at the output
    time of that maximum (None without counts), read one output time at a time."""
    counts = run.ds["particle_count"] if "particle_count" in run.ds else None
    cmax: np.ndarray | None = None
    at_max: np.ndarray | None = None
    for i, field in _frames(run.ds["concentration"]):
        if cmax is None:
            cmax = field.copy()
            at_max = None if counts is None else np.asarray(counts.isel(time=i).values).copy()
            continue
        higher = field > cmax
        cmax = np.where(higher, field, cmax)
        if counts is not None and at_max is not None and higher.any():
            at_max = np.where(higher, np.asarray(counts.isel(time=i).values), at_max)
    assert cmax is not None  # a result has at least one output time
    if "concentration_max" in run.ds:
        cmax = np.asarray(run.ds["concentration_max"].values)
    return cmax, at_max


def _footer_text(width_in: float, when: str) -> str:
    caution = textwrap.fill(walkers.CAUTION, width=int(width_in * 19))
    return f"{when}\n{caution}"


def _figure(width: float, height: float, lines: int = 3) -> Figure:
    """A figure whose layout keeps exactly the room the footer's ``lines`` need."""
    footer = (lines * FOOTER_FONT * 1.3 + 4.0) / 72.0 / height
    layout = ConstrainedLayoutEngine(rect=(0.0, footer, 1.0, 1.0 - footer))
    fig = Figure(figsize=(width, height), dpi=110, layout=layout)
    FigureCanvasAgg(fig)
    return fig


def _footer(fig: Figure, when: str) -> Text:
    """The footer: the time span ``when`` and the caution; returns its Text."""
    return fig.text(
        0.01,
        0.005,
        _footer_text(fig.get_figwidth(), when),
        fontsize=FOOTER_FONT,
        va="bottom",
        ha="left",
        color="0.25",
    )


def _draw_receptor_lines(run: _Run, ax: Axes) -> None:
    """A 1-D run: each receptor as a dotted vertical line, labelled at the top."""
    ds = run.ds
    if "receptor_x" not in ds.coords or ds.sizes.get("receptor", 0) == 0:
        return
    for name, x in zip(ds["receptor"].values, ds["receptor_x"].values, strict=True):
        ax.axvline(x, color=RECEPTOR_COLOUR, lw=0.8, ls=":")
        ax.annotate(
            str(name),
            (x, 1.0),
            xycoords=("data", "axes fraction"),
            fontsize=7,
            color=RECEPTOR_COLOUR,
            ha="left",
            va="top",
            xytext=(2, -2),
            textcoords="offset points",
        )


def _ground_flags(run: _Run) -> np.ndarray | None:
    """The ground flags a map draws (``mapping.draw_ground``): the land mask given to the
    figures as land (1) over the result's own flags (1 land, 2 outside the flow grid), or None
    (the result's flags)."""
    if run.land is None:
        return None
    return np.where(run.land, 1, run.ds["land"].values if "land" in run.ds else 0)


def _draw_map(run: _Run, ax: Axes, field: np.ndarray, counts: np.ndarray | None):
    """Ground, the concentration field (log scale, display unit), thin cells hatched, the
    release, the receptors and the map furniture. The output grid is regular, so the field is
    an image (far faster to draw than a mesh, which matters for the animation)."""
    ds = run.ds
    xe, ye = cell_edges(ds["x"].values), cell_edges(ds["y"].values)
    draw_ground(ax, ds, _ground_flags(run))
    cmap = colormaps[CONC_CMAP].with_extremes(bad=(0, 0, 0, 0), under=(0, 0, 0, 0))
    image = ax.imshow(
        np.ma.masked_less_equal(run.conc(field), 0.0),
        cmap=cmap,
        norm=run.norm,
        extent=(xe[0], xe[-1], ye[0], ye[-1]),
        origin="lower",
        interpolation="nearest",
    )
    draw_places(ax, ds)
    draw_furniture(ax, ds)
    _set_thin_cells(run, ax, counts)
    return image


def _set_thin_cells(run: _Run, ax: Axes, counts: np.ndarray | None) -> None:
    """Hatch the thin cells of ``counts`` (replacing those of an earlier map on ``ax``) and draw
    the legend anew (it names the thin-cell hatching only where there is some)."""
    ds = run.ds
    for patch in list(ax.patches):
        if patch.get_gid() == THIN_GID:
            patch.remove()
    legend = ax.get_legend()
    if legend is not None:
        legend.remove()
    thin = counts is not None and hatch_thin_cells(ax, ds, counts)
    handles = legend_handles(ds, thin)
    handles.append(
        Line2D(
            [], [], marker="*", ms=9, mfc=RELEASE_COLOUR, mec="white", ls="none", label="release"
        )
    )
    if ds.sizes.get("receptor", 0):
        handles.append(
            Line2D(
                [],
                [],
                marker="^",
                ms=6,
                mfc=RECEPTOR_COLOUR,
                mec="white",
                ls="--",
                color=RECEPTOR_COLOUR,
                lw=0.8,
                label="receptor and its circle",
            )
        )
    ax.legend(handles=handles, fontsize=6, loc="upper left", framealpha=0.85)


def _map_size(run: _Run, width: float) -> tuple[float, float]:
    """Figure size (in) whose map panel keeps the grid's true aspect without wide margins."""
    if run.one_dimensional:
        return width, 0.65 * width
    xe, ye = cell_edges(run.ds["x"].values), cell_edges(run.ds["y"].values)
    ratio = (ye[-1] - ye[0]) / (xe[-1] - xe[0])
    if run.geographic:
        ratio /= np.cos(np.deg2rad(float(run.ds["y"].mean())))
    panel = width - 2.3  # room for the y labels and the colour bar
    height = float(np.clip(panel * ratio + 1.0, 3.2, 1.4 * width))
    if panel * ratio + 1.0 > height:  # a tall map: narrow the figure so no side band is left
        width = float(np.clip((height - 1.0) / ratio + 2.3, 4.0, width))
    return width, height


def _colour_bar(run: _Run, fig: Figure, ax: Axes, mesh) -> None:
    """A colour bar as tall as the map itself (an inset follows the aspect-fixed axes)."""
    _colour_bar_label(fig, ax, mesh, f"concentration ({run.unit.name}, log scale)")


def _colour_bar_label(fig: Figure, ax: Axes, mesh, label: str) -> None:
    """A colour bar as tall as the axes ``ax``, labelled ``label``, with plain numbers."""
    cax = ax.inset_axes((1.03, 0.0, 0.035, 1.0))
    bar = fig.colorbar(mesh, cax=cax)
    bar.set_label(label)
    bar.ax.yaxis.set_major_formatter(PLAIN_TICKS)
    bar.ax.yaxis.set_minor_formatter(FuncFormatter(lambda v, _pos: ""))


def _map_figures(
    run: _Run, maps: Sequence[tuple[np.ndarray, np.ndarray | None, str, str, Path]]
) -> list[Path]:
    """Draw the maps (field, particle counts, title, time span, file) one after the other on one
    figure: the first is laid out and drawn in full, the others change only the field, the
    thin-cell hatching, the legend, the title and the footer, and keep the first one's layout
    (the panel, its furniture and the colour bar stay where they were)."""
    written: list[Path] = []
    for k, (field, counts, title, when, path) in enumerate(maps):
        if k == 0 or run.one_dimensional:
            fig = _figure(*_map_size(run, 7.0))
            ax = fig.add_subplot()
            image = None
            if run.one_dimensional:
                _draw_profile(run, ax, field[0])
            else:
                image = _draw_map(run, ax, field, counts)
                _colour_bar(run, fig, ax, image)
            heading = ax.set_title(title, fontsize=10)
            footer = _footer(fig, when)
        else:
            assert image is not None  # the first map's field, drawn on this figure
            image.set_data(np.ma.masked_less_equal(run.conc(field), 0.0))
            _set_thin_cells(run, ax, counts)
            heading.set_text(title)
            footer.set_text(_footer_text(fig.get_figwidth(), when))
        fig.savefig(path)
        fig.set_layout_engine("none")  # the next maps keep this layout
        written.append(path)
    return written


def _draw_profile(run: _Run, ax: Axes, profile: np.ndarray):
    """A 1-D run: concentration along the channel on a log axis; empty cells are gaps."""
    (line,) = ax.plot(
        run.ds["x"].values,
        np.where(profile > 0, run.conc(profile), np.nan),
        color=colormaps[CONC_CMAP](0.35),
        lw=1.4,
    )
    ax.set_yscale("log")
    xe = cell_edges(run.ds["x"].values)
    ax.set_xlim(xe[0], xe[-1])
    ax.set_ylim(float(run.norm.vmin or 0.0), float(run.norm.vmax or 1.0) * 2.0)
    ax.set_xlabel("longitude (degrees east)" if run.geographic else "distance along channel x (m)")
    ax.set_ylabel(f"concentration ({run.unit.name})")
    ax.yaxis.set_major_formatter(PLAIN_TICKS)
    ax.grid(True, which="major", lw=0.4, color="0.85")
    _draw_receptor_lines(run, ax)
    return line


def _receptor_figure(run: _Run, path: Path) -> Path:
    """One panel per receptor, log scale, each with its own thresholds as labelled dashed lines."""
    ds = run.ds
    n = ds.sizes["receptor"]
    fig = _figure(7.5, 1.2 + 1.55 * n)
    axes = fig.subplots(n, 1, sharex=True, squeeze=False)[:, 0]
    series = run.conc(ds["receptor_concentration"].transpose("receptor", "time").values)
    thresholds = (
        run.conc(ds["receptor_threshold"].transpose("receptor", ...).values)
        if "receptor_threshold" in ds
        else np.empty((n, 0))
    )
    for i, (ax, name) in enumerate(zip(axes, ds["receptor"].values, strict=True)):
        values = series[i]
        levels = thresholds[i][np.isfinite(thresholds[i])]
        positive = values[values > 0]
        top = max([*positive, *levels, 0.0])
        ax.plot(
            run.hours,
            np.where(values > 0, values, np.nan),
            color="#1f3b73",
            lw=1.5,
            marker="." if positive.size < 3 else None,
        )
        for level in levels:
            ax.axhline(level, color="#b5432f", lw=0.9, ls="--")
            ax.annotate(
                f"threshold {plain(level)} {run.unit.name}",
                (1.0, level),
                xycoords=("axes fraction", "data"),
                xytext=(-3, 2),
                textcoords="offset points",
                ha="right",
                va="bottom",
                fontsize=6.5,
                color="#b5432f",
            )
        if top > 0:
            ax.set_yscale("log")
            ax.set_ylim(top * 1e-4, top * 3.0)
            ax.yaxis.set_major_formatter(PLAIN_TICKS)
            ax.yaxis.set_minor_formatter(FuncFormatter(lambda v, _pos: ""))
        else:
            ax.text(
                0.5,
                0.5,
                "no particles reached this receptor",
                transform=ax.transAxes,
                ha="center",
                va="center",
                fontsize=8,
                color="0.4",
            )
        ax.set_ylabel(run.unit.name, fontsize=8)
        ax.set_title(str(name), fontsize=9, loc="left")
        ax.grid(True, lw=0.4, color="0.88")
        ax.set_xlim(run.hours[0], run.hours[-1])
    axes[-1].set_xlabel(run.time_label)
    fig.suptitle("Concentration at the receptors (log scale; gaps: no particles)", fontsize=10)
    _footer(fig, f"{run.stamps[0]} to {run.stamps[-1]}")
    fig.savefig(path)
    return path


def _budget_figure(run: _Run, path: Path) -> Path:
    ds = run.ds
    parts: list[tuple[str, np.ndarray]] = [("in water", ds["budget_in_water"].values)]
    if "budget_outflow" in ds:
        for name in ds["edge"].values:
            outflow = ds["budget_outflow"].sel(edge=name).values
            if np.any(outflow > 0):
                parts.append((f"out through the {name} edge", outflow))
    for var, label in (
        ("budget_decayed", "decayed"),
        ("budget_held_dry", "held on dry cells"),
        ("budget_on_bed", "on the bed"),
    ):
        if var in ds and np.any(ds[var].values > 0):
            parts.append((label, ds[var].values))
    fig = _figure(7.5, 4.4)
    ax = fig.add_subplot()
    colours = colormaps["viridis"](np.linspace(0.15, 0.95, len(parts)))
    ax.stackplot(
        run.hours,
        *[p[1] for p in parts],
        labels=[p[0] for p in parts],
        colors=colours,
        alpha=0.9,
        lw=0,
    )
    ax.plot(
        run.hours, ds["budget_released"].values, color="black", lw=1.3, ls="--", label="released"
    )
    ax.set_xlabel(run.time_label)
    ax.set_ylabel(f"mass ({ds['budget_released'].attrs.get('units', 'kg')})")
    ax.set_xlim(run.hours[0], run.hours[-1])
    ax.set_ylim(bottom=0.0)
    ax.grid(True, lw=0.4, color="0.88")
    ax.legend(fontsize=7, loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    ax.set_title("Mass budget (stacked) and mass released", fontsize=10)
    _footer(fig, f"{run.stamps[0]} to {run.stamps[-1]}")
    fig.savefig(path)
    return path


def _chosen_indices(run: _Run, times: Sequence[float] | None) -> list[int]:
    nt = run.hours.size
    if times is None:
        return sorted({int(round(i)) for i in np.linspace(0, nt - 1, 4)[1:]})
    seconds = run.hours * 3600.0
    chosen = []
    for t in times:
        if not np.isfinite(t) or t < seconds[0] - 1e-9 or t > seconds[-1] + 1e-9:
            raise InputError(
                f"figure time {t / 3600.0:g} h: must lie within the output times, "
                f"{seconds[0] / 3600.0:g} to {seconds[-1] / 3600.0:g} h after the run start"
            )
        chosen.append(int(np.argmin(np.abs(seconds - t))))
    return sorted(set(chosen))


def plot_results(
    ds_or_path: xr.Dataset | str | os.PathLike,
    outdir: str | os.PathLike,
    *,
    times: Sequence[float] | None = None,
    land: xr.DataArray | None = None,
    fps: int = 4,
    units: str | None = None,
) -> list[Path]:
    """Draw the figures of a run into ``outdir``; return the files written.

    Parameters
    ----------
    ds_or_path : a result Dataset, or the path of a file written by
        ``walkers.outputs.writer.write_results``.
    outdir : an existing, writable directory.
    times : output times to map, in seconds after the run start; the nearest output time
        is drawn. Default: three times spread evenly after the start.
    land : boolean (y, x) mask on the output grid, True on land; default: the result's ``land``
        flags when present, else no land is drawn.
    fps : frames per second of the animation.
    units : concentration unit to show (default: the scenario thresholds' unit, else mg/L).

    Files: ``concentration_max.png``, ``concentration_tNNNN.png`` (NNNN = output-time index),
    ``receptors.png`` (when there are receptors), ``mass_budget.png`` and ``plume.gif``; for a
    three-dimensional run also ``deposit.png`` (with a depositing bed),
    ``receptor_profiles.png`` (when there are receptors) and ``section.png`` (when the scenario
    names a section), see
    :mod:`walkers.outputs.figures_column`.
    """
    folder = Path(outdir)
    if not folder.is_dir():
        raise InputError(f"figure directory {str(folder)!r} does not exist; create it first")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"figure directory {str(folder)!r} is not writable; choose another")
    if not isinstance(ds_or_path, xr.Dataset):
        for entry in folder.iterdir():  # a figure name that leads to the result: never drawn over
            if entry.suffix in (".png", ".gif"):
                refuse_inputs(entry, [ds_or_path])
    from walkers.outputs.animation import plume_animation  # it draws with this module's parts

    with dask.config.set(scheduler=READ_SCHEDULER):
        run = _load(ds_or_path, land, units)
        conc = run.ds["concentration"]
        counts = run.ds["particle_count"] if "particle_count" in run.ds else None
        maps = [
            (
                np.asarray(conc.isel(time=i).values),
                None if counts is None else np.asarray(counts.isel(time=i).values),
                f"Concentration at {run.stamps[i]} ({run.hours[i]:g} h after the run start)",
                run.stamps[i],
                folder / f"concentration_t{i:04d}.png",
            )
            for i in _chosen_indices(run, times)
        ]
        written = _summary_figures(run, folder, maps)
        written.append(plume_animation(run, folder / "plume.gif", fps))
    return written


def _summary_figures(run: _Run, folder: Path, maps: Sequence = ()) -> list[Path]:
    """The maximum map (thin cells judged by the particle count at each cell's maximum) and the
    further ``maps`` (as :func:`_map_figures` takes them), the receptor series (when there are
    receptors) and the mass budget."""
    cmax, at_max = _max_and_count(run)
    most = (
        cmax,
        at_max,
        "Maximum concentration over the run",
        f"{run.stamps[0]} to {run.stamps[-1]}",
        folder / "concentration_max.png",
    )
    written = _map_figures(run, [most, *maps])
    if "receptor_concentration" in run.ds and run.ds.sizes.get("receptor", 0) > 0:
        written.append(_receptor_figure(run, folder / "receptors.png"))
    if "budget_in_water" in run.ds:
        written.append(_budget_figure(run, folder / "mass_budget.png"))
    # a three-dimensional run: the deposit map, profiles at receptors, the vertical section
    from walkers.outputs.figures_column import column_figures

    written.extend(column_figures(run, folder))
    return written


def report_figures(
    ds_or_path: xr.Dataset | str | os.PathLike, outdir: str | os.PathLike, units: str | None = None
) -> list[Path]:
    """The figures a report shows: the maximum map, the receptor series (when there are
    receptors), the mass budget and, for a three-dimensional run, the water-column figures,
    drawn into the existing folder ``outdir``."""
    with dask.config.set(scheduler=READ_SCHEDULER):
        return _summary_figures(_load(ds_or_path, None, units), Path(outdir))
