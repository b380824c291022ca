"""Readers of our own result files: the result Dataset back, with its string coordinates.

Every reader gives the same Dataset: :func:`read_results` with decoded times, :func:`open_results`
with numeric times (seconds since a zoned reference). With ``stream=True`` the (time, y, x)
fields stay on disk as dask arrays of one output time each, read as they are used, so a result
larger than memory can be drawn or exported frame by frame; everything else is in memory.
"""

from __future__ import annotations

import os
from pathlib import Path

import xarray as xr

from walkers.errors import InputError
from walkers.outputs.writer import _STRING_LABELS


def _open(path: str | os.PathLike, *, decode_times: bool, stream: bool) -> xr.Dataset:
    path = Path(path)
    if not path.is_file():
        raise InputError(f"result file {str(path)!r} does not exist")
    try:
        ds = xr.open_dataset(
            path, decode_times=decode_times, chunks={} if stream else None
        )  # chunks={}: dask chunks as stored, one output time of a field each (writer._encoding)
        for var in ds.variables.values():
            if not (stream and var.ndim >= 3):
                var.load()
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputError(
            f"result file {str(path)!r}: cannot be read as NetCDF ({exc}); the file may be "
            "damaged or incomplete: write it again"
        ) from exc
    if not stream:
        ds.close()
    for dim, label in _STRING_LABELS.items():
        if label in ds.coords:
            values = [v.decode() if isinstance(v, bytes) else str(v) for v in ds[label].values]
            attrs = {k: v for k, v in ds[label].attrs.items() if k != "cf_role"}
            ds = ds.drop_vars(label).assign_coords({dim: (dim, values, attrs)})
    return ds


def read_results(path: str | os.PathLike, *, stream: bool = False) -> xr.Dataset:
    """Open a file written by :func:`write_results`, with decoded times.

    The receptor and edge labels come back as the ``receptor`` and ``edge`` coordinates. Loaded
    into memory, or with ``stream`` the (time, y, x) fields read one output time at a time as
    they are used. Raises InputError if the file is missing, not NetCDF or damaged.
    """
    return _open(path, decode_times=True, stream=stream)


def open_results(path: str | os.PathLike, *, stream: bool = False) -> xr.Dataset:
    """Like :func:`read_results` but with numeric times (seconds since a zoned reference)."""
    return _open(path, decode_times=False, stream=stream)
