"""CF-1.8 NetCDF output: conventions, GIS georeferencing, atomic writing, CSV export.

External references:
- CF Conventions 1.8 (Eaton et al. 2020, "NetCDF Climate and Forecast (CF) Metadata Conventions",
  version 1.8), checked by the CF checker (``cfchecker`` 4.1, NCAS-CMS) with the CF tables in
  ../shared/cf-tables (standard name table v83, area type table v13, region list v5).
- GDAL's netCDF driver (through rasterio) as the GIS reader: its geotransform is
  (x origin, cell width, 0, y origin, 0, -cell height) of a north-up raster (GDAL data model
  documentation, common practice).
"""

from __future__ import annotations

import csv
import datetime as dt
import re
import shutil
import subprocess
import sys
import warnings
import xml.etree.ElementTree as ET
from pathlib import Path

import netCDF4
import numpy as np
import pytest
import xarray as xr

import walkers
import walkers.files
import walkers.outputs.writer as wio
from walkers.errors import InputError, RunFailure
from walkers.fields.times import iso_times
from walkers.outputs.export import receptors_to_csv
from walkers.outputs.reader import read_results
from walkers.outputs.writer import tracks_path, write_results, write_tracks

sys.path.insert(0, str(Path(__file__).parent))
from results_fixture import gaussian_puff_results  # noqa: E402

CF_TABLES = Path(__file__).resolve().parents[2] / "shared" / "cf-tables"
CFCHECKS = shutil.which("cfchecks")


# --------------------------------------------------------------------------------------------
# CF checker
# --------------------------------------------------------------------------------------------


def cf_errors(path: Path) -> tuple[int, str]:
    """Run the CF checker offline with the shared tables; return (errors, full report)."""
    if not CF_TABLES.is_dir():
        pytest.skip(f"CF tables not found at {CF_TABLES} (a checkout without ../shared)")
    if CFCHECKS is None:
        pytest.skip("the cfchecks command (pip package cfchecker) is not installed")
    result = subprocess.run(
        [
            CFCHECKS,
            "-v",
            "auto",
            "-s",
            str(CF_TABLES / "cf-standard-name-table.xml"),
            "-a",
            str(CF_TABLES / "area-type-table.xml"),
            "-r",
            str(CF_TABLES / "standardized-region-list.xml"),
            str(path),
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    report = result.stdout + result.stderr
    match = re.search(r"ERRORS detected:\s*(\d+)", report)
    assert match, f"no error summary in the CF checker's report:\n{report}"
    return int(match.group(1)), report


@pytest.mark.parametrize(
    "kwargs",
    [
        {"tracks": 4},
        {"geographic": True, "tracks": 2},
        {"crs": None, "receptors": False, "land": False},
    ],
    ids=["projected-with-tracks", "geographic", "no-crs-no-receptors"],
)
def test_cf_checker_finds_no_error_in_results_and_tracks(tmp_path, kwargs):
    # CF Conventions 1.8 (Eaton et al. 2020) through the cfchecker
    path = write_results(gaussian_puff_results(**kwargs), tmp_path / "run.nc")
    files = [path] + ([tracks_path(path)] if kwargs.get("tracks") else [])
    for file in files:
        errors, report = cf_errors(file)
        assert errors == 0, report
        assert "Checking against CF Version CF-1.8" in report


def test_cf_checker_twin_flags_a_bad_units_string(tmp_path):
    # twin: the same check must fail on a file that breaks CF §3.1 (units must be UDUNITS-parsable)
    path = write_results(gaussian_puff_results(), tmp_path / "run.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc["concentration"].units = "kilograms per bathtub"
    errors, report = cf_errors(path)
    assert errors > 0, report


def test_cf_checker_twin_flags_an_unknown_standard_name(tmp_path):
    path = write_results(gaussian_puff_results(), tmp_path / "run.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc["concentration"].standard_name = "mass_concentration_of_invented_tracer_in_canal_water"
    errors, report = cf_errors(path)
    assert errors > 0, report


def test_standard_names_used_are_in_the_cf_table(tmp_path):
    if not CF_TABLES.is_dir():
        pytest.skip(f"CF tables not found at {CF_TABLES} (a checkout without ../shared)")
    table = ET.parse(CF_TABLES / "cf-standard-name-table.xml").getroot()
    known = {entry.get("id") for entry in table.iter("entry")}
    path = write_results(gaussian_puff_results(tracks=2), tmp_path / "run.nc")
    for file in (path, tracks_path(path)):
        with netCDF4.Dataset(file) as nc:
            used = {
                v.getncattr("standard_name")
                for v in nc.variables.values()
                if "standard_name" in v.ncattrs()
            }
        assert used and used <= known, used - known


# --------------------------------------------------------------------------------------------
# structure of the file
# --------------------------------------------------------------------------------------------


def test_every_variable_has_units_and_long_name_and_gridded_ones_a_grid_mapping(tmp_path):
    path = write_results(gaussian_puff_results(), tmp_path / "run.nc")
    with netCDF4.Dataset(path) as nc:
        for name, var in nc.variables.items():
            attrs = set(var.ncattrs())
            assert "long_name" in attrs, name
            if var.dtype != "S1" and name != "crs":
                assert "units" in attrs, name
            if {"y", "x"} <= set(var.dimensions):
                assert var.getncattr("grid_mapping") == "crs", name
        crs = nc["crs"]
        assert crs.grid_mapping_name == "transverse_mercator"
        assert "UTM zone 31N" in crs.crs_wkt
        for name in ("budget_released", "budget_in_water", "budget_decayed", "budget_held_dry"):
            assert nc[name].units == "kg"
        assert nc["budget_outflow"].units == "kg"
        assert nc["receptor_name"].cf_role == "timeseries_id"
        assert nc.featureType == "timeSeries"
        assert nc.Conventions == "CF-1.8"
        assert "tracks_file" not in nc.ncattrs()  # this run sampled no tracks


def test_global_attributes_carry_provenance_and_caution(tmp_path):
    ds = gaussian_puff_results()
    before = dt.datetime.now(dt.UTC).replace(microsecond=0)
    path = write_results(ds, tmp_path / "run.nc")
    with netCDF4.Dataset(path) as nc:
        stamp, _, rest = nc.history.partition(" ")
        assert before <= dt.datetime.fromisoformat(stamp) <= dt.datetime.now(dt.UTC)
        assert rest.endswith(f"walkers {walkers.__version__}")
        assert nc.walkers_version == walkers.__version__
        assert int(nc.seed) == ds.attrs["seed"]
        assert nc.scenario == ds.attrs["scenario"]
        assert nc.caution == walkers.CAUTION
        assert nc.source == ds.attrs["source"]
        assert "institution" not in nc.ncattrs()


def test_fields_are_compressed_with_one_time_step_per_chunk(tmp_path):
    ds = gaussian_puff_results()
    path = write_results(ds, tmp_path / "run.nc")
    with netCDF4.Dataset(path) as nc:
        assert nc.data_model == "NETCDF4"
        for name in ("concentration", "particle_count"):
            assert nc[name].chunking() == [1, ds.sizes["y"], ds.sizes["x"]]
            assert nc[name].filters()["zlib"]
        assert nc["receptor_concentration"].filters()["zlib"]


def test_tracks_file_is_a_cf_trajectory(tmp_path):
    ds = gaussian_puff_results(tracks=5)
    main = write_results(ds, tmp_path / "run.nc")
    with netCDF4.Dataset(main) as nc:
        assert nc.tracks_file == "run_tracks.nc" and "track_x" not in nc.variables
    path = write_tracks(ds, tmp_path / "only_tracks.nc")
    with netCDF4.Dataset(path) as nc:
        assert nc.featureType == "trajectory"
        assert nc["trajectory_id"].cf_role == "trajectory_id"
        np.testing.assert_array_equal(nc["track_x"][:], ds["track_x"].values)
    with pytest.raises(InputError, match="no sampled tracks"):
        write_tracks(gaussian_puff_results(), tmp_path / "none.nc")


def test_read_results_round_trips_values_labels_and_times(tmp_path):
    ds = gaussian_puff_results()
    back = read_results(write_results(ds, tmp_path / "run.nc"))
    for name in ("concentration", "particle_count", "receptor_concentration", "budget_outflow"):
        np.testing.assert_array_equal(back[name].values, ds[name].values)
    assert list(back["receptor"].values) == list(ds["receptor"].values)
    assert list(back["edge"].values) == list(ds["edge"].values)
    # reference 06:00 at +02:00 is 04:00 UTC; decoded times are UTC (CF §4.4)
    expected = np.datetime64("2024-05-14T04:00:00") + (ds["time"].values * 1e9).astype(
        "timedelta64[ns]"
    )
    np.testing.assert_array_equal(back["time"].values, expected)


def test_a_file_read_back_can_be_written_again_unchanged(tmp_path):
    back = read_results(write_results(gaussian_puff_results(), tmp_path / "a.nc"))
    again = write_results(back, tmp_path / "b.nc")
    with netCDF4.Dataset(again) as nc:
        assert nc["time"].units == "seconds since 2024-05-14T06:00:00+02:00"
    assert read_results(again).equals(back)
    errors, report = cf_errors(again)
    assert errors == 0, report


def test_a_run_without_receptors_in_its_receptor_dimension_is_not_a_time_series(tmp_path):
    ds = gaussian_puff_results().isel(receptor=slice(0, 0))
    path = write_results(ds, tmp_path / "run.nc")
    with netCDF4.Dataset(path) as nc:
        assert "featureType" not in nc.ncattrs()
    assert read_results(path).sizes["receptor"] == 0
    errors, report = cf_errors(path)
    assert errors == 0, report


def test_iso_times_keep_the_zone_of_the_reference():
    ds = gaussian_puff_results(nt=3)
    assert iso_times(ds["time"]) == [
        "2024-05-14T06:00:00+02:00",
        "2024-05-14T07:30:00+02:00",
        "2024-05-14T09:00:00+02:00",
    ]


# --------------------------------------------------------------------------------------------
# GDAL through rasterio
# --------------------------------------------------------------------------------------------


def _gdal_open(path: Path, variable: str):
    rasterio = pytest.importorskip("rasterio")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # GDAL notes on non-georeferenced helper variables
        return rasterio.open(f'NETCDF:"{path}":{variable}')


def test_gdal_reads_the_same_georeferencing_and_values(tmp_path):
    # GDAL north-up convention: origin at the top-left cell corner, negative cell height; a
    # south-up (ascending y) netCDF grid is flipped on reading (GDAL netCDF driver, common practice)
    ds = gaussian_puff_results()
    path = write_results(ds, tmp_path / "run.nc")
    x, y = ds["x"].values, ds["y"].values
    dx, dy = x[1] - x[0], y[1] - y[0]
    with _gdal_open(path, "concentration_max") as src:
        t = src.transform
        assert (src.width, src.height) == (ds.sizes["x"], ds.sizes["y"])
        assert t.a == pytest.approx(dx) and t.e == pytest.approx(-dy)
        assert t.c == pytest.approx(x[0] - dx / 2) and t.f == pytest.approx(y[-1] + dy / 2)
        assert src.crs.to_epsg() == 32631
        np.testing.assert_array_equal(src.read(1), ds["concentration_max"].values[::-1])
    with _gdal_open(path, "concentration") as src:
        assert src.count == ds.sizes["time"]
        np.testing.assert_array_equal(src.read(4), ds["concentration"].values[3, ::-1])


def test_gdal_reads_geographic_grids_as_wgs84(tmp_path):
    ds = gaussian_puff_results(geographic=True)
    path = write_results(ds, tmp_path / "geo.nc")
    with _gdal_open(path, "concentration_max") as src:
        assert src.crs.to_epsg() == 4326
        assert src.transform.c == pytest.approx(ds["x"].values[0] - (ds.x[1] - ds.x[0]) / 2)


def test_gdal_twin_sees_a_shifted_grid(tmp_path):
    # twin: the comparison must notice a grid moved by 100 m east
    ds = gaussian_puff_results()
    shifted = ds.assign_coords(x=("x", ds["x"].values + 100.0, ds["x"].attrs))
    with (
        _gdal_open(write_results(ds, tmp_path / "a.nc"), "concentration_max") as a,
        _gdal_open(write_results(shifted, tmp_path / "b.nc"), "concentration_max") as b,
    ):
        assert b.transform.c - a.transform.c == pytest.approx(100.0)
        assert a.transform != b.transform


# --------------------------------------------------------------------------------------------
# atomic writing
# --------------------------------------------------------------------------------------------


def test_existing_file_is_kept_without_overwrite(tmp_path):
    path = tmp_path / "run.nc"
    path.write_bytes(b"earlier results")
    with pytest.raises(InputError, match="exists; pass --overwrite or choose another name"):
        write_results(gaussian_puff_results(), path)
    assert path.read_bytes() == b"earlier results"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.nc"]


def test_existing_file_is_replaced_with_overwrite(tmp_path):
    path = tmp_path / "run.nc"
    path.write_bytes(b"earlier results")
    write_results(gaussian_puff_results(), path, overwrite=True)
    assert read_results(path)["concentration"].shape[0] == 7
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.nc"]


def test_existing_tracks_file_blocks_the_main_file_too(tmp_path):
    path = tmp_path / "run.nc"
    tracks_path(path).write_bytes(b"old tracks")
    with pytest.raises(InputError, match="run_tracks.nc"):
        write_results(gaussian_puff_results(tracks=2), path)
    assert not path.exists()


def test_failure_mid_write_leaves_no_final_and_no_temporary_file(tmp_path, monkeypatch):
    original = xr.Dataset.to_netcdf

    def write_then_fail(self, target, *args, **kwargs):
        original(self, target, *args, **kwargs)  # the temporary file now exists, complete
        raise OSError(28, "No space left on device (injected)")

    monkeypatch.setattr(xr.Dataset, "to_netcdf", write_then_fail)
    with pytest.raises(RunFailure, match="the disk is full .*injected"):
        write_results(gaussian_puff_results(), tmp_path / "run.nc")
    assert list(tmp_path.iterdir()) == []


def test_failure_after_the_first_file_is_placed_removes_both(tmp_path, monkeypatch):
    original = wio._place
    calls = []

    def place_then_fail(temp, final, overwrite):
        calls.append(final)
        if len(calls) == 2:
            raise OSError(5, "Input/output error (injected)")
        original(temp, final, overwrite)

    monkeypatch.setattr(wio, "_place", place_then_fail)
    with pytest.raises(OSError, match="injected"):
        write_results(gaussian_puff_results(tracks=2), tmp_path / "run.nc")
    assert len(calls) == 2
    assert list(tmp_path.iterdir()) == []


def test_missing_output_directory_is_named(tmp_path):
    missing = tmp_path / "no_such_folder"
    with pytest.raises(InputError, match="no_such_folder.*does not exist"):
        write_results(gaussian_puff_results(), missing / "run.nc")


def test_unwritable_output_directory_is_named(tmp_path, monkeypatch):
    # permissions do not bind root, so the refusal the operating system would give is simulated
    locked = tmp_path / "locked"
    locked.mkdir()
    monkeypatch.setattr(walkers.files.os, "access", lambda path, mode: Path(path) != locked)
    with pytest.raises(InputError, match="locked.*not writable"):
        write_results(gaussian_puff_results(), locked / "run.nc")
    assert list(locked.iterdir()) == []


def test_read_results_of_a_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_results(tmp_path / "absent.nc")


# --------------------------------------------------------------------------------------------
# CSV export of the receptor series
# --------------------------------------------------------------------------------------------


def test_receptors_csv_has_utc_times_hours_from_the_start_and_the_display_unit(tmp_path):
    ds = gaussian_puff_results()  # first output 2024-05-14T06:00+02:00
    path = receptors_to_csv(ds, tmp_path / "receptors.csv")
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    assert rows[0] == [
        "time (UTC)",
        "hours since run start",
        "intake A (mg/L)",
        "beach B (mg/L)",
        "bed C (mg/L)",
    ]
    assert rows[1][:2] == ["2024-05-14T04:00:00Z", "0"]
    assert rows[-1][:2] == ["2024-05-14T07:00:00Z", "3"]
    assert not any("e" in v for row in rows[1:] for v in row[1:])  # plain numbers
    table = np.array([[float(v) for v in row[2:]] for row in rows[1:]])
    np.testing.assert_array_equal(table, ds["receptor_concentration"].values.T * 1e3)
    with pytest.raises(InputError, match="exists"):
        receptors_to_csv(ds, path)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["receptors.csv"]


def test_receptors_csv_from_a_read_file_gives_the_same_utc_times(tmp_path):
    back = read_results(write_results(gaussian_puff_results(), tmp_path / "run.nc"))
    path = receptors_to_csv(back, tmp_path / "receptors.csv", units="ug/L")
    with open(path, encoding="utf-8") as handle:
        assert "intake A (ug/L)" in handle.readline()
        assert handle.readline().startswith("2024-05-14T04:00:00Z,0,")


def test_receptors_csv_without_receptors_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="no receptors"):
        receptors_to_csv(gaussian_puff_results(receptors=False), tmp_path / "r.csv")


def test_a_real_small_run_passes_the_cf_checker_and_gdal(tmp_path):
    simulate = pytest.importorskip("walkers.run.simulate").simulate
    from walkers.fields.analytic import analytic_flow
    from walkers.scenario.config import Dispersion, OutputGrid, Receptor, Release, Transport

    flow = analytic_flow(
        "uniform", u=0.3, x_range=(-2000, 2000), y_range=(-1000, 1000), nx=21, ny=11
    )
    ds = simulate(
        flow,
        Transport(dt=120.0, dispersion=Dispersion(2.0, 2.0), decay_rate=1e-5),
        [Release("point", np.array([[-1500.0, 0.0]]), 500, mass=100.0)],
        start=0.0,
        end=7200.0,
        output_interval=1800.0,
        output_grid=OutputGrid(x0=-1950.0, dx=100.0, nx=40, y0=-950.0, dy=100.0, ny=20),
        receptors=[Receptor("intake", 0.0, 0.0, thresholds=(1e-4,))],
        seed=3,
        tracks=3,
        stepper="reference",
    )
    path = write_results(ds, tmp_path / "run.nc")
    for file in (path, tracks_path(path)):
        errors, report = cf_errors(file)
        assert errors == 0, report
    with _gdal_open(path, "concentration") as src:
        assert src.transform.c == pytest.approx(-2000.0) and src.transform.f == pytest.approx(
            1000.0
        )
        np.testing.assert_array_equal(src.read(3), ds["concentration"].values[2, ::-1])
