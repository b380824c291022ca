"""A small result Dataset that follows the result contract, for the output and figure tests.

The fields are synthetic but physically plausible: an instantaneous point release of mass M into
water of depth h, carried by a uniform current u along x and spread by an isotropic dispersion
coefficient K, with first-order decay k. Its depth-averaged concentration is the Gaussian puff

    C(x, y, t) = M exp(-k t) / (4 pi K t h) * exp(-((x - x_s - u t)^2 + (y - y_s)^2) / (4 K t))

(Fischer et al. 1979, Mixing in Inland and Coastal Waters, ch. 2 — from memory); with one row
(``ny == 1``) it is the 1-D puff in a channel of cross-section A. The spread is counted from a
virtual origin 600 s before the first output, so the first map is not a single cell. Cells where
fewer than one particle would fall are set to zero, as box counting leaves them. The place is
invented.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from pyproj import CRS

import walkers
from walkers.scenario.config import EDGE_NAMES

MASS = 500.0  # kg released
DEPTH = 4.0  # m
SECTION = 120.0  # m2, cross-section of the channel in a 1-D run
SPEED = 0.2  # m s-1 along x
DISPERSION = 2.0  # m2 s-1
DECAY = 1.0e-5  # s-1
PARTICLES = 20_000


def gaussian_puff_results(
    *,
    geographic: bool = False,
    crs: str | None = "EPSG:32631",
    nt: int = 7,
    nx: int = 40,
    ny: int = 24,
    tracks: int = 0,
    receptors: bool = True,
    land: bool = True,
    time_units: str = "seconds since 2024-05-14T06:00:00+02:00",
) -> xr.Dataset:
    """A result Dataset of a Gaussian puff on a (time, y, x) grid, following the result contract.

    geographic : cell centres in degrees (WGS84) instead of metres; ``crs`` is then ignored.
    crs : CRS of the projected grid, or None for grid coordinates with no known CRS.
    nt, nx, ny : numbers of output times and cells; tracks : number of sampled tracks.
    receptors : include three receptors (one with thresholds); land : add ``land_fraction``.
    """
    dx = 50.0  # m
    x_m = dx * np.arange(nx)
    y_m = dx * (np.arange(ny) - (ny - 1) / 2.0)
    time = np.linspace(0.0, 3.0 * 3600.0, nt)  # s
    xs, ys = 200.0, 0.0  # release point (m, local)
    t_eff = time + 600.0  # an initial spread, so the first map is not a single cell
    xc = xs + SPEED * time
    sigma2 = 2.0 * DISPERSION * t_eff
    mass_in_water_ideal = MASS * np.exp(-DECAY * time)
    dist2 = (x_m[None, None, :] - xc[:, None, None]) ** 2
    if ny == 1:
        # a 1-D channel of cross-section A: C = M exp(-kt) / (A sqrt(2 pi s2)) exp(-x'^2 / (2 s2))
        cell_volume = SECTION * dx
        conc = (
            mass_in_water_ideal[:, None, None]
            / (SECTION * np.sqrt(2.0 * np.pi * sigma2[:, None, None]))
            * np.exp(-dist2 / (2.0 * sigma2[:, None, None]))
        )
    else:
        cell_volume = dx * dx * DEPTH
        conc = (
            mass_in_water_ideal[:, None, None]
            / (2.0 * np.pi * sigma2[:, None, None] * DEPTH)
            * np.exp(-(dist2 + (y_m[None, :, None] - ys) ** 2) / (2.0 * sigma2[:, None, None]))
        )
    frac = np.zeros((ny, nx))
    if land:
        frac[-3:, :] = 1.0  # a northern shore
        frac[-4, nx // 2 :] = 1.0
        conc[:, frac >= 0.5] = 0.0  # no tracer on land (the puff barely reaches the shore)
    particle_mass = MASS / PARTICLES
    counts = np.floor(conc * cell_volume / particle_mass).astype(np.int32)
    conc = np.where(counts > 0, conc, 0.0)

    if geographic:
        lon0, lat0 = 4.30, 51.40
        m_per_deg_lat = 111_200.0
        m_per_deg_lon = m_per_deg_lat * np.cos(np.deg2rad(lat0))
        x = lon0 + x_m / m_per_deg_lon
        y = lat0 + y_m / m_per_deg_lat
        x_attrs = {"units": "degrees_east", "standard_name": "longitude", "long_name": "longitude"}
        y_attrs = {"units": "degrees_north", "standard_name": "latitude", "long_name": "latitude"}
        crs_wkt = CRS.from_epsg(4326).to_wkt()
    else:
        x0, y0 = 512_000.0, 5_731_000.0
        x = x0 + x_m
        y = y0 + y_m
        x_attrs = {
            "units": "m",
            "standard_name": "projection_x_coordinate",
            "long_name": "x coordinate of cell centre",
        }
        y_attrs = {
            "units": "m",
            "standard_name": "projection_y_coordinate",
            "long_name": "y coordinate of cell centre",
        }
        crs_wkt = CRS.from_user_input(crs).to_wkt() if crs else ""

    time_attrs = {"units": time_units, "calendar": "standard", "standard_name": "time"}
    kgm3 = "kg m-3"
    ds = xr.Dataset(
        coords={
            "time": ("time", time, time_attrs),
            "y": ("y", y, y_attrs),
            "x": ("x", x, x_attrs),
            "edge": ("edge", list(EDGE_NAMES)),
        }
    )
    ds["concentration"] = (
        ("time", "y", "x"),
        conc,
        {"units": kgm3, "long_name": "depth-averaged mass concentration (box counting)"},
    )
    ds["particle_count"] = (
        ("time", "y", "x"),
        counts,
        {"units": "1", "long_name": "number of particles in cell"},
    )
    ds["concentration_max"] = (
        ("y", "x"),
        conc.max(axis=0),
        {"units": kgm3, "long_name": "maximum concentration over the output times"},
    )

    if receptors:
        names = ["intake A", "beach B", "bed C"]
        rx_m = np.array([500.0, 900.0, 1500.0])
        ry_m = np.array([0.0, 150.0, -200.0])
        ix = np.clip(np.rint(rx_m / dx).astype(int), 0, nx - 1)
        iy = np.clip(np.rint(ry_m / dx + (ny - 1) / 2.0).astype(int), 0, ny - 1)
        rx, ry = x[ix], y[iy]
        ds = ds.assign_coords(
            receptor=("receptor", names),
            receptor_x=("receptor", rx, dict(x_attrs, long_name="receptor x")),
            receptor_y=("receptor", ry, dict(y_attrs, long_name="receptor y")),
            receptor_radius=("receptor", np.zeros(3), {"units": "m", "long_name": "radius"}),
        )
        ds["receptor_concentration"] = (
            ("receptor", "time"),
            conc[:, iy, ix].T.copy(),
            {"units": kgm3, "long_name": "concentration at receptor"},
        )
        thresholds = np.full((3, 2), np.nan)
        thresholds[0] = [1.0e-3, 5.0e-3]
        thresholds[1, 0] = 2.0e-3
        ds["receptor_threshold"] = (
            ("receptor", "threshold"),
            thresholds,
            {"units": kgm3, "long_name": "concentration threshold of concern at receptor"},
        )

    # Mass budget: a share leaves through the east edge late in the run; the rest decays or stays.
    released = np.full(nt, MASS)
    decayed = MASS * (1.0 - np.exp(-DECAY * time))
    outflow = np.zeros((4, nt))
    outflow[1] = 0.05 * MASS * np.clip((time - time[nt // 2]) / time[-1], 0.0, None)
    held_dry = np.zeros(nt)
    in_water = released - decayed - outflow.sum(axis=0) - held_dry
    kg = {"units": "kg"}
    ds["budget_released"] = ("time", released, dict(kg, long_name="mass released so far"))
    ds["budget_in_water"] = ("time", in_water, dict(kg, long_name="mass in the water"))
    ds["budget_decayed"] = ("time", decayed, dict(kg, long_name="mass lost to decay"))
    ds["budget_held_dry"] = ("time", held_dry, dict(kg, long_name="mass held in dry cells"))
    ds["budget_outflow"] = (
        ("edge", "time"),
        outflow,
        dict(kg, long_name="mass that went out through the edge"),
    )
    ds["particles_in_water"] = (
        "time",
        np.full(nt, PARTICLES, dtype=np.int32),
        {"units": "1", "long_name": "number of particles in the water"},
    )
    ds["centroid_x"] = ("time", x[0] + np.interp(xc, x_m, x - x[0]), dict(x_attrs, long_name="c"))
    ds["centroid_y"] = ("time", np.full(nt, y[(ny - 1) // 2]), dict(y_attrs, long_name="c"))
    for name in ("variance_x", "variance_y"):
        ds[name] = ("time", sigma2, {"units": "m2", "long_name": f"particle {name}"})
    ds["covariance_xy"] = ("time", np.zeros(nt), {"units": "m2", "long_name": "covariance"})
    for name in ("centroid_x", "centroid_y"):
        ds[name].attrs["long_name"] = f"mass-weighted {name.replace('_', ' ')}"
        ds[name].attrs.pop("standard_name")

    if tracks:
        rng = np.random.default_rng(20240514)
        spread = np.sqrt(2.0 * DISPERSION * np.diff(time, prepend=0.0))
        steps = rng.normal(0.0, 1.0, (2, tracks, nt)) * spread
        tx_m = xs + SPEED * time[None, :] + np.cumsum(steps[0], axis=1)
        ty_m = ys + np.cumsum(steps[1], axis=1)
        # grid coordinates are linear in the local metres in both the projected and geographic case
        tx = x[0] + tx_m * (x[1] - x[0]) / dx
        ty = y[0] + (ty_m - y_m[0]) * (y[1] - y[0]) / dx
        ds["track_x"] = (("trajectory", "time"), tx, dict(x_attrs, long_name="track x"))
        ds["track_y"] = (("trajectory", "time"), ty, dict(y_attrs, long_name="track y"))

    if land:
        ds["land_fraction"] = (
            ("y", "x"),
            frac,
            {"units": "1", "long_name": "fraction of cell area that is land"},
        )

    ds.attrs = {
        "title": "Gaussian puff in an invented estuary (test fixture)",
        "seed": 20240514,
        "walkers_version": walkers.__version__,
        "scenario": '[run]\nname = "puff"\n',
        "crs_wkt": crs_wkt,
        "geographic": int(geographic),
        "caution": walkers.CAUTION,
        "source": "analytic uniform flow",
    }
    return ds
