"""What makes a map stand alone: the ground it is drawn on and the furniture around the data.

One style for every map of a run, of an ensemble and of the notebooks:

- ground: land (sand colour), water (pale blue: water the tracer has not reached is *clean
  water*), and places outside the flow grid (white with grey hatching: the run knows nothing
  there), from the result's ``land`` flags (0 water, 1 land, 2 outside the flow grid);
- cells whose estimate rests on fewer than :data:`TRUSTED_PARTICLES` particles hatched in grey
  (the sampling error of a cell with n particles is about C/√n, so below 10 it exceeds 30 %);
- the release (black star, labelled) and the receptors (red triangle, labelled, with the dashed
  circle they average over);
- a scale bar, a north arrow (grid north), easting/northing (or longitude/latitude) labels and
  the name of the coordinate reference system.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr
from matplotlib import patheffects
from matplotlib.axes import Axes
from matplotlib.colors import ListedColormap
from matplotlib.patches import Circle, Patch, PathPatch
from matplotlib.path import Path
from matplotlib.ticker import MaxNLocator, ScalarFormatter

from walkers.outputs.display import release_points

LAND_COLOUR = "#cfc8b8"
WATER_COLOUR = "#e6f0f7"
OUTSIDE_HATCH_COLOUR = "0.6"
THIN_COLOUR = "0.45"
RECEPTOR_COLOUR = "#d1495b"
RELEASE_COLOUR = "black"
#: Fewest particles in a cell for its concentration to be drawn as trusted (error about 1/√n).
TRUSTED_PARTICLES = 10
METRES_PER_DEGREE = 111_320.0  # along a meridian, and along the equator (WGS 84, rounded)

_HALO = [patheffects.withStroke(linewidth=2.5, foreground="white")]


def cell_edges(centres: np.ndarray) -> np.ndarray:
    """Cell edges midway between centres and half a cell beyond the outer ones."""
    c = np.asarray(centres, dtype=np.float64)
    if c.size == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[2 * c[0] - mid[0]], mid, [2 * c[-1] - mid[-1]]])


def is_geographic(ds: xr.Dataset) -> bool:
    """True when x/y are longitude/latitude in degrees."""
    return bool(int(ds.attrs.get("geographic", 0))) or ds["x"].attrs.get("units") == "degrees_east"


def crs_wkt(ds: xr.Dataset) -> str | None:
    """The WKT of the result's CRS (its grid mapping, else its global attribute), or None."""
    wkt = (ds["crs"].attrs.get("crs_wkt") if "crs" in ds else None) or ds.attrs.get("crs_wkt")
    return str(wkt) if wkt else None


def crs_name(ds: xr.Dataset) -> str:
    """The name of the result's coordinate reference system, or "grid coordinates, no CRS"."""
    attrs = ds["crs"].attrs if "crs" in ds else {}
    for key in ("projected_crs_name", "geographic_crs_name"):
        if attrs.get(key):
            return str(attrs[key])
    wkt = crs_wkt(ds)
    if wkt:
        from pyproj import CRS

        return str(CRS.from_wkt(str(wkt)).name)
    return "grid coordinates, no CRS"


THIN_GID = "thin cells"  # the gid of the thin-cell hatching on a map


def _extent(ds: xr.Dataset) -> tuple[float, float, float, float]:
    xe, ye = cell_edges(ds["x"].values), cell_edges(ds["y"].values)
    return (float(xe[0]), float(xe[-1]), float(ye[0]), float(ye[-1]))


def draw_ground(ax: Axes, ds: xr.Dataset, land: np.ndarray | None = None) -> None:
    """Clean water, land and the outside of the flow grid under the data."""
    extent = _extent(ds)
    ax.set_facecolor(WATER_COLOUR)
    flags = (
        np.asarray(land, dtype=np.int8)
        if land is not None
        else (np.asarray(ds["land"].values, dtype=np.int8) if "land" in ds else None)
    )
    if flags is None:
        return
    style: dict[str, Any] = dict(extent=extent, origin="lower", interpolation="nearest")
    ax.imshow(np.ma.masked_where(flags != 1, flags), cmap=ListedColormap([LAND_COLOUR]), **style)
    outside = flags == 2
    if outside.any():
        ax.imshow(np.ma.masked_where(~outside, flags), cmap=ListedColormap(["white"]), **style)
        _hatch(ax, ds, outside, "////", OUTSIDE_HATCH_COLOUR)


def _hatch(
    ax: Axes, ds: xr.Dataset, where: np.ndarray, pattern: str, colour: Any, gid: str | None = None
) -> None:
    """Hatch the cells ``where`` (y, x) as one patch: one compound path of every hatched cell's
    outline, filled by the nonzero rule (their union), so the hatch is drawn once instead of once
    per cell (a thousand-cell region drew in about 0.1 s a figure as a collection of cells)."""
    xe, ye = cell_edges(ds["x"].values), cell_edges(ds["y"].values)
    j, i = np.nonzero(where)
    corners = np.stack(
        [
            np.column_stack([xe[i], ye[j]]),
            np.column_stack([xe[i + 1], ye[j]]),
            np.column_stack([xe[i + 1], ye[j + 1]]),
            np.column_stack([xe[i], ye[j + 1]]),
            np.column_stack([xe[i], ye[j]]),
        ],
        axis=1,
    ).reshape(-1, 2)
    codes = np.tile(
        [Path.MOVETO, Path.LINETO, Path.LINETO, Path.LINETO, Path.CLOSEPOLY], i.size
    ).astype(Path.code_type)
    ax.add_patch(
        PathPatch(
            Path(corners, codes),
            hatch=pattern,
            facecolor="none",
            edgecolor=colour,
            linewidth=0.0,
            gid=gid,
        )
    )


def hatch_thin_cells(ax: Axes, ds: xr.Dataset, counts: np.ndarray) -> bool:
    """Hatch cells with 1 to TRUSTED_PARTICLES - 1 particles (one patch, gid THIN_GID); True if
    any were hatched."""
    thin = (counts > 0) & (counts < TRUSTED_PARTICLES)
    if thin.any():
        _hatch(ax, ds, thin, "xxxx", THIN_COLOUR, THIN_GID)
    return bool(thin.any())


def draw_places(ax: Axes, ds: xr.Dataset) -> None:
    """The release(s) and the receptors with their averaging circles; a label in the east third
    of the map goes to the left of its mark, so it stays inside the map."""
    x0, x1, _, _ = _extent(ds)

    def east(x: float) -> bool:
        return x > x0 + 2.0 * (x1 - x0) / 3.0

    for name, x, y in release_points(ds):
        ax.plot(x, y, marker="*", ms=13, mfc=RELEASE_COLOUR, mec="white", mew=0.9, ls="none")
        ax.annotate(
            f"release: {name}",
            (x, y),
            xytext=(-7, -10) if east(x) else (7, -10),
            textcoords="offset points",
            ha="right" if east(x) else "left",
            fontsize=7,
            fontweight="bold",
            path_effects=_HALO,
        )
    if "receptor_x" not in ds.coords or ds.sizes.get("receptor", 0) == 0:
        return
    radii = (
        ds["receptor_radius"].values
        if "receptor_radius" in ds.coords
        else np.zeros(ds.sizes["receptor"])
    )
    scale = 1.0 / METRES_PER_DEGREE if is_geographic(ds) else 1.0
    for name, x, y, r in zip(
        ds["receptor"].values, ds["receptor_x"].values, ds["receptor_y"].values, radii, strict=True
    ):
        if r > 0:
            ax.add_patch(Circle((x, y), r * scale, fill=False, ec=RECEPTOR_COLOUR, lw=1.0, ls="--"))
        ax.plot(x, y, marker="^", ms=7, mfc=RECEPTOR_COLOUR, mec="white", mew=0.8, ls="none")
        ax.annotate(
            str(name),
            (x, y),
            xytext=(-5, 4) if east(x) else (5, 4),
            textcoords="offset points",
            ha="right" if east(x) else "left",
            fontsize=7,
            path_effects=_HALO,
        )


def _nice_length(span_m: float) -> float:
    """A round length (1, 2 or 5 × 10^k m) near a quarter of ``span_m``."""
    target = span_m / 4.0
    power = 10.0 ** np.floor(np.log10(target))
    return float(max(m * power for m in (1.0, 2.0, 5.0) if m * power <= target))


def draw_furniture(ax: Axes, ds: xr.Dataset) -> None:
    """Scale bar, north arrow, axis labels with the CRS name, plain tick numbers, true aspect."""
    x0, x1, y0, y1 = _extent(ds)
    geographic = is_geographic(ds)
    mid_lat = float(np.mean(ds["y"].values)) if geographic else 0.0
    metres_per_x = METRES_PER_DEGREE * np.cos(np.deg2rad(mid_lat)) if geographic else 1.0
    length = _nice_length((x1 - x0) * metres_per_x)
    bar = length / metres_per_x
    bx, by = x0 + 0.05 * (x1 - x0), y0 + 0.04 * (y1 - y0)
    ax.plot([bx, bx + bar], [by, by], color="black", lw=3, solid_capstyle="butt")
    label = f"{length / 1000:g} km" if length >= 1000 else f"{length:g} m"
    ax.annotate(
        label,
        (bx + bar / 2, by),
        xytext=(0, 4),
        textcoords="offset points",
        ha="center",
        fontsize=7,
        path_effects=_HALO,
    )
    ax.annotate(
        "N",
        xy=(0.94, 0.97),
        xytext=(0.94, 0.86),
        xycoords="axes fraction",
        ha="center",
        va="center",
        fontsize=9,
        fontweight="bold",
        path_effects=_HALO,
        arrowprops=dict(arrowstyle="-|>", color="black", lw=1.4),
    )
    if geographic:
        ax.set_xlabel(f"longitude (degrees east), {crs_name(ds)}")
        ax.set_ylabel("latitude (degrees north)")
        ax.set_aspect(1.0 / np.cos(np.deg2rad(mid_lat)))
    else:
        ax.set_xlabel(f"easting (m), {crs_name(ds)}")
        ax.set_ylabel("northing (m)")
        ax.set_aspect("equal")
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(MaxNLocator(5))
        formatter = ScalarFormatter(useOffset=False)
        formatter.set_scientific(False)
        axis.set_major_formatter(formatter)
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)


def legend_handles(ds: xr.Dataset, thin: bool) -> list[Any]:
    """Legend entries for the ground and hatching actually on the map."""
    handles: list[Any] = [Patch(fc=WATER_COLOUR, ec="0.7", lw=0.5, label="clean water")]
    flags = np.asarray(ds["land"].values) if "land" in ds else np.zeros(1)
    if (flags == 1).any():
        handles.append(Patch(fc=LAND_COLOUR, label="land or never wet"))
    if (flags == 2).any():
        handles.append(
            Patch(fc="white", ec=OUTSIDE_HATCH_COLOUR, hatch="////", label="outside the flow grid")
        )
    if thin:
        handles.append(
            Patch(
                fc="none",
                ec=THIN_COLOUR,
                hatch="xxxx",
                label=f"fewer than {TRUSTED_PARTICLES} particles",
            )
        )
    return handles
