"""Export of results for spreadsheets: receptor series to CSV; text files written atomically."""

from __future__ import annotations

import csv
import io
import os
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import xarray as xr

from walkers.errors import InputError
from walkers.files import (
    _fsync_dir,
    _place,
    _temporary_names,
    check_room,
    check_target,
    failures_named,
)
from walkers.outputs.display import concentration_unit, hours_since_start, output_times


def write_text(path: Path, text: str, *, overwrite: bool = False) -> Path:
    """Write ``text`` (UTF-8) to ``path`` through a temporary name, flushed to disk; return path.

    The caller checks the target first (``check_target``) so that nothing is computed in vain. A
    disk without room for the text, or a folder that refuses the write, raises RunFailure naming
    the path and the room needed (:func:`walkers.files.failures_named`).
    """
    data = text.encode("utf-8")
    need = len(data)
    check_room(path, need)
    with _temporary_names([path]) as (temp,):
        with failures_named(path, need), open(temp, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        _place(temp, path, overwrite)
    _fsync_dir(path.parent)
    return path


def receptors_to_csv(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    units: str | None = None,
    inputs: Iterable[str | os.PathLike] = (),
) -> Path:
    """Write the receptor concentration series as CSV; return the path written.

    One row per output time: ``time (UTC)`` as ISO 8601, ``hours since run start``, then one
    column per receptor headed ``<name> (<unit>)`` in the display unit (``units``, else the
    scenario thresholds' unit, else mg/L), written as plain numbers. Written atomically like the
    NetCDF files, never onto one of ``inputs`` (the result read). Raises InputError if the result
    has no receptors, or as :func:`write_results` does for the target.
    """
    path = Path(path)
    if "receptor_concentration" not in ds or ds.sizes.get("receptor", 0) == 0:
        raise InputError("result has no receptors; add receptors to the scenario to export them")
    check_target(path, overwrite, inputs)
    unit = concentration_unit(ds, units)
    values = unit.value(ds["receptor_concentration"].transpose("receptor", "time").values)
    header = ["time (UTC)", "hours since run start"]
    header += [f"{name} ({unit.name})" for name in ds["receptor"].values]
    times = [t.strftime("%Y-%m-%dT%H:%M:%SZ") for t in output_times(ds)]
    hours = hours_since_start(ds)
    buffer = io.StringIO(newline="")
    writer = csv.writer(buffer)
    writer.writerow(header)
    for i, stamp in enumerate(times):
        cells = [np.format_float_positional(float(v), trim="-") for v in values[:, i]]
        writer.writerow([stamp, f"{hours[i]:g}", *cells])
    return write_text(path, buffer.getvalue(), overwrite=overwrite)
