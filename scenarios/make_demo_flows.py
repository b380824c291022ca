"""Write the demo flow files: Saltmarsh Estuary (depth-averaged, layered, and layered on a
curvilinear grid: see demo_curvilinear.py), Millbrook Canal.

Usage::

    python scenarios/make_demo_flows.py [--outdir DIR]

Both places, their bathymetry, tide and discharges are invented. The files are CF-1.8 NetCDF on a
projected grid (WGS 84 / UTM zone 30N, EPSG:32630, placed over open sea so that no real coast lies
under them), with depth-averaged velocities, a time-varying water depth and a land mask. The
output is deterministic: no random numbers are used.

Mass consistency. Each flow is built from discharges on the cell faces of a finite-volume grid
that close the depth-integrated continuity equation

    d(eta)/dt + d(h u)/dx + d(h v)/dy = 0

(Vreugdenhil 1994, Numerical Methods for Shallow-Water Flow, ch. 2 — from memory) cell by cell,
to round-off. The stored cell-centre unit discharges are the means of the two opposite face
discharges of each cell; velocities are these divided by the depth.

Estuary (long-wave approximation: the water level eta(t) is uniform over the domain):

1. Water level: M2-like tide eta(t) = A cos(2 pi (t - t_HW) / T), A = 1.0 m, T = 12.42 h, rounded
   to 2**-10 m so that depth = eta - bed is exact in float32. Its rate d(eta)/dt at frame n is the
   central difference (eta(t_n + dt) - eta(t_n - dt)) / (2 dt) of the frame interval dt.
2. Wet cells: water cells with depth >= 0.10 m; the rest of the water cells are dry (depth and
   velocity written as 0).
3. Along-channel (northward) discharge through the row of faces between rows j-1 and j:
   Q(j) = d(eta)/dt * (wet area north of the face) - Q_river (the tidal prism upstream plus the
   river). It is shared among the open faces (wet on both sides) in proportion to c h**(5/3)
   (Manning-like conveyance of the face depth h; c = 1, except 0 on faces that touch the
   dead-end harbour basin, which fills and empties sideways through its mouth).
4. Cross-channel (eastward) face discharges follow, row by row, from continuity of each cell,
   accumulated from the west bank (zero flux there); they close to round-off at the east bank
   because step 3 balances each row as a whole. The wet cells of every row form one contiguous
   run (the bed rises monotonically toward both banks), which the builder checks.

Layered estuary (saltmarsh_estuary_layered_flow.nc): the estuary's flow over the demo scenario's
day in four sigma layers (CF-1.8 Appendix D, ocean_sigma_coordinate, with bounds; formula_terms
name the water level zeta and the bed depth). Each layer's velocity is the depth mean times a
layer factor from a 1/7 power-law profile; the factors weighted by the layer thicknesses average
exactly 1, so the thickness-weighted depth mean is the depth-averaged flow.

Canal: a constant discharge Q over a fixed cross-section; q = u h is shared across the section in
proportion to h**(5/3) (u proportional to h**(2/3)), uniform along the canal, v = 0.
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import xarray as xr
from pyproj import CRS
from scipy import ndimage

from walkers import CAUTION, __version__

EPSG = 32630
TIME_UNITS = "seconds since 2026-05-04T00:00:00Z"
DRY_DEPTH = 0.10  # m: cells shallower than this are dry
VELOCITY_QUANTUM = 2.0**-16  # m s-1: stored velocities are multiples of this (keeps files small)
LEVEL_QUANTUM = 2.0**-10  # m: water level and bed level are multiples of this

# --- Saltmarsh Estuary (invented) -------------------------------------------------------------
ESTUARY_ORIGIN = (430000.0, 4930000.0)  # UTM 30N easting, northing of the south-west corner (m)
ESTUARY_CELL = 100.0  # m
ESTUARY_SHAPE = (120, 60)  # rows (south to north), columns (west to east)
TIDE_AMPLITUDE = 1.0  # m
TIDE_PERIOD = 12.42 * 3600.0  # s
TIDE_HIGH_WATER = 3.0 * 3600.0  # s after the time origin
RIVER_DISCHARGE = 80.0  # m3 s-1
ESTUARY_FRAME_INTERVAL = 1800.0  # s
ESTUARY_DURATION = 3 * 86400.0  # s
BASIN_CONVEYANCE = 0.0  # share factor of the dead-end harbour basin: no through-current
BASIN_ROWS = (38, 46)  # rows of the harbour basin (half-open)
BASIN_BED = -6.0  # m relative to mean sea level (dredged)
BASIN_EAST_OF_BANK = 500.0  # m: how far the basin is cut into the east bank

# Places for the lead's scenario (UTM 30N, m); each lies in a water cell (tests check it).
ESTUARY_PLACES = {
    "berth": (434150.0, 4934250.0),  # release point: quay at the head of the harbour basin
    "bathing_beach": (431850.0, 4930650.0),  # seaward west shore at the low-water line
    "shellfish_bed": (431650.0, 4932250.0),  # west tidal flat, dries at low water
    "water_intake": (433250.0, 4940450.0),  # upstream channel, always wet
}

# Layered Saltmarsh Estuary: the same flow in sigma layers (surface first), over the demo
# scenario's day (ESTUARY_LAYERED_SPAN, s from the time origin) only, to keep the file small.
ESTUARY_SIGMA_BOUNDS = ((-0.125, 0.0), (-0.25, -0.125), (-0.5, -0.25), (-1.0, -0.5))
ESTUARY_LAYERED_SPAN = (3 * 3600.0, 27 * 3600.0)  # s
PROFILE_QUANTUM = 2.0**-8  # layer factors are multiples of this

# --- Millbrook Canal (invented) ---------------------------------------------------------------
CANAL_ORIGIN = (440000.0, 4935950.0)  # UTM 30N of the south-west corner (m)
CANAL_CELL = (20.0, 10.0)  # m along (x), across (y)
CANAL_LENGTH = 8000.0  # m
CANAL_SECTION_DEPTHS = (2.0, 3.5, 4.0, 4.0, 3.5, 2.0)  # m, water rows south to north
CANAL_BANK_ROWS = 2  # land rows on each side
CANAL_DISCHARGE = 57.0  # m3 s-1 (mean velocity 0.30 m s-1)

CANAL_PLACES = {
    "dye_release": (441010.0, 4936000.0),  # 1 km downstream of the west end, mid-canal
    "lock": (444010.0, 4936000.0),  # 4 km
    "water_intake": (447010.0, 4935975.0),  # 7 km, in the water row next to the south bank
}


@dataclass(frozen=True)
class EstuaryGeometry:
    """Cell-centre grid and bed of the estuary, in local coordinates (m from the SW corner)."""

    x: np.ndarray  # (nx,) m
    y: np.ndarray  # (ny,) m
    bed: np.ndarray  # (ny, nx) bed level above mean sea level, m (negative under water)
    water: np.ndarray  # (ny, nx) bool: not permanent land
    conveyance: np.ndarray  # (ny, nx) share factor c of step 3


def _smoothstep(s: np.ndarray) -> np.ndarray:
    s = np.clip(s, 0.0, 1.0)
    return s * s * (3.0 - 2.0 * s)


def estuary_geometry() -> EstuaryGeometry:
    """Bed and land of the invented Saltmarsh Estuary.

    A funnel of half-width W(y) = 250 + 2150 exp(-y / 5 km) m around a gently bending centreline,
    opening to the sea at the south edge. Across it (r = distance from the centreline / W) the bed
    rises from the thalweg (-D(y), D = 3.5 + 3.5 exp(-y / 6 km) m) to -1.5 m at r = 0.45 (a
    smoothstep), then linearly across the tidal flats to +0.8 m at the bank (r = 1); land beyond.
    A dredged harbour basin (bed -6 m) is cut into the east bank.
    """
    ny, nx = ESTUARY_SHAPE
    d = ESTUARY_CELL
    x = (np.arange(nx) + 0.5) * d
    y = (np.arange(ny) + 0.5) * d
    X, Y = np.meshgrid(x, y)
    centre = 3000.0 - 300.0 * np.sin(2.0 * np.pi * Y / 16000.0)
    half_width = 250.0 + 2150.0 * np.exp(-Y / 5000.0)
    thalweg = 3.5 + 3.5 * np.exp(-Y / 6000.0)
    r = np.abs(X - centre) / half_width
    core = 0.45
    bed = np.where(
        r < core,
        -thalweg + (thalweg - 1.5) * _smoothstep(r / core),
        -1.5 + 2.3 * (r - core) / (1.0 - core),
    )
    water = r <= 1.0
    basin = np.zeros_like(water)
    j0, j1 = BASIN_ROWS
    basin[j0:j1] = (X[j0:j1] - centre[j0:j1] >= 0.40 * half_width[j0:j1]) & (
        X[j0:j1] <= centre[j0:j1] + half_width[j0:j1] + BASIN_EAST_OF_BANK
    )
    bed = np.where(basin, BASIN_BED, bed)
    water = water | basin
    bed = np.round(bed / LEVEL_QUANTUM) * LEVEL_QUANTUM
    conveyance = np.where(basin, BASIN_CONVEYANCE, 1.0)
    return EstuaryGeometry(x=x, y=y, bed=bed, water=water, conveyance=conveyance)


def tide_level(t: np.ndarray) -> np.ndarray:
    """Water level (m above mean sea level) at times ``t`` (s), rounded to 2**-10 m."""
    eta = TIDE_AMPLITUDE * np.cos(2.0 * np.pi * (np.asarray(t) - TIDE_HIGH_WATER) / TIDE_PERIOD)
    return np.round(eta / LEVEL_QUANTUM) * LEVEL_QUANTUM


def estuary_face_discharges(
    geom: EstuaryGeometry, eta: float, deta_dt: float, river: float = RIVER_DISCHARGE
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Face discharges of one frame that close continuity in every wet cell.

    Parameters
    ----------
    geom : the estuary geometry.
    eta : water level (m above mean sea level).
    deta_dt : its rate of change (m s-1).
    river : river discharge entering at the north edge (m3 s-1).

    Returns
    -------
    depth : (ny, nx) water depth (m), 0 in dry and land cells.
    qx_face : (ny, nx + 1) eastward discharge through the west face of each column (m3 s-1).
    qy_face : (ny + 1, nx) northward discharge through the south face of each row (m3 s-1).
    """
    ny, nx = geom.bed.shape
    area = ESTUARY_CELL * ESTUARY_CELL
    h = np.where(geom.water, eta - geom.bed, 0.0)
    wet = geom.water & (h >= DRY_DEPTH)
    labels, _ = ndimage.label(wet)
    sea_labels = np.unique(labels[0][wet[0]])
    if sea_labels.size != 1:
        raise RuntimeError(f"eta = {eta} m: the sea edge is not one wet run")
    wet &= labels == sea_labels[0]
    h = np.where(wet, h, 0.0)
    for j in range(ny):
        idx = np.flatnonzero(wet[j])
        if idx.size == 0 or idx[-1] - idx[0] + 1 != idx.size:
            raise RuntimeError(f"eta = {eta} m: the wet cells of row {j} are not one run")

    # Step 3: along-channel discharge, tidal prism north of each face row minus the river.
    wet_area_rows = wet.sum(axis=1) * area
    area_north = np.concatenate([np.cumsum(wet_area_rows[::-1])[::-1], [0.0]])
    q_total = deta_dt * area_north - river
    h_pad = np.concatenate([h[:1], h, h[-1:]])
    wet_pad = np.concatenate([wet[:1], wet, wet[-1:]])
    c_pad = np.concatenate([geom.conveyance[:1], geom.conveyance, geom.conveyance[-1:]])
    face_open = wet_pad[:-1] & wet_pad[1:]
    face_depth = 0.5 * (h_pad[:-1] + h_pad[1:])
    weight = np.where(face_open, np.minimum(c_pad[:-1], c_pad[1:]) * face_depth ** (5 / 3), 0.0)
    qy_face = q_total[:, None] * weight / weight.sum(axis=1, keepdims=True)

    # Step 4: cross-channel discharge from continuity of each cell, from the west bank eastward.
    storage = np.where(wet, deta_dt * area, 0.0)
    net_y = qy_face[1:] - qy_face[:-1]
    qx_face = np.zeros((ny, nx + 1))
    qx_face[:, 1:] = -np.cumsum(net_y + storage, axis=1)
    closure = np.abs(qx_face[:, -1]).max()
    scale = max(np.abs(q_total).max(), 1.0)
    if closure > 1e-9 * scale:
        raise RuntimeError(f"eta = {eta} m: rows do not close ({closure} m3/s left)")
    # faces with a dry or land cell beside them carry nothing (drops the round-off remainder)
    qx_face[:, 1:-1] = np.where(wet[:, :-1] & wet[:, 1:], qx_face[:, 1:-1], 0.0)
    qx_face[:, -1] = 0.0
    return h, qx_face, qy_face


def centre_velocities(
    depth: np.ndarray, qx_face: np.ndarray, qy_face: np.ndarray, dx: float, dy: float
) -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre velocities (m s-1) from face discharges (m3 s-1): mean face unit discharge / h.

    Zero where ``depth`` is 0 (dry or land); rounded to multiples of ``VELOCITY_QUANTUM``.
    """
    qx = 0.5 * (qx_face[:, :-1] + qx_face[:, 1:]) / dy
    qy = 0.5 * (qy_face[:-1] + qy_face[1:]) / dx
    wet = depth > 0.0
    safe = np.where(wet, depth, 1.0)
    u = np.where(wet, qx / safe, 0.0)
    v = np.where(wet, qy / safe, 0.0)
    return (
        np.round(u / VELOCITY_QUANTUM) * VELOCITY_QUANTUM,
        np.round(v / VELOCITY_QUANTUM) * VELOCITY_QUANTUM,
    )


def _grid_variables(x: np.ndarray, y: np.ndarray, times: np.ndarray) -> dict[str, xr.Variable]:
    crs = CRS.from_epsg(EPSG).to_cf()
    return {
        "x": xr.Variable(
            "x",
            x,
            {
                "standard_name": "projection_x_coordinate",
                "long_name": "easting of cell centre",
                "units": "m",
                "axis": "X",
            },
        ),
        "y": xr.Variable(
            "y",
            y,
            {
                "standard_name": "projection_y_coordinate",
                "long_name": "northing of cell centre",
                "units": "m",
                "axis": "Y",
            },
        ),
        "time": xr.Variable(
            "time",
            times,
            {
                "standard_name": "time",
                "long_name": "time of flow frame",
                "units": TIME_UNITS,
                "calendar": "standard",
                "axis": "T",
            },
        ),
        "crs": xr.Variable((), np.int32(0), crs),
    }


def _flow_variables(
    u: np.ndarray, v: np.ndarray, depth: np.ndarray, water: np.ndarray
) -> dict[str, xr.Variable]:
    dims = ("time", "y", "x")
    common = {"grid_mapping": "crs"}
    dry_note = (
        f"0 where dry (water depth below {DRY_DEPTH:.2f} m) or land; stored as multiples of "
        f"2**{int(np.log2(VELOCITY_QUANTUM))} m s-1"
    )
    return {
        "u": xr.Variable(
            dims,
            u.astype(np.float32),
            {
                "standard_name": "eastward_sea_water_velocity",
                "long_name": "depth-averaged eastward velocity",
                "units": "m s-1",
                "comment": dry_note,
                **common,
            },
        ),
        "v": xr.Variable(
            dims,
            v.astype(np.float32),
            {
                "standard_name": "northward_sea_water_velocity",
                "long_name": "depth-averaged northward velocity",
                "units": "m s-1",
                "comment": dry_note,
                **common,
            },
        ),
        "depth": xr.Variable(
            dims,
            depth.astype(np.float32),
            {
                "standard_name": "sea_floor_depth_below_sea_surface",
                "long_name": "water depth",
                "units": "m",
                "comment": f"0 where dry (below {DRY_DEPTH:.2f} m) or land",
                **common,
            },
        ),
        "water_mask": xr.Variable(
            ("y", "x"),
            water.astype(np.int8),
            {
                "standard_name": "sea_binary_mask",
                "long_name": "water (1) or permanent land (0)",
                "units": "1",
                "flag_values": np.array([0, 1], dtype=np.int8),
                "flag_meanings": "land water",
                "comment": "tidal flats are water cells; whether they are wet is told by depth",
                **common,
            },
        ),
    }


def _global_attrs(title: str, comment: str) -> dict[str, str]:
    return {
        "Conventions": "CF-1.8",
        "title": title,
        "institution": "invented demonstration data for walkers",
        "source": f"scenarios/make_demo_flows.py (walkers {__version__}); synthetic, not a model",
        "history": "built by scenarios/make_demo_flows.py; " + comment,
        "comment": comment,
        "references": (
            "depth-integrated continuity equation: Vreugdenhil 1994, Numerical Methods for "
            "Shallow-Water Flow (from memory)"
        ),
        "caution": CAUTION,
    }


def build_estuary() -> xr.Dataset:
    """The Saltmarsh Estuary flow: 3 days of frames every 30 min (see the module docstring)."""
    geom = estuary_geometry()
    dt = ESTUARY_FRAME_INTERVAL
    times = np.arange(0.0, ESTUARY_DURATION + 0.5 * dt, dt)
    eta = tide_level(times)
    deta_dt = (tide_level(times + dt) - tide_level(times - dt)) / (2.0 * dt)
    ny, nx = geom.bed.shape
    u = np.zeros((times.size, ny, nx))
    v = np.zeros_like(u)
    depth = np.zeros_like(u)
    for n in range(times.size):
        h, qx_face, qy_face = estuary_face_discharges(geom, float(eta[n]), float(deta_dt[n]))
        depth[n] = h
        u[n], v[n] = centre_velocities(h, qx_face, qy_face, ESTUARY_CELL, ESTUARY_CELL)
    x0, y0 = ESTUARY_ORIGIN
    variables = _grid_variables(geom.x + x0, geom.y + y0, times)
    variables.update(_flow_variables(u, v, depth, geom.water))
    variables["water_level"] = xr.Variable(
        "time",
        eta.astype(np.float32),
        {
            "standard_name": "sea_surface_height_above_mean_sea_level",
            "long_name": "water level (uniform over the domain)",
            "units": "m",
        },
    )
    comment = (
        "Saltmarsh Estuary is an invented place. Sea at the south edge, river at the north edge. "
        f"M2-like tide, amplitude {TIDE_AMPLITUDE} m, period {TIDE_PERIOD / 3600:.2f} h, uniform "
        f"water level; river discharge {RIVER_DISCHARGE:.0f} m3/s. Mass-consistent construction: "
        "along-channel discharge through each row of faces = d(eta)/dt x wet area upstream - "
        "river discharge, shared among open faces in proportion to c h^(5/3) (c = "
        f"{BASIN_CONVEYANCE:g} on faces touching the dead-end harbour basin, else 1); "
        "cross-channel discharge from "
        "continuity of each cell, accumulated from the west bank; so d(eta)/dt + div(h u) = 0 "
        "closes on the cell faces to round-off. Stored centre values are means of opposite face "
        "unit discharges, divided by depth. d(eta)/dt is the central difference over one frame "
        f"interval. Cells with depth < {DRY_DEPTH:.2f} m are dry (depth and velocity 0). "
        "Face discharges rebuilt from the stored centre values as means of neighbours leave a "
        "second-order residual (about 0.5 % of the cells' gross exchange)."
    )
    return xr.Dataset(
        variables, attrs=_global_attrs("Saltmarsh Estuary (invented): tidal flow", comment)
    )


def layer_factors() -> np.ndarray:
    """Layer velocity / depth mean of each sigma layer (surface first), from a 1/7 power law.

    The power law u(zeta) / U = (8/7) zeta**(1/7), zeta the height above the bed over the depth
    (depth mean 1; common practice for open-channel profiles, e.g. Chanson 2004, The Hydraulics
    of Open Channel Flow, ch. 3 — from memory), averaged over each layer, rounded to
    PROFILE_QUANTUM; the bottom layer's factor then closes the thickness-weighted mean to exactly 1
    (all thicknesses are powers of two, so the sum is exact).
    """
    bounds = np.asarray(ESTUARY_SIGMA_BOUNDS)
    lo, hi = 1.0 + bounds[:, 0], 1.0 + bounds[:, 1]
    thickness = hi - lo
    means = (hi ** (8 / 7) - lo ** (8 / 7)) / thickness
    factors = np.round(means / PROFILE_QUANTUM) * PROFILE_QUANTUM
    factors[-1] = (1.0 - np.sum(thickness[:-1] * factors[:-1])) / thickness[-1]
    return factors


def build_estuary_layered(flat: xr.Dataset | None = None) -> xr.Dataset:
    """The Saltmarsh Estuary flow in four sigma layers (CF-1.8 Appendix D,
    ocean_sigma_coordinate, with bounds), whose thickness-weighted depth mean is the
    depth-averaged flow of :func:`build_estuary` (``flat``, built if not given)."""
    flat = build_estuary() if flat is None else flat
    first, last = (int(t / ESTUARY_FRAME_INTERVAL) for t in ESTUARY_LAYERED_SPAN)
    flat = flat.isel(time=slice(first, last + 1))
    geom = estuary_geometry()
    bounds = np.asarray(ESTUARY_SIGMA_BOUNDS)
    factors = xr.DataArray(layer_factors(), dims="layer")
    common = {"grid_mapping": "crs"}
    variables = {name: flat.variables[name] for name in ("x", "y", "time", "crs", "water_mask")}
    variables["layer"] = xr.Variable(
        "layer",
        bounds.mean(axis=1),
        {
            "standard_name": "ocean_sigma_coordinate",
            "long_name": "sigma at layer centre (0 surface, -1 bed)",
            "units": "1",
            "positive": "up",
            "axis": "Z",
            "formula_terms": "sigma: layer eta: zeta depth: bed_depth",
            "bounds": "layer_bounds",
        },
    )
    variables["layer_bounds"] = xr.Variable(
        ("layer", "bounds"), bounds, {"long_name": "sigma at the layer faces"}
    )
    level = flat["water_level"].values.astype(np.float64)
    ny, nx = geom.bed.shape
    variables["zeta"] = xr.Variable(
        ("time", "y", "x"),
        np.broadcast_to(level[:, None, None], (level.size, ny, nx)).astype(np.float32),
        {
            "standard_name": "sea_surface_height_above_mean_sea_level",
            "long_name": "water level",
            "units": "m",
            **common,
        },
    )
    variables["bed_depth"] = xr.Variable(
        ("y", "x"),
        (-geom.bed).astype(np.float32),
        {
            "standard_name": "sea_floor_depth_below_mean_sea_level",
            "long_name": "bed depth below mean sea level (negative above it)",
            "units": "m",
            **common,
        },
    )
    for name in ("u", "v"):
        layered = (flat[name].astype(np.float64) * factors).transpose("time", "layer", "y", "x")
        attrs = dict(flat[name].attrs)
        attrs["long_name"] = attrs["long_name"].replace("depth-averaged", "layer")
        attrs["comment"] = (
            "depth mean x a 1/7 power-law layer factor; the thickness-weighted mean over the "
            "layers is the depth-averaged velocity of saltmarsh_estuary_flow.nc"
        )
        variables[name] = xr.Variable(layered.dims, layered.values.astype(np.float32), attrs)
    comment = (
        "Saltmarsh Estuary is an invented place. The flow of saltmarsh_estuary_flow.nc from "
        f"{ESTUARY_LAYERED_SPAN[0] / 3600:.0f} h to {ESTUARY_LAYERED_SPAN[1] / 3600:.0f} h "
        "after the time origin in four sigma layers (thicknesses 1/8, "
        "1/8, 1/4 and 1/2 of the water depth, surface first): each layer's velocity is the "
        "depth mean times a layer factor from a 1/7 power-law profile, the factors weighted by "
        "the layer thicknesses averaging exactly 1. Total water depth = bed_depth + zeta."
    )
    return xr.Dataset(
        variables,
        attrs=_global_attrs("Saltmarsh Estuary (invented): tidal flow in sigma layers", comment),
    )


def build_canal() -> xr.Dataset:
    """The Millbrook Canal flow: one steady frame (see the module docstring)."""
    dx, dy = CANAL_CELL
    nx = int(round(CANAL_LENGTH / dx))
    section = np.asarray(CANAL_SECTION_DEPTHS)
    bank = np.zeros(CANAL_BANK_ROWS)
    h_rows = np.concatenate([bank, section, bank])
    ny = h_rows.size
    x = (np.arange(nx) + 0.5) * dx
    y = (np.arange(ny) + 0.5) * dy
    water_rows = h_rows > 0.0
    # q = u h in proportion to h^(5/3), scaled so that the section carries CANAL_DISCHARGE.
    q_rows = CANAL_DISCHARGE * h_rows ** (5 / 3) / (np.sum(h_rows ** (5 / 3)) * dy)
    u_rows = np.where(water_rows, q_rows / np.where(water_rows, h_rows, 1.0), 0.0)
    u_rows = np.round(u_rows / VELOCITY_QUANTUM) * VELOCITY_QUANTUM
    u = np.broadcast_to(u_rows[:, None], (1, ny, nx)).copy()
    v = np.zeros_like(u)
    depth = np.broadcast_to(h_rows[:, None], (1, ny, nx)).copy()
    water = np.broadcast_to(water_rows[:, None], (ny, nx))
    x0, y0 = CANAL_ORIGIN
    variables = _grid_variables(x + x0, y + y0, np.array([0.0]))
    variables.update(_flow_variables(u, v, depth, water))
    width = water_rows.sum() * dy
    comment = (
        "Millbrook Canal is an invented place. Straight canal, "
        f"{CANAL_LENGTH / 1000:.0f} km long, {width:.0f} m wide, flowing east to a weir at the "
        f"east edge; steady discharge {CANAL_DISCHARGE:.0f} m3/s (one frame, valid at all times). "
        "Mass-consistent construction: unit discharge u h across the section in proportion to "
        "h^(5/3), normalised so the section carries the discharge; uniform along the canal; "
        "v = 0; so div(h u) = 0 exactly."
    )
    return xr.Dataset(
        variables, attrs=_global_attrs("Millbrook Canal (invented): steady flow", comment)
    )


def write_flow(ds: xr.Dataset, path: Path) -> None:
    """Write ``ds`` as NetCDF-4 with zlib compression and no fill values, via a temporary name."""
    encoding = {}
    for name, var in ds.variables.items():
        enc: dict[str, object] = {"_FillValue": None}
        if var.ndim >= 2:
            enc.update(zlib=True, complevel=6, shuffle=True)
        if var.ndim >= 3 and "time" in var.dims:
            # one frame a chunk: a reader that asks for a few frames decompresses only those
            enc["chunksizes"] = (1, *var.shape[1:])
        encoding[name] = enc
    tmp = path.with_name(path.name + ".part")
    ds.to_netcdf(tmp, format="NETCDF4", engine="netcdf4", encoding=encoding)
    tmp.replace(path)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--outdir",
        type=Path,
        default=Path(__file__).resolve().parent,
        help="folder for the NetCDF files (default: this script's folder)",
    )
    args = parser.parse_args(argv)
    args.outdir.mkdir(parents=True, exist_ok=True)
    import sys

    sys.path.insert(0, str(Path(__file__).resolve().parent))
    import demo_curvilinear

    estuary = build_estuary()
    layered = build_estuary_layered(estuary)
    # the estuary's formulas and constants, as a namespace (this module may be loaded unnamed)
    curvilinear = demo_curvilinear.build(estuary, layered, SimpleNamespace(**globals()))
    for name, ds in (
        ("saltmarsh_estuary_flow.nc", estuary),
        ("saltmarsh_estuary_layered_flow.nc", layered),
        ("saltmarsh_estuary_curvilinear_flow.nc", curvilinear),
        ("millbrook_canal_flow.nc", build_canal()),
    ):
        path = args.outdir / name
        write_flow(ds, path)
        print(f"wrote {path} ({path.stat().st_size / 1e6:.2f} MB)")
    _mesh_builder().main(["--outdir", str(args.outdir)])


def _mesh_builder():
    """scenarios/make_demo_mesh.py (Curlew Basin, a UGRID mesh), loaded from beside this file."""
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "make_demo_mesh", Path(__file__).resolve().parent / "make_demo_mesh.py"
    )
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


if __name__ == "__main__":
    main()
