"""The Saltmarsh Estuary on a layered curvilinear grid that follows its banks (demo file
saltmarsh_estuary_curvilinear_flow.nc), written the way a boundary-fitted ocean model writes it.

Grid: 120 rows from the sea (south) to the river (north), each row a straight line of constant
northing as in the rectilinear demo; its 24 cells span the funnel from bank to bank,
centre(y) ± max(1.1 W(y), 400 m) with the funnel's centreline and half-width W of
:func:`make_demo_flows.estuary_geometry`, so the grid lines along the estuary follow the banks and
the cells narrow upstream (from about 220 m across at the mouth to 41 m). The coordinates are 2-D
(``x_centre``, ``y_centre`` with cell bounds, CF-1.8 §5.2 and §7.1) on WGS 84 / UTM zone 30N.

Flow: the rectilinear demo's bed is evaluated at the new cell centres from the same formulas; the
depth-averaged velocity of saltmarsh_estuary_flow.nc is interpolated bilinearly to the new cell
centres (so the flow is that of the demo, but its continuity holds only to the interpolation
error, about the rectilinear cell size), and written as eastward and northward components in the
four sigma layers of the layered demo, with the same 1/7 power-law layer factors.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from pyproj import CRS
from scipy.interpolate import RegularGridInterpolator

ROWS = 120
COLUMNS = 24
MIN_HALF_SPAN = 400.0  # m
SPAN_FACTOR = 1.1


def funnel(y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Centreline easting and half-width (m, from the grid origin) of the funnel at northing y."""
    centre = 3000.0 - 300.0 * np.sin(2.0 * np.pi * y / 16000.0)
    half_width = 250.0 + 2150.0 * np.exp(-y / 5000.0)
    return centre, half_width


def corners(cell: float) -> tuple[np.ndarray, np.ndarray]:
    """Cell corners (ROWS + 1, COLUMNS + 1), m from the rectilinear demo's origin."""
    yf = np.arange(ROWS + 1) * cell
    centre, half = funnel(yf)
    span = np.maximum(SPAN_FACTOR * half, MIN_HALF_SPAN)
    s = np.linspace(-1.0, 1.0, COLUMNS + 1)
    return centre[:, None] + span[:, None] * s[None, :], np.repeat(yf[:, None], COLUMNS + 1, 1)


def build(flat: xr.Dataset, layered: xr.Dataset, mod) -> xr.Dataset:
    """The curvilinear layered estuary, from the rectilinear demo ``flat`` and the layered demo
    ``layered`` (for its sigma layers and times); ``mod`` is the make_demo_flows module."""
    cx, cy = corners(mod.ESTUARY_CELL)
    x0, y0 = mod.ESTUARY_ORIGIN
    xc = 0.25 * (cx[:-1, :-1] + cx[:-1, 1:] + cx[1:, :-1] + cx[1:, 1:])
    yc = 0.25 * (cy[:-1, :-1] + cy[:-1, 1:] + cy[1:, :-1] + cy[1:, 1:])
    bed = _bed(xc, yc, mod)
    times = layered["time"].values
    flat = flat.sel(time=times)
    gx = flat["x"].values - x0
    gy = flat["y"].values - y0
    pts = np.stack([yc.ravel(), xc.ravel()], axis=-1)
    level = layered["zeta"].values[:, 0, 0].astype(np.float64)
    water = bed < 0.8
    depth = np.where(water[None], level[:, None, None] - bed[None], 0.0)
    wet = depth >= mod.DRY_DEPTH
    factors = mod.layer_factors()
    out = {}
    for name in ("u", "v"):
        frames = []
        for k in range(times.size):
            f = RegularGridInterpolator(
                (gy, gx),
                flat[name].values[k].astype(np.float64),
                bounds_error=False,
                fill_value=0.0,
            )
            frames.append(np.where(wet[k], f(pts).reshape(xc.shape), 0.0))
        mean = np.round(np.stack(frames) / mod.VELOCITY_QUANTUM) * mod.VELOCITY_QUANTUM
        out[name] = mean[:, None] * factors[None, :, None, None]
    return _dataset(cx + x0, cy + y0, xc + x0, yc + y0, bed, water, layered, out, mod)


def _bed(xc: np.ndarray, yc: np.ndarray, mod) -> np.ndarray:
    """The demo's bed (m above mean sea level) at points (m from the origin): the formulas of
    make_demo_flows.estuary_geometry without the harbour basin."""
    centre, half = funnel(yc)
    thalweg = 3.5 + 3.5 * np.exp(-yc / 6000.0)
    r = np.abs(xc - centre) / half
    core = 0.45
    bed = np.where(
        r < core,
        -thalweg + (thalweg - 1.5) * mod._smoothstep(r / core),
        -1.5 + 2.3 * (r - core) / (1.0 - core),
    )
    bed = np.where(r <= 1.0, bed, 2.0)
    return np.round(bed / mod.LEVEL_QUANTUM) * mod.LEVEL_QUANTUM


def _dataset(cx, cy, xc, yc, bed, water, layered, vel, mod) -> xr.Dataset:
    cells = ("j", "i")
    crs = CRS.from_epsg(mod.EPSG).to_cf()
    common = {"grid_mapping": "crs", "coordinates": "x_centre y_centre"}
    ring = np.stack([cx[:-1, :-1], cx[:-1, 1:], cx[1:, 1:], cx[1:, :-1]], axis=-1)
    ring_y = np.stack([cy[:-1, :-1], cy[:-1, 1:], cy[1:, 1:], cy[1:, :-1]], axis=-1)
    variables = {
        "time": layered["time"].variable,
        "crs": xr.Variable((), np.int32(0), crs),
        "layer": layered["layer"].variable,
        "layer_bounds": layered["layer_bounds"].variable,
        "x_centre": xr.Variable(
            cells,
            xc,
            {
                "standard_name": "projection_x_coordinate",
                "long_name": "easting of cell centre",
                "units": "m",
                "bounds": "x_corners",
            },
        ),
        "y_centre": xr.Variable(
            cells,
            yc,
            {
                "standard_name": "projection_y_coordinate",
                "long_name": "northing of cell centre",
                "units": "m",
                "bounds": "y_corners",
            },
        ),
        "x_corners": xr.Variable((*cells, "corner"), ring, {"units": "m"}),
        "y_corners": xr.Variable((*cells, "corner"), ring_y, {"units": "m"}),
        "zeta": xr.Variable(
            ("time", *cells),
            np.broadcast_to(
                layered["zeta"].values[:, :1, :1], (layered["time"].size, *xc.shape)
            ).astype(np.float32),
            {
                "standard_name": "sea_surface_height_above_mean_sea_level",
                "long_name": "water level",
                "units": "m",
                **common,
            },
        ),
        "bed_depth": xr.Variable(
            cells,
            (-bed).astype(np.float32),
            {
                "standard_name": "sea_floor_depth_below_mean_sea_level",
                "long_name": "bed depth below mean sea level (negative above it)",
                "units": "m",
                **common,
            },
        ),
        "water_mask": xr.Variable(
            cells,
            water.astype(np.int8),
            {
                "long_name": "water (1) or land (0) on cell centres",
                "flag_values": np.array([0, 1], dtype=np.int8),
                "flag_meanings": "land water",
                **common,
            },
        ),
    }
    for name, std in (("u", "eastward_sea_water_velocity"), ("v", "northward_sea_water_velocity")):
        variables[name] = xr.Variable(
            ("time", "layer", *cells),
            vel[name].astype(np.float32),
            {
                "standard_name": std,
                "long_name": f"layer {std.split('_')[0]} velocity",
                "units": "m s-1",
                **common,
            },
        )
    comment = (
        "Saltmarsh Estuary is an invented place. The tidal flow of the layered demo on a "
        f"boundary-fitted curvilinear grid of {ROWS} x {COLUMNS} cells following the banks of the "
        "funnel (2-D coordinates with bounds), in four sigma layers; velocities interpolated from "
        "saltmarsh_estuary_flow.nc, so continuity holds only to the interpolation error. "
        "Total water depth = bed_depth + zeta."
    )
    return xr.Dataset(
        variables,
        attrs=mod._global_attrs(
            "Saltmarsh Estuary (invented): tidal flow in sigma layers on a curvilinear grid",
            comment,
        ),
    )
