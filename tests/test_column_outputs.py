"""The water-column outputs in the result and its files: the accumulator called directly with
particles placed by hand (tests/column_fixture.py), the CF-1.8 file, GDAL, the on-disk store.

External references:
- CF Conventions 1.8 (Eaton et al. 2020), through the CF checker (cfchecker) with the tables in
  ../shared/cf-tables, as in tests/test_io.py;
- GDAL's netCDF driver (through rasterio): a north-up raster's geotransform (common practice).
"""

from __future__ import annotations

import sys
import warnings
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from walkers.outputs.reader import read_results
from walkers.outputs.writer import tracks_path, write_results
from walkers.run import reduce
from walkers.run.accumulate import _Accumulator

sys.path.insert(0, str(Path(__file__).parent))
from column_fixture import COLUMN, GRID, column_results  # noqa: E402
from test_io import cf_errors  # noqa: E402


@pytest.fixture(scope="module")
def result():
    return column_results()


def test_result_holds_the_column_variables_with_units(result):
    ds, _, _ = result
    expect = {
        "concentration_in_band": ("kg m-3", ("time", "band", "y", "x")),
        "deposit": ("kg m-2", ("time", "y", "x")),
        "receptor_profile": ("kg m-3", ("receptor", "height", "time")),
        "section_concentration": ("kg m-3", ("section_distance", "height", "time")),
        "section_depth": ("m", ("section_distance", "time")),
        "track_height_above_bed": ("m", ("trajectory", "time")),
        "budget_on_bed": ("kg", ("time",)),
    }
    for name, (units, dims) in expect.items():
        assert ds[name].attrs["units"] == units, name
        assert ds[name].dims == dims, name
    assert list(ds["band"].values) == [b.name for b in COLUMN.bands]


def test_whole_column_band_is_the_concentration_and_the_deposit_is_the_mass_on_the_bed(result):
    ds, _, _ = result
    whole = ds["concentration_in_band"].sel(band="whole_column")
    assert np.array_equal(whole.values, ds["concentration"].values)
    measure = reduce.cell_measure(GRID, False, 2)
    # the fixture's cloud lies inside the output grid: the deposit holds all the mass on the bed
    on_grid = (ds["deposit"].values * measure).sum(axis=(1, 2))
    assert on_grid == pytest.approx(ds["budget_on_bed"].values, rel=1e-12)
    assert np.all(np.diff(on_grid) > 0)
    budget = ds["budget_in_water"] + ds["budget_on_bed"] + ds["budget_outflow"].sum("edge")
    assert budget.values == pytest.approx(ds["budget_released"].values, rel=1e-12)


def test_tracks_have_heights_within_the_column(result):
    ds, _, _ = result
    z = ds["track_height_above_bed"].values
    seen = np.isfinite(ds["track_x"].values)
    assert np.array_equal(np.isfinite(z), seen)
    assert np.all((z[seen] >= 0) & (z[seen] <= 6.0))


def test_cf_checker_finds_no_error_in_a_three_dimensional_result(tmp_path, result):
    # CF Conventions 1.8 (Eaton et al. 2020) through the cfchecker
    ds, _, _ = result
    path = write_results(ds, tmp_path / "column.nc")
    for file in (path, tracks_path(path)):
        errors, report = cf_errors(file)
        assert errors == 0, report
    with netCDF4.Dataset(tracks_path(path)) as nc:
        z = nc["track_height_above_bed"]
        assert z.standard_name == "height_above_sea_floor" and z.positive == "up"


def test_cf_checker_twin_flags_a_bad_deposit_unit(tmp_path, result):
    ds, _, _ = result
    path = write_results(ds, tmp_path / "column.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc["deposit"].units = "kilograms per sandbank"
    errors, report = cf_errors(path)
    assert errors > 0, report


def test_file_round_trips_the_column_variables(tmp_path, result):
    ds, _, _ = result
    back = read_results(write_results(ds, tmp_path / "column.nc"))
    for name in ("concentration_in_band", "deposit", "receptor_profile", "section_concentration"):
        np.testing.assert_array_equal(back[name].values, ds[name].values)
    assert list(back["band"].values) == list(ds["band"].values)
    with netCDF4.Dataset(tmp_path / "column.nc") as nc:
        assert nc["concentration_in_band"].chunking() == [1, 1, GRID.ny, GRID.nx]


def test_gdal_reads_the_deposit_map_with_its_georeferencing(tmp_path, result):
    # GDAL north-up convention: origin at the top-left corner, negative cell height
    rasterio = pytest.importorskip("rasterio")
    ds, _, _ = result
    path = write_results(ds, tmp_path / "column.nc")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        src = rasterio.open(f'NETCDF:"{path}":deposit')
    with src:
        assert src.count == ds.sizes["time"]
        assert src.crs.to_epsg() == 32631
        assert src.transform.c == pytest.approx(GRID.x0 - GRID.dx / 2)
        assert src.transform.f == pytest.approx(GRID.y0 + (GRID.ny - 0.5) * GRID.dy)
        last = ds["deposit"].values[-1, ::-1]
        np.testing.assert_array_equal(src.read(ds.sizes["time"]), last)
        # twin: the first time's map is not the last one's
        assert not np.array_equal(src.read(1), last)


def test_fields_streamed_to_disk_give_the_same_result_and_file(tmp_path, result):
    ds, _, _ = result
    disk, acc, _ = column_results(fields="disk")
    try:
        assert acc.fields.on_disk
        for name in ("concentration_in_band", "deposit"):
            np.testing.assert_array_equal(disk[name].values, ds[name].values)
        back = read_results(write_results(disk, tmp_path / "disk.nc"), stream=True)
        np.testing.assert_array_equal(
            back["concentration_in_band"].values, ds["concentration_in_band"].values
        )
        back.close()
    finally:
        acc.fields.discard()


def test_checkpoint_arrays_give_back_the_same_column_series(result):
    ds, acc, flow = result
    for again in (
        _Accumulator.from_arrays(acc.arrays(), column=COLUMN),
        _Accumulator.from_arrays(acc.arrays()),  # a checkpoint read without the settings ...
    ):
        again.resume_column(COLUMN)  # ... given them by the resumed run
        assert again.column is not None
        for name, values in acc.column.arrays().items():
            np.testing.assert_array_equal(again.column.arrays()[name], values)
    depth_averaged = _Accumulator.from_arrays(acc.arrays())
    depth_averaged.resume_column(None)
    assert depth_averaged.column is None


def test_a_depth_averaged_result_gains_nothing():
    ds, _, _ = column_results(nt=2, column=None)
    for name in (
        "concentration_in_band",
        "deposit",
        "receptor_profile",
        "budget_on_bed",
        "band",
        "height",
    ):
        assert name not in ds.variables


def test_deposit_geotiff_reads_back_in_gdal_with_the_same_values_and_place(tmp_path, result):
    # GDAL north-up convention (common practice): row 0 is the northernmost row of cells
    rasterio = pytest.importorskip("rasterio")
    from walkers.outputs.gis import write_geotiff

    ds, _, _ = result
    path = write_geotiff(ds, tmp_path / "deposit.tif", variable="deposit")
    with rasterio.open(path) as src:
        assert src.crs.to_epsg() == 32631
        assert src.tags()["units"] == "kg m-2"
        np.testing.assert_array_equal(src.read(1)[::-1], ds["deposit"].values[-1])
        cx, cy = src.xy(0, 3)
        assert (cx, cy) == pytest.approx((float(ds.x[3]), float(ds.y[-1])))
        # twin: the map of the first output time differs from what was written
        assert not np.array_equal(src.read(1)[::-1], ds["deposit"].values[0])


def test_export_writes_the_deposit_geotiff_of_a_three_dimensional_result(tmp_path, result):
    pytest.importorskip("rasterio")
    from click.testing import CliRunner

    from walkers.cli import main

    ds, _, _ = result
    path = write_results(ds, tmp_path / "column.nc")
    out = CliRunner().invoke(main, ["export", str(path)])
    assert out.exit_code == 0, out.output
    assert (tmp_path / "column_deposit.tif").is_file()
    assert (tmp_path / "column_concentration_max.tif").is_file()
