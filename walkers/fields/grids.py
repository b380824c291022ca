"""Grid kinds: how a flow's cells sit in the plane, and how the engine's coordinates map onto it.

The engine steps particles on a rectilinear lattice of cells (walls at cell faces, absorbing or
reflecting domain edges, bilinear interpolation). A grid kind tells the rest of the tool how that
lattice lies in the world. Its contract:

- ``to_engine(x, y)`` / ``to_physical(a, b)``: positions in the scenario's coordinates (metres,
  or degrees on geographic grids) to the engine's coordinates and back;
- ``cell_area()``: plan area of each flow cell (m2);
- ``edge_names``: the four domain edges, in the engine's order (low a, high a, low b, high b);
- ``edge_bearings()``: the compass bearing (degrees) each edge faces, for messages;
- ``curvilinear``: whether the engine steps in index space (and so needs the metric below).

:class:`Rectilinear` is the identity: the engine's coordinates are the grid's own (x and y in
metres, or longitude and latitude in degrees, the engine converting its metric steps).

:class:`Curvilinear` is a structured grid whose cells are quadrilaterals given by their corners
(CF-1.8 §5.2 two-dimensional coordinates, §7.1 cell bounds). The engine steps in *index space*:
cell (i, j) is the unit square [i − ½, i + ½] × [j − ½, j + ½], mapped onto the cell's four
corners by the bilinear map. With J = ∂x/∂ξ the 2×2 Jacobian (metres per index unit) the
depth-averaged advection–diffusion equation keeps its form in index space,

    ∂(H c)/∂t + ∂_i(H ũ^i c) = ∂_i(H K̃^{ij} ∂_j c),   H = h |J|,  ũ = J⁻¹ u,  K̃ = J⁻¹ K J⁻ᵀ,

(the transformation of a divergence to general coordinates; e.g. Aris 1962, Vectors, Tensors and
the Basic Equations of Fluid Mechanics, §7.5, from memory), so the particle model in index space is
the same Itô equation as on a rectilinear grid with u, K and h replaced by ũ, K̃ and H:
dξ = [ũ + (1/H) ∇_ξ·(H K̃)] dt + √(2K̃) dW. The reader supplies ũ; the mover supplies K̃ and the
drift from the metric held here. Reflection at a cell face is a mirror in index space, which is a
mirror in the world where the grid is orthogonal at the wall.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from walkers.errors import InputError
from walkers.fields.geo import metres_per_degree
from walkers.scenario.config import EDGE_NAMES, INDEX_EDGE_NAMES

#: Newton iterations (per cell visited) when inverting a cell's bilinear map.
NEWTON_ITERATIONS = 8
#: Cells visited at most from the first guess when locating a point.
MAX_WALK = 64
#: Cells jumped at most in one move of the walk.
MAX_JUMP = 8


@dataclass(frozen=True)
class Rectilinear:
    """The identity kind: the engine works in the grid's own coordinates."""

    x: np.ndarray
    y: np.ndarray
    geographic: bool = False
    curvilinear: bool = False
    edge_names: tuple[str, ...] = EDGE_NAMES

    def to_engine(self, x, y):
        return np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)

    def to_physical(self, a, b):
        return np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)

    def edge_bearings(self) -> tuple[float, ...]:
        return (270.0, 90.0, 180.0, 0.0)

    def describe(self) -> str:
        kind = "geographic (degrees)" if self.geographic else "projected (m)"
        return f"rectilinear, {kind}"


@dataclass
class Curvilinear:
    """A structured grid of quadrilateral cells given by their corners.

    corner_x, corner_y : (ny + 1, nx + 1) corner coordinates, m (or degrees east / north when
        ``geographic``); cell (j, i) has corners [j:j+2, i:i+2].
    name : where the grid came from (for messages).

    Derived on construction: cell-centre coordinates, the Jacobian at each cell centre in local
    metres (east, north) per index unit, its determinant (the cell area, exactly, for a bilinear
    cell) and its inverse.
    """

    corner_x: np.ndarray
    corner_y: np.ndarray
    geographic: bool = False
    name: str = "curvilinear grid"
    curvilinear: bool = True
    edge_names: tuple[str, ...] = INDEX_EDGE_NAMES
    jacobian: np.ndarray = field(init=False, repr=False)  # (ny, nx, 2, 2) m per index unit
    inverse: np.ndarray = field(init=False, repr=False)  # (ny, nx, 2, 2) index units per m
    area: np.ndarray = field(init=False, repr=False)  # (ny, nx) m2

    def __post_init__(self) -> None:
        cx = np.ascontiguousarray(self.corner_x, dtype=np.float64)
        cy = np.ascontiguousarray(self.corner_y, dtype=np.float64)
        self.corner_x, self.corner_y = cx, cy
        if cx.ndim != 2 or cx.shape != cy.shape or min(cx.shape) < 2:
            raise InputError(f"{self.name}: corner arrays must be 2-D, of one shape, >= 2 x 2")
        bad = ~(np.isfinite(cx) & np.isfinite(cy))
        if bad.any():
            j, i = (int(v[0]) for v in np.nonzero(bad))
            raise InputError(
                f"{self.name}: the coordinates are missing (NaN or fill) at or next to cell "
                f"(j={min(j, cx.shape[0] - 2)}, i={min(i, cx.shape[1] - 2)}); every cell of a "
                "curvilinear grid needs coordinates, also on land (fill land cells with any "
                "coordinates that keep the grid unfolded)"
            )
        jac = self._jacobian()
        det = jac[..., 0, 0] * jac[..., 1, 1] - jac[..., 0, 1] * jac[..., 1, 0]
        sign = np.sign(np.median(det))
        folded = ~(det * sign > 0)
        if folded.any():
            j, i = (int(v[0]) for v in np.nonzero(folded))
            raise InputError(
                f"{self.name}: cell (j={j}, i={i}) is folded or has no area (its corners turn "
                f"the other way or coincide; {int(folded.sum())} such cell(s)); the grid's "
                "coordinates must describe cells that do not overlap: check the coordinate "
                "variables and their order"
            )
        # Each corner's four cells must agree on their orientation (a cell whose centre map is
        # fine can still cross its neighbour): test every cell's four corner Jacobians.
        self._check_corners(sign)
        self.jacobian = jac
        inv = np.empty_like(jac)
        inv[..., 0, 0] = jac[..., 1, 1] / det
        inv[..., 1, 1] = jac[..., 0, 0] / det
        inv[..., 0, 1] = -jac[..., 0, 1] / det
        inv[..., 1, 0] = -jac[..., 1, 0] / det
        self.inverse = inv
        self.area = np.abs(det)

    # --- geometry ----------------------------------------------------------------------------

    @property
    def shape(self) -> tuple[int, int]:
        """(ny, nx) cells."""
        return self.corner_x.shape[0] - 1, self.corner_x.shape[1] - 1

    @property
    def x(self) -> np.ndarray:
        """Cell centres along the engine's first axis: 0, 1, ..., nx - 1 (index units)."""
        return np.arange(self.shape[1], dtype=np.float64)

    @property
    def y(self) -> np.ndarray:
        """Cell centres along the engine's second axis (index units)."""
        return np.arange(self.shape[0], dtype=np.float64)

    def centres(self) -> tuple[np.ndarray, np.ndarray]:
        """Cell-centre coordinates (ny, nx): the image of (i, j) under the bilinear map."""
        cx, cy = self.corner_x, self.corner_y
        return (
            0.25 * (cx[:-1, :-1] + cx[:-1, 1:] + cx[1:, :-1] + cx[1:, 1:]),
            0.25 * (cy[:-1, :-1] + cy[:-1, 1:] + cy[1:, :-1] + cy[1:, 1:]),
        )

    def _metres(self, dx: np.ndarray, dy: np.ndarray, lat: np.ndarray):
        """Coordinate differences to local metres east and north."""
        if not self.geographic:
            return dx, dy
        mx, my = metres_per_degree(lat)
        return dx * mx, dy * my

    def _jacobian(self) -> np.ndarray:
        """∂(east, north)/∂(ξ, η) at each cell centre, metres per index unit, (ny, nx, 2, 2)."""
        cx, cy = self.corner_x, self.corner_y
        _, lat = self.centres()
        dxi = 0.5 * (cx[:-1, 1:] - cx[:-1, :-1] + cx[1:, 1:] - cx[1:, :-1])
        dyi = 0.5 * (cy[:-1, 1:] - cy[:-1, :-1] + cy[1:, 1:] - cy[1:, :-1])
        dxj = 0.5 * (cx[1:, :-1] - cx[:-1, :-1] + cx[1:, 1:] - cx[:-1, 1:])
        dyj = 0.5 * (cy[1:, :-1] - cy[:-1, :-1] + cy[1:, 1:] - cy[:-1, 1:])
        ex, ny_ = self._metres(dxi, dyi, lat)
        fx, fy = self._metres(dxj, dyj, lat)
        jac = np.empty(ex.shape + (2, 2))
        jac[..., 0, 0], jac[..., 1, 0] = ex, ny_
        jac[..., 0, 1], jac[..., 1, 1] = fx, fy
        return jac

    def _check_corners(self, sign: float) -> None:
        """InputError unless every cell is convex, turning the same way as the grid: at each
        corner the cross product of the sides to the next and the previous corner has the sign
        of the Jacobian (a cell can have a fine centre and still be folded at a corner)."""
        cx, cy = self.corner_x, self.corner_y
        ny, nx = self.shape
        # the corners of each cell, counter-clockwise in index space, as (j, i) offsets
        ring = ((0, 0), (0, 1), (1, 1), (1, 0))

        def at(offset, arr):
            return arr[offset[0] : ny + offset[0], offset[1] : nx + offset[1]]

        for k, here in enumerate(ring):
            nxt, prev = ring[(k + 1) % 4], ring[(k - 1) % 4]
            ux, uy = at(nxt, cx) - at(here, cx), at(nxt, cy) - at(here, cy)
            vx, vy = at(prev, cx) - at(here, cx), at(prev, cy) - at(here, cy)
            bad = ~((ux * vy - uy * vx) * sign > 0)
            if bad.any():
                j, i = (int(v[0]) for v in np.nonzero(bad))
                raise InputError(
                    f"{self.name}: cell (j={j}, i={i}) is folded (it is not convex at one of its "
                    f"corners; {int(bad.sum())} such corner(s)); the grid's coordinates must "
                    "describe cells that do not overlap: check the coordinate variables"
                )

    def cell_area(self) -> np.ndarray:
        """Plan area of each cell (m2), (ny, nx)."""
        return self.area

    def edge_bearings(self) -> tuple[float, ...]:
        """Compass bearing (degrees clockwise from north) each edge faces outward, on average:
        first_i, last_i, first_j, last_j."""
        jac = self.jacobian
        return (
            _bearing(-jac[:, 0, :, 0].mean(axis=0)),
            _bearing(jac[:, -1, :, 0].mean(axis=0)),
            _bearing(-jac[0, :, :, 1].mean(axis=0)),
            _bearing(jac[-1, :, :, 1].mean(axis=0)),
        )

    def describe(self) -> str:
        ny, nx = self.shape
        kind = "lon/lat" if self.geographic else "projected"
        side = np.sqrt(self.area)
        return (
            f"curvilinear ({kind} 2-D coordinates), {nx} x {ny} cells (i by j) of "
            f"{side.min():.3g} to {side.max():.3g} m (square root of the area)"
        )

    # --- maps between index space and the world -----------------------------------------------

    def _corner_quad(self, i: np.ndarray, j: np.ndarray):
        cx, cy = self.corner_x, self.corner_y
        return (
            cx[j, i],
            cx[j, i + 1],
            cx[j + 1, i],
            cx[j + 1, i + 1],
            cy[j, i],
            cy[j, i + 1],
            cy[j + 1, i],
            cy[j + 1, i + 1],
        )

    def _cell_and_local(self, a: np.ndarray, b: np.ndarray):
        ny, nx = self.shape
        i = np.clip(np.floor(a + 0.5).astype(np.int64), 0, nx - 1)
        j = np.clip(np.floor(b + 0.5).astype(np.int64), 0, ny - 1)
        return i, j, a - (i - 0.5), b - (j - 0.5)

    def to_physical(self, a, b):
        """Index-space positions (a, b) to the world (m or degrees), by each cell's bilinear map;
        NaN stays NaN."""
        a = np.asarray(a, dtype=np.float64)
        b = np.asarray(b, dtype=np.float64)
        finite = np.isfinite(a) & np.isfinite(b)
        a0 = np.where(finite, a, 0.0)
        b0 = np.where(finite, b, 0.0)
        i, j, s, t = self._cell_and_local(a0, b0)
        x00, x10, x01, x11, y00, y10, y01, y11 = self._corner_quad(i, j)
        x = (1 - t) * ((1 - s) * x00 + s * x10) + t * ((1 - s) * x01 + s * x11)
        y = (1 - t) * ((1 - s) * y00 + s * y10) + t * ((1 - s) * y01 + s * y11)
        return np.where(finite, x, np.nan), np.where(finite, y, np.nan)

    def to_engine(self, x, y, guess=None):
        """World positions (m or degrees) to index space: the cell holding each point and the
        inverse of its bilinear map (Newton), walking toward the cell the local coordinates
        point at while they fall outside [0, 1]. A walk that leaves the grid or goes on too long
        starts again from the nearest cell centre (a k-d tree); points in no cell give NaN.

        guess : optional (a, b) index positions to start from (e.g. a particle's last position);
            otherwise the nearest cell centre.
        """
        x = np.atleast_1d(np.asarray(x, dtype=np.float64))
        y = np.atleast_1d(np.asarray(y, dtype=np.float64))
        a = np.full(x.shape, np.nan)
        b = np.full(x.shape, np.nan)
        todo = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
        if guess is not None:
            ga, gb = (np.atleast_1d(np.asarray(g, dtype=np.float64)) for g in guess)
            i, j, _, _ = self._cell_and_local(np.nan_to_num(ga[todo]), np.nan_to_num(gb[todo]))
            a[todo], b[todo] = self._walk(i, j, x[todo], y[todo])
            todo = todo[np.isnan(a[todo])]
        if todo.size:
            i, j = self._nearest_cell(x[todo], y[todo])
            a[todo], b[todo] = self._walk(i, j, x[todo], y[todo])
        return a, b

    def _walk(self, i: np.ndarray, j: np.ndarray, x: np.ndarray, y: np.ndarray):
        """Index positions of points (x, y) found by walking from cells (i, j); NaN where the
        walk leaves the grid or does not end within MAX_WALK cells."""
        ny, nx = self.shape
        i, j = i.copy(), j.copy()
        s = np.full(x.shape, 0.5)
        t = np.full(x.shape, 0.5)
        active = np.ones(x.shape, dtype=bool)
        found = np.zeros(x.shape, dtype=bool)
        eps = 1e-9
        for _ in range(MAX_WALK):
            idx = np.flatnonzero(active & ~found)
            if idx.size == 0:
                break
            si, ti = self._newton(i[idx], j[idx], x[idx], y[idx])
            s[idx], t[idx] = si, ti
            inside = (si >= -eps) & (si <= 1 + eps) & (ti >= -eps) & (ti <= 1 + eps)
            found[idx[inside]] = True
            move = idx[~inside]
            # toward the cell the local coordinates point at (at most MAX_JUMP cells at once)
            di = np.where((s[move] < -eps) | (s[move] > 1 + eps), np.floor(s[move]), 0)
            dj = np.where((t[move] < -eps) | (t[move] > 1 + eps), np.floor(t[move]), 0)
            ni = i[move] + np.clip(di, -MAX_JUMP, MAX_JUMP).astype(np.int64)
            nj = j[move] + np.clip(dj, -MAX_JUMP, MAX_JUMP).astype(np.int64)
            out = (ni < 0) | (ni >= nx) | (nj < 0) | (nj >= ny)
            # a step off the grid from a cell on its edge: the point is outside
            active[move[out]] = False
            keep = move[~out]
            i[keep], j[keep] = ni[~out], nj[~out]
        s = np.clip(s, 0.0, 1.0)
        t = np.clip(t, 0.0, 1.0)
        return np.where(found, i - 0.5 + s, np.nan), np.where(found, j - 0.5 + t, np.nan)

    def _nearest_cell(self, x: np.ndarray, y: np.ndarray):
        from scipy.spatial import cKDTree

        tree = self.__dict__.get("_tree")
        cx, cy = self.centres()
        if tree is None:
            tree = cKDTree(np.column_stack([cx.ravel(), cy.ravel()]))
            self.__dict__["_tree"] = tree
        pts = np.column_stack([np.nan_to_num(x), np.nan_to_num(y)])
        _, k = tree.query(pts)
        k = np.asarray(k, dtype=np.int64)
        return k % self.shape[1], k // self.shape[1]

    def _newton(self, i, j, x, y):
        """Local coordinates (s, t) of points (x, y) under the bilinear map of cell (j, i)."""
        x00, x10, x01, x11, y00, y10, y01, y11 = self._corner_quad(i, j)
        s = np.full(x.shape, 0.5)
        t = np.full(x.shape, 0.5)
        for _ in range(NEWTON_ITERATIONS):
            fx = (1 - t) * ((1 - s) * x00 + s * x10) + t * ((1 - s) * x01 + s * x11) - x
            fy = (1 - t) * ((1 - s) * y00 + s * y10) + t * ((1 - s) * y01 + s * y11) - y
            xs = (1 - t) * (x10 - x00) + t * (x11 - x01)
            ys = (1 - t) * (y10 - y00) + t * (y11 - y01)
            xt = (1 - s) * (x01 - x00) + s * (x11 - x10)
            yt = (1 - s) * (y01 - y00) + s * (y11 - y10)
            det = xs * yt - xt * ys
            det = np.where(det == 0.0, 1e-300, det)
            s = s - (fx * yt - fy * xt) / det
            t = t - (fy * xs - fx * ys) / det
            # far from this cell the map is extrapolated: bounded, it still points the way
            s = np.clip(s, -MAX_JUMP, MAX_JUMP + 1.0)
            t = np.clip(t, -MAX_JUMP, MAX_JUMP + 1.0)
        return s, t


def _bearing(vector: np.ndarray) -> float:
    """Compass bearing (degrees from north, clockwise) of an (east, north) vector."""
    return float(np.degrees(np.arctan2(vector[0], vector[1])) % 360.0)


def compass(bearing: float) -> str:
    """The nearest of eight compass points for a bearing in degrees."""
    names = (
        "north",
        "north-east",
        "east",
        "south-east",
        "south",
        "south-west",
        "west",
        "north-west",
    )
    return names[int(((bearing % 360.0) + 22.5) // 45.0) % 8]


def corners_from_centres(cx: np.ndarray, cy: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cell corners (ny + 1, nx + 1) from cell centres (ny, nx): the mean of the four centres
    around each inner corner, the centres extended linearly by one cell beyond the grid for the
    outer ones (common practice when a file gives no cell bounds)."""

    def extend(a: np.ndarray) -> np.ndarray:
        if a.shape[1] > 1:
            a = np.concatenate([2 * a[:, :1] - a[:, 1:2], a, 2 * a[:, -1:] - a[:, -2:-1]], axis=1)
        else:
            a = np.concatenate([a, a, a], axis=1)
        if a.shape[0] > 1:
            a = np.concatenate([2 * a[:1] - a[1:2], a, 2 * a[-1:] - a[-2:-1]], axis=0)
        else:
            a = np.concatenate([a, a, a], axis=0)
        return a

    ex, ey = extend(np.asarray(cx, float)), extend(np.asarray(cy, float))

    def mean4(a: np.ndarray) -> np.ndarray:
        return 0.25 * (a[:-1, :-1] + a[:-1, 1:] + a[1:, :-1] + a[1:, 1:])

    return mean4(ex), mean4(ey)


def corners_from_bounds(bx: np.ndarray, by: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cell corners (ny + 1, nx + 1) from CF 2-D cell bounds (ny, nx, 4), whose vertices go
    (i, j), (i + 1, j), (i + 1, j + 1), (i, j + 1) in index space (CF-1.8 §7.1)."""
    ny, nx = bx.shape[:2]
    ox = np.empty((ny + 1, nx + 1))
    oy = np.empty((ny + 1, nx + 1))
    for arr, b in ((ox, bx), (oy, by)):
        arr[:-1, :-1] = b[..., 0]
        arr[:-1, -1] = b[:, -1, 1]
        arr[-1, -1] = b[-1, -1, 2]
        arr[-1, :-1] = b[-1, :, 3]
    return ox, oy
