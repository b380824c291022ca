"""Layered velocities (sigma, s and z coordinates) reduced to one horizontal field on read.

A hydrodynamic model writes u and v in layers; the engine moves particles in a depth-averaged
flow. This module finds the file's vertical coordinate, computes the height of each layer's lower
and upper face in every column, and weights each layer by the thickness it has inside the
selected part of the column (the whole column, one layer or a depth band).

Vertical coordinates (CF-1.8 §4.3 and Appendix D), heights z positive up from the datum:

- ``ocean_sigma_coordinate``: z = eta + sigma (depth + eta) (CF-1.8 Appendix D);
- ``ocean_s_coordinate_g1``: z = S + eta (1 + S / depth), S = depth_c s + (depth - depth_c) C
  (CF-1.8 Appendix D);
- ``ocean_s_coordinate_g2``: z = eta + (eta + depth) S, S = (depth_c s + depth C) /
  (depth_c + depth) (CF-1.8 Appendix D);
- z levels (CF-1.8 §4.3.1): a length coordinate with ``positive = "up"`` or ``"down"`` (or the
  standard name ``depth``, ``height`` or ``altitude``), clipped to the column between the bed and
  the surface.

eta is the surface height above the datum and depth the bed's depth below it (m, positive), so the
total water depth is depth + eta. Layer faces come from the bounds variable (CF-1.8 §7.1) where the
coordinate has one, otherwise half-way between neighbouring layer midpoints, with the surface and
the bed closing the top and bottom layers. Fill values in a layer (below the bed in a partial
column) give it no weight.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import netCDF4
import numpy as np

from walkers.errors import InputError
from walkers.fields.netcdf.roles import _LENGTH_UNITS, _norm_units
from walkers.scenario.specs import LayerSelection

#: Terms of each parametric vertical coordinate's formula_terms (CF-1.8 Appendix D).
PARAMETRIC_TERMS: dict[str, tuple[str, ...]] = {
    "ocean_sigma_coordinate": ("sigma", "eta", "depth"),
    "ocean_s_coordinate_g1": ("s", "C", "eta", "depth", "depth_c"),
    "ocean_s_coordinate_g2": ("s", "C", "eta", "depth", "depth_c"),
}
#: The 1-D terms (functions of the layer only) of each parametric coordinate.
_LAYER_TERMS = {
    "ocean_sigma_coordinate": ("sigma",),
    "ocean_s_coordinate_g1": ("s", "C"),
    "ocean_s_coordinate_g2": ("s", "C"),
}
_Z_STANDARD_NAMES = {"depth": "down", "height": "up", "altitude": "up"}
_LAYER_DIM_WORDS = ("layer", "level", "lev", "sigma", "depth", "nz", "z", "k", "s_rho", "s")
_SUPPORTED = (
    "ocean_sigma_coordinate, ocean_s_coordinate_g1, ocean_s_coordinate_g2 (CF-1.8 Appendix D, "
    "with formula_terms), or z levels: a coordinate in metres with positive = 'up' or 'down'"
)


def _attr(var: Any, key: str) -> str:
    return str(var.getncattr(key)) if key in var.ncattrs() else ""


@dataclass
class VerticalCoordinate:
    """The vertical coordinate of a file's layered velocities.

    kind : a key of :data:`PARAMETRIC_TERMS`, or ``"z"`` (levels).
    dim, name : the layer dimension and its coordinate variable.
    lower, upper : per 1-D term (``sigma``; ``s`` and ``C``; ``z``: height, m, positive up), its
        value at each layer's lower and upper face, in the file's layer order. For z levels
        without bounds the top and bottom faces are +inf and -inf (the surface and the bed clip
        them).
    thickness_from : how the faces were obtained (for ``walkers inspect``).
    terms : formula_terms, term -> variable name (parametric only).
    depth_c : critical depth (m) of the s coordinates.
    """

    kind: str
    dim: str
    name: str
    lower: dict[str, np.ndarray]
    upper: dict[str, np.ndarray]
    thickness_from: str
    terms: dict[str, str] = field(default_factory=dict)
    depth_c: float = 0.0
    #: per 1-D term, its value at each layer's own point (the coordinate's values), file order
    points: dict[str, np.ndarray] = field(default_factory=dict)

    @property
    def size(self) -> int:
        """Number of layers."""
        return next(iter(self.lower.values())).size

    @property
    def parametric(self) -> bool:
        return self.kind != "z"

    def top_down(self) -> np.ndarray:
        """Layer indices (file order) from the surface down."""
        key = "z" if self.kind == "z" else _LAYER_TERMS[self.kind][0]
        mid = 0.5 * (np.clip(self.lower[key], -1e30, 1e30) + np.clip(self.upper[key], -1e30, 1e30))
        return np.argsort(-mid, kind="stable")

    def describe(self, selection: LayerSelection) -> str:
        """One line for ``walkers inspect``."""
        what = "z levels" if self.kind == "z" else self.kind
        return (
            f"{what} {self.name!r}, {self.size} layers, thicknesses from {self.thickness_from}; "
            f"reduced to one field by {selection.describe()}"
        )


# ----------------------------------------------------------------------------------------------
# Discovery
# ----------------------------------------------------------------------------------------------


def find_vertical(
    ds: netCDF4.Dataset, path: str, var: Any, time_dim: str | None
) -> VerticalCoordinate | None:
    """The vertical coordinate of ``var``'s layer dimension, or None if it has no layers.

    Only dimensions longer than 1 count (a single layer is already a depth mean). InputError for
    an unknown vertical coordinate, formula_terms naming a missing variable, and layers whose
    thicknesses cannot be found.
    """
    for dim in var.dimensions:
        if dim == time_dim or ds.dimensions[dim].size < 2:
            continue
        coord = ds.variables.get(dim)
        where = f"flow file {path!r}: variable {var.name!r}"
        if coord is None:
            if dim.lower() in _LAYER_DIM_WORDS or dim.lower().startswith(("layer", "level")):
                raise InputError(
                    f"{where} has layers along dimension {dim!r} but no coordinate variable "
                    f"{dim!r}, so the layer thicknesses cannot be found. Add a coordinate "
                    f"variable {dim!r} giving the layers: {_SUPPORTED}; with bounds (CF-1.8 §7.1) "
                    "where the layers are not centred between their faces"
                )
            continue
        kind = _vertical_kind(coord, where)
        if kind is None:
            continue
        if kind == "z":
            return _z_levels(ds, path, coord)
        return _parametric(ds, path, coord, kind)
    return None


def _vertical_kind(coord: Any, where: str) -> str | None:
    """'z', a parametric standard name, or None (not vertical); InputError if unknown."""
    std = _attr(coord, "standard_name")
    if std in PARAMETRIC_TERMS:
        return std
    unit = _norm_units(_attr(coord, "units"))
    positive = _attr(coord, "positive").lower()
    vertical = (
        bool(_attr(coord, "formula_terms"))
        or bool(positive)
        or _attr(coord, "axis").upper() == "Z"
        or std in _Z_STANDARD_NAMES
        or "sigma" in std
        or std.startswith(("ocean_", "atmosphere_"))
    )
    if not vertical:
        return None
    length = unit in _LENGTH_UNITS
    if not _attr(coord, "formula_terms") and length and (positive or std in _Z_STANDARD_NAMES):
        if positive and positive not in ("up", "down"):
            raise InputError(
                f"{where}: vertical coordinate {coord.name!r} has positive = {positive!r}; "
                "CF-1.8 §4.3 allows 'up' or 'down'"
            )
        return "z"
    shown = f"standard_name {std!r}" if std else "no standard_name"
    raise InputError(
        f"{where}: unknown vertical coordinate {coord.name!r} ({shown}, units {unit!r}, "
        f"positive {positive or 'not given'!r}). Accepted: {_SUPPORTED}"
    )


def _values(ds: netCDF4.Dataset, name: str, where: str) -> np.ndarray:
    values = np.ma.filled(np.ma.asarray(ds.variables[name][:]).astype(np.float64), np.nan)
    if not np.all(np.isfinite(values)):
        raise InputError(f"{where}: variable {name!r} has missing or non-finite values")
    return values


def _bounds_of(ds: netCDF4.Dataset, path: str, coord: Any, n: int) -> np.ndarray | None:
    """The (n, 2) bounds of a layer coordinate (CF-1.8 §7.1), or None if it names none."""
    name = _attr(coord, "bounds")
    if not name:
        return None
    where = f"flow file {path!r}: bounds of {coord.name!r}"
    if name not in ds.variables:
        raise InputError(
            f"{where}: variable {name!r} named by its bounds attribute is not in the file, so the "
            "layer thicknesses cannot be found; add it or remove the bounds attribute"
        )
    bounds = _values(ds, name, where)
    if bounds.shape != (n, 2):
        raise InputError(
            f"{where}: variable {name!r} has shape {bounds.shape}; expected ({n}, 2), the lower "
            "and upper face of each layer"
        )
    return bounds


def _faces_from_midpoints(
    mid: np.ndarray, bottom: float, top: float
) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper faces half-way between neighbouring midpoints (file order), the column's
    ``bottom`` and ``top`` closing the end layers."""
    order = np.argsort(mid)
    sorted_mid = mid[order]
    inner = 0.5 * (sorted_mid[1:] + sorted_mid[:-1])
    lo_sorted = np.concatenate([[bottom], inner])
    up_sorted = np.concatenate([inner, [top]])
    lower, upper = np.empty_like(mid), np.empty_like(mid)
    lower[order], upper[order] = lo_sorted, up_sorted
    return lower, upper


def _check_layers_distinct(values: np.ndarray, name: str, where: str) -> None:
    if np.unique(values).size != values.size:
        raise InputError(
            f"{where}: layer coordinate {name!r} repeats a value ({values.tolist()}); each layer "
            "needs its own position to give it a thickness"
        )


def _z_levels(ds: netCDF4.Dataset, path: str, coord: Any) -> VerticalCoordinate:
    where = f"flow file {path!r}"
    std = _attr(coord, "standard_name")
    positive = _attr(coord, "positive").lower() or _Z_STANDARD_NAMES[std]
    sign = -1.0 if positive == "down" else 1.0
    factor = _LENGTH_UNITS[_norm_units(_attr(coord, "units"))]
    mid = sign * factor * _values(ds, coord.name, where).ravel()
    _check_layers_distinct(mid, coord.name, where)
    bounds = _bounds_of(ds, path, coord, mid.size)
    if bounds is not None:
        heights = sign * factor * bounds
        lower, upper = heights.min(axis=1), heights.max(axis=1)
        source = f"bounds {_attr(coord, 'bounds')!r}"
    else:
        lower, upper = _faces_from_midpoints(mid, -np.inf, np.inf)
        source = "midpoints (the surface and the bed close the top and bottom layers)"
    return VerticalCoordinate(
        "z", coord.dimensions[0], coord.name, {"z": lower}, {"z": upper}, source, points={"z": mid}
    )


def _formula_terms(ds: netCDF4.Dataset, path: str, coord: Any, kind: str) -> dict[str, str]:
    """term -> variable of a parametric coordinate; InputError if one is absent or missing."""
    text = _attr(coord, "formula_terms")
    where = f"flow file {path!r}: vertical coordinate {coord.name!r} ({kind})"
    tokens = text.split()
    if len(tokens) % 2 or not all(t.endswith(":") for t in tokens[::2]):
        raise InputError(
            f"{where}: formula_terms {text!r} is not a list of 'term: variable' pairs "
            "(CF-1.8 §4.3.3)"
        )
    terms = {t[:-1]: v for t, v in zip(tokens[::2], tokens[1::2], strict=True)}
    absent = [t for t in PARAMETRIC_TERMS[kind] if t not in terms]
    if absent:
        raise InputError(
            f"{where}: formula_terms {text!r} lacks the term(s) {', '.join(absent)}; CF-1.8 "
            f"Appendix D needs {', '.join(PARAMETRIC_TERMS[kind])}"
        )
    for term, name in terms.items():
        if name not in ds.variables:
            raise InputError(
                f"{where}: formula_terms names variable {name!r} for the term {term!r}, but the "
                "file has no such variable; add it or correct formula_terms"
            )
    return terms


def _parametric(ds: netCDF4.Dataset, path: str, coord: Any, kind: str) -> VerticalCoordinate:
    terms = _formula_terms(ds, path, coord, kind)
    where = f"flow file {path!r}: vertical coordinate {coord.name!r} ({kind})"
    mids = {t: _values(ds, terms[t], where).ravel() for t in _LAYER_TERMS[kind]}
    n = ds.dimensions[coord.dimensions[0]].size
    for t, values in mids.items():
        if values.size != n or np.any(values < -1.0 - 1e-9) or np.any(values > 1e-9):
            raise InputError(
                f"{where}: term {t!r} (variable {terms[t]!r}) must hold {n} values in [-1, 0] "
                "(CF-1.8 Appendix D); it holds " + ", ".join(f"{x:.6g}" for x in values)
            )
    first = _LAYER_TERMS[kind][0]
    _check_layers_distinct(mids[first], terms[first], where)
    depth_c = float(_values(ds, terms["depth_c"], where).ravel()[0]) if "depth_c" in terms else 0.0
    lower: dict[str, np.ndarray] = {}
    upper: dict[str, np.ndarray] = {}
    bounds = _bounds_of(ds, path, coord, n)
    c_bounds = (
        _c_bounds(ds, path, coord, n)
        if bounds is not None and kind != "ocean_sigma_coordinate"
        else None
    )
    if bounds is not None and (kind == "ocean_sigma_coordinate" or c_bounds is not None):
        lower[first], upper[first] = bounds.min(axis=1), bounds.max(axis=1)
        if c_bounds is not None:
            lower["C"], upper["C"] = c_bounds.min(axis=1), c_bounds.max(axis=1)
        source = f"bounds {_attr(coord, 'bounds')!r}"
    else:
        for t, values in mids.items():
            lower[t], upper[t] = _faces_from_midpoints(values, -1.0, 0.0)
        source = "midpoints (the surface and the bed close the top and bottom layers)"
    return VerticalCoordinate(
        kind, coord.dimensions[0], coord.name, lower, upper, source, terms, depth_c, mids
    )


def _c_bounds(ds: netCDF4.Dataset, path: str, coord: Any, n: int) -> np.ndarray | None:
    """Bounds of the stretching function C: named by the bounds variable's formula_terms
    (CF-1.8 §7.1), or by C's own bounds attribute; None if neither."""
    bounds_var = ds.variables[_attr(coord, "bounds")]
    tokens = _attr(bounds_var, "formula_terms").split()
    named = dict(zip(tokens[::2], tokens[1::2], strict=False)).get("C:")
    if named is not None:
        if named not in ds.variables:
            raise InputError(
                f"flow file {path!r}: formula_terms of bounds {bounds_var.name!r} names variable "
                f"{named!r} for the term 'C', but the file has no such variable"
            )
        return _values(ds, named, f"flow file {path!r}").reshape(n, 2)
    terms = _attr(coord, "formula_terms").split()
    c_var = ds.variables[dict(zip(terms[::2], terms[1::2], strict=False))["C:"]]
    return _bounds_of(ds, path, c_var, n) if _attr(c_var, "bounds") else None


# ----------------------------------------------------------------------------------------------
# Heights, weights and the reduction
# ----------------------------------------------------------------------------------------------


def _height(vc: VerticalCoordinate, face: dict[str, np.ndarray], eta, depth) -> np.ndarray:
    """Heights (m above the datum) of one face of every layer: (frames, layers, y, x).

    face : per term, its value at this face of each layer; eta, depth : (frames, y, x) surface
    height and bed depth below the datum (m).
    """
    e, h = eta[:, None], depth[:, None]
    if vc.kind == "z":
        return np.clip(face["z"][None, :, None, None], -h, e)
    if vc.kind == "ocean_sigma_coordinate":
        sigma = face["sigma"][None, :, None, None]
        return e + sigma * (h + e)  # CF-1.8 Appendix D, ocean_sigma_coordinate
    s, c, dc = face["s"][None, :, None, None], face["C"][None, :, None, None], vc.depth_c
    if vc.kind == "ocean_s_coordinate_g1":
        stretched = dc * s + (h - dc) * c  # CF-1.8 Appendix D, ocean_s_coordinate_g1
        with np.errstate(divide="ignore", invalid="ignore"):
            return stretched + e * (1.0 + stretched / h)
    with np.errstate(divide="ignore", invalid="ignore"):
        stretched = (dc * s + h * c) / (dc + h)  # CF-1.8 Appendix D, ocean_s_coordinate_g2
    return e + (e + h) * stretched


def layer_points(vc: VerticalCoordinate, eta: np.ndarray, depth: np.ndarray) -> np.ndarray:
    """Heights above the bed as fractions of the water depth (0 bed, 1 surface) of each layer's
    own point (its coordinate value), (frames, layers, y, x), from ``eta`` and ``depth`` as in
    :func:`layer_faces`; NaN where the column has no water."""
    z = _height(vc, vc.points, eta, depth)
    total = (eta + depth)[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(total > 0.0, (z + depth[:, None]) / total, np.nan)


def layer_faces(vc: VerticalCoordinate, eta: np.ndarray, depth: np.ndarray):
    """Heights (m above the datum) of the lower and upper face of each layer, each
    (frames, layers, y, x), from the surface height ``eta`` and bed depth ``depth`` (m, positive
    below the datum), both (frames, y, x)."""
    return _height(vc, vc.lower, eta, depth), _height(vc, vc.upper, eta, depth)


def layer_weights(
    vc: VerticalCoordinate,
    lower: np.ndarray,
    upper: np.ndarray,
    eta: np.ndarray,
    selection: LayerSelection,
) -> np.ndarray:
    """Thickness (m) of each layer inside the selected part of the column: the whole column, one
    layer (numbered from the surface, 1 = top) or the band between ``selection.band`` depths
    below the surface (cut at the bed; in a column shallower than the band's top, the whole
    column). Shape (frames, layers, y, x); 0 for layers outside the selection."""
    thickness = np.maximum(upper - lower, 0.0)
    if selection.mode == "band":
        top = eta[:, None] - selection.band[0]
        bottom = eta[:, None] - selection.band[1]
        inside = np.maximum(np.minimum(upper, top) - np.maximum(lower, bottom), 0.0)
        # a column shallower than the band's top has no water in the band: its depth mean is used
        empty = np.sum(np.nan_to_num(inside), axis=1, keepdims=True) <= 0.0
        return np.where(empty, thickness, inside)
    if selection.mode == "layer":
        keep = np.zeros(vc.size, dtype=bool)
        keep[vc.top_down()[selection.layer - 1]] = True
        thickness = np.where(keep[None, :, None, None], thickness, 0.0)
    return thickness


def thickness_mean(layered: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Thickness-weighted mean over layers (axis 1) of ``layered`` (frames, layers, y, x);
    layers with fill (NaN) get no weight; NaN where no layer has weight."""
    finite = np.isfinite(layered)
    w = np.where(finite & np.isfinite(weights), weights, 0.0)
    total = np.sum(w, axis=1)
    summed = np.sum(w * np.where(finite, layered, 0.0), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(total > 0.0, summed / np.where(total > 0.0, total, 1.0), np.nan)
