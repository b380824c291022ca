"""Named open boundaries of a mesh: which mesh-boundary edges let particles leave.

Every mesh-boundary edge is coast (reflecting) unless an open boundary marks it. A boundary is
marked by a list of nodes along the mesh boundary, by a polyline (points in the mesh's metres,
with a tolerance), or by the model's own boundary edges (UGRID ``boundary_node_connectivity``
with a boundary-type variable; read in :mod:`walkers.fields.netcdf.ugrid`). The engine sees one
array, ``edge_open`` (nface, 4): the index of the open boundary an edge belongs to, or -1.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from walkers.errors import InputError
from walkers.fields.mesh import MeshGeometry


@dataclass(frozen=True)
class OpenBoundaries:
    """Named open boundaries: ``edge_open[f, k]`` is the index in ``names`` of the boundary that
    edge k of face f belongs to, or -1 (an interior edge or coast)."""

    names: tuple[str, ...]
    edge_open: np.ndarray

    def edge_count(self, name: str) -> int:
        """Number of mesh edges of the named boundary."""
        return int(np.sum(self.edge_open == self.names.index(name)))


def coast_only(geometry: MeshGeometry) -> OpenBoundaries:
    """No open boundary: every mesh-boundary edge is coast."""
    return OpenBoundaries((), np.full((geometry.nface, 4), -1, dtype=np.int64))


def _with(
    geometry: MeshGeometry, bounds: OpenBoundaries, name: str, rows: np.ndarray, where: str
) -> OpenBoundaries:
    """``bounds`` with the boundary edges ``rows`` (indices into geometry.boundary_edges) named
    ``name``."""
    if name in bounds.names:
        raise InputError(f"{where}: open boundary {name!r} is named twice; give each a new name")
    faces, ks = geometry.boundary_edges[rows, 0], geometry.boundary_edges[rows, 1]
    taken = bounds.edge_open[faces, ks] >= 0
    if np.any(taken):
        other = bounds.names[int(bounds.edge_open[faces[taken][0], ks[taken][0]])]
        a, b = geometry.edge_nodes(faces[taken][:1], ks[taken][:1])
        raise InputError(
            f"{where}: open boundary {name!r} takes the edge between nodes {int(a[0])} and "
            f"{int(b[0])}, which already belongs to open boundary {other!r}; boundaries must not "
            "overlap"
        )
    edge_open = bounds.edge_open.copy()
    edge_open[faces, ks] = len(bounds.names)
    return OpenBoundaries(bounds.names + (name,), edge_open)


def _boundary_rows(geometry: MeshGeometry, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row in boundary_edges of the edge between nodes a[i] and b[i] (either order), -1 if that
    is no mesh-boundary edge."""
    pairs = geometry.boundary_node_pairs()
    n = geometry.nnode
    keys = np.minimum(pairs[:, 0], pairs[:, 1]) * n + np.maximum(pairs[:, 0], pairs[:, 1])
    order = np.argsort(keys)
    wanted = np.minimum(a, b) * n + np.maximum(a, b)
    pos = np.clip(np.searchsorted(keys[order], wanted), 0, keys.size - 1)
    found = keys[order][pos] == wanted
    return np.where(found, order[pos], -1)


def mark_node_pairs(
    geometry: MeshGeometry,
    bounds: OpenBoundaries,
    name: str,
    pairs: np.ndarray,
    *,
    where: str,
) -> OpenBoundaries:
    """Open boundary ``name`` made of the edges between node pairs (n, 2), 0-based.
    InputError naming the first pair that is not a mesh-boundary edge."""
    pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
    if pairs.size == 0:
        raise InputError(f"{where}: open boundary {name!r} has no edges")
    out = (pairs < 0) | (pairs >= geometry.nnode)
    if np.any(out):
        i = int(np.nonzero(out.any(axis=1))[0][0])
        raise InputError(
            f"{where}: open boundary {name!r} names node {pairs[i].tolist()} (0-based) but the "
            f"mesh has {geometry.nnode} nodes"
        )
    rows = _boundary_rows(geometry, pairs[:, 0], pairs[:, 1])
    if np.any(rows < 0):
        i = int(np.nonzero(rows < 0)[0][0])
        raise InputError(
            f"{where}: open boundary {name!r} does not lie on the mesh boundary: nodes "
            f"{int(pairs[i, 0])} and {int(pairs[i, 1])} (0-based) are not joined by an edge of the "
            "mesh boundary; list nodes that follow the mesh boundary, neighbour after neighbour"
        )
    return _with(geometry, bounds, name, np.unique(rows), where)


def mark_nodes(
    geometry: MeshGeometry,
    bounds: OpenBoundaries,
    name: str,
    nodes: np.ndarray,
    *,
    where: str,
) -> OpenBoundaries:
    """Open boundary ``name`` along a list of nodes (0-based) that follow the mesh boundary,
    neighbour after neighbour: each consecutive pair must be joined by a mesh-boundary edge."""
    nodes = np.asarray(nodes, dtype=np.int64).ravel()
    if nodes.size < 2:
        raise InputError(
            f"{where}: open boundary {name!r} lists {nodes.size} node(s); give at least two "
            "neighbouring nodes of the mesh boundary"
        )
    return mark_node_pairs(
        geometry, bounds, name, np.stack([nodes[:-1], nodes[1:]], axis=1), where=where
    )


def distance_to_segments(
    px: np.ndarray, py: np.ndarray, a: np.ndarray, b: np.ndarray
) -> np.ndarray:
    """Distance (m) from each point to the nearest of the segments a[i]-b[i] ((n, 2) each)."""
    ax, ay = a[:, 0][None, :], a[:, 1][None, :]
    dx, dy = b[:, 0][None, :] - ax, b[:, 1][None, :] - ay
    px, py = np.ravel(px)[:, None], np.ravel(py)[:, None]
    length2 = dx * dx + dy * dy
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(length2 > 0.0, ((px - ax) * dx + (py - ay) * dy) / length2, 0.0)
    t = np.clip(t, 0.0, 1.0)
    return np.min(np.hypot(px - ax - t * dx, py - ay - t * dy), axis=1)


def distance_to_polyline(px: np.ndarray, py: np.ndarray, line: np.ndarray) -> np.ndarray:
    """Distance (m) from each point to a polyline (n, 2) of at least two points."""
    return distance_to_segments(px, py, line[:-1], line[1:])


def mark_polyline(
    geometry: MeshGeometry,
    bounds: OpenBoundaries,
    name: str,
    points: np.ndarray,
    tolerance: float,
    *,
    where: str,
) -> OpenBoundaries:
    """Open boundary ``name``: the mesh-boundary edges whose two ends and midpoint lie within
    ``tolerance`` (m) of the polyline ``points`` (n >= 2, m in the mesh's CRS).

    InputError when a point of the polyline is farther than ``tolerance`` from the mesh
    boundary, or when no boundary edge lies along it.
    """
    line = np.asarray(points, dtype=np.float64)
    if line.ndim != 2 or line.shape[0] < 2 or line.shape[1] != 2:
        raise InputError(
            f"{where}: open boundary {name!r} needs a polyline of at least two [x, y] points; "
            f"got shape {line.shape}"
        )
    if not (np.isfinite(tolerance) and tolerance > 0.0):
        raise InputError(f"{where}: tolerance {tolerance!r} m must be a number > 0")
    pairs = geometry.boundary_node_pairs()
    x, y = geometry.node_x, geometry.node_y
    # Each polyline point must lie on the mesh boundary (within the tolerance).
    starts = np.column_stack([x[pairs[:, 0]], y[pairs[:, 0]]])
    ends_ = np.column_stack([x[pairs[:, 1]], y[pairs[:, 1]]])
    gaps = distance_to_segments(line[:, 0], line[:, 1], starts, ends_)
    for (px, py), gap in zip(line, gaps, strict=True):
        if gap > tolerance:
            raise InputError(
                f"{where}: open boundary {name!r} does not lie on the mesh boundary: its point "
                f"({px:.10g}, {py:.10g}) is {gap:.4g} m from the nearest mesh-boundary edge, more "
                f"than the tolerance {tolerance:.4g} m; move the point onto the mesh boundary or "
                "widen the tolerance"
            )
    ends = [
        distance_to_polyline(x[pairs[:, 0]], y[pairs[:, 0]], line),
        distance_to_polyline(x[pairs[:, 1]], y[pairs[:, 1]], line),
        distance_to_polyline(
            0.5 * (x[pairs[:, 0]] + x[pairs[:, 1]]), 0.5 * (y[pairs[:, 0]] + y[pairs[:, 1]]), line
        ),
    ]
    rows = np.nonzero(np.logical_and.reduce([d <= tolerance for d in ends]))[0]
    if rows.size == 0:
        raise InputError(
            f"{where}: open boundary {name!r} does not lie on the mesh boundary: no mesh-boundary "
            f"edge lies within {tolerance:.4g} m of its polyline along its whole length; follow "
            "the mesh boundary between two of its nodes"
        )
    return _with(geometry, bounds, name, rows, where)
