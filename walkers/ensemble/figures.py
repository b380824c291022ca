"""Figures of an ensemble: exceedance-probability maps and receptor distributions.

Each figure carries a title, axis labels with units, the time span it covers (UTC) and the
caution in small print, like the figures of a single run (``walkers.outputs.figures``), with the
same map ground and furniture (``walkers.outputs.mapping``) and the same display unit.
Probability maps colour the probability from 0 to 1 and draw contour lines at
:data:`PROBABILITY_LEVELS`;
cells that no member reached stay blank. Receptor figures show, per receptor, the histogram of the
members' peak concentrations (thresholds dashed) and the empirical CDF of the arrival time for each
threshold; members that never cross a threshold keep the CDF below 1 at the end of the run.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib import colormaps

from walkers.errors import InputError
from walkers.outputs.display import concentration_unit, output_times, plain, run_start, utc
from walkers.outputs.figures import PLAIN_TICKS, _figure, _footer
from walkers.outputs.mapping import cell_edges, draw_furniture, draw_ground, draw_places
from walkers.outputs.reader import open_results

#: Probabilities drawn as contour lines on the maps.
PROBABILITY_LEVELS = (0.1, 0.5, 0.9)
PROBABILITY_CMAP = "YlOrRd"


def _load(ds_or_path: xr.Dataset | str | os.PathLike) -> xr.Dataset:
    ds = ds_or_path if isinstance(ds_or_path, xr.Dataset) else open_results(ds_or_path)
    if "member" not in ds.dims or "concentration_mean" not in ds:
        raise InputError("not an ensemble result: no 'member' dimension or 'concentration_mean'")
    return ds


def _span(ds: xr.Dataset) -> str:
    times = output_times(ds)
    return f"{utc(times[0])} to {utc(times[-1])}"


def plot_probability_map(
    ds_or_path: xr.Dataset | str | os.PathLike,
    path: str | os.PathLike,
    *,
    threshold: int = 0,
    time_index: int | None = None,
    units: str | None = None,
) -> Path:
    """Map the probability that the concentration exceeds threshold number ``threshold``.

    time_index : an output time; None maps the probability over the whole run (the concentration
    exceeds the threshold at some output time). Contour lines at :data:`PROBABILITY_LEVELS`. A 1-D
    run is drawn as a profile along the channel. ``units``: the concentration unit shown.
    """
    ds = _load(ds_or_path)
    if "threshold" not in ds.dims:
        raise InputError("the ensemble has no thresholds: give receptor thresholds to map them")
    if not 0 <= threshold < ds.sizes["threshold"]:
        raise InputError(f"threshold {threshold}: expected 0 to {ds.sizes['threshold'] - 1}")
    stamps = [utc(t) for t in output_times(ds)]
    unit = concentration_unit(ds, units)
    level = float(ds["threshold"].values[threshold])
    if time_index is None:
        field = ds["window_exceedance_probability"].values[threshold]
        when, at = _span(ds), "at some time of the run"
    else:
        if not 0 <= time_index < ds.sizes["time"]:
            raise InputError(f"time index {time_index}: expected 0 to {ds.sizes['time'] - 1}")
        field = ds["exceedance_probability"].values[threshold, time_index]
        when, at = stamps[time_index], f"at {stamps[time_index]}"
    n = int(ds.sizes["member"])
    title = f"Probability that concentration exceeds {unit.text(level)} {at} ({n} members)"
    return _draw_probability(ds, field, title, when, path)


def _draw_probability(
    ds: xr.Dataset, field: np.ndarray, title: str, when: str, path: str | os.PathLike
) -> Path:
    """Draw the probability ``field`` (y, x) over the map ground (a profile along the channel in
    1-D), contours at :data:`PROBABILITY_LEVELS`, with ``title`` and the footer (``when`` and
    the caution); save to ``path``."""
    x, y = ds["x"].values, ds["y"].values
    if ds.sizes["y"] == 1:
        fig = _figure(7.5, 4.2)
        ax = fig.add_subplot()
        ax.plot(x, field[0], color=colormaps[PROBABILITY_CMAP](0.8), lw=1.5)
        for p in PROBABILITY_LEVELS:
            ax.axhline(p, color="0.6", lw=0.7, ls=":")
        ax.set_ylim(0.0, 1.02)
        ax.set_xlabel("distance along channel x (m)")
        ax.set_ylabel("exceedance probability (1)")
        ax.grid(True, lw=0.4, color="0.88")
    else:
        ratio = (y[-1] - y[0] + 1e-12) / (x[-1] - x[0] + 1e-12)
        fig = _figure(7.0, float(np.clip(5.6 * ratio + 1.6, 3.4, 10.0)))
        ax = fig.add_subplot()
        draw_ground(ax, ds)
        shown = np.where(field > 0, field, np.nan)
        mesh = ax.pcolormesh(
            cell_edges(x), cell_edges(y), shown, cmap=PROBABILITY_CMAP, vmin=0.0, vmax=1.0
        )
        if np.nanmax(field, initial=0.0) > min(PROBABILITY_LEVELS):
            lines = ax.contour(x, y, field, levels=PROBABILITY_LEVELS, colors="k", linewidths=0.8)
            ax.clabel(lines, fmt="%.1f", fontsize=7)
        cax = ax.inset_axes((1.03, 0.0, 0.035, 1.0))
        fig.colorbar(mesh, cax=cax).set_label("exceedance probability (1)")
        draw_places(ax, ds)
        draw_furniture(ax, ds)
    ax.set_title(title, fontsize=9)
    _footer(fig, f"{when}; contours at P = {', '.join(f'{p:g}' for p in PROBABILITY_LEVELS)}")
    fig.savefig(path)
    return Path(path)


def plot_band_probability_map(
    ds_or_path: xr.Dataset | str | os.PathLike,
    path: str | os.PathLike,
    *,
    band: int = 0,
    threshold: int = 0,
    units: str | None = None,
) -> Path:
    """Map the probability that the concentration in depth band number ``band`` exceeds
    threshold number ``threshold`` at the last output time (a three-dimensional ensemble)."""
    ds = _load(ds_or_path)
    _check_map(
        ds,
        "band_exceedance_probability",
        "no depth-band probabilities: a three-dimensional ensemble with thresholds has them",
        {"band": band, "threshold": threshold},
    )
    unit = concentration_unit(ds, units)
    level = float(ds["threshold"].values[threshold])
    stamp = utc(output_times(ds)[-1])
    name = str(ds["band"].values[band])
    n = int(ds.sizes["member"])
    title = (
        f"Probability that concentration exceeds {unit.text(level)} in band {name}\n"
        f"({_band_words(ds, band)}) at {stamp} ({n} members)"
    )
    field = ds["band_exceedance_probability"].values[threshold, -1, band]
    return _draw_probability(ds, field, title, stamp, path)


def _check_map(ds: xr.Dataset, variable: str, missing: str, picks: dict[str, int]) -> None:
    """InputError unless ``ds`` holds ``variable`` (``missing`` says why not) and each index of
    ``picks`` (dimension: index) lies within its dimension."""
    if variable not in ds:
        raise InputError(f"the ensemble has {missing}")
    for dim, index in picks.items():
        if not 0 <= index < ds.sizes[dim]:
            raise InputError(f"{dim} {index}: expected 0 to {ds.sizes[dim] - 1}")


def _band_words(ds: xr.Dataset, band: int) -> str:
    """The band's place in the column in words, e.g. "0-1 m below the surface"."""
    reference = str(ds["band_reference"].values[band])
    if reference == "column":
        return "whole column"
    start, end = float(ds["band_start"].values[band]), float(ds["band_end"].values[band])
    side = "below the surface" if reference == "surface" else "above the bed"
    far = "the far end" if np.isinf(end) else f"{end:g} m"
    return f"{start:g} m to {far} {side}"


def plot_deposit_probability_map(
    ds_or_path: xr.Dataset | str | os.PathLike, path: str | os.PathLike, *, threshold: int = 0
) -> Path:
    """Map the probability that the deposit on the bed exceeds deposit threshold number
    ``threshold`` (shown in g/m²) at the last output time (a three-dimensional ensemble whose
    bed deposits)."""
    ds = _load(ds_or_path)
    _check_map(
        ds,
        "deposit_exceedance_probability",
        "no deposit probabilities: give ensemble.deposit_thresholds in a three-dimensional "
        "scenario whose bed deposits",
        {"deposit_threshold": threshold},
    )
    level = 1e3 * float(ds["deposit_threshold"].values[threshold])  # g/m2
    stamp = utc(output_times(ds)[-1])
    n = int(ds.sizes["member"])
    title = (
        f"Probability that the deposit on the bed exceeds {plain(level)} g/m² at {stamp} "
        f"({n} members)"
    )
    field = ds["deposit_exceedance_probability"].values[threshold, -1]
    return _draw_probability(ds, field, title, stamp, path)


def plot_receptor_distributions(
    ds_or_path: xr.Dataset | str | os.PathLike, path: str | os.PathLike, units: str | None = None
) -> Path:
    """Per receptor: histogram of the members' peak concentration (display unit ``units``;
    thresholds dashed) and the empirical CDF of the arrival time (h after the run start) for
    each threshold."""
    ds = _load(ds_or_path)
    unit = concentration_unit(ds, units)
    nrec = int(ds.sizes.get("receptor", 0))
    if nrec == 0 or "member_receptor_peak" not in ds:
        raise InputError("the ensemble has no receptors: nothing to draw")
    n = int(ds.sizes["member"])
    thresholds = ds["threshold"].values if "threshold" in ds.dims else np.empty(0)
    colours = colormaps["cividis"](np.linspace(0.0, 0.8, max(len(thresholds), 1)))
    fig = _figure(8.0, 2.3 * nrec + 1.2)
    axes = fig.subplots(nrec, 2, squeeze=False)
    run_hours = (output_times(ds)[-1] - run_start(ds)).total_seconds() / 3600.0
    for r, name in enumerate(ds["receptor"].values):
        peaks = unit.value(ds["member_receptor_peak"].values[:, r])
        ax = axes[r, 0]
        ax.hist(peaks, bins=min(30, max(5, n // 4)), color="0.55", edgecolor="white")
        for k, level in enumerate(thresholds):
            ax.axvline(
                unit.value(level),
                color=colours[k],
                ls="--",
                lw=1.0,
                label=f"threshold {unit.text(float(level))}",
            )
        top = max(float(peaks.max(initial=0.0)), float(unit.value(np.max(thresholds, initial=0.0))))
        ax.set_xlim(0.0, 1.05 * top if top > 0 else 1.0)
        ax.set_xlabel(f"peak concentration ({unit.name})")
        ax.set_ylabel("members")
        ax.set_title(f"{name}: peak concentration", fontsize=9)
        ax.xaxis.set_major_formatter(PLAIN_TICKS)
        if len(thresholds):
            ax.legend(fontsize=6, frameon=False)
        ax = axes[r, 1]
        for k, level in enumerate(thresholds):
            hours = np.sort(ds["member_arrival_time"].values[:, r, k] / 3600.0)
            hours = hours[np.isfinite(hours)]
            share = len(hours) / n
            steps = np.concatenate([[0.0], hours, [run_hours]])
            cdf = np.concatenate([[0.0], np.arange(1, len(hours) + 1) / n, [share]])
            ax.step(
                steps,
                cdf,
                where="post",
                color=colours[k],
                lw=1.4,
                label=f"> {unit.text(float(level))} ({share:.0%} of members)",
            )
        ax.set_xlim(0.0, run_hours)
        ax.set_ylim(0.0, 1.02)
        ax.set_xlabel(f"arrival, hours since the run start, {utc(run_start(ds))}")
        ax.set_ylabel("fraction of members arrived")
        ax.set_title(f"{name}: arrival time (empirical CDF)", fontsize=9)
        ax.grid(True, lw=0.4, color="0.88")
        if len(thresholds):
            ax.legend(fontsize=6, frameon=False, loc="upper left")
    fig.suptitle(f"Receptor distributions over {n} members", fontsize=10)
    _footer(fig, _span(ds))
    fig.savefig(path)
    return Path(path)


def plot_ensemble(
    ds_or_path: xr.Dataset | str | os.PathLike, outdir: str | os.PathLike, units: str | None = None
) -> list[Path]:
    """Draw the ensemble figures into the existing directory ``outdir``; return the files.

    Files: ``probability_thrK.png`` for each threshold K (probability over the whole run); in a
    three-dimensional ensemble ``band_probability_B_thrK.png`` for each depth band B and threshold
    K and ``deposit_probability_thrK.png`` for each deposit threshold K (at the last output
    time); ``receptor_distributions.png`` when there are receptors.
    """
    folder = Path(outdir)
    if not folder.is_dir():
        raise InputError(f"figure directory {str(folder)!r} does not exist; create it first")
    ds = _load(ds_or_path)
    written = [
        plot_probability_map(ds, folder / f"probability_thr{k}.png", threshold=k, units=units)
        for k in range(ds.sizes.get("threshold", 0) if "threshold" in ds.dims else 0)
    ]
    if "band_exceedance_probability" in ds:
        written += [
            plot_band_probability_map(
                ds, folder / f"band_probability_{b}_thr{k}.png", band=b, threshold=k, units=units
            )
            for b in range(ds.sizes["band"])
            for k in range(ds.sizes["threshold"])
        ]
    if "deposit_exceedance_probability" in ds:
        written += [
            plot_deposit_probability_map(
                ds, folder / f"deposit_probability_thr{k}.png", threshold=k
            )
            for k in range(ds.sizes["deposit_threshold"])
        ]
    if ds.sizes.get("receptor", 0) and "member_receptor_peak" in ds:
        written.append(
            plot_receptor_distributions(ds, folder / "receptor_distributions.png", units)
        )
    return written
