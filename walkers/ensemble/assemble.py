"""The ensemble result: batch sums assembled into a CF Dataset of probabilities and receptor
statistics, its file and its summary text.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

import walkers
from walkers.ensemble.batches import (
    _BOOTSTRAP_KEY,
    BOOTSTRAP_RESAMPLES,
    CONFIDENCE,
    PERCENTILES,
    PROBABILITY_COMMENT,
    _OrderedReducer,
    add_percentiles,
    percentiles_with_ci,
)
from walkers.ensemble.members import _Prepared
from walkers.ensemble.water_column import add_column_variables, column_summary_lines
from walkers.outputs.display import ConcentrationUnit, concentration_unit, plain
from walkers.run.column import describe_releases, describe_vertical
from walkers.run.runner import release_places


def _assemble(red: _OrderedReducer, prepared: _Prepared, thr: tuple[float, ...]) -> xr.Dataset:
    sc = prepared.scenario
    spec = sc.ensemble
    assert spec is not None and red.frame is not None and red.exceed is not None
    assert red.window is not None and red.conc_sum is not None and red.exceed_half is not None
    n, k = red.members, red.half
    frame = red.frame
    nthr = len(thr)
    run_start = f"seconds after the run start {sc.start_iso}"
    data = _member_variables(red, prepared, run_start)
    rng = np.random.default_rng(np.random.SeedSequence([int(sc.seed), _BOOTSTRAP_KEY]))
    nrec = len(sc.receptors)
    if nrec:
        _add_receptor_peaks(data, red, rng)
    if nthr:
        _add_exceedance(data, red, nthr)
    if nthr and nrec:
        _add_receptor_exceedance(data, red, rng, run_start)
    coords = _coordinates(frame, n, thr)
    if red.column is not None:
        add_column_variables(data, coords, red.column, prepared, n, nthr, rng)
    attrs = {
        "title": f"{sc.title}: ensemble of {n} members",
        "seed": int(sc.seed),
        "walkers_version": walkers.__version__,
        "scenario": sc.text or "",
        "run_start": sc.start_iso,
        "release_places": release_places(sc),
        "crs_wkt": frame.attrs.get("crs_wkt", ""),
        "geographic": int(frame.attrs.get("geographic", 0)),
        "caution": walkers.CAUTION,
        "source": frame.attrs.get("source", ""),
        "members": int(n),
        "members_first_half": int(k),
        "member_batches": len(red.ranges),
        "varying_release": spec.release,
        "particle_steps": int(red.particle_steps),
        "bootstrap": f"percentile bootstrap, {BOOTSTRAP_RESAMPLES} resamples, "
        f"{CONFIDENCE:.0%} interval",
    }
    vertical = prepared.transport.vertical
    if vertical is not None:
        attrs["vertical"] = describe_vertical(vertical, prepared.flow)
        attrs["release_behaviour"] = describe_releases(sc.releases)
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _member_variables(red: _OrderedReducer, prepared: _Prepared, run_start: str) -> dict[str, Any]:
    """The ensemble-mean concentration, each member's source draw, and the land mask."""
    from walkers.run.runner import land_on_output_grid

    sc = prepared.scenario
    assert red.frame is not None and red.conc_sum is not None
    n = red.members
    frame = red.frame
    xunits = frame["x"].attrs.get("units", "m")
    yunits = frame["y"].attrs.get("units", "m")
    one = "1"
    data: dict[str, Any] = {
        "concentration_mean": (
            ("time", "y", "x"),
            red.conc_sum / n,
            {"units": "kg m-3", "long_name": "ensemble-mean concentration (box counting)"},
        ),
        "source_start": (
            "member",
            np.array([d.start for d in red.draws]),
            {"units": "s", "long_name": "drawn release start", "comment": run_start},
        ),
        "source_x": (
            "member",
            np.array([d.x for d in red.draws]),
            {"units": xunits, "long_name": "drawn release position x"},
        ),
        "source_y": (
            "member",
            np.array([d.y for d in red.draws]),
            {"units": yunits, "long_name": "drawn release position y"},
        ),
        "source_mass": (
            "member",
            np.array([d.mass for d in red.draws]),
            {"units": "kg", "long_name": "drawn mass released"},
        ),
        "source_duration": (
            "member",
            np.array([d.duration for d in red.draws]),
            {"units": "s", "long_name": "drawn release duration"},
        ),
        "dispersion_multiplier": (
            "member",
            np.array([d.dispersion_multiplier for d in red.draws]),
            {"units": one, "long_name": "drawn factor on the dispersion coefficients"},
        ),
        "land": (
            ("y", "x"),
            land_on_output_grid(prepared.flow, sc, prepared.offset, prepared.offset + sc.duration),
            {
                "units": one,
                "long_name": "land or never-wet cell (1) in the flow",
                "flag_values": np.array([0, 1], dtype=np.int8),
                "flag_meanings": "water land",
            },
        ),
    }
    return data


def _add_receptor_peaks(
    data: dict[str, Any], red: _OrderedReducer, rng: np.random.Generator
) -> None:
    """Each member's peak at each receptor, and its percentiles over the members."""
    peak = np.concatenate(red.peak)
    data["member_receptor_peak"] = (
        ("member", "receptor"),
        peak,
        {"units": "kg m-3", "long_name": "peak concentration at receptor over the run"},
    )
    est, lo, hi = percentiles_with_ci(peak, rng)
    add_percentiles(
        data,
        "receptor_peak",
        ("receptor",),
        est,
        lo,
        hi,
        "kg m-3",
        "peak concentration at receptor",
        "",
    )


def _add_exceedance(data: dict[str, Any], red: _OrderedReducer, nthr: int) -> None:
    """Exceedance probabilities per cell and time and over the window, and their convergence."""
    assert red.exceed is not None and red.exceed_half is not None and red.window is not None
    n, k = red.members, red.half
    one = "1"
    p = red.exceed / n
    p_half = red.exceed_half / k
    change = np.abs(p - p_half).reshape(nthr, -1)
    worst = change.argmax(axis=1)
    p_worst = p.reshape(nthr, -1)[np.arange(nthr), worst]
    factor = (n - k) / (n * k)
    data["exceedance_probability"] = (
        ("threshold", "time", "y", "x"),
        p,
        {
            "units": one,
            "long_name": "probability that the concentration exceeds the threshold",
            "comment": PROBABILITY_COMMENT,
        },
    )
    data["window_exceedance_probability"] = (
        ("threshold", "y", "x"),
        red.window / n,
        {
            "units": one,
            "long_name": "probability that the concentration exceeds the threshold at "
            "some output time",
        },
    )
    data["convergence_change"] = (
        "threshold",
        change.max(axis=1),
        {
            "units": one,
            "long_name": "largest change of the exceedance probability over the second "
            f"half of the members (|P({n}) - P({k})| over cells and times)",
        },
    )
    data["convergence_standard_error"] = (
        "threshold",
        np.sqrt(p_worst * (1.0 - p_worst) * factor),
        {
            "units": one,
            "long_name": "binomial standard error of that change at the cell where it is largest",
            "largest_possible": math.sqrt(0.25 * factor),
        },
    )


def _add_receptor_exceedance(
    data: dict[str, Any], red: _OrderedReducer, rng: np.random.Generator, run_start: str
) -> None:
    """Per member and receptor: arrival time and time above each threshold, their percentiles,
    and the probability that the receptor sees the threshold exceeded."""
    one = "1"
    arrival = np.concatenate(red.arrival)
    above = np.concatenate(red.above)
    data["member_arrival_time"] = (
        ("member", "receptor", "threshold"),
        np.where(np.isfinite(arrival), arrival, np.nan),
        {
            "units": "s",
            "long_name": "first time the receptor concentration exceeds the threshold",
            "comment": f"{run_start}; NaN: not within the run",
        },
    )
    data["member_time_above_threshold"] = (
        ("member", "receptor", "threshold"),
        above,
        {"units": "s", "long_name": "time the receptor concentration is above the threshold"},
    )
    data["receptor_exceedance_probability"] = (
        ("receptor", "threshold"),
        np.isfinite(arrival).mean(axis=0),
        {
            "units": one,
            "long_name": "probability that the receptor concentration exceeds the threshold "
            "within the run",
        },
    )
    est, lo, hi = percentiles_with_ci(arrival, rng)
    add_percentiles(
        data,
        "arrival_time",
        ("receptor", "threshold"),
        est,
        lo,
        hi,
        "s",
        "arrival time at receptor",
        f"{run_start}; NaN: not within the run",
    )
    est, lo, hi = percentiles_with_ci(above, rng)
    add_percentiles(
        data,
        "time_above_threshold",
        ("receptor", "threshold"),
        est,
        lo,
        hi,
        "s",
        "time above threshold at receptor",
        "",
    )


def _coordinates(frame: xr.Dataset, n: int, thr: tuple[float, ...]) -> dict[str, Any]:
    """The result's coordinates: those of a member's result, members, percentiles, thresholds."""
    one = "1"
    nthr = len(thr)
    coords: dict[str, Any] = {str(name): frame[name].variable for name in frame.coords}
    coords["member"] = (
        "member",
        np.arange(n, dtype=np.int32),
        {"long_name": "ensemble member", "standard_name": "realization", "units": one},
    )
    coords["percentile"] = (
        "percentile",
        np.array(PERCENTILES),
        {"units": "percent", "long_name": "percentile over the members"},
    )
    if nthr:
        coords["threshold"] = (
            "threshold",
            np.array(thr),
            {"units": "kg m-3", "long_name": "concentration threshold"},
        )
    return coords


def write_ensemble(
    ds: xr.Dataset,
    path: str | Path,
    *,
    overwrite: bool = False,
    inputs: Sequence[str | os.PathLike] = (),
) -> Path:
    """Write an ensemble Dataset as CF-1.8 NetCDF through
    :func:`walkers.outputs.writer.write_results` (temporary name, then rename; an existing file is
    kept unless ``overwrite``; none of ``inputs``, the files the ensemble read, is written over)."""
    from walkers.outputs.writer import write_results

    return write_results(ds, path, overwrite=overwrite, inputs=inputs)


def members_for_convergence(members: int, change: float, standard_error: float) -> int:
    """Members that would bring a change of ``change`` within ``standard_error``.

    The change of a Monte Carlo estimate between half and all of the members shrinks as
    1/√members (sampling error of a binomial proportion, common practice), so N members give
    about change·√(members/N); that is at most ``standard_error`` from
    N = members·(change/standard_error)², rounded up.
    """
    if not change > standard_error > 0:
        return members
    return int(math.ceil(members * (change / standard_error) ** 2))


def convergence_lines(ds: xr.Dataset, unit: ConcentrationUnit) -> list[str]:
    """Per threshold, a verdict on the convergence of the exceedance probabilities."""
    n = int(ds.sizes["member"])
    lines = []
    for k, level in enumerate(ds["threshold"].values):
        change = float(ds["convergence_change"][k])
        se = float(ds["convergence_standard_error"][k])
        head = (
            f"Convergence above {unit.text(float(level))}: over the second half of the {n} "
            f"members the probabilities moved by at most {change:.3f} (standard error {se:.3f})"
        )
        if change <= se:
            lines.append(f"{head}: settled, the change is within its standard error.")
        else:
            more = members_for_convergence(n, change, se)
            lines.append(
                f"{head}: not settled; about {more} members would bring a change of this size "
                f"within {se:.3f} (changes shrink as 1/sqrt(members))."
            )
    return lines


def summary_text(ds: xr.Dataset, units: str | None = None) -> str:
    """The end-of-ensemble summary: per receptor and threshold the probability of exceedance and
    the percentiles of arrival time, time above threshold and peak; a verdict on convergence; the
    caution. Concentrations in the display unit (``units``, else the scenario thresholds' unit,
    else mg/L); times in hours after the run start."""
    unit = concentration_unit(ds, units)
    n = int(ds.sizes["member"])
    lines = [str(ds.attrs.get("title", "walkers ensemble")), ""]
    if ds.attrs.get("vertical"):
        lines += [
            f"Three-dimensional: {ds.attrs['vertical']}.",
            f"Releases in the water column: {ds.attrs.get('release_behaviour', '')}.",
            "",
        ]
    pct = "/".join(f"{p:g}" for p in PERCENTILES)

    def hours(values: np.ndarray) -> str:
        return "/".join("-" if np.isnan(v) else f"{v / 3600:.3g}" for v in values)

    for r, name in enumerate(ds["receptor"].values if "receptor" in ds.dims else []):
        peak = unit.value(ds["receptor_peak_percentile"].values[r])
        lines.append(
            f"{name}: peak (percentiles {pct}) {'/'.join(plain(v) for v in peak)} {unit.name}"
        )
        for k, level in enumerate(ds["threshold"].values if "threshold" in ds.dims else []):
            p = float(ds["receptor_exceedance_probability"].values[r, k])
            se = math.sqrt(p * (1 - p) / n)
            lines.append(
                f"  above {unit.text(float(level))}: probability {p:.2f} (± {se:.2f}); arrival at "
                f"{hours(ds['arrival_time_percentile'].values[r, k])} h; time above "
                f"{hours(ds['time_above_threshold_percentile'].values[r, k])} h"
            )
    if "convergence_change" in ds:
        lines += ["", *convergence_lines(ds, unit)]
    column = column_summary_lines(ds, unit)
    if column:
        lines += ["", *column]
    lines += [
        "",
        f"Percentiles {pct} over the members; arrival times in hours after the run start. "
        "A '-' in the arrival percentiles means that fewer members than that percentile reached "
        "the threshold before the end of the run: that percentile arrives later, or never.",
        f"Caution: {walkers.CAUTION}",
    ]
    return "\n".join(lines)
