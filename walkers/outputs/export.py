"""Export of results for spreadsheets: receptor series to CSV."""

from __future__ import annotations

import csv
import os
from collections.abc import Iterable
from pathlib import Path

import xarray as xr

from walkers.errors import InputError
from walkers.fields.times import iso_times
from walkers.files import (
    _fsync_dir,
    _place,
    _temporary_names,
    check_room,
    check_target,
    failures_named,
)


def receptors_to_csv(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    inputs: Iterable[str | os.PathLike] = (),
) -> Path:
    """Write the receptor concentration series as CSV; return the path written.

    One row per output time: ``time`` as ISO 8601 with zone, then one column per receptor headed
    ``<name> (kg m-3)``. Written atomically like the NetCDF files, never onto one of ``inputs`` (the
    result read). Raises InputError if the result has no receptors, or as :func:`write_results`
    does for the target.
    """
    path = Path(path)
    if "receptor_concentration" not in ds or ds.sizes.get("receptor", 0) == 0:
        raise InputError("result has no receptors; add receptors to the scenario to export them")
    check_target(path, overwrite, inputs)
    series = ds["receptor_concentration"].transpose("receptor", "time")
    units = series.attrs.get("units", "kg m-3")
    header = ["time"] + [f"{name} ({units})" for name in ds["receptor"].values]
    times = iso_times(ds["time"])
    values = series.values
    need = 32 * (values.size + len(times)) + 64 * len(header)  # bytes: 32 a number, 64 a heading
    check_room(path, need)
    with _temporary_names([path]) as (temp,):
        with failures_named(path, need), open(temp, "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle)
            writer.writerow(header)
            for i, stamp in enumerate(times):
                writer.writerow([stamp] + [repr(float(v)) for v in values[:, i]])
            handle.flush()
            os.fsync(handle.fileno())
        _place(temp, path, overwrite)
    _fsync_dir(path.parent)
    return path
