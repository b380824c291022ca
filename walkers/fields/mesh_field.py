"""An unstructured-mesh flow as the run stage sees a flow: a :class:`FlowField` whose variables
are ``(frames, 1, n)`` arrays over the nodes or faces, and whose grid kind is :class:`MeshKind`.

The grid-kind contract (:mod:`walkers.fields.grids`) on a mesh: the engine works in the mesh's
metres, so ``to_engine`` and ``to_physical`` are the identity on a projected mesh, and the local
transverse Mercator of the reader on a lon/lat mesh (whose scenario then gives lon/lat); a point
is in the domain when a face holds it (``locate``; the engine's face walk does the same); the
edges are the mesh's named open boundaries (coast everywhere else); cell areas are face areas.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from walkers.fields.base import ColumnFields, FlowField, GriddedVariable, describe_column
from walkers.fields.mesh import NODE, MeshFlow, MeshVariable


@dataclass
class MeshKind:
    """The grid kind of a mesh (see the module docstring)."""

    flow: MeshFlow
    curvilinear: bool = False
    mesh: bool = True
    edge_names: tuple[str, ...] = field(init=False)

    def __post_init__(self) -> None:
        self.edge_names = tuple(self.flow.open_boundaries.names)

    @property
    def geometry(self):
        return self.flow.geometry

    @property
    def geographic(self) -> bool:
        """Whether the file's coordinates are longitude/latitude (the reader then put the nodes
        on a local transverse Mercator, ``geometry.crs_wkt``, for the engine)."""
        return bool(self.geometry.projection)

    def _transformer(self, inverse: bool):
        from pyproj import CRS, Transformer

        key = "_to_world" if inverse else "_to_local"
        if key not in self.__dict__:
            local = CRS.from_wkt(self.geometry.crs_wkt)
            world = CRS.from_epsg(4326)
            pair = (local, world) if inverse else (world, local)
            self.__dict__[key] = Transformer.from_crs(*pair, always_xy=True)
        return self.__dict__[key]

    def to_engine(self, x, y):
        """The scenario's coordinates (m, or lon/lat degrees for a lon/lat mesh) to the mesh's
        metres."""
        x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
        if not self.geographic:
            return x, y
        a, b = self._transformer(False).transform(x, y)
        return np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)

    def to_physical(self, a, b):
        """The mesh's metres to the scenario's coordinates."""
        a, b = np.asarray(a, dtype=np.float64), np.asarray(b, dtype=np.float64)
        if not self.geographic:
            return a, b
        x, y = self._transformer(True).transform(a, b)
        return np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)

    def locate(self, x, y) -> np.ndarray:
        """The face holding each point given in the scenario's coordinates (-1 outside the
        mesh): the faces around the nearest face centroids are tested (closed faces; the
        compiled face walk in the engine does the same in the step)."""
        g = self.geometry
        x, y = self.to_engine(np.atleast_1d(x), np.atleast_1d(y))
        out = np.full(x.shape, -1, dtype=np.int64)
        finite = np.isfinite(x) & np.isfinite(y)
        if g._tree is None:
            g.nearest_faces(g.centroid_x[:1], g.centroid_y[:1])
        k = min(16, g.nface)
        _, near = g._tree.query(np.column_stack([x[finite], y[finite]]), k=k)
        near = np.asarray(near).reshape(-1, k)
        found = np.full(near.shape[0], -1, dtype=np.int64)
        for c in range(k - 1, -1, -1):  # the nearest containing face wins
            faces = near[:, c]
            found = np.where(self._inside(faces, x[finite], y[finite]), faces, found)
        out[finite] = found
        for p in np.flatnonzero(finite & (out < 0)):  # far from the nearest centroids: all faces
            every = np.arange(g.nface)
            hit = np.flatnonzero(
                self._inside(every, np.full(g.nface, x[p]), np.full(g.nface, y[p]))
            )
            out[p] = hit[0] if hit.size else -1
        return out

    def _inside(self, faces: np.ndarray, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Whether each point lies in its (closed, counter-clockwise) face."""
        g = self.geometry
        inside = np.ones(faces.shape, dtype=bool)
        for k in range(4):
            a = g.face_nodes[faces, k]
            b = g.face_nodes[faces, (k + 1) % g.nvert[faces]]
            present = k < g.nvert[faces]
            side = (g.node_x[b] - g.node_x[a]) * (y - g.node_y[a]) - (g.node_y[b] - g.node_y[a]) * (
                x - g.node_x[a]
            )
            inside &= ~present | (side >= 0.0)
        return inside

    def cell_area(self) -> np.ndarray:
        return self.geometry.area

    def edge_bearings(self) -> tuple[float, ...]:
        """Compass bearing each open boundary faces, outward: the mean outward normal of its
        edges, weighted by their lengths."""
        g = self.geometry
        edge_open = self.flow.open_boundaries.edge_open
        out = []
        for b in range(len(self.edge_names)):
            faces, ks = np.nonzero(edge_open == b)
            a, c = g.edge_nodes(faces, ks)
            dx, dy = g.node_x[c] - g.node_x[a], g.node_y[c] - g.node_y[a]
            # counter-clockwise faces: the outward normal of edge a→c is (dy, -dx)
            out.append(float(np.degrees(np.arctan2(dy.sum(), -dx.sum())) % 360.0))
        return tuple(out)

    def describe(self) -> str:
        g = self.geometry
        tri = int(np.sum(g.face_nodes[:, 3] < 0))
        return (
            f"unstructured mesh, {g.nnode} nodes, {g.nface} faces ({tri} triangles, "
            f"{g.nface - tri} quadrilaterals), open boundaries: "
            + (", ".join(self.edge_names) if self.edge_names else "none")
        )


def _variable(var: MeshVariable, units: str) -> GriddedVariable:
    n = var.data.shape[1]
    data = np.ascontiguousarray(np.asarray(var.data, dtype=np.float64)[:, None, :])
    return GriddedVariable(np.arange(n, dtype=np.float64), np.array([0.0]), data, var.name, units)


def mesh_field(flow: MeshFlow) -> FlowField:
    """The mesh flow as a :class:`FlowField` for the run stage (variables over nodes or faces as
    ``(frames, 1, n)``; ``grid`` its :class:`MeshKind`; ``attrs["mesh"]`` the mesh flow; a
    layered velocity kept for a three-dimensional run as its ``column``, ``(frames, levels, 1,
    n)``, described in ``attrs["column"]``)."""
    wet = np.asarray(flow.wet, dtype=np.float64)[:, None, :]
    kind = MeshKind(flow)
    crs = flow.geometry.crs_wkt
    if kind.geographic:
        from pyproj import CRS

        crs = CRS.from_epsg(4326).to_wkt()  # the scenario's and the results' coordinates
    faces = np.arange(flow.geometry.nface, dtype=np.float64)
    attrs = dict(flow.attrs)
    attrs["mesh"] = flow
    attrs["locations"] = {"u": flow.u.location, "depth": flow.depth.location}
    column = None
    if flow.layers is not None:
        lay = flow.layers
        attrs["column"] = describe_column(
            lay.levels,
            None if lay.w is None or lay.w_levels is None else (lay.w.name, lay.w_levels.size),
            None if lay.kz is None or lay.kz_levels is None else (lay.kz.name, lay.kz_levels.size),
            " on the faces",
        )
        column = ColumnFields(
            lay.levels,
            _layered(lay.u, "m s-1"),
            _layered(lay.v, "m s-1"),
            lay.w_levels,
            None if lay.w is None else _layered(lay.w, "m s-1"),
            lay.kz_levels,
            None if lay.kz is None else _layered(lay.kz, "m2 s-1"),
            describe=attrs["column"],
        )
    return FlowField(
        u=_variable(flow.u, "m s-1"),
        v=_variable(flow.v, "m s-1"),
        depth=_variable(flow.depth, "m"),
        wet=GriddedVariable(faces, np.array([0.0]), wet, "wet", "1"),
        times=np.asarray(flow.times, dtype=np.float64),
        time_units=flow.time_units,
        calendar=flow.calendar,
        geographic=kind.geographic,
        crs_wkt=crs,
        ndim=2,
        source=flow.source,
        attrs=attrs,
        grid=kind,
        column=column,
    )


def _layered(var: MeshVariable, units: str) -> GriddedVariable:
    """Layered (frames, nl, n) mesh values as a column variable (frames, nl, 1, n) in ``units``."""
    n = var.data.shape[-1]
    data = np.ascontiguousarray(np.asarray(var.data, dtype=np.float64)[:, :, None, :])
    return GriddedVariable(np.arange(n, dtype=np.float64), np.array([0.0]), data, var.name, units)


def is_mesh_flow(flow: FlowField) -> bool:
    """Whether a flow is on an unstructured mesh (its grid kind a :class:`MeshKind`)."""
    return bool(getattr(flow.kind(), "mesh", False))


def node_depth_location(flow: FlowField) -> bool:
    """Whether a mesh flow's depth is given on the nodes (else on the faces)."""
    return flow.attrs.get("locations", {}).get("depth") == NODE
