"""Unstructured meshes of triangles and quadrilaterals: the plain arrays a mesh reader hands the
engine, and the geometry derived from the nodes and the face-node table.

Contract of a mesh (what :func:`build_geometry` guarantees, whatever the file gave):

1. Nodes ``node_x``, ``node_y`` in metres on a projected CRS (a lon/lat mesh is projected by the
   reader onto a local transverse Mercator, recorded in ``projection`` and ``crs_wkt``).
2. ``face_nodes`` (nface, 4) int64, 0-based, counter-clockwise seen from above; a triangle has
   -1 in its fourth column. Edge k of face f joins corner k to corner (k + 1) mod n, n = 3 or 4.
3. ``neighbours`` (nface, 4) int64: the face across edge k, -1 on the mesh boundary (and in the
   fourth column of triangles).
4. Every face has distinct corners and a positive area; quadrilaterals are strictly convex (the
   bilinear map of a quadrilateral is invertible only then); an interior edge is shared by
   exactly two faces that run along it in opposite directions (no folded or overlapping faces).
5. ``boundary_edges`` (nb, 2): (face, k) of every mesh-boundary edge. Mesh-boundary edges are
   coast unless an open boundary marks them (:mod:`walkers.fields.mesh_open`).

Time-varying fields live in :class:`MeshFlow`: velocity and depth on nodes or on faces (each
variable where the model wrote it), wet per face and frame.

References: UGRID Conventions 1.0 (2016), "2D flexible mesh (mixed triangles, quadrilaterals,
etc.) topology" (counter-clockwise corners, fill values for faces with fewer corners).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from walkers.errors import InputError

if TYPE_CHECKING:
    from walkers.fields.mesh_open import OpenBoundaries

NODE = "node"
FACE = "face"


@dataclass
class MeshGeometry:
    """Nodes, faces and what follows from them (see the module docstring for the contract)."""

    node_x: np.ndarray  # (nnode,) m
    node_y: np.ndarray  # (nnode,) m
    face_nodes: np.ndarray  # (nface, 4) int64, -1 in the 4th column of triangles
    nvert: np.ndarray  # (nface,) int64, 3 or 4
    neighbours: np.ndarray  # (nface, 4) int64, -1 across the mesh boundary
    area: np.ndarray  # (nface,) m2
    centroid_x: np.ndarray  # (nface,) m, centre of mass of the face
    centroid_y: np.ndarray  # (nface,) m
    boundary_edges: np.ndarray  # (nb, 2) int64: face, edge index k
    crs_wkt: str | None = None
    projection: str = ""  # how lon/lat nodes were projected, "" if the file was projected
    _tree: Any = field(default=None, repr=False)

    @property
    def nnode(self) -> int:
        return int(self.node_x.size)

    @property
    def nface(self) -> int:
        return int(self.face_nodes.shape[0])

    def edge_nodes(self, faces: np.ndarray, k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The start and end node of edge ``k`` of each face in ``faces`` (counter-clockwise)."""
        faces, k = np.asarray(faces), np.asarray(k)
        a = self.face_nodes[faces, k]
        b = self.face_nodes[faces, (k + 1) % self.nvert[faces]]
        return a, b

    def boundary_node_pairs(self) -> np.ndarray:
        """(nb, 2) start and end node of each mesh-boundary edge, the mesh on their left."""
        a, b = self.edge_nodes(self.boundary_edges[:, 0], self.boundary_edges[:, 1])
        return np.stack([a, b], axis=1)

    def edge_lengths(self) -> np.ndarray:
        """(nface, 4) length (m) of each edge; 0 in the fourth column of triangles."""
        k = np.arange(4)[None, :]
        nv = self.nvert[:, None]
        a = self.face_nodes
        b = np.take_along_axis(self.face_nodes, (k + 1) % nv, axis=1)
        length = np.hypot(self.node_x[b] - self.node_x[a], self.node_y[b] - self.node_y[a])
        return np.where(k < nv, length, 0.0)

    def nearest_faces(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """The face whose centroid is nearest to each point (a first guess for the face walk:
        a k-d tree on face centroids, scipy.spatial.cKDTree)."""
        if self._tree is None:
            from scipy.spatial import cKDTree  # (scipy.spatial takes 0.1 s to import)

            self._tree = cKDTree(np.column_stack([self.centroid_x, self.centroid_y]))
        _, idx = self._tree.query(np.column_stack([np.ravel(x), np.ravel(y)]))
        return np.asarray(idx, dtype=np.int64).reshape(np.shape(x))

    def node_mean_of_faces(self, values: np.ndarray) -> np.ndarray:
        """Face values (..., nface) -> node values (..., nnode): the area-weighted mean over the
        faces that share each node (common practice for moving face data to nodes)."""
        values = np.asarray(values, dtype=np.float64)
        corners = self.face_nodes
        used = corners >= 0
        faces = np.broadcast_to(np.arange(self.nface)[:, None], corners.shape)[used]
        nodes = corners[used]
        weight = np.zeros(self.nnode)
        np.add.at(weight, nodes, self.area[faces])
        flat = values.reshape(-1, self.nface)
        out = np.zeros((flat.shape[0], self.nnode))
        for row in range(flat.shape[0]):
            np.add.at(out[row], nodes, self.area[faces] * flat[row, faces])
        with np.errstate(invalid="ignore", divide="ignore"):
            out = out / weight
        return out.reshape(values.shape[:-1] + (self.nnode,))

    def face_mean_of_nodes(self, values: np.ndarray) -> np.ndarray:
        """Node values (..., nnode) -> face values (..., nface): the mean over each face's corners
        (the value of the linear or bilinear interpolant at the parametric centre)."""
        values = np.asarray(values, dtype=np.float64)
        corners = np.where(self.face_nodes >= 0, self.face_nodes, 0)
        picked = values[..., corners]  # (..., nface, 4)
        used = self.face_nodes >= 0
        return np.sum(np.where(used, picked, 0.0), axis=-1) / self.nvert


@dataclass
class MeshVariable:
    """A variable on the nodes or the faces of a mesh.

    location : ``"node"`` or ``"face"`` (UGRID ``location``).
    data : (frames, n) float64 in SI units; one frame means steady.
    name, units : the variable's name in its file and the SI units of ``data``.
    """

    location: str
    data: np.ndarray
    name: str = ""
    units: str = ""

    @property
    def steady(self) -> bool:
        return int(self.data.shape[0]) == 1


@dataclass
class MeshFlow:
    """A depth-averaged flow on an unstructured mesh, in SI units.

    times : (nt,) s in ``time_units`` / ``calendar`` (CF), one frame for a steady flow.
    u, v : eastward / northward (projected x / y) velocity, m s-1, on nodes or faces.
    depth : water depth (m) on nodes or faces.
    wet : (nt or 1, nface) uint8, 1 where the face holds water (dry faces are walls).
    open_boundaries : the named open boundaries (:class:`walkers.fields.mesh_open.OpenBoundaries`;
        none, every boundary edge coast, unless the file or the caller names some).
    layers : the layered velocity of a layered file read for a three-dimensional run
        (:class:`MeshLayers`); None otherwise (u and v are always the depth means).
    """

    geometry: MeshGeometry
    times: np.ndarray
    time_units: str
    calendar: str
    u: MeshVariable
    v: MeshVariable
    depth: MeshVariable
    wet: np.ndarray
    open_boundaries: OpenBoundaries
    source: str = ""
    attrs: dict[str, Any] = field(default_factory=dict)
    layers: MeshLayers | None = None

    @property
    def steady(self) -> bool:
        return int(self.times.size) == 1


@dataclass
class MeshLayers:
    """Layered horizontal velocity of a mesh flow, kept for three-dimensional runs.

    levels : (nl,) heights of the layers' values as fractions of the water depth above the bed
        (0 bed, 1 surface), ascending (:func:`walkers.fields.netcdf.column.on_levels`).
    u, v : m s-1, data (frames, nl, n) on the location of the depth-averaged u and v.
    w_levels, w : heights (nw,) and the upward velocity w (m s-1), data (frames, nw, nface) on
        the faces (the columns of the vertical step); None when the file has no w.
    kz_levels, kz : heights (nk,) and the vertical diffusivity K_z (m2 s-1), (frames, nk,
        nface) on the faces; None when the file has none.
    """

    levels: np.ndarray
    u: MeshVariable
    v: MeshVariable
    w_levels: np.ndarray | None = None
    w: MeshVariable | None = None
    kz_levels: np.ndarray | None = None
    kz: MeshVariable | None = None


# ----------------------------------------------------------------------------------------------
# Building and checking the geometry
# ----------------------------------------------------------------------------------------------


def _signed_areas(x: np.ndarray, y: np.ndarray, corners: np.ndarray, nvert: np.ndarray):
    """Signed area (shoelace formula) and centroid of each face (corners (nface, 4), -1 padded).

    Centroid of a polygon: c = (1 / 6A) Σ (p_k + p_k+1) (x_k y_k+1 - x_k+1 y_k) (common practice).
    """
    k = np.arange(4)[None, :]
    nv = nvert[:, None]
    a = np.where(k < nv, corners, 0)
    b = np.take_along_axis(np.where(corners >= 0, corners, 0), (k + 1) % nv, axis=1)
    # Coordinates relative to the first corner, for round-off on large eastings.
    ox, oy = x[corners[:, 0]][:, None], y[corners[:, 0]][:, None]
    xa, ya, xb, yb = x[a] - ox, y[a] - oy, x[b] - ox, y[b] - oy
    cross = np.where(k < nv, xa * yb - xb * ya, 0.0)
    area = 0.5 * cross.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        cx = ((xa + xb) * cross).sum(axis=1) / (6.0 * area)
        cy = ((ya + yb) * cross).sum(axis=1) / (6.0 * area)
    return area, cx + ox[:, 0], cy + oy[:, 0]


def build_geometry(
    node_x: np.ndarray,
    node_y: np.ndarray,
    face_nodes: np.ndarray,
    *,
    where: str,
    crs_wkt: str | None = None,
    projection: str = "",
) -> MeshGeometry:
    """Check nodes and a 0-based face-node table (nface, 3 or 4; -1 for a missing fourth corner)
    and derive orientation, neighbours, boundary edges, areas and centroids.

    ``where`` names the file and variable for messages ("mesh file 'a.nc': variable 'faces'").
    Clockwise faces are turned counter-clockwise. InputError for corners past the node count,
    a face with fewer than 3 corners, repeated corners, zero area, a non-convex quadrilateral, an
    edge shared by more than two faces or by two faces running the same way (folded mesh).
    """
    x = np.ascontiguousarray(node_x, dtype=np.float64)
    y = np.ascontiguousarray(node_y, dtype=np.float64)
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise InputError(f"{where}: node coordinates have missing or non-finite values")
    table = np.asarray(face_nodes, dtype=np.int64)
    if table.ndim != 2 or table.shape[1] not in (3, 4):
        raise InputError(
            f"{where}: the face-node table has shape {table.shape}; faces of 3 or 4 corners "
            "(triangles and quadrilaterals) are handled"
        )
    corners = np.full((table.shape[0], 4), -1, dtype=np.int64)
    corners[:, : table.shape[1]] = table
    _check_corners(corners, x.size, where)
    # A missing corner followed by a given one: move the given ones forward.
    order = np.argsort(corners < 0, axis=1, kind="stable")
    corners = np.take_along_axis(corners, order, axis=1)
    nvert = np.sum(corners >= 0, axis=1).astype(np.int64)
    area, cx, cy = _signed_areas(x, y, corners, nvert)
    clockwise = area < 0.0
    if np.any(clockwise):
        tri = clockwise & (nvert == 3)
        quad = clockwise & (nvert == 4)
        corners[tri, :3] = corners[tri, 2::-1]
        corners[quad] = corners[quad, ::-1]
        area = np.abs(area)
    _check_shapes(x, y, corners, nvert, area, where)
    neighbours, boundary = _neighbours(corners, nvert, x.size, where)
    return MeshGeometry(
        node_x=x,
        node_y=y,
        face_nodes=np.ascontiguousarray(corners),
        nvert=nvert,
        neighbours=neighbours,
        area=area,
        centroid_x=cx,
        centroid_y=cy,
        boundary_edges=boundary,
        crs_wkt=crs_wkt,
        projection=projection,
    )


def _check_corners(corners: np.ndarray, nnode: int, where: str) -> None:
    past = corners >= nnode
    if np.any(past):
        f, k = (int(i[0]) for i in np.nonzero(past))
        raise InputError(
            f"{where}: face {f} names node {corners[f, k]} (0-based) but the mesh has {nnode} "
            "nodes (0 to {0}); check start_index (0 or 1) and the fill value of faces with fewer "
            "corners".format(nnode - 1)
        )
    negative = corners < -1
    if np.any(negative):
        f = int(np.nonzero(negative)[0][0])
        raise InputError(
            f"{where}: face {f} names a negative node ({corners[f].tolist()}, 0-based); a face "
            "with fewer corners marks the missing ones with the variable's _FillValue"
        )
    few = np.sum(corners >= 0, axis=1) < 3
    if np.any(few):
        f = int(np.nonzero(few)[0][0])
        raise InputError(f"{where}: face {f} has fewer than 3 corners ({corners[f].tolist()})")
    for i in range(4):
        for j in range(i + 1, 4):
            same = (corners[:, i] == corners[:, j]) & (corners[:, i] >= 0)
            if np.any(same):
                f = int(np.nonzero(same)[0][0])
                raise InputError(
                    f"{where}: face {f} repeats node {corners[f, i]} among its corners "
                    f"({corners[f].tolist()}, 0-based); each corner of a face must be a "
                    "different node"
                )


def _check_shapes(x, y, corners, nvert, area, where: str) -> None:
    span = max(float(np.ptp(x)), float(np.ptp(y)), 1.0)
    # Zero area to round-off of coordinates of this size (2^-40 of the span squared).
    flat = area <= span * span * 2.0**-40
    if np.any(flat):
        f = int(np.nonzero(flat)[0][0])
        raise InputError(
            f"{where}: face {f} (nodes {corners[f, : nvert[f]].tolist()}, 0-based) has zero "
            "area: its corners lie on one line or on one point; remove it or fix its nodes"
        )
    quads = np.nonzero(nvert == 4)[0]
    if quads.size:
        c = corners[quads]
        px, py = x[c], y[c]
        ex, ey = np.roll(px, -1, axis=1) - px, np.roll(py, -1, axis=1) - py
        turn = ex * np.roll(ey, -1, axis=1) - ey * np.roll(ex, -1, axis=1)
        bad = np.any(turn <= 0.0, axis=1)
        if np.any(bad):
            f = int(quads[np.nonzero(bad)[0][0]])
            raise InputError(
                f"{where}: quadrilateral {f} (nodes {corners[f].tolist()}, 0-based) is not "
                "convex (or has three corners on a line); split it into two triangles"
            )


def _neighbours(corners, nvert, nnode: int, where: str) -> tuple[np.ndarray, np.ndarray]:
    """The face across each edge, and the boundary edges, by sorting edge keys."""
    nface = corners.shape[0]
    k = np.arange(4)[None, :]
    present = k < nvert[:, None]
    a = corners
    b = np.take_along_axis(np.where(corners >= 0, corners, 0), (k + 1) % nvert[:, None], axis=1)
    faces = np.broadcast_to(np.arange(nface)[:, None], corners.shape)[present]
    ks = np.broadcast_to(k, corners.shape)[present]
    lo = np.minimum(a, b)[present]
    hi = np.maximum(a, b)[present]
    forward = (a < b)[present]
    key = lo * nnode + hi
    order = np.argsort(key, kind="stable")
    key, faces, ks, forward = key[order], faces[order], ks[order], forward[order]
    same_next = key[1:] == key[:-1]
    if np.any(same_next[1:] & same_next[:-1]):
        i = int(np.nonzero(same_next[1:] & same_next[:-1])[0][0])
        raise InputError(
            f"{where}: the edge between nodes {key[i] // nnode} and {key[i] % nnode} (0-based) is "
            "shared by more than two faces; faces must not overlap"
        )
    neighbours = np.full((nface, 4), -1, dtype=np.int64)
    pair = np.nonzero(same_next)[0]
    folded = forward[pair] == forward[pair + 1]
    if np.any(folded):
        i = int(pair[np.nonzero(folded)[0][0]])
        raise InputError(
            f"{where}: faces {faces[i]} and {faces[i + 1]} run the same way along their shared "
            "edge, so they overlap (a folded mesh); check their corners"
        )
    neighbours[faces[pair], ks[pair]] = faces[pair + 1]
    neighbours[faces[pair + 1], ks[pair + 1]] = faces[pair]
    paired = np.zeros(key.size, dtype=bool)
    paired[pair] = True
    paired[pair + 1] = True
    boundary = np.stack([faces[~paired], ks[~paired]], axis=1).astype(np.int64)
    boundary = boundary[np.lexsort((boundary[:, 1], boundary[:, 0]))]
    return neighbours, boundary
