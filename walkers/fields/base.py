"""What a flow reader hands the engine: plain arrays on rectilinear grids, in SI units.

The engine never sees NetCDF. A reader (``walkers.fields.netcdf``) or an analytic flow
(``walkers.fields.analytic``) builds a :class:`FlowField`; the driver asks it for windows of frames
(:meth:`FlowField.window`) one output interval at a time, so files larger than memory run.

Contract of a flow source (what every reader must deliver):

1. Coordinates are 1-D, strictly ascending float64 arrays (a reader flips descending axes and
   reorders data to ``(time, y, x)``). Projected grids are in metres; geographic grids are in
   degrees east / north with ``geographic=True`` (the engine then converts metric steps to degrees
   with the local WGS84 radii of curvature).
2. ``u`` and ``v`` are velocities in m s-1, each on its own coordinates (staggered grids allowed).
3. ``depth`` is the water depth in metres at cell centres (2-D), or the wetted cross-section area
   in m2 (1-D), on the cell grid. ``wet`` says, per frame and cell, whether water is there; dry and
   land cells are walls. The cell grid is given by its centres ``x``/``y``; cell edges are midway
   between centres and half a cell beyond the outer centres.
4. ``times`` are frame times in seconds, ascending, in the frame ``time_units`` / ``calendar``
   (CF conventions); a steady flow has one frame.
5. ``data`` of each :class:`GriddedVariable` may be lazy: anything with ``shape`` and
   ``__getitem__`` that returns a float64 numpy array in SI units for a slice of frames.
6. A 1-D channel is a grid with one row: ``y == [0.0]``, ``v`` zero, ``depth`` the cross-section.
7. On a curvilinear grid (``grid`` a :class:`walkers.fields.grids.Curvilinear`) ``x`` and ``y``
   are cell indices (0, 1, ..., n - 1), ``u`` and ``v`` are the contravariant velocity components
   in index units per second (ũ = J⁻¹u), ``depth`` and ``wet`` are as above, and ``geographic``
   says whether the grid's own coordinates are degrees.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True)
class GriddedVariable:
    """A variable on a rectilinear grid, possibly time-varying.

    Attributes
    ----------
    x, y : ascending coordinates of the points where ``data`` is given (m, or degrees).
    data : array-like of shape (nt, ny, nx), in SI units; ``nt == 1`` means steady.
    name : the variable's name in its source (for messages).
    units : SI units of ``data`` after conversion (for messages and outputs).
    """

    x: np.ndarray
    y: np.ndarray
    data: Any
    name: str = ""
    units: str = ""

    @property
    def steady(self) -> bool:
        return int(self.data.shape[0]) == 1

    def frames(self, i0: int, i1: int) -> np.ndarray:
        """Frames ``i0`` to ``i1`` inclusive as a C-contiguous float64 array (nf, ny, nx).

        A steady variable returns its single frame whatever is asked.
        """
        if self.steady:
            block = self.data[0:1]
        else:
            block = self.data[i0 : i1 + 1]
        return np.ascontiguousarray(np.asarray(block, dtype=np.float64))


@dataclass
class WindowColumn:
    """The vertical structure of a window of frames, for the three-dimensional step.

    Heights are fractions of the local water depth above the bed (0 bed, 1 surface), ascending;
    the levels of a variable are flattened into the frame axis: frame f, level k at f nl + k
    (nl levels; a steady variable has nl frames).

    levels, u, v : centres of the velocity layers (nl,), and u, v (m s-1) there on the axes of
        the flow's ``u`` and ``v``.
    w_levels, w : heights (nw,; empty when the file has no vertical velocity) and the upward
        velocity w (m s-1) on the cells.
    kz_levels, kz : heights (nk,; empty when the file has no vertical diffusivity) and K_z
        (m2 s-1) on the cells.
    """

    levels: np.ndarray
    u: np.ndarray
    v: np.ndarray
    w_levels: np.ndarray = field(default_factory=lambda: np.zeros(0))
    w: np.ndarray = field(default_factory=lambda: np.zeros((1, 1, 1)))
    kz_levels: np.ndarray = field(default_factory=lambda: np.zeros(0))
    kz: np.ndarray = field(default_factory=lambda: np.zeros((1, 1, 1)))


def describe_column(
    levels: np.ndarray,
    w: tuple[str, int] | None,
    kz: tuple[str, int] | None,
    where: str = "",
) -> str:
    """One line for ``walkers inspect`` and the run summary: the velocity's levels (fractions of
    the depth) and the file's vertical velocity and K_z as (variable name, number of levels) or
    None, ``where`` they lie (e.g. " on the faces")."""
    w_text = "none in the file (no vertical advection)"
    if w:
        w_text = f"from {w[0]!r} on {w[1]} levels{where}"
    kz_text = f"from {kz[0]!r} on {kz[1]} levels{where}" if kz else "none in the file"
    return (
        f"velocity in {levels.size} levels (fractions of the depth "
        f"{', '.join(f'{x:.3g}' for x in levels)}); vertical velocity: {w_text}; K_z: {kz_text}"
    )


@dataclass
class ColumnFields:
    """What a layered flow file holds of the vertical, kept for three-dimensional runs.

    Each variable's ``data`` is (nt, levels, ny, nx) (lazy, sliced along time like
    :class:`GriddedVariable`); levels are fractions of the depth above the bed, ascending.
    ``w`` and ``kz`` are None when the file has none. ``describe`` is one line for
    ``walkers inspect``.
    """

    levels: np.ndarray
    u: GriddedVariable
    v: GriddedVariable
    w_levels: np.ndarray | None = None
    w: GriddedVariable | None = None
    kz_levels: np.ndarray | None = None
    kz: GriddedVariable | None = None
    describe: str = ""

    def window(self, i0: int, i1: int) -> WindowColumn:
        """Frames i0..i1 with the levels flattened into the frame axis."""

        def flat(var: GriddedVariable) -> np.ndarray:
            a = var.frames(i0, i1)
            return np.ascontiguousarray(a.reshape(-1, *a.shape[2:]))

        out = WindowColumn(self.levels, flat(self.u), flat(self.v))
        if self.w is not None and self.w_levels is not None:
            out.w_levels, out.w = self.w_levels, flat(self.w)
        if self.kz is not None and self.kz_levels is not None:
            out.kz_levels, out.kz = self.kz_levels, flat(self.kz)
        return out


@dataclass
class FlowWindow:
    """Frames ``i0..i1`` of a flow field as in-memory arrays, ready for the engine."""

    times: np.ndarray  # (nf,) s
    u: np.ndarray  # (nf or 1, nyu, nxu) m s-1
    v: np.ndarray  # (nf or 1, nyv, nxv) m s-1
    depth: np.ndarray  # (nf or 1, ny, nx) m (2-D) or m2 (1-D)
    wet: np.ndarray  # (nf or 1, ny, nx) uint8, 1 where water
    column: WindowColumn | None = None  # layered velocities, w and K_z (3-D runs)


@dataclass
class FlowField:
    """A gridded, possibly time-varying depth-averaged (2-D) or cross-section-averaged (1-D) flow.

    See the module docstring for the contract every reader meets.
    """

    u: GriddedVariable
    v: GriddedVariable
    depth: GriddedVariable
    wet: GriddedVariable
    times: np.ndarray
    time_units: str = "seconds since 2000-01-01T00:00:00+00:00"
    calendar: str = "standard"
    geographic: bool = False
    crs_wkt: str | None = None
    ndim: int = 2
    source: str = "analytic"
    attrs: dict[str, Any] = field(default_factory=dict)
    #: the grid kind (:mod:`walkers.fields.grids`); None is the rectilinear grid of x and y
    grid: Any = None
    #: the vertical structure kept for three-dimensional runs (None: depth-averaged only)
    column: ColumnFields | None = None

    def kind(self) -> Any:
        """The grid kind: how the engine's coordinates (``x``, ``y``) lie in the world."""
        if self.grid is not None:
            return self.grid
        from walkers.fields.grids import Rectilinear

        return Rectilinear(self.x, self.y, self.geographic)

    @property
    def curvilinear(self) -> bool:
        """Whether the engine steps in the index space of a curvilinear grid."""
        return self.grid is not None and bool(self.grid.curvilinear)

    def __getstate__(self) -> dict[str, Any]:
        # caches of derived arrays (e.g. the engine's dispersion frames) stay in their process
        return {k: v for k, v in self.__dict__.items() if not k.startswith("_")}

    def close(self) -> None:
        """Close the files its lazy variables read from (they reopen if read again)."""
        for var in (self.u, self.v, self.depth, self.wet):
            source = getattr(var.data, "source", None)
            if source is not None and hasattr(source, "close"):
                source.close()

    @property
    def x(self) -> np.ndarray:
        """Cell-centre x coordinates (m or degrees east)."""
        return self.depth.x

    @property
    def y(self) -> np.ndarray:
        """Cell-centre y coordinates (m or degrees north); ``[0.0]`` in 1-D."""
        return self.depth.y

    @property
    def steady(self) -> bool:
        return len(self.times) == 1

    def cell_edges(self) -> tuple[np.ndarray, np.ndarray]:
        """Cell edges along x and y (midway between centres, half a cell beyond the ends)."""
        return centre_to_edges(self.x), centre_to_edges(self.y)

    def extent(self) -> tuple[float, float, float, float]:
        """(west, east, south, north) of the domain, in grid coordinates."""
        xe, ye = self.cell_edges()
        return float(xe[0]), float(xe[-1]), float(ye[0]), float(ye[-1])

    def frame_range(self, t0: float, t1: float) -> tuple[int, int]:
        """Indices (i0, i1) of the frames whose span covers the times [t0, t1] (s)."""
        if self.steady:
            return 0, 0
        i0 = int(np.searchsorted(self.times, t0, side="right")) - 1
        i1 = int(np.searchsorted(self.times, t1, side="left"))
        return max(i0, 0), min(i1, len(self.times) - 1)

    def window(self, t0: float, t1: float) -> FlowWindow:
        """The frames needed to interpolate in time anywhere in [t0, t1] (s), loaded in memory."""
        i0, i1 = self.frame_range(t0, t1)
        return FlowWindow(
            times=np.ascontiguousarray(self.times[i0 : i1 + 1], dtype=np.float64),
            u=self.u.frames(i0, i1),
            v=self.v.frames(i0, i1),
            depth=self.depth.frames(i0, i1),
            wet=np.ascontiguousarray(self.wet.frames(i0, i1) > 0.5, dtype=np.uint8),
            column=None if self.column is None else self.column.window(i0, i1),
        )


def centre_to_edges(centres: np.ndarray) -> np.ndarray:
    """Cell edges for ascending cell centres: midpoints, and half a cell beyond each end.

    A single centre (the y axis of a 1-D channel) gets edges at -0.5 and +0.5 around it.
    """
    c = np.asarray(centres, dtype=np.float64)
    if c.size == 1:
        return np.array([c[0] - 0.5, c[0] + 0.5])
    mid = 0.5 * (c[1:] + c[:-1])
    return np.concatenate([[c[0] - (mid[0] - c[0])], mid, [c[-1] + (c[-1] - mid[-1])]])
