"""Figures of a run: concentration maps, receptor series, the mass budget and a plume animation.

Every figure carries a title, axis labels with units, a colour bar with units where colour means a
value, the time it shows (ISO 8601 with zone) and the caution in small print at the bottom. Maps use
a logarithmic colour scale; cells with no particles stay blank, so the eye sees where the estimate
has no support. Figures are drawn on the Agg canvas directly (no pyplot state), so plotting never
changes the caller's matplotlib backend.
"""

from __future__ import annotations

import os
import textwrap
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib import colormaps, patheffects
from matplotlib.animation import PillowWriter
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import ListedColormap, LogNorm
from matplotlib.figure import Figure
from matplotlib.layout_engine import ConstrainedLayoutEngine
from matplotlib.ticker import MaxNLocator, ScalarFormatter

import walkers
from walkers.errors import InputError
from walkers.fields.times import elapsed_seconds, iso_times
from walkers.files import refuse_inputs
from walkers.outputs.reader import open_results

CONC_CMAP = "viridis"
LAND_COLOUR = "#cfc8b8"
RECEPTOR_COLOUR = "#d1495b"
FOOTER_HEIGHT = 0.09  # fraction of the figure height kept free for the time and the caution
MAX_FRAMES = 25  # frames in the animated GIF at most (every k-th output time)
DECADES = 4  # decades of concentration shown below the maximum on the log colour scale


@dataclass
class _Run:
    """What the figures need from a result, gathered once."""

    ds: xr.Dataset
    stamps: list[str]
    hours: np.ndarray
    geographic: bool
    land: np.ndarray | None
    norm: LogNorm
    units: str

    @property
    def one_dimensional(self) -> bool:
        return self.ds.sizes["y"] == 1

    def axis_label(self, axis: str) -> str:
        if self.geographic:
            return "longitude (degrees east)" if axis == "x" else "latitude (degrees north)"
        return f"{axis} ({self.ds[axis].attrs.get('units', 'm')})"

    @property
    def time_label(self) -> str:
        return f"time since {self.stamps[0]} (h)"


def _load(ds_or_path: xr.Dataset | str | os.PathLike, land: xr.DataArray | None) -> _Run:
    ds = ds_or_path if isinstance(ds_or_path, xr.Dataset) else open_results(ds_or_path, stream=True)
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
    lowest, vmax = _positive_range(ds["concentration"])
    vmin = max(lowest, vmax * 10.0**-DECADES)
    if vmin >= vmax:
        vmin = vmax / 10.0
    return _Run(
        ds=ds,
        stamps=iso_times(ds["time"]),
        hours=elapsed_seconds(ds["time"]) / 3600.0,
        geographic=bool(int(ds.attrs.get("geographic", 0)))
        or ds["x"].attrs.get("units") == "degrees_east",
        land=mask,
        norm=LogNorm(vmin=vmin, vmax=vmax),
        units=str(ds["concentration"].attrs.get("units", "kg m-3")),
    )


def _frames(conc: xr.DataArray, stride: int = 1) -> Iterator[tuple[int, np.ndarray]]:
    """(index, field) of every ``stride``-th output time, read one at a time (a result opened with
    ``stream=True`` is never all in memory)."""
    for i in range(0, conc.sizes["time"], stride):
        yield i, np.asarray(conc.isel(time=i).values)


def _positive_range(conc: xr.DataArray) -> tuple[float, float]:
    """Smallest and largest positive concentration over all output times; (1, 1) if none."""
    lowest, highest = np.inf, 0.0
    for _, field in _frames(conc):
        positive = field[field > 0]
        if positive.size:
            lowest = min(lowest, float(positive.min()))
            highest = max(highest, float(positive.max()))
    return (lowest, highest) if highest > 0 else (1.0, 1.0)


def _figure(width: float, height: float) -> Figure:
    layout = ConstrainedLayoutEngine(rect=(0.0, FOOTER_HEIGHT, 1.0, 1.0 - FOOTER_HEIGHT))
    fig = Figure(figsize=(width, height), dpi=110, layout=layout)
    FigureCanvasAgg(fig)
    return fig


def _footer(fig: Figure, when: str) -> None:
    width_chars = int(fig.get_figwidth() * 19)
    caution = textwrap.fill(walkers.CAUTION, width=width_chars)
    fig.text(0.01, 0.005, f"{when}\n{caution}", fontsize=6, va="bottom", ha="left", color="0.25")


def _edges(centres: np.ndarray) -> np.ndarray:
    """Cell edges midway between centres and half a cell beyond the outer ones."""
    c = np.asarray(centres, dtype=np.float64)
    if c.size == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])


def _style_map_axes(run: _Run, ax: Axes) -> None:
    ax.set_xlabel(run.axis_label("x"))
    ax.set_ylabel(run.axis_label("y"))
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(MaxNLocator(5))
        formatter = ScalarFormatter(useOffset=False)
        formatter.set_scientific(False)
        axis.set_major_formatter(formatter)
    if run.geographic:
        ax.set_aspect(1.0 / np.cos(np.deg2rad(float(run.ds["y"].mean()))))
    else:
        ax.set_aspect("equal")


def _draw_receptors(run: _Run, ax: Axes, one_d: bool = False) -> None:
    ds = run.ds
    if "receptor_x" not in ds.coords or ds.sizes.get("receptor", 0) == 0:
        return
    halo = [patheffects.withStroke(linewidth=2.5, foreground="white")]
    for name, x, y in zip(
        ds["receptor"].values, ds["receptor_x"].values, ds["receptor_y"].values, strict=True
    ):
        if one_d:
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
            continue
        ax.plot(x, y, marker="^", ms=7, mfc=RECEPTOR_COLOUR, mec="white", mew=0.8, ls="none")
        ax.annotate(
            str(name),
            (x, y),
            xytext=(5, 4),
            textcoords="offset points",
            fontsize=7,
            color="black",
            path_effects=halo,
        )


def _draw_map(run: _Run, ax: Axes, field: np.ndarray):
    """Land, the concentration field (log scale, empty cells blank) and the receptors.

    The output grid is regular, so both layers are images (far faster to draw than meshes,
    which matters for the animation).
    """
    xe, ye = _edges(run.ds["x"].values), _edges(run.ds["y"].values)
    extent = (xe[0], xe[-1], ye[0], ye[-1])
    if run.land is not None:
        ax.imshow(
            np.ma.masked_where(~run.land, run.land.astype(float)),
            cmap=ListedColormap([LAND_COLOUR]),
            extent=extent,
            origin="lower",
            interpolation="nearest",
        )
    cmap = colormaps[CONC_CMAP].with_extremes(bad=(0, 0, 0, 0), under=(0, 0, 0, 0))
    image = ax.imshow(
        np.ma.masked_less_equal(field, 0.0),
        cmap=cmap,
        norm=run.norm,
        extent=extent,
        origin="lower",
        interpolation="nearest",
    )
    _style_map_axes(run, ax)
    _draw_receptors(run, ax)
    ax.set_xlim(xe[0], xe[-1])
    ax.set_ylim(ye[0], ye[-1])
    return image


def _map_size(run: _Run, width: float) -> tuple[float, float]:
    """Figure size (in) whose map panel keeps the grid's true aspect without wide margins."""
    if run.one_dimensional:
        return width, 0.65 * width
    xe, ye = _edges(run.ds["x"].values), _edges(run.ds["y"].values)
    ratio = (ye[-1] - ye[0]) / (xe[-1] - xe[0])
    if run.geographic:
        ratio /= np.cos(np.deg2rad(float(run.ds["y"].mean())))
    panel = width - 2.3  # room for the y labels and the colour bar
    return width, float(np.clip(panel * ratio + 1.4, 3.2, 1.4 * width)) / (1.0 - FOOTER_HEIGHT)


def _colour_bar(run: _Run, fig: Figure, ax: Axes, mesh) -> None:
    """A colour bar as tall as the map itself (an inset follows the aspect-fixed axes)."""
    cax = ax.inset_axes((1.03, 0.0, 0.035, 1.0))
    fig.colorbar(mesh, cax=cax).set_label(f"concentration ({run.units})")


def _map_figure(run: _Run, field: np.ndarray, title: str, when: str, path: Path) -> Path:
    fig = _figure(*_map_size(run, 7.0))
    ax = fig.add_subplot()
    if run.one_dimensional:
        _draw_profile(run, ax, field[0])
    else:
        mesh = _draw_map(run, ax, field)
        _colour_bar(run, fig, ax, mesh)
    ax.set_title(title, fontsize=10)
    _footer(fig, when)
    fig.savefig(path)
    return path


def _draw_profile(run: _Run, ax: Axes, profile: np.ndarray):
    """A 1-D run: concentration along the channel on a log axis; empty cells are gaps."""
    (line,) = ax.plot(
        run.ds["x"].values,
        np.where(profile > 0, profile, np.nan),
        color=colormaps[CONC_CMAP](0.35),
        lw=1.4,
    )
    ax.set_yscale("log")
    xe = _edges(run.ds["x"].values)
    ax.set_xlim(xe[0], xe[-1])
    ax.set_ylim(float(run.norm.vmin or 0.0), float(run.norm.vmax or 1.0) * 2.0)
    ax.set_xlabel(run.axis_label("x") if run.geographic else "distance along channel x (m)")
    ax.set_ylabel(f"concentration ({run.units})")
    ax.grid(True, which="major", lw=0.4, color="0.85")
    _draw_receptors(run, ax, one_d=True)
    return line


def _receptor_figure(run: _Run, path: Path) -> Path:
    """One panel per receptor, log scale, each with its own thresholds as labelled dashed lines."""
    ds = run.ds
    n = ds.sizes["receptor"]
    fig = _figure(7.5, 1.2 + 1.55 * n)
    axes = fig.subplots(n, 1, sharex=True, squeeze=False)[:, 0]
    series = ds["receptor_concentration"].transpose("receptor", "time").values
    thresholds = (
        ds["receptor_threshold"].transpose("receptor", ...).values
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
                f"threshold {level:.3g} {run.units}",
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
        ax.set_ylabel(run.units, fontsize=8)
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
    parts: list[tuple[str, np.ndarray]] = [("in water", ds["mass_in_water"].values)]
    if "mass_left" in ds:
        for name in ds["edge"].values:
            left = ds["mass_left"].sel(edge=name).values
            if np.any(left > 0):
                parts.append((f"left, {name} edge", left))
    for var, label in (("mass_decayed", "decayed"), ("mass_stranded", "stranded")):
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
    ax.plot(run.hours, ds["mass_released"].values, color="black", lw=1.3, ls="--", label="released")
    ax.set_xlabel(run.time_label)
    ax.set_ylabel(f"mass ({ds['mass_released'].attrs.get('units', 'kg')})")
    ax.set_xlim(run.hours[0], run.hours[-1])
    ax.set_ylim(bottom=0.0)
    ax.grid(True, lw=0.4, color="0.88")
    ax.legend(fontsize=7, loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False)
    ax.set_title("Mass budget (stacked) and mass released", fontsize=10)
    _footer(fig, f"{run.stamps[0]} to {run.stamps[-1]}")
    fig.savefig(path)
    return path


def _animation(run: _Run, path: Path, fps: int) -> Path:
    conc = run.ds["concentration"]
    first = np.asarray(conc.isel(time=0).values)
    fig = _figure(*_map_size(run, 6.4))
    fig.set_dpi(80)
    ax = fig.add_subplot()
    if run.one_dimensional:
        artist = _draw_profile(run, ax, first[0])
    else:
        artist = _draw_map(run, ax, first)
        _colour_bar(run, fig, ax, artist)
    title = ax.set_title(f"Concentration at {run.stamps[0]}", fontsize=10)
    _footer(fig, f"{run.stamps[0]} to {run.stamps[-1]}")

    fig.canvas.draw()
    fig.set_layout_engine("none")  # freeze the layout: solving it anew for every frame is slow
    writer = PillowWriter(fps=max(1, int(fps)))
    stride = max(1, -(-conc.sizes["time"] // MAX_FRAMES))
    with writer.saving(fig, path, dpi=fig.dpi):
        for i, field in _frames(conc, stride):
            if run.one_dimensional:
                artist.set_ydata(np.where(field[0] > 0, field[0], np.nan))
            else:
                artist.set_data(np.ma.masked_less_equal(field, 0.0))
            title.set_text(f"Concentration at {run.stamps[i]}")
            writer.grab_frame()
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
                f"figure time {t!r} s: must lie within the output times, 0 to {seconds[-1]:g} s "
                "after the first output"
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
) -> list[Path]:
    """Draw the figures of a run into ``outdir``; return the files written.

    Parameters
    ----------
    ds_or_path : a result Dataset, or the path of a file written by
        ``walkers.outputs.writer.write_results``.
    outdir : an existing, writable directory.
    times : output times to map, in seconds after the first output time; the nearest output time
        is drawn. Default: three times spread evenly after the start.
    land : boolean (y, x) mask on the output grid, True on land; default: ``land_fraction >= 0.5``
        from the result when present, else no land is drawn.
    fps : frames per second of the animation.

    Files: ``concentration_max.png``, ``concentration_tNNNN.png`` (NNNN = output-time index),
    ``receptors.png`` (when there are receptors), ``mass_budget.png`` and ``plume.gif``.
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
    run = _load(ds_or_path, land)
    chosen = _chosen_indices(run, times)
    written: list[Path] = []
    cmax = (
        run.ds["concentration_max"].values
        if "concentration_max" in run.ds
        else run.ds["concentration"].max("time").values
    )
    written.append(
        _map_figure(
            run,
            np.asarray(cmax),
            "Maximum concentration over the run",
            f"{run.stamps[0]} to {run.stamps[-1]}",
            folder / "concentration_max.png",
        )
    )
    for i in chosen:
        written.append(
            _map_figure(
                run,
                np.asarray(run.ds["concentration"].isel(time=i).values),
                f"Concentration at {run.stamps[i]}",
                run.stamps[i],
                folder / f"concentration_t{i:04d}.png",
            )
        )
    if "receptor_concentration" in run.ds and run.ds.sizes.get("receptor", 0) > 0:
        written.append(_receptor_figure(run, folder / "receptors.png"))
    if "mass_in_water" in run.ds:
        written.append(_budget_figure(run, folder / "mass_budget.png"))
    written.append(_animation(run, folder / "plume.gif", fps))
    return written
