"""Readers of our own result files: the result Dataset back, with its string coordinates."""

from __future__ import annotations

import os
from pathlib import Path

import xarray as xr

from walkers.errors import InputError
from walkers.outputs.writer import _STRING_LABELS


def _open(path: str | os.PathLike, *, decode_times: bool) -> xr.Dataset:
    path = Path(path)
    if not path.is_file():
        raise InputError(f"result file {str(path)!r} does not exist")
    try:
        ds = xr.open_dataset(path, decode_times=decode_times)
    except (OSError, ValueError) as exc:
        raise InputError(f"result file {str(path)!r}: cannot be read as NetCDF ({exc})") from exc
    ds = ds.load()
    ds.close()
    for dim, label in _STRING_LABELS.items():
        if label in ds.coords:
            values = [v.decode() if isinstance(v, bytes) else str(v) for v in ds[label].values]
            attrs = {k: v for k, v in ds[label].attrs.items() if k != "cf_role"}
            ds = ds.drop_vars(label).assign_coords({dim: (dim, values, attrs)})
    return ds


def read_results(path: str | os.PathLike) -> xr.Dataset:
    """Open a file written by :func:`write_results`, loaded into memory, with decoded times.

    The receptor and edge labels come back as the ``receptor`` and ``edge`` coordinates. Raises
    InputError if the file is missing or not NetCDF.
    """
    return _open(path, decode_times=True)


def open_results(path: str | os.PathLike) -> xr.Dataset:
    """Like :func:`read_results` but with numeric times (seconds since a zoned reference)."""
    return _open(path, decode_times=False)
