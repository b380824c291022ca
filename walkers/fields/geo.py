"""Coordinate reference systems and geographic helpers (WGS84 ellipsoid).

Grids in walkers are rectilinear, either projected (metres) or geographic (degrees east / north).
On a geographic grid the engine moves particles in metres and converts each step to degrees with
the local radii of curvature of the WGS84 ellipsoid (:func:`metres_per_degree`).

References
----------
Snyder, J. P. (1987). Map Projections -- A Working Manual. USGS Professional Paper 1395
(radii of curvature, eqs. 4-18 and 4-20; authalic latitude function q, eq. 3-12).
NIMA (2000). Department of Defense World Geodetic System 1984, TR8350.2 (a and 1/f of WGS84).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from pyproj import CRS
from pyproj.exceptions import CRSError

from walkers.errors import InputError
from walkers.fields.base import centre_to_edges

WGS84_A = 6378137.0
"""WGS84 semi-major axis a (m)."""
WGS84_F = 1.0 / 298.257223563
"""WGS84 flattening f."""
WGS84_E2 = WGS84_F * (2.0 - WGS84_F)
"""WGS84 first eccentricity squared e² = f(2 − f)."""
WGS84_B = WGS84_A * (1.0 - WGS84_F)
"""WGS84 semi-minor axis b (m)."""


def crs_from_user(text: str, *, where: str = "crs") -> CRS:
    """A CRS from WKT, an ``"EPSG:nnnn"`` code or a PROJ string.

    ``where`` names the place the text came from (scenario key, file attribute) for messages.
    """
    try:
        return CRS.from_user_input(text)
    except CRSError as exc:
        raise InputError(
            f"{where}: cannot read the coordinate reference system {str(text)[:80]!r} ({exc}); "
            "give an EPSG code such as 'EPSG:32633' or a WKT string"
        ) from exc


def crs_from_cf(attrs: dict[str, Any], *, where: str = "grid_mapping") -> CRS:
    """A CRS from the attributes of a CF grid-mapping variable.

    ``crs_wkt`` (CF) or ``spatial_ref`` (GDAL) WKT is used when present, otherwise the CF
    grid-mapping parameters (``grid_mapping_name`` etc.).
    """
    for key in ("crs_wkt", "spatial_ref"):
        if key in attrs:
            return crs_from_user(str(attrs[key]), where=f"{where} attribute {key}")
    try:
        return CRS.from_cf(dict(attrs))
    except CRSError as exc:
        raise InputError(
            f"{where}: cannot read the coordinate reference system from its attributes ({exc}); "
            "add a crs_wkt attribute or give the CRS explicitly, e.g. crs = 'EPSG:32633'"
        ) from exc


def crs_wkt(crs: CRS | str) -> str:
    """WKT (ISO 19162:2019) of a CRS, for CF ``crs_wkt`` attributes of outputs."""
    if isinstance(crs, str):
        crs = crs_from_user(crs)
    return crs.to_wkt()


def cf_grid_mapping_attrs(wkt: str) -> dict[str, Any]:
    """CF grid-mapping attributes (``grid_mapping_name``, parameters and ``crs_wkt``) for a CRS."""
    crs = crs_from_user(wkt)
    attrs = dict(crs.to_cf())
    attrs["crs_wkt"] = crs.to_wkt()
    return attrs


def metres_per_degree(lat: float | np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Metres per degree of longitude and of latitude at geodetic latitude ``lat`` (degrees).

    With the WGS84 radii of curvature in the meridian M = a(1 − e²)/(1 − e² sin²φ)^1.5 and in the
    prime vertical N = a/(1 − e² sin²φ)^0.5: m/deg lat = M π/180, m/deg lon = N cos φ π/180
    (Snyder 1987, eqs. 4-18 and 4-20).

    Returns
    -------
    (m_per_deg_lon, m_per_deg_lat) : arrays (m per degree), shaped like ``lat``.
    """
    phi = np.radians(np.asarray(lat, dtype=np.float64))
    w2 = 1.0 - WGS84_E2 * np.sin(phi) ** 2
    meridian = WGS84_A * (1.0 - WGS84_E2) / w2**1.5
    prime_vertical = WGS84_A / np.sqrt(w2)
    deg = np.pi / 180.0
    return prime_vertical * np.cos(phi) * deg, meridian * deg


def _authalic_q(phi: np.ndarray) -> np.ndarray:
    """Authalic function, Snyder (1987) eq. 3-12.

    q(φ) = (1 − e²) [sinφ / (1 − e² sin²φ) − ln((1 − e sinφ) / (1 + e sinφ)) / (2e)].
    """
    e = np.sqrt(WGS84_E2)
    s = np.sin(phi)
    return (1.0 - WGS84_E2) * (
        s / (1.0 - WGS84_E2 * s**2) - np.log((1.0 - e * s) / (1.0 + e * s)) / (2.0 * e)
    )


def cell_areas(x: np.ndarray, y: np.ndarray, *, geographic: bool) -> np.ndarray:
    """Areas (m²) of the cells of a rectilinear grid with centres ``x``, ``y``, shape (ny, nx).

    Cell edges are midway between centres (:func:`walkers.fields.base.centre_to_edges`). On a
    projected grid the area is Δx Δy (grid units taken as metres). On a geographic grid it is the
    exact area of the ellipsoidal quadrangle, a² Δλ (q(φ2) − q(φ1)) / 2 with λ in radians and q the
    authalic function (Snyder 1987, eqs. 3-12 and 3-13).
    """
    xe = centre_to_edges(np.asarray(x, dtype=np.float64))
    ye = centre_to_edges(np.asarray(y, dtype=np.float64))
    dx = np.diff(xe)
    if not geographic:
        return np.outer(np.diff(ye), dx)
    q = _authalic_q(np.radians(ye))
    band = 0.5 * WGS84_A**2 * np.diff(q)
    return np.outer(band, np.radians(dx))


def cell_sizes(x: np.ndarray, y: np.ndarray, *, geographic: bool) -> tuple[np.ndarray, np.ndarray]:
    """Widths of the cells along x and y in metres, each of shape (ny, nx).

    On a geographic grid the widths in degrees are converted with :func:`metres_per_degree` at
    each cell's centre latitude. A 1-D channel (one row) has width along y of NaN.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    dx = np.diff(centre_to_edges(x))
    dy = np.diff(centre_to_edges(y)) if y.size > 1 else np.array([np.nan])
    wx, wy = np.meshgrid(dx, dy)
    if geographic:
        m_lon, m_lat = metres_per_degree(y)
        wx = wx * m_lon[:, None]
        wy = wy * m_lat[:, None]
    return wx, wy
