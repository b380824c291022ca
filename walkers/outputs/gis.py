"""GIS layers of a result: GeoJSON contours and receptors, GeoTIFF of the maximum concentration.

GeoJSON follows RFC 7946 (Butler et al. 2016, The GeoJSON Format): coordinates are WGS 84
longitude/latitude in that order, polygon rings are closed, exterior rings run counter-clockwise
and holes clockwise (§3.1.6). Features:

- of a run: the area where the maximum concentration over the run reaches each receptor
  threshold (``layer = "maximum concentration"``), one MultiPolygon per threshold;
- of an ensemble: the area where the probability of exceeding each threshold at some time of the
  run reaches 0.1, 0.5 and 0.9 (``layer = "window exceedance probability"``);
- the receptors as Points, with their radius and, for a run, their peak concentration.

Contours are traced on the output grid's cell centres with matplotlib's contour generator
(contourpy), so an edge lies between the centre of a cell above the level and one below it.
The GeoTIFF holds ``concentration_max`` in kg m-3 (SI, like the NetCDF) on the result's CRS,
north up; for a three-dimensional run with a depositing bed a second one holds the deposit on the
bed at the end of the run (kg m-2). Both are written to a temporary name and renamed when complete.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr
from contourpy import FillType, contour_generator

import walkers
from walkers.errors import InputError
from walkers.files import _fsync_dir, _place, _temporary_names, check_target
from walkers.outputs.display import ConcentrationUnit, concentration_unit, plain
from walkers.outputs.export import write_text
from walkers.outputs.mapping import cell_edges, crs_name, crs_wkt, is_geographic

#: Exceedance probabilities drawn as GeoJSON contours of an ensemble.
PROBABILITY_LEVELS = (0.1, 0.5, 0.9)


def _to_lonlat(ds: xr.Dataset):
    """A function (x, y) arrays → (lon, lat) arrays for the result's grid."""
    if is_geographic(ds):
        return lambda x, y: (np.asarray(x), np.asarray(y))
    wkt = crs_wkt(ds)
    if not wkt:
        raise InputError("result has no CRS (crs_wkt): cannot place its layers on WGS 84")
    from pyproj import CRS, Transformer

    tr = Transformer.from_crs(CRS.from_wkt(str(wkt)), CRS.from_epsg(4326), always_xy=True)
    return tr.transform


def signed_area(ring: np.ndarray) -> float:
    """Shoelace area of a ring (positive when counter-clockwise in x east, y north)."""
    x, y = ring[:, 0], ring[:, 1]
    return 0.5 * float(np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]))


def _ring(points: np.ndarray, counter_clockwise: bool) -> list[list[float]]:
    ring = np.asarray(points, dtype=np.float64)
    if not np.array_equal(ring[0], ring[-1]):
        ring = np.vstack([ring, ring[:1]])
    if (signed_area(ring) > 0) != counter_clockwise:
        ring = ring[::-1]
    return [[round(float(a), 7), round(float(b), 7)] for a, b in ring]


def level_polygons(
    ds: xr.Dataset, field: np.ndarray, level: float
) -> list[list[list[list[float]]]]:
    """Polygons (RFC 7946 rings in lon/lat) of the area where ``field`` >= ``level``."""
    z = np.where(np.isfinite(field), field, 0.0)
    if not (z >= level).any():
        return []
    # Pad with one ring of zeros so that areas touching the grid edge close along it.
    x, y = ds["x"].values, ds["y"].values
    xe, ye = cell_edges(x), cell_edges(y)
    xp = np.concatenate([[xe[0]], x, [xe[-1]]])
    yp = np.concatenate([[ye[0]], y, [ye[-1]]])
    zp = np.pad(z, 1)
    gen = contour_generator(xp, yp, zp, fill_type=FillType.OuterOffset)
    filled = gen.filled(level, np.inf)  # OuterOffset: (points, offsets) per polygon
    points: list[Any] = list(filled[0])
    offsets: list[Any] = list(filled[1])
    lonlat = _to_lonlat(ds)
    polygons = []
    for pts, offs in zip(points, offsets, strict=True):
        rings = []
        for k, (a, b) in enumerate(zip(offs[:-1], offs[1:], strict=True)):
            lon, lat = lonlat(pts[a:b, 0], pts[a:b, 1])
            rings.append(_ring(np.column_stack([lon, lat]), counter_clockwise=(k == 0)))
        polygons.append(rings)
    return polygons


def _feature(geometry: dict[str, Any], properties: dict[str, Any]) -> dict[str, Any]:
    return {"type": "Feature", "geometry": geometry, "properties": properties}


def _receptor_features(ds: xr.Dataset, units: str | None) -> list[dict[str, Any]]:
    if ds.sizes.get("receptor", 0) == 0 or "receptor_x" not in ds.coords:
        return []
    unit = concentration_unit(ds, units)
    lonlat = _to_lonlat(ds)
    lon, lat = lonlat(ds["receptor_x"].values, ds["receptor_y"].values)
    radii = ds["receptor_radius"].values if "receptor_radius" in ds.coords else np.zeros(lon.size)
    out = []
    for k, name in enumerate(ds["receptor"].values):
        props: dict[str, Any] = {
            "layer": "receptor",
            "name": str(name),
            "radius_m": float(radii[k]),
        }
        if "receptor_concentration" in ds and "member" not in ds.dims:
            peak = float(np.nanmax(ds["receptor_concentration"].values[k]))
            props["peak_concentration"] = float(plain(float(unit.value(peak))))
            props["unit"] = unit.name
        point = {"type": "Point", "coordinates": [round(float(lon[k]), 7), round(float(lat[k]), 7)]}
        out.append(_feature(point, props))
    return out


def _thresholds(ds: xr.Dataset) -> list[float]:
    """The distinct receptor thresholds of a run (kg m-3), ascending."""
    if "receptor_threshold" not in ds:
        return []
    values = np.asarray(ds["receptor_threshold"].values).ravel()
    return sorted({float(v) for v in values if np.isfinite(v) and v > 0})


def _area_feature(
    ds: xr.Dataset, field: np.ndarray, level: float, properties: dict[str, Any]
) -> list[dict[str, Any]]:
    """[the MultiPolygon feature of ``field`` >= ``level``], or [] where no cell reaches it."""
    polygons = level_polygons(ds, field, level)
    if not polygons:
        return []
    return [_feature({"type": "MultiPolygon", "coordinates": polygons}, properties)]


def _threshold_properties(
    layer: str, level: float, unit: ConcentrationUnit, **extra: Any
) -> dict[str, Any]:
    """A contour's properties: its layer and threshold in the display unit (plain number)."""
    return {
        "layer": layer,
        "threshold": float(plain(float(unit.value(level)))),
        "unit": unit.name,
        **extra,
    }


def result_features(ds: xr.Dataset, units: str | None = None) -> dict[str, Any]:
    """The GeoJSON FeatureCollection of a run or ensemble result (see the module text)."""
    unit = concentration_unit(ds, units)
    features = []
    if "member" in ds.dims:
        if "window_exceedance_probability" in ds:
            for i, level in enumerate(np.asarray(ds["threshold"].values, dtype=np.float64)):
                field = np.asarray(ds["window_exceedance_probability"].values[i])
                for p in PROBABILITY_LEVELS:
                    props = _threshold_properties(
                        "window exceedance probability", level, unit, probability=p
                    )
                    features += _area_feature(ds, field, p, props)
    else:
        cmax = np.asarray(ds["concentration_max"].values)
        for level in _thresholds(ds):
            props = _threshold_properties(
                "maximum concentration", level, unit, **{"threshold_kg_m-3": level}
            )
            features += _area_feature(ds, cmax, level, props)
    features += _receptor_features(ds, units)
    return {
        "type": "FeatureCollection",
        "name": str(ds.attrs.get("title") or "walkers result"),
        "source_crs": crs_name(ds),
        "caution": walkers.CAUTION,
        "features": features,
    }


def write_geojson(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    units: str | None = None,
    inputs: Iterable[str | os.PathLike] = (),
) -> Path:
    """Write :func:`result_features` as GeoJSON (RFC 7946), atomically, never onto one of
    ``inputs`` (the result read); return the path."""
    path = Path(path)
    check_target(path, overwrite, inputs)
    return write_text(path, json.dumps(result_features(ds, units)), overwrite=overwrite)


#: The variables a GeoTIFF may hold: name -> what its band is (a (time, y, x) variable is written
#: at its last output time).
GEOTIFF_LAYERS = {
    "concentration_max": "maximum concentration over the run",
    "deposit": "mass on the bed per bed area at the end of the run",
}


def write_geotiff(
    ds: xr.Dataset,
    path: str | os.PathLike,
    *,
    overwrite: bool = False,
    inputs: Iterable[str | os.PathLike] = (),
    variable: str = "concentration_max",
) -> Path:
    """Write ``variable`` as a north-up GeoTIFF on the result's CRS, in its SI units, never onto
    one of ``inputs`` (the result read): ``concentration_max`` (kg m-3), or ``deposit`` (kg m-2,
    a three-dimensional run's, at the last output time)."""
    try:
        import rasterio
        from rasterio.crs import CRS
        from rasterio.transform import from_origin
    except ImportError as exc:
        raise InputError(
            f"{path}: writing GeoTIFF needs rasterio; install it with pip install 'walkers[gis]'"
        ) from exc

    path = Path(path)
    if variable not in GEOTIFF_LAYERS:
        raise InputError(f"GeoTIFF of {variable!r}: expected one of {', '.join(GEOTIFF_LAYERS)}")
    if variable not in ds:
        kind = "runs only" if variable == "concentration_max" else "three-dimensional runs only"
        raise InputError(f"result has no {variable!r}: a GeoTIFF of it is written for {kind}")
    check_target(path, overwrite, inputs)
    x, y = ds["x"].values, ds["y"].values
    xe, ye = cell_edges(x), cell_edges(y)
    dx, dy = float(xe[1] - xe[0]), float(ye[1] - ye[0])
    field = ds[variable].isel(time=-1) if "time" in ds[variable].dims else ds[variable]
    data = np.asarray(field.values, dtype=np.float64)[::-1]  # north row first
    wkt = crs_wkt(ds)
    if not wkt and not is_geographic(ds):
        raise InputError("result has no CRS (crs_wkt): a GeoTIFF could not be placed on a map")
    profile = {
        "driver": "GTiff",
        "width": x.size,
        "height": y.size,
        "count": 1,
        "dtype": "float64",
        "crs": CRS.from_wkt(str(wkt)) if wkt else CRS.from_epsg(4326),
        "transform": from_origin(float(xe[0]), float(ye[-1]), dx, dy),
    }
    with _temporary_names([path]) as (temp,):
        with rasterio.open(temp, "w", **profile) as dst:
            dst.write(data, 1)
            dst.update_tags(
                units=str(ds[variable].attrs["units"]), long_name=GEOTIFF_LAYERS[variable]
            )
            dst.update_tags(caution=walkers.CAUTION)
        _place(temp, path, overwrite)
    _fsync_dir(path.parent)
    return path
