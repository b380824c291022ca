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

import csv
import datetime as dt
import errno
import math
import os
import re
import shutil
import tempfile
import threading
import uuid
import weakref
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

import cftime
import dask
import dask.array
import netCDF4
import numpy as np
import xarray as xr
from pyproj import CRS, Transformer

import walkers
from walkers.errors import InputError

CONVENTIONS = "CF-1.8"
GRID_MAPPING = "crs"
_COMPRESSION = {"zlib": True, "complevel": 4, "shuffle": True}
_STRING_LABELS = {"receptor": "receptor_name", "edge": "edge_name"}


# --------------------------------------------------------------------------------------------
# times
# --------------------------------------------------------------------------------------------


def _split_time_units(units: str) -> tuple[str, dt.datetime]:
    """Split CF time units ``"<unit> since <reference>"`` into the unit and an aware reference.

    A reference without a zone is UTC, as in CF §4.4 and UDUNITS.
    """
    unit, sep, ref = units.partition(" since ")
    if not sep:
        raise InputError(f"time units {units!r}: expected '<unit> since <ISO 8601 date-time>'")
    text = re.sub(r"\s*(UTC|utc)$", "", ref.strip())
    text = re.sub(r"\s+([+-]\d{1,2}(:?\d{2})?)$", r"\1", text)  # "... 00:00 +02:00"
    try:
        reference = dt.datetime.fromisoformat(text)
    except ValueError as exc:
        raise InputError(f"time units {units!r}: reference date-time is not ISO 8601") from exc
    if reference.tzinfo is None:
        reference = reference.replace(tzinfo=dt.UTC)
    return unit.strip(), reference


def _format_offset(reference: dt.datetime) -> str:
    offset = reference.utcoffset() or dt.timedelta(0)
    minutes = int(offset.total_seconds() // 60)
    sign = "+" if minutes >= 0 else "-"
    return f"{sign}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"


def iso_times(time: xr.DataArray) -> list[str]:
    """ISO 8601 date-times with zone of a time coordinate, e.g. ``2024-05-14T07:00:00+02:00``.

    A numeric coordinate with CF ``units``/``calendar`` attributes (as a run returns it) is shown
    in the zone of its reference time and in its calendar; a decoded coordinate (datetime64 or
    cftime objects, as :func:`read_results` returns it) is shown in UTC.
    """
    values = np.asarray(time.values)
    if np.issubdtype(values.dtype, np.number) and "units" in time.attrs:
        unit, reference = _split_time_units(str(time.attrs["units"]))
        naive = reference.replace(tzinfo=None).isoformat()
        dates = cftime.num2date(
            values, f"{unit} since {naive}", calendar=time.attrs.get("calendar", "standard")
        )
        zone = _format_offset(reference)
        return [d.isoformat(timespec="seconds").replace(" ", "T") + zone for d in dates]
    if np.issubdtype(values.dtype, np.datetime64):
        return [str(np.datetime_as_string(v, unit="s")) + "+00:00" for v in values]
    return [d.isoformat(timespec="seconds").replace(" ", "T") + "+00:00" for d in values]


def elapsed_seconds(time: xr.DataArray) -> np.ndarray:
    """Seconds since the first output time (float64), for a numeric or a decoded time axis."""
    values = np.asarray(time.values)
    if np.issubdtype(values.dtype, np.number):
        unit, _ = _split_time_units(str(time.attrs.get("units", "seconds since 1970-01-01")))
        scale = {"seconds": 1.0, "minutes": 60.0, "hours": 3600.0, "days": 86400.0}
        factor = scale.get(unit.lower(), 1.0)
        return (values.astype(np.float64) - float(values[0])) * factor
    if np.issubdtype(values.dtype, np.datetime64):
        return (values - values[0]) / np.timedelta64(1, "s")
    return np.array([(v - values[0]).total_seconds() for v in values])


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
    out = ds.drop_vars([v for v in ("track_x", "track_y") if v in ds.variables])
    if "trajectory" in out.dims:
        out = out.drop_dims("trajectory")
    # string labels: auxiliary coordinates on a plain dimension (CF §6.1)
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
    for var in out.variables.values():
        var.encoding = {}  # stale encodings of a file read back (times: see _encoding)
    crs = _crs_of(ds)
    geographic = bool(int(ds.attrs.get("geographic", 0)))

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

    has_receptors = "receptor_concentration" in out and out.sizes.get("receptor", 0) > 0
    if has_receptors and crs is not None and not crs.is_geographic and not geographic:
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
            has_receptors and name == "receptor_concentration"
        )
        if crs is not None and spatial:
            data.attrs["grid_mapping"] = GRID_MAPPING
    if has_receptors:
        coords = ["time", "receptor_name", "receptor_x", "receptor_y"]
        coords += [c for c in ("receptor_lon", "receptor_lat", "receptor_radius") if c in out]
        out["receptor_concentration"].attrs["coordinates"] = " ".join(coords)
        if "receptor_threshold" in out:
            out["receptor_threshold"].attrs["coordinates"] = "receptor_name"
        for name in ("receptor_radius",):
            if name in out.coords:
                out[name].attrs = _with_units(out[name].attrs, "m", "receptor averaging radius")

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
    out.attrs = attrs
    return out, _encoding(out, time_encoding)


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
                1 if dim == "time" and var.ndim == 3 else size
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
    if crs is not None:
        out[GRID_MAPPING] = xr.DataArray(np.int32(0), attrs=_grid_mapping_attrs(crs))
    in_water = np.isfinite(ds["track_x"].values) & np.isfinite(ds["track_y"].values)
    out["track_in_water"] = (
        ("trajectory", "time"),
        in_water.astype(np.int8),
        {
            "long_name": "particle is in the water (1) or has left or stranded (0)",
            "units": "1",
            "flag_values": np.array([0, 1], dtype=np.int8),
            "flag_meanings": "gone in_water",
            "coordinates": "time trajectory_id track_x track_y",
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
    for name in ("track_x", "track_y"):
        encoding[name]["_FillValue"] = np.nan  # a track that has left is NaN from then on
    return out, encoding


# --------------------------------------------------------------------------------------------
# atomic writing
# --------------------------------------------------------------------------------------------


def check_folder(folder: Path, what: str) -> None:
    """Raise InputError unless ``folder`` is an existing, writable directory."""
    if not folder.is_dir():
        raise InputError(f"{what} {str(folder)!r} does not exist; create it first")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{what} {str(folder)!r} is not writable; choose another")


def check_target(path: Path, overwrite: bool) -> None:
    """Raise InputError if ``path`` cannot be written: no such or no writable directory, or the
    file exists and ``overwrite`` is false."""
    check_folder(path.parent, "output directory")
    if path.exists() and not overwrite:
        raise InputError(
            f"output file {str(path)!r} exists; pass --overwrite or choose another name"
        )


def _fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return  # some platforms cannot open a directory; the rename itself is still atomic
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _place(temp: Path, final: Path, overwrite: bool) -> None:
    """Give ``temp`` the name ``final`` in one step; without ``overwrite`` never replace a file."""
    if overwrite:
        os.replace(temp, final)
        return
    try:
        os.link(temp, final)  # fails if ``final`` appeared meanwhile: no silent replacement
    except FileExistsError as exc:
        raise InputError(
            f"output file {str(final)!r} exists; pass --overwrite or choose another name"
        ) from exc
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV):
            raise
        if final.exists():
            raise InputError(
                f"output file {str(final)!r} exists; pass --overwrite or choose another name"
            ) from exc
        os.replace(temp, final)
        return
    temp.unlink()


@contextmanager
def _temporary_names(finals: list[Path]) -> Iterator[list[Path]]:
    """Temporary names beside each final name; every one is removed on the way out."""
    temps = [f.with_name(f".{f.name}.{uuid.uuid4().hex[:12]}.part") for f in finals]
    try:
        yield temps
    finally:
        for temp in temps:
            temp.unlink(missing_ok=True)


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


def _write_atomic(items: list[tuple[xr.Dataset, dict, Path]], overwrite: bool) -> None:
    finals = [path for _, _, path in items]
    for path in finals:
        check_target(path, overwrite)
    placed: list[Path] = []
    with _temporary_names(finals) as temps:
        try:
            for (data, encoding, _), temp in zip(items, temps, strict=True):
                try:
                    # fields streamed to disk are dask arrays: written one chunk (output time) at
                    # a time, in this thread (the store's files are read under one lock)
                    with dask.config.set(scheduler="synchronous"), _chunk_cache(data, encoding):
                        data.to_netcdf(temp, format="NETCDF4", encoding=encoding)
                except PermissionError as exc:
                    raise InputError(
                        f"output directory {str(temp.parent)!r} is not writable; choose another"
                    ) from exc
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


def write_results(ds: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write a run's result Dataset as CF-1.8 NetCDF4, atomically; return the path written.

    Sampled tracks (``track_x``/``track_y``), if present, go to :func:`tracks_path` ``(path)`` as
    a CF trajectory file, because CF allows one featureType per file and the main file is a
    ``timeSeries`` of the receptors; the two files are placed together or not at all.

    Raises InputError if the output directory is missing or not writable, or if a target file
    exists and ``overwrite`` is false. On any error no file is left under a final name and the
    temporary files are removed.
    """
    path = Path(path)
    history = _history()
    data, encoding = _to_cf(ds, history)
    items = [(data, encoding, path)]
    if "track_x" in ds and ds.sizes.get("trajectory", 0) > 0:
        data.attrs["tracks_file"] = tracks_path(path).name
        items.append((*_tracks_to_cf(ds, history), tracks_path(path)))
    _write_atomic(items, overwrite)
    return path


def write_tracks(ds: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write only the sampled tracks of a result Dataset as a CF-1.8 trajectory file, atomically.

    Raises InputError if the Dataset has no tracks, or as :func:`write_results` does.
    """
    if "track_x" not in ds or ds.sizes.get("trajectory", 0) == 0:
        raise InputError("result has no sampled tracks; request tracks in the run to write them")
    path = Path(path)
    _write_atomic([(*_tracks_to_cf(ds, _history()), path)], overwrite)
    return path


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


def receptors_to_csv(ds: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write the receptor concentration series as CSV; return the path written.

    One row per output time: ``time`` as ISO 8601 with zone, then one column per receptor headed
    ``<name> (kg m-3)``. Written atomically like the NetCDF files. Raises InputError if the result
    has no receptors, or as :func:`write_results` does for the target.
    """
    path = Path(path)
    if "receptor_concentration" not in ds or ds.sizes.get("receptor", 0) == 0:
        raise InputError("result has no receptors; add receptors to the scenario to export them")
    check_target(path, overwrite)
    series = ds["receptor_concentration"].transpose("receptor", "time")
    units = series.attrs.get("units", "kg m-3")
    header = ["time"] + [f"{name} ({units})" for name in ds["receptor"].values]
    times = iso_times(ds["time"])
    with _temporary_names([path]) as (temp,):
        with open(temp, "w", newline="", encoding="utf-8") as handle:
            writer = csv.writer(handle)
            writer.writerow(header)
            values = series.values
            for i, stamp in enumerate(times):
                writer.writerow([stamp] + [repr(float(v)) for v in values[:, i]])
            handle.flush()
            os.fsync(handle.fileno())
        _place(temp, path, overwrite)
    _fsync_dir(path.parent)
    return path


# --------------------------------------------------------------------------------------------
# field store: the 3-D fields of a run while it goes on
# --------------------------------------------------------------------------------------------

#: Bytes of 3-D output fields (all output times together) a run keeps in memory by default; a run
#: whose fields would take more streams them to disk (:class:`DiskFields`), so its memory does not
#: grow with its length. 16 MiB keeps every short run in memory (a day of half-hourly 60 x 120
#: maps of concentration and counts takes 0.5 MiB) and is small beside the few hundred MB a run
#: needs for the compiled kernels, the flow window and the particles.
FIELD_MEMORY_BUDGET = 16 * 2**20
FieldMode = Literal["auto", "memory", "disk"]
FIELD_MODES: tuple[FieldMode, ...] = ("auto", "memory", "disk")
#: One lock for every access to the stores' files: the HDF5 library may not be thread-safe.
_STORE_LOCK = threading.RLock()


class MemoryFields:
    """The 3-D fields (time, y, x) of a run held as numpy arrays (small runs).

    shape : (output times, ny, nx); variables : name -> dtype.
    """

    on_disk = False

    def __init__(self, shape: tuple[int, ...], variables: Mapping[str, Any]) -> None:
        self.shape = tuple(int(n) for n in shape)
        self.variables = {name: np.dtype(dtype) for name, dtype in variables.items()}
        self.arrays = {name: np.zeros(self.shape, dtype) for name, dtype in self.variables.items()}

    @classmethod
    def from_arrays(cls, arrays: Mapping[str, np.ndarray]) -> MemoryFields:
        """The store holding ``arrays`` (name -> array of shape (time, y, x)) as they are;
        KeyError if ``concentration`` is not among them."""
        store = cls.__new__(cls)
        store.shape = tuple(arrays["concentration"].shape)
        store.variables = {name: a.dtype for name, a in arrays.items()}
        store.arrays = dict(arrays)
        return store

    def put(self, k: int, fields: Mapping[str, np.ndarray]) -> None:
        """Store the fields of output time ``k``."""
        for name, values in fields.items():
            self.arrays[name][k] = values

    def data(self, name: str) -> np.ndarray:
        """The whole variable ``name`` (time, y, x)."""
        return self.arrays[name]

    def discard(self) -> None:
        """Nothing to remove: the arrays go with the store."""


@dataclass
class _Segment:
    """A file of consecutive output times [first, stop) of a disk store."""

    path: Path
    first: int
    stop: int


class _OpenFiles:
    """The files a disk store has open: the segment being written and the one last read."""

    def __init__(self) -> None:
        self.writer: netCDF4.Dataset | None = None
        self.reader: netCDF4.Dataset | None = None
        self.reader_path: Path | None = None

    def read(self, path: Path) -> netCDF4.Dataset:
        if self.reader_path != path:
            self.close_reader()
            nc = netCDF4.Dataset(path, "r")
            nc.set_auto_maskandscale(False)
            for var in nc.variables.values():
                _one_chunk_cache(var)
            self.reader, self.reader_path = nc, path
        assert self.reader is not None
        return self.reader

    def close_reader(self) -> None:
        if self.reader is not None:
            self.reader.close()
        self.reader, self.reader_path = None, None

    def close(self) -> None:
        self.close_reader()
        if self.writer is not None:
            self.writer.close()
            self.writer = None


def _one_chunk_cache(var: netCDF4.Variable) -> None:
    """Give ``var`` an HDF5 chunk cache of one chunk: each chunk of a store is written or read
    once, as a whole. The default (64 MiB per variable) would fill with chunks never used again,
    and a cache of 0 bytes made the memory of the HDF5 library grow by some 100 MB over the first
    few hundred chunks (measured with HDF5 2.2, netCDF-C 4.10)."""
    chunk = var.chunking()
    assert isinstance(chunk, list)
    var.set_var_chunk_cache(size=math.prod(chunk) * var.dtype.itemsize)


def _remove_store(files: _OpenFiles, folder: Path) -> None:
    with _STORE_LOCK:
        files.close()
    shutil.rmtree(folder, ignore_errors=True)


class DiskFields:
    """The 3-D fields (time, y, x) of a run streamed to NetCDF4 files, one output time at a time.

    The fields go to *segment* files ``fields_<first output>.nc``, each holding consecutive output
    times, one output time per chunk, zlib-compressed. The segment being written is closed
    ("sealed") when a checkpoint is taken (:meth:`hand_over`), so every segment a checkpoint lists
    is a complete file that a later crash cannot damage (HDF5 files open for writing can be).
    :meth:`data` reads the stored variables lazily with dask, one chunk per output time, so the
    fields are never all in memory.

    The segments live in a private temporary folder under ``folder`` (default: the system's
    temporary folder, which ``TMPDIR`` sets), removed with everything in it by :meth:`discard`,
    when the store is garbage-collected (after the last Dataset reading it is dropped) and at
    interpreter exit. Segments handed to a checkpoint live in the checkpoint's folder instead and
    are removed with it (:func:`walkers.checkpoint.remove_checkpoint`).

    shape : (output times, ny, nx); variables : name -> dtype.
    """

    on_disk = True

    def __init__(
        self,
        shape: tuple[int, ...],
        variables: Mapping[str, Any],
        folder: str | os.PathLike | None = None,
    ) -> None:
        self.shape = tuple(int(n) for n in shape)
        self.variables = {name: np.dtype(dtype) for name, dtype in variables.items()}
        if folder is not None:
            check_folder(Path(folder), "field store folder")
        self.folder = Path(tempfile.mkdtemp(prefix="walkers-fields-", dir=folder))
        #: Sealed segments in time order; then the one being written, if any.
        self.segments: list[_Segment] = []
        self.writing: _Segment | None = None
        #: Output times stored so far (always the first ``count``).
        self.count = 0
        self._files = _OpenFiles()
        self._remove = weakref.finalize(self, _remove_store, self._files, self.folder)

    def put(self, k: int, fields: Mapping[str, np.ndarray]) -> None:
        """Append the fields of output time ``k`` (the next one: ``k == count``)."""
        if k != self.count:
            raise ValueError(f"field store: output {k} given when output {self.count} is next")
        with _STORE_LOCK:
            if self.writing is None:
                self._start_segment(k)
            assert self.writing is not None and self._files.writer is not None
            variables = self._files.writer.variables
            for name, values in fields.items():
                variables[name][k - self.writing.first] = values
            self.writing.stop = k + 1
        self.count = k + 1

    def _start_segment(self, first: int) -> None:
        path = self.folder / f"fields_{first:09d}.nc"
        nc = netCDF4.Dataset(path, "w", format="NETCDF4")
        nc.set_fill_off()
        nc.title = "walkers: temporary store of a run's fields (removed after the run)"
        nc.first_output = first
        _, ny, nx = self.shape
        nc.createDimension("time", None)
        nc.createDimension("y", ny)
        nc.createDimension("x", nx)
        for name, dtype in self.variables.items():
            # zlib level 1 without shuffle: the temporary store favours speed (a third less time
            # than with shuffle, for files 10 % larger); the final file is compressed harder
            var = nc.createVariable(
                name, dtype, ("time", "y", "x"), chunksizes=(1, ny, nx), zlib=True, complevel=1
            )
            _one_chunk_cache(var)
        self._files.writer = nc
        self.writing = _Segment(path, first, first)

    def seal(self) -> None:
        """Close the segment being written, so it is a complete file."""
        with _STORE_LOCK:
            if self._files.writer is not None:
                self._files.writer.close()
                self._files.writer = None
            if self.writing is not None:
                self.segments.append(self.writing)
                self.writing = None

    def hand_over(self, folder: Path) -> dict[str, Any]:
        """Seal, and place every segment in ``folder`` (a checkpoint's), flushed to disk.

        Segments in the store's own temporary folder are moved; segments of another checkpoint
        are copied (that checkpoint still lists them). Returns the record that
        :meth:`from_record` reads back: the shape, the variables' dtypes and, in time order, each
        segment's file name, first output, one past its last output, and size in bytes.
        """
        self.seal()
        folder.mkdir(exist_ok=True)
        with _STORE_LOCK:
            self._files.close_reader()
            for seg in self.segments:
                if seg.path.parent != folder:
                    target = folder / seg.path.name
                    _place_segment(seg.path, target, move=seg.path.parent == self.folder)
                    seg.path = target
        _fsync_dir(folder)
        return {
            "shape": list(self.shape),
            "variables": {name: dtype.str for name, dtype in self.variables.items()},
            "segments": [
                [s.path.name, s.first, s.stop, s.path.stat().st_size] for s in self.segments
            ],
        }

    @classmethod
    def from_record(
        cls, record: Mapping[str, Any], folder: Path, temporary: str | os.PathLike | None = None
    ) -> DiskFields:
        """The store a checkpoint describes (see :meth:`hand_over`), its segments in ``folder``;
        new segments go to a fresh temporary folder under ``temporary``.

        Raises InputError if a segment is missing or its size changed.
        """
        store = cls(tuple(record["shape"]), record["variables"], temporary)
        for name, first, stop, size in record["segments"]:
            path = folder / name
            if first != store.count or not path.is_file() or path.stat().st_size != size:
                store.discard()
                raise InputError(
                    f"checkpoint fields {str(path)!r}: missing or changed since the checkpoint "
                    "was saved; delete the checkpoint and run again without --resume"
                )
            store.segments.append(_Segment(path, int(first), int(stop)))
            store.count = int(stop)
        return store

    def data(self, name: str) -> dask.array.Array:
        """The stored variable ``name`` (time, y, x) as a lazy dask array, one chunk per output
        time, read from the segment files when computed. Seals the segment being written."""
        self.seal()
        _, ny, nx = self.shape
        dtype = self.variables[name]
        return dask.array.from_array(
            _StoredField(self, name),
            chunks=(1, ny, nx),
            name=f"walkers-field-{name}-{uuid.uuid4().hex}",
            meta=np.empty((0, 0, 0), dtype),
        )

    def read(self, name: str, key: tuple[slice, slice, slice]) -> np.ndarray:
        """Values of variable ``name`` at ``key`` (a slice per dimension, as dask asks)."""
        start, stop, step = key[0].indices(self.shape[0])
        blocks = [np.empty((0, *self.shape[1:]), self.variables[name])]
        with _STORE_LOCK:
            for seg in self.segments:
                lo, hi = max(start, seg.first), min(stop, seg.stop)
                if lo < hi:
                    var = self._files.read(seg.path).variables[name]
                    blocks.append(var[lo - seg.first : hi - seg.first])
        return np.concatenate(blocks)[::step, key[1], key[2]]

    def discard(self) -> None:
        """Close the files and remove the temporary folder with everything in it (segments
        handed to a checkpoint stay with it)."""
        self._remove()


class _StoredField:
    """One variable of a :class:`DiskFields` as the array-like that dask.array.from_array reads."""

    def __init__(self, store: DiskFields, name: str) -> None:
        self.store, self.name = store, name
        self.shape = store.shape
        self.dtype = store.variables[name]
        self.ndim = len(self.shape)

    def __getitem__(self, key: tuple[slice, slice, slice]) -> np.ndarray:
        return self.store.read(self.name, key)


def _place_segment(source: Path, target: Path, *, move: bool) -> None:
    """Give ``target`` the contents of ``source``, flushed to disk; remove ``source`` if
    ``move``. A rename where it can (same file system), else a copy to a temporary name and a
    rename, so ``target`` is never a partial file."""
    if move:
        try:
            os.replace(source, target)
        except OSError as exc:
            if exc.errno != errno.EXDEV:
                raise
        else:
            _fsync_file(target)
            return
    temp = target.with_name(f".{target.name}.part")
    try:
        shutil.copyfile(source, temp)
        _fsync_file(temp)
        os.replace(temp, target)
    finally:
        temp.unlink(missing_ok=True)
    if move:
        source.unlink()


def field_store(
    shape: tuple[int, ...],
    variables: Mapping[str, Any],
    mode: FieldMode = "auto",
    folder: str | os.PathLike | None = None,
) -> MemoryFields | DiskFields:
    """Where a run keeps its 3-D fields: in memory, or streamed to disk.

    shape : (output times, ny, nx); variables : name -> dtype.
    mode : ``"memory"``, ``"disk"``, or ``"auto"``: on disk when the fields of all output times
        would take more than :data:`FIELD_MEMORY_BUDGET` bytes (read when called).
    folder : where an on-disk store makes its temporary folder (default: the system's).
    """
    if mode not in FIELD_MODES:
        raise InputError(f"fields = {mode!r}: expected one of {', '.join(FIELD_MODES)}")
    nbytes = math.prod(shape) * sum(np.dtype(d).itemsize for d in variables.values())
    if mode == "disk" or (mode == "auto" and nbytes > FIELD_MEMORY_BUDGET):
        return DiskFields(shape, variables, folder)
    return MemoryFields(shape, variables)
