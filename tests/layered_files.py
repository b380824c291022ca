"""Small layered flow files for the tests: sigma, s (generic forms 1 and 2) and z levels."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import netCDF4
import numpy as np

X = np.array([0.0, 100.0, 200.0])
Y = np.array([0.0, 100.0])
TIMES = np.array([0.0, 3600.0])
BED_DEPTH = np.array([[4.0, 6.0, 9.0], [5.0, 7.0, 10.0]])  # m below the datum, (y, x)
ETA = np.stack([np.full((2, 3), 0.5), np.full((2, 3), -0.25)])  # m above the datum, (t, y, x)


def _horizontal(ds: netCDF4.Dataset, *, geographic: bool = False) -> None:
    ds.createDimension("time", TIMES.size)
    ds.createDimension("y", Y.size)
    ds.createDimension("x", X.size)
    t = ds.createVariable("time", "f8", ("time",))
    t.units = "seconds since 2026-06-01T00:00:00Z"
    t[:] = TIMES
    for name, values, (std, unit) in (
        ("x", X, ("longitude", "degrees_east") if geographic else ("projection_x_coordinate", "m")),
        ("y", Y, ("latitude", "degrees_north") if geographic else ("projection_y_coordinate", "m")),
    ):
        var = ds.createVariable(name, "f8", (name,))
        var.standard_name, var.units = std, unit
        var[:] = values * (1e-3 if geographic else 1.0) + (10.0 if geographic else 0.0)


def _velocities(
    ds: netCDF4.Dataset, u: np.ndarray, v: np.ndarray, fill: bool = False, u_x: str = "x"
) -> None:
    for name, data, std, x_dim in (
        ("u", u, "eastward_sea_water_velocity", u_x),
        ("v", v, "northward_sea_water_velocity", "x"),
    ):
        var = ds.createVariable(
            name, "f8", ("time", "layer", "y", x_dim), fill_value=-999.0 if fill else None
        )
        var.standard_name, var.units = std, "m s-1"
        var[:] = np.ma.masked_invalid(data)


def write_parametric(
    path: Path,
    kind: str,
    layer_values: dict[str, np.ndarray],
    u: np.ndarray,
    v: np.ndarray,
    *,
    bounds: dict[str, np.ndarray] | None = None,
    depth_c: float = 5.0,
    edit: Any = None,
) -> Path:
    """A file with a parametric vertical coordinate ``kind`` (CF-1.8 Appendix D).

    layer_values : term ('sigma'; 's' and 'C') -> values at layer midpoints.
    bounds : the same terms -> (layers, 2) face values, or None for none.
    u, v : (time, layer, y, x) m s-1.
    edit : called with the open dataset before closing (to break it on purpose).
    """
    first = "sigma" if kind == "ocean_sigma_coordinate" else "s"
    n = layer_values[first].size
    with netCDF4.Dataset(path, "w") as ds:
        _horizontal(ds)
        ds.createDimension("layer", n)
        ds.createDimension("nv", 2)
        eta = ds.createVariable("zeta", "f8", ("time", "y", "x"))
        eta.units = "m"
        eta[:] = ETA
        h = ds.createVariable("h", "f8", ("y", "x"))
        h.units = "m"
        h[:] = BED_DEPTH
        coord = ds.createVariable("layer", "f8", ("layer",))
        coord.standard_name, coord.positive = kind, "up"
        coord[:] = layer_values[first]
        if kind == "ocean_sigma_coordinate":
            coord.formula_terms = "sigma: layer eta: zeta depth: h"
        else:
            c = ds.createVariable("Cs", "f8", ("layer",))
            c[:] = layer_values["C"]
            dc = ds.createVariable("hc", "f8", ())
            dc.units = "m"
            dc[:] = depth_c
            coord.formula_terms = "s: layer C: Cs eta: zeta depth: h depth_c: hc"
        if bounds is not None:
            coord.bounds = "layer_bnds"
            b = ds.createVariable("layer_bnds", "f8", ("layer", "nv"))
            b[:] = bounds[first]
            if "C" in bounds:
                cb = ds.createVariable("Cs_bnds", "f8", ("layer", "nv"))
                cb[:] = bounds["C"]
                b.formula_terms = "s: layer_bnds C: Cs_bnds eta: zeta depth: h depth_c: hc"
        _velocities(ds, u, v)
        if edit is not None:
            edit(ds)
    return path


def write_z_levels(
    path: Path,
    levels: np.ndarray,
    u: np.ndarray,
    v: np.ndarray,
    total_depth: np.ndarray,
    *,
    positive: str = "down",
    bounds: np.ndarray | None = None,
    geographic: bool = True,
    u_faces: np.ndarray | None = None,
) -> Path:
    """A z-level file (CF-1.8 §4.3.1): ``levels`` in m (positive as given), velocities with NaN
    (written as fill values) below the bed, and the total water depth (y, x). ``u_faces``: x of
    u on the cell faces (a staggered grid; projected only)."""
    with netCDF4.Dataset(path, "w") as ds:
        _horizontal(ds, geographic=geographic)
        ds.createDimension("layer", levels.size)
        ds.createDimension("nv", 2)
        coord = ds.createVariable("layer", "f8", ("layer",))
        coord.standard_name = "depth" if positive == "down" else "height"
        coord.units, coord.positive, coord.axis = "m", positive, "Z"
        coord[:] = levels
        if bounds is not None:
            coord.bounds = "layer_bnds"
            ds.createVariable("layer_bnds", "f8", ("layer", "nv"))[:] = bounds
        d = ds.createVariable("depth", "f8", ("y", "x"))
        d.standard_name, d.units = "sea_floor_depth_below_sea_surface", "m"
        d[:] = total_depth
        if u_faces is not None:
            ds.createDimension("x_face", u_faces.size)
            xf = ds.createVariable("x_face", "f8", ("x_face",))
            xf.standard_name, xf.units = "projection_x_coordinate", "m"
            xf[:] = u_faces
        _velocities(ds, u, v, fill=True, u_x="x" if u_faces is None else "x_face")
    return path
