"""Writers of small synthetic hydrodynamic-model NetCDF files, one per grid layout.

Every layout carries the same physical flow (:func:`velocity`), so a reader that handles the
layout correctly hands out the same velocity at the same physical points. Places and numbers are
invented.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import netCDF4
import numpy as np
from pyproj import CRS

FILL = -9999.0
T0_UNITS = "seconds since 2026-03-01T00:00:00Z"

# projected grid (m): cell centres
X = np.linspace(500.0, 2500.0, 21)  # dx = 100 m
Y = np.linspace(200.0, 1200.0, 11)  # dy = 100 m
TIMES = np.arange(5) * 3600.0  # hourly frames, s


def velocity(x: np.ndarray, y: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """The test flow (m s-1): bilinear in space, so bilinear interpolation reproduces it exactly.

    u = 0.3 + 1e-4 (y − 700) + 1e-8 (x − 1500)(y − 700) + 0.1 sin(2π t / 12 h)
    v = 0.05 + 5e-5 (x − 1500)
    """
    u = 0.3 + 1e-4 * (y - 700.0) + 1e-8 * (x - 1500.0) * (y - 700.0)
    u = u + 0.1 * np.sin(2.0 * np.pi * t / 43200.0)
    v = 0.05 + 5e-5 * (x - 1500.0) + 0.0 * y
    return u, v


def island(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """True on an invented rectangular island (land) in the projected grid."""
    return (x >= 1400.0) & (x <= 1600.0) & (y >= 600.0) & (y <= 800.0)


def centre_edges(c: np.ndarray) -> np.ndarray:
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])


def _coord(ds, name: str, values: np.ndarray, kind: str, geographic: bool) -> None:
    ds.createDimension(name, values.size)
    var = ds.createVariable(name, "f8", (name,))
    var[:] = values
    if geographic:
        var.standard_name = "longitude" if kind == "x" else "latitude"
        var.units = "degrees_east" if kind == "x" else "degrees_north"
    else:
        var.standard_name = f"projection_{kind}_coordinate"
        var.units = "m"
        var.axis = kind.upper()


def _put(ds, name: str, dims: tuple[str, ...], data: np.ndarray, order: tuple[str, ...], **attrs):
    """Write ``data`` given as (time, y, x) [or (y, x)] into variable ``name`` with ``dims``.

    ``order`` gives the generic axis names ('time', 'y', 'x') for each entry of ``dims``.
    """
    var = ds.createVariable(name, "f8", dims, fill_value=FILL)
    generic = ("time", "y", "x") if data.ndim == 3 else ("y", "x")
    arr = np.transpose(data, [generic.index(g) for g in order])
    var[:] = np.ma.masked_invalid(arr)
    for k, val in attrs.items():
        setattr(var, k, val)
    return var


def write_flow(
    path: str | Path,
    *,
    x: np.ndarray = X,
    y: np.ndarray = Y,
    times: np.ndarray = TIMES,
    flow: Callable = velocity,
    geographic: bool = False,
    order: tuple[str, str, str] = ("time", "y", "x"),
    x_descending: bool = False,
    y_descending: bool = False,
    staggered: bool = False,
    land: Callable | None = None,
    depth: float | Callable | None = 8.0,
    mask: bool = False,
    velocity_units: str = "m s-1",
    velocity_scale: float = 1.0,
    calendar: str = "standard",
    time_units: str = T0_UNITS,
    time_values: np.ndarray | None = None,
    crs: str | None = "EPSG:32633",
    grid_mapping_params: bool = False,
    levels: str | None = None,
    u_attrs: dict | None = None,
    v_attrs: dict | None = None,
    extra: Callable | None = None,
) -> Path:
    """Write one synthetic flow file; returns its path.

    x, y : cell-centre coordinates in ascending order (m, or degrees when ``geographic``); the file
        stores them reversed when ``x_descending`` / ``y_descending``.
    times : frame times (s after 2026-03-01T00:00Z), written as ``time_values`` in
        ``time_units`` / ``calendar`` when those are given.
    flow : velocity(X, Y, t) in m s-1 at physical coordinates.
    order : dimension order of the 3-D variables, e.g. ('time', 'x', 'y').
    staggered : u on (y, x_face), v on (y_face, x) (Arakawa C); depth at cell centres.
    land : function(X, Y) -> bool array of land cells; velocity and depth are fill values there.
    depth : constant depth (m), function depth(X, Y, t) (time-varying), or None (no depth variable).
    mask : write a land/sea mask (sea_binary_mask) as well.
    levels : "up" or "down": write bed level + water level instead of depth (bed positive up, or
        bed depth below the datum positive down); needs a callable ``depth`` returning
        (water_level, bed_elevation).
    extra : function(ds) adding variables.
    """
    path = Path(path)
    xs = x[::-1] if x_descending else x
    ys = y[::-1] if y_descending else y
    nt = times.size
    with netCDF4.Dataset(path, "w") as ds:
        ds.Conventions = "CF-1.8"
        ds.title = "Synthetic flow of an invented estuary"
        ds.createDimension("time", None)
        tvar = ds.createVariable("time", "f8", ("time",))
        tvar.standard_name = "time"
        tvar.units = time_units
        tvar.calendar = calendar
        tvar[:] = times if time_values is None else time_values
        _coord(ds, "x", xs, "x", geographic)
        _coord(ds, "y", ys, "y", geographic)
        if staggered:
            _coord(ds, "x_face", centre_edges(xs), "x", geographic)
            _coord(ds, "y_face", centre_edges(ys), "y", geographic)
        gm_attrs = {}
        if crs is not None:
            gm = ds.createVariable("crs", "i4")
            c = CRS.from_user_input(crs)
            if grid_mapping_params:
                for k, val in c.to_cf().items():
                    if k != "crs_wkt":
                        setattr(gm, k, val)
            else:
                gm.crs_wkt = c.to_wkt()
            gm_attrs["grid_mapping"] = "crs"

        def dims_for(xn: str, yn: str) -> tuple[str, ...]:
            return tuple({"time": "time", "x": xn, "y": yn}[o] for o in order)

        def fields(xc, yc):
            XX, YY = np.meshgrid(xc, yc)
            us, vs = zip(*(flow(XX, YY, float(t)) for t in times), strict=True)
            return XX, YY, np.stack(us), np.stack(vs)

        Xc, Yc = np.meshgrid(xs, ys)
        land_c = np.zeros(Xc.shape, bool) if land is None else land(Xc, Yc)
        if staggered:
            Xu, Yu, u, _ = fields(centre_edges(xs), ys)
            Xv, Yv, _, v = fields(xs, centre_edges(ys))
            # a face carries a velocity only between two water cells (or a water cell and the
            # open edge of the grid): the usual face mask, the product of the cell masks
            wet_c = ~land_c
            pad_x = np.pad(wet_c, ((0, 0), (1, 1)), constant_values=True)
            u = np.where((pad_x[:, :-1] & pad_x[:, 1:])[None], u, np.nan)
            pad_y = np.pad(wet_c, ((1, 1), (0, 0)), constant_values=True)
            v = np.where((pad_y[:-1] & pad_y[1:])[None], v, np.nan)
            udims, vdims = dims_for("x_face", "y"), dims_for("x", "y_face")
        else:
            _, _, u, v = fields(xs, ys)
            u = np.where(land_c[None], np.nan, u)
            v = np.where(land_c[None], np.nan, v)
            udims = vdims = dims_for("x", "y")
        ua = {"standard_name": "eastward_sea_water_velocity", "units": velocity_units}
        va = {"standard_name": "northward_sea_water_velocity", "units": velocity_units}
        ua.update(gm_attrs)
        va.update(gm_attrs)
        ua.update(u_attrs or {})
        va.update(v_attrs or {})
        ua = {k: val for k, val in ua.items() if val is not None}
        va = {k: val for k, val in va.items() if val is not None}
        _put(ds, "u", udims, u * velocity_scale, order, **ua)
        _put(ds, "v", vdims, v * velocity_scale, order, **va)
        cdims = dims_for("x", "y")
        order2 = tuple(o for o in order if o != "time")
        sdims = tuple(cdims[i] for i, o in enumerate(order) if o != "time")
        if callable(depth):
            if levels is None:
                h = np.stack([depth(Xc, Yc, float(t)) for t in times])
                h = np.where(land_c[None], np.nan, h)
                _put(
                    ds,
                    "depth",
                    cdims,
                    h,
                    order,
                    units="m",
                    standard_name="sea_floor_depth_below_sea_surface",
                    **gm_attrs,
                )
            else:
                eta = np.stack([depth(Xc, Yc, float(t))[0] for t in times])
                bed = depth(Xc, Yc, 0.0)[1]
                _put(
                    ds,
                    "zeta",
                    cdims,
                    eta,
                    order,
                    units="m",
                    standard_name="sea_surface_height_above_mean_sea_level",
                    **gm_attrs,
                )
                if levels == "up":
                    _put(
                        ds,
                        "bed",
                        sdims,
                        bed,
                        order2,
                        units="m",
                        positive="up",
                        long_name="bed level",
                    )
                else:
                    _put(
                        ds,
                        "bed",
                        sdims,
                        -bed,
                        order2,
                        units="m",
                        standard_name="sea_floor_depth_below_mean_sea_level",
                    )
        elif depth is not None:
            h = np.where(land_c, np.nan, float(depth))
            _put(
                ds,
                "depth",
                sdims,
                h,
                order2,
                units="m",
                standard_name="sea_floor_depth_below_sea_surface",
                **gm_attrs,
            )
        if mask:
            m = ds.createVariable("mask", "i1", ("y", "x"))
            m.standard_name = "sea_binary_mask"
            m[:] = (~land_c).astype(np.int8)
        if extra is not None:
            extra(ds)
    assert nt == times.size
    return path


def write_channel(path: str | Path, *, area: bool = True) -> Path:
    """A 1-D channel: u(time, x) along an invented canal, with its wetted cross-section (m2)."""
    path = Path(path)
    xs = np.linspace(0.0, 5000.0, 51)
    with netCDF4.Dataset(path, "w") as ds:
        ds.createDimension("time", None)
        t = ds.createVariable("time", "f8", ("time",))
        t.units = T0_UNITS
        t[:] = TIMES
        ds.createDimension("chainage", xs.size)
        c = ds.createVariable("chainage", "f8", ("chainage",))
        c.units = "m"
        c.long_name = "distance along the canal"
        c[:] = xs
        u = ds.createVariable("u", "f8", ("time", "chainage"))
        u.standard_name = "sea_water_x_velocity"
        u.units = "m/s"
        u[:] = 0.2 + 1e-5 * xs[None, :] + 0.0 * TIMES[:, None]
        if area:
            a = ds.createVariable("xsec", "f8", ("chainage",))
            a.units = "m2"
            a.long_name = "wetted cross-section area"
            a[:] = 40.0 + 0.002 * xs
    return path
