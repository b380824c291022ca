"""The demo flow files (scenarios/*.nc): reproducible, CF-conformant, small and mass consistent.

Continuity check (source: the depth-integrated continuity equation
d(eta)/dt + d(h u)/dx + d(h v)/dy = 0, Vreugdenhil 1994, Numerical Methods for Shallow-Water Flow,
ch. 2 — from memory), in finite-volume form for each wet cell:

    R = (net discharge out through the four faces) + (cell area) * d(eta)/dt   [m3 s-1]

The face discharge of a cell-centred field is the mean of the two neighbouring unit discharges
h u times the face length; zero where either side is dry or land; on an open edge of the domain it
is extrapolated linearly from the two cells inside. d(eta)/dt is the central difference of the
depth of a cell that is always wet (eta is uniform in these flows).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from pyproj import CRS
from test_io import cf_errors

ROOT = Path(__file__).resolve().parents[1]
SCENARIOS = ROOT / "scenarios"
FILES = ("saltmarsh_estuary_flow.nc", "millbrook_canal_flow.nc")
LAYERED = "saltmarsh_estuary_layered_flow.nc"
CURVILINEAR = "saltmarsh_estuary_curvilinear_flow.nc"


def _load_builder():
    spec = importlib.util.spec_from_file_location(
        "make_demo_flows", SCENARIOS / "make_demo_flows.py"
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


mdf = _load_builder()


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory) -> Path:
    outdir = tmp_path_factory.mktemp("demo_flows")
    mdf.main(["--outdir", str(outdir)])
    return outdir


@pytest.fixture(scope="module")
def estuary() -> xr.Dataset:
    with xr.open_dataset(SCENARIOS / FILES[0], decode_times=False) as ds:
        return ds.load()


@pytest.fixture(scope="module")
def canal() -> xr.Dataset:
    with xr.open_dataset(SCENARIOS / FILES[1], decode_times=False) as ds:
        return ds.load()


def by_standard_name(ds: xr.Dataset, name: str) -> xr.DataArray:
    found = [v for v in ds.variables if ds[v].attrs.get("standard_name") == name]
    assert len(found) == 1, f"standard_name {name}: found {found}"
    return ds[found[0]]


def flow_arrays(ds: xr.Dataset) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    u = by_standard_name(ds, "eastward_sea_water_velocity").values.astype(np.float64)
    v = by_standard_name(ds, "northward_sea_water_velocity").values.astype(np.float64)
    h = by_standard_name(ds, "sea_floor_depth_below_sea_surface").values.astype(np.float64)
    return u, v, h


def face_discharges(
    qx: np.ndarray, qy: np.ndarray, wet: np.ndarray, dx: float, dy: float
) -> tuple[np.ndarray, np.ndarray]:
    """Face discharges (m3 s-1) of cell-centred unit discharges qx, qy (m2 s-1), (nt, ny, nx)."""
    nt, ny, nx = qx.shape
    fx = np.zeros((nt, ny, nx + 1))
    fy = np.zeros((nt, ny + 1, nx))
    fx[..., 1:-1] = np.where(wet[..., :-1] & wet[..., 1:], 0.5 * (qx[..., :-1] + qx[..., 1:]), 0)
    fx[..., 0] = 1.5 * qx[..., 0] - 0.5 * qx[..., 1]
    fx[..., -1] = 1.5 * qx[..., -1] - 0.5 * qx[..., -2]
    fy[:, 1:-1] = np.where(wet[:, :-1] & wet[:, 1:], 0.5 * (qy[:, :-1] + qy[:, 1:]), 0)
    fy[:, 0] = 1.5 * qy[:, 0] - 0.5 * qy[:, 1]
    fy[:, -1] = 1.5 * qy[:, -1] - 0.5 * qy[:, -2]
    return fx * dy, fy * dx


def continuity_residual(
    ds: xr.Dataset, u: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Residual R, storage term and gross exchange (m3 s-1) of each wet cell.

    For a time-varying flow the first and last frames are left out (central differences).
    ``u`` replaces the file's eastward velocity (for the twin tests).
    """
    uf, v, h = flow_arrays(ds)
    u = uf if u is None else u
    x, y = ds["x"].values, ds["y"].values
    dx, dy = float(x[1] - x[0]), float(y[1] - y[0])
    wet = h > 0.0
    fx, fy = face_discharges(h * u, h * v, wet, dx, dy)
    net_out = fx[..., 1:] - fx[..., :-1] + fy[:, 1:] - fy[:, :-1]
    gross = 0.5 * (np.abs(fx[..., 1:]) + np.abs(fx[..., :-1]))
    gross += 0.5 * (np.abs(fy[:, 1:]) + np.abs(fy[:, :-1]))
    if h.shape[0] == 1:
        storage = np.zeros_like(h)
        frames = slice(None)
    else:
        t = ds["time"].values.astype(np.float64)
        j, i = np.unravel_index(np.argmax(h.min(axis=0)), h.shape[1:])
        rate = (h[2:, j, i] - h[:-2, j, i]) / (t[2:] - t[:-2])
        frames = slice(1, -1)
        storage = np.zeros_like(h[frames])
        storage[:] = dx * dy * rate[:, None, None]
    w = wet[frames]
    storage = np.where(w, storage, 0.0)
    residual = np.where(w, net_out[frames] + storage, 0.0)
    return residual, storage, np.where(w, gross[frames] + np.abs(storage), 0.0)


def _face_errors(f: np.ndarray, wet: np.ndarray, h: np.ndarray, length: float) -> np.ndarray:
    """Bound (m3 s-1) of |checked - exact| discharge for faces along the last axis.

    ``f`` (m, n + 1): exact face discharges; ``wet``, ``h`` (m, n): the cells between them.
    """
    err = np.zeros(f.shape)
    err[:, 1:-1] = 0.25 * np.abs(f[:, :-2] - 2.0 * f[:, 1:-1] + f[:, 2:])
    err[:, 0] = 0.25 * np.abs(f[:, 0] - 2.0 * f[:, 1] + f[:, 2])
    err[:, -1] = 0.25 * np.abs(f[:, -3] - 2.0 * f[:, -2] + f[:, -1])
    half_q = 0.5 * mdf.VELOCITY_QUANTUM * length
    err[:, 1:-1] += half_q * 0.5 * (h[:, :-1] + h[:, 1:])
    err[:, 0] += half_q * (1.5 * h[:, 0] + 0.5 * h[:, 1])
    err[:, -1] += half_q * (1.5 * h[:, -1] + 0.5 * h[:, -2])
    open_ = np.zeros(f.shape, dtype=bool)
    open_[:, 1:-1] = wet[:, :-1] & wet[:, 1:]
    open_[:, 0], open_[:, -1] = wet[:, 0], wet[:, -1]
    return np.where(open_, err, 0.0)


def averaging_bound(ds: xr.Dataset) -> float:
    """Upper bound (m3 s-1) of sum |R| over the estuary's wet cells and inner frames.

    The builder's face discharges close continuity exactly; the file keeps their cell means, and
    the check takes means of those again: the face error is a quarter of the second difference
    of the builder's face discharges along the face normal (a 1-2-1 filter; closed faces count
    as zero; the same holds for the linear extrapolation at open edges). Rounding the stored
    velocities to multiples of q adds at most (q/2) * (mean depth beside the face) * face length.
    Each face borders at most two cells, hence the factor 2.
    """
    geom = mdf.estuary_geometry()
    d = mdf.ESTUARY_CELL
    dt = mdf.ESTUARY_FRAME_INTERVAL
    t = ds["time"].values.astype(np.float64)[1:-1]
    eta = mdf.tide_level(t)
    rate = (mdf.tide_level(t + dt) - mdf.tide_level(t - dt)) / (2 * dt)
    total = 0.0
    for n in range(t.size):
        h, fx, fy = mdf.estuary_face_discharges(geom, float(eta[n]), float(rate[n]))
        wet = h > 0.0
        total += float(np.sum(_face_errors(fx, wet, h, d)))
        total += float(np.sum(_face_errors(fy.T, wet.T, h.T, d)))
    return 2.0 * total


# --- reproducibility, format, size ---------------------------------------------------------


@pytest.mark.parametrize("name", (*FILES, LAYERED, CURVILINEAR))
def test_regenerated_file_equals_committed(regenerated: Path, name: str) -> None:
    with (
        xr.open_dataset(SCENARIOS / name, decode_times=False) as old,
        xr.open_dataset(regenerated / name, decode_times=False) as new,
    ):
        assert set(old.variables) == set(new.variables)
        for var in old.variables:
            a, b = old[var].values, new[var].values
            if np.issubdtype(a.dtype, np.floating):
                # numpy's trigonometric functions may differ by an ulp between CPUs (SIMD paths)
                # and versions: regenerated values agree to a few ulps of the stored type
                # (common practice), which still catches any change of the generator.
                np.testing.assert_allclose(
                    b, a, rtol=4 * np.finfo(a.dtype).eps, atol=0, err_msg=var
                )
            else:
                np.testing.assert_array_equal(a, b, err_msg=var)
            assert old[var].attrs.keys() == new[var].attrs.keys(), var
        assert old.attrs == new.attrs


@pytest.mark.parametrize("name", (*FILES, LAYERED, CURVILINEAR))
def test_file_is_small(name: str) -> None:
    assert (SCENARIOS / name).stat().st_size < 2.5e6


@pytest.mark.parametrize("name", FILES)
def test_roles_are_found_by_standard_name(name: str) -> None:
    with xr.open_dataset(SCENARIOS / name, decode_times=False) as ds:
        assert ds.attrs["Conventions"] == "CF-1.8"
        for std in ("eastward_sea_water_velocity", "northward_sea_water_velocity"):
            assert by_standard_name(ds, std).attrs["units"] == "m s-1"
            assert by_standard_name(ds, std).dtype == np.float32
        depth = by_standard_name(ds, "sea_floor_depth_below_sea_surface")
        assert depth.dims == ("time", "y", "x") and depth.attrs["units"] == "m"
        mask = by_standard_name(ds, "sea_binary_mask")
        assert list(mask.attrs["flag_values"]) == [0, 1]
        assert mask.attrs["flag_meanings"] == "land water"
        for axis in ("x", "y"):
            coord = by_standard_name(ds, f"projection_{axis}_coordinate")
            assert coord.attrs["units"] == "m"
        crs = CRS.from_wkt(ds[depth.attrs["grid_mapping"]].attrs["crs_wkt"])
        assert crs == CRS.from_epsg(32630)
        assert ds["time"].attrs["units"] == "seconds since 2026-05-04T00:00:00Z"
        assert ds["time"].attrs["calendar"] == "standard"


@pytest.mark.parametrize("name", (*FILES, LAYERED, CURVILINEAR))
def test_cf_checker_reports_no_error(name: str) -> None:
    # CF conventions 1.8 (Eaton et al. 2020) through the cfchecker package with the CF tables
    errors, report = cf_errors(SCENARIOS / name)
    assert errors == 0, report


# --- mass consistency ------------------------------------------------------------------------


def test_estuary_construction_closes_continuity_to_round_off() -> None:
    geom = mdf.estuary_geometry()
    area = mdf.ESTUARY_CELL**2
    dt = mdf.ESTUARY_FRAME_INTERVAL
    for t in np.linspace(0.0, mdf.TIDE_PERIOD, 13):
        eta = float(mdf.tide_level(np.array([t]))[0])
        rate = float((mdf.tide_level(np.array([t + dt])) - mdf.tide_level(np.array([t - dt])))[0])
        rate /= 2 * dt
        h, fx, fy = mdf.estuary_face_discharges(geom, eta, rate)
        wet = h > 0
        r = fx[:, 1:] - fx[:, :-1] + fy[1:] - fy[:-1] + np.where(wet, rate * area, 0.0)
        scale = np.abs(fy).max()
        assert np.abs(r[wet]).max() <= 1e-12 * scale
        # flux only through faces between wet cells (or the open south/north edges)
        assert np.all(fx[:, 1:-1][~(wet[:, :-1] & wet[:, 1:])] == 0.0)
        assert np.all(fy[1:-1][~(wet[:-1] & wet[1:])] == 0.0)


def test_estuary_file_continuity_within_averaging_bound(estuary: xr.Dataset) -> None:
    residual, storage, gross = continuity_residual(estuary)
    # measured: sum|R| = 0.51 x the bound, and 0.0054 x the sum of the cells' gross exchange
    assert np.abs(residual).sum() <= averaging_bound(estuary)
    assert np.abs(residual).sum() / gross.sum() < 0.01


def test_estuary_twin_perturbed_u_fails_continuity(estuary: xr.Dataset) -> None:
    u, v, h = flow_arrays(estuary)
    perturbed = np.where(h > 0, u + 0.03, 0.0)  # a 3 cm/s eastward drift that nothing feeds
    residual, _, _ = continuity_residual(estuary, u=perturbed)
    # measured: sum|R| = 4.0 x the bound
    assert np.abs(residual).sum() > averaging_bound(estuary)


def test_canal_continuity_holds_to_float32_rounding(canal: xr.Dataset) -> None:
    residual, _, gross = continuity_residual(canal)
    # u is uniform along the canal, so the discrete divergence vanishes up to float32 rounding
    # of h*u (relative 2**-24 per value)
    assert np.abs(residual).max() <= 4 * 2.0**-24 * gross.max()
    u, _, h = flow_arrays(canal)
    section = (u[0] * h[0])[:, 0].sum() * float(canal["y"][1] - canal["y"][0])
    assert section == pytest.approx(mdf.CANAL_DISCHARGE, rel=1e-3)


def test_canal_twin_perturbed_u_fails_continuity(canal: xr.Dataset) -> None:
    u, _, h = flow_arrays(canal)
    x = canal["x"].values - canal["x"].values[0]
    perturbed = u * np.where((x > 3000) & (x < 4000), 1.05, 1.0)  # 5 % more flow over 1 km
    residual, _, gross = continuity_residual(canal, u=perturbed)
    assert np.abs(residual).max() > 0.01 * gross.max()


# --- wetting and drying, no NaN ------------------------------------------------------------


def test_tidal_flats_dry_and_wet_over_the_cycle(estuary: xr.Dataset) -> None:
    u, v, h = flow_arrays(estuary)
    water = by_standard_name(estuary, "sea_binary_mask").values == 1
    wet = h > 0
    sometimes = wet.any(axis=0) & ~wet.all(axis=0)
    # measured: 44 % of the water cells fall dry at some time
    assert sometimes.sum() > 0.2 * water.sum()
    level = by_standard_name(estuary, "sea_surface_height_above_mean_sea_level").values
    low, high = int(np.argmin(level)), int(np.argmax(level))
    assert not wet[low][sometimes].any() and wet[high][sometimes].all()
    dry = ~wet
    assert np.all(u[dry] == 0) and np.all(v[dry] == 0)
    assert np.all(h[:, ~water] == 0) and np.all(h[wet] >= mdf.DRY_DEPTH - 1e-6)


@pytest.mark.parametrize("name", FILES)
def test_no_nan_anywhere(name: str) -> None:
    with xr.open_dataset(SCENARIOS / name, decode_times=False) as ds:
        for arr in flow_arrays(ds):
            assert np.isfinite(arr).all()


def _cell_of(ds: xr.Dataset, point: tuple[float, float]) -> tuple[int, int]:
    x, y = ds["x"].values, ds["y"].values
    return int(np.argmin(np.abs(y - point[1]))), int(np.argmin(np.abs(x - point[0])))


def test_estuary_places_are_in_water(estuary: xr.Dataset) -> None:
    _, _, h = flow_arrays(estuary)
    wet = h > 0
    for name, point in mdf.ESTUARY_PLACES.items():
        j, i = _cell_of(estuary, point)
        if name == "shellfish_bed":
            assert 0.2 < wet[:, j, i].mean() < 0.95, name  # on a flat that dries
        else:
            assert wet[:, j, i].all(), name


def test_canal_places_are_in_water(canal: xr.Dataset) -> None:
    _, _, h = flow_arrays(canal)
    for name, point in mdf.CANAL_PLACES.items():
        j, i = _cell_of(canal, point)
        assert h[0, j, i] > 0, name
