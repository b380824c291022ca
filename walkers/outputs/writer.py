"""CF-1.8 NetCDF output of a run, written atomically, and readers of our own files.

What a file holds (CF Conventions 1.8, Eaton et al. 2020, "NetCDF Climate and Forecast (CF)
Metadata Conventions", version 1.8):

- the gridded fields ``concentration`` (time, y, x), ``particle_count``, ``concentration_max``
  (y, x) and the optional ``concentration_smoothed`` and ``land_fraction``, each pointing through
  ``grid_mapping`` at the integer variable ``crs`` that carries the coordinate reference system as
  WKT (``crs_wkt``) and, where pyproj can derive them, the CF grid-mapping parameters (§5.6);
- the receptor series ``receptor_concentration`` (receptor, time) as a discrete sampling geometry
  of featureType ``timeSeries`` in the orthogonal multidimensional representation (§9.3.1, H.2.1):
  ``receptor_name`` (cf_role ``timeseries_id``) and the receptor positions are its coordinates;
- the mass budget (time) and (edge, time) in kg, particle numbers and plume moments.

CF allows one featureType per file (§9.4), so sampled particle tracks — a ``trajectory`` feature —
go to a second file ``<stem>_tracks.nc`` (see :func:`write_tracks`), named in the main file's
``tracks_file`` attribute. Both files are written to a temporary name in the target directory,
flushed to disk and then given their final names, so a crash never leaves a partial file under a
final name.

Long runs: the 3-D fields of a run may come as dask arrays read lazily from the run's temporary
field store (:class:`DiskFields`, chosen by :func:`field_store`); :func:`write_results` then
streams them to the file one output time (one chunk) at a time, so the fields are never all in
memory (what grows with the number of output times is dask's task graph, some kB per output
time).

On disk the string coordinates ``receptor`` and ``edge`` become the auxiliary label variables
``receptor_name`` and ``edge_name`` (CF coordinate variables must be numeric, §1.2 / §6.1);
:func:`read_results` gives them back their result-Dataset names.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import os
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import dask
import dask.array
import netCDF4
import numpy as np
import xarray as xr
from pyproj import CRS, Transformer

import walkers
from walkers.errors import InputError
from walkers.files import (
    _fsync_dir,
    _fsync_file,
    _place,
    _temporary_names,
    check_room,
    check_target,
    failures_named,
)

CONVENTIONS = "CF-1.8"
GRID_MAPPING = "crs"
_COMPRESSION = {"zlib": True, "complevel": 4, "shuffle": True}
_STRING_LABELS = {"receptor": "receptor_name", "edge": "edge_name", "band": "band_name"}
#: Variables of the tracks file, not of the main file.
_TRACK_VARIABLES = ("track_x", "track_y", "track_height_above_bed")
#: The dimensions along which a field by depth band has one chunk per index.
_FIELD_STEPS = ("time", "band")


# --------------------------------------------------------------------------------------------
# CF encoding
# --------------------------------------------------------------------------------------------


def _crs_of(ds: xr.Dataset) -> CRS | None:
    wkt = str(ds.attrs.get("crs_wkt", ""))
    if wkt:
        try:
            return CRS.from_wkt(wkt)
        except Exception as exc:
            raise InputError(
                f"result attribute crs_wkt: pyproj cannot read it ({exc}); give a valid WKT"
            ) from exc
    if int(ds.attrs.get("geographic", 0)):
        return CRS.from_epsg(4326)
    return None


def _grid_mapping_attrs(crs: CRS) -> dict[str, object]:
    """CF grid-mapping attributes of a CRS (CF §5.6 and Appendix F), through pyproj."""
    attrs = {k: v for k, v in crs.to_cf().items() if v is not None}
    attrs["crs_wkt"] = crs.to_wkt()
    if crs.is_geographic:
        attrs["grid_mapping_name"] = "latitude_longitude"
    attrs["long_name"] = "coordinate reference system"
    return attrs


def _with_units(attrs: dict, units: str, long_name: str) -> dict:
    out = dict(attrs)
    out.setdefault("units", units)
    out.setdefault("long_name", long_name)
    return out


def _to_cf(ds: xr.Dataset, history: str) -> tuple[xr.Dataset, dict]:
    """The on-disk form of a result Dataset (without tracks) and its NetCDF encoding."""
    time_encoding = ds["time"].encoding
    out = ds.drop_vars([v for v in _TRACK_VARIABLES if v in ds.variables])
    if "trajectory" in out.dims:
        out = out.drop_dims("trajectory")
    out = _with_string_labels(out)
    for var in out.variables.values():
        var.encoding = {}  # stale encodings of a file read back (times: see _encoding)
    crs = _crs_of(ds)
    geographic = bool(int(ds.attrs.get("geographic", 0)))
    _set_axis_attrs(out)
    has_receptors = "receptor_concentration" in out and out.sizes.get("receptor", 0) > 0
    if has_receptors and crs is not None and not crs.is_geographic and not geographic:
        out = _with_receptor_lonlat(out, crs)
    _set_variable_attrs(out, crs, has_receptors)
    out.attrs = _global_attrs(ds, history, crs, geographic, has_receptors)
    return out, _encoding(out, time_encoding)


def _with_string_labels(out: xr.Dataset) -> xr.Dataset:
    """String coordinates as auxiliary label variables on a plain dimension (CF §6.1)."""
    for dim, label in _STRING_LABELS.items():
        if dim in out.coords:
            attrs = dict(out[dim].attrs)
            names = [str(v) for v in out[dim].values]
            out = out.drop_vars(dim).assign_coords({label: (dim, names, attrs)})
    if "receptor_name" in out.coords:
        out["receptor_name"].attrs.update(
            {"cf_role": "timeseries_id", "long_name": "receptor name"}
        )
    if "edge_name" in out.coords:
        out["edge_name"].attrs["long_name"] = "domain edge name"
    if "band_name" in out.coords:
        out["band_name"].attrs["long_name"] = "depth band name"
    return out


def _set_axis_attrs(out: xr.Dataset) -> None:
    """Units, long names and axes of x, y and time."""
    out["x"].attrs = _with_units(out["x"].attrs, "m", "x coordinate of cell centre")
    out["y"].attrs = _with_units(out["y"].attrs, "m", "y coordinate of cell centre")
    for name in ("x", "y"):
        out[name].attrs["axis"] = name.upper()
    if np.issubdtype(out["time"].dtype, np.number):
        out["time"].attrs = _with_units(out["time"].attrs, "s", "time")
        out["time"].attrs.setdefault("calendar", "standard")
    else:  # decoded times (a file read back): xarray encodes them with their own units
        out["time"].attrs.setdefault("long_name", "time")
    out["time"].attrs["axis"] = "T"


def _with_receptor_lonlat(out: xr.Dataset, crs: CRS) -> xr.Dataset:
    """Receptor positions in WGS84 longitude and latitude beside the projected ones."""
    to_geo = Transformer.from_crs(crs, CRS.from_epsg(4326), always_xy=True)
    lon, lat = to_geo.transform(out["receptor_x"].values, out["receptor_y"].values)
    out = out.assign_coords(
        receptor_lon=(
            "receptor",
            np.asarray(lon, dtype=np.float64),
            {
                "units": "degrees_east",
                "standard_name": "longitude",
                "long_name": "receptor longitude (WGS84)",
            },
        ),
        receptor_lat=(
            "receptor",
            np.asarray(lat, dtype=np.float64),
            {
                "units": "degrees_north",
                "standard_name": "latitude",
                "long_name": "receptor latitude (WGS84)",
            },
        ),
    )
    return out


def _set_variable_attrs(out: xr.Dataset, crs: CRS | None, has_receptors: bool) -> None:
    """The grid mapping variable and its references, checked units and long names, and the
    coordinates of the receptor series (CF §5.6, §9)."""
    if crs is not None:
        out[GRID_MAPPING] = xr.DataArray(np.int32(0), attrs=_grid_mapping_attrs(crs))
    for key, data in out.data_vars.items():
        name = str(key)
        if name == GRID_MAPPING:
            continue
        if "units" not in data.attrs or "long_name" not in data.attrs:
            raise InputError(
                f"result variable {name!r}: needs 'units' and 'long_name' attributes before it "
                "can be written"
            )
        spatial = {"x", "y"} <= set(data.dims) or (
            has_receptors and name in ("receptor_concentration", "receptor_profile")
        )
        if crs is not None and spatial:
            data.attrs["grid_mapping"] = GRID_MAPPING
    if has_receptors:
        coords = ["time", "receptor_name", "receptor_x", "receptor_y"]
        coords += [c for c in ("receptor_lon", "receptor_lat", "receptor_radius") if c in out]
        out["receptor_concentration"].attrs["coordinates"] = " ".join(coords)
        if "receptor_profile" in out:
            out["receptor_profile"].attrs["coordinates"] = " ".join([*coords, "height"])
        if "receptor_threshold" in out:
            out["receptor_threshold"].attrs["coordinates"] = "receptor_name"
        for name in ("receptor_radius",):
            if name in out.coords:
                out[name].attrs = _with_units(out[name].attrs, "m", "receptor averaging radius")


def _global_attrs(
    ds: xr.Dataset, history: str, crs: CRS | None, geographic: bool, has_receptors: bool
) -> dict[str, Any]:
    """The file's global attributes: CF conventions, provenance, the caution, the CRS."""
    attrs = {
        "Conventions": CONVENTIONS,
        "title": str(ds.attrs.get("title", "walkers run")),
        "history": history,
        "source": str(ds.attrs.get("source", "")),
        "seed": int(ds.attrs.get("seed", -1)),
        "walkers_version": str(ds.attrs.get("walkers_version", walkers.__version__)),
        "scenario": str(ds.attrs.get("scenario", "")),
        "caution": str(ds.attrs.get("caution", walkers.CAUTION)),
        "crs_wkt": crs.to_wkt() if crs is not None else "",
        "geographic": int(geographic),
    }
    if has_receptors:
        attrs["featureType"] = "timeSeries"
    for key, value in ds.attrs.items():
        attrs.setdefault(key, value)
    return attrs


def _encoding(out: xr.Dataset, time_encoding: dict) -> dict:
    """Chunks (one time step per chunk for 3-D fields), zlib compression, fill values.

    Decoded times (a file read back) keep the units and calendar they were read with.
    """
    encoding: dict[str, dict] = {}
    for key, var in out.variables.items():
        name = str(key)
        enc: dict[str, object] = {}
        if name == "time" and not np.issubdtype(var.dtype, np.number):
            enc.update({k: v for k, v in time_encoding.items() if k in ("units", "calendar")})
        if var.dtype.kind in "US":
            enc.update({"dtype": "S1", "char_dim_name": f"{name}_strlen"})
        elif var.ndim >= 1:
            enc.update(_COMPRESSION)
            enc["chunksizes"] = tuple(
                1
                if dim == "time" and var.ndim == 3 or dim in _FIELD_STEPS and _is_band_field(var)
                else size
                for dim, size in zip(var.dims, var.shape, strict=True)
            )
        # NaN marks missing data (e.g. moments before any release, padded thresholds);
        # coordinates must not have missing values (CF §5)
        if var.dtype.kind == "f":
            enc["_FillValue"] = np.nan if name in out.data_vars else None
        elif var.dtype.kind in "iu":
            enc["_FillValue"] = None
        encoding[name] = enc
    return encoding


def _is_band_field(var: xr.Variable) -> bool:
    """A gridded field over time by depth band, (time, band, y, x): one chunk a band and time."""
    return var.dims == ("time", "band", "y", "x")


def _tracks_to_cf(ds: xr.Dataset, history: str) -> tuple[xr.Dataset, dict]:
    """Sampled tracks as a CF trajectory feature (§9, H.4) in the orthogonal representation."""
    ntraj = ds.sizes["trajectory"]
    crs = _crs_of(ds)
    out = xr.Dataset(
        coords={
            "time": ds["time"].variable.copy(),
            "trajectory_id": (
                "trajectory",
                np.arange(ntraj, dtype=np.int32),
                {"cf_role": "trajectory_id", "long_name": "sampled particle number", "units": "1"},
            ),
        }
    )
    out["time"].attrs.setdefault("long_name", "time")
    out["time"].attrs["axis"] = "T"
    for name, axis in (("track_x", "x"), ("track_y", "y")):
        attrs = dict(ds[axis].attrs)
        attrs.pop("axis", None)
        attrs["long_name"] = f"particle position, {axis} coordinate"
        attrs.setdefault("units", ds[axis].attrs.get("units", "m"))
        out = out.assign_coords({name: (("trajectory", "time"), ds[name].values, attrs)})
    coordinates = "time trajectory_id track_x track_y"
    if "track_height_above_bed" in ds:
        attrs = dict(ds["track_height_above_bed"].attrs)
        attrs.update({"positive": "up", "axis": "Z"})
        out = out.assign_coords(
            track_height_above_bed=(
                ("trajectory", "time"),
                ds["track_height_above_bed"].values,
                attrs,
            )
        )
        coordinates += " track_height_above_bed"
    if crs is not None:
        out[GRID_MAPPING] = xr.DataArray(np.int32(0), attrs=_grid_mapping_attrs(crs))
    in_water = np.isfinite(ds["track_x"].values) & np.isfinite(ds["track_y"].values)
    out["track_in_water"] = (
        ("trajectory", "time"),
        in_water.astype(np.int8),
        {
            "long_name": "particle is in the water (1), or gone out, decayed or held dry (0)",
            "units": "1",
            "flag_values": np.array([0, 1], dtype=np.int8),
            "flag_meanings": "gone in_water",
            "coordinates": coordinates,
        },
    )
    if crs is not None:
        out["track_in_water"].attrs["grid_mapping"] = GRID_MAPPING
    out.attrs = {
        "Conventions": CONVENTIONS,
        "featureType": "trajectory",
        "title": f"{ds.attrs.get('title', 'walkers run')}: sampled particle tracks",
        "history": history,
        "source": str(ds.attrs.get("source", "")),
        "seed": int(ds.attrs.get("seed", -1)),
        "walkers_version": str(ds.attrs.get("walkers_version", walkers.__version__)),
        "caution": str(ds.attrs.get("caution", walkers.CAUTION)),
        "crs_wkt": crs.to_wkt() if crs is not None else "",
    }
    for var in out.variables.values():
        var.encoding = {}
    encoding = _encoding(out, ds["time"].encoding)
    for name in _TRACK_VARIABLES:
        if name in encoding:
            encoding[name]["_FillValue"] = np.nan  # a track that has left is NaN from then on
    return out, encoding


@contextmanager
def _chunk_cache(data: xr.Dataset, encoding: dict[str, dict]) -> Iterator[None]:
    """While writing ``data``: an HDF5 chunk cache per variable of its largest chunk (at least
    1 MiB) instead of netCDF's default 64 MiB, which the chunks of a streamed field (written once
    each, whole) would fill for nothing: some 130 MB for two 200 x 200 fields."""
    largest = max(
        (
            math.prod(enc["chunksizes"]) * data[name].dtype.itemsize
            for name, enc in encoding.items()
            if "chunksizes" in enc
        ),
        default=0,
    )
    before = netCDF4.get_chunk_cache()
    netCDF4.set_chunk_cache(max(largest, 2**20))
    try:
        yield
    finally:
        netCDF4.set_chunk_cache(*before)


def estimated_bytes(data: xr.Dataset) -> int:
    """About how many bytes ``data`` takes in a file: the values of the (time, y, x) fields that
    are not zero (compression leaves little of the zeros), every other variable whole, and 16 kB
    of metadata. Fields streamed from the run's store are counted one output time at a time."""
    total = 16_000
    for var in data.variables.values():
        if var.ndim >= 3 and var.chunks is None:
            total += int(np.count_nonzero(var.values)) * var.dtype.itemsize
        elif var.ndim >= 3:
            with dask.config.set(scheduler="synchronous"):
                nonzero = int(dask.array.count_nonzero(var.data).compute())
            total += nonzero * var.dtype.itemsize
        else:
            total += int(var.nbytes)
    return total


def _write_atomic(
    items: list[tuple[xr.Dataset, dict, Path]], overwrite: bool, inputs: list[str]
) -> None:
    """Write each (data, encoding, path) to a temporary name, then give all their final names;
    refuse a target that is one of ``inputs`` or lacks the room the data needs."""
    finals = [path for _, _, path in items]
    for path in finals:
        check_target(path, overwrite, inputs)
    need = {path: estimated_bytes(data) for data, _, path in items}
    check_room(finals[0], sum(need.values()))
    placed: list[Path] = []
    with _temporary_names(finals) as temps:
        try:
            for (data, encoding, final), temp in zip(items, temps, strict=True):
                with failures_named(final, need[final]):
                    # fields streamed to disk are dask arrays: written one chunk (output time) at
                    # a time, in this thread (the store's files are read under one lock)
                    with dask.config.set(scheduler="synchronous"), _chunk_cache(data, encoding):
                        data.to_netcdf(temp, format="NETCDF4", encoding=encoding)
                    _fsync_file(temp)
            for temp, final in zip(temps, finals, strict=True):
                _place(temp, final, overwrite)
                placed.append(final)
        except BaseException:
            # all or nothing: a tracks file without its main file would mislead
            for final in placed:
                final.unlink(missing_ok=True)
            raise
    for folder in {path.parent for path in finals}:
        _fsync_dir(folder)


def _history() -> str:
    now = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
    return f"{now} created by walkers {walkers.__version__}"


def tracks_path(path: str | os.PathLike) -> Path:
    """The companion file that holds the sampled tracks of ``path``: ``<stem>_tracks.nc``."""
    path = Path(path)
    return path.with_name(f"{path.stem}_tracks.nc")


def input_paths(ds: xr.Dataset) -> list[str]:
    """The input files a result records in its ``input_files`` attribute (none if it has none)."""
    text = ds.attrs.get("input_files")
    return [str(record["path"]) for record in json.loads(text)] if text else []


def write_results(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    inputs: Iterable[str | os.PathLike] = (),
) -> Path:
    """Write a run's result Dataset as CF-1.8 NetCDF4, atomically; return the path written.

    Sampled tracks (``track_x``/``track_y``), if present, go to :func:`tracks_path` ``(path)`` as
    a CF trajectory file, because CF allows one featureType per file and the main file is a
    ``timeSeries`` of the receptors; the two files are placed together or not at all.

    Raises InputError if the output directory is missing or not writable, if a target file is an
    input of the run (those the result records in ``input_files``, and ``inputs``) or exists and
    ``overwrite`` is false; RunFailure if the disk has no room for it (checked before writing
    against :func:`estimated_bytes`, and when a write fails for want of room) or refuses the write.
    On any error no file is left under a final name and the temporary files are removed.
    """
    path = Path(path)
    history = _history()
    data, encoding = _to_cf(ds, history)
    items = [(data, encoding, path)]
    if "track_x" in ds and ds.sizes.get("trajectory", 0) > 0:
        data.attrs["tracks_file"] = tracks_path(path).name
        items.append((*_tracks_to_cf(ds, history), tracks_path(path)))
    _write_atomic(items, overwrite, [*input_paths(ds), *map(str, inputs)])
    return path


def write_tracks(ds: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write only the sampled tracks of a result Dataset as a CF-1.8 trajectory file, atomically.

    Raises InputError if the Dataset has no tracks, or as :func:`write_results` does.
    """
    if "track_x" not in ds or ds.sizes.get("trajectory", 0) == 0:
        raise InputError("result has no sampled tracks; request tracks in the run to write them")
    path = Path(path)
    _write_atomic([(*_tracks_to_cf(ds, _history()), path)], overwrite, input_paths(ds))
    return path
