"""The vertical structure of a layered flow file kept for three-dimensional runs.

A depth-averaged run reduces layered velocities to their depth mean (:mod:`.layers`); a
three-dimensional run also keeps them, with the vertical velocity and the vertical diffusivity
where the file has them, as profiles on heights that are fractions of the local water depth
above the bed (0 bed, 1 surface), the coordinate of the engine's vertical step
(:mod:`walkers.engine.vertical`).

Heights of a layer's values are those of its coordinate value (the layer's point) in each
column (:func:`.layers.layer_points`; sigma, s and z coordinates, CF-1.8 §4.3 and Appendix D).
When the points lie at the same fractions of the depth everywhere (sigma coordinates) those
fractions are the levels; otherwise (z levels, s coordinates) each column's profile is
interpolated linearly to as many levels, equally spaced (the centres of equal layers), holding
the lowest and the highest value beyond the column's points.

Variables, by CF standard name (cf-standard-name-table, ../shared/cf-tables):
``upward_sea_water_velocity`` (w, m s-1) and, in this order of preference,
``ocean_vertical_tracer_diffusivity``, ``ocean_vertical_salt_diffusivity``,
``ocean_vertical_heat_diffusivity``, ``ocean_vertical_diffusivity`` (K_z, m2 s-1). They must
lie on the cell grid (the depth's points).
"""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np

from walkers.errors import InputError
from walkers.fields.netcdf.layers import VerticalCoordinate, find_vertical
from walkers.fields.netcdf.roles import _VELOCITY_UNITS, _norm_units

W_NAMES = ("upward_sea_water_velocity",)
KZ_NAMES = (
    "ocean_vertical_tracer_diffusivity",
    "ocean_vertical_salt_diffusivity",
    "ocean_vertical_heat_diffusivity",
    "ocean_vertical_diffusivity",
)
DIFFUSIVITY_UNITS = {"m2 s-1": 1.0, "m2/s": 1.0, "m^2 s^-1": 1.0, "m**2 s**-1": 1.0, "m2.s-1": 1.0}
#: Levels of a profile whose points lie at the same fractions of the depth everywhere (to this).
SAME_LEVELS = 1e-9


def _standard(var: Any) -> str:
    return str(var.getncattr("standard_name")) if "standard_name" in var.ncattrs() else ""


def find_column_variables(schema: Any) -> dict[str, tuple[Any, VerticalCoordinate]]:
    """The file's vertical velocity ("w") and vertical diffusivity ("kz"), each as its layout
    (``discovery._Layout``) and vertical coordinate; roles the file lacks are absent.
    InputError for one without layers, off the cell grid, or in units that are not SI."""
    from walkers.fields.netcdf.discovery import _Layout

    ds, path = schema.ds, schema.path
    out: dict[str, tuple[Any, VerticalCoordinate]] = {}
    for role, names, units in (
        ("w", W_NAMES, _VELOCITY_UNITS),
        ("kz", KZ_NAMES, DIFFUSIVITY_UNITS),
    ):
        found = [v for n in names for v in ds.variables.values() if _standard(v) == n]
        if not found:
            continue
        var = found[0]
        where = f"flow file {path!r}: variable {var.name!r} ({_standard(var)})"
        time_dim = schema.time_dim if schema.time_dim in var.dimensions else None
        vc = find_vertical(ds, path, var, time_dim)
        if vc is None:
            raise InputError(
                f"{where} has no vertical coordinate; give it in layers (sigma, s or z "
                "coordinates, CF-1.8 §4.3), or remove its standard_name to leave it unused"
            )
        unit = _norm_units(var.getncattr("units") if "units" in var.ncattrs() else "")
        if unit not in units:
            raise InputError(f"{where} has units {unit!r}; give one of {', '.join(units)}")
        dims = [d for d in var.dimensions if d not in (time_dim, vc.dim)]
        sized = [d for d in dims if ds.dimensions[d].size > 1]
        kinds = {schema._axis_kind(d, var.name): d for d in sized}
        if set(kinds) != {"x", "y"}:
            raise InputError(f"{where}: dimensions {var.dimensions} are not time, layers, y, x")
        depth_lay = schema.layouts.get("depth") or schema.layouts.get("bed_level")
        x, y = schema._coordinate(kinds["x"], var.name), schema._coordinate(kinds["y"], var.name)
        if depth_lay is not None and not (
            x.values.size == depth_lay.x.values.size
            and np.allclose(x.values, depth_lay.x.values)
            and depth_lay.y is not None
            and y.values.size == depth_lay.y.values.size
            and np.allclose(y.values, depth_lay.y.values)
        ):
            raise InputError(
                f"{where} is not on the cell grid of the depth ({depth_lay.name!r}); give it at "
                "the cell centres"
            )
        layout = _Layout(
            role=role,
            name=var.name,
            dims=tuple(var.dimensions),
            time_axis=None if time_dim is None else var.dimensions.index(time_dim),
            x=x,
            y=y,
            factor=units[unit],
            file_units=unit,
            attrs={k: var.getncattr(k) for k in var.ncattrs()},
            z_dim=vc.dim,
        )
        out[role] = (layout, vc)
    return out


def common_levels(fraction: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """(levels, file order) when the points at heights ``fraction`` (frames, layers, y, x; NaN
    where unknown) lie at the same fractions of the depth in every column, ascending; else
    None."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN levels (dry columns)
        lo, hi = np.nanmin(fraction, axis=(0, 2, 3)), np.nanmax(fraction, axis=(0, 2, 3))
    if not (np.all(np.isfinite(lo)) and np.all(hi - lo <= SAME_LEVELS)):
        return None
    order = np.argsort(lo, kind="stable")
    if not np.all(np.diff(lo[order]) > 0.0):
        return None
    return np.clip(lo[order], 0.0, 1.0), order


def on_levels(
    fraction: np.ndarray, values: np.ndarray, common: tuple[np.ndarray, np.ndarray] | None
) -> tuple[np.ndarray, np.ndarray]:
    """Profiles (frames, layers, y, x) at heights ``fraction`` (fractions of the depth,
    broadcastable; NaN where unknown) as (levels (n,), values (frames, n, y, x)) on levels
    ascending from the bed: the ``common`` levels (:func:`common_levels`) when given, otherwise
    n equal layers' centres, each column interpolated linearly and held at its lowest and
    highest value beyond its points (0 where a column has none)."""
    if common is not None:
        return common[0], np.nan_to_num(values[:, common[1]], nan=0.0)
    frac = np.broadcast_to(fraction, values.shape)
    n = values.shape[1]
    finite = np.isfinite(frac) & np.isfinite(values)
    levels = (np.arange(n) + 0.5) / n
    f = np.where(finite, frac, np.inf)
    order = np.argsort(f, axis=1, kind="stable")
    f = np.take_along_axis(f, order, 1)
    v = np.take_along_axis(np.where(finite, values, 0.0), order, 1)
    count = np.sum(finite, axis=1, keepdims=True)
    out = np.zeros((values.shape[0], n, *values.shape[2:]))
    top = np.maximum(count - 1, 0)
    for q, s in enumerate(levels):
        k = np.sum(f <= s, axis=1, keepdims=True) - 1
        a = np.clip(k, 0, top)
        b = np.clip(k + 1, 0, top)
        fa, fb = np.take_along_axis(f, a, 1), np.take_along_axis(f, b, 1)
        va, vb = np.take_along_axis(v, a, 1), np.take_along_axis(v, b, 1)
        with np.errstate(invalid="ignore", divide="ignore"):
            w = np.where(b > a, (s - fa) / np.where(b > a, fb - fa, 1.0), 0.0)
        out[:, q] = np.where(count > 0, va + w * (vb - va), 0.0)[:, 0]
    return levels, out
