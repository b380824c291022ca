"""GIS layers: GeoJSON (RFC 7946) contours and receptors, GeoTIFF of the maximum concentration.

External references: RFC 7946 (Butler et al. 2016, The GeoJSON Format) for the structure, WGS 84
lon/lat order and ring orientation, checked with a JSON schema (jsonschema); GDAL through
rasterio reads the GeoTIFF back; pyproj places the contours back on the grid's CRS.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import jsonschema
import numpy as np
import pytest
import rasterio
import xarray as xr
from pyproj import Transformer

from walkers.errors import InputError
from walkers.outputs.gis import result_features, signed_area, write_geojson, write_geotiff

sys.path.insert(0, str(Path(__file__).parent))
from results_fixture import gaussian_puff_results  # noqa: E402

_POSITION = {
    "type": "array",
    "minItems": 2,
    "maxItems": 3,
    "prefixItems": [
        {"type": "number", "minimum": -180, "maximum": 180},
        {"type": "number", "minimum": -90, "maximum": 90},
    ],
}
_RING = {"type": "array", "minItems": 4, "items": _POSITION}
#: The parts of RFC 7946 (§3.1.2, §3.1.7, §3.2, §3.3) our files use.
SCHEMA = {
    "type": "object",
    "required": ["type", "features"],
    "properties": {
        "type": {"const": "FeatureCollection"},
        "features": {
            "type": "array",
            "items": {
                "type": "object",
                "required": ["type", "geometry", "properties"],
                "properties": {
                    "type": {"const": "Feature"},
                    "properties": {"type": "object"},
                    "geometry": {
                        "oneOf": [
                            {
                                "type": "object",
                                "required": ["type", "coordinates"],
                                "properties": {
                                    "type": {"const": "Point"},
                                    "coordinates": _POSITION,
                                },
                            },
                            {
                                "type": "object",
                                "required": ["type", "coordinates"],
                                "properties": {
                                    "type": {"const": "MultiPolygon"},
                                    "coordinates": {
                                        "type": "array",
                                        "items": {"type": "array", "minItems": 1, "items": _RING},
                                    },
                                },
                            },
                        ]
                    },
                },
            },
        },
    },
}

SIGMA = 400.0  # m, spread of the test bump
PEAK = 1e-3  # kg m-3


def gaussian_bump(ds: xr.Dataset) -> np.ndarray:
    """C0 exp(-r²/2σ²) about the grid centre."""
    x, y = ds["x"].values, ds["y"].values
    xc, yc = x.mean(), y.mean()
    r2 = (x[None, :] - xc) ** 2 + (y[:, None] - yc) ** 2
    return PEAK * np.exp(-r2 / (2 * SIGMA**2))


@pytest.fixture(scope="module")
def bump_result():
    ds = gaussian_puff_results(nt=3, nx=80, ny=80)
    ds["concentration_max"] = (("y", "x"), gaussian_bump(ds), {"units": "kg m-3"})
    level = PEAK * np.exp(-2.0)  # the disc of radius 2σ
    ds["receptor_threshold"][:] = np.nan
    ds["receptor_threshold"][0, 0] = level
    return ds, level


def _check_rfc7946(collection: dict) -> None:
    jsonschema.validate(collection, SCHEMA)
    for feature in collection["features"]:
        if feature["geometry"]["type"] != "MultiPolygon":
            continue
        for polygon in feature["geometry"]["coordinates"]:
            for k, ring in enumerate(polygon):
                ring = np.asarray(ring)
                assert np.array_equal(ring[0], ring[-1])  # closed (§3.1.6)
                assert (signed_area(ring) > 0) == (k == 0)  # exterior ccw, holes cw (§3.1.6)


def _area_m2(ds: xr.Dataset, feature: dict) -> float:
    """Area (m²) of a MultiPolygon, back on the grid's CRS (exterior minus holes)."""
    to_grid = Transformer.from_crs("EPSG:4326", ds.attrs["crs_wkt"], always_xy=True)
    total = 0.0
    for polygon in feature["geometry"]["coordinates"]:
        for ring in polygon:
            ring = np.asarray(ring)
            x, y = to_grid.transform(ring[:, 0], ring[:, 1])
            total += signed_area(np.column_stack([x, y]))
    return total


def test_geojson_follows_rfc7946_and_holds_contours_and_receptors(bump_result, tmp_path):
    ds, _ = bump_result
    path = write_geojson(ds, tmp_path / "layers.geojson")
    collection = json.loads(path.read_text())
    _check_rfc7946(collection)
    layers = [f["properties"]["layer"] for f in collection["features"]]
    assert layers.count("maximum concentration") == 1 and layers.count("receptor") == 3
    contour = collection["features"][0]["properties"]
    assert contour["threshold"] == pytest.approx(0.135) and contour["unit"] == "mg/L"


def test_contour_area_matches_the_disc_of_a_gaussian(bump_result):
    """The area where C0 exp(-r²/2σ²) >= C0 e^-2 is the disc r <= 2σ, area 4πσ² (the level
    set of the Gaussian, common practice). Contours interpolate linearly between cell centres
    50 m apart; tolerance: the edge placed within a quarter cell all round, 2π (2σ) dx/4."""
    ds, level = bump_result
    feature = result_features(ds)["features"][0]
    expected = 4.0 * np.pi * SIGMA**2
    tolerance = 2.0 * np.pi * (2.0 * SIGMA) * 50.0 / 4.0
    assert abs(_area_m2(ds, feature) - expected) < tolerance
    # twin: the contour of twice the level (a disc of radius σ√(2(2 - ln 2))) fails the check
    ds2 = ds.copy()
    ds2["receptor_threshold"] = ds["receptor_threshold"] * 2.0
    wrong = result_features(ds2)["features"][0]
    assert abs(_area_m2(ds2, wrong) - expected) > tolerance


def test_an_area_touching_the_grid_edge_closes_along_it(tmp_path):
    ds = gaussian_puff_results(nt=3, nx=20, ny=20)
    ds["concentration_max"][:] = 1.0
    ds["receptor_threshold"][0, 0] = 0.5
    feature = result_features(ds)["features"][0]
    _check_rfc7946({"type": "FeatureCollection", "features": [feature]})
    # the whole grid: 20 × 20 cells of 50 m, traced from the outer edges (padding ring)
    assert _area_m2(ds, feature) == pytest.approx(1000.0 * 1000.0, rel=0.06)


def test_ensemble_layers_are_probability_contours(tmp_path):
    base = gaussian_puff_results(nt=3, nx=60, ny=60)
    probability = 0.95 * gaussian_bump(base) / PEAK
    ds = xr.Dataset(
        {
            "window_exceedance_probability": (("threshold", "y", "x"), probability[None]),
            "concentration_mean": (("y", "x"), np.zeros_like(probability)),
        },
        coords={"x": base.x, "y": base.y, "threshold": ("threshold", [1e-5]), "member": [0, 1]},
        attrs={"crs_wkt": base.attrs["crs_wkt"], "scenario": ""},
    )
    collection = json.loads(write_geojson(ds, tmp_path / "ens.geojson").read_text())
    _check_rfc7946(collection)
    probs = [f["properties"]["probability"] for f in collection["features"]]
    assert probs == [0.1, 0.5, 0.9]
    areas = [_area_m2(ds, f) for f in collection["features"]]
    assert areas[0] > areas[1] > areas[2] > 0
    # P = 0.95 exp(-r²/2σ²) >= p on the disc r² = 2σ² ln(0.95/p) (as in the test above)
    expected = 2 * np.pi * SIGMA**2 * np.log(0.95 / 0.5)
    tolerance = 2 * np.pi * np.sqrt(2 * SIGMA**2 * np.log(0.95 / 0.5)) * 50.0 / 4.0
    assert abs(areas[1] - expected) < tolerance


def test_geotiff_reads_back_in_gdal_with_the_same_values_and_place(bump_result, tmp_path):
    ds, _ = bump_result
    path = write_geotiff(ds, tmp_path / "max.tif")
    with rasterio.open(path) as src:
        data = src.read(1)
        assert src.crs.to_epsg() == 32631
        assert src.tags()["units"] == "kg m-3"
        np.testing.assert_array_equal(data[::-1], ds["concentration_max"].values)
        # the centre of cell (row 0 from the north, column 3) is at (x[3], y[-1])
        cx, cy = src.xy(0, 3)
        assert (cx, cy) == pytest.approx((float(ds.x[3]), float(ds.y[-1])))
    with pytest.raises(InputError, match="exists; pass --overwrite"):
        write_geotiff(ds, path)


def test_geotiff_needs_a_run_result():
    ds = gaussian_puff_results(nt=3).drop_vars("concentration_max")
    with pytest.raises(InputError, match="concentration_max"):
        write_geotiff(ds, "unused.tif")
