"""Reading flow fields from NetCDF: every layout gives the same physical flow; bad input is named.

External references used here:
- scipy.interpolate.RegularGridInterpolator (bilinear interpolation) as the reference interpolator.
- pyproj/PROJ geodesics: Karney, C. F. F. (2013), "Algorithms for geodesics", J. Geodesy 87,
  43-55 (Geod.inv distances and Geod.polygon_area_perimeter areas on the WGS84 ellipsoid).
- pyproj CRS (PROJ database) for EPSG codes and CF grid-mapping attributes.
- CF Conventions 1.8 for the layouts, calendars and flags written by tests/flowfiles.py.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import netCDF4
import numpy as np
import pytest
from pyproj import CRS, Geod
from scipy.interpolate import RegularGridInterpolator

from walkers.errors import InputError
from walkers.fields import geo
from walkers.fields.netcdf.open import open_flow
from walkers.fields.scenario_flow import check_points_in_water
from walkers.fields.times import check_time_window, flow_time_iso, to_flow_seconds

sys.path.insert(0, str(Path(__file__).parent))
import flowfiles as ff  # noqa: E402

# sample points (m) inside the outer cell centres, whose bilinear stencils touch no land
RNG = np.random.default_rng(20260301)
PX = RNG.uniform(500.0, 2500.0, 200)
PY = RNG.uniform(200.0, 1200.0, 200)
# (island cells and, on the staggered grid, the closed faces around them)
_NEAR_ISLAND = (PX > 1200.0) & (PX < 1800.0) & (PY > 400.0) & (PY < 1000.0)
PX, PY = PX[~_NEAR_ISLAND], PY[~_NEAR_ISLAND]


def _interp(var_x, var_y, frame, x, y):
    """Reference bilinear interpolation (scipy) of one frame at points (x, y)."""
    f = RegularGridInterpolator((var_y, var_x), frame, method="linear")
    return f(np.column_stack([y, x]))


def _sample(flow, t):
    """u, v (m s-1) of ``flow`` at the sample points at frame time t (s)."""
    w = flow.window(t, t)
    k = int(np.argmin(np.abs(w.times - t)))
    u = _interp(flow.u.x, flow.u.y, w.u[min(k, w.u.shape[0] - 1)], PX, PY)
    v = _interp(flow.v.x, flow.v.y, w.v[min(k, w.v.shape[0] - 1)], PX, PY)
    return u, v


LAYOUTS = {
    "projected": {},
    "reversed_axes_descending_y": {"order": ("time", "x", "y"), "y_descending": True},
    "descending_x": {"x_descending": True, "order": ("y", "time", "x")},
    "staggered": {"staggered": True},
    "staggered_reversed": {"staggered": True, "order": ("time", "x", "y"), "x_descending": True},
    "cm_per_s": {"velocity_units": "cm s-1", "velocity_scale": 100.0},
    "cm_slash_s": {"velocity_units": "cm/s", "velocity_scale": 100.0},
    "grid_mapping_params": {"grid_mapping_params": True},
    "calendar_360_day": {
        "calendar": "360_day",
        "time_units": "hours since 2026-03-01 00:00:00",
        "time_values": ff.TIMES / 3600.0,
    },
}


@pytest.mark.parametrize("name", list(LAYOUTS))
def test_each_layout_gives_the_same_velocity_at_the_same_points(tmp_path, name):
    path = ff.write_flow(tmp_path / f"{name}.nc", land=ff.island, mask=True, **LAYOUTS[name])
    flow = open_flow(path)
    for t in (0.0, 7200.0):
        u, v = _sample(flow, t)
        u_true, v_true = ff.velocity(PX, PY, t)
        # the test flow is bilinear, so bilinear interpolation is exact up to round-off
        np.testing.assert_allclose(u, u_true, rtol=0, atol=1e-12)
        np.testing.assert_allclose(v, v_true, rtol=0, atol=1e-12)
    np.testing.assert_allclose(flow.times, ff.TIMES)
    np.testing.assert_array_equal(flow.x, ff.X)
    np.testing.assert_array_equal(flow.y, ff.Y)
    wet = flow.window(0.0, 0.0).wet[0]
    Xc, Yc = np.meshgrid(ff.X, ff.Y)
    np.testing.assert_array_equal(wet, (~ff.island(Xc, Yc)).astype(np.uint8))
    assert CRS.from_wkt(flow.crs_wkt).to_epsg() == 32633


def test_collocated_layouts_hand_out_identical_arrays(tmp_path):
    a = open_flow(ff.write_flow(tmp_path / "a.nc", land=ff.island))
    b = open_flow(
        ff.write_flow(
            tmp_path / "b.nc",
            land=ff.island,
            order=("time", "x", "y"),
            y_descending=True,
            x_descending=True,
        )
    )
    wa, wb = a.window(0.0, 14400.0), b.window(0.0, 14400.0)
    for name in ("u", "v", "depth", "wet", "times"):
        np.testing.assert_array_equal(getattr(wa, name), getattr(wb, name))
    assert wa.u.flags.c_contiguous and wa.u.dtype == np.float64


def test_land_velocity_is_zero_and_depth_zero_on_land(tmp_path):
    flow = open_flow(ff.write_flow(tmp_path / "a.nc", land=ff.island))
    w = flow.window(0.0, 0.0)
    land = w.wet[0] == 0
    assert land.sum() == 9  # 3 x 3 cells of the island
    assert np.all(w.u[0][land] == 0) and np.all(w.depth[0][land] == 0)
    assert np.all(np.isfinite(w.u)) and np.all(np.isfinite(w.v))


def test_frames_are_read_only_when_a_window_asks(tmp_path):
    times = np.arange(48) * 600.0
    flow = open_flow(ff.write_flow(tmp_path / "long.nc", times=times))
    after_open = flow.u.data.frames_read
    assert after_open <= 1  # the first frame is checked at the door
    w = flow.window(20 * 600.0 + 1.0, 21 * 600.0 - 1.0)
    assert w.u.shape[0] == 2
    assert flow.u.data.frames_read - after_open == 2  # u, v, depth, wet of a window: one read
    assert flow.u.data.frames_read < times.size
    # a frame of the window just read is taken from it, unread, and is the frame a fresh read
    # gives
    before = flow.u.data.frames_read
    u_21 = flow.u.frames(21, 21)
    assert flow.u.data.frames_read == before
    fresh = open_flow(ff.write_flow(tmp_path / "again.nc", times=times))
    np.testing.assert_array_equal(u_21, fresh.u.frames(21, 21))
    np.testing.assert_array_equal(flow.v.frames(20, 20), fresh.v.frames(20, 20))
    # a frame outside it is read
    flow.u.frames(30, 30)
    assert flow.u.data.frames_read == before + 1


def test_a_flow_that_fits_is_read_once_over_the_passes_of_a_run(tmp_path, monkeypatch):
    """A run passes over its flow frame by frame (the dispersion estimate reads the speed, the
    ever-wet cells the wet mask) and then window by window (the step): frames kept from the
    first pass serve the others, and windows put together from single frames equal windows read
    fresh. A flow that does not fit still reads a frame once in the step's pass: the frame a
    window shares with the one before is kept."""
    from walkers.fields.netcdf import frames

    times = np.arange(12) * 600.0
    path = ff.write_flow(tmp_path / "passes.nc", times=times, land=ff.island)

    def three_passes():
        flow = open_flow(path)
        for k in range(times.size):
            flow.u.frames(k, k)
        for k in range(times.size):
            flow.v.frames(k, k)
        windows = [flow.window(t + 1.0, t + 599.0) for t in times[:-1]]
        return flow.u.data.frames_read, windows

    # each window from a flow opened for it alone: read at once (after the first, whose frame 0
    # the opening has read)
    truth = [open_flow(path).window(t + 1.0, t + 599.0) for t in times[:-1]]
    read, windows = three_passes()
    assert read == times.size
    monkeypatch.setattr(frames, "KEPT_BYTES", 0)  # the twin: only the newest blocks kept
    read_again, fresh = three_passes()
    assert read_again > 2 * times.size
    for kept, new, true in zip(windows, fresh, truth, strict=True):
        for name in ("u", "v", "depth", "wet", "times"):
            np.testing.assert_array_equal(getattr(kept, name), getattr(true, name))
            np.testing.assert_array_equal(getattr(new, name), getattr(true, name))
    # a flow too large to keep: each window reads only the frame the window before lacks
    flow = open_flow(path)
    stepped = [flow.window(t + 1.0, t + 599.0) for t in times[:-1]]
    assert flow.u.data.frames_read == times.size
    for a, b in zip(stepped, truth, strict=True):
        for name in ("u", "v", "depth", "wet", "times"):
            np.testing.assert_array_equal(getattr(a, name), getattr(b, name))


def test_several_files_along_time_join_like_one(tmp_path):
    whole = open_flow(ff.write_flow(tmp_path / "whole.nc", times=np.arange(9) * 1800.0))
    parts = [
        ff.write_flow(tmp_path / f"part{i}.nc", times=np.arange(3 * i, 3 * i + 3) * 1800.0)
        for i in range(3)
    ]
    joined = open_flow([parts[2], parts[0], parts[1]])  # any order: sorted by first frame
    np.testing.assert_array_equal(joined.times, whole.times)
    wj, ww = joined.window(1800.0, 12600.0), whole.window(1800.0, 12600.0)
    np.testing.assert_array_equal(wj.u, ww.u)
    np.testing.assert_array_equal(wj.v, ww.v)
    assert joined.attrs["files"] == [str(parts[2]), str(parts[0]), str(parts[1])]


def test_files_that_overlap_in_time_are_refused(tmp_path):
    a = ff.write_flow(tmp_path / "a.nc", times=np.arange(3) * 3600.0)
    b = ff.write_flow(tmp_path / "b.nc", times=np.arange(2, 5) * 3600.0)
    with pytest.raises(InputError, match=r"repeated between .*a\.nc.* and .*b\.nc.*duplicates"):
        open_flow([a, b])


def test_backwards_time_in_a_file_is_refused(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", times=np.array([0.0, 7200.0, 3600.0]))
    with pytest.raises(InputError, match=r"goes backwards in .*a\.nc.*strictly increasing"):
        open_flow(p)


def test_time_range_keeps_only_the_frames_needed(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", times=np.arange(10) * 3600.0)
    flow = open_flow(p, time_range=("2026-03-01T02:30:00Z", "2026-03-01T04:00:00+00:00"))
    np.testing.assert_allclose(flow.times, [7200.0, 10800.0, 14400.0])
    u, _ = _sample(flow, 10800.0)
    np.testing.assert_allclose(u, ff.velocity(PX, PY, 10800.0)[0], atol=1e-12)


def test_drying_cells_follow_the_tide(tmp_path):
    # bed rises from -3 m (west) to +1 m (east); water level 0.8 sin(2π t / 4 h)
    def levels(X, Y, t):
        return 0.8 * np.sin(2 * np.pi * t / 14400.0) + 0 * X, -3.0 + 4.0 * (X - 500.0) / 2000.0

    for positive in ("up", "down"):
        p = ff.write_flow(tmp_path / f"tide_{positive}.nc", depth=levels, levels=positive)
        flow = open_flow(p, min_depth=0.05)
        assert not flow.wet.steady
        w = flow.window(0.0, 14400.0)
        Xc, _ = np.meshgrid(ff.X, ff.Y)
        for k, t in enumerate(ff.TIMES):
            eta, bed = levels(Xc, Xc, t)
            np.testing.assert_allclose(
                w.depth[k][eta - bed >= 0.05], (eta - bed)[eta - bed >= 0.05]
            )
            np.testing.assert_array_equal(w.wet[k], (eta - bed >= 0.05).astype(np.uint8))
        dry = 1 - w.wet.reshape(len(ff.TIMES), -1).mean(axis=1)
        assert dry[1] < dry[0] < dry[3]  # high water at 1 h, low water at 3 h


def test_velocity_fill_in_dry_cells_is_accepted(tmp_path):
    def deep_west(X, Y, t):
        return np.where(X > 2000.0, 0.01, 5.0)

    def flow_fn(X, Y, t):
        u, v = ff.velocity(X, Y, t)
        return np.where(X > 2000.0, np.nan, u), np.where(X > 2000.0, np.nan, v)

    flow = open_flow(ff.write_flow(tmp_path / "a.nc", depth=deep_west, flow=flow_fn))
    w = flow.window(0.0, 3600.0)
    assert np.all(w.wet[:, :, ff.X > 2000.0] == 0) and np.all(w.u[:, :, ff.X > 2000.0] == 0)


def test_constant_depth_and_velocity_fill_make_land(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", land=ff.island, depth=None)
    flow = open_flow(p, constant_depth=6.0)
    w = flow.window(0.0, 0.0)
    Xc, Yc = np.meshgrid(ff.X, ff.Y)
    np.testing.assert_array_equal(w.wet[0], (~ff.island(Xc, Yc)).astype(np.uint8))
    assert np.all(w.depth == 6.0)


def test_staggered_land_from_velocity_fill_alone(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", land=ff.island, depth=None, staggered=True)
    w = open_flow(p, constant_depth=6.0).window(0.0, 0.0)
    Xc, Yc = np.meshgrid(ff.X, ff.Y)
    np.testing.assert_array_equal(w.wet[0], (~ff.island(Xc, Yc)).astype(np.uint8))


def test_variables_and_units_can_be_named_explicitly(tmp_path):
    p = ff.write_flow(
        tmp_path / "a.nc",
        u_attrs={"standard_name": None, "units": None},
        v_attrs={"standard_name": None, "units": None},
        velocity_scale=100.0,
    )
    flow = open_flow(p, variables={"u": "u", "v": "v"}, units={"u": "cm/s", "v": "cm s-1"})
    u, v = _sample(flow, 3600.0)
    np.testing.assert_allclose(u, ff.velocity(PX, PY, 3600.0)[0], atol=1e-12)
    assert flow.attrs["roles"]["u"] == "u"


def test_velocity_found_by_units_and_long_name(tmp_path):
    p = ff.write_flow(
        tmp_path / "a.nc",
        u_attrs={"standard_name": None, "long_name": "depth-averaged eastward velocity"},
        v_attrs={"standard_name": None, "long_name": "depth-averaged northward velocity"},
    )
    flow = open_flow(p)
    assert flow.attrs["roles"]["u"] == "u" and flow.attrs["roles"]["v"] == "v"


def test_crs_given_by_the_user_overrides_the_file(tmp_path):
    flow = open_flow(ff.write_flow(tmp_path / "a.nc", crs=None), crs="EPSG:32631")
    assert CRS.from_wkt(flow.crs_wkt).to_epsg() == 32631
    assert open_flow(ff.write_flow(tmp_path / "b.nc", crs=None)).crs_wkt is None


# ---- geographic grids ----------------------------------------------------------------------

LON = np.linspace(11.0, 11.2, 21)
LAT = np.linspace(54.0, 54.1, 11)


def _uniform(X, Y, t):
    return 0.5 + 0 * X, 0.3 + 0 * X


@pytest.mark.parametrize("descending", [False, True])
def test_lonlat_grid_reads_in_degrees(tmp_path, descending):
    p = ff.write_flow(
        tmp_path / "ll.nc",
        x=LON,
        y=LAT,
        geographic=True,
        flow=_uniform,
        crs=None,
        y_descending=descending,
    )
    flow = open_flow(p)
    assert flow.geographic and CRS.from_wkt(flow.crs_wkt).to_epsg() == 4326
    np.testing.assert_array_equal(flow.y, LAT)
    w = flow.window(0.0, 0.0)
    assert np.all(w.u == 0.5) and np.all(w.v == 0.3)


def test_uniform_flow_displacement_in_degrees_matches_geodesic(tmp_path):
    """u t metres converted with the WGS84 radii of curvature agrees with the geodesic distance.

    Reference: pyproj.Geod(ellps="WGS84").inv (Karney 2013, J. Geodesy 87). Tolerance 0.1 %.
    """
    flow = open_flow(
        ff.write_flow(tmp_path / "ll.nc", x=LON, y=LAT, geographic=True, flow=_uniform, crs=None)
    )
    w = flow.window(0.0, 0.0)
    lon0, lat0, t = 11.05, 54.03, 3600.0
    u, v = float(w.u[0, 5, 5]), float(w.v[0, 5, 5])
    m_lon, m_lat = geo.metres_per_degree(lat0)
    geod = Geod(ellps="WGS84")
    _, _, d_east = geod.inv(lon0, lat0, lon0 + u * t / m_lon, lat0)
    _, _, d_north = geod.inv(lon0, lat0, lon0, lat0 + v * t / m_lat)
    assert abs(d_east - u * t) / (u * t) < 1e-3
    assert abs(d_north - v * t) / (v * t) < 1e-3
    _, _, d = geod.inv(lon0, lat0, lon0 + u * t / m_lon, lat0 + v * t / m_lat)
    assert abs(d - np.hypot(u, v) * t) / (np.hypot(u, v) * t) < 1e-3


def test_metres_per_degree_matches_geodesic_at_several_latitudes():
    """Small steps: radii of curvature vs Karney (2013) geodesics via pyproj, to 1e-6."""
    geod = Geod(ellps="WGS84")
    lats = np.array([0.0, 30.0, 54.0, 70.0])
    m_lon, m_lat = geo.metres_per_degree(lats)
    step = 1e-4
    _, _, d_lon = geod.inv(np.zeros(4), lats, np.full(4, step), lats)
    _, _, d_lat = geod.inv(np.zeros(4), lats - step / 2, np.zeros(4), lats + step / 2)
    np.testing.assert_allclose(m_lon, d_lon / step, rtol=1e-6)
    np.testing.assert_allclose(m_lat, d_lat / step, rtol=1e-6)


def test_cell_areas_match_geodesic_polygon_areas():
    """Geographic cell areas vs pyproj Geod.polygon_area_perimeter (Karney 2013), to 1e-6."""
    areas = geo.cell_areas(LON, LAT, geographic=True)
    xe, ye = np.diff(LON)[0] / 2, np.diff(LAT)[0] / 2
    geod = Geod(ellps="WGS84")
    for j, i in [(0, 0), (5, 7), (10, 20)]:
        lo, la = LON[i], LAT[j]
        ref, _ = geod.polygon_area_perimeter(
            [lo - xe, lo + xe, lo + xe, lo - xe], [la - ye, la - ye, la + ye, la + ye]
        )
        assert abs(abs(ref) - areas[j, i]) / abs(ref) < 1e-6
    np.testing.assert_allclose(geo.cell_areas(ff.X, ff.Y, geographic=False), 1e4)


def test_crs_helpers_round_trip_and_name_bad_input():
    wkt = geo.crs_wkt("EPSG:32633")
    assert CRS.from_wkt(wkt).to_epsg() == 32633
    attrs = geo.cf_grid_mapping_attrs(wkt)
    assert attrs["grid_mapping_name"] == "transverse_mercator"
    assert CRS.from_cf(attrs).to_epsg() == 32633
    with pytest.raises(InputError, match="crs.*EPSG code"):
        geo.crs_from_user("EPSG:nonsense")


# ---- 1-D channels --------------------------------------------------------------------------


def test_channel_with_cross_section_area(tmp_path):
    flow = open_flow(ff.write_channel(tmp_path / "canal.nc"))
    assert flow.ndim == 1 and list(flow.y) == [0.0]
    w = flow.window(0.0, 3600.0)
    np.testing.assert_allclose(w.depth[0, 0], 40.0 + 0.002 * flow.x)
    np.testing.assert_allclose(w.u[0, 0], 0.2 + 1e-5 * flow.x)
    assert np.all(w.v == 0) and flow.depth.units == "m2"


def test_channel_without_area_needs_one(tmp_path):
    p = ff.write_channel(tmp_path / "canal.nc", area=False)
    with pytest.raises(InputError, match=r"canal\.nc.*cross-section area.*\[flow.variables\] area"):
        open_flow(p)
    assert open_flow(p, constant_depth=30.0).ndim == 1


# ---- times ---------------------------------------------------------------------------------


def test_times_in_a_360_day_calendar(tmp_path):
    p = ff.write_flow(
        tmp_path / "a.nc",
        calendar="360_day",
        time_units="days since 2026-02-29",
        time_values=np.arange(5.0),
        times=np.arange(5) * 86400.0,
    )
    flow = open_flow(p)
    assert flow.calendar == "360_day"
    assert flow_time_iso(flow, flow.times[1]) == "2026-02-30T00:00:00+00:00"
    assert to_flow_seconds("2026-02-30T12:00:00Z", flow) == flow.times[1] + 43200.0
    with pytest.raises(InputError, match="does not exist in the flow's '360_day' calendar"):
        to_flow_seconds("2026-02-31T00:00:00Z", flow)


def test_to_flow_seconds_needs_a_zone_and_honours_it(tmp_path):
    flow = open_flow(ff.write_flow(tmp_path / "a.nc"))
    assert flow.time_units == "seconds since 2026-03-01T00:00:00+00:00"
    assert to_flow_seconds("2026-03-01T03:00:00+02:00", flow) == 3600.0
    assert to_flow_seconds("2026-03-01T01:00Z", flow) == 3600.0
    with pytest.raises(InputError, match="no time zone.*'Z' for UTC"):
        to_flow_seconds("2026-03-01T01:00:00", flow)
    with pytest.raises(InputError, match="not an ISO 8601"):
        to_flow_seconds("1 March 2026", flow)


def test_time_outside_the_frames_names_both_ranges(tmp_path):
    flow = open_flow(ff.write_flow(tmp_path / "a.nc"))
    check_time_window(flow, 0.0, 14400.0)
    with pytest.raises(
        InputError,
        match=r"2026-03-01T03:00:00\+00:00 to 2026-03-01T06:00:00\+00:00 but the flow .*a\.nc"
        r".*2026-03-01T00:00:00\+00:00 to 2026-03-01T04:00:00\+00:00",
    ):
        check_time_window(flow, 10800.0, 21600.0)


# ---- points --------------------------------------------------------------------------------


def test_points_in_water_pass_and_on_land_or_outside_are_named(tmp_path):
    flow = open_flow(ff.write_flow(tmp_path / "a.nc", land=ff.island))
    check_points_in_water(flow, [600.0, 2400.0], [300.0, 1100.0], "receptor 'intake'")
    with pytest.raises(InputError, match=r"release 'berth 4' at \(1500, 700\) lies on land"):
        check_points_in_water(flow, 1500.0, 700.0, "release 'berth 4'")
    with pytest.raises(InputError, match=r"receptor 'beach' point 1 at \(3000, 700\) lies outside"):
        check_points_in_water(flow, [600.0, 3000.0], [700.0, 700.0], "receptor 'beach'")


# ---- bad input: each named with its file, variable and fix ---------------------------------


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"nowhere\.nc.*does not exist"):
        open_flow(tmp_path / "nowhere.nc")


def test_not_netcdf(tmp_path):
    p = tmp_path / "notes.nc"
    p.write_text("tide table, not a model output\n")
    with pytest.raises(InputError, match=r"notes\.nc.*is not a NetCDF file"):
        open_flow(p)


def test_no_velocity_found(tmp_path):
    p = ff.write_flow(
        tmp_path / "a.nc",
        u_attrs={"standard_name": None},
        extra=lambda ds: ds.renameVariable("u", "speed_e"),
    )
    with pytest.raises(
        InputError,
        match=r"a\.nc.*no eastward \(x\) velocity \(u\) found.*Variables in the file: .*speed_e"
        r".*eastward_sea_water_velocity.*\[flow.variables\] u = \"NAME\"",
    ):
        open_flow(p)


def test_ambiguous_velocity(tmp_path):
    def twin(ds):
        w = ds.createVariable("u_surface", "f8", ("time", "y", "x"))
        w.standard_name = "eastward_sea_water_velocity"
        w.units = "m s-1"
        w[:] = 0.0

    p = ff.write_flow(tmp_path / "a.nc", extra=twin)
    with pytest.raises(InputError, match=r"a\.nc.*\(u\) is ambiguous.*u, u_surface.*\[flow.var"):
        open_flow(p)
    assert open_flow(p, variables={"u": "u"}).attrs["roles"]["u"] == "u"


def test_shapes_that_disagree(tmp_path):
    def other_depth(ds):
        ds.createDimension("y2", 14)
        c = ds.createVariable("y2", "f8", ("y2",))
        c.units, c.axis = "m", "Y"
        c[:] = np.linspace(0.0, 2600.0, 14)
        d = ds.createVariable("depth", "f8", ("y2", "x"))
        d.standard_name, d.units = "sea_floor_depth_below_sea_surface", "m"
        d[:] = 5.0

    p = ff.write_flow(tmp_path / "a.nc", depth=None, extra=other_depth)
    with pytest.raises(InputError, match=r"a\.nc.*grids disagree.*'u' \(u\) has 11 points along y"):
        open_flow(p)


def test_non_monotonic_coordinate(tmp_path):
    x = ff.X.copy()
    x[[3, 4]] = x[[4, 3]]
    with pytest.raises(InputError, match=r"a\.nc.*coordinate 'x'.*not monotonic.*strictly"):
        open_flow(ff.write_flow(tmp_path / "a.nc", x=x))


def test_duplicated_coordinate(tmp_path):
    y = ff.Y.copy()
    y[5] = y[4]
    with pytest.raises(
        InputError, match=r"a\.nc.*coordinate 'y'.*repeats the value 600 at indices 4 and 5"
    ):
        open_flow(ff.write_flow(tmp_path / "a.nc", y=y))


def _hole(frames):
    def fn(X, Y, t):
        u, v = ff.velocity(X, Y, t)
        if t in frames:
            u = np.where((X == 1000.0) & (Y == 500.0), np.nan, u)
        return u, v

    return fn


def test_nan_velocity_in_a_wet_cell_at_the_door(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", flow=_hole({0.0}))
    with pytest.raises(
        InputError,
        match=r"a\.nc.*variable 'u' \(u\) is missing .* frame 2026-03-01T00:00:00\+00:00, point "
        r"x=1000, y=500.*mark the cell as land",
    ):
        open_flow(p)


def test_nan_velocity_in_a_wet_cell_when_the_frame_is_read(tmp_path):
    flow = open_flow(ff.write_flow(tmp_path / "a.nc", flow=_hole({7200.0})))
    flow.window(0.0, 3600.0)
    with pytest.raises(InputError, match=r"frame 2026-03-01T02:00:00\+00:00, point x=1000, y=500"):
        flow.window(3600.0, 7200.0)


def test_all_land_domain(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", land=lambda X, Y: X > 0, mask=True)
    with pytest.raises(InputError, match=r"a\.nc: every cell is land or dry.*minimum depth"):
        open_flow(p)


@pytest.mark.parametrize(
    "units,state",
    [("furlong/fortnight", "has units 'furlong/fortnight'"), (None, "has no units attribute")],
)
def test_unknown_or_missing_velocity_units(tmp_path, units, state):
    p = ff.write_flow(tmp_path / "a.nc", u_attrs={"units": units})
    with pytest.raises(
        InputError,
        match=re.escape(f"variable 'u' (eastward (x) velocity) {state}") + r".*\[flow.units\] u",
    ):
        open_flow(p)
    assert open_flow(p, units={"u": "m/s"}).attrs["roles"]["u"] == "u"


def test_unknown_units_given_in_the_scenario(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", u_attrs={"units": None})
    with pytest.raises(InputError, match=r"\[flow.units\] u .*unknown unit 'parsecs'"):
        open_flow(p, units={"u": "parsecs"})


def test_variable_named_but_absent(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc")
    with pytest.raises(InputError, match=r"a\.nc.*variable 'ucur' given for .*not in the file"):
        open_flow(p, variables={"u": "ucur"})


def test_no_depth_and_no_constant_depth(tmp_path):
    p = ff.write_flow(tmp_path / "a.nc", depth=None)
    with pytest.raises(InputError, match=r"a\.nc.*no water depth found.*constant depth"):
        open_flow(p)


def test_mask_flag_meanings_are_read(tmp_path):
    def flagged(ds):
        m = ds.createVariable("wetdry", "i1", ("y", "x"))
        m.flag_values = np.array([0, 1], dtype=np.int8)
        m.flag_meanings = "open_water land"
        Xc, Yc = np.meshgrid(ff.X, ff.Y)
        m[:] = ff.island(Xc, Yc).astype(np.int8)

    flow = open_flow(ff.write_flow(tmp_path / "a.nc", extra=flagged), variables={"mask": "wetdry"})
    wet = flow.window(0.0, 0.0).wet[0]
    Xc, Yc = np.meshgrid(ff.X, ff.Y)
    np.testing.assert_array_equal(wet, (~ff.island(Xc, Yc)).astype(np.uint8))


def test_files_with_different_grids_are_refused(tmp_path):
    a = ff.write_flow(tmp_path / "a.nc", times=np.arange(2) * 3600.0)
    b = ff.write_flow(tmp_path / "b.nc", times=np.arange(2, 4) * 3600.0, x=ff.X + 10.0)
    with pytest.raises(InputError, match=r"b\.nc.*differs from .*a\.nc.*share variables and grids"):
        open_flow([a, b])


def test_layers_without_a_coordinate_are_refused(tmp_path):
    def layered(ds):
        ds.createDimension("layer", 3)
        w = ds.createVariable("u3", "f8", ("time", "layer", "y", "x"))
        w.units = "m s-1"
        w[:] = 0.1

    p = ff.write_flow(tmp_path / "a.nc", extra=layered)
    with pytest.raises(
        InputError,
        match=r"a\.nc.*'u3' has layers along dimension 'layer' but no coordinate.*"
        "thicknesses cannot be found",
    ):
        open_flow(p, variables={"u": "u3"})
    assert netCDF4.Dataset(p).variables["u3"].ndim == 4


# ---- particles moved through each layout ---------------------------------------------------

PATH_LAYOUTS = [
    "projected",
    "reversed_axes_descending_y",
    "staggered",
    "staggered_reversed",
    "cm_per_s",
    "calendar_360_day",
]


def test_a_particle_follows_the_same_path_through_each_layout(tmp_path):
    """Deterministic advection (no noise) through the same flow written in each layout.

    The test flow is bilinear in space, so every layout's bilinear interpolation gives the same
    velocity and the paths agree to round-off (1e-6 m over ~1.2 km).
    """
    engine = pytest.importorskip("walkers.engine")
    if not hasattr(engine, "advect_points"):
        pytest.skip("walkers.engine.advect_points is not there yet")
    x0 = np.array([600.0, 700.0, 650.0, 600.0])
    y0 = np.array([220.0, 300.0, 950.0, 990.0])  # paths pass south and north of the island
    ends = {}
    for name in PATH_LAYOUTS:
        flow = open_flow(
            ff.write_flow(tmp_path / f"{name}.nc", land=ff.island, mask=True, **LAYOUTS[name])
        )
        x, y = engine.advect_points(flow, x0.copy(), y0.copy(), 0.0, 3600.0, 60.0)
        ends[name] = (np.asarray(x), np.asarray(y))
    ref_x, ref_y = ends["projected"]
    assert np.all(ref_x - x0 > 1000.0)  # the particles did travel
    for name, (x, y) in ends.items():
        np.testing.assert_allclose(x, ref_x, rtol=0, atol=1e-6, err_msg=name)
        np.testing.assert_allclose(y, ref_y, rtol=0, atol=1e-6, err_msg=name)
