"""Curvilinear flow files for the tests, written as ocean models write them: 2-D coordinates
named in a ``coordinates`` attribute (CF-1.8 §5.2), cell bounds (§7.1) or none, a grid mapping
or lon/lat, velocities at cell centres (eastward/northward) or on the cell faces (Arakawa C,
along the grid axes), an optional grid-angle variable, and land as a mask."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import netCDF4
import numpy as np

Velocity = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]


def polar_corners(r_faces: np.ndarray, theta_faces: np.ndarray, centre=(0.0, 0.0)):
    """Corners (ny + 1, nx + 1) of a polar grid: i along the radius, j along the angle (rad)."""
    r, th = np.meshgrid(r_faces, theta_faces)
    return centre[0] + r * np.cos(th), centre[1] + r * np.sin(th)


def rotated_corners(nx: int, ny: int, dx: float, dy: float, angle: float, origin=(0.0, 0.0)):
    """Corners of a rectangular grid of nx by ny cells of dx by dy metres, its i axis turned
    ``angle`` radians anticlockwise from east, its first corner at ``origin``."""
    a, b = np.meshgrid(np.arange(nx + 1) * dx, np.arange(ny + 1) * dy)
    c, s = np.cos(angle), np.sin(angle)
    return origin[0] + a * c - b * s, origin[1] + a * s + b * c


def centres_of(cx: np.ndarray, cy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return (
        0.25 * (cx[:-1, :-1] + cx[:-1, 1:] + cx[1:, :-1] + cx[1:, 1:]),
        0.25 * (cy[:-1, :-1] + cy[:-1, 1:] + cy[1:, :-1] + cy[1:, 1:]),
    )


def write_curvilinear(
    path: Path,
    corner_x: np.ndarray,
    corner_y: np.ndarray,
    velocity: Velocity,
    *,
    depth: float | np.ndarray = 10.0,
    land: np.ndarray | None = None,
    times: np.ndarray | None = None,
    staggered: bool = False,
    bounds: bool = True,
    angle_variable: bool = False,
    geographic: bool = False,
    epsg: int = 32630,
    centre_override: tuple[np.ndarray, np.ndarray] | None = None,
) -> Path:
    """Write a steady (or repeated-frame) curvilinear flow file.

    velocity(x, y) gives eastward and northward velocity (m s-1) at world points. At cell
    centres the file holds eastward/northward components (or, with ``angle_variable``, the
    components along the grid axes with the grid angle beside them); ``staggered`` puts u on the
    faces between cells along i and v along j, as components along the grid axes.
    """
    ny, nx = corner_x.shape[0] - 1, corner_x.shape[1] - 1
    cx, cy = centre_override or centres_of(corner_x, corner_y)
    times = np.array([0.0]) if times is None else times
    with netCDF4.Dataset(path, "w") as ds:
        ds.Conventions = "CF-1.8"
        ds.createDimension("time", None)
        ds.createDimension("j", ny)
        ds.createDimension("i", nx)
        ds.createDimension("corner", 4)
        t = ds.createVariable("frame_time", "f8", ("time",))
        t.units, t.standard_name = "seconds since 2026-04-01 00:00:00", "time"
        t[:] = times
        if geographic:
            names = ("lon_centre", "lat_centre")
            attrs = (("longitude", "degrees_east"), ("latitude", "degrees_north"))
        else:
            names = ("x_centre", "y_centre")
            attrs = (("projection_x_coordinate", "m"), ("projection_y_coordinate", "m"))
            crs = ds.createVariable("crs", "i4")
            crs.grid_mapping_name = "transverse_mercator"
            from pyproj import CRS

            crs.crs_wkt = CRS.from_epsg(epsg).to_wkt()
        for name, values, (std, unit), corner in zip(
            names, (cx, cy), attrs, (corner_x, corner_y), strict=True
        ):
            var = ds.createVariable(name, "f8", ("j", "i"))
            var.standard_name, var.units = std, unit
            var[:] = values
            if bounds:
                var.bounds = name.replace("_centre", "_corners")
                b = ds.createVariable(
                    name.replace("_centre", "_corners"), "f8", ("j", "i", "corner")
                )
                b[:] = np.stack(
                    [corner[:-1, :-1], corner[:-1, 1:], corner[1:, 1:], corner[1:, :-1]], axis=-1
                )
        coords = " ".join(names)
        extra = {} if geographic else {"grid_mapping": "crs"}
        h = ds.createVariable("depth", "f8", ("j", "i"))
        h.standard_name, h.units, h.coordinates = "sea_floor_depth_below_geoid", "m", coords
        h.long_name = "water depth"
        h[:] = np.broadcast_to(depth, (ny, nx))
        # the reader takes a depth variable: name it as the depth role
        h.standard_name = "sea_floor_depth_below_sea_surface"
        if land is not None:
            mask = ds.createVariable("water_mask", "f8", ("j", "i"))
            mask.long_name, mask.coordinates = "water (1) or land (0) at the cell centres", coords
            mask.flag_values = np.array([0.0, 1.0])
            mask.flag_meanings = "land water"
            mask[:] = np.where(land, 0.0, 1.0)
        for k, v in extra.items():
            h.setncattr(k, v)
        if staggered:
            _staggered_velocity(ds, corner_x, corner_y, velocity, times, geographic, extra)
        else:
            ue, vn = velocity(cx, cy)
            std = ("eastward_sea_water_velocity", "northward_sea_water_velocity")
            if angle_variable:
                # the angle of the i axis from east, anticlockwise (CF standard name table)
                dxi = 0.5 * (
                    corner_x[:-1, 1:] - corner_x[:-1, :-1] + corner_x[1:, 1:] - corner_x[1:, :-1]
                )
                dyi = 0.5 * (
                    corner_y[:-1, 1:] - corner_y[:-1, :-1] + corner_y[1:, 1:] - corner_y[1:, :-1]
                )
                theta = np.arctan2(dyi, dxi)
                ang = ds.createVariable("angle", "f8", ("j", "i"))
                ang.standard_name, ang.units = "angle_of_rotation_from_east_to_x", "radians"
                ang[:] = theta
                c, s = np.cos(theta), np.sin(theta)
                ue, vn = ue * c + vn * s, -ue * s + vn * c
                std = ("sea_water_x_velocity", "sea_water_y_velocity")
            for name, data, sn in zip(("u", "v"), (ue, vn), std, strict=True):
                var = ds.createVariable(name, "f8", ("time", "j", "i"))
                var.standard_name, var.units, var.coordinates = sn, "m s-1", coords
                for k2, v2 in extra.items():
                    var.setncattr(k2, v2)
                var[:] = np.broadcast_to(data, (times.size, ny, nx))
    return path


def _staggered_velocity(ds, corner_x, corner_y, velocity, times, geographic, extra) -> None:
    """u on the inner faces between cells along i (xi_u = nx - 1), v along j (eta_v = ny - 1),
    each the component along its grid axis (the unit vector between the two cell centres)."""
    ny, nx = corner_x.shape[0] - 1, corner_x.shape[1] - 1
    cx, cy = centres_of(corner_x, corner_y)
    ds.createDimension("i_face", nx - 1)
    ds.createDimension("j_face", ny - 1)
    # face midpoints between neighbouring centres
    ux, uy = 0.5 * (cx[:, 1:] + cx[:, :-1]), 0.5 * (cy[:, 1:] + cy[:, :-1])
    vx, vy = 0.5 * (cx[1:] + cx[:-1]), 0.5 * (cy[1:] + cy[:-1])
    ex, ey = cx[:, 1:] - cx[:, :-1], cy[:, 1:] - cy[:, :-1]
    fx, fy = cx[1:] - cx[:-1], cy[1:] - cy[:-1]
    ue, un = velocity(ux, uy)
    ve, vn = velocity(vx, vy)
    u_along = (ue * ex + un * ey) / np.hypot(ex, ey)
    v_along = (ve * fx + vn * fy) / np.hypot(fx, fy)
    for name, (px, py), dims, data in (
        ("u", (ux, uy), ("j", "i_face"), u_along),
        ("v", (vx, vy), ("j_face", "i"), v_along),
    ):
        cnames = (f"x_{name}", f"y_{name}") if not geographic else (f"lon_{name}", f"lat_{name}")
        units = ("m", "m") if not geographic else ("degrees_east", "degrees_north")
        stds = (
            ("projection_x_coordinate", "projection_y_coordinate")
            if not geographic
            else ("longitude", "latitude")
        )
        for cname, vals, unit, std in zip(cnames, (px, py), units, stds, strict=True):
            c = ds.createVariable(cname, "f8", dims)
            c.units, c.standard_name = unit, std
            c[:] = vals
        var = ds.createVariable(name, "f8", ("time", *dims))
        var.units, var.coordinates = "m s-1", " ".join(cnames)
        var.long_name = f"depth-averaged velocity along the grid axis {'i' if name == 'u' else 'j'}"
        for k, v in extra.items():
            var.setncattr(k, v)
        var[:] = np.broadcast_to(data, (times.size, *data.shape))
