"""The trace result as CF-1.8 NetCDF, written atomically, and read back.

Layout (CF Conventions 1.8, Eaton et al. 2020): the influence fields (detection, time, y, x) in
m-3 with ``grid_mapping``; the candidates' influence series, sensitivities, required masses,
posterior probabilities and mass intervals on the dimensions ``detection``, ``candidate`` and
``release_bin``. Detection, candidate and edge names are auxiliary label variables
``detection_name``, ``candidate_name`` and ``edge_name`` (CF §6.1: coordinate variables must be
numeric); :func:`read_trace` gives them back as coordinates. ``time`` is the release time
(seconds since the flow's reference). The global attributes carry the standard caution, the
ranking caution, the error model and the provenance.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import xarray as xr

import walkers
from walkers.errors import InputError
from walkers.outputs.writer import (
    _COMPRESSION,
    CONVENTIONS,
    GRID_MAPPING,
    _crs_of,
    _grid_mapping_attrs,
    _history,
    _write_atomic,
    input_paths,
)

LABELS = {"detection": "detection_name", "candidate": "candidate_name", "edge": "edge_name"}


def _to_cf(ds: xr.Dataset) -> tuple[xr.Dataset, dict[str, dict]]:
    out = ds.copy()
    for dim, label in LABELS.items():
        attrs = dict(out[dim].attrs)
        names = [str(v) for v in out[dim].values]
        out = out.drop_vars(dim).assign_coords({label: (dim, names, attrs)})
    out = out.set_coords("detection_kind")
    out["detection_kind"] = out["detection_kind"].astype(str)
    crs = _crs_of(ds)
    geographic = bool(int(ds.attrs.get("geographic", 0)))
    if geographic:
        out["x"].attrs.update(standard_name="longitude", units="degrees_east")
        out["y"].attrs.update(standard_name="latitude", units="degrees_north")
    elif crs is not None:
        out["x"].attrs["standard_name"] = "projection_x_coordinate"
        out["y"].attrs["standard_name"] = "projection_y_coordinate"
    out["x"].attrs["axis"] = "X"
    out["y"].attrs["axis"] = "Y"
    out["time"].attrs["axis"] = "T"
    if crs is not None:
        out[GRID_MAPPING] = xr.DataArray(np.int32(0), attrs=_grid_mapping_attrs(crs))
    for name, var in out.data_vars.items():
        if name == GRID_MAPPING:
            continue
        if "units" not in var.attrs or "long_name" not in var.attrs:
            raise InputError(f"trace variable {name!r}: needs 'units' and 'long_name'")
        if crs is not None and {"x", "y"} <= set(var.dims):
            var.attrs["grid_mapping"] = GRID_MAPPING
    attrs = {
        "Conventions": CONVENTIONS,
        "title": str(ds.attrs.get("title", "walkers trace")),
        "history": _history(),
        "caution": str(ds.attrs.get("caution", walkers.CAUTION)),
        "walkers_version": walkers.__version__,
    }
    for key, value in ds.attrs.items():
        attrs.setdefault(key, value)
    attrs["crs_wkt"] = crs.to_wkt() if crs is not None else ""
    out.attrs = attrs
    encoding: dict[str, dict] = {}
    for key, variable in out.variables.items():
        name = str(key)
        enc: dict[str, object] = {}
        if variable.dtype.kind in "USO":
            enc.update({"dtype": "S1", "char_dim_name": f"{name}_strlen"})
        elif variable.ndim >= 1:
            enc.update(_COMPRESSION)
            enc["chunksizes"] = tuple(
                1 if d in ("detection", "time") and variable.ndim == 4 else n
                for d, n in zip(variable.dims, variable.shape, strict=True)
            )
        if variable.dtype.kind == "f":
            enc["_FillValue"] = np.nan if name in out.data_vars else None
        elif variable.dtype.kind in "iu":
            enc["_FillValue"] = None
        encoding[name] = enc
    return out, encoding


def write_trace(
    ds: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = False, inputs=()
) -> Path:
    """Write a trace result as CF-1.8 NetCDF4, atomically (a temporary name, then renamed);
    an existing file is replaced only with ``overwrite``, and never an input of the run."""
    path = Path(path)
    data, encoding = _to_cf(ds)
    _write_atomic([(data, encoding, path)], overwrite, [*input_paths(ds), *map(str, inputs)])
    return path


def read_trace(path: str | os.PathLike) -> xr.Dataset:
    """A trace result file back as written by :func:`write_trace`, labels as coordinates and
    numeric times. Raises InputError if the file is missing or not a trace result."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"trace result {str(path)!r} does not exist")
    try:
        with xr.open_dataset(path, decode_times=False) as f:
            ds = f.load()
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputError(f"trace result {str(path)!r}: cannot be read as NetCDF ({exc})") from exc
    if "candidate_name" not in ds.variables:
        raise InputError(f"{str(path)!r} is not a trace result (no candidate_name); trace again")
    for dim, label in LABELS.items():
        values = [v.decode() if isinstance(v, bytes) else str(v) for v in ds[label].values]
        ds = ds.drop_vars(label).assign_coords({dim: (dim, values, dict(ds[label].attrs))})
    return ds
