"""Look at a flow field before a run: a plain-text report and a speed map.

``describe_flow`` tells what the reader made of a file (grid, CRS, times, the variable behind each
role, land and dry cells, speeds) and the largest time step that the engine's time-step check
(``walkers.engine.timestep``) accepts: each velocity component and √(2K dt) under the cell width
along its own axis. ``draw_speed_map`` draws the speed of one frame with land and dry cells in
grey. A front end: it reads the fields stage and asks the engine's check.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np
from scipy.interpolate import interp1d

from walkers import CAUTION
from walkers.engine.timestep import check_time_step
from walkers.errors import InputError
from walkers.fields.base import FlowField, GriddedVariable
from walkers.fields.geo import cell_sizes
from walkers.fields.mesh import MeshFlow
from walkers.fields.netcdf.open import open_flow
from walkers.fields.times import _seconds_iso, flow_time_iso
from walkers.scenario.config import Dispersion, Transport

_CHUNK = 24  # frames read at a time when scanning a whole file


def _on_centres(var: GriddedVariable, block: np.ndarray, cx: np.ndarray, cy: np.ndarray):
    """Linear interpolation of a (nf, ny_v, nx_v) block from its own points to the cell centres.

    Outside the variable's points the nearest end value is used (staggered edges).
    """
    out = block
    if var.x.size > 1 and not (var.x.size == cx.size and np.allclose(var.x, cx)):
        out = interp1d(var.x, out, axis=2)(np.clip(cx, var.x[0], var.x[-1]))
    if var.y.size > 1 and not (var.y.size == cy.size and np.allclose(var.y, cy)):
        out = interp1d(var.y, out, axis=1)(np.clip(cy, var.y[0], var.y[-1]))
    return out


def frame_speed(flow: FlowField, i0: int, i1: int) -> tuple[np.ndarray, np.ndarray]:
    """Speed (m s-1) at the cell centres and the wet mask for frames i0..i1, each (nf, ny, nx)."""
    cx, cy = flow.x, flow.y
    u = _on_centres(flow.u, flow.u.frames(i0, i1), cx, cy)
    v = _on_centres(flow.v, flow.v.frames(i0, i1), cx, cy)
    wet = flow.wet.frames(i0, i1) > 0.5
    if flow.curvilinear:
        # index-space components back to metres per second: u = J ũ
        jac = flow.grid.jacobian
        u, v = (
            jac[..., 0, 0] * u + jac[..., 0, 1] * v,
            jac[..., 1, 0] * u + jac[..., 1, 1] * v,
        )
    speed = np.hypot(u, v)
    nf = max(speed.shape[0], wet.shape[0])
    shape = (nf, cy.size, cx.size)
    return np.broadcast_to(speed, shape), np.broadcast_to(wet, shape)


def _iso_duration(seconds: float) -> str:
    """ISO 8601 duration (e.g. PT1H30M) of a number of seconds."""
    s = round(float(seconds), 3)
    days, rest = divmod(s, 86400.0)
    hours, rest = divmod(rest, 3600.0)
    minutes, secs = divmod(rest, 60.0)
    out = "P" + (f"{int(days)}D" if days else "")
    clock = (
        (f"{int(hours)}H" if hours else "")
        + (f"{int(minutes)}M" if minutes else "")
        + (f"{secs:.10g}S" if secs else "")
    )
    if clock:
        out += "T" + clock
    return out if out != "P" else "PT0S"


def _crs_text(flow: FlowField) -> str:
    if not flow.crs_wkt:
        return "none stated (local grid in metres)"
    from pyproj import CRS

    crs = CRS.from_wkt(flow.crs_wkt)
    code = crs.to_epsg()
    return f"{crs.name}" + (f" (EPSG:{code})" if code else "")


def describe_flow(
    path_or_flow: str | os.PathLike | FlowField | list,
    *,
    dispersion: float = 1.0,
    dt: float | None = None,
    **open_options: Any,
) -> str:
    """A plain-text report of a flow field.

    Parameters
    ----------
    path_or_flow : flow file(s) (opened with :func:`walkers.fields.netcdf.open_flow` and
        ``open_options``) or an open :class:`FlowField`.
    dispersion : dispersion coefficient K (m2 s-1) for the time-step advice.
    dt : a time step (s) to check against the advice, or None.
    """
    flow = (
        path_or_flow
        if isinstance(path_or_flow, FlowField)
        else open_for_inspection(path_or_flow, **open_options)
    )
    lines = [f"Flow field: {flow.source}"]
    _describe_grid(flow, lines)
    _describe_times(flow, lines)
    roles = flow.attrs.get("roles", {})
    file_units = flow.attrs.get("file_units", {})
    if roles:
        lines.append("  variables:")
        for role, name in roles.items():
            fu = file_units.get(role, "")
            lines.append(f"    {role:<12} {name}" + (f"  [{fu}]" if fu else ""))
        if flow.attrs.get("constant_depth") is not None:
            lines.append(f"    depth        constant {flow.attrs['constant_depth']:.10g}")
        if "vertical" in flow.attrs:
            lines.append(f"  layers: {flow.attrs['vertical']}")

    _describe_water(flow, lines)
    advice = Transport(dt=dt or 1.0, dispersion=Dispersion(k1=dispersion, k2=dispersion))
    report = check_time_step(flow, advice, float(flow.times[0]), float(flow.times[-1]))
    lines.append(
        f"  largest stable time step: {report.longest_step():.4g} s for K = {dispersion:.10g} "
        "m2 s-1 (|u| dt, |v| dt and sqrt(2 K dt) each under the cell width along their axis)"
    )
    if dt is not None:
        verdict = "fits" if report.ok else "is too long: shorten it or sub-step"
        lines.append(
            f"  time step {dt:.10g} s {verdict} (velocity {report.advection_ratio:.3g} cells, "
            f"sqrt(2 K dt) {report.dispersion_ratio:.3g} cells)"
        )
    _describe_missing(flow, lines)
    lines.append(f"  Caution: {CAUTION}")
    return "\n".join(lines)


#: The report's word for a flow opened without the water depth it lacks (see open_for_inspection).
NO_DEPTH = "no_depth"


def open_for_inspection(paths: Any, **open_options: Any) -> FlowField:
    """Open flow file(s) to describe them, also when they hold no water depth.

    A file the reader accepts is opened as a run opens it. One that it refuses only for want of
    a water depth is opened with a stand-in depth of 1 m (wet cells then follow the velocities'
    fill values) and marked ``attrs[NO_DEPTH]``, so the report can say what a run needs; the
    stand-in is not reported. Any other refusal is raised.
    """
    try:
        return open_flow(paths, **open_options)
    except InputError as refusal:
        if open_options.get("constant_depth") is not None:
            raise
        try:
            flow = open_flow(paths, **{**open_options, "constant_depth": 1.0})
        except InputError:
            raise refusal from None
    flow.attrs["constant_depth"] = None
    flow.attrs[NO_DEPTH] = True
    return flow


def _describe_missing(flow: FlowField, lines: list[str]) -> None:
    """Report lines on what a run needs that the file does not give, and the keys that give it."""
    missing = []
    if flow.attrs.get(NO_DEPTH):
        missing.append(
            "water depth: none found (land and dry cells above are where the velocities are "
            'missing); a run needs [flow] depth = "<depth> m" (a constant depth; in 1-D the '
            "cross-section in m2), or the depth variable named in [flow.variables] depth (or "
            "water_level with bed_level)"
        )
    if not flow.crs_wkt and not flow.geographic:
        missing.append(
            'coordinate reference system: none stated; [flow] crs = "EPSG:<code>" places the '
            "grid on Earth (a run in local metres works without it)"
        )
    if flow.steady:
        missing.append(
            "time: one frame, taken as a steady flow valid at every time; a flow that changes "
            "needs frames along a CF time axis (units such as 'seconds since <ISO 8601 time>')"
        )
    if missing:
        lines.append("  missing for a run:")
        lines += [f"    {item}" for item in missing]


def _describe_curvilinear(flow: FlowField, lines: list[str]) -> None:
    """Report lines on a curvilinear grid: cells, their sides, extent, edges and how the
    velocity components are read."""
    from walkers.fields.grids import compass

    grid = flow.grid
    unit = "degrees" if flow.geographic else "m"
    lines.append(f"  grid: {grid.describe()}")
    jac = grid.jacobian
    for axis, name in ((0, "i"), (1, "j")):
        side = np.hypot(jac[..., 0, axis], jac[..., 1, axis])
        lines.append(f"  cell side along {name}: {side.min():.4g} to {side.max():.4g} m")
    lines.append(
        f"  extent: x {grid.corner_x.min():.10g} to {grid.corner_x.max():.10g}, "
        f"y {grid.corner_y.min():.10g} to {grid.corner_y.max():.10g} {unit}"
    )
    faces = ", ".join(
        f"{n} faces {compass(b)}"
        for n, b in zip(grid.edge_names, grid.edge_bearings(), strict=True)
    )
    lines.append(f"  edges (named by grid index in [edges]): {faces}")
    lines.append(f"  velocity components: {flow.attrs.get('velocity_components', 'index space')}")
    lines.append(f"  CRS: {_crs_text(flow)}")


def _describe_grid(flow: FlowField, lines: list[str]) -> None:
    """Report lines on the grid: size, spacing, extent and CRS; returns the cell widths (m)."""
    if flow.curvilinear:
        _describe_curvilinear(flow, lines)
        return
    unit = "degrees" if flow.geographic else "m"
    nx, ny = flow.x.size, flow.y.size
    lines.append(
        f"  grid: {nx} x {ny} cells (x by y), {'1-D channel' if flow.ndim == 1 else '2-D'}, "
        f"{'geographic (longitude/latitude)' if flow.geographic else 'projected'}"
    )
    wx, wy = cell_sizes(flow.x, flow.y, geographic=flow.geographic)
    dxg = np.diff(flow.cell_edges()[0])
    lines.append(f"  spacing x: {dxg.min():.10g} to {dxg.max():.10g} {unit}")
    if flow.ndim == 2:
        dyg = np.diff(flow.cell_edges()[1])
        lines.append(f"  spacing y: {dyg.min():.10g} to {dyg.max():.10g} {unit}")
    if flow.geographic:
        lines.append(
            f"  cell size: {np.nanmin(wx):.1f} to {np.nanmax(wx):.1f} m along x, "
            f"{np.nanmin(wy):.1f} to {np.nanmax(wy):.1f} m along y"
        )
    west, east, south, north = flow.extent()
    lines.append(f"  extent: x {west:.10g} to {east:.10g}, y {south:.10g} to {north:.10g} {unit}")
    lines.append(f"  CRS: {_crs_text(flow)}")


def _describe_times(flow: FlowField, lines: list[str]) -> None:
    """Report lines on the frames: first and last time, interval, calendar."""
    nt = flow.times.size
    if flow.steady:
        lines.append("  time: steady (one frame)")
    else:
        steps = np.diff(flow.times)
        step = (
            _iso_duration(steps[0])
            if np.allclose(steps, steps[0])
            else f"{_iso_duration(steps.min())} to {_iso_duration(steps.max())}"
        )
        lines.append(
            f"  time: {flow_time_iso(flow, flow.times[0])} to "
            f"{flow_time_iso(flow, flow.times[-1])}, {nt} frames every {step} "
            f"(calendar {flow.calendar})"
        )


def _describe_water(flow: FlowField, lines: list[str]) -> None:
    """Report lines on land or dry cells and speeds over all frames."""
    nt = flow.times.size
    dry_min, dry_max, vmin, vmax = 1.0, 0.0, np.inf, 0.0
    for i0 in range(0, nt, _CHUNK):
        i1 = min(i0 + _CHUNK - 1, nt - 1)
        speed, wet = frame_speed(flow, i0, i1)
        dry = 1.0 - wet.reshape(wet.shape[0], -1).mean(axis=1)
        dry_min, dry_max = min(dry_min, dry.min()), max(dry_max, dry.max())
        if np.any(wet):
            vmin, vmax = min(vmin, float(speed[wet].min())), max(vmax, float(speed[wet].max()))
    lines.append(
        f"  land or dry cells: {100 * dry_min:.1f} % to {100 * dry_max:.1f} % of the grid "
        "(min and max over frames)"
    )
    lines.append(f"  speed in water: {vmin:.4g} to {vmax:.4g} m s-1")


def draw_speed_map(flow: FlowField, png_path: str | os.PathLike, frame: int = 0) -> None:
    """Draw the speed (m s-1) of one frame to a PNG, land and dry cells in grey."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    nt = flow.times.size
    k = min(max(int(frame), 0), nt - 1)
    speed, wet = frame_speed(flow, k, k)
    fig = Figure(figsize=(8, 6) if flow.ndim == 2 else (8, 4), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    when = "steady" if flow.steady else flow_time_iso(flow, flow.times[k])
    if flow.ndim == 1:
        s = np.where(wet[0, 0], speed[0, 0], np.nan)
        ax.plot(flow.x, s, color="tab:blue")
        ax.set_xlabel("distance along the channel (m)")
        ax.set_ylabel("speed (m s-1)")
    else:
        import matplotlib

        xe, ye = flow.cell_edges()
        if flow.curvilinear:
            xe, ye = flow.grid.corner_x, flow.grid.corner_y  # the cells as they lie in the world
        data = np.ma.masked_where(~wet[0], speed[0])
        cmap = matplotlib.colormaps["viridis"].with_extremes(bad="0.7")
        mesh = ax.pcolormesh(xe, ye, data, cmap=cmap, shading="flat")
        if flow.curvilinear:
            for k in range(0, xe.shape[0], 5):
                ax.plot(xe[k], ye[k], color="0.2", lw=0.3)
            for k in range(0, xe.shape[1], 5):
                ax.plot(xe[:, k], ye[:, k], color="0.2", lw=0.3)
        fig.colorbar(mesh, ax=ax, label="speed (m s-1)")
        if flow.geographic:
            ax.set_xlabel("longitude (degrees east)")
            ax.set_ylabel("latitude (degrees north)")
            ax.set_aspect(1.0 / np.cos(np.radians(0.5 * (np.min(ye) + np.max(ye)))))
        else:
            ax.set_xlabel("x (m)")
            ax.set_ylabel("y (m)")
            ax.set_aspect("equal")
    lines_note = "\nthin lines: every fifth grid line" if flow.curvilinear else ""
    ax.set_title(f"Flow speed, {when} (grey: land or dry){lines_note}", fontsize=10)
    fig.text(0.01, 0.01, CAUTION, fontsize=6, wrap=True, va="bottom")
    fig.subplots_adjust(bottom=0.18)
    fig.savefig(os.fspath(png_path))


# ----------------------------------------------------------------------------------------------
# Unstructured meshes (UGRID)
# ----------------------------------------------------------------------------------------------


def mesh_face_speed(flow: MeshFlow) -> np.ndarray:
    """Speed (m s-1) per frame and face, (nt, nface); node velocities averaged over each face's
    corners."""
    g = flow.geometry
    u = flow.u.data if flow.u.location == "face" else g.face_mean_of_nodes(flow.u.data)
    v = flow.v.data if flow.v.location == "face" else g.face_mean_of_nodes(flow.v.data)
    return np.hypot(u, v)


def describe_mesh(flow: MeshFlow, *, dispersion: float = 1.0, dt: float | None = None) -> str:
    """A plain-text report of a flow on a mesh: nodes, faces, smallest and largest face, open
    boundaries, times, variables, wet faces, speeds and the time-step advice (each face's speed
    times dt and sqrt(2 K dt) under its size: the engine's check,
    :func:`walkers.engine.timestep.face_sizes`)."""
    g = flow.geometry
    tri = int(np.sum(g.nvert == 3))
    lines = [f"Mesh flow: {flow.source}"]
    lines.append(
        f"  mesh: {flow.attrs.get('mesh', '')!r} (UGRID 1.0): {g.nnode} nodes, {g.nface} faces "
        f"({tri} triangles, {g.nface - tri} quadrilaterals)"
    )
    small, large = int(np.argmin(g.area)), int(np.argmax(g.area))
    for word, f in (("smallest", small), ("largest", large)):
        lines.append(
            f"  {word} face: {g.area[f]:.4g} m2 (face {f}, centre x {g.centroid_x[f]:.10g}, "
            f"y {g.centroid_y[f]:.10g} m)"
        )
    lines.append(
        f"  extent: x {g.node_x.min():.10g} to {g.node_x.max():.10g}, y {g.node_y.min():.10g} "
        f"to {g.node_y.max():.10g} m"
    )
    crs = "none stated (local metres)"
    if g.crs_wkt:
        from pyproj import CRS

        parsed = CRS.from_wkt(g.crs_wkt)
        code = parsed.to_epsg()
        crs = parsed.name + (f" (EPSG:{code})" if code else "")
    lines.append(f"  CRS: {crs}" + (f"; {g.projection}" if g.projection else ""))
    bounds = flow.open_boundaries
    nb = g.boundary_edges.shape[0]
    n_open = int(np.sum(bounds.edge_open >= 0))
    lines.append(f"  boundary: {nb} edges, {n_open} open, {nb - n_open} coast")
    lengths = g.edge_lengths()
    for k, name in enumerate(bounds.names):
        lines.append(
            f"    open boundary {name}: {bounds.edge_count(name)} edges, "
            f"{lengths[bounds.edge_open == k].sum():.6g} m"
        )
    if flow.steady:
        lines.append("  time: steady (one frame)")
    else:
        lines.append(
            f"  time: {_seconds_iso(flow.times[0], flow.time_units, flow.calendar)} to "
            f"{_seconds_iso(flow.times[-1], flow.time_units, flow.calendar)}, "
            f"{flow.times.size} frames"
        )
    lines.append("  variables:")
    for role, var in (("u", flow.u), ("v", flow.v), ("depth", flow.depth)):
        lines.append(f"    {role:<12} {var.name} (on {var.location}s)")
    if "vertical" in flow.attrs:
        lines.append(f"  layers: {flow.attrs['vertical']}")
    wet = flow.wet.astype(bool)
    dry = 1.0 - wet.mean(axis=1)
    lines.append(
        f"  dry faces: {100 * dry.min():.1f} % to {100 * dry.max():.1f} % (min and max over frames)"
    )
    speed = mesh_face_speed(flow)
    both = np.broadcast_to(wet, np.broadcast_shapes(wet.shape, speed.shape))
    speed = np.broadcast_to(speed, both.shape)
    top = speed[both].max() if np.any(both) else 0.0
    lines.append(
        f"  speed in water: {speed[both].min() if np.any(both) else 0.0:.4g} to {top:.4g} m s-1"
    )
    from walkers.fields.mesh_field import mesh_field

    advice = Transport(dt=dt or 1.0, dispersion=Dispersion(k1=dispersion, k2=dispersion))
    report = check_time_step(mesh_field(flow), advice, float(flow.times[0]), float(flow.times[-1]))
    lines.append(
        f"  largest stable time step: {report.longest_step():.4g} s for K = {dispersion:.10g} "
        "m2 s-1 (|u| dt and sqrt(2 K dt) under each face's size 4 A / P)"
    )
    if dt is not None:
        lines.append(f"  time step {dt:.10g} s " + ("fits" if report.ok else "is too long"))
    lines.append(f"  Caution: {CAUTION}")
    return "\n".join(lines)


def draw_mesh_map(flow: MeshFlow, png_path: str | os.PathLike, frame: int = 0) -> None:
    """Draw the mesh to a PNG: faces coloured by speed (dry faces grey), the coast in black and
    each open boundary in its own colour, named in the legend."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.collections import LineCollection, PolyCollection
    from matplotlib.figure import Figure

    g = flow.geometry
    k = min(max(int(frame), 0), flow.times.size - 1)
    speed = mesh_face_speed(flow)
    speed = speed[min(k, speed.shape[0] - 1)]
    wet = flow.wet[min(k, flow.wet.shape[0] - 1)].astype(bool)
    polys = [np.column_stack([g.node_x[c[c >= 0]], g.node_y[c[c >= 0]]]) for c in g.face_nodes]
    fig = Figure(figsize=(8, 6), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    import matplotlib

    cmap = matplotlib.colormaps["viridis"].with_extremes(bad="0.7")
    faces = PolyCollection(polys, cmap=cmap, edgecolors="0.35", linewidths=0.3)
    faces.set_array(np.ma.masked_where(~wet, speed))
    ax.add_collection(faces)
    fig.colorbar(faces, ax=ax, label="speed (m s-1)")
    pairs = g.boundary_node_pairs()
    opened = flow.open_boundaries.edge_open[g.boundary_edges[:, 0], g.boundary_edges[:, 1]]
    segments = np.stack(
        [np.column_stack([g.node_x[pairs[:, i]], g.node_y[pairs[:, i]]]) for i in (0, 1)], axis=1
    )
    ax.add_collection(
        LineCollection(segments[opened < 0], colors="black", linewidths=1.5, label="coast")
    )
    colours = matplotlib.colormaps["tab10"]
    for i, name in enumerate(flow.open_boundaries.names):
        ax.add_collection(
            LineCollection(
                segments[opened == i],
                colors=[colours(i % 10)],
                linewidths=3.0,
                label=f"open: {name}",
            )
        )
    ax.autoscale_view()
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.set_aspect("equal")
    ax.set_xlabel("x (m)")
    ax.set_ylabel("y (m)")
    ax.legend(loc="upper right", fontsize=8)
    when = "steady" if flow.steady else _seconds_iso(flow.times[k], flow.time_units, flow.calendar)
    ax.set_title(f"Mesh and flow speed, {when} (grey: dry)")
    fig.text(0.01, 0.01, CAUTION, fontsize=6, wrap=True, va="bottom")
    fig.subplots_adjust(bottom=0.18)
    fig.savefig(os.fspath(png_path))
